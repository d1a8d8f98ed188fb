"""deploy/mosquitto/add-gateway: one broker user per gateway, named "<site>/<gateway>"."""

from __future__ import annotations

import stat
import subprocess
import time
from pathlib import Path

import pytest
from pydantic import TypeAdapter, ValidationError

from shared_schema.messages import Identifier
from shared_schema.topics import indicators_topic
from tests.deploy.broker_harness import DEPLOY, MOSQUITTO_PASSWD, Broker, Probe, add_gateway

SCRIPT = DEPLOY / "mosquitto" / "add-gateway"

pytestmark = pytest.mark.skipif(not MOSQUITTO_PASSWD.exists(), reason="mosquitto_passwd missing")


def run(*args: str, stdin: str | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [str(SCRIPT), *args], input=stdin, capture_output=True, text=True, check=False
    )


def test_creates_the_password_file_and_prints_the_credentials_once(tmp_path: Path) -> None:
    password_file = tmp_path / "wellspan.passwd"
    done = run("--password-file", str(password_file), "saltbush-flats", "gw-coolibah")
    assert done.returncode == 0, done.stderr
    printed = dict(line.split(" ", 1) for line in done.stdout.splitlines())
    assert printed["username"] == "saltbush-flats/gw-coolibah"
    password = printed["password"]
    assert len(password) == 32 and password.isalnum()

    mode = stat.S_IMODE(password_file.stat().st_mode)
    assert mode & 0o007 == 0, f"password file readable by others: {oct(mode)}"
    text = password_file.read_text()
    assert text.startswith("saltbush-flats/gw-coolibah:")
    assert password not in text  # stored as a hash only


def test_two_gateways_get_different_passwords(tmp_path: Path) -> None:
    password_file = tmp_path / "p"
    _, first = add_gateway(password_file, "saltbush-flats", "gw-gibber")
    _, second = add_gateway(password_file, "saltbush-flats", "gw-spinifex")
    assert first != second
    assert [line.split(":")[0] for line in password_file.read_text().splitlines()] == [
        "saltbush-flats/gw-gibber",
        "saltbush-flats/gw-spinifex",
    ]


def test_refuses_an_existing_gateway_unless_rotating(tmp_path: Path) -> None:
    password_file = tmp_path / "p"
    add_gateway(password_file, "saltbush-flats", "gw-spinifex")
    before = password_file.read_text()

    again = run("--password-file", str(password_file), "saltbush-flats", "gw-spinifex")
    assert again.returncode == 1
    assert "already has a password" in again.stderr and "--rotate" in again.stderr
    assert password_file.read_text() == before

    rotated = run(
        "--password-file", str(password_file), "--rotate", "saltbush-flats", "gw-spinifex"
    )
    assert rotated.returncode == 0, rotated.stderr
    after = password_file.read_text()
    assert after != before and len(after.splitlines()) == 1


def test_password_from_stdin_is_used_and_not_echoed(tmp_path: Path) -> None:
    password_file = tmp_path / "p"
    done = run(
        "--password-file", str(password_file), "--password-stdin", "saltbush-flats", "gw-mallee",
        stdin="from-the-vault-7Q\n",
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    assert done.stdout.splitlines() == ["username saltbush-flats/gw-mallee"]
    assert "from-the-vault-7Q" not in done.stdout + done.stderr


@pytest.mark.parametrize(
    "site, gateway",
    [
        ("alerts", "gw1"),  # would open wellspan/v1/alerts/gw1/# to the gateway
        ("mallee", "layout"),
        ("mallee/x", "gw1"),
        ("+", "gw1"),
        ("mallee", "#"),
        ("", "gw1"),
        ("-mallee", "gw1"),
        ("mallee", "g" * 65),
        ("mal lee", "gw1"),
        ("mallee", "gw:1"),
    ],
)
def test_refuses_identifiers_the_contract_refuses(tmp_path: Path, site: str, gateway: str) -> None:
    password_file = tmp_path / "p"
    done = run("--password-file", str(password_file), site, gateway)
    assert done.returncode == 2
    assert done.stderr.startswith("add-gateway: ")
    assert not password_file.exists()


@pytest.mark.parametrize(
    "candidate",
    ["mallee", "MAL-P1", "gw.1", "a", "9pad", "x" * 64, "x" * 65, "_x", ".x", "a b", "é", "status"],
)
def test_accepts_exactly_the_contracts_identifiers(tmp_path: Path, candidate: str) -> None:
    try:
        TypeAdapter(Identifier).validate_python(candidate)
        contract_ok = True
    except ValidationError:
        contract_ok = False
    done = run("--password-file", str(tmp_path / "p"), candidate, "gw1")
    assert (done.returncode == 0) is contract_ok, done.stderr


@pytest.mark.parametrize(
    "args", [(), ("mallee",), ("a", "b", "c"), ("--frobnicate", "a", "b"), ("--password-file",)]
)
def test_bad_usage_exits_2_with_the_usage_line(args: tuple[str, ...]) -> None:
    done = run(*args)
    assert done.returncode == 2
    assert "usage: add-gateway" in done.stderr


def test_missing_folder_is_a_clear_error(tmp_path: Path) -> None:
    done = run(
        "--password-file", str(tmp_path / "no" / "such" / "p"), "saltbush-flats", "gw-mallee"
    )
    assert done.returncode == 1
    assert "does not exist" in done.stderr


@pytest.mark.broker
def test_gateway_added_to_a_running_broker_connects_after_reload(own_broker: Broker) -> None:
    username, password = add_gateway(own_broker.password_file, "saltbush-flats", "gw-coolibah")
    own_broker.passwords[username] = password
    own_broker.reload()

    # SIGHUP is handled asynchronously: retry until the broker knows the new user.
    probe = Probe()
    for _ in range(50):
        rc = probe.connect(own_broker, username)
        if not rc.is_failure:
            break
        time.sleep(0.1)
        probe = Probe()
    assert not rc.is_failure, own_broker.log()
    try:
        topic = indicators_topic("saltbush-flats", "gw-coolibah", "COO-P1")
        assert not probe.publish(topic, b"x").is_failure
        forged = indicators_topic("saltbush-flats", "gw-mallee", "COO-P2")
        assert probe.publish(forged, b"x").value == 0x87  # MQTT 5.0 table 2-6: Not authorized
    finally:
        probe.close()

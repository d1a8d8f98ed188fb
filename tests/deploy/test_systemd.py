"""deploy/systemd: the units carry the settings an operator relies on, their command lines are
ones the real ``wellspan`` CLI accepts, and the ingest replica's start guards work."""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from prognosis_service.settings import Settings, SettingsError, load_settings
from tests.brokers import require_tool
from tests.deploy.broker_harness import DEPLOY
from wellspan.cli import build_parser

SYSTEMD = DEPLOY / "systemd"
UNITS = ("wellspan-edge.service", "wellspan-serve.service", "wellspan-ingest@.service")
BINARY = "/opt/wellspan/bin/wellspan"


def parse_unit(path: Path) -> dict[str, list[tuple[str, str]]]:
    """Sections of a unit file as ordered (key, value) lists; keys may repeat (ExecStartPre)."""
    sections: dict[str, list[tuple[str, str]]] = {}
    current: list[tuple[str, str]] | None = None
    for raw in path.read_text().splitlines():
        line = raw.strip()
        if not line or line.startswith(("#", ";")):
            continue
        if line.startswith("[") and line.endswith("]"):
            current = sections.setdefault(line[1:-1], [])
            continue
        assert current is not None, f"{path.name}: setting outside a section: {line!r}"
        key, sep, value = line.partition("=")
        assert sep, f"{path.name}: not a key=value line: {line!r}"
        current.append((key.strip(), value.strip()))
    return sections


def settings(unit: str) -> dict[str, str]:
    """[Service] of a unit, last value of each key."""
    return dict(parse_unit(SYSTEMD / unit)["Service"])


def seconds(value: str) -> float:
    match = re.fullmatch(r"(\d+)(s|min)?", value)
    assert match, value
    return int(match[1]) * (60 if match[2] == "min" else 1)


def systemd_expand(command: str, instance: str) -> list[str]:
    """The argv systemd runs for a command line: %i is the instance, $$ a literal $."""
    return shlex.split(command.replace("%i", instance).replace("$$", "$"))


@pytest.mark.parametrize("unit", UNITS)
def test_unit_runs_as_the_dedicated_user_and_restarts_on_failure(unit: str) -> None:
    s = settings(unit)
    assert s["User"] == "wellspan" and s["Group"] == "wellspan"
    assert s["Restart"] == "on-failure"
    assert s["RestartPreventExitStatus"] == "2"  # the CLI's exit status for bad configuration
    assert s["EnvironmentFile"].lstrip("-").startswith("/etc/wellspan/")
    assert s["ExecStart"].startswith(BINARY + " ")
    assert ("WantedBy", "multi-user.target") in parse_unit(SYSTEMD / unit)["Install"]


@pytest.mark.parametrize("unit", UNITS)
def test_unit_is_hardened_and_may_write_only_its_state_folder(unit: str) -> None:
    s = settings(unit)
    assert s["NoNewPrivileges"] == "yes"
    assert s["ProtectSystem"] == "strict"
    assert s["ProtectHome"] == "yes"
    assert s["PrivateTmp"] == "yes"
    assert s["CapabilityBoundingSet"] == ""
    assert s["StateDirectory"] == "wellspan"
    assert s["ReadWritePaths"].split() == ["/var/lib/wellspan"]
    assert s["WorkingDirectory"] == "/var/lib/wellspan"


@pytest.mark.parametrize("unit", UNITS)
def test_stop_timeout_leaves_time_for_a_clean_flush(unit: str) -> None:
    # Well above the agent's default --drain-timeout (5 s) and a database commit; the exact
    # figure is common practice, no source.
    assert seconds(settings(unit)["TimeoutStopSec"]) >= 60


@pytest.mark.parametrize("unit", UNITS)
def test_exec_start_is_a_command_line_the_cli_accepts(unit: str) -> None:
    argv = systemd_expand(settings(unit)["ExecStart"], "2")
    assert argv[0] == BINARY
    parser, _ = build_parser()
    args = parser.parse_args(argv[1:])  # argparse exits (SystemExit) on a bad option
    expected: dict[str, tuple[str, dict[str, object]]] = {
        "wellspan-edge.service": ("edge", {"config": "/etc/wellspan/gateway.toml"}),
        "wellspan-serve.service": ("serve", {"host": "127.0.0.1", "no_ingest": False}),
        "wellspan-ingest@.service": ("ingest", {"client_id": "wellspan-ingest-2"}),
    }
    command, options = expected[unit]
    assert args.command == command
    for key, value in options.items():
        assert getattr(args, key) == value


def test_each_ingest_replica_gets_its_own_client_id() -> None:
    start = settings("wellspan-ingest@.service")["ExecStart"]
    assert systemd_expand(start, "2") != systemd_expand(start, "3")
    assert "%i" in start


@pytest.mark.parametrize(
    "env, refused_for",
    [
        ({}, "PostgreSQL"),
        ({"WELLSPAN_DATABASE_URL": "sqlite:////var/lib/wellspan/wellspan.db"}, "PostgreSQL"),
        ({"WELLSPAN_DATABASE_URL": "postgresql+psycopg://wellspan@db/wellspan"}, "SHARE_GROUP"),
        (
            {
                "WELLSPAN_DATABASE_URL": "postgresql+psycopg://wellspan@db/wellspan",
                "WELLSPAN_MQTT_SHARE_GROUP": "ingest",
            },
            None,
        ),
    ],
)
def test_ingest_replica_refuses_to_start_without_postgresql_and_a_share_group(
    env: dict[str, str], refused_for: str | None
) -> None:
    pre = [v for k, v in parse_unit(SYSTEMD / "wellspan-ingest@.service")["Service"]
           if k == "ExecStartPre"]  # fmt: skip
    assert len(pre) == 2
    clean = {k: v for k, v in os.environ.items() if not k.startswith("WELLSPAN_")}
    results = [
        subprocess.run(
            systemd_expand(cmd, "2"), env={**clean, **env}, capture_output=True, text=True
        )
        for cmd in pre
    ]
    failed = [r for r in results if r.returncode != 0]
    if refused_for is None:
        assert not failed, [r.stderr for r in failed]
    else:
        assert failed and failed[0].returncode == 2
        assert refused_for in failed[0].stderr
        assert "wellspan-ingest@2" in failed[0].stderr


@pytest.mark.skipif(shutil.which("systemd-analyze") is None, reason="systemd-analyze missing")
def test_systemd_analyze_verify_finds_nothing(tmp_path: Path) -> None:
    # The one change: ExecStart's binary must exist for verify, so it points at this checkout's.
    wellspan = Path(sys.executable).with_name("wellspan")
    # ./dev installs the project (and its console script) into .venv
    require_tool(wellspan.exists(), "the wellspan console script is not installed here")
    names = []
    for unit in UNITS:
        text = (SYSTEMD / unit).read_text()
        assert text.count(BINARY) == 1
        name = unit.replace("@.", "@2.")
        (tmp_path / name).write_text(text.replace(BINARY, str(wellspan)))
        names.append(str(tmp_path / name))
    done = subprocess.run(
        ["systemd-analyze", "verify", *names], capture_output=True, text=True, cwd=tmp_path
    )
    assert done.returncode == 0, done.stderr
    assert done.stderr.strip() == "", done.stderr


def test_sysusers_entry_creates_the_user_the_units_name() -> None:
    lines = [
        line.split(maxsplit=2)
        for line in (SYSTEMD / "wellspan.sysusers").read_text().splitlines()
        if line.strip() and not line.startswith("#")
    ]
    assert [(kind, name) for kind, name, _ in lines] == [("u", "wellspan")]


def _example_variables(path: Path) -> dict[str, str]:
    found = {}
    for line in path.read_text().splitlines():
        match = re.fullmatch(r"#?(WELLSPAN_[A-Z_]+)=(.*)", line.strip())
        if match:
            found[match[1]] = match[2]
    return found


def test_service_env_example_names_only_real_settings() -> None:
    variables = _example_variables(SYSTEMD / "service.env.example")
    assert {"WELLSPAN_ENVIRONMENT", "WELLSPAN_DATABASE_URL", "WELLSPAN_MQTT_URL"} <= set(variables)
    fields = {f"WELLSPAN_{name.upper()}" for name in Settings.model_fields}
    assert set(variables) <= fields, set(variables) - fields


def test_service_env_example_is_refused_until_its_placeholders_are_replaced(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    for key in [k for k in os.environ if k.startswith("WELLSPAN_")]:
        monkeypatch.delenv(key)
    active = {
        line.split("=", 1)[0]: line.split("=", 1)[1]
        for line in (SYSTEMD / "service.env.example").read_text().splitlines()
        if line.startswith("WELLSPAN_")
    }
    for key, value in active.items():
        monkeypatch.setenv(key, value)
    with pytest.raises(SettingsError, match="mqtt_url"):
        load_settings()
    monkeypatch.setenv(
        "WELLSPAN_MQTT_URL", active["WELLSPAN_MQTT_URL"].replace("changeme", "Xq7vR2mK9pL4")
    )
    with pytest.raises(SettingsError, match="alerts_seal_key"):
        load_settings()
    monkeypatch.setenv("WELLSPAN_ALERTS_SEAL_KEY", "q2Y7dG0vT9wK3mB8xR5nL1cF6hJ4sA0eZ2uP7iO9yWk")
    assert load_settings().environment == "production"


def test_edge_env_example_names_variables_the_agent_reads() -> None:
    source = (DEPLOY.parent / "edge_agent" / "config.py").read_text()
    variables = _example_variables(SYSTEMD / "edge.env.example")
    assert variables
    for name in variables:
        assert f'"{name}"' in source, name

"""deploy/compose.yaml and deploy/Containerfile. No container engine runs here, so these check the
files: the YAML parses, everything it names exists (or is an operator secret that the secrets
README lists), the broker's mounts match the paths in the shipped mosquitto.conf, and the
commands are ones the real CLI accepts.

The structural checks parse with PyYAML, which is not a dependency of wellspan: they are skipped
where it is missing. The file-reference check needs no YAML parser and always runs.
"""

from __future__ import annotations

import re
import shlex
import tomllib
from pathlib import Path
from typing import Any

import pytest

from prognosis_service.api.health import router as health_router
from tests.deploy.broker_harness import DEPLOY
from wellspan.cli import build_parser

COMPOSE = DEPLOY / "compose.yaml"
CONTAINERFILE = DEPLOY / "Containerfile"
ROOT = DEPLOY.parent


def _secrets_listed() -> str:
    return (DEPLOY / "secrets" / "README.md").read_text()


def check_relative_path(ref: str) -> None:
    path = (DEPLOY / ref).resolve()
    if path.is_relative_to(DEPLOY / "secrets"):
        name = path.relative_to(DEPLOY / "secrets").as_posix()
        assert f"`{name}`" in _secrets_listed() or f"`{name.split('/')[0]}/" in _secrets_listed(), (
            f"secret {ref} is not described in deploy/secrets/README.md"
        )
    else:
        assert path.exists(), f"compose.yaml names {ref}, which does not exist"


def test_every_relative_path_in_compose_exists_or_is_a_listed_secret() -> None:
    text = COMPOSE.read_text()
    refs = set(re.findall(r"(?<![\w.])(\.{1,2}/[\w./-]*)", text))
    assert len(refs) >= 8, refs  # the scan itself found the mounts
    for ref in sorted(refs):
        check_relative_path(ref.split(":")[0])


def test_secrets_folder_is_kept_out_of_version_control() -> None:
    ignore = (DEPLOY / "secrets" / ".gitignore").read_text().split()
    assert "*" in ignore and "!README.md" in ignore


@pytest.fixture(scope="module")
def compose() -> dict[str, Any]:
    yaml = pytest.importorskip("yaml")
    data = yaml.safe_load(COMPOSE.read_text())
    assert isinstance(data, dict)
    return data


def _mounts(service: dict[str, Any]) -> dict[str, str]:
    """container path -> source, from short-syntax volume strings."""
    out = {}
    for volume in service.get("volumes", []):
        source, target, *_ = volume.split(":")
        out[target] = source
    return out


def test_compose_has_the_three_services_each_with_a_health_check(compose: dict[str, Any]) -> None:
    services = compose["services"]
    assert set(services) == {"broker", "db", "service"}
    for name, service in services.items():
        assert "test" in service["healthcheck"], name
        assert service["restart"] == "unless-stopped", name
    assert services["broker"]["image"].startswith("eclipse-mosquitto:2")
    assert services["db"]["image"].startswith("postgres:")
    depends = services["service"]["depends_on"]
    assert depends == {
        "broker": {"condition": "service_healthy"},
        "db": {"condition": "service_healthy"},
    }


def test_named_volumes_and_secrets_are_declared(compose: dict[str, Any]) -> None:
    for name, service in compose["services"].items():
        for source in _mounts(service).values():
            if not source.startswith("."):
                assert source in compose["volumes"], (name, source)
        for secret in service.get("secrets", []):
            assert secret in compose["secrets"], (name, secret)
    for secret in compose["secrets"].values():
        check_relative_path(secret["file"])
    check_relative_path(compose["services"]["service"]["env_file"])


def test_broker_mounts_every_path_the_shipped_mosquitto_conf_uses(
    compose: dict[str, Any],
) -> None:
    mounts = _mounts(compose["services"]["broker"])
    assert mounts["/etc/mosquitto/mosquitto.conf"] == "./mosquitto/mosquitto.conf"
    assert mounts["/etc/mosquitto/wellspan.acl"] == "./mosquitto/wellspan.acl"
    conf = (DEPLOY / "mosquitto" / "mosquitto.conf").read_text()
    used = re.findall(
        r"^(?:cafile|certfile|keyfile|password_file|acl_file|persistence_location) (\S+)",
        conf,
        flags=re.MULTILINE,
    )
    assert len(used) == 6
    for path in used:
        assert any(
            path.rstrip("/") == target or path.startswith(target + "/") for target in mounts
        ), f"{path} from mosquitto.conf is not mounted into the broker container"
    assert "8883:8883" in compose["services"]["broker"]["ports"]


def test_service_is_built_from_the_containerfile_and_runs_a_valid_command(
    compose: dict[str, Any],
) -> None:
    service = compose["services"]["service"]
    build = service["build"]
    assert (DEPLOY / build["context"] / build["dockerfile"]).resolve() == CONTAINERFILE
    parser, _ = build_parser()
    args = parser.parse_args(service["command"][1:])
    assert (args.command, args.host, args.port) == ("serve", "0.0.0.0", 8000)
    assert service["environment"]["WELLSPAN_ENVIRONMENT"] == "production"


def test_service_health_check_asks_an_endpoint_the_api_has(compose: dict[str, Any]) -> None:
    probe = " ".join(compose["services"]["service"]["healthcheck"]["test"])
    path = re.search(r"http://127\.0\.0\.1:8000(/\w+)", probe)
    assert path, probe
    assert path[1] in {route.path for route in health_router.routes}  # type: ignore[attr-defined]


def test_db_runs_the_shipped_setup_on_first_start(compose: dict[str, Any]) -> None:
    mounts = _mounts(compose["services"]["db"])
    init = [t for t in mounts if t.startswith("/docker-entrypoint-initdb.d/")]
    assert [mounts[t] for t in init] == ["./postgres/compose-init.sh"]
    assert mounts["/wellspan/setup.sql"] == "./postgres/setup.sql"  # where compose-init.sh looks
    assert "/wellspan/setup.sql" in (DEPLOY / "postgres" / "compose-init.sh").read_text()


# --------------------------------------------------------------------------------------------
# Containerfile
# --------------------------------------------------------------------------------------------
def _instructions() -> list[tuple[str, str]]:
    out, pending = [], ""
    for raw in CONTAINERFILE.read_text().splitlines():
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        if line.endswith("\\"):
            pending += line[:-1] + " "
            continue
        word, _, rest = (pending + line).partition(" ")
        out.append((word.upper(), rest.strip()))
        pending = ""
    return out


def test_containerfile_builds_on_python_311_slim_and_installs_the_project() -> None:
    steps = _instructions()
    assert steps[0] == ("FROM", "python:3.11-slim")
    runs = [rest for word, rest in steps if word == "RUN"]
    assert any(re.search(r"\bpip install \.(\s|$)", r) for r in runs)
    assert ("USER", "wellspan") in steps


def test_containerfile_copies_what_pip_install_needs_and_it_exists() -> None:
    copied = []
    for word, rest in _instructions():
        if word == "COPY":
            *sources, _dest = shlex.split(rest)
            copied += sources
    for source in copied:
        assert (ROOT / source).exists(), source
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())
    packages = {p.rstrip("*") for p in project["tool"]["setuptools"]["packages"]["find"]["include"]}
    assert packages <= set(copied), packages - set(copied)
    assert {"pyproject.toml", project["project"]["readme"]} <= set(copied)


def test_containerfile_command_is_one_the_cli_accepts() -> None:
    cmd = dict(_instructions())["CMD"]
    argv = [a.strip().strip('"') for a in cmd.strip("[]").split(",")]
    parser, _ = build_parser()
    args = parser.parse_args(argv[1:])
    assert argv[0] == "wellspan" and args.command == "serve" and args.host == "0.0.0.0"


def test_compose_and_systemd_mount_the_ca_where_the_docs_say(compose: dict[str, Any]) -> None:
    service = compose["services"]["service"]
    ca = service["environment"]["SSL_CERT_FILE"]
    assert _mounts(service)[ca] == "./secrets/certs/ca.crt"
    assert Path(ca).name == "ca.crt"


def test_build_context_leaves_out_the_virtual_environment_and_secrets() -> None:
    # BuildKit reads <Containerfile>.dockerignore beside the Containerfile.
    ignored = (DEPLOY / "Containerfile.dockerignore").read_text().split()
    assert {"**/.venv", "**/.git", "deploy/secrets"} <= set(ignored)

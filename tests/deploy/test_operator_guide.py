"""deploy/OPERATOR.md says what the files do: the files it names exist, the commands it shows are
ones the CLI accepts, and it carries the safety caution. (Its CA commands are run by every broker
test: tests/deploy/broker_harness.make_pki.)"""

from __future__ import annotations

import re
import shlex

import pytest

from tests.deploy.broker_harness import DEPLOY
from wellspan.cli import build_parser

GUIDE = (DEPLOY / "OPERATOR.md").read_text()
COMMAND = re.compile(r"(?:wellspan_admin|bin/wellspan|exec service wellspan) ([^\n`]+)")


def test_guide_carries_the_safety_caution() -> None:
    head = " ".join(GUIDE[:600].lower().replace(">", " ").split())
    assert "advisory" in head
    assert "do not replace protective trips" in head
    assert "qualified personnel decide" in head


def test_every_deploy_file_the_guide_names_exists() -> None:
    # relative to deploy/: not preceded by "/" (that is an absolute path on the target machine)
    named = set(re.findall(r"(?<![/\w])((?:mosquitto|systemd|postgres|secrets)/[\w.@-]*\w)", GUIDE))
    named |= set(re.findall(r"\b(compose\.yaml|Containerfile)\b", GUIDE))
    assert len(named) >= 10, named
    missing = sorted(n for n in named if not (DEPLOY / n).exists())
    assert not missing


CLI_LINES = sorted({m.group(1) for m in COMMAND.finditer(GUIDE)} - {'"$@"\' wellspan "$@"; }'})


def test_the_guide_shows_wellspan_commands() -> None:
    assert len(CLI_LINES) >= 4, CLI_LINES


def _argv(line: str) -> list[str]:
    return shlex.split(line.replace("<key_id>", "0123456789ab").replace("==<version>", ""))


# Lines such as "pip install wellspan" match the pattern but are not wellspan command lines.
WELLSPAN_LINES = [
    line for line in CLI_LINES if _argv(line)[0] in {"edge", "keys", "serve", "ingest"}
]


@pytest.mark.parametrize("line", WELLSPAN_LINES)
def test_wellspan_commands_in_the_guide_parse(line: str) -> None:
    argv = _argv(line)
    parser, _ = build_parser()
    parser.parse_args(argv)  # argparse exits on anything it does not accept


def test_guide_says_migrations_are_applied_at_service_start() -> None:
    assert GUIDE.count("applied at service start") >= 2

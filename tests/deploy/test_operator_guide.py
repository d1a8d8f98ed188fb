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


@pytest.mark.parametrize("line", CLI_LINES)
def test_wellspan_commands_in_the_guide_parse(line: str) -> None:
    argv = shlex.split(line.replace("<key_id>", "0123456789ab").replace("==<version>", ""))
    if argv[0] not in {"edge", "keys", "serve", "ingest"}:
        pytest.skip(f"not a wellspan command line: {line!r}")
    parser, _ = build_parser()
    parser.parse_args(argv)  # argparse exits on anything it does not accept


def test_guide_says_migrations_are_applied_at_service_start() -> None:
    assert GUIDE.count("applied at service start") >= 2

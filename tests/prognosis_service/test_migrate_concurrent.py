"""Two processes applying the migrations at once to one empty database both succeed.

Without the migration lock in ``store/migrate.py`` the second PostgreSQL upgrade fails on a
duplicate table or ``alembic_version`` row (seen before the lock existed); with it, one applies
the revisions and the other finds them applied.
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

import pytest

from prognosis_service.store.migrate import current_revision, head_revision, migration_lock
from tests.prognosis_service.test_migrations import _tables, empty_url  # noqa: F401

ROOT = Path(__file__).resolve().parents[2]
_UPGRADE = """
import sys, time
from prognosis_service.store.migrate import upgrade
start = float(sys.argv[2])
while time.time() < start:  # imports done: both processes begin within a millisecond or so
    time.sleep(0.0005)
upgrade(sys.argv[1])
"""


def _run_together(url: str, n: int = 2) -> list[subprocess.CompletedProcess[str]]:
    start = time.time() + 3.0  # time for both interpreters to start and import
    procs = [
        subprocess.Popen(
            [sys.executable, "-c", _UPGRADE, url, repr(start)],
            cwd=ROOT,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for _ in range(n)
    ]
    results = []
    for p in procs:
        out, err = p.communicate(timeout=120)
        results.append(subprocess.CompletedProcess(p.args, p.returncode, out, err))
    return results


@pytest.mark.timeout(180)
def test_two_concurrent_upgrades_on_an_empty_database(empty_url: str) -> None:  # noqa: F811
    url = empty_url
    results = _run_together(url)
    for r in results:
        assert r.returncode == 0, r.stderr[-3000:]
    assert current_revision(url) == head_revision()
    assert {"messages", "assets", "quarantine"} <= _tables(url)


def test_the_lock_excludes_a_second_holder(empty_url: str) -> None:  # noqa: F811
    """While one holder has the lock, another process cannot take it (it times out cleanly)."""
    url = empty_url
    probe = (
        "import sys\n"
        "from prognosis_service.store.migrate import MigrationLockTimeoutError, migration_lock\n"
        "try:\n"
        "    with migration_lock(sys.argv[1], timeout_s=0.5):\n"
        "        print('acquired')\n"
        "except MigrationLockTimeoutError as exc:\n"
        "    print('timeout:', exc)\n"
    )

    def other() -> str:
        return subprocess.run(
            [sys.executable, "-c", probe, url],
            cwd=ROOT,
            capture_output=True,
            text=True,
            timeout=60,
            check=True,
        ).stdout

    with migration_lock(url):
        assert other().startswith("timeout:")
    assert other().startswith("acquired")

"""A short coverage-guided fuzzing run in CI (tests/fuzz/ingest_target.py; ``./dev fuzz`` runs
a long one). libFuzzer exits non-zero and writes the input when the target crashes."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


@pytest.mark.slow
def test_a_short_fuzzing_run_finds_no_crash(tmp_path: Path) -> None:
    proc = subprocess.run(
        [sys.executable, "-m", "tests.fuzz.ingest_target", "-runs=20000", "-seed=1",
         f"-artifact_prefix={tmp_path}/"],
        cwd=ROOT, capture_output=True, text=True, timeout=600,
    )  # fmt: skip
    tail = proc.stderr[-3000:]
    assert proc.returncode == 0, tail
    assert "Done 20000 runs" in proc.stderr, tail
    assert not list(tmp_path.glob("crash-*")), tail

"""``wellspan bench``: run the project's benchmarks (all, or some by name) and write the report.

The benchmarks live in the source checkout's ``bench/`` folder (they start private brokers and
databases and use the test fixtures), not in the installed package; this command finds that
folder beside the ``wellspan`` package and runs the same harness as ``python -m bench``.
"""

from __future__ import annotations

import argparse
import importlib
import shlex
import sys
from pathlib import Path
from types import ModuleType

from wellspan.clikit import UsageError

__all__ = ["add_arguments", "run"]

_CHECKOUT = Path(__file__).resolve().parents[1]


def _harness() -> ModuleType | None:
    """``bench.__main__`` of the source checkout, or None outside one."""
    if not (_CHECKOUT / "bench" / "harness.py").is_file():
        return None
    if str(_CHECKOUT) not in sys.path:
        sys.path.insert(0, str(_CHECKOUT))
    return importlib.import_module("bench.__main__")


def add_arguments(p: argparse.ArgumentParser) -> None:
    harness = _harness()
    if harness is None:
        p.add_argument("names", nargs="*", metavar="NAME", help="benchmarks to run")
        return
    harness.add_arguments(p, list(harness.REGISTRY))
    p.epilog = (
        "Writes docs/BENCHMARKS.md: every figure beside its target, the machine and the command "
        "that reproduces it. Run it on an otherwise idle machine: other work skews timings."
    )


def run(args: argparse.Namespace) -> int:
    harness = _harness()
    if harness is None:
        raise UsageError(
            f"the benchmarks live in a source checkout's bench/ folder; none beside {_CHECKOUT}"
        )
    command = " ".join(["wellspan", "bench", *_reconstruct(args)])
    return int(harness.run_args(args, command=command, prog="wellspan bench"))


def _reconstruct(args: argparse.Namespace) -> list[str]:
    """The command line that reproduces this run (the report's "Reproduce" section)."""
    argv = [*args.names]
    for flag in ("quick", "json", "strict", "no_progress"):
        if getattr(args, flag, False):
            argv.append("--" + flag.replace("_", "-"))
    out = Path(args.out)
    if out.resolve() != (_CHECKOUT / "docs" / "BENCHMARKS.md").resolve():
        argv += ["--out", str(out)]
    return [shlex.quote(a) for a in argv]

"""Run the benchmarks and write the report (``wellspan bench`` runs the same).

    .venv/bin/python -m bench                       # every registered benchmark, full sizes
    .venv/bin/python -m bench forecast anomaly      # only these
    .venv/bin/python -m bench --quick --out /tmp/b.md
    .venv/bin/python -m bench --list

Progress goes to stderr (a rich progress display when stderr is a terminal); the summary table
goes to stdout (``--json`` for machines). Exit status: 0 when every benchmark ran, 1 when one
failed (or, with ``--strict``, missed a target), 2 for bad usage.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from bench.harness import (
    REGISTRY,
    ROOT,
    Benchmark,
    BenchmarkResult,
    _python_command,
    load_average,
    machine_info,
    render_markdown,
    run_benchmark,
)

DEFAULT_OUT = ROOT / "docs" / "BENCHMARKS.md"


class _UsageError(Exception):
    pass


def add_arguments(ap: argparse.ArgumentParser, names: Sequence[str]) -> None:
    """The options of ``python -m bench`` and ``wellspan bench`` (one definition for both)."""
    ap.add_argument(
        "names", nargs="*", metavar="NAME", help=f"benchmarks to run: {', '.join(names)}"
    )
    ap.add_argument("--quick", action="store_true", help="small sizes, for a smoke test")
    ap.add_argument(
        "--out", type=Path, default=DEFAULT_OUT, help="Markdown report (default %(default)s)"
    )
    ap.add_argument("--json", action="store_true", help="print the results as JSON on stdout")
    ap.add_argument("--strict", action="store_true", help="exit 1 when a figure misses its target")
    ap.add_argument("--list", action="store_true", help="list the benchmarks and exit")
    ap.add_argument("--no-progress", action="store_true", help="no progress display on stderr")


def _parser(names: Sequence[str]) -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(
        prog="python -m bench",
        description="Run wellspan's benchmarks and write docs/BENCHMARKS.md.",
    )
    add_arguments(ap, names)
    return ap


def _select(registry: Mapping[str, Benchmark], names: Sequence[str]) -> list[Benchmark]:
    unknown = [n for n in names if n not in registry]
    if unknown:
        raise _UsageError(f"unknown benchmark {unknown[0]!r}; known: {', '.join(registry)}")
    chosen = list(dict.fromkeys(names)) if names else list(registry)
    return [registry[n] for n in chosen]


def _run_all(benches: Sequence[Benchmark], *, quick: bool, progress: bool) -> list[BenchmarkResult]:
    if not progress:
        results = []
        for b in benches:
            print(f"bench: running {b.name} ...", file=sys.stderr, flush=True)
            r = run_benchmark(b, quick=quick)
            print(f"bench: {b.name} {r.status} in {r.seconds:.1f} s", file=sys.stderr, flush=True)
            results.append(r)
        return results

    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    console = Console(stderr=True)
    results = []
    with Progress(
        TextColumn("[bold]{task.fields[bench]:<10}"),
        BarColumn(),
        TextColumn("{task.percentage:>3.0f} %"),
        TimeElapsedColumn(),
        TextColumn("{task.description}"),
        console=console,
    ) as bar:
        overall = bar.add_task("", total=len(benches), bench="all")
        for b in benches:
            task = bar.add_task("starting", total=1.0, bench=b.name)

            def report(done: float, total: float, what: str = "", _task: Any = task) -> None:
                bar.update(_task, completed=done, total=max(total, 1e-12), description=what)

            r = run_benchmark(b, quick=quick, report=report)
            bar.update(
                task, completed=1.0, total=1.0, description=f"{r.status} ({r.seconds:.1f} s)"
            )
            bar.advance(overall)
            results.append(r)
    return results


def _summary(results: Sequence[BenchmarkResult]) -> str:
    rows = [("benchmark", "figure", "value", "target", "meets")]
    for r in results:
        if r.status != "done":
            rows.append(
                (r.benchmark.name, f"({r.status}{': ' + r.error if r.error else ''})", "", "", "")
            )
        for f in r.figures:
            verdict = {True: "yes", False: "NO", None: "-"}[f.meets_target]
            rows.append(
                (
                    r.benchmark.name,
                    f.name,
                    f.formatted_value(),
                    f.target.text if f.target else "-",
                    verdict,
                )
            )
    widths = [max(len(row[i]) for row in rows) for i in range(4)]
    lines = []
    for k, row in enumerate(rows):
        lines.append(
            "  ".join(cell.ljust(widths[i]) for i, cell in enumerate(row[:4])) + "  " + row[4]
        )
        if k == 0:
            lines.append("  ".join("-" * w for w in widths) + "  -----")
    return "\n".join(lines)


def main(
    argv: Sequence[str] | None = None, *, registry: Mapping[str, Benchmark] | None = None
) -> int:
    """Command-line entry point; ``registry`` replaces :data:`bench.harness.REGISTRY` (tests)."""
    reg = REGISTRY if registry is None else registry
    args_list = list(sys.argv[1:] if argv is None else argv)
    ap = _parser(list(reg))
    try:
        args = ap.parse_args(args_list)
    except SystemExit as exc:  # argparse already printed one line naming the problem
        return int(exc.code or 0)
    return run_args(args, registry=reg, command=_python_command(args_list))


def run_args(
    args: argparse.Namespace,
    *,
    registry: Mapping[str, Benchmark] | None = None,
    command: str,
    prog: str = "python -m bench",
) -> int:
    """Run what parsed ``args`` (see :func:`add_arguments`) ask for; ``command`` is the line that
    reproduces the run, written into the report."""
    reg = REGISTRY if registry is None else registry
    if args.list:
        for b in reg.values():
            print(f"{b.name:<10} {b.title}")
        return 0
    try:
        benches = _select(reg, args.names)
        out: Path = args.out
        if out.exists() and out.is_dir():
            raise _UsageError(f"--out must be a file path, got the directory {out}")
        if not out.parent.exists():
            raise _UsageError(f"--out: the directory {out.parent} does not exist")
    except _UsageError as exc:
        print(f"{prog}: {exc}", file=sys.stderr)
        return 2
    progress = not args.no_progress and sys.stderr.isatty()
    load_before = load_average()
    results = _run_all(benches, quick=args.quick, progress=progress)
    machine = machine_info(
        extra={
            "load average (1/5/15 min) before the run": load_before,
            "load average (1/5/15 min) after the run": load_average(),
        }
    )
    for r in results:
        if r.traceback:
            print(f"bench: {r.benchmark.name} failed:\n{r.traceback}", file=sys.stderr)
    try:
        out.write_text(render_markdown(results, machine, command=command), encoding="utf-8")
    except OSError as exc:
        print(f"{prog}: cannot write --out {out}: {exc.strerror}", file=sys.stderr)
        return 2
    if args.json:
        print(
            json.dumps(
                {
                    "quick": args.quick,
                    "report": str(out),
                    "benchmarks": [
                        {
                            "name": r.benchmark.name,
                            "status": r.status,
                            "seconds": r.seconds,
                            "error": r.error or None,
                            "figures": [f.to_dict() for f in r.figures],
                        }
                        for r in results
                    ],
                },
                indent=2,
            )
        )
    else:
        print(_summary(results))
        print(f"\nreport written to {out}")
    failed = any(r.status == "failed" for r in results)
    missed = any(f.meets_target is False for r in results for f in r.figures)
    return 1 if failed or (args.strict and missed) else 0


if __name__ == "__main__":
    raise SystemExit(main())

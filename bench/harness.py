"""The benchmark harness: a figure record, a registry, the machine description and the report.

A benchmark is a function ``run(*, quick: bool = False, report: Report | None = None) ->
list[Figure]`` in a module under ``bench/``. It measures and returns figures; it asserts nothing.
The harness imports it lazily (so one broken benchmark does not stop the others), times it, and
writes every figure beside its target into ``docs/BENCHMARKS.md``. See ``bench/README.md``.
"""

from __future__ import annotations

import contextlib
import importlib
import inspect
import math
import os
import platform
import subprocess
import sys
import time
import traceback
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path
from typing import Any, Protocol

__all__ = [
    "REGISTRY",
    "Benchmark",
    "BenchmarkResult",
    "Figure",
    "Machine",
    "Report",
    "Target",
    "load_average",
    "machine_info",
    "render_markdown",
    "run_benchmark",
]

ROOT = Path(__file__).resolve().parents[1]

_COMPARISONS: dict[str, Callable[[float, float, float | None], bool]] = {
    "<=": lambda v, a, _b: v <= a,
    "<": lambda v, a, _b: v < a,
    ">=": lambda v, a, _b: v >= a,
    ">": lambda v, a, _b: v > a,
    "between": lambda v, a, b: a <= v <= (math.inf if b is None else b),
}


@dataclass(frozen=True, kw_only=True)
class Target:
    """What a figure should reach: the words of the issue and a machine-checkable comparison.

    Parameters
    ----------
    text : str
        The target as the issue states it, e.g. ``"p99 ≤ 20 ms"`` or ``"≈ 80 %"``.
    op : {"<=", "<", ">=", ">", "between"} or None
        ``None``: the target is stated in words only (judged by a reader, not by the harness).
    value : float or None
        The bound (the lower bound for ``"between"``), in the figure's unit.
    upper : float or None
        Upper bound for ``"between"``.
    """

    text: str
    op: str | None = None
    value: float | None = None
    upper: float | None = None

    def __post_init__(self) -> None:
        if self.op is not None:
            if self.op not in _COMPARISONS:
                raise ValueError(
                    f"Target op must be one of {sorted(_COMPARISONS)} or None; got {self.op!r}"
                )
            if self.value is None or not math.isfinite(self.value):
                raise ValueError(
                    f"Target with op {self.op!r} needs a finite value; got {self.value!r}"
                )
            if self.op == "between" and (self.upper is None or not self.upper >= self.value):
                raise ValueError(
                    f"Target 'between' needs upper >= value; got value={self.value!r}, "
                    f"upper={self.upper!r}"
                )

    def met_by(self, value: float) -> bool | None:
        """``True``/``False`` when the comparison can be made, ``None`` when it cannot."""
        if self.op is None or self.value is None or not math.isfinite(value):
            return None
        return _COMPARISONS[self.op](value, self.value, self.upper)


@dataclass(frozen=True, kw_only=True)
class Figure:
    """One measured figure.

    Parameters
    ----------
    name : str
        What was measured, in the trade's words (e.g. ``"forecast latency p99"``).
    value : float
        The measurement, in ``unit``; NaN when it could not be measured (say why in ``notes``).
    unit : str
        ``"ms"``, ``"%"``, ``"per asset-year"``, ``"1"`` ...
    target : Target or None
        ``None``: informational figure with no target.
    notes : str
        Conditions, sample sizes, caveats.
    digits : int
        Decimals shown in the report.
    """

    name: str
    value: float
    unit: str
    target: Target | None = None
    notes: str = ""
    digits: int = 2

    @property
    def meets_target(self) -> bool | None:
        """Whether the value meets its target (``None``: no target or not checkable)."""
        return None if self.target is None else self.target.met_by(self.value)

    def formatted_value(self) -> str:
        if math.isnan(self.value):
            return "n/a"
        if math.isinf(self.value):
            return "∞" if self.value > 0 else "−∞"
        text = f"{self.value:.3g}" if abs(self.value) >= 1e6 else f"{self.value:,.{self.digits}f}"
        return f"{text} {self.unit}".strip() if self.unit not in ("", "1") else text

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "value": None if not math.isfinite(self.value) else self.value,
            "unit": self.unit,
            "target": None if self.target is None else self.target.text,
            "meets_target": self.meets_target,
            "notes": self.notes,
        }


class Report(Protocol):
    """Progress callback a benchmark may accept as its ``report`` keyword."""

    def __call__(self, done: float, total: float, what: str = "") -> None: ...


@dataclass(frozen=True, kw_only=True)
class Benchmark:
    """A registered benchmark.

    Parameters
    ----------
    name : str
        Name on the command line (``python -m bench NAME``).
    target : str
        ``"module:function"`` imported when the benchmark runs, or a callable.
    title : str
        Heading in the report.
    description : str
        One paragraph: what is measured and on what data.
    missing : str
        Shown instead of figures while ``target``'s module or function does not exist yet (a
        benchmark another engineer is still writing): what is missing and how to run it now.
        Once the module defines the function, the benchmark runs and this note is not used.
    """

    name: str
    target: str | Callable[..., Sequence[Figure]]
    title: str
    description: str = ""
    missing: str = ""

    def load(self) -> Callable[..., Sequence[Figure]] | None:
        """The benchmark function, or ``None`` when its module or function does not exist."""
        if callable(self.target):
            return self.target
        module_name, _, func_name = self.target.partition(":")
        try:
            module = importlib.import_module(module_name)
        except ModuleNotFoundError as exc:
            if exc.name == module_name:
                return None
            raise
        func = getattr(module, func_name or "run", None)
        return func if callable(func) else None


@dataclass(frozen=True, kw_only=True)
class BenchmarkResult:
    """What one benchmark produced: figures, or the error that stopped it, or why it is pending."""

    benchmark: Benchmark
    figures: tuple[Figure, ...] = ()
    seconds: float = 0.0
    error: str = ""
    traceback: str = ""
    quick: bool = False

    pending: bool = False

    @property
    def status(self) -> str:
        if self.pending:
            return "pending"
        return "failed" if self.error else "done"


def run_benchmark(
    bench: Benchmark, *, quick: bool = False, report: Report | None = None
) -> BenchmarkResult:
    """Run one benchmark; an exception is recorded in the result, never raised."""
    t0 = time.perf_counter()
    try:
        func = bench.load()
        if func is None:
            return BenchmarkResult(benchmark=bench, quick=quick, pending=True)
        accepted = inspect.signature(func).parameters
        kwargs: dict[str, Any] = {}
        if "quick" in accepted:
            kwargs["quick"] = quick
        if "report" in accepted and report is not None:
            kwargs["report"] = report
        figures = tuple(func(**kwargs))
        bad = [f for f in figures if not isinstance(f, Figure)]
        if bad:
            raise TypeError(f"{bench.name}: run() must return Figure objects; got {bad[0]!r}")
    except Exception as exc:  # a benchmark's failure is reported, the others still run
        last = traceback.extract_tb(exc.__traceback__)[-1] if exc.__traceback__ else None
        where = f" (at {Path(last.filename).name}:{last.lineno})" if last else ""
        return BenchmarkResult(
            benchmark=bench,
            seconds=time.perf_counter() - t0,
            error=f"{type(exc).__name__}: {exc}{where}",
            traceback=traceback.format_exc(),
            quick=quick,
        )
    return BenchmarkResult(
        benchmark=bench, figures=figures, seconds=time.perf_counter() - t0, quick=quick
    )


# -- the machine --------------------------------------------------------------------------------


@dataclass(frozen=True, kw_only=True)
class Machine:
    """Where the benchmarks ran."""

    cpu_model: str
    cores: int
    memory_gib: float
    python: str
    numpy: str
    scipy: str
    scikit_learn: str
    os: str
    date: datetime
    commit: str
    extra: Mapping[str, str] = field(default_factory=dict)

    def rows(self) -> list[tuple[str, str]]:
        return [
            ("CPU", self.cpu_model),
            ("cores (logical)", str(self.cores)),
            ("memory", f"{self.memory_gib:.1f} GiB"),
            ("OS", self.os),
            ("Python", self.python),
            ("numpy", self.numpy),
            ("scipy", self.scipy),
            ("scikit-learn", self.scikit_learn),
            ("source", self.commit),
            ("date", self.date.strftime("%Y-%m-%d %H:%M UTC")),
            *self.extra.items(),
        ]


def _cpu_model(cpuinfo: Path) -> str:
    with contextlib.suppress(OSError):
        for line in cpuinfo.read_text().splitlines():
            key, _, value = line.partition(":")
            if key.strip() in ("model name", "Hardware", "Processor") and value.strip():
                return value.strip()
    return platform.processor() or platform.machine() or "unknown"


def _memory_gib(meminfo: Path) -> float:
    with contextlib.suppress(OSError, ValueError):
        for line in meminfo.read_text().splitlines():
            if line.startswith("MemTotal:"):
                return int(line.split()[1]) / 2**20  # kB -> GiB
    return math.nan


def _version(dist: str) -> str:
    try:
        return metadata.version(dist)
    except metadata.PackageNotFoundError:
        return "not installed"


def _commit() -> str:
    """Short commit and whether the tree has local changes (read-only git commands)."""
    try:
        head = subprocess.run(
            ["git", "rev-parse", "--short", "HEAD"],
            cwd=ROOT,
            capture_output=True,
            text=True,
            timeout=10,
            check=True,
        ).stdout.strip()
        dirty = subprocess.run(
            ["git", "status", "--porcelain", "--untracked-files=no"],
            cwd=ROOT,
            capture_output=True,
            text=True,
            timeout=30,
            check=True,
        ).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        return "unknown (not a git checkout)"
    return f"commit {head}" + (" with uncommitted changes" if dirty else "")


def load_average() -> str:
    """The 1/5/15-minute load averages as text (other work on the machine skews timings)."""
    try:
        one, five, fifteen = os.getloadavg()
    except OSError:
        return "unknown"
    return f"{one:.2f} / {five:.2f} / {fifteen:.2f}"


def machine_info(
    *,
    cpuinfo: Path = Path("/proc/cpuinfo"),
    meminfo: Path = Path("/proc/meminfo"),
    extra: Mapping[str, str] | None = None,
) -> Machine:
    """Describe this machine and the library versions."""
    return Machine(
        cpu_model=_cpu_model(cpuinfo),
        cores=os.cpu_count() or 0,
        memory_gib=_memory_gib(meminfo),
        python=platform.python_version(),
        numpy=_version("numpy"),
        scipy=_version("scipy"),
        scikit_learn=_version("scikit-learn"),
        os=f"{platform.system()} {platform.release()}",
        date=datetime.now(UTC),
        commit=_commit(),
        extra=dict(extra or {}),
    )


# -- the report ---------------------------------------------------------------------------------

_VERDICT = {True: "yes", False: "**no**", None: "—"}


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def render_markdown(results: Sequence[BenchmarkResult], machine: Machine, *, command: str) -> str:
    """The benchmark report: a summary, one table per benchmark, the machine, how to reproduce."""
    quick = any(r.quick for r in results)
    lines = [
        "# Benchmarks",
        "",
        "Generated by `wellspan bench` (or `python -m bench`); do not edit by hand. A benchmark",
        "measures; the tests assert behaviour and never timing. Figures depend on the machine",
        "below and on its load. Forecast and anomaly figures describe simulated fleets: they are",
        "advisory evidence about the models, not a guarantee for any real machine; alarms do not",
        "replace protective trips, and local codes and qualified personnel decide on maintenance",
        "and operation.",
        "",
    ]
    if quick:
        lines += [
            "> **Quick mode** (`--quick`): small sizes for a smoke test. These figures are not",
            "> representative; run without `--quick` for the real figures.",
            "",
        ]
    lines += ["## Summary", "", "| benchmark | status | figures | targets met | time |"]
    lines += ["|---|---|---|---|---|"]
    for r in results:
        checkable = [f for f in r.figures if f.meets_target is not None]
        met = sum(1 for f in checkable if f.meets_target)
        lines.append(
            f"| [{r.benchmark.name}](#{r.benchmark.name}) | {r.status} | {len(r.figures)} | "
            f"{f'{met} of {len(checkable)}' if checkable else '—'} | "
            f"{'—' if r.status == 'pending' else f'{r.seconds:.1f} s'} |"
        )
    lines.append("")
    for r in results:
        lines += [f'<a id="{r.benchmark.name}"></a>', "", f"## {r.benchmark.title}", ""]
        if r.benchmark.description:
            lines += [r.benchmark.description, ""]
        if r.status == "pending":
            note = r.benchmark.missing or f"`{r.benchmark.target}` does not exist yet."
            lines += [f"*Not wired yet:* {note}", ""]
            continue
        if r.error:
            lines += [f"*Failed after {r.seconds:.1f} s:* `{_cell(r.error)}`", ""]
        if r.figures:
            lines += ["| figure | value | target | meets target | notes |", "|---|---|---|---|---|"]
            for f in r.figures:
                lines.append(
                    f"| {_cell(f.name)} | {_cell(f.formatted_value())} | "
                    f"{_cell(f.target.text) if f.target else '—'} | {_VERDICT[f.meets_target]} | "
                    f"{_cell(f.notes)} |"
                )
            lines.append("")
    lines += ["## Machine", "", "| | |", "|---|---|"]
    lines += [f"| {k} | {_cell(v)} |" for k, v in machine.rows()]
    lines += ["", "## Reproduce", "", "```", command, "```", ""]
    return "\n".join(lines)


def _registry() -> dict[str, Benchmark]:
    entries = [
        Benchmark(
            name="forecast",
            target="bench.bench_forecast:run",
            title="Forecast accuracy and cost (prognosis_service.prognosis)",
            description=(
                "Held-out simulated run-to-failure fleets; fleet prior learned from training "
                "units; forecasts at λ = 0.5 … 0.9 of each test unit's life. α-λ accuracy "
                "(α = 0.2), PHM08 score, relative accuracy and P10–P90 coverage for the model "
                "chosen by evidence, each model alone and the naive linear-trend baseline; refit "
                "cost and forecast latency."
            ),
        ),
        Benchmark(
            name="anomaly",
            target="bench.bench_anomaly:run",
            title="Anomaly detection (prognosis_service.health)",
            description=(
                "Per-regime Hotelling T² baselines on simulated pumps (pump simulator + "
                "extractor): false alarms per asset-year on healthy pumps across operating "
                "regimes and seasons, and detection delay on degrading pumps."
            ),
        ),
        Benchmark(
            name="extract",
            target="bench.bench_extract:run",
            title="Gateway indicator extraction (edge_agent.extractor)",
            description=(
                "One asset-window (two accelerometer channels of 1 s at 25.6 kHz, one pressure "
                "channel of 1 s at 1 kHz): full extraction time against the rFFT + irFFT floor "
                "of the same samples, the encoded message against the raw 16-bit window, and "
                "the extractor's memory over many windows."
            ),
        ),
        Benchmark(
            name="agent",
            target="bench.bench_agent:run",
            title="Gateway agent (edge_agent)",
            description=(
                "An agent process serving the twelve Saltbush Flats pumps against a private "
                "Mosquitto: peak resident memory, CPU per window set and its share of one core, "
                "and the drain of a 7-day backlog from the on-disk outbox."
            ),
        ),
        Benchmark(
            name="service",
            target="bench.bench_service:run",
            title="Ingest, store and query (prognosis_service)",
            description=(
                "A private Mosquitto and private PostgreSQL/SQLite stores: the broker-only rate "
                "(the floor), MQTT ingest into each store as a share of it, HTTP batch ingest, "
                "history query latency at fleet scale, and time-to-failure and fleet-view "
                "latency over HTTP with 1,000 assets × 60 days of hourly windows from simulated "
                "pumps, assessed by the assessment worker (how many got a forecast, and how long "
                "assessing the fleet took, on SQLite). Needs Mosquitto and PostgreSQL."
            ),
        ),
        Benchmark(
            name="diagnosis",
            target="bench.bench_diagnosis:run",
            title="Diagnosis (prognosis_service.diagnosis)",
            description=(
                "The built-in classifier on held-out simulated pumps (unseen units, seed and "
                "operating points): macro-F1 of the classifier alone, of the combined diagnosis "
                "the service reports and of the rule evidence alone, overall and in the worst "
                "regime. No target is set by the issue; the figures are for comparison."
            ),
        ),
        Benchmark(
            name="chaos",
            target="bench.bench_chaos:run",
            title="Chaos run (wellspan.chaos)",
            description=(
                "The whole demo fleet on a private persistent Mosquitto and a private PostgreSQL "
                "while the broker, the service, each gateway agent and PostgreSQL are killed "
                "(SIGKILL) and restarted at seeded random times and the links are cut: faults "
                "injected, messages produced and stored, losses, duplicates, alert events "
                "missing at a webhook receiver and redeliveries. Quick: about a minute of "
                "faults; full: about twelve. Needs Mosquitto and PostgreSQL server binaries."
            ),
        ),
    ]
    return {b.name: b for b in entries}


REGISTRY: dict[str, Benchmark] = _registry()
"""Every known benchmark by name, in report order."""


def _python_command(argv: Sequence[str]) -> str:
    exe = Path(sys.executable)
    with contextlib.suppress(ValueError):
        exe = exe.relative_to(ROOT)
    return " ".join([str(exe), "-m", "bench", *argv])

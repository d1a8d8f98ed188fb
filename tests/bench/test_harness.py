"""Behaviour of the benchmark harness (``python -m bench``); no timing is asserted."""

from __future__ import annotations

import inspect
import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from bench.__main__ import main
from bench.harness import Benchmark, Figure, Target, machine_info, render_markdown, run_benchmark


def _tiny(*, quick: bool = False) -> list[Figure]:
    n = 10 if quick else 1000
    return [
        Figure(name="sum of the first n integers", value=float(sum(range(n))), unit="1",
               target=Target(text="≥ 40", op=">=", value=40.0), notes=f"n = {n}"),
        Figure(name="a figure that misses", value=5.0, unit="ms",
               target=Target(text="≤ 1 ms", op="<=", value=1.0)),
        Figure(name="informational", value=math.nan, unit="%"),
    ]  # fmt: skip


def _broken(*, quick: bool = False) -> list[Figure]:
    raise RuntimeError("the rig is down")


REGISTRY = {
    "tiny": Benchmark(name="tiny", target=_tiny, title="A tiny benchmark", description="Sums."),
    "broken": Benchmark(name="broken", target=_broken, title="A broken benchmark"),
    "later": Benchmark(
        name="later",
        target="bench.no_such_module_yet:run",
        title="Not written yet",
        missing="someone is writing bench/no_such_module_yet.py",
    ),
}


def test_quick_run_writes_table_and_machine_section(tmp_path: Path) -> None:
    out = tmp_path / "BENCHMARKS.md"
    code = main(["tiny", "--quick", "--out", str(out), "--no-progress"], registry=REGISTRY)
    assert code == 0
    text = out.read_text(encoding="utf-8")
    assert "## A tiny benchmark" in text
    assert "| figure | value | target | meets target | notes |" in text
    # 0 + 1 + ... + 9 = 45 in quick mode, beside its target and the verdict
    assert "| sum of the first n integers | 45.00 | ≥ 40 | yes | n = 10 |" in text
    assert "| a figure that misses | 5.00 ms | ≤ 1 ms | **no** |" in text
    assert "| informational | n/a | — | — |" in text
    assert "Quick mode" in text
    assert "## Machine" in text
    for row in ("| CPU |", "| cores (logical) |", "| memory |", "| Python |", "| numpy |",
                "| scipy |", "| date |"):  # fmt: skip
        assert row in text
    assert "## Reproduce" in text
    assert "-m bench tiny --quick --out" in text
    assert "broken" not in text  # only the named benchmark ran


def test_failure_and_missing_benchmarks_are_reported_not_raised(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "b.md"
    code = main(["--quick", "--out", str(out), "--no-progress", "--json"], registry=REGISTRY)
    assert code == 1  # one benchmark failed
    text = out.read_text(encoding="utf-8")
    assert "RuntimeError: the rig is down" in text
    assert "*Not wired yet:* someone is writing bench/no_such_module_yet.py" in text
    captured = capsys.readouterr()
    assert "Traceback" in captured.err and "the rig is down" in captured.err  # for the developer
    payload = json.loads(captured.out)
    status = {b["name"]: b["status"] for b in payload["benchmarks"]}
    assert status == {"tiny": "done", "broken": "failed", "later": "pending"}
    tiny = payload["benchmarks"][0]["figures"]
    assert tiny[0]["meets_target"] is True and tiny[1]["meets_target"] is False
    assert tiny[2]["value"] is None


def test_strict_fails_on_a_missed_target(tmp_path: Path) -> None:
    args = ["tiny", "--quick", "--out", str(tmp_path / "b.md"), "--no-progress", "--strict"]
    assert main(args, registry=REGISTRY) == 1


def test_bad_usage_exits_2_naming_the_problem(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert main(["nonesuch", "--out", str(tmp_path / "b.md")], registry=REGISTRY) == 2
    assert "unknown benchmark 'nonesuch'" in capsys.readouterr().err
    missing_dir = tmp_path / "no" / "b.md"
    assert main(["tiny", "--out", str(missing_dir)], registry=REGISTRY) == 2
    assert "does not exist" in capsys.readouterr().err
    assert not missing_dir.exists()


def test_target_comparisons() -> None:
    assert Target(text="≈ 80 %", op="between", value=70.0, upper=90.0).met_by(80.0) is True
    assert Target(text="≈ 80 %", op="between", value=70.0, upper=90.0).met_by(95.0) is False
    assert Target(text="p99 ≤ 20 ms", op="<=", value=20.0).met_by(20.0) is True
    assert Target(text="rare").met_by(0.1) is None
    assert Target(text="≤ 1", op="<=", value=1.0).met_by(math.nan) is None
    with pytest.raises(ValueError, match="op must be one of"):
        Target(text="x", op="~", value=1.0)
    with pytest.raises(ValueError, match="upper >= value"):
        Target(text="x", op="between", value=2.0, upper=1.0)


def test_a_non_figure_result_is_a_failure() -> None:
    def not_figures() -> list[Any]:
        return [1.0]

    bad = Benchmark(name="bad", target=not_figures, title="Bad")
    result = run_benchmark(bad)
    assert result.status == "failed"
    assert "must return Figure objects" in result.error


def test_machine_reads_cpuinfo_and_meminfo(tmp_path: Path) -> None:
    cpuinfo = tmp_path / "cpuinfo"
    cpuinfo.write_text("processor\t: 0\nmodel name\t: Example CPU @ 2.00GHz\n")
    meminfo = tmp_path / "meminfo"
    meminfo.write_text("MemTotal:       25165824 kB\nMemFree: 1 kB\n")
    m = machine_info(cpuinfo=cpuinfo, meminfo=meminfo)
    assert m.cpu_model == "Example CPU @ 2.00GHz"
    assert m.memory_gib == pytest.approx(24.0)
    text = render_markdown([], m, command="python -m bench")
    assert "| CPU | Example CPU @ 2.00GHz |" in text
    assert "| memory | 24.0 GiB |" in text


def test_registry_names_the_wired_benchmarks_and_their_run_functions() -> None:
    from bench.harness import REGISTRY

    wired = ["forecast", "anomaly", "extract", "agent", "service", "diagnosis"]
    assert list(REGISTRY)[: len(wired)] == wired
    for name in wired:
        func = REGISTRY[name].load()
        assert func is not None, name
        assert {"quick", "report"} <= set(inspect.signature(func).parameters), name
        assert REGISTRY[name].description, name
        assert not REGISTRY[name].missing, name


def test_wellspan_bench_runs_the_harness_and_names_itself_in_the_report(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    import bench.harness
    from wellspan.cli import main as wellspan_main

    monkeypatch.setattr(bench.harness, "REGISTRY", REGISTRY)
    monkeypatch.setattr("bench.__main__.REGISTRY", REGISTRY)
    out = tmp_path / "b.md"
    code = wellspan_main(["bench", "tiny", "--quick", "--no-progress", "--out", str(out)])
    assert code == 0
    text = out.read_text(encoding="utf-8")
    assert "| sum of the first n integers | 45.00 | ≥ 40 | yes | n = 10 |" in text
    assert f"wellspan bench tiny --quick --no-progress --out {out}" in text
    assert "sum of the first n integers" in capsys.readouterr().out
    assert wellspan_main(["bench", "nonesuch", "--out", str(out)]) == 2
    assert "wellspan bench: unknown benchmark 'nonesuch'" in capsys.readouterr().err
    assert wellspan_main(["bench", "--list"]) == 0
    assert capsys.readouterr().out.split()[0] == "tiny"


def test_wellspan_bench_is_a_registered_command() -> None:
    from wellspan.cli import COMMANDS, build_parser

    assert COMMANDS["bench"][0] == "wellspan.bench_command"
    parser, modules = build_parser()
    args = parser.parse_args(["bench", "extract", "agent", "--quick"])
    assert modules["bench"] == "wellspan.bench_command"
    assert (args.names, args.quick, args.strict) == (["extract", "agent"], True, False)


def test_k_of_n_alarm_rule() -> None:
    """Hand-worked: flags 1 1 0 1 1 1 0 0 0 0 with 3-of-4 raise at index 3 and clear at 7."""
    from bench.bench_anomaly import alarm_starts, k_of_n

    flags = np.array([1, 1, 0, 1, 1, 1, 0, 0, 0, 0], dtype=bool)
    assert k_of_n(flags, 3, 4).tolist() == [0, 0, 0, 1, 1, 1, 1, 0, 0, 0]
    assert alarm_starts(flags, 3, 4).tolist() == [3]
    assert alarm_starts(flags, 1, 1).tolist() == [0, 3]

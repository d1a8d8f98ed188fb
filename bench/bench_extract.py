"""Benchmark of the extractor on one asset-window (not a test; it measures, it asserts nothing).

One asset-window: two accelerometer channels of 1 s at 25.6 kHz and one pressure channel of
1 s at 1 kHz, synthetic data from a seeded generator (shaft lines, bearing impacts ringing a
resonance, noise; pressure with vane-pass pulsation). Reports the median full extraction time
(window set in, validated message out), the floor (bare rFFT + irFFT of the same samples), their
ratio, the encoded message size, the resident memory before and after 10,000 windows, and
tracemalloc's count of live Python/numpy allocations at checkpoints over a shorter run.

Run: ``wellspan bench extract`` (the report) or
``.venv/bin/python -m bench.bench_extract [--repeats N] [--windows N] [--traced-windows N]``
(the table alone).

Targets (issue #2): ≤ 10 ms per asset-window on one core and ≤ 10× the floor; the median
encoded message ≤ 200 bytes and ≥ 750× smaller than the raw 16-bit window; memory flat over
10,000 windows. The comparison with a general-purpose feature-extraction library (≥ 300×
faster) is an optional extra: tsfresh's ``extract_features`` on the same channels, with its
efficient settings (and, for scale, its minimal ones), when it is installed
(``pip install -e '.[compare]'``); otherwise the figure says it was not measured.
"""

from __future__ import annotations

import argparse
import gc
import math
import resource
import statistics
import sys
import time
import tracemalloc
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

import numpy as np

from bench.harness import Figure, Report, Target
from edge_agent.assets import AssetConfig, BearingGeometry, ChannelConfig
from edge_agent.extractor import Extractor
from edge_agent.windows import ChannelWindow, WindowSet

FS_ACCEL = 25_600.0
FS_PRESSURE = 1000.0
START = datetime(2026, 3, 1, tzinfo=UTC)


def _asset() -> AssetConfig:
    bearing = BearingGeometry(
        n_elements=9, element_diameter_mm=7.94, pitch_diameter_mm=39.04, contact_angle_deg=0.0
    )
    return AssetConfig(
        asset_id="MAL-P1",
        bearings={"de": bearing, "nde": bearing},
        channels=(
            ChannelConfig(name="de_accel", kind="accel", unit="g", fs_hz=FS_ACCEL, bearing="de"),
            ChannelConfig(name="nde_accel", kind="accel", unit="g", fs_hz=FS_ACCEL, bearing="nde"),
            ChannelConfig(
                name="discharge_pressure", kind="pressure", unit="kPa", fs_hz=FS_PRESSURE
            ),
        ),
    )


def _window_set(rng: np.random.Generator, k: int) -> WindowSet:
    n = int(FS_ACCEL)
    t = np.arange(n) / FS_ACCEL
    shaft = rng.uniform(20.0, 29.0)
    ring_t = t[:300]
    ring = np.exp(-600.0 * ring_t) * np.sin(2 * np.pi * 5200.0 * ring_t)
    impacts = np.zeros(n)
    impacts[:: int(FS_ACCEL / (3.58 * shaft))] = 1.0
    channels: dict[str, ChannelWindow] = {}
    for name in ("de_accel", "nde_accel"):
        x = 0.05 * np.sin(2 * np.pi * shaft * t) + 0.02 * np.sin(2 * np.pi * 2 * shaft * t)
        x += 0.3 * np.convolve(impacts, ring)[:n] + 0.03 * rng.normal(size=n)
        channels[name] = ChannelWindow(channel=name, kind="accel", fs=FS_ACCEL, samples=x, unit="g")
    tp = np.arange(int(FS_PRESSURE)) / FS_PRESSURE
    p = 450.0 + 3.0 * np.sin(2 * np.pi * 6 * shaft * tp) + rng.normal(size=tp.size)
    channels["discharge_pressure"] = ChannelWindow(
        channel="discharge_pressure", kind="pressure", fs=FS_PRESSURE, samples=p, unit="kPa"
    )
    return WindowSet(
        asset_id="MAL-P1",
        start=START + timedelta(seconds=k),
        channels=channels,
        process={"drive_speed_rpm": shaft * 60.0 * 1.01},
    )


def _median_ms(func: object, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        func()  # type: ignore[operator]
        times.append(time.perf_counter() - t0)
    return statistics.median(times) * 1e3


def _rss_mib() -> float:
    with open("/proc/self/statm") as f:
        pages = int(f.read().split()[1])
    return pages * resource.getpagesize() / 2**20


@dataclass(frozen=True)
class Measurement:
    """What one run of the extractor benchmark measured (times in ms, sizes in bytes)."""

    samples: int
    full_ms: float
    compute_ms: float
    floor_ms: float
    indicators: int
    encoded_median_bytes: float
    windows: int
    elapsed_s: float
    rss_before_mib: float
    rss_after_mib: float
    traced_step: int
    traced_bytes: tuple[int, ...]
    traced_peak_bytes: int
    repeats: int


def measure(
    *,
    repeats: int = 300,
    windows: int = 10_000,
    traced_windows: int = 2000,
    report: Report | None = None,
) -> Measurement:
    """Time the extractor and its floor, size the encoded messages, watch memory."""
    from shared_schema import encode_indicators

    def progress(done: float, what: str) -> None:
        if report is not None:
            report(done, 4.0, what)

    rng = np.random.default_rng(0)
    pool = [_window_set(rng, k) for k in range(16)]
    extractor = Extractor(_asset())
    ws = pool[0]
    a = np.stack([ws.channels["de_accel"].samples, ws.channels["nde_accel"].samples])
    p = ws.channels["discharge_pressure"].samples

    def floor() -> None:
        np.fft.irfft(np.fft.rfft(a, axis=-1), n=a.shape[-1], axis=-1)
        np.fft.irfft(np.fft.rfft(p), n=p.size)

    def full() -> None:
        extractor.extract(ws, gateway_id="gw-mallee", site="saltbush-flats", sequence=1)

    progress(0.0, "timing extraction and the FFT floor")
    for _ in range(20):  # warm up
        full()
        floor()
    t_full = _median_ms(full, repeats)
    t_compute = _median_ms(lambda: extractor.compute(ws), repeats)
    t_floor = _median_ms(floor, repeats)
    sizes = [
        len(
            encode_indicators(
                extractor.extract(w, gateway_id="gw-mallee", site="saltbush-flats", sequence=k),
                extractor.layout,
            )
        )
        for k, w in enumerate(pool)
    ]

    def run_windows(count: int) -> None:
        for k in range(count):
            extractor.extract(pool[k % len(pool)], gateway_id="gw", site="site", sequence=k)

    # RSS over the full count at normal speed; tracemalloc (slow) over a shorter run, with
    # checkpoints so that steady growth would show.
    progress(1.0, f"memory over {windows:,} windows")
    run_windows(200)
    gc.collect()
    rss_before = _rss_mib()
    t0 = time.perf_counter()
    run_windows(windows)
    elapsed = time.perf_counter() - t0
    gc.collect()
    rss_after = _rss_mib()
    progress(3.0, f"tracemalloc over {traced_windows:,} windows")
    tracemalloc.start()
    run_windows(200)
    gc.collect()
    traced = [tracemalloc.get_traced_memory()[0]]
    step = max(traced_windows // 4, 1)
    for _ in range(4):
        run_windows(step)
        gc.collect()
        traced.append(tracemalloc.get_traced_memory()[0])
    traced_peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    progress(4.0, "done")
    return Measurement(
        samples=int(a.size + p.size),
        full_ms=t_full,
        compute_ms=t_compute,
        floor_ms=t_floor,
        indicators=len(extractor.layout.indicators),
        encoded_median_bytes=float(statistics.median(sizes)),
        windows=windows,
        elapsed_s=elapsed,
        rss_before_mib=rss_before,
        rss_after_mib=rss_after,
        traced_step=step,
        traced_bytes=tuple(traced),
        traced_peak_bytes=traced_peak,
        repeats=repeats,
    )


def library_ms(ws: WindowSet, settings: str, repeats: int) -> float:
    """Median wall time (ms) of tsfresh's ``extract_features`` on the same window set, one
    series per channel, on one core (``n_jobs=0``).

    ``settings``: ``"efficient"`` (``EfficientFCParameters``: every feature calculator but those
    tsfresh marks as of high computational cost) or ``"minimal"`` (``MinimalFCParameters``).
    """
    import pandas as pd
    from tsfresh import extract_features
    from tsfresh.feature_extraction import EfficientFCParameters, MinimalFCParameters

    params = EfficientFCParameters() if settings == "efficient" else MinimalFCParameters()
    frame = pd.concat(
        pd.DataFrame({"id": name, "time": np.arange(ch.samples.size), "value": ch.samples})
        for name, ch in ws.channels.items()
    )
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        extract_features(
            frame,
            column_id="id",
            column_sort="time",
            column_value="value",
            default_fc_parameters=params,
            n_jobs=0,
            disable_progressbar=True,
        )
        times.append((time.perf_counter() - t0) * 1000.0)
    return statistics.median(times)


def _library_figures(full_ms: float, *, repeats: int) -> list[Figure]:
    target = Target(text="≥ 300× faster (optional extra)", op=">=", value=300.0)
    name = "extraction / general-purpose feature library (tsfresh, efficient settings)"
    try:
        import tsfresh
    except ImportError:
        return [Figure(name=name, value=math.nan, unit="×", target=target,
                       notes="not measured: the optional comparison library is not installed "
                       "(pip install -e '.[compare]')")]  # fmt: skip
    import warnings

    ws = _window_set(np.random.default_rng(0), 0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # tsfresh's and pandas' deprecation notices
        efficient = library_ms(ws, "efficient", repeats)
        minimal = library_ms(ws, "minimal", max(repeats, 5))
    version = getattr(tsfresh, "__version__", "?")
    return [
        Figure(name=name, value=efficient / full_ms, unit="× faster", target=target, digits=0,
               notes=f"tsfresh {version} extract_features on the same three channels, one core: "
               f"{efficient / 1000:.1f} s per window set (median of {repeats}); ours "
               f"{full_ms:.2f} ms"),
        Figure(name="extraction / tsfresh minimal settings (10 basic statistics)",
               value=minimal / full_ms, unit="× faster", digits=1,
               notes=f"{minimal:.1f} ms per window set: mean, median, variance, extrema and the "
               "like, none of the spectral, order or envelope indicators"),
    ]  # fmt: skip


def run(*, quick: bool = False, report: Report | None = None) -> list[Figure]:
    """The extractor's figures for the benchmark report."""
    if quick:
        m = measure(repeats=30, windows=300, traced_windows=100, report=report)
    else:
        m = measure(report=report)
    raw16 = 2 * m.samples  # the raw window as 16-bit ADC counts
    growth_mib = (m.traced_bytes[-1] - m.traced_bytes[1]) / 2**20
    window = "two accel channels 1 s at 25.6 kHz + one pressure channel 1 s at 1 kHz"
    return [
        Figure(
            name="extraction per asset-window, median",
            value=m.full_ms,
            unit="ms",
            target=Target(text="≤ 10 ms on one core", op="<=", value=10.0),
            notes=f"{window}; window set in, validated message out; {m.repeats} runs",
        ),
        Figure(
            name="floor: rFFT + irFFT of the same samples, median",
            value=m.floor_ms,
            unit="ms",
            notes=f"{m.samples:,} samples; measured in the same run; {m.repeats} runs",
            digits=3,
        ),
        Figure(
            name="extraction / FFT floor",
            value=m.full_ms / m.floor_ms,
            unit="×",
            target=Target(text="≤ 10× the floor", op="<=", value=10.0),
            digits=1,
        ),
        Figure(
            name="indicators only (compute), median",
            value=m.compute_ms,
            unit="ms",
            notes="without building and validating the message",
        ),
        *_library_figures(m.full_ms, repeats=1 if quick else 3),
        Figure(
            name="encoded message, median",
            value=m.encoded_median_bytes,
            unit="bytes",
            target=Target(text="≤ 200 bytes", op="<=", value=200.0),
            notes=f"{m.indicators} indicators, binary frame; median of 16 window sets",
            digits=0,
        ),
        Figure(
            name="raw 16-bit window / encoded message",
            value=raw16 / m.encoded_median_bytes,
            unit="×",
            target=Target(text="≥ 750× smaller", op=">=", value=750.0),
            notes=f"raw {raw16:,} bytes ({m.samples:,} samples × 2 bytes)",
            digits=0,
        ),
        Figure(
            name=f"traced Python/numpy memory growth over {4 * m.traced_step:,} windows",
            value=growth_mib,
            unit="MiB",
            target=Target(text="flat (growth ≤ 1 MiB)", op="<=", value=1.0),
            notes="tracemalloc, after a warm-up of 200 windows; checkpoints "
            + " / ".join(f"{v / 1024:.0f}" for v in m.traced_bytes)
            + " KiB",
            digits=3,
        ),
        Figure(
            name=f"resident memory growth over {m.windows:,} windows",
            value=m.rss_after_mib - m.rss_before_mib,
            unit="MiB",
            notes=f"RSS {m.rss_before_mib:.1f} → {m.rss_after_mib:.1f} MiB "
            f"({m.elapsed_s:.0f} s); the allocator may keep freed pages",
        ),
    ]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=300, help="timed runs (default 300)")
    parser.add_argument(
        "--windows", type=int, default=10_000, help="windows for the memory check (default 10000)"
    )
    parser.add_argument(
        "--traced-windows",
        type=int,
        default=2000,
        help="windows under tracemalloc, which slows Python about fivefold (default 2000)",
    )
    args = parser.parse_args(argv)
    if args.repeats < 1 or args.windows < 1 or args.traced_windows < 1:
        print("bench_extract: --repeats, --windows, --traced-windows must be >= 1", file=sys.stderr)
        return 2
    m = measure(repeats=args.repeats, windows=args.windows, traced_windows=args.traced_windows)
    rows = [
        ("samples per asset-window", f"{m.samples:,}"),
        ("full extraction (extract), median", f"{m.full_ms:.2f} ms"),
        ("indicators only (compute), median", f"{m.compute_ms:.2f} ms"),
        ("floor: rFFT + irFFT, median", f"{m.floor_ms:.3f} ms"),
        ("ratio full / floor", f"{m.full_ms / m.floor_ms:.1f}"),
        ("indicators in layout", str(m.indicators)),
        ("encoded message, median", f"{m.encoded_median_bytes:.0f} bytes"),
        (
            f"RSS before / after {m.windows:,} windows ({m.elapsed_s:.0f} s)",
            f"{m.rss_before_mib:.1f} / {m.rss_after_mib:.1f} MiB",
        ),
        (
            f"traced memory every {m.traced_step:,} windows",
            " / ".join(f"{v / 1024:.1f}" for v in m.traced_bytes) + " KiB",
        ),
        ("traced peak", f"{m.traced_peak_bytes / 2**20:.2f} MiB"),
    ]
    width = max(len(r[0]) for r in rows)
    print(f"{'quantity':<{width}}  value")
    print(f"{'-' * width}  {'-' * 24}")
    for name, value in rows:
        print(f"{name:<{width}}  {value}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

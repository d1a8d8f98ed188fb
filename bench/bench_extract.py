"""Benchmark of the extractor on one asset-window (not a test; it measures, it asserts nothing).

One asset-window: two accelerometer channels of 1 s at 25.6 kHz and one pressure channel of
1 s at 1 kHz, synthetic data from a seeded generator (shaft lines, bearing impacts ringing a
resonance, noise; pressure with vane-pass pulsation). Reports the median full extraction time
(window set in, validated message out), the floor (bare rFFT + irFFT of the same samples), their
ratio, the encoded message size, the resident memory before and after 10,000 windows, and
tracemalloc's count of live Python/numpy allocations at checkpoints over a shorter run.

Run: ``.venv/bin/python -m bench.bench_extract [--repeats N] [--windows N] [--traced-windows N]``
"""

from __future__ import annotations

import argparse
import gc
import resource
import statistics
import sys
import time
import tracemalloc
from datetime import UTC, datetime, timedelta

import numpy as np

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

    for _ in range(20):  # warm up
        full()
        floor()
    t_full = _median_ms(full, args.repeats)
    t_compute = _median_ms(lambda: extractor.compute(ws), args.repeats)
    t_floor = _median_ms(floor, args.repeats)

    size: int | str
    try:
        from shared_schema import encode_indicators

        msg = extractor.extract(ws, gateway_id="gw-mallee", site="saltbush-flats", sequence=12345)
        size = len(encode_indicators(msg, extractor.layout))
    except ImportError:
        size = "codec not available"

    def run(count: int) -> None:
        for k in range(count):
            extractor.extract(pool[k % len(pool)], gateway_id="gw", site="site", sequence=k)

    # RSS over the full count at normal speed; tracemalloc (slow) over a shorter run, with
    # checkpoints so that steady growth would show.
    run(200)
    gc.collect()
    rss_before = _rss_mib()
    t0 = time.perf_counter()
    run(args.windows)
    elapsed = time.perf_counter() - t0
    gc.collect()
    rss_after = _rss_mib()
    tracemalloc.start()
    run(200)
    gc.collect()
    traced = [tracemalloc.get_traced_memory()[0]]
    step = max(args.traced_windows // 4, 1)
    for _ in range(4):
        run(step)
        gc.collect()
        traced.append(tracemalloc.get_traced_memory()[0])
    traced_peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()

    rows = [
        ("samples per asset-window", f"{a.size + p.size:,}"),
        ("full extraction (extract), median", f"{t_full:.2f} ms"),
        ("indicators only (compute), median", f"{t_compute:.2f} ms"),
        ("floor: rFFT + irFFT, median", f"{t_floor:.3f} ms"),
        ("ratio full / floor", f"{t_full / t_floor:.1f}"),
        ("indicators in layout", str(len(extractor.layout.indicators))),
        ("encoded message", f"{size} bytes" if isinstance(size, int) else size),
        (
            f"RSS before / after {args.windows:,} windows ({elapsed:.0f} s)",
            f"{rss_before:.1f} / {rss_after:.1f} MiB",
        ),
        (
            f"traced memory every {step:,} windows",
            " / ".join(f"{v / 1024:.1f}" for v in traced) + " KiB",
        ),
        ("traced peak", f"{traced_peak / 2**20:.2f} MiB"),
    ]
    width = max(len(r[0]) for r in rows)
    print(f"{'quantity':<{width}}  value")
    print(f"{'-' * width}  {'-' * 24}")
    for name, value in rows:
        print(f"{name:<{width}}  {value}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

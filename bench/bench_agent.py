"""Benchmark of the gateway agent: memory, CPU share, backlog drain.

Run: ``wellspan bench agent`` (the report) or ``.venv/bin/python -m bench.bench_agent`` (a table);
both need /usr/sbin/mosquitto.

* resident memory of an agent process serving the twelve Saltbush Flats pumps (simulator source,
  real extractor, outbox, MQTT uplink to a local broker), peak (VmHWM) after ``--rss-windows``
  window sets;
* CPU per window set of the whole agent process (extractor, alarms, budget, encoding, outbox
  commit, sender, paho) with the raw windows pre-generated, so the simulator's own cost is not
  counted (a DAQ driver delivers samples), and from it the CPU share at one window per asset per
  minute for twelve assets;
* backlog drain: the outbox filled with 7 days x 12 assets x 1 window/min = 120,960 realistic
  encoded frames, then an agent started against a local broker; time until every message has
  been acknowledged, and the outbox's size on disk.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import threading
import time
import uuid
from collections.abc import Iterable
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

from bench.harness import Figure, Report, Target

ROOT = Path(__file__).resolve().parents[1]
START = datetime(2026, 3, 1, tzinfo=UTC)


def _proc_status(field: str) -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1]) * 1024
    return 0


def _config(tmp: Path, url: str, **overrides: Any) -> Any:
    from edge_agent.config import GatewayConfig
    from edge_agent.simulator import SALTBUSH_ASSET_IDS, saltbush_asset

    data: dict[str, Any] = {
        "gateway_id": "gw-bench",
        "site": "saltbush-flats",
        "broker": {"url": url},
        "schedule": {"interval_s": 60, "clock": "simulated",
                     "simulated_start": START.isoformat(), "simulated_speed": 0},
        "budget": {"bytes_per_day": 10**9, "default_relative": 0.0, "adapt": False},
        "outbox": {"path": str(tmp / "outbox.sqlite"), "max_bytes": 500_000_000},
        "alarms": {"zone_change": True},
        "assets": [saltbush_asset(a).model_dump() for a in SALTBUSH_ASSET_IDS],
    }  # fmt: skip
    for k, v in overrides.items():
        data.setdefault(k, {}).update(v)
    return GatewayConfig.model_validate(data)


class _Pregenerated:
    """One window set per asset generated up front, handed out with the tick's time."""

    def __init__(self, assets: Iterable[Any]) -> None:
        from dataclasses import replace

        from edge_agent.simulator import saltbush_simulators

        sims = saltbush_simulators()
        self._replace = replace
        self._ws = {a.asset_id: sims[a.asset_id].window(START) for a in assets}

    def windows(self, asset: Any, due: datetime) -> list[Any]:
        return [self._replace(self._ws[asset.asset_id], start=due)]

    def settle(self, window_set: Any, error: str | None) -> None:
        pass

    def close(self) -> None:
        pass


class _Nothing(_Pregenerated):
    def __init__(self) -> None:
        pass

    def windows(self, asset: Any, due: datetime) -> list[Any]:
        return []


def child_rss(url: str, windows: int) -> dict[str, float]:
    from edge_agent.agent import Agent

    with tempfile.TemporaryDirectory() as d:
        agent = Agent(_config(Path(d), url), max_windows=windows, drain_timeout_s=10)
        summary = agent.run()
    return {"rss_peak_mb": _proc_status("VmHWM") / 1e6, "windows": summary.windows}


def child_cpu(url: str, windows: int) -> dict[str, float]:
    from edge_agent.agent import Agent

    with tempfile.TemporaryDirectory() as d:
        cfg = _config(Path(d), url)
        source = _Pregenerated(cfg.assets)
        warm = Agent(cfg, source=source, max_windows=24, drain_timeout_s=10)
        warm.run()  # first calls build FFT plans and caches
        agent = Agent(cfg, source=source, max_windows=windows, drain_timeout_s=10)
        cpu0, wall0 = time.process_time(), time.monotonic()
        summary = agent.run()
        cpu = time.process_time() - cpu0
        wall = time.monotonic() - wall0
    return {
        "cpu_s_per_window": cpu / summary.windows,
        "producer_cpu_s_per_window": summary.cpu_s_per_window,
        "wall_s": wall,
        "windows": summary.windows,
    }


def _child(kind: str, url: str, windows: int) -> dict[str, float]:
    out = subprocess.run(
        [sys.executable, "-m", "bench.bench_agent", "--child", kind, "--url", url,
         "--windows", str(windows)],
        cwd=ROOT, capture_output=True, text=True, timeout=1800,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
    )  # fmt: skip
    if out.returncode != 0:
        raise RuntimeError(f"{kind} child failed:\n{out.stderr[-3000:]}")
    return dict(json.loads(out.stdout.strip().splitlines()[-1]))


def fill_outbox(path: Path, *, days: float = 7, assets: int = 12) -> int:
    """Fill an outbox as 'days' of outage would: one realistic frame per asset per minute."""
    from edge_agent.extractor import Extractor
    from edge_agent.outbox import NewMessage, Outbox, Priority
    from edge_agent.simulator import SALTBUSH_ASSET_IDS, saltbush_simulators
    from shared_schema import encode_indicators

    sims = saltbush_simulators()
    ids = list(SALTBUSH_ASSET_IDS)[:assets]
    templates = {}
    for a in ids:
        ex = Extractor(sims[a].asset)
        msg = ex.extract(sims[a].window(START), gateway_id="gw-bench", site="saltbush-flats",
                         sequence=0)  # fmt: skip
        templates[a] = (msg, ex.layout)
    box = Outbox(path, gateway_id="gw-bench", site="saltbush-flats", max_bytes=500_000_000)
    seq = 0
    for minute in range(round(days * 1440)):
        batch = []
        t = START + timedelta(minutes=minute)
        for a in ids:
            msg, layout = templates[a]
            m = msg.model_copy(update={"sequence": seq, "window_start": t,
                                       "message_id": uuid.uuid4()})  # fmt: skip
            batch.append(NewMessage("indicators", encode_indicators(m, layout), t,
                                    Priority.ROUTINE, a, seq))  # fmt: skip
            seq += 1
        box.put(batch)
    box.close()
    return seq


def drain(url: str, host: str, port: int, tmp: Path, *, days: float = 7) -> dict[str, float]:
    from edge_agent.agent import Agent
    from edge_agent.outbox import Outbox

    sys.path.insert(0, str(ROOT))
    from tests.edge_agent.helpers import Receiver

    t0 = time.monotonic()
    total = fill_outbox(tmp / "outbox.sqlite", days=days)
    fill_s = time.monotonic() - t0
    box = Outbox(tmp / "outbox.sqlite", gateway_id="gw-bench", site="saltbush-flats",
                 max_bytes=500_000_000)  # fmt: skip
    stored = box.stats().bytes
    box.close()  # checkpoints the WAL into the main file
    disk = sum(p.stat().st_size for p in tmp.glob("outbox.sqlite*"))
    receiver = Receiver(host, port).start()
    cfg = _config(tmp, url, schedule={"clock": "real"})
    agent = Agent(cfg, source=_Nothing(), drain_timeout_s=5)
    runner = threading.Thread(target=agent.run)
    t0 = time.monotonic()
    runner.start()
    while agent.outbox.stats().messages > 0 and time.monotonic() - t0 < 1800:
        time.sleep(0.05)
    drain_s = time.monotonic() - t0
    agent.stop()
    runner.join()
    deadline = time.monotonic() + 60
    frames = 0
    while time.monotonic() < deadline:
        frames = len({m.message_id for m in receiver.indicators()})
        if frames >= total:
            break
        time.sleep(0.5)
    mqtt_messages = len(receiver.of_kind("indicators"))
    receiver.stop()
    return {
        "messages": total,
        "fill_s": fill_s,
        "outbox_disk_mb": disk / 1e6,
        "outbox_counted_mb": stored / 1e6,
        "drain_s": drain_s,
        "received_frames": frames,
        "mqtt_messages": mqtt_messages,
    }


FULL_BACKLOG = 7 * 12 * 1440  # messages after a 7-day outage of 12 assets at 1 window/min


def run(*, quick: bool = False, report: Report | None = None) -> list[Figure]:
    """The gateway agent's figures for the benchmark report (a private Mosquitto)."""
    from tests.brokers import MosquittoBroker

    rss_windows, cpu_windows, days = (24, 48, 0.05) if quick else (240, 600, 7.0)

    def progress(done: float, what: str) -> None:
        if report is not None:
            report(done, 3.0, what)

    with tempfile.TemporaryDirectory() as d:
        tmp = Path(d)
        broker = MosquittoBroker(tmp / "mosquitto")
        broker.start()
        try:
            progress(0.0, f"resident memory over {rss_windows} window sets")
            rss = _child("rss", broker.url, rss_windows)
            progress(1.0, f"CPU over {cpu_windows} window sets")
            cpu = _child("cpu", broker.url, cpu_windows)
            progress(2.0, f"backlog drain ({days:g} days x 12 assets)")
            (tmp / "drain").mkdir()
            dr = drain(broker.url, broker.host, broker.port, tmp / "drain", days=days)
            progress(3.0, "done")
        finally:
            broker.stop()
    share = 100.0 * 12 * cpu["cpu_s_per_window"] / 60.0
    rate = dr["messages"] / dr["drain_s"]
    scaled = (
        ""
        if dr["messages"] == FULL_BACKLOG
        else (f"; projected linearly from a backlog of {dr['messages']:,.0f} messages (--quick)")
    )
    return [
        Figure(
            name="resident memory, 12 assets (peak)",
            value=rss["rss_peak_mb"],
            unit="MB",
            target=Target(text="≤ 150 MB", op="<=", value=150.0),
            notes=f"VmHWM of an agent process after {rss['windows']:.0f} window sets "
            "(simulator, extractor, outbox, MQTT uplink)",
            digits=0,
        ),
        Figure(
            name="CPU per window set (whole process)",
            value=1e3 * cpu["cpu_s_per_window"],
            unit="ms",
            notes=f"{cpu['windows']:.0f} pre-generated window sets; producer thread alone "
            f"{1e3 * cpu['producer_cpu_s_per_window']:.1f} ms",
            digits=1,
        ),
        Figure(
            name="CPU share, 12 assets at 1 window/min",
            value=share,
            unit="% of one core",
            target=Target(text="< 2 % of one core", op="<", value=2.0),
        ),
        Figure(
            name="backlog drain rate to a local broker",
            value=rate,
            unit="windows/s",
            notes=f"{dr['messages']:,.0f} messages in {dr['drain_s']:.1f} s; "
            f"{dr['received_frames']:,.0f} unique frames received in "
            f"{dr['mqtt_messages']:,.0f} MQTT messages",
            digits=0,
        ),
        Figure(
            name="drain of a 7-day backlog (120,960 messages)",
            value=FULL_BACKLOG / rate,
            unit="s",
            target=Target(text="within 10 minutes (≤ 600 s)", op="<=", value=600.0),
            notes=f"measured{scaled}",
            digits=1,
        ),
        Figure(
            name="outbox on disk for a 7-day backlog",
            value=dr["outbox_disk_mb"] * FULL_BACKLOG / dr["messages"],
            unit="MB",
            target=Target(text="≤ 60 MB", op="<=", value=60.0),
            notes=f"SQLite outbox with its WAL after a checkpoint{scaled}",
            digits=1,
        ),
    ]


def main() -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--child", choices=("rss", "cpu"))
    p.add_argument("--url")
    p.add_argument("--windows", type=int, default=240)
    p.add_argument("--rss-windows", type=int, default=240)
    p.add_argument("--cpu-windows", type=int, default=600)
    p.add_argument("--skip-drain", action="store_true")
    args = p.parse_args()
    if args.child:
        fn = child_rss if args.child == "rss" else child_cpu
        print(json.dumps(fn(args.url, args.windows)))
        return 0

    sys.path.insert(0, str(ROOT))
    from tests.brokers import MosquittoBroker

    rows: list[tuple[str, str, str]] = []
    with tempfile.TemporaryDirectory() as d:
        tmp = Path(d)
        broker = MosquittoBroker(tmp / "mosquitto")
        broker.start()
        try:
            rss = _child("rss", broker.url, args.rss_windows)
            rows.append(("resident memory, 12 assets (peak)", f"{rss['rss_peak_mb']:.0f} MB",
                         "<= 150 MB"))  # fmt: skip
            cpu = _child("cpu", broker.url, args.cpu_windows)
            share = 12 * cpu["cpu_s_per_window"] / 60.0
            rows.append(("CPU per window set (whole process)",
                         f"{cpu['cpu_s_per_window'] * 1e3:.1f} ms", ""))  # fmt: skip
            rows.append(("CPU per window set (producer thread)",
                         f"{cpu['producer_cpu_s_per_window'] * 1e3:.1f} ms", ""))  # fmt: skip
            rows.append(("CPU share, 12 assets at 1 window/min", f"{share * 100:.2f} %",
                         "< 2 % of one core"))  # fmt: skip
            if not args.skip_drain:
                (tmp / "drain").mkdir()
                dr = drain(broker.url, broker.host, broker.port, tmp / "drain")
                rows.append(("backlog (7 days x 12 assets)", f"{dr['messages']:,.0f} messages", ""))
                rows.append(("outbox on disk for it", f"{dr['outbox_disk_mb']:.1f} MB",
                             "<= 60 MB"))  # fmt: skip
                rows.append(("drain to the local broker", f"{dr['drain_s']:.1f} s",
                             "<= 600 s"))  # fmt: skip
                rows.append(("drain rate", f"{dr['messages'] / dr['drain_s']:,.0f} windows/s", ""))
                rows.append(("frames received (unique ids)", f"{dr['received_frames']:,}", ""))
                rows.append(("MQTT messages for them", f"{dr['mqtt_messages']:,}", ""))
        finally:
            broker.stop()
    width = max(len(r[0]) for r in rows)
    print(f"{'measure':<{width}}  {'value':>20}  target")
    print(f"{'-' * width}  {'-' * 20}  {'-' * 17}")
    for name, value, target in rows:
        print(f"{name:<{width}}  {value:>20}  {target}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

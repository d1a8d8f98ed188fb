"""``wellspan demo`` — the whole job on one machine, in a few minutes.

A private Mosquitto broker (or, where Mosquitto is not installed, the embedded Python broker of
`wellspan.embedded_broker`), the prognosis service (``wellspan serve``, SQLite in a temporary
folder or ``--postgres URL``) and the four Saltbush Flats gateways (``wellspan edge``, one process
per pad, three pumps each) run as real processes. The pumps live through months of simulated
time: some stay healthy, others develop bearing defects, imbalance, misalignment, cavitation or
impeller wear, some are repaired part-way (recorded with the service as maintenance events), and
one gateway loses its link for a while and catches up from its outbox. At the end the demo
prints the fleet ranked by risk, the alerts, what each gateway sent against its byte budget and
the dashboard's address; ``--keep`` leaves the service running for the dashboard.
"""

from __future__ import annotations

import argparse
import signal
import sys
import time
from types import FrameType
from typing import Any

from wellspan.clikit import EXIT_OK, EXIT_PROBLEM, UsageError, print_json, print_table
from wellspan.demo.engine import (
    CAUTION,
    DemoEngine,
    DemoError,
    DemoOptions,
    GatewayProgress,
    pad_ids,
)

__all__ = ["add_arguments", "run"]

_PLAIN_EVERY_S = 5.0


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.epilog = CAUTION
    p.add_argument("--days", type=float, default=180.0, help="simulated days (default 180)")
    p.add_argument(
        "--every-hours",
        type=float,
        default=3.0,
        help="simulated hours between a pump's windows (default 3)",
    )
    p.add_argument(
        "--minutes",
        type=float,
        default=3.0,
        help="wall time the simulated span should take, minutes (default 3)",
    )
    p.add_argument(
        "--speed",
        type=float,
        help="simulated seconds per real second (instead of --minutes)",
    )
    p.add_argument(
        "--pads",
        help=f"comma-separated pads to run (default all: {','.join(pad_ids())})",
    )
    p.add_argument(
        "--postgres",
        metavar="URL",
        help="use this (empty) PostgreSQL database, e.g. postgresql+psycopg://user@host/db",
    )
    p.add_argument(
        "--broker",
        choices=("auto", "mosquitto", "embedded"),
        default="auto",
        help="MQTT broker: Mosquitto when installed, else an embedded Python broker (default auto)",
    )
    p.add_argument("--seed", type=int, default=2026, help="seed of the fleet's story")
    p.add_argument(
        "--keep",
        action="store_true",
        help="keep the service and broker running for the dashboard until Ctrl-C",
    )
    p.add_argument("--json", action="store_true", help="print the summary as JSON on stdout")


def _options(args: argparse.Namespace) -> DemoOptions:
    pads = tuple(s.strip() for s in args.pads.split(",") if s.strip()) if args.pads else ()
    opts = DemoOptions(
        days=args.days,
        every_hours=args.every_hours,
        minutes=args.minutes,
        speed=args.speed,
        pads=pads,
        postgres=args.postgres,
        seed=args.seed,
        broker=args.broker,
    )
    try:
        opts.validate()
    except DemoError as exc:
        raise UsageError(str(exc)) from None
    return opts


class _Progress:
    """Simulated time and messages per gateway on stderr: a live display on a terminal, plain
    lines every few seconds otherwise."""

    def __init__(self) -> None:
        self.tty = sys.stderr.isatty()
        self._last_plain = 0.0
        self._rich: Any = None
        self._tasks: dict[str, Any] = {}

    def __enter__(self) -> _Progress:
        if self.tty:
            from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

            self._rich = Progress(
                TextColumn("{task.fields[gateway]:<12}"),
                BarColumn(),
                TextColumn("{task.fields[detail]}"),
                TimeElapsedColumn(),
                transient=False,
            )
            self._rich.__enter__()
        return self

    def __exit__(self, *exc: object) -> None:
        if self._rich is not None:
            self._rich.__exit__(None, None, None)

    @staticmethod
    def _detail(p: GatewayProgress) -> str:
        when = p.simulated_at.strftime("%Y-%m-%d %H:%M") if p.simulated_at else "starting"
        link = "" if p.link_up else "  LINK DOWN (queueing)"
        done = "" if p.running else "  done"
        return f"{when}  sent {p.sent:>5}  stored {p.stored:>5}  queued {p.pending:>4}{link}{done}"

    def __call__(self, progress: list[GatewayProgress]) -> None:
        if self._rich is not None:
            for p in progress:
                if p.gateway_id not in self._tasks:
                    self._tasks[p.gateway_id] = self._rich.add_task(
                        p.gateway_id, total=1.0, gateway=p.gateway_id, detail=""
                    )
                self._rich.update(
                    self._tasks[p.gateway_id], completed=p.fraction, detail=self._detail(p)
                )
            return
        now = time.monotonic()
        if now - self._last_plain < _PLAIN_EVERY_S and any(p.running for p in progress):
            return
        self._last_plain = now
        for p in progress:
            print(f"demo: {p.gateway_id:<12} {p.fraction:4.0%}  {self._detail(p)}", file=sys.stderr)


def _say(text: str) -> None:
    print(f"demo: {text}", file=sys.stderr)


def _fmt(v: Any, digits: int = 2) -> Any:
    if isinstance(v, float):
        return round(v, digits)
    return "-" if v is None else v


def _print_report(r: dict[str, Any]) -> None:
    sim = r["simulated"]
    n_assets = len(r["assets"])
    print(
        f"Saltbush Flats: {len(r['gateways'])} gateways, {n_assets} pumps, {sim['days']:g} "
        f"simulated days ({sim['start'][:10]} to {sim['end'][:10]}, a window every "
        f"{sim['every_hours']:g} h) in {r['simulation_wall_seconds']:.0f} s "
        f"({r['wall_seconds']:.0f} s in all)"
    )
    print(f"broker: {r['broker']}; database: {r['database']}\n")
    truth = {a["asset_id"]: a for a in r["assets"]}

    def story(asset_id: str) -> str:
        a = truth.get(asset_id)
        if a is None:
            return "-"
        s = a["simulated_fault"]
        if a["repaired_at"]:
            s += f" (repaired {a['repaired_at'][:10]})"
        elif s != "healthy":
            s += f" {a['simulated_severity_at_end']:.2f}"
        return s

    risk = r["fleet_risk"]
    if risk["available"]:
        print(f"Fleet ranked by risk (failure within {risk.get('horizon_h', 720):g} h):")
        print_table(
            ("rank", "asset", "status", "P(fail)", "p50 h", "p50 at", "likely fault", "conf.",
             "zone", "simulated story"),
            [
                (i + 1, it["asset_id"], it["status"], _fmt(it.get("probability_within_horizon")),
                 _fmt(it.get("p50_h"), 0), (it.get("p50_at") or "-")[:10],
                 it.get("likely_fault") or "-", _fmt(it.get("fault_confidence")),
                 it.get("zone") or "-", story(it["asset_id"]))
                for i, it in enumerate(risk.get("items", []))
            ],
        )  # fmt: skip
    else:
        print(f"Fleet ranking by risk: {risk['detail']}. What the store holds:")
        print_table(
            ("asset", "gateway", "messages", "first window", "last window", "edge alarms",
             "simulated story"),
            [
                (a["asset_id"], a["gateway_id"], a["messages_stored"],
                 (a["first_window"] or "-")[:16], (a["last_window"] or "-")[:16],
                 a["edge_alarms_stored"], story(a["asset_id"]))
                for a in r["assets"]
            ],
        )  # fmt: skip
    print()
    alerts = r["alerts"]
    if alerts["available"]:
        items = alerts.get("items", [])
        print(f"Alerts raised: {len(items)}")
        if items:
            print_table(
                ("opened", "severity", "state", "asset", "kind", "title"),
                [
                    ((a.get("opened_at") or "-")[:16], a.get("severity"), a.get("state"),
                     a.get("asset_id") or "-", a.get("kind"), a.get("title"))
                    for a in items
                ],
            )  # fmt: skip
    else:
        edge = sum(a["edge_alarms_stored"] for a in r["assets"])
        print(f"Alerts: {alerts['detail']}. Edge alarms stored: {edge}")
    events = r["maintenance_events"]
    if events:
        print("\nRepairs in the story (maintenance events):")
        print_table(
            ("at", "asset", "kind", "component", "recorded"),
            [
                (m["at"][:16], m["asset_id"], m["kind"], m["component"],
                 "yes" if m["recorded"] else m["detail"] or "pending")
                for m in events
            ],
        )  # fmt: skip
    print("\nWhat each gateway sent:")
    print_table(
        ("gateway", "windows", "sent", "stored", "suppressed", "bytes sent", "bytes/day",
         "budget/day", "used", "link"),
        [
            (g["gateway_id"], g["windows"], g["messages_sent"], g["messages_stored"],
             _fmt(g["messages_suppressed"]), g["bytes_sent"], g["bytes_per_simulated_day"],
             g["budget_bytes_per_day"], f"{g['budget_used_fraction']:.1%}",
             _link_text(g["link_loss"]))
            for g in r["gateways"]
        ],
    )  # fmt: skip
    print("(bytes/day: MQTT bytes from the gateway per simulated day, measured on the link)")
    print(f"\nDashboard: {r['dashboard_url']}")
    print(CAUTION)


def _link_text(link: dict[str, Any] | None) -> str:
    if not link:
        return "up"
    if not link["cut"]:
        return "loss planned, not reached"
    cut, restored = (link[k][:16].replace("T", " ") for k in ("cut_at", "restored_at"))
    return f"down {cut} to {restored}, {link['largest_backlog']} queued, caught up"


def _on_term(signum: int, frame: FrameType | None) -> None:
    raise KeyboardInterrupt


def run(args: argparse.Namespace) -> int:
    opts = _options(args)
    print(CAUTION, file=sys.stderr)
    old = signal.signal(signal.SIGTERM, _on_term)
    try:
        with DemoEngine(opts) as engine:
            try:
                engine.start(_say)
                _say(
                    f"{len(engine.gateways)} gateways, {opts.days:g} simulated days at "
                    f"{opts.simulated_speed:,.0f}x real time"
                )
                with _Progress() as progress:
                    engine.simulate(progress, _say)
                report = engine.collect()
            except KeyboardInterrupt:
                _say("interrupted; stopping the gateways, the service and the broker")
                raise
            if args.json:
                print_json(report)
            else:
                _print_report(report)
            if args.keep:
                _say(f"service and dashboard keep running at {engine.base_url}; Ctrl-C stops")
                try:
                    while "service" in engine.children.running():
                        time.sleep(1.0)
                    _say("the service stopped")
                except KeyboardInterrupt:
                    _say("stopping the service and the broker")
    except DemoError as exc:
        print(f"wellspan demo: {exc}", file=sys.stderr)
        return EXIT_PROBLEM
    finally:
        signal.signal(signal.SIGTERM, old)
    return EXIT_OK

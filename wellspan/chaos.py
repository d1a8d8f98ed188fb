"""The chaos run: the demo fleet under repeated crashes, with a count of what was lost.

`ChaosRun` runs the Saltbush Flats demo (`wellspan.demo.engine.DemoEngine`: a private Mosquitto
with persistence, ``wellspan serve``, one ``wellspan edge`` per pad behind a `LinkRelay`) on a
private PostgreSQL instance (`wellspan.postgres.PrivatePostgres`), with a webhook receiver in
this process subscribed through the API. While the gateways run it injects faults at seeded
random times, one target after another in a shuffled order that covers every target in each
round: SIGKILL of the broker, of the service, of each gateway agent and of PostgreSQL, each
restarted after a random outage; and cuts of each gateway's link, restored after a while.

At the end, with everything running again and settled, it counts:

* per gateway, the messages it produced (its outbox's sequence counter: sequences ``0 .. n-1``),
  the rows stored, the distinct sequences stored; losses = produced sequences not stored,
  duplicates = rows minus distinct ``(gateway, sequence)``;
* windows stored twice under different sequences (rows minus distinct (asset, window start)),
  which the sequence check alone cannot see;
* the alert events the store holds for the receiver's subscription (one delivery row per event
  id) against the ids the receiver got: missing ones, and redeliveries (webhooks are delivered at
  least once; receivers de-duplicate by event id, as docs/webhooks.md says).

A restarted gateway is given ``--max-windows`` = the windows it still has to do, computed from
its outbox (``last_window:<asset>`` on the fixed tick grid of `edge_agent.scheduler`).
"""

from __future__ import annotations

import atexit
import contextlib
import json
import math
import os
import random
import signal
import sqlite3
import sys
import threading
import time
from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

import httpx

from wellspan.demo.engine import DemoEngine, DemoError, DemoOptions
from wellspan.mosquitto import MosquittoBroker, mosquitto_installed
from wellspan.postgres import PrivatePostgres

__all__ = [
    "FAULT_KINDS",
    "ChaosError",
    "ChaosOptions",
    "ChaosProgress",
    "ChaosResult",
    "ChaosRun",
    "GatewayTally",
    "WebhookReceiver",
]

FAULT_KINDS = ("broker", "service", "postgres", "gateway", "link")
_POLL_S = 0.25
_LOST_AFTER_S = 30.0  # store unchanged this long with every outbox empty: the rest is lost
_MAX_UNPROMPTED = 10  # a gateway that stops this often by itself is broken, not unlucky


class ChaosError(RuntimeError):
    """The chaos run cannot go on (not a finding about losses: those are in the result)."""


@dataclass(frozen=True, kw_only=True)
class ChaosOptions:
    """Size, pace and fault rate of a chaos run.

    Parameters
    ----------
    days, every_hours, minutes, pads, seed
        As `DemoOptions`: simulated span, window interval, target wall time of the simulation.
    gap_s : (float, float)
        Wall seconds between the start of one fault and the next (uniform in this range).
    outage_s : (float, float)
        Wall seconds a killed process stays down or a cut link stays cut.
    calm_after : float
        Faults stop once the first gateway has done this fraction of its windows, so the run
        ends with a clean drain (the count then shows what the faults did).
    settle_s : float
        Hang guard for the final settling (every message stored, every alert delivered).
    broker_fault : {"kill", "stop"}
        How the broker goes down. ``"kill"``: SIGKILL, as a crash. Mosquitto 2.0 keeps its
        state in memory and saves it as snapshots, so a crash can lose messages it has already
        acknowledged to a gateway but not yet handed to the service: the gateway has let them
        go and nothing sends them again (the losses figure then says how many). ``"stop"``:
        SIGTERM, as a restart or an orderly shutdown; Mosquitto saves its state on the way out.
    """

    days: float = 12.0
    every_hours: float = 2.0
    minutes: float = 1.5
    pads: Sequence[str] = ()
    seed: int = 2026
    gap_s: tuple[float, float] = (1.5, 4.5)
    outage_s: tuple[float, float] = (0.5, 4.0)
    calm_after: float = 0.92
    settle_s: float = 600.0
    broker_fault: str = "kill"
    workdir: Path | None = None

    def validate(self) -> None:
        for name in ("gap_s", "outage_s"):
            lo, hi = getattr(self, name)
            if not 0 < lo <= hi:
                raise ChaosError(f"{name} must be a range 0 < low <= high, got {(lo, hi)!r}")
        if not 0 < self.calm_after <= 1:
            raise ChaosError(f"calm_after must be in (0, 1], got {self.calm_after!r}")
        if self.broker_fault not in ("kill", "stop"):
            raise ChaosError(f"broker_fault must be 'kill' or 'stop', got {self.broker_fault!r}")


@dataclass
class ChaosProgress:
    """A snapshot for a progress display."""

    phase: str  # "starting" | "faults" | "calm" | "settling" | "done"
    elapsed_s: float
    faults: dict[str, int]
    down: list[str]
    produced: int
    stored: int
    fraction: float
    last_event: str


@dataclass(frozen=True)
class GatewayTally:
    gateway_id: str
    produced: int
    stored_rows: int
    distinct_stored: int
    losses: int
    duplicates: int
    beyond_produced: int  # stored sequences the gateway never produced (must be 0)
    duplicate_windows: int  # rows minus distinct (asset, window start): a window sent twice
    windows_expected: int
    windows_done: int
    restarts: int


@dataclass(frozen=True)
class ChaosResult:
    """What the run did and what it found. Losses and duplicates must be 0."""

    seed: int
    wall_s: float
    faults: dict[str, int]
    faults_by_target: dict[str, int]
    gateways: list[GatewayTally]
    alert_events: int
    alert_events_delivered: int
    alerts_missing: list[str]
    redeliveries: int
    unknown_deliveries: int
    deliveries_not_settled: int
    unprompted_exits: dict[str, int]
    settled: bool
    notes: list[str] = field(default_factory=list)

    @property
    def messages_produced(self) -> int:
        return sum(g.produced for g in self.gateways)

    @property
    def messages_stored(self) -> int:
        return sum(g.distinct_stored for g in self.gateways)

    @property
    def losses(self) -> int:
        return sum(g.losses for g in self.gateways)

    @property
    def duplicates(self) -> int:
        return sum(g.duplicates for g in self.gateways)

    @property
    def faults_injected(self) -> int:
        return sum(self.faults.values())

    def summary(self) -> str:
        lines = [
            f"chaos run (seed {self.seed}): {self.faults_injected} faults in {self.wall_s:.0f} s "
            "(" + ", ".join(f"{k} {self.faults.get(k, 0)}" for k in FAULT_KINDS) + ")",
            f"messages produced {self.messages_produced}, stored {self.messages_stored}, "
            f"losses {self.losses}, duplicates stored {self.duplicates}",
        ]
        for g in self.gateways:
            lines.append(
                f"  {g.gateway_id}: produced {g.produced}, stored {g.distinct_stored} "
                f"({g.stored_rows} rows), losses {g.losses}, duplicates {g.duplicates}, "
                f"windows sent twice {g.duplicate_windows}, "
                f"windows {g.windows_done}/{g.windows_expected}, restarts {g.restarts}"
            )
        lines.append(
            f"alert events {self.alert_events}, delivered {self.alert_events_delivered}, "
            f"missing {len(self.alerts_missing)}, redeliveries {self.redeliveries} "
            "(at-least-once; receivers de-duplicate by event id)"
        )
        if self.unprompted_exits:
            lines.append(f"processes that exited on their own: {self.unprompted_exits}")
        if not self.settled:
            lines.append("NOT SETTLED within the hang guard: the figures are as found then")
        lines += [f"note: {n}" for n in self.notes]
        return "\n".join(lines)


class WebhookReceiver:
    """A tiny HTTP server on 127.0.0.1 counting deliveries per CloudEvent id."""

    def __init__(self) -> None:
        self.counts: Counter[str] = Counter()
        self.posts = 0
        self._lock = threading.Lock()
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:
                body = self.rfile.read(int(self.headers.get("Content-Length") or 0))
                try:
                    event_id = str(json.loads(body)["id"])
                except (ValueError, KeyError, TypeError):
                    self.send_response(400)
                    self.end_headers()
                    return
                with receiver._lock:
                    receiver.counts[event_id] += 1
                    receiver.posts += 1
                self.send_response(204)
                self.end_headers()

            def log_message(self, format: str, *args: Any) -> None:
                pass

        self._server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self._server.daemon_threads = True
        self.url = f"http://127.0.0.1:{self._server.server_address[1]}/wellspan-events"
        self._thread = threading.Thread(target=self._server.serve_forever, daemon=True)

    def start(self) -> WebhookReceiver:
        self._thread.start()
        return self

    def snapshot(self) -> dict[str, int]:
        with self._lock:
            return dict(self.counts)

    def close(self) -> None:
        self._server.shutdown()
        self._server.server_close()


class _Engine(DemoEngine):
    """The demo engine with a persistent broker, webhooks to loopback allowed, and a service
    that can be started again on the same port."""

    service_proc: Any = None

    def _start_broker(self, say: Callable[[str], None]) -> None:
        if not mosquitto_installed():
            raise DemoError("the chaos run needs Mosquitto; install it with: "
                            "sudo apt-get install -y mosquitto")  # fmt: skip
        broker = MosquittoBroker(self.workdir / "mosquitto", persistence=True)
        broker.start()
        self.broker = broker
        self.broker_name = f"Mosquitto (persistent), private instance on 127.0.0.1:{broker.port}"
        say(f"broker: {self.broker_name}")

    def _service_env(self) -> dict[str, str]:
        env = super()._service_env()
        env.update(WELLSPAN_WEBHOOK_ALLOW_PRIVATE="true", WELLSPAN_WEBHOOK_ALLOW_HTTP="true",
                   WELLSPAN_ALERTS_CHECK_INTERVAL_S="5")  # fmt: skip
        return env

    def gateway_env(self) -> dict[str, str]:
        return DemoEngine._service_env(self)

    def launch_service(self) -> None:
        """Start ``wellspan serve`` on the same port as before; do not wait for it."""
        self.service_proc = self.children.start(
            "service",
            [sys.executable, "-m", "wellspan", "serve", "--port", str(self.port)],
            env=self._service_env(),
            log=self.workdir / "service.log",
        )

    def _start_service(self) -> None:
        super()._start_service()
        self.service_proc = self.children.latest("service")

    def service_ready(self) -> bool:
        assert self._http is not None
        try:
            return self._http.get("/readyz", timeout=2).status_code == 200
        except httpx.HTTPError:
            return False


@dataclass
class _Down:
    target: str
    until: float


class ChaosRun:
    """One chaos run; see the module docstring. ``run()`` returns a `ChaosResult`.

    Raises
    ------
    ChaosError
        When the run itself cannot be carried out (tools missing, a process that will not start).
    wellspan.postgres.PostgresMissingError
        If the PostgreSQL server binaries are not installed.
    """

    def __init__(self, options: ChaosOptions | None = None) -> None:
        self.options = options or ChaosOptions()
        self.options.validate()
        self.rng = random.Random(self.options.seed)
        self.faults: Counter[str] = Counter()
        self.faults_by_target: Counter[str] = Counter()
        self.unprompted: Counter[str] = Counter()
        self.restarts: Counter[str] = Counter()
        self.notes: list[str] = []
        self._down: dict[str, _Down] = {}
        self._bag: list[str] = []
        self._last_event = ""
        self._t0 = 0.0
        self._finished: set[str] = set()
        self.pg: PrivatePostgres | None = None
        self.engine: _Engine | None = None
        self.receiver: WebhookReceiver | None = None
        self.subscription_id: str | None = None

    # -- the run ---------------------------------------------------------------------------

    def run(self, on_progress: Callable[[ChaosProgress], None] | None = None) -> ChaosResult:
        self._t0 = time.monotonic()
        self._progress = on_progress
        try:
            self._set_up()
            self._faults_phase()
            settled = self._settle()
            return self._result(settled)
        finally:
            self.close()

    def close(self) -> None:
        if self.engine is not None:
            self.engine.shutdown()
        if self.receiver is not None:
            self.receiver.close()
            self.receiver = None
        if self.pg is not None:
            self.pg.remove()
            self.pg = None

    def _say(self, text: str) -> None:
        self._last_event = text

    def _set_up(self) -> None:
        o = self.options
        self.pg = PrivatePostgres(database="wellspan_chaos")
        atexit.register(self.close)  # however the run ends, no server is left behind
        self.pg.start()
        self.receiver = WebhookReceiver().start()
        self.engine = _Engine(
            DemoOptions(
                days=o.days, every_hours=o.every_hours, minutes=o.minutes, pads=o.pads,
                seed=o.seed, postgres=self.pg.url, broker="mosquitto", workdir=o.workdir,
                assess_timeout_s=min(300.0, o.settle_s), assess_stall_s=30.0,
            )
        )  # fmt: skip
        try:
            self.engine.start(self._say)
        except DemoError as exc:
            raise ChaosError(str(exc)) from None
        r = self.engine._request(
            "POST", "/v1/webhooks", key="admin",
            json={"name": "chaos receiver", "url": self.receiver.url, "min_severity": "info"},
        )  # fmt: skip
        if r.status_code != 201:
            raise ChaosError(f"subscribing the webhook receiver failed: {r.status_code} {r.text}")
        self.subscription_id = str(r.json()["subscription_id"])
        for gw in self.engine.gateways:
            self._start_gateway(gw)

    def _targets(self) -> list[str]:
        assert self.engine is not None
        ids = [g.pad.gateway_id for g in self.engine.gateways]
        return ["broker", "service", "postgres", *(f"gateway:{i}" for i in ids),
                *(f"link:{i}" for i in ids)]  # fmt: skip

    def _faults_phase(self) -> None:
        assert self.engine is not None
        o = self.options
        next_fault = time.monotonic() + self.rng.uniform(*o.gap_s)
        while True:
            self.engine._poll()
            self._supervise()
            fraction = max((g.progress.fraction for g in self.engine.gateways), default=1.0)
            calm = fraction >= o.calm_after
            if not calm and time.monotonic() >= next_fault:
                self._inject()
                next_fault = time.monotonic() + self.rng.uniform(*o.gap_s)
            self._report("calm" if calm else "faults")
            if calm and not self._down and len(self._finished) == len(self.engine.gateways):
                return
            time.sleep(_POLL_S)

    def _next_target(self) -> str | None:
        for _ in range(2):
            for i, t in enumerate(self._bag):
                if t not in self._down and not self._gone(t):
                    return self._bag.pop(i)
            if any(not self._gone(t) for t in self._bag):
                return None  # what is left is down right now; next time
            self._bag = self._targets()
            self.rng.shuffle(self._bag)
        return None

    def _gone(self, target: str) -> bool:
        """A gateway that has finished its windows cannot be killed any more."""
        return target.startswith("gateway:") and target.split(":", 1)[1] in self._finished

    def _inject(self) -> None:
        target = self._next_target()
        if target is None:
            return
        assert self.engine is not None and self.pg is not None
        kind, _, name = target.partition(":")
        if kind == "broker":
            broker = self.engine.broker
            assert isinstance(broker, MosquittoBroker)
            if self.options.broker_fault == "kill":
                broker.kill()
            else:
                broker.stop()
        elif kind == "service":
            _kill_group(self.engine.service_proc)
        elif kind == "postgres":
            self.pg.kill()
        elif kind == "gateway":
            _kill_group(self._gateway(name).proc)
        else:
            self._gateway(name).relay.cut()
        self.faults[kind] += 1
        self.faults_by_target[target] += 1
        self._down[target] = _Down(
            target, time.monotonic() + self.rng.uniform(*self.options.outage_s)
        )
        self._say(f"{'cut' if kind == 'link' else 'killed'} {target}")

    def _bring_back(self, target: str) -> None:
        assert self.engine is not None and self.pg is not None
        kind, _, name = target.partition(":")
        if kind == "broker":
            broker = self.engine.broker
            assert isinstance(broker, MosquittoBroker)
            broker.start()
        elif kind == "service":
            self.engine.launch_service()
        elif kind == "postgres":
            self.pg.start()
        elif kind == "gateway":
            self._start_gateway(self._gateway(name))
        else:
            self._gateway(name).relay.restore()
        self.restarts[target] += 1
        self._say(f"{'restored' if kind == 'link' else 'restarted'} {target}")

    def _supervise(self) -> None:
        """Bring back what is due; restart what stopped by itself; note finished gateways."""
        assert self.engine is not None
        now = time.monotonic()
        for target, d in list(self._down.items()):
            if now >= d.until:
                try:
                    self._bring_back(target)
                except Exception as exc:
                    d.until = now + 1.0
                    self._say(f"restart of {target} failed, retrying: {exc}")
                    continue
                del self._down[target]
        proc = self.engine.service_proc
        if "service" not in self._down and proc is not None and proc.poll() is not None:
            self.unprompted["service"] += 1
            self._say(f"the service exited by itself ({proc.returncode}); restarting it")
            self.engine.launch_service()
        for gw in self.engine.gateways:
            gid = gw.pad.gateway_id
            if gid in self._finished or f"gateway:{gid}" in self._down or gw.proc is None:
                continue
            code = gw.proc.poll()
            if code is None:
                continue
            done, pending = self._windows_done(gw), _pending(gw.outbox)
            if code == 0 and done >= gw.windows_target and pending == 0:
                self._finished.add(gid)
                continue
            self.unprompted[f"gateway:{gid}"] += 1
            if self.unprompted[f"gateway:{gid}"] > _MAX_UNPROMPTED:
                raise ChaosError(
                    f"{gid} keeps stopping by itself ({code}, {pending} pending, "
                    f"{done}/{gw.windows_target} windows); see {gw.log}"
                )
            self._say(f"{gid} exited ({code}) with {pending} pending, "
                      f"{done}/{gw.windows_target} windows; restarting it")  # fmt: skip
            self._start_gateway(gw)

    def _gateway(self, gateway_id: str) -> Any:
        assert self.engine is not None
        return next(g for g in self.engine.gateways if g.pad.gateway_id == gateway_id)

    def _windows_done(self, gw: Any) -> int:
        """Windows the gateway has committed: per asset, the ticks of the fixed grid from the
        start of the simulation up to its ``last_window`` (the grid's offset is below one
        interval, so the count is floor((last - start) / interval) + 1)."""
        assert self.engine is not None
        interval = self.engine.options.every_hours * 3600.0
        done = 0
        for t in _last_windows(gw.outbox).values():
            span = (t - self.engine.sim_start).total_seconds()
            done += math.floor(span / interval + 1e-6) + 1
        return done

    def _start_gateway(self, gw: Any) -> None:
        assert self.engine is not None
        remaining = gw.windows_target - self._windows_done(gw)
        if remaining <= 0:
            # everything computed; the agent has only to deliver its outbox, but --max-windows
            # must be >= 1: it computes one window past the end (counted like any other)
            self.notes.append(f"{gw.pad.gateway_id} restarted to drain after its last window; "
                              "it computed one window more")  # fmt: skip
            remaining = 1
        gw.proc = self.engine.children.start(
            gw.pad.gateway_id,
            [sys.executable, "-m", "wellspan", "edge", str(gw.config),
             "--max-windows", str(remaining), "--drain-timeout", "120", "--log-format", "json"],
            env=self.engine.gateway_env(),
            log=gw.log,
        )  # fmt: skip

    # -- settling and counting -------------------------------------------------------------

    def _settle(self) -> bool:
        """Everything stored and every alert delivered, or the hang guard ran out."""
        assert self.engine is not None
        deadline = time.monotonic() + self.options.settle_s
        stored, still_since = -1, time.monotonic()
        while time.monotonic() < deadline:
            self._supervise()
            self.engine._poll()
            self._report("settling")
            ready = self.engine.service_ready()
            gateways = self.engine.gateways
            if ready and all(
                g.progress.pending == 0 and g.progress.stored >= g.progress.queued for g in gateways
            ):
                break
            now_stored = sum(g.progress.stored for g in gateways)
            if now_stored != stored:
                stored, still_since = now_stored, time.monotonic()
            elif (
                ready
                and all(g.progress.pending == 0 for g in gateways)
                and time.monotonic() - still_since > _LOST_AFTER_S
            ):
                # every outbox is empty and the store has not moved: what is missing was let go
                # by its gateway and will not come; count it as lost
                missing = sum(max(g.progress.queued - g.progress.stored, 0) for g in gateways)
                self.notes.append(
                    f"{missing} messages let go by their gateways never reached the store "
                    f"(every outbox empty, the store unchanged for {_LOST_AFTER_S:g} s)"
                )
                break
            time.sleep(_POLL_S)
        else:
            return False
        self._say("every message stored; waiting for the assessment and the alert deliveries")
        self.engine._await_assessment(None)
        while time.monotonic() < deadline:
            self._supervise()
            self._report("settling")
            rows = self._deliveries()
            got = self.receiver.snapshot() if self.receiver else {}
            if rows is not None and all(s == "delivered" and e in got for e, s, _ in rows):
                return True
            time.sleep(1.0)
        return False

    def _deliveries(self) -> list[tuple[str, str, int]] | None:
        from sqlalchemy import text
        from sqlalchemy.exc import OperationalError

        assert self.engine is not None
        try:
            with self.engine._db.connect() as c:
                rows = c.execute(
                    text("SELECT event_id, state, attempts FROM webhook_deliveries "
                         "WHERE subscription_id = :s"),
                    {"s": self.subscription_id},
                ).all()  # fmt: skip
        except OperationalError:
            return None
        return [(str(e), str(s), int(a)) for e, s, a in rows]

    def _result(self, settled: bool) -> ChaosResult:
        assert self.engine is not None and self.receiver is not None
        tallies = []
        for gw in self.engine.gateways:
            gid = gw.pad.gateway_id
            produced = _next_sequence(gw.outbox)
            rows, distinct, produced_stored, beyond, windows = _stored(self.engine, gid, produced)
            tallies.append(
                GatewayTally(
                    gateway_id=gid,
                    produced=produced,
                    stored_rows=rows,
                    distinct_stored=distinct,
                    losses=produced - produced_stored,
                    duplicates=rows - distinct,
                    beyond_produced=beyond,
                    duplicate_windows=rows - windows,
                    windows_expected=gw.windows_target,
                    windows_done=self._windows_done(gw),
                    restarts=self.restarts[f"gateway:{gid}"],
                )
            )
        deliveries = self._deliveries() or []
        got = self.receiver.snapshot()
        stored_ids = {e for e, _, _ in deliveries}
        return ChaosResult(
            seed=self.options.seed,
            wall_s=round(time.monotonic() - self._t0, 1),
            faults={k: self.faults[k] for k in FAULT_KINDS},
            faults_by_target=dict(self.faults_by_target),
            gateways=tallies,
            alert_events=len(stored_ids),
            alert_events_delivered=len(stored_ids & set(got)),
            alerts_missing=sorted(stored_ids - set(got)),
            redeliveries=sum(n - 1 for e, n in got.items() if e in stored_ids),
            unknown_deliveries=sum(n for e, n in got.items() if e not in stored_ids),
            deliveries_not_settled=sum(s != "delivered" for _, s, _ in deliveries),
            unprompted_exits=dict(self.unprompted),
            settled=settled,
            notes=list(dict.fromkeys(self.notes)),
        )

    def _report(self, phase: str) -> None:
        if self._progress is None or self.engine is None:
            return
        gws = self.engine.gateways
        self._progress(
            ChaosProgress(
                phase=phase,
                elapsed_s=time.monotonic() - self._t0,
                faults=dict(self.faults),
                down=sorted(self._down),
                produced=sum(g.progress.queued for g in gws),
                stored=sum(g.progress.stored for g in gws),
                fraction=min((g.progress.fraction for g in gws), default=0.0),
                last_event=self._last_event,
            )
        )


def _kill_group(proc: Any) -> None:
    if proc is None or proc.poll() is not None:
        return
    with contextlib.suppress(ProcessLookupError):
        os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()


def _outbox_query(path: Path, sql: str) -> list[tuple[Any, ...]]:
    db = sqlite3.connect(path, timeout=5)
    try:
        return db.execute(sql).fetchall()
    finally:
        db.close()


def _last_windows(path: Path) -> dict[str, datetime]:
    if not path.exists():
        return {}
    rows = _outbox_query(path, "SELECT key, value FROM meta WHERE key LIKE 'last_window:%'")
    return {str(k).split(":", 1)[1]: datetime.fromisoformat(v) for k, v in rows}


def _pending(path: Path) -> int:
    if not path.exists():
        return 0
    return int(_outbox_query(path, "SELECT COUNT(*) FROM message WHERE kind = 'indicators'")[0][0])


def _next_sequence(path: Path) -> int:
    if not path.exists():
        return 0
    rows = _outbox_query(path, "SELECT value FROM meta WHERE key = 'next_sequence'")
    return int(rows[0][0]) if rows else 0


def _stored(engine: DemoEngine, gateway_id: str, produced: int) -> tuple[int, int, int, int, int]:
    """(rows, distinct sequences, distinct sequences below ``produced``, distinct above,
    distinct (asset, window start))."""
    from sqlalchemy import text

    with engine._db.connect() as c:
        rows, distinct, inside, windows = c.execute(
            text(
                "SELECT COUNT(*), COUNT(DISTINCT sequence), "
                "COUNT(DISTINCT sequence) FILTER (WHERE sequence >= 0 AND sequence < :n), "
                "COUNT(DISTINCT (asset_id, window_start)) "
                "FROM messages WHERE gateway_id = :g"
            ),
            {"g": gateway_id, "n": produced},
        ).one()
    return int(rows), int(distinct), int(inside), int(distinct) - int(inside), int(windows)

"""The demo's engine: a broker, the service and the Saltbush Flats gateways as real processes.

`DemoEngine` starts a private Mosquitto (or the embedded broker), ``wellspan serve`` (SQLite in
the demo's temporary folder, or a PostgreSQL database), API keys for itself, and one ``wellspan
edge`` process per pad with its three pumps on a simulated clock. Each gateway reaches the
broker through a `LinkRelay` in this process, which counts the bytes it sends; one gateway's
relay is cut for a stretch of simulated time and restored, and that gateway catches up from its
outbox. Repairs in the fleet's story are recorded with the service as maintenance events when
the simulated time passes them. At the end the engine reads back what the service stored and
what it concluded.
"""

from __future__ import annotations

import atexit
import contextlib
import json
import os
import shutil
import signal
import sqlite3
import sys
import tempfile
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import httpx

from edge_agent.simulator import (
    BEARING_FAULTS,
    SALTBUSH_STORY_DAYS,
    FaultScenario,
    PadSpec,
    saltbush_fleet,
    saltbush_scenarios,
)
from edge_agent.simulator.recording import toml_text
from wellspan.demo.processes import ChildProcesses
from wellspan.demo.relay import LinkRelay
from wellspan.embedded_broker import EmbeddedBroker
from wellspan.mosquitto import INSTALL_HINT, MosquittoBroker, free_port, mosquitto_installed

__all__ = [
    "CAUTION",
    "STORY_SHOWN_DAYS",
    "DemoEngine",
    "DemoError",
    "DemoOptions",
    "GatewayProgress",
    "pad_ids",
]

CAUTION = (
    "Caution: indicators, anomaly findings and forecasts are advisory. Alarms do not replace "
    "protective trips; local codes and qualified personnel decide what is done to a machine."
)
_POLL_S = 0.5
_LEAD_IN_WINDOWS = 60
STORY_SHOWN_DAYS = 125.0
"""Days of the Saltbush Flats story the demo shows (of about 180): bearing faults are still
developing at the end, one bearing has been replaced and a strainer cleaned on the way."""
_DAY = timedelta(days=1)


class DemoError(RuntimeError):
    """The demo cannot go on; ``str()`` says why in plain words."""


def pad_ids() -> list[str]:
    return [p.pad_id for p in saltbush_fleet()]


@dataclass(frozen=True, kw_only=True)
class DemoOptions:
    """Size and pace of a demo run.

    Parameters
    ----------
    days : float
        Simulated days of pump life; the fleet's story is told over this span.
    every_hours : float
        Simulated hours between window sets of a pump.
    minutes : float
        Target wall time of the simulation, minutes (sets the simulated clock's speed).
    speed : float, optional
        Simulated seconds per real second, instead of ``minutes``.
    pads : sequence of str
        Pad ids to run (default: all four).
    postgres : str, optional
        SQLAlchemy URL of an empty PostgreSQL database, instead of SQLite in a temporary folder.
    link_loss : (float, float)
        The link-loss gateway's link is down over this fraction of the simulated span.
    broker : str
        ``"mosquitto"``, ``"embedded"`` (`wellspan.embedded_broker`, demo only), or ``"auto"``:
        Mosquitto when installed, else the embedded one.
    workdir : path, optional
        Where configurations, outboxes, logs and the SQLite database go (default: a new
        temporary folder, removed at shutdown).
    """

    days: float = 180.0
    every_hours: float = 3.0
    minutes: float = 3.0
    speed: float | None = None
    pads: Sequence[str] = ()
    postgres: str | None = None
    seed: int = 2026
    link_loss: tuple[float, float] = (0.4, 0.55)
    broker: str = "auto"
    budget_bytes_per_day: int = 2_000_000
    workdir: Path | None = None
    settle_s: float = 60.0
    assess_timeout_s: float = 600.0
    assess_stall_s: float = 60.0

    def validate(self) -> None:
        if not self.days > 0:
            raise DemoError(f"--days must be > 0, got {self.days:g}")
        if not 0 < self.every_hours <= 24:
            raise DemoError(f"--every-hours must be in (0, 24], got {self.every_hours:g}")
        if self.days * 24 / self.every_hours < 2:
            raise DemoError("--days must cover at least two windows of --every-hours")
        if self.speed is None and not self.minutes > 0:
            raise DemoError(f"--minutes must be > 0, got {self.minutes:g}")
        if self.speed is not None and not self.speed > 0:
            raise DemoError(f"--speed must be > 0, got {self.speed:g}")
        unknown = sorted(set(self.pads) - set(pad_ids()))
        if unknown:
            raise DemoError(f"unknown pads {unknown}; the pads are {pad_ids()}")
        if self.broker not in ("auto", "mosquitto", "embedded"):
            raise DemoError(f"--broker must be auto, mosquitto or embedded, got {self.broker!r}")
        lo, hi = self.link_loss
        if not 0 <= lo < hi < 1:
            raise DemoError(f"link loss must be a fraction range within [0, 1), got {lo}..{hi}")
        if self.postgres is not None and not self.postgres.startswith("postgresql"):
            raise DemoError(
                f"--postgres takes a URL like postgresql+psycopg://user@host/db, got "
                f"{self.postgres!r}"
            )

    @property
    def simulated_speed(self) -> float:
        if self.speed is not None:
            return self.speed
        return self.days * 86400.0 / (self.minutes * 60.0)

    @property
    def ticks_per_asset(self) -> int:
        return round(self.days * 24 / self.every_hours)


@dataclass
class GatewayProgress:
    """What one gateway has done so far (read from its outbox and the store)."""

    gateway_id: str
    pad: str
    simulated_at: datetime | None = None
    start: datetime | None = None
    end: datetime | None = None
    queued: int = 0
    pending: int = 0
    stored: int = 0
    link_up: bool = True
    running: bool = True

    @property
    def sent(self) -> int:
        return self.queued - self.pending

    @property
    def fraction(self) -> float:
        """Share of the simulated span done, 0..1."""
        if self.simulated_at is None or self.start is None or self.end is None:
            return 0.0
        span = (self.end - self.start).total_seconds()
        return min(max((self.simulated_at - self.start).total_seconds() / span, 0.0), 1.0)


@dataclass
class _Maintenance:
    asset_id: str
    at: datetime
    kind: str
    component: str
    failure_mode: str
    recorded: bool = False
    detail: str = ""


@dataclass
class _Gateway:
    pad: PadSpec
    config: Path
    outbox: Path
    log: Path
    relay: LinkRelay
    windows_target: int
    link_loss: bool = False
    proc: Any = None
    progress: GatewayProgress = field(default_factory=lambda: GatewayProgress("", ""))
    cut_at: datetime | None = None
    restored_at: datetime | None = None
    cut_wall: float | None = None
    restored_wall: float | None = None
    backlog_at_restore: int | None = None
    max_pending: int = 0


def _iso(t: datetime | None) -> str | None:
    return None if t is None else t.astimezone(UTC).isoformat().replace("+00:00", "Z")


def _maintenance_for(asset_id: str, scenario: FaultScenario) -> _Maintenance | None:
    if scenario.repair is None:
        return None
    fault = scenario.fault
    if fault in BEARING_FAULTS:
        side = "drive-end" if scenario.bearing == "de" else "non-drive-end"
        return _Maintenance(asset_id, scenario.repair, "replacement", f"{side} bearing", fault)
    component = {
        "misalignment": "coupling (realigned)",
        "cavitation": "suction strainer (cleaned)",
        "imbalance": "impeller (balanced)",
        "impeller_wear": "impeller",
    }.get(fault, "pump")
    return _Maintenance(asset_id, scenario.repair, "repair", component, fault)


class DemoEngine:
    """Run the whole job once; see the module docstring.

    Use as a context manager, or call `shutdown` (also registered with ``atexit`` through the
    child-process list): it stops every process it started and removes its temporary folder.
    """

    def __init__(self, options: DemoOptions) -> None:
        options.validate()
        self.options = options
        self.children = ChildProcesses()
        self.workdir = options.workdir or Path(tempfile.mkdtemp(prefix="wellspan-demo-"))
        self._own_workdir = options.workdir is None
        self.workdir.mkdir(parents=True, exist_ok=True)
        self.broker: MosquittoBroker | EmbeddedBroker | None = None
        self.broker_name: str | None = None
        self.port = 0
        self.keys: dict[str, str] = {}
        self._key_ids: list[str] = []
        self.gateways: list[_Gateway] = []
        self.maintenance: list[_Maintenance] = []
        self.notes: list[str] = []
        self.database_url = options.postgres or f"sqlite:///{self.workdir / 'wellspan.db'}"
        end = datetime.now(UTC).replace(hour=0, minute=0, second=0, microsecond=0)
        self.sim_start = end - options.days * _DAY
        self.sim_end = end
        # A healthy lead-in gives every pump a baseline before its story starts; the demo then
        # tells the first STORY_SHOWN_DAYS of the story, so the faults are developing at the end.
        self.lead_in_days = min(_LEAD_IN_WINDOWS * options.every_hours / 24, options.days / 4)
        self.story_scale = (options.days - self.lead_in_days) / STORY_SHOWN_DAYS
        self.scenarios = saltbush_scenarios(
            self.sim_start + self.lead_in_days * _DAY,
            seed=options.seed,
            time_scale=self.story_scale,
        )
        self._http: httpx.Client | None = None
        self._db: Any = None
        self._started_wall = 0.0
        self._sim_wall = 0.0
        self._stopped = False
        self.assessment_lagging: list[str] | None = None
        atexit.register(self.shutdown)

    # -- lifecycle -------------------------------------------------------------------------

    def __enter__(self) -> DemoEngine:
        return self

    def __exit__(self, *exc: object) -> None:
        self.shutdown()

    @property
    def base_url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    @property
    def dashboard_url(self) -> str:
        return f"{self.base_url}/dashboard#key={self.keys.get('read', '')}"

    def start(self, say: Callable[[str], None] = lambda _: None) -> None:
        """Broker, keys, service, asset registration; the gateways start in `simulate`."""
        self._started_wall = time.monotonic()
        self._start_broker(say)
        self._prepare_database()
        say("database: " + ("PostgreSQL" if self.options.postgres else f"SQLite in {self.workdir}"))
        self._start_service()
        say(f"service: wellspan serve on {self.base_url} (pid {self.children.pids['service']})")
        self._write_gateways()
        for gw in self.gateways:
            r = self._request("POST", "/v1/assets/import", key="admin",
                              content=gw.config.read_bytes(),
                              headers={"Content-Type": "application/toml"})  # fmt: skip
            if r.status_code != 200:
                raise DemoError(f"registering the {gw.pad.name} pumps failed: {r.text[:300]}")

    def _start_broker(self, say: Callable[[str], None]) -> None:
        kind = self.options.broker
        if kind == "auto":
            kind = "mosquitto" if mosquitto_installed() else "embedded"
            if kind == "embedded":
                say(f"Mosquitto is not installed ({INSTALL_HINT}); using the embedded broker")
        if kind == "mosquitto":
            if not mosquitto_installed():
                raise DemoError(
                    f"the demo was asked for Mosquitto, which is not installed; {INSTALL_HINT}"
                )
            mosquitto = MosquittoBroker(self.workdir / "mosquitto")
            mosquitto.start()
            self.broker = mosquitto
            self.broker_name = f"Mosquitto, private instance on 127.0.0.1:{mosquitto.port}"
        else:
            embedded = EmbeddedBroker()
            embedded.start()
            self.broker = embedded
            self.broker_name = (
                f"embedded Python MQTT broker (demo only) on 127.0.0.1:{embedded.port}"
            )
        say(f"broker: {self.broker_name}")

    def shutdown(self) -> None:
        """Stop gateways, then the service, then the broker; remove the temporary folder."""
        if self._stopped:
            return
        self._stopped = True
        # a second Ctrl-C must not cut the shutdown short and leave processes behind
        main = threading.current_thread() is threading.main_thread()
        old = signal.signal(signal.SIGINT, signal.SIG_IGN) if main else None
        try:
            self._stop_everything()
        finally:
            if old is not None:
                signal.signal(signal.SIGINT, old)

    def _stop_everything(self) -> None:
        self.children.stop_named([g.pad.gateway_id for g in self.gateways], timeout=15)
        self.children.stop_all(timeout=15)
        for gw in self.gateways:
            gw.relay.close()
        if self.broker is not None:
            self.broker.stop()
        if self._http is not None:
            self._http.close()
        if self._db is not None:
            self._db.dispose()
        if self.options.postgres and self._key_ids:
            self._revoke_keys()
        if self._own_workdir:
            shutil.rmtree(self.workdir, ignore_errors=True)

    # -- set-up ----------------------------------------------------------------------------

    def _prepare_database(self) -> None:
        from sqlalchemy import create_engine, text

        from prognosis_service.auth import create_key
        from prognosis_service.store.engine import Store
        from prognosis_service.store.migrate import upgrade

        try:
            upgrade(self.database_url)
        except Exception as exc:
            raise DemoError(f"cannot prepare the database: {type(exc).__name__}: {exc}") from None
        self._db = create_engine(self.database_url)
        ids = [p.gateway_id for p in self._pads()]
        with self._db.connect() as c:
            n = sum(
                c.execute(
                    text("SELECT COUNT(*) FROM messages WHERE gateway_id = :g"), {"g": g}
                ).scalar_one()
                for g in ids
            )
        if n:
            raise DemoError(
                f"the database already holds {n} messages of the Saltbush Flats gateways (an "
                "earlier demo?); give --postgres an empty database"
            )
        store = Store(self.database_url)
        try:
            for role, scopes in (
                ("admin", ["admin"]),
                ("operate", ["operate"]),
                ("read", ["read"]),
            ):
                with store.write() as session:
                    principal, token = create_key(session, name=f"demo-{role}", scopes=scopes)
                self.keys[role] = token
                self._key_ids.append(principal.key_id)
        finally:
            store.dispose()

    def _revoke_keys(self) -> None:
        """The demo's keys must not outlive it in a database that does."""
        from prognosis_service.auth import revoke_key
        from prognosis_service.store.engine import Store

        store = Store(self.database_url)
        try:
            with store.write() as session:
                for key_id in self._key_ids:
                    revoke_key(session, key_id)
        except Exception as exc:  # shutdown goes on; say what is left
            print(
                f"wellspan demo: could not revoke the demo's API keys {self._key_ids}: {exc}",
                file=sys.stderr,
            )
        finally:
            store.dispose()

    def _service_env(self) -> dict[str, str]:
        assert self.broker is not None
        env = {k: v for k, v in os.environ.items() if not k.startswith("WELLSPAN_")}
        env.update(
            WELLSPAN_ENVIRONMENT="development",
            WELLSPAN_DATABASE_URL=self.database_url,
            WELLSPAN_MQTT_URL=self.broker.url,
            WELLSPAN_MQTT_CLIENT_ID=f"wellspan-demo-{os.getpid()}",
            PYTHONUNBUFFERED="1",
        )
        from prognosis_service.settings import Settings

        if "assess_interval_s" in Settings.model_fields:
            env["WELLSPAN_ASSESS_INTERVAL_S"] = "2"  # months go by in minutes here
        return env

    def _start_service(self) -> None:
        self.port = free_port()
        proc = self.children.start(
            "service",
            [sys.executable, "-m", "wellspan", "serve", "--port", str(self.port)],
            env=self._service_env(),
            log=self.workdir / "service.log",
        )
        self._http = httpx.Client(base_url=self.base_url, timeout=30)
        deadline = time.monotonic() + 90
        while time.monotonic() < deadline:
            if proc.poll() is not None:
                raise DemoError(
                    f"the service exited with {proc.returncode}:\n{self._tail('service.log')}"
                )
            with contextlib.suppress(httpx.HTTPError):
                if self._http.get("/readyz").status_code == 200:
                    return
            time.sleep(0.2)
        raise DemoError(f"the service was not ready within 90 s:\n{self._tail('service.log')}")

    def _pads(self) -> list[PadSpec]:
        chosen = set(self.options.pads or pad_ids())
        return [p for p in saltbush_fleet() if p.pad_id in chosen]

    def gateway_config(self, pad: PadSpec, broker_url: str, outbox: Path) -> dict[str, Any]:
        """The configuration of one demo gateway (what ``wellspan edge`` reads)."""
        o = self.options
        return {
            "gateway_id": pad.gateway_id,
            "site": pad.site_id,
            "broker": {
                "url": broker_url,
                "keepalive_s": 10,
                "session_expiry_s": 86400,
                "reconnect_min_s": 0.5,
                "reconnect_max_s": 2.0,
                "status_interval_s": 5.0,
            },
            "schedule": {
                "interval_s": o.every_hours * 3600.0,
                "jitter_s": min(60.0, o.every_hours * 360.0),
                # a busy laptop runs a gateway late; it catches up instead of skipping windows
                "max_late_intervals": 1000,
                "clock": "simulated",
                "simulated_start": self.sim_start,
                "simulated_speed": o.simulated_speed,
            },
            "budget": {
                "bytes_per_day": o.budget_bytes_per_day,
                "deadbands": {
                    "de_accel.velocity_rms": {"absolute": 0.1},
                    "nde_accel.velocity_rms": {"absolute": 0.1},
                    "bearing_temp.mean": {"absolute": 1.0},
                },
            },
            "outbox": {"path": str(outbox), "batch_frames": 200},
            "source": {
                "kind": "simulator",
                "seed": o.seed,
                "scenarios": {
                    a.asset_id: f"saltbush:{SALTBUSH_STORY_DAYS * self.story_scale!r}:"
                    f"{self.lead_in_days!r}"
                    for a in pad.assets
                },
            },
            "alarms": {
                "thresholds": {
                    "de_accel.velocity_rms": {"high": 4.5, "hysteresis": 0.05},
                    "suction_pressure.mean": {"low": 40.0},
                }
            },
            "assets": [a.model_dump(mode="json", exclude_none=True) for a in pad.assets],
        }

    def _write_gateways(self) -> None:
        assert self.broker is not None
        pads = self._pads()
        for i, pad in enumerate(pads):
            folder = self.workdir / pad.gateway_id
            folder.mkdir(exist_ok=True)
            relay = LinkRelay((self.broker.host, self.broker.port), name=pad.gateway_id).start()
            outbox = folder / "outbox.sqlite"
            config = folder / "gateway.toml"
            config.write_text(
                f"# demo gateway {pad.gateway_id} ({pad.name} pad), written by wellspan demo\n"
                + toml_text(self.gateway_config(pad, relay.url, outbox))
            )
            gw = _Gateway(
                pad=pad,
                config=config,
                outbox=outbox,
                log=folder / "edge.log",
                relay=relay,
                windows_target=self.options.ticks_per_asset * len(pad.assets),
                link_loss=i == len(pads) - 1,
            )
            gw.progress = GatewayProgress(
                pad.gateway_id, pad.name, start=self.sim_start, end=self.sim_end
            )
            if gw.link_loss:
                lo, hi = self.options.link_loss
                gw.cut_at = self.sim_start + lo * self.options.days * _DAY
                gw.restored_at = self.sim_start + hi * self.options.days * _DAY
            self.gateways.append(gw)
            for asset in pad.assets:
                m = _maintenance_for(asset.asset_id, self.scenarios[asset.asset_id])
                if m is not None and m.at < self.sim_end:
                    self.maintenance.append(m)

    # -- the run ---------------------------------------------------------------------------

    def simulate(
        self,
        on_progress: Callable[[list[GatewayProgress]], None] | None = None,
        say: Callable[[str], None] = lambda _: None,
    ) -> None:
        """Start the gateways and watch them until they have all finished, their messages are
        stored and the service has assessed them."""
        t0 = time.monotonic()
        env = self._service_env()
        for gw in self.gateways:
            gw.proc = self.children.start(
                gw.pad.gateway_id,
                [sys.executable, "-m", "wellspan", "edge", str(gw.config),
                 "--max-windows", str(gw.windows_target), "--drain-timeout", "60",
                 "--log-format", "json"],
                env=env,
                log=gw.log,
            )  # fmt: skip
        while True:
            self._poll()
            self._link_events()
            self._record_maintenance()
            if on_progress is not None:
                on_progress([g.progress for g in self.gateways])
            if all(g.proc.poll() is not None for g in self.gateways):
                break
            self._check_service()
            time.sleep(_POLL_S)
        for gw in self.gateways:
            gw.relay.restore()
            if gw.proc.returncode != 0:
                raise DemoError(
                    f"gateway {gw.pad.gateway_id} exited with {gw.proc.returncode}:\n"
                    + self._tail(gw.log)
                )
        deadline = time.monotonic() + self.options.settle_s
        while time.monotonic() < deadline:
            self._poll()
            self._record_maintenance()
            if on_progress is not None:
                on_progress([g.progress for g in self.gateways])
            if all(g.progress.stored >= g.progress.queued for g in self.gateways):
                break
            self._check_service()
            time.sleep(_POLL_S)
        self._sim_wall = time.monotonic() - t0
        say("every message is stored; waiting for the service to assess the last windows")
        self._await_assessment(on_progress)

    def _await_assessment(
        self, on_progress: Callable[[list[GatewayProgress]], None] | None
    ) -> None:
        """Wait until the service has assessed every stored window (or stops advancing)."""
        facts = self._store_facts()["assets"]
        last = {a: _aware(hi) for a, (_, _, hi) in facts.items()}
        slack = timedelta(hours=self.options.every_hours)
        seen: dict[str, datetime | None] = {}
        moved = time.monotonic()
        deadline = time.monotonic() + self.options.assess_timeout_s
        while time.monotonic() < deadline:
            status, body = self._get_json("/v1/fleet/risk", horizon_h=720)
            if status == 404:
                self.assessment_lagging = None  # the service has no assessment
                return
            if status == 200 and isinstance(body, dict):
                as_of = {it["asset_id"]: _aware(it.get("as_of")) for it in body.get("items", [])}
                lagging = sorted(a for a, t in last.items() if _behind(as_of.get(a), t, slack))
                self.assessment_lagging = lagging
                if not lagging:
                    return
                if as_of != seen:
                    seen, moved = as_of, time.monotonic()
                elif time.monotonic() - moved > self.options.assess_stall_s:
                    return  # no progress for a while: report what there is
            if on_progress is not None:
                on_progress([g.progress for g in self.gateways])
            self._check_service()
            time.sleep(1.0)

    def _check_service(self) -> None:
        if "service" not in self.children.running():
            raise DemoError(f"the service stopped unexpectedly:\n{self._tail('service.log')}")

    def _poll(self) -> None:
        stored = self._count_by_gateway("messages")
        for gw in self.gateways:
            p = gw.progress
            p.stored = stored.get(gw.pad.gateway_id, 0)
            p.link_up = gw.relay.up
            p.running = gw.proc is not None and gw.proc.poll() is None
            state = _read_outbox(gw.outbox)
            if state is not None:
                p.queued, p.pending, p.simulated_at = state
                gw.max_pending = max(gw.max_pending, p.pending)

    def _link_events(self) -> None:
        for gw in self.gateways:
            t = gw.progress.simulated_at
            if not gw.link_loss or t is None or gw.cut_at is None or gw.restored_at is None:
                continue
            if gw.cut_wall is None and t >= gw.cut_at:
                gw.relay.cut()
                gw.cut_wall = time.monotonic()
            elif gw.cut_wall is not None and gw.restored_wall is None and t >= gw.restored_at:
                gw.backlog_at_restore = gw.progress.pending
                gw.relay.restore()
                gw.restored_wall = time.monotonic()

    def _record_maintenance(self) -> None:
        now = {a.asset_id: g.progress.simulated_at for g in self.gateways for a in g.pad.assets}
        for m in self.maintenance:
            t = now.get(m.asset_id)
            if m.recorded or m.detail or t is None or t < m.at:
                continue
            body = {
                "at": _iso(m.at),
                "kind": m.kind,
                "component": m.component,
                "failure_mode": m.failure_mode,
                "notes": "recorded by wellspan demo (simulated repair)",
                "performed_by": "Saltbush Flats maintenance crew (simulated)",
            }
            try:
                r = self._request(
                    "POST", f"/v1/assets/{m.asset_id}/maintenance-events", key="operate", json=body
                )
            except httpx.HTTPError as exc:
                m.detail = f"request failed: {exc}"
                continue
            if r.status_code == 201:
                m.recorded = True
            elif r.status_code in (404, 405):
                m.detail = "not available yet (no maintenance-events route in this service)"
            else:
                m.detail = f"refused: HTTP {r.status_code} {r.text[:200]}"

    # -- reading back ----------------------------------------------------------------------

    def _request(self, method: str, path: str, *, key: str, **kw: Any) -> httpx.Response:
        assert self._http is not None
        headers = {"Authorization": f"Bearer {self.keys[key]}", **kw.pop("headers", {})}
        return self._http.request(method, path, headers=headers, **kw)

    def _count_by_gateway(self, table: str) -> dict[str, int]:
        from sqlalchemy import text
        from sqlalchemy.exc import OperationalError

        try:
            with self._db.connect() as c:
                rows = c.execute(
                    text(f"SELECT gateway_id, COUNT(*) FROM {table} GROUP BY gateway_id")
                ).all()
        except OperationalError:  # SQLite busy for a moment; the next poll reads it
            return {g.pad.gateway_id: g.progress.stored for g in self.gateways}
        return {str(g): int(n) for g, n in rows}

    def _store_facts(self) -> dict[str, Any]:
        from sqlalchemy import text

        with self._db.connect() as c:
            seqs = {
                str(g): (int(n), int(d), lo, hi)
                for g, n, d, lo, hi in c.execute(
                    text(
                        "SELECT gateway_id, COUNT(*), COUNT(DISTINCT sequence), MIN(sequence), "
                        "MAX(sequence) FROM messages GROUP BY gateway_id"
                    )
                ).all()
            }
            assets = {
                str(a): (int(n), lo, hi)
                for a, n, lo, hi in c.execute(
                    text(
                        "SELECT asset_id, COUNT(*), MIN(window_start), MAX(window_start) "
                        "FROM messages GROUP BY asset_id"
                    )
                ).all()
            }
            alarms = {
                str(a): int(n)
                for a, n in c.execute(
                    text("SELECT asset_id, COUNT(*) FROM edge_alarms GROUP BY asset_id")
                ).all()
            }
        return {"sequences": seqs, "assets": assets, "edge_alarms": alarms}

    def _agent_summary(self, gw: _Gateway) -> dict[str, Any]:
        for line in reversed(gw.log.read_text(errors="replace").splitlines()):
            if '"agent stopped"' in line:
                with contextlib.suppress(ValueError):
                    return dict(json.loads(line))
        return {}

    def _get_json(self, path: str, **params: Any) -> tuple[int, Any]:
        try:
            r = self._request("GET", path, key="read", params=params)
        except httpx.HTTPError as exc:
            return 0, str(exc)
        try:
            return r.status_code, r.json()
        except ValueError:
            return r.status_code, r.text

    def collect(self) -> dict[str, Any]:
        """Everything the demo reports, as plain JSON-ready data."""
        o = self.options
        facts = self._store_facts()
        gateways = []
        for gw in self.gateways:
            p = gw.progress
            n, distinct, lo, hi = facts["sequences"].get(gw.pad.gateway_id, (0, 0, None, None))
            summary = self._agent_summary(gw)
            edge_stored = sum(facts["edge_alarms"].get(a.asset_id, 0) for a in gw.pad.assets)
            per_day = gw.relay.bytes_up / o.days
            link = None
            if gw.link_loss:
                link = {
                    "cut_at": _iso(gw.cut_at),
                    "restored_at": _iso(gw.restored_at),
                    "cut": gw.cut_wall is not None,
                    "real_seconds_down": (
                        round(gw.restored_wall - gw.cut_wall, 1)
                        if gw.cut_wall is not None and gw.restored_wall is not None
                        else None
                    ),
                    "backlog_at_restore": gw.backlog_at_restore,
                    "largest_backlog": gw.max_pending,
                }
            gateways.append(
                {
                    "gateway_id": gw.pad.gateway_id,
                    "pad": gw.pad.name,
                    "assets": list(gw.pad.asset_ids),
                    "windows": summary.get("windows"),
                    "messages_queued": p.queued,
                    "messages_sent": p.sent,
                    "messages_suppressed": summary.get("suppressed"),
                    "messages_stored": n,
                    "distinct_sequences_stored": distinct,
                    "sequence_range_stored": [lo, hi],
                    "pending_in_outbox": p.pending,
                    "edge_alarms_sent": summary.get("alarms"),
                    "edge_alarms_stored": edge_stored,
                    "bytes_sent": gw.relay.bytes_up,
                    "bytes_received": gw.relay.bytes_down,
                    "bytes_per_simulated_day": round(per_day),
                    "budget_bytes_per_day": o.budget_bytes_per_day,
                    "budget_used_fraction": round(per_day / o.budget_bytes_per_day, 4),
                    "link_loss": link,
                    "exit_code": gw.proc.returncode if gw.proc is not None else None,
                    "pid": gw.proc.pid if gw.proc is not None else None,
                }
            )
        assets = []
        for gw in self.gateways:
            for a in gw.pad.asset_ids:
                sc = self.scenarios[a]
                n, first, last = facts["assets"].get(a, (0, None, None))
                assets.append(
                    {
                        "asset_id": a,
                        "gateway_id": gw.pad.gateway_id,
                        "simulated_fault": sc.fault,
                        "simulated_fault_at_end": sc.fault_at(self.sim_end),
                        "simulated_severity_at_end": round(sc.severity(self.sim_end), 3),
                        "simulated_failure_at": _iso(sc.failure_time),
                        "repaired_at": _iso(sc.repair) if sc.repair and sc.repair < self.sim_end
                        else None,
                        "messages_stored": n,
                        "first_window": _iso(_aware(first)),
                        "last_window": _iso(_aware(last)),
                        "edge_alarms_stored": facts["edge_alarms"].get(a, 0),
                    }
                )  # fmt: skip
        status, risk = self._get_json("/v1/fleet/risk", horizon_h=720)
        fleet_risk: dict[str, Any] = {
            "available": status == 200,
            "status": status,
            "assessment_lagging": self.assessment_lagging,
        }
        if status == 200:
            fleet_risk.update(risk)
        else:
            fleet_risk["detail"] = f"not available yet (GET /v1/fleet/risk answered {status})"
        status, alerts = self._get_json("/v1/alerts", limit=200)
        alert_block: dict[str, Any] = {"available": status == 200, "status": status}
        if status == 200:
            alert_block.update(alerts)
        else:
            alert_block["detail"] = f"not available yet (GET /v1/alerts answered {status})"
        return {
            "advisory": CAUTION,
            "broker": self.broker_name,
            "database": "PostgreSQL" if o.postgres else "SQLite (temporary)",
            "service_url": self.base_url,
            "dashboard_url": self.dashboard_url,
            "simulated": {
                "start": _iso(self.sim_start),
                "end": _iso(self.sim_end),
                "days": o.days,
                "every_hours": o.every_hours,
                "speed": round(o.simulated_speed, 1),
            },
            "wall_seconds": round(time.monotonic() - self._started_wall, 1),
            "simulation_wall_seconds": round(self._sim_wall, 1),
            "gateways": gateways,
            "assets": assets,
            "maintenance_events": [
                {
                    "asset_id": m.asset_id,
                    "at": _iso(m.at),
                    "kind": m.kind,
                    "component": m.component,
                    "failure_mode": m.failure_mode,
                    "recorded": m.recorded,
                    "detail": m.detail,
                }
                for m in self.maintenance
            ],
            "fleet_risk": fleet_risk,
            "alerts": alert_block,
            "processes": self.children.pids,
        }

    def _tail(self, log: str | Path, lines: int = 15) -> str:
        path = log if isinstance(log, Path) else self.workdir / log
        try:
            return "\n".join(path.read_text(errors="replace").splitlines()[-lines:])
        except OSError:
            return "(no log)"


def _behind(as_of: datetime | None, last: datetime | None, slack: timedelta) -> bool:
    if last is None:
        return False
    return as_of is None or as_of + slack < last


def _aware(t: Any) -> datetime | None:
    if t is None:
        return None
    if isinstance(t, str):
        t = datetime.fromisoformat(t)
    return t if t.tzinfo else t.replace(tzinfo=UTC)


def _read_outbox(path: Path) -> tuple[int, int, datetime | None] | None:
    """(indicator messages queued, still pending, latest window) of a gateway's outbox."""
    if not path.exists():
        return None
    try:
        db = sqlite3.connect(path, timeout=0.5)
    except sqlite3.Error:
        return None
    try:
        meta = dict(
            db.execute(
                "SELECT key, value FROM meta WHERE key = 'next_sequence' "
                "OR key LIKE 'last_window:%'"
            ).fetchall()
        )
        pending = db.execute("SELECT COUNT(*) FROM message WHERE kind = 'indicators'").fetchone()[0]
    except sqlite3.Error:
        return None
    finally:
        db.close()
    windows = [datetime.fromisoformat(v) for k, v in meta.items() if k.startswith("last_window:")]
    latest = max(windows) if windows else None
    return int(meta.get("next_sequence", 0)), int(pending), latest

"""The gateway agent: schedule -> acquire -> extract -> alarms/budget -> outbox -> uplink.

Threads:

* the **producer** (the thread calling :meth:`Agent.run`) waits for each scheduled tick, takes
  the window sets from the source, runs the extractor, raises edge alarms, applies the bandwidth
  budget and commits what is to be sent to the outbox (one transaction per group of windows);
* the **sender** moves messages from the outbox to the uplink (alarms first; many windows of an
  asset per MQTT message when there is a backlog), deletes them on PUBACK and publishes the
  retained layout announcement and status;
* paho's **network thread** runs the MQTT callbacks, which only put events on a queue.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import logging
import queue
import signal
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from importlib import metadata
from types import FrameType
from typing import Any, Protocol

from edge_agent.alarms import EdgeAlarmDetector
from edge_agent.assets import AssetConfig
from edge_agent.budget import BandwidthBudget, wire_bytes
from edge_agent.clock import Clock, RealClock, SimulatedClock
from edge_agent.config import GatewayConfig
from edge_agent.logs import fields
from edge_agent.outbox import NewMessage, Outbox, OutboxEntry, Priority
from edge_agent.scheduler import Scheduler
from edge_agent.sources import RecoverableSource, WindowSource, build_source
from edge_agent.uplink import PublishRefusedError, Uplink, UplinkEvent
from edge_agent.windows import WindowSet
from shared_schema import (
    ClockSync,
    GatewayState,
    GatewayStatus,
    IndicatorLayout,
    IndicatorMessage,
    LayoutAnnouncement,
    alarm_topic,
    dropped_topic,
    encode_batch,
    encode_indicators,
    encode_json,
    indicators_topic,
    layout_topic,
    status_topic,
)

__all__ = ["Agent", "AgentError", "AgentSummary", "ExtractorFactory", "ExtractorLike"]

log = logging.getLogger("edge_agent.agent")

DEFAULT_SIMULATED_START = datetime(2026, 3, 1, tzinfo=UTC)
_FLUSH_MESSAGES = 64  # a transaction holds at most this many messages...
_FLUSH_WINDOWS = 256  # ...or this many windows' state...
_FLUSH_AFTER_S = 0.2  # ...or this much work; without backlog, every tick is committed at once
_RETRY_REFUSED_S = 30.0


class AgentError(RuntimeError):
    """The agent cannot start with this configuration; ``str()`` is one line."""


class ExtractorLike(Protocol):
    """What the agent needs from an extractor (:class:`edge_agent.extractor.Extractor`)."""

    @property
    def layout(self) -> IndicatorLayout: ...

    def extract(
        self,
        window_set: WindowSet,
        *,
        gateway_id: str,
        site: str,
        sequence: int,
        clock_sync: ClockSync = ...,
    ) -> IndicatorMessage: ...


ExtractorFactory = Callable[[AssetConfig], ExtractorLike]


def default_extractor(asset: AssetConfig) -> ExtractorLike:
    from edge_agent.extractor import Extractor

    return Extractor(asset)


def agent_version() -> str:
    try:
        return metadata.version("wellspan")[:32]
    except metadata.PackageNotFoundError:
        return "unknown"


@dataclass(frozen=True, slots=True)
class AgentSummary:
    """What one run of the agent did."""

    windows: int
    queued: int
    suppressed: int
    alarms: int
    failed: int
    skipped_ticks: int
    cpu_s_per_window: float


class Agent:
    """One gateway's agent.

    Parameters
    ----------
    config : GatewayConfig
    clock : Clock, optional
        Default: the wall clock, or a simulated clock if the configuration asks for one.
    speed : float, optional
        Use a simulated clock at this speed (0 = as fast as possible), overriding the
        configuration.
    source : WindowSource, optional
        Default: the source the configuration names.
    extractor_factory : callable, optional
        Builds the extractor of an asset; default :class:`edge_agent.extractor.Extractor`.
    max_windows : int, optional
        Stop after this many window sets.
    drain_timeout_s : float
        At shutdown, wait up to this long for the outbox to empty before disconnecting.
    """

    def __init__(
        self,
        config: GatewayConfig,
        *,
        clock: Clock | None = None,
        speed: float | None = None,
        source: WindowSource | None = None,
        extractor_factory: ExtractorFactory | None = None,
        max_windows: int | None = None,
        drain_timeout_s: float = 5.0,
    ) -> None:
        self.config = config
        self.max_windows = max_windows
        self.drain_timeout_s = drain_timeout_s
        self._stop = threading.Event()
        factory = extractor_factory or default_extractor
        try:
            self.extractors = {a.asset_id: factory(a) for a in config.assets}
        except ModuleNotFoundError as exc:
            raise AgentError(f"the extractor is not available: {exc}") from None
        except ValueError as exc:
            raise AgentError(f"cannot build an extractor: {exc}") from None
        self.layouts = {a: e.layout for a, e in self.extractors.items()}
        known = set().union(*(set(la.names) for la in self.layouts.values()))
        unknown = sorted(set(config.budget.deadbands) - known)
        if unknown:
            raise AgentError(
                f"budget.deadbands names indicators {unknown} that no asset computes; "
                f"known: {sorted(known)}"
            )
        try:
            self.detector = EdgeAlarmDetector(
                config.alarms,
                {a.asset_id: a for a in config.assets},
                self.layouts,
                gateway_id=config.gateway_id,
                site=config.site,
            )
        except ValueError as exc:
            raise AgentError(str(exc)) from None
        try:
            self.outbox = Outbox(
                config.outbox.path,
                gateway_id=config.gateway_id,
                site=config.site,
                max_bytes=config.outbox.max_bytes,
            )
        except Exception as exc:
            raise AgentError(str(exc)) from None
        resume = {}
        for a in config.assets:
            v = self.outbox.meta(f"last_window:{a.asset_id}")
            if v is not None:
                resume[a.asset_id] = datetime.fromisoformat(v)
        sim_start = config.schedule.simulated_start or DEFAULT_SIMULATED_START
        schedule_from: datetime | None = None
        if clock is None:
            if speed is not None or config.schedule.clock == "simulated":
                start = min(resume.values()) if resume else sim_start
                clock = SimulatedClock(
                    max(start, sim_start),
                    speed=config.schedule.simulated_speed if speed is None else speed,
                )
                # Simulated time runs on while the agent starts up: at high speed that is
                # several intervals, whose ticks must not be skipped, so the schedule starts
                # where the clock did.
                schedule_from = clock.start
            else:
                clock = RealClock()
        self.clock = clock
        self.clock_sync = (
            ClockSync.SYNCED if isinstance(clock, SimulatedClock)
            else config.schedule.clock_sync_state()
        )  # fmt: skip
        try:
            self.source = source or build_source(config, start=sim_start)
        except (ValueError, OSError) as exc:
            self.outbox.close()
            raise AgentError(f"cannot open the {config.source.kind} source: {exc}") from None
        if isinstance(self.source, RecoverableSource):
            self.source.recover(json.loads(self.outbox.meta("source_marks") or "[]"))
        self.scheduler = Scheduler(
            {a.asset_id: config.schedule.interval_for(a.asset_id) for a in config.assets},
            start=schedule_from or self.clock.now(),
            jitter_s=config.schedule.jitter_s,
            max_late_intervals=config.schedule.max_late_intervals,
            after=resume,
        )
        day = self.outbox.meta("budget_day")
        self.budget = BandwidthBudget(
            config.budget,
            self.layouts,
            spent_today=int(self.outbox.meta("budget_spent") or 0),
            day=datetime.fromisoformat(day).date() if day else None,
            scale=float(self.outbox.meta("budget_scale") or 1.0),
        )
        self._budget_lock = threading.Lock()
        self._events: queue.SimpleQueue[UplinkEvent] = queue.SimpleQueue()
        self.status_topic = status_topic(config.site, config.gateway_id)
        will = self._status_model(GatewayState.LOST, at=None, full=False)
        try:
            self.uplink = Uplink(
                config.broker,
                client_id=config.client_id,
                will=(self.status_topic, encode_json(will)),
                events=self._events,
            )
        except (OSError, ValueError) as exc:  # unreadable password, CA or key file; bad TLS
            self.outbox.close()
            raise AgentError(f"cannot set up the broker connection: {exc}") from None
        # producer state
        self._pending: list[NewMessage] = []
        self._pending_windows: list[WindowSet] = []
        self._pending_meta: dict[str, str] = {}
        self._next_seq = self.outbox.next_sequence
        self._windows = self._queued = self._suppressed = self._alarms = self._failed = 0
        self._cpu_windows = 0.0
        self._lag_max = 0.0
        # sender state
        self._inflight: dict[int, list[int]] = {}
        self._control: dict[int, str] = {}
        self._retry: list[tuple[float, list[int]]] = []
        self._need_birth = False
        self._closing = threading.Event()
        self._offline_acked = threading.Event()
        self._status_due = time.monotonic()
        self._cpu_mark = (time.monotonic(), time.process_time())
        self._sender = threading.Thread(target=self._sender_loop, name="wellspan-sender")

    # -- control ---------------------------------------------------------------------------

    def stop(self) -> None:
        """Ask the agent to finish (thread- and signal-safe)."""
        self._stop.set()

    @contextlib.contextmanager
    def _signals(self) -> Iterator[None]:
        if threading.current_thread() is not threading.main_thread():
            yield
            return

        def handler(signum: int, frame: FrameType | None) -> None:
            log.info("signal received", extra=fields(signal=signal.Signals(signum).name))
            self.stop()

        old = {s: signal.signal(s, handler) for s in (signal.SIGTERM, signal.SIGINT)}
        try:
            yield
        finally:
            for s, h in old.items():
                signal.signal(s, h)

    def run(self) -> AgentSummary:
        """Run until stopped (SIGTERM/SIGINT, :meth:`stop` or ``max_windows``); clean shutdown."""
        cfg = self.config
        log.info(
            "agent starting",
            extra=fields(
                gateway=cfg.gateway_id,
                site=cfg.site,
                assets=[a.asset_id for a in cfg.assets],
                broker=cfg.broker.url,
                clock=repr(self.clock),
                outbox_messages=self.outbox.stats().messages,
                next_sequence=self._next_seq,
            ),
        )
        with self._signals():
            self.uplink.start()
            self._sender.start()
            try:
                self._produce()
            finally:
                self._shutdown()
        summary = AgentSummary(
            windows=self._windows,
            queued=self._queued,
            suppressed=self._suppressed,
            alarms=self._alarms,
            failed=self._failed,
            skipped_ticks=self.scheduler.skipped,
            cpu_s_per_window=self._cpu_windows / self._windows if self._windows else 0.0,
        )
        log.info("agent stopped", extra=fields(**dataclasses.asdict(summary)))
        return summary

    # -- producer --------------------------------------------------------------------------

    def _produce(self) -> None:
        stepping = isinstance(self.clock, SimulatedClock) and self.clock.speed == 0
        last_flush = time.monotonic()
        while not self._stop.is_set():
            tick = self.scheduler.peek()
            if self._pending_windows and (
                (not stepping and tick.due > self.clock.now())
                or len(self._pending) >= _FLUSH_MESSAGES
                or len(self._pending_windows) >= _FLUSH_WINDOWS
                or time.monotonic() - last_flush > _FLUSH_AFTER_S
            ):
                self._flush()
                last_flush = time.monotonic()
            if not self.clock.wait_until(tick.due, self._stop):
                break
            now = self.clock.now()
            self._lag_max = max(self._lag_max, (now - tick.due).total_seconds())
            for asset_id in tick.asset_ids:
                asset = self.config.asset(asset_id)
                try:
                    window_sets = list(self.source.windows(asset, tick.due))
                except Exception as exc:  # a misbehaving driver must not stop the gateway
                    log.error(
                        "source failed",
                        extra=fields(asset=asset_id, error=f"{type(exc).__name__}: {exc}"),
                    )
                    window_sets = []
                for ws in window_sets:
                    self._process(asset, ws)
                skipped = self.scheduler.advance(asset_id, self.clock.now())
                if skipped:
                    log.warning("ticks skipped", extra=fields(asset=asset_id, skipped=skipped))
                if self.max_windows is not None and self._windows >= self.max_windows:
                    self._stop.set()
                    break
        self._flush()

    def _process(self, asset: AssetConfig, ws: WindowSet) -> None:
        t0 = time.thread_time()
        self._windows += 1
        try:
            msg = self.extractors[asset.asset_id].extract(
                ws,
                gateway_id=self.config.gateway_id,
                site=self.config.site,
                sequence=self._next_seq,
                clock_sync=self.clock_sync,
            )
            layout = self.layouts[asset.asset_id]
            frame = encode_indicators(msg, layout)
            alarms = self.detector.check(msg)
        except Exception as exc:
            self._failed += 1
            reason = f"cannot compute indicators: {type(exc).__name__}: {exc}"
            log.error("window failed", extra=fields(asset=asset.asset_id, reason=reason))
            self.source.settle(ws, reason.splitlines()[0][:500])
            return
        topic = indicators_topic(self.config.site, self.config.gateway_id, asset.asset_id)
        with self._budget_lock:
            for alarm in alarms:
                payload = encode_json(alarm)
                self._pending.append(
                    NewMessage("alarm", payload, alarm.raised_at, Priority.ALARM, asset.asset_id)
                )
                self.budget.record(msg.window_start, wire_bytes(
                    alarm_topic(self.config.site, self.config.gateway_id, asset.asset_id), payload
                ))  # fmt: skip
                self._alarms += 1
                log.warning(
                    "edge alarm",
                    extra=fields(asset=asset.asset_id, kind=alarm.kind.value,
                                 cleared=alarm.cleared, detail=alarm.detail),
                )  # fmt: skip
            decision = self.budget.decide(
                asset.asset_id,
                msg.values,
                msg.window_start,
                size=wire_bytes(topic, frame),
                quality=msg.quality,
                forced=bool(alarms),
            )
            if decision.send:
                seq = self._next_seq
                self._next_seq += 1
                self._pending.append(
                    NewMessage("indicators", frame, msg.window_start, Priority.ROUTINE,
                               asset.asset_id, seq)
                )  # fmt: skip
                self.budget.sent(asset.asset_id, msg.values, msg.window_start, quality=msg.quality)
                self.budget.record(msg.window_start, wire_bytes(topic, frame))
                self._queued += 1
            else:
                self._suppressed += 1
            self._pending_meta.update(
                {
                    f"last_window:{asset.asset_id}": ws.start.isoformat(),
                    "budget_day": msg.window_start.date().isoformat(),
                    "budget_spent": str(self.budget.spent_today),
                    "budget_scale": repr(self.budget.scale),
                }
            )
        self._pending_windows.append(ws)
        self._cpu_windows += time.thread_time() - t0

    def _flush(self) -> None:
        if not self._pending_windows and not self._pending:
            return
        messages, windows, meta = self._pending, self._pending_windows, self._pending_meta
        self._pending, self._pending_windows, self._pending_meta = [], [], {}
        if isinstance(self.source, RecoverableSource):
            meta["source_marks"] = json.dumps(self.source.marks(windows))
        error: str | None = None
        try:
            self.outbox.put(messages, meta=meta, now=self.clock.now())
        except Exception as exc:
            error = f"could not store in the outbox: {type(exc).__name__}: {exc}"
            log.error("outbox write failed", extra=fields(messages=len(messages), error=error))
            self._next_seq = self.outbox.next_sequence
            self._queued -= sum(m.kind == "indicators" for m in messages)
        for ws in windows:
            try:
                self.source.settle(ws, error)
            except Exception as exc:
                log.error("source settle failed", extra=fields(error=str(exc)))
        self._events.put(UplinkEvent("wake"))

    # -- sender ----------------------------------------------------------------------------

    def _status_model(
        self, state: GatewayState, *, at: datetime | None, full: bool = True
    ) -> GatewayStatus:
        data: dict[str, Any] = {
            "gateway_id": self.config.gateway_id,
            "site": self.config.site,
            "state": state,
            "at": at,
            "agent_version": agent_version(),
            "assets": tuple(a.asset_id for a in self.config.assets),
        }
        if full:
            st = self.outbox.stats()
            mono, cpu = time.monotonic(), time.process_time()
            wall = mono - self._cpu_mark[0]
            cpu_fraction = (cpu - self._cpu_mark[1]) / wall if wall > 0 else 0.0
            self._cpu_mark = (mono, cpu)
            lag, self._lag_max = self._lag_max, 0.0
            data.update(
                clock_sync=self.clock_sync,
                outbox_messages=st.messages,
                outbox_bytes=st.bytes,
                oldest_queued_at=st.oldest_created_at,
                dropped_total=st.dropped_total,
                bytes_sent_today=self.budget.spent_today,
                budget_bytes_per_day=self.config.budget.bytes_per_day,
                deadband_scale=round(self.budget.scale, 4),
                lag_s=round(max(lag, 0.0), 3),
                cpu_fraction=round(max(cpu_fraction, 0.0), 4),
                last_sequence=st.next_sequence - 1 if st.next_sequence else None,
            )
        return GatewayStatus.model_validate(data)

    def _publish_control(self, what: str, topic: str, payload: bytes) -> None:
        try:
            mid = self.uplink.publish(topic, payload, retain=True)
        except PublishRefusedError as exc:
            log.error("publish refused", extra=fields(what=what, error=str(exc)))
            return
        self._control[mid] = what
        with self._budget_lock:
            self.budget.record(self.clock.now(), wire_bytes(topic, payload))

    def _publish_status(self, state: GatewayState) -> None:
        status = self._status_model(state, at=self.clock.now())
        self._publish_control(f"status:{state.value}", self.status_topic, encode_json(status))
        self._status_due = time.monotonic() + self.config.broker.status_interval_s

    def _birth(self) -> None:
        unique = {la.digest: la for la in self.layouts.values()}
        announcement = LayoutAnnouncement(
            gateway_id=self.config.gateway_id,
            site=self.config.site,
            published_at=self.clock.now(),
            layouts=tuple(unique.values()),
        )
        self._publish_control(
            "layout",
            layout_topic(self.config.site, self.config.gateway_id),
            encode_json(announcement),
        )
        self._publish_status(GatewayState.ONLINE)

    def _handle(self, ev: UplinkEvent, acked: list[int]) -> None:
        if ev.kind == "acked":
            ids = self._inflight.pop(ev.mid, None)
            if ids is None:
                what = self._control.pop(ev.mid, None)
                if what == "status:offline":
                    self._offline_acked.set()
                if what is not None and not ev.ok:
                    log.error("broker refused", extra=fields(what=what, reason=ev.detail))
            elif ev.ok:
                acked.extend(ids)
            else:
                log.error(
                    "broker refused messages; retrying later",
                    extra=fields(messages=len(ids), reason=ev.detail, retry_s=_RETRY_REFUSED_S),
                )
                self._retry.append((time.monotonic() + _RETRY_REFUSED_S, ids))
        elif ev.kind == "connected":
            log.info("connected", extra=fields(broker=self.config.broker.url, detail=ev.detail))
            self._need_birth = True
        elif ev.kind in ("disconnected", "connect_failed", "refused"):
            log.warning(ev.kind, extra=fields(broker=self.config.broker.url, reason=ev.detail))

    def _groups(self, entries: Sequence[OutboxEntry]) -> Iterator[tuple[str, bytes, list[int]]]:
        site, gw = self.config.site, self.config.gateway_id
        by_asset: dict[str, list[OutboxEntry]] = {}
        for e in entries:
            if e.kind == "alarm":
                yield alarm_topic(site, gw, e.asset_id or ""), e.payload, [e.id]
            elif e.kind == "dropped":
                yield dropped_topic(site, gw), e.payload, [e.id]
            else:
                by_asset.setdefault(e.asset_id or "", []).append(e)
        size = self.config.outbox.batch_frames
        for asset_id, es in by_asset.items():
            topic = indicators_topic(site, gw, asset_id)
            for i in range(0, len(es), size):
                chunk = es[i : i + size]
                payload = (
                    chunk[0].payload if len(chunk) == 1
                    else encode_batch([c.payload for c in chunk])
                )  # fmt: skip
                yield topic, payload, [c.id for c in chunk]

    def _fill(self) -> None:
        limit = self.config.broker.inflight_max
        take = self.config.outbox.batch_frames * len(self.config.assets)
        while len(self._inflight) < limit:
            entries = self.outbox.take(take)
            if not entries:
                return
            groups = list(self._groups(entries))
            for n, (topic, payload, ids) in enumerate(groups):
                try:
                    mid = self.uplink.publish(topic, payload)
                except PublishRefusedError as exc:
                    log.error("publish refused", extra=fields(error=str(exc)))
                    self.outbox.release([i for g in groups[n:] for i in g[2]])
                    return
                self._inflight[mid] = ids

    def _sender_step(self, acked: list[int], timeout: float) -> None:
        events = []
        try:
            events.append(self._events.get(timeout=timeout))
            while True:
                events.append(self._events.get_nowait())
        except queue.Empty:
            pass
        for ev in events:
            self._handle(ev, acked)
        if acked:
            self.outbox.ack(acked)
            acked.clear()
        now = time.monotonic()
        if self._retry and self._retry[0][0] <= now:
            due = [r for r in self._retry if r[0] <= now]
            self._retry = [r for r in self._retry if r[0] > now]
            self.outbox.release([i for _, ids in due for i in ids])
        if self.uplink.connected:
            if self._need_birth:
                self._need_birth = False
                self._birth()
            self._fill()
            if time.monotonic() >= self._status_due:
                self._publish_status(GatewayState.ONLINE)

    def _sender_loop(self) -> None:
        acked: list[int] = []
        try:
            while not self._closing.is_set():
                try:
                    self._sender_step(acked, 0.2)
                except Exception:  # keep sending whatever went wrong once; it is logged
                    log.exception("sender step failed")
                    acked.clear()
                    self._closing.wait(1.0)
            deadline = time.monotonic() + self.drain_timeout_s
            while time.monotonic() < deadline and (
                self._inflight or self.outbox.pending() or not self._events.empty()
            ):
                if self.uplink.attempted and not self.uplink.connected and not self._inflight:
                    break
                self._sender_step(acked, 0.05)
            if self.uplink.connected:
                self._publish_status(GatewayState.OFFLINE)
                deadline = time.monotonic() + 3.0
                while time.monotonic() < deadline and not self._offline_acked.is_set():
                    self._sender_step(acked, 0.05)
        except Exception:
            log.exception("sender failed")
            raise

    def _shutdown(self) -> None:
        try:
            self._flush()
        except Exception:
            log.exception("final flush failed")
        self._closing.set()
        self._sender.join()
        self.uplink.stop()
        self.source.close()
        st = self.outbox.stats()
        log.info(
            "outbox closed",
            extra=fields(messages=st.messages, bytes=st.bytes, next_sequence=st.next_sequence),
        )
        self.outbox.close()

    # -- for tests and tools ---------------------------------------------------------------

    @property
    def inflight(self) -> int:
        return len(self._inflight)

"""Assess one asset from the store: health points, degradation fit, time to failure, diagnosis.

How an asset is assessed
------------------------
* **Life segments.** A segment starts at commissioning (the asset's first window) and again at
  every repair, replacement or failure recorded for it. Windows before the current segment's start
  are not assessed again.
* **Order.** Windows are taken in (window start, message id) order, whatever order they arrived
  in, so the result is a function of the stored messages and maintenance events only.
* **Exclusions.** A window with a quality flag that makes a channel untrustworthy (clipped,
  flatline, dropout, DC offset, drift, out of regime), or without an operating point, is kept as
  an excluded health point with its reason; it is never scored nor learned from.
* **Baseline.** The first ``baseline_windows`` usable windows of a segment are its healthy
  baseline: operating regimes (speed × load bands), the health index per failure mode
  (standardised against the same regime's baseline) and Hotelling's T² of the health-index
  vector with its Phase II F-distribution control limit (``alpha``), one-sided: a window whose
  health indices departed downwards on balance (healthier than the baseline) gets a negative
  score and is never over the limit (Follmann's one-sided test). On the anomaly benchmark's
  healthy pumps, whose process indicators fall below their baseline in some seasons, windows
  over the limit went from 2.9 to 1.8 % (maturing baseline; false alarms 2.0 per asset-year
  either way) and from 4.7 to 2.3 % with a 30-day baseline (false alarms 9.1 to 8.1), with the
  same detection delays.
* **A maturing baseline.** Each time as many windows have been scored after the baseline as it
  holds, while no degradation is detected, it is refitted on every usable window of the segment
  so far (windows waiting at new speeds aside), until it holds ``mature_windows``: two days of
  hourly windows say little about a pump's spread over weeks of duty and weather. Windows
  already scored keep the verdict they got.
* **New speeds.** A window whose shaft speed is outside the speeds the baseline was learned at
  has no verdict (a visible exclusion reason); once ``extend_windows`` such windows wait and no
  degradation is detected, they are learned into the baseline and rescored.
* **Degradation.** Detected when at least ``detect_fraction`` of the last ``detect_windows``
  scored windows are over the T² limit, or the leading failure mode's health index has risen to
  ``onset_health_index``. Then the exponential (Gebraeel et al. 2005) and Wiener models are fitted
  to the leading mode's health index, aggregated to one median per ``aggregate_h`` (the models
  want one value per period, and this bounds the cost of a refit), and the one with the higher
  evidence is kept (:func:`prognosis_service.prognosis.select_model`).
* **Diagnosis.** Each of the latest ``diagnosis_windows`` usable windows is diagnosed against
  its regime's baseline and their probabilities are averaged
  (:func:`prognosis_service.diagnosis.pool_diagnoses`); one window's verdict alone is noisy.
* **Threshold.** The health index is 1 at the failure level of its severity rules; when at least
  three failures of the same asset class are recorded, the median health index those units had
  at failure is used instead, taken over the failures recorded with the diagnosed failure mode
  when there are any (defect types that share an index fail at different levels of it), and
  the recorded values' spread makes the threshold uncertain in the forecast
  (:func:`_failure_threshold`).
* **Fleet prior.** Learned (:class:`FleetPrior`) from the segments of the same asset class that
  ended in a recorded failure; with fewer than three, the models' documented default priors.
* **Late data.** A window older than the last one processed is scored against the segment's
  baseline and the fit is redone; if it falls inside the baseline period (or would have changed
  when the baseline grew or learned new speeds), the segment is reassessed from its stored
  windows.
* **Lease.** An asset is assessed by one process at a time (a lease row with an expiry).

Everything here is advisory: forecasts and diagnoses do not replace protective trips, and local
codes and qualified personnel decide what is done on the machine.
"""

from __future__ import annotations

import functools
import hashlib
import logging
import math
import uuid
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
from sqlalchemy import delete, func, insert, select, update
from sqlalchemy.orm import Session
from sqlalchemy.orm.attributes import flag_modified

from prognosis_service.alerts.rules import (
    AnomalyReading,
    ChannelQualityReading,
    DiagnosisReading,
    Reading,
    TimeToFailureReading,
    ZoneReading,
)
from prognosis_service.assessment.baseline import (
    BEARING_FAULTS,
    OUTSIDE_SPEED_RANGE,
    FittedBaseline,
    Score,
    finite_or_none,
    fit_baseline,
    mode_of_fault,
)
from prognosis_service.assessment.models import (
    AssetAssessment,
    HealthPointRow,
    MaintenanceEventRow,
)
from prognosis_service.assessment.windows import (
    Window,
    WindowKey,
    after_key,
    before_key,
    load_windows,
)
from prognosis_service.diagnosis import NOT_SURE, FaultClassifier, diagnose, pool_diagnoses
from prognosis_service.health import NotEnoughDataError
from prognosis_service.prognosis import (
    ExponentialDegradation,
    FleetPrior,
    WienerDegradation,
    select_model,
)
from prognosis_service.store.engine import Store, insert_for
from prognosis_service.store.models import Asset, MessageRow
from shared_schema import FaultMode, QualityFlag

__all__ = [
    "RENEWING_KINDS",
    "AssessmentConfig",
    "AssessmentOutcome",
    "assess_asset",
    "model_from_state",
]

log = logging.getLogger("wellspan.assessment")

RENEWING_KINDS = frozenset({"repair", "replacement", "failure"})
"""Maintenance kinds that end a life segment and start a new one."""

_FLAGS = frozenset(f.value for f in QualityFlag)
_EXP_OFFSET = -1.0  # the health index is clipped at -1, so exp(L) = HI + 1 stays positive
_AMPLITUDE_UNITS = frozenset({"g", "mm/s", "kPa", "A"})


@dataclass(frozen=True)
class AssessmentConfig:
    """Tuning of the assessor (defaults: common practice, no source; see the module docstring)."""

    baseline_windows: int = 48
    min_regime_windows: int = 12
    n_speed_bands: int = 2
    n_load_bands: int = 1
    alpha: float = 0.01
    detect_windows: int = 12
    detect_fraction: float = 0.5
    onset_health_index: float = 0.3
    aggregate_h: float = 12.0  # see _bucket_width
    max_fit_points: int = 400
    min_fleet_failures: int = 3
    batch_windows: int = 2000
    lease_s: float = 300.0
    risk: float = 0.1
    rule_weight: float = 0.3
    diagnosis_windows: int = 6
    extend_windows: int = 72
    mature_windows: int = 384  # see _Run._grow_baseline

    def growth_due(self, baseline: int, scored_since: int) -> bool:
        """Whether a baseline of ``baseline`` windows, with ``scored_since`` windows scored
        after it, is refitted on the segment so far (if no degradation is detected)."""
        return baseline < self.mature_windows and scored_since >= baseline

    def extension_due(self, waiting: int, share_over_limit: float) -> bool:
        """Whether ``waiting`` windows at new speeds are learned into the baseline now.

        At ``extend_windows`` of them and every quarter of that after, while fewer than
        ``detect_fraction`` of the last ``detect_windows`` scored windows are over the limit.
        """
        extra = waiting - self.extend_windows
        if extra < 0 or extra % max(1, self.extend_windows // 4):
            return False
        return share_over_limit < self.detect_fraction

    def fit_baseline(self, windows: Sequence[Window]) -> FittedBaseline:
        """The healthy baseline these settings fit on ``windows`` (regimes, α)."""
        return fit_baseline(
            windows,
            n_speed_bands=self.n_speed_bands,
            n_load_bands=self.n_load_bands,
            min_regime_windows=self.min_regime_windows,
            alpha=self.alpha,
        )


@dataclass
class AssessmentOutcome:
    """What one :func:`assess_asset` call did."""

    asset_id: str
    processed: int = 0
    late: int = 0
    reset: bool = False
    leased: bool = True
    backlog: bool = False
    status: str | None = None
    readings: list[Reading] = field(default_factory=list)


def model_from_state(state: dict[str, Any]) -> ExponentialDegradation | WienerDegradation:
    """Rebuild a fitted degradation model from its ``to_state()``."""
    if state.get("kind") == "ExponentialDegradation":
        return ExponentialDegradation.from_state(state)
    return WienerDegradation.from_state(state)


# ------------------------------------------------------------------------------------ leases


def _acquire(store: Store, asset_id: str, owner: str, lease_s: float) -> bool:
    now = datetime.now(UTC)
    with store.write() as session:
        session.execute(
            insert_for(session)(AssetAssessment)
            .values(
                asset_id=asset_id,
                status="no_baseline",
                message="not assessed yet",
                cursor_id=0,
                backlog=False,
                events_digest="",
            )
            .on_conflict_do_nothing()
        )
        got = session.execute(
            update(AssetAssessment)
            .where(
                AssetAssessment.asset_id == asset_id,
                (AssetAssessment.lease_owner.is_(None))
                | (AssetAssessment.lease_until < now)
                | (AssetAssessment.lease_owner == owner),
            )
            .values(lease_owner=owner, lease_until=now + timedelta(seconds=lease_s))
        )
        return bool(got.rowcount == 1)  # type: ignore[attr-defined]


def _release(store: Store, asset_id: str, owner: str) -> None:
    with store.write() as session:
        session.execute(
            update(AssetAssessment)
            .where(AssetAssessment.asset_id == asset_id, AssetAssessment.lease_owner == owner)
            .values(lease_owner=None, lease_until=None)
        )


# ---------------------------------------------------------------------------------- segments


def _events(session: Session, asset_id: str) -> list[MaintenanceEventRow]:
    return list(
        session.scalars(
            select(MaintenanceEventRow)
            .where(MaintenanceEventRow.asset_id == asset_id)
            .order_by(MaintenanceEventRow.at, MaintenanceEventRow.event_id)
        )
    )


def _digest(events: Sequence[MaintenanceEventRow]) -> str:
    h = hashlib.sha256()
    for e in events:
        h.update(f"{e.event_id}|{e.at.isoformat()}|{e.kind}|{e.failure_mode}\n".encode())
    return h.hexdigest()


def _segment_start(
    session: Session, asset_id: str, events: Sequence[MaintenanceEventRow]
) -> datetime | None:
    renewals = [e.at for e in events if e.kind in RENEWING_KINDS]
    if renewals:
        return max(renewals)
    first: datetime | None = session.scalar(
        select(func.min(MessageRow.window_start)).where(MessageRow.asset_id == asset_id)
    )
    return first


# ---------------------------------------------------------------------------------- assessing


@functools.lru_cache(maxsize=256)
def _velocity_channels(names: tuple[str, ...]) -> tuple[tuple[int, str], ...]:
    """(index, channel) of each overall velocity indicator of a layout's names."""
    return tuple(
        (i, n.split(".", 1)[0]) for i, n in enumerate(names) if n.endswith(".velocity_rms")
    )


def overall_velocity(diagnosis: dict[str, Any] | None) -> float | None:
    """The largest overall r.m.s. velocity (mm/s) among a diagnosis' indicators, or None.

    The reading the ISO 10816-3 severity zone is judged on; stored with the result so the
    fleet view need not read the diagnosis' indicator table.
    """
    speeds = [
        float(i["value"])
        for i in (diagnosis or {}).get("indicators", [])
        if i["name"].endswith(".velocity_rms")
    ]
    return max(speeds) if speeds else None


def fleet_summary(result: dict[str, Any]) -> dict[str, Any]:
    """The fields of an assessment result that the fleet view lists, and the fitted model's
    state for its probability within a chosen horizon.

    Stored beside the result (``asset_assessments.summary``): a result is about 6 kB, most of
    it the diagnosis' indicator table, and reading and decoding a thousand of them was most of
    the fleet view's time (cProfile, 1,000 assets); a summary is under 1 kB.
    """
    summary = {k: result[k] for k in _SUMMARY_KEYS if k in result}
    diag = result.get("diagnosis")
    if summary.get("velocity_rms_mm_s") is None:  # a result from before it was stored
        summary["velocity_rms_mm_s"] = overall_velocity(diag)
    summary["diagnosis"] = (
        {"fault": diag["fault"], "confidence": diag["confidence"]} if diag else diag
    )
    return summary


_SUMMARY_KEYS = (
    "health_index",
    "failure_threshold",
    "anomaly",
    "velocity_rms_mm_s",
    "model_state",
    "quantiles_h",
    "last_time_h",
)


class _Run:
    """One assess call's working state inside its write transaction."""

    def __init__(
        self,
        session: Session,
        asset: Asset,
        row: AssetAssessment,
        config: AssessmentConfig,
        classifier: FaultClassifier | None,
        outcome: AssessmentOutcome,
    ) -> None:
        self.session = session
        self.asset = asset
        self.row = row
        self.config = config
        self.classifier = classifier
        self.outcome = outcome
        self.snapshot_id = row.cursor_id
        self.points: list[dict[str, Any]] = []  # health points not yet written (_write_points)
        state = dict(row.state or {})
        self.state = state
        self.baseline = (
            FittedBaseline.from_state(state["baseline"]) if state.get("baseline") else None
        )

    # -- state helpers ----------------------------------------------------------------------
    @property
    def last_key(self) -> WindowKey | None:
        if self.row.last_window_start is None or self.row.last_message_id is None:
            return None
        return (self.row.last_window_start, self.row.last_message_id)

    @property
    def baseline_end(self) -> WindowKey | None:
        end = self.state.get("baseline_end")
        return _key(end) if end else None

    def reset_segment(self, start: datetime | None) -> None:
        self._write_points()
        seg = self.row.segment_start
        if seg is not None:
            self.session.execute(
                delete(HealthPointRow).where(
                    HealthPointRow.asset_id == self.asset.asset_id,
                    HealthPointRow.window_start >= (seg if start is None else start),
                )
            )
        self.row.segment_start = start
        self.row.last_window_start = None
        self.row.last_message_id = None
        self.state = {"learning": 0}
        self.baseline = None
        self.outcome.reset = True

    # -- points -----------------------------------------------------------------------------
    def _add_point(self, w: Window, score: Score | None, reason: str | None) -> None:
        assert self.row.segment_start is not None
        self.points.append(
            {
                "asset_id": self.asset.asset_id,
                "message_row_id": w.row_id,
                "message_id": w.message_id,
                "window_start": w.window_start,
                "segment_start": self.row.segment_start,
                "regime": None if score is None else score.regime,
                "anomaly_score": None if score is None else score.anomaly_score,
                "control_limit": None if score is None else score.control_limit,
                "health": None if score is None else score.health,
                "excluded": reason is not None,
                "excluded_reason": reason,
            }
        )

    def _write_points(self) -> None:
        """Write the buffered health points in one bulk INSERT.

        One ORM object per window was over a third of a first assessment's time (cProfile, 720
        windows per asset). Called before anything reads or deletes health points.
        """
        if self.points:
            self.session.execute(insert(HealthPointRow), self.points)
            self.points = []

    def _window_readings(self, w: Window, score: Score | None) -> None:
        a = self.asset
        base: dict[str, Any] = {
            "site": a.site_id,
            "at": w.window_start,
            "asset_id": a.asset_id,
            "asset_class": a.asset_class,
        }
        readings = self.outcome.readings
        for channel, entry in sorted((w.quality or {}).items()):
            flags = frozenset(QualityFlag(f) for f in entry.get("flags", ()) if f in _FLAGS)
            readings.append(ChannelQualityReading(channel=channel, flags=flags, **base))
        bad = w.bad_channels
        for i, channel in _velocity_channels(w.names):
            value = float(w.values[i])
            if math.isfinite(value) and channel not in bad:
                readings.append(ZoneReading(velocity_rms_mm_s=value, channel=channel, **base))
        if score is not None and score.anomaly_score is not None and score.control_limit:
            readings.append(
                AnomalyReading(
                    score=score.anomaly_score,
                    control_limit=score.control_limit,
                    **base,
                )
            )

    def score_and_store(self, windows: Sequence[Window], *, readings: bool = True) -> None:
        """Score ``windows`` (in order) against the baseline and buffer their health points.

        Windows outside the baseline's speed range get no verdict and are kept as candidates;
        once ``extend_windows`` of them are waiting, the baseline is extended with them
        (:meth:`_extend_baseline`) and the rest of ``windows`` is scored against the new one.
        ``readings=False`` (a rescoring of windows already alerted on) emits no alert readings.
        """
        assert self.baseline is not None
        remaining = list(windows)
        while remaining:
            end = self.baseline_end
            assert end is not None
            usable = [w for w in remaining if w.excluded_reason is None]
            scores = dict(zip((w.key for w in usable), self.baseline.score(usable), strict=True))
            done = len(remaining)
            for i, w in enumerate(remaining):
                reason = w.excluded_reason
                score = scores.get(w.key)
                if reason is None and score is not None:
                    reason = score.reason
                self._add_point(w, score if reason is None else None, reason)
                if readings:
                    self._window_readings(w, score if reason is None else None)
                if readings and reason is None and w.key > end:
                    self.state["scored_since_fit"] = int(self.state.get("scored_since_fit", 0)) + 1
                    if self._grow_baseline(w):
                        done = i + 1
                        break
                if readings and reason is not None and reason.startswith(OUTSIDE_SPEED_RANGE):
                    pending = self.state.setdefault("outside_speed_windows", [])
                    pending.append([w.window_start.isoformat(), w.message_id.hex])
                    if self._extend_baseline():
                        done = i + 1
                        break
            remaining = remaining[done:]
        self._write_points()

    # -- the baseline -----------------------------------------------------------------------
    def learn(self, windows: Sequence[Window]) -> list[Window]:
        """Count usable windows towards the baseline; fit it once there are enough.

        Returns the windows after the baseline that still need scoring.
        """
        cfg = self.config
        rest: list[Window] = []
        for i, w in enumerate(windows):
            if self.baseline is not None:
                rest = list(windows[i:])
                break
            reason = w.excluded_reason
            if reason is not None:
                self._add_point(w, None, reason)
                self._window_readings(w, None)
                continue
            self.state["learning"] = int(self.state.get("learning", 0)) + 1
            if self.state["learning"] >= int(self.state.get("target", cfg.baseline_windows)):
                self._fit_baseline(w)
        self._write_points()
        return rest

    def _baseline_rows(self, last: WindowKey, *, every: bool = False) -> list[Window]:
        """The segment's first ``target`` usable windows up to ``last`` (``every``: all of
        them), leaving out windows at new speeds, waiting or learned: its healthy baseline."""
        seg = self.row.segment_start
        assert seg is not None
        conds = [
            MessageRow.window_start >= seg,
            ~after_key(last),
            MessageRow.id <= self.snapshot_id,  # what later runs count as seen
        ]
        apart = {key[1] for key in self.state.get("outside_speed_windows", [])} | set(
            self.state.get("learned_speed_windows", [])
        )
        rows = [
            w
            for w in load_windows(self.session, self.asset.asset_id, *conds)
            if w.excluded_reason is None and w.message_id.hex not in apart
        ]
        return (
            rows if every else rows[: int(self.state.get("target", self.config.baseline_windows))]
        )

    def _fit_baseline(self, last: Window) -> None:
        cfg = self.config
        rows = self._baseline_rows(last.key)
        target = int(self.state.get("target", cfg.baseline_windows))
        try:
            fitted = self.config.fit_baseline(rows)
        except (NotEnoughDataError, ValueError) as exc:
            # Not enough windows in one regime yet: keep learning with a longer baseline.
            self.state["baseline_note"] = str(exc)
            self.state["target"] = target + max(1, cfg.baseline_windows // 4)
            return
        self._use_baseline(fitted, end=last)
        self.score_and_store(rows)

    def _use_baseline(self, fitted: FittedBaseline, *, end: Window | None = None) -> None:
        """Score from now on against ``fitted``; ``end``: the last window of its baseline."""
        self.baseline = fitted
        self.state["baseline"] = fitted.to_state()
        if end is not None:
            self.state["baseline_end"] = [end.window_start.isoformat(), end.message_id.hex]

    def _grow_baseline(self, last: Window) -> bool:
        """Refit the baseline on the segment's usable windows up to ``last``, when it is due.

        Due when as many windows have been scored since the last fit as the baseline holds
        (:meth:`AssessmentConfig.growth_due`) and no degradation is detected: a defect growing
        meanwhile would otherwise become part of the baseline. On the anomaly benchmark's
        healthy pumps (hourly windows, one-sided score, 1 asset-year), the 48-window baseline
        alone raised 39.6 false alarms per asset-year; grown to 192 windows 0, to 384 2, to
        768 5 (a handful of alarms each: within the noise of three pumps). It stops at 384
        (``mature_windows``, 16 days of hourly windows): above 500 rows scikit-learn's
        MinCovDet switches to its subset algorithm, and a fit took 200 ms against 20 ms at 384
        rows (measured, 5 health indices), which made a first assessment of 1,440 windows 3.4
        times as long. Windows waiting at new speeds
        stay apart (they are learned by :meth:`_extend_baseline`); those learned so far are
        kept. Returns True when the baseline changed.
        """
        cfg = self.config
        target = int(self.state.get("target", cfg.baseline_windows))
        if not cfg.growth_due(target, int(self.state.get("scored_since_fit", 0))):
            return False
        self.state["scored_since_fit"] = 0  # weighed again after as many more windows
        if self._share_over_limit() >= cfg.detect_fraction:
            return False
        base = self._baseline_rows(last.key, every=True)
        learned = _windows_by_id(
            self.session, self.asset.asset_id, self.state.get("learned_speed_windows", [])
        )
        try:
            fitted = cfg.fit_baseline(base + learned)
        except (NotEnoughDataError, ValueError):
            return False
        self._use_baseline(fitted, end=last)
        self.state["target"] = len(base)
        self.state.setdefault("growths", []).append(
            {"key": self.state["baseline_end"], "windows": len(base) + len(learned)}
        )
        return True

    def _extend_baseline(self) -> bool:
        """Learn the waiting out-of-range windows into the baseline, when there are enough.

        A pump's duty drifts with the season (and a new duty point may last for good); without
        this, every window at the new speeds would stay without a verdict. The candidates are
        learned as healthy only while no degradation is detected (fewer than ``detect_fraction``
        of the last ``detect_windows`` scored windows over the limit), since a defect growing
        while the speed drifts would otherwise become part of the baseline; until then they keep
        their no-verdict reason. The refit takes the baseline windows and every window learned
        so far; the candidates' points are rescored against it (no alert readings for them).
        Returns True when the baseline changed.
        """
        pending = [key[1] for key in self.state.get("outside_speed_windows", [])]
        if not self.config.extension_due(len(pending), self._share_over_limit()):
            return False
        end = self.baseline_end
        assert end is not None
        learned = [*self.state.get("learned_speed_windows", []), *pending]
        aid = self.asset.asset_id
        candidates = _windows_by_id(self.session, aid, pending)
        rows = self._baseline_rows(end) + _windows_by_id(self.session, aid, learned)
        try:
            fitted = self.config.fit_baseline(rows)
        except (NotEnoughDataError, ValueError):
            return False
        self._write_points()
        self.session.execute(
            delete(HealthPointRow).where(
                HealthPointRow.asset_id == aid,
                HealthPointRow.message_id.in_([uuid.UUID(m) for m in pending]),
            )
        )
        assert fitted.speed_range_hz is not None
        self._use_baseline(fitted)
        self.state["learned_speed_windows"] = learned
        self.state["outside_speed_windows"] = []
        last = candidates[-1]
        self.state.setdefault("extensions", []).append(
            {
                "key": [last.window_start.isoformat(), last.message_id.hex],
                "windows": len(candidates),
                "speed_range_hz": list(fitted.speed_range_hz),
            }
        )
        self.score_and_store(candidates, readings=False)
        return True

    def _late_in_place(self, late: Sequence[Window], end: WindowKey | None) -> bool:
        """Whether late windows can be scored where they are, without reassessing the segment.

        Not when one falls in the baseline period, or before the last extension of the baseline
        (it would have been scored, or learned, against another baseline), or at a speed outside
        the baseline's (in window order it might have brought an extension forward), or before a
        waiting out-of-range window once an extension has been weighed (it would have been one
        of the windows :meth:`_share_over_limit` looked at), or when with them the baseline's
        growth would have been due (:meth:`_grow_baseline`, which may have come before them).
        """
        if end is None or self.baseline is None:
            return False
        first = min(w.key for w in late)
        if first <= end:
            return False
        extensions = self.state.get("extensions") or []
        if extensions and first <= _key(extensions[-1]["key"]):
            return False
        waiting = self.state.get("outside_speed_windows", [])
        if len(waiting) >= self.config.extend_windows and first <= _key(waiting[-1]):
            return False
        target = int(self.state.get("target", self.config.baseline_windows))
        scored = int(self.state.get("scored_since_fit", 0))
        if self.config.growth_due(target, scored + sum(w.excluded_reason is None for w in late)):
            return False  # in window order, the baseline might have grown before the last one
        return not any(
            w.excluded_reason is None
            and self.baseline.outside_speed_range(w.shaft_speed_hz) is not None
            for w in late
        )

    def _share_over_limit(self) -> float:
        """The share of the segment's latest ``detect_windows`` scored windows over the limit."""
        self._write_points()
        recent = self.session.execute(
            select(HealthPointRow.anomaly_score, HealthPointRow.control_limit)
            .where(
                HealthPointRow.asset_id == self.asset.asset_id,
                HealthPointRow.segment_start == self.row.segment_start,
                HealthPointRow.anomaly_score.is_not(None),
            )
            .order_by(HealthPointRow.window_start.desc(), HealthPointRow.message_id.desc())
            .limit(self.config.detect_windows)
        ).all()
        return share_over_limit([(score, limit) for score, limit in recent])

    # -- processing ---------------------------------------------------------------------------
    def _behind_cursor(self, seg: datetime, last: WindowKey) -> list[Window] | None:
        """Windows up to ``last`` with ids at or below the cursor that no run has seen.

        Row ids are handed out at insert and become visible at commit: with two consumers, the
        transaction holding lower ids can commit after a run has read past higher ones, so
        "id above the cursor" alone would miss those rows for good. Two counts over the
        indexes find the gap (every window seen after the baseline has a point; before it,
        the learning count and the excluded points add up); only then are rows read. Returns
        None when a gap exists but cannot be named window by window (still learning).
        """
        aid, cursor = self.asset.asset_id, self.row.cursor_id
        behind = [MessageRow.window_start >= seg, MessageRow.id <= cursor, ~after_key(last)]
        n_rows = self.session.scalar(
            select(func.count()).select_from(MessageRow).where(MessageRow.asset_id == aid, *behind)
        )
        points = select(func.count()).where(
            HealthPointRow.asset_id == aid,
            HealthPointRow.segment_start == seg,
            HealthPointRow.message_row_id <= cursor,
        )
        n_seen = int(self.session.scalar(points) or 0)
        if self.baseline is None:
            n_seen += int(self.state.get("learning", 0))
        if int(n_rows or 0) <= n_seen:
            return []
        if self.baseline is None:
            return None
        scored = select(HealthPointRow.id).where(
            HealthPointRow.asset_id == aid, HealthPointRow.message_row_id == MessageRow.id
        )
        return load_windows(self.session, aid, *behind, ~scored.exists())

    def process(self, snapshot_id: int) -> None:
        cfg = self.config
        aid = self.asset.asset_id
        seg = self.row.segment_start
        if seg is None:
            return
        self.snapshot_id = snapshot_id
        last = self.last_key
        if last is not None:
            missed = self._behind_cursor(seg, last)
            end = self.baseline_end
            if missed is None or (missed and not self._late_in_place(missed, end)):
                self.reset_segment(seg)
            elif missed:
                self.score_and_store(missed)
                self.outcome.late += len(missed)
        last = self.last_key
        if last is not None:
            late = load_windows(
                self.session,
                aid,
                MessageRow.id > self.row.cursor_id,
                MessageRow.id <= snapshot_id,
                MessageRow.window_start >= seg,
                before_key(last),
                limit=cfg.batch_windows,
            )
            if late:
                end = self.baseline_end
                if not self._late_in_place(late, end):
                    self.reset_segment(seg)
                else:
                    self.score_and_store(late)
                    self.outcome.late += len(late)
        conds: list[Any] = [MessageRow.window_start >= seg, MessageRow.id <= snapshot_id]
        if self.last_key is not None:
            conds.append(after_key(self.last_key))
        forward = load_windows(self.session, aid, *conds, limit=cfg.batch_windows)
        rest = self.learn(forward)
        if rest:
            self.score_and_store(rest)
        if forward:
            self.row.last_window_start = forward[-1].window_start
            self.row.last_message_id = forward[-1].message_id
        self.outcome.processed += len(forward)
        self.outcome.backlog = len(forward) >= cfg.batch_windows
        self.row.backlog = self.outcome.backlog
        self.row.cursor_id = snapshot_id
        self.row.as_of = self.row.last_window_start


# ---------------------------------------------------------------------------------- the fit


def _aggregate(
    points: Sequence[tuple[datetime, float]], start: datetime, width_h: float
) -> tuple[np.ndarray, np.ndarray]:
    """Median per bucket of ``width_h`` hours since ``start``; t = age (h) of its last window."""
    buckets: dict[int, list[tuple[float, float]]] = {}
    for ws, v in points:
        age = (ws - start).total_seconds() / 3600.0
        buckets.setdefault(int(age // width_h), []).append((age, v))
    t, y = [], []
    for k in sorted(buckets):
        ages, vals = zip(*buckets[k], strict=True)
        t.append(max(max(ages), 1e-3))
        y.append(float(np.median(vals)))
    return np.asarray(t), np.asarray(y)


def _bucket_width(
    points: Sequence[tuple[datetime, float]], start: datetime, cfg: AssessmentConfig
) -> float:
    """Bucket width (h) of the fit: ``aggregate_h``, wider on spans over ``max_fit_points``.

    Half-day buckets split the pumps' daily duty cycle: each takes a different mix of operating
    regimes, and a defect does not raise a health index by quite the same amount in every
    regime, so the bucket medians alternate (lag-1 correlation of the increments about -0.85 on
    the demo's bearing faults). The models' trend test allows for that noise
    (``prognosis.degradation._trend_z``). Daily buckets remove the alternation, but the
    intervals, whose width it inflates, then covered the truth less often than nominal (P10-P90
    coverage 0.26 against 0.65 on tests/prognosis_service/assessment/test_system.py's fleet):
    widen the buckets only together with a calibration of the intervals.
    """
    if not points:
        return cfg.aggregate_h
    span_h = (points[-1][0] - start).total_seconds() / 3600.0
    return max(cfg.aggregate_h, span_h / cfg.max_fit_points)


def _segment_points(
    session: Session, asset_id: str, lo: datetime | None, hi: datetime | None
) -> list[tuple[datetime, float | None, float | None, dict[str, float]]]:
    stmt = select(
        HealthPointRow.window_start,
        HealthPointRow.anomaly_score,
        HealthPointRow.control_limit,
        HealthPointRow.health,
    ).where(
        HealthPointRow.asset_id == asset_id,
        HealthPointRow.excluded.is_(False),
        HealthPointRow.health.is_not(None),
    )
    if lo is not None:
        stmt = stmt.where(HealthPointRow.window_start >= lo)
    if hi is not None:
        stmt = stmt.where(HealthPointRow.window_start < hi)
    stmt = stmt.order_by(HealthPointRow.window_start, HealthPointRow.message_id)
    return [(r[0], r[1], r[2], r[3]) for r in session.execute(stmt)]


def share_over_limit(scores: Sequence[tuple[float | None, float | None]]) -> float:
    """The share of (anomaly score, control limit) pairs with a score over its limit (0 if
    none has both)."""
    both = [(s, lim) for s, lim in scores if s is not None and lim is not None]
    return sum(1 for s, lim in both if s > lim) / len(both) if both else 0.0


def _key(stored: Sequence[str]) -> WindowKey:
    """A window key kept in the state as ``[window start ISO, message id hex]``."""
    return (datetime.fromisoformat(stored[0]), uuid.UUID(stored[1]))


def _windows_by_id(session: Session, asset_id: str, message_ids: Sequence[str]) -> list[Window]:
    """The asset's windows with these message ids (hex), in window order."""
    if not message_ids:
        return []
    return load_windows(
        session, asset_id, MessageRow.message_id.in_([uuid.UUID(m) for m in message_ids])
    )


def _fleet(
    session: Session, asset: Asset, cfg: AssessmentConfig
) -> tuple[list[tuple[np.ndarray, np.ndarray]], list[tuple[str | None, float]]]:
    """Run-to-failure histories of the asset class: (t, health index), and per failure its
    recorded failure mode with the health index at failure."""
    failures = session.execute(
        select(
            MaintenanceEventRow.asset_id, MaintenanceEventRow.at, MaintenanceEventRow.failure_mode
        )
        .join(Asset, Asset.asset_id == MaintenanceEventRow.asset_id)
        .where(Asset.asset_class == asset.asset_class, MaintenanceEventRow.kind == "failure")
        .order_by(MaintenanceEventRow.at.desc(), MaintenanceEventRow.event_id)
        .limit(50)
    ).all()
    histories, finals = [], []
    for asset_id, at, mode in failures:
        earlier = session.scalar(
            select(func.max(MaintenanceEventRow.at)).where(
                MaintenanceEventRow.asset_id == asset_id,
                MaintenanceEventRow.kind.in_(sorted(RENEWING_KINDS)),
                MaintenanceEventRow.at < at,
            )
        )
        pts = _segment_points(session, asset_id, earlier, at)
        if not pts:
            continue
        start = session.scalar(
            select(HealthPointRow.segment_start)
            .where(HealthPointRow.asset_id == asset_id, HealthPointRow.window_start < at)
            .order_by(HealthPointRow.window_start.desc())
            .limit(1)
        )
        if start is None:
            continue
        modes = pts[-1][3].keys()
        use = mode_of_fault(mode)
        if use not in modes:
            use = max(sorted(modes), key=lambda m: pts[-1][3][m])
        series = [(p[0], p[3][use]) for p in pts if p[0] >= start]
        t, y = _aggregate(series, start, _bucket_width(series, start, cfg))
        tf, yf, _ = _degradation_series(t, y, cfg.onset_health_index / 2.0)
        if tf.size >= 3:
            histories.append((tf, yf))
            finals.append((mode, float(y[-1])))
    return histories, finals


def _failure_threshold(
    finals: Sequence[tuple[str | None, float]], failure_mode: str | None, cfg: AssessmentConfig
) -> tuple[float, float, str]:
    """The failure threshold of the health index, its spread (SD) from unit to unit, and why.

    One failure level does not fit every fault that shares a health index: on the simulated
    pumps the bearing index (high-band r.m.s. over baseline) stood at 1.11-1.21 at failure for
    outer-race defects (mean 1.15), 0.82-1.00 for inner-race (0.91) and 0.71-0.96 for
    rolling-element defects (0.83; 16 run-to-failure units; the impulses of a defect that moves
    through the load zone reach the housing weaker). So once the asset class has
    ``min_fleet_failures`` recorded failures, the threshold is the median of those with the
    same recorded failure mode as the one diagnosed, else of them all. The SD is the spread of
    the recorded values about their failure mode's mean (pooled over modes with two or more
    failures) times ``sqrt(1 + 1/n)`` for a new unit from ``n`` recorded ones; without such
    replicates, the spread of all the class's failures, an upper bound. With too few failures:
    the severity class's failure level, health index 1, and no spread (nothing to learn it
    from).
    """
    if len(finals) < cfg.min_fleet_failures:
        return 1.0, 0.0, "severity class (health index 1)"
    values = np.array([v for _, v in finals])
    by_mode: dict[str | None, list[float]] = {}
    for mode, v in finals:
        by_mode.setdefault(mode, []).append(v)
    same = by_mode.get(failure_mode, []) if failure_mode is not None else []
    use = np.array(same) if same else values
    dof = sum(len(v) - 1 for v in by_mode.values())
    if dof >= 1:
        ss = sum(float(np.sum((np.array(v) - np.mean(v)) ** 2)) for v in by_mode.values())
        spread = math.sqrt(ss / dof)
    else:
        spread = float(np.std(values, ddof=1))
    sd = spread * math.sqrt(1.0 + 1.0 / use.size)
    threshold = max(float(np.median(use)), 0.2)
    if same:
        source = f"median at {len(same)} recorded {failure_mode} failures of the asset class"
    else:
        source = f"median at {len(finals)} recorded failures of the asset class"
    return threshold, sd, source


def _degradation_series(
    t: np.ndarray, y: np.ndarray, level: float
) -> tuple[np.ndarray, np.ndarray, float]:
    """The buckets of the final run at or above ``level``, timed from the bucket before it.

    Fitting starts when degradation is detected: the degradation models describe a signal that
    leaves its healthy level (0) at their time origin, so the origin is the last healthy bucket
    before the rise, not the start of the life segment. Returns ``(t - t0, y, t0)``.
    """
    i = y.size
    while i > 0 and y[i - 1] >= level:
        i -= 1
    if i == y.size:
        return np.empty(0), np.empty(0), 0.0
    t0 = float(t[i - 1]) if i > 0 else 0.0
    return t[i:] - t0, y[i:], t0


def _leading_mode(
    points: Sequence[tuple[Any, Any, Any, dict[str, float]]], diagnosis: dict[str, Any] | None
) -> str:
    """The diagnosed fault's health-index mode, else the mode highest over the recent windows."""
    modes = points[-1][3].keys()
    if diagnosis is not None:
        named = mode_of_fault(diagnosis["fault"])
        if named in modes:
            return named
    recent = points[-24:]
    return max(sorted(modes), key=lambda m: float(np.median([p[3][m] for p in recent])))


def _indicator_table(
    w: Window, baseline: FittedBaseline, regime: int | None
) -> list[dict[str, Any]]:
    b = baseline.baseline_for(regime)
    med, _ = b.aligned(w.names)
    out = []
    for name, unit, value, m in zip(w.names, w.units, w.values, med, strict=True):
        if not np.isfinite(value):
            continue
        db = None
        if np.isfinite(m):
            if unit == "dB":
                db = float(value - m)
            elif unit in _AMPLITUDE_UNITS and value > 0 and m > 0:
                db = float(20.0 * math.log10(value / m))
        out.append(
            {
                "name": name,
                "unit": unit,
                "value": float(value),
                "baseline": finite_or_none(float(m)),
                "db_over_baseline": db,
            }
        )
    return out


def _diagnosis(run: _Run) -> dict[str, Any] | None:
    """Diagnose the latest ``diagnosis_windows`` usable windows (of the last two days), each
    against its regime's baseline, and pool them; the indicators are the latest window's."""
    baseline = run.baseline
    seg = run.row.segment_start
    if baseline is None or seg is None or run.last_key is None:
        return None
    recent = load_windows(
        run.session,
        run.asset.asset_id,
        MessageRow.window_start >= seg,
        ~after_key(run.last_key),
        MessageRow.window_start >= run.last_key[0] - timedelta(days=2),
    )
    usable = [w for w in recent if w.excluded_reason is None][-run.config.diagnosis_windows :]
    if not usable:
        return None
    regimes = [s.regime for s in baseline.score(usable)]
    d = pool_diagnoses(
        [
            diagnose(
                u.by_name(),
                baseline.baseline_for(r),
                classifier=run.classifier,
                shaft_speed_hz=u.shaft_speed_hz,
                rule_weight=run.config.rule_weight,
            )
            for u, r in zip(usable, regimes, strict=True)
        ]
    )
    w, regime = usable[-1], regimes[-1]
    return {
        "at": w.window_start.isoformat(),
        "fault": d.fault,
        "confidence": d.confidence,
        "probabilities": d.probabilities,
        "evidence": d.sentences,
        "summary": d.summary,
        "indicators": _indicator_table(w, baseline, regime),
    }


def _withhold_fault(diagnosis: dict[str, Any] | None, over: float, n: int) -> None:
    """Name no fault while the asset shows no degradation.

    Without a sustained anomaly or a risen health index the classifier's leaning is noise around
    the baseline (on healthy simulated pumps it leant to imbalance at 0.5-0.65), and naming it
    would raise "diagnosis changed" alerts on healthy machines. The leaning stays in the
    probabilities and the summary says why no fault is named.
    """
    if diagnosis is None or diagnosis["fault"] == FaultMode.HEALTHY.value:
        return
    leaning = diagnosis["fault"]
    diagnosis["fault"] = FaultMode.HEALTHY.value
    diagnosis["confidence"] = float(diagnosis["probabilities"].get(FaultMode.HEALTHY.value, 0.0))
    diagnosis["summary"] = (
        f"no fault named: no degradation detected ({over:.0%} of the last {n} windows over the "
        f"anomaly limit); the indicators lean towards {leaning}, too weakly to name it"
    )


def _summarise(run: _Run, events: Sequence[MaintenanceEventRow]) -> dict[str, Any]:
    cfg = run.config
    asset = run.asset
    seg = run.row.segment_start
    result: dict[str, Any] = {
        "failure_mode": None,
        "health_index": None,
        "failure_threshold": None,
        "anomaly": None,
        "model": None,
        "model_state": None,
        "diagnosis": None,
        "velocity_rms_mm_s": None,
        "latest_maintenance_event_at": max((e.at for e in events), default=None),
    }
    if result["latest_maintenance_event_at"] is not None:
        result["latest_maintenance_event_at"] = result["latest_maintenance_event_at"].isoformat()
    if run.baseline is None or seg is None:
        learned = int(run.state.get("learning", 0))
        target = int(run.state.get("target", cfg.baseline_windows))
        run.row.status = "no_baseline"
        run.row.message = (
            f"not enough data yet: {learned} healthy windows of the {target} a baseline needs"
        )
        note = run.state.get("baseline_note")
        if note:
            run.row.message += f" ({note})"
        return result
    points = _segment_points(run.session, asset.asset_id, seg, None)
    if not points:
        run.row.status = "not_enough_data"
        run.row.message = "no usable windows scored in this life segment yet"
        return result
    last = points[-1]
    result["anomaly"] = {
        "score": last[1],
        "control_limit": last[2],
        "over_limit": bool(last[1] is not None and last[2] is not None and last[1] > last[2]),
    }
    recent = [
        (p[1], p[2]) for p in points[-cfg.detect_windows :] if p[1] is not None and p[2] is not None
    ]
    over = share_over_limit(recent)
    result["diagnosis"] = _diagnosis(run)
    result["velocity_rms_mm_s"] = overall_velocity(result["diagnosis"])
    mode = _leading_mode(points, result["diagnosis"])
    series = [(p[0], p[3][mode]) for p in points]
    width = _bucket_width(series, seg, cfg)
    t, y = _aggregate(series, seg, width)
    fault = (result["diagnosis"] or {}).get("fault")
    result["failure_mode"] = fault if mode == "bearing" and fault in BEARING_FAULTS else mode
    result["health_index"] = float(y[-1])
    histories, finals = _fleet(run.session, asset, cfg)
    threshold, threshold_sd, threshold_source = _failure_threshold(
        finals, result["failure_mode"], cfg
    )
    result["failure_threshold"] = threshold
    result["failure_threshold_sd"] = threshold_sd
    result["threshold_source"] = threshold_source
    detected = over >= cfg.detect_fraction or y[-1] >= cfg.onset_health_index
    if not detected:
        _withhold_fault(result["diagnosis"], over, len(recent))
        run.row.status = "no_degradation"
        run.row.message = (
            f"no degradation detected: {over:.0%} of the last {len(recent)} windows over the "
            f"anomaly limit, health index {y[-1]:.2f} ({result['failure_mode']})"
        )
        return result
    t_fit, y_fit, t0 = _degradation_series(t, y, cfg.onset_health_index / 2.0)
    if t_fit.size == 0:
        run.row.status = "not_enough_data"
        run.row.message = (
            "sustained anomaly but the health index has not risen yet: no degradation trend to fit"
        )
        return result
    result["degradation_start"] = (seg + timedelta(hours=t0)).isoformat()
    y_exp = np.maximum(y_fit, _EXP_OFFSET + 1e-3)
    prior = FleetPrior(offset=_EXP_OFFSET, initial_level=0.0, min_units=cfg.min_fleet_failures)
    prior.fit([(ht, np.maximum(hy, _EXP_OFFSET + 1e-3)) for ht, hy in histories])
    candidates = [
        ExponentialDegradation(
            threshold=threshold, threshold_sd=threshold_sd, **prior.exponential_params()
        ),
        WienerDegradation(threshold=threshold, threshold_sd=threshold_sd, **prior.wiener_params()),
    ]
    try:
        model, comparison = select_model(candidates, t_fit, y_exp)
    except NotEnoughDataError as exc:
        run.row.status = (
            "no_degradation" if exc.reason == "no_degradation_detected" else "not_enough_data"
        )
        run.row.message = f"degradation suspected but no forecast yet: {exc.detail}"
        return result
    except ValueError as exc:  # e.g. the signal already at or past the threshold everywhere
        run.row.status = "not_enough_data"
        run.row.message = f"no forecast: {exc}"
        return result
    chosen = next(c for c in comparison.candidates if c.label == comparison.chosen)
    result["model"] = {
        "name": type(model).__name__,
        "fit_quality": {
            "log_evidence": chosen.log_evidence,
            "model_probability": chosen.weight,
            "bic": chosen.bic,
            "trend_z": float(model.trend_z_),
            "sigma2_per_h": float(model.sigma2_),
        },
        "n_points": int(model.n_points_),
        "life_segment_start": seg.isoformat(),
        "fitted_at": datetime.now(UTC).isoformat(),
        "prior": prior.source_,
        "bucket_h": width,
        "comparison": comparison.to_dict(),
    }
    result["model_state"] = model.to_state()
    result["quantiles_h"] = [
        finite_or_none(float(q)) for q in model.time_to_failure_quantiles((0.1, 0.5, 0.9))
    ]
    result["last_time_h"] = t0 + float(model.last_time_)
    run.row.status = "forecast"
    run.row.message = (
        f"degradation ({result['failure_mode']}) detected; {type(model).__name__} chosen by "
        f"evidence from {model.n_points_} points"
    )
    return result


def _final_readings(run: _Run, result: dict[str, Any]) -> None:
    a = run.asset
    at = run.row.last_window_start
    if at is None:
        return
    base: dict[str, Any] = {"site": a.site_id, "at": at, "asset_id": a.asset_id}
    base["asset_class"] = a.asset_class
    risk = run.config.risk
    ttf: float | None = None
    if result.get("model_state"):
        h = model_from_state(result["model_state"]).latest_maintenance_time(risk)
        ttf = h * 3600.0 if math.isfinite(h) else None
    run.outcome.readings.append(TimeToFailureReading(risk=risk, time_to_failure_s=ttf, **base))
    diag = result.get("diagnosis")
    if diag and diag["fault"] != NOT_SURE and diag["fault"] in {f.value for f in FaultMode}:
        run.outcome.readings.append(
            DiagnosisReading(
                fault_mode=FaultMode(diag["fault"]), confidence=diag["confidence"], **base
            )
        )


def assess_asset(
    store: Store,
    asset_id: str,
    *,
    config: AssessmentConfig | None = None,
    classifier: FaultClassifier | None = None,
    owner: str | None = None,
) -> AssessmentOutcome:
    """Assess one asset's new windows (at most ``config.batch_windows``) and refit its forecast.

    Returns an outcome with ``leased=False`` (and nothing done) when another process holds the
    asset's lease, and one with ``status=None`` for an asset id that is not registered. The
    outcome's ``readings`` are the alert readings of every processed window (anomaly, zone,
    channel quality) and of the asset (time to failure at ``config.risk``, diagnosis).
    """
    cfg = config or AssessmentConfig()
    me = owner or f"pid-{uuid.uuid4().hex[:12]}"
    outcome = AssessmentOutcome(asset_id=asset_id)
    with store.read() as session:
        if session.get(Asset, asset_id) is None:
            return outcome
    if not _acquire(store, asset_id, me, cfg.lease_s):
        outcome.leased = False
        return outcome
    try:
        with store.write() as session:
            asset = session.get(Asset, asset_id)
            row = session.get(AssetAssessment, asset_id)
            assert asset is not None and row is not None
            snapshot = int(
                session.scalar(
                    select(func.coalesce(func.max(MessageRow.id), 0)).where(
                        MessageRow.asset_id == asset_id
                    )
                )
                or 0
            )
            events = _events(session, asset_id)
            digest = _digest(events)
            run = _Run(session, asset, row, cfg, classifier, outcome)
            start = _segment_start(session, asset_id, events)
            if start != row.segment_start:
                run.reset_segment(start)
            changed = digest != row.events_digest
            row.events_digest = digest
            before = (row.cursor_id, row.last_window_start, row.last_message_id)
            run.process(snapshot)
            after = (row.cursor_id, row.last_window_start, row.last_message_id)
            if (
                outcome.processed
                or outcome.late
                or outcome.reset
                or changed
                or before != after
                or row.result is None
                or row.summary is None
            ):
                session.flush()
                result = _summarise(run, events)
                waiting = len(run.state.get("outside_speed_windows", []))
                if waiting:
                    row.message += (
                        f"; {waiting} windows at speeds outside the baseline's have no verdict "
                        f"(learned into it after {run.config.extend_windows}, unless the pump "
                        "is degrading)"
                    )
                row.result = result
                row.summary = fleet_summary(result)
                _final_readings(run, result)
            row.state = run.state
            # The state's lists are appended to in place, so the loaded value changed with them
            # and compares equal at flush: without this the UPDATE of the column is skipped.
            flag_modified(row, "state")
            row.updated_at = datetime.now(UTC)
            outcome.status = row.status
        return outcome
    finally:
        _release(store, asset_id, me)

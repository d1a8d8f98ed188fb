"""One life segment's fitted health model: regimes, health index, T² and indicator baselines."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from prognosis_service.assessment.windows import Window
from prognosis_service.diagnosis import IndicatorBaseline
from prognosis_service.health import (
    DEFAULT_FAILURE_MODES,
    FailureMode,
    HealthIndex,
    HotellingT2,
    IndicatorRule,
    NotEnoughDataError,
    RegimeBinning,
)

__all__ = [
    "ASSESSMENT_FAILURE_MODES",
    "BEARING_FAULTS",
    "OUTSIDE_SPEED_RANGE",
    "FittedBaseline",
    "Score",
    "fit_baseline",
    "mode_of_fault",
]

BEARING_FAULTS = frozenset({"outer_race", "inner_race", "rolling_element", "cage"})

ASSESSMENT_FAILURE_MODES: tuple[FailureMode, ...] = (
    FailureMode("bearing", (IndicatorRule("*.high_band_rms", "rise", "log_ratio", 20.0),)),
    *(m for m in DEFAULT_FAILURE_MODES if not m.name.startswith("bearing_")),
)
"""Failure modes of the assessment's health index.

The envelope lines at the bearing defect frequencies are levels over the local spectral floor:
on the simulated pumps they rise by some 20 dB within days of a defect's onset and then barely
move, so they say *which* bearing defect it is (the diagnosis uses them) but not *how far* it
has gone. The bearing health index therefore follows the high-band r.m.s., which grows with the
defect to the end; its failure level, 20 times (26 dB) over the regime's baseline, is common
practice, no source. The other modes are :data:`DEFAULT_FAILURE_MODES`. The four bearing faults
share one index, so the T² vector has no duplicated columns."""


OUTSIDE_SPEED_RANGE = "outside the speed range of the healthy baseline"
"""The start of the reason a window gets no verdict when its shaft speed is outside the speeds
the baseline was learned at (the full reason gives the speed and the range)."""


SPEED_MARGIN = 0.01
"""How far (as a fraction of the speed) beyond the baseline's lowest and highest shaft speed a
window is still judged: a drive held at one speed reads a little above or below it from window
to window. Our choice; on the seasonal-drift pumps of the anomaly benchmark 0-1 % made no
difference to the false alarms."""


def mode_of_fault(fault: str | None) -> str | None:
    """The health-index mode that tracks a diagnosed or recorded fault (None if none does)."""
    if fault is None:
        return None
    if fault in BEARING_FAULTS:
        return "bearing"
    return fault if any(m.name == fault for m in ASSESSMENT_FAILURE_MODES) else None


@dataclass(frozen=True, slots=True)
class Score:
    """One window scored against the baseline (``reason`` set when it could not be).

    ``anomaly_score`` is Hotelling's T² of the health-index vector, negative when the health
    indices departed downwards on balance (:meth:`HotellingT2.signed_score_samples`): a window
    healthier than its baseline is never over the limit.
    """

    regime: int | None
    anomaly_score: float | None
    control_limit: float | None
    health: dict[str, float] | None
    reason: str | None


@dataclass
class FittedBaseline:
    """The healthy baseline of one life segment.

    The anomaly score is Hotelling's T² of the vector of health indices (one per failure mode):
    each health index is already standardised against the same regime's healthy baseline, so
    moving to another speed or load band alone does not move the score, and ``p`` (the number of
    failure modes) stays small next to the number of baseline windows.

    A window whose shaft speed lies outside ``speed_range_hz`` (the lowest and highest speed of
    the baseline's windows, widened by :data:`SPEED_MARGIN`) gets no verdict: the regime bands
    only span the learned speeds, and vibration grows with speed, so such a window would be
    judged against its nearest band's slower (or faster) healthy level. On simulated healthy
    pumps whose duty drifted with the season, 74-97 % of the windows beyond the learned speeds
    were over the control limit (3-8 % within them). The assessor learns such speeds into the
    baseline once enough windows there have been seen (``AssessmentConfig.extend_windows``).
    """

    names: tuple[str, ...]
    health_index: HealthIndex
    t2: HotellingT2
    indicator_baselines: dict[int, IndicatorBaseline]
    pooled_baseline: IndicatorBaseline
    n_windows: int
    speed_range_hz: tuple[float, float] | None = None  # None: fitted before the range was kept

    def outside_speed_range(self, speed_hz: float | None) -> str | None:
        """The no-verdict reason for a window at ``speed_hz``, or None when it is inside."""
        if self.speed_range_hz is None or speed_hz is None or not math.isfinite(speed_hz):
            return None
        lo, hi = self.speed_range_hz
        if lo * (1.0 - SPEED_MARGIN) <= speed_hz <= hi * (1.0 + SPEED_MARGIN):
            return None
        return (
            f"{OUTSIDE_SPEED_RANGE}: {speed_hz:.2f} Hz, the baseline was learned at "
            f"{lo:.2f}-{hi:.2f} Hz"
        )

    @property
    def modes(self) -> list[str]:
        return list(self.health_index.failure_modes_)

    @property
    def limit(self) -> float:
        return float(self.t2.control_limit())

    def baseline_for(self, regime: int | None) -> IndicatorBaseline:
        if regime is not None and regime in self.indicator_baselines:
            return self.indicator_baselines[regime]
        return self.pooled_baseline

    def score(self, windows: Sequence[Window]) -> list[Score]:
        """Score usable windows (callers leave out the excluded ones)."""
        if not windows:
            return []
        hi = self.health_index
        X = np.vstack([w.aligned(self.names) for w in windows])
        op = np.array([w.operating for w in windows], dtype=float)
        regimes = hi.binning_.predict(op)
        need = [self.names.index(n) for n in hi.indicator_names_]
        finite = np.isfinite(X[:, need]).all(axis=1)
        H = np.full((len(windows), len(hi.failure_modes_)), np.nan)
        if finite.any():
            H[finite] = hi.transform(
                self.names, np.where(np.isfinite(X), X, 0.0)[finite], op[finite]
            )
        ok = np.isfinite(H).all(axis=1)
        t2 = np.full(len(windows), np.nan)
        if ok.any():
            t2[ok] = self.t2.signed_score_samples(H[ok])
        limit = self.limit
        out = []
        for i in range(len(windows)):
            regime = int(regimes[i]) if regimes[i] >= 0 else None
            outside = self.outside_speed_range(windows[i].shaft_speed_hz)
            if outside is not None:
                out.append(Score(regime, None, None, None, outside))
            elif not finite[i]:
                missing = [
                    hi.indicator_names_[j] for j, c in enumerate(need) if not np.isfinite(X[i, c])
                ]
                out.append(
                    Score(
                        regime,
                        None,
                        None,
                        None,
                        f"indicators not computed: {', '.join(missing[:4])}",
                    )
                )
            elif not ok[i]:
                out.append(
                    Score(
                        regime,
                        None,
                        None,
                        None,
                        f"no healthy baseline yet in operating regime {regime}",
                    )
                )
            else:
                health = {m: float(v) for m, v in zip(self.modes, H[i], strict=True)}
                out.append(Score(regime, float(t2[i]), limit, health, None))
        return out

    def to_state(self) -> dict[str, Any]:
        return {
            "names": list(self.names),
            "health_index": self.health_index.to_state(),
            "t2": self.t2.to_state(),
            "indicator_baselines": {
                str(r): b.to_state() for r, b in sorted(self.indicator_baselines.items())
            },
            "pooled_baseline": self.pooled_baseline.to_state(),
            "n_windows": self.n_windows,
            "speed_range_hz": None if self.speed_range_hz is None else list(self.speed_range_hz),
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> FittedBaseline:
        return cls(
            names=tuple(state["names"]),
            health_index=HealthIndex.from_state(state["health_index"]),
            t2=HotellingT2.from_state(state["t2"]),
            indicator_baselines={
                int(r): IndicatorBaseline.from_state(b)
                for r, b in state["indicator_baselines"].items()
            },
            pooled_baseline=IndicatorBaseline.from_state(state["pooled_baseline"]),
            n_windows=int(state["n_windows"]),
            speed_range_hz=(
                None
                if state.get("speed_range_hz") is None
                else (float(state["speed_range_hz"][0]), float(state["speed_range_hz"][1]))
            ),
        )


def fit_baseline(
    windows: Sequence[Window],
    *,
    n_speed_bands: int,
    n_load_bands: int,
    min_regime_windows: int,
    alpha: float,
) -> FittedBaseline:
    """Fit the health index, T² and indicator baselines on healthy windows.

    Raises
    ------
    NotEnoughDataError
        When no regime has ``min_regime_windows`` complete windows, or T² lacks rows.
    """
    names = windows[0].names
    X = np.vstack([w.aligned(names) for w in windows])
    op = np.array([w.operating for w in windows], dtype=float)
    binning = RegimeBinning(n_speed_bands=n_speed_bands, n_load_bands=n_load_bands)
    probe = HealthIndex(
        failure_modes=ASSESSMENT_FAILURE_MODES,
        binning=binning,
        min_samples_per_regime=min_regime_windows,
    )
    probe._plan(list(names))  # which indicators the failure modes use
    cols = [names.index(n) for n in probe.indicator_names_]
    complete = np.isfinite(X[:, cols]).all(axis=1)
    if int(complete.sum()) < min_regime_windows:
        raise NotEnoughDataError(
            "too_few_samples",
            f"{int(complete.sum())} complete healthy windows; a baseline needs "
            f"{min_regime_windows} in at least one operating regime",
        )
    Xc = np.where(np.isfinite(X[complete]), X[complete], 0.0)
    hi = HealthIndex(
        failure_modes=ASSESSMENT_FAILURE_MODES,
        binning=binning,
        min_samples_per_regime=min_regime_windows,
    ).fit(names, Xc, op[complete])
    if not hi.centre_:
        raise NotEnoughDataError(
            "too_few_samples",
            f"no operating regime has {min_regime_windows} healthy windows yet",
        )
    H = hi.transform(names, Xc, op[complete])
    ok = np.isfinite(H).all(axis=1)
    t2 = HotellingT2(alpha=alpha).fit(H[ok])
    regimes = hi.binning_.predict(op)
    speeds = np.array([np.nan if w.shaft_speed_hz is None else w.shaft_speed_hz for w in windows])
    by_regime = {}
    for r in sorted({int(r) for r in regimes if r >= 0}):
        rows = regimes == r
        if int(rows.sum()) >= 3:
            by_regime[r] = IndicatorBaseline.from_windows(
                names, X[rows], shaft_speed_hz=speeds[rows]
            )
    pooled = IndicatorBaseline.from_windows(names, X, shaft_speed_hz=speeds)
    learned = speeds[complete & np.isfinite(speeds)]
    speed_range = (float(learned.min()), float(learned.max())) if learned.size else None
    return FittedBaseline(names, hi, t2, by_regime, pooled, len(windows), speed_range)


def finite_or_none(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)

"""Health index per failure mode: 0 at the regime's healthy baseline, 1 at the failure threshold."""

from __future__ import annotations

import fnmatch
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from sklearn.base import BaseEstimator, clone
from sklearn.utils.validation import check_is_fitted

from prognosis_service.health._checks import (
    STATE_VERSION,
    InvalidParameterError,
    as_matrix,
    check_choice,
    check_int,
    check_real,
    check_state,
    float_list,
    reset_fitted,
)
from prognosis_service.health.anomaly import robust_centre_scale
from prognosis_service.health.regimes import RegimeBinning

__all__ = ["DEFAULT_FAILURE_MODES", "FailureMode", "HealthIndex", "IndicatorRule"]

_LOG_FLOOR = 1e-12  # amplitudes at or below zero (flatline) are floored before the log
_LOWEST = -1.0  # a signal far below its baseline says no more about health than one at -1


@dataclass(frozen=True)
class IndicatorRule:
    """How one kind of indicator contributes to a failure mode's health index.

    Parameters
    ----------
    pattern : str
        Shell-style pattern over indicator names ``{channel}.{quantity}``, e.g. ``"*.env_bpfo"``.
        Every matching indicator (e.g. drive-end and non-drive-end) is scored; the worst counts.
    direction : {"rise", "fall"}
        Which way the indicator moves as the failure mode develops.
    scale : {"log_ratio", "robust_z"}
        ``"log_ratio"``: ``ln(x / baseline median)`` (positive amplitudes). ``"robust_z"``:
        ``(x - baseline median) / baseline MAD-sigma`` (quantities that can be near zero or
        negative, such as gauge pressure).
    failure_level : float
        Deviation at which this rule's health index reaches 1: a ratio (> 1) for ``"log_ratio"``,
        a z-score (> 0) for ``"robust_z"``.
    """

    pattern: str
    direction: str
    scale: str
    failure_level: float


@dataclass(frozen=True)
class FailureMode:
    """A named failure mode and the indicator rules whose mean is its health index."""

    name: str
    rules: tuple[IndicatorRule, ...]


# Default failure levels are common practice, no source: envelope amplitudes at bearing defect
# frequencies 10x (20 dB) over baseline; 1x/2x orders, vane pass and high-band RMS 4x (12 dB,
# about the span from a new machine to the trip level of the ISO 10816-3 zones); pressures 6
# baseline sigmas below the regime median.
DEFAULT_FAILURE_MODES: tuple[FailureMode, ...] = (
    FailureMode("bearing_outer_race", (IndicatorRule("*.env_bpfo", "rise", "log_ratio", 10.0),)),
    FailureMode("bearing_inner_race", (IndicatorRule("*.env_bpfi", "rise", "log_ratio", 10.0),)),
    FailureMode(
        "bearing_rolling_element", (IndicatorRule("*.env_bsf", "rise", "log_ratio", 10.0),)
    ),
    FailureMode("bearing_cage", (IndicatorRule("*.env_ftf", "rise", "log_ratio", 10.0),)),
    FailureMode("imbalance", (IndicatorRule("*.order_1x", "rise", "log_ratio", 4.0),)),
    FailureMode("misalignment", (IndicatorRule("*.order_2x", "rise", "log_ratio", 4.0),)),
    FailureMode(
        "cavitation",
        (
            IndicatorRule("*.high_band_rms", "rise", "log_ratio", 4.0),
            IndicatorRule("suction_pressure.mean", "fall", "robust_z", 6.0),
        ),
    ),
    FailureMode(
        "impeller_wear",
        (
            IndicatorRule("discharge_pressure.mean", "fall", "robust_z", 6.0),
            IndicatorRule("*.vane_pass", "rise", "log_ratio", 4.0),
        ),
    ),
)


def _check_modes(owner: str, modes: Sequence[FailureMode]) -> None:
    if not isinstance(modes, Sequence) or not modes:
        raise InvalidParameterError(
            f"The 'failure_modes' parameter of {owner} must be a non-empty sequence of "
            f"FailureMode; got {modes!r} instead."
        )
    for mode in modes:
        if not isinstance(mode, FailureMode) or not mode.rules:
            raise InvalidParameterError(
                f"The 'failure_modes' parameter of {owner} must hold FailureMode objects with at "
                f"least one rule; got {mode!r} instead."
            )
        for rule in mode.rules:
            check_choice(owner, "direction", rule.direction, ("rise", "fall"))
            check_choice(owner, "scale", rule.scale, ("log_ratio", "robust_z"))
            low = 1.0 if rule.scale == "log_ratio" else 0.0
            check_real(owner, "failure_level", rule.failure_level, low=low)
    names = [m.name for m in modes]
    if len(set(names)) != len(names):
        raise InvalidParameterError(
            f"The 'failure_modes' parameter of {owner} must have unique names; got {names!r} "
            "instead."
        )


class HealthIndex(BaseEstimator):
    """Health index per failure mode, standardised against each regime's healthy baseline.

    For every rule of a failure mode, each matching indicator is standardised against the median
    (and, for ``"robust_z"``, the MAD-sigma) of the healthy baseline *in the sample's own
    operating regime*, turned into a deviation in the rule's bad direction and divided by the
    rule's failure level; the worst matching channel counts. A failure mode's index is the mean
    over its rules that found indicators. So 0 is the regime's healthy baseline, 1 the failure
    threshold, and values are comparable across regimes. Values below -1 are clipped to -1; noise
    makes healthy values scatter around 0 (they are not clipped at 0, so degradation fits stay
    unbiased). A regime with too few baseline samples gives NaN (no baseline, nothing guessed).

    Parameters
    ----------
    failure_modes : sequence of FailureMode or None, default None
        ``None`` means :data:`DEFAULT_FAILURE_MODES`.
    binning : RegimeBinning or None, default None
        ``None`` means ``RegimeBinning()``; cloned and fitted on the operating data.
    min_samples_per_regime : int, default 30

    Attributes
    ----------
    failure_modes_ : list of str
        Output columns: the modes with at least one matching indicator at fit time.
    indicator_names_ : list of str
        Indicators used, in the order of the baseline arrays.
    binning_ : RegimeBinning
    centre_ : dict of int to ndarray
        Per-regime baseline median (of ``ln x`` for log-ratio indicators).
    scale_ : dict of int to ndarray
        Per-regime MAD-sigma (used by robust-z indicators only).
    n_samples_per_regime_ : dict of int to int

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> names = ["de_accel.env_bpfo", "nde_accel.env_bpfo"]
    >>> X = rng.lognormal(mean=-3.0, sigma=0.1, size=(100, 2))
    >>> op = np.column_stack([np.full(100, 25.0), np.full(100, 0.8)])
    >>> hi = HealthIndex(binning=RegimeBinning(n_speed_bands=1, n_load_bands=1)).fit(names, X, op)
    >>> hi.failure_modes_
    ['bearing_outer_race']
    >>> worn = np.exp([[-3.0 + np.log(10.0), -3.0]])  # drive end 10x its baseline
    >>> round(float(hi.transform(names, worn, op[:1])[0, 0]), 2)
    1.0
    """

    def __init__(
        self,
        *,
        failure_modes: Sequence[FailureMode] | None = None,
        binning: RegimeBinning | None = None,
        min_samples_per_regime: int = 30,
    ) -> None:
        self.failure_modes = failure_modes
        self.binning = binning
        self.min_samples_per_regime = min_samples_per_regime

    def _modes(self) -> tuple[FailureMode, ...]:
        return DEFAULT_FAILURE_MODES if self.failure_modes is None else tuple(self.failure_modes)

    def _check_params(self) -> None:
        owner = type(self).__name__
        _check_modes(owner, self._modes())
        if self.binning is not None and not isinstance(self.binning, RegimeBinning):
            raise InvalidParameterError(
                f"The 'binning' parameter of {owner} must be a RegimeBinning or None; "
                f"got {self.binning!r} instead."
            )
        check_int(owner, "min_samples_per_regime", self.min_samples_per_regime, low=3)

    def _plan(self, names: Sequence[str]) -> None:
        """Resolve rules to indicator columns; sets the name/mode bookkeeping."""
        used: list[str] = []
        scales: list[str] = []
        plan: list[tuple[str, list[tuple[IndicatorRule, list[int]]]]] = []
        for mode in self._modes():
            rules = []
            for rule in mode.rules:
                cols = []
                for name in names:
                    if fnmatch.fnmatchcase(name, rule.pattern):
                        if name not in used:
                            used.append(name)
                            scales.append(rule.scale)
                        elif scales[used.index(name)] != rule.scale:
                            raise InvalidParameterError(
                                f"HealthIndex: indicator {name!r} is used with two scales "
                                f"({scales[used.index(name)]!r} and {rule.scale!r})"
                            )
                        cols.append(used.index(name))
                if cols:
                    rules.append((rule, cols))
            if rules:
                plan.append((mode.name, rules))
        if not plan:
            raise ValueError(
                "HealthIndex: no indicator name matches any failure-mode rule; got names "
                f"{list(names)!r}"
            )
        self.indicator_names_ = used
        self._scales = scales
        self._plan_ = plan
        self.failure_modes_ = [name for name, _ in plan]

    def _select(self, names: Sequence[str], X: ArrayLike) -> NDArray:
        arr = as_matrix(X, owner=type(self).__name__, n_columns=len(names))
        index = {str(n): i for i, n in enumerate(names)}
        if len(index) != len(names):
            raise ValueError("HealthIndex: indicator names must be unique")
        missing = [n for n in self.indicator_names_ if n not in index]
        if missing:
            raise ValueError(f"HealthIndex: indicators missing from the input: {missing!r}")
        cols = arr[:, [index[n] for n in self.indicator_names_]]
        is_log = np.array([s == "log_ratio" for s in self._scales])
        cols[:, is_log] = np.log(np.maximum(cols[:, is_log], _LOG_FLOOR))
        return cols

    @staticmethod
    def _operating(op: ArrayLike, n: int) -> NDArray:
        arr = np.asarray(op, dtype=float)
        if arr.ndim != 2 or arr.shape != (n, 2):
            raise ValueError(f"HealthIndex: operating must have shape ({n}, 2); got {arr.shape}")
        return arr

    def fit(self, names: Sequence[str], X: ArrayLike, operating: ArrayLike) -> HealthIndex:
        """Learn each regime's healthy baseline of the indicators the failure modes use.

        Parameters
        ----------
        names : sequence of str
            Indicator name of each column of ``X`` (``{channel}.{quantity}``).
        X : array_like of shape (n_samples, len(names))
            Healthy indicator values, finite.
        operating : array_like of shape (n_samples, 2)
            ``(speed_hz, load_fraction)`` of each sample.
        """
        reset_fitted(self)
        self._check_params()
        names = [str(n) for n in names]
        self._plan(names)
        values = self._select(names, X)
        op = self._operating(operating, values.shape[0])
        binning = RegimeBinning() if self.binning is None else clone(self.binning)
        self.binning_ = binning.fit(op)
        regimes = self.binning_.predict(op)
        self.n_samples_per_regime_, self.centre_, self.scale_ = {}, {}, {}
        for r in range(self.binning_.n_regimes_):
            rows = values[regimes == r]
            self.n_samples_per_regime_[r] = int(rows.shape[0])
            if rows.shape[0] >= self.min_samples_per_regime:
                self.centre_[r], self.scale_[r] = robust_centre_scale(rows)
        return self

    def transform(self, names: Sequence[str], X: ArrayLike, operating: ArrayLike) -> NDArray:
        """Return the health index of each sample and failure mode.

        Returns
        -------
        ndarray of shape (n_samples, len(failure_modes_))
            Dimensionless; 0 healthy baseline, 1 failure threshold; NaN where the sample's regime
            has no baseline.
        """
        check_is_fitted(self, "centre_")
        names = [str(n) for n in names]
        values = self._select(names, X)
        regimes = self.binning_.predict(self._operating(operating, values.shape[0]))
        dev = np.full_like(values, np.nan)
        is_log = np.array([s == "log_ratio" for s in self._scales])
        for r, centre in self.centre_.items():
            rows = regimes == r
            d = values[rows] - centre
            dev[rows] = np.where(is_log, d, d / self.scale_[r])
        out = np.empty((values.shape[0], len(self._plan_)))
        for j, (_, rules) in enumerate(self._plan_):
            per_rule = []
            for rule, cols in rules:
                sign = 1.0 if rule.direction == "rise" else -1.0
                level = (
                    np.log(rule.failure_level) if rule.scale == "log_ratio" else rule.failure_level
                )
                per_rule.append(np.max(sign * dev[:, cols], axis=1) / level)
            out[:, j] = np.mean(np.maximum(np.column_stack(per_rule), _LOWEST), axis=1)
        return out

    def to_state(self) -> dict[str, Any]:
        """Return the fitted state as JSON-ready plain values."""
        check_is_fitted(self, "centre_")
        modes = (
            None
            if self.failure_modes is None
            else [
                {"name": m.name, "rules": [asdict(r) for r in m.rules]} for m in self.failure_modes
            ]
        )
        return {
            "kind": type(self).__name__,
            "version": STATE_VERSION,
            "params": {
                "failure_modes": modes,
                "min_samples_per_regime": int(self.min_samples_per_regime),
            },
            "indicator_names": list(self.indicator_names_),
            "binning": self.binning_.to_state(),
            "regimes": [
                {
                    "regime": r,
                    "n_samples": n,
                    "centre": float_list(self.centre_[r]) if r in self.centre_ else None,
                    "scale": float_list(self.scale_[r]) if r in self.centre_ else None,
                }
                for r, n in self.n_samples_per_regime_.items()
            ],
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> HealthIndex:
        """Rebuild a fitted health index from :meth:`to_state` output."""
        check_state(state, cls.__name__)
        p = state["params"]
        modes = None
        if p["failure_modes"] is not None:
            modes = tuple(
                FailureMode(m["name"], tuple(IndicatorRule(**r) for r in m["rules"]))
                for m in p["failure_modes"]
            )
        binning = RegimeBinning.from_state(state["binning"])
        obj = cls(
            failure_modes=modes,
            binning=clone(binning),
            min_samples_per_regime=int(p["min_samples_per_regime"]),
        )
        obj._check_params()
        obj._plan(list(state["indicator_names"]))
        obj.binning_ = binning
        obj.n_samples_per_regime_, obj.centre_, obj.scale_ = {}, {}, {}
        for entry in state["regimes"]:
            r = int(entry["regime"])
            obj.n_samples_per_regime_[r] = int(entry["n_samples"])
            if entry["centre"] is not None:
                obj.centre_[r] = np.asarray(entry["centre"], dtype=float)
                obj.scale_[r] = np.asarray(entry["scale"], dtype=float)
        return obj

"""One asset's healthy baseline per indicator: median and robust spread at one operating regime."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from prognosis_service.health._checks import STATE_VERSION, check_state, float_list

__all__ = ["IndicatorBaseline"]

_MAD_TO_SIGMA = 1.482602218505602  # 1 / Phi^-1(3/4): MAD of a normal sample -> its sigma


@dataclass(frozen=True, slots=True)
class IndicatorBaseline:
    """Healthy median and robust spread of each indicator of one asset at one operating regime.

    Parameters
    ----------
    names : tuple of str
        Indicator names ``{channel}.{quantity}``.
    median : ndarray of shape (n_indicators,)
        Baseline median of each indicator, in the indicator's unit; NaN where the baseline has
        no finite value.
    spread : ndarray of shape (n_indicators,)
        Robust spread (normal-consistent MAD, the baseline's sigma) in the indicator's unit;
        NaN where unknown.
    shaft_speed_hz : float or None
        Median shaft speed of the baseline windows, Hz. Pressure evidence is corrected to the
        current speed with the pump affinity laws when both speeds are known.
    n_windows : int
        Number of healthy windows the baseline was taken from (0 if given directly).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> X = np.column_stack([rng.normal(0.8, 0.05, 40), rng.normal(4.0, 1.0, 40)])
    >>> b = IndicatorBaseline.from_windows(("de_accel.order_1x", "de_accel.env_bpfo"), X)
    >>> b.n_windows, round(float(b.median[0]), 1)
    (40, 0.8)
    """

    names: tuple[str, ...]
    median: NDArray
    spread: NDArray
    shaft_speed_hz: float | None = None
    n_windows: int = 0

    def __post_init__(self) -> None:
        names = tuple(self.names)
        median = np.asarray(self.median, dtype=float)
        spread = np.asarray(self.spread, dtype=float)
        if median.shape != (len(names),) or spread.shape != (len(names),):
            raise ValueError(
                f"IndicatorBaseline: median and spread must have shape ({len(names)},) to match "
                f"names; got {median.shape} and {spread.shape}"
            )
        if len(set(names)) != len(names):
            raise ValueError("IndicatorBaseline: names must be unique")
        if np.any(spread[np.isfinite(spread)] < 0):
            raise ValueError("IndicatorBaseline: spread must be >= 0")
        speed = self.shaft_speed_hz
        if speed is not None and not (math.isfinite(speed) and speed > 0):
            raise ValueError(
                f"IndicatorBaseline: shaft_speed_hz must be a finite number > 0 or None; "
                f"got {speed!r}"
            )
        object.__setattr__(self, "names", names)
        object.__setattr__(self, "median", median)
        object.__setattr__(self, "spread", spread)

    @classmethod
    def from_windows(
        cls,
        names: Sequence[str],
        X: ArrayLike,
        *,
        shaft_speed_hz: ArrayLike | None = None,
    ) -> IndicatorBaseline:
        """Baseline from healthy windows: column medians and MAD-sigmas, ignoring NaN.

        Parameters
        ----------
        names : sequence of str
            Indicator names, one per column of ``X``.
        X : array_like of shape (n_windows, n_indicators)
            Healthy indicator values at one operating regime; NaN for missing values.
        shaft_speed_hz : array_like of shape (n_windows,), optional
            Shaft speed of each window, Hz; the baseline keeps its median.
        """
        arr = np.asarray(X, dtype=float)
        if arr.ndim != 2 or arr.shape[1] != len(names):
            raise ValueError(
                f"IndicatorBaseline: X must have shape (n_windows, {len(names)}); got {arr.shape}"
            )
        if arr.shape[0] == 0:
            raise ValueError("IndicatorBaseline: no healthy windows to take a baseline from")
        arr = np.where(np.isfinite(arr), arr, np.nan)
        finite_cols = np.isfinite(arr).any(axis=0)
        median = np.full(arr.shape[1], np.nan)
        spread = np.full(arr.shape[1], np.nan)
        if finite_cols.any():
            sub = arr[:, finite_cols]
            med = np.nanmedian(sub, axis=0)
            median[finite_cols] = med
            spread[finite_cols] = _MAD_TO_SIGMA * np.nanmedian(np.abs(sub - med), axis=0)
        speed: float | None = None
        if shaft_speed_hz is not None:
            s = np.asarray(shaft_speed_hz, dtype=float)
            s = s[np.isfinite(s) & (s > 0)]
            speed = float(np.median(s)) if s.size else None
        return cls(tuple(names), median, spread, shaft_speed_hz=speed, n_windows=arr.shape[0])

    def aligned(self, names: Sequence[str]) -> tuple[NDArray, NDArray]:
        """Median and spread in the order of ``names`` (NaN for indicators not in the baseline)."""
        index = {n: i for i, n in enumerate(self.names)}
        pos = np.array([index.get(n, -1) for n in names], dtype=int)
        known = pos >= 0
        median = np.full(len(names), np.nan)
        spread = np.full(len(names), np.nan)
        median[known] = self.median[pos[known]]
        spread[known] = self.spread[pos[known]]
        return median, spread

    def to_state(self) -> dict[str, Any]:
        """JSON-ready plain values (NaN becomes None)."""
        return {
            "kind": type(self).__name__,
            "version": STATE_VERSION,
            "names": list(self.names),
            "median": [None if not math.isfinite(v) else v for v in float_list(self.median)],
            "spread": [None if not math.isfinite(v) else v for v in float_list(self.spread)],
            "shaft_speed_hz": self.shaft_speed_hz,
            "n_windows": int(self.n_windows),
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> IndicatorBaseline:
        """Rebuild a baseline from :meth:`to_state` output."""
        check_state(state, cls.__name__)

        def arr(key: str) -> NDArray:
            return np.array([np.nan if v is None else float(v) for v in state[key]], dtype=float)

        speed = state.get("shaft_speed_hz")
        return cls(
            tuple(state["names"]),
            arr("median"),
            arr("spread"),
            shaft_speed_hz=None if speed is None else float(speed),
            n_windows=int(state.get("n_windows", 0)),
        )

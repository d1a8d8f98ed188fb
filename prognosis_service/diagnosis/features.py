"""Regime-comparable diagnostic features: indicators relative to the asset's healthy baseline.

A raw indicator level means little across operating regimes (vibration grows with speed, pressure
with the square of speed), so the classifier never sees one. Each feature compares a window
with the same asset's healthy baseline at the same operating regime, and every spectral
indicator is already tied to shaft orders or bearing defect multiples, never to a fixed
frequency in Hz:

========================================  =========================================  ==========
indicators (``{channel}.{quantity}``)      feature                                   name suffix
========================================  =========================================  ==========
accelerometer ``rms``, ``peak``,           ``20 log10(x / median)``, dB               ``:db``
``velocity_rms``, ``order_1x/2x/3x``,
``vane_pass``, ``high_band_rms``;
pressure ``ripple``, ``vane_pass``;
``motor_current.rms``
``env_bpfo/bpfi/bsf/ftf`` (dB over the     ``x - median``, dB                          ``:db``
local floor already)
``crest_factor``, ``kurtosis``             ``ln(x / median)``                          ``:log``
``skewness``, temperature ``mean``         ``x - median`` (1, K)                       ``:delta``
discharge and suction ``mean``             differential pressure change relative to   see below
                                           the baseline's, affinity-corrected to the
                                           current speed (``pressure.differential:rel``);
                                           suction change relative to the baseline's
                                           differential (``suction_pressure.mean:rel_head``)
========================================  =========================================  ==========

Pump head scales with the square of speed (affinity laws, common practice), so the baseline
differential pressure is scaled by ``(n / n_baseline)^2`` when both speeds are known.
``iso_zone``, ``spectral_centroid`` and ``peak_frequency`` are left out (a zone is a coarse copy
of ``velocity_rms``; the other two are in Hz). A missing value, or an indicator without a
baseline, gives 0 ("no change from baseline"): the model then leans on the other features.
Features are clipped to a plausible range so one wild value cannot dominate a linear model.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from prognosis_service.diagnosis.baseline import IndicatorBaseline

__all__ = [
    "DIFFERENTIAL_FEATURE",
    "SUCTION_FEATURE",
    "DiagnosisTable",
    "diagnostic_features",
    "window_features",
]

DIFFERENTIAL_FEATURE = "pressure.differential:rel"
SUCTION_FEATURE = "suction_pressure.mean:rel_head"

_AMPLITUDE = frozenset(
    {"rms", "peak", "velocity_rms", "order_1x", "order_2x", "order_3x", "vane_pass",
     "high_band_rms", "ripple"}
)  # fmt: skip
_LEVEL_DB = frozenset({"env_bpfo", "env_bpfi", "env_bsf", "env_ftf"})
_SHAPE = frozenset({"crest_factor", "kurtosis"})
_DELTA = frozenset({"skewness"})
_TINY = 1e-12
_CLIP = {"db": (-40.0, 60.0), "log": (-3.0, 3.0), "delta": (-30.0, 60.0), "rel": (-1.0, 1.0)}


@dataclass(frozen=True)
class DiagnosisTable:
    """Training rows for the fault classifier.

    Attributes
    ----------
    feature_names : tuple of str
        Column names of ``X``.
    X : ndarray of shape (n_rows, n_features)
        Diagnostic features (see :func:`diagnostic_features`).
    y : ndarray of str, shape (n_rows,)
        Fault mode of each row (``"healthy"``, ``"outer_race"``, ...).
    regime : ndarray of str, shape (n_rows,)
        Operating regime label of each row.
    unit_id : ndarray of str, shape (n_rows,)
        The unit (asset) each row came from, for grouped splits.
    """

    feature_names: tuple[str, ...]
    X: NDArray
    y: NDArray
    regime: NDArray
    unit_id: NDArray

    def __post_init__(self) -> None:
        X = np.asarray(self.X, dtype=float)
        n = X.shape[0] if X.ndim == 2 else -1
        if X.ndim != 2 or X.shape[1] != len(self.feature_names):
            raise ValueError(
                f"DiagnosisTable: X must have shape (n_rows, {len(self.feature_names)}); "
                f"got {X.shape}"
            )
        for name in ("y", "regime", "unit_id"):
            col = np.asarray(getattr(self, name)).astype(str)
            if col.shape != (n,):
                raise ValueError(
                    f"DiagnosisTable: {name} must have shape ({n},) to match X; got {col.shape}"
                )
            object.__setattr__(self, name, col)
        object.__setattr__(self, "feature_names", tuple(self.feature_names))
        object.__setattr__(self, "X", X)

    def __len__(self) -> int:
        return int(self.X.shape[0])

    def select(self, mask: ArrayLike) -> DiagnosisTable:
        """The rows where ``mask`` is true."""
        m = np.asarray(mask, dtype=bool)
        return DiagnosisTable(
            self.feature_names, self.X[m], self.y[m], self.regime[m], self.unit_id[m]
        )

    @staticmethod
    def concatenate(tables: Sequence[DiagnosisTable]) -> DiagnosisTable:
        """Stack tables with the same feature names."""
        if not tables:
            raise ValueError("DiagnosisTable.concatenate needs at least one table")
        names = tables[0].feature_names
        for t in tables[1:]:
            if t.feature_names != names:
                raise ValueError("DiagnosisTable.concatenate: feature names differ between tables")
        return DiagnosisTable(
            names,
            np.vstack([t.X for t in tables]),
            np.concatenate([t.y for t in tables]),
            np.concatenate([t.regime for t in tables]),
            np.concatenate([t.unit_id for t in tables]),
        )


def _split(name: str) -> tuple[str, str]:
    if "." not in name:
        raise ValueError(f"indicator names must be '{{channel}}.{{quantity}}'; got {name!r}")
    channel, quantity = name.split(".", 1)
    return channel, quantity


def _is_pressure(channel: str) -> bool:
    return "discharge" in channel or "suction" in channel


def _kind(name: str) -> str | None:
    channel, quantity = _split(name)
    if quantity in _AMPLITUDE:
        return "amp"
    if quantity in _LEVEL_DB:
        return "level"
    if quantity in _SHAPE:
        return "shape"
    if quantity in _DELTA or (quantity == "mean" and not _is_pressure(channel)):
        return "delta"
    return None  # pressure means are combined below; zones and Hz values are left out


def _broadcast(a: ArrayLike | None, n: int, what: str) -> NDArray:
    if a is None:
        return np.full(n, np.nan)
    arr = np.asarray(a, dtype=float)
    if arr.ndim == 0:
        return np.full(n, float(arr))
    if arr.shape != (n,):
        raise ValueError(f"{what} must be a scalar or have shape ({n},); got {arr.shape}")
    return arr


def diagnostic_features(
    names: Sequence[str],
    X: ArrayLike,
    median: ArrayLike,
    *,
    shaft_speed_hz: ArrayLike | None = None,
    baseline_shaft_speed_hz: ArrayLike | None = None,
) -> tuple[tuple[str, ...], NDArray]:
    """Baseline-relative, speed-normalised features of indicator vectors.

    Parameters
    ----------
    names : sequence of str
        Indicator names ``{channel}.{quantity}`` of the columns of ``X``.
    X : array_like of shape (n_windows, n_indicators)
        Indicator values; NaN (or None) where missing.
    median : array_like of shape (n_indicators,) or (n_windows, n_indicators)
        Healthy baseline median of each indicator at each window's operating regime.
    shaft_speed_hz : scalar or array_like of shape (n_windows,), optional
        Shaft speed of each window, Hz.
    baseline_shaft_speed_hz : scalar or array_like of shape (n_windows,), optional
        Median shaft speed of each window's baseline, Hz.

    Returns
    -------
    feature_names : tuple of str
    F : ndarray of shape (n_windows, n_features)
        Finite features, in the order of ``feature_names`` (see the module docstring).

    Examples
    --------
    >>> names = ("de_accel.order_1x", "de_accel.env_bpfo")
    >>> fn, F = diagnostic_features(names, [[1.6, 17.0]], [0.8, 3.0])
    >>> fn, F.round(2).tolist()
    (('de_accel.order_1x:db', 'de_accel.env_bpfo:db'), [[6.02, 14.0]])
    """
    names = tuple(names)
    arr = np.asarray(np.array(X, dtype=object).astype(float), dtype=float)
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[1] != len(names):
        raise ValueError(
            f"X must have shape (n_windows, {len(names)}) to match names; got {arr.shape}"
        )
    n = arr.shape[0]
    med = np.asarray(median, dtype=float)
    if med.shape not in ((len(names),), (n, len(names))):
        raise ValueError(
            f"median must have shape ({len(names)},) or ({n}, {len(names)}); got {med.shape}"
        )
    med = np.broadcast_to(med, arr.shape)
    out_names: list[str] = []
    cols: list[NDArray] = []
    with np.errstate(divide="ignore", invalid="ignore"):
        for j, name in enumerate(names):
            kind = _kind(name)
            x, m = arr[:, j], med[:, j]
            if kind == "amp":
                f = 20.0 * np.log10(np.maximum(x, _TINY) / m)
                f = np.where(m > 0, f, np.nan)
                out_names.append(f"{name}:db")
                cols.append(np.clip(f, *_CLIP["db"]))
            elif kind == "level":
                out_names.append(f"{name}:db")
                cols.append(np.clip(x - m, *_CLIP["db"]))
            elif kind == "shape":
                f = np.log(np.maximum(x, _TINY) / m)
                out_names.append(f"{name}:log")
                cols.append(np.clip(np.where(m > 0, f, np.nan), *_CLIP["log"]))
            elif kind == "delta":
                out_names.append(f"{name}:delta")
                cols.append(np.clip(x - m, *_CLIP["delta"]))
        pressures = _pressure_features(names, arr, med, shaft_speed_hz, baseline_shaft_speed_hz)
    for name, col in pressures:
        out_names.append(name)
        cols.append(col)
    F = np.column_stack(cols) if cols else np.zeros((n, 0))
    return tuple(out_names), np.where(np.isfinite(F), F, 0.0)


def _column(names: tuple[str, ...], kind: str) -> int | None:
    for i, name in enumerate(names):
        channel, quantity = _split(name)
        if quantity == "mean" and kind in channel:
            return i
    return None


def _pressure_features(
    names: tuple[str, ...],
    arr: NDArray,
    med: NDArray,
    shaft_speed_hz: ArrayLike | None,
    baseline_shaft_speed_hz: ArrayLike | None,
) -> list[tuple[str, NDArray]]:
    i_d = _column(names, "discharge")
    i_s = _column(names, "suction")
    if i_d is None or i_s is None:
        return []
    n = arr.shape[0]
    speed = _broadcast(shaft_speed_hz, n, "shaft_speed_hz")
    base_speed = _broadcast(baseline_shaft_speed_hz, n, "baseline_shaft_speed_hz")
    affinity = np.where(
        np.isfinite(speed) & np.isfinite(base_speed) & (base_speed > 0),
        (speed / base_speed) ** 2,
        1.0,
    )
    base_dp = med[:, i_d] - med[:, i_s]
    ok = base_dp > 0
    expected = base_dp * affinity
    dp = arr[:, i_d] - arr[:, i_s]
    rel = np.where(ok, dp / expected - 1.0, np.nan)
    suction = np.where(ok, (arr[:, i_s] - med[:, i_s]) / base_dp, np.nan)
    return [
        (DIFFERENTIAL_FEATURE, np.clip(rel, *_CLIP["rel"])),
        (SUCTION_FEATURE, np.clip(suction, *_CLIP["rel"])),
    ]


def window_features(
    values: Mapping[str, float | None],
    baseline: IndicatorBaseline,
    *,
    shaft_speed_hz: float | None = None,
) -> tuple[tuple[str, ...], NDArray]:
    """Features of one window given as ``{name: value}`` (e.g. ``values_by_name(layout)``).

    Only indicators present in both the window and the baseline are used.

    Returns
    -------
    feature_names : tuple of str
    f : ndarray of shape (n_features,)
    """
    names = tuple(n for n in values if n in set(baseline.names))
    x = np.array([np.nan if values[n] is None else float(values[n]) for n in names])  # type: ignore[arg-type]
    median, _ = baseline.aligned(names)
    fn, F = diagnostic_features(
        names,
        x[None, :],
        median,
        shaft_speed_hz=shaft_speed_hz,
        baseline_shaft_speed_hz=baseline.shaft_speed_hz,
    )
    return fn, F[0]

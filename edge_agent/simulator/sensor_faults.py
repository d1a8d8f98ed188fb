"""Sensor and acquisition faults applied to a clean simulated channel.

Each kind leaves a signature the gateway's quality checks should find:

``clipping``
    The amplifier saturates: samples beyond ``mean +- 1 std`` of the clean window are held at
    those two rails, so runs of identical values appear at both extremes.
``flatline``
    The sensor is stuck: every sample equals the first clean sample.
``spikes``
    A few isolated single-sample spikes of 12-20 standard deviations (connector or EMI).
``dropout``
    A contiguous run of lost samples (NaN) covering 10-60 % of the window.
``dc_drift``
    An offset that grows linearly with the time since the fault began (a drifting
    transducer or a failing bias supply), ``drift_per_day`` channel units per day.
"""

from __future__ import annotations

from typing import Literal, get_args

import numpy as np
import numpy.typing as npt

__all__ = ["DEFAULT_DRIFT_PER_DAY", "SENSOR_FAULT_KINDS", "SensorFaultKind", "apply_sensor_fault"]

SensorFaultKind = Literal["clipping", "flatline", "spikes", "dropout", "dc_drift"]
SENSOR_FAULT_KINDS: tuple[SensorFaultKind, ...] = get_args(SensorFaultKind)

DEFAULT_DRIFT_PER_DAY: dict[str, float] = {
    "accel": 0.01,
    "pressure": 1.0,
    "current": 0.2,
    "temperature": 0.3,
    "tacho": 0.05,
}
"""Default DC drift rate by channel kind, in the channel's unit per day."""

FloatArray = npt.NDArray[np.float64]


def _clipping(
    x: FloatArray, rng: np.random.Generator, elapsed_days: float, drift: float
) -> FloatArray:
    centre = float(np.mean(x))
    half = float(np.std(x))
    if half == 0.0:
        return x.copy()
    return np.clip(x, centre - half, centre + half)


def _flatline(
    x: FloatArray, rng: np.random.Generator, elapsed_days: float, drift: float
) -> FloatArray:
    return np.full_like(x, x[0])


def _spikes(
    x: FloatArray, rng: np.random.Generator, elapsed_days: float, drift: float
) -> FloatArray:
    out = x.copy()
    count = min(int(rng.integers(3, 12)), x.size)
    where = rng.choice(x.size, size=count, replace=False)
    scale = max(float(np.std(x)), 1e-6 * max(float(np.max(np.abs(x))), 1.0))
    out[where] += rng.choice([-1.0, 1.0], size=count) * rng.uniform(12.0, 20.0, size=count) * scale
    return out


def _dropout(
    x: FloatArray, rng: np.random.Generator, elapsed_days: float, drift: float
) -> FloatArray:
    out = x.copy()
    length = max(1, round(x.size * float(rng.uniform(0.1, 0.6))))
    start = int(rng.integers(0, x.size - length + 1))
    out[start : start + length] = np.nan
    return out


def _dc_drift(
    x: FloatArray, rng: np.random.Generator, elapsed_days: float, drift: float
) -> FloatArray:
    return x + drift * max(elapsed_days, 0.0)


_KINDS = {
    "clipping": _clipping,
    "flatline": _flatline,
    "spikes": _spikes,
    "dropout": _dropout,
    "dc_drift": _dc_drift,
}


def apply_sensor_fault(
    x: npt.ArrayLike,
    *,
    kind: str,
    rng: np.random.Generator,
    elapsed_days: float = 0.0,
    drift_per_day: float = 0.0,
) -> FloatArray:
    """Return a copy of one channel's window with a sensor fault applied.

    Parameters
    ----------
    x : array_like, shape (n,)
        Clean samples in the channel's unit.
    kind : {"clipping", "flatline", "spikes", "dropout", "dc_drift"}
        The fault (see the module docstring for each signature).
    rng : numpy.random.Generator
        Source of the spike positions and dropout run.
    elapsed_days : float
        Time since the fault began, days (``dc_drift`` only).
    drift_per_day : float
        Drift rate in channel units per day (``dc_drift`` only).

    Returns
    -------
    ndarray, shape (n,)

    Examples
    --------
    >>> x = np.sin(np.linspace(0, 20, 1000))
    >>> y = apply_sensor_fault(x, kind="dropout", rng=np.random.default_rng(0))
    >>> bool(np.isnan(y).any()), bool(np.isnan(x).any())
    (True, False)
    """
    try:
        fault = _KINDS[kind]
    except KeyError:
        raise ValueError(f"kind must be one of {sorted(_KINDS)}, got {kind!r}") from None
    arr = np.array(x, dtype=float)
    if arr.ndim != 1:
        raise ValueError(f"x must be one-dimensional, got shape {arr.shape}")
    if arr.size == 0:
        return arr
    return fault(arr, rng, elapsed_days, drift_per_day)

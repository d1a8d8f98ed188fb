"""Input checks shared by the DSP modules (private)."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import numpy.typing as npt

__all__ = ["as_signal", "check_band", "check_fs", "check_positive"]

FloatArray = npt.NDArray[np.floating[Any]]


def check_fs(fs: float, *, name: str = "fs") -> float:
    """Return ``fs`` as a float after checking it is a finite, positive sample rate."""
    try:
        value = float(fs)
    except (TypeError, ValueError):
        msg = f"{name} must be a positive, finite sample rate in Hz, got {fs!r}"
        raise ValueError(msg) from None
    if not math.isfinite(value) or value <= 0.0:
        raise ValueError(f"{name} must be a positive, finite sample rate in Hz, got {fs!r}")
    return value


def check_positive(value: float, *, name: str, allow_zero: bool = False) -> float:
    """Return ``value`` as a float after checking it is finite and positive (or zero)."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a finite number, got {value!r}") from None
    if not math.isfinite(v) or v < 0.0 or (v == 0.0 and not allow_zero):
        bound = ">= 0" if allow_zero else "> 0"
        raise ValueError(f"{name} must be finite and {bound}, got {value!r}")
    return v


def as_signal(
    x: npt.ArrayLike,
    *,
    name: str = "x",
    min_length: int = 2,
    axis: int = -1,
    finite: bool = True,
    one_dimensional: bool = False,
) -> FloatArray:
    """Convert ``x`` to a float array and check its length along ``axis`` and its values."""
    arr = np.asarray(x, dtype=float)
    if arr.ndim == 0:
        raise ValueError(f"{name} must be an array of samples, got a scalar {arr.item()!r}")
    if one_dimensional and arr.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {arr.shape}")
    try:
        n = arr.shape[axis]
    except IndexError:
        raise ValueError(f"axis {axis} is out of range for {name} of shape {arr.shape}") from None
    if arr.size == 0 or n == 0:
        raise ValueError(f"{name} must not be empty, got shape {arr.shape}")
    if n < min_length:
        raise ValueError(
            f"{name} is too short: needs at least {min_length} samples along axis {axis}, got {n}"
        )
    if finite and not np.isfinite(arr).all():
        raise ValueError(
            f"{name} contains non-finite samples (NaN or inf); clean the window first "
            "(edge_agent.dsp.quality.clean_window)"
        )
    return arr


def check_band(
    band: tuple[float, float] | npt.ArrayLike, fs: float, *, name: str = "band"
) -> tuple[float, float]:
    """Return ``band`` as ``(low, high)`` in Hz after checking 0 <= low < high <= fs/2."""
    try:
        lo, hi = (float(v) for v in np.asarray(band, dtype=float).reshape(2))
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a pair (low, high) in Hz, got {band!r}") from None
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo < 0.0 or lo >= hi:
        raise ValueError(f"{name} must be (low, high) with 0 <= low < high, in Hz, got {band!r}")
    if hi > fs / 2.0:
        raise ValueError(f"{name} must lie below fs/2 = {fs / 2:g} Hz, got {band!r}")
    return lo, hi

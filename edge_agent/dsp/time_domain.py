"""Time-domain statistics of a vibration window: level, peakiness and shape.

All functions reduce along ``axis`` and return a float for 1-D input, an array otherwise. A
statistic that is 0/0 (e.g. the crest factor of an all-zero window) is NaN.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from edge_agent.dsp._validation import as_signal

__all__ = [
    "TimeDomainSummary",
    "crest_factor",
    "impulse_factor",
    "kurtosis",
    "peak",
    "peak_to_peak",
    "rms",
    "shape_factor",
    "skewness",
    "summarise",
]

FloatArray = npt.NDArray[np.floating[Any]]
Result = float | FloatArray


def _out(v: FloatArray) -> Result:
    return float(v) if np.ndim(v) == 0 else v


def _ratio(num: FloatArray, den: FloatArray) -> FloatArray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)


def rms(x: npt.ArrayLike, *, axis: int = -1) -> Result:
    """Root mean square, sqrt(mean(x**2)), in the unit of ``x`` (no mean removal).

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(1000) / 1000.0
    >>> round(rms(2.0 * np.sin(2 * np.pi * 10 * t)), 6)
    1.414214
    """
    a = as_signal(x, min_length=1, axis=axis)
    return _out(np.sqrt(np.mean(a * a, axis=axis)))


def peak(x: npt.ArrayLike, *, axis: int = -1) -> Result:
    """Largest absolute sample, max|x|, in the unit of ``x``.

    Examples
    --------
    >>> peak([0.5, -2.0, 1.0])
    2.0
    """
    a = as_signal(x, min_length=1, axis=axis)
    return _out(np.max(np.abs(a), axis=axis))


def peak_to_peak(x: npt.ArrayLike, *, axis: int = -1) -> Result:
    """Difference between the largest and the smallest sample, in the unit of ``x``.

    Examples
    --------
    >>> peak_to_peak([0.5, -2.0, 1.0])
    3.0
    """
    a = as_signal(x, min_length=1, axis=axis)
    return _out(np.ptp(a, axis=axis))


def crest_factor(x: npt.ArrayLike, *, axis: int = -1) -> Result:
    """Peak over RMS (dimensionless; sqrt(2) for a sine).

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(1000) / 1000.0
    >>> round(crest_factor(np.sin(2 * np.pi * 10 * t)), 4)
    1.4142
    """
    a = as_signal(x, min_length=1, axis=axis)
    return _out(_ratio(np.max(np.abs(a), axis=axis), np.sqrt(np.mean(a * a, axis=axis))))


def shape_factor(x: npt.ArrayLike, *, axis: int = -1) -> Result:
    """RMS over mean absolute value (dimensionless; pi/(2 sqrt 2) = 1.1107 for a sine).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> round(shape_factor(rng.normal(size=100_000)), 2)  # sqrt(pi/2) for a Gaussian
    1.25
    """
    a = as_signal(x, min_length=1, axis=axis)
    return _out(_ratio(np.sqrt(np.mean(a * a, axis=axis)), np.mean(np.abs(a), axis=axis)))


def impulse_factor(x: npt.ArrayLike, *, axis: int = -1) -> Result:
    """Peak over mean absolute value (dimensionless; pi/2 for a sine).

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(1000) / 1000.0
    >>> round(impulse_factor(np.sin(2 * np.pi * 10 * t)), 3)
    1.571
    """
    a = as_signal(x, min_length=1, axis=axis)
    return _out(_ratio(np.max(np.abs(a), axis=axis), np.mean(np.abs(a), axis=axis)))


def _central_moments(a: FloatArray, axis: int) -> tuple[FloatArray, FloatArray, FloatArray]:
    d = a - np.mean(a, axis=axis, keepdims=True)
    d2 = d * d
    m2 = np.mean(d2, axis=axis)
    m3 = np.mean(d2 * d, axis=axis)
    m4 = np.mean(d2 * d2, axis=axis)
    return m2, m3, m4


def kurtosis(x: npt.ArrayLike, *, axis: int = -1) -> Result:
    """Pearson kurtosis m4 / m2**2 of the mean-removed samples (3 for a Gaussian, 1.5 for a sine).

    The biased moment estimator, equal to ``scipy.stats.kurtosis(x, fisher=False)``.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> round(kurtosis(rng.normal(size=200_000)), 1)
    3.0
    """
    a = as_signal(x, min_length=2, axis=axis)
    m2, _, m4 = _central_moments(a, axis)
    return _out(_ratio(m4, m2 * m2))


def skewness(x: npt.ArrayLike, *, axis: int = -1) -> Result:
    """Skewness m3 / m2**1.5 of the mean-removed samples (biased, as ``scipy.stats.skew``).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> round(skewness(rng.exponential(size=200_000)), 1)  # 2 for an exponential
    2.0
    """
    a = as_signal(x, min_length=2, axis=axis)
    m2, m3, _ = _central_moments(a, axis)
    return _out(_ratio(m3, m2**1.5))


@dataclass(frozen=True, slots=True)
class TimeDomainSummary:
    """Every time-domain statistic of one 1-D window (see the single functions for meaning)."""

    rms: float
    peak: float
    peak_to_peak: float
    crest_factor: float
    kurtosis: float
    skewness: float
    shape_factor: float
    impulse_factor: float


def _summarise(a: FloatArray) -> TimeDomainSummary:
    """Core of :func:`summarise` for a validated 1-D float array (shares the passes)."""
    n = a.size
    hi, lo = float(a.max()), float(a.min())
    pk = max(hi, -lo)  # max|x|
    # sum / n is what numpy.mean computes, without its call overhead.
    mean_abs = float(np.abs(a).sum()) / n
    mean = float(a.sum()) / n
    ms = float(np.einsum("i,i->", a, a)) / a.size
    d = a - mean
    d2 = d * d
    m2 = float(d2.sum()) / a.size
    m3 = float(np.einsum("i,i->", d2, d)) / a.size
    m4 = float(np.einsum("i,i->", d2, d2)) / a.size
    r = ms**0.5
    nan = float("nan")
    return TimeDomainSummary(
        rms=r,
        peak=pk,
        peak_to_peak=hi - lo,
        crest_factor=pk / r if r > 0 else nan,
        kurtosis=m4 / (m2 * m2) if m2 > 0 else nan,
        skewness=m3 / m2**1.5 if m2 > 0 else nan,
        shape_factor=r / mean_abs if mean_abs > 0 else nan,
        impulse_factor=pk / mean_abs if mean_abs > 0 else nan,
    )


def summarise(x: npt.ArrayLike) -> TimeDomainSummary:
    """All time-domain statistics of a 1-D window in one pass over the moments.

    Parameters
    ----------
    x : array_like, shape (n,)
        Samples, n >= 2, all finite.

    Returns
    -------
    TimeDomainSummary

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(1000) / 1000.0
    >>> s = summarise(np.sin(2 * np.pi * 10 * t))
    >>> round(s.crest_factor, 4), round(s.kurtosis, 3)
    (1.4142, 1.5)
    """
    return _summarise(as_signal(x, min_length=2, one_dimensional=True))

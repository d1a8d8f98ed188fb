"""Shaft speed from a tachometer pulse train or from the vibration spectrum; order amplitudes."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import numpy.typing as npt

from edge_agent.dsp._order_stats import median
from edge_agent.dsp._validation import as_signal, check_band, check_fs, check_positive
from edge_agent.dsp.severity import STANDARD_GRAVITY
from edge_agent.dsp.spectral import (
    Spectrum,
    _interpolate_bins,
    _spectrum,
    _tone_rms_from_spectrum,
)

__all__ = ["order_amplitudes", "speed_from_spectrum", "speed_from_tacho"]

FloatArray = npt.NDArray[np.floating[Any]]

_FLOOR_BINS = 15


def speed_from_tacho(
    pulses: npt.ArrayLike,
    fs: float,
    *,
    pulses_per_rev: int = 1,
    min_pulses: int = 3,
    max_jitter: float = 0.2,
) -> float | None:
    """Shaft rotation frequency, Hz, from a tachometer pulse train.

    Rising crossings of the mid level between the signal's minimum and maximum are located
    to a fraction of a sample by linear interpolation; the rate is (pulses - 1) / (time from the
    first to the last crossing) / ``pulses_per_rev``. Hysteresis of +-10 % of the swing
    suppresses chatter on slow edges.

    Parameters
    ----------
    pulses : array_like, shape (n,)
        Tachometer signal (any unit), finite.
    fs : float
        Sample rate, Hz.
    pulses_per_rev : int
        Pulses per shaft revolution (>= 1).
    min_pulses : int
        Fewest rising edges that give an estimate (>= 2).
    max_jitter : float
        Largest standard deviation of the pulse intervals, relative to their mean, of a
        believable pulse train.

    Returns
    -------
    float or None
        Shaft rate, Hz; None when the channel holds fewer than ``min_pulses`` pulses or they
        are irregular (no speed, not an error: the caller falls back to another source).

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(10_000) / 10_000.0
    >>> x = (np.mod(t * 29.5, 1.0) < 0.1).astype(float) * 5.0
    >>> round(speed_from_tacho(x, 10_000.0), 2)
    29.5
    """
    fs = check_fs(fs)
    x = as_signal(pulses, name="pulses", min_length=4, one_dimensional=True)
    if int(pulses_per_rev) != pulses_per_rev or pulses_per_rev < 1:
        raise ValueError(f"pulses_per_rev must be an integer >= 1, got {pulses_per_rev!r}")
    if int(min_pulses) != min_pulses or min_pulses < 2:
        raise ValueError(f"min_pulses must be an integer >= 2, got {min_pulses!r}")
    lo, hi = float(x.min()), float(x.max())
    swing = hi - lo
    if swing <= 0:
        return None
    mid = 0.5 * (lo + hi)
    # Schmitt trigger without a loop: the state follows the last threshold crossed.
    above = x > mid + 0.1 * swing
    below = x < mid - 0.1 * swing
    decided = above | below
    if not decided.any():
        return None
    last = np.maximum.accumulate(np.where(decided, np.arange(x.size), -1))
    state = np.where(last >= 0, above[np.maximum(last, 0)], False)
    rises = np.flatnonzero(~state[:-1] & state[1:]) + 1
    if rises.size < min_pulses:
        return None
    # Interpolate the crossing of the mid level just before each rise.
    seg = np.clip(rises - 1, 0, x.size - 2)
    x0, x1 = x[seg], x[seg + 1]
    frac = np.where(x1 != x0, (mid - x0) / np.where(x1 != x0, x1 - x0, 1.0), 0.0)
    t = (seg + np.clip(frac, 0.0, 1.0)) / fs
    span = t[-1] - t[0]
    intervals = np.diff(t)
    # A real pulse train is regular; noise crossing the thresholds is not.
    if span <= 0 or intervals.std() > max_jitter * intervals.mean():
        return None
    return float((rises.size - 1) / span / pulses_per_rev)


def _speed_from_spectrum(
    spec: Spectrum,
    search_hz: tuple[float, float],
    harmonics: int,
    min_prominence: float,
) -> float | None:
    m = spec.raw.shape[-1]
    klo = max(int(np.floor(search_hz[0] / spec.df)), 1)
    khi = int(np.ceil(search_hz[1] / spec.df))
    hmax = min(harmonics, (m - 2) // max(khi, 1))
    if hmax < 1 or khi < klo:
        return None
    pad = max(_FLOOR_BINS, khi - klo)
    # Only the bins up to the highest harmonic's floor (and the refinement beside it) are read.
    mag = np.abs(spec._hann_slice(0, min(m, hmax * khi + pad + 3)))
    k = np.arange(klo, khi + 1)
    h = np.arange(1, hmax + 1)[:, None]
    # Each harmonic's magnitude near h*k (+-1 bin) over the median magnitude of a wider
    # neighbourhood of that harmonic's search band (its local floor).
    hk = h * k
    near = np.maximum(np.maximum(mag[hk - 1], mag[hk]), mag[np.minimum(hk + 1, m - 1)])
    lo_f = np.maximum(h[:, 0] * klo - pad, 1)
    hi_f = np.minimum(h[:, 0] * khi + pad, m - 1)
    floor = np.array([median(mag[a : b + 1]) for a, b in zip(lo_f, hi_f, strict=True)])
    norm = near / np.where(floor > 0, floor, np.inf)[:, None]
    score = norm.sum(axis=0)
    best = int(np.argmax(score))
    # Refine on the most prominent harmonic: its interpolated frequency / h is h times finer.
    h_best = int(np.argmax(norm[:, best])) + 1
    if not norm[h_best - 1, best] >= min_prominence:
        return None
    kc = h_best * int(k[best])
    lo_k, hi_k = max(kc - 1, 1), min(kc + 1, m - 2)
    kpk = lo_k + int(np.argmax(mag[lo_k : hi_k + 1]))
    f = _interpolate_bins(mag, np.array([kpk]), spec.df, spec.n).frequencies_hz[0]
    est = float(f) / h_best
    if not search_hz[0] - spec.df <= est <= search_hz[1] + spec.df:
        return None
    return est


def speed_from_spectrum(
    x: npt.ArrayLike,
    fs: float,
    *,
    search_hz: tuple[float, float],
    harmonics: int = 3,
    min_prominence: float = 4.0,
) -> float | None:
    """Shaft rotation frequency, Hz, from the vibration spectrum within ``search_hz``.

    A harmonic sum picks the candidate bin: for each candidate 1x bin k, the magnitudes near
    k, 2k, ... (each normalised by the median over its own search band) are added, so a shaft
    whose 2x line is stronger than its 1x is still found. The winner is refined by three-bin
    interpolation of its most prominent harmonic's peak, divided by that harmonic's order.

    Parameters
    ----------
    x : array_like, shape (n,)
        Vibration samples, finite.
    fs : float
        Sample rate, Hz.
    search_hz : (low, high)
        Range of plausible shaft rates, Hz (e.g. the drive range with a margin).
    harmonics : int
        Harmonics in the sum (>= 1).
    min_prominence : float
        The winner's most prominent harmonic must stand this many times above its local
        floor (4 = 12 dB), else None.

    Returns
    -------
    float or None
        Shaft rate, Hz, or None when no candidate stands out.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> t = np.arange(25600) / 25600.0
    >>> x = 0.2 * np.sin(2 * np.pi * 24.37 * t) + 0.05 * rng.normal(size=t.size)
    >>> round(speed_from_spectrum(x, 25600.0, search_hz=(18.0, 31.0)), 2)
    24.37
    """
    fs = check_fs(fs)
    band = check_band(search_hz, fs, name="search_hz")
    if int(harmonics) != harmonics or harmonics < 1:
        raise ValueError(f"harmonics must be an integer >= 1, got {harmonics!r}")
    check_positive(min_prominence, name="min_prominence")
    a = as_signal(x, min_length=16, one_dimensional=True)
    return _speed_from_spectrum(_spectrum(a, fs), band, int(harmonics), float(min_prominence))


def _order_velocity_from_spectrum(spec: Spectrum, freqs_hz: FloatArray) -> FloatArray:
    """Velocity r.m.s., mm/s, of the acceleration (g) tones at ``freqs_hz``."""
    acc = _tone_rms_from_spectrum(spec, freqs_hz)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(
            freqs_hz > 0, acc * STANDARD_GRAVITY * 1000.0 / (2.0 * np.pi * freqs_hz), np.nan
        )


def order_amplitudes(
    x: npt.ArrayLike,
    fs: float,
    *,
    shaft_hz: float,
    orders: Sequence[float] = (1.0, 2.0, 3.0),
    velocity: bool = False,
) -> FloatArray:
    """R.m.s. amplitude of the lines at ``orders`` times the shaft rate.

    Parameters
    ----------
    x : array_like, shape (n,)
        Samples, finite (acceleration in g when ``velocity`` is True).
    fs : float
        Sample rate, Hz.
    shaft_hz : float
        Shaft rate, Hz.
    orders : sequence of float
        Multiples of the shaft rate, e.g. ``(1, 2, 3, vane_count)``; each must lie below fs/2.
    velocity : bool
        Convert acceleration in g to velocity in mm/s (divide by 2 pi f).

    Returns
    -------
    ndarray, shape (len(orders),)
        R.m.s. amplitude in the unit of x, or mm/s with ``velocity``.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(25600) / 25600.0
    >>> x = np.sin(2 * np.pi * 29.0 * t) + 0.5 * np.sin(2 * np.pi * 58.0 * t)
    >>> order_amplitudes(x, 25600.0, shaft_hz=29.0, orders=(1, 2)).round(4)
    array([0.7071, 0.3536])
    """
    fs = check_fs(fs)
    fr = check_positive(shaft_hz, name="shaft_hz")
    o = np.asarray(orders, dtype=float)
    if o.ndim != 1 or o.size == 0 or not np.all(np.isfinite(o)) or np.any(o <= 0):
        raise ValueError(f"orders must be a non-empty sequence of positive numbers, got {orders!r}")
    f = o * fr
    if np.any(f >= fs / 2):
        raise ValueError(
            f"orders x shaft_hz must lie below fs/2 = {fs / 2:g} Hz, got {f.tolist()!r} Hz"
        )
    a = as_signal(x, min_length=16, one_dimensional=True)
    spec = _spectrum(a, fs)
    return _order_velocity_from_spectrum(spec, f) if velocity else _tone_rms_from_spectrum(spec, f)

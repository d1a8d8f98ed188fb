"""Data-quality checks on one raw channel window, and the cleaned window indicators see.

Checks: clipping (runs at the rails or at a configured full scale), flatline (standard deviation
below a floor or a long run of identical samples), dropouts (non-finite samples; gaps filled by
linear interpolation), isolated one-sample spikes (replaced), DC offset and drift (linear trend).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import numpy.typing as npt

from edge_agent.dsp._order_stats import median
from edge_agent.dsp._validation import check_fs, check_positive

__all__ = [
    "QUALITY_FLAGS",
    "QualityResult",
    "clean_window",
]

FloatArray = npt.NDArray[np.floating[Any]]

QUALITY_FLAGS: tuple[str, ...] = (
    "clipped",
    "flatline",
    "dropout",
    "spikes_removed",
    "dc_offset",
    "drift",
)
"""Every flag :func:`clean_window` can raise."""

Detrend = Literal["none", "mean", "linear"]

_MIN_SAMPLES = 8
_MAD_TO_SIGMA = 1.482602218505602  # 1 / Phi^-1(3/4): MAD of a Gaussian times this is its sigma


@dataclass(frozen=True, slots=True)
class QualityResult:
    """What :func:`clean_window` found in one window.

    Attributes
    ----------
    flags : frozenset of str
        Raised flags, a subset of :data:`QUALITY_FLAGS`.
    spikes_removed : int
        Number of isolated one-sample spikes replaced.
    dropout_fraction : float
        Fraction of samples that were missing (non-finite) before filling.
    usable : bool
        False when indicators must not be computed from the window: flatline, too many
        missing samples, or a gap longer than the allowed fill.
    """

    flags: frozenset[str]
    spikes_removed: int
    dropout_fraction: float
    usable: bool


def _longest_run(mask: npt.NDArray[np.bool_]) -> int:
    """Length of the longest run of True in a 1-D boolean array (vectorised)."""
    if not mask.any():
        return 0
    edges = np.diff(np.concatenate(([0], mask.view(np.int8), [0])))
    starts = np.flatnonzero(edges == 1)
    stops = np.flatnonzero(edges == -1)
    return int((stops - starts).max())


def _fill_gaps(x: FloatArray, missing: npt.NDArray[np.bool_]) -> FloatArray:
    idx = np.arange(x.size)
    good = ~missing
    out = x.copy()
    out[missing] = np.interp(idx[missing], idx[good], x[good])
    return out


def _remove_spikes(
    x: FloatArray, threshold: float, peak: float | None = None
) -> tuple[FloatArray, int]:
    """Replace isolated one-sample spikes by the mean of their two neighbours.

    The residual r[i] = x[i] - (x[i-1] + x[i+1]) / 2 of a single-sample spike of height s on a
    smooth signal is s at the spike and -s/2 on each side. A sample is a spike when |r| exceeds
    ``threshold`` robust standard deviations (median absolute deviation) of r and both
    neighbours show the -s/2 pattern (opposite sign, 25 %..75 % of |r|). Oscillation near the
    Nyquist frequency gives neighbours of about the same size as the centre and is kept;
    spikes two or more samples wide are not detected. ``peak`` is max|x| when the caller has it.
    """
    r = x[:-2] + x[2:]
    r *= 0.5
    np.subtract(x[1:-1], r, out=r)
    # The residual of a smooth signal is centred on zero: its median absolute value is the MAD.
    abs_r = np.abs(r)
    sigma = _MAD_TO_SIGMA * median(abs_r)
    if peak is None:
        peak = float(np.max(np.abs(x)))
    scale = max(peak, 1.0) * np.finfo(float).eps * 64
    cand = np.flatnonzero(abs_r > threshold * max(sigma, scale))
    cand = cand[(cand >= 1) & (cand <= r.size - 2)]
    if cand.size == 0:
        return x, 0
    rc = r[cand]
    left, right = r[cand - 1], r[cand + 1]
    ratio_l, ratio_r = -left / rc, -right / rc
    isolated = (ratio_l > 0.25) & (ratio_l < 0.75) & (ratio_r > 0.25) & (ratio_r < 0.75)
    spikes = cand[isolated] + 1  # index into x
    if spikes.size == 0:
        return x, 0
    out = x.copy()
    out[spikes] = 0.5 * (x[spikes - 1] + x[spikes + 1])
    return out, int(spikes.size)


def _detrend_none(x: FloatArray, mean: float, slope: float, t: FloatArray) -> FloatArray:
    return x


def _detrend_mean(x: FloatArray, mean: float, slope: float, t: FloatArray) -> FloatArray:
    return x - mean


def _detrend_linear(x: FloatArray, mean: float, slope: float, t: FloatArray) -> FloatArray:
    out = x - mean
    out -= slope * t
    return out


def _std_exceeds(arr: FloatArray, hi: float, lo: float, limit: float) -> bool:
    """``float(arr.std()) > limit`` for finite samples with maximum ``hi`` and minimum ``lo``.

    Any window has std >= (hi - lo) / sqrt(2 n) (at best one sample at each extreme, the rest
    at the mean), and the computed two-pass std does not fall below the true one by more than
    a few rounding errors: squared deviations about any centre, such as the rounded mean, sum
    to at least those about the exact mean. So when the range exceeds twice that bound (and is
    far above underflow) the answer is known without the two passes.
    """
    if limit > 0.0 and hi - lo > max(2.0 * math.sqrt(2.0 * arr.size) * limit, 1e-100):
        return True
    return float(arr.std()) > limit


@functools.lru_cache(maxsize=16)
def _centred_time(n: int, fs: float) -> tuple[FloatArray, np.float64]:
    """Sample times about the window's centre, s (read-only), and their sum of squares."""
    t: FloatArray = (np.arange(n) - 0.5 * (n - 1)) / fs
    t.flags.writeable = False
    return t, np.einsum("i,i->", t, t)


_DETRENDERS: dict[str, Callable[[FloatArray, float, float, FloatArray], FloatArray]] = {
    "none": _detrend_none,
    "mean": _detrend_mean,
    "linear": _detrend_linear,
}


def clean_window(
    x: npt.ArrayLike,
    fs: float,
    *,
    full_scale: float | None = None,
    clip_run: int = 4,
    flatline_std: float = 1e-9,
    flatline_run_s: float = 0.1,
    check_flatline: bool = True,
    max_gap_s: float = 0.05,
    max_dropout_fraction: float = 0.1,
    spike_threshold: float = 12.0,
    dc_limit: float | None = None,
    drift_limit: float | None = None,
    detrend: Detrend = "none",
) -> tuple[FloatArray, QualityResult]:
    """Check one channel window and return the cleaned samples with the quality result.

    Parameters
    ----------
    x : array_like, shape (n,)
        Raw samples in engineering units; NaN or inf marks a dropped sample.
    fs : float
        Sample rate, Hz.
    full_scale : float, optional
        Input range of the acquisition (same unit as ``x``). Any sample with
        ``|x| >= 0.999 * full_scale`` counts as clipped. Without it, clipping is detected as
        a run of at least ``clip_run`` consecutive samples at the window's maximum or minimum.
    clip_run : int
        Shortest run at a rail that counts as clipping (samples, >= 2).
    flatline_std : float
        Standard deviation (unit of ``x``) below which the window is a flatline.
    flatline_run_s : float
        A run of identical consecutive samples this long (s) is a flatline (stuck sensor).
    check_flatline : bool
        False for slowly varying quantities (e.g. a temperature sampled at 10 Hz), which may be
        constant over a window without a fault.
    max_gap_s : float
        Longest gap (s) that may be filled by interpolation and still leave the window usable.
    max_dropout_fraction : float
        Largest fraction of missing samples that still leaves the window usable.
    spike_threshold : float
        Spike threshold in robust standard deviations of the local residual (see Notes).
    dc_limit : float, optional
        Raise ``"dc_offset"`` when ``|mean(x)|`` exceeds this (unit of ``x``). None: no check.
    drift_limit : float, optional
        Raise ``"drift"`` when the linear trend changes by more than this over the window
        (unit of ``x``). None: no check.
    detrend : {"none", "mean", "linear"}
        What to remove from the cleaned samples: nothing (pressure, temperature: the mean is
        the measurement), the mean, or the least-squares line (vibration).

    Returns
    -------
    cleaned : ndarray, shape (n,)
        Gaps filled, spikes replaced, trend removed as asked. All NaN when no sample was
        finite.
    result : QualityResult
        Flags, spike count, dropout fraction and whether the window is usable.

    Raises
    ------
    ValueError
        If ``x`` is empty, not one-dimensional or shorter than 8 samples, or an option is out
        of range.

    Notes
    -----
    Spikes: isolated one-sample outliers of the residual against the neighbours' mean, judged
    by the median absolute deviation (a robust, vectorised relative of the Hampel filter).
    Genuine bearing impacts ring over several samples and are left alone. Clipped samples
    cannot be restored; the window stays usable but carries the flag.

    References
    ----------
    .. [1] F. R. Hampel, "The influence curve and its role in robust estimation", J. Am. Stat.
       Assoc. 69 (1974) 383-393.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(0.0, 1.0, 2048)
    >>> x[100] = 40.0
    >>> cleaned, q = clean_window(x, 2048.0)
    >>> sorted(q.flags), q.spikes_removed, q.usable
    (['spikes_removed'], 1, True)
    """
    fs = check_fs(fs)
    arr = np.asarray(x, dtype=float)
    if arr.ndim != 1:
        raise ValueError(f"x must be one-dimensional, got shape {arr.shape}")
    if arr.size == 0:
        raise ValueError("x must not be empty, got 0 samples")
    if arr.size < _MIN_SAMPLES:
        raise ValueError(f"x is too short: needs at least {_MIN_SAMPLES} samples, got {arr.size}")
    if detrend not in _DETRENDERS:
        raise ValueError(f"detrend must be one of {sorted(_DETRENDERS)}, got {detrend!r}")
    if int(clip_run) != clip_run or clip_run < 2:
        raise ValueError(f"clip_run must be an integer >= 2, got {clip_run!r}")
    if full_scale is not None:
        check_positive(full_scale, name="full_scale")
    check_positive(flatline_std, name="flatline_std", allow_zero=True)
    check_positive(flatline_run_s, name="flatline_run_s")
    check_positive(max_gap_s, name="max_gap_s", allow_zero=True)
    check_positive(spike_threshold, name="spike_threshold")
    if not 0.0 <= max_dropout_fraction <= 1.0:
        raise ValueError(f"max_dropout_fraction must be in [0, 1], got {max_dropout_fraction!r}")

    n = arr.size
    flags: set[str] = set()
    finite = np.isfinite(arr)
    n_missing = n - int(np.count_nonzero(finite))
    dropout_fraction = n_missing / n
    if n_missing == n:
        result = QualityResult(frozenset({"dropout", "flatline"}), 0, 1.0, False)
        return np.full(n, np.nan), result
    usable = True
    if n_missing:
        missing = ~finite
        flags.add("dropout")
        if dropout_fraction > max_dropout_fraction or _longest_run(missing) > max_gap_s * fs:
            usable = False
        arr = _fill_gaps(arr, missing)

    n_spikes = 0
    hi, lo = float(arr.max()), float(arr.min())
    same = arr[1:] == arr[:-1]  # finite samples: equal exactly when their difference is 0
    if check_flatline and (
        not _std_exceeds(arr, hi, lo, flatline_std) or _longest_run(same) + 1 >= flatline_run_s * fs
    ):
        flags.add("flatline")
        usable = False
    else:
        if full_scale is not None and max(hi, -lo) >= 0.999 * full_scale:
            flags.add("clipped")
        arr, n_spikes = _remove_spikes(arr, float(spike_threshold), max(hi, -lo))
        if n_spikes:
            flags.add("spikes_removed")
            hi, lo = float(arr.max()), float(arr.min())
            same = arr[1:] == arr[:-1]
        # Rails are judged after spike removal: a spike must not hide a clipped plateau.
        # A constant window (allowed when check_flatline is False) has no rails.
        tol = 1e-9 * (hi - lo) if hi > lo else -1.0
        rail = (arr >= hi - tol) | (arr <= lo + tol)
        # A run at the rail spans clip_run samples, i.e. clip_run - 1 equal steps in a row.
        if _longest_run(rail[1:] & rail[:-1] & same) + 1 >= clip_run:
            flags.add("clipped")

    t, tt = _centred_time(n, fs)
    mean = float(arr.mean())
    # Least-squares slope, unit of x per second. einsum, not np.dot: BLAS threads would
    # contend with the gateway's other work (see edge_agent.dsp docs).
    slope = float(np.einsum("i,i->", t, arr) / tt)
    if dc_limit is not None and abs(mean) > dc_limit:
        flags.add("dc_offset")
    if drift_limit is not None and abs(slope) * n / fs > drift_limit:
        flags.add("drift")
    cleaned = _DETRENDERS[detrend](arr, mean, slope, t)
    return cleaned, QualityResult(frozenset(flags), n_spikes, dropout_fraction, usable)

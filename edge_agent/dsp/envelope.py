"""Envelope analysis: band selection by spectral kurtosis, squared envelope and its spectrum.

Band selection. The fast kurtogram (Antoni 2007) needs a tree of filter banks, too costly for
the gateway's budget. Instead one short-time Fourier transform (STFT) of the window provides
both the spectral kurtosis per bin (Antoni 2006) and a multi-resolution map in the spirit of the
kurtogram: at level j, bands of 2**j adjacent STFT bins (positions half-overlapping) are formed
by summing the bins' powers frame by frame; each band's kurtosis of its power time series,
mean(E²) / mean(E)², is compared with the value a stationary Gaussian signal would give with the
same window (which depends on the window's correlation between neighbouring bins). The band
with the largest excess, wider than ``min_bandwidth_hz``, is selected.

Envelope. The band is cut from the window's one full-length spectrum (a brick-wall band-pass),
shifted to base band and inverse-transformed on a shorter grid just fine enough to keep the
squared-envelope spectrum free of aliasing up to ``fmax``; the squared envelope is then
Hann-windowed and transformed once more.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.fft

from edge_agent.dsp._validation import as_signal, check_band, check_fs, check_positive
from edge_agent.dsp.spectral import Spectrum, _spectrum

__all__ = [
    "EnvelopeSpectrum",
    "SelectedBand",
    "analytic_envelope",
    "line_levels_db",
    "select_band",
    "spectral_kurtosis",
    "squared_envelope_spectrum",
]

FloatArray = npt.NDArray[np.floating[Any]]
ComplexArray = npt.NDArray[np.complexfloating[Any, Any]]
IntArray = npt.NDArray[np.intp]


@functools.lru_cache(maxsize=16)
def _periodic_hann(n: int) -> FloatArray:
    """Periodic Hann window of ``n`` samples (read-only)."""
    w: FloatArray = 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)
    w.flags.writeable = False
    return w


def _frames_stft(a: FloatArray, nperseg: int) -> ComplexArray:
    """STFT with a periodic Hann window, hop nperseg // 2: shape (frames, nperseg // 2 + 1)."""
    hop = nperseg // 2
    step = a.strides[0]
    # The frames as a read-only view (sliding_window_view(a, nperseg)[::hop], without its checks).
    frames = np.lib.stride_tricks.as_strided(
        a,
        shape=((a.size - nperseg) // hop + 1, nperseg),
        strides=(hop * step, step),
        writeable=False,
    )
    z: ComplexArray = scipy.fft.rfft(frames * _periodic_hann(nperseg), axis=-1, workers=1)
    return z


def _frames_spectrum(a: FloatArray, nperseg: int) -> tuple[FloatArray, FloatArray]:
    """|STFT|² with a periodic Hann window, hop nperseg // 2; and the window itself."""
    z = _frames_stft(a, nperseg)
    return z.real**2 + z.imag**2, _periodic_hann(nperseg)


def _check_nperseg(nperseg: int, n: int) -> int:
    if int(nperseg) != nperseg or nperseg < 8 or nperseg % 2:
        raise ValueError(f"nperseg must be an even integer >= 8, got {nperseg!r}")
    if 4 * nperseg > n:
        raise ValueError(
            f"nperseg must be at most a quarter of the window length ({n // 4}), got {nperseg!r}"
        )
    return int(nperseg)


def spectral_kurtosis(
    x: npt.ArrayLike, fs: float, *, nperseg: int = 64
) -> tuple[FloatArray, FloatArray]:
    """Spectral kurtosis from one STFT: SK(f) = <|X|^4> / <|X|²>² - 2.

    Parameters
    ----------
    x : array_like, shape (n,)
        Finite samples, n >= 4 nperseg.
    fs : float
        Sample rate, Hz.
    nperseg : int
        STFT frame length (even); shorter than the spacing of the impacts to be revealed.

    Returns
    -------
    f : ndarray, shape (nperseg // 2 + 1,)
        Bin frequencies, Hz.
    sk : ndarray, shape (nperseg // 2 + 1,)
        Spectral kurtosis (0 for stationary Gaussian noise; the DC and Nyquist bins, being real,
        read 1 for Gaussian noise).

    References
    ----------
    .. [1] J. Antoni, "The spectral kurtosis: a useful tool for characterising non-stationary
       signals", Mech. Syst. Signal Process. 20 (2006) 282-307.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> f, sk = spectral_kurtosis(rng.normal(size=25600), 25600.0)
    >>> bool(abs(np.median(sk[1:-1])) < 0.2)
    True
    """
    fs = check_fs(fs)
    a = as_signal(x, min_length=32, one_dimensional=True)
    nperseg = _check_nperseg(nperseg, a.size)
    p, _ = _frames_spectrum(a, nperseg)
    m2 = p.mean(axis=0)
    m4 = (p * p).mean(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        sk = np.where(m2 > 0, m4 / np.where(m2 > 0, m2, 1.0) ** 2 - 2.0, np.nan)
    return np.arange(p.shape[1]) * fs / nperseg, sk


@dataclass(frozen=True, slots=True)
class SelectedBand:
    """The band chosen for envelope analysis.

    Attributes
    ----------
    low_hz, high_hz : float
        Band edges, Hz.
    excess_kurtosis : float
        Kurtosis of the band's power time series above its Gaussian reference (0: nothing
        impulsive; larger: more impulsive).
    level : int
        Resolution level: the band spans 2**level STFT bins.
    """

    low_hz: float
    high_hz: float
    excess_kurtosis: float
    level: int


def _gaussian_reference(w: FloatArray, widths: npt.NDArray[np.intp]) -> FloatArray:
    """mean(E²)/mean(E)² of a band of ``widths`` bins for stationary white Gaussian noise.

    E = sum of |X_k|² over the band; for circular Gaussian bins with correlation rho_d between
    bins d apart, mean(E²) = mean(E)² + sum_jk |rho_{j-k}|² (per unit power), so the ratio is
    1 + (w + 2 sum_d (w - d) |rho_d|²) / w².
    """
    n = w.size
    g = np.fft.fft(w * w)
    rho2 = np.abs(g / g[0]) ** 2  # |rho_d|², d = 0..n-1
    out = np.empty(widths.size)
    for i, wd in enumerate(widths):  # a handful of levels, not samples
        d = np.arange(1, int(wd))
        out[i] = 1.0 + (wd + 2.0 * np.sum((wd - d) * rho2[d % n])) / wd**2
    return out


@dataclass(frozen=True, slots=True, eq=False)
class _BandGrid:
    """The candidate bands of :func:`_select_band_core` for one configuration.

    Band ``b`` covers the usable STFT bins ``lo[b] .. hi[b] - 1`` counted from ``kmin``; the
    bands of ``levels[i]`` are ``bounds[i] .. bounds[i + 1] - 1``, each with the Gaussian
    reference ``ref[i]``.
    """

    kmin: int
    span: int
    levels: tuple[int, ...]
    widths: tuple[int, ...]
    ref: tuple[float, ...]
    bounds: tuple[int, ...]
    lo: IntArray
    hi: IntArray


@functools.lru_cache(maxsize=16)
def _band_grid(
    fs: float, nperseg: int, min_bandwidth_hz: float, f_range: tuple[float, float]
) -> _BandGrid:
    nbins = nperseg // 2 + 1
    dfb = fs / nperseg
    # Usable bins: drop DC and Nyquist (real-valued) and keep centres inside f_range.
    kmin = max(1, int(np.ceil(f_range[0] / dfb)))
    kmax = min(nbins - 2, int(np.floor(f_range[1] / dfb)))
    if kmax < kmin:
        raise ValueError(
            f"f_range {f_range!r} holds no STFT bin at {dfb:g} Hz spacing; "
            "widen it or lower nperseg"
        )
    span = kmax - kmin + 1
    levels = np.arange(int(np.log2(span)) + 1)
    widths = 2**levels
    ok = widths * dfb >= min_bandwidth_hz
    if not ok.any():
        ok[-1] = True  # the widest band is the best the range allows
    levels, widths = levels[ok], widths[ok]
    ref = _gaussian_reference(_periodic_hann(nperseg), widths)
    starts = [np.arange(0, span - int(wd) + 1, max(int(wd) // 2, 1)) for wd in widths]
    lo = np.concatenate(starts)
    hi = np.concatenate([s + int(wd) for s, wd in zip(starts, widths, strict=True)])
    lo.flags.writeable = False
    hi.flags.writeable = False
    bounds = np.cumsum([0] + [s.size for s in starts])
    return _BandGrid(
        kmin=kmin,
        span=span,
        levels=tuple(int(v) for v in levels),
        widths=tuple(int(v) for v in widths),
        ref=tuple(float(v) for v in ref),
        bounds=tuple(int(v) for v in bounds),
        lo=lo,
        hi=hi,
    )


def _select_band_core(
    a: FloatArray,
    fs: float,
    nperseg: int,
    min_bandwidth_hz: float,
    f_range: tuple[float, float],
) -> SelectedBand:
    grid = _band_grid(float(fs), int(nperseg), float(min_bandwidth_hz), tuple(f_range))
    dfb = fs / nperseg
    z = _frames_stft(a, nperseg)[:, grid.kmin : grid.kmin + grid.span]
    # Running sums of the bins' powers along frequency, frame by frame (row j + 1 holds bins
    # 0..j), added in the order numpy.cumsum adds them; rows are contiguous for the sums.
    p = (z.real**2 + z.imag**2).T.copy()
    c = np.empty((grid.span + 1, p.shape[1]))
    c[0] = 0.0
    for j in range(grid.span):  # bins, not samples
        np.add(c[j], p[j], out=c[j + 1])
    # Every band's power time series, shape (bands, frames), and its means over frames. Each
    # row is contiguous, so numpy sums it pairwise, as it summed each column of the former
    # (frames, bands) gather (laid out column by column): the same kurtosis to the last bit.
    e = c[grid.hi] - c[grid.lo]
    m1 = e.mean(axis=1)
    e *= e
    m2 = e.mean(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        kurt = np.where(m1 > 0, m2 / np.where(m1 > 0, m1, 1.0) ** 2, 0.0)
    best = SelectedBand(f_range[0], f_range[1], -np.inf, grid.levels[-1])
    for i, (lev, wd, r) in enumerate(zip(grid.levels, grid.widths, grid.ref, strict=True)):
        k = kurt[grid.bounds[i] : grid.bounds[i + 1]] - r
        j = int(np.argmax(k))
        if k[j] > best.excess_kurtosis:
            k0 = grid.kmin + int(grid.lo[grid.bounds[i] + j])
            lo = max((k0 - 0.5) * dfb, 0.0)
            hi = min((k0 + wd - 0.5) * dfb, fs / 2)
            best = SelectedBand(float(lo), float(hi), float(k[j]), lev)
    return best


def select_band(
    x: npt.ArrayLike,
    fs: float,
    *,
    nperseg: int = 64,
    min_bandwidth_hz: float = 0.0,
    f_range: tuple[float, float] | None = None,
) -> SelectedBand:
    """Choose the most impulsive frequency band of ``x`` for envelope analysis.

    See the module notes for the method (spectral kurtosis on a multi-resolution grouping of one
    STFT, a simpler stand-in for the fast kurtogram).

    Parameters
    ----------
    x : array_like, shape (n,)
        Finite samples, n >= 4 nperseg.
    fs : float
        Sample rate, Hz.
    nperseg : int
        STFT frame length (even): sets the finest band, fs / nperseg Hz, and the time resolution.
    min_bandwidth_hz : float
        Narrowest acceptable band, Hz; make it at least 2-3 times the highest defect frequency
        so the band keeps the modulation sidebands.
    f_range : (low, high), optional
        Frequencies the band may occupy, Hz (default: all of 0..fs/2).

    Returns
    -------
    SelectedBand

    References
    ----------
    .. [1] J. Antoni, "The spectral kurtosis: a useful tool for characterising non-stationary
       signals", Mech. Syst. Signal Process. 20 (2006) 282-307.
    .. [2] J. Antoni, "Fast computation of the kurtogram for the detection of transient
       faults", Mech. Syst. Signal Process. 21 (2007) 108-124.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> fs = 25600.0
    >>> t = np.arange(25600) / fs
    >>> ring = np.exp(-800 * t[:200]) * np.sin(2 * np.pi * 6000 * t[:200])
    >>> x = np.convolve((np.arange(25600) % 256 == 0) * 4.0, ring)[:25600]
    >>> b = select_band(x + rng.normal(size=25600), fs)
    >>> bool(b.low_hz <= 6000 <= b.high_hz)
    True
    """
    fs = check_fs(fs)
    a = as_signal(x, min_length=32, one_dimensional=True)
    nperseg = _check_nperseg(nperseg, a.size)
    check_positive(min_bandwidth_hz, name="min_bandwidth_hz", allow_zero=True)
    if min_bandwidth_hz > fs / 2:
        raise ValueError(
            f"min_bandwidth_hz must lie below fs/2 = {fs / 2:g} Hz, got {min_bandwidth_hz!r}"
        )
    rng = check_band(f_range, fs, name="f_range") if f_range is not None else (0.0, fs / 2)
    return _select_band_core(a, fs, nperseg, float(min_bandwidth_hz), rng)


@dataclass(frozen=True, slots=True)
class EnvelopeSpectrum:
    """Squared-envelope spectrum (amplitude, unit of x squared), 0..fmax.

    Attributes
    ----------
    freqs : ndarray, shape (m,)
        Frequencies, Hz (spacing fs/n of the original window).
    amplitude : ndarray, shape (m,)
        Hann-windowed magnitude of the squared envelope's spectrum, scaled so a sinusoidal
        modulation of the squared envelope with amplitude c reads c.
    band : (float, float)
        The band-pass used, Hz.
    """

    freqs: FloatArray
    amplitude: FloatArray
    band: tuple[float, float]


def _band_bins(spec: Spectrum, band: tuple[float, float]) -> tuple[int, int]:
    sl = spec.band_slice(band)
    lo = max(sl.start, 1)
    hi = min(sl.stop, spec.raw.shape[-1] - (1 if spec.n % 2 == 0 else 0))
    return lo, hi


def _ses_from_spectrum(spec: Spectrum, band: tuple[float, float], fmax: float) -> EnvelopeSpectrum:
    lo, hi = _band_bins(spec, band)
    nb = hi - lo
    kmax = int(np.floor(fmax / spec.df))
    if nb < 1:
        raise ValueError(f"band {band!r} holds no frequency bin at {spec.df:g} Hz spacing")
    m = scipy.fft.next_fast_len(nb + kmax + 1)
    zb = np.zeros(m, dtype=complex)
    zb[:nb] = spec.raw[lo:hi]
    # Analytic band signal at base band on an m-point grid: z = (2/n) * m * ifft(...).
    z = scipy.fft.ifft(zb, workers=1, overwrite_x=True)
    z *= 2.0 * m / spec.n
    e = z.real**2
    e += z.imag**2
    e -= e.mean()
    e *= _periodic_hann(m)
    amp = np.abs(scipy.fft.rfft(e, workers=1, overwrite_x=True)[: kmax + 1])
    amp *= 4.0 / m
    return EnvelopeSpectrum(np.arange(kmax + 1) * spec.df, amp, band)


def squared_envelope_spectrum(
    x: npt.ArrayLike,
    fs: float,
    *,
    band: tuple[float, float],
    fmax: float = 1000.0,
) -> EnvelopeSpectrum:
    """Spectrum of the squared envelope of ``x`` band-passed to ``band``.

    Parameters
    ----------
    x : array_like, shape (n,)
        Finite samples, n >= 16.
    fs : float
        Sample rate, Hz.
    band : (low, high)
        Band-pass, Hz, below fs/2 (from :func:`select_band` or a known resonance).
    fmax : float
        Highest envelope frequency returned, Hz (< fs/2).

    Returns
    -------
    EnvelopeSpectrum

    References
    ----------
    .. [1] R. B. Randall, J. Antoni, "Rolling element bearing diagnostics - a tutorial",
       Mech. Syst. Signal Process. 25 (2011) 485-520, section 3 (squared envelope).

    Examples
    --------
    >>> import numpy as np
    >>> fs = 10000.0
    >>> t = np.arange(10000) / fs
    >>> x = (1 + 0.5 * np.cos(2 * np.pi * 87 * t)) * np.sin(2 * np.pi * 3000 * t)
    >>> s = squared_envelope_spectrum(x, fs, band=(2500, 3500), fmax=200)
    >>> float(s.freqs[np.argmax(s.amplitude)])
    87.0
    """
    fs = check_fs(fs)
    b = check_band(band, fs)
    check_positive(fmax, name="fmax")
    if fmax >= fs / 2:
        raise ValueError(f"fmax must lie below fs/2 = {fs / 2:g} Hz, got {fmax!r}")
    a = as_signal(x, min_length=16, one_dimensional=True)
    return _ses_from_spectrum(_spectrum(a, fs), b, float(fmax))


def analytic_envelope(
    x: npt.ArrayLike, fs: float, *, band: tuple[float, float] | None = None
) -> FloatArray:
    """Envelope |x + j H(x)| of ``x``, optionally band-passed first (brick-wall, via the FFT).

    With ``band=None`` this equals ``numpy.abs(scipy.signal.hilbert(x))``.

    Parameters
    ----------
    x : array_like, shape (n,)
        Finite samples.
    fs : float
        Sample rate, Hz.
    band : (low, high), optional
        Band-pass, Hz.

    Returns
    -------
    ndarray, shape (n,)
        Envelope, unit of x.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(1000) / 1000.0
    >>> env = analytic_envelope(2.0 * np.cos(2 * np.pi * 50 * t), 1000.0)
    >>> bool(np.allclose(env, 2.0))
    True
    """
    fs = check_fs(fs)
    a = as_signal(x, min_length=4, one_dimensional=True)
    n = a.size
    spec = np.fft.fft(a)
    h = np.zeros(n)
    if band is None:
        h[0] = 1.0
        h[1 : (n + 1) // 2] = 2.0
        if n % 2 == 0:
            h[n // 2] = 1.0
    else:
        lo, hi = _band_bins(_spectrum(a, fs), check_band(band, fs))
        h[lo:hi] = 2.0
    return np.abs(np.fft.ifft(spec * h))


def _line_levels(
    env: EnvelopeSpectrum,
    lines_hz: FloatArray,
    tolerance: float,
    n_floor: int,
) -> FloatArray:
    """dB of the largest bin within +-tolerance of each line over the median of its neighbours."""
    amp = env.amplitude
    m = amp.size
    df = env.freqs[1] - env.freqs[0] if m > 1 else 1.0
    centre = lines_hz / df
    half = np.maximum(np.ceil(tolerance * centre), 1.0).astype(np.intp)
    kc = np.rint(centre).astype(np.intp)
    hmax = int(half.max()) if half.size else 1
    offs = np.arange(-hmax, hmax + 1)
    idx = kc[:, None] + offs
    inside = (np.abs(offs)[None, :] <= half[:, None]) & (idx >= 0) & (idx < m)
    peak = np.where(inside, amp[np.minimum(np.maximum(idx, 0), m - 1)], -np.inf).max(axis=1)
    # Floor: n_floor bins on each side, starting two bins beyond the search window.
    side = np.arange(n_floor)
    fidx = np.concatenate(
        [kc[:, None] - half[:, None] - 2 - side, kc[:, None] + half[:, None] + 2 + side], axis=1
    )
    fvalid = (fidx >= 1) & (fidx < m)
    # Median of the valid floor bins per line: invalid ones sort last as +inf.
    fvals = np.sort(np.where(fvalid, amp[np.minimum(np.maximum(fidx, 0), m - 1)], np.inf), axis=1)
    count = fvalid.sum(axis=1)
    rows = np.arange(kc.size)
    lo_i = np.maximum((count - 1) // 2, 0)
    hi_i = np.maximum(count // 2, 0)
    floor = 0.5 * (fvals[rows, lo_i] + fvals[rows, hi_i])
    with np.errstate(all="ignore"):
        out = 20.0 * np.log10(peak / floor)
    ok = (kc + half < m) & (kc - half >= 1) & (count >= n_floor) & (floor > 0)
    return np.where(ok & np.isfinite(out), out, np.nan)


def line_levels_db(
    env: EnvelopeSpectrum,
    *,
    lines_hz: npt.ArrayLike,
    tolerance: float = 0.015,
    n_floor: int = 20,
) -> FloatArray:
    """Level of envelope-spectrum lines above the local floor, dB.

    For each expected line (e.g. a defect frequency and its harmonics), the largest bin within
    +-``tolerance`` (relative; at least one bin) is compared with the median of ``n_floor`` bins
    on each side beyond the search window: 20 log10(peak / median). Pure noise reads a few dB
    (the maximum of a few bins over a median), a clear defect line 15 dB and more.

    Parameters
    ----------
    env : EnvelopeSpectrum
        From :func:`squared_envelope_spectrum`.
    lines_hz : array_like, shape (k,)
        Expected line frequencies, Hz.
    tolerance : float
        Relative search half-width allowing for slip (0.015 = +-1.5 %).
    n_floor : int
        Floor bins on each side.

    Returns
    -------
    ndarray, shape (k,)
        dB over the floor; NaN where the line or its floor falls outside the spectrum.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> fs = 10000.0
    >>> t = np.arange(10000) / fs
    >>> x = (1 + 0.5 * np.cos(2 * np.pi * 87 * t)) * rng.normal(size=t.size)
    >>> s = squared_envelope_spectrum(x, fs, band=(1000, 4000), fmax=400)
    >>> levels = line_levels_db(s, lines_hz=[87.0, 131.0])
    >>> bool(levels[0] > 15.0 > levels[1])
    True
    """
    f = np.atleast_1d(np.asarray(lines_hz, dtype=float))
    if f.ndim != 1 or not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ValueError(f"lines_hz must be positive, finite frequencies in Hz, got {lines_hz!r}")
    if not 0.0 <= tolerance < 0.5:
        raise ValueError(f"tolerance must be in [0, 0.5), got {tolerance!r}")
    if int(n_floor) != n_floor or n_floor < 3:
        raise ValueError(f"n_floor must be an integer >= 3, got {n_floor!r}")
    return _line_levels(env, f, float(tolerance), int(n_floor))

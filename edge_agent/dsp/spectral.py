"""Spectra of one window and the indicators read from them.

The extractor computes one real FFT per window (:func:`compute_spectrum`) and hands the resulting
:class:`Spectrum` to every spectral indicator through the private ``_..._from_spectrum`` cores;
the public ``x, fs`` functions are thin wrappers that validate and build the spectrum first.

The Hann-windowed spectrum is obtained from the rectangular one in the frequency domain: for the
periodic Hann window w[n] = 0.5 - 0.5 cos(2 pi n / N), X_w[k] = X[k]/2 - (X[k-1] + X[k+1])/4,
which saves a second FFT. Each output bin depends on three input bins only, so the cores that
read a few low bins (tones, shaft speed, peaks in the velocity band) compute just those bins;
the whole Hann spectrum is built on first access to :attr:`Spectrum.hann`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.fft
import scipy.signal

from edge_agent.dsp._validation import as_signal, check_band, check_fs

__all__ = [
    "Peaks",
    "Spectrum",
    "band_energies",
    "compute_spectrum",
    "dominant_peaks",
    "spectral_centroid",
    "spectral_entropy",
    "welch_psd",
]

FloatArray = npt.NDArray[np.floating[Any]]
ComplexArray = npt.NDArray[np.complexfloating[Any, Any]]


@dataclass(frozen=True, slots=True, eq=False)
class Spectrum:
    """One-sided DFT of a real window, rectangular and Hann-windowed.

    Attributes
    ----------
    fs : float
        Sample rate, Hz.
    n : int
        Number of samples in the window.
    raw : ndarray of complex, shape (..., n // 2 + 1)
        ``numpy.fft.rfft(x)`` (rectangular window): used for powers (Parseval holds exactly).
    hann : ndarray of complex, shape (..., n // 2 + 1)
        ``numpy.fft.rfft(x * w)`` with the periodic Hann window ``w``: used for peaks. Computed
        from ``raw`` on first access, read-only.
    """

    fs: float
    n: int
    raw: ComplexArray
    _hann: ComplexArray | None = field(default=None, init=False, repr=False)
    _power: FloatArray | None = field(default=None, init=False, repr=False)

    @property
    def hann(self) -> ComplexArray:
        """Hann-windowed spectrum, shape (..., n // 2 + 1), read-only."""
        h = self._hann
        if h is None:
            h = _hann_bins(self.raw, self.n, 0, self.raw.shape[-1])
            h.flags.writeable = False
            object.__setattr__(self, "_hann", h)
        return h

    def _hann_slice(self, start: int, stop: int) -> ComplexArray:
        """Bins ``start:stop`` of :attr:`hann` without building the rest (same values)."""
        if self._hann is not None:
            return self._hann[..., start:stop]
        return _hann_bins(self.raw, self.n, start, stop)

    @property
    def df(self) -> float:
        """Bin spacing, Hz."""
        return self.fs / self.n

    @property
    def freqs(self) -> FloatArray:
        """Bin frequencies, Hz, shape (n // 2 + 1,)."""
        return np.arange(self.raw.shape[-1]) * self.df

    def one_sided_power(self) -> FloatArray:
        """Mean-square contribution of each bin (unit of x squared); sums to mean(x**2)."""
        return self._mean_square().copy()

    def _mean_square(self) -> FloatArray:
        """:meth:`one_sided_power`, computed once per spectrum and shared (read-only)."""
        p = self._power
        if p is None:
            raw = self.raw
            p = raw.real**2
            p += raw.imag**2
            p *= 2.0 / self.n**2
            p[..., 0] *= 0.5
            if self.n % 2 == 0:
                p[..., -1] *= 0.5
            p.flags.writeable = False
            object.__setattr__(self, "_power", p)
        return p

    def band_slice(self, band: tuple[float, float]) -> slice:
        """Bins whose centre lies in ``low <= f <= high``."""
        lo = int(np.ceil(band[0] / self.df - 1e-9))
        hi = int(np.floor(band[1] / self.df + 1e-9))
        return slice(max(lo, 0), min(hi, self.raw.shape[-1] - 1) + 1)


def _hann_bins(raw: ComplexArray, n: int, start: int, stop: int) -> ComplexArray:
    """Bins ``start:stop`` of the Hann-windowed spectrum from the rectangular one."""
    m = raw.shape[-1]
    start, stop = max(start, 0), min(stop, m)
    if stop <= start:
        return np.empty((*raw.shape[:-1], 0), dtype=np.complex128)
    # ext[j] holds bin start - 1 + j, with the two bins beyond the ends mirrored.
    ext: ComplexArray = np.empty((*raw.shape[:-1], stop - start + 2), dtype=np.complex128)
    lo, hi = max(start - 1, 0), min(stop + 1, m)
    ext[..., lo - start + 1 : hi - start + 1] = raw[..., lo:hi]
    if start == 0:
        ext[..., 0] = np.conj(raw[..., 1]) if m > 1 else raw[..., 0]
    if stop == m:
        # Bin m (one past the last rfft bin) mirrors bin n - m.
        ext[..., -1] = np.conj(raw[..., n - m]) if 0 <= n - m < m else 0.0
    out: ComplexArray = 0.5 * ext[..., 1:-1] - 0.25 * (ext[..., :-2] + ext[..., 2:])
    return out


def _hann_from_raw(raw: ComplexArray, n: int) -> ComplexArray:
    return _hann_bins(raw, n, 0, raw.shape[-1])


def _spectrum(a: FloatArray, fs: float) -> Spectrum:
    # scipy.fft's pocketfft gives the same bits as numpy.fft with less call overhead.
    raw = scipy.fft.rfft(a, axis=-1, workers=1)
    return Spectrum(fs=fs, n=a.shape[-1], raw=raw)


def compute_spectrum(x: npt.ArrayLike, fs: float, *, axis: int = -1) -> Spectrum:
    """One real FFT of ``x`` along ``axis`` (moved last), rectangular and Hann-windowed.

    Parameters
    ----------
    x : array_like, shape (..., n)
        Finite samples, n >= 4.
    fs : float
        Sample rate, Hz.
    axis : int
        Time axis.

    Returns
    -------
    Spectrum

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(size=1024)
    >>> s = compute_spectrum(x, 1024.0)
    >>> bool(np.isclose(s.one_sided_power().sum(), np.mean(x**2)))
    True
    """
    fs = check_fs(fs)
    a = as_signal(x, min_length=4, axis=axis)
    return _spectrum(np.moveaxis(a, axis, -1), fs)


def welch_psd(
    x: npt.ArrayLike,
    fs: float,
    *,
    nperseg: int = 1024,
    noverlap: int | None = None,
    window: str = "hann",
    axis: int = -1,
) -> tuple[FloatArray, FloatArray]:
    """Welch power spectral density (unit of x squared per Hz), a validating wrapper.

    Parameters
    ----------
    x : array_like, shape (..., n)
        Finite samples; n >= nperseg.
    fs : float
        Sample rate, Hz.
    nperseg : int
        Segment length in samples (>= 8).
    noverlap : int, optional
        Overlap in samples; default nperseg // 2.
    window : str
        Window name understood by ``scipy.signal.get_window``.
    axis : int
        Time axis.

    Returns
    -------
    f : ndarray, shape (nperseg // 2 + 1,)
        Frequencies, Hz.
    psd : ndarray, shape (..., nperseg // 2 + 1)
        One-sided PSD; ``sum(psd) * (f[1] - f[0])`` approximates the variance.

    References
    ----------
    .. [1] P. D. Welch, "The use of fast Fourier transform for the estimation of power
       spectra", IEEE Trans. Audio Electroacoust. 15 (1967) 70-73.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> f, p = welch_psd(rng.normal(size=8192), 1000.0, nperseg=256)
    >>> f.shape, round(float(p.sum() * (f[1] - f[0])), 1)
    ((129,), 1.0)
    """
    fs = check_fs(fs)
    if int(nperseg) != nperseg or nperseg < 8:
        raise ValueError(f"nperseg must be an integer >= 8, got {nperseg!r}")
    a = as_signal(x, min_length=int(nperseg), axis=axis)
    if noverlap is not None and not 0 <= noverlap < nperseg:
        raise ValueError(f"noverlap must be in [0, nperseg) = [0, {nperseg}), got {noverlap!r}")
    try:
        scipy.signal.get_window(window, int(nperseg))
    except ValueError:
        raise ValueError(f"window must be a scipy.signal window name, got {window!r}") from None
    f, p = scipy.signal.welch(
        a, fs=fs, window=window, nperseg=int(nperseg), noverlap=noverlap, axis=axis
    )
    return f, np.moveaxis(p, axis, -1)


def _check_bands(bands: Sequence[tuple[float, float]], fs: float) -> list[tuple[float, float]]:
    if len(bands) == 0:
        raise ValueError("bands must hold at least one (low, high) pair, got none")
    return [check_band(b, fs, name=f"bands[{i}]") for i, b in enumerate(bands)]


def _band_energies_from_spectrum(
    spec: Spectrum, bands: Sequence[tuple[float, float]]
) -> FloatArray:
    p = spec._mean_square()
    return np.stack([p[..., spec.band_slice(b)].sum(axis=-1) for b in bands], axis=-1)


def band_energies(
    x: npt.ArrayLike,
    fs: float,
    *,
    bands: Sequence[tuple[float, float]],
    axis: int = -1,
) -> FloatArray:
    """Mean-square content of ``x`` in each frequency band (unit of x squared).

    Computed from one periodogram (rectangular window), so that bands tiling 0..fs/2 sum to
    ``mean(x**2)`` exactly (Parseval). A bin belongs to a band when its centre lies in
    ``low <= f <= high``; touching bands must not share an edge bin if they are to add up.

    Parameters
    ----------
    x : array_like, shape (..., n)
    fs : float
        Sample rate, Hz.
    bands : sequence of (low, high)
        Band edges, Hz, each 0 <= low < high <= fs/2.
    axis : int
        Time axis.

    Returns
    -------
    ndarray, shape (..., len(bands))

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(1000) / 1000.0
    >>> x = np.sin(2 * np.pi * 50 * t) + 0.5 * np.sin(2 * np.pi * 200 * t)
    >>> band_energies(x, 1000.0, bands=[(40, 60), (190, 210)]).round(3)
    array([0.5  , 0.125])
    """
    fs = check_fs(fs)
    checked = _check_bands(bands, fs)
    spec = compute_spectrum(x, fs, axis=axis)
    return _band_energies_from_spectrum(spec, checked)


def _centroid_from_spectrum(spec: Spectrum, band: tuple[float, float] | None) -> FloatArray:
    sl = spec.band_slice(band) if band is not None else slice(None)
    p = spec._mean_square()[..., sl]
    f = spec.freqs[sl]
    total = p.sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        weighted = np.einsum("...i,i->...", p, f)
        return np.where(total > 0, weighted / np.where(total > 0, total, 1.0), np.nan)


def spectral_centroid(
    x: npt.ArrayLike, fs: float, *, band: tuple[float, float] | None = None, axis: int = -1
) -> float | FloatArray:
    """Power-weighted mean frequency, Hz, over ``band`` (default: 0..fs/2).

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(1000) / 1000.0
    >>> round(spectral_centroid(np.sin(2 * np.pi * 125 * t), 1000.0), 6)
    125.0
    """
    fs = check_fs(fs)
    b = check_band(band, fs) if band is not None else None
    out = _centroid_from_spectrum(compute_spectrum(x, fs, axis=axis), b)
    return float(out) if out.ndim == 0 else out


def _entropy_from_spectrum(spec: Spectrum, band: tuple[float, float] | None) -> FloatArray:
    sl = spec.band_slice(band) if band is not None else slice(None)
    p = spec._mean_square()[..., sl]
    k = p.shape[-1]
    total = p.sum(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        q = p / np.where(total > 0, total, 1.0)
        h = -np.sum(np.where(q > 0, q * np.log(np.where(q > 0, q, 1.0)), 0.0), axis=-1)
        if k < 2:
            return np.full(h.shape, np.nan)
        return np.where(total[..., 0] > 0, h / np.log(k), np.nan)


def spectral_entropy(
    x: npt.ArrayLike, fs: float, *, band: tuple[float, float] | None = None, axis: int = -1
) -> float | FloatArray:
    """Shannon entropy of the normalised power spectrum over ``band``, divided by log(bins).

    0 for a pure tone on a bin, 1 for a perfectly flat spectrum (dimensionless).

    References
    ----------
    .. [1] C. E. Shannon, "A mathematical theory of communication", Bell Syst. Tech. J. 27
       (1948) 379-423.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> round(spectral_entropy(rng.normal(size=4096), 1000.0), 2)
    0.95
    """
    fs = check_fs(fs)
    b = check_band(band, fs) if band is not None else None
    out = _entropy_from_spectrum(compute_spectrum(x, fs, axis=axis), b)
    return float(out) if out.ndim == 0 else out


@dataclass(frozen=True, slots=True)
class Peaks:
    """Spectral peaks, largest first.

    Attributes
    ----------
    frequencies_hz : ndarray, shape (k,)
        Interpolated peak frequencies, Hz.
    amplitudes : ndarray, shape (k,)
        Interpolated peak amplitudes (unit of x, zero-to-peak of a sinusoid).
    """

    frequencies_hz: FloatArray
    amplitudes: FloatArray


def _interpolate_bins(
    mag: FloatArray, k: npt.NDArray[np.intp], df: float, n: int, offset: int = 0
) -> Peaks:
    """Three-bin interpolation of Hann-spectrum peaks at bins ``k`` (1-D magnitudes).

    ``mag[j]`` holds bin ``offset + j`` (``offset`` > 0 when only part of the spectrum is given).

    For one tone at ``k + delta`` the periodic Hann window gives magnitudes a(k+j) proportional
    to 1/((j - delta)((j - delta)² - 1)) up to a common factor, from which
    delta = 2 (a+ - a-) / (a- + 2 a0 + a+) holds exactly; the amplitude follows from the
    window's response sinc(delta) / (1 - delta²).
    """
    j = k - offset
    am, a0, ap = mag[j - 1], mag[j], mag[j + 1]
    den = am + 2.0 * a0 + ap
    with np.errstate(invalid="ignore", divide="ignore"):
        delta = np.where(den > 0, 2.0 * (ap - am) / np.where(den > 0, den, 1.0), 0.0)
    delta = np.clip(delta, -0.5, 0.5)
    response = np.sinc(delta) / (1.0 - delta * delta)
    # Coherent gain of the periodic Hann window is 1/2: amplitude = 2 |X_w| / (n / 2).
    return Peaks((k + delta) * df, a0 / response * 4.0 / n)


def _dominant_peaks_from_spectrum(
    spec: Spectrum, n_peaks: int, band: tuple[float, float] | None
) -> Peaks:
    m = spec.raw.shape[-1]
    sl = spec.band_slice(band) if band is not None else slice(0, m)
    start = max(sl.start or 0, 1)
    stop = min(sl.stop if sl.stop is not None else m, m - 1)
    if stop <= start:
        empty = np.empty(0)
        return Peaks(empty, empty)
    # Magnitudes of bins start - 1 .. stop only: mag[j] is bin start - 1 + j.
    off = start - 1
    mag = np.abs(spec._hann_slice(off, stop + 1))
    mid = mag[1:-1]
    is_peak = (mid > mag[:-2]) & (mid >= mag[2:])
    j = np.flatnonzero(is_peak) + 1
    if j.size > n_peaks:
        j = j[np.argpartition(mag[j], -n_peaks)[-n_peaks:]]
    j = j[np.argsort(mag[j])[::-1]]
    return _interpolate_bins(mag, j + off, spec.df, spec.n, off)


def dominant_peaks(
    x: npt.ArrayLike,
    fs: float,
    *,
    n_peaks: int = 5,
    band: tuple[float, float] | None = None,
) -> Peaks:
    """The ``n_peaks`` largest local maxima of the Hann-windowed amplitude spectrum.

    Frequencies and amplitudes are refined by three-bin interpolation on the Hann-windowed
    magnitudes (exact for an isolated tone), so that a frequency shift well below the bin width
    fs/n is measured.

    Parameters
    ----------
    x : array_like, shape (n,)
        Finite samples, n >= 4.
    fs : float
        Sample rate, Hz.
    n_peaks : int
        Number of peaks to return (fewer if the spectrum has fewer local maxima).
    band : (low, high), optional
        Search only peaks with centre bin in this band, Hz.

    Returns
    -------
    Peaks

    References
    ----------
    .. [1] T. Grandke, "Interpolation algorithms for discrete Fourier transforms of weighted
       signals", IEEE Trans. Instrum. Meas. 32 (1983) 350-355 (from memory).

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(1000) / 1000.0
    >>> p = dominant_peaks(np.sin(2 * np.pi * 100.3 * t), 1000.0, n_peaks=1)
    >>> round(float(p.frequencies_hz[0]), 1), round(float(p.amplitudes[0]), 1)
    (100.3, 1.0)
    """
    fs = check_fs(fs)
    if int(n_peaks) != n_peaks or n_peaks < 1:
        raise ValueError(f"n_peaks must be an integer >= 1, got {n_peaks!r}")
    b = check_band(band, fs) if band is not None else None
    a = as_signal(x, min_length=4, one_dimensional=True)
    return _dominant_peaks_from_spectrum(_spectrum(a, fs), int(n_peaks), b)


def _tone_rms_from_spectrum(
    spec: Spectrum, freqs_hz: npt.ArrayLike, *, half_width_bins: int = 2
) -> FloatArray:
    """R.m.s. amplitude (unit of x) of tones at ``freqs_hz`` from the Hann spectrum (1-D).

    Sums the power of the bins within ``half_width_bins`` of each frequency: the Hann main lobe
    spans +-2 bins, so the estimate does not scallop with the tone's position between bins.
    NaN for a frequency outside 0..fs/2.
    """
    f = np.atleast_1d(np.asarray(freqs_hz, dtype=float))
    m = spec.raw.shape[-1]
    k0 = np.rint(f / spec.df)
    valid = np.isfinite(k0) & (k0 >= 0) & (k0 <= m - 1)
    k0i = np.where(valid, k0, 0).astype(np.intp)
    idx = k0i[:, None] + np.arange(-half_width_bins, half_width_bins + 1)
    idx = np.minimum(np.maximum(idx, 0), m - 1)
    # Clipped duplicates at the edges would double-count; keep each bin once per tone.
    dup = np.zeros(idx.shape, dtype=bool)
    dup[:, 1:] = idx[:, 1:] == idx[:, :-1]
    lo = int(idx.min()) if idx.size else 0
    h = spec._hann_slice(lo, int(idx.max()) + 1 if idx.size else 0)[idx - lo]
    pw = h.real**2 + h.imag**2
    total = np.where(dup, 0.0, pw).sum(axis=1)
    # Periodic Hann: sum(w**2) = 3n/8; r.m.s. = sqrt(2 sum|X_w|² / (n sum w²)).
    out = np.sqrt(total * (16.0 / 3.0)) / spec.n
    return np.where(valid, out, np.nan)

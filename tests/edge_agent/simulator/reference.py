"""Independent reference computations the simulator tests check against.

Written here from textbook definitions and scipy, deliberately not using the project's DSP code.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt
from scipy import signal

STANDARD_GRAVITY = 9.80665  # m/s^2, ISO 80000-3 (from memory)


def velocity_rms_mm_s(
    accel_g: npt.ArrayLike, fs: float, *, band: tuple[float, float] = (10.0, 1000.0)
) -> float:
    """Velocity RMS (mm/s) in ``band`` by integrating the acceleration spectrum (rFFT).

    Each spectral line is divided by ``j 2 pi f`` (v = a / (2 pi f), common practice) and lines
    outside the band are zeroed, as ISO 10816-3 asks for r.m.s. velocity over 10-1000 Hz.
    """
    a = np.asarray(accel_g, dtype=float) * STANDARD_GRAVITY
    spectrum = np.fft.rfft(a - a.mean())
    f = np.fft.rfftfreq(a.size, 1.0 / fs)
    keep = (f >= band[0]) & (f <= band[1])
    v = np.zeros_like(spectrum)
    v[keep] = spectrum[keep] / (2j * np.pi * f[keep])
    return float(np.sqrt(np.mean(np.fft.irfft(v, n=a.size) ** 2)) * 1e3)


def squared_envelope_spectrum(
    x: npt.ArrayLike, fs: float, *, band: tuple[float, float] = (1500.0, 7000.0)
) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]]:
    """Squared-envelope spectrum: band-pass (Butterworth, zero phase), analytic-signal magnitude
    squared, then the amplitude spectrum of the mean-removed result (scipy reference
    implementation: ``butter``/``sosfiltfilt`` + ``hilbert``)."""
    x = np.asarray(x, dtype=float)
    sos = signal.butter(4, band, btype="bandpass", fs=fs, output="sos")
    env = np.abs(signal.hilbert(signal.sosfiltfilt(sos, x))) ** 2
    spectrum = np.abs(np.fft.rfft(env - env.mean())) / x.size
    return np.fft.rfftfreq(x.size, 1.0 / fs).astype(float), spectrum


def line_prominence(
    f: npt.NDArray[np.float64],
    spectrum: npt.NDArray[np.float64],
    f0: float,
    *,
    tolerance_hz: float = 1.5,
    neighbourhood_hz: float = 15.0,
) -> float:
    """Peak within ``f0 +- tolerance_hz`` divided by the median of the neighbouring bins."""
    d = np.abs(f - f0)
    peak = spectrum[d <= tolerance_hz].max()
    ring = (d > 2.0 * tolerance_hz) & (d < neighbourhood_hz)
    return float(peak / np.median(spectrum[ring]))


def line_amplitude(x: npt.ArrayLike, fs: float, f0: float) -> float:
    """Amplitude of the sinusoid at ``f0`` by least squares on sin/cos at that exact frequency."""
    x = np.asarray(x, dtype=float)
    t = np.arange(x.size) / fs
    basis = np.column_stack(
        [np.sin(2 * np.pi * f0 * t), np.cos(2 * np.pi * f0 * t), np.ones_like(t)]
    )
    coef, *_ = np.linalg.lstsq(basis, x, rcond=None)
    return float(np.hypot(coef[0], coef[1]))


def band_power(x: npt.ArrayLike, fs: float, band: tuple[float, float]) -> float:
    """Power in ``band`` from ``scipy.signal.welch`` (scipy reference implementation)."""
    f, pxx = signal.welch(np.asarray(x, dtype=float), fs=fs, nperseg=2048)
    keep = (f >= band[0]) & (f <= band[1])
    return float(np.trapezoid(pxx[keep], f[keep]))

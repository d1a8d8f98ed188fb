"""Process-side indicators: pressure level, ripple and pulsation; a cavitation indicator.

Cavitation. Collapsing vapour bubbles excite broadband vibration well above the pump's
rotational and vane-pass lines. :func:`high_band_rms` reports the r.m.s. acceleration (g) in a
high band (default 5-11 kHz) as an **absolute** level: the service compares it with the asset's
own baseline under the same operating condition, and a relative measure (band over total) would
fall when cavitation also raises the low-frequency vibration. ``relative=True`` gives the
fraction of the window's mean square in the band instead.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import numpy.typing as npt

from edge_agent.dsp._validation import as_signal, check_band, check_fs, check_positive
from edge_agent.dsp.spectral import Spectrum, _spectrum, _tone_rms_from_spectrum

__all__ = [
    "high_band_rms",
    "pressure_mean",
    "pressure_ripple",
    "pulsation_amplitude",
]

FloatArray = npt.NDArray[np.floating[Any]]


def pressure_mean(x: npt.ArrayLike) -> float:
    """Mean pressure over the window, in the unit of ``x`` (e.g. kPa).

    Examples
    --------
    >>> pressure_mean([400.0, 402.0, 398.0, 400.0])
    400.0
    """
    return float(np.mean(as_signal(x, min_length=1, one_dimensional=True)))


def pressure_ripple(x: npt.ArrayLike) -> float:
    """R.m.s. of the pressure's fluctuating part, x - mean(x), in the unit of ``x``.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(1000) / 1000.0
    >>> round(pressure_ripple(400.0 + 3.0 * np.sin(2 * np.pi * 150 * t)), 4)
    2.1213
    """
    a = as_signal(x, min_length=2, one_dimensional=True)
    return float(np.std(a))


def pulsation_amplitude(x: npt.ArrayLike, fs: float, *, frequency_hz: float) -> float:
    """R.m.s. amplitude of the pressure line at ``frequency_hz`` (e.g. vane pass), unit of x.

    Read from the Hann-windowed spectrum by summing the power of the main lobe (+-2 bins), which
    does not depend on where the line falls between bins.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(1000) / 1000.0
    >>> x = 400.0 + 3.0 * np.sin(2 * np.pi * 148.3 * t)
    >>> round(pulsation_amplitude(x, 1000.0, frequency_hz=148.3), 2)
    2.12
    """
    fs = check_fs(fs)
    f = check_positive(frequency_hz, name="frequency_hz")
    if f >= fs / 2:
        raise ValueError(f"frequency_hz must lie below fs/2 = {fs / 2:g} Hz, got {frequency_hz!r}")
    a = as_signal(x, min_length=16, one_dimensional=True)
    return float(_tone_rms_from_spectrum(_spectrum(a - a.mean(), fs), np.array([f]))[0])


def _high_band_from_spectrum(
    spec: Spectrum, band: tuple[float, float], relative: bool
) -> FloatArray:
    p = spec._mean_square()
    inband = p[..., spec.band_slice(band)].sum(axis=-1)
    if not relative:
        return np.sqrt(inband)
    total = p[..., 1:].sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total > 0, inband / np.where(total > 0, total, 1.0), np.nan)


def high_band_rms(
    x: npt.ArrayLike,
    fs: float,
    *,
    band: tuple[float, float] = (5000.0, 11000.0),
    relative: bool = False,
    axis: int = -1,
) -> float | FloatArray:
    """Broadband level in a high band, a cavitation-sensitive indicator.

    Parameters
    ----------
    x : array_like, shape (..., n)
        Acceleration (g), finite.
    fs : float
        Sample rate, Hz; the band must lie below fs/2.
    band : (low, high)
        Band, Hz.
    relative : bool
        False: r.m.s. in the band (unit of x). True: band mean square over the mean square of
        everything above DC (dimensionless, 0..1).
    axis : int
        Time axis.

    Returns
    -------
    float or ndarray

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(size=25600)  # white: the 5-11 kHz band holds 6/12.8 of the power
    >>> round(high_band_rms(x, 25600.0, relative=True), 2)
    0.46
    """
    fs = check_fs(fs)
    b = check_band(band, fs)
    a = as_signal(x, min_length=4, axis=axis)
    out = _high_band_from_spectrum(_spectrum(np.moveaxis(a, axis, -1), fs), b, relative)
    return float(out) if out.ndim == 0 else out

"""Vibration severity: r.m.s. velocity from acceleration, and the ISO 10816-3 zones."""

from __future__ import annotations

import functools
from typing import Any, Literal

import numpy as np
import numpy.typing as npt

from edge_agent.dsp._validation import as_signal, check_band, check_fs
from edge_agent.dsp.spectral import Spectrum, _spectrum

__all__ = [
    "STANDARD_GRAVITY",
    "ZONE_NUMBER",
    "iso_10816_zone",
    "velocity_rms",
    "zone_boundaries",
]

FloatArray = npt.NDArray[np.floating[Any]]

STANDARD_GRAVITY = 9.80665
"""Standard acceleration of gravity, m/s² (ISO 80000-3; CGPM 1901)."""

ZONE_NUMBER: dict[str, int] = {"A": 1, "B": 2, "C": 3, "D": 4}
"""Zone letter to the number the indicator message carries."""

# ISO 10816-3:2009 Annex A (secondary transcription): r.m.s. velocity in mm/s, 10-1000 Hz,
# zone boundaries A/B, B/C, C/D by machine group and foundation.
_ISO_10816_3: dict[tuple[int, str], tuple[float, float, float]] = {
    (1, "rigid"): (2.3, 4.5, 7.1),
    (1, "flexible"): (3.5, 7.1, 11.0),
    (2, "rigid"): (1.4, 2.8, 4.5),
    (2, "flexible"): (2.3, 4.5, 7.1),
}


@functools.lru_cache(maxsize=16)
def _velocity_weights(n: int, fs: float, start: int, stop: int) -> FloatArray:
    """Squared g-to-mm/s integration weight of bins ``start:stop`` (start >= 1), read-only."""
    f = np.arange(start, stop) * (fs / n)
    # Velocity amplitude = acceleration amplitude / (2 pi f); g -> m/s² -> mm/s.
    w: FloatArray = (STANDARD_GRAVITY * 1000.0 / (2.0 * np.pi * f)) ** 2
    w.flags.writeable = False
    return w


def _velocity_rms_from_spectrum(spec: Spectrum, band: tuple[float, float]) -> FloatArray:
    sl = spec.band_slice(band)
    start = max(sl.start, 1)  # bins with f > 0
    p = spec._mean_square()[..., start : sl.stop]
    w = _velocity_weights(spec.n, spec.fs, start, max(sl.stop, start))
    return np.sqrt(np.einsum("...i,i->...", p, w))


def velocity_rms(
    x: npt.ArrayLike,
    fs: float,
    *,
    band: tuple[float, float] = (10.0, 1000.0),
    axis: int = -1,
) -> float | FloatArray:
    """R.m.s. vibration velocity in mm/s over ``band`` from acceleration in g.

    The acceleration is integrated in the frequency domain (one real FFT, each bin divided by
    2 pi f) and the mean square summed over the bins with centre in ``band`` (Parseval).

    Parameters
    ----------
    x : array_like, shape (..., n)
        Acceleration, g (standard gravity 9.80665 m/s²), finite; n >= 4.
    fs : float
        Sample rate, Hz.
    band : (low, high)
        Frequency band, Hz; ISO 10816-3 uses 10-1000 Hz above 600 r/min.
    axis : int
        Time axis.

    Returns
    -------
    float or ndarray
        R.m.s. velocity, mm/s.

    References
    ----------
    .. [1] ISO 10816-3:2009, Mechanical vibration - Evaluation of machine vibration by
       measurements on non-rotating parts - Part 3, clause 4 (measurement band).

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(25600) / 25600.0
    >>> round(velocity_rms(np.sin(2 * np.pi * 100.0 * t), 25600.0), 2)  # 1 g peak at 100 Hz
    11.04
    """
    fs = check_fs(fs)
    b = check_band(band, fs)
    a = as_signal(x, min_length=4, axis=axis)
    out = _velocity_rms_from_spectrum(_spectrum(np.moveaxis(a, axis, -1), fs), b)
    return float(out) if out.ndim == 0 else out


def zone_boundaries(
    *, machine_group: Literal[1, 2] = 2, foundation: Literal["rigid", "flexible"] = "rigid"
) -> tuple[float, float, float]:
    """Zone boundaries A/B, B/C, C/D in mm/s r.m.s. (ISO 10816-3:2009 Annex A).

    Examples
    --------
    >>> zone_boundaries(machine_group=2, foundation="rigid")
    (1.4, 2.8, 4.5)
    """
    key = (machine_group, foundation)
    if key not in _ISO_10816_3:
        raise ValueError(
            "machine_group and foundation must be one of "
            f"{sorted(_ISO_10816_3)}, got ({machine_group!r}, {foundation!r})"
        )
    return _ISO_10816_3[key]


def iso_10816_zone(
    velocity_mm_s: float,
    *,
    machine_group: Literal[1, 2] = 2,
    foundation: Literal["rigid", "flexible"] = "rigid",
) -> str:
    """Evaluation zone "A".."D" for an r.m.s. velocity (mm/s, 10-1000 Hz).

    A value equal to a boundary belongs to the lower zone ("up to 2.3 mm/s is zone A";
    common practice, no source).

    Parameters
    ----------
    velocity_mm_s : float
        R.m.s. velocity, mm/s, >= 0.
    machine_group : {1, 2}
        1: large machines above 300 kW; 2: medium machines 15-300 kW.
    foundation : {"rigid", "flexible"}

    Returns
    -------
    str
        "A" (newly commissioned), "B" (unrestricted long-term operation), "C" (restricted),
        "D" (damage may occur).

    References
    ----------
    .. [1] ISO 10816-3:2009 Annex A (secondary transcription).

    Examples
    --------
    >>> iso_10816_zone(3.0, machine_group=2, foundation="rigid")
    'C'
    """
    ab, bc, cd = zone_boundaries(machine_group=machine_group, foundation=foundation)
    v = float(velocity_mm_s)
    if not np.isfinite(v) or v < 0:
        raise ValueError(f"velocity_mm_s must be finite and >= 0, got {velocity_mm_s!r}")
    if v <= ab:
        return "A"
    if v <= bc:
        return "B"
    if v <= cd:
        return "C"
    return "D"

"""Pressure indicators and the cavitation-sensitive high-band level."""

import numpy as np
import pytest

from edge_agent.dsp.process import (
    high_band_rms,
    pressure_mean,
    pressure_ripple,
    pulsation_amplitude,
)

T = np.arange(1000) / 1000.0


def test_pressure_mean_ripple_pulsation():
    # RMS of a sine A/sqrt(2): common practice, no source.
    p = 450.0 + 3.0 * np.sin(2 * np.pi * 177.3 * T) + 1.0 * np.sin(2 * np.pi * 60.0 * T)
    assert pressure_mean(p) == pytest.approx(450.0, abs=0.01)
    assert pressure_ripple(p) == pytest.approx(np.sqrt(4.5 + 0.5), rel=1e-3)
    assert pulsation_amplitude(p, 1000.0, frequency_hz=177.3) == pytest.approx(
        3.0 / np.sqrt(2), rel=0.01
    )


def test_high_band_rms_counts_only_its_band():
    # Parseval: r.m.s. of the in-band tone only.
    fs = 25_600.0
    t = np.arange(25_600) / fs
    x = np.sin(2 * np.pi * 100 * t) + 0.2 * np.sin(2 * np.pi * 7000 * t)
    assert high_band_rms(x, fs) == pytest.approx(0.2 / np.sqrt(2), rel=1e-6)
    frac = high_band_rms(x, fs, relative=True)
    assert frac == pytest.approx(0.02 / (0.5 + 0.02), rel=1e-6)


def test_bad_input():
    with pytest.raises(ValueError, match="band must lie below fs/2 = 10240 Hz"):
        high_band_rms(np.ones(1000), 20_480.0)
    with pytest.raises(ValueError, match="frequency_hz must lie below fs/2"):
        pulsation_amplitude(np.ones(1000), 1000.0, frequency_hz=600.0)
    with pytest.raises(ValueError, match="x must not be empty"):
        pressure_mean([])
    with pytest.raises(ValueError, match="x contains non-finite"):
        pressure_ripple([1.0, np.nan])

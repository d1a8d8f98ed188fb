"""Shaft speed from tacho and spectrum; order amplitudes."""

import numpy as np
import pytest

from edge_agent.dsp.speed import order_amplitudes, speed_from_spectrum, speed_from_tacho

FS = 25_600.0
N = 25_600
T = np.arange(N) / FS


def test_tacho_speed_to_a_fraction_of_a_sample():
    # Once-per-revolution pulses of 0.5 ms width at 24.713 Hz, with noise.
    rng = np.random.default_rng(0)
    x = 5.0 * (np.mod(T * 24.713, 1.0) < 0.0125) + 0.05 * rng.normal(size=N)
    assert speed_from_tacho(x, FS) == pytest.approx(24.713, rel=1e-4)
    x2 = 5.0 * (np.mod(T * 2 * 24.713, 1.0) < 0.025)
    assert speed_from_tacho(x2, FS, pulses_per_rev=2) == pytest.approx(24.713, rel=1e-4)


def test_tacho_without_pulses_gives_none():
    assert speed_from_tacho(np.zeros(N), FS) is None
    assert speed_from_tacho(np.random.default_rng(1).normal(size=N) * 1e-3 + 1.0, FS) is None
    single = np.zeros(N)
    single[100:110] = 5.0
    assert speed_from_tacho(single, FS) is None


def test_speed_from_spectrum_with_stronger_2x():
    # Misalignment-like: 2x twice the 1x; the harmonic sum still finds the shaft rate.
    rng = np.random.default_rng(2)
    fr = 27.43
    x = 0.05 * np.sin(2 * np.pi * fr * T) + 0.1 * np.sin(2 * np.pi * 2 * fr * T + 1.0)
    x += 0.03 * np.sin(2 * np.pi * 3 * fr * T) + 0.02 * rng.normal(size=N)
    est = speed_from_spectrum(x, FS, search_hz=(18.0, 31.0))
    assert est == pytest.approx(fr, abs=0.02)


def test_speed_from_spectrum_gives_none_on_noise():
    x = np.random.default_rng(3).normal(size=N)
    assert speed_from_spectrum(x, FS, search_hz=(18.0, 31.0), min_prominence=3.0) is None


def test_order_amplitudes_do_not_scallop():
    # RMS of a sine A/sqrt(2) wherever the line falls between bins (common practice, no source).
    fr = 29.37
    x = 1.0 * np.sin(2 * np.pi * fr * T) + 0.5 * np.sin(2 * np.pi * 2 * fr * T)
    x += 0.2 * np.sin(2 * np.pi * 6 * fr * T)
    a = order_amplitudes(x, FS, shaft_hz=fr, orders=(1, 2, 3, 6))
    np.testing.assert_allclose(a[[0, 1, 3]], np.array([1.0, 0.5, 0.2]) / np.sqrt(2), rtol=0.01)
    assert a[2] < 0.01


def test_order_velocity():
    # 1 g peak at 100 Hz -> 11.04 mm/s RMS (REFERENCES.md, computed).
    x = np.sin(2 * np.pi * 100.0 * T)
    v = order_amplitudes(x, FS, shaft_hz=25.0, orders=(4,), velocity=True)
    assert v[0] == pytest.approx(11.04, abs=0.02)


def test_bad_input():
    with pytest.raises(ValueError, match="search_hz must lie below fs/2"):
        speed_from_spectrum(np.ones(1000), 100.0, search_hz=(10.0, 60.0))
    with pytest.raises(ValueError, match="pulses must not be empty"):
        speed_from_tacho([], FS)
    with pytest.raises(ValueError, match="orders x shaft_hz must lie below fs/2"):
        order_amplitudes(np.ones(1000), 1000.0, shaft_hz=100.0, orders=(1, 6))
    with pytest.raises(ValueError, match="shaft_hz"):
        order_amplitudes(np.ones(1000), 1000.0, shaft_hz=-1.0)
    with pytest.raises(ValueError, match="x contains non-finite"):
        speed_from_spectrum(np.full(100, np.nan), 1000.0, search_hz=(10.0, 60.0))

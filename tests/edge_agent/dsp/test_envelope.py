"""Envelope analysis: scipy.signal.hilbert reference, SK band selection on a known resonance."""

import numpy as np
import pytest
import scipy.signal

from edge_agent.dsp.envelope import (
    analytic_envelope,
    line_levels_db,
    select_band,
    spectral_kurtosis,
    squared_envelope_spectrum,
)

FS = 25_600.0
N = 25_600
T = np.arange(N) / FS


def _impacts(resonance_hz: float, rate_hz: float, seed: int, snr: float = 1.0) -> np.ndarray:
    """White noise plus a periodic impulse train ringing a resonance (damping ratio 3 %)."""
    rng = np.random.default_rng(seed)
    tt = T[:400]
    ring = np.exp(-2 * np.pi * resonance_hz * 0.03 * tt) * np.sin(2 * np.pi * resonance_hz * tt)
    period = round(FS / rate_hz)
    train = np.zeros(N)
    train[::period] = 1.0
    x = np.convolve(train, ring)[:N]
    x *= snr / x.std()
    return x + rng.normal(size=N)


def test_envelope_equals_scipy_hilbert():
    # Reference: numpy.abs(scipy.signal.hilbert(x)).
    rng = np.random.default_rng(0)
    x = rng.normal(size=5000)
    np.testing.assert_allclose(
        analytic_envelope(x, 5000.0), np.abs(scipy.signal.hilbert(x)), atol=1e-10
    )
    # With a band: the same brick-wall band-pass, then scipy's Hilbert transform.
    band = (800.0, 1700.0)
    spec = np.fft.rfft(x)
    f = np.fft.rfftfreq(x.size, 1 / 5000.0)
    x_bp = np.fft.irfft(np.where((f >= band[0]) & (f <= band[1]), spec, 0.0), n=x.size)
    np.testing.assert_allclose(
        analytic_envelope(x, 5000.0, band=band), np.abs(scipy.signal.hilbert(x_bp)), atol=1e-10
    )


def test_squared_envelope_spectrum_matches_full_rate_reference():
    # Computed on a short grid; compare with |hilbert(band-passed x)|² at full rate.
    x = _impacts(6000.0, 107.0, seed=1)
    band = (4000.0, 8000.0)
    ses = squared_envelope_spectrum(x, FS, band=band, fmax=1000.0)
    env2 = analytic_envelope(x, FS, band=band) ** 2
    env2 -= env2.mean()
    w = scipy.signal.get_window("hann", N)
    ref = np.abs(np.fft.rfft(env2 * w))[: ses.freqs.size] * 4.0 / N
    np.testing.assert_allclose(ses.amplitude, ref, rtol=1e-6, atol=1e-9 * ref.max())


def test_spectral_kurtosis_gaussian_and_impulsive():
    # SK of stationary Gaussian noise is 0 (Antoni 2006); an impulsive band reads high.
    f, sk = spectral_kurtosis(np.random.default_rng(2).normal(size=4 * N), FS)
    assert np.abs(np.median(sk[1:-1])) < 0.1
    f, sk = spectral_kurtosis(_impacts(7000.0, 90.0, seed=3, snr=0.7), FS)
    assert f[np.argmax(sk)] == pytest.approx(7000.0, abs=800.0)


@pytest.mark.parametrize(("resonance", "seed"), [(3000.0, 4), (6500.0, 5), (9800.0, 6)])
def test_band_selection_finds_known_resonance(resonance, seed):
    # Check from REFERENCES.md (Antoni 2006, 2007): white noise plus a periodic impulse train in
    # a known resonance band; the selected band contains that resonance.
    x = _impacts(resonance, 87.0, seed=seed, snr=0.6)
    b = select_band(x, FS, min_bandwidth_hz=800.0)
    assert b.low_hz <= resonance <= b.high_hz
    assert b.high_hz - b.low_hz <= 6400.0
    assert b.excess_kurtosis > 0.5


def test_band_selection_on_gaussian_noise_reports_little_excess():
    b = select_band(np.random.default_rng(7).normal(size=N), FS, min_bandwidth_hz=800.0)
    assert abs(b.excess_kurtosis) < 0.3


def test_line_levels_find_the_defect_line_and_not_others():
    x = _impacts(6000.0, 107.0, seed=8, snr=0.5)
    b = select_band(x, FS, min_bandwidth_hz=800.0)
    ses = squared_envelope_spectrum(x, FS, band=(b.low_hz, b.high_hz), fmax=1000.0)
    lv = line_levels_db(ses, lines_hz=[107.0, 214.0, 163.0, 71.0])
    assert lv[0] > 15 and lv[1] > 10
    assert lv[2] < 10 and lv[3] < 10


def test_bad_input():
    x = np.ones(4096)
    with pytest.raises(ValueError, match="band must lie below fs/2 = 2048 Hz"):
        squared_envelope_spectrum(x, 4096.0, band=(1000.0, 3000.0))
    with pytest.raises(ValueError, match="fmax must lie below fs/2"):
        squared_envelope_spectrum(x, 4096.0, band=(100.0, 1000.0), fmax=3000.0)
    with pytest.raises(ValueError, match="nperseg must be an even integer"):
        select_band(x, 4096.0, nperseg=63)
    with pytest.raises(ValueError, match="nperseg must be at most a quarter"):
        spectral_kurtosis(np.ones(100), 4096.0, nperseg=64)
    with pytest.raises(ValueError, match="f_range must lie below fs/2"):
        select_band(x, 4096.0, f_range=(0.0, 5000.0))
    with pytest.raises(ValueError, match="x must not be empty"):
        select_band([], 4096.0)
    with pytest.raises(ValueError, match="x contains non-finite"):
        analytic_envelope([0.0, np.nan, 1.0, 2.0], 4096.0)
    ses = squared_envelope_spectrum(
        np.random.default_rng(0).normal(size=4096), 4096.0, band=(500.0, 1500.0), fmax=500.0
    )
    with pytest.raises(ValueError, match="lines_hz must be positive"):
        line_levels_db(ses, lines_hz=[-3.0])
    with pytest.raises(ValueError, match="tolerance"):
        line_levels_db(ses, lines_hz=[30.0], tolerance=0.7)

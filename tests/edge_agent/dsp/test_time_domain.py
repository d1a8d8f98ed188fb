"""Time-domain statistics against closed forms and scipy.stats."""

import numpy as np
import pytest
import scipy.stats

from edge_agent.dsp import time_domain as td

FS = 10_000.0
T = np.arange(10_000) / FS


def test_sine_rms_and_crest_factor():
    # RMS of a sine A/sqrt(2), crest factor sqrt(2): common practice, no source (REFERENCES.md).
    x = 2.0 * np.sin(2 * np.pi * 50.0 * T)
    assert td.rms(x) == pytest.approx(1.414214, abs=1e-6)
    assert td.crest_factor(x) == pytest.approx(np.sqrt(2.0), rel=1e-6)
    assert td.peak(x) == pytest.approx(2.0, rel=1e-9)
    assert td.peak_to_peak(x) == pytest.approx(4.0, rel=1e-9)


def test_sine_shape_and_impulse_factor_closed_form():
    # Mean |sin| = 2/pi, so shape factor = pi/(2 sqrt 2), impulse factor = pi/2 (computed;
    # the sampled mean |sin| differs from 2/pi by about 1e-4 at 200 samples per period).
    x = np.sin(2 * np.pi * 50.0 * T)
    assert td.shape_factor(x) == pytest.approx(np.pi / (2 * np.sqrt(2)), rel=2e-4)
    assert td.impulse_factor(x) == pytest.approx(np.pi / 2, rel=2e-4)


def test_kurtosis_of_sine_and_gaussian():
    # Pearson kurtosis of a sine 1.5, of Gaussian noise 3.0: common practice (REFERENCES.md).
    assert td.kurtosis(np.sin(2 * np.pi * 50.0 * T)) == pytest.approx(1.5, rel=1e-6)
    g = np.random.default_rng(0).normal(size=400_000)
    assert td.kurtosis(g) == pytest.approx(3.0, abs=0.03)


def test_kurtosis_and_skewness_match_scipy_stats():
    # Reference implementation: scipy.stats.kurtosis(fisher=False) and scipy.stats.skew.
    rng = np.random.default_rng(1)
    x = rng.gamma(2.0, size=(3, 5000))
    np.testing.assert_allclose(td.kurtosis(x), scipy.stats.kurtosis(x, axis=-1, fisher=False))
    np.testing.assert_allclose(td.skewness(x), scipy.stats.skew(x, axis=-1))
    np.testing.assert_allclose(
        td.kurtosis(x.T, axis=0), scipy.stats.kurtosis(x.T, axis=0, fisher=False)
    )


def test_summary_matches_single_functions():
    x = np.random.default_rng(2).standard_t(5, size=4096)
    s = td.summarise(x)
    assert s.rms == pytest.approx(td.rms(x))
    assert s.peak == pytest.approx(td.peak(x))
    assert s.crest_factor == pytest.approx(td.crest_factor(x))
    assert s.kurtosis == pytest.approx(td.kurtosis(x))
    assert s.skewness == pytest.approx(td.skewness(x))
    assert s.shape_factor == pytest.approx(td.shape_factor(x))
    assert s.impulse_factor == pytest.approx(td.impulse_factor(x))


def test_zero_signal_gives_nan_ratios_not_numbers():
    z = np.zeros(100)
    assert td.rms(z) == 0.0
    assert np.isnan(td.crest_factor(z))
    assert np.isnan(td.kurtosis(z))
    assert np.isnan(td.summarise(z).crest_factor)


@pytest.mark.parametrize("func", [td.rms, td.peak, td.crest_factor, td.kurtosis, td.skewness])
def test_bad_input_names_x(func):
    with pytest.raises(ValueError, match="x must not be empty"):
        func([])
    with pytest.raises(ValueError, match="x contains non-finite"):
        func([1.0, np.nan, 2.0])
    with pytest.raises(ValueError, match="x must be an array"):
        func(3.0)


def test_kurtosis_needs_two_samples():
    with pytest.raises(ValueError, match="x is too short"):
        td.kurtosis([1.0])

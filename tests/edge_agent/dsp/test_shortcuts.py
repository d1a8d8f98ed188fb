"""The extractor's shortcuts give what the direct computation gives, value for value.

Reference throughout: numpy itself (``numpy.median``, ``numpy.ndarray.std``, ``numpy.fft.rfft``
of the Hann-windowed samples); the shortcuts must agree exactly, not approximately.
"""

import numpy as np
import pytest
import scipy.signal

from edge_agent.dsp._order_stats import median
from edge_agent.dsp.quality import _std_exceeds
from edge_agent.dsp.spectral import compute_spectrum


@pytest.mark.parametrize("n", [1, 2, 3, 998, 999, 25598])
def test_median_equals_numpy_median(n):
    rng = np.random.default_rng(n)
    for a in (
        rng.normal(size=n),
        np.abs(rng.standard_cauchy(size=n)),
        rng.integers(-2, 3, size=n).astype(float),  # many ties
    ):
        assert median(a) == np.median(a)


def test_median_propagates_nan_like_numpy():
    a = np.arange(11.0)
    a[3] = np.nan
    assert np.isnan(median(a)) and np.isnan(np.median(a))


@pytest.mark.parametrize("scale", [1e-12, 3e-10, 1e-9, 3e-9, 1e-6, 1.0])
@pytest.mark.parametrize("offset", [0.0, 450.0])
def test_std_exceeds_agrees_with_std(scale, offset):
    rng = np.random.default_rng(7)
    for n in (8, 1000, 25600):
        x = offset + scale * rng.normal(size=n)
        for limit in (0.0, 1e-9, 1e-6):
            expected = float(x.std()) > limit
            assert _std_exceeds(x, float(x.max()), float(x.min()), limit) is expected


def test_hann_bins_read_piecewise_equal_the_whole_hann_spectrum():
    # Reference: numpy.fft.rfft of x times scipy.signal.get_window("hann") (periodic).
    for n in (1000, 1001):
        x = np.random.default_rng(n).normal(size=n)
        m = n // 2 + 1
        pieces = [compute_spectrum(x, 1000.0)._hann_slice(a, b) for a, b in ((0, 3), (3, m))]
        whole = compute_spectrum(x, 1000.0).hann
        np.testing.assert_array_equal(np.concatenate(pieces), whole)
        np.testing.assert_allclose(
            whole, np.fft.rfft(x * scipy.signal.get_window("hann", n)), atol=1e-10
        )

"""First-passage (inverse Gaussian) distributions with a fixed and a normal random drift."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats

from prognosis_service.prognosis import (
    WienerDegradation,
    random_drift_failure_probability,
    random_drift_first_passage_cdf,
)


def _invgauss(mu: float, sigma: float, w: float) -> stats.rv_continuous:
    # REFERENCES.md: mean w/mu, shape w²/sigma²; scipy invgauss(mu=mean/shape, scale=shape).
    mean, shape = w / mu, w**2 / sigma**2
    return stats.invgauss(mu=mean / shape, scale=shape)


def test_worked_value_mean_20_variance_7_2():
    # REFERENCES.md worked value (computed; scipy docs):
    # mu=0.5, sigma=0.3, w=10 -> mean 20, variance 7.2.
    mean, var = _invgauss(0.5, 0.3, 10.0).stats(moments="mv")
    assert float(mean) == pytest.approx(20.0, rel=1e-12)
    assert float(var) == pytest.approx(7.2, rel=1e-12)


def test_fixed_drift_cdf_and_moments_match_scipy_invgauss():
    # Against scipy.stats.invgauss (reference library) and the same worked value.
    ref = _invgauss(0.5, 0.3, 10.0)
    h = np.linspace(5.0, 40.0, 36)
    cdf = random_drift_first_passage_cdf(
        h, distance=10.0, drift_mean=0.5, drift_var=0.0, diffusion_var=0.09
    )
    np.testing.assert_allclose(cdf, ref.cdf(h), atol=1e-12)

    def surv(x: float) -> float:
        return 1.0 - float(
            random_drift_first_passage_cdf(
                np.array([x]), distance=10.0, drift_mean=0.5, drift_var=0.0, diffusion_var=0.09
            )[0]
        )

    mean = integrate.quad(surv, 0.0, 200.0, limit=200)[0]
    second = 2.0 * integrate.quad(lambda x: x * surv(x), 0.0, 200.0, limit=200)[0]
    assert mean == pytest.approx(20.0, rel=1e-6)
    assert second - mean**2 == pytest.approx(7.2, rel=1e-5)


@pytest.mark.parametrize(("m", "s"), [(0.5, 0.05), (0.1, 0.1)])
def test_random_drift_mixture_matches_numerical_integration_over_the_drift(m: float, s: float):
    # Independent check: integrate scipy's inverse Gaussian CDF over mu ~ N(m, s²). For mu < 0 the
    # passage law is defective: F(t | mu) = exp(2 mu w / sigma²) F(t | |mu|) (Chhikara & Folks
    # 1989; follows from the density, from memory).
    w, sigma = 10.0, 0.3
    h = np.array([5.0, 20.0, 60.0, 200.0])

    def fixed(mu: float, t: float) -> float:
        base = _invgauss(abs(mu), sigma, w).cdf(t)
        return float(base if mu > 0 else np.exp(2 * mu * w / sigma**2) * base)

    expected = [
        integrate.quad(
            lambda mu, t=t: fixed(mu, t) * stats.norm.pdf(mu, m, s),
            m - 8 * s,
            m + 8 * s,
            points=[0.0] if m - 8 * s < 0 else None,
            limit=200,
        )[0]
        for t in h
    ]
    got = random_drift_first_passage_cdf(
        h, distance=w, drift_mean=m, drift_var=s * s, diffusion_var=sigma**2
    )
    np.testing.assert_allclose(got, expected, atol=2e-6)
    ever = integrate.quad(
        lambda mu: min(1.0, np.exp(2 * mu * w / sigma**2)) * stats.norm.pdf(mu, m, s),
        m - 8 * s,
        m + 8 * s,
        points=[0.0] if m - 8 * s < 0 else None,
    )[0]
    assert random_drift_failure_probability(
        distance=w, drift_mean=m, drift_var=s * s, diffusion_var=sigma**2
    ) == pytest.approx(ever, abs=1e-6)


def test_wiener_model_with_a_sharp_drift_prior_reproduces_the_inverse_gaussian():
    # A near-certain drift prior leaves the inverse Gaussian of REFERENCES.md (mean 20 h, var 7.2).
    t = np.arange(1.0, 21.0)
    y = 0.5 * t  # observed exactly on the drift line; level 10 at t = 20
    model = WienerDegradation(
        threshold=20.0,
        prior_drift_mean=0.5,
        prior_drift_var=1e-14,
        sigma2=0.09,
        trend_significance=None,
    ).fit(t, y)
    ref = _invgauss(0.5, 0.3, 10.0)
    h = np.array([15.0, 20.0, 25.0])
    np.testing.assert_allclose(model.predict_failure_time_cdf(h), ref.cdf(h), atol=1e-6)
    np.testing.assert_allclose(
        model.time_to_failure_quantiles((0.1, 0.5, 0.9)), ref.ppf([0.1, 0.5, 0.9]), rtol=1e-6
    )


@settings(max_examples=60, deadline=None)
@given(
    distance=st.floats(0.01, 100.0),
    drift_mean=st.floats(-1.0, 1.0),
    drift_sd=st.floats(0.0, 1.0),
    diffusion_var=st.floats(1e-4, 10.0),
)
def test_mixture_cdf_is_a_sub_distribution(
    distance: float, drift_mean: float, drift_sd: float, diffusion_var: float
):
    # Property (follows from the definition): non-decreasing in h, within [0, 1], and bounded by
    # the probability of ever failing, which it approaches for large h.
    kw = {
        "distance": distance,
        "drift_mean": drift_mean,
        "drift_var": drift_sd**2,
        "diffusion_var": diffusion_var,
    }
    h = np.geomspace(1e-3, 1e9, 200)
    cdf = random_drift_first_passage_cdf(h, **kw)
    ever = random_drift_failure_probability(**kw)
    assert np.all(np.isfinite(cdf))
    assert np.all(np.diff(cdf) >= -1e-9)
    assert cdf[0] >= 0.0 and cdf[-1] <= ever + 1e-9

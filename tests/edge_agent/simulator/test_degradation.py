"""Severity growth laws: boundary values, shape, and Paris' law against a numerical ODE solve."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

from edge_agent.simulator.degradation import (
    ExponentialGrowth,
    GrowthLaw,
    LinearGrowth,
    ParisGrowth,
    StepGrowth,
    draw_life_days,
)

LAWS: list[GrowthLaw] = [
    ExponentialGrowth(initial=0.02),
    ParisGrowth(exponent=3.0, initial=0.02),
    ParisGrowth(exponent=4.0, initial=0.05),
    LinearGrowth(initial=0.1),
    StepGrowth(step=0.4),
]


@pytest.mark.parametrize("law", LAWS, ids=repr)
def test_law_is_zero_before_onset_one_at_life_and_held(law: GrowthLaw) -> None:
    s = law.severity([-5.0, 0.0, 80.0, 120.0, 500.0], 120.0)
    assert s[0] == 0.0
    assert 0.0 < s[1] < 1.0
    assert s[3] == pytest.approx(1.0, abs=1e-12)
    assert s[4] == 1.0
    grid = law.severity(np.linspace(0.0, 120.0, 200), 120.0)
    assert np.all(np.diff(grid) >= 0.0)


def test_exponential_growth_is_log_linear() -> None:
    # exponential degradation: ln s linear in time (Gebraeel et al. 2005, from memory)
    law = ExponentialGrowth(initial=0.02)
    tau = np.linspace(0.0, 90.0, 10)
    log_s = np.log(law.severity(tau, 90.0))
    slope, intercept = np.polyfit(tau, log_s, 1)
    assert slope == pytest.approx(math.log(1 / 0.02) / 90.0, rel=1e-9)
    assert intercept == pytest.approx(math.log(0.02), rel=1e-9)


@pytest.mark.parametrize("m", [2.5, 3.0, 4.0])
def test_paris_growth_solves_the_paris_ode(m: float) -> None:
    # Paris' law da/dN = C (dK)^m with dK ~ sqrt(a) gives da/dt = k a^(m/2) (Paris & Erdogan
    # 1963, from memory); integrate numerically with scipy and compare with the closed form
    law = ParisGrowth(exponent=m, initial=0.03)
    life = 100.0
    exponent = (m - 2.0) / 2.0
    k = (1.0 - 0.03**exponent) / (exponent * 0.03**exponent * life)  # reaches 1 at t = life
    t_eval = np.linspace(0.0, life, 21)
    sol = integrate.solve_ivp(
        lambda t, a: k * a ** (m / 2.0), (0.0, life), [0.03], t_eval=t_eval, rtol=1e-10, atol=1e-12
    )
    assert np.allclose(law.severity(t_eval, life), sol.y[0], rtol=1e-6)


def test_linear_and_step_growth_values() -> None:
    assert LinearGrowth().severity(30.0, 120.0) == pytest.approx(0.25)
    assert StepGrowth(step=0.5).severity(60.0, 120.0) == pytest.approx(0.75)


@pytest.mark.parametrize(
    ("factory", "message"),
    [
        (lambda: ExponentialGrowth(initial=0.0), "'initial' parameter of ExponentialGrowth"),
        (lambda: ParisGrowth(exponent=2.0), "'exponent' parameter of ParisGrowth"),
        (lambda: LinearGrowth(initial=1.0), "'initial' parameter of LinearGrowth"),
        (lambda: StepGrowth(step=0.0), "'step' parameter of StepGrowth"),
    ],
)
def test_bad_law_parameters_are_named(factory: object, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        factory()  # type: ignore[operator]


def test_life_must_be_positive() -> None:
    with pytest.raises(ValueError, match="life_days must be"):
        LinearGrowth().severity(1.0, 0.0)


def test_life_draws_are_lognormal_around_the_median() -> None:
    rng = np.random.default_rng(7)
    draws = np.array([draw_life_days(rng, median_days=100.0, dispersion=0.3) for _ in range(4000)])
    assert np.median(draws) == pytest.approx(100.0, rel=0.03)
    assert np.std(np.log(draws)) == pytest.approx(0.3, rel=0.05)
    with pytest.raises(ValueError, match="median_days"):
        draw_life_days(rng, median_days=-1.0)

"""First passage of Brownian motion with drift, with a normal prior on the drift (closed form)."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.special import log_ndtr, ndtr

__all__ = ["random_drift_failure_probability", "random_drift_first_passage_cdf"]


def random_drift_first_passage_cdf(
    h: ArrayLike,
    *,
    distance: float,
    drift_mean: float,
    drift_var: float,
    diffusion_var: float,
) -> NDArray:
    """P(T ≤ h) for the first passage of ``X(h) = μh + σB(h)`` over ``distance``, μ ~ N(m, s²).

    For a fixed drift μ the first-passage time is inverse Gaussian,
    ``F(h | μ) = Φ((μh - d)/(σ√h)) + exp(2μd/σ²) Φ(-(d + μh)/(σ√h))`` (defective when μ ≤ 0).
    Averaging over μ ~ N(m, s²) in closed form gives
    ``Φ((mh - d)/√(h(σ² + s²h))) + exp(2md/σ² + 2s²d²/σ⁴) Φ(-(d + mh + 2s²dh/σ²)/√(h(σ² + s²h)))``,
    evaluated in log space for the second term.

    Parameters
    ----------
    h : array_like
        Times after now (same time unit as the rates), ``h <= 0`` gives 0.
    distance : float
        Remaining distance ``d > 0`` to the threshold, in signal units.
    drift_mean, drift_var : float
        Mean ``m`` and variance ``s² >= 0`` of the drift, signal units per time unit (squared).
    diffusion_var : float
        ``σ² > 0``, signal units squared per time unit.

    References
    ----------
    Chhikara & Folks, *The Inverse Gaussian Distribution*, Marcel Dekker (1989) (first passage).
    Peng & Tseng, "Mis-specification analysis of linear degradation models", IEEE Trans.
    Reliability 58(3) (2009) 444–455 (random-drift mixture; from memory).
    """
    h_arr = np.asarray(h, dtype=float)
    out = np.zeros_like(h_arr)
    pos = h_arr > 0
    hp = h_arr[pos]
    d, m, s2, v = float(distance), float(drift_mean), float(drift_var), float(diffusion_var)
    root = np.sqrt(hp * (v + s2 * hp))
    first = ndtr((m * hp - d) / root)
    log_second = (
        2.0 * m * d / v
        + 2.0 * s2 * d * d / (v * v)
        + log_ndtr(-(d + m * hp + 2.0 * s2 * d * hp / v) / root)
    )
    out[pos] = np.clip(first + np.exp(np.minimum(log_second, 0.0)), 0.0, 1.0)
    return out


def random_drift_failure_probability(
    *, distance: float, drift_mean: float, drift_var: float, diffusion_var: float
) -> float:
    """P(T < ∞): the limit of :func:`random_drift_first_passage_cdf` as h → ∞."""
    d, m, s2, v = float(distance), float(drift_mean), float(drift_var), float(diffusion_var)
    if s2 <= 0.0:
        return 1.0 if m > 0 else float(np.exp(2.0 * m * d / v))
    s = np.sqrt(s2)
    log_second = (
        2.0 * m * d / v + 2.0 * s2 * d * d / (v * v) + log_ndtr(-(m + 2.0 * s2 * d / v) / s)
    )
    return float(np.clip(ndtr(m / s) + np.exp(min(log_second, 0.0)), 0.0, 1.0))

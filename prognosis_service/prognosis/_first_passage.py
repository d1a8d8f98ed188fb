"""First passage of Brownian motion with drift, with a normal prior on the drift (closed form)."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.special import log_ndtr, ndtr

__all__ = [
    "random_drift_failure_probabilities",
    "random_drift_failure_probability",
    "random_drift_first_passage_cdf",
]


def random_drift_first_passage_cdf(
    h: ArrayLike,
    *,
    distance: ArrayLike,
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
    distance : float or array_like
        Remaining distance ``d > 0`` to the threshold, in signal units. An array is broadcast
        against ``h`` (e.g. distances of shape ``(k, 1)`` with times of shape ``(n,)`` give a
        ``(k, n)`` result), so several threshold levels take one call.
    drift_mean, drift_var : float
        Mean ``m`` and variance ``s² >= 0`` of the drift, signal units per time unit (squared).
    diffusion_var : float
        ``σ² > 0``, signal units squared per time unit.

    References
    ----------
    Chhikara & Folks, *The Inverse Gaussian Distribution*, Marcel Dekker (1989) (first passage).
    Peng & Tseng, "Mis-specification analysis of linear degradation models", IEEE Trans.
    Reliability 58(3) (2009) 444–455 (random-drift mixture; from memory).

    Returns
    -------
    ndarray of float
        Shape of ``h`` broadcast against ``distance``, in [0, 1].
    """
    h_arr = np.asarray(h, dtype=float)
    d = np.asarray(distance, dtype=float)
    pos = h_arr > 0
    # where-and-broadcast rather than masking: the quantile search calls this with one time and
    # 16 distances dozens of times, where indexing and broadcast_arrays dominate the cost
    hp = np.where(pos, h_arr, 1.0)
    m, s2, v = float(drift_mean), float(drift_var), float(diffusion_var)
    root = np.sqrt(hp * (v + s2 * hp))
    first = ndtr((m * hp - d) / root)
    log_second = (
        2.0 * m * d / v
        + 2.0 * s2 * d * d / (v * v)
        + log_ndtr(-(d + m * hp + 2.0 * s2 * d * hp / v) / root)
    )
    cdf = np.minimum(np.maximum(first + np.exp(np.minimum(log_second, 0.0)), 0.0), 1.0)
    return np.where(pos, cdf, 0.0)


def random_drift_failure_probability(
    *, distance: float, drift_mean: float, drift_var: float, diffusion_var: float
) -> float:
    """P(T < ∞): the limit of :func:`random_drift_first_passage_cdf` as h → ∞."""
    return float(
        random_drift_failure_probabilities(
            distance=float(distance),
            drift_mean=drift_mean,
            drift_var=drift_var,
            diffusion_var=diffusion_var,
        )
    )


def random_drift_failure_probabilities(
    *, distance: ArrayLike, drift_mean: float, drift_var: float, diffusion_var: float
) -> NDArray:
    """:func:`random_drift_failure_probability` for an array of distances (same shape out)."""
    d = np.asarray(distance, dtype=float)
    m, s2, v = float(drift_mean), float(drift_var), float(diffusion_var)
    if s2 <= 0.0:
        return np.ones_like(d) if m > 0 else np.exp(2.0 * m * d / v)
    s = np.sqrt(s2)
    log_second = (
        2.0 * m * d / v + 2.0 * s2 * d * d / (v * v) + log_ndtr(-(m + 2.0 * s2 * d / v) / s)
    )
    return np.asarray(np.clip(ndtr(m / s) + np.exp(np.minimum(log_second, 0.0)), 0.0, 1.0))

"""Offline metrics of prognostic performance (time in hours, or any one unit throughout)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "alpha_lambda_accuracy",
    "interval_coverage",
    "phm08_penalty",
    "phm08_score",
    "prognostic_horizon",
    "relative_accuracy",
]


def _pair(a: ArrayLike, b: ArrayLike, names: tuple[str, str]) -> tuple[NDArray, NDArray]:
    x = np.asarray(a, dtype=float)
    y = np.asarray(b, dtype=float)
    if x.shape != y.shape:
        raise ValueError(
            f"{names[0]} and {names[1]} must have the same shape; got {x.shape} and {y.shape}"
        )
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise ValueError(f"{names[0]} and {names[1]} must be finite")
    return x, y


def phm08_penalty(rul_estimate: ArrayLike, rul_true: ArrayLike) -> NDArray:
    """Per-prediction PHM08 penalty: late predictions cost more than early ones.

    ``d = RUL_est − RUL_true``; ``s = exp(−d/13) − 1`` for ``d < 0`` (early), ``exp(d/10) − 1``
    for ``d ≥ 0`` (late). The constants assume RUL in the data set's time unit (cycles).

    References
    ----------
    A. Saxena, K. Goebel, D. Simon, N. Eklund, "Damage propagation modeling for aircraft engine
    run-to-failure simulation", Int. Conf. on Prognostics and Health Management (PHM08), 2008.

    Examples
    --------
    >>> [round(float(s), 5) for s in phm08_penalty([0.0, 20.0], [10.0, 10.0])]
    [1.15811, 1.71828]
    """
    est, true = _pair(rul_estimate, rul_true, ("rul_estimate", "rul_true"))
    d = est - true
    return np.where(d < 0, np.expm1(-d / 13.0), np.expm1(d / 10.0))


def phm08_score(rul_estimate: ArrayLike, rul_true: ArrayLike) -> float:
    """Sum of :func:`phm08_penalty` over all predictions (the challenge score; lower is better)."""
    return float(np.sum(phm08_penalty(rul_estimate, rul_true)))


def relative_accuracy(rul_estimate: ArrayLike, rul_true: ArrayLike) -> NDArray:
    """``RA = 1 − |r* − r| / r*`` (1 is perfect; needs ``r* > 0``).

    References
    ----------
    A. Saxena, J. Celaya, B. Saha, S. Saha, K. Goebel, "Metrics for offline evaluation of
    prognostic performance", Int. J. Prognostics and Health Management 1 (2010) (from memory).
    """
    est, true = _pair(rul_estimate, rul_true, ("rul_estimate", "rul_true"))
    if np.any(true <= 0):
        raise ValueError("rul_true must be > 0 for relative accuracy")
    return 1.0 - np.abs(true - est) / true


def _prediction_series(
    t: ArrayLike, rul_estimate: ArrayLike, end_of_life: float
) -> tuple[NDArray, NDArray]:
    times, est = _pair(t, rul_estimate, ("t", "rul_estimate"))
    if times.ndim != 1 or times.size == 0:
        raise ValueError("t must be a non-empty 1-D array of prediction times")
    if np.any(np.diff(times) <= 0):
        raise ValueError("t must be strictly increasing")
    if not times[-1] < end_of_life:
        raise ValueError(
            f"every prediction time must precede end_of_life = {end_of_life:g}; last is "
            f"{times[-1]:g}"
        )
    return times, est


def alpha_lambda_accuracy(
    t: ArrayLike,
    rul_estimate: ArrayLike,
    *,
    end_of_life: float,
    alpha: float = 0.2,
    lambdas: Sequence[float] = (0.5,),
    prediction_start: float | None = None,
) -> NDArray:
    """α-λ accuracy: is the RUL prediction within ±α of the truth at ``tλ``?

    ``tλ = tP + λ(tEoL − tP)``; the test holds when ``(1−α)·r*(tλ) ≤ r(tλ) ≤ (1+α)·r*(tλ)``.
    Predictions are made at discrete times, so each ``tλ`` is judged by the latest prediction
    made at or before it, against the true RUL at that prediction's time.

    Parameters
    ----------
    t : array_like of shape (n,)
        Prediction times, strictly increasing, all before ``end_of_life``.
    rul_estimate : array_like of shape (n,)
        Predicted RUL at each time (e.g. the median time to failure).
    end_of_life : float
        True end-of-life time ``tEoL``.
    alpha : float, default 0.2
    lambdas : sequence of float in [0, 1]
    prediction_start : float or None
        ``tP``; ``None`` is the first prediction time.

    Returns
    -------
    ndarray of bool, shape (len(lambdas),)

    References
    ----------
    Saxena, Celaya, Saha, Saha & Goebel, IJPHM 1 (2010) (definitions from memory).

    Examples
    --------
    >>> alpha_lambda_accuracy([0.0, 50.0], [90.0, 70.0], end_of_life=100.0, lambdas=[0.0, 0.5])
    array([ True, False])
    """
    times, est = _prediction_series(t, rul_estimate, end_of_life)
    if not 0 < alpha < 1:
        raise ValueError(f"alpha must be in (0, 1); got {alpha!r}")
    lam = np.asarray(lambdas, dtype=float)
    if np.any((lam < 0) | (lam > 1)):
        raise ValueError(f"lambdas must lie in [0, 1]; got {lambdas!r}")
    t_p = float(times[0]) if prediction_start is None else float(prediction_start)
    t_lam = t_p + lam * (end_of_life - t_p)
    idx = np.searchsorted(times, t_lam + 1e-9 * max(abs(end_of_life), 1.0), side="right") - 1
    if np.any(idx < 0):
        raise ValueError("no prediction made at or before some tλ (is prediction_start too early?)")
    truth = end_of_life - times[idx]
    r = est[idx]
    return np.asarray(((1 - alpha) * truth <= r) & (r <= (1 + alpha) * truth))


def prognostic_horizon(
    t: ArrayLike,
    rul_estimate: ArrayLike,
    *,
    end_of_life: float,
    alpha: float = 0.05,
    require_stay: bool = False,
) -> float:
    """Prognostic horizon ``PH = tEoL − t_i``.

    ``t_i`` is the first prediction time whose RUL lies within ``r*(t_i) ± α·tEoL``; with
    ``require_stay=True`` it is the first time from which all later predictions stay within.
    Returns 0.0 when no prediction qualifies.

    References
    ----------
    Saxena, Celaya, Saha, Saha & Goebel, IJPHM 1 (2010) (definition from memory).

    Examples
    --------
    >>> prognostic_horizon([10.0, 50.0, 80.0], [40.0, 52.0, 21.0], end_of_life=100.0, alpha=0.05)
    50.0
    """
    times, est = _prediction_series(t, rul_estimate, end_of_life)
    truth = end_of_life - times
    inside = np.abs(est - truth) <= alpha * end_of_life
    if require_stay:
        inside = np.flip(np.logical_and.accumulate(np.flip(inside)))
    hits = np.flatnonzero(inside)
    return float(end_of_life - times[hits[0]]) if hits.size else 0.0


def interval_coverage(lower: ArrayLike, upper: ArrayLike, truth: ArrayLike) -> float:
    """Fraction of truths inside ``[lower, upper]`` (e.g. P10–P90: about 0.8 if calibrated)."""
    lo = np.asarray(lower, dtype=float)
    hi = np.asarray(upper, dtype=float)
    tr = np.asarray(truth, dtype=float)
    if not (lo.shape == hi.shape == tr.shape) or lo.size == 0:
        raise ValueError(
            f"lower, upper and truth must have one non-empty shape; got {lo.shape}, {hi.shape}, "
            f"{tr.shape}"
        )
    if np.any(lo > hi):
        raise ValueError("lower must not exceed upper")
    return float(np.mean((lo <= tr) & (tr <= hi)))

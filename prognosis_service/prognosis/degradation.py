"""Degradation models of one unit's signal and their time-to-failure distributions.

Time is in **hours** throughout: ``t`` is hours since the unit entered service (or since its last
renewal, e.g. a bearing change), every ``t > 0``; rates are per hour; forecasts are hours after the
last observation. Signal values are in the signal's own unit (a health index is dimensionless, 0
healthy, 1 failure threshold).

The models' error is a Brownian motion (a random walk), not white measurement noise. Feed them one
value per aggregation period (e.g. the daily median of the health index), not raw high-rate
samples: white noise on closely spaced points inflates the estimated ``σ²`` and so the intervals.
The trend test allows for such noise (:func:`_trend_z`), so it does not lose power as points
accumulate.

All forecasts are advisory: they do not replace protective trips, and local codes and qualified
personnel decide what is done on the machine.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import optimize, stats
from scipy.special import ndtr
from sklearn.base import BaseEstimator, clone
from sklearn.utils.validation import check_is_fitted

from prognosis_service.health._checks import (
    STATE_VERSION,
    InvalidParameterError,
    NotEnoughDataError,
    as_series,
    check_choice,
    check_int,
    check_real,
    check_state,
    float_list,
    reset_fitted,
)
from prognosis_service.prognosis._first_passage import (
    random_drift_failure_probabilities,
    random_drift_first_passage_cdf,
)

__all__ = [
    "ADVISORY",
    "CandidateResult",
    "ExponentialDegradation",
    "FleetPrior",
    "LinearTrendExtrapolation",
    "ModelComparison",
    "NoForecast",
    "TimeToFailureForecast",
    "WienerDegradation",
    "forecast_time_to_failure",
    "select_model",
]

ADVISORY = (
    "Forecasts are advisory: they do not replace protective trips or alarms, and local codes and "
    "qualified personnel decide on maintenance and operation."
)
_LOG_2PI = math.log(2.0 * math.pi)
_SIGMA2_FLOOR = 1e-18
_PASSED = 1.0 - 1e-12


def _check_min_points(owner: str, n: int, min_points: int) -> None:
    if n < min_points:
        raise NotEnoughDataError(
            "too_few_points",
            f"{owner} needs at least {min_points} points to forecast; got {n}",
        )


def _check_trend(owner: str, z: float, significance: float | None) -> None:
    if significance is not None and z < stats.norm.isf(significance):
        raise NotEnoughDataError(
            "no_degradation_detected",
            f"{owner}: the signal shows no significant rise yet (trend z = {z:.2f}, one-sided "
            f"level {significance:g}); no forecast is made",
        )


def _trend_z(x: NDArray, t: NDArray, sigma2: float, estimated: bool) -> float:
    """z statistic of the rise ``x[-1] - x[0]`` against no trend (one-sided test of a rise).

    The rise over the span has variance ``σ² span`` under the models' Brownian error. When
    ``σ²`` was estimated from the increments and those show the negative lag-1 correlation of
    white noise on the points (a random walk observed with measurement noise: increments
    ``β Δt + σ ΔW + ε_k - ε_(k-1)``, lag-1 autocovariance ``-σε²``), the increments' spread is
    mostly that noise, not diffusion: read as diffusion it grows the rise's variance with every
    point (``2 σε²`` per increment) and a steady rise would never become significant. Then
    ``σε²`` is the negated lag-1 autocovariance, ``σ²`` what is left of the increment variance,
    and the rise's variance ``σ² span + 2 σε²``. The correlation counts only when it is below
    Bartlett's ``-2/√m`` bound for ``m`` independent increments; otherwise (and when ``σ²`` is
    given) the statistic is the Brownian one, ``rise / √(σ² span)``. Where the noise swamps the
    walk (its variance several times the walk's per step), ``σ²`` is poorly determined and the
    test rejects a trendless signal up to about twice as often as its level (Monte Carlo, 60
    points: 8.6 % at a 5 % level); on white noise alone it is conservative.

    References
    ----------
    A. C. Harvey, "Forecasting, Structural Time Series Models and the Kalman Filter", Cambridge
    University Press (1989), the local level model (from memory). G. E. P. Box, G. M. Jenkins,
    "Time Series Analysis: Forecasting and Control" (1970), Bartlett's standard error of the
    sample autocorrelation (from memory).
    """
    span = float(t[-1] - t[0])
    rise = float(x[-1] - x[0])
    var = sigma2 * span
    if estimated and x.size >= 5:
        dt = np.diff(t)
        r = np.diff(x) - rise / span * dt
        m = r.size
        gamma0 = float(r @ r) / m
        gamma1 = float(r[:-1] @ r[1:]) / m
        if gamma0 > 0 and gamma1 / gamma0 < -2.0 / math.sqrt(m):
            noise = -gamma1
            walk = max(float(np.sum((r * r - 2.0 * noise) / dt)) / (m - 1), _SIGMA2_FLOOR)
            var = walk * span + 2.0 * noise
    return rise / math.sqrt(max(var, _SIGMA2_FLOOR))


def _increment_sigma2(dx: NDArray, dt: NDArray, slope: float, dof: int) -> float:
    """Brownian variance per hour from increments about a common slope."""
    if dof < 1:
        raise NotEnoughDataError(
            "too_few_points", "at least 3 points are needed to estimate sigma2 from the data"
        )
    return max(float(np.sum((dx - slope * dt) ** 2 / dt)) / dof, _SIGMA2_FLOOR)


_N_LEVELS = 16  # failure levels averaged over when the threshold is uncertain
_N_BRACKET = 80  # doubling steps searched for a quantile's bracket
_QUANTILE_XTOL_H = 1e-6  # hours
_QUANTILE_RTOL = 1e-9


def _check_threshold_sd(owner: str, value: float) -> float:
    return check_real(owner, "threshold_sd", value, low=0.0, closed="left")


class _DegradationModel(BaseEstimator):
    """Common forecasting interface; subclasses provide ``_cdf_at`` and ``_ultimate_at``.

    Both take an array of failure levels and evaluate them in one call (``_cdf_at`` returns one
    row per level, broadcast against the hours).

    With ``threshold_sd > 0`` the unit's own failure level is uncertain: normal about
    ``threshold`` with that SD, truncated to above the last observation (the unit is still
    running, so it has not reached its failure level yet). The forecast averages the
    first-passage law over ``_N_LEVELS`` equal-probability levels of that distribution.
    """

    threshold: float
    threshold_sd: float = 0.0

    def _cdf_at(self, h: NDArray, levels: NDArray) -> NDArray:
        """CDF at ``h`` for each level: shape ``(levels.size, *h.shape)``."""
        raise NotImplementedError

    def _ultimate_at(self, levels: NDArray) -> NDArray:
        """P(failure ever) for each level: shape ``(levels.size,)``."""
        raise NotImplementedError

    def _levels(self) -> NDArray:
        # memoised on what they depend on: the quantile search evaluates the CDF dozens of
        # times, and truncnorm.ppf on each call cost 37 ms per P10/P50/P90 (measured here)
        threshold, sd = float(self.threshold), float(self.threshold_sd or 0.0)
        key = (threshold, sd, self.last_signal_)
        memo = getattr(self, "_levels_memo", None)
        if memo is not None and memo[0] == key:
            return memo[1]
        if sd <= 0.0:
            levels = np.array([threshold])
        else:
            lo = (self.last_signal_ - threshold) / sd
            u = (np.arange(_N_LEVELS) + 0.5) / _N_LEVELS
            drawn = stats.truncnorm.ppf(u, lo, np.inf, loc=threshold, scale=sd)
            levels = np.maximum(drawn, self.last_signal_ + 1e-9 * (1.0 + sd)).astype(float)
        self._levels_memo = (key, levels)
        return levels

    def _crossed(self) -> bool:
        """CDF ≡ 1: at or past a known threshold (never with an uncertain one, see above)."""
        return not self.threshold_sd and self.last_signal_ >= float(self.threshold)

    def _cdf(self, h: NDArray) -> NDArray:
        levels = self._levels()
        return np.asarray(np.sum(self._cdf_at(h, levels), axis=0) / levels.size)

    def _ultimate(self) -> float:
        return float(np.mean(self._ultimate_at(self._levels())))

    def _check_fitted(self) -> None:
        check_is_fitted(self, "last_time_")

    def predict_failure_time_cdf(self, t_horizon: ArrayLike) -> NDArray:
        """P(failure within ``t_horizon`` hours after the last observation).

        Parameters
        ----------
        t_horizon : array_like of float
            Hours after ``last_time_``, each ``>= 0``.

        Returns
        -------
        ndarray of float, same shape as ``t_horizon``, in [0, 1].
        """
        self._check_fitted()
        h = np.asarray(t_horizon, dtype=float)
        if not np.all(np.isfinite(h)) or np.any(h < 0):
            raise ValueError(f"t_horizon must be finite hours >= 0; got {t_horizon!r}")
        if self.threshold_crossed_:
            return np.ones_like(h)
        return self._cdf(h)

    def prob_failure_within(self, horizon: float) -> float:
        """P(failure within ``horizon`` hours after the last observation)."""
        return float(self.predict_failure_time_cdf(np.array([horizon]))[0])

    def failure_probability_ever(self) -> float:
        """P(the threshold is ever reached) under the model (< 1 if the drift may be ≤ 0)."""
        self._check_fitted()
        return 1.0 if self.threshold_crossed_ else self._ultimate()

    def time_to_failure_quantiles(
        self, q: Sequence[float] | ArrayLike = (0.1, 0.5, 0.9)
    ) -> NDArray:
        """Quantiles of the time to failure, hours after the last observation.

        A quantile the model never reaches (the threshold may never be crossed with that
        probability) is ``inf``.
        """
        self._check_fitted()
        qs = np.atleast_1d(np.asarray(q, dtype=float))
        if not np.all((qs > 0) & (qs < 1)):
            raise ValueError(f"q must lie in (0, 1); got {q!r}")
        if self.threshold_crossed_:
            return np.zeros_like(qs)
        return self._quantiles(qs, self._ultimate())

    def _quantiles(self, qs: NDArray, ultimate: float) -> NDArray:
        # Bracket on the doubling grid h0·2^k (k < 80; doubling is exact, so these are the
        # points a doubling search would visit) evaluated in one call for every quantile, then
        # Brent within the first bracket that reaches the level (the first crossing when the CDF
        # is not monotone). Hours need no more than xtol = 1e-6 h.
        grid = max(self.last_time_, 1.0) * 1e-3 * 2.0 ** np.arange(_N_BRACKET)
        cdf = self._cdf(grid)
        out = np.full_like(qs, math.inf)
        for i, level in enumerate(qs.tolist()):
            reached = np.flatnonzero(cdf >= level)
            if level >= ultimate - 1e-9 or reached.size == 0:
                continue
            k = int(reached[0])
            lo, hi = (0.0 if k == 0 else float(grid[k - 1])), float(grid[k])
            out[i] = optimize.brentq(
                lambda h, level=level: float(self._cdf(np.array([h]))[0]) - level,
                lo,
                hi,
                xtol=_QUANTILE_XTOL_H,
                rtol=_QUANTILE_RTOL,
            )
        return out

    def latest_maintenance_time(self, risk: float) -> float:
        """Hours after the last observation by which P(failure) reaches ``risk``.

        Add ``last_time_`` for the unit's age at that moment. ``inf`` when the model never reaches
        that risk.
        """
        check_real(type(self).__name__, "risk", risk, low=0.0, high=1.0)
        return float(self.time_to_failure_quantiles([risk])[0])


class ExponentialDegradation(_DegradationModel):
    """Exponential degradation with Bayesian updating (Gebraeel, Lawley, Li & Ryan 2005).

    The signal is ``S(t) = φ + exp(L(t))`` with ``L(t) = θ′ + β′t + ε(t)``, ``ε`` a Brownian motion
    with variance ``σ²t``, and a bivariate normal prior on ``(θ′, β′)``. The posterior is normal in
    closed form (computed in O(n) from the independent increments). Failure is ``S ≥ D``.

    Two predictive distributions of the residual life are offered:

    ``predictive="first_passage"`` (default): the first passage of ``L`` over ``ln(D−φ)`` from
    its observed value at ``tk``, with the posterior normal ``β′`` mixed in closed form (a
    random-drift inverse Gaussian). This is the exact predictive of the model; on simulated
    fleets its P10–P90 intervals cover the truth about 80 % of the time.

    ``predictive="gebraeel"`` (the published formula): ``P(T ≤ h) = Φ(g(h))`` with
    ``g(h) = [μθ′ + μβ′(tk+h) − ln(D−φ)] / √ṽ``,
    ``ṽ = σθ′² + σβ′²(tk+h)² + 2ρσθ′σβ′(tk+h) + σ²(tk+h)``, truncated to ``T > 0``
    (``(Φ(g(h)) − Φ(g(0))) / (1 − Φ(g(0)))``). It is the probability that the log-signal is past
    the threshold at ``tk+h`` and ignores that the error path up to ``tk`` is already observed,
    so its variance carries about ``2σ²tk`` too much: intervals are wider than calibrated
    (conservative; on simulated fleets P10–P90 cover the truth nearly always). It can also be
    slightly non-monotone in ``h``; quantiles take the first crossing.

    Parameters
    ----------
    threshold : float
        Failure threshold ``D`` in signal units (``D > φ``).
    offset : float, default 0.0
        ``φ``: the signal's floor; every observed value must exceed it.
    prior_mean : sequence of 2 float or None, default None
        Prior mean of ``(θ′, β′)`` (``β′`` per hour). ``None`` is the documented default
        ``(ln(D−φ) − ln 10, 0)``: a healthy signal a tenth of the way (in ratio) to the threshold,
        no trend expected.
    prior_cov : 2×2 array or None, default None
        Prior covariance; ``None`` is ``diag((ln 10)², 0.01²)``: a factor of 10 either way on the
        level, ±e per 100 h on the rate. Use :class:`FleetPrior` to learn it from run-to-failure
        histories.
    sigma2 : float or None, default None
        Brownian variance ``σ²`` of the log-signal per hour. ``None`` estimates it from this
        unit's increments (plug-in; then the evidence is slightly optimistic).
    predictive : {"first_passage", "gebraeel"}, default "first_passage"
    threshold_sd : float, default 0.0
        SD of the unit's own failure level about ``threshold`` (signal units), e.g. the spread
        of the health index at the recorded failures of a fleet; the forecast averages over it
        (see :class:`_DegradationModel`). 0 means the threshold is known.
    min_points : int, default 5
        Fewer points raise :class:`NotEnoughDataError` (``reason="too_few_points"``).
    trend_significance : float or None, default 0.05
        One-sided level of a data-only test that the log-signal rises (its rise over the span
        against the rise's standard error, allowing for measurement noise: :func:`_trend_z`).
        Not significant → :class:`NotEnoughDataError`
        (``reason="no_degradation_detected"``). ``None`` forecasts from prior + data regardless.

    Attributes
    ----------
    posterior_mean_ : ndarray (2,)
        ``(μθ′, μβ′)``.
    posterior_cov_ : ndarray (2, 2)
    sigma2_ : float
    sigma2_estimated_ : bool
    log_evidence_ : float
        Log marginal likelihood of the observed signal ``y`` (not of ``L``: includes the Jacobian
        ``−Σ ln(y − φ)``), so it compares with other models of the same ``y``.
    max_log_likelihood_ : float
        At the data-only maximum-likelihood ``(θ′, β′)``; with ``n_parameters_`` gives a BIC.
    n_parameters_ : int
    last_time_, last_signal_ : float
    n_points_ : int
    trend_z_ : float
    threshold_crossed_ : bool
        The last observation is already at or past the threshold (CDF ≡ 1); never with
        ``threshold_sd > 0``.

    References
    ----------
    N. Z. Gebraeel, M. A. Lawley, R. Li and J. K. Ryan, "Residual-life distributions from
    component degradation signals: a Bayesian approach", IIE Transactions 37(6) (2005) 543–557.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> t = np.arange(10.0, 410.0, 10.0)
    >>> L = -3.0 + 0.005 * t + 0.01 * np.cumsum(rng.normal(0, np.sqrt(10.0), t.size))
    >>> model = ExponentialDegradation(threshold=1.0).fit(t, np.exp(L))
    >>> q10, q50, q90 = model.time_to_failure_quantiles()
    >>> bool(q10 < q50 < q90)
    True
    """

    def __init__(
        self,
        *,
        threshold: float,
        offset: float = 0.0,
        prior_mean: Sequence[float] | None = None,
        prior_cov: Sequence[Sequence[float]] | None = None,
        sigma2: float | None = None,
        predictive: str = "first_passage",
        threshold_sd: float = 0.0,
        min_points: int = 5,
        trend_significance: float | None = 0.05,
    ) -> None:
        self.threshold = threshold
        self.offset = offset
        self.prior_mean = prior_mean
        self.prior_cov = prior_cov
        self.sigma2 = sigma2
        self.predictive = predictive
        self.threshold_sd = threshold_sd
        self.min_points = min_points
        self.trend_significance = trend_significance

    def _check_params(self) -> tuple[NDArray, NDArray]:
        owner = type(self).__name__
        offset = check_real(owner, "offset", self.offset)
        check_real(owner, "threshold", self.threshold, low=offset)
        if self.sigma2 is not None:
            check_real(owner, "sigma2", self.sigma2, low=0.0)
        check_choice(owner, "predictive", self.predictive, ("gebraeel", "first_passage"))
        _check_threshold_sd(owner, self.threshold_sd)
        check_int(owner, "min_points", self.min_points, low=3)
        if self.trend_significance is not None:
            check_real(owner, "trend_significance", self.trend_significance, low=0.0, high=1.0)
        log_gap = math.log(float(self.threshold) - offset)
        mean = (
            np.array([log_gap - math.log(10.0), 0.0])
            if self.prior_mean is None
            else np.asarray(self.prior_mean, dtype=float)
        )
        cov = (
            np.diag([math.log(10.0) ** 2, 0.01**2])
            if self.prior_cov is None
            else np.asarray(self.prior_cov, dtype=float)
        )
        if mean.shape != (2,) or not np.all(np.isfinite(mean)):
            raise InvalidParameterError(
                f"The 'prior_mean' parameter of {owner} must be 2 finite floats (θ′, β′); "
                f"got {self.prior_mean!r} instead."
            )
        if (
            cov.shape != (2, 2)
            or not np.all(np.isfinite(cov))
            or not np.allclose(cov, cov.T)
            or np.any(np.linalg.eigvalsh(cov) <= 0)
        ):
            raise InvalidParameterError(
                f"The 'prior_cov' parameter of {owner} must be a symmetric positive-definite "
                f"2×2 matrix; got {self.prior_cov!r} instead."
            )
        return mean, cov

    def fit(self, t: ArrayLike, y: ArrayLike) -> ExponentialDegradation:
        """Update the prior with one unit's signal.

        Parameters
        ----------
        t : array_like of shape (n,)
            Hours since the unit entered service, strictly increasing, > 0.
        y : array_like of shape (n,)
            Signal values, each > ``offset``.
        """
        owner = type(self).__name__
        reset_fitted(self)
        m0, C0 = self._check_params()
        t_arr, y_arr = as_series(t, y, owner=owner)
        n = t_arr.size
        _check_min_points(owner, n, self.min_points)
        phi = float(self.offset)
        if np.any(y_arr <= phi):
            raise ValueError(
                f"{owner}: every signal value must exceed the offset φ = {phi:g}; the smallest "
                f"is {y_arr.min():g} (lower the offset or use WienerDegradation)"
            )
        L = np.log(y_arr - phi)
        dt = np.diff(t_arr, prepend=0.0)
        dL = np.diff(L)
        span = float(t_arr[-1] - t_arr[0])
        slope = float(L[-1] - L[0]) / span
        estimated = self.sigma2 is None
        s2 = (
            _increment_sigma2(dL, dt[1:], slope, n - 2)
            if estimated
            else max(float(self.sigma2), _SIGMA2_FLOOR)  # type: ignore[arg-type]
        )
        trend_z = _trend_z(L, t_arr, s2, estimated)
        _check_trend(owner, trend_z, self.trend_significance)
        self.trend_z_ = trend_z

        # Whitened regression: first value (1, t1), then increments (0, Δt), each / √(σ²Δt).
        w = 1.0 / np.sqrt(s2 * dt)
        A = np.zeros((n, 2))
        A[0] = (1.0, t_arr[0])
        A[1:, 1] = dt[1:]
        A *= w[:, None]
        z = np.concatenate(([L[0]], dL)) * w
        P0 = np.linalg.inv(C0)
        Pn = P0 + A.T @ A
        Cn = np.linalg.inv(Pn)
        mn = Cn @ (P0 @ m0 + A.T @ z)
        logdet_noise = float(np.sum(np.log(s2 * dt)))
        jacobian = -float(np.sum(L))
        quad = float(z @ z + m0 @ P0 @ m0 - mn @ Pn @ mn)
        self.log_evidence_ = (
            -0.5 * n * _LOG_2PI
            - 0.5 * logdet_noise
            - 0.5 * (np.linalg.slogdet(C0)[1] + np.linalg.slogdet(Pn)[1])
            - 0.5 * quad
            + jacobian
        )
        coef, *_ = np.linalg.lstsq(A, z, rcond=None)
        rss = float(np.sum((z - A @ coef) ** 2))
        self.max_log_likelihood_ = -0.5 * n * _LOG_2PI - 0.5 * logdet_noise - 0.5 * rss + jacobian
        self.n_parameters_ = 3 if estimated else 2
        self.posterior_mean_ = mn
        self.posterior_cov_ = 0.5 * (Cn + Cn.T)
        self.sigma2_ = s2
        self.sigma2_estimated_ = estimated
        self.n_points_ = int(n)
        self.last_time_ = float(t_arr[-1])
        self.last_signal_ = float(y_arr[-1])
        self.last_log_signal_ = float(L[-1])
        self.threshold_crossed_ = self._crossed()
        return self

    def _log_level(self, levels: NDArray) -> NDArray:
        return np.log(levels - float(self.offset))

    def _g(self, s: NDArray | float, log_level: NDArray) -> NDArray:
        mn, C = self.posterior_mean_, self.posterior_cov_
        mean = mn[0] + mn[1] * s
        var = C[0, 0] + C[1, 1] * s * s + 2.0 * C[0, 1] * s + self.sigma2_ * s
        return np.asarray((mean - log_level) / np.sqrt(var))

    def _first_passage_kw(self) -> dict[str, float]:
        return {
            "drift_mean": float(self.posterior_mean_[1]),
            "drift_var": float(self.posterior_cov_[1, 1]),
            "diffusion_var": self.sigma2_,
        }

    def _f0(self, log_level: NDArray) -> tuple[NDArray, NDArray]:
        """Gebraeel CDF at ``tk`` per level, and which levels it already counts as passed."""
        f0 = ndtr(self._g(self.last_time_, log_level))
        return f0, f0 >= _PASSED

    def _cdf_at(self, h: NDArray, levels: NDArray) -> NDArray:
        log_level = self._log_level(levels).reshape((-1,) + (1,) * h.ndim)
        if self.predictive == "first_passage":
            return random_drift_first_passage_cdf(
                h, distance=log_level - self.last_log_signal_, **self._first_passage_kw()
            )
        f0, passed = self._f0(log_level)
        f = ndtr(self._g(self.last_time_ + h, log_level))
        cdf = np.clip((f - f0) / np.where(passed, 1.0, 1.0 - f0), 0.0, 1.0)
        return np.where(passed, 1.0, cdf)

    def _ultimate_at(self, levels: NDArray) -> NDArray:
        log_level = self._log_level(levels)
        if self.predictive == "first_passage":
            return random_drift_failure_probabilities(
                distance=log_level - self.last_log_signal_, **self._first_passage_kw()
            )
        f0, passed = self._f0(log_level)
        f_inf = float(ndtr(self.posterior_mean_[1] / math.sqrt(self.posterior_cov_[1, 1])))
        ultimate = np.clip((f_inf - f0) / np.where(passed, 1.0, 1.0 - f0), 0.0, 1.0)
        return np.where(passed, 1.0, ultimate)

    def to_state(self) -> dict[str, Any]:
        """Return the fitted state as JSON-ready plain values."""
        self._check_fitted()
        return {
            "kind": type(self).__name__,
            "version": STATE_VERSION,
            "params": _plain_params(self),
            "posterior_mean": float_list(self.posterior_mean_),
            "posterior_cov": float_list(self.posterior_cov_),
            "sigma2": self.sigma2_,
            "sigma2_estimated": self.sigma2_estimated_,
            "log_evidence": float(self.log_evidence_),
            "max_log_likelihood": float(self.max_log_likelihood_),
            "n_parameters": self.n_parameters_,
            "n_points": self.n_points_,
            "last_time_h": self.last_time_,
            "last_signal": self.last_signal_,
            "trend_z": float(self.trend_z_),
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> ExponentialDegradation:
        """Rebuild a fitted model from :meth:`to_state` output."""
        check_state(state, cls.__name__)
        obj = cls(**state["params"])
        obj._check_params()
        obj.posterior_mean_ = np.asarray(state["posterior_mean"], dtype=float)
        obj.posterior_cov_ = np.asarray(state["posterior_cov"], dtype=float)
        obj.sigma2_ = float(state["sigma2"])
        obj.sigma2_estimated_ = bool(state["sigma2_estimated"])
        obj.log_evidence_ = float(state["log_evidence"])
        obj.max_log_likelihood_ = float(state["max_log_likelihood"])
        obj.n_parameters_ = int(state["n_parameters"])
        obj.n_points_ = int(state["n_points"])
        obj.last_time_ = float(state["last_time_h"])
        obj.last_signal_ = float(state["last_signal"])
        obj.last_log_signal_ = math.log(obj.last_signal_ - float(obj.offset))
        obj.trend_z_ = float(state["trend_z"])
        obj.threshold_crossed_ = obj._crossed()
        return obj


class WienerDegradation(_DegradationModel):
    """Linear-drift (Wiener) degradation with a normal prior on the drift.

    ``y(t) = x0 + μt + σB(t)`` with ``μ ~ N(m0, s0²)`` a priori; failure is the first passage over
    ``threshold`` ``w``. For a known drift the remaining life from level ``y_k`` is inverse
    Gaussian with mean ``(w − y_k)/μ`` and shape ``(w − y_k)²/σ²``; the posterior of ``μ`` is
    normal in closed form (it depends on the data only through ``(y_k − x0)/t_k``), and the
    predictive first-passage distribution mixes the inverse Gaussian over it in closed form. When
    the drift may be ≤ 0 the distribution is defective: :meth:`failure_probability_ever` < 1 and
    upper quantiles may be ``inf``.

    Parameters
    ----------
    threshold : float
        Failure threshold ``w`` (signal units), above ``initial_level``.
    initial_level : float, default 0.0
        ``x0``: the signal at ``t = 0`` (0 for a health index).
    prior_drift_mean : float or None, default None
        ``m0`` per hour; ``None`` means 0.
    prior_drift_var : float or None, default None
        ``s0²``; ``None`` means ``((w − x0)/100 h)²``: a drift that reaches the threshold in
        100 h is one standard deviation away. :class:`FleetPrior` learns both from histories.
    sigma2 : float or None, default None
        ``σ²`` per hour; ``None`` estimates it from this unit's increments (plug-in).
    threshold_sd : float, default 0.0
        As in :class:`ExponentialDegradation`.
    min_points : int, default 5
    trend_significance : float or None, default 0.05
        As in :class:`ExponentialDegradation`, on the signal itself.

    Attributes
    ----------
    drift_mean_, drift_var_ : float
        Posterior mean and variance of ``μ``.
    sigma2_, sigma2_estimated_, log_evidence_, max_log_likelihood_, n_parameters_,
    last_time_, last_signal_, n_points_, trend_z_, threshold_crossed_
        As in :class:`ExponentialDegradation`.

    References
    ----------
    Chhikara & Folks, *The Inverse Gaussian Distribution*, Marcel Dekker (1989).
    X.-S. Si, W. Wang, C.-H. Hu, D.-H. Zhou, "Remaining useful life estimation — a review on the
    statistical data driven approaches", Eur. J. Oper. Res. 213 (2011) 1–14 (from memory).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> t = np.arange(10.0, 410.0, 10.0)
    >>> y = 0.002 * t + 0.01 * np.cumsum(rng.normal(0, np.sqrt(10.0), t.size))
    >>> model = WienerDegradation(threshold=1.0).fit(t, y)
    >>> round(model.drift_mean_, 4)
    0.0018
    """

    def __init__(
        self,
        *,
        threshold: float,
        initial_level: float = 0.0,
        prior_drift_mean: float | None = None,
        prior_drift_var: float | None = None,
        sigma2: float | None = None,
        threshold_sd: float = 0.0,
        min_points: int = 5,
        trend_significance: float | None = 0.05,
    ) -> None:
        self.threshold = threshold
        self.initial_level = initial_level
        self.prior_drift_mean = prior_drift_mean
        self.prior_drift_var = prior_drift_var
        self.sigma2 = sigma2
        self.threshold_sd = threshold_sd
        self.min_points = min_points
        self.trend_significance = trend_significance

    def _check_params(self) -> tuple[float, float]:
        owner = type(self).__name__
        x0 = check_real(owner, "initial_level", self.initial_level)
        w = check_real(owner, "threshold", self.threshold, low=x0)
        if self.sigma2 is not None:
            check_real(owner, "sigma2", self.sigma2, low=0.0)
        _check_threshold_sd(owner, self.threshold_sd)
        check_int(owner, "min_points", self.min_points, low=3)
        if self.trend_significance is not None:
            check_real(owner, "trend_significance", self.trend_significance, low=0.0, high=1.0)
        m0 = (
            0.0
            if self.prior_drift_mean is None
            else check_real(owner, "prior_drift_mean", self.prior_drift_mean)
        )
        s0 = (
            ((w - x0) / 100.0) ** 2
            if self.prior_drift_var is None
            else check_real(owner, "prior_drift_var", self.prior_drift_var, low=0.0)
        )
        return m0, s0

    def fit(self, t: ArrayLike, y: ArrayLike) -> WienerDegradation:
        """Update the drift prior with one unit's signal (``t`` hours > 0, increasing)."""
        owner = type(self).__name__
        reset_fitted(self)
        m0, s0 = self._check_params()
        t_arr, y_arr = as_series(t, y, owner=owner)
        n = t_arr.size
        _check_min_points(owner, n, self.min_points)
        x0 = float(self.initial_level)
        dt = np.diff(t_arr, prepend=0.0)
        dy = np.diff(y_arr, prepend=x0)
        span = float(t_arr[-1] - t_arr[0])
        slope = float(y_arr[-1] - y_arr[0]) / span
        estimated = self.sigma2 is None
        s2 = (
            _increment_sigma2(dy[1:], dt[1:], slope, n - 2)
            if estimated
            else max(float(self.sigma2), _SIGMA2_FLOOR)  # type: ignore[arg-type]
        )
        trend_z = _trend_z(y_arr, t_arr, s2, estimated)
        _check_trend(owner, trend_z, self.trend_significance)
        self.trend_z_ = trend_z

        w = 1.0 / np.sqrt(s2 * dt)
        a = dt * w
        z = dy * w
        precision = 1.0 / s0 + float(a @ a)
        mean = (m0 / s0 + float(a @ z)) / precision
        logdet_noise = float(np.sum(np.log(s2 * dt)))
        quad = float(z @ z) + m0 * m0 / s0 - mean * mean * precision
        self.log_evidence_ = (
            -0.5 * n * _LOG_2PI - 0.5 * logdet_noise - 0.5 * math.log(s0 * precision) - 0.5 * quad
        )
        mu_hat = float(a @ z) / float(a @ a)
        rss = float(np.sum((z - a * mu_hat) ** 2))
        self.max_log_likelihood_ = -0.5 * n * _LOG_2PI - 0.5 * logdet_noise - 0.5 * rss
        self.n_parameters_ = 2 if estimated else 1
        self.drift_mean_ = float(mean)
        self.drift_var_ = float(1.0 / precision)
        self.sigma2_ = s2
        self.sigma2_estimated_ = estimated
        self.n_points_ = int(n)
        self.last_time_ = float(t_arr[-1])
        self.last_signal_ = float(y_arr[-1])
        self.threshold_crossed_ = self._crossed()
        return self

    def _passage(self) -> dict[str, float]:
        return {
            "drift_mean": self.drift_mean_,
            "drift_var": self.drift_var_,
            "diffusion_var": self.sigma2_,
        }

    def _cdf_at(self, h: NDArray, levels: NDArray) -> NDArray:
        distance = levels.reshape((-1,) + (1,) * h.ndim) - self.last_signal_
        return random_drift_first_passage_cdf(h, distance=distance, **self._passage())

    def _ultimate_at(self, levels: NDArray) -> NDArray:
        return random_drift_failure_probabilities(
            distance=levels - self.last_signal_, **self._passage()
        )

    def to_state(self) -> dict[str, Any]:
        """Return the fitted state as JSON-ready plain values."""
        self._check_fitted()
        return {
            "kind": type(self).__name__,
            "version": STATE_VERSION,
            "params": _plain_params(self),
            "drift_mean": self.drift_mean_,
            "drift_var": self.drift_var_,
            "sigma2": self.sigma2_,
            "sigma2_estimated": self.sigma2_estimated_,
            "log_evidence": float(self.log_evidence_),
            "max_log_likelihood": float(self.max_log_likelihood_),
            "n_parameters": self.n_parameters_,
            "n_points": self.n_points_,
            "last_time_h": self.last_time_,
            "last_signal": self.last_signal_,
            "trend_z": float(self.trend_z_),
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> WienerDegradation:
        """Rebuild a fitted model from :meth:`to_state` output."""
        check_state(state, cls.__name__)
        obj = cls(**state["params"])
        obj._check_params()
        for key in ("drift_mean", "drift_var", "sigma2", "log_evidence", "max_log_likelihood"):
            setattr(obj, f"{key}_", float(state[key]))
        obj.sigma2_estimated_ = bool(state["sigma2_estimated"])
        obj.n_parameters_ = int(state["n_parameters"])
        obj.n_points_ = int(state["n_points"])
        obj.last_time_ = float(state["last_time_h"])
        obj.last_signal_ = float(state["last_signal"])
        obj.trend_z_ = float(state["trend_z"])
        obj.threshold_crossed_ = obj._crossed()
        return obj


class LinearTrendExtrapolation(_DegradationModel):
    """Naive benchmark: a straight line through the recent window, extrapolated to the threshold.

    Ordinary least squares on the last ``window_points`` observations; the time to failure is
    where the line reaches ``threshold``. It carries no uncertainty: the CDF is a step at that
    time and all quantiles are equal. Use it to judge whether the probabilistic models earn
    their keep, not for decisions.

    Parameters
    ----------
    threshold : float
    window_points : int, default 20
    min_points : int, default 5
        Fewer points, or a slope ≤ 0, raise :class:`NotEnoughDataError`.

    Attributes
    ----------
    slope_, intercept_ : float
        Per hour, and at ``t = 0``.
    time_to_failure_ : float
        Hours after the last observation (0 when the line is already past the threshold).
    last_time_, last_signal_, n_points_, threshold_crossed_
    """

    def __init__(self, *, threshold: float, window_points: int = 20, min_points: int = 5) -> None:
        self.threshold = threshold
        self.window_points = window_points
        self.min_points = min_points

    def _check_params(self) -> None:
        owner = type(self).__name__
        check_real(owner, "threshold", self.threshold)
        check_int(owner, "min_points", self.min_points, low=2)
        check_int(owner, "window_points", self.window_points, low=self.min_points)

    def fit(self, t: ArrayLike, y: ArrayLike) -> LinearTrendExtrapolation:
        """Fit the line to the last ``window_points`` points of one unit's signal."""
        owner = type(self).__name__
        reset_fitted(self)
        self._check_params()
        t_arr, y_arr = as_series(t, y, owner=owner)
        _check_min_points(owner, t_arr.size, self.min_points)
        tw, yw = t_arr[-self.window_points :], y_arr[-self.window_points :]
        slope, intercept = np.polyfit(tw, yw, 1)
        if slope <= 0:
            raise NotEnoughDataError(
                "no_degradation_detected",
                f"{owner}: the recent trend is flat or falling (slope {slope:.3g} per hour)",
            )
        self.slope_ = float(slope)
        self.intercept_ = float(intercept)
        self.last_time_ = float(t_arr[-1])
        self.last_signal_ = float(y_arr[-1])
        self.n_points_ = int(t_arr.size)
        crossing = (float(self.threshold) - self.intercept_) / self.slope_
        self.time_to_failure_ = max(crossing - self.last_time_, 0.0)
        self.threshold_crossed_ = bool(y_arr[-1] >= float(self.threshold))
        return self

    def _cdf(self, h: NDArray) -> NDArray:
        return (h >= self.time_to_failure_).astype(float)

    def _ultimate(self) -> float:
        return 1.0

    def _quantiles(self, qs: NDArray, ultimate: float) -> NDArray:
        return np.full_like(qs, self.time_to_failure_)

    def to_state(self) -> dict[str, Any]:
        """Return the fitted state as JSON-ready plain values."""
        self._check_fitted()
        return {
            "kind": type(self).__name__,
            "version": STATE_VERSION,
            "params": _plain_params(self),
            "slope": self.slope_,
            "intercept": self.intercept_,
            "last_time_h": self.last_time_,
            "last_signal": self.last_signal_,
            "n_points": self.n_points_,
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> LinearTrendExtrapolation:
        """Rebuild a fitted model from :meth:`to_state` output."""
        check_state(state, cls.__name__)
        obj = cls(**state["params"])
        obj._check_params()
        obj.slope_ = float(state["slope"])
        obj.intercept_ = float(state["intercept"])
        obj.last_time_ = float(state["last_time_h"])
        obj.last_signal_ = float(state["last_signal"])
        obj.n_points_ = int(state["n_points"])
        crossing = (float(obj.threshold) - obj.intercept_) / obj.slope_
        obj.time_to_failure_ = max(crossing - obj.last_time_, 0.0)
        obj.threshold_crossed_ = bool(obj.last_signal_ >= float(obj.threshold))
        return obj


def _plain_params(est: BaseEstimator) -> dict[str, Any]:
    """get_params() with arrays turned into lists and numpy scalars into floats."""
    out: dict[str, Any] = {}
    for key, value in est.get_params().items():
        if value is None or isinstance(value, str | bool):
            out[key] = value
        elif isinstance(value, int | np.integer) and not isinstance(value, bool):
            out[key] = int(value)
        elif isinstance(value, float | np.floating):
            out[key] = float(value)
        else:
            out[key] = float_list(value)
    return out


def _deconvolved_cov(observed: NDArray, noise: NDArray) -> NDArray:
    """Spread of the true parameters: observed covariance minus mean estimation noise.

    Eigenvalues are kept at no less than 5 % of the observed ones so the prior stays positive
    definite (and never claims more certainty than the fleet shows) when noise dominates.
    """
    observed = 0.5 * (observed + observed.T)
    vals, vecs = np.linalg.eigh(observed - noise)
    floor = 0.05 * np.linalg.eigvalsh(observed).min()
    vals = np.maximum(vals, max(floor, _SIGMA2_FLOOR))
    return np.asarray((vecs * vals) @ vecs.T)


def _spread_median(estimates: ArrayLike, noise_var: ArrayLike) -> float:
    """Posterior median of the unit-to-unit variance ``τ²`` of one parameter.

    Per-unit estimates ``b_i ~ N(μ, τ² + v_i)`` with known estimation noise ``v_i``, flat priors
    on ``μ`` and on ``τ``: ``p(τ | b) ∝ V_μ^½ Π (τ² + v_i)^-½ exp(-Σ (b_i - μ̂)² / 2(τ² + v_i))``
    (Gelman, Carlin, Stern & Rubin, "Bayesian Data Analysis", the hierarchical normal model,
    from memory). Unlike the moment estimate (sample variance minus mean noise), it does not
    collapse to zero when a few units happen to agree more closely than their noise: with three
    units of equal noise ``v`` and identical estimates it is ``v`` itself.
    """
    b = np.asarray(estimates, dtype=float)
    v = np.maximum(np.asarray(noise_var, dtype=float), _SIGMA2_FLOOR)
    scale = math.sqrt(float(np.var(b)) + float(np.mean(v)))
    if scale <= 0.0 or not math.isfinite(scale):
        return 0.0
    phi = np.linspace(0.0, 0.5 * math.pi, 2001)[:-1]  # τ = scale·tan φ spans [0, ∞)
    tau2 = (scale * np.tan(phi))[:, None] ** 2
    w = 1.0 / (tau2 + v[None, :])
    mu = (w * b).sum(axis=1) / w.sum(axis=1)
    log_post = (
        -0.5 * np.log(w.sum(axis=1))
        + 0.5 * np.log(w).sum(axis=1)
        - 0.5 * (w * (b[None, :] - mu[:, None]) ** 2).sum(axis=1)
        + 2.0 * np.log(1.0 / np.cos(phi))  # dτ/dφ = scale·sec²φ
    )
    dens = np.exp(log_post - log_post.max())
    cdf = np.cumsum(dens)
    k = int(np.searchsorted(cdf, 0.5 * cdf[-1]))
    return float(tau2[min(k, tau2.shape[0] - 1), 0])


def _with_spread(cov: NDArray, variances: Sequence[float]) -> NDArray:
    """``cov`` with its variances replaced, its correlation kept (clipped to ±0.95)."""
    sd_old = np.sqrt(np.maximum(np.diag(cov), _SIGMA2_FLOOR))
    corr = np.clip(cov / np.outer(sd_old, sd_old), -0.95, 0.95)
    np.fill_diagonal(corr, 1.0)
    sd = np.sqrt(np.maximum(np.asarray(variances, dtype=float), _SIGMA2_FLOOR))
    return np.asarray(corr * np.outer(sd, sd))


class FleetPrior(BaseEstimator):
    """Learn degradation-model priors from past run-to-failure histories.

    For each history, the data-only estimates are taken (exponential model: ``β̂′`` from the
    log-signal increments, ``θ̂′ = L(t1) − β̂′t1``; Wiener model: ``μ̂ = (y_k − x0)/t_k``), and
    ``σ²`` is pooled from every unit's increments, as in Gebraeel et al. (2005). The prior mean is
    the estimates' mean; the prior covariance is their sample covariance minus the average
    estimation noise of one unit's estimate (method of moments), so short, noisy histories do not
    inflate the unit-to-unit spread; each parameter's variance is then the posterior median of
    its unit-to-unit variance under flat priors (:func:`_spread_median`), so a few units that
    happen to agree closely do not make a point-mass prior that overrules every new unit's own
    data (the moment estimate did that on a three-unit simulated fleet: prior SD of the rate
    0.1 % of its mean, where the units' rates spread by about 10 %). With
    fewer than ``min_units`` usable histories nothing is learned (``source_ == "default"``) and the
    models fall back to their documented default priors and estimate ``σ²`` per unit.

    Parameters
    ----------
    offset : float, default 0.0
        ``φ`` of the exponential model. A history with any value at or below it is left out of
        the exponential prior (it still counts for the Wiener prior); see
        ``n_exponential_units_``.
    initial_level : float, default 0.0
        ``x0`` of the Wiener model.
    min_units : int, default 3

    Attributes
    ----------
    source_ : {"fleet", "default"}
    n_units_ : int
    n_exponential_units_ : int
        Histories usable by the exponential model (all values above ``offset``).
    exponential_mean_, exponential_cov_ : ndarray or None
        Prior of ``(θ′, β′)``.
    exponential_sigma2_ : float or None
    wiener_drift_mean_, wiener_drift_var_, wiener_sigma2_ : float or None

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> t = np.arange(10.0, 500.0, 10.0)
    >>> runs = [(t, np.exp(-3.0 + b * t)) for b in rng.normal(0.006, 0.001, 5)]
    >>> prior = FleetPrior().fit(runs)
    >>> prior.source_, round(float(prior.exponential_mean_[0]), 3)
    ('fleet', -3.0)
    """

    def __init__(
        self, *, offset: float = 0.0, initial_level: float = 0.0, min_units: int = 3
    ) -> None:
        self.offset = offset
        self.initial_level = initial_level
        self.min_units = min_units

    def fit(self, histories: Sequence[tuple[ArrayLike, ArrayLike]]) -> FleetPrior:
        """Learn the priors from a list of ``(t, y)`` run-to-failure histories (t in hours)."""
        owner = type(self).__name__
        reset_fitted(self)
        phi = check_real(owner, "offset", self.offset)
        x0 = check_real(owner, "initial_level", self.initial_level)
        check_int(owner, "min_units", self.min_units, low=2)
        exp_params, exp_spans, exp_ss, exp_dof = [], [], 0.0, 0
        drifts, ages, w_ss, w_dof = [], [], 0.0, 0
        for i, item in enumerate(histories):
            t_arr, y_arr = as_series(*item, owner=f"{owner} history {i}")
            if t_arr.size < 3:
                raise ValueError(f"{owner}: history {i} has {t_arr.size} points; at least 3 needed")
            dt = np.diff(t_arr)
            span = float(t_arr[-1] - t_arr[0])
            if np.all(y_arr > phi):
                L = np.log(y_arr - phi)
                beta = float(L[-1] - L[0]) / span
                exp_params.append((float(L[0]) - beta * float(t_arr[0]), beta))
                exp_spans.append((float(t_arr[0]), span))
                exp_ss += float(np.sum((np.diff(L) - beta * dt) ** 2 / dt))
                exp_dof += t_arr.size - 2
            mu = (float(y_arr[-1]) - x0) / float(t_arr[-1])
            drifts.append(mu)
            ages.append(float(t_arr[-1]))
            w_ss += float(np.sum((np.diff(y_arr) - mu * dt) ** 2 / dt))
            w_dof += t_arr.size - 1
        self.n_units_ = len(drifts)
        self.n_exponential_units_ = len(exp_params)
        self.exponential_mean_ = self.exponential_cov_ = self.exponential_sigma2_ = None
        self.wiener_drift_mean_ = self.wiener_drift_var_ = self.wiener_sigma2_ = None
        self.source_ = "default"
        if len(exp_params) >= self.min_units:
            params = np.asarray(exp_params)
            s2 = max(exp_ss / exp_dof, _SIGMA2_FLOOR)
            # Estimation noise of (θ̂, β̂) for Brownian error: θ̂ = L1 − β̂t1, var β̂ = σ²/span.
            noise = np.zeros((2, 2))
            for t1, span in exp_spans:
                vb = s2 / span
                noise += np.array([[s2 * t1 + t1 * t1 * vb, -t1 * vb], [-t1 * vb, vb]])
            self.exponential_mean_ = params.mean(axis=0)
            moments = _deconvolved_cov(
                np.atleast_2d(np.cov(params, rowvar=False)), noise / len(exp_spans)
            )
            v_theta = [s2 * t1 + t1 * t1 * s2 / span for t1, span in exp_spans]
            v_beta = [s2 / span for _, span in exp_spans]
            self.exponential_cov_ = _with_spread(
                moments,
                [_spread_median(params[:, 0], v_theta), _spread_median(params[:, 1], v_beta)],
            )
            self.exponential_sigma2_ = s2
            self.source_ = "fleet"
        if len(drifts) >= self.min_units:
            s2 = max(w_ss / w_dof, _SIGMA2_FLOOR)
            self.wiener_drift_mean_ = float(np.mean(drifts))
            self.wiener_drift_var_ = max(
                _spread_median(np.asarray(drifts), np.array([s2 / age for age in ages])),
                _SIGMA2_FLOOR,
            )
            self.wiener_sigma2_ = s2
            self.source_ = "fleet"
        return self

    def exponential_params(self) -> dict[str, Any]:
        """Keyword arguments for :class:`ExponentialDegradation` (``None``: model default)."""
        check_is_fitted(self, "source_")
        return {
            "offset": float(self.offset),
            "prior_mean": None
            if self.exponential_mean_ is None
            else float_list(self.exponential_mean_),
            "prior_cov": None
            if self.exponential_cov_ is None
            else float_list(self.exponential_cov_),
            "sigma2": self.exponential_sigma2_,
        }

    def wiener_params(self) -> dict[str, Any]:
        """Keyword arguments for :class:`WienerDegradation` (``None``: model default)."""
        check_is_fitted(self, "source_")
        return {
            "initial_level": float(self.initial_level),
            "prior_drift_mean": self.wiener_drift_mean_,
            "prior_drift_var": self.wiener_drift_var_,
            "sigma2": self.wiener_sigma2_,
        }

    def to_state(self) -> dict[str, Any]:
        """Return the fitted state as JSON-ready plain values."""
        check_is_fitted(self, "source_")
        return {
            "kind": type(self).__name__,
            "version": STATE_VERSION,
            "params": _plain_params(self),
            "source": self.source_,
            "n_units": self.n_units_,
            "n_exponential_units": self.n_exponential_units_,
            "exponential": self.exponential_params(),
            "wiener": self.wiener_params(),
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> FleetPrior:
        """Rebuild a fitted prior from :meth:`to_state` output."""
        check_state(state, cls.__name__)
        obj = cls(**state["params"])
        obj.source_ = str(state["source"])
        obj.n_units_ = int(state["n_units"])
        obj.n_exponential_units_ = int(state["n_exponential_units"])
        e, w = state["exponential"], state["wiener"]
        obj.exponential_mean_ = None if e["prior_mean"] is None else np.asarray(e["prior_mean"])
        obj.exponential_cov_ = None if e["prior_cov"] is None else np.asarray(e["prior_cov"])
        obj.exponential_sigma2_ = e["sigma2"]
        obj.wiener_drift_mean_ = w["prior_drift_mean"]
        obj.wiener_drift_var_ = w["prior_drift_var"]
        obj.wiener_sigma2_ = w["sigma2"]
        return obj


@dataclass(frozen=True)
class CandidateResult:
    """One row of a :class:`ModelComparison`."""

    label: str
    status: str  # "fitted" or the NotEnoughDataError reason / "not_applicable"
    log_evidence: float | None = None
    bic: float | None = None
    weight: float | None = None
    detail: str = ""


@dataclass(frozen=True)
class ModelComparison:
    """Outcome of :func:`select_model`: every candidate's score and which one won."""

    criterion: str
    chosen: str
    candidates: list[CandidateResult] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return {
            "criterion": self.criterion,
            "chosen": self.chosen,
            "candidates": [c.__dict__.copy() for c in self.candidates],
        }


def select_model(
    candidates: Sequence[_DegradationModel],
    t: ArrayLike,
    y: ArrayLike,
    *,
    criterion: str = "log_evidence",
) -> tuple[_DegradationModel, ModelComparison]:
    """Fit every candidate to one unit's signal and keep the one the data support best.

    Parameters
    ----------
    candidates : sequence of unfitted ExponentialDegradation / WienerDegradation
        Cloned before fitting; the originals are untouched.
    t, y : array_like
        The unit's signal (t in hours, > 0, increasing).
    criterion : {"log_evidence", "bic"}, default "log_evidence"
        ``"log_evidence"``: the highest log marginal likelihood (Bayes factor with equal prior
        model probabilities; ``weight`` is the posterior model probability). ``"bic"``: the lowest
        ``-2 max log L + k ln n`` (weights from ``exp(-BIC/2)``).

    Returns
    -------
    model : fitted estimator
    comparison : ModelComparison

    Raises
    ------
    NotEnoughDataError
        When no candidate could be fitted (``reason`` of the first candidate's failure).
    """
    check_choice("select_model", "criterion", criterion, ("log_evidence", "bic"))
    if not candidates:
        raise ValueError("select_model: candidates must not be empty")
    rows: list[dict[str, Any]] = []
    fitted: list[_DegradationModel | None] = []
    first_error: NotEnoughDataError | None = None
    for i, cand in enumerate(candidates):
        if not isinstance(cand, ExponentialDegradation | WienerDegradation):
            raise TypeError(
                f"select_model: candidate {i} ({type(cand).__name__}) has no evidence; use "
                "ExponentialDegradation or WienerDegradation"
            )
        cand._check_params()
        label = f"{type(cand).__name__}#{i}"
        model = clone(cand)
        try:
            model.fit(t, y)
        except NotEnoughDataError as exc:
            first_error = first_error or exc
            rows.append({"label": label, "status": exc.reason, "detail": exc.detail})
            fitted.append(None)
            continue
        except ValueError as exc:
            rows.append({"label": label, "status": "not_applicable", "detail": str(exc)})
            fitted.append(None)
            continue
        n = model.n_points_
        bic = -2.0 * model.max_log_likelihood_ + model.n_parameters_ * math.log(n)
        rows.append(
            {"label": label, "status": "fitted", "log_evidence": model.log_evidence_, "bic": bic}
        )
        fitted.append(model)
    scores = np.array(
        [
            (r["log_evidence"] if criterion == "log_evidence" else -0.5 * r["bic"])
            if r["status"] == "fitted"
            else -np.inf
            for r in rows
        ]
    )
    if not np.any(np.isfinite(scores)):
        if first_error is not None:
            raise NotEnoughDataError(first_error.reason, first_error.detail)
        raise NotEnoughDataError(
            "not_applicable", "; ".join(f"{r['label']}: {r['detail']}" for r in rows)
        )
    best = int(np.argmax(scores))
    weights = np.exp(scores - scores[best])
    weights /= weights.sum()
    results = [
        CandidateResult(
            label=str(r["label"]),
            status=str(r["status"]),
            log_evidence=None if "log_evidence" not in r else float(r["log_evidence"]),
            bic=None if "bic" not in r else float(r["bic"]),
            weight=float(weights[i]) if r["status"] == "fitted" else None,
            detail=str(r.get("detail", "")),
        )
        for i, r in enumerate(rows)
    ]
    chosen = fitted[best]
    assert chosen is not None
    return chosen, ModelComparison(
        criterion=criterion, chosen=rows[best]["label"], candidates=results
    )


def _finite_or_none(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


@dataclass(frozen=True)
class TimeToFailureForecast:
    """A time-to-failure forecast (hours after ``last_time_h``); ``None`` = not reached.

    Attributes
    ----------
    model : str
    last_time_h : float
        Age of the unit at its last observation, hours.
    quantiles_h : dict of float to float or None
        Time-to-failure quantiles; ``None`` where the model never reaches that probability.
    prob_failure_within : dict of float to float
        Horizon in hours → probability of failure within it.
    failure_probability_ever : float
    latest_maintenance_h : float or None
        Hours by which failure probability reaches the requested risk (``None``: never / not
        requested).
    advisory : str
    """

    model: str
    last_time_h: float
    quantiles_h: dict[float, float | None]
    prob_failure_within: dict[float, float]
    failure_probability_ever: float
    latest_maintenance_h: float | None
    advisory: str = ADVISORY

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (mapping keys as strings, e.g. ``"0.5"``, ``"168"``)."""
        return {
            "kind": "forecast",
            "model": self.model,
            "last_time_h": self.last_time_h,
            "quantiles_h": {f"{q:g}": v for q, v in self.quantiles_h.items()},
            "prob_failure_within": {f"{h:g}": p for h, p in self.prob_failure_within.items()},
            "failure_probability_ever": self.failure_probability_ever,
            "latest_maintenance_h": self.latest_maintenance_h,
            "advisory": self.advisory,
        }


@dataclass(frozen=True)
class NoForecast:
    """No forecast: the data do not support one yet (see ``reason``)."""

    reason: str
    detail: str
    n_points: int
    advisory: str = ADVISORY

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return {
            "kind": "no_forecast",
            "reason": self.reason,
            "detail": self.detail,
            "n_points": self.n_points,
            "advisory": self.advisory,
        }


def forecast_time_to_failure(
    model: _DegradationModel,
    t: ArrayLike,
    y: ArrayLike,
    *,
    quantiles: Sequence[float] = (0.1, 0.5, 0.9),
    horizons_h: Sequence[float] = (24.0, 168.0, 720.0),
    risk: float | None = 0.1,
) -> TimeToFailureForecast | NoForecast:
    """Fit a clone of ``model`` to one unit's signal and summarise its forecast.

    Returns :class:`NoForecast` (never a made-up number) when there are too few points or no
    degradation is detected. Bad hyper-parameters or bad input still raise.
    """
    fitted = clone(model)
    try:
        fitted.fit(t, y)
    except NotEnoughDataError as exc:
        return NoForecast(reason=exc.reason, detail=exc.detail, n_points=int(np.size(t)))
    qs = fitted.time_to_failure_quantiles(quantiles)
    return TimeToFailureForecast(
        model=type(fitted).__name__,
        last_time_h=fitted.last_time_,
        quantiles_h={float(q): _finite_or_none(v) for q, v in zip(quantiles, qs, strict=True)},
        prob_failure_within={float(h): fitted.prob_failure_within(h) for h in horizons_h},
        failure_probability_ever=fitted.failure_probability_ever(),
        latest_maintenance_h=None
        if risk is None
        else _finite_or_none(fitted.latest_maintenance_time(risk)),
    )

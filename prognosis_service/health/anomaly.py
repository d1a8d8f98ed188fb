"""Anomaly scores against a healthy baseline: Hotelling's T² and a per-regime baseline."""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats
from sklearn.base import BaseEstimator, clone
from sklearn.covariance import LedoitWolf, MinCovDet
from sklearn.utils.validation import check_is_fitted

from prognosis_service.health._checks import (
    STATE_VERSION,
    InvalidParameterError,
    NotEnoughDataError,
    as_matrix,
    check_choice,
    check_int,
    check_real,
    check_state,
    float_list,
    reset_fitted,
)
from prognosis_service.health.regimes import RegimeBinning

__all__ = [
    "BaselineAssessment",
    "HotellingT2",
    "RegimeBaseline",
    "robust_centre_scale",
    "t2_control_limit",
]

_PHASES = ("I", "II")
_SCREEN_QUANTILE = 0.999  # rows beyond this chi² quantile of the MCD distance are screened out
_MAD_TO_SIGMA = 1.482602218505602  # 1 / Phi^-1(3/4): MAD of a normal sample -> its sigma


def t2_control_limit(m: int, p: int, *, alpha: float = 0.01, phase: str = "II") -> float:
    """Upper control limit of Hotelling's T² for individual observations.

    Parameters
    ----------
    m : int
        Number of baseline observations the mean and covariance were estimated from.
    p : int
        Number of indicators (dimensions).
    alpha : float, default 0.01
        False-alarm probability per observation, in (0, 1).
    phase : {"II", "I"}, default "II"
        ``"II"`` for new observations scored against the baseline:
        ``p(m+1)(m-1)/(m² - mp) · F(1-α; p, m-p)``. ``"I"`` for the baseline observations
        themselves: ``(m-1)²/m · Beta(1-α; p/2, (m-p-1)/2)``.

    Returns
    -------
    float
        The limit (dimensionless, same scale as T²).

    References
    ----------
    NIST/SEMATECH e-Handbook of Statistical Methods, section 6.5.4.3, "Hotelling's T squared".

    Examples
    --------
    >>> round(t2_control_limit(50, 3, alpha=0.01, phase="II"), 3)
    13.488
    >>> round(t2_control_limit(50, 3, alpha=0.01, phase="I"), 3)
    10.399
    """
    owner = "t2_control_limit"
    check_int(owner, "p", p, low=1)
    check_int(owner, "m", m, low=p + 2)
    check_real(owner, "alpha", alpha, low=0.0, high=1.0)
    check_choice(owner, "phase", phase, _PHASES)
    if phase == "II":
        factor = p * (m + 1) * (m - 1) / (m * m - m * p)
        return float(factor * stats.f.ppf(1.0 - alpha, p, m - p))
    return float((m - 1) ** 2 / m * stats.beta.ppf(1.0 - alpha, p / 2.0, (m - p - 1) / 2.0))


def robust_centre_scale(X: NDArray) -> tuple[NDArray, NDArray]:
    """Column-wise median and normal-consistent MAD of ``X`` (n_samples, n_features).

    A zero MAD (a column that barely moves in the baseline) is replaced by the column's standard
    deviation, and if that is zero too, by ``1e-9 · max(|median|, 1)``, so scores stay finite.
    """
    centre = np.median(X, axis=0)
    scale = _MAD_TO_SIGMA * np.median(np.abs(X - centre), axis=0)
    std = X.std(axis=0)
    scale = np.where(scale > 0, scale, std)
    floor = 1e-9 * np.maximum(np.abs(centre), 1.0)
    return centre, np.maximum(scale, floor)


class HotellingT2(BaseEstimator):
    """Hotelling's T² anomaly score against a healthy baseline.

    ``T²(x) = (x - m)ᵀ S⁻¹ (x - m)`` with a robust location ``m`` and covariance ``S`` of the
    baseline indicator vectors. With at least ``min_robust_samples`` baseline rows the estimate is
    the reweighted minimum covariance determinant (scikit-learn ``MinCovDet``), which keeps a few
    unnoticed faulty or badly measured rows from inflating the covariance: rows whose robust
    distance from the minimum covariance determinant estimate (scikit-learn ``MinCovDet``) exceeds
    the 0.999 quantile of χ²(p) are screened out, and the classical mean and covariance of the
    remaining ``m`` rows are used, so the F and Beta limits (which assume classical estimates
    from a normal sample) keep their false-alarm rate. The MCD itself is not used as the
    covariance because its small-sample bias inflates the false-alarm rate. With fewer rows than
    ``min_robust_samples`` the MCD is unstable, so the sample mean and the Ledoit–Wolf shrunk
    covariance (``sklearn.covariance.LedoitWolf``) of all rows are used instead (shrinkage keeps
    the inverse stable when ``m`` is close to ``p``). The choice is recorded in ``estimator_``.

    Parameters
    ----------
    alpha : float, default 0.01
        False-alarm probability per observation used by :meth:`predict`, in (0, 1).
    phase : {"II", "I"}, default "II"
        Which limit :meth:`predict` uses (see :func:`t2_control_limit`).
    robust : bool, default True
        Use ``MinCovDet`` when there are enough rows.
    min_robust_samples : int or None, default None
        Fewest rows for the MCD screening; ``None`` means ``max(50, 10·p)``.
    random_state : int, default 0
        Seed of ``MinCovDet`` so fits are reproducible.

    Attributes
    ----------
    location_ : ndarray of shape (p,)
    covariance_ : ndarray of shape (p, p)
    precision_ : ndarray of shape (p, p)
    n_samples_ : int
        Baseline size ``m`` used in the limits (rows kept after screening).
    n_screened_out_ : int
        Rows screened out as outliers.
    n_features_in_ : int
    estimator_ : {"min_cov_det", "ledoit_wolf"}
        ``"min_cov_det"``: classical estimates after MCD screening; ``"ledoit_wolf"``: shrunk.

    References
    ----------
    NIST/SEMATECH e-Handbook of Statistical Methods, section 6.5.4.3.
    Rousseeuw & Van Driessen, "A fast algorithm for the minimum covariance determinant
    estimator", Technometrics 41 (1999) 212–223.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> model = HotellingT2(alpha=0.01).fit(rng.normal(size=(200, 3)))
    >>> bool(model.predict([[0.0, 0.0, 0.0], [6.0, 6.0, 6.0]])[1])
    True
    """

    def __init__(
        self,
        *,
        alpha: float = 0.01,
        phase: str = "II",
        robust: bool = True,
        min_robust_samples: int | None = None,
        random_state: int = 0,
    ) -> None:
        self.alpha = alpha
        self.phase = phase
        self.robust = robust
        self.min_robust_samples = min_robust_samples
        self.random_state = random_state

    def _check_params(self) -> None:
        owner = type(self).__name__
        check_real(owner, "alpha", self.alpha, low=0.0, high=1.0)
        check_choice(owner, "phase", self.phase, _PHASES)
        if not isinstance(self.robust, bool | np.bool_):
            raise InvalidParameterError(
                f"The 'robust' parameter of {owner} must be a bool; got {self.robust!r} instead."
            )
        if self.min_robust_samples is not None:
            check_int(owner, "min_robust_samples", self.min_robust_samples, low=2)
        check_int(owner, "random_state", self.random_state, low=0)

    def fit(self, X: ArrayLike, y: None = None) -> HotellingT2:
        """Estimate the baseline location and covariance from healthy rows.

        Parameters
        ----------
        X : array_like of shape (m, p)
            Healthy baseline indicator vectors, finite; needs ``m >= p + 2``.

        Raises
        ------
        NotEnoughDataError
            With ``reason="too_few_samples"`` when ``m < p + 2``.
        """
        reset_fitted(self)
        self._check_params()
        arr = as_matrix(X, owner=type(self).__name__)
        m, p = arr.shape
        if p == 0:
            raise ValueError("HotellingT2: X must have at least one column")
        if m < p + 2:
            raise NotEnoughDataError(
                "too_few_samples",
                f"HotellingT2 needs at least p + 2 = {p + 2} baseline rows for {p} indicators; "
                f"got {m}",
            )
        min_robust = self.min_robust_samples or max(50, 10 * p)
        estimator = "ledoit_wolf"
        keep = np.ones(m, dtype=bool)
        if self.robust and m >= min_robust:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                mcd = MinCovDet(random_state=self.random_state).fit(arr)
            if np.linalg.matrix_rank(mcd.covariance_) == p:
                keep = mcd.mahalanobis(arr) <= stats.chi2.ppf(_SCREEN_QUANTILE, p)
                if np.count_nonzero(keep) >= p + 2:
                    estimator = "min_cov_det"
                else:
                    keep[:] = True
        if estimator == "min_cov_det":
            kept = arr[keep]
            location = kept.mean(axis=0)
            covariance = np.atleast_2d(np.cov(kept, rowvar=False))
        else:
            lw = LedoitWolf().fit(arr)
            location, covariance = lw.location_, lw.covariance_
        m = int(np.count_nonzero(keep))
        self.location_ = np.asarray(location, dtype=float)
        self.covariance_ = np.asarray(covariance, dtype=float)
        self.precision_ = np.linalg.pinv(self.covariance_, hermitian=True)
        self.n_samples_ = int(m)
        self.n_features_in_ = int(p)
        self.estimator_ = estimator
        self.n_screened_out_ = int(arr.shape[0] - m)
        return self

    def score_samples(self, X: ArrayLike) -> NDArray:
        """Return T² of each row (0 at the baseline location, grows with the anomaly)."""
        return self._t2(self._departures(X))

    def _departures(self, X: ArrayLike) -> NDArray:
        check_is_fitted(self, "precision_")
        arr = as_matrix(X, owner=type(self).__name__, n_columns=self.n_features_in_)
        return arr - self.location_

    def _t2(self, d: NDArray) -> NDArray:
        return np.einsum("ij,jk,ik->i", d, self.precision_, d)

    def signed_score_samples(self, X: ArrayLike) -> NDArray:
        """Return T² of each row, negative where the row departs towards lower values.

        The sign is that of the sum of the row's standardised departures from the baseline,
        ``sum((x - location) / std)``. For indicators that rise as an asset degrades (health
        indices), a row whose T² is over the limit but whose departures sum below zero is
        healthier than its baseline on balance, and a one-sided test does not call it an
        anomaly: "T² over its limit and the sum positive" is Follmann's one-sided test. Under
        the baseline (a symmetric distribution) the sum's sign is independent of T², so with
        the α limit the test's false-alarm rate is α / 2. Follmann uses the 2α limit to keep
        the rate at α; callers choose the limit (in service most false alarms come from slow
        drift rather than the baseline's noise, and the 2α limit raised them).

        References
        ----------
        Follmann, "A simple multivariate test for one-sided alternatives", Journal of the
        American Statistical Association 91 (1996) 854–861.
        """
        d = self._departures(X)
        t2 = self._t2(d)
        std = np.sqrt(np.clip(np.diag(self.covariance_), np.finfo(float).tiny, None))
        return np.where((d / std).sum(axis=1) < 0.0, -t2, t2)

    def control_limit(self, alpha: float | None = None, phase: str | None = None) -> float:
        """Return the T² upper control limit for this baseline's ``m`` and ``p``.

        ``alpha`` and ``phase`` default to the estimator's parameters.
        """
        check_is_fitted(self, "precision_")
        return t2_control_limit(
            self.n_samples_,
            self.n_features_in_,
            alpha=self.alpha if alpha is None else alpha,
            phase=self.phase if phase is None else phase,
        )

    def predict(self, X: ArrayLike) -> NDArray:
        """Return ``True`` for rows whose T² is above :meth:`control_limit`."""
        return self.score_samples(X) > self.control_limit()

    def to_state(self) -> dict[str, Any]:
        """Return the fitted state as JSON-ready plain values."""
        check_is_fitted(self, "precision_")
        return {
            "kind": type(self).__name__,
            "version": STATE_VERSION,
            "params": {
                "alpha": float(self.alpha),
                "phase": str(self.phase),
                "robust": bool(self.robust),
                "min_robust_samples": None
                if self.min_robust_samples is None
                else int(self.min_robust_samples),
                "random_state": int(self.random_state),
            },
            "location": float_list(self.location_),
            "covariance": float_list(self.covariance_),
            "n_samples": self.n_samples_,
            "estimator": self.estimator_,
            "n_screened_out": self.n_screened_out_,
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> HotellingT2:
        """Rebuild a fitted model from :meth:`to_state` output."""
        check_state(state, cls.__name__)
        obj = cls(**state["params"])
        obj._check_params()
        obj.location_ = np.asarray(state["location"], dtype=float)
        obj.covariance_ = np.asarray(state["covariance"], dtype=float)
        obj.precision_ = np.linalg.pinv(obj.covariance_, hermitian=True)
        obj.n_samples_ = int(state["n_samples"])
        obj.n_features_in_ = int(obj.location_.size)
        obj.estimator_ = str(state["estimator"])
        obj.n_screened_out_ = int(state["n_screened_out"])
        return obj


@dataclass(frozen=True)
class BaselineAssessment:
    """Per-sample result of :meth:`RegimeBaseline.assess`.

    Attributes
    ----------
    regime : ndarray of int, shape (n,)
        Operating regime of each sample (``-1``: speed or load missing).
    t2 : ndarray of float, shape (n,)
        T² against the sample's own regime baseline; NaN where that regime has no baseline.
    limit : ndarray of float, shape (n,)
        The regime's Phase II control limit; NaN where it has no baseline.
    status : ndarray of str, shape (n,)
        ``"normal"``, ``"anomaly"`` or ``"not_enough_data"`` (the regime has too few baseline
        samples, or no regime could be assigned: no verdict is guessed).
    """

    regime: NDArray
    t2: NDArray
    limit: NDArray
    status: NDArray

    @property
    def is_anomaly(self) -> NDArray:
        """Boolean mask of samples above their regime's limit."""
        return np.asarray(self.status == "anomaly")


class RegimeBaseline(BaseEstimator):
    """A healthy baseline per operating regime, each with its own T² model.

    Each regime's indicators are first normalised with that regime's robust centre (median) and
    scale (normal-consistent MAD), then scored with a :class:`HotellingT2` fitted on that regime's
    normalised baseline. An asset moving to another speed or load band is therefore compared with
    its own healthy behaviour there, so the regime change alone raises no anomaly. A regime with
    fewer than ``min_samples_per_regime`` baseline samples has no model: its samples are reported
    as ``"not_enough_data"``, never scored against another regime.

    Parameters
    ----------
    binning : RegimeBinning or None, default None
        How to form regimes; ``None`` means ``RegimeBinning()``. It is cloned and fitted on the
        operating data passed to :meth:`fit`.
    min_samples_per_regime : int, default 30
        Fewest baseline samples a regime needs (and at least p + 2).
    alpha : float, default 0.01
        False-alarm probability of each regime's Phase II limit, in (0, 1).
    robust : bool, default True
        Passed to each :class:`HotellingT2`.
    random_state : int, default 0

    Attributes
    ----------
    binning_ : RegimeBinning
    centre_ : dict of int to ndarray
        Per-regime median of each indicator (regimes with a baseline only).
    scale_ : dict of int to ndarray
    models_ : dict of int to HotellingT2
    n_samples_per_regime_ : dict of int to int
        Baseline samples seen in every regime (including those without a model).
    n_features_in_ : int
    """

    def __init__(
        self,
        *,
        binning: RegimeBinning | None = None,
        min_samples_per_regime: int = 30,
        alpha: float = 0.01,
        robust: bool = True,
        random_state: int = 0,
    ) -> None:
        self.binning = binning
        self.min_samples_per_regime = min_samples_per_regime
        self.alpha = alpha
        self.robust = robust
        self.random_state = random_state

    def _check_params(self) -> None:
        owner = type(self).__name__
        if self.binning is not None and not isinstance(self.binning, RegimeBinning):
            raise InvalidParameterError(
                f"The 'binning' parameter of {owner} must be a RegimeBinning or None; "
                f"got {self.binning!r} instead."
            )
        check_int(owner, "min_samples_per_regime", self.min_samples_per_regime, low=3)
        check_real(owner, "alpha", self.alpha, low=0.0, high=1.0)
        check_int(owner, "random_state", self.random_state, low=0)

    def fit(self, X: ArrayLike, operating: ArrayLike) -> RegimeBaseline:
        """Learn each regime's healthy baseline.

        Parameters
        ----------
        X : array_like of shape (n_samples, p)
            Healthy indicator vectors, finite.
        operating : array_like of shape (n_samples, 2)
            ``(speed_hz, load_fraction)`` of each sample.
        """
        reset_fitted(self)
        self._check_params()
        arr = as_matrix(X, owner=type(self).__name__)
        op = np.asarray(operating, dtype=float)
        if op.ndim != 2 or op.shape != (arr.shape[0], 2):
            raise ValueError(
                f"RegimeBaseline: operating must have shape ({arr.shape[0]}, 2); got {op.shape}"
            )
        binning = RegimeBinning() if self.binning is None else clone(self.binning)
        self.binning_ = binning.fit(op)
        regimes = self.binning_.predict(op)
        p = arr.shape[1]
        need = max(self.min_samples_per_regime, p + 2)
        self.n_features_in_ = int(p)
        self.n_samples_per_regime_ = {}
        self.centre_ = {}
        self.scale_ = {}
        self.models_ = {}
        for r in range(self.binning_.n_regimes_):
            rows = arr[regimes == r]
            self.n_samples_per_regime_[r] = int(rows.shape[0])
            if rows.shape[0] < need:
                continue
            centre, scale = robust_centre_scale(rows)
            self.centre_[r] = centre
            self.scale_[r] = scale
            self.models_[r] = HotellingT2(
                alpha=self.alpha, robust=self.robust, random_state=self.random_state
            ).fit((rows - centre) / scale)
        return self

    def _regimes(self, X: ArrayLike, operating: ArrayLike) -> tuple[NDArray, NDArray]:
        check_is_fitted(self, "models_")
        arr = as_matrix(X, owner=type(self).__name__, n_columns=self.n_features_in_)
        op = np.asarray(operating, dtype=float)
        if op.ndim != 2 or op.shape != (arr.shape[0], 2):
            raise ValueError(
                f"RegimeBaseline: operating must have shape ({arr.shape[0]}, 2); got {op.shape}"
            )
        return arr, self.binning_.predict(op)

    def has_baseline(self, regime: int) -> bool:
        """Whether ``regime`` had enough healthy samples for a model."""
        check_is_fitted(self, "models_")
        return int(regime) in self.models_

    def transform(self, X: ArrayLike, operating: ArrayLike) -> NDArray:
        """Return indicators as robust z-scores against their own regime (NaN rows: no baseline)."""
        arr, regimes = self._regimes(X, operating)
        z = np.full_like(arr, np.nan)
        for r in self.models_:
            rows = regimes == r
            z[rows] = (arr[rows] - self.centre_[r]) / self.scale_[r]
        return z

    def score_samples(self, X: ArrayLike, operating: ArrayLike) -> NDArray:
        """Return T² of each sample against its regime's baseline (NaN: no baseline)."""
        return self.assess(X, operating).t2

    def assess(self, X: ArrayLike, operating: ArrayLike) -> BaselineAssessment:
        """Score each sample against its own regime and classify it."""
        arr, regimes = self._regimes(X, operating)
        n = arr.shape[0]
        t2 = np.full(n, np.nan)
        limit = np.full(n, np.nan)
        for r, model in self.models_.items():
            rows = regimes == r
            if np.any(rows):
                t2[rows] = model.score_samples((arr[rows] - self.centre_[r]) / self.scale_[r])
                limit[rows] = model.control_limit()
        status = np.where(
            np.isnan(t2), "not_enough_data", np.where(t2 > limit, "anomaly", "normal")
        )
        return BaselineAssessment(regime=regimes, t2=t2, limit=limit, status=status)

    def to_state(self) -> dict[str, Any]:
        """Return the fitted state as JSON-ready plain values."""
        check_is_fitted(self, "models_")
        return {
            "kind": type(self).__name__,
            "version": STATE_VERSION,
            "params": {
                "min_samples_per_regime": int(self.min_samples_per_regime),
                "alpha": float(self.alpha),
                "robust": bool(self.robust),
                "random_state": int(self.random_state),
            },
            "binning": self.binning_.to_state(),
            "n_features": self.n_features_in_,
            "regimes": [
                {
                    "regime": r,
                    "n_samples": n,
                    "centre": float_list(self.centre_[r]) if r in self.models_ else None,
                    "scale": float_list(self.scale_[r]) if r in self.models_ else None,
                    "t2": self.models_[r].to_state() if r in self.models_ else None,
                }
                for r, n in self.n_samples_per_regime_.items()
            ],
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> RegimeBaseline:
        """Rebuild a fitted baseline from :meth:`to_state` output."""
        check_state(state, cls.__name__)
        binning = RegimeBinning.from_state(state["binning"])
        obj = cls(binning=clone(binning), **state["params"])
        obj._check_params()
        obj.binning_ = binning
        obj.n_features_in_ = int(state["n_features"])
        obj.n_samples_per_regime_ = {}
        obj.centre_, obj.scale_, obj.models_ = {}, {}, {}
        for entry in state["regimes"]:
            r = int(entry["regime"])
            obj.n_samples_per_regime_[r] = int(entry["n_samples"])
            if entry["t2"] is not None:
                obj.centre_[r] = np.asarray(entry["centre"], dtype=float)
                obj.scale_[r] = np.asarray(entry["scale"], dtype=float)
                obj.models_[r] = HotellingT2.from_state(entry["t2"])
        return obj

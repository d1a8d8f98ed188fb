"""Fault classifier: multinomial logistic regression on baseline-relative diagnostic features.

The model is deliberately linear and small: its fitted state is a handful of plain arrays
(feature centring and scaling, one weight row and one intercept per fault mode), which the
service stores as JSON and evaluates with numpy alone. Features come from
:func:`prognosis_service.diagnosis.features.diagnostic_features`, so the model compares each
window with the same asset's healthy baseline at the same operating regime and never sees raw
levels or frequencies in Hz.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.linear_model import LogisticRegression
from sklearn.utils.validation import check_is_fitted

from prognosis_service.health._checks import (
    STATE_VERSION,
    InvalidParameterError,
    as_matrix,
    check_int,
    check_real,
    check_state,
    float_list,
)

__all__ = ["FaultClassifier"]

_CLASS_WEIGHTS = ("balanced", None)


class FaultClassifier(ClassifierMixin, BaseEstimator):
    """Which failure mode a window shows, as class probabilities.

    Multinomial logistic regression (softmax over fault modes) on standardised features, fitted
    with scikit-learn's ``LogisticRegression`` (L2 penalty, lbfgs); prediction is plain numpy
    ``softmax(((X - feature_mean_) / feature_scale_) @ coef_.T + intercept_)``.

    Parameters
    ----------
    C : float, default 1.0
        Inverse strength of the L2 penalty, > 0 (smaller means smoother weights).
    max_iter : int, default 2000
        Most lbfgs iterations, >= 1.
    class_weight : {"balanced", None}, default "balanced"
        ``"balanced"`` weights each fault mode inversely to its number of rows, so a mode with
        few examples is not drowned by healthy rows.
    tol : float, default 1e-6
        Stopping tolerance of the solver, > 0.

    Attributes
    ----------
    classes_ : ndarray of str, shape (n_classes,)
        Fault modes, sorted.
    coef_ : ndarray of shape (n_classes, n_features)
    intercept_ : ndarray of shape (n_classes,)
    feature_mean_, feature_scale_ : ndarray of shape (n_features,)
        Standardisation of the training features.
    feature_names_in_ : ndarray of str, shape (n_features,)
        Feature names, when given to :meth:`fit`.
    n_features_in_ : int
    n_iter_ : int
        Solver iterations used.

    References
    ----------
    .. [1] F. Pedregosa et al., "Scikit-learn: machine learning in Python", JMLR 12 (2011)
       2825-2830 (``sklearn.linear_model.LogisticRegression``).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> X = np.vstack([rng.normal(0, 1, (30, 2)), rng.normal([12, 0], 1, (30, 2))])
    >>> y = ["healthy"] * 30 + ["outer_race"] * 30
    >>> clf = FaultClassifier(C=1.0).fit(X, y, feature_names=["env_bpfo:db", "order_1x:db"])
    >>> clf.predict([[14.0, 0.5], [0.2, -0.3]]).tolist()
    ['outer_race', 'healthy']
    """

    def __init__(
        self,
        *,
        C: float = 1.0,
        max_iter: int = 2000,
        class_weight: str | None = "balanced",
        tol: float = 1e-6,
    ) -> None:
        self.C = C
        self.max_iter = max_iter
        self.class_weight = class_weight
        self.tol = tol

    def _validate_params(self) -> None:
        owner = type(self).__name__
        C = self.C
        if (
            isinstance(C, bool)
            or not isinstance(C, int | float | np.integer | np.floating)
            or not math.isfinite(float(C))
            or not C > 0
        ):
            raise InvalidParameterError(
                f"The 'C' parameter of {owner} must be > 0; got {C!r} instead."
            )
        check_int(owner, "max_iter", self.max_iter, low=1)
        if self.class_weight not in _CLASS_WEIGHTS:
            raise InvalidParameterError(
                f"The 'class_weight' parameter of {owner} must be one of {{'balanced', None}}; "
                f"got {self.class_weight!r} instead."
            )
        check_real(owner, "tol", self.tol, low=0.0)

    def fit(
        self, X: ArrayLike, y: ArrayLike, *, feature_names: Sequence[str] | None = None
    ) -> FaultClassifier:
        """Fit on diagnostic features ``X`` (n_rows, n_features) and fault-mode labels ``y``.

        Raises
        ------
        InvalidParameterError
            A hyper-parameter is out of range.
        ValueError
            ``X`` is not finite 2-D, ``y`` does not match it, or there are fewer than two modes.
        """
        self._validate_params()
        owner = type(self).__name__
        arr = as_matrix(X, owner=owner)
        labels = np.asarray(y).astype(str)
        if labels.shape != (arr.shape[0],):
            raise ValueError(
                f"{owner}: y must have shape ({arr.shape[0]},) to match X; got {labels.shape}"
            )
        classes = np.unique(labels)
        if classes.size < 2:
            raise ValueError(
                f"{owner}: y must hold at least two fault modes (e.g. healthy and one fault); "
                f"got {classes.tolist()}"
            )
        if feature_names is not None and len(feature_names) != arr.shape[1]:
            raise ValueError(
                f"{owner}: feature_names must have {arr.shape[1]} entries to match X; "
                f"got {len(feature_names)}"
            )
        mean = arr.mean(axis=0)
        scale = arr.std(axis=0)
        scale = np.where(scale > 1e-12, scale, 1.0)
        model = LogisticRegression(
            C=float(self.C),
            max_iter=int(self.max_iter),
            class_weight=self.class_weight,
            tol=float(self.tol),
        )
        model.fit((arr - mean) / scale, labels)
        coef = np.asarray(model.coef_, dtype=float)
        intercept = np.asarray(model.intercept_, dtype=float)
        if classes.size == 2:  # scikit-learn keeps one row for two classes: softmax of (0, w)
            coef = np.vstack([np.zeros_like(coef[0]), coef[0]])
            intercept = np.array([0.0, intercept[0]])
        self.classes_ = np.asarray(model.classes_).astype(str)
        self.coef_ = coef
        self.intercept_ = intercept
        self.feature_mean_ = mean
        self.feature_scale_ = scale
        self.n_features_in_ = int(arr.shape[1])
        self.n_iter_ = int(np.max(model.n_iter_))
        if feature_names is not None:
            self.feature_names_in_ = np.asarray(list(feature_names), dtype=object).astype(str)
        elif hasattr(self, "feature_names_in_"):
            del self.feature_names_in_
        return self

    def decision_function(self, X: ArrayLike) -> NDArray:
        """Class scores (log-odds up to a constant), shape (n_rows, n_classes)."""
        check_is_fitted(self, "coef_")
        arr = as_matrix(X, owner=type(self).__name__, n_columns=self.n_features_in_)
        z = (arr - self.feature_mean_) / self.feature_scale_
        return np.asarray(z @ self.coef_.T + self.intercept_, dtype=float)

    def predict_proba(self, X: ArrayLike) -> NDArray:
        """Probability of each fault mode in :attr:`classes_` order, shape (n_rows, n_classes)."""
        scores = self.decision_function(X)
        scores -= scores.max(axis=1, keepdims=True)
        p = np.exp(scores)
        return np.asarray(p / p.sum(axis=1, keepdims=True), dtype=float)

    def predict(self, X: ArrayLike) -> NDArray:
        """The most probable fault mode of each row."""
        scores = self.decision_function(X)
        return np.asarray(self.classes_[np.argmax(scores, axis=1)])

    def align(self, feature_names: Sequence[str], F: ArrayLike) -> NDArray:
        """Reorder features ``F`` (…, len(feature_names)) to the fitted order.

        A fitted feature missing from ``feature_names`` is set to 0 ("no change from
        baseline"); extra features are dropped.
        """
        check_is_fitted(self, "coef_")
        if not hasattr(self, "feature_names_in_"):
            raise ValueError(
                f"{type(self).__name__} was fitted without feature_names; pass features in the "
                "fitted column order instead"
            )
        arr = np.asarray(F, dtype=float)
        index = {n: i for i, n in enumerate(feature_names)}
        out = np.zeros((*arr.shape[:-1], self.n_features_in_))
        for j, name in enumerate(self.feature_names_in_):
            i = index.get(str(name))
            if i is not None:
                out[..., j] = arr[..., i]
        return out

    def to_state(self) -> dict[str, Any]:
        """The fitted model as JSON-ready plain values."""
        check_is_fitted(self, "coef_")
        names = getattr(self, "feature_names_in_", None)
        return {
            "kind": type(self).__name__,
            "version": STATE_VERSION,
            "params": {
                "C": float(self.C),
                "max_iter": int(self.max_iter),
                "class_weight": self.class_weight,
                "tol": float(self.tol),
            },
            "classes": [str(c) for c in self.classes_],
            "coef": float_list(self.coef_),
            "intercept": float_list(self.intercept_),
            "feature_mean": float_list(self.feature_mean_),
            "feature_scale": float_list(self.feature_scale_),
            "feature_names": None if names is None else [str(n) for n in names],
            "n_iter": int(self.n_iter_),
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> FaultClassifier:
        """Rebuild a fitted classifier from :meth:`to_state` output."""
        check_state(state, cls.__name__)
        p = state["params"]
        obj = cls(
            C=float(p["C"]),
            max_iter=int(p["max_iter"]),
            class_weight=p["class_weight"],
            tol=float(p["tol"]),
        )
        obj._validate_params()
        coef = np.asarray(state["coef"], dtype=float)
        classes = np.asarray(state["classes"]).astype(str)
        n_features = coef.shape[1] if coef.ndim == 2 else -1
        intercept = np.asarray(state["intercept"], dtype=float)
        mean = np.asarray(state["feature_mean"], dtype=float)
        scale = np.asarray(state["feature_scale"], dtype=float)
        if (
            coef.shape != (classes.size, n_features)
            or intercept.shape != (classes.size,)
            or mean.shape != (n_features,)
            or scale.shape != (n_features,)
        ):
            raise ValueError("state for FaultClassifier has inconsistent array shapes")
        obj.classes_ = classes
        obj.coef_ = coef
        obj.intercept_ = intercept
        obj.feature_mean_ = mean
        obj.feature_scale_ = scale
        obj.n_features_in_ = int(n_features)
        obj.n_iter_ = int(state.get("n_iter", 0))
        if state.get("feature_names") is not None:
            obj.feature_names_in_ = np.asarray(state["feature_names"], dtype=object).astype(str)
        return obj

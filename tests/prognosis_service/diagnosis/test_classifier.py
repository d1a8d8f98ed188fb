"""FaultClassifier conventions: fit/predict, state, validation; checked against scikit-learn."""

from __future__ import annotations

import json

import numpy as np
import pytest
from sklearn.exceptions import NotFittedError
from sklearn.linear_model import LogisticRegression

from prognosis_service.diagnosis import FaultClassifier
from prognosis_service.health import InvalidParameterError


def blobs(seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    centres = {"healthy": [0, 0, 0], "outer_race": [15, 0, 0], "imbalance": [0, 8, 1]}
    X = np.vstack([rng.normal(c, 1.5, (25, 3)) for c in centres.values()])
    y = np.repeat(list(centres), 25)
    return X, y


def test_probabilities_match_scikit_learn_logistic_regression() -> None:
    """Reference: sklearn.linear_model.LogisticRegression on the same standardised data."""
    X, y = blobs()
    clf = FaultClassifier(C=0.5, class_weight=None).fit(X, y)
    Z = (X - X.mean(axis=0)) / X.std(axis=0)
    ref = LogisticRegression(C=0.5, max_iter=2000, tol=1e-6).fit(Z, y)
    X_new = np.random.default_rng(1).normal(5, 5, (20, 3))
    Z_new = (X_new - X.mean(axis=0)) / X.std(axis=0)
    np.testing.assert_allclose(clf.predict_proba(X_new), ref.predict_proba(Z_new), atol=1e-10)
    np.testing.assert_array_equal(clf.predict(X_new), ref.predict(Z_new))
    assert clf.classes_.tolist() == ["healthy", "imbalance", "outer_race"]


def test_fit_returns_self_and_learns() -> None:
    X, y = blobs()
    clf = FaultClassifier()
    assert clf.fit(X, y) is clf
    assert clf.score(*blobs(seed=2)) > 0.95
    proba = clf.predict_proba(X)
    np.testing.assert_allclose(proba.sum(axis=1), 1.0)


def test_two_modes_give_two_probability_columns() -> None:
    X, y = blobs()
    keep = y != "imbalance"
    clf = FaultClassifier().fit(X[keep], y[keep])
    ref = LogisticRegression(C=1.0, max_iter=2000, tol=1e-6, class_weight="balanced")
    Z = (X[keep] - X[keep].mean(axis=0)) / X[keep].std(axis=0)
    ref.fit(Z, y[keep])
    np.testing.assert_allclose(clf.predict_proba(X[keep]), ref.predict_proba(Z), atol=1e-10)


def test_state_round_trip_gives_identical_predictions() -> None:
    X, y = blobs()
    clf = FaultClassifier(C=2.0).fit(X, y, feature_names=["a:db", "b:db", "c:db"])
    state = json.loads(json.dumps(clf.to_state()))
    back = FaultClassifier.from_state(state)
    X_new = np.random.default_rng(3).normal(4, 6, (50, 3))
    np.testing.assert_array_equal(back.predict_proba(X_new), clf.predict_proba(X_new))
    np.testing.assert_array_equal(back.predict(X_new), clf.predict(X_new))
    assert back.feature_names_in_.tolist() == ["a:db", "b:db", "c:db"]
    assert back.get_params() == clf.get_params()


def test_state_of_another_kind_or_version_is_refused() -> None:
    X, y = blobs()
    state = FaultClassifier().fit(X, y).to_state()
    with pytest.raises(ValueError, match="not supported"):
        FaultClassifier.from_state({**state, "version": 99})
    with pytest.raises(ValueError, match="not 'FaultClassifier'"):
        FaultClassifier.from_state({**state, "kind": "HotellingT2"})
    with pytest.raises(ValueError, match="inconsistent array shapes"):
        FaultClassifier.from_state({**state, "intercept": [0.0]})


@pytest.mark.parametrize(
    ("params", "message"),
    [
        ({"C": -1}, "The 'C' parameter of FaultClassifier must be > 0; got -1 instead."),
        ({"C": 0.0}, "The 'C' parameter of FaultClassifier must be > 0; got 0.0 instead."),
        ({"C": "1"}, "The 'C' parameter of FaultClassifier must be > 0; got '1' instead."),
        (
            {"max_iter": 0},
            "The 'max_iter' parameter of FaultClassifier must be an int >= 1; got 0 instead.",
        ),
        (
            {"class_weight": "equal"},
            "The 'class_weight' parameter of FaultClassifier must be one of "
            "{'balanced', None}; got 'equal' instead.",
        ),
    ],
)
def test_hyper_parameters_are_validated_in_fit(params: dict[str, object], message: str) -> None:
    X, y = blobs()
    clf = FaultClassifier(**params)  # type: ignore[arg-type]  # __init__ only stores
    with pytest.raises(InvalidParameterError) as err:
        clf.fit(X, y)
    assert str(err.value) == message


def test_predicting_before_fit_raises_not_fitted() -> None:
    clf = FaultClassifier()
    for call in (clf.predict, clf.predict_proba):
        with pytest.raises(NotFittedError, match="not fitted yet"):
            call(np.zeros((1, 3)))
    with pytest.raises(NotFittedError):
        clf.to_state()


def test_bad_data_is_refused_with_a_clear_message() -> None:
    X, y = blobs()
    with pytest.raises(ValueError, match="at least two fault modes"):
        FaultClassifier().fit(X, np.full(len(y), "healthy"))
    with pytest.raises(ValueError, match="y must have shape"):
        FaultClassifier().fit(X, y[:-1])
    bad = X.copy()
    bad[0, 0] = np.nan
    with pytest.raises(ValueError, match="NaN or infinite"):
        FaultClassifier().fit(bad, y)
    clf = FaultClassifier().fit(X, y)
    with pytest.raises(ValueError, match="must have 3 columns"):
        clf.predict(np.zeros((1, 2)))


def test_align_reorders_and_fills_missing_features_with_no_change() -> None:
    X, y = blobs()
    clf = FaultClassifier().fit(X, y, feature_names=["a:db", "b:db", "c:db"])
    out = clf.align(["c:db", "a:db", "extra:db"], np.array([3.0, 1.0, 9.0]))
    assert out.tolist() == [1.0, 0.0, 3.0]
    with pytest.raises(ValueError, match="fitted without feature_names"):
        FaultClassifier().fit(X, y).align(["a:db"], np.zeros(1))

"""Shared validation, error types and state helpers for the modelling layer.

Both ``prognosis_service.health`` and ``prognosis_service.prognosis`` use these, so hyper-parameter
messages read the same everywhere: "The 'alpha' parameter of HotellingT2 must be in (0, 1); got 1.5
instead."
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from sklearn.exceptions import NotFittedError

__all__ = [
    "STATE_VERSION",
    "InvalidParameterError",
    "NotEnoughDataError",
    "NotFittedError",
    "as_matrix",
    "as_series",
    "check_choice",
    "check_int",
    "check_real",
    "check_state",
    "float_list",
    "reset_fitted",
]

STATE_VERSION = 1


class InvalidParameterError(ValueError, TypeError):
    """A hyper-parameter has the wrong type or value (raised by ``fit``)."""


class NotEnoughDataError(ValueError):
    """The data cannot support the estimate yet; nothing is guessed.

    Attributes
    ----------
    reason : str
        Machine-readable cause: ``"too_few_points"``, ``"no_degradation_detected"``,
        ``"too_few_samples"`` or ``"regime_without_baseline"``.
    detail : str
        Human-readable explanation (the exception message).
    """

    def __init__(self, reason: str, detail: str) -> None:
        super().__init__(detail)
        self.reason = reason
        self.detail = detail


def _interval_text(low: float | None, high: float | None, closed: str) -> str:
    left = "[" if closed in ("left", "both") else "("
    right = "]" if closed in ("right", "both") else ")"
    lo = "-inf" if low is None else f"{low:g}"
    hi = "inf" if high is None else f"{high:g}"
    return f"{left}{lo}, {hi}{right}"


def check_real(
    owner: str,
    name: str,
    value: Any,
    *,
    low: float | None = None,
    high: float | None = None,
    closed: str = "neither",
) -> float:
    """Validate a real hyper-parameter against an interval and return it as ``float``."""
    interval = _interval_text(low, high, closed)
    if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating):
        raise InvalidParameterError(
            f"The {name!r} parameter of {owner} must be a real number in {interval}; "
            f"got {value!r} instead."
        )
    v = float(value)
    ok = math.isfinite(v)
    if ok and low is not None:
        ok = v >= low if closed in ("left", "both") else v > low
    if ok and high is not None:
        ok = v <= high if closed in ("right", "both") else v < high
    if not ok:
        raise InvalidParameterError(
            f"The {name!r} parameter of {owner} must be in {interval}; got {value!r} instead."
        )
    return v


def check_int(owner: str, name: str, value: Any, *, low: int) -> int:
    """Validate an integer hyper-parameter ``>= low``."""
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < low:
        raise InvalidParameterError(
            f"The {name!r} parameter of {owner} must be an int >= {low}; got {value!r} instead."
        )
    return int(value)


def check_choice(owner: str, name: str, value: Any, options: Iterable[str]) -> str:
    """Validate a named option against its allowed set."""
    allowed = tuple(options)
    if value not in allowed:
        choices = ", ".join(map(repr, allowed))
        raise InvalidParameterError(
            f"The {name!r} parameter of {owner} must be one of {{{choices}}}; "
            f"got {value!r} instead."
        )
    return str(value)


def as_matrix(
    X: ArrayLike, *, owner: str, name: str = "X", n_columns: int | None = None
) -> NDArray:
    """Return ``X`` as a finite 2-D float array, with an error naming what is wrong."""
    arr = np.asarray(X, dtype=float)
    if arr.ndim != 2:
        raise ValueError(
            f"{owner}: {name} must be a 2-D array (n_samples, n_features); got shape {arr.shape}"
        )
    if n_columns is not None and arr.shape[1] != n_columns:
        raise ValueError(f"{owner}: {name} must have {n_columns} columns; got {arr.shape[1]}")
    if not np.all(np.isfinite(arr)):
        bad = int(np.count_nonzero(~np.isfinite(arr).all(axis=1)))
        raise ValueError(
            f"{owner}: {name} contains NaN or infinite values in {bad} row(s); drop or repair "
            "flagged samples before fitting or scoring"
        )
    return arr


def as_series(t: ArrayLike, y: ArrayLike, *, owner: str) -> tuple[NDArray, NDArray]:
    """Return one unit's (t, y) as finite 1-D arrays with strictly increasing ``t > 0``."""
    t_arr = np.asarray(t, dtype=float)
    y_arr = np.asarray(y, dtype=float)
    if t_arr.ndim != 1 or y_arr.ndim != 1 or t_arr.shape != y_arr.shape:
        raise ValueError(
            f"{owner}: t and y must be 1-D arrays of the same length; got shapes "
            f"{t_arr.shape} and {y_arr.shape}"
        )
    if not (np.all(np.isfinite(t_arr)) and np.all(np.isfinite(y_arr))):
        raise ValueError(f"{owner}: t and y must be finite (drop flagged samples first)")
    if t_arr.size and t_arr[0] <= 0.0:
        raise ValueError(
            f"{owner}: t must be hours since the unit entered service (or its last renewal), "
            f"all > 0; got t[0] = {t_arr[0]:g}"
        )
    if t_arr.size > 1 and np.any(np.diff(t_arr) <= 0.0):
        raise ValueError(f"{owner}: t must be strictly increasing (sort and de-duplicate first)")
    return t_arr, y_arr


def reset_fitted(est: object) -> None:
    """Drop learned state (attributes ending in ``_``) so a failed refit leaves no stale model."""
    for key in [k for k in vars(est) if k.endswith("_") and not k.startswith("__")]:
        delattr(est, key)


def float_list(a: ArrayLike) -> Any:
    """Return an array as nested lists of Python floats (JSON-ready)."""
    return np.asarray(a, dtype=float).tolist()


def check_state(state: Mapping[str, Any], kind: str) -> Mapping[str, Any]:
    """Check a ``to_state`` dict names the expected estimator and a known version."""
    if not isinstance(state, Mapping):
        raise TypeError(f"state for {kind} must be a mapping; got {type(state).__name__}")
    if state.get("kind") != kind:
        raise ValueError(f"state is for {state.get('kind')!r}, not {kind!r}")
    if state.get("version") != STATE_VERSION:
        raise ValueError(
            f"state version {state.get('version')!r} of {kind} is not supported "
            f"(this code reads version {STATE_VERSION})"
        )
    return state

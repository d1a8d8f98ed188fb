"""Operating regimes: a small deterministic binning of shaft speed and load."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from sklearn.base import BaseEstimator
from sklearn.utils.validation import check_is_fitted

from prognosis_service.health._checks import (
    STATE_VERSION,
    InvalidParameterError,
    check_int,
    check_real,
    check_state,
    float_list,
    reset_fitted,
)

__all__ = ["RegimeBinning"]


class RegimeBinning(BaseEstimator):
    """Operating regimes as speed bands × load bands.

    Speed bands split the asset's shaft-speed range into ``n_speed_bands`` equal widths; load
    bands split ``load_range`` into ``n_load_bands`` equal widths. The regime index is
    ``speed_band * n_load_bands + load_band``, so it is stable and easy to read back with
    :meth:`describe`. Values outside the fitted range fall in the nearest outer band; a row with a
    non-finite speed or load gets regime ``-1`` (no regime).

    Parameters
    ----------
    n_speed_bands : int, default 3
        Number of equal-width shaft-speed bands.
    n_load_bands : int, default 2
        Number of equal-width load bands.
    speed_range_hz : tuple of float or None, default None
        ``(low, high)`` shaft speed in Hz. ``None`` takes the range seen in ``fit``. Give the
        drive's range (e.g. 1,150–1,780 rpm → ``(19.17, 29.67)``) when the baseline does not yet
        span it.
    load_range : tuple of float, default (0.0, 1.0)
        ``(low, high)`` load as a fraction of rated load (flow or motor current, unit ``1``).

    Attributes
    ----------
    speed_edges_hz_ : ndarray of shape (n_speed_bands + 1,)
    load_edges_ : ndarray of shape (n_load_bands + 1,)
    n_regimes_ : int

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> X = np.column_stack([rng.uniform(19.2, 29.7, 100), rng.uniform(0.3, 1.0, 100)])
    >>> binning = RegimeBinning(n_speed_bands=3, n_load_bands=2).fit(X)
    >>> binning.n_regimes_
    6
    >>> binning.predict([[29.0, 0.9], [20.0, 0.2]]).tolist()
    [5, 0]
    """

    def __init__(
        self,
        *,
        n_speed_bands: int = 3,
        n_load_bands: int = 2,
        speed_range_hz: tuple[float, float] | None = None,
        load_range: tuple[float, float] = (0.0, 1.0),
    ) -> None:
        self.n_speed_bands = n_speed_bands
        self.n_load_bands = n_load_bands
        self.speed_range_hz = speed_range_hz
        self.load_range = load_range

    def _check_params(self) -> None:
        owner = type(self).__name__
        check_int(owner, "n_speed_bands", self.n_speed_bands, low=1)
        check_int(owner, "n_load_bands", self.n_load_bands, low=1)
        for name, rng in (("speed_range_hz", self.speed_range_hz), ("load_range", self.load_range)):
            if rng is None and name == "speed_range_hz":
                continue
            if not isinstance(rng, Sequence | np.ndarray) or len(rng) != 2:
                raise InvalidParameterError(
                    f"The {name!r} parameter of {owner} must be a (low, high) pair with "
                    f"low < high; got {rng!r} instead."
                )
            lo = check_real(owner, name, rng[0])
            hi = check_real(owner, name, rng[1])
            if not lo < hi:
                raise InvalidParameterError(
                    f"The {name!r} parameter of {owner} must be a (low, high) pair with "
                    f"low < high; got {rng!r} instead."
                )

    @staticmethod
    def _operating(X: ArrayLike) -> NDArray:
        arr = np.asarray(X, dtype=float)
        if arr.ndim != 2 or arr.shape[1] != 2:
            raise ValueError(
                "RegimeBinning: X must have shape (n_samples, 2) with columns "
                f"(speed_hz, load_fraction); got shape {arr.shape}"
            )
        return arr

    def fit(self, X: ArrayLike, y: None = None) -> RegimeBinning:
        """Set the band edges from ``speed_range_hz`` or the speeds in ``X``.

        Parameters
        ----------
        X : array_like of shape (n_samples, 2)
            Columns ``(speed_hz, load_fraction)``; rows with non-finite values are ignored.
        """
        reset_fitted(self)
        self._check_params()
        arr = self._operating(X)
        if self.speed_range_hz is None:
            speed = arr[np.isfinite(arr).all(axis=1), 0]
            if speed.size == 0:
                raise ValueError(
                    "RegimeBinning: no finite (speed_hz, load_fraction) rows to take the speed "
                    "range from; pass speed_range_hz or give data"
                )
            lo, hi = float(speed.min()), float(speed.max())
        else:
            lo, hi = float(self.speed_range_hz[0]), float(self.speed_range_hz[1])
        self.speed_edges_hz_ = np.linspace(lo, hi, self.n_speed_bands + 1)
        self.load_edges_ = np.linspace(
            float(self.load_range[0]), float(self.load_range[1]), self.n_load_bands + 1
        )
        self.n_regimes_ = int(self.n_speed_bands * self.n_load_bands)
        return self

    def predict(self, X: ArrayLike) -> NDArray:
        """Return the regime index of each row (``-1`` where speed or load is not finite).

        Returns
        -------
        ndarray of int of shape (n_samples,)
        """
        check_is_fitted(self, "speed_edges_hz_")
        arr = self._operating(X)
        n_speed = self.speed_edges_hz_.size - 1
        n_load = self.load_edges_.size - 1
        speed_band = np.clip(
            np.searchsorted(self.speed_edges_hz_[1:-1], arr[:, 0], side="right"), 0, n_speed - 1
        )
        load_band = np.clip(
            np.searchsorted(self.load_edges_[1:-1], arr[:, 1], side="right"), 0, n_load - 1
        )
        regime = speed_band * n_load + load_band
        return np.where(np.isfinite(arr).all(axis=1), regime, -1).astype(int)

    def describe(self, regime: int) -> dict[str, Any]:
        """Return the speed and load band of a regime index as plain numbers."""
        check_is_fitted(self, "speed_edges_hz_")
        if not 0 <= regime < self.n_regimes_:
            raise ValueError(f"regime must be in [0, {self.n_regimes_ - 1}]; got {regime!r}")
        n_load = self.load_edges_.size - 1
        s, ld = divmod(int(regime), n_load)
        return {
            "regime": int(regime),
            "speed_hz": (float(self.speed_edges_hz_[s]), float(self.speed_edges_hz_[s + 1])),
            "load_fraction": (float(self.load_edges_[ld]), float(self.load_edges_[ld + 1])),
        }

    def to_state(self) -> dict[str, Any]:
        """Return the fitted state as JSON-ready plain values."""
        check_is_fitted(self, "speed_edges_hz_")
        return {
            "kind": type(self).__name__,
            "version": STATE_VERSION,
            "params": {
                "n_speed_bands": int(self.n_speed_bands),
                "n_load_bands": int(self.n_load_bands),
                "speed_range_hz": None
                if self.speed_range_hz is None
                else float_list(self.speed_range_hz),
                "load_range": float_list(self.load_range),
            },
            "speed_edges_hz": float_list(self.speed_edges_hz_),
            "load_edges": float_list(self.load_edges_),
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> RegimeBinning:
        """Rebuild a fitted binning from :meth:`to_state` output."""
        check_state(state, cls.__name__)
        p = state["params"]
        obj = cls(
            n_speed_bands=int(p["n_speed_bands"]),
            n_load_bands=int(p["n_load_bands"]),
            speed_range_hz=None if p["speed_range_hz"] is None else tuple(p["speed_range_hz"]),
            load_range=tuple(p["load_range"]),
        )
        obj._check_params()
        obj.speed_edges_hz_ = np.asarray(state["speed_edges_hz"], dtype=float)
        obj.load_edges_ = np.asarray(state["load_edges"], dtype=float)
        obj.n_regimes_ = int((obj.speed_edges_hz_.size - 1) * (obj.load_edges_.size - 1))
        return obj

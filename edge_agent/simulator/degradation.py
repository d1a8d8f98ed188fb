"""Severity growth laws for simulated faults, with unit-to-unit variation.

Every law maps the time since fault onset ``tau`` (days) and the unit's life to failure ``life``
(days from onset until the failure threshold) to a severity in [0, 1]: 0 before onset, exactly 1
at ``tau == life`` and held at 1 afterwards (the failure threshold has been reached). A law is
a small frozen object so a scenario can carry it and print it.

Laws
----
``ExponentialGrowth``
    ``s = s0 * exp(ln(1/s0) * tau/life)``. Exponential growth of a defect signal is the usual model
    of bearing spall growth and the basis of the exponential degradation model of Gebraeel et al.
    (2005); it is also what Paris' law gives for a crack whose stress-intensity range grows with
    the square root of its size when the Paris exponent is 2.
``ParisGrowth``
    Paris' law ``da/dN = C (dK)^m`` with ``dK ∝ sqrt(a)`` integrates for ``m > 2`` to
    ``a = a0 (1 - tau/tau_c)^(-2/(m-2))``, a growth that accelerates towards a finite-time
    blow-up ``tau_c``; ``tau_c`` is set so that ``a`` reaches 1 at ``tau == life``.
``LinearGrowth``
    Steady wear, ``s = s0 + (1 - s0) tau/life`` (impeller wear-ring and vane erosion, strainer
    fouling, build-up on an impeller).
``StepGrowth``
    A step to ``step`` at onset, then linear growth to 1 at ``life`` (misalignment left after a
    maintenance job, slowly worsening as the coupling wears).

References
----------
.. [1] N. Gebraeel, M. Lawley, R. Li, J. Ryan, "Residual-life distributions from component
   degradation signals: a Bayesian approach", IIE Transactions 37(6) (2005) 543-557
   (from memory).
.. [2] P. C. Paris, F. Erdogan, "A critical analysis of crack propagation laws", J. Basic Eng.
   85 (1963) 528-534 (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np
import numpy.typing as npt

__all__ = [
    "ExponentialGrowth",
    "GrowthLaw",
    "LinearGrowth",
    "ParisGrowth",
    "StepGrowth",
    "draw_life_days",
]

FloatArray = npt.NDArray[np.float64]


@runtime_checkable
class GrowthLaw(Protocol):
    """A severity growth law: ``severity(tau_days, life_days)`` in [0, 1]."""

    def severity(self, tau_days: npt.ArrayLike, life_days: float) -> FloatArray: ...


def _prepare(tau_days: npt.ArrayLike, life_days: float) -> tuple[FloatArray, FloatArray]:
    if not (math.isfinite(life_days) and life_days > 0):
        raise ValueError(f"life_days must be a finite number > 0, got {life_days!r}")
    tau = np.asarray(tau_days, dtype=float)
    frac = np.clip(tau / life_days, 0.0, 1.0)
    return tau, frac


def _finish(tau: FloatArray, frac: FloatArray, s: FloatArray) -> FloatArray:
    s = np.where(frac >= 1.0, 1.0, np.clip(s, 0.0, 1.0))  # exactly 1 from the failure time on
    return np.where(tau < 0.0, 0.0, s)


def _check_initial(name: str, value: float) -> None:
    if not 0.0 < value < 1.0:
        raise ValueError(f"The 'initial' parameter of {name} must be in (0, 1); got {value!r}")


@dataclass(frozen=True, slots=True, kw_only=True)
class ExponentialGrowth:
    """Exponential growth from ``initial`` at onset to 1 at the end of life.

    Examples
    --------
    >>> law = ExponentialGrowth(initial=0.05)
    >>> law.severity([0.0, 50.0, 100.0], 100.0).round(4).tolist()
    [0.05, 0.2236, 1.0]
    """

    initial: float = 0.02

    def __post_init__(self) -> None:
        _check_initial("ExponentialGrowth", self.initial)

    def severity(self, tau_days: npt.ArrayLike, life_days: float) -> FloatArray:
        tau, frac = _prepare(tau_days, life_days)
        return _finish(tau, frac, self.initial * np.exp(-math.log(self.initial) * frac))


@dataclass(frozen=True, slots=True, kw_only=True)
class ParisGrowth:
    """Paris-law defect growth with exponent ``exponent`` > 2, from ``initial`` to 1 at life.

    Examples
    --------
    >>> law = ParisGrowth(exponent=3.0, initial=0.04)
    >>> law.severity([0.0, 100.0], 100.0).round(4).tolist()
    [0.04, 1.0]
    """

    exponent: float = 3.0
    initial: float = 0.02

    def __post_init__(self) -> None:
        _check_initial("ParisGrowth", self.initial)
        if not (math.isfinite(self.exponent) and self.exponent > 2.0):
            raise ValueError(
                f"The 'exponent' parameter of ParisGrowth must be > 2; got {self.exponent!r}"
            )

    def severity(self, tau_days: npt.ArrayLike, life_days: float) -> FloatArray:
        tau, frac = _prepare(tau_days, life_days)
        k = (self.exponent - 2.0) / 2.0
        # tau_c / life = 1 / (1 - a0^k); a(frac) = a0 * (1 - frac / (tau_c/life))^(-1/k)
        remaining = 1.0 - frac * (1.0 - self.initial**k)
        return _finish(tau, frac, self.initial * remaining ** (-1.0 / k))


@dataclass(frozen=True, slots=True, kw_only=True)
class LinearGrowth:
    """Linear growth from ``initial`` at onset to 1 at the end of life.

    Examples
    --------
    >>> LinearGrowth().severity([-1.0, 25.0, 200.0], 100.0).tolist()
    [0.0, 0.25, 1.0]
    """

    initial: float = 0.0

    def __post_init__(self) -> None:
        if not 0.0 <= self.initial < 1.0:
            raise ValueError(
                f"The 'initial' parameter of LinearGrowth must be in [0, 1); got {self.initial!r}"
            )

    def severity(self, tau_days: npt.ArrayLike, life_days: float) -> FloatArray:
        tau, frac = _prepare(tau_days, life_days)
        return _finish(tau, frac, self.initial + (1.0 - self.initial) * frac)


@dataclass(frozen=True, slots=True, kw_only=True)
class StepGrowth:
    """A step to ``step`` at onset, then linear growth to 1 at the end of life.

    Examples
    --------
    >>> StepGrowth(step=0.5).severity([0.0, 50.0], 100.0).tolist()
    [0.5, 0.75]
    """

    step: float = 0.5

    def __post_init__(self) -> None:
        if not 0.0 < self.step <= 1.0:
            raise ValueError(
                f"The 'step' parameter of StepGrowth must be in (0, 1]; got {self.step!r}"
            )

    def severity(self, tau_days: npt.ArrayLike, life_days: float) -> FloatArray:
        tau, frac = _prepare(tau_days, life_days)
        return _finish(tau, frac, self.step + (1.0 - self.step) * frac)


def draw_life_days(
    rng: np.random.Generator, *, median_days: float, dispersion: float = 0.3
) -> float:
    """Draw one unit's life to failure from a lognormal distribution.

    Unit-to-unit variation of life is commonly modelled as lognormal (common practice, no
    source); ``dispersion`` is the standard deviation of ``ln(life)``.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> round(draw_life_days(rng, median_days=100.0, dispersion=0.0), 6)
    100.0
    """
    if not (math.isfinite(median_days) and median_days > 0):
        raise ValueError(f"median_days must be a finite number > 0, got {median_days!r}")
    if not (math.isfinite(dispersion) and dispersion >= 0):
        raise ValueError(f"dispersion must be a finite number >= 0, got {dispersion!r}")
    return float(median_days * math.exp(dispersion * rng.standard_normal()))

"""Prognosis: degradation models of one unit's signal, time to failure, and offline metrics.

Time is in hours (``t`` = hours since the unit entered service or its last renewal; forecasts are
hours after the last observation). Every fitted estimator has ``to_state() -> dict`` of plain
floats/lists and a ``from_state(dict)`` classmethod so the service can persist it as JSON.
Forecasts are advisory: they do not replace protective trips, and local codes and qualified
personnel decide on maintenance and operation.
"""

from prognosis_service.health._checks import (
    InvalidParameterError,
    NotEnoughDataError,
    NotFittedError,
)
from prognosis_service.prognosis._first_passage import (
    random_drift_failure_probability,
    random_drift_first_passage_cdf,
)
from prognosis_service.prognosis.degradation import (
    ADVISORY,
    CandidateResult,
    ExponentialDegradation,
    FleetPrior,
    LinearTrendExtrapolation,
    ModelComparison,
    NoForecast,
    TimeToFailureForecast,
    WienerDegradation,
    forecast_time_to_failure,
    select_model,
)
from prognosis_service.prognosis.metrics import (
    alpha_lambda_accuracy,
    interval_coverage,
    phm08_penalty,
    phm08_score,
    prognostic_horizon,
    relative_accuracy,
)

__all__ = [
    "ADVISORY",
    "CandidateResult",
    "ExponentialDegradation",
    "FleetPrior",
    "InvalidParameterError",
    "LinearTrendExtrapolation",
    "ModelComparison",
    "NoForecast",
    "NotEnoughDataError",
    "NotFittedError",
    "TimeToFailureForecast",
    "WienerDegradation",
    "alpha_lambda_accuracy",
    "forecast_time_to_failure",
    "interval_coverage",
    "phm08_penalty",
    "phm08_score",
    "prognostic_horizon",
    "random_drift_failure_probability",
    "random_drift_first_passage_cdf",
    "relative_accuracy",
    "select_model",
]

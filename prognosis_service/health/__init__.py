"""Health assessment: operating regimes, healthy baselines, anomaly scores and health indices.

Pure modelling over numpy arrays (no database, no HTTP). Every fitted estimator has
``to_state() -> dict`` of plain floats/lists and a ``from_state(dict)`` classmethod so the service
can persist it as JSON. Anomaly verdicts are advisory: they do not replace protective trips, and
local codes and qualified personnel decide what is done on the machine.
"""

from prognosis_service.health._checks import (
    InvalidParameterError,
    NotEnoughDataError,
    NotFittedError,
)
from prognosis_service.health.anomaly import (
    BaselineAssessment,
    HotellingT2,
    RegimeBaseline,
    robust_centre_scale,
    t2_control_limit,
)
from prognosis_service.health.health_index import (
    DEFAULT_FAILURE_MODES,
    FailureMode,
    HealthIndex,
    IndicatorRule,
)
from prognosis_service.health.regimes import RegimeBinning

__all__ = [
    "DEFAULT_FAILURE_MODES",
    "BaselineAssessment",
    "FailureMode",
    "HealthIndex",
    "HotellingT2",
    "IndicatorRule",
    "InvalidParameterError",
    "NotEnoughDataError",
    "NotFittedError",
    "RegimeBaseline",
    "RegimeBinning",
    "robust_centre_scale",
    "t2_control_limit",
]

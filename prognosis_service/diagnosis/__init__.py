"""Fault diagnosis: which component is going, and why.

Pure modelling over plain arrays (no database, no HTTP, no gateway code): rule evidence in plain
words (:func:`gather_evidence`), a fault classifier on baseline-relative features
(:class:`FaultClassifier`, :func:`diagnostic_features`) and their combination
(:func:`diagnose`). Training rows come as a :class:`DiagnosisTable` (feature names, X, y, regime,
unit id), from simulation (``wellspan.training_data``) or from the operator's own history
labelled by maintenance events (:func:`label_maintenance_history`).

Diagnoses are advisory: they support, and do not replace, inspection by qualified personnel;
they are not protective trips, and local codes and qualified personnel decide what is done.
"""

from prognosis_service.diagnosis.baseline import IndicatorBaseline
from prognosis_service.diagnosis.classifier import FaultClassifier
from prognosis_service.diagnosis.diagnose import (
    ADVISORY,
    MODE_WORDS,
    NOT_SURE,
    Diagnosis,
    diagnose,
    pool_diagnoses,
)
from prognosis_service.diagnosis.evidence import (
    BEARING_LINES,
    DIAGNOSED_MODES,
    Evidence,
    gather_evidence,
    mode_strengths,
)
from prognosis_service.diagnosis.features import (
    DIFFERENTIAL_FEATURE,
    SUCTION_FEATURE,
    DiagnosisTable,
    diagnostic_features,
    window_features,
)
from prognosis_service.diagnosis.labels import label_maintenance_history

__all__ = [
    "ADVISORY",
    "BEARING_LINES",
    "DIAGNOSED_MODES",
    "DIFFERENTIAL_FEATURE",
    "MODE_WORDS",
    "NOT_SURE",
    "SUCTION_FEATURE",
    "Diagnosis",
    "DiagnosisTable",
    "Evidence",
    "FaultClassifier",
    "IndicatorBaseline",
    "diagnose",
    "diagnostic_features",
    "gather_evidence",
    "label_maintenance_history",
    "mode_strengths",
    "pool_diagnoses",
    "window_features",
]

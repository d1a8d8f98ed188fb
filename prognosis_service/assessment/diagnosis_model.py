"""The fault classifier the service uses: a saved :class:`FaultClassifier` state, loaded once.

The built-in model (``diagnosis_model.json`` beside this module) was trained by
``wellspan train-diagnosis --simulated-only --output prognosis_service/assessment/
diagnosis_model.json`` on the simulator's labelled fault data (seed 2026, every fault mode at
three operating regimes); a test retrains it and checks it is reproduced. The service never runs
the simulator itself (the gateway and service packages do not import each other). Operators
retrain with their own maintenance-labelled history and point ``diagnosis_model_path`` at the
result.
"""

from __future__ import annotations

import functools
import json
import logging
from pathlib import Path
from typing import Any

from prognosis_service.diagnosis import FaultClassifier

__all__ = ["BUILTIN_MODEL", "DiagnosisModelError", "load_classifier", "save_classifier"]

BUILTIN_MODEL = Path(__file__).with_name("diagnosis_model.json")
log = logging.getLogger("wellspan.assessment")


class DiagnosisModelError(ValueError):
    """A saved diagnosis model cannot be read."""


def save_classifier(clf: FaultClassifier, path: Path, meta: dict[str, Any]) -> None:
    """Write the classifier state and how it was trained (``meta``) as JSON."""
    body = {"classifier": clf.to_state(), "trained": meta}
    path.write_text(json.dumps(body, indent=1, sort_keys=True) + "\n", encoding="utf-8")


def _read(path: Path) -> FaultClassifier:
    try:
        body = json.loads(path.read_text(encoding="utf-8"))
        return FaultClassifier.from_state(body["classifier"])
    except OSError as exc:
        raise DiagnosisModelError(f"{path}: cannot read: {exc.strerror}") from None
    except (ValueError, KeyError, TypeError) as exc:
        raise DiagnosisModelError(f"{path}: not a saved diagnosis model: {exc}") from None


@functools.lru_cache(maxsize=4)
def load_classifier(path: str | None = None) -> FaultClassifier | None:
    """The classifier at ``path`` (default: the built-in model), or None if there is none.

    Without a classifier the diagnosis rests on the rule evidence alone.

    Raises
    ------
    DiagnosisModelError
        When ``path`` is given and cannot be read as a saved model.
    """
    if path:
        return _read(Path(path))
    if not BUILTIN_MODEL.exists():
        log.warning("no built-in diagnosis model at %s: rule evidence only", BUILTIN_MODEL)
        return None
    return _read(BUILTIN_MODEL)

"""The background assessment worker: finds assets with new windows and assesses each in turn."""

from __future__ import annotations

import logging
import os
import socket
import threading
import uuid
from collections.abc import Callable

from sqlalchemy import func, or_, select

from prognosis_service.alerts.rules import Reading
from prognosis_service.assessment.assessor import AssessmentConfig, AssessmentOutcome, assess_asset
from prognosis_service.assessment.diagnosis_model import load_classifier
from prognosis_service.assessment.models import AssetAssessment
from prognosis_service.diagnosis import FaultClassifier
from prognosis_service.store.engine import Store
from prognosis_service.store.models import MessageRow

__all__ = ["AssessmentWorker", "assets_due"]

log = logging.getLogger("wellspan.assessment")


def assets_due(store: Store, *, limit: int) -> list[str]:
    """Assets with windows not yet looked at, or marked for reassessment (event, backlog)."""
    newest = (
        select(MessageRow.asset_id, func.max(MessageRow.id).label("top"))
        .group_by(MessageRow.asset_id)
        .subquery()
    )
    stmt = (
        select(newest.c.asset_id)
        .outerjoin(AssetAssessment, AssetAssessment.asset_id == newest.c.asset_id)
        .where(
            or_(
                AssetAssessment.asset_id.is_(None),
                newest.c.top > AssetAssessment.cursor_id,
                AssetAssessment.backlog.is_(True),
            )
        )
        .order_by(newest.c.asset_id)
        .limit(limit)
    )
    with store.read() as session:
        return [str(a) for a in session.scalars(stmt)]


class AssessmentWorker:
    """Assess assets with new data every ``interval_s`` seconds, in a daemon thread.

    Each cycle takes at most ``max_assets_per_cycle`` assets and at most
    ``config.batch_windows`` windows of each (an asset with more is taken again next cycle), so
    one cycle's work is bounded. An error on one asset is logged and the others go on. For every
    processed window and asset, alert readings (anomaly, zone, time to failure, diagnosis,
    channel quality) go to ``on_readings`` when given.

    Parameters
    ----------
    store : Store
    interval_s : float
        Wait between cycles when there is nothing left to do.
    on_readings : callable, optional
        Called with the list of readings of each assessed asset.
    config : AssessmentConfig, optional
    diagnosis_model_path : str, optional
        A saved classifier (``wellspan train-diagnosis``); default the built-in model.
    max_assets_per_cycle : int
    """

    def __init__(
        self,
        store: Store,
        *,
        interval_s: float = 30.0,
        on_readings: Callable[[list[Reading]], object] | None = None,
        config: AssessmentConfig | None = None,
        diagnosis_model_path: str | None = None,
        max_assets_per_cycle: int = 50,
    ) -> None:
        self.store = store
        self.interval_s = float(interval_s)
        self.on_readings = on_readings
        self.config = config or AssessmentConfig()
        self.diagnosis_model_path = diagnosis_model_path or None
        self.max_assets_per_cycle = int(max_assets_per_cycle)
        self.owner = f"{socket.gethostname()[:30]}-{os.getpid()}-{uuid.uuid4().hex[:8]}"
        self.cycles = 0
        self.errors = 0
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._classifier: FaultClassifier | None = None
        self._classifier_loaded = False

    def classifier(self) -> FaultClassifier | None:
        if not self._classifier_loaded:
            self._classifier = load_classifier(self.diagnosis_model_path)
            self._classifier_loaded = True
        return self._classifier

    def run_once(self) -> list[AssessmentOutcome]:
        """One cycle: assess the due assets; returns their outcomes."""
        outcomes = []
        for asset_id in assets_due(self.store, limit=self.max_assets_per_cycle):
            if self._stop.is_set():
                break
            try:
                outcome = assess_asset(
                    self.store,
                    asset_id,
                    config=self.config,
                    classifier=self.classifier(),
                    owner=self.owner,
                )
            except Exception:
                self.errors += 1
                log.exception("assessment of %s failed; other assets go on", asset_id)
                continue
            outcomes.append(outcome)
            if outcome.readings and self.on_readings is not None:
                try:
                    self.on_readings(outcome.readings)
                except Exception:
                    self.errors += 1
                    log.exception("on_readings failed for %s", asset_id)
        self.cycles += 1
        return outcomes

    def _loop(self) -> None:
        while not self._stop.is_set():
            try:
                outcomes = self.run_once()
            except Exception:
                self.errors += 1
                log.exception("assessment cycle failed")
                outcomes = []
            busy = any(o.backlog for o in outcomes) or (
                len(outcomes) >= self.max_assets_per_cycle and any(o.processed for o in outcomes)
            )
            self._stop.wait(0.0 if busy else self.interval_s)

    def start(self) -> None:
        if self._thread is not None:
            return
        self._stop.clear()
        self._thread = threading.Thread(target=self._loop, name="wellspan-assess", daemon=True)
        self._thread.start()
        log.info("assessment worker started (every %g s, owner %s)", self.interval_s, self.owner)

    def stop(self, timeout: float = 30.0) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout)
            self._thread = None

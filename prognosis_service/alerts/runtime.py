"""The alert engine inside the running service: built from the settings, with its workers.

:func:`build_alert_service` gives every replica (HTTP-only ones too) an
:class:`~prognosis_service.alerts.service.AlertService` over the store, so alerts can be listed,
acknowledged and resolved anywhere. :class:`AlertWorkers` runs where the service runs its workers
(with the ingest): the webhook delivery worker, the MQTT alert publisher, and a periodic check
that raises silence alerts (gateways and assets gone quiet) and picks up changed rules.
"""

from __future__ import annotations

import hashlib
import logging
import threading
from typing import Any

from prognosis_service.alerts.delivery import DeliveryWorker, SqlDeliveryRepository
from prognosis_service.alerts.mqtt_publisher import AlertPublisher
from prognosis_service.alerts.rules import AlertChange, AlertEngine, AlertRulesError
from prognosis_service.alerts.rules_source import RulesInForce, rules_in_force
from prognosis_service.alerts.service import AlertService
from prognosis_service.alerts.signing import SecretSealer
from prognosis_service.alerts.ssrf import TargetPolicy
from prognosis_service.settings import Settings
from prognosis_service.store.engine import Store

__all__ = [
    "AlertWorkers",
    "build_alert_service",
    "refresh_rules",
    "sealer_for",
    "target_policy_for",
]

log = logging.getLogger(__name__)

# Used only in development when no key is set: fixed, so sealed secrets survive a restart, and
# no secret at all (settings refuse an empty key in production).
_DEVELOPMENT_SEAL_KEY = hashlib.sha256(b"wellspan development seal key, not a secret").digest()
_JOIN_S = 30.0  # longest wait for a thread at shutdown (a delivery may be mid-request)


def sealer_for(settings: Settings) -> SecretSealer:
    """The sealer of webhook secrets from ``alerts_seal_key`` (development: a fixed key)."""
    text = settings.alerts_seal_key.get_secret_value()
    if not text:
        return SecretSealer(_DEVELOPMENT_SEAL_KEY)
    return SecretSealer.from_text(text)


def target_policy_for(settings: Settings) -> TargetPolicy:
    """Which webhook URLs are acceptable (settings ``webhook_allow_private``,
    ``webhook_allow_http``, ``webhook_allowed_networks``)."""
    return TargetPolicy(
        allow_private_targets=settings.webhook_allow_private,
        allow_http=settings.webhook_allow_http,
        allowed_networks=settings.webhook_allowed_networks,
    )


def build_alert_service(settings: Settings, store: Store) -> AlertService:
    """An alert service with the rules in force (API document, else file, else defaults).

    Raises
    ------
    AlertRulesError
        When the rules in force are not valid.
    """
    with store.read() as session:
        found = rules_in_force(session, path=settings.alert_rules_path)
    log.info("alert rules from %s", _describe(found))
    return AlertService(store, AlertEngine(found.rules), source=settings.alerts_source)


def _describe(found: RulesInForce) -> str:
    if found.source == "api":
        return f"the API (version {found.version}, set by {found.set_by})"
    return f"the file {found.path}" if found.source == "file" else "the built-in defaults"


def refresh_rules(service: AlertService, settings: Settings) -> bool:
    """Apply the rules in force if they differ from the engine's; True when they changed.

    Invalid rules (say, a file edited badly) are logged and the current ones kept.
    """
    try:
        with service.store.read() as session:
            found = rules_in_force(session, path=settings.alert_rules_path)
    except AlertRulesError as exc:
        log.error("alert rules not reloaded, keeping the current ones: %s", exc)
        return False
    if found.rules == service.engine.rules:
        return False
    service.engine.rules = found.rules
    log.info("alert rules changed; now from %s", _describe(found))
    return True


class AlertWorkers:
    """The delivery worker, the MQTT publisher and the periodic checks of one replica.

    Parameters
    ----------
    settings : Settings
    service : AlertService
        Its ``on_event`` is set to publish each alert change on MQTT.
    publish_mqtt : bool, default True
        Start the MQTT alert publisher (on the ingest's broker).
    """

    def __init__(self, settings: Settings, service: AlertService, *, publish_mqtt: bool = True):
        self.settings = settings
        self.service = service
        self.worker = DeliveryWorker(
            repository=SqlDeliveryRepository(service.store),
            sealer=sealer_for(settings),
            target_policy=target_policy_for(settings),
        )
        self.publisher: AlertPublisher | None = None
        if publish_mqtt:
            host, port, user, password, tls = settings.broker
            self.publisher = AlertPublisher(
                host,
                port,
                client_id=f"{settings.mqtt_client_id}-alerts"[:64],
                username=user,
                password=password,
                tls=tls,
            )
        self._stop = threading.Event()
        self._threads: list[threading.Thread] = []

    def __repr__(self) -> str:
        return f"AlertWorkers(running={self.running}, publisher={self.publisher!r})"

    @property
    def running(self) -> bool:
        return any(t.is_alive() for t in self._threads)

    @property
    def threads(self) -> list[threading.Thread]:
        return list(self._threads)

    def _publish(self, change: AlertChange, event: dict[str, Any]) -> None:
        # after the commit: a broker problem must not fail the evaluation that stored the alert
        assert self.publisher is not None
        try:
            self.publisher.publish_event(change, event)
        except Exception:
            log.exception("alert %s not published on MQTT", change.alert.alert_id)

    def _checks(self) -> None:
        interval = self.settings.alerts_check_interval_s
        # The first check waits one interval: after a restart the ingest first drains what the
        # broker kept for us, so gateways are not reported silent for the service's own outage.
        while not self._stop.wait(interval):
            self.check_once()

    def check_once(self) -> None:
        """Pick up changed rules, then raise or clear silence alerts (errors are logged)."""
        try:
            refresh_rules(self.service, self.settings)
            self.service.check_silence()
        except Exception:  # the store may be briefly unreachable; try again next time
            log.exception(
                "alert checks failed; next try in %.0f s", self.settings.alerts_check_interval_s
            )

    def start(self) -> None:
        if self._threads:
            raise RuntimeError("alert workers already started")
        if self.publisher is not None:
            self.service.on_event = self._publish
            self.publisher.start()
        self._threads = [
            threading.Thread(
                target=self.worker.run,
                args=(self._stop,),
                kwargs={"poll_s": self.settings.delivery_poll_s},
                name="alerts-delivery",
                daemon=True,
            ),
            threading.Thread(target=self._checks, name="alerts-checks", daemon=True),
        ]
        for t in self._threads:
            t.start()

    def stop(self) -> None:
        """Stop the threads (a delivery in progress finishes first), then disconnect."""
        self._stop.set()
        for t in self._threads:
            t.join(_JOIN_S)
            if t.is_alive():
                log.warning("thread %s did not stop within %.0f s", t.name, _JOIN_S)
        self.worker.close()
        if self.publisher is not None:
            self.service.on_event = None
            self.publisher.stop()

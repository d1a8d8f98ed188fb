"""Alerts: rules with hysteresis and de-duplication, durable signed webhooks, MQTT publishing.

Alerts are advisory: they do not replace the machine's protective trips, and qualified personnel
following local codes decide what is done on site.
"""

from prognosis_service.alerts.delivery import (
    ClaimedDelivery,
    DeliveryRepository,
    DeliveryWorker,
    RetryPolicy,
    SqlDeliveryRepository,
)
from prognosis_service.alerts.mqtt_publisher import AlertPublisher
from prognosis_service.alerts.rules import (
    AlertChange,
    AlertEngine,
    AlertKind,
    AlertRecord,
    AlertRulesConfig,
    AlertRulesError,
    AlertState,
    AnomalyReading,
    ChangeKind,
    ChannelQualityReading,
    DiagnosisReading,
    LastHeardReading,
    RuleSet,
    TimeToFailureReading,
    ZoneReading,
    load_rules,
)
from prognosis_service.alerts.service import AlertService
from prognosis_service.alerts.signing import SecretSealer, SignatureError, verify
from prognosis_service.alerts.ssrf import TargetPolicy, TargetRefusedError, check_target
from prognosis_service.alerts.webhooks import (
    SubscriptionIn,
    SubscriptionOut,
    cloudevent,
    create_subscription,
    enqueue_deliveries,
    pause_subscription,
    resume_subscription,
    rotate_secret,
)

__all__ = [
    "AlertChange",
    "AlertEngine",
    "AlertKind",
    "AlertPublisher",
    "AlertRecord",
    "AlertRulesConfig",
    "AlertRulesError",
    "AlertService",
    "AlertState",
    "AnomalyReading",
    "ChangeKind",
    "ChannelQualityReading",
    "ClaimedDelivery",
    "DeliveryRepository",
    "DeliveryWorker",
    "DiagnosisReading",
    "LastHeardReading",
    "RetryPolicy",
    "RuleSet",
    "SecretSealer",
    "SignatureError",
    "SqlDeliveryRepository",
    "SubscriptionIn",
    "SubscriptionOut",
    "TargetPolicy",
    "TargetRefusedError",
    "TimeToFailureReading",
    "ZoneReading",
    "check_target",
    "cloudevent",
    "create_subscription",
    "enqueue_deliveries",
    "load_rules",
    "pause_subscription",
    "resume_subscription",
    "rotate_secret",
    "verify",
]

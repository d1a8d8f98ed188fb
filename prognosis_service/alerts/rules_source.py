"""Where the alert rules in force come from: the newest API document, else the rules file.

Rules set through the API (``PUT /v1/alert-rules``) are stored as versioned
:class:`~prognosis_service.alerts.models.AlertRulesDocument` rows; the newest one is in force and
overrides the rules file (setting ``alert_rules_path``). Without either, the built-in defaults
apply. Every replica re-reads the source on a timer (see ``alerts.runtime``), so a change made
through one replica reaches the others without a restart.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any, Literal

from sqlalchemy import select
from sqlalchemy.orm import Session

from prognosis_service.alerts.models import AlertRulesDocument
from prognosis_service.alerts.rules import (
    AlertRulesConfig,
    AlertRulesError,
    load_rules,
    parse_rules,
)
from prognosis_service.auth import Principal
from prognosis_service.domain.errors import ForbiddenError, InvalidInputError

__all__ = ["RulesInForce", "rules_in_force", "store_rules"]

RulesOrigin = Literal["api", "file", "defaults"]


@dataclass(frozen=True, slots=True, kw_only=True)
class RulesInForce:
    """The rules that apply now and where they came from.

    ``version``, ``set_by`` and ``set_at`` describe the API document (``source == "api"``);
    ``path`` names the rules file (``source == "file"``).
    """

    rules: AlertRulesConfig
    source: RulesOrigin
    version: int | None = None
    set_by: str | None = None
    set_at: datetime | None = None
    path: str | None = None

    def document(self) -> dict[str, Any]:
        """The full settings in force, as JSON (every key, defaults included)."""
        return self.rules.model_dump(mode="json")


def _newest(session: Session) -> AlertRulesDocument | None:
    return session.scalars(
        select(AlertRulesDocument).order_by(AlertRulesDocument.version.desc()).limit(1)
    ).first()


def rules_in_force(session: Session, *, path: Path | None) -> RulesInForce:
    """The newest API document, else the rules file at ``path``, else the defaults.

    Raises
    ------
    AlertRulesError
        When the file (or a stored document) is not valid rules.
    """
    doc = _newest(session)
    if doc is not None:
        return RulesInForce(
            rules=parse_rules(doc.body),
            source="api",
            version=doc.version,
            set_by=doc.set_by,
            set_at=doc.set_at,
        )
    if path is not None:
        return RulesInForce(rules=load_rules(path), source="file", path=str(path))
    return RulesInForce(rules=AlertRulesConfig(), source="defaults")


def store_rules(
    session: Session, body: object, *, principal: Principal, now: datetime
) -> RulesInForce:
    """Validate ``body`` (same keys as the rules file) and store it as the newest version, set
    by ``principal``.

    Raises
    ------
    ForbiddenError
        When the key is limited to sites (the rules apply to every site).
    InvalidInputError
        Naming the key that is wrong, e.g. ``"rules refused: defaults.anomaly.limit: ..."``.
    """
    if principal.sites is not None:
        raise ForbiddenError(
            "the alert rules apply to every site; a key limited to sites may not set them"
        )
    set_by = principal.name
    try:
        rules = parse_rules(body)
    except AlertRulesError as exc:
        raise InvalidInputError(f"rules refused: {exc}") from None
    assert isinstance(body, Mapping)  # parse_rules refused anything else
    doc = AlertRulesDocument(body=dict(body), set_by=set_by[:100], set_at=now)
    session.add(doc)
    session.flush()
    return RulesInForce(
        rules=rules, source="api", version=doc.version, set_by=doc.set_by, set_at=doc.set_at
    )

"""API keys: a random 32-byte token with a visible key id, stored only as its SHA-256.

A key looks like ``wsk_3f9c1a2b7d4e_<43 url-safe characters>`` and is sent as
``Authorization: Bearer <key>``. Scopes: ``read`` (assets, history, gateways), ``ingest``
(``POST /v1/indicators``), ``admin`` (registering assets, quarantine; implies the other two).
A key may be limited to some sites; it then sees and sends only those sites' data.
"""

from __future__ import annotations

import hashlib
import hmac
import re
import secrets
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import UTC, datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from prognosis_service.store.models import ApiKey

__all__ = ["SCOPES", "Principal", "create_key", "list_keys", "revoke_key", "verify_token"]

SCOPES = ("read", "ingest", "operate", "admin")
_TOKEN = re.compile(r"^wsk_([0-9a-f]{12})_([A-Za-z0-9_-]{43})$")


@dataclass(frozen=True, slots=True)
class Principal:
    """Who is calling: the key id, its scopes and the sites it may touch (None = all)."""

    key_id: str
    name: str
    scopes: frozenset[str]
    sites: frozenset[str] | None

    def has_scope(self, scope: str) -> bool:
        # admin implies every scope; operate (acknowledge alerts, record maintenance) implies read
        if scope in self.scopes or "admin" in self.scopes:
            return True
        return scope == "read" and "operate" in self.scopes

    def may_see(self, site: str) -> bool:
        return self.sites is None or site in self.sites


def _hash(token: str) -> str:
    return hashlib.sha256(token.encode()).hexdigest()


def _principal(row: ApiKey) -> Principal:
    return Principal(
        key_id=row.key_id,
        name=row.name,
        scopes=frozenset(row.scopes.split()),
        sites=frozenset(row.sites.split()) if row.sites else None,
    )


def create_key(
    session: Session, *, name: str, scopes: Iterable[str], sites: Iterable[str] | None = None
) -> tuple[Principal, str]:
    """Store a new key; returns it and the token, which is shown once and never stored."""
    scope_set = sorted(set(scopes))
    bad = [s for s in scope_set if s not in SCOPES]
    if not scope_set or bad:
        raise ValueError(f"scopes must be a non-empty subset of {list(SCOPES)}, got {scope_set}")
    site_list = sorted(set(sites)) if sites else None
    if site_list is not None and any(
        not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9_.-]*", s) for s in site_list
    ):
        raise ValueError(f"sites must be site identifiers, got {site_list}")
    key_id = secrets.token_hex(6)
    token = f"wsk_{key_id}_{secrets.token_urlsafe(32)}"
    row = ApiKey(
        key_id=key_id,
        name=name,
        secret_sha256=_hash(token),
        scopes=" ".join(scope_set),
        sites=" ".join(site_list) if site_list else None,
        created_at=datetime.now(UTC),
        revoked_at=None,
    )
    session.add(row)
    session.flush()
    return _principal(row), token


def verify_token(session: Session, token: str) -> Principal | None:
    """The principal of a valid, unrevoked token; None for anything else."""
    m = _TOKEN.match(token)
    if m is None:
        return None
    row = session.get(ApiKey, m.group(1))
    if row is None or row.revoked_at is not None:
        return None
    if not hmac.compare_digest(row.secret_sha256, _hash(token)):
        return None
    return _principal(row)


def revoke_key(session: Session, key_id: str) -> bool:
    """Revoke a key; False when there is no such key. Revoking twice keeps the first time."""
    row = session.get(ApiKey, key_id)
    if row is None:
        return False
    if row.revoked_at is None:
        row.revoked_at = datetime.now(UTC)
    return True


def list_keys(session: Session) -> list[ApiKey]:
    return list(session.scalars(select(ApiKey).order_by(ApiKey.created_at, ApiKey.key_id)))

"""Assets: register one, import a gateway's assets from its config TOML, list, detail."""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, ValidationError
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from prognosis_service.auth import Principal
from prognosis_service.domain.errors import (
    ConflictError,
    ForbiddenError,
    InvalidInputError,
    NotFoundError,
)
from prognosis_service.domain.pagination import decode_cursor, encode_cursor
from prognosis_service.ingest.pipeline import Pipeline
from prognosis_service.store.engine import insert_for
from prognosis_service.store.models import Asset, MessageRow, Site
from shared_schema import Identifier

__all__ = [
    "AssetSpec",
    "Registration",
    "get_asset",
    "import_gateway_config",
    "list_assets",
    "register_asset",
]


class AssetSpec(BaseModel):
    """What registering an asset takes."""

    model_config = ConfigDict(extra="forbid")

    asset_id: Identifier
    site: Identifier
    gateway_id: Identifier | None = None
    asset_class: str = Field(default="", max_length=64)
    description: str = Field(default="", max_length=500)


@dataclass(frozen=True, slots=True)
class Registration:
    asset: Asset
    created: bool
    readmitted: int  # quarantined messages of this asset stored now that it is known


def register_asset(
    session: Session, pipeline: Pipeline, spec: AssetSpec, principal: Principal | None = None
) -> Registration:
    """Register an asset (idempotent for the same site); re-admits its quarantined messages.

    Raises
    ------
    ConflictError
        If the asset id is already registered at another site.
    """
    if principal is not None and not principal.may_see(spec.site):
        raise ForbiddenError(f"this key may not register assets at site {spec.site!r}")
    existing = session.get(Asset, spec.asset_id)
    if existing is not None and existing.site_id != spec.site:
        where = (
            f"at site {existing.site_id!r}"
            if principal is None or principal.may_see(existing.site_id)
            else "at another site"  # a site this key may not see is not named
        )
        raise ConflictError(f"asset {spec.asset_id!r} is registered {where}, not {spec.site!r}")
    now = datetime.now(UTC)
    session.execute(
        insert_for(session)(Site).values(site_id=spec.site, created_at=now).on_conflict_do_nothing()
    )
    created = existing is None
    if existing is None:
        existing = Asset(
            asset_id=spec.asset_id,
            site_id=spec.site,
            gateway_id=spec.gateway_id,
            asset_class=spec.asset_class,
            description=spec.description,
            registered_at=now,
        )
        session.add(existing)
    else:
        existing.gateway_id = spec.gateway_id or existing.gateway_id
        existing.asset_class = spec.asset_class or existing.asset_class
        existing.description = spec.description or existing.description
    session.flush()
    readmitted = pipeline.readmit_for_asset(session, spec.asset_id)
    return Registration(existing, created, readmitted)


def import_gateway_config(
    session: Session, pipeline: Pipeline, text: str, principal: Principal | None = None
) -> list[Registration]:
    """Register the assets of a gateway config file (top-level ``gateway_id`` and ``site``, one
    ``[[assets]]`` table per asset with ``asset_id`` and ``asset_class``); other keys are the
    gateway's business and are ignored here."""
    try:
        doc: dict[str, Any] = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InvalidInputError(f"not valid TOML: {exc}") from None
    assets = doc.get("assets")
    if not isinstance(assets, list) or not assets:
        raise InvalidInputError("the file has no [[assets]] tables")
    specs = []
    for i, table in enumerate(assets):
        if not isinstance(table, dict):
            raise InvalidInputError(f"assets[{i}] is not a table")
        try:
            specs.append(
                AssetSpec(
                    asset_id=table.get("asset_id"),
                    site=doc.get("site"),
                    gateway_id=doc.get("gateway_id"),
                    asset_class=str(table.get("asset_class", "")),
                )
            )
        except ValidationError as exc:
            err = exc.errors()[0]
            key = ".".join(str(p) for p in err["loc"])
            where = key if key in ("site", "gateway_id") else f"assets[{i}].{key}"
            raise InvalidInputError(f"{where}: {err['msg']}") from None
    return [register_asset(session, pipeline, spec, principal) for spec in specs]


def get_asset(session: Session, asset_id: str, principal: Principal) -> Asset:
    asset = session.get(Asset, asset_id)
    # another site's asset answers exactly as a missing one: its existence must not leak
    if asset is None or not principal.may_see(asset.site_id):
        raise NotFoundError("asset not found")
    return asset


def last_window_start(session: Session, asset_id: str) -> datetime | None:
    return session.scalar(
        select(func.max(MessageRow.window_start)).where(MessageRow.asset_id == asset_id)
    )


def list_assets(
    session: Session,
    principal: Principal,
    *,
    site: str | None = None,
    limit: int = 100,
    cursor: str | None = None,
) -> tuple[list[Asset], str | None]:
    stmt = select(Asset).order_by(Asset.asset_id).limit(limit + 1)
    if site is not None:
        if not principal.may_see(site):
            raise ForbiddenError(f"this key may not read site {site!r}")
        stmt = stmt.where(Asset.site_id == site)
    if principal.sites is not None:
        stmt = stmt.where(Asset.site_id.in_(sorted(principal.sites)))
    if cursor:
        (after,) = decode_cursor(cursor, 1)
        stmt = stmt.where(Asset.asset_id > str(after))
    rows = list(session.scalars(stmt))
    more = len(rows) > limit
    rows = rows[:limit]
    return rows, encode_cursor(rows[-1].asset_id) if more else None

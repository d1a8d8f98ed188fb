"""Alembic environment: metadata from our models, URL from the caller or the service settings."""

from __future__ import annotations

from alembic import context
from sqlalchemy import create_engine, pool

from prognosis_service.store.models import Base, import_all_models, object_applies

import_all_models()
config = context.config
target_metadata = Base.metadata


def _url() -> str:
    url = config.attributes.get("database_url")
    if url:
        return str(url)
    from prognosis_service.settings import load_settings

    return load_settings().database_url


def run_migrations_offline() -> None:
    context.configure(url=_url(), target_metadata=target_metadata, literal_binds=True)
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    engine = create_engine(_url(), poolclass=pool.NullPool)
    with engine.connect() as connection:
        context.configure(
            connection=connection,
            target_metadata=target_metadata,
            render_as_batch=connection.dialect.name == "sqlite",
            include_object=object_applies(connection.dialect.name),
        )
        with context.begin_transaction():
            context.run_migrations()
    engine.dispose()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()

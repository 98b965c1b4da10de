"""Alembic environment: the vault's models are the target; batch mode for SQLite.

The database URL comes from the Alembic config (``sqlalchemy.url``), which
:func:`magvault.store.schema.alembic_config` fills in; an already open
connection may be passed in ``config.attributes["connection"]``.
"""

from __future__ import annotations

from alembic import context

from magvault.store.base import Base
from magvault.store import models  # noqa: F401  (registers the tables)
from magvault.store.engine import make_engine

config = context.config
target_metadata = Base.metadata


def run_migrations_offline() -> None:
    context.configure(url=config.get_main_option("sqlalchemy.url"), target_metadata=target_metadata,
                      literal_binds=True, render_as_batch=True, compare_type=True)
    with context.begin_transaction():
        context.run_migrations()


def _run(connection) -> None:
    context.configure(connection=connection, target_metadata=target_metadata,
                      render_as_batch=True, compare_type=True)
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    # Foreign keys off: SQLite batch operations recreate tables.
    engine = make_engine(config.get_main_option("sqlalchemy.url"), foreign_keys=False)
    try:
        with engine.connect() as connection:
            _run(connection)
            connection.commit()
    finally:
        engine.dispose()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()

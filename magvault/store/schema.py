"""Create and upgrade the schema through Alembic, and check where a database stands."""

from __future__ import annotations

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine

from ..paths import part_dir


def alembic_config(url: str) -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", str(part_dir("migrations")))
    cfg.set_main_option("sqlalchemy.url", url.replace("%", "%%"))
    return cfg


def upgrade(url: str, revision: str = "head") -> None:
    command.upgrade(alembic_config(url), revision)


def downgrade(url: str, revision: str = "base") -> None:
    command.downgrade(alembic_config(url), revision)


def head_revision(url: str) -> str:
    return ScriptDirectory.from_config(alembic_config(url)).get_current_head()


def current_revision(engine: Engine) -> str | None:
    with engine.connect() as conn:
        rev = MigrationContext.configure(conn).get_current_revision()
        conn.rollback()
        return rev

"""Engines and sessions for SQLite and PostgreSQL.

SQLite runs in WAL mode with a busy timeout, enforces foreign keys on every
connection, and takes its write lock at the start of a write transaction
(``BEGIN IMMEDIATE``) so that concurrent writers wait instead of failing with
"database is locked" half-way through.  Write units of work use an engine
carrying the ``magvault_write`` execution option; reads use plain ``BEGIN``.
"""

from __future__ import annotations

import os
from pathlib import Path

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url

SQLITE_BUSY_TIMEOUT_MS = 60_000


def database_url(path_or_url: str | os.PathLike) -> str:
    """Turn a file path or a SQLAlchemy URL into a URL (``postgresql://`` uses psycopg 3)."""
    text = os.fspath(path_or_url)
    if "://" not in text:
        return f"sqlite:///{Path(text).expanduser().resolve()}"
    url = make_url(text)
    if url.drivername in ("postgresql", "postgres"):
        url = url.set(drivername="postgresql+psycopg")
    return url.render_as_string(hide_password=False)


def sqlite_path(url: str) -> Path | None:
    u = make_url(url)
    if u.get_backend_name() != "sqlite" or not u.database or u.database == ":memory:":
        return None
    return Path(u.database)


def make_engine(url: str, *, foreign_keys: bool = True, **kwargs) -> Engine:
    """Create an engine; for SQLite wire up WAL, busy timeout, foreign keys and write locking.

    ``foreign_keys=False`` is for migrations: SQLite batch operations recreate
    tables and must run with foreign-key enforcement off.
    """
    u = make_url(url)
    if u.get_backend_name() != "sqlite":
        return create_engine(url, pool_pre_ping=True, **kwargs)

    engine = create_engine(url, connect_args={"timeout": SQLITE_BUSY_TIMEOUT_MS / 1000}, **kwargs)

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection, _record):
        # Let SQLAlchemy's "begin" event emit BEGIN itself (pysqlite's own is deferred and late).
        dbapi_connection.isolation_level = None
        cur = dbapi_connection.cursor()
        cur.execute(f"PRAGMA busy_timeout = {SQLITE_BUSY_TIMEOUT_MS}")
        if sqlite_path(url) is not None:
            cur.execute("PRAGMA journal_mode = WAL")
            cur.execute("PRAGMA synchronous = NORMAL")
        cur.execute(f"PRAGMA foreign_keys = {'ON' if foreign_keys else 'OFF'}")
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn):
        write = conn.get_execution_options().get("magvault_write", False)
        conn.exec_driver_sql("BEGIN IMMEDIATE" if write else "BEGIN")

    return engine


def writer(engine: Engine) -> Engine:
    """The same engine (and pool) marked for write units of work."""
    return engine.execution_options(magvault_write=True)

"""Fixtures: a fresh, migrated database per test on SQLite and on PostgreSQL.

Back-ends come from MAGVAULT_TEST_BACKENDS (comma-separated: sqlite, postgresql);
by default SQLite always and PostgreSQL when the server at MAGVAULT_TEST_PG
answers.  Each back-end is migrated once per run into a template (a file for
SQLite, a template database for PostgreSQL) and copied for every test, since
hundreds of full migrations would be slow.  With CI=true a requested but
unreachable PostgreSQL fails the run instead of being skipped.
"""

from __future__ import annotations

import os
import shutil
import uuid
from pathlib import Path

import pytest

PG_ADMIN_URL = os.environ.get("MAGVAULT_TEST_PG", "postgresql+psycopg://postgres@127.0.0.1:5432/test")
DB_FIXTURES = {"db_url", "vault", "backend"}


def _pg_reachable() -> str | None:
    """None when the server answers and may create databases, else the reason."""
    try:
        import psycopg
        from sqlalchemy.engine import make_url

        u = make_url(PG_ADMIN_URL)
        with psycopg.connect(host=u.host, port=u.port or 5432, user=u.username, dbname=u.database,
                             password=u.password, connect_timeout=3, autocommit=True) as conn:
            name = f"magvault_probe_{uuid.uuid4().hex[:8]}"
            conn.execute(f'CREATE DATABASE "{name}"')
            conn.execute(f'DROP DATABASE "{name}"')
        return None
    except Exception as exc:  # the reason is reported, not hidden
        return f"{type(exc).__name__}: {str(exc).strip().splitlines()[0] if str(exc).strip() else ''}"


def _requested_backends() -> tuple[list[str], str | None]:
    raw = os.environ.get("MAGVAULT_TEST_BACKENDS")
    if raw:
        wanted = [b.strip() for b in raw.split(",") if b.strip()]
        unknown = set(wanted) - {"sqlite", "postgresql"}
        if unknown:
            raise pytest.UsageError(f"MAGVAULT_TEST_BACKENDS: unknown back-end(s) {sorted(unknown)}")
    else:
        wanted = ["sqlite", "postgresql"]
    reason = None
    if "postgresql" in wanted:
        reason = _pg_reachable()
        if reason and (raw or os.environ.get("CI") == "true"):
            raise pytest.UsageError(f"PostgreSQL was requested but cannot be used at {PG_ADMIN_URL}: {reason}")
        if reason:
            wanted.remove("postgresql")
    return wanted, reason


def pytest_configure(config):
    backends, reason = _requested_backends()
    config._magvault_backends = backends
    config._magvault_pg_reason = reason


def pytest_report_header(config):
    lines = [f"magvault back-ends: {', '.join(config._magvault_backends)}"]
    if config._magvault_pg_reason:
        lines.append(f"PostgreSQL not used ({config._magvault_pg_reason}); set MAGVAULT_TEST_PG to point at one")
    return lines


def pytest_generate_tests(metafunc):
    if "backend" in metafunc.fixturenames:
        metafunc.parametrize("backend", metafunc.config._magvault_backends, indirect=True)


def pytest_collection_modifyitems(config, items):
    for item in items:
        if DB_FIXTURES & set(getattr(item, "fixturenames", ())):
            item.add_marker(pytest.mark.db)


@pytest.fixture
def backend(request) -> str:
    return request.param


@pytest.fixture(autouse=True)
def _no_database_from_environment(monkeypatch):
    # Tests name their database explicitly; a MAGVAULT_DB of the developer's must not leak in.
    monkeypatch.delenv("MAGVAULT_DB", raising=False)


class _Templates:
    def __init__(self, tmp_root: Path):
        self.tmp_root = tmp_root
        self.sqlite_template: Path | None = None
        self.pg_template: str | None = None
        self.pg_created: list[str] = []

    def sqlite(self, dest: Path) -> str:
        from magvault.store import schema

        if self.sqlite_template is None:
            self.sqlite_template = self.tmp_root / "template.db"
            schema.upgrade(f"sqlite:///{self.sqlite_template}")
        shutil.copyfile(self.sqlite_template, dest)
        return f"sqlite:///{dest}"

    def postgresql(self) -> str:
        from sqlalchemy.engine import make_url

        from magvault.store import schema

        admin = make_url(PG_ADMIN_URL)
        if self.pg_template is None:
            self.pg_template = f"magvault_tpl_{uuid.uuid4().hex[:10]}"
            self._admin(f'CREATE DATABASE "{self.pg_template}"')
            self.pg_created.append(self.pg_template)
            schema.upgrade(admin.set(database=self.pg_template).render_as_string(hide_password=False))
        name = f"magvault_t_{uuid.uuid4().hex[:10]}"
        self._admin(f'CREATE DATABASE "{name}" TEMPLATE "{self.pg_template}"')
        self.pg_created.append(name)
        return admin.set(database=name).render_as_string(hide_password=False)

    def drop(self, url: str) -> None:
        from sqlalchemy.engine import make_url

        name = make_url(url).database
        self._admin(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        if name in self.pg_created:
            self.pg_created.remove(name)

    def _admin(self, sql: str) -> None:
        import psycopg
        from sqlalchemy.engine import make_url

        u = make_url(PG_ADMIN_URL)
        with psycopg.connect(host=u.host, port=u.port or 5432, user=u.username, dbname=u.database,
                             password=u.password, autocommit=True) as conn:
            conn.execute(sql)

    def cleanup(self) -> None:
        for name in list(self.pg_created):
            try:
                self._admin(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
            except Exception:
                pass


@pytest.fixture(scope="session")
def _templates(tmp_path_factory):
    templates = _Templates(tmp_path_factory.mktemp("templates"))
    yield templates
    templates.cleanup()


@pytest.fixture
def db_url(backend, _templates, tmp_path):
    """URL of a fresh vault database at the newest schema revision."""
    if backend == "sqlite":
        yield _templates.sqlite(tmp_path / "vault.db")
    else:
        url = _templates.postgresql()
        yield url
        _templates.drop(url)


@pytest.fixture
def vault(db_url):
    import magvault

    v = magvault.open(db_url)
    yield v
    v.close()


@pytest.fixture
def make_fresh_pg_database(_templates, backend):
    """An empty (unmigrated) database of the current back-end, for migration tests."""
    created = []

    def make(tmp_path: Path) -> str:
        if backend == "sqlite":
            return f"sqlite:///{tmp_path / f'empty-{uuid.uuid4().hex[:6]}.db'}"
        from sqlalchemy.engine import make_url

        name = f"magvault_e_{uuid.uuid4().hex[:10]}"
        _templates._admin(f'CREATE DATABASE "{name}"')
        _templates.pg_created.append(name)
        url = make_url(PG_ADMIN_URL).set(database=name).render_as_string(hide_password=False)
        created.append(url)
        return url

    yield make
    for url in created:
        _templates.drop(url)

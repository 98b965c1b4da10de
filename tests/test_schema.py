"""Schema: models and migrations agree, migrations go up and down, constraints and triggers hold."""

from __future__ import annotations

import datetime as dt

import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import insert, inspect, text, update
from sqlalchemy.exc import DBAPIError, IntegrityError

from magvault.store import schema
from magvault.store.base import Base
from magvault.store.engine import make_engine
from magvault.store.models import Event, Result, Run, Specimen, Transition

NOW = dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc)


def test_models_and_migrations_agree(db_url):
    engine = make_engine(db_url)
    try:
        with engine.connect() as conn:
            diff = compare_metadata(MigrationContext.configure(conn, opts={"compare_type": True}), Base.metadata)
    finally:
        engine.dispose()
    assert diff == [], f"models and migrations differ: {diff}"


def test_upgrade_from_empty_and_downgrade_to_base(make_fresh_pg_database, tmp_path):
    url = make_fresh_pg_database(tmp_path)
    schema.upgrade(url)
    engine = make_engine(url)
    try:
        tables = set(inspect(engine).get_table_names())
        assert {"specimen", "run", "raw_file", "series", "derivation", "transition", "event"} <= tables
        assert schema.current_revision(engine) == schema.head_revision(url)
        with engine.connect() as conn:
            kinds = {r[0] for r in conn.execute(text("SELECT id FROM transition_kind"))}
        assert {"ordering", "low-t"} <= kinds
        engine.dispose()
        schema.downgrade(url, "base")
        remaining = set(inspect(engine).get_table_names()) - {"alembic_version"}
        assert remaining == set()
        schema.upgrade(url)  # and up again: the downgrade left nothing behind that blocks it
        assert schema.current_revision(engine) == schema.head_revision(url)
    finally:
        engine.dispose()


def _engine(db_url):
    return make_engine(db_url)


def _specimen(conn, code="S1", **kw):
    return conn.execute(insert(Specimen).values(code=code, same_orientation=False, created_at=NOW, **kw)
                        .returning(Specimen.id)).scalar_one()


@pytest.mark.parametrize("values", [
    {"mass_kg": 0.0}, {"mass_kg": -1e-6}, {"mass_uncertainty_kg": -1e-9},
])
def test_specimen_check_constraints(db_url, values):
    engine = _engine(db_url)
    try:
        with pytest.raises(IntegrityError):
            with engine.begin() as conn:
                _specimen(conn, **values)
    finally:
        engine.dispose()


def _run_with_derivation(conn):
    sid = _specimen(conn)
    raw = conn.execute(text("INSERT INTO raw_file (sha256, size, media_type, first_name, data, stored_at) "
                            "VALUES (:h, 1, 'text/plain', 'a.csv', :d, :t) RETURNING id"),
                       {"h": "a" * 64, "d": b"x", "t": NOW.replace(tzinfo=None)}).scalar_one()
    rid = conn.execute(insert(Run).values(specimen_id=sid, kind="thermomagnetic", status="recorded", raw_file_id=raw,
                                          conditions={}, created_at=NOW).returning(Run.id)).scalar_one()
    did = conn.execute(text(
        "INSERT INTO derivation (method, version, parameters, inputs_key, lineage_key, input_runs, input_hashes, "
        "software_version, created_at, \"current\", warnings, diagnostics) VALUES ('m', '1', '{}', :k, :k, '[]', "
        "'[]', '0', :t, true, '[]', '{}') RETURNING id"), {"k": "b" * 64, "t": NOW.replace(tzinfo=None)}).scalar_one()
    return sid, rid, did


@pytest.mark.parametrize("values", [
    {"temperature_K": 0.0}, {"temperature_K": -5.0}, {"uncertainty_K": -0.1}, {"component": 0},
    {"branch": "sideways"}, {"width_K": -1.0},
])
def test_transition_check_constraints(db_url, values):
    engine = _engine(db_url)
    try:
        with engine.begin() as conn:
            sid, rid, did = _run_with_derivation(conn)
        row = dict(derivation_id=did, run_id=rid, specimen_id=sid, kind="ordering", temperature_K=590.0,
                   uncertainty_K=1.0, method="m", component=1, is_primary=True, ambiguous=False, current=True,
                   diagnostics={})
        with engine.begin() as conn:  # the valid row goes in
            conn.execute(insert(Transition).values(**row))
        with pytest.raises(IntegrityError):
            with engine.begin() as conn:
                conn.execute(insert(Transition).values(**{**row, **values}))
    finally:
        engine.dispose()


def test_result_and_run_check_constraints(db_url):
    engine = _engine(db_url)
    try:
        with engine.begin() as conn:
            sid, rid, did = _run_with_derivation(conn)
        base = dict(derivation_id=did, run_id=rid, specimen_id=sid, quantity="Ms", value=1.0, unit="A m2",
                    method="m", current=True, diagnostics={})
        for bad in ({"uncertainty": -1.0}, {"block_temperature_K": 0.0}):
            with pytest.raises(IntegrityError):
                with engine.begin() as conn:
                    conn.execute(insert(Result).values(**{**base, **bad}))
        with pytest.raises(IntegrityError):  # a recorded run must point at bytes
            with engine.begin() as conn:
                conn.execute(insert(Run).values(specimen_id=sid, kind="hysteresis", status="recorded",
                                                conditions={}, created_at=NOW))
        with pytest.raises(IntegrityError):
            with engine.begin() as conn:
                conn.execute(insert(Run).values(specimen_id=sid, kind="no-such-kind", status="planned",
                                                conditions={}, created_at=NOW))
    finally:
        engine.dispose()


def test_foreign_keys_are_enforced(db_url):
    engine = _engine(db_url)
    try:
        with pytest.raises(IntegrityError):
            with engine.begin() as conn:
                conn.execute(insert(Run).values(specimen_id=999999, kind="hysteresis", status="planned",
                                                conditions={}, created_at=NOW))
    finally:
        engine.dispose()


def test_event_log_refuses_update_and_delete(db_url):
    engine = _engine(db_url)
    try:
        with engine.begin() as conn:
            eid = conn.execute(insert(Event).values(user_name="u", action="create", entity="specimen", at=NOW)
                               .returning(Event.id)).scalar_one()
        with pytest.raises(DBAPIError, match="append-only"):
            with engine.begin() as conn:
                conn.execute(update(Event).where(Event.id == eid).values(action="tampered"))
        with pytest.raises(DBAPIError, match="append-only"):
            with engine.begin() as conn:
                conn.execute(text("DELETE FROM event"))
        with engine.connect() as conn:
            assert conn.execute(text("SELECT action FROM event")).scalar_one() == "create"
    finally:
        engine.dispose()


def test_the_catalogue_at_head_is_the_code_s_catalogue(db_url):
    """Migrations freeze what they seed; later catalogue edits must come with a migration of their own."""
    import magvault
    from magvault.catalogue import SEED_KINDS

    with magvault.open(db_url) as vault:
        stored = {k["id"]: k for k in vault.kinds()}
    for kind in SEED_KINDS:
        assert sorted(stored[kind.id]["run_kinds"]) == sorted(kind.run_kinds), kind.id
        assert tuple(stored[kind.id]["window_K"]) == kind.window_K
    assert "calorimetry" in stored["spin-reorientation"]["run_kinds"]

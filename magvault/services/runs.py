"""Runs, their raw bytes and their normalised series."""

from __future__ import annotations

import datetime as dt
import hashlib
from typing import Any

import pandas as pd
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from ..errors import InvalidValue, NotFound
from ..store.frames import unpack_frame
from ..store.models import RawFile, Run, Series, Specimen
from ..timeutil import iso
from . import events


def sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def store_raw(session: Session, data: bytes, name: str, media_type: str, digest: str | None = None) -> RawFile:
    """Insert-or-get the bytes by their SHA-256; safe when two writers store the same bytes at once.

    ``INSERT ... ON CONFLICT DO NOTHING`` lets the second writer through without
    an error (on PostgreSQL it waits for the first to commit); the row is then
    read back.  The bytes are bound at execution, never written into the
    statement: SQLAlchemy caches compiled statements, and a cached ``.values(data=...)``
    would keep the first file a process stores in memory until it exits.
    """
    digest = digest or sha256(data)
    dialect = session.get_bind().dialect.name
    if dialect == "postgresql":
        from sqlalchemy.dialects.postgresql import insert
    else:
        from sqlalchemy.dialects.sqlite import insert
    statement = insert(RawFile.__table__).on_conflict_do_nothing(index_elements=["sha256"])
    values = {"sha256": digest, "size": len(data), "media_type": media_type, "first_name": name[:255],
              "data": data, "stored_at": dt.datetime.now(dt.timezone.utc)}
    session.execute(statement, values)
    if dialect == "sqlite":
        # Python's sqlite3 keeps a cached statement's bound values (SQLite's own copy of the
        # file) until the statement runs again.  Running it again with the same digest and no
        # bytes -- a conflict, so nothing is written -- lets that copy go now.
        session.execute(statement, {**values, "size": 0, "data": b""})
    raw = session.scalar(select(RawFile).where(RawFile.sha256 == digest))
    assert raw is not None
    return raw


def get_run(session: Session, run_id: int) -> Run:
    run = session.get(Run, int(run_id))
    if run is None:
        raise NotFound(f"run {run_id} not found; `magvault runs` lists the runs", field="run")
    return run


def run_summary(run: Run) -> dict[str, Any]:
    return {"id": run.id, "specimen": run.specimen.code, "kind": run.kind, "status": run.status,
            "started": iso(run.started), "finished": iso(run.finished),
            "instrument": run.instrument.name if run.instrument else None, "operator": run.operator,
            "direction": run.direction, "group": run.group_label, "conditions": run.conditions,
            "source_name": run.source_name, "sha256": run.raw_file.sha256 if run.raw_file else None,
            "notes": run.notes, "reason": run.status_reason,
            "superseded_by": run.superseded_by_id}


def log_run(session: Session, specimen: Specimen, data: dict[str, Any], instrument_id: int | None) -> Run:
    run = Run(specimen_id=specimen.id, kind=data["kind"], status=data.get("status", "planned"),
              instrument_id=instrument_id, operator=data.get("operator") or events.current_user(),
              started=data.get("started"), direction=data.get("direction"), group_label=data.get("group"),
              notes=data.get("notes"), conditions={})
    session.add(run)
    session.flush()
    session.refresh(run)
    events.record(session, "create", "run", run.id, specimen_code=specimen.code, after=run_summary(run))
    return run


def store_series(session: Session, run: Run, packed: bytes | memoryview, *, columns: list[str], n_rows: int,
                 shape: str, encoding: str | None, profile_name: str | None,
                 mapping: list[dict[str, Any]]) -> None:
    """Add the run's next series version from a frame packed with :func:`magvault.store.frames.pack_frame`.

    The caller packs (and lets the frame go) first, so a large import holds one copy.
    """
    latest = session.scalar(select(Series.version).where(Series.run_id == run.id)
                            .order_by(Series.version.desc()).limit(1)) or 0
    series = Series(run_id=run.id, version=latest + 1, shape=shape, encoding=encoding, profile_name=profile_name,
                    mapping=mapping, columns=columns, n_rows=n_rows, data=packed)
    session.add(series)
    session.flush()
    session.expire(series, ["data"])  # written; do not keep the packed copy alive until commit


def latest_series(session: Session, run_id: int) -> Series | None:
    return session.scalar(select(Series).where(Series.run_id == run_id).order_by(Series.version.desc()).limit(1))


def read_latest_series(session: Session, run_ids: list[int]) -> dict[int, pd.DataFrame]:
    """Run id -> its newest series, for many runs in one statement (runs without data are left out)."""
    if not run_ids:
        return {}
    newest = (select(Series.run_id, func.max(Series.version).label("version"))
              .where(Series.run_id.in_(run_ids)).group_by(Series.run_id).subquery())
    rows = session.execute(select(Series.run_id, Series.data)
                           .join(newest, (Series.run_id == newest.c.run_id) & (Series.version == newest.c.version)))
    return {run_id: unpack_frame(data) for run_id, data in rows}


def read_series(session: Session, run_id: int, version: int | None = None) -> pd.DataFrame:
    run = get_run(session, run_id)
    q = select(Series).where(Series.run_id == run.id)
    q = q.where(Series.version == version) if version else q.order_by(Series.version.desc()).limit(1)
    series = session.scalar(q)
    if series is None:
        raise NotFound(f"run {run_id} has no data yet (status {run.status}); attach its file with "
                       f"`magvault ingest FILE --run {run_id}`", field="run")
    return unpack_frame(series.data)


def retract(session: Session, run_id: int, reason: str) -> Run:
    run = get_run(session, run_id)
    if run.status == "retracted":
        raise InvalidValue(f"run {run_id} is already retracted", field="run")
    before = run_summary(run)
    run.status, run.status_reason = "retracted", reason
    session.flush()
    events.record(session, "retract", "run", run.id, specimen_code=run.specimen.code, before=before,
                  after=run_summary(run), message=reason)
    return run


def supersede(session: Session, run_id: int, by_id: int, reason: str | None = None) -> Run:
    run, successor = get_run(session, run_id), get_run(session, by_id)
    if run.id == successor.id:
        raise InvalidValue("a run cannot supersede itself", field="by")
    if run.status == "superseded":
        raise InvalidValue(f"run {run_id} is already superseded by run {run.superseded_by_id}", field="run")
    if run.raw_file_id is None:
        raise InvalidValue(f"run {run_id} has no data yet ({run.status}); retract it instead", field="run")
    if successor.status in ("retracted", "superseded"):
        raise InvalidValue(f"run {by_id} is {successor.status}; it cannot replace another run", field="by")
    if successor.specimen_id != run.specimen_id:
        raise InvalidValue(f"run {by_id} belongs to specimen {successor.specimen.code}, "
                           f"not {run.specimen.code}", field="by")
    before = run_summary(run)
    run.status, run.superseded_by_id, run.status_reason = "superseded", successor.id, reason
    session.flush()
    events.record(session, "supersede", "run", run.id, specimen_code=run.specimen.code, before=before,
                  after=run_summary(run), message=reason or f"superseded by run {successor.id}")
    return run

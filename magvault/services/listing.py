"""Read-side queries: DataFrames and detail documents for specimens, runs and events."""

from __future__ import annotations

import datetime as dt
from typing import Any

import pandas as pd
from sqlalchemy import func, select
from sqlalchemy.orm import Session, selectinload

from ..errors import NotFound
from ..store.models import (Composition, Event, Image, Instrument, Orientation, Origin, RawFile, Run,
                            Series, Specimen, Treatment)
from ..timeutil import iso
from . import registry
from .runs import get_run, run_summary

SPECIMEN_COLUMNS = ["code", "parent", "kind", "mass_kg", "mass_uncertainty_kg", "origin", "x", "x_uncertainty",
                    "superstructure", "composition_inherited", "oriented", "n_runs", "storage", "created_at"]
RUN_COLUMNS = ["id", "specimen", "kind", "status", "started", "finished", "instrument", "operator",
               "direction", "group", "source_name", "sha256", "n_rows", "conditions"]


# --- compositions ---------------------------------------------------------------------------

def combine(rows: list[Composition]) -> dict[str, Any] | None:
    """Weighted mean of a specimen's analyses of x (Birge-inflated when they scatter)."""
    from ..analysis.composition import CompositionResult, combine_compositions

    if not rows:
        return None
    results = [CompositionResult(x=c.x, x_uncertainty=c.x_uncertainty, fe_s_ratio=c.fe_s_ratio,
                                 fe_s_ratio_uncertainty=c.fe_s_ratio_uncertainty,
                                 fe_atomic_percent=100 * (1 - c.x) / (2 - c.x), total_wt=None,
                                 warnings=(), basis=c.basis) for c in rows]
    best = combine_compositions(results)
    labels = [c.superstructure for c in sorted(rows, key=lambda c: c.measured_at) if c.superstructure]
    return {"x": best.x, "x_uncertainty": best.x_uncertainty, "fe_s_ratio": best.fe_s_ratio,
            "fe_s_ratio_uncertainty": best.fe_s_ratio_uncertainty, "n_analyses": len(rows),
            "superstructure": labels[-1] if labels else None}


def composition_map(session: Session) -> dict[int, dict[str, Any]]:
    """Specimen id -> combined composition, inherited from the nearest analysed ancestor."""
    by_specimen: dict[int, list[Composition]] = {}
    for c in session.scalars(select(Composition)):
        by_specimen.setdefault(c.specimen_id, []).append(c)
    parents = dict(session.execute(select(Specimen.id, Specimen.parent_id)).all())
    own = {sid: combine(rows) for sid, rows in by_specimen.items()}
    return {sid: {**own[node], "inherited": node != sid, "from_specimen_id": node}
            for sid, node in nearest_analysed(parents, own).items()}


def nearest_analysed(parents: dict[int, int | None], analysed) -> dict[int, int]:
    """Specimen id -> itself or its nearest ancestor in ``analysed`` (specimens with none are left out)."""
    out: dict[int, int] = {}
    for sid in parents:
        node, seen = sid, set()
        while node is not None and node not in analysed and node not in seen:
            seen.add(node)
            node = parents.get(node)
        if node is not None and node in analysed:
            out[sid] = node
    return out


def orientation_of(session: Session, specimen: Specimen) -> dict[str, Any] | None:
    """The newest orientation of the specimen, or its parent's when cut with the same orientation."""
    node, inherited = specimen, False
    while node is not None:
        o = session.scalar(select(Orientation).where(Orientation.specimen_id == node.id)
                           .order_by(Orientation.measured_at.desc(), Orientation.id.desc()).limit(1))
        if o is not None:
            return {"matrix": o.matrix, "system": o.system, "cell": o.cell, "method": o.method,
                    "uncertainty_deg": o.uncertainty_deg, "measured_at": iso(o.measured_at),
                    "inherited": inherited, "from": node.code,
                    "convention": "rows map specimen-frame vectors to the crystal Cartesian frame "
                                  "(x along a, y in the a-b plane, z along c*)"}
        if not node.same_orientation:
            return None
        node, inherited = node.parent, True
    return None


# --- specimens --------------------------------------------------------------------------------

def specimens_frame(session: Session) -> pd.DataFrame:
    rows = session.execute(
        select(Specimen.id, Specimen.code, Specimen.parent_id, Specimen.kind, Specimen.mass_kg,
               Specimen.mass_uncertainty_kg, Origin.name, Specimen.storage, Specimen.created_at,
               Specimen.same_orientation)
        .outerjoin(Origin, Origin.id == Specimen.origin_id).order_by(Specimen.code)).all()
    codes = {r[0]: r[1] for r in rows}
    n_runs = dict(session.execute(select(Run.specimen_id, func.count()).group_by(Run.specimen_id)).all())
    oriented_ids = set(session.scalars(select(Orientation.specimen_id).distinct()))
    parents = {r[0]: (r[2], r[9]) for r in rows}
    comps = composition_map(session)
    records = []
    for (sid, code, parent_id, kind, mass, mass_u, origin, storage, created, _same) in rows:
        comp = comps.get(sid) or {}
        records.append({
            "code": code, "parent": codes.get(parent_id), "kind": kind, "mass_kg": mass,
            "mass_uncertainty_kg": mass_u, "origin": origin, "x": comp.get("x"),
            "x_uncertainty": comp.get("x_uncertainty"), "superstructure": comp.get("superstructure"),
            "composition_inherited": comp.get("inherited") if comp else None,
            "oriented": _oriented(sid, parents, oriented_ids), "n_runs": int(n_runs.get(sid, 0)),
            "storage": storage, "created_at": iso(created)})
    frame = pd.DataFrame.from_records(records, columns=SPECIMEN_COLUMNS)
    for col in ("mass_kg", "mass_uncertainty_kg", "x", "x_uncertainty"):
        frame[col] = pd.to_numeric(frame[col], errors="coerce").astype(float)
    frame["n_runs"] = frame["n_runs"].astype("int64")
    return frame


def _oriented(sid: int, parents: dict[int, tuple[int | None, bool]], oriented: set[int]) -> bool:
    node, seen = sid, set()
    while node is not None and node not in seen:
        if node in oriented:
            return True
        seen.add(node)
        parent_id, same = parents.get(node, (None, False))
        node = parent_id if same else None
    return False


def specimen_detail(session: Session, code: str) -> dict[str, Any]:
    specimen = registry.get_specimen(session, code)
    comps_own = session.scalars(select(Composition).where(Composition.specimen_id == specimen.id)
                                .order_by(Composition.measured_at, Composition.id)).all()
    compositions = [_composition_doc(c, inherited=False, source=specimen.code) for c in comps_own]
    source = specimen
    if not compositions:
        for anc in registry.ancestors(specimen):
            rows = session.scalars(select(Composition).where(Composition.specimen_id == anc.id)
                                   .order_by(Composition.measured_at, Composition.id)).all()
            if rows:
                compositions = [_composition_doc(c, inherited=True, source=anc.code) for c in rows]
                comps_own, source = rows, anc
                break
    combined = combine(list(comps_own))
    if combined is not None:
        combined = {**combined, "inherited": source.id != specimen.id, "from": source.code}

    treatments = session.scalars(select(Treatment).where(Treatment.specimen_id == specimen.id)
                                 .order_by(Treatment.at, Treatment.id)).all()
    runs = session.scalars(select(Run).where(Run.specimen_id == specimen.id)
                           .options(selectinload(Run.instrument), selectinload(Run.raw_file))
                           .order_by(Run.started.is_(None), Run.started, Run.id)).all()
    run_docs = [run_summary(r) for r in runs]
    treatment_docs = [{"id": t.id, "kind": t.kind, "at": iso(t.at), "conditions": t.conditions, "notes": t.notes}
                      for t in treatments]
    images = session.scalars(select(Image).where(Image.specimen_id == specimen.id).order_by(Image.id)).all()
    ancestors = registry.ancestors(specimen)
    return {
        **registry.specimen_summary(specimen),
        "created_at": iso(specimen.created_at),
        "lineage": {"ancestors": [a.code for a in ancestors],  # parent first, root last
                    "root": ancestors[-1].code if ancestors else specimen.code,
                    "children": [c.code for c in specimen.children],
                    "descendants": registry.descendant_tree(specimen)["children"],
                    "tree": registry.descendant_tree(ancestors[-1] if ancestors else specimen)},
        "orientation": orientation_of(session, specimen),
        "compositions": compositions,
        "composition": combined,
        "x": combined["x"] if combined else None,
        "x_uncertainty": combined["x_uncertainty"] if combined else None,
        "treatments": treatment_docs,
        "timeline": timeline(treatment_docs, run_docs),
        "runs": run_docs,
        "images": [{"id": i.id, "caption": i.caption, "pixel_size_m": i.pixel_size_m, "width_px": i.width_px,
                    "height_px": i.height_px, "source_name": i.source_name} for i in images],
    }


def _composition_doc(c: Composition, *, inherited: bool, source: str) -> dict[str, Any]:
    return {"id": c.id, "method": c.method, "basis": c.basis, "amounts": c.amounts, "x": c.x,
            "x_uncertainty": c.x_uncertainty, "fe_s_ratio": c.fe_s_ratio,
            "fe_s_ratio_uncertainty": c.fe_s_ratio_uncertainty, "superstructure": c.superstructure,
            "measured_at": iso(c.measured_at), "warnings": c.warnings, "inherited": inherited, "from": source}


def timeline(treatments: list[dict[str, Any]], runs: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Treatments in time order, each followed by the runs measured before the next one.

    Returns segments: ``{"treatment": doc|None, "runs": [ids]}``; the first segment
    holds the runs before any treatment.  Runs without a start time come last.
    """
    segments: list[dict[str, Any]] = [{"treatment": None, "runs": []}]
    segments += [{"treatment": t, "runs": []} for t in treatments]
    times = [t["at"] for t in treatments]
    for r in runs:
        if r["started"] is None:
            segments[-1]["runs"].append(r["id"])
            continue
        index = sum(1 for t in times if t <= r["started"])
        segments[index]["runs"].append(r["id"])
    return segments


# --- runs ---------------------------------------------------------------------------------------

def runs_frame(session: Session, *, specimen: str | None = None, kind: str | None = None,
               status: str | None = None, include_retracted: bool = True) -> pd.DataFrame:
    latest = (select(Series.run_id, func.max(Series.n_rows).label("n_rows"))
              .group_by(Series.run_id).subquery())
    q = (select(Run.id, Specimen.code, Run.kind, Run.status, Run.started, Run.finished, Instrument.name,
                Run.operator, Run.direction, Run.group_label, Run.source_name, RawFile.sha256,
                latest.c.n_rows, Run.conditions)
         .join(Specimen, Specimen.id == Run.specimen_id)
         .outerjoin(Instrument, Instrument.id == Run.instrument_id)
         .outerjoin(RawFile, RawFile.id == Run.raw_file_id)
         .outerjoin(latest, latest.c.run_id == Run.id)
         .order_by(Run.started.is_(None), Run.started, Run.id))
    if specimen:
        registry.get_specimen(session, specimen)
        q = q.where(Specimen.code == specimen)
    if kind:
        q = q.where(Run.kind == kind)
    if status:
        q = q.where(Run.status == status)
    if not include_retracted:
        q = q.where(Run.status != "retracted")
    rows = session.execute(q).all()
    frame = pd.DataFrame.from_records(
        [(r[0], r[1], r[2], r[3], iso(r[4]), iso(r[5]), *r[6:12], r[12], r[13]) for r in rows],
        columns=RUN_COLUMNS)
    frame["id"] = frame["id"].astype("int64")
    frame["n_rows"] = pd.array(frame["n_rows"], dtype="Int64")
    return frame


def run_detail(session: Session, run_id: int) -> dict[str, Any]:
    run = get_run(session, run_id)
    versions = session.scalars(select(Series).where(Series.run_id == run.id).order_by(Series.version)).all()
    doc = run_summary(run)
    doc["series"] = [{"version": v.version, "shape": v.shape, "encoding": v.encoding, "profile": v.profile_name,
                      "mapping": v.mapping, "columns": v.columns, "n_rows": v.n_rows, "created_at": iso(v.created_at)}
                     for v in versions]
    doc["raw_file"] = ({"sha256": run.raw_file.sha256, "size": run.raw_file.size,
                        "media_type": run.raw_file.media_type, "name": run.source_name}
                       if run.raw_file else None)
    return doc


def raw_file(session: Session, sha256: str) -> tuple[bytes, str, str]:
    raw = session.scalar(select(RawFile).where(RawFile.sha256 == str(sha256).lower()))
    if raw is None:
        raise NotFound(f"no stored file with SHA-256 {sha256}", field="sha256")
    return raw.data, raw.first_name, raw.media_type


# --- events -------------------------------------------------------------------------------------

def events_frame(session: Session, *, specimen: str | None = None, user: str | None = None,
                 since: dt.datetime | None = None, until: dt.datetime | None = None,
                 limit: int | None = None) -> pd.DataFrame:
    q = select(Event).order_by(Event.at, Event.id)
    if specimen:
        q = q.where(Event.specimen_code == specimen)
    if user:
        q = q.where(Event.user_name == user)
    if since:
        q = q.where(Event.at >= since)
    if until:
        q = q.where(Event.at <= until)
    if limit:
        q = q.order_by(None).order_by(Event.at.desc(), Event.id.desc()).limit(int(limit))
    rows = session.scalars(q).all()
    if limit:
        rows = rows[::-1]
    return pd.DataFrame.from_records(
        [{"id": e.id, "at": iso(e.at), "user": e.user_name, "action": e.action, "entity": e.entity,
          "entity_id": e.entity_id, "specimen": e.specimen_code, "message": e.message,
          "before": e.before, "after": e.after} for e in rows],
        columns=["id", "at", "user", "action", "entity", "entity_id", "specimen", "message", "before", "after"])


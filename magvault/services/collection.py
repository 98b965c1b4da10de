"""Collection queries: fetch rows with SQL (indexed filters), hand them to the pure statistics.

Filtering happens in the database (kind, primary, current derivation, active
run, branch); medians, leave-one-out references and fits happen in numpy in
:mod:`magvault.queries`.
"""

from __future__ import annotations

from collections import Counter
from typing import Any

import numpy as np
import pandas as pd
from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from ..errors import InvalidValue, NotFound
from ..store.models import Composition, Origin, Run, Specimen, Transition, TransitionKind, Treatment
from .derive import INACTIVE_STATUSES, plain_rows, rows_frame, stored_utc, utc_column
from .listing import combine, nearest_analysed, orientation_of

BRANCHES = ("heating", "cooling")
BY_CHOICES = ("superstructure", "origin", "parent", "field", "direction")


def check_kind(session: Session, kind: str) -> None:
    if session.get(TransitionKind, kind) is None:
        known = ", ".join(session.scalars(select(TransitionKind.id).order_by(TransitionKind.id)))
        raise NotFound(f"--kind: no transition kind {kind!r}; known kinds: {known}", field="kind")


def transition_rows(session: Session, kind: str, *, branch: str | None = "heating", method: str | None = None,
                    run_kind: str | None = None, specimen_ids: list[int] | None = None,
                    field: bool = True) -> pd.DataFrame:
    """One row per transition of ``kind`` (primary rows, or ``method``'s rows) over active runs.

    Columns: specimen, specimen_id, run, started, temperature_K, uncertainty_K, field_T, direction, run_kind.
    Rows without a branch count as the rising-temperature branch (the usual single sweep).
    ``field=False`` leaves out field_T, which is read from each run's conditions
    (the slowest column of a large collection), for callers that do not use it.
    """
    q = (select(Specimen.code, Transition.specimen_id, Transition.run_id, stored_utc(Run.started),
                Transition.temperature_K, Transition.uncertainty_K, Run.direction, Run.kind)
         .join(Run, Run.id == Transition.run_id).join(Specimen, Specimen.id == Transition.specimen_id)
         .where(Transition.kind == kind, Transition.current.is_(True), Transition.component == 1,
                Run.status.not_in(INACTIVE_STATUSES)))
    q = q.where(Transition.method == method) if method else q.where(Transition.is_primary.is_(True))
    if branch == "heating":
        q = q.where(or_(Transition.branch == "heating", Transition.branch.is_(None)))
    elif branch:
        q = q.where(Transition.branch == branch)
    if run_kind:
        q = q.where(Run.kind == run_kind)
    if specimen_ids is not None:
        q = q.where(Transition.specimen_id.in_(specimen_ids))
    q = q.order_by(Specimen.code, Run.started, Transition.run_id)
    names = ["specimen", "specimen_id", "run", "started", "temperature_K", "uncertainty_K", "direction", "run_kind"]
    if field:
        # The conditions are JSON: SQLAlchemy decodes them row by row, as it always has.
        rows = session.execute(q.add_columns(Run.conditions)).all()
        field_T = [(r[8] or {}).get("field_T") for r in rows]
    else:
        rows = plain_rows(session, q)
    # (Integer columns of an empty result stay object, as they always were.)
    frame = rows_frame(rows, names,
                       floats=("temperature_K", "uncertainty_K"), ints=("specimen_id", "run") if rows else (),
                       convert={"started": utc_column})
    if field:
        frame.insert(6, "field_T", pd.to_numeric(pd.Series(field_T, dtype=object), errors="coerce").astype(float))
    return frame


def specimen_table(session: Session, by: str | None) -> pd.DataFrame:
    """specimen, x, x_uncertainty and, when grouping by a specimen property, group."""
    rows = plain_rows(session, select(Specimen.id, Specimen.code, Specimen.parent_id, Origin.name)
                      .outerjoin(Origin, Origin.id == Specimen.origin_id))
    codes = {sid: code for sid, code, _, _ in rows}
    comps = composition_summary(session, {sid: parent_id for sid, _, parent_id, _ in rows})
    unknown = (None, None, None)
    summary = [comps.get(sid, unknown) for sid, _, _, _ in rows]
    if by == "superstructure":
        groups = [label for _, _, label in summary]
    elif by == "origin":
        groups = [origin for _, _, _, origin in rows]
    elif by == "parent":
        groups = [codes.get(parent_id, code) if parent_id else code for _, code, parent_id, _ in rows]
    else:
        groups = [None] * len(rows)
    frame = rows_frame([(code, x, u, label, group) for (_, code, _, _), (x, u, label), group
                        in zip(rows, summary, groups)],
                       ["specimen", "x", "x_uncertainty", "superstructure", "group"], floats=("x", "x_uncertainty"))
    if by not in ("superstructure", "origin", "parent"):
        frame = frame.drop(columns="group")
    return frame


def composition_summary(session: Session, parents: dict[int, int | None]) -> dict[int, tuple]:
    """Specimen id -> (x, x_uncertainty, superstructure), as :func:`listing.composition_map` gives them.

    The same combination (:func:`listing.combine`) and inheritance from the nearest
    analysed ancestor (``parents``: specimen id -> parent id), without loading ORM
    objects.  A specimen with one analysis -- the usual case -- keeps that analysis's x
    and uncertainty (what the weighted mean of one value is) without building result
    objects: ten thousand specimens then cost milliseconds instead of most of a second.
    """
    analyses = plain_rows(session, select(Composition.specimen_id, Composition.x, Composition.x_uncertainty,
                                          Composition.superstructure).order_by(Composition.id))
    counts = Counter(sid for sid, _, _, _ in analyses)
    own = {sid: (x, u if u else None, label) for sid, x, u, label in analyses if counts[sid] == 1}
    several = sorted(sid for sid, n in counts.items() if n > 1)
    if several:
        grouped: dict[int, list] = {}
        for row in session.execute(select(Composition.specimen_id, Composition.x, Composition.x_uncertainty,
                                          Composition.fe_s_ratio, Composition.fe_s_ratio_uncertainty,
                                          Composition.basis, Composition.superstructure, Composition.measured_at)
                                   .where(Composition.specimen_id.in_(several)).order_by(Composition.id)):
            grouped.setdefault(row.specimen_id, []).append(row)
        for sid, rows in grouped.items():
            combined = combine(rows)
            own[sid] = (combined["x"], combined["x_uncertainty"], combined["superstructure"])
    return {sid: own[node] for sid, node in nearest_analysed(parents, own).items()}


def treatment_table(session: Session) -> pd.DataFrame:
    rows = session.execute(select(Specimen.code, Treatment.at).join(Specimen, Specimen.id == Treatment.specimen_id)).all()
    frame = pd.DataFrame.from_records(rows, columns=["specimen", "at"])
    frame["at"] = pd.to_datetime(frame["at"], utc=True)
    return frame


def _field_in_crystal(session: Session, rows: pd.DataFrame):
    """Per row: (rotation, field direction in the specimen frame, cell), or a reason why there is none."""
    from ..analysis.orientation import Cell
    from ..schemas import direction_vector

    cache: dict[int, Any] = {}
    for sid, direction in zip(rows["specimen_id"], rows["direction"]):
        if sid not in cache:
            cache[sid] = orientation_of(session, session.get(Specimen, int(sid)))
        o = cache[sid]
        if o is None:
            yield "no orientation"
        elif not isinstance(direction, str) or not direction:  # None arrives as NaN from pandas
            yield "no field direction"
        else:
            c = o.get("cell")
            # Without a recorded cell only the axes' directions matter: a unit cell of the system.
            cell = (Cell(c["a_m"], c["b_m"], c["c_m"], c["alpha_deg"], c["beta_deg"], c["gamma_deg"]) if c
                    else Cell(1.0, 1.0, 1.0, 90.0, 90.0, 120.0 if o["system"] == "hexagonal" else 90.0))
            yield np.asarray(o["matrix"], dtype=float).reshape(3, 3), direction_vector(direction), cell


def direction_groups(session: Session, rows: pd.DataFrame) -> pd.Series:
    """Nearest of a, b* and c* to each run's applied-field direction, in the crystal frame."""
    from ..analysis.orientation import nearest_axis

    labels = [item if isinstance(item, str) else f"along {nearest_axis(*item)[0]}"
              for item in _field_in_crystal(session, rows)]
    return pd.Series(labels, index=rows.index, dtype=object)


def shifts(session: Session, *, kind: str, mode: str, reference_K: float | None, reference_run: int | None,
           sigma: float, by: str | None, branch: str, method: str | None,
           field_edges_T: list[float] | None) -> pd.DataFrame:
    from ..queries import shifts as shift_stats

    check_kind(session, kind)
    if by is not None and by not in BY_CHOICES:
        raise InvalidValue(f"--by: {by!r} is not one of {', '.join(BY_CHOICES)}", field="by")
    rows = transition_rows(session, kind, branch=branch, method=method, field=(by == "field"))
    if by == "direction":
        rows["group"] = direction_groups(session, rows)
    if mode == "run" and reference_run is not None and int(reference_run) not in set(rows["run"]):
        run = session.get(Run, int(reference_run))
        if run is None:
            raise NotFound(f"--against-run: run {reference_run} not found", field="against_run")
        raise InvalidValue(f"--against-run: run {reference_run} has no primary {kind} transition on the "
                           f"{branch} branch (derive it first, or choose another run)", field="against_run")
    # Compositions and specimen groups only where they are used: x for the trend, group labels for by.
    needs_specimens = mode == "trend" or by in ("superstructure", "origin", "parent")
    specimens = specimen_table(session, by) if needs_specimens else None
    treatments = treatment_table(session) if mode == "treatment" else None
    return shift_stats(rows.drop(columns=["specimen_id", "direction"]), specimens, mode=mode,
                       reference_K=reference_K, reference_run=reference_run, treatments=treatments, sigma=sigma,
                       by=by, field_edges_T=field_edges_T)


def coupled(session: Session, *, kinds: tuple[str, str] | None, kind: str | None,
            run_kinds: tuple[str, str] | None, methods: tuple[str, str] | None, branch: str,
            sigma: float) -> pd.DataFrame:
    from ..queries import coupled as coupled_stats

    if kinds:
        for k in kinds:
            check_kind(session, k)
        a = transition_rows(session, kinds[0], branch=branch)
        b = transition_rows(session, kinds[1], branch=branch)
        labels = kinds
    elif kind and run_kinds:
        check_kind(session, kind)
        a = transition_rows(session, kind, branch=branch, run_kind=run_kinds[0])
        b = transition_rows(session, kind, branch=branch, run_kind=run_kinds[1])
        labels = run_kinds
    elif kind and methods:
        check_kind(session, kind)
        a = transition_rows(session, kind, branch=branch, method=methods[0])
        b = transition_rows(session, kind, branch=branch, method=methods[1])
        labels = methods
    else:
        raise InvalidValue("coupled: give --kinds A,B, or --kind K with --run-kinds A,B or --methods A,B",
                           field="kinds")
    out = coupled_stats(a, b, sigma=sigma)
    out.insert(1, "a", labels[0])
    out.insert(2, "b", labels[1])
    return out


def correlation_points(session: Session, *, kind: str, against: str, branch: str) -> tuple[pd.DataFrame, str]:
    """Points for a weighted line of the kind's temperature against x, field or angle to c."""
    from ..analysis.orientation import angle_to_c_deg
    from ..queries import specimen_estimates

    check_kind(session, kind)
    rows = transition_rows(session, kind, branch=branch)
    if against == "x":
        est = specimen_estimates(rows[["specimen", "run", "started", "temperature_K", "uncertainty_K"]])
        comp = specimen_table(session, None)[["specimen", "x", "x_uncertainty"]]
        return est.merge(comp, on="specimen", how="left"), "x"
    if against == "field":
        return rows.drop(columns=["specimen_id"]), "field_T"
    if against == "angle":
        angles = [np.nan if isinstance(item, str) else angle_to_c_deg(*item)
                  for item in _field_in_crystal(session, rows)]
        rows = rows.assign(angle_to_c_deg=angles)
        return rows.drop(columns=["specimen_id"]), "angle_to_c_deg"
    raise InvalidValue(f"--against: {against!r} is not one of x, field, angle", field="against")


def composition_points(session: Session, *, kinds: list[str] | None, branch: str | None) -> pd.DataFrame:
    from ..queries import composition_map as shape_map

    q_kinds = kinds or list(session.scalars(select(TransitionKind.id)))
    frames = []
    for k in q_kinds:
        rows = transition_rows(session, k, branch=branch)
        if not rows.empty:
            frames.append(rows.assign(kind=k))
    columns = ["specimen", "run", "kind", "temperature_K", "uncertainty_K", "started", "run_kind"]
    transitions = (pd.concat(frames, ignore_index=True)[columns] if frames
                   else pd.DataFrame(columns=columns).astype({"temperature_K": float, "uncertainty_K": float}))
    comp = specimen_table(session, None)
    return shape_map(transitions, comp)


LOOP_RATIO_COLUMNS = ["specimen", "run", "block_temperature_K", "Mr_Ms", "Mr_Ms_uncertainty", "Hcr_Hc",
                      "Hcr_Hc_uncertainty", "by_mr_ms", "by_hcr_hc", "domain_state", "origin"]


def loop_ratios(session: Session, *, boundaries: dict[str, float] | None = None) -> pd.DataFrame:
    """Every current Day-plot placement (Mr/Ms and Hcr/Hc of a loop and its backfield run) of active runs.

    One row per derivation, labelled by :func:`magvault.analysis.hysteresis.domain_state`
    with ``boundaries`` (its keyword arguments; Day, Fuller & Schmidt 1977 by default),
    so that a page can redraw the boxes with another PSD/MD limit and keep its labels true.
    """
    from ..analysis.hysteresis import domain_state
    from ..store.models import Result

    rows = session.execute(
        select(Result.derivation_id, Specimen.code, Result.run_id, Result.block_temperature_K, Result.quantity,
               Result.value, Result.uncertainty, Origin.name)
        .join(Run, Run.id == Result.run_id).join(Specimen, Specimen.id == Result.specimen_id)
        .outerjoin(Origin, Origin.id == Specimen.origin_id)
        .where(Result.method == "day-plot", Result.current.is_(True), Result.quantity.in_(("Mr_Ms", "Hcr_Hc")),
               Run.status.not_in(INACTIVE_STATUSES))
        .order_by(Specimen.code, Result.run_id, Result.derivation_id)).all()
    placed: dict[int, dict[str, Any]] = {}
    for derivation, code, run, block, quantity, value, u, origin in rows:
        row = placed.setdefault(derivation, {"specimen": code, "run": run, "block_temperature_K": block,
                                             "origin": origin})
        row[quantity], row[f"{quantity}_uncertainty"] = value, u
    out = []
    for row in placed.values():
        if row.get("Mr_Ms") is None or row.get("Hcr_Hc") is None:
            continue
        out.append({**row, **domain_state(row["Mr_Ms"], row["Hcr_Hc"], **(boundaries or {}))})
    frame = pd.DataFrame.from_records(out, columns=LOOP_RATIO_COLUMNS)
    for c in ("block_temperature_K", "Mr_Ms", "Mr_Ms_uncertainty", "Hcr_Hc", "Hcr_Hc_uncertainty"):
        frame[c] = pd.to_numeric(frame[c], errors="coerce").astype(float)
    return frame

"""Storing what analyses made of runs: derivations with their transitions and results.

A derivation is keyed by everything that determines its numbers (method,
version, parameters and the exact input series): deriving unchanged inputs
again finds the same key and reuses the record.  Versions of one method on one
set of input runs share a lineage key; the newest is ``current`` and is what
listings show by default.
"""

from __future__ import annotations

import hashlib
import json
import math
from typing import Any, Callable, Sequence

import numpy as np
import pandas as pd
from sqlalchemy import String, func, select, type_coerce, update
from sqlalchemy.orm import Session

from .. import __version__
from ..analysis.results import Outcome
from ..catalogue import UNASSIGNED
from ..store.models import (Derivation, DerivationInput, RawFile, Result, Run, Series, Specimen,
                            Transition, TransitionKind)
from ..timeutil import iso
from . import events

INACTIVE_STATUSES = ("retracted", "superseded")


def _canonical(value: Any) -> Any:
    """JSON-stable form of parameters: floats rounded to 12 significant digits, keys sorted by json."""
    value = events.jsonable(value)
    if isinstance(value, float):
        return float(f"{value:.12g}") if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _canonical(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_canonical(v) for v in value]
    return value


def _key(*parts: Any) -> str:
    return hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode()).hexdigest()


def store_outcome(session: Session, outcome: Outcome, inputs: Sequence[tuple[Run, Series]],
                  owner: Run | None = None) -> tuple[Derivation, bool]:
    """Store ``outcome`` computed from ``inputs``; returns (derivation, created).

    ``owner`` is the run that transitions and results hang off (default: the
    first input run), so that listings by run find them.
    """
    params = _canonical(outcome.parameters)
    run_ids = sorted(r.id for r, _ in inputs)
    hashes = [session.scalar(select(RawFile.sha256).where(RawFile.id == r.raw_file_id)) for r, _ in inputs]
    inputs_key = _key(outcome.method, outcome.version, params,
                      [(r.id, s.id, h) for (r, s), h in zip(inputs, hashes)])
    existing = session.scalar(select(Derivation).where(Derivation.inputs_key == inputs_key))
    if existing is not None:
        return existing, False
    lineage_key = _key(outcome.method, run_ids)
    old_ids = list(session.scalars(select(Derivation.id).where(Derivation.lineage_key == lineage_key,
                                                               Derivation.current.is_(True))))
    if old_ids:
        session.execute(update(Derivation).where(Derivation.id.in_(old_ids)).values(current=False))
        session.execute(update(Transition).where(Transition.derivation_id.in_(old_ids)).values(current=False))
        session.execute(update(Result).where(Result.derivation_id.in_(old_ids)).values(current=False))
    derivation = Derivation(method=outcome.method, version=outcome.version, parameters=params,
                            inputs_key=inputs_key, lineage_key=lineage_key, input_runs=run_ids,
                            input_hashes=[h for h in hashes if h], software_version=__version__,
                            operator=events.current_user(), current=True,
                            warnings=list(outcome.warnings), diagnostics=_canonical(outcome.diagnostics))
    derivation.runs = [DerivationInput(run_id=r.id, series_id=s.id) for r, s in inputs]
    session.add(derivation)
    session.flush()
    owner = owner or inputs[0][0]
    known = set(session.scalars(select(TransitionKind.id)))
    for t in outcome.transitions:
        kind = t.kind if t.kind in known else UNASSIGNED
        if kind == UNASSIGNED and UNASSIGNED not in known:
            _ensure_unassigned_kind(session)
            known.add(UNASSIGNED)
        session.add(Transition(
            derivation_id=derivation.id, run_id=owner.id, specimen_id=owner.specimen_id, kind=kind,
            temperature_K=float(t.temperature_K), uncertainty_K=_finite(t.uncertainty_K), method=t.method,
            branch=t.branch, component=int(t.component), is_primary=bool(t.primary), width_K=_finite(t.width_K),
            ambiguous=bool(t.ambiguous), current=True,
            diagnostics=_canonical({**t.diagnostics, **({"kind_given": t.kind} if kind != t.kind else {})})))
    for r in outcome.results:
        session.add(Result(
            derivation_id=derivation.id, run_id=owner.id, specimen_id=owner.specimen_id, quantity=r.quantity,
            value=float(r.value), uncertainty=_finite(r.uncertainty), unit=r.unit, method=r.method,
            block_temperature_K=_finite(r.block_temperature_K), branch=r.branch, current=True,
            diagnostics=_canonical(r.diagnostics)))
    session.flush()
    return derivation, True


def _finite(value: float | None) -> float | None:
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _ensure_unassigned_kind(session: Session) -> None:
    # Peaks outside every search window are kept, under a kind of their own.
    session.add(TransitionKind(id=UNASSIGNED, name="Outside every search window", typical_lo_K=1.0,
                               typical_hi_K=1.0e5, window_lo_K=1.0, window_hi_K=1.0e5, run_kinds=[],
                               note="Anomalies that fit no catalogue kind.", seeded=False))
    session.flush()


# --- listings ---------------------------------------------------------------------------------

TRANSITION_COLUMNS = ["specimen", "run", "kind", "temperature_K", "uncertainty_K", "method", "branch",
                      "component", "primary", "width_K", "ambiguous", "derivation", "current", "run_kind",
                      "started"]
RESULT_COLUMNS = ["specimen", "run", "quantity", "value", "uncertainty", "unit", "method",
                  "block_temperature_K", "branch", "derivation", "current", "run_kind"]


def transitions_frame(session: Session, *, specimen: str | None = None, kind: str | None = None,
                      run: int | None = None, method: str | None = None, primary_only: bool = False,
                      branch: str | None = None, all_versions: bool = False,
                      include_inactive: bool = False) -> pd.DataFrame:
    q = (select(Specimen.code, Transition.run_id, Transition.kind, Transition.temperature_K,
                Transition.uncertainty_K, Transition.method, Transition.branch, Transition.component,
                Transition.is_primary, Transition.width_K, Transition.ambiguous, Transition.derivation_id,
                Transition.current, Run.kind, stored_utc(Run.started))
         .join(Run, Run.id == Transition.run_id).join(Specimen, Specimen.id == Transition.specimen_id)
         .order_by(Specimen.code, Run.started, Transition.run_id, Transition.kind, Transition.branch,
                   Transition.component, Transition.is_primary.desc(), Transition.method, Transition.id))
    if not all_versions:
        q = q.where(Transition.current.is_(True))
    if not include_inactive:
        q = q.where(Run.status.not_in(INACTIVE_STATUSES))
    if specimen:
        q = q.where(Specimen.code == specimen)
    if kind:
        q = q.where(Transition.kind == kind)
    if run:
        q = q.where(Transition.run_id == int(run))
    if method:
        q = q.where(Transition.method == method)
    if primary_only:
        q = q.where(Transition.is_primary.is_(True))
    if branch:
        q = q.where(Transition.branch == branch)
    return rows_frame(plain_rows(session, q), TRANSITION_COLUMNS,
                      floats=("temperature_K", "uncertainty_K", "width_K"),
                      ints=("run", "component", "derivation"), bools=("primary", "ambiguous", "current"),
                      convert={"started": lambda stored: iso_column(utc_column(stored))})


def results_frame(session: Session, *, specimen: str | None = None, run: int | None = None,
                  quantity: str | None = None, all_versions: bool = False,
                  include_inactive: bool = False) -> pd.DataFrame:
    q = (select(Specimen.code, Result.run_id, Result.quantity, Result.value, Result.uncertainty, Result.unit,
                Result.method, Result.block_temperature_K, Result.branch, Result.derivation_id, Result.current,
                Run.kind)
         .join(Run, Run.id == Result.run_id).join(Specimen, Specimen.id == Result.specimen_id)
         .order_by(Specimen.code, Result.run_id, Result.quantity, Result.block_temperature_K, Result.id))
    if not all_versions:
        q = q.where(Result.current.is_(True))
    if not include_inactive:
        q = q.where(Run.status.not_in(INACTIVE_STATUSES))
    if specimen:
        q = q.where(Specimen.code == specimen)
    if run:
        q = q.where(Result.run_id == int(run))
    if quantity:
        q = q.where(Result.quantity == quantity)
    return rows_frame(plain_rows(session, q), RESULT_COLUMNS,
                      floats=("value", "uncertainty", "block_temperature_K"), ints=("run", "derivation"),
                      bools=("current",))


BLOCK_TRACK_COLUMNS = ["quantity", "track", "block_temperature_K", "value", "uncertainty", "unit", "method"]


def block_tracks_frame(session: Session, run_id: int) -> pd.DataFrame:
    """A run's current per-block results as tracks against temperature, for plotting.

    ``track`` names the series a value belongs to within its quantity (``mode 2`` for a
    resonance mode, from the result's diagnostics), None when the quantity has one track.
    """
    rows = session.execute(select(Result.quantity, Result.diagnostics, Result.block_temperature_K, Result.value,
                                  Result.uncertainty, Result.unit, Result.method)
                           .where(Result.run_id == int(run_id), Result.current.is_(True),
                                  Result.block_temperature_K.is_not(None))
                           .order_by(Result.quantity, Result.block_temperature_K, Result.id)).all()
    records = [(q, f"mode {d['mode']}" if isinstance(d, dict) and d.get("mode") is not None else None, t, v, u, unit, m)
               for q, d, t, v, u, unit, m in rows]
    return rows_frame(records, BLOCK_TRACK_COLUMNS, floats=("block_temperature_K", "value", "uncertainty"))


# --- column-wise frames (listings of a hundred thousand rows do no per-row Python work) ---------

def plain_rows(session: Session, statement) -> list[tuple]:
    """The statement's rows as the DB-API driver returns them, without SQLAlchemy's per-row processing.

    For listings of numbers, text, booleans (0/1 from SQLite, converted column-wise
    by :func:`rows_frame`) and :func:`stored_utc` date-times: none of them needs a
    conversion per row, and skipping the row objects takes a fifth to a third off a
    hundred-thousand-row listing (measured by bench/queries.py).
    """
    result = session.connection().execute(statement)
    try:
        return result.cursor.fetchall()
    finally:
        result.close()


def rows_frame(rows: Sequence[Sequence[Any]], columns: Sequence[str], *, floats=(), ints=(),
               bools=(), convert: dict[str, Callable[[Sequence[Any]], Any]] | None = None) -> pd.DataFrame:
    """A frame from result rows, one typed column at a time.

    Column ``i`` is taken from ``row[i]`` (rows may be longer than ``columns``).
    Floats take None as NaN; ``convert`` maps a column name to a function of the
    column's raw values; other columns are left to pandas' inference, as
    ``DataFrame.from_records`` would (text becomes the ``str`` dtype, an empty or
    all-None column stays ``object``).
    """
    table = np.array(rows, dtype=object) if len(rows) else np.empty((0, len(columns)), dtype=object)
    whole = table.ndim == 2  # a 2-D object array from the tuples costs about half of per-column lists
    data: dict[str, Any] = {}
    for i, name in enumerate(columns):
        column = table[:, i] if whole else np.array([r[i] for r in rows] + [None], dtype=object)[:-1]
        if convert and name in convert:
            data[name] = convert[name](column)
        elif name in floats:
            data[name] = column.astype(np.float64)
        elif name in ints:
            data[name] = column.astype(np.int64)
        elif name in bools:
            data[name] = column.astype(bool)
        else:
            data[name] = column
    return pd.DataFrame(data, columns=list(columns))


def stored_utc(column):
    """A UTC date-time column as stored (naive UTC), without the per-row conversion to aware datetimes.

    :class:`magvault.store.base.UTCDateTime` stores naive UTC and hands back aware
    datetimes one row at a time; a listing converts the whole column at once with
    :func:`utc_column` instead.  SQLite hands back the stored text, PostgreSQL naive
    datetimes; both are UTC.
    """
    return type_coerce(column, String).label(column.key)


def utc_column(values: Sequence[Any]) -> pd.Series:
    """Stored UTC values (ISO 8601 text or naive datetimes, None for missing) as tz-aware UTC.

    Give the raw values (a tuple or list), not a frame column: pandas would first infer a
    column of datetimes and then box it back into objects here.
    """
    return pd.to_datetime(pd.Series(values, dtype=object), utc=True, format="ISO8601", cache=False)


def iso_column(times: pd.Series) -> np.ndarray:
    """ISO 8601 text with Z, as :func:`magvault.timeutil.iso` writes it, for a whole column (None for NaT).

    Like ``datetime.isoformat``, microseconds are written only when they are not zero.
    """
    out = np.full(len(times), None, dtype=object)
    known = times.notna().to_numpy()
    if known.any():
        us = times[known].dt.tz_convert("UTC").dt.tz_localize(None).to_numpy(dtype="datetime64[us]")
        fraction = us.astype(np.int64) % 1_000_000 != 0
        text = np.empty(len(us), dtype=object)
        text[fraction] = np.datetime_as_string(us[fraction], unit="us", timezone="UTC")
        text[~fraction] = np.datetime_as_string(us[~fraction], unit="s", timezone="UTC")
        out[known] = text
    return out


def derivations_of(session: Session, run_id: int, *, all_versions: bool = True) -> list[dict[str, Any]]:
    q = (select(Derivation).join(DerivationInput, DerivationInput.derivation_id == Derivation.id)
         .where(DerivationInput.run_id == int(run_id)).order_by(Derivation.method, Derivation.id))
    if not all_versions:
        q = q.where(Derivation.current.is_(True))
    out = []
    for d in session.scalars(q).unique():
        out.append({"id": d.id, "method": d.method, "version": d.version, "parameters": d.parameters,
                    "input_runs": d.input_runs, "input_hashes": d.input_hashes,
                    "software_version": d.software_version, "operator": d.operator,
                    "created_at": iso(d.created_at), "current": d.current, "warnings": d.warnings,
                    "n_transitions": _count(session, Transition, d.id),
                    "n_results": _count(session, Result, d.id)})
    return out



def _count(session: Session, model, derivation_id: int) -> int:
    return session.scalar(select(func.count()).select_from(model).where(model.derivation_id == derivation_id)) or 0

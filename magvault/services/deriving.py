"""Running the analyses over runs and storing what they find.

Each run is analysed outside any transaction (the analyses are pure) and its
outcomes are stored in one write transaction, so a failure on one run leaves
the others derived and never half-writes a derivation.  Then the analyses that
need several runs: a loop with its backfield run, moment directions from a
group of runs along specimen axes, and the field dependence of low-temperature
transitions.
"""

from __future__ import annotations

import math
from collections import defaultdict
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from sqlalchemy import select

from ..analysis import pipeline
from ..analysis.results import Outcome, TransitionEstimate
from ..errors import MagvaultError
from ..store.frames import unpack_frame
from ..store.models import Run, Series, Transition
from . import derive, listing
from .runs import get_run, latest_series

if TYPE_CHECKING:
    from ..vault import Vault

# Numerical trouble inside an analysis is reported per run, never allowed to stop the others.
ANALYSIS_ERRORS = (MagvaultError, ValueError, ArithmeticError, np.linalg.LinAlgError, RuntimeError)


@dataclass
class DeriveSummary:
    runs: int = 0
    created: int = 0
    reused: int = 0
    transitions: int = 0
    results: int = 0
    skipped: list[str] = field(default_factory=list)
    failed: list[str] = field(default_factory=list)

    def as_dict(self) -> dict[str, Any]:
        return {"runs": self.runs, "derivations_created": self.created, "derivations_reused": self.reused,
                "transitions": self.transitions, "results": self.results, "skipped": self.skipped,
                "failed": self.failed}


@dataclass
class _RunData:
    id: int
    kind: str
    specimen_id: int
    specimen: str
    group: str | None
    direction: str | None
    started: Any
    conditions: dict[str, Any]
    series_id: int
    frame: pd.DataFrame


def _load(vault: "Vault", run_id: int) -> _RunData | None:
    with vault.read() as s:
        run = get_run(s, run_id)
        series = latest_series(s, run.id)
        if series is None or run.status in derive.INACTIVE_STATUSES:
            return None
        return _RunData(run.id, run.kind, run.specimen_id, run.specimen.code, run.group_label, run.direction,
                        run.started, dict(run.conditions or {}), series.id, unpack_frame(series.data))


def _store(vault: "Vault", outcomes: list[Outcome], inputs: list[_RunData], summary: DeriveSummary) -> None:
    kept = [o for o in outcomes if o.transitions or o.results]
    if not kept:
        return
    with vault.write() as s:
        pairs = [(s.get(Run, d.id), s.get(Series, d.series_id)) for d in inputs]
        for o in kept:
            _, created = derive.store_outcome(s, o, pairs)
            summary.created += created
            summary.reused += not created
            summary.transitions += len(o.transitions)
            summary.results += len(o.results)


def _with_formula(vault: "Vault", data: _RunData) -> dict[str, Any]:
    """Run conditions plus the formula facts a Debye baseline needs, from the specimen's composition.

    Fe(1-x)S has 2 - x atoms per formula unit and a molar mass of (1 - x) M(Fe) + M(S);
    without a composition the analysis fits an effective atom count and says so.
    Values the run itself states are kept.
    """
    from ..analysis.composition import ATOMIC_WEIGHTS
    from .listing import composition_map

    with vault.read() as s:
        comp = composition_map(s).get(data.specimen_id)
    if not comp or comp.get("x") is None:
        return data.conditions
    x = float(comp["x"])
    molar_g = (1.0 - x) * ATOMIC_WEIGHTS["Fe"][0] + ATOMIC_WEIGHTS["S"][0]
    return {"atoms_per_formula": 2.0 - x, "molar_mass_kg_per_mol": molar_g * 1e-3, **data.conditions}


def derive_runs(vault: "Vault", run_ids: list[int]) -> DeriveSummary:
    summary = DeriveSummary()
    loops: dict[int, Outcome] = {}
    backfields: dict[int, Outcome] = {}
    done: list[_RunData] = []
    for run_id in run_ids:
        data = _load(vault, run_id)
        if data is None:
            summary.skipped.append(f"run {run_id}: no data or not current")
            continue
        if data.kind not in pipeline.ANALYSED_KINDS:
            summary.skipped.append(f"run {run_id}: no analysis for {data.kind} runs yet")
            continue
        summary.runs += 1
        conditions = _with_formula(vault, data) if data.kind == "calorimetry" else data.conditions
        try:
            outcomes = pipeline.analyse_run(data.kind, data.frame, conditions)
        except ANALYSIS_ERRORS as exc:
            summary.failed.append(f"run {run_id} ({data.specimen}, {data.kind}): {exc}")
            continue
        if not any(o.transitions or o.results for o in outcomes):
            said = next((o.warnings[0] for o in outcomes if o.warnings), "nothing found")
            summary.skipped.append(f"run {run_id} ({data.specimen}, {data.kind}): {said}")
        _store(vault, outcomes, [data], summary)
        done.append(data)
        if data.kind == "hysteresis" and outcomes:
            loops[data.id] = outcomes[0]
        if data.kind == "backfield" and outcomes:
            backfields[data.id] = outcomes[0]
    _pair_backfields(vault, done, loops, backfields, summary)
    _direction_groups(vault, done, summary)
    _field_dependence(vault, {d.specimen_id for d in done}, summary)
    return summary


# --- loops with their backfield runs -------------------------------------------------------------

def _pair_backfields(vault, done, loops, backfields, summary) -> None:
    for back in (d for d in done if d.id in backfields):
        partner = _loop_partner(vault, back)
        if partner is None:
            summary.skipped.append(f"run {back.id} ({back.specimen}): no hysteresis loop to pair with")
            continue
        loop_data = _load(vault, partner)
        if loop_data is None:
            continue
        try:
            loop = loops.get(partner) or pipeline.analyse_run("hysteresis", loop_data.frame, loop_data.conditions)[0]
            outcome = pipeline.loop_with_backfield(loop, backfields[back.id])
        except ANALYSIS_ERRORS as exc:
            summary.failed.append(f"runs {partner}+{back.id} ({back.specimen}, day plot): {exc}")
            continue
        _store(vault, [outcome], [loop_data, back], summary)


def _loop_partner(vault, back: _RunData) -> int | None:
    """The loop of the same group, else the same specimen's loop nearest in time at the same temperature."""
    frame = vault.runs(specimen=back.specimen, kind="hysteresis", include_retracted=False)
    frame = frame[~frame["status"].isin(derive.INACTIVE_STATUSES) & frame["sha256"].notna()]
    if frame.empty:
        return None
    if back.group:
        same = frame[frame["group"] == back.group]
        if not same.empty:
            return int(same["id"].iloc[0])
    t_back = back.conditions.get("temperature_K")
    temps = frame["conditions"].map(lambda c: (c or {}).get("temperature_K"))
    same_t = frame[[_same_temperature(t, t_back) for t in temps]]
    if same_t.empty:
        return None
    started = pd.to_datetime(same_t["started"], utc=True)
    gap = (started - pd.Timestamp(back.started)).abs()
    return int(same_t["id"].iloc[int(np.argmin(gap.to_numpy()))])


def _same_temperature(a, b, tolerance_K: float = 2.0) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return abs(float(a) - float(b)) <= tolerance_K


# --- moment directions from runs along specimen axes ------------------------------------------------

def _direction_groups(vault, done, summary) -> None:
    groups = sorted({(d.specimen, d.group) for d in done if d.group and d.direction and d.kind == "thermomagnetic"})
    for specimen, group in groups:
        frame = vault.runs(specimen=specimen, kind="thermomagnetic", include_retracted=False)
        members = frame[(frame["group"] == group) & frame["direction"].notna()
                        & ~frame["status"].isin(derive.INACTIVE_STATUSES)]
        if members["direction"].nunique() < 3:
            continue
        datas = [_load(vault, int(i)) for i in members["id"]]
        datas = [d for d in datas if d is not None]
        with vault.read() as s:
            from .registry import get_specimen

            orientation = listing.orientation_of(s, get_specimen(s, specimen))
        matrix = np.asarray(orientation["matrix"], dtype=float).reshape(3, 3) if orientation else None
        try:
            outcome = pipeline.moment_direction({d.direction: d.frame for d in datas}, matrix)
        except ANALYSIS_ERRORS as exc:
            summary.failed.append(f"group {group} ({specimen}, moment direction): {exc}")
            continue
        if orientation is None:
            outcome = Outcome(outcome.method, outcome.version, outcome.parameters, outcome.transitions,
                              outcome.results, outcome.warnings + ("no orientation recorded: directions are in "
                                                                   "the specimen frame",), outcome.diagnostics)
        _store(vault, [outcome], sorted(datas, key=lambda d: d.id), summary)


# --- field dependence of low-temperature transitions -----------------------------------------------

def _field_dependence(vault, specimen_ids: set[int], summary) -> None:
    if not specimen_ids:
        return
    with vault.read() as s:
        rows = s.execute(
            select(Transition, Run.conditions, Run.id)
            .join(Run, Run.id == Transition.run_id)
            .where(Transition.specimen_id.in_(specimen_ids), Transition.is_primary.is_(True),
                   Transition.current.is_(True), Transition.kind == "low-t", Transition.branch == "heating",
                   Transition.component == 1, Run.status.not_in(derive.INACTIVE_STATUSES),
                   Run.kind == "thermomagnetic")).all()
        by_specimen: dict[int, list] = defaultdict(list)
        for t, conditions, run_id in rows:
            field_T = (conditions or {}).get("field_T")
            if field_T is None or t.uncertainty_K is None or not math.isfinite(float(field_T)):
                continue
            by_specimen[t.specimen_id].append((float(field_T), run_id, TransitionEstimate(
                kind=t.kind, temperature_K=t.temperature_K, uncertainty_K=t.uncertainty_K, method=t.method,
                branch=t.branch, component=t.component, primary=True)))
    for spec_id, items in by_specimen.items():
        if len({round(f, 9) for f, _, _ in items}) < 2:
            continue
        items.sort(key=lambda i: i[1])
        try:
            outcome = pipeline.field_dependence_of([(f, est) for f, _, est in items])
        except ANALYSIS_ERRORS as exc:
            summary.failed.append(f"specimen {spec_id} field dependence: {exc}")
            continue
        datas = [d for d in (_load(vault, run_id) for _, run_id, _ in items) if d is not None]
        _store(vault, [outcome], datas, summary)

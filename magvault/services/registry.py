"""Specimens and their context: origins, lineage, treatments, instruments."""

from __future__ import annotations

import datetime as dt
import re
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from ..errors import Duplicate, InvalidValue, NotFound
from ..store.models import (Calibration, Composition, Instrument, Orientation, Origin, Run,
                            Specimen, Treatment)
from ..timeutil import iso
from ..units import parse_quantity
from . import events


def get_specimen(session: Session, code: str) -> Specimen:
    specimen = session.scalar(select(Specimen).where(Specimen.code == code))
    if specimen is None:
        raise NotFound(f"specimen {code!r} not found; `magvault specimen list` shows the codes", field="specimen")
    return specimen


def get_instrument(session: Session, name: str | None) -> Instrument | None:
    if not name:
        return None
    inst = session.scalar(select(Instrument).where(Instrument.name == name))
    if inst is None:
        raise NotFound(f"instrument {name!r} not found; add it with `magvault instrument add`", field="instrument")
    return inst


def ensure_origin(session: Session, name: str | None, kind: str | None = None,
                  notes: str | None = None) -> Origin | None:
    if not name:
        return None
    origin = session.scalar(select(Origin).where(Origin.name == name))
    if origin is None:
        origin = Origin(name=name, kind=kind, notes=notes)
        session.add(origin)
        session.flush()
        events.record(session, "create", "origin", origin.id, after={"name": name, "kind": kind})
    return origin


def add_specimen(session: Session, data: dict[str, Any]) -> tuple[Specimen, list[str]]:
    """Create a specimen from validated input; returns it and any warnings (mass checks)."""
    if session.scalar(select(Specimen.id).where(Specimen.code == data["code"])) is not None:
        raise Duplicate(f"specimen {data['code']!r} already exists; choose another code", field="code")
    parent = get_specimen(session, data["parent"]) if data.get("parent") else None
    origin = ensure_origin(session, data.get("origin"))
    if origin is None and parent is not None:
        origin = parent.origin
    mass = data.get("mass")
    specimen = Specimen(
        code=data["code"], parent=parent, origin=origin, kind=data.get("kind") or (parent.kind if parent else None),
        mass_kg=mass.value if mass else None, mass_uncertainty_kg=mass.uncertainty if mass else None,
        dimensions=data.get("dims"), same_orientation=bool(data.get("same_orientation")),
        storage=data.get("storage"), notes=data.get("notes"), created_by=events.current_user())
    if data.get("created"):
        specimen.created_at = data["created"]
    session.add(specimen)
    session.flush()
    notes = []
    if parent is not None and parent.mass_kg is not None:
        total = session.scalar(select(func.sum(Specimen.mass_kg)).where(Specimen.parent_id == parent.id)) or 0.0
        if total > parent.mass_kg * (1 + 1e-9):
            notes.append(f"the pieces cut from {parent.code} weigh {total * 1e6:.4g} mg in all, more than "
                         f"{parent.code} itself ({parent.mass_kg * 1e6:.4g} mg); check the masses")
    events.record(session, "create", "specimen", specimen.id, specimen_code=specimen.code,
                  after=specimen_summary(specimen), message="; ".join(notes) or None)
    return specimen, notes


def specimen_summary(s: Specimen) -> dict[str, Any]:
    return {"code": s.code, "parent": s.parent.code if s.parent else None, "kind": s.kind,
            "mass_kg": s.mass_kg, "mass_uncertainty_kg": s.mass_uncertainty_kg,
            "dimensions": s.dimensions, "origin": s.origin.name if s.origin else None,
            "same_orientation": s.same_orientation, "storage": s.storage, "notes": s.notes}


def ancestors(specimen: Specimen) -> list[Specimen]:
    """Parent first, root last."""
    chain, seen = [], {specimen.id}
    node = specimen.parent
    while node is not None and node.id not in seen:
        chain.append(node)
        seen.add(node.id)
        node = node.parent
    return chain


def descendant_tree(specimen: Specimen) -> dict[str, Any]:
    return {"code": specimen.code, "kind": specimen.kind, "mass_kg": specimen.mass_kg,
            "children": [descendant_tree(c) for c in specimen.children]}


# --- treatments -------------------------------------------------------------------------

_TREATMENT_KEYS = {
    "temperature": ("temperature_K", "K"),
    "duration": ("duration_s", "s"),
    "time": ("duration_s", "s"),
    "pressure": ("pressure_Pa", "Pa"),
    "field": ("field_T", "T"),
    "dose": ("dose_Gy", "Gy"),
    "cooling_rate": ("cooling_rate_K_per_s", "K/s"),
    "heating_rate": ("heating_rate_K_per_s", "K/s"),
}


def parse_treatment_conditions(items: list[str] | dict[str, Any] | None) -> dict[str, Any]:
    """``['temperature=573K', 'duration=2h', 'atmosphere=argon']`` -> SI keys.

    Known physical keys convert to SI (``temperature_K``, ``duration_s``...);
    any other key keeps its text (``atmosphere``, ``quench_medium``).
    """
    if items is None:
        return {}
    pairs = items.items() if isinstance(items, dict) else [_split_pair(i) for i in items]
    out: dict[str, Any] = {}
    for key, value in pairs:
        key = key.strip().lower().replace("-", "_").replace(" ", "_")
        if key in _TREATMENT_KEYS:
            name, unit = _TREATMENT_KEYS[key]
            m = parse_quantity(str(value), dimension=unit, field=f"--set {key}")
            out[name] = m.value
            if m.uncertainty is not None:
                out[name.rsplit("_", 1)[0] + "_uncertainty_" + name.rsplit("_", 1)[1]] = m.uncertainty
        elif any(key == v[0] for v in _TREATMENT_KEYS.values()):
            try:
                out[key] = float(value)
            except ValueError:
                raise InvalidValue(f"--set {key}: expected a number in SI, got {value!r}", field=key) from None
        else:
            if not re.fullmatch(r"[a-z][a-z0-9_]{0,40}", key):
                raise InvalidValue(f"--set: {key!r} is not a usable key (letters, digits, underscores)", field=key)
            out[key] = str(value).strip()
    return out


def _split_pair(item: str) -> tuple[str, str]:
    if "=" not in item:
        raise InvalidValue(f"--set: expected KEY=VALUE, got {item!r}", field="set")
    key, value = item.split("=", 1)
    if not key.strip() or not value.strip():
        raise InvalidValue(f"--set: expected KEY=VALUE, got {item!r}", field="set")
    return key, value


def add_treatment(session: Session, specimen_code: str, kind: str, at: dt.datetime,
                  conditions: dict[str, Any], notes: str | None = None) -> Treatment:
    specimen = get_specimen(session, specimen_code)
    treatment = Treatment(specimen_id=specimen.id, kind=kind, at=at, conditions=conditions, notes=notes)
    session.add(treatment)
    session.flush()
    events.record(session, "create", "treatment", treatment.id, specimen_code=specimen.code,
                  after={"kind": kind, "at": at, "conditions": conditions, "notes": notes})
    return treatment


# --- instruments ------------------------------------------------------------------------

def add_instrument(session: Session, data: dict[str, Any]) -> Instrument:
    if session.scalar(select(Instrument.id).where(Instrument.name == data["name"])) is not None:
        raise Duplicate(f"instrument {data['name']!r} already exists", field="name")
    inst = Instrument(name=data["name"], kind=data["kind"], place=data.get("place"), notes=data.get("notes"))
    session.add(inst)
    session.flush()
    events.record(session, "create", "instrument", inst.id, after=data)
    return inst


def calibrate_instrument(session: Session, name: str, at: dt.datetime, note: str | None,
                         raw_file_id: int | None, source_name: str | None) -> Calibration:
    inst = get_instrument(session, name)
    cal = Calibration(instrument_id=inst.id, at=at, note=note, raw_file_id=raw_file_id, source_name=source_name)
    session.add(cal)
    session.flush()
    events.record(session, "create", "calibration", cal.id,
                  after={"instrument": name, "at": at, "note": note, "file": source_name})
    return cal


def instruments(session: Session) -> list[dict[str, Any]]:
    out = []
    for inst in session.scalars(select(Instrument).order_by(Instrument.name)):
        out.append({"name": inst.name, "kind": inst.kind, "place": inst.place, "notes": inst.notes,
                    "calibrations": [{"at": iso(c.at), "note": c.note, "file": c.source_name}
                                     for c in inst.calibrations]})
    return out


def origins(session: Session) -> list[dict[str, Any]]:
    return [{"name": o.name, "kind": o.kind, "notes": o.notes}
            for o in session.scalars(select(Origin).order_by(Origin.name))]


def count_rows(session: Session) -> dict[str, int]:
    return {name: session.scalar(select(func.count()).select_from(model)) or 0
            for name, model in (("specimens", Specimen), ("runs", Run), ("compositions", Composition),
                                ("orientations", Orientation), ("treatments", Treatment))}



# --- compositions and orientations ------------------------------------------------------

def add_composition(session: Session, specimen_code: str, *, method: str, basis: str,
                    amounts: dict[str, Any], result, superstructure: str | None,
                    measured_at: dt.datetime | None, notes: str | None = None) -> Composition:
    """Store one analysis; ``result`` is a :class:`magvault.analysis.composition.CompositionResult`."""
    specimen = get_specimen(session, specimen_code)
    comp = Composition(specimen_id=specimen.id, method=method, basis=basis, amounts=amounts, x=result.x,
                       x_uncertainty=result.x_uncertainty, fe_s_ratio=result.fe_s_ratio,
                       fe_s_ratio_uncertainty=result.fe_s_ratio_uncertainty, superstructure=superstructure,
                       warnings=list(result.warnings), notes=notes)
    if measured_at is not None:
        comp.measured_at = measured_at
    session.add(comp)
    session.flush()
    events.record(session, "create", "composition", comp.id, specimen_code=specimen.code,
                  after={"method": method, "basis": basis, "amounts": amounts, "x": result.x,
                         "x_uncertainty": result.x_uncertainty, "superstructure": superstructure},
                  message="; ".join(result.warnings) or None)
    return comp


def add_orientation(session: Session, specimen_code: str, orientation, measured_at: dt.datetime | None,
                    notes: str | None = None) -> Orientation:
    """Store a rotation (``magvault.analysis.orientation.Orientation``) for a specimen."""
    specimen = get_specimen(session, specimen_code)
    doc = orientation.as_dict()
    row = Orientation(specimen_id=specimen.id, matrix=doc["matrix"], system=doc["system"], cell=doc["cell"],
                      method=doc["method"], uncertainty_deg=doc["uncertainty_deg"],
                      notes="; ".join(list(doc.get("notes") or []) + ([notes] if notes else [])) or None)
    if measured_at is not None:
        row.measured_at = measured_at
    session.add(row)
    session.flush()
    events.record(session, "create", "orientation", row.id, specimen_code=specimen.code, after=doc)
    return row

"""The vault's tables: every entity of DESIGN.md section 2.

Physical sanity lives in CHECK constraints (mass > 0, kelvin > 0,
uncertainties >= 0) as the last line behind the marshmallow schemas; Alembic's
autogenerate does not compare CHECK constraints, so tests insert violating rows
on both back-ends.  Derived tables (transition, result) repeat ``run_id`` and
``specimen_id`` from their derivation so the collection queries filter on one
indexed table.
"""

from __future__ import annotations

import datetime as dt
from typing import Any, Optional

from sqlalchemy import (Boolean, CheckConstraint, Float, ForeignKey, Index, Integer,
                        LargeBinary, String, Text, UniqueConstraint)
from sqlalchemy.orm import Mapped, deferred, mapped_column, relationship

from .base import Base, intpk, jsondict, text64, text200, utc, utcnow

from ..vocabulary import BRANCHES, ROLES, RUN_KINDS, RUN_STATUSES, SPECIMEN_KINDS  # noqa: F401  (re-exported)


def _in(column: str, values: tuple[str, ...]) -> str:
    return f"{column} IN ({', '.join(repr(v) for v in values)})"


class User(Base):
    __tablename__ = "app_user"
    id: Mapped[intpk]
    name: Mapped[text64] = mapped_column(unique=True)
    role: Mapped[str] = mapped_column(String(16), default="recorder")
    created_at: Mapped[utc] = mapped_column(default=utcnow)
    __table_args__ = (CheckConstraint(_in("role", ROLES), name="role_known"),)


class Origin(Base):
    __tablename__ = "origin"
    id: Mapped[intpk]
    name: Mapped[text200] = mapped_column(unique=True)
    kind: Mapped[Optional[str]] = mapped_column(String(64))
    notes: Mapped[Optional[str]] = mapped_column(Text)
    meta: Mapped[dict[str, Any]] = mapped_column(default=dict)
    created_at: Mapped[utc] = mapped_column(default=utcnow)


class Specimen(Base):
    __tablename__ = "specimen"
    id: Mapped[intpk]
    code: Mapped[text64] = mapped_column(unique=True)
    parent_id: Mapped[Optional[int]] = mapped_column(ForeignKey("specimen.id"), index=True)
    origin_id: Mapped[Optional[int]] = mapped_column(ForeignKey("origin.id"), index=True)
    kind: Mapped[Optional[str]] = mapped_column(String(32))
    mass_kg: Mapped[Optional[float]] = mapped_column(Float)
    mass_uncertainty_kg: Mapped[Optional[float]] = mapped_column(Float)
    # {"values_m": [..3], "uncertainty_m": float|None, "text": "2.1 x 1.5 x 0.8 mm"}
    dimensions: Mapped[Optional[dict[str, Any]]] = mapped_column()
    same_orientation: Mapped[bool] = mapped_column(Boolean, default=False)
    storage: Mapped[Optional[str]] = mapped_column(String(200))
    notes: Mapped[Optional[str]] = mapped_column(Text)
    created_at: Mapped[utc] = mapped_column(default=utcnow)
    created_by: Mapped[Optional[str]] = mapped_column(String(64))

    parent: Mapped[Optional["Specimen"]] = relationship(remote_side="Specimen.id", back_populates="children")
    children: Mapped[list["Specimen"]] = relationship(back_populates="parent", order_by="Specimen.code")
    origin: Mapped[Optional[Origin]] = relationship()

    __table_args__ = (
        CheckConstraint("mass_kg IS NULL OR mass_kg > 0", name="mass_positive"),
        CheckConstraint("mass_uncertainty_kg IS NULL OR mass_uncertainty_kg >= 0", name="mass_unc_nonneg"),
        CheckConstraint("parent_id IS NULL OR parent_id <> id", name="not_own_parent"),
    )


class Orientation(Base):
    __tablename__ = "orientation"
    id: Mapped[intpk]
    specimen_id: Mapped[int] = mapped_column(ForeignKey("specimen.id"), index=True)
    # Row-major 3x3 rotation: specimen-frame vectors -> crystal Cartesian frame
    # (x along a, y in the a-b plane, z along c*), DESIGN.md section 2.
    matrix: Mapped[list[float]] = mapped_column(default=list)
    system: Mapped[str] = mapped_column(String(16))
    cell: Mapped[Optional[dict[str, Any]]] = mapped_column()
    method: Mapped[str] = mapped_column(String(32))
    uncertainty_deg: Mapped[Optional[float]] = mapped_column(Float)
    measured_at: Mapped[utc] = mapped_column(default=utcnow)
    notes: Mapped[Optional[str]] = mapped_column(Text)
    __table_args__ = (
        CheckConstraint("uncertainty_deg IS NULL OR uncertainty_deg >= 0", name="unc_nonneg"),
    )


class Composition(Base):
    __tablename__ = "composition"
    id: Mapped[intpk]
    specimen_id: Mapped[int] = mapped_column(ForeignKey("specimen.id"), index=True)
    method: Mapped[str] = mapped_column(String(64))
    basis: Mapped[str] = mapped_column(String(16))  # "wt", "at", "d102"
    amounts: Mapped[dict[str, Any]] = mapped_column(default=dict)  # as given, {"Fe": [60.5, 0.3]}
    x: Mapped[float] = mapped_column(Float)
    x_uncertainty: Mapped[Optional[float]] = mapped_column(Float)
    fe_s_ratio: Mapped[Optional[float]] = mapped_column(Float)
    fe_s_ratio_uncertainty: Mapped[Optional[float]] = mapped_column(Float)
    superstructure: Mapped[Optional[str]] = mapped_column(String(16))
    measured_at: Mapped[utc] = mapped_column(default=utcnow)
    warnings: Mapped[list[str]] = mapped_column(default=list)
    notes: Mapped[Optional[str]] = mapped_column(Text)
    __table_args__ = (
        CheckConstraint("x_uncertainty IS NULL OR x_uncertainty >= 0", name="x_unc_nonneg"),
        CheckConstraint("fe_s_ratio_uncertainty IS NULL OR fe_s_ratio_uncertainty >= 0", name="ratio_unc_nonneg"),
        CheckConstraint("x < 1", name="x_below_one"),
    )


class Treatment(Base):
    __tablename__ = "treatment"
    id: Mapped[intpk]
    specimen_id: Mapped[int] = mapped_column(ForeignKey("specimen.id"), index=True)
    kind: Mapped[str] = mapped_column(String(32))
    at: Mapped[utc]
    # Canonical SI keys: temperature_K, duration_s, atmosphere, ...
    conditions: Mapped[dict[str, Any]] = mapped_column(default=dict)
    notes: Mapped[Optional[str]] = mapped_column(Text)


class Instrument(Base):
    __tablename__ = "instrument"
    id: Mapped[intpk]
    name: Mapped[text64] = mapped_column(unique=True)
    kind: Mapped[str] = mapped_column(String(32))
    place: Mapped[Optional[str]] = mapped_column(String(200))
    notes: Mapped[Optional[str]] = mapped_column(Text)
    calibrations: Mapped[list["Calibration"]] = relationship(order_by="Calibration.at")


class Calibration(Base):
    __tablename__ = "calibration"
    id: Mapped[intpk]
    instrument_id: Mapped[int] = mapped_column(ForeignKey("instrument.id"), index=True)
    at: Mapped[utc]
    note: Mapped[Optional[str]] = mapped_column(Text)
    raw_file_id: Mapped[Optional[int]] = mapped_column(ForeignKey("raw_file.id"))
    source_name: Mapped[Optional[str]] = mapped_column(String(255))


class RawFile(Base):
    """The exact bytes of an export or image, content-addressed and never altered."""

    __tablename__ = "raw_file"
    id: Mapped[intpk]
    sha256: Mapped[str] = mapped_column(String(64), unique=True)
    size: Mapped[int] = mapped_column(Integer)
    media_type: Mapped[str] = mapped_column(String(100))
    first_name: Mapped[str] = mapped_column(String(255))
    data: Mapped[bytes] = deferred(mapped_column(LargeBinary))
    stored_at: Mapped[utc] = mapped_column(default=utcnow)
    __table_args__ = (
        CheckConstraint("size >= 0", name="size_nonneg"),
        CheckConstraint("length(sha256) = 64", name="sha256_length"),
    )


class Run(Base):
    __tablename__ = "run"
    id: Mapped[intpk]
    specimen_id: Mapped[int] = mapped_column(ForeignKey("specimen.id"))
    kind: Mapped[str] = mapped_column(String(32))
    status: Mapped[str] = mapped_column(String(16), default="planned")
    instrument_id: Mapped[Optional[int]] = mapped_column(ForeignKey("instrument.id"))
    operator: Mapped[Optional[str]] = mapped_column(String(64))
    started: Mapped[Optional[dt.datetime]] = mapped_column()
    finished: Mapped[Optional[dt.datetime]] = mapped_column()
    # Canonical SI keys of DESIGN.md section 5 (field_T, sweep_rate_K_per_s, ...).
    conditions: Mapped[dict[str, Any]] = mapped_column(default=dict)
    direction: Mapped[Optional[str]] = mapped_column(String(64))  # "X", "Y", "Z" or "x,y,z"
    group_label: Mapped[Optional[str]] = mapped_column(String(64), index=True)
    raw_file_id: Mapped[Optional[int]] = mapped_column(ForeignKey("raw_file.id"), index=True)
    source_name: Mapped[Optional[str]] = mapped_column(String(255))
    superseded_by_id: Mapped[Optional[int]] = mapped_column(ForeignKey("run.id"))
    status_reason: Mapped[Optional[str]] = mapped_column(Text)
    notes: Mapped[Optional[str]] = mapped_column(Text)
    created_at: Mapped[utc] = mapped_column(default=utcnow)

    specimen: Mapped[Specimen] = relationship()
    instrument: Mapped[Optional[Instrument]] = relationship()
    raw_file: Mapped[Optional[RawFile]] = relationship()

    __table_args__ = (
        CheckConstraint(_in("kind", RUN_KINDS), name="kind_known"),
        CheckConstraint(_in("status", RUN_STATUSES), name="status_known"),
        CheckConstraint("status NOT IN ('recorded', 'superseded') OR raw_file_id IS NOT NULL",
                        name="recorded_has_bytes"),
        CheckConstraint("status <> 'superseded' OR superseded_by_id IS NOT NULL", name="superseded_has_successor"),
        Index("ix_run_specimen_kind", "specimen_id", "kind"),
        Index("ix_run_kind_status", "kind", "status"),
    )


class Series(Base):
    """A run's data normalised to canonical SI columns, one columnar blob per version."""

    __tablename__ = "series"
    id: Mapped[intpk]
    run_id: Mapped[int] = mapped_column(ForeignKey("run.id"))
    version: Mapped[int] = mapped_column(Integer, default=1)
    shape: Mapped[str] = mapped_column(String(32))
    encoding: Mapped[Optional[str]] = mapped_column(String(32))
    profile_name: Mapped[Optional[str]] = mapped_column(String(64))
    # The mapping that produced the columns: [{source, source_unit, target, factor, offset}]
    mapping: Mapped[list[dict[str, Any]]] = mapped_column(default=list)
    columns: Mapped[list[str]] = mapped_column(default=list)
    n_rows: Mapped[int] = mapped_column(Integer)
    data: Mapped[bytes] = deferred(mapped_column(LargeBinary))
    created_at: Mapped[utc] = mapped_column(default=utcnow)
    __table_args__ = (
        UniqueConstraint("run_id", "version", name="uq_series_run_version"),
        CheckConstraint("n_rows >= 0", name="rows_nonneg"),
        CheckConstraint("version >= 1", name="version_positive"),
    )


class TransitionKind(Base):
    __tablename__ = "transition_kind"
    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    name: Mapped[str] = mapped_column(String(200))
    typical_lo_K: Mapped[float] = mapped_column("typical_lo_k", Float)
    typical_hi_K: Mapped[float] = mapped_column("typical_hi_k", Float)
    window_lo_K: Mapped[float] = mapped_column("window_lo_k", Float)
    window_hi_K: Mapped[float] = mapped_column("window_hi_k", Float)
    run_kinds: Mapped[list[str]] = mapped_column(default=list)
    mineral: Mapped[Optional[str]] = mapped_column(String(64))
    note: Mapped[Optional[str]] = mapped_column(Text)
    seeded: Mapped[bool] = mapped_column(Boolean, default=False)
    __table_args__ = (
        CheckConstraint("typical_lo_k > 0 AND typical_lo_k <= typical_hi_k", name="typical_range"),
        CheckConstraint("window_lo_k > 0 AND window_lo_k <= typical_lo_k AND typical_hi_k <= window_hi_k",
                        name="window_range"),
    )


class Derivation(Base):
    """One computation: method, version, parameters and inputs; rerunning gives the same numbers."""

    __tablename__ = "derivation"
    id: Mapped[intpk]
    method: Mapped[str] = mapped_column(String(64))
    version: Mapped[str] = mapped_column(String(16))
    parameters: Mapped[dict[str, Any]] = mapped_column(default=dict)
    # sha256 over method, version, parameters and the input series: re-deriving reuses the record
    inputs_key: Mapped[str] = mapped_column(String(64), unique=True)
    # Groups the versions of one method on one set of input runs ("newest by default").
    lineage_key: Mapped[str] = mapped_column(String(64), index=True)
    input_runs: Mapped[list[int]] = mapped_column(default=list)
    input_hashes: Mapped[list[str]] = mapped_column(default=list)
    software_version: Mapped[str] = mapped_column(String(32))
    operator: Mapped[Optional[str]] = mapped_column(String(64))
    created_at: Mapped[utc] = mapped_column(default=utcnow)
    current: Mapped[bool] = mapped_column(Boolean, default=True)
    warnings: Mapped[list[str]] = mapped_column(default=list)
    diagnostics: Mapped[dict[str, Any]] = mapped_column(default=dict)
    runs: Mapped[list["DerivationInput"]] = relationship(cascade="all")


class DerivationInput(Base):
    __tablename__ = "derivation_input"
    derivation_id: Mapped[int] = mapped_column(ForeignKey("derivation.id"), primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("run.id"), primary_key=True, index=True)
    series_id: Mapped[Optional[int]] = mapped_column(ForeignKey("series.id"))


class Transition(Base):
    __tablename__ = "transition"
    id: Mapped[intpk]
    derivation_id: Mapped[int] = mapped_column(ForeignKey("derivation.id"), index=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("run.id"), index=True)
    specimen_id: Mapped[int] = mapped_column(ForeignKey("specimen.id"))
    kind: Mapped[str] = mapped_column(ForeignKey("transition_kind.id"))
    temperature_K: Mapped[float] = mapped_column("temperature_k", Float)
    uncertainty_K: Mapped[Optional[float]] = mapped_column("uncertainty_k", Float)
    method: Mapped[str] = mapped_column(String(64))
    branch: Mapped[Optional[str]] = mapped_column(String(16))
    component: Mapped[int] = mapped_column(Integer, default=1)
    is_primary: Mapped[bool] = mapped_column("is_primary", Boolean, default=False)
    width_K: Mapped[Optional[float]] = mapped_column("width_k", Float)
    ambiguous: Mapped[bool] = mapped_column(Boolean, default=False)
    current: Mapped[bool] = mapped_column(Boolean, default=True)
    diagnostics: Mapped[dict[str, Any]] = mapped_column(default=dict)
    __table_args__ = (
        CheckConstraint("temperature_k > 0", name="kelvin_positive"),
        CheckConstraint("uncertainty_k IS NULL OR uncertainty_k >= 0", name="unc_nonneg"),
        CheckConstraint("width_k IS NULL OR width_k >= 0", name="width_nonneg"),
        CheckConstraint("component >= 1", name="component_positive"),
        CheckConstraint("branch IS NULL OR " + _in("branch", BRANCHES), name="branch_known"),
        Index("ix_transition_kind_primary", "kind", "is_primary", "current", "specimen_id"),
        Index("ix_transition_specimen_kind", "specimen_id", "kind"),
    )


class Result(Base):
    __tablename__ = "result"
    id: Mapped[intpk]
    derivation_id: Mapped[int] = mapped_column(ForeignKey("derivation.id"), index=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("run.id"), index=True)
    specimen_id: Mapped[int] = mapped_column(ForeignKey("specimen.id"), index=True)
    quantity: Mapped[str] = mapped_column(String(64), index=True)
    value: Mapped[float] = mapped_column(Float)
    uncertainty: Mapped[Optional[float]] = mapped_column(Float)
    unit: Mapped[str] = mapped_column(String(32))
    method: Mapped[str] = mapped_column(String(64))
    block_temperature_K: Mapped[Optional[float]] = mapped_column("block_temperature_k", Float)
    branch: Mapped[Optional[str]] = mapped_column(String(16))
    current: Mapped[bool] = mapped_column(Boolean, default=True)
    diagnostics: Mapped[dict[str, Any]] = mapped_column(default=dict)
    __table_args__ = (
        CheckConstraint("uncertainty IS NULL OR uncertainty >= 0", name="unc_nonneg"),
        CheckConstraint("block_temperature_k IS NULL OR block_temperature_k > 0", name="block_kelvin_positive"),
    )


class Profile(Base):
    """A saved mapping from source columns to canonical columns."""

    __tablename__ = "profile"
    id: Mapped[intpk]
    name: Mapped[text64] = mapped_column(unique=True)
    definition: Mapped[dict[str, Any]] = mapped_column(default=dict)
    created_at: Mapped[utc] = mapped_column(default=utcnow)


class SavedQuery(Base):
    __tablename__ = "saved_query"
    id: Mapped[intpk]
    name: Mapped[text64] = mapped_column(unique=True)
    query: Mapped[str] = mapped_column(String(32))  # "shifts", "overlay", "coupled", ...
    parameters: Mapped[dict[str, Any]] = mapped_column(default=dict)
    created_at: Mapped[utc] = mapped_column(default=utcnow)
    created_by: Mapped[Optional[str]] = mapped_column(String(64))


class Image(Base):
    """A micrograph attached to a specimen or a run; the bytes live in the raw store."""

    __tablename__ = "image"
    id: Mapped[intpk]
    specimen_id: Mapped[Optional[int]] = mapped_column(ForeignKey("specimen.id"), index=True)
    run_id: Mapped[Optional[int]] = mapped_column(ForeignKey("run.id"), index=True)
    raw_file_id: Mapped[int] = mapped_column(ForeignKey("raw_file.id"))
    source_name: Mapped[str] = mapped_column(String(255))
    pixel_size_m: Mapped[Optional[float]] = mapped_column(Float)
    width_px: Mapped[Optional[int]] = mapped_column(Integer)
    height_px: Mapped[Optional[int]] = mapped_column(Integer)
    caption: Mapped[Optional[str]] = mapped_column(Text)
    created_at: Mapped[utc] = mapped_column(default=utcnow)
    __table_args__ = (
        CheckConstraint("pixel_size_m IS NULL OR pixel_size_m > 0", name="pixel_size_positive"),
        CheckConstraint("specimen_id IS NOT NULL OR run_id IS NOT NULL", name="attached"),
    )


class Bundle(Base):
    __tablename__ = "bundle"
    id: Mapped[intpk]
    name: Mapped[str] = mapped_column(String(200))
    version: Mapped[int] = mapped_column(Integer, default=1)
    selection: Mapped[dict[str, Any]] = mapped_column(default=dict)
    manifest: Mapped[dict[str, Any]] = mapped_column(default=dict)
    sha256: Mapped[Optional[str]] = mapped_column(String(64))
    created_at: Mapped[utc] = mapped_column(default=utcnow)
    __table_args__ = (UniqueConstraint("name", "version", name="uq_bundle_name_version"),)


class Event(Base):
    """Append-only audit log; triggers refuse UPDATE and DELETE on both back-ends."""

    __tablename__ = "event"
    id: Mapped[intpk]
    at: Mapped[utc] = mapped_column(default=utcnow, index=True)
    user_name: Mapped[str] = mapped_column(String(64), index=True)
    action: Mapped[str] = mapped_column(String(32))
    entity: Mapped[str] = mapped_column(String(32))
    entity_id: Mapped[Optional[str]] = mapped_column(String(64))
    specimen_code: Mapped[Optional[str]] = mapped_column(String(64), index=True)
    before: Mapped[Optional[dict[str, Any]]] = mapped_column()
    after: Mapped[Optional[dict[str, Any]]] = mapped_column()
    message: Mapped[Optional[str]] = mapped_column(Text)

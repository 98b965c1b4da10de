"""Importing exports: read and check everything first, then write it all in one transaction."""

from __future__ import annotations

import ctypes
import os
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sqlalchemy import select

from .. import schemas
from ..errors import Duplicate, InvalidValue, NotFound
from ..ingest import Profile, add_mass_normalised, parse_map, parse_overrides, read_export
from ..store.frames import pack_frame
from ..store.models import Profile as ProfileRow
from ..store.models import RawFile, Run
from ..timeutil import now, parse_datetime
from . import events, registry
from . import runs as run_service

if TYPE_CHECKING:
    from ..vault import IngestReport, Vault

MASS_DISAGREEMENT = 0.01  # relative; above it the file's mass is reported as disagreeing


def load_bytes(path: str | os.PathLike | None, data: bytes | None, source_name: str | None) -> tuple[bytes, str]:
    if data is not None:
        return bytes(data), source_name or "upload"
    if path is None:
        raise InvalidValue("give a file to import", field="file")
    p = Path(path)
    if not p.exists():
        raise InvalidValue(f"{p}: no such file", field="file")
    if not p.is_file():
        raise InvalidValue(f"{p}: is not a file", field="file")
    try:
        return p.read_bytes(), source_name or p.name
    except OSError as exc:
        raise InvalidValue(f"{p}: cannot read ({exc.strerror})", field="file") from None


def _profile(session, name: str | None) -> Profile | None:
    if not name:
        return None
    row = session.scalar(select(ProfileRow).where(ProfileRow.name == name))
    if row is None:
        raise NotFound(f"profile {name!r} not found; `magvault profile list` shows the saved ones", field="profile")
    return Profile.from_dict(row.definition)


def _arguments(mapping, overrides) -> tuple[dict[str, str] | None, dict[str, Any] | None]:
    if isinstance(mapping, str):
        mapping = parse_map(mapping) if mapping.strip() else None
    if overrides is not None and not isinstance(overrides, dict):
        overrides = parse_overrides(list(overrides)) if overrides else None
    return mapping or None, overrides or None


def parse(vault: "Vault", path, *, kind: str, data: bytes | None = None, source_name: str | None = None,
          profile: str | None = None, shape: str | None = None, mapping=None, encoding: str | None = None,
          sheet: str | None = None, overrides=None):
    blob, name = load_bytes(path, data, source_name)
    mapping, overrides = _arguments(mapping, overrides)
    with vault.read() as s:
        prof = _profile(s, profile)
    return read_export(blob, source_name=name, run_kind=kind, shape=shape, encoding=encoding, sheet=sheet,
                       mapping=mapping, profile=prof, overrides=overrides)


def ingest(vault: "Vault", path, *, specimen: str | None, kind: str | None, run: int | None,
           data: bytes | None, source_name: str | None, profile: str | None, shape: str | None, mapping,
           direction: str | None, group: str | None, instrument: str | None, encoding: str | None,
           sheet: str | None, overrides, again: bool, operator: str | None) -> "IngestReport":
    from ..vault import IngestReport

    if run is None and (not specimen or not kind):
        raise InvalidValue("say what the file is: --specimen CODE --kind RUN_KIND for a new run, "
                           "or --run ID for a run logged earlier", field="specimen")
    checked = schemas.load(schemas.RunLogIn(), dict(
        specimen=specimen or "placeholder", kind=kind or "thermomagnetic", direction=direction, group=group,
        instrument=instrument, operator=operator))
    blob, name = load_bytes(path, data, source_name)
    digest = run_service.sha256(blob)
    mapping, overrides = _arguments(mapping, overrides)

    # 1. Resolve every name and check for duplicates before reading the file.
    with vault.read() as s:
        if run is not None:
            logged = run_service.get_run(s, run)
            if logged.status not in ("planned", "running"):
                raise InvalidValue(f"run {logged.id} is {logged.status}; only a planned or running run takes "
                                   "a file (import a new run instead)", field="run")
            if specimen and specimen != logged.specimen.code:
                raise InvalidValue(f"run {logged.id} belongs to {logged.specimen.code}, not {specimen}", field="specimen")
            if kind and kind != logged.kind:
                raise InvalidValue(f"run {logged.id} is a {logged.kind} run, not {kind}", field="kind")
            spec, kind = logged.specimen, logged.kind
        else:
            spec = registry.get_specimen(s, checked["specimen"])
        registry.get_instrument(s, checked.get("instrument"))
        prof = _profile(s, profile)
        specimen_code, specimen_mass = spec.code, spec.mass_kg
        if not again:
            _refuse_duplicate(s, digest, spec.id, name)

    # 2. Read and convert the file (nothing written yet).
    parsed = read_export(blob, source_name=name, run_kind=kind, shape=shape, encoding=encoding, sheet=sheet,
                         mapping=mapping, profile=prof, overrides=overrides)
    conditions = dict(parsed.conditions)
    notes = list(parsed.warnings)
    file_mass = conditions.get("mass_kg")
    if specimen_mass is not None and file_mass:
        if abs(file_mass - specimen_mass) > MASS_DISAGREEMENT * specimen_mass:
            notes.append(f"{name}: the file states a mass of {file_mass * 1e6:.5g} mg but {specimen_code} is "
                         f"recorded as {specimen_mass * 1e6:.5g} mg; the recorded mass is used")
    mass = specimen_mass if specimen_mass is not None else file_mass
    if mass is not None:
        conditions["mass_kg"] = mass
    if kind == "diffraction" and not conditions.get("wavelength_m"):
        raise InvalidValue(f"{name}: no X-ray wavelength in the file; give it with "
                           "--set wavelength=Cu K-alpha1 (or --set wavelength='1.5406 A')", field="wavelength")
    frame = add_mass_normalised(parsed.series, mass)
    started = conditions.pop("started", None)
    started_dt = parse_datetime(started, field=f"{name}: started") if started else None
    # Pack the series now and let the columns go, so that the writes below hold the packed
    # copy only (on a million-row import the peak memory is here, not in the database).
    shape, encoding_used, profile_name = parsed.shape, parsed.encoding, parsed.profile_name
    mapping_used = [events.jsonable(vars(c)) for c in parsed.columns]
    n_rows, column_names = len(frame), [str(c) for c in frame.columns]
    del parsed  # its row-line numbers (8 bytes a row) are only for messages about the file
    _return_freed_memory()
    packed = pack_frame(frame)
    del frame
    _return_freed_memory()

    # 3. Write raw bytes, run, series and event together.
    with vault.write() as s:
        if not again:
            _refuse_duplicate(s, digest, spec.id, name)
        existing = s.scalar(select(RawFile.id).where(RawFile.sha256 == digest))
        raw = run_service.store_raw(s, blob, name, _media_type(name, shape), digest)
        del blob  # stored; the caller's copy (if any) is the caller's
        inst = registry.get_instrument(s, checked.get("instrument"))
        if run is not None:
            target = run_service.get_run(s, run)
            if target.status not in ("planned", "running"):
                raise InvalidValue(f"run {target.id} was completed by someone else meanwhile", field="run")
            before = run_service.run_summary(target)
            action = "update"
        else:
            target = Run(specimen_id=spec.id, kind=kind, operator=checked.get("operator") or events.current_user(),
                         direction=checked.get("direction"), group_label=checked.get("group"))
            s.add(target)
            before, action = None, "create"
        target.status = "recorded"
        target.raw_file_id = raw.id
        target.source_name = name[:255]
        target.conditions = events.jsonable({**(target.conditions or {}), **conditions})
        target.started = started_dt or target.started or now()
        if inst is not None:
            target.instrument_id = inst.id
        if direction:
            target.direction = checked["direction"]
        if group:
            target.group_label = checked["group"]
        s.flush()
        run_service.store_series(s, target, packed, n_rows=n_rows, columns=column_names, shape=shape,
                    encoding=encoding_used, profile_name=profile_name, mapping=mapping_used)
        del packed
        s.refresh(target)
        events.record(s, action, "run", target.id, specimen_code=specimen_code, before=before,
                      after=run_service.run_summary(target),
                      message=f"imported {name} ({shape}, {n_rows} rows, sha256 {digest[:12]})")
        run_id = target.id
    return IngestReport(run_id=run_id, specimen=specimen_code, kind=kind, sha256=digest, shape=shape,
                        rows=n_rows, columns=tuple(column_names),
                        reused_bytes=existing is not None, warnings=tuple(notes), conditions=conditions)


def _return_freed_memory() -> None:
    """Give memory freed by the parser back to the operating system before packing and writing.

    glibc keeps what the parser's worker threads free in their own arenas, where the
    writes that follow cannot reuse it; on a million-row import that is tens of
    megabytes of the peak.  ``malloc_trim(0)`` releases the free pages of every arena
    (as long-running numeric services commonly do); with another C library or
    system nothing is done.
    """
    if _LIBC is not None:
        _LIBC.malloc_trim(0)


def _load_libc():
    if not sys.platform.startswith("linux"):
        return None
    try:
        libc = ctypes.CDLL("libc.so.6")
        libc.malloc_trim.argtypes = [ctypes.c_size_t]
        libc.malloc_trim.restype = ctypes.c_int
        return libc
    except (OSError, AttributeError):  # not glibc (musl, for one, has no malloc_trim)
        return None


_LIBC = _load_libc()


def _refuse_duplicate(session, digest: str, specimen_id: int, name: str) -> None:
    dup = session.scalar(select(Run.id).join(RawFile, RawFile.id == Run.raw_file_id)
                         .where(RawFile.sha256 == digest, Run.specimen_id == specimen_id,
                                Run.status != "retracted").order_by(Run.id).limit(1))
    if dup is not None:
        raise Duplicate(f"{name}: these exact bytes were already imported for this specimen as run {dup}; "
                        "pass --again to import them as a new run", field="file")


def _media_type(name: str, shape: str) -> str:
    if shape == "spreadsheet" or name.lower().endswith(".xlsx"):
        return "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"
    if name.lower().endswith(".csv"):
        return "text/csv"
    return "text/plain"


# --- profiles -----------------------------------------------------------------------------------

def save_profile(session, name: str, profile: Profile) -> None:
    if session.scalar(select(ProfileRow.id).where(ProfileRow.name == name)) is not None:
        raise Duplicate(f"profile {name!r} already exists; choose another name", field="name")
    session.add(ProfileRow(name=name, definition=profile.to_dict()))
    events.record(session, "create", "profile", name, after=profile.to_dict())


def profile_from_run(session, run_id: int, name: str) -> Profile:
    series = run_service.latest_series(session, run_id)
    if series is None:
        raise NotFound(f"run {run_id} has no imported data to take a profile from", field="run")
    mapping = {m["source"]: m["target"] for m in series.mapping}
    units = {m["source"]: m["source_unit"] for m in series.mapping if m.get("source_unit")}
    run = run_service.get_run(session, run_id)
    return Profile(name=name, mapping=mapping, units=units, shape=series.shape, run_kind=run.kind)

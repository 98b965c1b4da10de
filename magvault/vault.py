"""The service API: the one way in for the CLI, the web app and notebooks.

>>> import magvault
>>> vault = magvault.open("magvault.db")          # or a postgresql+psycopg:// URL
>>> vault.specimens()                              # pandas DataFrames with units in column names
>>> vault.series(run_id)

Each public method is one unit of work: it opens a session, validates its input
(marshmallow, at the boundary), calls the service functions and commits, or
rolls back completely when anything fails.  Nothing here formats output.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import mimetypes
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator

import pandas as pd
from sqlalchemy import Engine, func, select
from sqlalchemy.exc import IntegrityError, OperationalError
from sqlalchemy.orm import Session, sessionmaker

from . import schemas
from .errors import Duplicate, InvalidValue, MagvaultError, MissingDatabase, NotFound
from .services import events as event_log
from .services import listing, registry, runs as run_service
from .store import schema as db_schema
from .store.engine import database_url, make_engine, sqlite_path, writer
from .store.models import RUN_KINDS, Event, Run, TransitionKind
from .timeutil import iso, now

__all__ = ["Vault", "open_vault", "IngestReport"]


@dataclass(frozen=True)
class IngestReport:
    """What an import did: the run it wrote and what the reader made of the file."""

    run_id: int
    specimen: str
    kind: str
    sha256: str
    shape: str
    rows: int
    columns: tuple[str, ...]
    reused_bytes: bool
    warnings: tuple[str, ...] = ()
    conditions: dict[str, Any] = field(default_factory=dict)


def open_vault(path_or_url: str | os.PathLike, *, create: bool = False) -> "Vault":
    """Open a vault; a missing SQLite file is refused unless ``create=True``.

    ``create=True`` creates the file (or an empty server database's tables) and
    upgrades the schema to the newest revision.
    """
    url = database_url(path_or_url)
    path = sqlite_path(url)
    if path is not None and not path.exists():
        if not create:
            raise MissingDatabase(f"no vault at {path}; create one with `magvault --db {path} init` "
                                  "(or magvault.open(path, create=True))")
        path.parent.mkdir(parents=True, exist_ok=True)
    engine = make_engine(url)
    try:
        current = db_schema.current_revision(engine)
    except OperationalError as exc:
        engine.dispose()
        raise MissingDatabase(f"cannot open database {_safe(url)}: {str(exc.orig).strip().splitlines()[0]}") from None
    head = db_schema.head_revision(url)
    if current != head:
        if create:
            db_schema.upgrade(url)
        elif current is None:
            engine.dispose()
            raise MissingDatabase(f"{_safe(url)} holds no vault yet; run `magvault --db {_safe(url)} init`")
        else:
            engine.dispose()
            raise MissingDatabase(f"{_safe(url)} is at schema revision {current}, this magvault needs {head}; "
                                  f"run `magvault --db {_safe(url)} init` to upgrade")
    return Vault(engine, url)


def _safe(url: str) -> str:
    from sqlalchemy.engine import make_url

    u = make_url(url)
    if u.get_backend_name() == "sqlite":
        return u.database or url
    return u.render_as_string(hide_password=True)


class Vault:
    """A magvault database.  Open it with :func:`magvault.open`."""

    def __init__(self, engine: Engine, url: str):
        self.engine = engine
        self.url = url
        self._sessions = sessionmaker(bind=engine, expire_on_commit=False)
        self._writer = writer(engine)

    # -- units of work --------------------------------------------------------------------

    @contextlib.contextmanager
    def write(self) -> Iterator[Session]:
        """One write transaction (on SQLite it takes the write lock at BEGIN)."""
        with self._sessions(bind=self._writer) as session:
            try:
                with session.begin():
                    yield session
            except IntegrityError as exc:
                raise _integrity_message(exc) from None

    @contextlib.contextmanager
    def read(self) -> Iterator[Session]:
        with self._sessions() as session:
            with session.begin():
                yield session

    def close(self) -> None:
        self.engine.dispose()

    def __enter__(self) -> "Vault":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"<Vault {_safe(self.url)}>"

    @property
    def backend(self) -> str:
        return self.engine.dialect.name

    # -- specimens ------------------------------------------------------------------------

    def add_specimen(self, code: str, *, parent: str | None = None, mass: str | None = None,
                     kind: str | None = None, dims: str | None = None, origin: str | None = None,
                     storage: str | None = None, notes: str | None = None, same_orientation: bool = False,
                     created: str | dt.datetime | None = None) -> dict[str, Any]:
        """Register a specimen (a piece cut from ``parent`` when given).

        ``mass`` is text with a unit such as ``'12.5 mg'`` or ``'12.50+/-0.02 mg'``;
        ``dims`` such as ``'2.1 x 1.5 x 0.8 mm'``.  Returns the specimen's summary
        with a ``warnings`` list (for example children heavier than their parent).
        """
        data = schemas.load(schemas.SpecimenIn(), dict(
            code=code, parent=parent, mass=mass, kind=kind, dims=dims, origin=origin, storage=storage,
            notes=notes, same_orientation=same_orientation, created=created))
        with self.write() as s:
            specimen, notes_ = registry.add_specimen(s, data)
            out = registry.specimen_summary(specimen)
        return {**out, "warnings": notes_}

    def specimen(self, code: str) -> dict[str, Any]:
        """Everything about one specimen: lineage, orientation, compositions, treatments, runs."""
        with self.read() as s:
            return listing.specimen_detail(s, code)

    def specimens(self) -> pd.DataFrame:
        """One row per specimen (code, parent, kind, mass_kg, origin, x, superstructure, ...)."""
        with self.read() as s:
            return listing.specimens_frame(s)

    def origins(self) -> list[dict[str, Any]]:
        with self.read() as s:
            return registry.origins(s)

    def add_origin(self, name: str, *, kind: str | None = None, notes: str | None = None) -> None:
        if not name or not str(name).strip():
            raise InvalidValue("origin: give a name", field="origin")
        with self.write() as s:
            registry.ensure_origin(s, name.strip(), kind, notes)

    # -- compositions and orientations ------------------------------------------------------------

    def add_composition(self, specimen: str, *, method: str, wt: list[str] | dict[str, Any] | None = None,
                        at: list[str] | dict[str, Any] | None = None, d102: str | None = None,
                        superstructure: str | None = None, measured: str | dt.datetime | None = None,
                        notes: str | None = None) -> dict[str, Any]:
        """Record one analysis and derive x in Fe(1-x)S with its uncertainty.

        Give element amounts in wt% (``wt=['Fe=60.5+/-0.3', 'S=39.1+/-0.3']`` or a dict
        ``{'Fe': (60.5, 0.3)}``), in at% (``at=...``), or the subcell d(102) spacing
        (``d102='2.0585+/-0.0005 A'``).  Returns x, its uncertainty and warnings.
        """
        from .analysis import composition as comp
        from .timeutil import parse_datetime
        from .units import parse_quantity

        given = [n for n, v in (("--wt", wt), ("--at", at), ("--d102", d102)) if v]
        if len(given) != 1:
            raise InvalidValue("give the analysis as --wt amounts, --at amounts or --d102, exactly one of them",
                               field="wt")
        if not method or not str(method).strip():
            raise InvalidValue("--method: say how the composition was measured (e.g. microprobe)", field="method")
        label = comp.validate_superstructure(superstructure) if superstructure else None
        when = parse_datetime(measured, field="--measured") if measured else None
        if d102:
            # Crystallographers write angstrom as "A", which pint reads as ampere.
            text = re.sub(r"(?<![A-Za-z])(A|Å)\s*$", "angstrom", str(d102).strip())
            d = parse_quantity(text, dimension="m", field="--d102", positive=True, allow_unitless=True,
                               default_unit="angstrom")
            result, basis, amounts = comp.x_from_d102(d.value, d.uncertainty), "d102", {"d102_m": [d.value, d.uncertainty]}
        else:
            raw = wt or at
            option = "--wt" if wt else "--at"
            parsed = (comp.parse_element_amounts(raw, option) if not isinstance(raw, dict)
                      else {k: (v if isinstance(v, (tuple, list)) else (v, None)) for k, v in raw.items()})
            result = comp.composition_from_wt(parsed) if wt else comp.composition_from_at(parsed)
            basis, amounts = ("wt" if wt else "at"), {k: list(v) for k, v in parsed.items()}
        with self.write() as s:
            registry.add_composition(s, specimen, method=str(method).strip(), basis=basis, amounts=amounts,
                                     result=result, superstructure=label, measured_at=when, notes=notes)
        return {"specimen": specimen, "x": result.x, "x_uncertainty": result.x_uncertainty,
                "fe_s_ratio": result.fe_s_ratio, "fe_s_ratio_uncertainty": result.fe_s_ratio_uncertainty,
                "superstructure": label, "warnings": list(result.warnings)}

    def add_orientation(self, specimen: str, *, system: str, method: str, matrix: str | None = None,
                        axes: str | None = None, euler: str | None = None, cell: str | None = None,
                        uncertainty: str | None = None, measured: str | dt.datetime | None = None,
                        notes: str | None = None) -> dict[str, Any]:
        """Record how the specimen frame relates to the crystal axes, as a proper rotation.

        The matrix maps specimen-frame vectors to the crystal Cartesian frame (x along a,
        y in the a-b plane, z along c*).  Give exactly one of ``matrix`` (nine numbers, row
        by row), ``axes`` (``'a=X,c*=Z'``) or ``euler`` (Bunge Z-X-Z angles in degrees,
        rotating the specimen frame onto the crystal frame).
        """
        from .analysis.orientation import orientation_from_options
        from .timeutil import parse_datetime

        o = orientation_from_options(system=system, method=method, matrix=matrix, axes=axes, euler=euler,
                                     cell=cell, uncertainty=uncertainty)
        when = parse_datetime(measured, field="--measured") if measured else None
        with self.write() as s:
            registry.add_orientation(s, specimen, o, when, notes)
        return {"specimen": specimen, **o.as_dict()}

    # -- treatments, instruments -----------------------------------------------------------

    def add_treatment(self, specimen: str, *, kind: str, at: str | dt.datetime,
                      conditions: list[str] | dict[str, Any] | None = None, notes: str | None = None) -> int:
        """Record a treatment (anneal, quench, irradiation...) at a time, with SI conditions."""
        data = schemas.load(schemas.TreatmentIn(), dict(specimen=specimen, kind=kind, at=at, notes=notes))
        conds = registry.parse_treatment_conditions(conditions)
        with self.write() as s:
            return registry.add_treatment(s, data["specimen"], data["kind"], data["at"], conds, data["notes"]).id

    def add_instrument(self, name: str, *, kind: str, place: str | None = None, notes: str | None = None) -> None:
        data = schemas.load(schemas.InstrumentIn(), dict(name=name, kind=kind, place=place, notes=notes))
        with self.write() as s:
            registry.add_instrument(s, data)

    def calibrate_instrument(self, name: str, *, at: str | dt.datetime, note: str | None = None,
                             file: str | os.PathLike | None = None) -> None:
        data = schemas.load(schemas.CalibrationIn(), dict(name=name, at=at, note=note))
        blob = _read_file(file) if file else None
        with self.write() as s:
            raw = (run_service.store_raw(s, blob, Path(file).name, _media_type(Path(file).name))
                   if blob is not None else None)
            registry.calibrate_instrument(s, data["name"], data["at"], data["note"],
                                          raw.id if raw else None, Path(file).name if file else None)

    def instruments(self) -> list[dict[str, Any]]:
        with self.read() as s:
            return registry.instruments(s)

    # -- runs -----------------------------------------------------------------------------

    def log_run(self, specimen: str, kind: str, *, status: str = "planned", started: str | None = None,
                instrument: str | None = None, operator: str | None = None, direction: str | None = None,
                group: str | None = None, notes: str | None = None) -> int:
        """Log a run before its file exists (status ``planned`` or ``running``); returns its id."""
        data = schemas.load(schemas.RunLogIn(), dict(
            specimen=specimen, kind=kind, status=status, started=started, instrument=instrument,
            operator=operator, direction=direction, group=group, notes=notes))
        with self.write() as s:
            spec = registry.get_specimen(s, data["specimen"])
            inst = registry.get_instrument(s, data.get("instrument"))
            return run_service.log_run(s, spec, data, inst.id if inst else None).id

    def ingest(self, path: str | os.PathLike | None = None, *, specimen: str | None = None,
               kind: str | None = None, run: int | None = None, data: bytes | None = None,
               source_name: str | None = None, profile: str | None = None, shape: str | None = None,
               mapping: str | dict[str, str] | None = None, direction: str | None = None,
               group: str | None = None, instrument: str | None = None, encoding: str | None = None,
               sheet: str | None = None, overrides: list[str] | dict[str, Any] | None = None,
               again: bool = False, operator: str | None = None) -> IngestReport:
        """Import one export: a new run of ``specimen`` and ``kind``, or the file of logged run ``run``.

        Everything is checked before anything is written; the raw bytes, the run,
        its series and the event land in one transaction.  The same bytes for the
        same specimen are refused as a duplicate (naming the run) unless ``again``.
        """
        from .services import importing

        return importing.ingest(self, path, specimen=specimen, kind=kind, run=run, data=data,
                                source_name=source_name, profile=profile, shape=shape, mapping=mapping,
                                direction=direction, group=group, instrument=instrument, encoding=encoding,
                                sheet=sheet, overrides=overrides, again=again, operator=operator)

    def preview(self, path: str | os.PathLike | None = None, *, kind: str, data: bytes | None = None,
                source_name: str | None = None, profile: str | None = None, shape: str | None = None,
                mapping: str | dict[str, str] | None = None, encoding: str | None = None,
                sheet: str | None = None, overrides: list[str] | dict[str, Any] | None = None):
        """Read an export as :meth:`ingest` would, without writing anything; returns the parsed export."""
        from .services import importing

        return importing.parse(self, path, kind=kind, data=data, source_name=source_name, profile=profile,
                               shape=shape, mapping=mapping, encoding=encoding, sheet=sheet, overrides=overrides)

    def save_profile(self, name: str, *, from_run: int | None = None, mapping: str | dict[str, str] | None = None,
                     kind: str | None = None, shape: str | None = None,
                     units: dict[str, str] | None = None) -> dict[str, Any]:
        """Save a column mapping under a name: taken from an imported run, or given as ``mapping``."""
        from .ingest import Profile, parse_map
        from .services import importing

        checked = schemas.load(schemas.SavedQueryIn(), {"name": name})["name"]
        if (from_run is None) == (mapping is None):
            raise InvalidValue("profile save: give --from-run ID or --map 'COL=target,...' (one of them)",
                               field="map")
        with self.write() as s:
            if from_run is not None:
                profile = importing.profile_from_run(s, _run_id(from_run), checked)
            else:
                pairs = parse_map(mapping) if isinstance(mapping, str) else dict(mapping)
                if kind is not None and kind not in RUN_KINDS:
                    raise InvalidValue(f"--kind: {kind!r} is not a run kind", field="kind")
                profile = Profile(name=checked, mapping=pairs, units=dict(units or {}), shape=shape, run_kind=kind)
            importing.save_profile(s, checked, profile)
        return profile.to_dict()

    def profiles(self) -> list[dict[str, Any]]:
        from .store.models import Profile as ProfileRow

        with self.read() as s:
            return [{"name": r.name, **r.definition, "created_at": iso(r.created_at)}
                    for r in s.scalars(select(ProfileRow).order_by(ProfileRow.name))]

    def profile(self, name: str) -> dict[str, Any]:
        for doc in self.profiles():
            if doc["name"] == name:
                return doc
        raise NotFound(f"profile {name!r} not found; `magvault profile list` shows the saved ones", field="profile")

    def retract_run(self, run_id: int, *, reason: str) -> None:
        """Mark a run retracted (nothing is deleted); the reason goes to the event log."""
        data = schemas.load(schemas.ReasonIn(), {"reason": reason})
        with self.write() as s:
            run_service.retract(s, _run_id(run_id), data["reason"])

    def supersede_run(self, run_id: int, *, by: int, reason: str | None = None) -> None:
        """Mark a run superseded by a newer run of the same specimen."""
        with self.write() as s:
            run_service.supersede(s, _run_id(run_id), _run_id(by, "by"), reason)

    def run(self, run_id: int) -> dict[str, Any]:
        with self.read() as s:
            return listing.run_detail(s, _run_id(run_id))

    def runs(self, *, specimen: str | None = None, kind: str | None = None,
             status: str | None = None, include_retracted: bool = True) -> pd.DataFrame:
        """Runs with an integer ``id`` column, newest last."""
        with self.read() as s:
            return listing.runs_frame(s, specimen=specimen, kind=kind, status=status,
                                      include_retracted=include_retracted)

    def series(self, run_id: int, *, version: int | None = None) -> pd.DataFrame:
        """The run's normalised data: SI columns named with their units (``temperature_K``...)."""
        with self.read() as s:
            return run_service.read_series(s, _run_id(run_id), version)

    def series_of(self, run_ids) -> dict[int, pd.DataFrame]:
        """The newest series of many runs at once (one read; runs without data are left out)."""
        with self.read() as s:
            return run_service.read_latest_series(s, sorted({_run_id(r) for r in run_ids}))

    def raw_file(self, sha256: str) -> tuple[bytes, str, str]:
        """The exact stored bytes for a SHA-256, with their first file name and media type."""
        with self.read() as s:
            return listing.raw_file(s, sha256)

    # -- images -----------------------------------------------------------------------------

    def attach_image(self, path: str | os.PathLike | None = None, *, data: bytes | None = None,
                     name: str | None = None, specimen: str | None = None, run: int | None = None,
                     pixel_size: str | None = None, caption: str | None = None) -> int:
        """Attach a micrograph (PNG, JPEG, TIFF) to a specimen or run; the bytes are kept as they are.

        ``pixel_size`` is a length per pixel with its unit, e.g. ``'0.25 um'``.
        """
        from .services import images
        from .units import parse_quantity

        blob = data if data is not None else _read_file(path)
        name = name or (Path(path).name if path else "image")
        size = (parse_quantity(pixel_size, dimension="m", field="pixel size", positive=True).value
                if pixel_size else None)
        with self.write() as s:
            return images.attach(s, blob, name, specimen=specimen, run=_run_id(run) if run else None,
                                 pixel_size_m=size, caption=caption).id

    def images(self, *, specimen: str | None = None, run: int | None = None) -> list[dict[str, Any]]:
        from .services import images

        with self.read() as s:
            spec_id = registry.get_specimen(s, specimen).id if specimen else None
            return [images.describe(s, i) for i in images.list_for(s, specimen_id=spec_id,
                                                                    run_id=_run_id(run) if run else None)]

    def image(self, image_id: int) -> tuple[dict[str, Any], bytes]:
        """The image's record and its original bytes, unaltered."""
        from .services import images

        with self.read() as s:
            img = images.get(s, image_id)
            doc = images.describe(s, img)
            return doc, listing.raw_file(s, doc["sha256"])[0]

    def thumbnail(self, image_id: int, max_px: int = 480) -> bytes:
        """A PNG derived from the original for browsers (never stored in its place)."""
        from .services import images

        return images.thumbnail_png(self.image(image_id)[1], max_px)

    # -- derived values -----------------------------------------------------------------------

    def transitions(self, *, specimen: str | None = None, kind: str | None = None, run: int | None = None,
                    method: str | None = None, primary_only: bool = False, branch: str | None = None,
                    all_versions: bool = False) -> pd.DataFrame:
        """Derived transitions (current runs, newest derivations unless ``all_versions``)."""
        from .services import derive

        with self.read() as s:
            if specimen:
                registry.get_specimen(s, specimen)
            return derive.transitions_frame(s, specimen=specimen, kind=kind, run=_run_id(run) if run else None,
                                            method=method, primary_only=primary_only, branch=branch,
                                            all_versions=all_versions)

    def results(self, *, specimen: str | None = None, run: int | None = None, quantity: str | None = None,
                all_versions: bool = False) -> pd.DataFrame:
        """Every other derived number (Ms, Hc, theta...) in SI with its uncertainty."""
        from .services import derive

        with self.read() as s:
            if specimen:
                registry.get_specimen(s, specimen)
            return derive.results_frame(s, specimen=specimen, run=_run_id(run) if run else None,
                                        quantity=quantity, all_versions=all_versions)

    def block_tracks(self, run_id: int) -> pd.DataFrame:
        """A run's per-temperature-block results as tracks (quantity, track, block_temperature_K, value...).

        Resonance runs give frequency_Hz and inverse_Q per mode; loops at several
        temperatures give Hc, Ms... per block.  Empty when the run has no block results.
        """
        from .services import derive

        with self.read() as s:
            run_service.get_run(s, _run_id(run_id))
            return derive.block_tracks_frame(s, _run_id(run_id))

    def derive(self, run: int | None = None, *, all: bool = False) -> dict[str, Any]:  # noqa: A002
        """Run the analyses on one run (``run=ID``) or on every current run (``all=True``).

        Each outcome is stored as a derivation with its method, version, parameters and
        inputs; deriving unchanged inputs again reuses the existing record.  Returns a
        summary (runs, derivations created and reused, rows, skipped and failed runs).
        """
        from .services import deriving

        if (run is None) == (not all):
            raise InvalidValue("derive: give a run id or all=True (one of them)", field="run")
        if run is not None:
            with self.read() as s:
                target = run_service.get_run(s, _run_id(run))
                if target.raw_file_id is None:
                    raise InvalidValue(f"run {target.id} has no data yet ({target.status})", field="run")
                if target.status in ("retracted", "superseded"):
                    raise InvalidValue(f"run {target.id} is {target.status}; it is not derived", field="run")
            ids = [target.id]
        else:
            frame = self.runs(status="recorded")
            ids = [int(i) for i in frame["id"]]
        return deriving.derive_runs(self, ids).as_dict()

    def derivations(self, run_id: int, *, all_versions: bool = True) -> list[dict[str, Any]]:
        """How each derived value of a run was made: method, version, parameters, inputs."""
        from .services import derive

        with self.read() as s:
            run_service.get_run(s, _run_id(run_id))
            return derive.derivations_of(s, _run_id(run_id), all_versions=all_versions)

    # -- collection queries -----------------------------------------------------------------

    def shifts(self, kind: str, *, reference: float | str | None = None, against: str | None = None,
               against_run: int | None = None, sigma: float = 3.0, by: str | None = None,
               branch: str = "heating", method: str | None = None,
               bins: list[float] | None = None) -> pd.DataFrame:
        """Which specimens show ``kind`` shifted from a reference, and how significantly.

        Give exactly one reference: ``reference`` (a temperature in kelvin), ``against``
        (``'collection'``, ``'trend'``, ``'earliest'`` or ``'treatment'``) or ``against_run``
        (a run id).  ``by`` groups the collection and trend references (superstructure,
        origin, parent, field, direction).  Columns: specimen, temperature_K, uncertainty_K,
        reference_K, shift_K, shift_uncertainty_K, sigma, flagged, note (and group).
        """
        from .services import collection

        mode, ref_K, ref_run = _shift_mode(reference, against, against_run)
        sigma = _positive(sigma, "sigma")
        if branch not in collection.BRANCHES:
            raise InvalidValue(f"--branch: {branch!r} is not heating or cooling", field="branch")
        with self.read() as s:
            return collection.shifts(s, kind=kind, mode=mode, reference_K=ref_K, reference_run=ref_run, sigma=sigma,
                                     by=by, branch=branch, method=method, field_edges_T=bins)

    def coupled(self, *, kinds: str | list[str] | None = None, kind: str | None = None,
                run_kinds: str | list[str] | None = None, methods: str | list[str] | None = None,
                branch: str = "heating", sigma: float = 3.0) -> pd.DataFrame:
        """Two transitions on the same specimens: difference B - A, its uncertainty, and whether they coincide."""
        from .services import collection

        with self.read() as s:
            return collection.coupled(s, kinds=_pair(kinds, "kinds"), kind=kind, run_kinds=_pair(run_kinds, "run-kinds"),
                                      methods=_pair(methods, "methods"), branch=branch,
                                      sigma=_positive(sigma, "sigma"))

    def correlate(self, kind: str, *, against: str = "x", branch: str = "heating", sigma: float = 3.0):
        """Weighted line of the kind's temperature against composition x, field or angle to c.

        Returns a :class:`magvault.queries.CorrelationResult` (slope, intercept, their
        uncertainties and covariance, and the points with outlier flags).
        """
        from .queries import correlate as fit
        from .services import collection

        with self.read() as s:
            points, column = collection.correlation_points(s, kind=kind, against=against, branch=branch)
        return fit(points, x=column, sigma=_positive(sigma, "sigma"))

    def composition_map(self, *, kinds: list[str] | None = None, branch: str | None = "heating") -> pd.DataFrame:
        """Every primary transition against x in Fe(1-x)S, with both uncertainties."""
        from .services import collection

        with self.read() as s:
            return collection.composition_points(s, kinds=kinds, branch=branch)

    def loop_ratios(self, *, psd_md_hcr_hc: float = 4.0, sd_min_mr_ms: float = 0.5, md_max_mr_ms: float = 0.05,
                    sd_max_hcr_hc: float = 1.5) -> pd.DataFrame:
        """Every loop placed on the Day et al. (1977) plot: Mr/Ms, Hcr/Hc with uncertainties and domain labels.

        The boundaries are named parameters; the Hcr/Hc limit between PSD and MD is
        given as 4 or as 5 by different restatements of Day et al. (1977), so choose it.
        """
        from .services import collection

        bounds = {"psd_md_hcr_hc": _positive(psd_md_hcr_hc, "psd_md_hcr_hc"),
                  "sd_min_mr_ms": _positive(sd_min_mr_ms, "sd_min_mr_ms"),
                  "md_max_mr_ms": _positive(md_max_mr_ms, "md_max_mr_ms"),
                  "sd_max_hcr_hc": _positive(sd_max_hcr_hc, "sd_max_hcr_hc")}
        with self.read() as s:
            return collection.loop_ratios(s, boundaries=bounds)

    def save_query(self, name: str, query: str, parameters: dict[str, Any], *, replace: bool = False) -> None:
        """Store a query's parameters under a name (the CLI, the dashboard and notebooks share them)."""
        from .services import saved

        checked = schemas.load(schemas.SavedQueryIn(), {"name": name})
        with self.write() as s:
            saved.save(s, checked["name"], query, parameters, replace=replace)

    def saved_queries(self) -> list[dict[str, Any]]:
        from .services import saved

        with self.read() as s:
            return saved.all_saved(s)

    def saved_query(self, name: str) -> dict[str, Any]:
        from .services import saved

        with self.read() as s:
            return saved.get(s, name)

    def delete_saved_query(self, name: str) -> dict[str, Any]:
        """Remove a saved query by name (the event log keeps its parameters); returns what it was."""
        from .services import saved

        with self.write() as s:
            return saved.delete(s, name)

    def run_saved_query(self, name: str):
        """Re-run a saved query by name with its stored parameters."""
        doc = self.saved_query(name)
        method = {"shifts": self.shifts, "coupled": self.coupled, "correlate": self.correlate,
                  "composition_map": self.composition_map}.get(doc["query"])
        if method is None:
            raise InvalidValue(f"saved query {name!r} is a {doc['query']} view; open it in the dashboard",
                               field="name")
        return method(**doc["parameters"])

    # -- publication ----------------------------------------------------------------------------

    def bundle(self, out: str | os.PathLike, *, name: str | None = None, specimens: list[str] | None = None,
               kinds: list[str] | None = None, title: str | None = None,
               authors: list[str] | None = None) -> dict[str, Any]:
        """Freeze a selection (specimens, run kinds; default everything recorded) into a dataset folder.

        The folder is a Frictionless Data Package: raw exports byte for byte, SI tables per run,
        derived transitions and results with their derivations, specimens, CITATION.cff and
        SHA256SUMS.  The bundle is recorded in the vault with a version number.
        """
        from .services import bundles

        for k in kinds or []:
            if k not in RUN_KINDS:
                raise InvalidValue(f"--kind: {k!r} is not a run kind", field="kind")
        label = schemas.load(schemas.SavedQueryIn(), {"name": name or Path(out).name or "bundle"})["name"]
        return bundles.build(self, Path(out), name=label, specimens=specimens, kinds=kinds, title=title,
                             authors=authors)

    def verify(self, bundle: str | os.PathLike | None = None) -> list[str]:
        """Check the raw store (every stored file still hashes to its address), or a bundle folder."""
        from .services import bundles

        return bundles.verify_folder(Path(bundle)) if bundle else bundles.verify_store(self)

    # -- catalogue and log ------------------------------------------------------------------

    def kinds(self) -> list[dict[str, Any]]:
        """The transition catalogue: id, name, typical_K, window_K, run_kinds."""
        with self.read() as s:
            return [{"id": k.id, "name": k.name, "typical_K": [k.typical_lo_K, k.typical_hi_K],
                     "window_K": [k.window_lo_K, k.window_hi_K], "run_kinds": list(k.run_kinds),
                     "mineral": k.mineral, "note": k.note, "seeded": k.seeded}
                    for k in s.scalars(select(TransitionKind).order_by(TransitionKind.window_lo_K))]

    def events(self, *, specimen: str | None = None, user: str | None = None,
               since: str | dt.datetime | None = None, until: str | dt.datetime | None = None,
               limit: int | None = None) -> pd.DataFrame:
        """The audit log, oldest first, filterable by specimen, user and date."""
        from .timeutil import parse_datetime

        since_dt = parse_datetime(since, field="since") if since else None
        until_dt = parse_datetime(until, field="until") if until else None
        with self.read() as s:
            return listing.events_frame(s, specimen=specimen, user=user, since=since_dt, until=until_dt,
                                        limit=limit)

    def counts(self) -> dict[str, int]:
        with self.read() as s:
            return registry.count_rows(s)


def _run_id(value: Any, field: str = "run") -> int:
    try:
        number = int(str(value).strip())
    except (TypeError, ValueError):
        raise InvalidValue(f"{field}: run ids are whole numbers, got {value!r}", field=field) from None
    if number <= 0:
        raise InvalidValue(f"{field}: run ids are positive, got {value!r}", field=field)
    return number


def _shift_mode(reference, against, against_run) -> tuple[str, float | None, int | None]:
    given = [n for n, v in (("--reference", reference), ("--against", against), ("--against-run", against_run))
             if v is not None]
    if len(given) != 1:
        raise InvalidValue("shifts: give exactly one of --reference KELVIN, --against MODE, --against-run ID"
                           + (f" (got {', '.join(given)})" if given else ""), field="reference")
    if reference is not None:
        from .units import parse_quantity

        text = str(reference)
        value = parse_quantity(text, dimension="K", field="--reference", positive=True, allow_unitless=True).value
        return "reference", value, None
    if against is not None:
        modes = ("collection", "trend", "earliest", "treatment")
        if against not in modes:
            raise InvalidValue(f"--against: {against!r} is not one of {', '.join(modes)}", field="against")
        return against, None, None
    return "run", None, _run_id(against_run, "against-run")


def _positive(value: Any, field: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InvalidValue(f"--{field}: expected a number, got {value!r}", field=field) from None
    if not (number > 0 and number < float("inf")):
        raise InvalidValue(f"--{field}: expected a positive number, got {value!r}", field=field)
    return number


def _pair(value: str | list[str] | None, field: str) -> tuple[str, str] | None:
    if value is None:
        return None
    items = [v.strip() for v in (value.split(",") if isinstance(value, str) else value) if v and v.strip()]
    if len(items) != 2 or items[0] == items[1]:
        raise InvalidValue(f"--{field}: expected two different names separated by a comma, got {value!r}",
                           field=field)
    return items[0], items[1]


def _read_file(path: str | os.PathLike) -> bytes:
    p = Path(path)
    if not p.exists():
        raise InvalidValue(f"{p}: no such file", field="file")
    if p.is_dir():
        raise InvalidValue(f"{p}: is a folder, not a file", field="file")
    try:
        return p.read_bytes()
    except OSError as exc:
        raise InvalidValue(f"{p}: cannot read ({exc.strerror})", field="file") from None


def _media_type(name: str) -> str:
    guessed, _ = mimetypes.guess_type(name)
    if name.lower().endswith(".xlsx"):
        return "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"
    return guessed or "application/octet-stream"


def _integrity_message(exc: IntegrityError) -> MagvaultError:
    text = str(exc.orig).lower()
    if "unique" in text or "duplicate" in text:
        return Duplicate(f"that record already exists ({str(exc.orig).strip().splitlines()[0]})")
    return InvalidValue(f"the database refused the change: {str(exc.orig).strip().splitlines()[0]}")

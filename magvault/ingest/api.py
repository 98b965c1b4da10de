"""The import entry point: bytes in, canonical SI series plus metadata out."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..errors import InputFileError, InvalidValue
from .branch import label_branches, normalise_branch_values
from .canonical import (
    BRANCH, BRANCHED_KINDS, CANONICAL_COLUMNS, REQUIRED, RUN_KINDS, SHAPES,
)
from .columns import ColumnMap, Profile, apply_plan, check_target, plan_columns
from .conditions import conditions_from_metadata
from .decode import is_zip
from .readers import BLOCK_SOURCE_PREFIX, RawTable, TextSource, read_text_shape
from .sniff import sniff_shape
from .spreadsheet import read_spreadsheet

__all__ = ["ParsedExport", "read_export", "preview_export", "add_mass_normalised"]


@dataclass(frozen=True, eq=False)
class ParsedExport:
    """One export read into canonical SI columns.

    ``series`` holds float64 canonical columns (plus ``branch`` as text for
    thermomagnetic runs, and ordinary columns under their own lower-cased names);
    ``columns`` says how each came from the file; ``metadata`` is the file's own
    key/value text; ``conditions`` are canonical run conditions in SI with the
    overrides applied.
    """

    shape: str
    encoding: str
    series: pd.DataFrame
    columns: tuple[ColumnMap, ...]
    metadata: dict[str, str]
    conditions: dict[str, object]
    warnings: tuple[str, ...]
    profile_name: str | None
    run_kind: str = ""
    row_lines: np.ndarray | None = field(default=None, repr=False)

    def preview(self, n: int = 5) -> str:
        """Shape, column mapping and the first ``n`` converted rows, as text."""
        lines = [f"shape: {self.shape} ({self.encoding}); run kind: {self.run_kind}; "
                 f"profile: {self.profile_name or 'guessed from headers'}; rows: {len(self.series)}"]
        rows = [("source", "unit", "target", "factor", "offset", "how")]
        for c in self.columns:
            rows.append((c.source, c.source_unit or "-", c.target, f"{c.factor:.10g}", f"{c.offset:.10g}",
                         "guessed" if c.guessed else "mapped"))
        widths = [max(len(r[k]) for r in rows) for k in range(len(rows[0]))]
        lines.append("columns:")
        for k, r in enumerate(rows):
            lines.append("  " + "  ".join(v.ljust(w) for v, w in zip(r, widths)).rstrip())
            if k == 0:
                lines.append("  " + "  ".join("-" * w for w in widths))
        if self.conditions:
            lines.append("conditions: " + ", ".join(f"{k}={v:.6g}" if isinstance(v, float) else f"{k}={v}"
                                                     for k, v in self.conditions.items()))
        for w in self.warnings:
            lines.append(f"warning: {w}")
        lines.append(f"first {min(n, len(self.series))} rows:")
        with pd.option_context("display.max_columns", None, "display.width", 200):
            lines.append(self.series.head(n).to_string(index=False))
        return "\n".join(lines)

    def as_profile(self, name: str) -> Profile:
        """The mapping used here, as a profile to save and reuse (units as written)."""
        mapping = {c.source: c.target for c in self.columns
                   if (c.target in CANONICAL_COLUMNS or c.target == BRANCH)
                   and not c.source.startswith(BLOCK_SOURCE_PREFIX)}
        return Profile(name=name, mapping=mapping, shape=self.shape, run_kind=self.run_kind)


def _validate_arguments(run_kind, shape, mapping, profile, overrides):
    if run_kind not in RUN_KINDS:
        raise InvalidValue(f"run kind: unknown {run_kind!r}; expected one of: " + ", ".join(RUN_KINDS),
                           field="kind")
    if shape is not None and shape not in SHAPES:
        raise InvalidValue(f"shape: unknown {shape!r}; expected one of: " + ", ".join(SHAPES),
                           field="shape")
    if mapping is not None:
        if not isinstance(mapping, dict):
            raise InvalidValue("mapping: expected a dict of source header -> target", field="mapping")
        for target in mapping.values():
            check_target(target)
    if profile is not None and not isinstance(profile, Profile):
        raise InvalidValue("profile: expected a Profile", field="profile")
    if profile is not None and profile.run_kind is not None and profile.run_kind != run_kind:
        raise InvalidValue(f"profile {profile.name!r} is for {profile.run_kind} runs, not {run_kind}",
                           field="profile")
    if overrides is not None and not isinstance(overrides, dict):
        raise InvalidValue("overrides: expected a dict (see parse_overrides)", field="set")


def _read_raw(data: bytes, source_name: str, shape: str | None, encoding: str | None,
              sheet: str | None) -> RawTable:
    if not isinstance(data, (bytes, bytearray, memoryview)):
        raise InvalidValue("data: expected the file's bytes", field="data")
    data = bytes(data) if not isinstance(data, bytes) else data
    if not data:
        raise InputFileError("empty file (0 bytes)", path=source_name)
    if is_zip(data):
        if shape not in (None, "spreadsheet"):
            raise InputFileError(f"this is an .xlsx workbook (ZIP archive); shape {shape!r} does not "
                                 "apply, use shape='spreadsheet'", path=source_name)
        return read_spreadsheet(data, source_name, sheet)
    if shape == "spreadsheet":
        raise InputFileError("not an .xlsx workbook (no ZIP signature); a text export needs another "
                             "shape", path=source_name)
    source = TextSource(data, source_name, encoding)
    chosen = shape or sniff_shape(source.head_lines)
    raw = read_text_shape(source, chosen)
    if sheet is not None:
        raw.warnings.append(f"sheet {sheet!r} ignored: this is a text export")
    return raw


def read_export(data: bytes, *, source_name: str, run_kind: str, shape: str | None = None,
                encoding: str | None = None, sheet: str | None = None,
                mapping: dict[str, str] | None = None, profile: Profile | None = None,
                overrides: dict | None = None, _check_required: bool = True) -> ParsedExport:
    """Read one export into canonical SI columns.

    Parameters
    ----------
    data : bytes
        The file as stored (never altered).
    source_name : str
        File name, used in messages.
    run_kind : str
        One of RUN_KINDS; decides which columns are required and which names are guessed.
    shape : str, optional
        Force a shape (one of SHAPES) instead of sniffing it.
    encoding : str, optional
        Force a text encoding (e.g. ``'utf-16-le'`` for UTF-16 without a byte-order mark).
    sheet : str, optional
        Sheet of an .xlsx workbook (default: the first).
    mapping : dict, optional
        Source header -> canonical target, correcting or completing the guess; the
        target ``'ignore'`` drops a column.  Wins over the profile's mapping.
    profile : Profile, optional
        A saved mapping, unit overrides and shape.
    overrides : dict, optional
        Run conditions from :func:`parse_overrides`; they win over file metadata.

    Returns
    -------
    ParsedExport

    Raises
    ------
    InputFileError
        Unreadable input, naming file, line and column.
    InvalidValue
        Bad arguments (unknown shape, run kind or mapping target; a mapping naming a
        column the file does not have).
    """
    _validate_arguments(run_kind, shape, mapping, profile, overrides)
    if shape is None and profile is not None:
        shape = profile.shape
    raw = _read_raw(data, source_name, shape, encoding, sheet)
    merged = dict(profile.mapping) if profile is not None else {}
    from_profile = frozenset(merged)
    merged.update(mapping or {})
    from_profile = frozenset(k for k in from_profile if mapping is None or k not in mapping)
    units = dict(profile.units) if profile is not None else {}
    plans, warnings = plan_columns(raw, run_kind, merged, units, source_name=source_name,
                                   from_profile=from_profile,
                                   profile_units=frozenset(units) if profile is not None else frozenset())
    warnings = list(raw.warnings) + warnings
    columns = apply_plan(raw, plans)
    series: dict[str, np.ndarray] = {}
    maps: list[ColumnMap] = []
    for p in plans:
        if p.target is None:
            continue
        values = columns[p.target]
        if p.kind == "branch":
            values = normalise_branch_values(values, raw.row_lines, source_name=source_name,
                                             column=p.source)
        elif p.kind == "text":
            values = pd.Series(values, dtype="str")
        series[p.target] = values
        maps.append(ColumnMap(p.source, p.unit, p.target, float(p.factor), float(p.offset), p.guessed))
    for b in raw.block_columns:
        name = b.target
        if name in series:
            warnings.append(f"block header value {b.source!r} not added: a column {name!r} exists")
            continue
        series[name] = b.values
        maps.append(ColumnMap(b.source, b.unit, name, float(b.factor), float(b.offset), True))
    if run_kind in BRANCHED_KINDS and BRANCH not in series and "temperature_K" in series:
        labels = label_branches(series["temperature_K"])
        # label_branches labels every row or none (all ''), so the first row tells; comparing
        # a million strings would cost more than labelling them.
        if not labels.size or labels[0] == "":
            if run_kind == "thermomagnetic":
                warnings.append("the temperature does not change; branch left empty")
                series[BRANCH] = labels
        else:
            series[BRANCH] = labels
    if BRANCH in series:
        series[BRANCH] = pd.Series(np.asarray(series[BRANCH], dtype=object), dtype="str")
    frame = pd.DataFrame(series, copy=False)
    conditions, meta_warnings = conditions_from_metadata(raw.metadata)
    warnings.extend(meta_warnings)
    if overrides:
        conditions.update(overrides)
    if _check_required:
        _check_required_columns(frame, run_kind, maps, source_name)
        if run_kind == "diffraction" and "wavelength_m" not in conditions:
            raise InputFileError(
                "no X-ray wavelength in the file; pass one as an override, e.g. "
                "wavelength=Cu K-alpha1 or wavelength=1.5406 A (or wavelength_m=1.5406e-10)",
                path=source_name)
    return ParsedExport(shape=raw.shape, encoding=raw.encoding, series=frame, columns=tuple(maps),
                        metadata=dict(raw.metadata), conditions=conditions, warnings=tuple(warnings),
                        profile_name=profile.name if profile is not None else None, run_kind=run_kind,
                        row_lines=raw.row_lines)


def _check_required_columns(frame: pd.DataFrame, run_kind: str, maps: list[ColumnMap],
                            source_name: str) -> None:
    missing = [group for group in REQUIRED[run_kind] if not any(c in frame.columns for c in group)]
    if not missing:
        return
    need = "; ".join(" or ".join(g) for g in missing)
    have = ", ".join(f"{m.target} (from {m.source!r})" for m in maps) or "no columns"
    example = missing[0][0]
    raise InputFileError(
        f"a {run_kind} run needs {need}; this file gives {have}. Map a column, e.g. "
        f"mapping={{'<header>': '{example}'}} (--map '<header>={example}')", path=source_name)


def preview_export(data: bytes, *, source_name: str, run_kind: str, n: int = 5, **kwargs) -> str:
    """Guessed shape, column mapping and first converted rows, as text.

    Missing required columns or a missing wavelength do not stop the preview (that is
    when a preview is most useful); they are listed as warnings at the end.
    """
    parsed = read_export(data, source_name=source_name, run_kind=run_kind, _check_required=False,
                         **kwargs)
    notes: list[str] = []
    try:
        _check_required_columns(parsed.series, run_kind, list(parsed.columns), source_name)
    except InputFileError as exc:
        notes.append(f"not importable yet: {exc.message}")
    if run_kind == "diffraction" and "wavelength_m" not in parsed.conditions:
        notes.append("not importable yet: no X-ray wavelength (give wavelength=Cu K-alpha1 or similar)")
    text = parsed.preview(n)
    return text + ("\n" + "\n".join(notes) if notes else "")


def add_mass_normalised(series: pd.DataFrame, mass_kg: float | None, *, volume_m3: float | None = None,
                        molar_mass_kg_per_mol: float | None = None) -> pd.DataFrame:
    """Add mass-normalised columns where the numbers allow; never mutates ``series``.

    Parameters
    ----------
    series : DataFrame
        Canonical columns.
    mass_kg : float or None
        Specimen mass, kg.  ``moment_A_m2_per_kg`` is added from ``moment_A_m2`` (or the
        reverse), keeping a column that is already there.
    volume_m3 : float, optional
        Specimen volume, m^3.  With the mass it gives the density, which converts volume
        susceptibility to mass susceptibility (chi_mass = chi_vol / density) and back,
        in-phase and quadrature parts alike.
    molar_mass_kg_per_mol : float, optional
        Molar mass of the formula unit, kg/mol; converts heat capacity per mole to per
        kilogram (c = C_mol / M) and back.

    Returns
    -------
    DataFrame
        A new frame (columns shared with the input where unchanged).

    Raises
    ------
    InvalidValue
        A mass, volume or molar mass that is not a positive finite number.
    """
    def positive(name, v):
        if v is None:
            return None
        try:
            x = float(v)
        except (TypeError, ValueError):
            raise InvalidValue(f"{name}: expected a number, got {v!r}", field=name) from None
        if not np.isfinite(x) or x <= 0:
            raise InvalidValue(f"{name}: must be a positive finite number, got {v!r}", field=name)
        return x

    mass = positive("mass_kg", mass_kg)
    volume = positive("volume_m3", volume_m3)
    molar = positive("molar_mass_kg_per_mol", molar_mass_kg_per_mol)
    new: dict[str, object] = {}
    cols = series.columns
    if mass is not None:
        if "moment_A_m2" in cols and "moment_A_m2_per_kg" not in cols:
            new["moment_A_m2_per_kg"] = series["moment_A_m2"].to_numpy(dtype=np.float64) / mass
        elif "moment_A_m2_per_kg" in cols and "moment_A_m2" not in cols:
            new["moment_A_m2"] = series["moment_A_m2_per_kg"].to_numpy(dtype=np.float64) * mass
        if volume is not None:
            density = mass / volume
            for vol, mas in (("chi_vol", "chi_mass_m3_per_kg"), ("chi_quad_vol", "chi_quad_mass_m3_per_kg")):
                if vol in cols and mas not in cols:
                    new[mas] = series[vol].to_numpy(dtype=np.float64) / density
                elif mas in cols and vol not in cols:
                    new[vol] = series[mas].to_numpy(dtype=np.float64) * density
    if molar is not None:
        if "heat_capacity_J_per_mol_K" in cols and "heat_capacity_J_per_kg_K" not in cols:
            new["heat_capacity_J_per_kg_K"] = series["heat_capacity_J_per_mol_K"].to_numpy(np.float64) / molar
        elif "heat_capacity_J_per_kg_K" in cols and "heat_capacity_J_per_mol_K" not in cols:
            new["heat_capacity_J_per_mol_K"] = series["heat_capacity_J_per_kg_K"].to_numpy(np.float64) * molar
    if not new:
        return series.copy(deep=False)
    return series.assign(**new)

"""Source columns to canonical columns: guessing, mappings, profiles.

A column's target is decided, in this order, by an explicit mapping (argument or
profile), by its header being a canonical name already, by its unit (``emu`` is a
moment whatever the column is called), and by its name (``Temp``, ``chi''``,
``2Th``).  Names only count for the column families that matter to the run kind,
so that an ``I`` in a magnetometer export is not taken for a diffraction intensity.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputFileError, InvalidValue
from .canonical import (
    BRANCH, CANONICAL_COLUMNS, IGNORE, MAPPING_TARGETS, RELEVANT_FAMILIES, RUN_KINDS, SHAPES,
    TARGET_FAMILY,
)
from .headers import family_of_name, name_key, split_header, unit_fits_family
from .spelling import CANDIDATES, Conversion, si_conversion, unit_label

__all__ = ["ColumnMap", "Profile", "parse_map", "ColumnPlan", "plan_columns", "check_target"]

_DEFAULT_TARGET = {
    "temperature": "temperature_K", "field": "mu0H_T", "moment": "moment_A_m2", "chi": "chi_vol",
    "chi_quad": "chi_quad_vol", "frequency": "frequency_Hz", "phase": "phase_rad",
    "heat_capacity": "heat_capacity_J_per_mol_K", "time": "time_s",
}
_UNITLESS_TARGET = {"amplitude": "amplitude", "intensity": "intensity_counts",
                    "sigma": "intensity_sigma_counts", "two_theta": "two_theta_deg"}
_TARGET_QUANTITIES: dict[str, frozenset[str]] = {
    "intensity_counts": frozenset({"counts", "count_rate", "arbitrary", "dimensionless"}),
    "intensity_sigma_counts": frozenset({"counts", "count_rate", "arbitrary", "dimensionless"}),
}


@dataclass(frozen=True)
class ColumnMap:
    """How one source column became one series column: ``SI = value * factor + offset``."""

    source: str               # header as written in the file
    source_unit: str | None   # unit as written (None if none)
    target: str               # canonical column name, e.g. "temperature_K"
    factor: float
    offset: float = 0.0
    guessed: bool = True      # False when it came from a mapping/profile


def check_target(target: str, field_name: str = "mapping") -> str:
    if target not in MAPPING_TARGETS:
        raise InvalidValue(f"{field_name}: unknown target {target!r}; expected one of: "
                           + ", ".join(MAPPING_TARGETS), field=field_name)
    return target


@dataclass(frozen=True)
class Profile:
    """A saved way of reading one kind of export: column mapping, unit overrides, shape.

    ``mapping`` maps source headers (as written, or their name part without the unit)
    to canonical targets; ``units`` overrides the unit of a source column (unit text,
    e.g. ``{'Temp': '°C'}``).
    """

    name: str
    mapping: dict[str, str]
    units: dict[str, str] = field(default_factory=dict)
    shape: str | None = None
    run_kind: str | None = None

    def __post_init__(self):
        if not isinstance(self.name, str) or not self.name.strip():
            raise InvalidValue("profile: a profile needs a non-empty name", field="profile")
        for label, d in (("mapping", self.mapping), ("units", self.units)):
            if not isinstance(d, dict) or not all(isinstance(k, str) and isinstance(v, str)
                                                   for k, v in d.items()):
                raise InvalidValue(f"profile {self.name!r}: {label} must map text to text",
                                   field="profile")
        for target in self.mapping.values():
            check_target(target, f"profile {self.name!r} mapping")
        if self.shape is not None and self.shape not in SHAPES:
            raise InvalidValue(f"profile {self.name!r}: unknown shape {self.shape!r}; expected one of: "
                               + ", ".join(SHAPES), field="profile")
        if self.run_kind is not None and self.run_kind not in RUN_KINDS:
            raise InvalidValue(f"profile {self.name!r}: unknown run kind {self.run_kind!r}; expected one "
                               "of: " + ", ".join(RUN_KINDS), field="profile")
        # Own copies, so a caller's later edits to its dicts do not reach a frozen profile.
        object.__setattr__(self, "mapping", dict(self.mapping))
        object.__setattr__(self, "units", dict(self.units))

    def to_dict(self) -> dict:
        """A JSON-able dict (the vault stores it)."""
        return {"format": 1, "name": self.name, "mapping": dict(self.mapping),
                "units": dict(self.units), "shape": self.shape, "run_kind": self.run_kind}

    @classmethod
    def from_dict(cls, d: dict) -> "Profile":
        if not isinstance(d, dict):
            raise InvalidValue("profile: expected a dict", field="profile")
        unknown = set(d) - {"format", "name", "mapping", "units", "shape", "run_kind"}
        if unknown:
            raise InvalidValue(f"profile: unknown keys {sorted(unknown)}", field="profile")
        if d.get("format", 1) != 1:
            raise InvalidValue(f"profile: unsupported format {d.get('format')!r}", field="profile")
        return cls(name=d.get("name", ""), mapping=d.get("mapping") or {}, units=d.get("units") or {},
                   shape=d.get("shape"), run_kind=d.get("run_kind"))

    # Profiles hold dicts; hash by content so they can be used as keys if needed.
    def __hash__(self) -> int:
        return hash((self.name, tuple(sorted(self.mapping.items())), tuple(sorted(self.units.items())),
                     self.shape, self.run_kind))


def parse_map(text: str) -> dict[str, str]:
    """Parse ``'Temp=temperature_K, M=moment_A_m2'`` (the CLI's ``--map``).

    Pairs are separated by commas; a source header containing a comma is quoted
    (``'"Moment, emu"=moment_A_m2'``).  The last ``=`` of a pair separates source and
    target, so a header may itself contain ``=``.

    Raises
    ------
    InvalidValue
        Empty text, a pair without ``=``, an empty source, an unknown target or a
        source named twice; the message names the pair.
    """
    if text is None or not str(text).strip():
        raise InvalidValue("--map: empty; expected SOURCE=TARGET pairs such as 'Temp=temperature_K'",
                           field="map")
    items = next(csv.reader([str(text)], skipinitialspace=True))
    out: dict[str, str] = {}
    for item in items:
        item = item.strip()
        if not item:
            continue
        if "=" not in item:
            raise InvalidValue(f"--map: {item!r} has no '='; expected SOURCE=TARGET such as "
                               "'Temp=temperature_K'", field="map")
        source, target = item.rsplit("=", 1)
        source = source.strip().strip("\"'").strip()
        target = target.strip()
        if not source:
            raise InvalidValue(f"--map: {item!r} names no source column", field="map")
        check_target(target, "--map")
        if source in out:
            raise InvalidValue(f"--map: source column {source!r} is mapped twice", field="map")
        out[source] = target
    if not out:
        raise InvalidValue("--map: no SOURCE=TARGET pairs found", field="map")
    return out


# ---------------------------------------------------------------------------
# Planning the columns of one file
# ---------------------------------------------------------------------------

@dataclass
class ColumnPlan:
    index: int
    source: str
    unit: str | None
    target: str | None          # series column name; None drops the column
    factor: float = 1.0
    offset: float = 0.0
    guessed: bool = True
    kind: str = "canonical"     # canonical | other | branch | text


def _norm_header(h: str) -> str:
    return re.sub(r"\s+", " ", h.strip().strip("\"'")).casefold()


def _find_column(key: str, headers: list[str]) -> list[int]:
    # From the strictest match to the loosest; the first test that hits decides.
    for test in (lambda h: h == key,
                 lambda h: _norm_header(h) == _norm_header(key),
                 lambda h: split_header(h)[0] == key.strip(),
                 lambda h: _norm_header(split_header(h)[0]) == _norm_header(key),
                 lambda h: name_key(split_header(h)[0]) == name_key(key)):
        hits = [i for i, h in enumerate(headers) if test(h)]
        if hits:
            return hits
    return []


def _slug(text: str) -> str:
    s = re.sub(r"[^0-9a-zA-Z]+", "_", str(text).strip().lower()).strip("_")
    return s or "column"


def _other_name(name: str, label: str) -> str:
    base = _slug(name)
    if label and not base.lower().endswith("_" + label.lower()):
        return f"{base}_{label}"
    return base


def _resolve(family: str | None, conv: Conversion, run_kind: str) -> str | None:
    q = conv.quantity
    if family == "amplitude":
        return "amplitude"
    direct = {"temperature": "temperature_K", "field": "mu0H_T", "moment": "moment_A_m2",
              "mass_moment": "moment_A_m2_per_kg", "frequency": "frequency_Hz",
              "two_theta": "two_theta_deg", "molar_heat_capacity": "heat_capacity_J_per_mol_K",
              "specific_heat_capacity": "heat_capacity_J_per_kg_K", "time": "time_s"}
    if q in direct:
        return direct[q]
    if q == "volume_susceptibility":
        return "chi_quad_vol" if family == "chi_quad" else "chi_vol"
    if q == "mass_susceptibility":
        return "chi_quad_mass_m3_per_kg" if family == "chi_quad" else "chi_mass_m3_per_kg"
    if q == "angle":
        return {"phase": "phase_rad", "two_theta": "two_theta_deg"}.get(family or "")
    if q in ("counts", "count_rate", "arbitrary", "dimensionless"):
        if family == "sigma":
            return "intensity_sigma_counts"
        if family == "intensity" or (family is None and q in ("counts", "count_rate")
                                     and run_kind == "diffraction"):
            return "intensity_counts"
    return None


def _target_accepts(target: str, conv: Conversion) -> bool:
    if target == "amplitude":
        return True
    if target in _TARGET_QUANTITIES:
        return conv.quantity in _TARGET_QUANTITIES[target]
    want = CANONICAL_COLUMNS[target][0]
    if want == "two_theta":
        return conv.quantity == "two_theta"
    return conv.quantity == want


def _convert(unit: str, header: str, hint: str | None, source_name: str) -> Conversion:
    try:
        return si_conversion(unit, header, hint)
    except InvalidValue as exc:
        raise InputFileError(exc.message.replace(f"column {header!r}: ", ""), path=source_name,
                             column=header) from None


def _parses(unit: str, header: str) -> bool:
    try:
        si_conversion(unit, header, None)
        return True
    except InvalidValue:
        return False


def _first_text(raw, i: int) -> tuple[str, int]:
    col = raw.columns[i]
    for k, v in enumerate(col):
        if v is not None:
            return str(v), int(raw.row_lines[k])
    return "", int(raw.header_line or 0)


def plan_columns(raw, run_kind: str, mapping: dict[str, str], units: dict[str, str], *,
                 source_name: str, from_profile: frozenset[str] = frozenset(),
                 profile_units: frozenset[str] = frozenset()) -> tuple[list[ColumnPlan], list[str]]:
    """Decide target, factor and offset of every source column.

    Parameters
    ----------
    raw : RawTable
        What the reader found.
    mapping : dict
        Source header -> target, from the caller and the profile merged.
    units : dict
        Source header -> unit text overriding the header's unit.
    from_profile, profile_units : frozenset
        Keys of ``mapping``/``units`` that came from a saved profile: a profile may name
        columns a particular file lacks (a warning), an explicit mapping may not (an error).
    """
    headers = raw.headers
    warnings: list[str] = []
    explicit: dict[int, str] = {}
    for key, target in mapping.items():
        hits = _find_column(key, headers)
        if not hits:
            if key in from_profile:
                warnings.append(f"profile column {key!r} is not in this file")
                continue
            raise InvalidValue(f"mapping: no column {key!r} in {source_name}; its columns are: "
                               + ", ".join(repr(h) for h in headers), field="mapping")
        if len(hits) > 1:
            raise InvalidValue(f"mapping: {key!r} matches several columns ("
                               + ", ".join(repr(headers[i]) for i in hits) + "); write the full header",
                               field="mapping")
        i = hits[0]
        if i in explicit and explicit[i] != target:
            raise InvalidValue(f"mapping: column {headers[i]!r} is mapped twice ({explicit[i]}, {target})",
                               field="mapping")
        explicit[i] = target
    taken_explicit = [t for t in explicit.values() if t != IGNORE]
    dup = {t for t in taken_explicit if taken_explicit.count(t) > 1}
    if dup:
        raise InvalidValue(f"mapping: several columns are mapped to {sorted(dup)[0]}", field="mapping")
    unit_override: dict[int, str] = {}
    for key, unit in units.items():
        hits = _find_column(key, headers)
        if len(hits) == 1:
            unit_override[hits[0]] = unit
        elif not hits and key not in profile_units:
            raise InvalidValue(f"units: no column {key!r} in {source_name}", field="units")

    relevant = RELEVANT_FAMILIES[run_kind]
    plans: dict[int, ColumnPlan] = {}
    taken: dict[str, str] = {}

    def claim(plan: ColumnPlan) -> ColumnPlan:
        if plan.kind in ("canonical", "branch") and plan.target in taken:
            name, unit = split_header(plan.source)
            other = ColumnPlan(plan.index, plan.source, plan.unit,
                               _other_name(name, _label(plan)), plan.factor, plan.offset, True, "other")
            warnings.append(f"column {plan.source!r} also looks like {plan.target} (already taken by "
                            f"{taken[plan.target]!r}); kept as {other.target!r}")
            return other
        if plan.kind in ("canonical", "branch"):
            taken[plan.target] = plan.source
        return plan

    # Explicit mappings first, so that they win over guesses.
    for i in sorted(explicit):
        target = explicit[i]
        header = headers[i]
        name, unit = split_header(header)
        unit = unit_override.get(i, unit)
        if target == IGNORE:
            plans[i] = ColumnPlan(i, header, unit, None, guessed=False, kind="other")
            continue
        if target == BRANCH:
            plans[i] = claim(ColumnPlan(i, header, unit, BRANCH, guessed=False, kind="branch"))
            continue
        if i in raw.text_columns:
            text, line = _first_text(raw, i)
            raise InputFileError(f"mapped to {target} but holds text ({text!r}); expected numbers",
                                 path=source_name, line=line, column=header)
        if unit is None:
            conv = Conversion(CANONICAL_COLUMNS[target][0], 1.0, 0.0)
        else:
            conv = _convert(unit, header, target, source_name)
            if not _target_accepts(target, conv):
                raise InputFileError(
                    f"mapped to {target}, but its unit {unit!r} is a {conv.quantity.replace('_', ' ')}; "
                    f"expected a unit such as {', '.join(CANDIDATES.get(TARGET_FAMILY.get(target), ('?',)))}",
                    path=source_name, column=header)
        plans[i] = claim(ColumnPlan(i, header, unit, target, conv.factor, conv.offset, False, "canonical"))
        _rate_warning(plans[i], conv, warnings)

    if raw.headerless and not explicit:
        n = len(headers)
        if run_kind == "diffraction" and n in (2, 3):
            defaults = ["two_theta_deg", "intensity_counts", "intensity_sigma_counts"][:n]
            for i, t in enumerate(defaults):
                plans[i] = claim(ColumnPlan(i, headers[i], None, t, 1.0, 0.0, True, "canonical"))
            warnings.append("no header row: read as " + ", ".join(defaults)
                            + " (two-theta in degrees, intensities in counts)")
        else:
            raise InputFileError(
                f"no header row above the rows of numbers (line {int(raw.row_lines[0])}); for a "
                f"{run_kind} run name the columns in a header or give a mapping such as "
                + ", ".join(f"col{k + 1}=TARGET" for k in range(min(n, 3))),
                path=source_name, line=int(raw.row_lines[0]))

    for i, header in enumerate(headers):
        if i in plans:
            continue
        name, unit = split_header(header)
        unit = unit_override.get(i, unit)
        family = family_of_name(name)
        fam = family if family in relevant else None
        if i in raw.text_columns:
            if family == "branch" and "branch" in relevant:
                plans[i] = claim(ColumnPlan(i, header, unit, BRANCH, kind="branch"))
                continue
            if fam is not None or (unit is not None and _parses(unit, header)):
                # A column that should hold numbers but starts with text: report that cell
                # rather than silently keeping the column as words.
                text, line = _first_text(raw, i)
                raise InputFileError(f"expected a number, found {text!r}", path=source_name, line=line,
                                     column=header)
            plans[i] = ColumnPlan(i, header, unit, _other_name(name, ""), kind="text")
            continue
        if header in CANONICAL_COLUMNS and unit is None:
            plans[i] = claim(ColumnPlan(i, header, None, header, 1.0, 0.0, True, "canonical"))
            continue
        if unit is not None:
            try:
                conv = si_conversion(unit, header, fam)
            except InvalidValue as exc:
                if fam is not None:
                    raise InputFileError(exc.message.replace(f"column {header!r}: ", ""),
                                         path=source_name, column=header) from None
                warnings.append(f"column {header!r}: unit {unit!r} not understood; kept unconverted")
                plans[i] = ColumnPlan(i, header, unit, _other_name(name, _slug(unit)), kind="other")
                continue
            target = _resolve(fam, conv, run_kind)
            if target is None:
                plans[i] = ColumnPlan(i, header, unit, _other_name(name, unit_label(conv, unit)),
                                      conv.factor, conv.offset, True, "other")
                continue
            if fam is not None and not unit_fits_family(conv.quantity, fam):
                warnings.append(f"column {header!r}: the name suggests {fam} but the unit {unit!r} is a "
                                f"{conv.quantity.replace('_', ' ')}; read as {target}")
            plan = claim(ColumnPlan(i, header, unit, target, conv.factor, conv.offset, True, "canonical"))
            plans[i] = plan
            if plan.kind == "canonical":
                _rate_warning(plan, conv, warnings)
            continue
        # No unit.
        if fam in _UNITLESS_TARGET:
            target = _UNITLESS_TARGET[fam]
            plans[i] = claim(ColumnPlan(i, header, None, target, 1.0, 0.0, True, "canonical"))
            continue
        if fam is not None and fam in _DEFAULT_TARGET:
            example = CANDIDATES.get(fam, ("unit",))
            raise InputFileError(
                f"has no unit; write it in the header, e.g. '{name} ({example[0]})', or map it, e.g. "
                f"{name}={_DEFAULT_TARGET[fam]} (then read in that target's unit); accepted units "
                f"include {', '.join(example)}", path=source_name, column=header)
        plans[i] = ColumnPlan(i, header, None, _other_name(name, ""), kind="other")
    # Ordinary columns must not collide with canonical names or with each other.
    used: set[str] = {p.target for p in plans.values() if p.kind in ("canonical", "branch") and p.target}
    for i in sorted(plans):
        p = plans[i]
        if p.kind in ("other", "text") and p.target:
            base, k = p.target, 2
            while p.target in used:
                p.target = f"{base}_{k}"
                k += 1
            used.add(p.target)
    return [plans[i] for i in sorted(plans)], warnings


def _label(plan: ColumnPlan) -> str:
    if plan.unit is None:
        return ""
    try:
        return unit_label(si_conversion(plan.unit, plan.source, TARGET_FAMILY.get(plan.target or "")),
                          plan.unit)
    except InvalidValue:
        return _slug(plan.unit)


def _rate_warning(plan: ColumnPlan, conv: Conversion, warnings: list[str]) -> None:
    if conv.quantity == "count_rate" and plan.target in ("intensity_counts", "intensity_sigma_counts"):
        warnings.append(f"column {plan.source!r}: a count rate ({plan.unit}), stored unscaled in "
                        f"{plan.target} because the counting time is not known")


def apply_plan(raw, plans: list[ColumnPlan]) -> dict[str, np.ndarray]:
    """Converted columns by series name (no copy when the factor is 1 and the offset 0)."""
    out: dict[str, np.ndarray] = {}
    for p in plans:
        if p.target is None:
            continue
        col = raw.columns[p.index]
        if p.kind in ("branch", "text"):
            out[p.target] = col
            continue
        if p.factor == 1.0 and p.offset == 0.0:
            out[p.target] = col
        elif p.offset == 0.0:
            out[p.target] = col * p.factor
        else:
            out[p.target] = col * p.factor + p.offset
    return out

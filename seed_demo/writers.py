"""Export shapes of the demo: five generic layouts of text and spreadsheet export.

The shapes follow the project's fixed conventions (DESIGN.md section 5), in neutral
words:

* ``delimited``: one header row, then rows; comma, tab, semicolon or runs of spaces;
  decimal commas only with semicolon, tab or space delimiters.
* ``sectioned``: ``key = value`` metadata lines, a ``[data]`` marker line, a header
  row and the table (comma-delimited).
* ``commented``: comment lines starting with ``#``, ``!`` or ``;``; metadata as
  ``<c> key: value``; the header row is the last comment line above the numbers,
  its names separated by two or more spaces; numbers separated by whitespace.
* ``blocks``: optional ``key = value`` file metadata, then blocks separated by a
  blank line, each opened by ``[block temperature = 300 K]`` or
  ``# block: temperature = 300 K``, then a header row and numeric rows.
* ``spreadsheet``: an .xlsx workbook, one title row above the header row.

Every layout below is a :class:`Format`: which canonical SI columns it writes,
under which header, in which unit, with how many decimals.  Numbers are written in
fixed-point notation with a fixed number of decimals per column, so the same
values always give the same bytes.  Spreadsheets are written with a fixed
creation and modification time and fixed zip-entry timestamps.
"""

from __future__ import annotations

import math
import zipfile
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any, Callable

import numpy as np

SHAPES = ("delimited", "sectioned", "commented", "blocks", "spreadsheet")

# Fixed stamps for spreadsheets, so that the same seed gives the same bytes.
SPREADSHEET_TIME = datetime(2026, 1, 1, 0, 0, 0)
_ZIP_TIME = (2026, 1, 1, 0, 0, 0)


@dataclass(frozen=True)
class Column:
    """One written column: source canonical column, header text and conversion.

    ``convert`` maps the SI values (and the specimen mass in kg) to the written
    unit.  ``decimals`` fixes the decimals; otherwise ``significant`` digits are
    kept for the column's largest magnitude.
    """

    source: str
    header: str
    convert: Callable[[np.ndarray, float], np.ndarray] = field(default=lambda v, m: v)
    decimals: int | None = None
    significant: int = 6


@dataclass(frozen=True)
class Format:
    """A layout of export: shape, delimiter, decimal mark, columns and metadata keys."""

    name: str
    shape: str
    ext: str
    columns: tuple[Column, ...]
    delimiter: str = ","
    decimal_comma: bool = False
    comment: str = "#"
    meta: tuple[str, ...] = ()          # condition keys written into the file
    units: dict[str, str] = field(default_factory=dict)  # unit of metadata values, e.g. field -> Oe
    block_style: str = "bracket"        # "bracket" or "comment" (blocks shape)
    title: str = ""                     # spreadsheet title, formatted with {code} and {temperature}


# ---------------------------------------------------------------- unit conversions (SI -> written)
# NBS/IEEE "Units for Magnetic Properties": 1 emu = 1e-3 A m^2, 1 emu/g = 1 A m^2/kg,
# 1 Oe <-> 1e-4 T as mu0*H.

def _emu(v: np.ndarray, mass: float) -> np.ndarray:
    return v * 1e3


def _per_kg(v: np.ndarray, mass: float) -> np.ndarray:
    return v / mass  # A m^2/kg, numerically equal to emu/g


def _oe(v: np.ndarray, mass: float) -> np.ndarray:
    return v * 1e4


def _mt(v: np.ndarray, mass: float) -> np.ndarray:
    return v * 1e3


def _celsius(v: np.ndarray, mass: float) -> np.ndarray:
    return v - 273.15


def _khz(v: np.ndarray, mass: float) -> np.ndarray:
    return v * 1e-3


def _per_g(v: np.ndarray, mass: float) -> np.ndarray:
    return v * 1e-3  # J/(kg K) -> J/(g K)


def _ident(v: np.ndarray, mass: float) -> np.ndarray:
    return v


T_K = Column("temperature_K", "Temperature (K)", _ident, decimals=2)
T_C = Column("temperature_K", "Temp (°C)", _celsius, decimals=2)
TWO_THETA = Column("two_theta_deg", "2theta (deg)", decimals=3)
COUNTS = Column("intensity_counts", "intensity (counts)", decimals=0)
COUNT_SIGMA = Column("intensity_sigma_counts", "sigma (counts)", decimals=2)

FORMATS: dict[str, Format] = {f.name: f for f in (
    # thermomagnetic (temperature sweeps of the moment)
    Format("tm-comma-emu", "delimited", "csv", (T_K, Column("moment_A_m2", "Moment (emu)", _emu))),
    Format("tm-tab-decimal-comma", "delimited", "tsv",
           (Column("temperature_K", "T_K", decimals=2), Column("moment_A_m2", "M [emu]", _emu)),
           delimiter="\t", decimal_comma=True),
    Format("tm-semicolon-celsius", "delimited", "txt",
           (T_C, Column("moment_A_m2", "Moment (A m2)")), delimiter=";", decimal_comma=True),
    Format("tm-spaces", "delimited", "dat",
           (Column("time_s", "time/s", decimals=1), Column("temperature_K", "temperature/K", decimals=2),
            Column("moment_A_m2", "moment/emu", _emu)), delimiter="  "),
    Format("tm-sectioned-cgs", "sectioned", "txt",
           (Column("time_s", "Time (s)", decimals=1), T_K, Column("moment_A_m2", "Moment (emu)", _emu)),
           meta=("specimen", "mass", "field", "sweep rate", "atmosphere", "started", "operator"),
           units={"field": "Oe"}),
    Format("tm-sectioned-si", "sectioned", "txt",
           (T_K, Column("moment_A_m2", "Moment (A m2)"), Column("mu0H_T", "mu0H (T)", decimals=4)),
           meta=("specimen", "mass", "field", "sweep rate", "started", "operator"), units={"field": "T"}),
    Format("tm-commented-mass", "commented", "dat",
           (Column("temperature_K", "temperature (K)", decimals=2),
            Column("moment_A_m2", "moment (emu/g)", _per_kg)),
           comment="!", meta=("specimen", "mass", "field", "started", "operator"), units={"field": "T"}),
    Format("tm-comma-mass-si", "delimited", "csv", (T_K, Column("moment_A_m2", "M (A m2/kg)", _per_kg))),
    Format("tm-spreadsheet", "spreadsheet", "xlsx", (T_K, Column("moment_A_m2", "Moment (A m2)")),
           title="Thermomagnetic run of {code}"),
    # hysteresis loops and backfield curves
    Format("loop-comma-oe", "delimited", "csv",
           (Column("mu0H_T", "Field (Oe)", _oe, decimals=1), Column("moment_A_m2", "Moment (emu)", _emu))),
    Format("loop-sectioned-si", "sectioned", "txt",
           (Column("mu0H_T", "mu0H (T)", decimals=5), Column("moment_A_m2", "Moment (A m2)")),
           meta=("specimen", "mass", "temperature", "started", "operator")),
    Format("loop-semicolon-decimal-comma", "delimited", "txt",
           (Column("mu0H_T", "field/Oe", _oe, decimals=1), Column("moment_A_m2", "M [emu]", _emu)),
           delimiter=";", decimal_comma=True),
    Format("loop-commented-semicolon", "commented", "dat",
           (Column("mu0H_T", "field (mT)", _mt, decimals=2), Column("moment_A_m2", "moment (A m2)")),
           comment=";", meta=("specimen", "temperature", "started", "operator")),
    Format("loop-spreadsheet", "spreadsheet", "xlsx",
           (Column("mu0H_T", "Field (mT)", _mt, decimals=2), Column("moment_A_m2", "Moment (emu)", _emu)),
           title="Hysteresis loop of {code} at {temperature}"),
    Format("loop-spaces-decimal-comma", "delimited", "dat",
           (Column("mu0H_T", "field/Oe", _oe, decimals=1), Column("moment_A_m2", "moment/emu", _emu)),
           delimiter="  ", decimal_comma=True),
    Format("loops-blocks-bracket", "blocks", "txt",
           (Column("mu0H_T", "Field (Oe)", _oe, decimals=1), Column("moment_A_m2", "Moment (emu)", _emu)),
           meta=("specimen", "mass", "started", "operator"), block_style="bracket"),
    Format("loops-blocks-comment", "blocks", "txt",
           (Column("mu0H_T", "mu0H (T)", decimals=5), Column("moment_A_m2", "Moment (A m2)")),
           delimiter="\t", meta=("specimen", "started", "operator"), block_style="comment"),
    Format("bf-comma-mt", "delimited", "csv",
           (Column("mu0H_T", "Field (mT)", _mt, decimals=3), Column("moment_A_m2", "Moment (emu)", _emu))),
    Format("bf-sectioned-si", "sectioned", "txt",
           (Column("mu0H_T", "mu0H (T)", decimals=6), Column("moment_A_m2", "Moment (A m2)")),
           meta=("specimen", "mass", "temperature", "started", "operator")),
    Format("bf-tab-decimal-comma", "delimited", "tsv",
           (Column("mu0H_T", "field/Oe", _oe, decimals=2), Column("moment_A_m2", "M [emu]", _emu)),
           delimiter="\t", decimal_comma=True),
    # susceptibility (in-phase and quadrature parts at one frequency)
    Format("chi-sectioned-vol", "sectioned", "txt",
           (T_K, Column("chi_vol", "chi' (SI)"), Column("chi_quad_vol", "chi'' (SI)")),
           meta=("specimen", "mass", "frequency", "sweep rate", "started", "operator")),
    Format("chi-comma-mass", "delimited", "csv",
           (T_K, Column("chi_mass_m3_per_kg", "Real susceptibility (m3/kg)"),
            Column("chi_quad_mass_m3_per_kg", "Quadrature (m3/kg)"))),
    Format("chi-semicolon-celsius", "delimited", "txt",
           (T_C, Column("chi_vol", "Real susceptibility (SI)"), Column("chi_quad_vol", "Quadrature (SI)")),
           delimiter=";", decimal_comma=True),
    Format("chi-commented-hash", "commented", "dat",
           (Column("temperature_K", "temperature (K)", decimals=2), Column("chi_vol", "chi' (SI)"),
            Column("chi_quad_vol", "chi'' (SI)")),
           comment="#", meta=("specimen", "frequency", "atmosphere", "started", "operator")),
    # resonance spectra at several temperatures
    Format("rus-blocks-bracket", "blocks", "txt",
           (Column("frequency_Hz", "Frequency (Hz)", decimals=1), Column("amplitude", "Amplitude (V)", significant=5),
            Column("phase_rad", "Phase (rad)", decimals=4)),
           meta=("specimen", "mass", "started", "operator"), block_style="bracket"),
    Format("rus-blocks-comment", "blocks", "txt",
           (Column("frequency_Hz", "Frequency (kHz)", _khz, decimals=4),
            Column("amplitude", "Amplitude (V)", significant=5)),
           delimiter="\t", meta=("specimen", "started", "operator"), block_style="comment"),
    # powder diffraction
    Format("xrd-commented-wavelength", "commented", "xy",
           (TWO_THETA, COUNTS, COUNT_SIGMA),
           comment="#", meta=("specimen", "wavelength", "temperature", "started", "operator")),
    Format("xrd-commented-radiation", "commented", "xy", (TWO_THETA, COUNTS),
           comment="#", meta=("specimen", "radiation", "temperature", "started")),
    Format("xrd-comma", "delimited", "csv",
           (Column("two_theta_deg", "2theta (deg)", decimals=3),
            Column("intensity_counts", "Intensity (counts)", decimals=0))),
    Format("xrd-commented-bang", "commented", "xy", (TWO_THETA, COUNTS, COUNT_SIGMA),
           comment="!", meta=("specimen", "wavelength", "temperature", "operator")),
    # calorimetry
    Format("cp-spreadsheet-molar", "spreadsheet", "xlsx",
           (T_K, Column("heat_capacity_J_per_mol_K", "Cp (J/mol/K)", decimals=4)),
           title="Heat capacity of {code}"),
    Format("cp-spreadsheet-mass", "spreadsheet", "xlsx",
           (T_K, Column("heat_capacity_J_per_kg_K", "Cp (J/g/K)", _per_g, decimals=6)),
           title="Heat capacity of {code}"),
    Format("cp-tab", "delimited", "tsv",
           (T_K, Column("heat_capacity_J_per_mol_K", "Cp (J/mol/K)", decimals=4)), delimiter="\t"),
    Format("cp-sectioned-celsius", "sectioned", "txt",
           (Column("temperature_K", "Temperature (°C)", _celsius, decimals=2),
            Column("heat_capacity_J_per_kg_K", "Cp (J/g/K)", _per_g, decimals=6)),
           meta=("specimen", "mass", "sweep rate", "atmosphere", "started", "operator")),
)}

# Which layouts each measuring protocol uses, in turn.
VARIANTS: dict[str, tuple[str, ...]] = {
    "tm-high": ("tm-comma-emu", "tm-sectioned-cgs", "tm-semicolon-celsius", "tm-commented-mass",
                "tm-tab-decimal-comma", "tm-sectioned-si", "tm-spaces", "tm-comma-mass-si", "tm-spreadsheet"),
    "tm-low": ("tm-sectioned-cgs", "tm-comma-emu", "tm-commented-mass", "tm-tab-decimal-comma",
               "tm-sectioned-si", "tm-spaces", "tm-comma-mass-si", "tm-spreadsheet"),
    "loop": ("loop-comma-oe", "loop-sectioned-si", "loop-semicolon-decimal-comma", "loop-commented-semicolon",
             "loop-spreadsheet", "loop-spaces-decimal-comma"),
    "loops-blocks": ("loops-blocks-bracket", "loops-blocks-comment"),
    "backfield": ("bf-comma-mt", "bf-sectioned-si", "bf-tab-decimal-comma"),
    "chi-high": ("chi-sectioned-vol", "chi-comma-mass", "chi-semicolon-celsius", "chi-commented-hash"),
    "chi-low": ("chi-sectioned-vol", "chi-commented-hash", "chi-comma-mass"),
    "rus": ("rus-blocks-bracket", "rus-blocks-comment"),
    "xrd": ("xrd-commented-wavelength", "xrd-commented-radiation", "xrd-comma", "xrd-commented-bang"),
    "cp": ("cp-spreadsheet-molar", "cp-tab", "cp-spreadsheet-mass", "cp-sectioned-celsius"),
}

# Conditions a run of each protocol needs; what its file does not state goes into the
# plan's "set" list (DESIGN.md section 5: --set KEY=VALUE).
REQUIRED_CONDITIONS = {
    "tm-high": ("field",), "tm-low": ("field",), "loop": ("temperature",), "loops-blocks": (),
    "backfield": ("temperature",), "chi-high": ("frequency",), "chi-low": ("frequency",), "rus": (),
    "xrd": ("wavelength", "temperature"), "cp": (),
}


# ---------------------------------------------------------------- number formatting

def column_decimals(values: np.ndarray, column: Column) -> int:
    """Decimals for a column: fixed, or enough for ``significant`` digits of its largest value."""
    if column.decimals is not None:
        return column.decimals
    finite = np.abs(values[np.isfinite(values)])
    top = float(finite.max()) if finite.size else 0.0
    if top == 0.0:
        return column.significant
    return int(min(14, max(0, column.significant - 1 - math.floor(math.log10(top)))))


def format_column(values: np.ndarray, decimals: int, decimal_comma: bool) -> list[str]:
    """Fixed-point strings; ``-0`` is written as ``0``."""
    rounded = np.round(np.asarray(values, dtype=float), decimals) + 0.0
    text = [f"{v:.{decimals}f}" for v in rounded.tolist()]
    if decimal_comma:
        text = [t.replace(".", ",") for t in text]
    return text


def _cells(fmt: Format, table: dict[str, np.ndarray], mass_kg: float) -> tuple[list[str], list[list[str]]]:
    headers, cols = [], []
    for c in fmt.columns:
        values = c.convert(np.asarray(table[c.source], dtype=float), mass_kg)
        cols.append(format_column(values, column_decimals(values, c), fmt.decimal_comma))
        headers.append(c.header)
    return headers, [list(row) for row in zip(*cols)]


def _join(fields: list[str], delimiter: str, widths: list[int] | None = None) -> str:
    if delimiter.strip():
        return delimiter.join(fields)
    if delimiter == "\t":
        return "\t".join(fields)
    # runs of spaces: left-aligned columns, at least two spaces apart
    assert widths is not None
    return "".join(f.ljust(w + 2) for f, w in zip(fields[:-1], widths[:-1])) + fields[-1]


def _table_lines(headers: list[str], rows: list[list[str]], delimiter: str,
                 header_prefix: str = "") -> list[str]:
    widths = None
    if not delimiter.strip() and delimiter != "\t":
        widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(headers)]
    head = _join(headers, delimiter, widths)
    return [header_prefix + head] + [_join(r, delimiter, widths) for r in rows]


def _whitespace_lines(headers: list[str], rows: list[list[str]], prefix: str) -> list[str]:
    # Commented shape: header names may hold single spaces, so columns sit two or more apart.
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(headers)]
    head = "".join(h.ljust(w + 2) for h, w in zip(headers[:-1], widths[:-1])) + headers[-1]
    lines = [f"{prefix} {head}"]
    for r in rows:
        lines.append("".join(f.rjust(w) + "  " for f, w in zip(r[:-1], widths[:-1])) + r[-1].rjust(widths[-1]))
    return lines


# ---------------------------------------------------------------- writing

@dataclass(frozen=True)
class Export:
    """What a synthesised run hands to a writer.

    ``tables`` holds (block label, columns) pairs; the label is ``None`` for a
    single table or a (key, SI value, unit) triple such as ("temperature", 300.0, "K").
    ``metadata`` maps condition keys to the text written after ``key = `` or ``key: ``.
    """

    code: str
    tables: list[tuple[tuple[str, float, str] | None, dict[str, np.ndarray]]]
    metadata: dict[str, str]
    mass_kg: float
    title_temperature: str = ""


def write_export(path: Path, fmt: Format, export: Export) -> None:
    """Write ``export`` to ``path`` in layout ``fmt`` (UTF-8, LF line ends)."""
    if fmt.shape == "spreadsheet":
        _write_spreadsheet(path, fmt, export)
        return
    lines = _render(fmt, export)
    path.write_bytes(("\n".join(lines) + "\n").encode("utf-8"))


def _meta_lines(fmt: Format, export: Export, style: str) -> list[str]:
    out = []
    for key in fmt.meta:
        if key not in export.metadata:
            continue
        value = export.metadata[key]
        if style == "assign":
            out.append(f"{key} = {value}")
        else:
            out.append(f"{fmt.comment} {key}: {value}")
    return out


def _render(fmt: Format, export: Export) -> list[str]:
    if fmt.shape == "blocks":
        lines = _meta_lines(fmt, export, "assign")
        for label, table in export.tables:
            assert label is not None
            key, value, unit = label
            if lines:
                lines.append("")
            opener = (f"[block {key} = {value:g} {unit}]" if fmt.block_style == "bracket"
                      else f"# block: {key} = {value:g} {unit}")
            headers, rows = _cells(fmt, table, export.mass_kg)
            lines.append(opener)
            lines.extend(_table_lines(headers, rows, fmt.delimiter))
        return lines
    (label, table), = export.tables
    headers, rows = _cells(fmt, table, export.mass_kg)
    if fmt.shape == "delimited":
        return _table_lines(headers, rows, fmt.delimiter)
    if fmt.shape == "sectioned":
        return _meta_lines(fmt, export, "assign") + ["[data]"] + _table_lines(headers, rows, fmt.delimiter)
    if fmt.shape == "commented":
        return _meta_lines(fmt, export, "comment") + _whitespace_lines(headers, rows, fmt.comment)
    raise ValueError(f"unknown shape {fmt.shape!r}")


class _FixedTimeZip(zipfile.ZipFile):
    """A ZipFile whose entries all carry one fixed timestamp and mode.

    openpyxl adds most parts with ``writestr(name, data)`` (stamped with the
    current time by zipfile) and the worksheets with ``write(tempfile, name)``
    (stamped with the temporary file's time); both are routed through a ZipInfo
    with a fixed date.
    """

    def write(self, filename: Any, arcname: str | None = None, compress_type: int | None = None,
              compresslevel: int | None = None) -> None:
        data = Path(filename).read_bytes()
        self.writestr(arcname if arcname is not None else Path(filename).name, data)

    def writestr(self, zinfo_or_arcname: Any, data: Any, compress_type: int | None = None,
                 compresslevel: int | None = None) -> None:
        if isinstance(zinfo_or_arcname, str):
            info = zipfile.ZipInfo(zinfo_or_arcname, date_time=_ZIP_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o600 << 16
            zinfo_or_arcname = info
        super().writestr(zinfo_or_arcname, data, compress_type, compresslevel)


def _write_spreadsheet(path: Path, fmt: Format, export: Export) -> None:
    from openpyxl import Workbook
    from openpyxl.writer.excel import ExcelWriter

    (label, table), = export.tables
    wb = Workbook(write_only=True)
    ws = wb.create_sheet("data")
    ws.append([fmt.title.format(code=export.code, temperature=export.title_temperature)])
    columns = []
    for c in fmt.columns:
        values = c.convert(np.asarray(table[c.source], dtype=float), export.mass_kg)
        columns.append((np.round(values, column_decimals(values, c)) + 0.0).tolist())
    ws.append([c.header for c in fmt.columns])
    for row in zip(*columns):
        ws.append(list(row))
    # openpyxl's save_workbook stamps the current time as "modified"; ExcelWriter
    # writes the properties as they are, and the zip entries get a fixed time.
    wb.properties.creator = "magvault demo generator"
    wb.properties.lastModifiedBy = "magvault demo generator"
    wb.properties.created = SPREADSHEET_TIME
    wb.properties.modified = SPREADSHEET_TIME
    with _FixedTimeZip(path, "w", zipfile.ZIP_DEFLATED, allowZip64=True) as archive:
        ExcelWriter(wb, archive).write_data()

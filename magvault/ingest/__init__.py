"""Import of instrument exports: bytes in, a canonical SI table plus metadata out.

Pure code: no database.  The vault stores the raw bytes, calls :func:`read_export`
and keeps the returned series, conditions and the column mapping (profile) used.

Shapes accepted (our own descriptions of generic text layouts)
==============================================================

The shape is sniffed from the first 64 KB of the file; ``shape=`` forces one of
``delimited``, ``sectioned``, ``commented``, ``blocks``, ``spreadsheet``.

delimited
    One header row, then rows.  Delimiter: comma, tab, semicolon or runs of
    whitespace (sniffed from the rows).  Decimal point, or decimal comma with a
    semicolon, tab or whitespace delimiter (never with a comma delimiter).  Units
    in the header: ``Temperature (K)``, ``M [emu]``, ``field/Oe``, ``T_K``,
    ``Temp (°C)``, ``Cp (J/mol/K)``, ``Moment (A m2)``, ``mu0H (T)``.  A row of
    units alone may follow the header (``K, emu, Oe``).  With whitespace
    delimiters a header name may contain single spaces when columns are two or
    more spaces apart, and ``T (K) M (emu)`` is read as two names.  A column of
    words (``heating``/``cooling``) is kept as text.

sectioned
    Metadata lines ``key = value``, ``key: value`` or ``key,value`` (also ``;`` or a
    tab), blank lines, a title line, bracketed section titles such as ``[header]``;
    then a marker line; then a header row and the table (comma, tab, semicolon or
    whitespace).  Marker lines (case-insensitive, trailing delimiters allowed):
    ``[data]``, ``[measurements]``, ``[measurement]``, ``[table]``, ``[values]``,
    ``[readings]``, ``[results]``; the same words between runs of dashes or equals
    signs (``---data---``, ``== table ==``); or a line of three or more dashes or
    equals signs only.  Without a marker, the line above the first row of numbers
    is the header (with a warning).  Keys with units in them work:
    ``Sample mass [mg] = 12.5``.

commented
    Comment lines start with ``#``, ``!`` or ``;``; metadata in comments as
    ``# key: value`` or ``# key = value``.  The header row is the last comment line
    above the first row of numbers when it has as many names as the rows have
    fields (``# 2theta (deg)  intensity (counts)  sigma (counts)``), or a plain line
    there.  Numbers separated by whitespace or commas; comment lines may also sit
    between or after the rows.  Without a header, a diffraction file with two
    columns is read as two_theta_deg, intensity_counts and with three columns
    also intensity_sigma_counts; other kinds need a header or a mapping (the
    columns are then called ``col1``, ``col2``...).

blocks
    Optional file-level metadata (``key = value`` lines or comments), then blocks
    separated by blank lines.  A block starts with a block header line:
    ``[block temperature = 300 K]``, ``[block T=300 K]``, ``# block: temperature = 300 K``,
    ``[block field = 0.5 T, temperature = 10 K]`` (several keys), or a plain
    ``Temperature: 300 K`` / ``Field = 0.5 T`` line directly above a header row and
    numbers.  The key names the quantity: temperature/temp/T -> ``block_temperature_K``,
    field/H/B/mu0H -> ``block_field_T``; other keys become ``block_<key>_<unit>``.
    Then a header row (later blocks may omit it; their columns must match the
    first block's), then rows.  All blocks make one long table with the block
    value as a column.

spreadsheet
    An .xlsx workbook (recognised by its ZIP signature, never sniffed as text).
    Title rows (one or two filled cells; two cells ``key | value`` become metadata)
    above the header row; the header row with units; optionally a row of units;
    then rows of numbers.  The first sheet unless ``sheet=`` names one.

Series
======

``ParsedExport.series`` has the canonical columns of DESIGN.md section 5 in SI
(float64): ``time_s``, ``temperature_K``, ``mu0H_T``, ``moment_A_m2``,
``moment_A_m2_per_kg``, ``chi_vol``, ``chi_mass_m3_per_kg``, ``chi_quad_vol``,
``chi_quad_mass_m3_per_kg``, ``frequency_Hz``, ``amplitude``, ``phase_rad``,
``two_theta_deg``, ``intensity_counts``, ``intensity_sigma_counts``,
``heat_capacity_J_per_mol_K``, ``heat_capacity_J_per_kg_K``, ``block_temperature_K``,
``block_field_T``.  Thermomagnetic runs (and susceptibility runs whose temperature
moves) get a text column ``branch``: ``heating``/``cooling`` from the file's own
branch column (up/down, warming/cooling... are accepted) or from the direction of
the smoothed temperature, a plateau keeping the previous label
(:func:`label_branches`).  Any other column keeps its name, lower-cased, with its
SI unit appended (``Pressure (kPa)`` -> ``pressure_Pa``); an unknown unit is kept
unconverted with its text appended; a column of words is kept as text.  Which
names are guessed depends on the run kind (``I`` is an intensity only in a
diffraction run).  A row with a typo just below the header is read as a row and
its bad cell reported, not taken for the header.

Units
=====

:func:`magvault.ingest.spelling.si_conversion` reads the spellings people write
(``Am2``, ``A·m²``, ``emu/g``, ``°C``, ``C`` in a temperature column, ``Oe``,
``kOe``, ``G``, ``J mol-1 K-1``, ``kHz``, ``2θ``, ``counts``, ``cps``...) and gives
SI factors; CGS follows the NBS/IEEE table of units for magnetic properties.
Fields are stored as mu0*H in tesla.  An unknown or ambiguous unit in a column
that matters is refused with a message naming the column and the spellings
accepted; a column that needs a unit and has none is refused too, unless a
mapping names its target (the values are then read in the target's unit, e.g.
``Temp=temperature_K`` means kelvin).

Errors
======

Unreadable input raises :class:`magvault.errors.InputFileError` naming the file,
the line (1-based, as in a text editor; the sheet row for a workbook) and the
column.  Bad arguments raise :class:`magvault.errors.InvalidValue`.
"""

from __future__ import annotations

from .api import ParsedExport, add_mass_normalised, preview_export, read_export
from .branch import label_branches
from .canonical import CANONICAL_COLUMNS, CONDITION_KEYS, REQUIRED, RUN_KINDS, SHAPES
from .columns import ColumnMap, Profile, parse_map
from .conditions import XRAY_LINES_ANGSTROM, parse_overrides, xray_wavelength_m
from .decode import decode_text
from .headers import split_header
from .spelling import Conversion, si_conversion

__all__ = [
    "read_export", "preview_export", "ParsedExport", "ColumnMap", "Profile", "SHAPES", "RUN_KINDS",
    "CANONICAL_COLUMNS", "CONDITION_KEYS", "REQUIRED", "parse_map", "parse_overrides",
    "add_mass_normalised", "decode_text", "si_conversion", "Conversion", "split_header",
    "label_branches", "xray_wavelength_m", "XRAY_LINES_ANGSTROM",
]

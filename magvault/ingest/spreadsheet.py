"""The spreadsheet shape: an .xlsx workbook, title rows, a header row, rows of numbers.

Rows above the header with one or two filled cells are titles or ``key, value``
metadata; the header row is the last row of names above the first row of
numbers; a row of units only may sit between them.  The first sheet is read
unless a sheet is named.  Error messages name the sheet row as the line and the
cell reference (``C7``).
"""

from __future__ import annotations

import datetime as _dt
import io
import re
import warnings as _warnings
import zipfile

import numpy as np
from openpyxl import load_workbook
from openpyxl.utils import get_column_letter
from openpyxl.utils.exceptions import InvalidFileException

from ..errors import InputFileError
from .readers import RawTable
from .sniff import NA_TOKENS, is_unit_row

__all__ = ["read_spreadsheet"]

_NA = frozenset(NA_TOKENS)
_NUM = re.compile(r"^[-+]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?$")


def _number(v) -> float | None:
    """A cell as a number: int/float cells, or text that reads as one (decimal comma allowed)."""
    if isinstance(v, bool):
        return None
    if isinstance(v, (int, float)):
        return float(v)
    if isinstance(v, str):
        s = v.strip()
        if _NUM.match(s):
            if "," in s and "." not in s:
                s = s.replace(",", ".")
            elif "," in s:
                return None
            return float(s)
    return None


def _filled(row) -> list[int]:
    return [i for i, v in enumerate(row) if v is not None and not (isinstance(v, str) and not v.strip())]


def _is_numeric_row(row) -> bool:
    idx = _filled(row)
    if len(idx) < 2 or _number(row[idx[0]]) is None:
        return False
    numeric = sum(1 for i in idx if _number(row[i]) is not None)
    return numeric * 2 > len(idx)


def _is_row_with_typo(row) -> bool:
    idx = _filled(row)
    return len(idx) >= 2 and any(_number(row[i]) is not None for i in idx)


def _filled_above(rows, i: int) -> int | None:
    return next((k for k in range(i - 1, -1, -1) if _filled(rows[k])), None)


def read_spreadsheet(data: bytes, source_name: str, sheet: str | None = None) -> RawTable:
    """Read the table of one sheet of an .xlsx workbook.

    Raises
    ------
    InputFileError
        Unreadable workbook, missing sheet, no table, or a cell that is not a number
        (the message names the row as the line and the cell).
    """
    caught: list[str] = []
    try:
        with _warnings.catch_warnings(record=True) as records:
            _warnings.simplefilter("always")
            wb = load_workbook(io.BytesIO(data), read_only=True, data_only=True)
            try:
                if sheet is not None:
                    if sheet not in wb.sheetnames:
                        raise InputFileError(f"no sheet {sheet!r}; the workbook has: "
                                             + ", ".join(repr(s) for s in wb.sheetnames), path=source_name)
                    ws = wb[sheet]
                else:
                    ws = wb.worksheets[0]
                title = ws.title
                rows = [tuple(r) for r in ws.iter_rows(values_only=True)]
            finally:
                wb.close()
        # openpyxl's remarks on styles and extensions are kept as warnings of the import.
        caught = [f"workbook: {r.message}" for r in records]
    except InputFileError:
        raise
    except (InvalidFileException, zipfile.BadZipFile, KeyError, OSError, ValueError, TypeError) as exc:
        raise InputFileError(f"not a readable .xlsx workbook ({type(exc).__name__}: {exc})",
                             path=source_name) from None
    where = f"sheet {title!r}"
    f = next((i for i, r in enumerate(rows) if _is_numeric_row(r)), None)
    if f is None:
        # Perhaps every row has a typo: the first row with some number below a filled row.
        f = next((i for i, r in enumerate(rows) if _is_row_with_typo(r) and _filled_above(rows, i) is not None),
                 None)
    if f is None:
        raise InputFileError(f"{where}: no rows of numbers found", path=source_name)
    # Rows with a typo just below the header are rows too (their bad cell is reported).
    while True:
        i = _filled_above(rows, f)
        if i is None or not _is_row_with_typo(rows[i]) or _filled_above(rows, i) is None:
            break
        f = i
    h = None
    for i in range(f - 1, -1, -1):
        idx = _filled(rows[i])
        if not idx:
            continue
        if len(idx) >= 2 and all(_number(rows[i][k]) is None for k in idx):
            h = i
            break
        raise InputFileError(f"{where}: expected a header row of names above the first row of numbers "
                             f"(row {f + 1})", path=source_name, line=i + 1)
    if h is None:
        raise InputFileError(f"{where}: no header row above the first row of numbers", path=source_name,
                             line=f + 1)
    units_row = None
    header_cells = _filled(rows[h])
    # A units-only row directly above the first row of numbers, below a row of names.
    above = [i for i in range(h - 1, -1, -1) if _filled(rows[i])]
    if above and _filled(rows[above[0]]) == header_cells and \
            all(isinstance(rows[above[0]][k], str) for k in header_cells) and \
            not is_unit_row([str(rows[above[0]][k]) for k in header_cells]) and \
            is_unit_row([str(rows[h][k]) for k in header_cells]):
        units_row, h = h, above[0]
        header_cells = _filled(rows[h])
    cols = list(range(min(header_cells), max(header_cells) + 1))
    headers = []
    for k in cols:
        name = rows[h][k] if k < len(rows[h]) else None
        name = str(name).strip() if name is not None else f"col{k + 1}"
        if units_row is not None and k < len(rows[units_row]) and rows[units_row][k]:
            unit = str(rows[units_row][k]).strip().strip("()[]")
            name = f"{name} ({unit})"
        headers.append(name)
    meta: dict[str, str] = {}
    meta_where: dict[str, int] = {}
    for i in range(h):
        idx = _filled(rows[i])
        if not idx:
            continue
        cells = [rows[i][k] for k in idx]
        if len(cells) == 2 and isinstance(cells[0], str):
            key = cells[0].strip().rstrip(":=").strip()
            value = cells[1]
            meta[key] = value.isoformat() if isinstance(value, (_dt.datetime, _dt.date)) else str(value).strip()
            meta_where[key] = i + 1
        elif len(cells) == 1 and isinstance(cells[0], str):
            k = "title" if "title" not in meta else f"title ({i + 1})"
            meta[k] = cells[0].strip()
            meta_where[k] = i + 1
    # Which columns are text: the first filled data cell is not a number.
    text_cols: set[int] = set()
    for j, k in enumerate(cols):
        for r in rows[f:]:
            v = r[k] if k < len(r) else None
            if v is None or (isinstance(v, str) and (not v.strip() or v.strip() in _NA)):
                continue
            if _number(v) is None:
                text_cols.add(j)
            break
    values: list[list] = [[] for _ in cols]
    lines: list[int] = []
    for i in range(f, len(rows)):
        r = rows[i]
        if not _filled(r):
            continue
        for j, k in enumerate(cols):
            v = r[k] if k < len(r) else None
            if j in text_cols:
                values[j].append(None if v is None else str(v))
                continue
            if v is None or (isinstance(v, str) and v.strip() in _NA):
                values[j].append(np.nan)
                continue
            x = _number(v)
            if x is None:
                what = "a date" if isinstance(v, (_dt.datetime, _dt.date, _dt.time)) else repr(v)
                raise InputFileError(f"{where}, cell {get_column_letter(k + 1)}{i + 1}: expected a number, "
                                     f"found {what}", path=source_name, line=i + 1, column=headers[j])
            values[j].append(x)
        lines.append(i + 1)
    columns = [np.asarray(values[j], dtype=object if j in text_cols else np.float64)
               for j in range(len(cols))]
    return RawTable(shape="spreadsheet", encoding="xlsx", headers=headers, columns=columns,
                    row_lines=np.asarray(lines, dtype=np.int64), text_columns=frozenset(text_cols),
                    metadata=meta, header_line=h + 1, warnings=caught, metadata_lines=meta_where)

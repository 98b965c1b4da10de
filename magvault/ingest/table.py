"""Rows of numbers to columns: pandas' C parser for speed, a line-by-line reader for the truth.

The fast path hands byte ranges to ``pandas.read_csv`` (C engine), several ranges
at once on several threads for a big file (the C tokeniser releases the GIL).
Any range that the fast path cannot take as it is (a parser error, a cell that is
not a number, a missing value, a row count that does not match the line count)
is read again line by line in Python: that reader defines what is accepted and
reports the first problem with its line and column.  So a good file never pays
for Python loops, and a bad one gets a precise message.
"""

from __future__ import annotations

import io
import math
import os
import re
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..errors import InputFileError
from .sniff import NA_TOKENS, Delimiting, split_fields

__all__ = ["TableSpec", "ParsedTable", "parse_table"]

_NA_SET = frozenset(NA_TOKENS)
_NUM_DOT = re.compile(r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?")
_NUM_COMMA = re.compile(r"[-+]?(?:\d+,?\d*|,\d+)(?:[eE][-+]?\d+)?")
_INF = {"inf": math.inf, "+inf": math.inf, "-inf": -math.inf, "infinity": math.inf,
        "+infinity": math.inf, "-infinity": -math.inf}


@dataclass(frozen=True)
class TableSpec:
    """What the rows of one table look like."""

    delimiting: Delimiting
    headers: tuple[str, ...]
    text_columns: frozenset[int] = frozenset()
    header_line: int | None = None
    source_name: str = ""


@dataclass
class ParsedTable:
    """Columns by position (float64 or object for text) and the file line of every row."""

    columns: list[np.ndarray]
    row_lines: np.ndarray
    notes: list[str] = field(default_factory=list)

    @property
    def n_rows(self) -> int:
        return len(self.row_lines)


class _ChunkError(Exception):
    """A problem found in one range, with its line counted from the range's start."""

    def __init__(self, relative_line: int, message: str, column: str | None):
        super().__init__(message)
        self.relative_line, self.message, self.column = relative_line, message, column


@dataclass
class _Chunk:
    columns: list[np.ndarray]
    n_lines: int                      # physical lines in the range
    kept: np.ndarray | None = None    # 0-based line index of each row; None: every line is a row


def parse_table(raw: bytes, spec: TableSpec, *, start: int = 0, end: int | None = None,
                encoding: str = "utf-8", first_line: int | None = None,
                line_numbers: np.ndarray | None = None, parallel_min_bytes: int = 4_000_000,
                workers: int | None = None) -> ParsedTable:
    """Parse the rows of a table held in ``raw[start:end]``.

    Parameters
    ----------
    raw : bytes
        The file (or gathered rows) in ``encoding``; only ``raw[start:end]`` is read.
    spec : TableSpec
        Delimiter, decimal mark, column count and names, text columns.
    start, end : int
        Byte range of the rows (no header inside).
    first_line : int, optional
        File line (1-based) of the byte at ``start``; each physical line is one row.
    line_numbers : ndarray, optional
        File line of each line of the range when the rows were gathered from a longer
        text (comment lines or blocks removed).
    parallel_min_bytes : int
        Ranges longer than this are cut at line ends and parsed on several threads.
    workers : int, optional
        Threads for a long range (default: the machine's CPU count, at most 8).

    Raises
    ------
    InputFileError
        Ragged row, non-numeric cell, undecodable bytes, or no rows at all; the message
        names the line and the column.
    """
    end = len(raw) if end is None else end
    probe = raw[start:min(end, start + 65536)]
    nl = b"\n" if (b"\n" in probe or b"\r" not in probe) else b"\r"
    if line_numbers is None and first_line is None:
        first_line = 1
    n_workers = workers or min(os.cpu_count() or 1, 8)
    ranges = _cut(raw, start, end, nl, parallel_min_bytes, n_workers)

    def work(ab: tuple[int, int]) -> _Chunk:
        return _parse_range(raw, ab[0], ab[1], spec, encoding, nl)

    def absolute(line_index: int) -> int:
        if line_numbers is not None:
            return int(line_numbers[min(line_index, len(line_numbers) - 1)])
        return first_line + line_index

    chunks: list[_Chunk] = []
    lines_before = 0
    pool = ThreadPoolExecutor(max_workers=n_workers) if len(ranges) > 1 else None
    columns: list[np.ndarray] | None = None
    try:
        results = pool.map(work, ranges) if pool is not None else (work(r) for r in ranges)
        while True:
            try:
                chunk = next(results)
            except StopIteration:
                break
            except _ChunkError as exc:
                raise InputFileError(exc.message, path=spec.source_name or None,
                                     line=absolute(lines_before + exc.relative_line),
                                     column=exc.column) from None
            chunk.first_index = lines_before  # type: ignore[attr-defined]
            lines_before += chunk.n_lines
            chunks.append(chunk)
        if pool is not None:
            columns = _gather(chunks, spec.delimiting.ncols, pool)
    finally:
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
    ncols = spec.delimiting.ncols
    if all(c.kept is None for c in chunks):
        total = sum(c.n_lines for c in chunks)
        index = np.arange(total, dtype=np.int64)
    else:
        index = np.concatenate([
            (np.arange(c.n_lines, dtype=np.int64) if c.kept is None else c.kept) + c.first_index
            for c in chunks])
    if line_numbers is not None:
        row_lines = np.asarray(line_numbers, dtype=np.int64)[index] if len(index) else index
    else:
        row_lines = index + first_line
    if columns is None:
        columns = chunks[0].columns if len(chunks) == 1 else \
            [np.concatenate([c.columns[i] for c in chunks]) for i in range(ncols)]
    result = ParsedTable(columns, row_lines)
    if result.n_rows == 0:
        where = f" below the header (line {spec.header_line})" if spec.header_line else ""
        raise InputFileError(f"no rows of numbers{where}", path=spec.source_name or None,
                             line=spec.header_line)
    return result


def _gather(chunks: list[_Chunk], ncols: int, pool: ThreadPoolExecutor) -> list[np.ndarray]:
    """Join the ranges' columns one column at a time, letting each column's pieces go once joined.

    The pieces and the joined table are then never both whole in memory (a million-row
    file saves a third of its parse peak); the copies are memory-bound, so the pool
    would not make them faster.
    """
    out: list[np.ndarray] = []
    for i in range(ncols):
        pieces = [c.columns[i] for c in chunks]
        for c in chunks:
            c.columns[i] = None  # type: ignore[call-overload]
        mixed = any(p.dtype != pieces[0].dtype for p in pieces)
        out.append(np.concatenate(pieces, dtype=object if mixed else None))
        del pieces
    return out


def _cut(raw: bytes, start: int, end: int, nl: bytes, parallel_min_bytes: int, n_workers: int
         ) -> list[tuple[int, int]]:
    n = end - start
    if n < parallel_min_bytes or n_workers < 2:
        return [(start, end)]
    # A few pieces per thread so that one slow piece does not leave a core idle.
    pieces = 2 * n_workers
    offsets = [start]
    for k in range(1, pieces):
        target = start + n * k // pieces
        j = raw.find(nl, max(target, offsets[-1]), end)
        if j < 0:
            break
        if start < j + 1 < end and j + 1 > offsets[-1]:
            offsets.append(j + 1)
    offsets.append(end)
    return [(offsets[i], offsets[i + 1]) for i in range(len(offsets) - 1) if offsets[i + 1] > offsets[i]]


def _parse_range(raw: bytes, a: int, b: int, spec: TableSpec, encoding: str, nl: bytes) -> _Chunk:
    d = spec.delimiting
    n = d.ncols
    names = list(range(n + (1 if d.trailing else 0)))
    numeric = [i for i in range(n) if i not in spec.text_columns]
    dtype = {i: ("float64" if i in numeric else object) for i in names}

    def fallback() -> _Chunk:
        return _python_range(raw[a:b], spec, encoding)

    if b <= a:
        return _Chunk([np.empty(0) for _ in range(n)], 0)
    try:
        frame = pd.read_csv(
            io.BytesIO(memoryview(raw)[a:b]), sep=r"\s+" if d.sep == " " else d.sep, header=None,
            names=names, dtype=dtype, decimal=d.decimal, engine="c", index_col=False,
            skip_blank_lines=False, keep_default_na=False, na_values=list(NA_TOKENS),
            encoding=encoding, quotechar='"')
    except (ValueError, pd.errors.ParserError, UnicodeDecodeError, IndexError, OverflowError,
            pd.errors.EmptyDataError):
        return fallback()
    rows = len(frame)
    # Without quotes and with blank lines kept, every physical line is one row; with
    # quotes (a field may then hold a line end) the count is checked.
    if raw.find(b'"', a, b) >= 0:
        if rows != raw.count(nl, a, b) + (0 if raw[b - 1:b] == nl else 1):
            return fallback()
    cols: list[np.ndarray] = []
    for i in range(n):
        arr = frame[i].to_numpy()
        if i in numeric and np.isnan(arr).any():
            return fallback()
        cols.append(arr)
    if d.trailing and frame[n].notna().any():
        return fallback()
    return _Chunk(cols, rows)


# ---------------------------------------------------------------------------
# The line-by-line reader: defines what is accepted, locates every problem
# ---------------------------------------------------------------------------

def _to_float(cell: str, decimal: str) -> float | None:
    if cell in _NA_SET:
        return math.nan
    if decimal == ",":
        if _NUM_COMMA.fullmatch(cell):
            return float(cell.replace(",", "."))
    elif _NUM_DOT.fullmatch(cell):
        return float(cell)
    return _INF.get(cell.lower())


def _python_range(chunk: bytes, spec: TableSpec, encoding: str) -> _Chunk:
    try:
        text = chunk.decode(encoding)
    except UnicodeDecodeError as exc:
        raise _ChunkError(chunk[:exc.start].count(b"\n"), f"cannot decode the bytes as {encoding}",
                          None) from None
    physical = re.split(r"\r\n|\r|\n", text)
    if physical and physical[-1] == "":
        physical.pop()
    try:
        table = read_rows(list(enumerate(physical)), spec, relative=True)
    except _ChunkError:
        raise
    return _Chunk(table.columns, len(physical), table.row_lines)


def read_rows(rows: list[tuple[int, str]], spec: TableSpec, *, relative: bool = False) -> ParsedTable:
    """Read (line number, text) rows one by one; blank lines are skipped.

    With ``relative``, the numbers are 0-based indices within a range and problems
    are raised as ``_ChunkError`` for the caller to place in the file.

    Raises
    ------
    InputFileError
        At the first ragged row or non-numeric cell, naming line and column.
    """
    d = spec.delimiting
    n = d.ncols
    text_cols = spec.text_columns
    values: list[list] = [[] for _ in range(n)]
    lines: list[int] = []
    header_at = f" (line {spec.header_line})" if spec.header_line else ""
    for line_no, line in rows:
        if not line.strip() or not line.strip(" \t,;"):
            continue
        fields = split_fields(line, d.sep)
        if len(fields) == n + 1 and fields[-1] == "":
            fields.pop()
        if len(fields) != n:
            if not any(_to_float(f.strip().strip('"'), d.decimal) is not None for f in fields):
                msg = f"expected a row of {n} numbers, found {line.strip()[:40]!r}"
            else:
                msg = (f"ragged row: {len(fields)} field{'s' if len(fields) != 1 else ''} where the "
                       f"header{header_at} has {n} ({d.sep_name}-delimited)")
            if relative:
                raise _ChunkError(line_no, msg, None)
            raise InputFileError(msg, path=spec.source_name or None, line=line_no)
        for i, cell in enumerate(fields):
            cell = cell.strip().strip('"').strip()
            if i in text_cols:
                values[i].append(cell if cell not in _NA_SET else None)
                continue
            v = _to_float(cell, d.decimal)
            if v is None:
                hint = ""
                if d.decimal == "." and _NUM_COMMA.fullmatch(cell):
                    hint = " (a decimal comma, but this table uses decimal points)"
                elif d.decimal == "," and _NUM_DOT.fullmatch(cell):
                    hint = " (a decimal point, but this table uses decimal commas)"
                column = spec.headers[i] if i < len(spec.headers) else str(i + 1)
                msg = f"expected a number, found {cell!r}{hint}"
                if relative:
                    raise _ChunkError(line_no, msg, column)
                raise InputFileError(msg, path=spec.source_name or None, line=line_no, column=column)
            values[i].append(v)
        lines.append(line_no)
    cols = [np.asarray(values[i], dtype=object) if i in text_cols else np.asarray(values[i], dtype=np.float64)
            for i in range(n)]
    return ParsedTable(cols, np.asarray(lines, dtype=np.int64))

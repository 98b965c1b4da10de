"""Readers for the text shapes: delimited, sectioned, commented, blocks.

Each reader finds the header, the metadata and the rows, and hands the rows to
:func:`magvault.ingest.table.parse_table`.  A reader knows nothing of units or
canonical columns: it returns a :class:`RawTable` of columns by position.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputFileError, InvalidValue
from .decode import Encoding, detect_encoding
from .headers import family_of_name, split_header
from .sniff import (
    Delimiting, block_header_body, extend_up, first_numeric, first_row, header_fields, is_blank,
    is_comment, is_data_line, is_marker, is_number, is_row_with_typo, is_unit_row, parse_metadata_line,
    plain_block_header, previous_nonblank,
    sniff_delimiting, split_fields, split_lines, strip_comment,
)
from .spelling import si_conversion, unit_label
from .table import ParsedTable, TableSpec, parse_table

__all__ = ["TextSource", "RawTable", "BlockColumn", "read_text_shape", "TEXT_READERS",
           "BLOCK_SOURCE_PREFIX"]

HEAD_BYTES = 64 * 1024
BLOCK_SOURCE_PREFIX = "block header: "  # ColumnMap.source of a column made from block headers
_COMMENT_AFTER = re.compile(rb"[\r\n][ \t]*[#!;]")
_ROW_AFTER = re.compile(rb"[\r\n][ \t]*[^#!;\s]")
_NA = frozenset({"", "nan", "NaN", "NA", "N/A", "n/a", "null", "None", "--"})


@dataclass
class BlockColumn:
    """A per-row column made from block header lines (already in SI)."""

    target: str
    source: str
    unit: str | None
    factor: float
    offset: float
    values: np.ndarray


@dataclass
class RawTable:
    """What a reader found: columns by position, the file line of each row, metadata."""

    shape: str
    encoding: str
    headers: list[str]
    columns: list[np.ndarray]
    row_lines: np.ndarray
    text_columns: frozenset[int]
    metadata: dict[str, str]
    header_line: int | None
    headerless: bool = False
    block_columns: list[BlockColumn] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    metadata_lines: dict[str, int] = field(default_factory=dict)


class TextSource:
    """The bytes of a text export, its encoding, and its first lines."""

    def __init__(self, data: bytes, source_name: str, encoding: str | None = None):
        self.source_name = source_name
        enc: Encoding = detect_encoding(data, source_name, encoding)
        self.reported_encoding = enc.name
        self._text: str | None = None
        if enc.ascii_compatible:
            self.raw = data
            self.encoding = enc.name
            self.start = enc.bom_length
            head = data[self.start:self.start + HEAD_BYTES]
            self.head_complete = self.start + HEAD_BYTES >= len(data)
            try:
                head_text = head.decode(enc.name, errors="strict" if self.head_complete else "ignore")
            except UnicodeDecodeError as exc:
                line = head[:exc.start].count(b"\n") + 1
                raise InputFileError(f"cannot decode the bytes as {enc.name}; pass the file's encoding",
                                     path=source_name, line=line) from None
        else:
            try:
                text = data[enc.bom_length:].decode(enc.name)
            except UnicodeDecodeError as exc:
                raise InputFileError(f"cannot decode the bytes as {enc.name} (byte {exc.start}); "
                                     "pass the file's encoding", path=source_name) from None
            text = text.lstrip("\ufeff")
            self._text = text
            self.raw = text.encode("utf-8")
            self.encoding = "utf-8"
            self.start = 0
            self.head_complete = True
            head_text = text
        if head_text.startswith("\ufeff"):
            head_text = head_text[1:]
        if not head_text.strip():
            raise InputFileError("empty file: no text to read", path=source_name)
        self.head_lines = split_lines(head_text)
        if not self.head_complete and self.head_lines:
            self.head_lines.pop()  # possibly cut in the middle
        probe = self.raw[self.start:self.start + 65536]
        self.nl = b"\n" if (b"\n" in probe or b"\r" not in probe) else b"\r"

    def full_lines(self) -> list[str]:
        if self.head_complete:
            return self.head_lines
        if self._text is None:
            try:
                self._text = self.raw[self.start:].decode(self.encoding)
            except UnicodeDecodeError as exc:
                line = self.raw[self.start:self.start + exc.start].count(b"\n") + 1
                raise InputFileError(f"cannot decode the bytes as {self.encoding}; pass the file's "
                                     "encoding", path=self.source_name, line=line) from None
        return split_lines(self._text)

    def line_offset(self, index: int) -> int:
        """Byte offset in ``raw`` of line ``index`` (0-based)."""
        pos = self.start
        for _ in range(index):
            j = self.raw.find(self.nl, pos)
            if j < 0:
                return len(self.raw)
            pos = j + 1
        return pos

    def rows_end(self, offset: int) -> int | None:
        """End of the rows that start at ``offset`` when they run unbroken: the end of the
        file, or the start of trailing comment lines (``# end``).  None when comment lines
        sit between rows (then the rows are gathered line by line)."""
        m = _COMMENT_AFTER.search(self.raw, offset)
        if m is None:
            return len(self.raw)
        if _ROW_AFTER.search(self.raw, m.start() + 1) is None:
            return m.start() + 1
        return None


# ---------------------------------------------------------------------------
# Shared helpers
# ---------------------------------------------------------------------------

def _error(source: TextSource, message: str, line: int | None = None, column: str | None = None):
    return InputFileError(message, path=source.source_name, line=line, column=column)


def _collect_metadata(lines: list[str], indices, *, comments_only_colon: bool
                      ) -> tuple[dict[str, str], dict[str, int]]:
    meta: dict[str, str] = {}
    where: dict[str, int] = {}
    for i in indices:
        ln = lines[i]
        if is_blank(ln) or is_marker(ln):
            continue
        s = strip_comment(ln) if is_comment(ln) else ln.strip()
        if re.fullmatch(r"\[[^\]]*\]", s.strip(" ,;\t")):
            continue  # a section title such as [header]
        if is_comment(ln) and comments_only_colon and not re.match(r"^[^\W\d][^=:]*?\s*[:=]", s):
            continue
        kv = parse_metadata_line(ln)
        if kv is None:
            if s and "title" not in meta and not is_comment(ln):
                meta["title"] = s.strip(" ,;\t")
                where["title"] = i + 1
            continue
        key, value = kv
        k = key
        n = 2
        while k in meta:
            k = f"{key} ({n})"
            n += 1
        meta[k] = value
        where[k] = i + 1
    return meta, where


def _text_columns(sample: list[str], d: Delimiting) -> frozenset[int]:
    """Columns whose first filled cell in the sample is not a number."""
    text: set[int] = set()
    decided: set[int] = set()
    for ln in sample:
        fields = split_fields(ln, d.sep)
        if d.trailing and fields and fields[-1] == "":
            fields = fields[:-1]
        for i, cell in enumerate(fields[:d.ncols]):
            if i in decided:
                continue
            c = cell.strip().strip('"')
            if c in _NA:
                continue
            decided.add(i)
            if not is_number(c):
                text.add(i)
    return frozenset(text)


def _sample_rows(lines: list[str], start: int, limit: int = 50) -> list[str]:
    out = []
    for ln in lines[start:]:
        if is_blank(ln) or is_comment(ln):
            continue
        if not is_data_line(ln) and out:
            break
        out.append(ln)
        if len(out) >= limit:
            break
    return out


def _header_with_units(source: TextSource, lines: list[str], h: int, unit_idx: int | None,
                       d: Delimiting) -> list[str]:
    names = header_fields(lines[h], d, source_name=source.source_name, line_no=h + 1)
    if unit_idx is None:
        return names
    units = header_fields(lines[unit_idx], d, source_name=source.source_name, line_no=unit_idx + 1)
    out = []
    for n, u in zip(names, units):
        u = u.strip().strip("()[]").strip()
        out.append(f"{n} ({u})" if u and split_header(n)[1] is None else n)
    return out


def _unit_row_between(lines: list[str], h: int, f: int, d: Delimiting) -> int | None:
    """Index of a units-only row between the header and the first row, if any."""
    between = [i for i in range(h + 1, f) if not is_blank(lines[i])]
    if len(between) == 1 and is_unit_row(split_fields(lines[between[0]], d.sep)):
        return between[0]
    return None


def _region_table(source: TextSource, lines: list[str], header_idx: int | None, f: int,
                  shape: str, metadata: dict[str, str], where: dict[str, int],
                  warnings: list[str], *, headerless_ok: bool) -> RawTable:
    """The rows run from line ``f`` to the end of the file: parse the bytes directly."""
    sample = _sample_rows(lines, f)
    d = sniff_delimiting(sample, header=lines[header_idx] if header_idx is not None else None,
                         source_name=source.source_name, first_line=f + 1)
    if header_idx is None:
        if not headerless_ok:
            raise _error(source, "no header row above the first row of numbers", line=f + 1)
        headers = [f"col{i + 1}" for i in range(d.ncols)]
    else:
        unit_idx = _unit_row_between(lines, header_idx, f, d)
        for i in range(header_idx + 1, f):
            if not is_blank(lines[i]) and i != unit_idx:
                raise _error(source, f"expected rows of numbers below the header (line {header_idx + 1}), "
                             f"found {lines[i].strip()[:40]!r}", line=i + 1)
        headers = _header_with_units(source, lines, header_idx, unit_idx, d)
    text_cols = _text_columns(sample, d)
    spec = TableSpec(d, tuple(headers), text_cols, header_idx + 1 if header_idx is not None else None,
                     source.source_name)
    offset = source.line_offset(f)
    table = parse_table(source.raw, spec, start=offset, encoding=source.encoding, first_line=f + 1)
    return _raw(shape, source, headers, table, text_cols, metadata, where, header_idx, warnings,
                headerless=header_idx is None)


def _raw(shape, source, headers, table: ParsedTable, text_cols, metadata, where, header_idx,
         warnings, *, headerless=False, blocks=None) -> RawTable:
    return RawTable(shape=shape, encoding=source.reported_encoding, headers=list(headers),
                    columns=table.columns, row_lines=table.row_lines, text_columns=text_cols,
                    metadata=metadata, header_line=header_idx + 1 if header_idx is not None else None,
                    headerless=headerless, block_columns=blocks or [], warnings=warnings,
                    metadata_lines=where)


def _lines_table(source: TextSource, rows: list[tuple[int, str]], spec: TableSpec) -> ParsedTable:
    """Rows gathered from a longer text (comments and blocks removed)."""
    joined = "\n".join(r[1] for r in rows).encode("utf-8")
    numbers = np.fromiter((r[0] for r in rows), dtype=np.int64, count=len(rows))
    return parse_table(joined, spec, encoding="utf-8", line_numbers=numbers)


# ---------------------------------------------------------------------------
# delimited
# ---------------------------------------------------------------------------

def read_delimited(source: TextSource) -> RawTable:
    lines = source.head_lines
    f = first_row(lines)
    if f is None:
        raise _error(source, "no rows of numbers found; expected a header row and rows of numbers")
    h = previous_nonblank(lines, f)
    warnings: list[str] = []
    if h is None:
        raise _error(source, "no header row above the first row of numbers; name the columns in a "
                     "header row or read the file with shape='commented' and a mapping", line=f + 1)
    d = sniff_delimiting(_sample_rows(lines, f), header=lines[h], source_name=source.source_name,
                         first_line=f + 1)
    f = extend_up(lines, f, d)
    h = previous_nonblank(lines, f)
    unit_idx = _unit_row_between(lines, h, f, d)
    if unit_idx is None and previous_nonblank(lines, h) is not None:
        p = previous_nonblank(lines, h)
        if is_unit_row(split_fields(lines[h], d.sep)) and \
                len(split_fields(lines[p], d.sep)) == len(split_fields(lines[h], d.sep)):
            h = p
    above = [i for i in range(h) if not is_blank(lines[i])]
    if above:
        warnings.append(f"lines {above[0] + 1}-{above[-1] + 1} above the header were not read as data")
    return _region_table(source, lines, h, f, "delimited", {}, {}, warnings, headerless_ok=False)


# ---------------------------------------------------------------------------
# sectioned
# ---------------------------------------------------------------------------

def read_sectioned(source: TextSource) -> RawTable:
    lines = source.head_lines
    f0 = first_numeric(lines)
    marker = next((i for i, ln in enumerate(lines) if is_marker(ln) and (f0 is None or i < f0)), None)
    warnings: list[str] = []
    if marker is None:
        f0 = first_row(lines)
        if f0 is None:
            raise _error(source, "no marker line such as [data] and no rows of numbers found")
        h = previous_nonblank(lines, f0)
        if h is None:
            raise _error(source, "no header row above the first row of numbers", line=f0 + 1)
        d = sniff_delimiting(_sample_rows(lines, f0), header=lines[h], source_name=source.source_name,
                             first_line=f0 + 1)
        f0 = extend_up(lines, f0, d)
        h = previous_nonblank(lines, f0)
        p = previous_nonblank(lines, h)
        if p is not None and is_unit_row(split_fields(lines[h], d.sep)) and \
                len(split_fields(lines[p], d.sep)) == len(split_fields(lines[h], d.sep)):
            h = p
        warnings.append(f"no marker line such as [data]; took line {h + 1} as the header")
        meta, where = _collect_metadata(lines, range(h), comments_only_colon=False)
        return _region_table(source, lines, h, f0, "sectioned", meta, where, warnings,
                             headerless_ok=False)
    meta, where = _collect_metadata(lines, range(marker), comments_only_colon=False)
    h = marker + 1
    while h < len(lines) and is_blank(lines[h]):
        h += 1
    if h >= len(lines):
        raise _error(source, f"nothing after the marker line {lines[marker].strip()!r}", line=marker + 1)
    if is_data_line(lines[h]):
        return _region_table(source, lines, None, h, "sectioned", meta, where, warnings,
                             headerless_ok=True)
    f = first_row(lines, h + 1)
    if f is None:
        raise _error(source, f"no rows of numbers below the header (line {h + 1})", line=h + 1)
    d = sniff_delimiting(_sample_rows(lines, f), header=lines[h], source_name=source.source_name,
                         first_line=f + 1)
    f = extend_up(lines, f, d, floor=h)
    return _region_table(source, lines, h, f, "sectioned", meta, where, warnings, headerless_ok=False)


# ---------------------------------------------------------------------------
# commented
# ---------------------------------------------------------------------------

def _looks_like_metadata_comment(line: str) -> bool:
    return bool(re.match(r"^[^\W\d][^=:]*?\s*[:=]\s*\S", strip_comment(line)))


def read_commented(source: TextSource) -> RawTable:
    lines = source.head_lines
    f = first_row(lines)
    if f is None:
        raise _error(source, "no rows of numbers found below the comment lines")
    j = previous_nonblank(lines, f)
    d = sniff_delimiting(_sample_rows(lines, f), header=lines[j] if j is not None else None,
                         source_name=source.source_name, first_line=f + 1)
    f = extend_up(lines, f, d)
    sample = _sample_rows(lines, f)
    j = previous_nonblank(lines, f)
    header_idx: int | None = None
    headers: list[str] | None = None
    if j is not None:
        cand = lines[j]
        if is_comment(cand) and not _looks_like_metadata_comment(cand):
            try:
                names = header_fields(cand, d)
            except InputFileError:
                names = None
            # A comment above the numbers is a header only if it reads like one: some
            # name is a known column or carries a unit ('# resonance sweep' is a remark).
            if names and any(family_of_name(split_header(n)[0]) or split_header(n)[1] for n in names):
                headers, header_idx = names, j
        elif not is_comment(cand):
            headers = header_fields(cand, d, source_name=source.source_name, line_no=j + 1)
            header_idx = j
    meta_end = header_idx if header_idx is not None else f
    meta, where = _collect_metadata(lines, range(meta_end), comments_only_colon=True)
    warnings: list[str] = []
    if headers is None:
        headers = [f"col{i + 1}" for i in range(d.ncols)]
    text_cols = _text_columns(sample, d)
    spec = TableSpec(d, tuple(headers), text_cols,
                     header_idx + 1 if header_idx is not None else None, source.source_name)
    offset = source.line_offset(f)
    end = source.rows_end(offset)
    if end is not None:
        table = parse_table(source.raw, spec, start=offset, end=end, encoding=source.encoding,
                            first_line=f + 1)
    else:
        all_lines = source.full_lines()
        rows = []
        for i in range(f, len(all_lines)):
            ln = all_lines[i]
            if is_blank(ln):
                continue
            if is_comment(ln):
                if _looks_like_metadata_comment(ln):
                    kv = parse_metadata_line(ln)
                    if kv and kv[0] not in meta:
                        meta[kv[0]] = kv[1]
                        where[kv[0]] = i + 1
                continue
            rows.append((i + 1, ln))
        table = _lines_table(source, rows, spec)
    return _raw("commented", source, headers, table, text_cols, meta, where, header_idx, warnings,
                headerless=header_idx is None)


# ---------------------------------------------------------------------------
# blocks
# ---------------------------------------------------------------------------

_BLOCK_KEYS = {
    "temperature": "block_temperature_K", "temp": "block_temperature_K", "t": "block_temperature_K",
    "sampletemperature": "block_temperature_K", "settemperature": "block_temperature_K",
    "field": "block_field_T", "appliedfield": "block_field_T", "h": "block_field_T",
    "b": "block_field_T", "mu0h": "block_field_T", "magneticfield": "block_field_T",
}
_QTY = re.compile(r"^\s*(?P<num>[-+]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?)\s*(?P<unit>.*?)\s*$")


def _block_values(body: str, line_no: int, source: TextSource) -> dict[str, tuple[float, str, str | None, float, float]]:
    """Parse ``temperature = 300 K, field = 0.1 T`` -> {target: (SI value, key, unit, factor, offset)}."""
    out: dict[str, tuple[float, str, str | None, float, float]] = {}
    parts = [p for p in re.split(r"[,;]\s*(?=[^\W\d])", body.strip()) if p.strip()]
    if not parts:
        raise _error(source, "block header without a value; expected e.g. '[block temperature = 300 K]'",
                     line=line_no)
    for part in parts:
        m = re.match(r"^\s*(?P<key>[^\W\d][^=:]*?)\s*[=:]\s*(?P<value>.+?)\s*$", part)
        key, value = (m.group("key"), m.group("value")) if m else (None, part.strip())
        q = _QTY.match(value)
        if not q:
            raise _error(source, f"block header value {value!r} is not a number with a unit; expected "
                         "e.g. 'temperature = 300 K'", line=line_no)
        number = float(q.group("num").replace(",", "."))
        unit = q.group("unit") or None
        norm = re.sub(r"[\s_\-.]", "", key.lower()) if key else None
        target = _BLOCK_KEYS.get(norm) if norm else None
        family = {"block_temperature_K": "temperature", "block_field_T": "field"}.get(target or "")
        if unit is None:
            if target is None and key:
                out["block_" + _slug(key)] = (number, key, None, 1.0, 0.0)
                continue
            raise _error(source, f"block header {key or 'value'} {value!r} has no unit; expected e.g. "
                         "'300 K' or '0.5 T'", line=line_no)
        try:
            conv = si_conversion(unit, f"block header ({key or 'value'})", family)
        except InvalidValue as exc:
            raise _error(source, exc.message, line=line_no) from None
        if target is None:
            if conv.quantity == "temperature" and not key:
                target = "block_temperature_K"
            elif conv.quantity == "field" and not key:
                target = "block_field_T"
            else:
                label = unit_label(conv, unit)
                target = "block_" + _slug(key or conv.quantity) + (f"_{label}" if label else "")
        elif (target == "block_temperature_K" and conv.quantity != "temperature") or \
                (target == "block_field_T" and conv.quantity != "field"):
            raise _error(source, f"block header {key!r}: unit {unit!r} is not a "
                         f"{'temperature' if target == 'block_temperature_K' else 'field'}",
                         line=line_no)
        out[target] = (number * conv.factor + conv.offset, key or conv.quantity, unit, conv.factor,
                       conv.offset)
    return out


def _slug(text: str) -> str:
    s = re.sub(r"[^0-9a-zA-Z]+", "_", str(text).strip().lower()).strip("_")
    return s or "value"


def read_blocks(source: TextSource) -> RawTable:
    lines = source.full_lines()
    starts: list[tuple[int, str]] = []
    for i, ln in enumerate(lines):
        body = block_header_body(ln)
        if body is not None:
            starts.append((i, body))
            continue
        plain = plain_block_header(ln)
        if plain is not None:
            j = i + 1
            while j < len(lines) and (is_blank(lines[j]) or is_comment(lines[j])):
                j += 1
            if j < len(lines) and (is_data_line(lines[j]) or (
                    j + 1 < len(lines) and not is_data_line(lines[j]) and is_data_line(lines[j + 1]))):
                starts.append((i, f"{plain[0]} = {plain[1]}"))
    if not starts:
        raise _error(source, "no block header found; expected lines such as '[block temperature = 300 K]' "
                     "or '# block: temperature = 300 K'")
    meta, where = _collect_metadata(lines, range(starts[0][0]), comments_only_colon=True)
    rows: list[tuple[int, str]] = []
    block_of_row: list[int] = []
    block_info: list[dict] = []
    headers: list[str] | None = None
    header_line: int | None = None
    d: Delimiting | None = None
    for b, (s, body) in enumerate(starts):
        end = starts[b + 1][0] if b + 1 < len(starts) else len(lines)
        block_info.append(_block_values(body, s + 1, source))
        body_lines = [(i, lines[i]) for i in range(s + 1, end)
                      if not is_blank(lines[i]) and not is_comment(lines[i])]
        if not body_lines:
            raise _error(source, "empty block: no rows below the block header", line=s + 1)
        first_i, first = body_lines[0]
        data_lines = body_lines
        if not is_data_line(first) and not (d is not None and is_row_with_typo(first, d)):
            data_lines = body_lines[1:]
            if not data_lines:
                raise _error(source, "block has a header row but no rows of numbers", line=first_i + 1)
            if d is None:
                d = sniff_delimiting([t for _, t in data_lines[:50]], header=first,
                                     source_name=source.source_name,
                                     first_line=data_lines[0][0] + 1)
            names = header_fields(first, d, source_name=source.source_name, line_no=first_i + 1)
            if headers is None:
                headers, header_line = names, first_i + 1
            elif [n.strip().lower() for n in names] != [n.strip().lower() for n in headers]:
                raise _error(source, f"this block's columns ({', '.join(names)}) differ from the first "
                             f"block's (line {header_line}: {', '.join(headers)})", line=first_i + 1)
        elif headers is None:
            raise _error(source, "the first block has no header row naming its columns", line=first_i + 1)
        rows.extend((i + 1, t) for i, t in data_lines)
        block_of_row.extend([b] * len(data_lines))
    assert headers is not None and d is not None
    sample = [t for _, t in rows[:50]]
    text_cols = _text_columns(sample, d)
    spec = TableSpec(d, tuple(headers), text_cols, header_line, source.source_name)
    table = _lines_table(source, rows, spec)
    # Which block each parsed row came from (blank and comment lines never reach the parser).
    line_to_block = np.asarray(block_of_row, dtype=np.int64)
    all_row_lines = np.asarray([r[0] for r in rows], dtype=np.int64)
    idx = np.searchsorted(all_row_lines, table.row_lines)
    row_block = line_to_block[idx]
    targets: dict[str, tuple[str, str | None, float, float]] = {}
    for info in block_info:
        for t, (_, key, unit, factor, offset) in info.items():
            targets.setdefault(t, (key, unit, factor, offset))
    blocks: list[BlockColumn] = []
    for t, (key, unit, factor, offset) in targets.items():
        per_block = np.asarray([info[t][0] if t in info else np.nan for info in block_info], dtype=np.float64)
        blocks.append(BlockColumn(t, f"{BLOCK_SOURCE_PREFIX}{key}", unit, factor, offset,
                                  per_block[row_block]))
    raw = _raw("blocks", source, headers, table, text_cols, meta, where,
               header_line - 1 if header_line else None, [], blocks=blocks)
    return raw


TEXT_READERS = {
    "delimited": read_delimited,
    "sectioned": read_sectioned,
    "commented": read_commented,
    "blocks": read_blocks,
}


def read_text_shape(source: TextSource, shape: str) -> RawTable:
    return TEXT_READERS[shape](source)


"""Looking at the first lines of a text export: line kinds, delimiter, decimal mark, shape.

Only the head of a file is examined (a few tens of KB), so sniffing costs the same
for a ten-line file and a million-line one.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass

from ..errors import InputFileError, InvalidValue
from .spelling import si_conversion

__all__ = [
    "split_lines", "is_blank", "is_comment", "strip_comment", "is_numeric_line", "is_data_line",
    "is_marker", "first_numeric", "previous_nonblank", "first_row", "extend_up", "is_row_with_typo",
    "block_header_body", "plain_block_header", "parse_metadata_line", "Delimiting",
    "sniff_delimiting", "split_fields", "header_fields", "is_unit_row", "sniff_shape",
    "NA_TOKENS", "COMMENT_CHARS",
]

COMMENT_CHARS = "#!;"
NA_TOKENS = ("", "nan", "NaN", "NAN", "NA", "N/A", "n/a", "null", "NULL", "None", "-nan", "-NaN", "--")
_NA_SET = frozenset(NA_TOKENS)

_LINE_SPLIT = re.compile(r"\r\n|\r|\n")
_NUM_ANY = re.compile(r"^[-+]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?$")
_NUM_DOT = re.compile(r"^[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?$")
_NUM_COMMA = re.compile(r"^[-+]?(?:\d+(?:,\d*)?|,\d+)(?:[eE][-+]?\d+)?$")
_HAS_COMMA_DECIMAL = re.compile(r"^[-+]?\d*,\d+(?:[eE][-+]?\d+)?$")
_HAS_DOT_DECIMAL = re.compile(r"^[-+]?\d*\.\d*(?:[eE][-+]?\d+)?$")
_INF = frozenset({"inf", "-inf", "+inf", "Inf", "-Inf", "infinity", "-infinity", "Infinity", "-Infinity"})

_MARKER_WORDS = r"data|measurements?|table|values|readings|results"
_MARKER = re.compile(
    rf"^\s*(?:\[\s*(?:{_MARKER_WORDS})\s*\]|[-=]{{2,}}\s*(?:{_MARKER_WORDS})\s*[-=]{{2,}}|[-=]{{3,}})"
    r"[\s,;]*$", re.IGNORECASE)
_BLOCK_BRACKET = re.compile(r"^\s*\[\s*block\b\s*:?\s*(?P<body>[^\]]*)\]\s*[\s,;]*$", re.IGNORECASE)
_BLOCK_COMMENT = re.compile(r"^\s*[#!;]+\s*block\b\s*[:=]?\s*(?P<body>.*?)\s*$", re.IGNORECASE)
_PLAIN_BLOCK = re.compile(
    r"^\s*(?P<key>temperature|temp|t|field|applied field|h|b|mu0h|μ0h|µ0h)\s*[:=]\s*"
    r"(?P<value>[-+]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?\s*\S.*?)\s*[,;]*\s*$",
    re.IGNORECASE)
_KEY_VALUE = re.compile(r"^\s*(?P<key>[^\W\d][^=:,;\t]*?)\s*(?P<sep>[=:,;\t])\s*(?P<value>.*?)\s*$")


def split_lines(text: str) -> list[str]:
    """Lines of a text, any of the three line-end conventions."""
    lines = _LINE_SPLIT.split(text)
    if lines and lines[-1] == "":
        lines.pop()
    return lines


def is_blank(line: str) -> bool:
    return not line.strip() or not line.strip(" \t,;")


def is_comment(line: str) -> bool:
    s = line.lstrip()
    return bool(s) and s[0] in COMMENT_CHARS


def strip_comment(line: str) -> str:
    return line.lstrip().lstrip(COMMENT_CHARS).strip()


def is_number(token: str) -> bool:
    return bool(_NUM_ANY.match(token)) or token in _INF


def is_numeric_line(line: str) -> bool:
    """A row of numbers (dot or comma decimals; missing values allowed, at least one number)."""
    s = line.strip()
    if not s or s[0] in COMMENT_CHARS:
        return False
    tokens = [t for t in re.split(r"[\s,;]+", s) if t]
    if not tokens:
        return False
    seen = False
    for t in tokens:
        t = t.strip("\"'")
        if is_number(t):
            seen = True
        elif t not in _NA_SET:
            return False
    return seen


def is_data_line(line: str) -> bool:
    """A row of a table: all numbers, or at least two fields with a number first
    (so that a row with a text column, ``300.1,1.2e-3,heating``, still counts)."""
    if is_numeric_line(line):
        return True
    s = line.strip()
    if not s or s[0] in COMMENT_CHARS:
        return False
    tokens = [t for t in re.split(r"[\s,;]+", s) if t]
    if len(tokens) < 2 or not is_number(tokens[0].strip("\"'")):
        return False
    numeric = sum(1 for t in tokens if is_number(t.strip("\"'")) or t in _NA_SET)
    return numeric * 2 > len(tokens) and not re.search(r"[=:]", s)


def is_marker(line: str) -> bool:
    return bool(_MARKER.match(line))


def block_header_body(line: str) -> str | None:
    """Body of a ``[block ...]`` or ``# block: ...`` line, else None."""
    m = _BLOCK_BRACKET.match(line) or _BLOCK_COMMENT.match(line)
    return m.group("body") if m else None


def plain_block_header(line: str) -> tuple[str, str] | None:
    """``Temperature: 300 K`` style line (key, value), else None."""
    m = _PLAIN_BLOCK.match(line)
    return (m.group("key"), m.group("value")) if m else None


def parse_metadata_line(line: str) -> tuple[str, str] | None:
    """``key = value``, ``key: value``, ``key,value`` (also ``;`` or tab); comment marks dropped.

    The earliest separator wins, so ``started,2026-03-04T10:15:00Z`` keeps its time.
    """
    s = strip_comment(line) if is_comment(line) else line.strip()
    m = _KEY_VALUE.match(s)
    if not m:
        return None
    key = m.group("key").strip().strip("\"'").strip()
    value = m.group("value")
    if m.group("sep") in ",;\t":
        parts = [p.strip().strip("\"'") for p in re.split(r"[,;\t]", value)]
        value = " ".join(p for p in parts if p)
    value = value.strip().strip("\"'").strip()
    if not key or not value:
        return None
    return key, value


# ---------------------------------------------------------------------------
# Delimiter and decimal mark
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class Delimiting:
    """How the rows of a table are cut: delimiter (``' '`` = runs of whitespace), decimal mark,
    number of fields, and whether every row ends with a delimiter."""

    sep: str
    decimal: str
    ncols: int
    trailing: bool = False

    @property
    def sep_name(self) -> str:
        return {"\t": "tab", ";": "semicolon", ",": "comma", " ": "whitespace"}[self.sep]


def split_fields(line: str, sep: str) -> list[str]:
    if sep == " ":
        return line.split()
    if '"' in line:
        return [f.strip() for f in next(csv.reader([line], delimiter=sep, skipinitialspace=True))]
    return [f.strip() for f in line.split(sep)]


def sniff_delimiting(lines: list[str], *, header: str | None = None, source_name: str = "",
                     first_line: int | None = None) -> Delimiting:
    """Choose delimiter and decimal mark from sample rows of numbers (and the header).

    Tab, semicolon, comma and runs of whitespace are tried.  Each is scored by how many
    sample rows share the most common field count, how many of their fields are
    numbers, whether that count is at least two, and whether the header splits into
    the same count; the best wins (ties in that order).  One ragged row therefore does
    not change the verdict: it is reported later with its line.  A comma delimiter is
    never combined with a decimal comma.
    """
    sample = [ln for ln in lines if ln.strip()][:50]
    if not sample:
        raise InputFileError("no rows of numbers found", path=source_name or None, line=first_line)
    best: tuple[float, int, Delimiting] | None = None
    for priority, sep in enumerate(("\t", ";", ",", " ")):
        rows = [split_fields(ln, sep) for ln in sample]
        trailing = sep != " " and all(len(r) > 1 and r[-1] == "" for r in rows)
        if trailing:
            rows = [r[:-1] for r in rows]
        counts = [len(r) for r in rows]
        # The most common field count; on a tie, the one the header agrees with, then the larger.
        n = max(set(counts), key=lambda c: (counts.count(c),
                                            header is not None and c >= 2 and _header_count_fits(header, sep, c),
                                            c))
        agree = [r for r in rows if len(r) == n]
        tokens = [t.strip("\"'") for r in agree for t in r]
        if sep == ",":
            numeric = sum(1 for t in tokens if _NUM_DOT.match(t) or t in _INF or t in _NA_SET)
        else:
            numeric = sum(1 for t in tokens if is_number(t) or t in _NA_SET)
        score = len(agree) / len(rows) + numeric / max(len(tokens), 1) + (1.0 if n >= 2 else 0.0)
        if header is not None and n >= 2 and _header_count_fits(header, sep, n):
            score += 1.0
        if best is None or score > best[0] + 1e-12:
            decimal = "."
            if sep != ",":
                has_comma = any(_HAS_COMMA_DECIMAL.match(t) for t in tokens)
                has_dot = any(_HAS_DOT_DECIMAL.match(t) and "." in t for t in tokens)
                if has_comma and not has_dot:
                    decimal = ","
            best = (score, priority, Delimiting(sep, decimal, n, trailing))
    assert best is not None
    return best[2]


def _header_count_fits(header: str, sep: str, n: int) -> bool:
    try:
        header_fields(header, Delimiting(sep, ".", n))
        return True
    except InputFileError:
        return False


def header_fields(line: str, d: Delimiting, *, source_name: str = "", line_no: int | None = None
                  ) -> list[str]:
    """Column names from a header line, cut like the rows it sits above."""
    text = strip_comment(line) if is_comment(line) else line.strip()
    if d.sep != " ":
        names = [f.strip().strip("\"'").strip() for f in split_fields(text, d.sep)]
        while len(names) > d.ncols and names[-1] == "":
            names.pop()
        if len(names) == d.ncols:
            return names
    else:
        for names in (text.split(), re.split(r"\s{2,}|\t", text), _merge_unit_tokens(text.split())):
            names = [n.strip().strip("\"'") for n in names if n.strip()]
            if len(names) == d.ncols:
                return names
        names = re.split(r"\s{2,}|\t", text)
    raise InputFileError(
        f"the header has {len(names)} names ({', '.join(repr(n) for n in names[:8])}) but the rows "
        f"have {d.ncols} fields ({d.sep_name}-delimited)", path=source_name or None, line=line_no)


def _merge_unit_tokens(tokens: list[str]) -> list[str]:
    """'T (K) M (emu)' split on spaces -> ['T (K)', 'M (emu)']."""
    out: list[str] = []
    for t in tokens:
        if out and (t[0] in "([" or out[-1].count("(") > out[-1].count(")")
                    or out[-1].count("[") > out[-1].count("]")):
            out[-1] = out[-1] + " " + t
        else:
            out.append(t)
    return out


def is_unit_row(fields: list[str]) -> bool:
    """A second header row that holds only units (``K, emu, Oe``)."""
    filled = [f.strip().strip("\"'") for f in fields if f.strip().strip("\"'")]
    if not filled:
        return False
    for f in filled:
        if is_number(f):
            return False
        inner = f.strip()
        try:
            si_conversion(inner, "unit row", None)
        except InvalidValue:
            # 'C' alone is ambiguous without a family but is still a unit.
            if inner not in ("C", "F"):
                return False
    return True


# ---------------------------------------------------------------------------
# Shape
# ---------------------------------------------------------------------------

def first_numeric(lines: list[str], start: int = 0) -> int | None:
    """Index of the first row of a table (see :func:`is_data_line`) from ``start``."""
    for i in range(start, len(lines)):
        if is_data_line(lines[i]):
            return i
    return None


def is_row_with_typo(line: str, d: Delimiting | None = None) -> bool:
    """A row of the table that holds a non-number somewhere: cut like the rows (same field
    count when ``d`` is known), at least two fields, at least one of them a number, and
    nothing that looks like ``key = value`` metadata."""
    if is_blank(line) or is_comment(line) or re.search(r"[=:]", line):
        return False
    if d is not None:
        fields = split_fields(line, d.sep)
        if d.trailing and fields and fields[-1] == "":
            fields = fields[:-1]
        if len(fields) != d.ncols:
            return False
    else:
        fields = [t for t in re.split(r"[\s,;]+", line.strip()) if t]
    return len(fields) >= 2 and any(is_number(f.strip().strip("\"'")) for f in fields)


def first_row(lines: list[str], start: int = 0) -> int | None:
    """First row of a table from ``start``: the first row of numbers, or failing that the
    first row with a typo (some field a number, see :func:`is_row_with_typo`)."""
    f = first_numeric(lines, start)
    if f is not None:
        return f
    return next((i for i in range(start, len(lines)) if is_row_with_typo(lines[i])), None)


def extend_up(lines: list[str], f: int, d: Delimiting, floor: int = 0) -> int:
    """Move the first row up over rows with a typo, keeping a header line at or above ``floor``.

    So that ``oops,1.5`` just below the header is read (and reported) as a row, not taken
    for the header.
    """
    j = previous_nonblank(lines, f)
    while j is not None and j > floor and is_row_with_typo(lines[j], d):
        p = previous_nonblank(lines, j)
        if p is None or p < floor:
            break
        f, j = j, p
    return f


def previous_nonblank(lines: list[str], i: int) -> int | None:
    j = i - 1
    while j >= 0 and is_blank(lines[j]):
        j -= 1
    return j if j >= 0 else None


def _plain_block_count(lines: list[str]) -> int:
    count = 0
    for i, ln in enumerate(lines):
        if plain_block_header(ln) is None:
            continue
        j = i + 1
        while j < len(lines) and is_blank(lines[j]):
            j += 1
        if j < len(lines) and (is_data_line(lines[j]) or (
                j + 1 < len(lines) and not is_data_line(lines[j]) and is_data_line(lines[j + 1]))):
            count += 1
    return count


def sniff_shape(lines: list[str]) -> str:
    """Guess the shape of a text export from its first lines (see the package docstring)."""
    if any(block_header_body(ln) is not None for ln in lines):
        return "blocks"
    f = first_row(lines)
    if f is None:
        return "delimited"
    try:
        f = extend_up(lines, f, sniff_delimiting([lines[f]]))
    except InputFileError:
        pass
    if any(is_marker(ln) for ln in lines[:f]):
        return "sectioned"
    if _plain_block_count(lines) >= 2:
        return "blocks"
    above = [ln for ln in lines[:f] if not is_blank(ln)]
    if not above:
        return "commented"
    last = above[-1]
    if is_comment(last) or all(is_comment(ln) for ln in above):
        return "commented"
    rest = above[:-1]
    if rest and not is_comment(rest[-1]):
        d = None
        try:
            d = sniff_delimiting([lines[f]])
        except InputFileError:
            pass
        if d is not None and is_unit_row(split_fields(last, d.sep)) and \
                len(split_fields(rest[-1], d.sep)) == len(split_fields(last, d.sep)):
            rest = rest[:-1]
    if not rest:
        return "delimited"
    if all(is_comment(ln) for ln in rest):
        return "commented"
    return "sectioned"

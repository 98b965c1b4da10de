"""Bytes to text: byte-order marks, the binary check, UTF-8 then Latin-1.

Order matters: a UTF-8/UTF-16/UTF-32 byte-order mark is honoured *before* the
binary check (UTF-16 text is full of NUL bytes); then bytes with NULs or mostly
control characters are refused as binary; then UTF-8 is tried, and Latin-1 is
the fallback for text that passed the binary check (every byte decodes, so
only text that looks like text gets there).  UTF-16 without a mark is refused
with advice to name the encoding.  An .xlsx workbook (ZIP signature) is not
text and is read by the spreadsheet reader, never decoded here.
"""

from __future__ import annotations

import codecs
from dataclasses import dataclass

from ..errors import InputFileError, InvalidValue

__all__ = ["decode_text", "detect_encoding", "is_zip", "Encoding", "ZIP_SIGNATURE"]

ZIP_SIGNATURE = b"PK\x03\x04"

_BOMS: tuple[tuple[bytes, str], ...] = (
    (codecs.BOM_UTF32_LE, "utf-32-le"),   # before UTF-16 LE: it starts with the same two bytes
    (codecs.BOM_UTF32_BE, "utf-32-be"),
    (codecs.BOM_UTF8, "utf-8"),
    (codecs.BOM_UTF16_LE, "utf-16-le"),
    (codecs.BOM_UTF16_BE, "utf-16-be"),
)

# Signatures of common binary files, for a message that says what the file is.
_KNOWN_BINARY: tuple[tuple[bytes, str], ...] = (
    (b"\xd0\xcf\x11\xe0", "an old binary spreadsheet or document (save it as .xlsx or as text)"),
    (b"%PDF", "a PDF document"),
    (b"\x89PNG", "a PNG image"),
    (b"\xff\xd8\xff", "a JPEG image"),
    (b"\x1f\x8b", "a gzip-compressed file (unpack it first)"),
    (b"BZh", "a bzip2-compressed file (unpack it first)"),
    (b"\xfd7zXZ", "an xz-compressed file (unpack it first)"),
)

_CONTROL_OK = frozenset(b"\t\n\r\x0b\x0c\x1a")


@dataclass(frozen=True)
class Encoding:
    """How the bytes are text: codec name and the length of the byte-order mark."""

    name: str
    bom_length: int = 0

    @property
    def ascii_compatible(self) -> bool:
        """True when line ends and digits are single ASCII bytes (UTF-8, Latin-1...)."""
        return not self.name.startswith(("utf-16", "utf-32"))


def is_zip(data: bytes) -> bool:
    return data[:4] == ZIP_SIGNATURE


def _line_of_offset(data: bytes, offset: int) -> int:
    return data.count(b"\n", 0, offset) + 1


def _looks_like_bomless_utf16(sample: bytes) -> str | None:
    """'utf-16-le' or 'utf-16-be' when NULs sit at every other byte, else None."""
    if len(sample) < 4:
        return None
    even = sample[0::2]
    odd = sample[1::2]
    n = min(len(even), len(odd))
    if n == 0:
        return None
    nul_odd = odd.count(0) / len(odd)
    nul_even = even.count(0) / len(even)
    if nul_odd > 0.6 and nul_even < 0.1:
        return "utf-16-le"
    if nul_even > 0.6 and nul_odd < 0.1:
        return "utf-16-be"
    return None


def _refuse_binary(data: bytes, source_name: str, sample_size: int) -> None:
    for sig, what in _KNOWN_BINARY:
        if data.startswith(sig):
            raise InputFileError(f"this is {what}, not a text export", path=source_name)
    sample = data[:sample_size]
    if b"\x00" in data:
        guess = _looks_like_bomless_utf16(sample)
        if guess:
            raise InputFileError(
                f"looks like UTF-16 text without a byte-order mark; pass the encoding "
                f"explicitly (encoding='{guess}')", path=source_name)
        raise InputFileError(
            f"binary file (NUL byte at line {_line_of_offset(data, data.index(0))}); "
            "expected a text export or an .xlsx workbook", path=source_name)
    control = sum(1 for b in sample if b < 32 and b not in _CONTROL_OK) + sample.count(0x7F)
    if sample and control / len(sample) > 0.10:
        raise InputFileError(
            f"binary file ({control} control characters in the first {len(sample)} bytes); "
            "expected a text export or an .xlsx workbook", path=source_name)


def detect_encoding(data: bytes, source_name: str, encoding: str | None = None, *,
                    sample_size: int = 8192) -> Encoding:
    """Decide how ``data`` is text, without decoding more than needed.

    Raises
    ------
    InputFileError
        Empty, binary or undecodable input.
    InvalidValue
        An ``encoding`` name Python does not know.
    """
    if encoding is not None:
        try:
            name = codecs.lookup(encoding).name
        except LookupError:
            raise InvalidValue(f"encoding: unknown encoding {encoding!r}; use e.g. 'utf-8', "
                               "'latin-1', 'utf-16-le'", field="encoding") from None
        # An explicit codec decodes the mark itself (or leaves U+FEFF, which is dropped
        # after decoding); only a UTF-8 mark is skipped here, for byte offsets.
        bom = len(codecs.BOM_UTF8) if name == "utf-8" and data.startswith(codecs.BOM_UTF8) else 0
        chosen = Encoding(name, bom)
        if chosen.ascii_compatible:
            # Only UTF-16/32 text holds NUL bytes; in any other codec they mean a binary file.
            _refuse_binary(data, source_name, sample_size)
        return chosen
    for mark, name in _BOMS:
        if data.startswith(mark):
            return Encoding(name, len(mark))
    _refuse_binary(data, source_name, sample_size)
    if data.isascii():
        return Encoding("utf-8", 0)
    try:
        # Decoding validates; the text itself is made again where it is needed.
        data.decode("utf-8")
        return Encoding("utf-8", 0)
    except UnicodeDecodeError:
        return Encoding("latin-1", 0)


def decode_text(data: bytes, source_name: str, encoding: str | None = None) -> tuple[str, str]:
    """Decode an export to text.

    Parameters
    ----------
    data : bytes
        The raw file.
    source_name : str
        File name for error messages.
    encoding : str, optional
        Force a codec (e.g. ``'utf-16-le'`` for UTF-16 written without a mark).

    Returns
    -------
    (text, encoding_used)

    Raises
    ------
    InputFileError
        Empty file, binary file, a spreadsheet passed as text, or bytes that do not
        decode with the given encoding (the message names the line).
    """
    if is_zip(data):
        raise InputFileError("this is a ZIP archive (an .xlsx workbook?), not a text export; "
                             "read it with shape='spreadsheet'", path=source_name)
    enc = detect_encoding(data, source_name, encoding)
    text = _decode(data, enc, source_name)
    if not text.strip():
        raise InputFileError("empty file: no text to read", path=source_name)
    if encoding is not None:
        _refuse_control_text(text, source_name)
    return text, enc.name


def _decode(data: bytes, enc: Encoding, source_name: str) -> str:
    try:
        text = data[enc.bom_length:].decode(enc.name)
    except UnicodeDecodeError as exc:
        line = data[:exc.start].decode(enc.name, errors="replace").count("\n") + 1
        raise InputFileError(f"cannot decode byte {data[exc.start:exc.start + 1]!r} as {enc.name}; "
                             "pass the file's encoding (e.g. encoding='latin-1')",
                             path=source_name, line=line) from None
    return text[1:] if text.startswith("\ufeff") else text


def _refuse_control_text(text: str, source_name: str) -> None:
    sample = text[:8192]
    bad = sum(1 for ch in sample if (ord(ch) < 32 and ch not in "\t\n\r\x0b\x0c\x1a") or ch == "\x7f")
    if sample and bad / len(sample) > 0.10:
        raise InputFileError("the text decodes to mostly control characters; is the encoding right?",
                             path=source_name)

"""Exceptions a user can act on.

Every error raised for bad input is a :class:`MagvaultError`; its message is one
line that names the file, line, column or field and says what was expected.  The
CLI turns these into exit code 1, the web app into an inline message or a 4xx.
"""

from __future__ import annotations


class MagvaultError(Exception):
    """Base class: bad input or a request the vault refuses."""

    def __init__(self, message: str, *, field: str | None = None):
        super().__init__(message)
        self.field = field

    @property
    def message(self) -> str:
        return str(self.args[0])


class InvalidValue(MagvaultError):
    """A quantity, unit, code, matrix, date or option value is not acceptable."""


class NotFound(MagvaultError):
    """A specimen, run, profile or other record named by the user does not exist."""


class Duplicate(MagvaultError):
    """The record already exists (a specimen code, the same bytes for the same specimen)."""


class InputFileError(MagvaultError):
    """A file cannot be read as an export; the message names file, line and column."""

    def __init__(self, message: str, *, path: str | None = None, line: int | None = None,
                 column: str | None = None):
        where = ", ".join(p for p in (
            path,
            f"line {line}" if line is not None else None,
            f"column {column!r}" if column is not None else None,
        ) if p)
        super().__init__(f"{where}: {message}" if where else message)
        self.path, self.line, self.column = path, line, column


class MissingDatabase(MagvaultError):
    """The database does not exist and was not asked to be created."""

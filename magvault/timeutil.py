"""Dates and times: ISO 8601 in, UTC-aware datetimes inside, ISO 8601 with Z out."""

from __future__ import annotations

import datetime as dt

from .errors import InvalidValue

UTC = dt.timezone.utc


def parse_datetime(text: str | dt.datetime | dt.date, *, field: str = "date") -> dt.datetime:
    """Read an ISO 8601 date or date-time; without a zone it is taken as UTC.

    Accepts ``2026-11-03``, ``2026-11-03T10:00``, ``2026-11-03T10:00Z`` and
    ``2026-11-03T12:00+02:00``.
    """
    if isinstance(text, dt.datetime):
        value = text
    elif isinstance(text, dt.date):
        value = dt.datetime(text.year, text.month, text.day)
    else:
        raw = str(text).strip()
        if not raw:
            raise InvalidValue(f"{field}: empty; expected an ISO 8601 date such as 2026-11-03T10:00Z", field=field)
        try:
            value = dt.datetime.fromisoformat(raw.replace("z", "Z").replace("Z", "+00:00"))
        except ValueError:
            raise InvalidValue(f"{field}: cannot read {raw!r} as an ISO 8601 date or date-time "
                               "(e.g. 2026-11-03 or 2026-11-03T10:00Z)", field=field) from None
    if value.tzinfo is None:
        value = value.replace(tzinfo=UTC)
    return value.astimezone(UTC)


def iso(value: dt.datetime | None) -> str | None:
    if value is None:
        return None
    if value.tzinfo is None:
        value = value.replace(tzinfo=UTC)
    return value.astimezone(UTC).isoformat().replace("+00:00", "Z")


def now() -> dt.datetime:
    return dt.datetime.now(UTC)

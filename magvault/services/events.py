"""The append-only audit log: one row per create, update, retract and supersede."""

from __future__ import annotations

import datetime as dt
import getpass
import math
import os
from typing import Any

from sqlalchemy.orm import Session

from ..store.models import Event


def current_user() -> str:
    """The acting user: MAGVAULT_USER, else the local operating-system user (until accounts exist)."""
    name = os.environ.get("MAGVAULT_USER")
    if name:
        return name[:64]
    try:
        return getpass.getuser()[:64]
    except Exception:  # no login name in some containers
        return "unknown"


def jsonable(value: Any) -> Any:
    """Plain JSON values for the log (datetimes as ISO 8601, NaN as None)."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, dt.datetime):
        from ..timeutil import iso
        return iso(value)
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if hasattr(value, "item") and callable(value.item):  # numpy scalars
        return jsonable(value.item())
    return value


def record(session: Session, action: str, entity: str, entity_id: Any = None, *,
           specimen_code: str | None = None, before: dict | None = None, after: dict | None = None,
           message: str | None = None, user: str | None = None) -> Event:
    event = Event(user_name=user or current_user(), action=action, entity=entity,
                  entity_id=None if entity_id is None else str(entity_id), specimen_code=specimen_code,
                  before=jsonable(before) if before is not None else None,
                  after=jsonable(after) if after is not None else None, message=message)
    session.add(event)
    return event

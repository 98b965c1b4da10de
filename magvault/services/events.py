"""The append-only audit log: one row per create, update, retract and supersede."""

from __future__ import annotations

import getpass
import os
from typing import Any

from sqlalchemy.orm import Session

from ..jsonutil import jsonable
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


def record(session: Session, action: str, entity: str, entity_id: Any = None, *,
           specimen_code: str | None = None, before: dict | None = None, after: dict | None = None,
           message: str | None = None, user: str | None = None) -> Event:
    event = Event(user_name=user or current_user(), action=action, entity=entity,
                  entity_id=None if entity_id is None else str(entity_id), specimen_code=specimen_code,
                  before=jsonable(before) if before is not None else None,
                  after=jsonable(after) if after is not None else None, message=message)
    session.add(event)
    return event

"""Saved queries: a name, the query, its parameters; re-run by name from anywhere."""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from ..errors import Duplicate, InvalidValue, NotFound
from ..store.models import SavedQuery
from ..timeutil import iso
from . import events

QUERIES = ("shifts", "coupled", "correlate", "composition_map", "overlay")


def save(session: Session, name: str, query: str, parameters: dict[str, Any], *, replace: bool = False) -> None:
    if query not in QUERIES:
        raise InvalidValue(f"query: {query!r} is not one of {', '.join(QUERIES)}", field="query")
    row = session.scalar(select(SavedQuery).where(SavedQuery.name == name))
    params = events.jsonable(parameters)
    if row is not None and not replace:
        raise Duplicate(f"a saved query named {name!r} exists already; choose another name", field="name")
    if row is None:
        session.add(SavedQuery(name=name, query=query, parameters=params, created_by=events.current_user()))
        events.record(session, "create", "saved_query", name, after={"query": query, "parameters": params})
    else:
        before = {"query": row.query, "parameters": row.parameters}
        row.query, row.parameters = query, params
        events.record(session, "update", "saved_query", name, before=before,
                      after={"query": query, "parameters": params})


def delete(session: Session, name: str) -> dict[str, Any]:
    """Remove a saved query; the event log keeps what it was, so it can be saved again by hand."""
    row = session.scalar(select(SavedQuery).where(SavedQuery.name == name))
    if row is None:
        raise NotFound(f"no saved query named {name!r}; `magvault query list` shows them", field="name")
    doc = _doc(row)
    events.record(session, "delete", "saved_query", name, before={"query": row.query, "parameters": row.parameters})
    session.delete(row)
    return doc


def get(session: Session, name: str) -> dict[str, Any]:
    row = session.scalar(select(SavedQuery).where(SavedQuery.name == name))
    if row is None:
        raise NotFound(f"no saved query named {name!r}; `magvault query list` shows them", field="name")
    return _doc(row)


def all_saved(session: Session) -> list[dict[str, Any]]:
    return [_doc(r) for r in session.scalars(select(SavedQuery).order_by(SavedQuery.name))]


def _doc(row: SavedQuery) -> dict[str, Any]:
    return {"name": row.name, "query": row.query, "parameters": row.parameters, "created_at": iso(row.created_at),
            "created_by": row.created_by}

"""The audit log: every change, newest first, filterable by specimen, user and date."""

from __future__ import annotations

import json

from flask import Blueprint, current_app, render_template, request

from magvault.errors import MagvaultError

from ..forms import EventsFilter, clean, show_error
from .common import positive_int, records, vault

bp = Blueprint("events", __name__)

MAX_LIMIT = 5000


@bp.get("/events")
def index():
    form = EventsFilter(formdata=request.args)
    form.validate()
    default = int(current_app.config["MAGVAULT_PAGE_SIZE"]) * 2
    limit = positive_int(form.limit.data, default)
    if limit is None or limit > MAX_LIMIT:
        form.limit.errors = [f"show at most: expected a whole number from 1 to {MAX_LIMIT}, "
                             f"got {form.limit.data!r}"]
        limit = default
    args = dict(specimen=clean(form.specimen.data) if not form.specimen.errors else None,
                user=clean(form.user.data) if not form.user.errors else None,
                since=clean(form.since.data), until=clean(form.until.data))
    rows = []
    try:
        rows = records(vault().events(limit=limit + 1, **args))
    except MagvaultError as exc:
        show_error(form, exc)
        bad = exc.field if exc.field in ("since", "until") else None
        if bad:
            args[bad] = None
            rows = records(vault().events(limit=limit + 1, **args))
    more = len(rows) > limit
    rows = rows[-limit:][::-1]
    for row in rows:
        row["before_text"] = _pretty(row.get("before"))
        row["after_text"] = _pretty(row.get("after"))
    return render_template("events.html", form=form, rows=rows, limit=limit, more=more,
                           filtered=any(args.values()))


def _pretty(value) -> str | None:
    if value is None:
        return None
    return json.dumps(value, indent=1, ensure_ascii=False, sort_keys=True, default=str)

"""The collection: every specimen, searchable, filterable and sortable, with counts."""

from __future__ import annotations

from collections import Counter
from typing import Any

import pandas as pd
from flask import Blueprint, current_app, render_template, request

from magvault.store.models import RUN_KINDS

from ..forms import CollectionFilter, choices
from ..selection import SORT_KEYS, Selection, select_specimens
from .common import positive_int, records, vault

bp = Blueprint("collection", __name__)

SORT_LABELS = {"code": "code", "parent": "parent", "kind": "kind", "mass": "mass", "origin": "origin",
               "x": "x (composition)", "superstructure": "superstructure", "runs": "number of runs",
               "created": "date registered"}


def transition_summary(frame: pd.DataFrame) -> dict[str, list[dict[str, Any]]]:
    """Per specimen, the newest primary estimate of each transition kind and branch."""
    out: dict[str, list[dict[str, Any]]] = {}
    if frame.empty:
        return out
    newest = frame.sort_values(["started", "run"], na_position="first", kind="stable")
    newest = newest.assign(branch_key=newest["branch"].fillna(""))
    newest = newest.drop_duplicates(["specimen", "kind", "branch_key"], keep="last")
    for row in records(newest.sort_values(["specimen", "kind", "branch_key"], kind="stable")):
        out.setdefault(row["specimen"], []).append(row)
    return out


@bp.get("/")
def index():
    v = vault()
    frame = v.specimens()
    kinds = v.kinds()
    form = CollectionFilter(formdata=request.args)
    origins = sorted({o["name"] for o in v.origins()})
    labels = sorted({s for s in frame["superstructure"].dropna().unique()}) if not frame.empty else []
    form.origin.choices = choices([("", "any origin")] + [(o, o) for o in origins])
    form.superstructure.choices = choices([("", "any")] + [(s, s) for s in labels])
    form.run_kind.choices = choices([("", "any")] + [(k, k) for k in RUN_KINDS])
    form.transition.choices = choices([("", "any")] + [(k["id"], f"{k['id']}: {k['name']}") for k in kinds])
    form.sort.choices = choices((k, SORT_LABELS[k]) for k in SORT_KEYS)
    form.validate()
    errors = _check_choices(form, origins, labels, [k["id"] for k in kinds])

    sel = Selection(
        q=(form.q.data or "").strip() or None if not form.q.errors else None,
        origin=form.origin.data or None if not form.origin.errors else None,
        superstructure=form.superstructure.data or None if not form.superstructure.errors else None,
        x_min=form.x_min.data if not form.x_min.errors else None,
        x_max=form.x_max.data if not (form.x_max.errors or form.x_min.errors) else None,
        run_kind=form.run_kind.data or None if not form.run_kind.errors else None,
        transition=form.transition.data or None if not form.transition.errors else None,
        sort=form.sort.data if form.sort.data in SORT_KEYS else "code",
        descending=form.order.data == "desc",
    )
    with_run_kind = set(v.runs(kind=sel.run_kind)["specimen"]) if sel.run_kind else None
    primaries = v.transitions(primary_only=True)
    with_transition = (set(primaries.loc[primaries["kind"] == sel.transition, "specimen"])
                       if sel.transition else None)
    chosen = select_specimens(frame, sel, with_run_kind=with_run_kind, with_transition=with_transition)

    page_size = int(current_app.config["MAGVAULT_PAGE_SIZE"])
    n_pages = max(1, -(-len(chosen) // page_size))
    page = positive_int(form.page.data, 1)
    if page is None or page > n_pages:
        form.page.errors = [f"page: expected a whole number from 1 to {n_pages}, got {form.page.data!r}"]
        page = 1
    rows = records(chosen.iloc[(page - 1) * page_size: page * page_size])

    runs = v.runs()
    shown = set(chosen["code"])
    counts = {
        "specimens": len(frame), "shown": len(chosen),
        "runs": len(runs), "runs_shown": int(runs["specimen"].isin(shown).sum()) if not runs.empty else 0,
        "by_kind": Counter(runs.loc[runs["specimen"].isin(shown), "kind"]) if not runs.empty else Counter(),
        "by_status": Counter(runs["status"]) if not runs.empty else Counter(),
    }
    query = {k: v_ for k, v_ in request.args.items() if k in form._fields and k not in ("sort", "order", "page")}
    return render_template("collection.html", form=form, rows=rows, counts=counts, sel=sel,
                           transitions=transition_summary(primaries), page=page, n_pages=n_pages,
                           query=query, errors=errors, sort_labels=SORT_LABELS,
                           filtered=any([sel.q, sel.origin, sel.superstructure, sel.x_min is not None,
                                         sel.x_max is not None, sel.run_kind, sel.transition]))


def _check_choices(form: CollectionFilter, origins, labels, kinds) -> bool:
    """Choices from the query string must be known ones; an unknown one is an inline error."""
    checks = [(form.origin, origins, "origin"), (form.superstructure, labels, "superstructure"),
              (form.run_kind, RUN_KINDS, "run kind"), (form.transition, kinds, "transition"),
              (form.sort, list(SORT_KEYS), "sort by"), (form.order, ["asc", "desc"], "order")]
    bad = False
    for field, allowed, label in checks:
        if field.data and field.data not in allowed:
            shown = ", ".join(list(allowed)[:12]) or "none recorded yet"
            field.errors = [*field.errors, f"{label}: {field.data!r} is not one of: {shown}"]
            bad = True
    return bad or bool(form.errors)

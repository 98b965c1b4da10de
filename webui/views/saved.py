"""Saved queries: the same named queries as ``magvault query`` and ``Vault.saved_queries()``.

Saving takes the settings of the page it was sent from (read again through that
page's own form, so only settings the page understands are stored, under the
names the Vault's queries take); opening one rebuilds that page's address.
"""

from __future__ import annotations

import json
from typing import Any
from urllib.parse import parse_qsl

from flask import Blueprint, flash, redirect, render_template, request, url_for
from werkzeug.datastructures import MultiDict

from magvault.errors import MagvaultError, NotFound

from . import coupled, overlay, phase_map, shifts
from .common import vault
from .explore_forms import DeleteSavedForm, SaveQueryForm, page_message

bp = Blueprint("saved", __name__)

#: Saved query kind -> (page module, endpoint, the page's name).
PAGES = {
    "shifts": (shifts, "shifts.index", "Shifts"),
    "coupled": (coupled, "coupled.index", "Coupled"),
    "composition_map": (phase_map, "phase_map.index", "Composition map"),
    "overlay": (overlay, "overlay.index", "Overlay"),
}


def page_url(endpoint: str, args: dict[str, Any]) -> str:
    """url_for with the page's own settings only (names starting with "_" mean something to url_for itself)."""
    return url_for(endpoint, **{str(k): v for k, v in args.items() if not str(k).startswith("_")})


def address(doc: dict[str, Any]) -> str | None:
    """The dashboard page that shows a saved query, or None when no page draws it."""
    query, params = doc["query"], doc.get("parameters") or {}
    if query in PAGES:
        module, endpoint, _ = PAGES[query]
        return page_url(endpoint, module.page_args(params))
    if query == "correlate" and (params.get("against") or "x") == "x" and params.get("kind"):
        # A line against composition is what the shift explorer draws in trend mode.
        args = {"kind": params["kind"], "against": "trend"}
        args.update({k: params[k] for k in ("sigma", "branch") if params.get(k) not in (None, "")})
        return page_url("shifts.index", args)
    return None


def described(doc: dict[str, Any]) -> str:
    params = doc.get("parameters") or {}
    return ", ".join(f"{k} = {json.dumps(v) if not isinstance(v, str) else v}" for k, v in sorted(params.items()))


@bp.get("/saved")
def index():
    rows = []
    for doc in vault().saved_queries():
        page = PAGES[doc["query"]][2] if doc["query"] in PAGES else ("Shifts" if doc["query"] == "correlate" else None)
        rows.append({**doc, "href": address(doc), "text": described(doc), "page": page,
                     "as_selection": url_for("overlay.index", source="saved", saved=doc["name"])})
    return render_template("saved.html", rows=rows, delete_form=DeleteSavedForm(formdata=None))


@bp.post("/saved/delete")
def delete():
    form = DeleteSavedForm()
    name = (form.name.data or "").strip()
    if not form.validate_on_submit() or not name:
        flash("delete: the form was incomplete; reload the page and try again", "error")
        return redirect(url_for("saved.index"))
    try:
        doc = vault().delete_saved_query(name)
    except MagvaultError as exc:
        flash(page_message(exc), "error")
    else:
        flash(f"Deleted “{name}” ({doc['query']}); the events log keeps its settings.", "ok")
    return redirect(url_for("saved.index"))


@bp.post("/saved")
def create():
    form = SaveQueryForm()
    page = form.page.data if form.page.data in PAGES else None
    if not form.validate_on_submit() or page is None:
        flash("save: the form was incomplete; reload the page and save again", "error")
        return redirect(url_for("saved.index"))
    module, endpoint, label = PAGES[page]
    args = MultiDict(parse_qsl(form.args.data or "", keep_blank_values=True))
    back = page_url(endpoint, args.to_dict(flat=False))
    name = (form.name.data or "").strip()
    if not name:
        flash("name: give the query a name (letters, digits, spaces; 64 characters at most)", "error")
        return redirect(back + "#save")
    v = vault()
    parameters = module.saved_parameters(v, args)
    if not parameters:
        flash(f"{label}: these settings are incomplete, so there is nothing to save yet", "error")
        return redirect(back + "#save")
    try:
        v.save_query(name, page, parameters, replace=bool(form.replace.data))
    except MagvaultError as exc:
        message = page_message(exc)
        if "exists already" in message:
            message += " (or tick “replace”)"
        flash(message if message.startswith("name") else f"name: {message}", "error")
        return redirect(back + "#save")
    where = ("reopen it from Saved queries" if page == "overlay"
             else f"reopen it from Saved queries, or run `magvault query run {name}`")
    flash(f"Saved as “{name}”: {where}.", "ok")
    return redirect(back)


@bp.get("/saved/open")
def open_saved():
    name = (request.args.get("name") or "").strip()
    if not name:
        flash("name: choose a saved query to open", "error")
        return redirect(url_for("saved.index"))
    try:
        doc = vault().saved_query(name)
    except NotFound:
        flash(f"name: no saved query named “{name}”; the list below shows them", "error")
        return redirect(url_for("saved.index"))
    target = address(doc)
    if target is None:
        flash(f"“{name}” is a {doc['query']} query that no page draws; run it with `magvault query run {name}`",
              "warn")
        return redirect(url_for("saved.index"))
    return redirect(target)

"""A run: its plots, conditions, raw file, derivations, and the actions that change its status."""

from __future__ import annotations

import io
import re

from flask import Blueprint, Response, abort, current_app, flash, redirect, render_template, send_file, url_for

from magvault.analysis.pipeline import ANALYSED_KINDS
from magvault.errors import MagvaultError

from .. import security
from ..figures import run_panels, script_json, track_panels
from ..forms import DeriveForm, ImageForm, RetractForm, SupersedeForm, choices, clean, show_error
from .common import records, vault

bp = Blueprint("runs", __name__)

# Ids are 32-bit integers in the database; larger numbers in a URL are simply not found.
RUN_ID = "<int(min=1, max=2147483647):run_id>"
SHA256 = re.compile(r"^[0-9a-fA-F]{64}$")
INACTIVE = ("retracted", "superseded")


def run_context(run_id: int, *, retract_form=None, supersede_form=None, image_form=None) -> dict:
    v = vault()
    doc = v.run(run_id)
    latest = doc["series"][-1] if doc["series"] else None
    panels = []
    if latest is not None:
        panels = run_panels(v.series(run_id), doc["kind"], latest.get("mapping"),
                            max_points=int(current_app.config["MAGVAULT_PLOT_POINTS"]))
    transitions = records(v.transitions(run=run_id))
    track_figs = track_panels(v.block_tracks(run_id), transitions)
    if panels or track_figs:
        security.allow_plot_styles()
    siblings = v.runs(specimen=doc["specimen"])
    successors = [r for r in records(siblings) if r["id"] != run_id and r["status"] not in INACTIVE]
    supersede_form = supersede_form or SupersedeForm(formdata=None)
    supersede_form.by.choices = choices([("", "choose a run")] + [
        (r["id"], f"run {r['id']}: {r['kind']}, {r['status']}"
         + (f", {r['source_name']}" if r.get("source_name") else "")) for r in successors])
    return dict(
        doc=doc, latest=latest, panels=panels, script_json=script_json,
        derivations=v.derivations(run_id), transitions=transitions, track_figs=track_figs,
        results=records(v.results(run=run_id)), images=v.images(run=run_id),
        retract_form=retract_form or RetractForm(formdata=None),
        supersede_form=supersede_form, derive_form=DeriveForm(formdata=None),
        image_form=image_form or ImageForm(formdata=None, run=str(run_id)),
        can_derive=doc["kind"] in ANALYSED_KINDS,
        inactive=doc["status"] in INACTIVE,
    )


@bp.get(f"/run/{RUN_ID}")
def show(run_id: int):
    return render_template("run.html", **run_context(run_id))


@bp.get(f"/run/{RUN_ID}/full")
def full_plot(run_id: int):
    """Every point, drawn with WebGL (the only kind of page that gets 'unsafe-eval', see security.py)."""
    v = vault()
    doc = v.run(run_id)
    if not doc["series"]:
        abort(404, description=f"run {run_id} has no data yet ({doc['status']}); attach its export at the bench")
    latest = doc["series"][-1]
    panels = run_panels(v.series(run_id), doc["kind"], latest.get("mapping"), max_points=None, webgl=True)
    if panels:
        security.allow_eval()
    return render_template("run_full.html", doc=doc, latest=latest, panels=panels, script_json=script_json)


@bp.get(f"/run/{RUN_ID}/series.csv")
def series_csv(run_id: int):
    v = vault()
    frame = v.series(run_id)
    doc = v.run(run_id)
    version = doc["series"][-1]["version"] if doc["series"] else 1
    body = frame.to_csv(index=False, float_format="%.10g")
    return Response(body, mimetype="text/csv", headers={
        "Content-Disposition": f'attachment; filename="run-{run_id}-series-v{version}.csv"'})


@bp.get("/raw/<sha256>")
def raw(sha256: str):
    """The exact stored bytes, under the name they first arrived with."""
    if not SHA256.match(sha256):
        abort(404, description="a raw file is named by its SHA-256: 64 hexadecimal digits")
    data, name, media_type = vault().raw_file(sha256.lower())
    return send_file(io.BytesIO(data), mimetype=media_type or "application/octet-stream", as_attachment=True,
                     download_name=name or f"{sha256[:12]}.bin", etag=sha256.lower(), max_age=0)


@bp.post(f"/run/{RUN_ID}/retract")
def retract(run_id: int):
    form = RetractForm()
    if form.validate_on_submit():
        try:
            vault().retract_run(run_id, reason=form.reason.data.strip())
        except MagvaultError as exc:
            show_error(form, exc, {"run": "reason"})
        else:
            flash(f"Run {run_id} retracted: {form.reason.data.strip()}", "ok")
            return redirect(url_for("runs.show", run_id=run_id))
    return render_template("run.html", **run_context(run_id, retract_form=form)), 422


@bp.post(f"/run/{RUN_ID}/supersede")
def supersede(run_id: int):
    form = SupersedeForm()
    if form.validate_on_submit():
        by = clean(form.by.data)
        if by is None:
            form.by.errors = ["replaced by: choose the run that replaces this one"]
        else:
            try:
                vault().supersede_run(run_id, by=by, reason=clean(form.reason.data))
            except MagvaultError as exc:
                show_error(form, exc, {"run": "by"})
            else:
                flash(f"Run {run_id} marked superseded by run {by}.", "ok")
                return redirect(url_for("runs.show", run_id=run_id))
    return render_template("run.html", **run_context(run_id, supersede_form=form)), 422


@bp.post(f"/run/{RUN_ID}/derive")
def derive(run_id: int):
    form = DeriveForm()
    v = vault()
    if not form.validate_on_submit():
        abort(400, description="the form was incomplete; reload the page and try again")
    try:
        summary = v.derive(run=run_id)
    except MagvaultError as exc:
        flash(f"Could not derive run {run_id}: {exc.message}", "error")
    else:
        flash(f"Run {run_id} derived again: {_summary_text(summary)}", "ok")
    return redirect(url_for("runs.show", run_id=run_id, _anchor="derived"))


def _summary_text(summary) -> str:
    if isinstance(summary, dict):
        parts = [f"{k.replace('_', ' ')} {v}" for k, v in summary.items() if isinstance(v, (int, float, str))]
        return ", ".join(parts[:6]) or "done"
    return "done"


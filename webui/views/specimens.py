"""A specimen: lineage, orientation, compositions, treatments and runs in time order, results, images."""

from __future__ import annotations

from flask import Blueprint, flash, redirect, render_template, url_for

from magvault.errors import MagvaultError

from ..forms import ImageForm, TreatmentForm, lines, show_error
from .common import records, vault

bp = Blueprint("specimens", __name__)


def specimen_context(code: str, *, image_form: ImageForm | None = None,
                     treatment_form: TreatmentForm | None = None) -> dict:
    v = vault()
    doc = v.specimen(code)
    runs = {r["id"]: r for r in doc["runs"]}
    transitions = records(v.transitions(specimen=code))
    results = records(v.results(specimen=code))
    images = v.images(specimen=code)
    image_form = image_form or ImageForm(formdata=None, specimen=code)
    treatment_form = treatment_form or TreatmentForm(formdata=None, specimen=code)
    return dict(doc=doc, runs=runs, transitions=transitions, results=results, images=images,
                image_form=image_form, treatment_form=treatment_form)


@bp.get("/specimen/<path:code>")
def show(code: str):
    return render_template("specimen.html", **specimen_context(code))


@bp.post("/specimen/<path:code>/treatments")
def add_treatment(code: str):
    form = TreatmentForm()
    if form.validate_on_submit():
        try:
            vault().add_treatment(code, kind=form.kind.data.strip(), at=form.at.data.strip(),
                                  conditions=lines(form.conditions.data), notes=None)
        except MagvaultError as exc:
            show_error(form, exc, {"set": "conditions", "date": "at"})
        else:
            flash(f"Treatment {form.kind.data.strip()} recorded for {code}.", "ok")
            return redirect(url_for("specimens.show", code=code, _anchor="history"))
    _conditions_errors(form)
    return render_template("specimen.html", **specimen_context(code, treatment_form=form)), 422


def _conditions_errors(form: TreatmentForm) -> None:
    # A bad condition comes back named by its own key (e.g. "temperature"); show it under Conditions.
    if form.form_errors and not form.conditions.errors:
        form.conditions.errors = list(form.form_errors)
        form.form_errors.clear()

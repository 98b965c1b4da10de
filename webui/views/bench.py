"""At the bench: register a specimen or cut a piece, log a planned run, import an export.

The import is two steps.  The file is read and shown (guessed layout, column
mapping, first converted rows, conditions, warnings) without writing anything;
the user corrects the mapping where the guess is wrong, reads again, and saves.
Between the steps the bytes wait in memory under a random token
(:mod:`..staging`); the uploaded file name is only a label.
"""

from __future__ import annotations

import json
from typing import Any

from flask import Blueprint, current_app, flash, redirect, render_template, request, url_for

from magvault.errors import Duplicate, MagvaultError

from .. import security
from ..figures import run_panels, script_json
from ..forms import (ImportConfirmForm, ImportForm, PieceForm, RunLogForm, SpecimenForm, choices, clean, for_the_page,
                     lines, show_error)
from ..staging import display_name
from .common import positive_int, records, vault

bp = Blueprint("bench", __name__)

MAX_COLUMNS = 500
UNDO = "(as guessed)"  # the mapping choice that withdraws an earlier correction
PREVIEW_ROWS = 8


def mapping_targets() -> tuple[str, ...]:
    from magvault.ingest.canonical import MAPPING_TARGETS

    return MAPPING_TARGETS


def _open_runs() -> list[dict[str, Any]]:
    v = vault()
    frame = v.runs()
    if frame.empty:
        return []
    return records(frame[frame["status"].isin(["planned", "running"])])


def bench_context(**forms) -> dict[str, Any]:
    v = vault()
    specimens = v.specimens()
    instruments = v.instruments()
    inst_choices = choices([("", "not recorded")] + [(i["name"], f"{i['name']} ({i['kind']})") for i in instruments])
    open_runs = _open_runs()

    specimen_form = forms.get("specimen_form") or SpecimenForm(formdata=None)
    piece_form = forms.get("piece_form") or PieceForm(formdata=None, parent=request.args.get("parent", ""),
                                                     same_orientation=True)
    run_form = forms.get("run_form") or RunLogForm(formdata=None, specimen=request.args.get("specimen", ""))
    import_form = forms.get("import_form") or ImportForm(
        formdata=None, specimen=request.args.get("specimen", ""), run=request.args.get("run", ""))
    run_form.instrument.choices = inst_choices
    import_form.instrument.choices = inst_choices
    import_form.run.choices = choices([("", "a new run (give specimen and kind)")] + [
        (r["id"], f"run {r['id']}: {r['specimen']}, {r['kind']} ({r['status']})") for r in open_runs])
    return dict(specimen_form=specimen_form, piece_form=piece_form, run_form=run_form, import_form=import_form,
                codes=list(specimens["code"]), origins=[o["name"] for o in v.origins()],
                open_runs=open_runs, max_upload=current_app.config.get("MAX_CONTENT_LENGTH"))


def _bench(status: int = 200, **forms):
    return render_template("bench.html", **bench_context(**forms)), status


@bp.get("/bench")
def index():
    return _bench()


@bp.post("/bench/specimen")
def add_specimen():
    form = SpecimenForm()
    if form.validate_on_submit():
        try:
            out = vault().add_specimen(form.code.data.strip(), kind=clean(form.kind.data), mass=clean(form.mass.data),
                                       dims=clean(form.dims.data), origin=clean(form.origin.data),
                                       storage=clean(form.storage.data), notes=clean(form.notes.data))
        except MagvaultError as exc:
            show_error(form, exc)
        else:
            return _created(out)
    return _bench(422, specimen_form=form)


@bp.post("/bench/piece")
def add_piece():
    form = PieceForm()
    if form.validate_on_submit():
        try:
            out = vault().add_specimen(form.code.data.strip(), parent=form.parent.data.strip(),
                                       mass=clean(form.mass.data), dims=clean(form.dims.data),
                                       storage=clean(form.storage.data), notes=clean(form.notes.data),
                                       same_orientation=bool(form.same_orientation.data))
        except MagvaultError as exc:
            show_error(form, exc)
        else:
            return _created(out)
    return _bench(422, piece_form=form)


def _created(out: dict[str, Any]):
    what = f"Piece {out['code']} cut from {out['parent']}" if out.get("parent") else f"Specimen {out['code']}"
    flash(f"{what} registered.", "ok")
    for warning in out.get("warnings") or []:
        flash(f"Check: {warning}", "warn")
    return redirect(url_for("specimens.show", code=out["code"]))


@bp.post("/bench/run")
def log_run():
    form = RunLogForm()
    form.instrument.choices = []
    if form.validate_on_submit():
        try:
            run_id = vault().log_run(form.specimen.data.strip(), form.kind.data, status=form.status.data or "planned",
                                     started=clean(form.started.data), instrument=clean(form.instrument.data),
                                     operator=clean(form.operator.data), direction=clean(form.direction.data),
                                     group=clean(form.group.data), notes=clean(form.notes.data))
        except MagvaultError as exc:
            show_error(form, exc)
        else:
            flash(f"Run {run_id} logged as {form.status.data or 'planned'}. Attach its export below when the "
                  "measurement is done.", "ok")
            return redirect(url_for("bench.index", run=run_id, _anchor="import"))
    return _bench(422, run_form=form)


# --- import: read and preview, correct, commit ------------------------------------------------

def _import_request(form) -> dict[str, Any]:
    """The import's parameters as the Vault wants them (a logged run, or specimen and kind)."""
    run_text = clean(form.run.data)
    params: dict[str, Any] = dict(shape=clean(form.shape.data), encoding=clean(form.encoding.data),
                                  instrument=clean(form.instrument.data), direction=clean(form.direction.data),
                                  group=clean(form.group.data), overrides=lines(form.conditions.data) or None)
    if run_text:
        run_id = positive_int(run_text)
        if run_id is None:
            raise MagvaultError(f"attach to: {run_text!r} is not a run id", field="run")
        doc = vault().run(run_id)
        params.update(run=run_id, kind=doc["kind"], specimen=doc["specimen"])
    else:
        specimen = clean(form.specimen.data)
        if specimen is None:
            raise MagvaultError("specimen: give the specimen this export belongs to (or choose a logged run)",
                                field="specimen")
        vault().specimen(specimen)  # a NotFound names the field
        params.update(run=None, kind=form.kind.data, specimen=specimen)
    return params


def _preview(data: bytes, name: str, params: dict[str, Any], corrections: dict[str, str]):
    return vault().preview(data=data, source_name=name, kind=params["kind"], shape=params["shape"],
                           mapping=corrections or None, encoding=params["encoding"],
                           overrides=params["overrides"])


def _preview_page(parsed, staged_name: str, size: int, params: dict[str, Any], form: ImportConfirmForm,
                  corrections: dict[str, str], status: int = 200):
    series = parsed.series
    head = records(series.head(PREVIEW_ROWS))
    panels = run_panels(series, params["kind"], [vars(c) for c in parsed.columns],
                        max_points=int(current_app.config["MAGVAULT_PLOT_POINTS"]), which=("si",))
    targets = mapping_targets()
    if panels:
        security.allow_plot_styles()
    shown = {c.source for c in parsed.columns}
    rows = [dict(source=c.source, unit=c.source_unit, target=c.target, factor=c.factor, offset=c.offset,
                 guessed=c.guessed) for c in parsed.columns]
    rows += [dict(source=src, unit=None, target=tgt, factor=None, offset=None, guessed=False)
             for src, tgt in corrections.items() if src not in shown]
    return render_template(
        "bench_preview.html", parsed=parsed, name=staged_name, size=size, params=params, form=form,
        head=head, columns=list(series.columns), n_rows=len(series), corrections=corrections,
        targets=targets, mapping_rows=rows, undo=UNDO, panels=panels, script_json=script_json), status


def _confirm_form(token: str, params: dict[str, Any], corrections: dict[str, str], source=None,
                  shape: str | None = None) -> ImportConfirmForm:
    form = source or ImportConfirmForm(formdata=None)
    form.token.data = token
    form.run.data = str(params["run"] or "")
    form.specimen.data = params["specimen"] or ""
    form.kind.data = params["kind"] or ""
    form.shape.data = shape if shape is not None else (params["shape"] or "")
    form.encoding.data = params["encoding"] or ""
    form.instrument.data = params["instrument"] or ""
    form.direction.data = params["direction"] or ""
    form.group.data = params["group"] or ""
    form.conditions.data = "\n".join(params["overrides"] or [])
    form.corrections.data = json.dumps(corrections, ensure_ascii=False)
    return form


def _import_error(form, exc: MagvaultError) -> None:
    if exc.field is None:  # a file that cannot be read: the message names line and column
        form.file.errors = [*form.file.errors, for_the_page(exc.message)]
    else:
        show_error(form, exc, {"set": "conditions", "wavelength": "conditions", "map": "mapping",
                               "profile": "file", "sheet": "file"})


@bp.post("/bench/import")
def import_preview():
    form = ImportForm()
    if not form.validate_on_submit():
        return _bench(422, import_form=form)
    upload = request.files.get("file")
    if upload is None or not upload.filename:
        form.file.errors = ["export file: choose the file the instrument wrote"]
        return _bench(422, import_form=form)
    data = upload.read()
    if not data:
        form.file.errors = [f"export file: {display_name(upload.filename)} is empty"]
        return _bench(422, import_form=form)
    name = display_name(upload.filename)
    try:
        params = _import_request(form)
        corrections = _typed_mapping(form.mapping.data)
        parsed = _preview(data, name, params, corrections)
    except MagvaultError as exc:
        _import_error(form, exc)
        return _bench(422, import_form=form)
    token = current_app.extensions["magvault.stage"].put(data, name)
    confirm = _confirm_form(token, params, corrections, shape=params["shape"] or "")
    return _preview_page(parsed, name, len(data), params, confirm, corrections)


def _typed_mapping(text: str | None) -> dict[str, str]:
    """Columns typed as ``T=temperature_K, Signal=moment_A_m2`` (the import layer's syntax)."""
    if not clean(text):
        return {}
    from magvault.ingest import parse_map

    return dict(parse_map(text))


@bp.post("/bench/import/confirm")
def import_confirm():
    form = ImportConfirmForm()
    stage = current_app.extensions["magvault.stage"]
    if not form.validate_on_submit():
        return _bench(422)
    staged = stage.get(form.token.data)
    if staged is None:
        import_form = ImportForm(formdata=None, run=form.run.data, specimen=form.specimen.data,
                                 kind=form.kind.data or "thermomagnetic")
        import_form.file.errors = ["export file: the uploaded file is no longer held (it waits three hours at "
                                   "most, less when many files are waiting); choose it again"]
        return _bench(422, import_form=import_form)
    params = dict(run=positive_int(form.run.data), specimen=clean(form.specimen.data), kind=clean(form.kind.data),
                  shape=clean(form.shape.data), encoding=clean(form.encoding.data),
                  instrument=clean(form.instrument.data), direction=clean(form.direction.data),
                  group=clean(form.group.data), overrides=lines(form.conditions.data) or None)
    previous = _previous_corrections(form.corrections.data)
    corrections, problems = _read_corrections(previous)

    if form.commit.data and not problems:
        try:
            report = vault().ingest(
                data=staged.data, source_name=staged.name, run=params["run"],
                specimen=None if params["run"] else params["specimen"],
                kind=None if params["run"] else params["kind"], shape=params["shape"],
                mapping=corrections or None, direction=params["direction"], group=params["group"],
                instrument=params["instrument"], encoding=params["encoding"], overrides=params["overrides"],
                again=bool(form.again.data))
        except Duplicate as exc:
            form.again.errors = [for_the_page(exc.message)]
        except MagvaultError as exc:
            show_error(form, exc)
        else:
            stage.drop(form.token.data)
            flash(f"Run {report.run_id} saved: {report.rows} rows from {staged.name} ({report.shape}), "
                  f"specimen {report.specimen}.", "ok")
            for warning in report.warnings:
                flash(f"Check: {warning}", "warn")
            return redirect(url_for("runs.show", run_id=report.run_id))

    for message in problems:
        form.form_errors.append(message)
    try:
        parsed = _preview(staged.data, staged.name, params, corrections)
        shown = corrections
    except MagvaultError as exc:
        show_error(form, exc)
        try:
            parsed = _preview(staged.data, staged.name, params, previous)
            shown = previous
        except MagvaultError as again_exc:
            import_form = ImportForm(formdata=None, run=form.run.data, specimen=form.specimen.data,
                                     kind=form.kind.data)
            show_error(import_form, again_exc, {"set": "conditions", "mapping": "file"})
            return _bench(422, import_form=import_form)
    confirm = _confirm_form(form.token.data, params, shown, source=form, shape=form.shape.data or "")
    status = 422 if (problems or form.errors or form.form_errors) else 200
    return _preview_page(parsed, staged.name, len(staged.data), params, confirm, shown, status)


def _previous_corrections(text: str | None) -> dict[str, str]:
    try:
        value = json.loads(text or "{}")
    except ValueError:
        return {}
    if not isinstance(value, dict):
        return {}
    return {str(k): str(v) for k, v in value.items()}


def _read_corrections(previous: dict[str, str]) -> tuple[dict[str, str], list[str]]:
    """The mapping to apply: earlier corrections plus every target the user changed in this form."""
    targets = set(mapping_targets())
    out = dict(previous)
    problems = []
    n = positive_int(request.form.get("ncols"), 0) or 0
    for i in range(min(n, MAX_COLUMNS)):
        source = request.form.get(f"source-{i}")
        chosen = request.form.get(f"target-{i}")
        current = request.form.get(f"current-{i}")
        if source is None or chosen is None or chosen == current:
            continue
        if chosen == UNDO:
            out.pop(source, None)
            continue
        if chosen not in targets:
            problems.append(f"column {source!r}: {chosen!r} is not a column magvault knows; choose one of the list")
            continue
        out[source] = chosen
    return out, problems

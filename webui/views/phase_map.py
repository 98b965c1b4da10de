"""The composition-temperature map: every primary transition of a selection against x in Fe(1-x)S.

The collection's own phase diagram: one point per primary transition (each
run's combined estimate), coloured by transition kind, with error bars in both
directions; points without a composition are listed instead of drawn.
"""

from __future__ import annotations

import math
from typing import Any

from flask import Blueprint, render_template, request, url_for

from magvault.errors import MagvaultError

from .. import security
from ..figures import script_json
from ..formatting import unc
from .common import records, vault
from .explore_common import by_filters, error_text, filtered, prepare_filters, save_form
from .explore_figures import MapPoint, map_figure
from .explore_forms import MapForm, check_choice, set_choices

bp = Blueprint("phase_map", __name__)

QUERY = "composition_map"


def read(v, formdata) -> tuple[MapForm, dict[str, Any], dict[str, Any]]:
    form = MapForm(formdata=formdata)
    kinds = v.kinds()
    specimens = v.specimens()
    origins = sorted({o["name"] for o in v.origins()})
    ids = [k["id"] for k in kinds]
    set_choices(form.kinds, [(k["id"], f"{k['id']}: {k['name']}") for k in kinds])
    form.validate()
    sel = prepare_filters(form, specimens, origins)
    wanted = [k for k in (form.kinds.data or []) if k]
    unknown = [k for k in wanted if k not in ids]
    if unknown:
        form.kinds.errors = [*form.kinds.errors, f"transitions: {', '.join(map(repr, unknown))} not in the catalogue "
                                                 f"({', '.join(ids[:12])})"]
    chosen_kinds = [k for k in ids if k in wanted] or None
    if chosen_kinds and len(chosen_kinds) == len(ids):
        chosen_kinds = None  # every kind ticked is the same as none ticked: all of them
    params = {"kinds": chosen_kinds, "branch": check_choice(form.branch, ["heating", "cooling"], "branch", "heating"),
              "layout": check_choice(form.layout, ["together", "apart"], "draw", "together"), "selection": sel}
    form.kinds.data = chosen_kinds or []
    form.branch.data, form.layout.data = params["branch"], params["layout"]
    return form, params, {"kinds": kinds, "specimens": specimens}


def saved_parameters(v, formdata) -> dict[str, Any]:
    """What ``Vault.composition_map`` takes: the kinds and the branch (the specimen filters are the page's own)."""
    _, params, _ = read(v, formdata)
    out: dict[str, Any] = {"branch": params["branch"]}
    if params["kinds"]:
        out["kinds"] = list(params["kinds"])
    return out


def page_args(parameters: dict[str, Any]) -> dict[str, Any]:
    args: dict[str, Any] = {}
    kinds = parameters.get("kinds")
    if isinstance(kinds, str):
        kinds = [k.strip() for k in kinds.split(",") if k.strip()]
    if kinds:
        args["kinds"] = list(kinds)
    if parameters.get("branch"):
        args["branch"] = parameters["branch"]
    return args


@bp.get("/map")
def index():
    v = vault()
    form, params, ctx = read(v, request.args)
    chosen = by_filters(ctx["specimens"], params["selection"])
    problem = None
    try:
        frame = v.composition_map(kinds=params["kinds"], branch=params["branch"])
    except MagvaultError as exc:
        frame, problem = None, error_text(exc)
    rows = [r for r in records(frame) if r["specimen"] in chosen.codes] if frame is not None else []
    points, not_drawn = [], []
    for r in rows:
        x, t = r.get("x"), r.get("temperature_K")
        r["href"] = url_for("runs.show", run_id=r["run"])
        if x is None or t is None or not (math.isfinite(x) and math.isfinite(t)):
            not_drawn.append(r)
            continue
        hover = (f"{r['specimen']} · run {r['run']} ({r.get('run_kind') or 'run'})\n{r['kind']} "
                 f"{unc(t, r.get('uncertainty_K'), 'K')}\nx = {unc(x, r.get('x_uncertainty'))}"
                 + (f" · {r['superstructure']}" if r.get("superstructure") else ""))
        points.append(MapPoint(r["kind"], r["specimen"], int(r["run"]), x, r.get("x_uncertainty"), t,
                               r.get("uncertainty_K"), r["href"], hover))
    kinds_present = [k["id"] for k in ctx["kinds"] if any(p.kind == k["id"] for p in points)]
    figure, height = map_figure(points, kinds_present, apart=params["layout"] == "apart") if points else (None, 0)
    if figure:
        security.allow_plot_styles()
    counts = {k: sum(1 for p in points if p.kind == k) for k in kinds_present}
    args = {k: v for k, v in request.args.to_dict(flat=False).items() if k != "layout" and not k.startswith("_")}
    apart_url = url_for("phase_map.index", layout="apart", **args)
    return render_template("phase_map.html", form=form, params=params, chosen=chosen, rows=rows, points=points,
                           not_drawn=not_drawn, figure=figure, tall=height > 500, counts=counts, problem=problem,
                           filtered=filtered(params["selection"]), save=save_form(QUERY), script_json=script_json, apart_url=apart_url,
                           kinds=ctx["kinds"])

"""The overlay: curves of one run kind over a selection of specimens, each marked at its derived transition.

Curves are read through the Vault, split into branches, optionally
normalised and differentiated, cut to a temperature range and decimated
server-side (largest-triangle-three-buckets, Steinarsson 2013) so that a page
of a few hundred curves carries about a megabyte of figure data.  Large
overlays are drawn with WebGL traces.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import pandas as pd
from flask import Blueprint, current_app, render_template, request, url_for

from magvault.errors import MagvaultError

from .. import security
from ..figures import decimate, script_json
from ..formatting import column_label, quantity, unc
from ..selection import Selection
from . import curves as cv
from .common import records, vault
from .explore_common import (Chosen, by_filters, by_lineage, by_saved, default_kind, error_text, kind_choices,
                             lineage_tops, prepare_filters, save_form)
from .explore_figures import (Colouring, OverlayCurve, OverlayMarker, category_colours, continuous_colour,
                              overlay_figure)
from .explore_forms import OverlayForm, check_choice, set_choices

bp = Blueprint("overlay", __name__)

QUERY = "overlay"

#: Run kinds whose curves run against temperature, and the y columns to plot (first present wins).
Y_COLUMNS = {
    "thermomagnetic": ("moment_A_m2_per_kg", "moment_A_m2", "chi_mass_m3_per_kg", "chi_vol"),
    "susceptibility": ("chi_mass_m3_per_kg", "chi_vol"),
    "calorimetry": ("heat_capacity_J_per_mol_K", "heat_capacity_J_per_kg_K"),
}
SYMBOLS = {"moment_A_m2_per_kg": "M", "moment_A_m2": "M", "chi_mass_m3_per_kg": "χ", "chi_vol": "χ",
           "heat_capacity_J_per_mol_K": "Cp", "heat_capacity_J_per_kg_K": "cp"}
SOURCES = (("filters", "chosen by the filters"), ("lineage", "a lineage"), ("saved", "a saved query's result"))
RUNS = (("marked", "only runs with this transition derived"), ("all", "every run of this kind"))
Y_CHOICES = (("curve", "the curve"), ("derivative", "its derivative d/dT"))
NORMS = (("max", "to its largest magnitude"), ("reference", "to its value at the reference temperature"),
         ("none", "not normalised (SI)"))
COLOURS = (("x", "composition x"), ("superstructure", "superstructure"), ("parent", "parent crystal"),
           ("field", "applied field"), ("treatment", "treatment before the run"), ("specimen", "specimen"))
SPANS = (("window", "around the transition"), ("whole", "whole curve"), ("custom", "from … to …"))
INACTIVE = ("retracted", "superseded")

# Limits (overridable in the app's config): points in all, runs at most, and when to switch to WebGL.
DEFAULT_POINT_BUDGET = 60_000
DEFAULT_MAX_RUNS = 400
WEBGL_CURVES = 60
WEBGL_POINTS = 30_000
DERIVATIVE_WINDOW = 9


@dataclass(frozen=True)
class OverlayParams:
    run_kind: str
    kind: str | None
    source: str
    q: str | None
    origin: str | None
    superstructure: str | None
    x_min: float | None
    x_max: float | None
    root: str | None
    saved: str | None
    saved_rows: str
    runs: str
    branch: str
    y: str
    norm: str
    ref_T: float | None
    colour: str
    span: str
    t_min: float | None
    t_max: float | None

    def saved_parameters(self) -> dict[str, Any]:
        """What a saved overlay stores: the settings, without blanks."""
        return {k: v for k, v in asdict(self).items() if v not in (None, "")}


def read(v, formdata) -> tuple[OverlayForm, OverlayParams, dict[str, Any]]:
    """The form, the settings it asks for (defaults where a value is missing or unknown) and the lists used."""
    form = OverlayForm(formdata=formdata)
    kinds = v.kinds()
    specimens = v.specimens()
    origins = sorted({o["name"] for o in v.origins()})
    saved = [s["name"] for s in v.saved_queries()]
    codes = sorted(specimens["code"]) if not specimens.empty else []
    set_choices(form.run_kind, [(k, k) for k in Y_COLUMNS])
    set_choices(form.kind, kind_choices(kinds))
    set_choices(form.source, SOURCES)
    set_choices(form.root, [("", "choose a specimen")] + [(c, c) for c in codes])
    set_choices(form.saved, [("", "none saved yet" if not saved else "choose a saved query")] + [(s, s) for s in saved])
    set_choices(form.runs, RUNS)
    set_choices(form.y, Y_CHOICES)
    set_choices(form.norm, NORMS)
    set_choices(form.colour, COLOURS)
    set_choices(form.span, SPANS)
    form.validate()
    sel = prepare_filters(form, specimens, origins)
    kind = check_choice(form.kind, [k["id"] for k in kinds], "transition", default_kind(kinds))
    windows = {k["id"]: k["window_K"] for k in kinds}
    ref_default = float(windows[kind][0]) if kind in windows else None
    ref_T = form.ref_T.data if not form.ref_T.errors and form.ref_T.data is not None else ref_default
    if ref_T is not None and not (math.isfinite(ref_T) and ref_T > 0):
        form.ref_T.errors = [*form.ref_T.errors, f"reference temperature: expected a positive number of kelvin, "
                                                 f"got {form.ref_T.raw_data[0]!r}"]
        ref_T = ref_default
    t_min = form.t_min.data if not form.t_min.errors else None
    t_max = form.t_max.data if not form.t_max.errors else None
    for f, value in ((form.t_min, t_min), (form.t_max, t_max)):
        if value is not None and not math.isfinite(value):
            f.errors = [*f.errors, f"{f.label.text.lower()}: expected a finite number of kelvin"]
    t_min = t_min if t_min is not None and math.isfinite(t_min) else None
    t_max = t_max if t_max is not None and math.isfinite(t_max) else None
    if t_min is not None and t_max is not None and t_max <= t_min:
        form.t_max.errors = [*form.t_max.errors, f"to: {t_max:g} K is not above from ({t_min:g} K)"]
        t_max = None
    params = OverlayParams(
        run_kind=check_choice(form.run_kind, Y_COLUMNS, "curves of", "thermomagnetic"),
        kind=kind,
        source=check_choice(form.source, [s for s, _ in SOURCES], "specimens", "filters"),
        q=sel.q, origin=sel.origin, superstructure=sel.superstructure, x_min=sel.x_min, x_max=sel.x_max,
        root=check_choice(form.root, codes, "lineage of", None),
        saved=check_choice(form.saved, saved, "saved query", None),
        saved_rows=check_choice(form.saved_rows, ["flagged", "all"], "from its result", "flagged"),
        runs=check_choice(form.runs, [r for r, _ in RUNS], "runs", "marked"),
        branch=check_choice(form.branch, ["heating", "cooling", "both"], "branch", "heating"),
        y=check_choice(form.y, [y for y, _ in Y_CHOICES], "plot", "curve"),
        norm=check_choice(form.norm, [n for n, _ in NORMS], "normalise", "max"),
        ref_T=ref_T,
        colour=check_choice(form.colour, [c for c, _ in COLOURS], "colour by", "x"),
        span=check_choice(form.span, [s for s, _ in SPANS], "temperature range", "window"),
        t_min=t_min, t_max=t_max)
    # Show the settings actually used.
    for name in ("run_kind", "kind", "source", "root", "saved", "saved_rows", "runs", "branch", "y", "norm", "colour",
                 "span"):
        getattr(form, name).data = getattr(params, name) or ""
    if ref_T is not None and not form.ref_T.errors:
        form.ref_T.data = f"{ref_T:g}"  # shown as typed ("20", not "20.0")
    return form, params, {"kinds": kinds, "specimens": specimens, "windows": windows}


def saved_parameters(v, formdata) -> dict[str, Any]:
    return read(v, formdata)[1].saved_parameters()


def page_args(parameters: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in parameters.items() if v not in (None, "")}


def choose(v, params: OverlayParams, form: OverlayForm, specimens: pd.DataFrame) -> Chosen | None:
    """The selection's specimens, or None (with an error on the form) when it cannot be made."""
    try:
        if params.source == "lineage":
            if not params.root:
                form.root.errors = [*form.root.errors, "lineage of: choose the specimen at the top of the lineage"]
                return None
            return by_lineage(v, params.root)
        if params.source == "saved":
            if not params.saved:
                form.saved.errors = [*form.saved.errors, "saved query: choose one (save one from any of these pages)"]
                return None
            return by_saved(v, params.saved, params.saved_rows)
    except MagvaultError as exc:
        target = form.root if params.source == "lineage" else form.saved
        target.errors = [*target.errors, error_text(exc)]
        return None
    return by_filters(specimens, Selection(q=params.q, origin=params.origin, superstructure=params.superstructure,
                                           x_min=params.x_min, x_max=params.x_max))


def span_of(params: OverlayParams, window: list[float] | None) -> tuple[float | None, float | None]:
    if params.span == "whole":
        return None, None
    if params.span == "custom":
        return params.t_min, params.t_max
    if not window:
        return None, None
    lo, hi = float(window[0]), float(window[1])
    pad = 0.5 * (hi - lo)
    return max(0.0, lo - pad), hi + pad


def y_column(series: pd.DataFrame, run_kind: str, wanted: str | None) -> str | None:
    """The column to draw: ``wanted`` (one unit for the whole overlay) or the run's first candidate."""
    if wanted is not None:
        return wanted if wanted in series.columns else None
    return next((c for c in Y_COLUMNS[run_kind] if c in series.columns), None)


def axis_quantity(used: set[str], params: OverlayParams, fixed_column: str | None) -> tuple[str | None, bool]:
    """(the column the y axis is named after, whether the curves show different quantities).

    Curves of one quantity in different normalisations (M per kg and M, Cp per mol and
    per kg) share a symbol once each is scaled; unscaled, they are different columns.
    """
    mixed = len({SYMBOLS.get(c, c).lower() for c in used}) > 1 or (len(used) > 1 and params.norm == "none")
    if used and not mixed:
        return next((c for c in Y_COLUMNS[params.run_kind] if c in used), sorted(used)[0]), False
    return fixed_column, mixed


def axis_title(column: str | None, params: OverlayParams, mixed: bool) -> str:
    sym = "signal" if mixed or column is None else SYMBOLS.get(column, column)
    if params.norm == "max":
        base, unit = f"{sym} / max|{sym}|", ""
    elif params.norm == "reference":
        base, unit = f"{sym} / {sym}({params.ref_T:g} K)", ""
    else:
        label = column_label(column) if column else sym
        base, unit = label, ""
    if params.y == "curve":
        return base
    if params.norm == "none" and column:
        name, _, rest = column_label(column).partition(" (")
        unit_shown = rest.rstrip(")")
        return f"d{sym}/dT ({unit_shown} K⁻¹)" if unit_shown else f"d{sym}/dT (K⁻¹)"
    return f"d({base})/dT (K⁻¹)"


def colour_values(v, params: OverlayParams, runs: pd.DataFrame, specimens: pd.DataFrame) -> dict[int, Any]:
    """Per run id, the property it is coloured by (a number for x, a label otherwise; None when unknown)."""
    props = specimens.set_index("code")
    out: dict[int, Any] = {}
    if params.colour in ("x", "superstructure", "specimen"):
        for rid, code in zip(runs["id"], runs["specimen"]):
            if params.colour == "specimen":
                out[int(rid)] = code
                continue
            value = props.at[code, params.colour] if code in props.index else None
            out[int(rid)] = None if value is None or (isinstance(value, float) and math.isnan(value)) or \
                value is pd.NA else value
    elif params.colour == "parent":
        tops = lineage_tops(specimens)
        out = {int(r): tops.get(c, c) for r, c in zip(runs["id"], runs["specimen"])}
    elif params.colour == "field":
        for rid, cond in zip(runs["id"], runs["conditions"]):
            f = (cond or {}).get("field_T") if isinstance(cond, dict) else None
            out[int(rid)] = float(f) if isinstance(f, (int, float)) and math.isfinite(f) else None
    elif params.colour == "treatment":
        for code in sorted(set(runs["specimen"])):
            for seg in v.specimen(code)["timeline"]:
                label = f"after {seg['treatment']['kind']}" if seg.get("treatment") else "before any treatment"
                for rid in seg.get("runs") or ():
                    out[int(rid)] = label
    return out


def colouring_for(params: OverlayParams, values: dict[int, Any]) -> tuple[Colouring, dict[int, tuple[str, str]]]:
    """(the colour key, per run: (colour, legend group))."""
    titles = dict(COLOURS)
    if params.colour == "x":
        known = [float(x) for x in values.values() if x is not None]
        lo, hi = (min(known), max(known)) if known else (0.0, 1.0)
        per_run = {}
        for rid, x in values.items():
            per_run[rid] = ((continuous_colour(float(x), lo, hi), "") if x is not None
                            else (category_colours(["x unknown"], missing="x unknown")["x unknown"], ""))
        return Colouring("x in Fe₁₋ₓS", True, lo, hi), per_run
    missing = {"superstructure": "not recorded", "field": "field not recorded", "parent": "no parent",
               "treatment": "before any treatment", "specimen": "–"}[params.colour]
    labels: dict[int, str] = {}
    for rid, value in values.items():
        if value is None:
            labels[rid] = missing
        elif params.colour == "field":
            labels[rid] = quantity(value, None, "T")
        else:
            labels[rid] = str(value)
    if params.colour == "field":
        numeric = {lab: val for rid, val in values.items() for lab in [labels[rid]] if val is not None}
        order = sorted(numeric, key=lambda lab: numeric[lab]) + ([missing] if missing in labels.values() else [])
    elif params.colour == "treatment":
        order = sorted(set(labels.values()), key=lambda lab: (lab != missing, lab))
    else:
        order = sorted(set(labels.values()) - {missing}) + ([missing] if missing in labels.values() else [])
    colours = category_colours(order, missing=missing if params.colour != "treatment" else None)
    return (Colouring(titles[params.colour].capitalize(), False, groups=tuple(order)),
            {rid: (colours[lab], lab) for rid, lab in labels.items()})


@dataclass
class Prepared:
    run: int
    specimen: str
    branch: str | None
    temperature_K: np.ndarray      # the drawn quantity over the whole branch
    value: np.ndarray


def prepare_run(series: pd.DataFrame, column: str, params: OverlayParams,
                wanted_branches: tuple[str | None, ...]) -> tuple[list[tuple[str | None, np.ndarray, np.ndarray]],
                                                                    list[str]]:
    """The run's branches as drawn (normalised, differentiated), and reasons for any left out."""
    out, reasons = [], []
    for b in cv.branches(series, column):
        if b.name not in wanted_branches:
            continue
        y, why = cv.normalise(b.temperature_K, b.value, params.norm, reference_K=params.ref_T)
        if y is None:
            reasons.append(f"cannot normalise: {why}")
            continue
        t = b.temperature_K
        if params.y == "derivative":
            d = cv.derivative(t, y, window_points=DERIVATIVE_WINDOW)
            t, y = d.temperature_K, d.slope
        out.append((b.name, t, y))
    return out, reasons


def _branches_wanted(branch: str) -> tuple[str | None, ...]:
    # A curve without branch labels is a single sweep, counted as heating (as the collection queries do).
    return {"heating": ("heating", None), "cooling": ("cooling",), "both": ("heating", "cooling", None)}[branch]


def _transition_branch_fits(t_branch: Any, curve_branch: str | None) -> bool:
    t_branch = None if t_branch is None or (isinstance(t_branch, float) and math.isnan(t_branch)) else t_branch
    if curve_branch == "cooling" or t_branch == "cooling":
        return curve_branch == t_branch
    return True  # heating and unlabelled go together


def build(v, params: OverlayParams, chosen: Chosen, ctx: dict[str, Any]) -> dict[str, Any]:
    """Everything the page shows below the form."""
    config = current_app.config
    budget = int(config.get("MAGVAULT_OVERLAY_POINTS", DEFAULT_POINT_BUDGET))
    max_runs = int(config.get("MAGVAULT_OVERLAY_MAX_RUNS", DEFAULT_MAX_RUNS))
    most = int(config.get("MAGVAULT_PLOT_POINTS", 1500))
    left_out: Counter[str] = Counter()

    runs = v.runs(kind=params.run_kind)
    if not runs.empty:
        runs = runs[runs["specimen"].isin(chosen.codes) & ~runs["status"].isin(INACTIVE) & runs["sha256"].notna()]
    trans = v.transitions(kind=params.kind, primary_only=True) if params.kind else pd.DataFrame()
    if not trans.empty:
        trans = trans[trans["run"].isin(set(runs["id"])) & (trans["component"] == 1)]
        if params.branch != "both":
            wanted = "cooling" if params.branch == "cooling" else "heating"
            branch = trans["branch"].astype(object).where(trans["branch"].notna(), None)
            trans = trans[[(b == wanted) or (b is None and wanted == "heating") for b in branch]]
    if params.runs == "marked" and not runs.empty:
        unmarked = ~runs["id"].isin(set(trans["run"]) if not trans.empty else set())
        if unmarked.any():
            left_out[f"no derived {params.kind} on this branch"] += int(unmarked.sum())
        runs = runs[~unmarked]
    runs = runs.sort_values(["specimen", "started", "id"], na_position="last", kind="stable")
    n_runs_all = len(runs)
    if n_runs_all > max_runs:
        left_out[f"beyond the first {max_runs} runs (narrow the selection)"] += n_runs_all - max_runs
        runs = runs.iloc[:max_runs]

    lo, hi = span_of(params, ctx["windows"].get(params.kind))
    wanted_branches = _branches_wanted(params.branch)
    series_of = v.series_of(runs["id"])
    fixed_column = None
    if params.norm == "none":
        # One unit for all curves: the first candidate that the most runs have.
        counts = Counter(next((c for c in Y_COLUMNS[params.run_kind] if c in s.columns), None)
                         for s in series_of.values())
        counts.pop(None, None)
        fixed_column = counts.most_common(1)[0][0] if counts else Y_COLUMNS[params.run_kind][0]
    prepared: list[Prepared] = []
    used_columns: set[str] = set()
    for rid, code in zip(runs["id"], runs["specimen"]):
        series = series_of.get(int(rid))
        if series is None:
            left_out["no data yet"] += 1
            continue
        column = y_column(series, params.run_kind, fixed_column)
        if column is None or "temperature_K" not in series.columns:
            what = column_label(fixed_column) if fixed_column else "quantity to plot against temperature"
            left_out[f"no {what}"] += 1
            continue
        parts, reasons = prepare_run(series, column, params, wanted_branches)
        for r in reasons:
            left_out[r] += 1
        kept = 0
        for name, t, y in parts:
            t_cut, _ = cv.cut(t, y, lo, hi)
            if t_cut.size < 2:
                continue
            prepared.append(Prepared(int(rid), str(code), name, t, y))
            kept += 1
        if parts and not kept:
            left_out["no data in the temperature range"] += 1
        elif not parts and not reasons:
            left_out["no data on this branch"] += 1
        if kept:
            used_columns.add(column)

    values = colour_values(v, params, runs[runs["id"].isin({p.run for p in prepared})], ctx["specimens"])
    colouring, per_run = colouring_for(params, values)
    per_curve = cv.points_per_curve(len(prepared), budget=budget, most=most)
    kind_label = params.kind or "transition"

    curves, markers, rows = [], [], []
    n_total = n_drawn = 0
    by_run: dict[int, list[dict[str, Any]]] = {}
    for t in records(trans[["run", "branch", "temperature_K", "uncertainty_K"]]) if not trans.empty else []:
        by_run.setdefault(int(t["run"]), []).append(t)
    for p in prepared:
        colour, group = per_run.get(p.run, ("#8d979f", ""))
        if params.colour == "specimen":
            group = p.specimen
        t_cut, y_cut = cv.cut(p.temperature_K, p.value, lo, hi)
        keep = decimate(t_cut, y_cut, per_curve)
        n_total += int(np.isfinite(t_cut).sum())
        n_drawn += len(keep)
        href = url_for("runs.show", run_id=p.run)
        texts = []
        for t in by_run.get(p.run, ()):
            if not _transition_branch_fits(t["branch"], p.branch):
                continue
            t_k, u = float(t["temperature_K"]), t["uncertainty_K"]
            label = f"{kind_label} {unc(t_k, u, 'K')}" + (f" ({t['branch']})" if t["branch"] else "")
            texts.append(label)
            at = cv.value_at(p.temperature_K, p.value, t_k)
            inside = (lo is None or t_k >= lo) and (hi is None or t_k <= hi)
            if not math.isfinite(at) or not inside:
                left_out[f"{kind_label} outside the range drawn (marker not drawn)"] += 1
                continue
            markers.append(OverlayMarker(p.run, p.specimen, p.branch, t_k, u, at, colour, href, label))
            rows.append({"specimen": p.specimen, "run": p.run, "branch": t["branch"], "temperature_K": t_k,
                         "uncertainty_K": u, "colour": colour, "group": group or _x_text(values.get(p.run))})
        curves.append(OverlayCurve(p.run, p.specimen, p.branch, t_cut[keep], y_cut[keep], colour, group, href,
                                   "; ".join(texts) or f"no derived {kind_label} on this branch"))

    webgl = len(curves) > WEBGL_CURVES or n_drawn > WEBGL_POINTS
    column, mixed = axis_quantity(used_columns, params, fixed_column)
    figure = None
    if curves:
        x_range = (lo, hi) if lo is not None and hi is not None else None
        figure = overlay_figure(curves, markers, x_title="Temperature (K)", y_title=axis_title(column, params, mixed),
                                colouring=colouring, webgl=webgl, kind_label=kind_label, x_range=x_range)
    for row, shape in zip(rows, figure.marker_shapes if figure else ()):
        row["shape"] = shape
    return dict(figure=figure, markers=rows, n_curves=len(curves), n_runs=len({c.run for c in curves}),
                n_total=n_total, n_drawn=n_drawn, per_curve=per_curve, left_out=sorted(left_out.items()),
                span=(lo, hi), colouring=colouring, mixed=mixed,
                derivative_note=(f"Savitzky–Golay slope, {DERIVATIVE_WINDOW}-point window, quadratic, on a uniform "
                                 "temperature grid" if params.y == "derivative" else None),
                figure_bytes=len(figure.figure_json.encode()) if figure else 0)


def _x_text(x: Any) -> str:
    return f"x = {x:.4f}" if isinstance(x, float) and math.isfinite(x) else ""


@bp.get("/overlay")
def index():
    v = vault()
    form, params, ctx = read(v, request.args)
    chosen = choose(v, params, form, ctx["specimens"])
    result = build(v, params, chosen, ctx) if chosen is not None else None
    if result and result["figure"]:
        if result["figure"].webgl:
            security.allow_eval()  # plotly's WebGL traces compile shaders with new Function (see security.py)
        else:
            security.allow_plot_styles()
    return render_template("overlay.html", form=form, params=params, chosen=chosen, result=result,
                           save=save_form(QUERY), script_json=script_json, kinds=ctx["kinds"])

"""The shift explorer: which specimens show a transition shifted from a reference, beyond uncertainty, and why.

The Vault's shifts query does the statistics; this page chooses its
reference mode and threshold, lists the flagged specimens first with what
might explain them (composition, origin, treatments), and draws the kind's
temperature against composition, with the whole-collection fit when the
reference is the composition trend.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from flask import Blueprint, render_template, request, url_for

from magvault.errors import MagvaultError

from .. import security
from ..figures import script_json
from ..formatting import day, unc
from . import curves as cv
from .common import records, vault
from .explore_common import default_kind, error_text, kind_choices, save_form
from .explore_figures import FitLine, ShiftPoint, shift_figure
from .explore_forms import ShiftsForm, check_choice, set_choices

bp = Blueprint("shifts", __name__)

QUERY = "shifts"

#: Reference modes: (id, tab label, sentence for the page).
MODES = (
    ("trend", "the composition trend",
     "a straight line of temperature against x in Fe₁₋ₓS fitted to the other specimens"),
    ("collection", "the rest of the collection", "the median of the other specimens"),
    ("earliest", "its own first run", "its own earliest run (its later runs against it)"),
    ("treatment", "its runs before its latest treatment",
     "its own runs before its latest treatment (the runs after it against them)"),
    ("reference", "a fixed temperature", "a temperature you give"),
    ("run", "a chosen run", "a run you choose (its specimen's later runs against it)"),
)
GLANCE = ("trend", "collection", "earliest", "treatment")
BY = (("", "no grouping"), ("superstructure", "superstructure"), ("origin", "origin"),
      ("parent", "parent crystal"), ("field", "applied field"), ("direction", "field direction"))
#: Where on a specimen's page the likely cause shows, per reference mode.
CAUSE_ANCHOR = {"trend": "composition", "treatment": "history", "earliest": "history", "run": "history"}


@dataclass(frozen=True)
class ShiftParams:
    kind: str | None
    against: str
    reference: str | None
    against_run: int | None
    sigma: float
    by: str | None
    bins: tuple[float, ...] | None
    branch: str
    method: str | None

    def vault_arguments(self, against: str | None = None) -> dict[str, Any]:
        """Keyword arguments of ``Vault.shifts`` (the same names the command line saves)."""
        mode = against or self.against
        out: dict[str, Any] = {"kind": self.kind, "sigma": self.sigma, "branch": self.branch}
        if mode == "reference":
            out["reference"] = self.reference
        elif mode == "run":
            out["against_run"] = self.against_run
        else:
            out["against"] = mode
        if self.by and mode in ("collection", "trend"):
            out["by"] = self.by
        if self.bins and self.by == "field" and mode in ("collection", "trend"):
            out["bins"] = list(self.bins)
        if self.method:
            out["method"] = self.method
        return out

    def saved_parameters(self) -> dict[str, Any]:
        return self.vault_arguments()


def read(v, formdata) -> tuple[ShiftsForm, ShiftParams, dict[str, Any]]:
    form = ShiftsForm(formdata=formdata)
    kinds = v.kinds()
    set_choices(form.kind, kind_choices(kinds))
    set_choices(form.against, [(m, label) for m, label, _ in MODES])
    set_choices(form.by, BY)
    form.validate()
    kind = check_choice(form.kind, [k["id"] for k in kinds], "transition", default_kind(kinds))
    methods = sorted(set(v.transitions(kind=kind)["method"].dropna())) if kind else []
    set_choices(form.method, [("", "each run's primary estimate")] + [(m, m) for m in methods])
    against = check_choice(form.against, [m for m, _, _ in MODES], "compare with", "trend")
    reference = (form.reference.data or "").strip() or None
    against_run = None
    if against == "reference" and not reference:
        form.reference.errors = [*form.reference.errors, "fixed reference: give a temperature, e.g. 32.0 K"]
        against = "trend"
    if against == "run":
        text = (form.against_run.data or "").strip()
        if text.isdigit() and 0 < int(text) <= 2_147_483_647:
            against_run = int(text)
        else:
            form.against_run.errors = [*form.against_run.errors,
                                       f"reference run: expected a run id (a whole number), got {text!r}"]
            against = "trend"
    sigma = form.sigma.data if not form.sigma.errors and form.sigma.data is not None else 3.0
    if not (math.isfinite(sigma) and sigma > 0):
        form.sigma.errors = [*form.sigma.errors, f"flag at: expected a positive number of σ, got {sigma:g}"]
        sigma = 3.0
    bins = None
    if (form.bins.data or "").strip():
        try:
            bins = tuple(float(b) for b in form.bins.data.split(",") if b.strip())
            if not all(math.isfinite(b) for b in bins):
                raise ValueError
        except ValueError:
            form.bins.errors = [*form.bins.errors, f"field bin edges: expected numbers in tesla separated by commas, "
                                                   f"got {form.bins.data!r}"]
            bins = None
    params = ShiftParams(kind=kind, against=against, reference=reference if against == "reference" else None,
                         against_run=against_run, sigma=sigma,
                         by=check_choice(form.by, [b for b, _ in BY if b], "group references by", None),
                         bins=bins, branch=check_choice(form.branch, ["heating", "cooling"], "branch", "heating"),
                         method=check_choice(form.method, methods, "estimates from", None))
    form.kind.data, form.against.data, form.branch.data = kind or "", against, params.branch
    form.by.data, form.method.data = params.by or "", params.method or ""
    if not form.sigma.errors:
        form.sigma.data = f"{sigma:g}"  # shown as typed ("3", not "3.0")
    return form, params, {"kinds": kinds}


def saved_parameters(v, formdata) -> dict[str, Any]:
    return read(v, formdata)[1].saved_parameters()


def page_args(parameters: dict[str, Any]) -> dict[str, Any]:
    """The page's address for saved parameters (as the command line or this page saved them)."""
    p = dict(parameters)
    args: dict[str, Any] = {k: p[k] for k in ("kind", "sigma", "by", "branch", "method") if p.get(k) not in (None, "")}
    if p.get("reference") not in (None, ""):
        args.update(against="reference", reference=p["reference"])
    elif p.get("against_run") not in (None, ""):
        args.update(against="run", against_run=p["against_run"])
    elif p.get("against"):
        args["against"] = p["against"]
    if p.get("bins"):
        args["bins"] = ",".join(f"{float(b):g}" for b in p["bins"])
    return args


def _sort_key(row: dict[str, Any]) -> tuple:
    s = row.get("sigma")
    return (row.get("flagged") is not True, -(abs(s) if s is not None else -1.0), row.get("group") or "",
            row["specimen"])


def context_of(v, codes: list[str], specimens: pd.DataFrame) -> dict[str, dict[str, Any]]:
    """What might explain a shift, per flagged specimen: composition, origin, lineage, treatments."""
    props = specimens.set_index("code")
    out = {}
    for code in codes:
        if code not in props.index:
            continue
        row = props.loc[code]
        doc = v.specimen(code)
        out[code] = {
            "x": row["x"], "x_uncertainty": row["x_uncertainty"], "superstructure": row["superstructure"],
            "origin": row["origin"], "parent": row["parent"] if isinstance(row["parent"], str) else None,
            "treatments": [f"{t['kind']} {day(t['at'])}" for t in doc.get("treatments") or []],
        }
    return out


def glance(v, params: ShiftParams, current: pd.DataFrame | None) -> list[dict[str, Any]]:
    """The specimens flagged under each of the four usual reference modes (same kind, threshold, branch)."""
    out = []
    for mode in GLANCE:
        if mode == params.against and current is not None:
            frame = current
        else:
            try:
                frame = v.shifts(**params.vault_arguments(mode))
            except MagvaultError as exc:
                out.append({"mode": mode, "flagged": [], "error": error_text(exc)})
                continue
        flagged = sorted(set(frame.loc[frame["flagged"].eq(True).fillna(False).astype(bool), "specimen"]))
        out.append({"mode": mode, "flagged": flagged, "error": None, "n": int(frame["specimen"].nunique())})
    return out


def fit_line(v, params: ShiftParams, xs: list[float]) -> tuple[FitLine | None, str | None]:
    """The whole-collection line of temperature against x, for orientation (trend mode only)."""
    try:
        res = v.correlate(params.kind, against="x", branch=params.branch, sigma=params.sigma)
    except MagvaultError as exc:
        return None, error_text(exc)
    if res.slope is None or res.covariance is None or not xs:
        return None, res.note or "too few specimens with a composition for a line"
    lo, hi = min(xs), max(xs)
    pad = 0.05 * ((hi - lo) or 0.01)
    grid = np.linspace(lo - pad, hi + pad, 60)
    fitted = res.intercept + res.slope * grid
    band = cv.line_prediction_uncertainty(grid, res.covariance)
    label = (f"fit to all {res.n} specimens: T = {unc(res.intercept, res.intercept_uncertainty)} "
             f"+ ({unc(res.slope, res.slope_uncertainty)}) x K")
    return FitLine(grid, fitted, band, label), None


def build(v, params: ShiftParams, form: ShiftsForm) -> dict[str, Any] | None:
    try:
        frame = v.shifts(**params.vault_arguments())
    except MagvaultError as exc:
        target = {"against_run": form.against_run, "reference": form.reference, "by": form.by, "bins": form.bins,
                  "method": form.method, "sigma": form.sigma}.get((exc.field or "").replace("-", "_"), form.against)
        target.errors = [*target.errors, error_text(exc)]
        return None
    specimens = v.specimens()
    rows = sorted(records(frame), key=_sort_key)
    flagged_codes = sorted({r["specimen"] for r in rows if r.get("flagged") is True})
    context = context_of(v, flagged_codes, specimens)
    props = specimens.set_index("code") if not specimens.empty else pd.DataFrame()
    anchor = CAUSE_ANCHOR.get(params.against)
    points, not_drawn = [], []
    seen = set()
    for r in rows:
        code = r["specimen"]
        x = props.at[code, "x"] if code in props.index else None
        ux = props.at[code, "x_uncertainty"] if code in props.index else None
        r["x"], r["x_uncertainty"] = _finite(x), _finite(ux)
        r["href"] = url_for("specimens.show", code=code, _anchor=anchor) if anchor else url_for("specimens.show",
                                                                                               code=code)
        key = (code, r.get("group"))
        if key in seen:
            continue
        seen.add(key)
        t = r.get("temperature_K")
        if t is None or r["x"] is None:
            not_drawn.append((code, "no estimate" if t is None else "no composition x"))
            continue
        hover = (f"{code}" + (f" ({r['group']})" if r.get("group") else "")
                 + f"\n{params.kind} {unc(t, r.get('uncertainty_K'), 'K')}"
                 + f"\nx = {unc(r['x'], r['x_uncertainty'])}"
                 + (f"\nshift {unc(r['shift_K'], r.get('shift_uncertainty_K'), 'K')}, {r['sigma']:+.1f} σ"
                    if r.get("shift_K") is not None and r.get("sigma") is not None else ""))
        points.append(ShiftPoint(code, r["x"], r["x_uncertainty"], t, r.get("uncertainty_K"),
                                 r.get("flagged") is True, r["href"], hover))
    fit, fit_problem = (fit_line(v, params, [p.x for p in points]) if params.against == "trend" else (None, None))
    figure = shift_figure(points, kind_label=params.kind, fit=fit) if points else None
    # Specimens the reference cannot be applied to (no treatment, a single run...) are listed by reason, not as rows.
    compared = [r for r in rows if r.get("shift_K") is not None]
    uncompared: dict[str, list[str]] = {}
    for r in rows:
        if r.get("shift_K") is None:
            uncompared.setdefault(r.get("note") or "no estimate", []).append(
                r["specimen"] + (f" ({r['group']})" if r.get("group") else ""))
    return dict(rows=compared, uncompared=sorted(uncompared.items()), flagged=flagged_codes, context=context,
                figure=figure, fit=fit, fit_problem=fit_problem,
                not_drawn=[(c, why) for c, why in not_drawn if why != "no estimate"], glance=glance(v, params, frame),
                grouped=bool(params.by) and "group" in frame.columns, n_specimens=int(frame["specimen"].nunique()),
                n_compared=len({r["specimen"] for r in compared}))


def _finite(value: Any) -> float | None:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def mode_link(params: ShiftParams, mode: str) -> str:
    args = {"kind": params.kind, "against": mode, "sigma": f"{params.sigma:g}", "branch": params.branch}
    if params.by:
        args["by"] = params.by
    if params.method:
        args["method"] = params.method
    return url_for("shifts.index", **args)


@bp.get("/shifts")
def index():
    v = vault()
    form, params, ctx = read(v, request.args)
    result = build(v, params, form) if params.kind else None
    if result and result["figure"]:
        security.allow_plot_styles()
    modes = {m: (label, sentence) for m, label, sentence in MODES}
    return render_template("shifts.html", form=form, params=params, result=result, modes=modes, glance_modes=GLANCE,
                           mode_link=mode_link, save=save_form(QUERY), script_json=script_json,
                           kind_name={k["id"]: k["name"] for k in ctx["kinds"]})

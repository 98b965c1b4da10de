"""Coupled transitions: do two transitions (or one seen two ways) coincide on the same specimens?

The Vault's coupled query pairs each specimen's estimates of A and B and gives
B - A with its combined uncertainty; the page shows them as a table and plots
B against A with the identity line.
"""

from __future__ import annotations

import math
from collections import Counter
from typing import Any

from flask import Blueprint, render_template, request, url_for

from magvault.errors import MagvaultError
from magvault.store.models import RUN_KINDS

from .. import security
from ..figures import script_json
from ..formatting import unc
from .common import records, vault
from .explore_common import default_kind, error_text, kind_choices, save_form
from .explore_figures import PairPoint, coupled_figure
from .explore_forms import CoupledForm, check_choice, set_choices

bp = Blueprint("coupled", __name__)

QUERY = "coupled"
COMPARE = ("kinds", "run_kinds", "methods")


def suggestion(v, kinds: list[dict[str, Any]]) -> tuple[str, str | None, str | None, str | None]:
    """A comparison the vault can answer: (compare, kind, a, b), preferring one kind seen by two run kinds."""
    frame = v.transitions(primary_only=False)
    if frame.empty:
        ids = [k["id"] for k in kinds]
        return "kinds", None, ids[0] if ids else None, ids[1] if len(ids) > 1 else None
    primary = frame[frame["primary"].eq(True).fillna(False).astype(bool)]
    order = [default_kind(kinds)] + [k for k, _ in Counter(primary["kind"]).most_common()]
    for kind in order:
        rk = [k for k, _ in Counter(primary.loc[primary["kind"] == kind, "run_kind"]).most_common()]
        if len(rk) >= 2:
            return "run_kinds", kind, rk[0], rk[1]
    for kind in order:
        methods = [m for m, _ in Counter(frame.loc[frame["kind"] == kind, "method"]).most_common()]
        if len(methods) >= 2:
            return "methods", kind, methods[0], methods[1]
    common = [k for k, _ in Counter(primary["kind"]).most_common()]
    return "kinds", None, common[0] if common else None, common[1] if len(common) > 1 else None


def read(v, formdata) -> tuple[CoupledForm, dict[str, Any], dict[str, Any]]:
    form = CoupledForm(formdata=formdata)
    kinds = v.kinds()
    ids = [k["id"] for k in kinds]
    set_choices(form.kind, [("", "–")] + kind_choices(kinds))
    form.validate()
    given = any((formdata or {}).get(k) for k in ("compare", "a", "b", "kind"))
    if given:
        compare = check_choice(form.compare, COMPARE, "compare", "kinds")
        kind = check_choice(form.kind, ids, "transition", default_kind(kinds)) if compare != "kinds" else None
        if compare != "kinds" and not kind:
            form.kind.errors = [*form.kind.errors, "transition: choose the transition to compare"]
        a, b = form.a.data or None, form.b.data or None
    else:
        compare, kind, a, b = suggestion(v, kinds)
    if compare == "kinds":
        options = ids
    elif compare == "run_kinds":
        options = list(RUN_KINDS)
    else:
        options = sorted(set(v.transitions(kind=kind)["method"].dropna())) if kind else []
    label = {"kinds": "transition", "run_kinds": "run kind", "methods": "method"}[compare]
    choice_list = [(o, o) for o in options]
    set_choices(form.a, [("", f"choose a {label}")] + choice_list)
    set_choices(form.b, [("", f"choose a {label}")] + choice_list)
    a = check_choice(form.a, options, f"A ({label})", None) if given else (a if a in options else None)
    b = check_choice(form.b, options, f"B ({label})", None) if given else (b if b in options else None)
    if a and b and a == b:
        form.b.errors = [*form.b.errors, f"B: choose a {label} other than A ({a})"]
        b = None
    sigma = form.sigma.data if not form.sigma.errors and form.sigma.data is not None else 3.0
    if not (math.isfinite(sigma) and sigma > 0):
        form.sigma.errors = [*form.sigma.errors, f"coincide within: expected a positive number of σ, got {sigma:g}"]
        sigma = 3.0
    params = {"compare": compare, "kind": kind, "a": a, "b": b, "sigma": sigma,
              "branch": check_choice(form.branch, ["heating", "cooling"], "branch", "heating")}
    form.compare.data, form.kind.data = compare, kind or ""
    form.a.data, form.b.data, form.branch.data = a or "", b or "", params["branch"]
    if not form.sigma.errors:
        form.sigma.data = f"{sigma:g}"  # shown as typed ("3", not "3.0")
    return form, params, {"kinds": kinds, "label": label}


def vault_arguments(params: dict[str, Any]) -> dict[str, Any] | None:
    """Keyword arguments of ``Vault.coupled`` (the names the command line saves), or None when incomplete."""
    if not (params["a"] and params["b"]):
        return None
    pair = f"{params['a']},{params['b']}"
    out: dict[str, Any] = {"branch": params["branch"], "sigma": params["sigma"]}
    if params["compare"] == "kinds":
        out["kinds"] = pair
    elif params["kind"]:
        out.update({"kind": params["kind"], params["compare"]: pair})
    else:
        return None
    return out


def saved_parameters(v, formdata) -> dict[str, Any]:
    return vault_arguments(read(v, formdata)[1]) or {}


def page_args(parameters: dict[str, Any]) -> dict[str, Any]:
    p = dict(parameters)
    args: dict[str, Any] = {k: p[k] for k in ("branch", "sigma", "kind") if p.get(k) not in (None, "")}
    for compare in COMPARE:
        pair = p.get(compare)
        if pair:
            items = pair.split(",") if isinstance(pair, str) else list(pair)
            if len(items) == 2:
                args.update(compare=compare, a=items[0].strip(), b=items[1].strip())
    return args


@bp.get("/coupled")
def index():
    v = vault()
    form, params, ctx = read(v, request.args)
    arguments = vault_arguments(params)
    rows, figure, problem = [], None, None
    if arguments:
        try:
            rows = records(v.coupled(**arguments))
        except MagvaultError as exc:
            problem = error_text(exc)
    a_label = params["a"] if params["compare"] == "kinds" else f"{params['kind']} by {params['a']}"
    b_label = params["b"] if params["compare"] == "kinds" else f"{params['kind']} by {params['b']}"
    points = []
    for r in rows:
        r["href"] = url_for("specimens.show", code=r["specimen"])
        if r.get("a_K") is None or r.get("b_K") is None:
            continue
        hover = (f"{r['specimen']}\nA {unc(r['a_K'], r.get('a_uncertainty_K'), 'K')}, "
                 f"B {unc(r['b_K'], r.get('b_uncertainty_K'), 'K')}\nB − A "
                 f"{unc(r.get('difference_K'), r.get('difference_uncertainty_K'), 'K')}")
        points.append(PairPoint(r["specimen"], r["a_K"], r.get("a_uncertainty_K"), r["b_K"], r.get("b_uncertainty_K"),
                                r.get("coincide"), r["href"], hover))
    if points:
        figure = coupled_figure(points, a_label=a_label or "A", b_label=b_label or "B")
        security.allow_plot_styles()
    rows.sort(key=lambda r: (r.get("coincide") is not False, -(abs(r["sigma"]) if r.get("sigma") is not None else -1),
                             r["specimen"]))
    # Specimens with only one of the two are listed by reason rather than as rows of dashes.
    unpaired: dict[str, list[str]] = {}
    for r in rows:
        if r.get("difference_K") is None:
            unpaired.setdefault(r.get("note") or "not both", []).append(r["specimen"])
    rows = [r for r in rows if r.get("difference_K") is not None]
    return render_template("coupled.html", form=form, params=params, rows=rows, unpaired=sorted(unpaired.items()),
                           figure=figure, problem=problem,
                           a_label=a_label, b_label=b_label, complete=arguments is not None, save=save_form(QUERY),
                           script_json=script_json)

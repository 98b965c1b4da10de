"""Loop ratios: every loop paired with its backfield run, on the Day et al. (1977) plot.

Mr/Ms against Hcr/Hc on logarithmic axes, the boundaries drawn where the
vault's labels put them (the PSD/MD limit of Hcr/Hc is a choice: sources
restate it as 4 or as 5), each point a link to its loop's run page.
"""

from __future__ import annotations

from flask import Blueprint, render_template, request, url_for

from .. import security
from ..figures import script_json
from ..formatting import unc
from .common import records, vault
from .explore_figures import RatioPoint, ratio_figure
from .explore_forms import LoopRatiosForm, check_choice

bp = Blueprint("loop_ratios", __name__)

STATES = ("SD", "PSD", "MD", "unclassified")
BOUNDARIES = {"sd_min_mr_ms": 0.5, "md_max_mr_ms": 0.05, "sd_max_hcr_hc": 1.5}


@bp.get("/loops")
def index():
    v = vault()
    form = LoopRatiosForm(formdata=request.args)
    form.validate()
    psd_md = float(check_choice(form.psd_md, ["4", "5"], "PSD/MD limit", "4"))
    colour = check_choice(form.colour, ["state", "origin"], "colour by", "state")
    form.psd_md.data, form.colour.data = f"{psd_md:g}", colour
    bounds = {**BOUNDARIES, "psd_md_hcr_hc": psd_md}
    rows = records(v.loop_ratios(**bounds))
    for r in rows:
        r["href"] = url_for("runs.show", run_id=r["run"])
    if colour == "state":
        groups = [s for s in STATES if any(r["domain_state"] == s for r in rows)]
    else:
        groups = sorted({r["origin"] or "no origin" for r in rows})
    points = [RatioPoint(r["domain_state"] if colour == "state" else (r["origin"] or "no origin"),
                         r["Mr_Ms"], r["Mr_Ms_uncertainty"], r["Hcr_Hc"], r["Hcr_Hc_uncertainty"], r["href"],
                         f"{r['specimen']} · run {r['run']}\nMr/Ms {unc(r['Mr_Ms'], r['Mr_Ms_uncertainty'])}"
                         f"\nHcr/Hc {unc(r['Hcr_Hc'], r['Hcr_Hc_uncertainty'])}\n{r['domain_state']}")
              for r in rows]
    figure = ratio_figure(points, groups, **bounds) if points else None
    if figure:
        security.allow_plot_styles()
    counts = {s: sum(1 for r in rows if r["domain_state"] == s) for s in STATES}
    return render_template("loop_ratios.html", form=form, rows=rows, figure=figure, script_json=script_json,
                           bounds=bounds, counts=counts)

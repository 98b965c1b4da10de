"""Plotly figures of the pages that look across the collection, built server-side as JSON.

The pages draw them with static/js/explore.js (no inline scripts).  Every
clickable point carries the address of its run page (``customdata``; a curve
carries it as ``meta``), which the script follows on click.  Labels are plain
Unicode (MathJax is not bundled).  User text that ends up inside plotly's
pseudo-HTML (hover text, legend names) is escaped first.
"""

from __future__ import annotations

import base64
import html
import json
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
import plotly.graph_objects as go
from plotly.colors import sample_colorscale
from plotly.subplots import make_subplots

from ..figures import PALETTE, exponent_format

INK = "#1e2a33"
MUTED = "#8d979f"
FLAG = "#a3302a"
CALM = "#1d5f7a"
FIT = "#55606e"
#: A sequential scale for continuous properties (the perceptually uniform viridis map, stopped
#: before its palest yellow so that thin lines stay visible on white).
SEQUENTIAL = [[round(i / 6, 4), c] for i, c in enumerate(sample_colorscale("Viridis", list(np.linspace(0, 0.86, 7))))]


def esc(text: Any) -> str:
    """User text made safe for plotly's pseudo-HTML (hover and legend text); newlines become line breaks."""
    return html.escape(str(text), quote=False).replace("%{", "&#37;{").replace("\n", "<br>")


def continuous_colour(value: float, lo: float, hi: float) -> str:
    """The sequential scale's colour for ``value`` in [lo, hi] (the middle when lo == hi)."""
    t = 0.5 if not hi > lo else float(np.clip((value - lo) / (hi - lo), 0.0, 1.0))
    return sample_colorscale(SEQUENTIAL, [t])[0]


def category_colours(labels: Sequence[str], *, missing: str | None = None) -> dict[str, str]:
    """A colour per category, in the order given; the 'missing' category is grey."""
    out, i = {}, 0
    for label in labels:
        if label == missing:
            out[label] = MUTED
            continue
        out[label] = PALETTE[i % len(PALETTE)]
        i += 1
    return out


def base_layout(x_title: str, y_title: str, *, height: int = 440, x_format: str = "none",
                y_format: str = "none") -> dict[str, Any]:
    """The dashboard's plot style (same fonts, colours and axes as the run page's figures)."""
    axis = dict(showline=True, linecolor="#55606e", ticks="outside", gridcolor="#e6e9ec", zeroline=False,
                automargin=True)
    return dict(
        template="none",
        font=dict(family="system-ui, 'Segoe UI', 'DejaVu Sans', sans-serif", size=13, color=INK),
        paper_bgcolor="#ffffff", plot_bgcolor="#ffffff",
        xaxis=dict(title=dict(text=x_title), exponentformat=x_format, **axis),
        yaxis=dict(title=dict(text=y_title), exponentformat=y_format, **axis),
        margin=dict(l=72, r=24, t=24, b=60), height=height, hovermode="closest",
        legend=dict(orientation="h", y=-0.2, x=0.0, yanchor="top"),
        colorway=list(PALETTE),
    )


# --- the overlay -------------------------------------------------------------------------------

@dataclass(frozen=True)
class OverlayCurve:
    run: int
    specimen: str
    branch: str | None
    temperature_K: np.ndarray
    value: np.ndarray
    colour: str
    group: str            # legend entry (categorical colouring) or "" (continuous)
    href: str
    hover: str            # plain text: the run's transition with its uncertainty, or why there is none


@dataclass(frozen=True)
class OverlayMarker:
    run: int
    specimen: str
    branch: str | None
    temperature_K: float
    uncertainty_K: float | None
    value: float          # the curve's value at the transition
    colour: str
    href: str
    label: str            # e.g. "low-t 31.30 ± 0.10 K (heating)"


@dataclass(frozen=True)
class Colouring:
    title: str
    continuous: bool
    lo: float | None = None
    hi: float | None = None
    groups: tuple[str, ...] = field(default_factory=tuple)


@dataclass(frozen=True)
class OverlayFigure:
    figure_json: str
    marker_shapes: tuple[int, ...]   # index in layout.shapes of each marker's line, in marker order
    webgl: bool


def typed_array(values: np.ndarray) -> dict[str, str]:
    """A float32 array in plotly.js's typed-array form (base64 of little-endian bytes).

    float32 halves the bytes of a page of curves; its seven significant digits
    are far beyond what a plot can resolve.
    """
    data = np.ascontiguousarray(values, dtype="<f4")
    return {"dtype": "f4", "bdata": base64.b64encode(data.tobytes()).decode("ascii")}


def overlay_figure(curves: Sequence[OverlayCurve], markers: Sequence[OverlayMarker], *, x_title: str,
                   y_title: str, colouring: Colouring, webgl: bool, kind_label: str,
                   x_range: tuple[float, float] | None = None) -> OverlayFigure:
    """Curves overlaid, each marked at its derived transition: a line shape and a band of ±u.

    The marker is a vertical line (a layout shape, so an element of its own on the
    page) centred on the curve's value at the transition, a tenth of the y range
    tall; the band behind it spans the transition's uncertainty.  An open circle
    at the same place carries the hover text and the link.  The figure is
    written as plain JSON (no plotly object validation: with hundreds of traces
    that alone would take seconds), in the form plotly.js reads.
    """
    values = [c.value for c in curves if c.value.size]
    y_lo = min((float(np.nanmin(v)) for v in values), default=0.0)
    y_hi = max((float(np.nanmax(v)) for v in values), default=1.0)
    half = 0.05 * ((y_hi - y_lo) or abs(y_hi) or 1.0)
    layout = base_layout(x_title, y_title, height=520, y_format=exponent_format(np.array([y_lo, y_hi])))
    layout.pop("template")
    trace_type = "scattergl" if webgl else "scatter"
    data: list[dict[str, Any]] = []
    shown_groups: set[str] = set()
    for c in curves:
        first = bool(c.group) and c.group not in shown_groups
        shown_groups.add(c.group)
        branch = f" ({c.branch})" if c.branch else ""
        trace = {"type": trace_type, "mode": "lines", "x": typed_array(c.temperature_K), "y": typed_array(c.value),
                 "line": {"color": c.colour, "width": 1.4}, "opacity": 0.9,
                 "name": esc(c.group) if c.group else esc(c.specimen), "showlegend": first, "meta": c.href,
                 "hovertemplate": (f"<b>{esc(c.specimen)}</b> · run {c.run}{branch}<br>{esc(c.hover)}"
                                   "<br>T = %{x:.2f} K, %{y:.4g}<extra></extra>")}
        if c.group:
            trace["legendgroup"] = c.group
        data.append(trace)
    shapes: list[dict[str, Any]] = []
    lines: list[int] = []
    for m in markers:
        lines.append(len(shapes))
        shapes.append({"type": "line", "xref": "x", "yref": "y", "x0": m.temperature_K, "x1": m.temperature_K,
                       "y0": m.value - half, "y1": m.value + half, "layer": "above",
                       "line": {"color": m.colour, "width": 2.5}, "name": f"marker run {m.run}"})
    for m in markers:
        if m.uncertainty_K and m.uncertainty_K > 0:
            shapes.append({"type": "rect", "xref": "x", "yref": "y", "x0": m.temperature_K - m.uncertainty_K,
                           "x1": m.temperature_K + m.uncertainty_K, "y0": m.value - half, "y1": m.value + half,
                           "layer": "below", "line": {"width": 0}, "fillcolor": m.colour, "opacity": 0.25,
                           "name": f"band run {m.run}"})
    if markers:
        data.append({
            "type": "scatter", "mode": "markers",
            "x": [m.temperature_K for m in markers], "y": [m.value for m in markers],
            "marker": {"symbol": "circle-open", "size": 9, "color": [m.colour for m in markers],
                       "line": {"width": 2}},
            "error_x": {"type": "data", "array": [m.uncertainty_K or 0.0 for m in markers], "color": INK,
                        "thickness": 1.2, "width": 4, "visible": True},
            "name": esc(f"derived {kind_label} (± u)"), "legendgroup": "markers", "showlegend": True,
            "customdata": [m.href for m in markers],
            "hovertext": [f"<b>{esc(m.specimen)}</b> · run {m.run}<br>{esc(m.label)}" for m in markers],
            "hovertemplate": "%{hovertext}<extra></extra>"})
    if colouring.continuous and colouring.lo is not None:
        hi = colouring.hi if colouring.hi > colouring.lo else colouring.lo + 1e-9
        # An invisible trace that only carries the colour bar of the continuous colouring.
        data.append({"type": "scatter", "mode": "markers", "x": [None], "y": [None], "showlegend": False,
                     "hoverinfo": "skip",
                     "marker": {"color": [colouring.lo, hi], "colorscale": SEQUENTIAL, "cmin": colouring.lo,
                                "cmax": hi, "showscale": True,
                                "colorbar": {"title": {"text": colouring.title, "side": "right"}, "thickness": 14,
                                             "len": 0.9}}})
    layout["shapes"] = shapes
    layout["legend"]["title"] = {"text": "" if colouring.continuous else esc(colouring.title), "side": "top"}
    if x_range:
        layout["xaxis"]["range"] = list(x_range)
    return OverlayFigure(json.dumps({"data": data, "layout": layout}, allow_nan=False, separators=(",", ":")),
                         tuple(lines), webgl)


# --- the shift explorer ----------------------------------------------------------------------

@dataclass(frozen=True)
class ShiftPoint:
    specimen: str
    x: float
    x_uncertainty: float | None
    temperature_K: float
    uncertainty_K: float | None
    flagged: bool
    href: str
    hover: str


@dataclass(frozen=True)
class FitLine:
    x: np.ndarray
    fitted_K: np.ndarray
    band_K: np.ndarray          # standard uncertainty of the line at x
    label: str


def shift_figure(points: Sequence[ShiftPoint], *, kind_label: str, fit: FitLine | None = None) -> str:
    """The kind's temperature against x, with error bars both ways; flagged specimens stand out."""
    fig = go.Figure(layout=base_layout("x in Fe₁₋ₓS", f"{kind_label} temperature (K)", height=460))
    if fit is not None and fit.x.size:
        fig.add_trace(go.Scatter(x=fit.x, y=fit.fitted_K + fit.band_K, mode="lines", line=dict(width=0),
                                 hoverinfo="skip", showlegend=False))
        fig.add_trace(go.Scatter(x=fit.x, y=fit.fitted_K - fit.band_K, mode="lines", line=dict(width=0),
                                 fill="tonexty", fillcolor="rgba(85,96,110,0.18)", hoverinfo="skip",
                                 name="± 1 u of the line"))
        fig.add_trace(go.Scatter(x=fit.x, y=fit.fitted_K, mode="lines", line=dict(color=FIT, width=1.8, dash="dash"),
                                 name=esc(fit.label), hoverinfo="skip"))
    for flagged, name, colour, symbol, size in ((False, "not flagged", CALM, "circle", 8),
                                               (True, "flagged", FLAG, "diamond", 12)):
        group = [p for p in points if p.flagged == flagged]
        if not group:
            continue
        fig.add_trace(go.Scatter(
            x=[p.x for p in group], y=[p.temperature_K for p in group],
            mode="markers+text" if flagged else "markers", name=name,
            text=[esc(p.specimen) for p in group] if flagged else None, textposition="middle right",
            textfont=dict(color=FLAG, size=12),
            marker=dict(color=colour, symbol=symbol, size=size, line=dict(color="#ffffff", width=1)),
            error_x=dict(type="data", array=[p.x_uncertainty or 0.0 for p in group], color=colour, thickness=1.2,
                         width=3),
            error_y=dict(type="data", array=[p.uncertainty_K or 0.0 for p in group], color=colour, thickness=1.2,
                         width=3),
            customdata=[p.href for p in group], hovertext=[esc(p.hover) for p in group],
            hovertemplate="%{hovertext}<extra></extra>"))
    fig.update_layout(legend=dict(orientation="h", y=-0.22, x=0.0, yanchor="top"))
    return fig.to_json()


# --- the composition-temperature map -----------------------------------------------------------

@dataclass(frozen=True)
class MapPoint:
    kind: str
    specimen: str
    run: int
    x: float
    x_uncertainty: float | None
    temperature_K: float
    uncertainty_K: float | None
    href: str
    hover: str


def map_figure(points: Sequence[MapPoint], kinds: Sequence[str], *, apart: bool) -> tuple[str, int]:
    """Every point against x in Fe(1-x)S, a colour per transition kind; (figure JSON, its height)."""
    colours = category_colours(kinds)
    present = [k for k in kinds if any(p.kind == k for p in points)]
    rows = max(1, len(present)) if apart else 1
    height = 460 if rows == 1 else min(1400, 120 + 240 * rows)
    if apart and rows > 1:
        fig = make_subplots(rows=rows, cols=1, shared_xaxes=True, vertical_spacing=0.06)
        layout = base_layout("", "", height=height)
        fig.update_layout(**{k: v for k, v in layout.items() if k not in ("xaxis", "yaxis")})
        axis = {k: v for k, v in layout["xaxis"].items() if k != "title"}
        fig.update_xaxes(**axis)
        fig.update_yaxes(**axis)
        fig.update_xaxes(title_text="x in Fe₁₋ₓS", row=rows, col=1)
    else:
        fig = go.Figure(layout=base_layout("x in Fe₁₋ₓS", "Transition temperature (K)", height=height))
    for i, k in enumerate(present):
        group = [p for p in points if p.kind == k]
        trace = go.Scatter(
            x=[p.x for p in group], y=[p.temperature_K for p in group], mode="markers", name=esc(k),
            marker=dict(color=colours[k], size=8, line=dict(color="#ffffff", width=1)),
            error_x=dict(type="data", array=[p.x_uncertainty or 0.0 for p in group], color=colours[k],
                         thickness=1.1, width=2),
            error_y=dict(type="data", array=[p.uncertainty_K or 0.0 for p in group], color=colours[k],
                         thickness=1.1, width=2),
            customdata=[p.href for p in group], hovertext=[esc(p.hover) for p in group],
            hovertemplate="%{hovertext}<extra></extra>")
        if apart and rows > 1:
            fig.add_trace(trace, row=i + 1, col=1)
            fig.update_yaxes(title_text=f"{esc(k)} (K)", row=i + 1, col=1)
        else:
            fig.add_trace(trace)
    return fig.to_json(), height


# --- coupled transitions ---------------------------------------------------------------------

@dataclass(frozen=True)
class PairPoint:
    specimen: str
    a_K: float
    a_uncertainty_K: float | None
    b_K: float
    b_uncertainty_K: float | None
    coincide: bool | None
    href: str
    hover: str


def coupled_figure(points: Sequence[PairPoint], *, a_label: str, b_label: str) -> str:
    """B against A with error bars both ways and the identity line B = A."""
    fig = go.Figure(layout=base_layout(f"A: {a_label} (K)", f"B: {b_label} (K)", height=460))
    values = [v for p in points for v in (p.a_K, p.b_K)]
    if values:
        lo, hi = min(values), max(values)
        pad = 0.05 * ((hi - lo) or abs(hi) or 1.0)
        fig.add_trace(go.Scatter(x=[lo - pad, hi + pad], y=[lo - pad, hi + pad], mode="lines", name="B = A",
                                 line=dict(color=FIT, width=1.4, dash="dash"), hoverinfo="skip"))
    for coincide, name, colour, symbol in ((True, "coincide", CALM, "circle"), (False, "differ", FLAG, "diamond"),
                                           (None, "cannot tell", MUTED, "circle-open")):
        group = [p for p in points if p.coincide is coincide]
        if not group:
            continue
        fig.add_trace(go.Scatter(
            x=[p.a_K for p in group], y=[p.b_K for p in group], mode="markers", name=name,
            marker=dict(color=colour, symbol=symbol, size=9, line=dict(color="#ffffff", width=1)),
            error_x=dict(type="data", array=[p.a_uncertainty_K or 0.0 for p in group], color=colour,
                         thickness=1.2, width=3),
            error_y=dict(type="data", array=[p.b_uncertainty_K or 0.0 for p in group], color=colour,
                         thickness=1.2, width=3),
            customdata=[p.href for p in group], hovertext=[esc(p.hover) for p in group],
            hovertemplate="%{hovertext}<extra></extra>"))
    return fig.to_json()


__all__ = ["OverlayCurve", "OverlayMarker", "Colouring", "OverlayFigure", "overlay_figure", "ShiftPoint",
           "FitLine", "shift_figure", "MapPoint", "map_figure", "PairPoint", "coupled_figure", "esc",
           "continuous_colour", "category_colours", "base_layout", "SEQUENTIAL"]


# --- loop ratios (the Day plot) ----------------------------------------------------------------

@dataclass(frozen=True)
class RatioPoint:
    group: str
    mr_ms: float
    mr_ms_u: float | None
    hcr_hc: float
    hcr_hc_u: float | None
    href: str
    hover: str


def ratio_figure(points: Sequence[RatioPoint], groups: Sequence[str], *, sd_min_mr_ms: float,
                 md_max_mr_ms: float, sd_max_hcr_hc: float, psd_md_hcr_hc: float) -> str:
    """Mr/Ms against Hcr/Hc on logarithmic axes with the Day et al. (1977) boundaries as dashed lines."""
    xs = [p.hcr_hc for p in points] + [1.0, psd_md_hcr_hc * 1.6]
    ys = [p.mr_ms for p in points] + [md_max_mr_ms * 0.6, 0.6]
    x_range = [np.log10(min(xs) * 0.9), np.log10(max(xs) * 1.1)]
    y_range = [np.log10(min(ys) * 0.9), np.log10(max(ys) * 1.1)]
    layout = base_layout("Hcr / Hc", "Mr / Ms", height=480)
    ticks = [0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1, 1.5, 2, 3, 4, 5, 7, 10, 20, 50]
    layout["xaxis"].update(type="log", range=x_range, tickvals=ticks, ticktext=[f"{t:g}" for t in ticks])
    layout["yaxis"].update(type="log", range=y_range, tickvals=ticks, ticktext=[f"{t:g}" for t in ticks])
    fig = go.Figure(layout=layout)
    line = dict(color=FIT, width=1.2, dash="dash")
    for y in (sd_min_mr_ms, md_max_mr_ms):
        fig.add_shape(type="line", xref="paper", x0=0, x1=1, y0=y, y1=y, line=line)
    for x in (sd_max_hcr_hc, psd_md_hcr_hc):
        fig.add_shape(type="line", yref="paper", x0=x, x1=x, y0=0, y1=1, line=line)
    # Each box named just inside its corner on the boundaries, where points rarely sit.
    for text, x, y, xa, ya in (("SD", sd_max_hcr_hc / 1.04, sd_min_mr_ms * 1.04, "right", "bottom"),
                               ("PSD", sd_max_hcr_hc * 1.04, md_max_mr_ms * 1.04, "left", "bottom"),
                               ("MD", psd_md_hcr_hc * 1.04, md_max_mr_ms / 1.04, "left", "top")):
        fig.add_annotation(x=np.log10(x), y=np.log10(y), text=text, showarrow=False, xanchor=xa, yanchor=ya,
                           font=dict(color=FIT, size=13))
    colours = category_colours(groups, missing="unclassified")
    for g in groups:
        group = [p for p in points if p.group == g]
        if not group:
            continue
        fig.add_trace(go.Scatter(
            x=[p.hcr_hc for p in group], y=[p.mr_ms for p in group], mode="markers", name=esc(g),
            marker=dict(color=colours[g], size=8, line=dict(color="#ffffff", width=1)),
            error_x=dict(type="data", array=[p.hcr_hc_u or 0.0 for p in group], color=colours[g], thickness=1.1),
            error_y=dict(type="data", array=[p.mr_ms_u or 0.0 for p in group], color=colours[g], thickness=1.1),
            customdata=[p.href for p in group], hovertext=[esc(p.hover) for p in group],
            hovertemplate="%{hovertext}<extra></extra>"))
    return fig.to_json()

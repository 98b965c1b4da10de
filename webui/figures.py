"""Plotly figures of a run's series, built server-side and drawn by plotly.js in the page.

Two panels per run: the data *as exported* (the file's own columns and units,
recovered from the stored column mapping: SI = value × factor + offset) and the
data *normalised* (SI, per unit mass where the mass is known, otherwise scaled
to the largest magnitude).  Curves longer than ``max_points`` are decimated with
largest-triangle-three-buckets (Steinarsson 2013, :func:`magvault.analysis.decimate.lttb`);
the same indices serve both panels, since LTTB's choice does not change under a
linear change of units.  The full data are one click away (a WebGL page).
Labels are plain Unicode: no LaTeX, because MathJax is not bundled.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from magvault.analysis.decimate import lttb

from .formatting import COLUMN_LABELS, column_label, unit_text

# Per run kind: candidate x columns, y columns, normalised y columns (first present wins).
AXES: dict[str, tuple[tuple[str, ...], tuple[str, ...], tuple[str, ...]]] = {
    "thermomagnetic": (("temperature_K",),
                       ("moment_A_m2", "moment_A_m2_per_kg", "chi_vol", "chi_mass_m3_per_kg"),
                       ("moment_A_m2_per_kg", "chi_mass_m3_per_kg")),
    "hysteresis": (("mu0H_T",), ("moment_A_m2", "moment_A_m2_per_kg"), ("moment_A_m2_per_kg",)),
    "backfield": (("mu0H_T",), ("moment_A_m2", "moment_A_m2_per_kg"), ("moment_A_m2_per_kg",)),
    "susceptibility": (("temperature_K", "frequency_Hz", "mu0H_T", "time_s"),
                       ("chi_vol", "chi_mass_m3_per_kg"), ("chi_mass_m3_per_kg",)),
    "resonance": (("frequency_Hz",), ("amplitude",), ()),
    "diffraction": (("two_theta_deg",), ("intensity_counts",), ()),
    "calorimetry": (("temperature_K",), ("heat_capacity_J_per_mol_K", "heat_capacity_J_per_kg_K"),
                    ("heat_capacity_J_per_mol_K", "heat_capacity_J_per_kg_K")),
}
GROUP_COLUMNS = ("branch", "block_temperature_K", "block_field_T")
MAX_TRACES = 40
# Our own sober palette (colour-blind-distinguishable hues of similar weight).
PALETTE = ("#1d5f7a", "#b0552e", "#4f7a28", "#7b4d94", "#a07a12", "#2b8a8a", "#8c3b5a", "#55606e")


@dataclass(frozen=True)
class Panel:
    """One figure ready for the page: its plotly JSON and what was drawn."""

    key: str
    title: str
    figure_json: str
    n_points: int
    n_shown: int
    webgl: bool
    note: str = ""

    @property
    def decimated(self) -> bool:
        return self.n_shown < self.n_points


def choose_axes(series: pd.DataFrame, kind: str) -> tuple[str, str] | None:
    """(x, y) columns to plot for a run kind; the first two numeric columns otherwise."""
    xs, ys, _ = AXES.get(kind, ((), (), ()))
    x = next((c for c in xs if c in series.columns), None)
    y = next((c for c in ys if c in series.columns), None)
    if x and y:
        return x, y
    numeric = [c for c in series.columns if c not in GROUP_COLUMNS and pd.api.types.is_numeric_dtype(series[c])]
    if len(numeric) >= 2:
        return numeric[0], numeric[1]
    return None


def group_column(series: pd.DataFrame) -> str | None:
    for c in GROUP_COLUMNS:
        if c in series.columns and series[c].nunique(dropna=True) > 1:
            return c
    return None


def _group_label(column: str, value: Any) -> str:
    if column == "branch":
        return str(value)
    if column == "block_temperature_K":
        return f"{float(value):.5g} K"
    if column == "block_field_T":
        return f"{float(value) * 1e3:.5g} mT"
    return str(value)


def _groups(series: pd.DataFrame, column: str | None) -> list[tuple[str, np.ndarray]]:
    """Row positions of each trace, in order of first appearance."""
    if column is None:
        return [("", np.arange(len(series)))]
    values = series[column].to_numpy()
    keys = pd.unique(series[column].dropna())
    out = []
    for key in keys[:MAX_TRACES]:
        out.append((_group_label(column, key), np.flatnonzero(values == key)))
    return out


def decimate(x: np.ndarray, y: np.ndarray, max_points: int | None) -> np.ndarray:
    """Positions to draw: all finite points, or LTTB's choice when there are more than ``max_points``."""
    finite = np.flatnonzero(np.isfinite(x) & np.isfinite(y))
    if max_points is None or len(finite) <= max_points:
        return finite
    return finite[lttb(x[finite], y[finite], max_points)]


def _mapping_for(mapping: Sequence[dict[str, Any]] | None) -> dict[str, dict[str, Any]]:
    out: dict[str, dict[str, Any]] = {}
    for m in mapping or ():
        target, factor = m.get("target"), m.get("factor")
        if target and factor not in (None, 0) and target not in out:
            out[target] = m
    return out


def _as_exported(column: str, values: np.ndarray, mapping: dict[str, dict[str, Any]]) -> tuple[np.ndarray, str]:
    """The file's own numbers for a canonical column (SI = value × factor + offset), with its header."""
    m = mapping.get(column)
    if m is None:
        return values, column_label(column) + " [SI]"
    raw = (values - float(m.get("offset") or 0.0)) / float(m["factor"])
    source, unit = str(m["source"]), m.get("source_unit")
    # Headers usually carry their unit already ("Moment (emu)"); add it only when they do not.
    return raw, f"{source} ({unit})" if unit and unit not in source else source


def exponent_format(values: np.ndarray) -> str:
    """Plain tick numbers for everyday magnitudes, powers of ten (×10⁻⁸) for tiny or huge ones."""
    finite = np.abs(values[np.isfinite(values)])
    peak = float(finite.max()) if finite.size else 1.0
    return "none" if peak == 0 or 1e-3 <= peak < 1e5 else "power"


def _layout(title: str, x_title: str, y_title: str, legend_title: str | None,
            x_format: str = "power", y_format: str = "power", legend_rows: int = 0) -> dict[str, Any]:
    # A legend goes below the x-axis title; the figure grows by its rows so that neither overlaps the plot.
    extra = 22 * legend_rows
    plot_height = 380 - 44 - 60
    return dict(
        title=dict(text=title, x=0.0, xanchor="left", font=dict(size=15)),
        template="none",
        font=dict(family="system-ui, 'Segoe UI', 'DejaVu Sans', sans-serif", size=13, color="#1e2a33"),
        paper_bgcolor="#ffffff", plot_bgcolor="#ffffff",
        xaxis=dict(title=dict(text=x_title), showline=True, linecolor="#55606e", ticks="outside",
                   gridcolor="#e6e9ec", zeroline=False, exponentformat=x_format),
        yaxis=dict(title=dict(text=y_title), showline=True, linecolor="#55606e", ticks="outside",
                   gridcolor="#e6e9ec", zeroline=False, exponentformat=y_format),
        legend=dict(title=dict(text=legend_title or "", side="top"), orientation="h", x=0.0,
                    y=-58 / plot_height, yanchor="top", entrywidth=76, entrywidthmode="pixels"),
        margin=dict(l=70, r=20, t=44, b=60 + extra), height=380 + extra, hovermode="closest",
        colorway=list(PALETTE),
    )


def _trace(x: np.ndarray, y: np.ndarray, name: str, webgl: bool, n: int, x_label: str, y_label: str):
    cls = go.Scattergl if webgl else go.Scatter
    return cls(x=x, y=y, name=name or None, showlegend=bool(name), mode="lines" if n > 400 else "lines+markers",
               marker=dict(size=4), line=dict(width=1.6),
               hovertemplate=f"{x_label}: %{{x:.6g}}<br>{y_label}: %{{y:.6g}}<extra>{name}</extra>")


def run_panels(series: pd.DataFrame, kind: str, mapping: Sequence[dict[str, Any]] | None = None, *,
               max_points: int | None = 1500, webgl: bool = False,
               which: Sequence[str] = ("exported", "normalised")) -> list[Panel]:
    """The as-exported and normalised figures of one run's series (empty when nothing is plottable).

    Parameters
    ----------
    series : DataFrame
        The run's normalised series (canonical SI columns such as ``temperature_K``).
    kind : str
        The run kind; it picks the axes (``AXES``).
    mapping : list of dict, optional
        The stored column mapping (source, source_unit, target, factor, offset).
    max_points : int or None
        Points per curve above which the curve is decimated by LTTB; None draws all.
    webgl : bool
        Draw with WebGL traces (for the full data; the page then needs ``'unsafe-eval'``).
    which : sequence of str
        Panels to build, in order: ``"exported"`` (file units), ``"si"`` (the
        converted series as stored) and ``"normalised"``.

    References
    ----------
    Steinarsson, S. (2013). Downsampling Time Series for Visual Representation.
    MSc thesis, University of Iceland.
    """
    axes = choose_axes(series, kind)
    if axes is None or series.empty:
        return []
    xcol, ycol = axes
    _, _, norm_candidates = AXES.get(kind, ((), (), ()))
    by_target = _mapping_for(mapping)
    xs_exported = AXES.get(kind, ((), (), ()))
    # The as-exported panel prefers a y column that came straight from the file.
    raw_y = next((c for c in xs_exported[1] if c in series.columns and c in by_target), ycol)
    norm_y = next((c for c in norm_candidates if c in series.columns), None)
    gcol = group_column(series)
    groups = _groups(series, gcol)
    legend = COLUMN_LABELS.get(gcol, (gcol or "",))[0] if gcol else None

    x_si = series[xcol].to_numpy(dtype=float)
    panels = []
    available = {"exported": ("exported", "As exported (file units)", raw_y, "exported"),
                 "si": ("si", "Converted to SI", ycol, "si"),
                 "normalised": ("normalised", "Normalised (SI)", norm_y or ycol, "normalised" if norm_y else "scaled")}
    specs = [available[k] for k in which]
    n_total = int(np.isfinite(x_si).sum())
    for key, title, col, how in specs:
        y_si = series[col].to_numpy(dtype=float)
        if how == "exported":
            x_vals, x_title = _as_exported(xcol, x_si, by_target)
            y_vals, y_title = _as_exported(col, y_si, by_target)
            note = ("" if col in by_target and xcol in by_target
                    else "no column mapping is stored for this series; shown in SI")
        else:
            x_vals, x_title = x_si, column_label(xcol)
            if how == "scaled":
                peak = np.nanmax(np.abs(y_si)) if np.isfinite(y_si).any() else 0.0
                y_vals = y_si / peak if peak > 0 else y_si
                name = COLUMN_LABELS.get(col, (col,))[0]
                symbol = name.split()[-1] if len(name.split()[-1]) <= 2 else name  # "Volume susceptibility χ" -> χ
                y_title = f"{symbol} / max |{symbol}|"
                if col.startswith("chi_vol"):
                    note = "a volume susceptibility needs the density to be per mass: scaled to its largest magnitude"
                elif norm_candidates:
                    note = "no mass recorded: scaled to its largest magnitude"
                else:
                    note = "scaled to its largest magnitude"
            else:
                y_vals, y_title, note = y_si, column_label(col), ""
        named = sum(1 for name, _ in groups if name)
        fig = go.Figure(layout=_layout(title, x_title, y_title, legend, exponent_format(x_vals),
                                       exponent_format(y_vals), legend_rows=-(-named // 3) + 1 if named else 0))
        kept = [rows[decimate(x_si[rows], y_si[rows], max_points)] for _, rows in groups]
        kept_total = sum(len(k) for k in kept)
        for (name, _), keep in zip(groups, kept):
            # One drawing style for the whole figure: markers only when there are few points in all.
            fig.add_trace(_trace(x_vals[keep], y_vals[keep], name, webgl, kept_total,
                                 _short(x_title), _short(y_title)))
        panels.append(Panel(key=key, title=title, figure_json=fig.to_json(), n_points=n_total,
                            n_shown=kept_total, webgl=webgl, note=note))
    return panels


#: Per-block quantities drawn against temperature first, with how each is shown.
TRACK_ORDER = ("frequency_Hz", "inverse_Q", "Hc", "Ms", "Mr_Ms", "fwhm_Hz")
MIN_TRACK_POINTS = 3
MAX_TRACK_PANELS = 4


def track_panels(tracks: pd.DataFrame, transitions: Sequence[dict[str, Any]] = ()) -> list[Panel]:
    """Figures of a run's per-block results against temperature, one per quantity, one trace per track.

    A resonance frequency is drawn as (f / f(T0))^2, T0 the lowest block of its mode:
    f^2 is proportional to the elastic modulus (Migliori & Sarrao 1997), so softening
    shows directly.  Quantities with fewer than three temperatures are left out.  The
    run's primary transitions are drawn as dashed vertical lines named by kind.
    """
    if tracks is None or tracks.empty:
        return []
    counts = tracks.groupby("quantity")["block_temperature_K"].nunique()
    wanted = [q for q in counts.index if counts[q] >= MIN_TRACK_POINTS]
    if "inverse_Q" in wanted and "fwhm_Hz" in wanted:
        wanted.remove("fwhm_Hz")  # Q^-1 = FWHM / f says the same, free of the mode's frequency
    wanted.sort(key=lambda q: (TRACK_ORDER.index(q) if q in TRACK_ORDER else len(TRACK_ORDER), q))
    marks = [t for t in transitions if t.get("primary") and t.get("temperature_K") is not None]
    panels = []
    for quantity in wanted[:MAX_TRACK_PANELS]:
        rows = tracks[tracks["quantity"] == quantity]
        unit = str(rows["unit"].iloc[0] or "")
        scale = 1.0
        if quantity == "frequency_Hz":
            y_title, title = "(f / f(T₀))²  ∝ elastic modulus", "Resonance frequency squared"
        elif quantity == "inverse_Q":
            scale, y_title, title = 1e3, "Q⁻¹ (× 10⁻³)", "Damping Q⁻¹ = FWHM / f"
        else:
            y_title = f"{quantity} ({unit_text(unit)})" if unit and unit != "1" else quantity
            title = quantity
        fig = go.Figure(layout=_layout(title, "Block temperature (K)", y_title, None, "none", "power",
                                       legend_rows=1 if rows["track"].nunique() > 1 else 0))
        n = 0
        for i, (track, part) in enumerate(rows.groupby(rows["track"].fillna(""), sort=True)):
            part = part.sort_values("block_temperature_K")
            T = part["block_temperature_K"].to_numpy(dtype=float)
            y = part["value"].to_numpy(dtype=float)
            u = part["uncertainty"].to_numpy(dtype=float)
            if quantity == "frequency_Hz":
                y0 = y[0]
                u = 2.0 * (y / y0) ** 2 * u / y  # relative uncertainty of f^2 is twice that of f
                y = (y / y0) ** 2
            y, u = y * scale, u * scale
            fig.add_trace(go.Scatter(x=T, y=y, name=track or None, showlegend=bool(track), mode="lines+markers",
                                     marker=dict(size=6, color=PALETTE[i % len(PALETTE)]),
                                     line=dict(width=1.4, color=PALETTE[i % len(PALETTE)]),
                                     error_y=dict(type="data", array=np.nan_to_num(u), visible=True, thickness=1),
                                     hovertemplate=(f"{track + ': ' if track else ''}%{{x:.4g}} K<br>"
                                                    f"{_short(y_title)}: %{{y:.6g}}<extra></extra>")))
            n += len(T)
        for t in marks:
            fig.add_vline(x=float(t["temperature_K"]), line=dict(color="#8c3b5a", width=1.2, dash="dash"),
                          annotation=dict(text=str(t.get("kind", "")), font=dict(size=11, color="#8c3b5a")),
                          annotation_position="top")
        panels.append(Panel(key=f"track-{len(panels)}", title=title, figure_json=fig.to_json(), n_points=n,
                            n_shown=n, webgl=False, note="one point per temperature block, ± standard uncertainty"))
    return panels


def _short(title: str) -> str:
    return title.split(" [")[0]


def script_json(text: str) -> str:
    """JSON made safe to sit inside ``<script type="application/json">`` (no ``</script>`` break-out)."""
    return text.replace("&", "\\u0026").replace("<", "\\u003c").replace(">", "\\u003e")


def axis_titles(figure_json: str) -> tuple[str, str]:
    """(x title, y title) of a figure, for tests and summaries."""
    import json

    layout = json.loads(figure_json)["layout"]
    return layout["xaxis"]["title"]["text"], layout["yaxis"]["title"]["text"]


__all__ = ["run_panels", "track_panels", "Panel", "choose_axes", "decimate", "script_json", "unit_text", "axis_titles"]

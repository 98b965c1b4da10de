"""How numbers, units, dates and names look on the dashboard (Jinja filters and helpers).

Values arrive in SI; here they get a readable unit (a metric prefix where the
trade uses one, powers of ten for moments), their uncertainty as ``value ± u``
(:func:`magvault.textviews.fmt_unc`: the uncertainty to two significant digits)
and Unicode unit symbols (no LaTeX: MathJax is not bundled).
"""

from __future__ import annotations

import datetime as dt
import math
import re
from dataclasses import dataclass
from typing import Any

from flask import Flask
from markupsafe import Markup

from magvault.textviews import fmt_unc

SUPERSCRIPT = str.maketrans("0123456789-+", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺")

# Unit text as stored (SI, ASCII) -> as shown.
_UNIT_SHOWN = {
    "A m^2": "A m²", "A m2": "A m²", "A m^2/kg": "A m² kg⁻¹", "A/m": "A m⁻¹", "m^3/kg": "m³ kg⁻¹",
    "J/(mol K)": "J mol⁻¹ K⁻¹", "J/(kg K)": "J kg⁻¹ K⁻¹", "J/mol": "J mol⁻¹", "J/kg": "J kg⁻¹",
    "J/(mol K^2)": "J mol⁻¹ K⁻²", "K/s": "K s⁻¹", "K/min": "K min⁻¹", "deg": "°", "degree": "°", "rad": "rad",
    "um": "µm",
    "1": "", "": "", "dimensionless": "", "1 (SI)": "SI", "ohm": "Ω", "angstrom": "Å",
    "kg/m^3": "kg m⁻³", "Pa": "Pa", "m^3": "m³", "1/K": "K⁻¹",
}

# Units shown with a metric prefix (mT, µm, kHz, ms); others use powers of ten.
_PREFIXABLE = {"T", "m", "Hz", "s", "Pa", "Gy", "J", "W", "A", "V", "g"}
_PREFIXES = {-12: "p", -9: "n", -6: "µ", -3: "m", 0: "", 3: "k", 6: "M", 9: "G"}


def unit_text(unit: str | None) -> str:
    """Unicode form of a stored unit: ``'A m^2/kg'`` -> ``'A m² kg⁻¹'``."""
    if unit is None:
        return ""
    unit = str(unit).strip()
    if unit in _UNIT_SHOWN:
        return _UNIT_SHOWN[unit]
    return re.sub(r"\^(-?\d+)", lambda m: m.group(1).translate(SUPERSCRIPT), unit)


def _finite(value: Any) -> float | None:
    if value is None:
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def _tidy(x: float | None) -> float | None:
    # Unit conversions leave binary round-off (1e-7 kg x 1e6 = 0.09999999999999999 mg), which
    # would change the number of digits shown; 12 significant digits are far beyond any measurement.
    return None if x is None else float(f"{x:.12g}")


def _fmt(v: float, u: float | None, unit: str, scale: float) -> str:
    return fmt_unc(_tidy(v * scale), _tidy(u * scale) if u and u > 0 else None, unit, 1.0)


def unc(value: Any, uncertainty: Any = None, unit: str = "", scale: float = 1.0) -> str:
    """``'12.50 ± 0.02 mg'``; ``'–'`` when there is no value (None or NaN)."""
    v, u = _finite(value), _finite(uncertainty)
    if v is None:
        return "–"
    return _fmt(v, u, unit_text(unit), scale)


def quantity(value: Any, uncertainty: Any = None, unit: str | None = "") -> str:
    """A value in SI with its uncertainty, in a readable unit.

    Prefixed units for T, m, Hz, s... (``0.0123 T`` -> ``12.3 mT``); a power of
    ten for the rest when the number is very small or large
    (``(1.234 ± 0.005) × 10⁻⁸ A m²``).  Kelvin keeps no prefix.
    """
    v, u = _finite(value), _finite(uncertainty)
    if v is None:
        return "–"
    unit = (unit or "").strip()
    magnitude = abs(v) if v != 0 else (abs(u) if u else 0.0)
    if magnitude == 0:
        return unc(v, u, unit)
    exp3 = 3 * math.floor(math.log10(magnitude) / 3)
    if unit in _PREFIXABLE:
        exp3 = max(-12, min(9, exp3))
        if exp3 == 0:
            return unc(v, u, unit)
        return _fmt(v, u, _PREFIXES[exp3] + unit_text(unit), 10.0 ** -exp3)
    exp10 = math.floor(math.log10(magnitude))
    if -3 <= exp10 <= 4:
        return unc(v, u, unit)
    text = _fmt(v, u, "", 10.0 ** -exp10)
    power = f"10{str(exp10).translate(SUPERSCRIPT)}"
    shown = unit_text(unit)
    if "±" in text:
        return f"({text}) × {power}" + (f" {shown}" if shown else "")
    return f"{text} × {power}" + (f" {shown}" if shown else "")


def mass(kg: Any, uncertainty_kg: Any = None) -> str:
    """Masses in mg below a gram, in g above (``'12.50 ± 0.02 mg'``)."""
    v = _finite(kg)
    if v is None:
        return "–"
    if abs(v) >= 1e-3:
        return unc(v, uncertainty_kg, "g", 1e3)
    return unc(v, uncertainty_kg, "mg", 1e6)


def number(value: Any, digits: int = 6) -> str:
    v = _finite(value)
    if v is None:
        return "" if value is None else str(value)
    return f"{v:.{digits}g}"


def when(value: Any, *, seconds: bool = False) -> str:
    """``'2026-11-03 10:00 UTC'`` from an ISO 8601 string; ``'–'`` for none."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "–"
    try:
        t = value if isinstance(value, dt.datetime) else dt.datetime.fromisoformat(str(value).replace("Z", "+00:00"))
    except ValueError:
        return str(value)
    if t.tzinfo is not None:
        t = t.astimezone(dt.timezone.utc)
    return t.strftime("%Y-%m-%d %H:%M:%S UTC" if seconds else "%Y-%m-%d %H:%M UTC")


def day(value: Any) -> str:
    """``'2026-11-03'`` (UTC) from an ISO 8601 string."""
    shown = when(value)
    return shown[:10] if shown[:4].isdigit() else shown


def filesize(n: Any) -> str:
    v = _finite(n)
    if v is None:
        return "–"
    for unit in ("bytes", "kB", "MB", "GB"):
        if v < 1000 or unit == "GB":
            return f"{v:.0f} {unit}" if unit == "bytes" else f"{v:.1f} {unit}"
        v /= 1000
    return f"{v:.1f} GB"


def blank(value: Any) -> bool:
    if value is None:
        return True
    if isinstance(value, float) and math.isnan(value):
        return True
    try:
        import pandas as pd

        return bool(pd.isna(value)) if not isinstance(value, (list, dict, tuple)) else False
    except (TypeError, ValueError):
        return False


def text(value: Any, empty: str = "–") -> str:
    return empty if blank(value) or value == "" else str(value)


# --- canonical names -----------------------------------------------------------------------

COLUMN_LABELS = {
    "time_s": ("Time", "s"), "temperature_K": ("Temperature", "K"), "mu0H_T": ("Field μ₀H", "T"),
    "moment_A_m2": ("Moment", "A m^2"), "moment_A_m2_per_kg": ("Mass moment", "A m^2/kg"),
    "chi_vol": ("Volume susceptibility χ", "1 (SI)"), "chi_mass_m3_per_kg": ("Mass susceptibility χ", "m^3/kg"),
    "chi_quad_vol": ("Quadrature χ″ (volume)", "1 (SI)"),
    "chi_quad_mass_m3_per_kg": ("Quadrature χ″ (mass)", "m^3/kg"), "frequency_Hz": ("Frequency", "Hz"),
    "amplitude": ("Amplitude", "instrument units"), "phase_rad": ("Phase", "rad"),
    "two_theta_deg": ("2θ", "deg"), "intensity_counts": ("Intensity", "counts"),
    "intensity_sigma_counts": ("σ(intensity)", "counts"),
    "heat_capacity_J_per_mol_K": ("Heat capacity Cp", "J/(mol K)"),
    "heat_capacity_J_per_kg_K": ("Specific heat capacity cp", "J/(kg K)"),
    "block_temperature_K": ("Block temperature", "K"), "block_field_T": ("Block field μ₀H", "T"),
    "branch": ("Branch", ""),
}

_SUFFIX_UNITS = [  # longest first
    ("_J_per_mol_K", "J/(mol K)"), ("_J_per_kg_K", "J/(kg K)"), ("_A_m2_per_kg", "A m^2/kg"),
    ("_m3_per_kg", "m^3/kg"), ("_K_per_s", "K/s"), ("_A_m2", "A m^2"), ("_Hz", "Hz"), ("_Pa", "Pa"),
    ("_kg", "kg"), ("_Gy", "Gy"), ("_deg", "deg"), ("_rad", "rad"), ("_K", "K"), ("_T", "T"), ("_s", "s"),
    ("_m", "m"),
]

_CONDITION_LABELS = {
    "field_T": "Applied field μ₀H", "sweep_rate_K_per_s": "Sweep rate", "temperature_K": "Temperature",
    "frequency_Hz": "Frequency", "wavelength_m": "Wavelength", "atmosphere": "Atmosphere",
    "operator": "Operator", "started": "Started", "mass_kg": "Mass", "duration_s": "Duration",
    "pressure_Pa": "Pressure", "dose_Gy": "Dose", "cooling_rate_K_per_s": "Cooling rate",
    "heating_rate_K_per_s": "Heating rate",
}


def split_unit(key: str) -> tuple[str, str | None]:
    """``'sweep_rate_K_per_s'`` -> (``'sweep_rate'``, ``'K/s'``); no known suffix -> (key, None)."""
    for suffix, unit in _SUFFIX_UNITS:
        if key.endswith(suffix) and len(key) > len(suffix):
            return key[: -len(suffix)], unit
    return key, None


def column_label(column: str) -> str:
    """``'temperature_K'`` -> ``'Temperature (K)'``; other columns keep their name and unit suffix."""
    if column in COLUMN_LABELS:
        name, unit = COLUMN_LABELS[column]
        shown = unit_text(unit)
        return f"{name} ({shown})" if shown else name
    base, unit = split_unit(column)
    shown = unit_text(unit) if unit else ""
    return f"{base.replace('_', ' ')} ({shown})" if shown else column.replace("_", " ")


def column_unit(column: str) -> str:
    if column in COLUMN_LABELS:
        return COLUMN_LABELS[column][1]
    return split_unit(column)[1] or ""


@dataclass(frozen=True)
class Condition:
    label: str
    shown: str


def conditions(items: dict[str, Any] | None) -> list[Condition]:
    """Canonical run or treatment conditions as (label, value with unit and uncertainty).

    Keys carry their SI unit (``temperature_K``); an uncertainty stored beside a
    value (``temperature_uncertainty_K``) is shown with it.
    """
    if not items:
        return []
    out = []
    for key, value in items.items():
        if "_uncertainty_" in key:
            continue
        base, unit = split_unit(key)
        label = _CONDITION_LABELS.get(key) or base.replace("_", " ").capitalize()
        if key in ("started", "finished"):
            out.append(Condition(label, when(value)))
            continue
        if unit is None or _finite(value) is None:
            out.append(Condition(label, text(value)))
            continue
        u = items.get(f"{base}_uncertainty_{key[len(base) + 1:]}")
        if key == "mass_kg":
            shown = mass(value, u)
        elif key == "duration_s":
            shown = duration(value, u)
        elif key == "wavelength_m":
            shown = unc(value, u, "nm", 1e9) + f" ({unc(value, u, 'Å', 1e10)})"
        elif key.endswith("_K_per_s"):
            shown = unc(value, u, "K/s") + f" ({unc(value, u, 'K/min', 60)})"
        else:
            shown = quantity(value, u, unit)
        out.append(Condition(label, shown))
    return out


def duration(seconds: Any, uncertainty: Any = None) -> str:
    v = _finite(seconds)
    if v is None:
        return "–"
    if v >= 2 * 86400:
        return unc(v, uncertainty, "d", 1 / 86400)
    if v >= 3600:
        return unc(v, uncertainty, "h", 1 / 3600)
    if v >= 120:
        return unc(v, uncertainty, "min", 1 / 60)
    return unc(v, uncertainty, "s")


# --- scale bars ------------------------------------------------------------------------------

@dataclass(frozen=True)
class ScaleBar:
    """A bar of ``length_m`` that spans ``fraction`` of the image's width."""

    length_m: float
    fraction: float
    label: str


def scale_bar(pixel_size_m: float | None, width_px: int | None, target: float = 0.25) -> ScaleBar | None:
    """The longest round length (1, 2 or 5 × 10ⁿ m) not longer than ``target`` of the field of view.

    The field of view is ``pixel_size_m * width_px``; the bar's fraction of the
    image width is independent of how large the image is drawn (thumbnail or
    original), so it is drawn as a percentage of the picture's width.
    """
    p, w = _finite(pixel_size_m), _finite(width_px)
    if p is None or w is None or p <= 0 or w <= 0:
        return None
    field = p * w
    limit = target * field
    exp = math.floor(math.log10(limit))
    length = max(m * 10.0 ** exp for m in (1, 2, 5) if m * 10.0 ** exp <= limit * (1 + 1e-12))
    return ScaleBar(length, length / field, length_label(length))


def length_label(length_m: float) -> str:
    for factor, unit in ((1.0, "m"), (1e-3, "mm"), (1e-6, "µm"), (1e-9, "nm"), (1e-12, "pm")):
        if length_m >= factor * (1 - 1e-9):
            return f"{length_m / factor:.4g} {unit}"
    return f"{length_m:.3g} m"


def pixel_size(pixel_size_m: Any) -> str:
    return quantity(pixel_size_m, None, "m") + " per pixel" if _finite(pixel_size_m) else "pixel size not given"


STATUS_TEXT = {"planned": "planned", "running": "running", "recorded": "recorded",
               "superseded": "superseded", "retracted": "retracted"}


def status_badge(status: str | None) -> Markup:
    s = str(status or "unknown")
    css = s if s in STATUS_TEXT else "unknown"
    return Markup('<span class="status status-{}">{}</span>').format(css, s)


def init_app(app: Flask) -> None:
    app.add_template_filter(unc, "unc")
    app.add_template_filter(quantity, "quantity")
    app.add_template_filter(mass, "mass")
    app.add_template_filter(number, "number")
    app.add_template_filter(when, "when")
    app.add_template_filter(day, "day")
    app.add_template_filter(filesize, "filesize")
    app.add_template_filter(text, "text")
    app.add_template_filter(unit_text, "unit")
    app.add_template_filter(column_label, "column_label")
    app.add_template_filter(status_badge, "status")
    app.add_template_filter(duration, "duration")
    app.add_template_filter(pixel_size, "pixel_size")
    app.add_template_global(conditions, "conditions")
    app.add_template_global(scale_bar, "scale_bar")
    app.add_template_global(blank, "blank")
    app.add_template_test(blank, "blank")  # results|selectattr("block_temperature_K", "blank")

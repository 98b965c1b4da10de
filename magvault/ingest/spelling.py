"""Unit spellings as people and instruments write them, turned into SI factors.

pint alone does not read ``Am2`` (it sees attometre squared), ``emu``, ``Oe`` as
mu0*H in tesla, ``C`` as degrees Celsius in a temperature column, or ``cm3/g`` as
a CGS mass susceptibility (which carries a 4 pi).  This module puts a normaliser
in front of pint: a table of the trade's spellings with exact factors, a little
context (the *family* of the column: temperature, field, chi, ...) for the
spellings that mean different things in different columns, and pint for every
ordinary SI or prefixed unit.

CGS to SI factors follow the NBS/IEEE table "Units for Magnetic Properties":
1 emu = 1e-3 A m^2; 1 emu/g = 1 A m^2/kg; 1 emu/cm^3 = 1e3 A/m;
1 Oe = 1000/(4 pi) A/m, stored as mu0*H: 1 Oe -> 1e-4 T; 1 G = 1e-4 T;
volume susceptibility SI = 4 pi x CGS; mass susceptibility 1 cm^3/g = 4 pi x 1e-3 m^3/kg.
A field given as H in A/m is stored as mu0*H with pint's (CODATA) mu0.

The public entry point is :func:`si_conversion`.
"""

from __future__ import annotations

import math
import re
import unicodedata
from typing import NamedTuple

import pint

from ..errors import InvalidValue
from ..units import Q_
from .canonical import TARGET_FAMILY

__all__ = ["Conversion", "si_conversion", "family_of", "QUANTITY_UNITS", "FAMILIES",
           "unit_label", "clean_unit_text", "MU0_T_M_PER_A"]

FOUR_PI = 4.0 * math.pi
#: Vacuum permeability as pint carries it (CODATA), in T m / A.
MU0_T_M_PER_A = float(Q_(1.0, "mu_0").to("T*m/A").magnitude)

# Quantity -> unit the converted values are expressed in.
QUANTITY_UNITS: dict[str, str] = {
    "temperature": "K",
    "field": "T",                      # mu0*H
    "moment": "A m^2",
    "mass_moment": "A m^2/kg",
    "magnetisation": "A/m",
    "volume_susceptibility": "1",      # SI, dimensionless
    "mass_susceptibility": "m^3/kg",
    "specimen_susceptibility": "m^3",  # moment per field of a whole specimen
    "frequency": "Hz",
    "two_theta": "deg",
    "angle": "rad",
    "counts": "counts",
    "count_rate": "counts/s",
    "arbitrary": "a.u.",
    "dimensionless": "1",
    "molar_heat_capacity": "J/(mol K)",
    "specific_heat_capacity": "J/(kg K)",
    "heat_capacity": "J/K",
    "time": "s",
    "mass": "kg",
    "length": "m",
    "temperature_rate": "K/s",
}

FAMILIES = frozenset({
    "temperature", "field", "moment", "chi", "chi_quad", "frequency", "amplitude", "phase",
    "two_theta", "intensity", "sigma", "heat_capacity", "time", "branch", "mass",
    "wavelength", "sweep_rate",
})

_CONDITION_FAMILY = {
    "field_T": "field", "sweep_rate_K_per_s": "sweep_rate", "temperature_K": "temperature",
    "frequency_Hz": "frequency", "wavelength_m": "wavelength", "mass_kg": "mass",
}

# Example spellings offered in error messages, per family.
CANDIDATES: dict[str | None, tuple[str, ...]] = {
    "temperature": ("K", "°C", "°F"),
    "field": ("T", "mT", "Oe", "kOe", "G", "A/m"),
    "moment": ("A m2", "emu", "A m2/kg", "emu/g"),
    "chi": ("SI", "emu/(cm3 Oe)", "m3/kg", "emu/(g Oe)"),
    "chi_quad": ("SI", "emu/(cm3 Oe)", "m3/kg", "emu/(g Oe)"),
    "frequency": ("Hz", "kHz", "MHz"),
    "phase": ("deg", "rad"),
    "two_theta": ("deg", "°2θ"),
    "intensity": ("counts", "cps"),
    "sigma": ("counts",),
    "heat_capacity": ("J/(mol K)", "J/(g K)", "J/(kg K)"),
    "time": ("s", "min", "h"),
    "mass": ("mg", "g", "kg"),
    "wavelength": ("A (ångström)", "nm", "pm"),
    "sweep_rate": ("K/min", "K/s", "°C/min"),
    None: ("K", "°C", "T", "Oe", "A m2", "emu", "emu/g", "Hz", "deg", "counts", "J/(mol K)", "s"),
}


class Conversion(NamedTuple):
    """How to bring one column (or value) to SI: ``si = raw * factor + offset``."""

    quantity: str     # a key of QUANTITY_UNITS, or "other"
    factor: float
    offset: float = 0.0
    si_unit: str = ""  # unit of the converted values (QUANTITY_UNITS, or pint's SI unit for "other")


def family_of(hint: str | None) -> str | None:
    """Family of a column from a family name, a canonical column or a condition key."""
    if hint is None:
        return None
    if hint in FAMILIES:
        return hint
    return TARGET_FAMILY.get(hint) or _CONDITION_FAMILY.get(hint)


# ---------------------------------------------------------------------------
# Cleaning and squashing spellings
# ---------------------------------------------------------------------------

_SUPER = str.maketrans("⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺", "0123456789-+")
_SUPER_RUN = re.compile("[⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺]+")
_SCALE = re.compile(
    r"^\s*(?:[x×*]\s*)?(?P<scale>1[eE][-+]?\d+|10\s*(?:\^|\*\*)\s*[-+]?\d+)\s*(?:[x×*]\s*)?")


def clean_unit_text(text: str) -> str:
    """Unicode and bracket clean-up of a unit as written; keeps its meaning."""
    t = unicodedata.normalize("NFC", str(text)).strip()
    # Enclosing brackets, possibly doubled: "(K)", "[emu]", "{Oe}".
    while len(t) >= 2 and t[0] + t[-1] in ("()", "[]", "{}") and _balanced(t[1:-1]):
        t = t[1:-1].strip()
    t = t.replace("℃", "°C").replace("℉", "°F").replace("Å", "Å").replace("º", "°")
    t = t.replace("−", "-").replace("–", "-")
    t = _SUPER_RUN.sub(lambda m: "^" + m.group(0).translate(_SUPER), t)
    t = t.replace("µ", "u").replace("μ", "u")
    t = t.replace("·", "*").replace("⋅", "*").replace("•", "*")
    t = t.replace("θ", "theta").replace("Θ", "theta")
    return re.sub(r"\s+", " ", t)


def _balanced(t: str) -> bool:
    depth = 0
    for ch in t:
        if ch in "([{":
            depth += 1
        elif ch in ")]}":
            depth -= 1
            if depth < 0:
                return False
    return depth == 0


def _squash(t: str) -> str:
    """Drop separators so that 'A m^2', 'A*m2' and 'A.m²' all read 'Am2'."""
    return re.sub(r"[\s*.^]", "", t)


# ---------------------------------------------------------------------------
# The table of trade spellings (squashed, case-insensitive unless noted)
# ---------------------------------------------------------------------------

_EMU_OE_FACTOR_MASS = FOUR_PI * 1e-3   # 1 emu/(g Oe) = 1 cm^3/g = 4 pi x 1e-3 m^3/kg
_EMU_OE_FACTOR_SPEC = FOUR_PI * 1e-6   # 1 emu/Oe = 1 cm^3 = 4 pi x 1e-6 m^3
_F_FACTOR = 5.0 / 9.0

_TABLE_LOWER: dict[str, tuple[str, float, float]] = {}


def _add(quantity: str, factor: float, offset: float, *spellings: str) -> None:
    for s in spellings:
        _TABLE_LOWER[_squash(clean_unit_text(s)).lower()] = (quantity, factor, offset)


_add("moment", 1.0, 0.0, "Am2", "A m2", "Am^2")
_add("moment", 1e-3, 0.0, "emu")
_add("moment", 1e-6, 0.0, "memu")
_add("moment", 1e-9, 0.0, "uemu")
_add("mass_moment", 1.0, 0.0, "Am2/kg", "Am2kg-1", "emu/g", "emug-1")
_add("magnetisation", 1e3, 0.0, "emu/cm3", "emucm-3", "emu/cc")
_add("field", 1e-4, 0.0, "Oe", "oersted", "gauss")
_add("field", 1e-1, 0.0, "kOe", "kilooersted")
_add("temperature", 1.0, 273.15, "degC", "°C", "deg C", "celsius", "degreesC", "degreeC",
     "degreesCelsius", "degCelsius", "°Celsius")
_add("temperature", _F_FACTOR, 459.67 * _F_FACTOR, "degF", "°F", "fahrenheit", "degreesF",
     "degreeF", "degreesFahrenheit")
_add("temperature", 1.0, 0.0, "kelvin", "kelvins")
_add("volume_susceptibility", 1.0, 0.0, "SI", "SIunits", "SIunit", "SIvolume")
_add("volume_susceptibility", FOUR_PI, 0.0, "cgs", "emu/cm3/Oe", "emu/(cm3Oe)", "emucm-3Oe-1",
     "emu/(Oecm3)", "emu/Oe/cm3", "emu/(ccOe)", "emu/cc/Oe")
_add("mass_susceptibility", _EMU_OE_FACTOR_MASS, 0.0, "emu/g/Oe", "emu/(gOe)", "emug-1Oe-1",
     "emu/(Oeg)", "emu/Oe/g")
_add("specimen_susceptibility", _EMU_OE_FACTOR_SPEC, 0.0, "emu/Oe", "emuOe-1")
_add("counts", 1.0, 0.0, "counts", "count", "cts", "ct", "cnt", "cnts")
_add("count_rate", 1.0, 0.0, "cps", "counts/s", "count/s", "cts/s", "c/s", "counts/sec",
     "cts/sec", "countspersecond", "countss-1", "ctss-1")
_add("arbitrary", 1.0, 0.0, "a.u.", "au", "arb", "arbu", "arbunits", "arbunit",
     "arbitraryunits", "arbitrary", "arbitraryunit")
_add("two_theta", 1.0, 0.0, "2theta", "°2theta", "deg2theta", "degrees2theta", "2thetadeg",
     "2theta(deg)", "deg(2theta)", "2th")
_add("dimensionless", 1.0, 0.0, "1", "-", "none", "dimensionless", "unitless")
_add("length", 1e-10, 0.0, "angstrom", "angstroms", "Å", "AA", "ang")

# Spellings that mean different things by column.
_ANGLE_WORDS = {"deg", "°", "degree", "degrees", "degs"}
_MHZ_AMBIGUOUS = {"mhz"}  # written in lower case it may be mHz or MHz


def _ambiguous(column: str, unit_text: str, candidates: tuple[str, ...]) -> InvalidValue:
    return InvalidValue(
        f"column {column!r}: unit {unit_text!r} is ambiguous here; write one of: "
        + ", ".join(candidates), field=column)


def _unknown(column: str, unit_text: str, family: str | None) -> InvalidValue:
    cands = CANDIDATES.get(family, CANDIDATES[None])
    return InvalidValue(
        f"column {column!r}: unknown unit {unit_text!r}; expected a unit such as "
        + ", ".join(cands), field=column)


def _contextual(squashed: str, family: str | None, column: str, unit_text: str) -> Conversion | None:
    """Spellings whose meaning depends on the column's family; None when not one of them."""
    low = squashed.lower()
    if squashed in ("C", "F"):
        if family in ("temperature",):
            return _conv(*_TABLE_LOWER["degc" if squashed == "C" else "degf"])
        if family is None:
            raise _ambiguous(column, unit_text, ("°C (Celsius)", "K") if squashed == "C"
                             else ("°F (Fahrenheit)", "K"))
        return None  # coulomb / farad through pint, refused later if it does not fit
    if low in _ANGLE_WORDS:
        if family == "temperature":
            raise _ambiguous(column, unit_text, ("°C", "°F", "K"))
        if family == "two_theta":
            return _conv("two_theta", 1.0, 0.0)
        return _conv("angle", math.pi / 180.0, 0.0)
    if low == "rad":
        if family == "two_theta":
            return _conv("two_theta", 180.0 / math.pi, 0.0)
        return _conv("angle", 1.0, 0.0)
    if squashed == "A" and family == "wavelength":
        return _conv("length", 1e-10, 0.0)
    if squashed in ("G", "Gs"):
        return _conv("field", 1e-4, 0.0)
    if squashed == "kG":
        return _conv("field", 1e-1, 0.0)
    if low in ("a/m", "am-1", "ka/m", "kam-1") and squashed[0] in "Ak":
        scale = 1e3 if low.startswith("k") else 1.0
        if family == "field":
            return _conv("field", scale * MU0_T_M_PER_A, 0.0)
        return _conv("magnetisation", scale, 0.0)
    if family in ("chi", "chi_quad"):
        if low in ("emu", "emu/cm3", "emu/g", "1", "-", "none", "dimensionless", "unitless", "au"):
            raise _ambiguous(column, unit_text, CANDIDATES["chi"])
        if low in ("cm3/g", "cm3g-1", "cc/g"):
            return _conv("mass_susceptibility", _EMU_OE_FACTOR_MASS, 0.0)
        if low in ("m3/kg", "m3kg-1"):
            return _conv("mass_susceptibility", 1.0, 0.0)
    if low in _MHZ_AMBIGUOUS and squashed not in ("mHz", "MHz"):
        raise _ambiguous(column, unit_text, ("mHz", "MHz"))
    return None


def _conv(quantity: str, factor: float, offset: float) -> Conversion:
    return Conversion(quantity, factor, offset, QUANTITY_UNITS.get(quantity, ""))


# ---------------------------------------------------------------------------
# pint for everything else
# ---------------------------------------------------------------------------

_DIMENSIONS: list[tuple[str, str]] = [
    ("temperature", "K"),
    ("field", "T"),
    ("moment", "A*m^2"),
    ("mass_moment", "A*m^2/kg"),
    ("magnetisation", "A/m"),
    ("frequency", "Hz"),
    ("molar_heat_capacity", "J/(mol*K)"),
    ("specific_heat_capacity", "J/(kg*K)"),
    ("heat_capacity", "J/K"),
    ("time", "s"),
    ("mass", "kg"),
    ("length", "m"),
    ("temperature_rate", "K/s"),
]
_DIM_CACHE: list[tuple[str, str, object]] = [(q, u, Q_(1.0, u).dimensionality) for q, u in _DIMENSIONS]

# Named SI units tried, in order, for columns that are none of the quantities above.
_OTHER_SI: list[tuple[str, str]] = [
    ("Pa", "Pa"), ("J", "J"), ("W", "W"), ("V", "V"), ("N", "N"), ("ohm", "ohm"), ("A", "A"),
    ("C", "C"), ("mol", "mol"), ("m^2", "m2"), ("m^3", "m3"), ("m^3/kg", "m3_per_kg"),
    ("kg/m^3", "kg_per_m3"), ("m/s", "m_per_s"), ("J/kg", "J_per_kg"), ("J/mol", "J_per_mol"),
    ("S", "S"), ("F", "F"), ("H", "H"), ("Wb", "Wb"),
]


def _pint_expression(cleaned: str, family: str | None) -> str:
    e = cleaned
    e = re.sub(r"°\s*C\b", "degC", e)
    e = re.sub(r"°\s*F\b", "degF", e)
    e = re.sub(r"\bdeg(?:rees?)?\.?\s*C\b", "degC", e)
    e = re.sub(r"\bdeg(?:rees?)?\.?\s*F\b", "degF", e)
    e = e.replace("°", "deg")
    if family == "sweep_rate":  # 'C/min' in a rate is Celsius per minute
        e = re.sub(r"(?<![A-Za-z_])C(?=\s*/)", "degC", e)
    e = e.replace("Å", "angstrom")
    # 'Am2' is ampere square metre (pint would read attometre squared).
    e = re.sub(r"(?<![A-Za-z])Am(?=\^?2\b|²)", "A*m", e)
    # Exponents glued to symbols: m2 -> m^2, K-1 -> K^-1.
    e = re.sub(r"(?<=[A-Za-z])\^?([-+]?\d+)", r"^\1", e)
    e = re.sub(r"\s*\*\s*", "*", e)
    e = re.sub(r"\s*/\s*", "/", e)
    e = re.sub(r"(?<=[\w)])\s+(?=[A-Za-z(])", "*", e)
    # Inside a compound unit an offset temperature unit is a temperature difference.
    if e not in ("degC", "degF") and re.search(r"\bdeg[CF]\b", e):
        e = re.sub(r"\bdeg([CF])\b", r"delta_deg\1", e)
    return e


def _snap(x: float) -> float:
    """Drop float noise from chained pint factors (999.9999999999999 -> 1000).

    Only a factor within 1e-13 (relative) of a number with at most 12 significant
    digits is rounded to it; 1/60 stays 1/60.
    """
    rounded = float(f"{x:.12g}")
    return rounded if x == rounded or abs(x - rounded) <= 1e-13 * abs(rounded) else x


def _via_pint(cleaned: str, family: str | None, column: str, unit_text: str) -> Conversion:
    expr = _pint_expression(cleaned, family)
    try:
        q = Q_(1.0, expr)
    except Exception:  # pint's parser raises many kinds (tokenizer, syntax, lookup) for odd text
        raise _unknown(column, unit_text, family) from None
    dim = q.dimensionality
    for quantity, si, ref in _DIM_CACHE:
        if dim == ref:
            if quantity == "magnetisation" and family == "field":
                return _conv("field", _snap(q.to("A/m").magnitude) * MU0_T_M_PER_A, 0.0)
            if quantity == "frequency" and family in ("intensity", "sigma"):
                return _conv("count_rate", _snap(q.to("1/s").magnitude), 0.0)
            if quantity == "temperature":
                zero = Q_(0.0, expr).to("K").magnitude
                one = Q_(1.0, expr).to("K").magnitude
                return _conv("temperature", _snap(one - zero), _snap(zero))
            return _conv(quantity, _snap(q.to(si).magnitude), 0.0)
    if dim == Q_(1.0, "1").dimensionality:
        if re.search(r"rad|deg|arcmin|arcsec", expr):
            if family == "two_theta":
                return _conv("two_theta", _snap(q.to("deg").magnitude), 0.0)
            return _conv("angle", _snap(q.to("rad").magnitude), 0.0)
        return _conv("dimensionless", _snap(q.to("").magnitude), 0.0)
    for si, label in _OTHER_SI:
        try:
            return Conversion("other", _snap(q.to(si).magnitude), 0.0, label)
        except pint.errors.DimensionalityError:
            continue
    base = q.to_base_units()
    label = f"{base.units:~C}".replace("**", "").replace("*", "_").replace("/", "_per_")
    return Conversion("other", _snap(base.magnitude), 0.0, label)


# ---------------------------------------------------------------------------
# Public entry point
# ---------------------------------------------------------------------------

def si_conversion(unit_text: str, column: str = "value", target_hint: str | None = None) -> Conversion:
    """Read a unit as written and give the factor and offset that bring values to SI.

    Parameters
    ----------
    unit_text : str
        The unit as written: ``'Am2'``, ``'A·m²'``, ``'emu/g'``, ``'°C'``, ``'J mol-1 K-1'``,
        ``'[Oe]'``, ``'x1e-6 SI'`` (a leading power of ten scales the unit).
    column : str
        Column (or metadata key) the unit belongs to; named in error messages.
    target_hint : str, optional
        What the column holds: a family (``'temperature'``, ``'field'``, ``'moment'``,
        ``'chi'``, ``'chi_quad'``, ``'two_theta'``, ``'phase'``, ``'wavelength'``,
        ``'sweep_rate'``...), a canonical column (``'temperature_K'``) or a condition key
        (``'wavelength_m'``).  It resolves spellings that mean different things in
        different columns: ``C`` (Celsius or coulomb), ``A`` (ångström or ampere),
        ``A/m`` (H, stored as mu0*H in T, or a magnetisation), ``deg`` (angle or
        temperature), ``cm3/g`` (CGS mass susceptibility or a specific volume).

    Returns
    -------
    Conversion
        ``(quantity, factor, offset, si_unit)`` with ``si = raw * factor + offset``.
        Temperatures are in K, fields as mu0*H in T, two-theta in degrees, other
        angles in radians, intensities in counts (or counts/s for a rate).

    Raises
    ------
    InvalidValue
        For an unknown or ambiguous unit; the message names ``column`` and lists
        spellings that would be accepted.

    References
    ----------
    NBS/IEEE table "Units for Magnetic Properties" (CGS to SI factors); NIST SP 811
    (2008), Guide for the Use of the International System of Units.
    """
    family = family_of(target_hint)
    if unit_text is None:
        raise _unknown(column, "", family)
    cleaned = clean_unit_text(unit_text)
    scale = 1.0
    m = _SCALE.match(cleaned)
    if m:
        s = re.sub(r"\s+", "", m.group("scale")).replace("**", "^")
        scale = float(s) if "e" in s.lower() else 10.0 ** int(s.split("^")[1])
        cleaned = cleaned[m.end():].strip() or "1"
    if not cleaned:
        raise _unknown(column, unit_text, family)
    squashed = _squash(cleaned)
    conv = _contextual(squashed, family, column, unit_text)
    if conv is None:
        entry = _TABLE_LOWER.get(squashed.lower())
        if entry is not None:
            conv = _conv(*entry)
        else:
            conv = _via_pint(cleaned, family, column, unit_text)
    if scale != 1.0:
        if conv.offset:
            raise InvalidValue(f"column {column!r}: a scale factor cannot apply to the offset unit "
                               f"{unit_text!r}", field=column)
        conv = conv._replace(factor=_snap(conv.factor * scale))
    return conv


def unit_label(conv: Conversion, unit_text: str | None) -> str:
    """Short unit label for naming an ordinary column: 'Pa', 'A_per_m', 'K'."""
    if conv.quantity == "other":
        return conv.si_unit
    unit = QUANTITY_UNITS.get(conv.quantity, "")
    if conv.quantity in ("arbitrary",):
        return "au"
    if conv.quantity in ("dimensionless", "volume_susceptibility"):
        return ""
    return (unit.replace(" ", "_").replace("^", "").replace("/", "_per_")
            .replace("(", "").replace(")", "").replace(".", ""))

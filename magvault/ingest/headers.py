"""Column headers: split a header into name and unit, and say what a name suggests.

Units may be written in parentheses or brackets at the end (``Temperature (K)``,
``M [emu]``, ``Cp (J/(mol K))``), after a slash (``field/Oe``) or after an
underscore (``T_K``, ``M_emu``).  A slash or underscore only counts as a unit
separator when what follows is a unit that fits the name (``M/Ms`` is a ratio,
not a moment in megaseconds).
"""

from __future__ import annotations

import re
import unicodedata

from ..errors import InvalidValue
from .canonical import CANONICAL_COLUMNS
from .spelling import si_conversion

__all__ = ["split_header", "family_of_name", "name_key", "unit_fits_family", "FAMILY_QUANTITIES"]

# Which converted quantities a column family may hold.
FAMILY_QUANTITIES: dict[str, frozenset[str]] = {
    "temperature": frozenset({"temperature"}),
    "field": frozenset({"field"}),
    "moment": frozenset({"moment", "mass_moment", "magnetisation"}),
    "chi": frozenset({"volume_susceptibility", "mass_susceptibility", "specimen_susceptibility"}),
    "chi_quad": frozenset({"volume_susceptibility", "mass_susceptibility", "specimen_susceptibility"}),
    "frequency": frozenset({"frequency"}),
    "phase": frozenset({"angle"}),
    "two_theta": frozenset({"two_theta", "angle"}),
    "intensity": frozenset({"counts", "count_rate", "arbitrary", "dimensionless"}),
    "sigma": frozenset({"counts", "count_rate", "arbitrary", "dimensionless", "mass_moment"}),
    "heat_capacity": frozenset({"molar_heat_capacity", "specific_heat_capacity", "heat_capacity"}),
    "time": frozenset({"time"}),
}

_ALIASES: dict[str, tuple[str, ...]] = {
    "temperature": ("t", "temp", "temperature", "tsample", "sampletemperature", "sampletemp",
                    "temperaturesample", "tsamp"),
    "field": ("h", "b", "field", "appliedfield", "magneticfield", "mu0h", "muoh", "u0h", "uoh",
              "fieldstrength", "bapplied", "happlied", "happ", "bapp", "hfield", "bfield",
              "magfield", "mu0happ", "bext", "hext"),
    "moment": ("m", "moment", "magneticmoment", "mom", "magnetization", "magnetisation", "mag",
               "remanence", "mr", "mrem", "irm", "remanentmoment", "momentsample", "msample",
               "signalmoment"),
    "chi": ("chi", "chi'", "chiprime", "chireal", "chiinphase", "inphase", "k", "k'", "kappa",
            "kappa'", "susceptibility", "susc", "sus", "chi1", "chire", "realsusceptibility",
            "x'"),
    "chi_quad": ("chi''", "chidoubleprime", "chiimag", "chiquad", "quadrature", "outofphase",
                 "chi2", "k''", "kappa''", "chiim", "imaginarysusceptibility", "x''",
                 "chiquadrature"),
    "frequency": ("f", "freq", "frequency", "nu", "fres", "frequencies"),
    "amplitude": ("amp", "amplitude", "a", "signal", "response", "magnitude", "r", "ampl"),
    "phase": ("phase", "phi", "ph", "phaseangle"),
    "two_theta": ("2theta", "2th", "twotheta", "angle", "tth", "2thetaangle", "theta2"),
    "intensity": ("i", "int", "intensity", "counts", "count", "cts", "yobs", "iobs", "cnt"),
    "sigma": ("sigma", "esd", "err", "error", "sigi", "sigmai", "di", "uncertainty", "sd",
              "stddev", "sigmaintensity", "esdi", "u", "dy"),
    "heat_capacity": ("cp", "heatcapacity", "specificheat", "cpsample", "c_p"),
    "time": ("time", "elapsed", "elapsedtime", "timeelapsed", "timestamp", "tsec"),
    "branch": ("branch", "direction", "segment", "sweepdirection", "dir", "leg"),
}
_ALIAS_TO_FAMILY = {a: fam for fam, names in _ALIASES.items() for a in names}

# Unit words accepted after an underscore or slash when the name says nothing.
_PLAIN_UNITS = frozenset({
    "K", "T", "mT", "Hz", "kHz", "MHz", "s", "min", "h", "Pa", "kPa", "MPa", "bar", "mbar", "V",
    "mV", "uV", "A", "mA", "W", "mW", "J", "g", "mg", "kg", "m", "mm", "um", "nm", "deg", "rad",
    "Oe", "kOe", "emu", "degC", "C", "Am2", "SI",
})


def name_key(name: str) -> str:
    """Lower-case key of a column name: Greek letters spelled out, separators dropped."""
    t = unicodedata.normalize("NFC", str(name)).lower().strip()
    for a, b in (("χ", "chi"), ("θ", "theta"), ("µ", "mu"), ("μ", "mu"), ("κ", "kappa"),
                 ("ν", "nu"), ("φ", "phi"), ("ϕ", "phi"), ("₀", "0"), ("°", ""), ("″", "''"),
                 ('"', "''"), ("’", "'"), ("′", "'"), ("‘", "'")):
        t = t.replace(a, b)
    return re.sub(r"[\s_\-.]", "", t)


def family_of_name(name: str) -> str | None:
    """Column family a name suggests (``'Temp'`` -> ``'temperature'``), or None."""
    return _ALIAS_TO_FAMILY.get(name_key(name))


def unit_fits_family(quantity: str, family: str | None) -> bool:
    """Whether a converted quantity may sit in a column of this family."""
    if family is None or family == "amplitude":
        return True
    allowed = FAMILY_QUANTITIES.get(family)
    return allowed is None or quantity in allowed


def _unit_after_separator(unit: str, family: str | None) -> bool:
    if not unit or not unit.strip():
        return False
    try:
        conv = si_conversion(unit, "header", family)
    except InvalidValue:
        return False
    if family is None:
        return unit.replace(" ", "") in _PLAIN_UNITS
    return unit_fits_family(conv.quantity, family)


def split_header(header: str) -> tuple[str, str | None]:
    """Split a header into (name, unit as written or None).

    >>> split_header("Temperature (K)")
    ('Temperature', 'K')
    >>> split_header("field/Oe")
    ('field', 'Oe')
    >>> split_header("M/Ms")
    ('M/Ms', None)
    """
    h = unicodedata.normalize("NFC", str(header)).strip().strip("\"'").strip()
    if h in CANONICAL_COLUMNS:
        return h, None
    if h and h[-1] in ")]":
        close = h[-1]
        opener = "(" if close == ")" else "["
        depth = 0
        for j in range(len(h) - 1, -1, -1):
            if h[j] == close:
                depth += 1
            elif h[j] == opener:
                depth -= 1
                if depth == 0:
                    name, unit = h[:j].strip(), h[j + 1:-1].strip()
                    if name:
                        return name, (unit or None)
                    break
    if "/" in h:
        name, unit = h.split("/", 1)
        name = name.strip()
        if name and _unit_after_separator(unit.strip(), family_of_name(name)):
            return name, unit.strip()
    if "_" in h:
        parts = h.split("_")
        for k in range(1, len(parts)):
            name = "_".join(parts[:k]).strip()
            unit = " ".join(parts[k:]).strip()
            if name and _unit_after_separator(unit, family_of_name(name)):
                return name, unit
    if " " in h:
        # 'Temperature K', 'Moment emu': a last word that is a unit fitting the name.
        name, unit = h.rsplit(" ", 1)
        name = name.strip()
        if name and _unit_after_separator(unit, family_of_name(name)):
            return name, unit
    return h, None

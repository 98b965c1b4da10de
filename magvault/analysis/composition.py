"""Composition of pyrrhotite Fe(1-x)S from element amounts or from the (102) spacing.

Pure functions: numbers in, a frozen :class:`CompositionResult` out.  The
vacancy parameter is ``x = 1 - n_Fe / n_S`` with ``n`` the amount of substance
of each element (``n = w / M`` for mass fractions ``w`` and molar masses
``M``).  Other elements (Ni, Co, Cu, O ...) count towards the analytical total
but not towards ``x``; a warning says so.

Uncertainties are propagated to first order, assuming the element amounts are
uncorrelated.  The atomic-weight uncertainties are left out by default: every
analysis in the vault uses the same atomic weights, so their uncertainty cancels
when specimens are compared with one another; pass
``include_atomic_weight_uncertainty=True`` for an absolute uncertainty.

Superstructure labels (1C, 2C, 4C, 5C, 6C, 11C, NC, MC, 5.5C ...) name the
repeat of the vacancy-ordered superstructure along c in units of the NiAs
subcell's C.  They are checked by :func:`validate_superstructure`.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Iterable, Mapping

from ..errors import InvalidValue

__all__ = [
    "ATOMIC_WEIGHTS",
    "ELEMENT_SYMBOLS",
    "CompositionResult",
    "parse_element_amount",
    "parse_element_amounts",
    "composition_from_wt",
    "composition_from_at",
    "combine_compositions",
    "x_from_d102",
    "fe_atomic_percent_from_d102",
    "validate_superstructure",
]

#: Standard atomic weights (g/mol) with the uncertainty IUPAC states, used as a
#: standard uncertainty.  Prohaska et al. (2022), "Standard atomic weights of the
#: elements 2021 (IUPAC Technical Report)", Pure Appl. Chem. 94.
#: Sulfur's value is the conventional value of its interval [32.059, 32.076].
ATOMIC_WEIGHTS: Mapping[str, tuple[float, float]] = MappingProxyType({
    "Fe": (55.845, 0.002),
    "S": (32.06, 0.02),
})

#: The 118 element symbols in order of atomic number (IUPAC names, 2016).
ELEMENT_SYMBOLS: tuple[str, ...] = tuple("""
H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn
Ga Ge As Se Br Kr Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La Ce
Pr Nd Pm Sm Eu Gd Tb Dy Ho Er Tm Yb Lu Hf Ta W Re Os Ir Pt Au Hg Tl Pb Bi Po At Rn
Fr Ra Ac Th Pa U Np Pu Am Cm Bk Cf Es Fm Md No Lr Rf Db Sg Bh Hs Mt Ds Rg Cn Nh Fl
Mc Lv Ts Og
""".split())
_SYMBOL_BY_LOWER = {s.lower(): s for s in ELEMENT_SYMBOLS}

_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_AMOUNT = re.compile(
    rf"^\s*(?P<symbol>[A-Za-z]{{1,2}})\s*=\s*(?P<value>{_NUMBER})\s*%?"
    rf"(?:\s*(?:\+/-|\+-|±)\s*(?P<unc>{_NUMBER})\s*%?)?\s*$"
)
_SUPERSTRUCTURE = re.compile(r"^(\d+(?:\.\d+)?|N|M)C$", re.IGNORECASE)


@dataclass(frozen=True)
class CompositionResult:
    """One composition of Fe(1-x)S, derived from one analysis or several.

    Attributes
    ----------
    x, x_uncertainty : float, float or None
        Vacancy parameter in Fe(1-x)S and its standard uncertainty (None when
        an input amount had no uncertainty).
    fe_s_ratio, fe_s_ratio_uncertainty : float, float or None
        Atomic ratio n_Fe / n_S (= 1 - x).
    fe_atomic_percent : float
        100 n_Fe / (n_Fe + n_S), the quantity of the (102) calibration.
    fe_atomic_percent_uncertainty : float or None
    total_wt : float or None
        Sum of all element amounts in wt% (None unless ``basis == "wt"``).
    warnings : tuple of str
        Plausibility notes (total far from 100 wt%, x outside 0..0.2, ...).
    basis : str
        ``"wt"``, ``"at"``, ``"d102"`` or ``"combined"``.
    total : float or None
        Sum of the amounts in the basis they were given in (wt% or at%).
    amounts : dict
        The element amounts as given: symbol -> (value, uncertainty or None).
    parameters : dict
        Every numerical choice and constant used, for the derivation record.
    """

    x: float
    x_uncertainty: float | None
    fe_s_ratio: float
    fe_s_ratio_uncertainty: float | None
    fe_atomic_percent: float
    total_wt: float | None
    warnings: tuple[str, ...]
    basis: str
    fe_atomic_percent_uncertainty: float | None = None
    total: float | None = None
    amounts: Mapping[str, tuple[float, float | None]] = field(default_factory=dict)
    parameters: Mapping[str, Any] = field(default_factory=dict)


# --------------------------------------------------------------------------- parsing

def _element_symbol(text: str, option: str) -> str:
    symbol = _SYMBOL_BY_LOWER.get(text.strip().lower())
    if symbol is None:
        raise InvalidValue(f"{option}: {text.strip()!r} is not a chemical element symbol "
                           f"(expected e.g. Fe, S, Ni, Co)", field=option)
    return symbol


def parse_element_amount(text: str, option: str = "--wt") -> tuple[str, float, float | None]:
    """Read one element amount such as ``'Fe=60.5+/-0.3'``.

    Parameters
    ----------
    text : str
        ``SYMBOL=VALUE`` with an optional ``+/-UNC`` (``+-`` and ``±`` also
        read); the value is in wt% or at% according to ``option``; a trailing
        ``%`` is allowed.  The symbol's case is normalised (``fe`` -> ``Fe``).
    option : str
        Name of the option in error messages (``"--wt"`` or ``"--at"``).

    Returns
    -------
    (symbol, value, uncertainty)
        Value and uncertainty in percent; uncertainty None when not given.

    Raises
    ------
    InvalidValue
        Text not of that form, an unknown element, a value outside 0-100 %,
        or a negative uncertainty; the message names ``option``.
    """
    m = _AMOUNT.match(text or "")
    if not m:
        raise InvalidValue(f"{option}: cannot read {text!r}; expected SYMBOL=VALUE or "
                           f"SYMBOL=VALUE+/-UNCERTAINTY in percent, e.g. 'Fe=60.5+/-0.3'",
                           field=option)
    symbol = _element_symbol(m.group("symbol"), option)
    value = float(m.group("value"))
    unc = float(m.group("unc")) if m.group("unc") is not None else None
    _check_amount(symbol, value, unc, option)
    return symbol, value, unc


def parse_element_amounts(texts: Iterable[str], option: str = "--wt"
                          ) -> dict[str, tuple[float, float | None]]:
    """Read repeated element options into ``{symbol: (value, uncertainty)}``.

    Raises
    ------
    InvalidValue
        On any unreadable text, or when one element is given twice.
    """
    amounts: dict[str, tuple[float, float | None]] = {}
    for text in texts:
        symbol, value, unc = parse_element_amount(text, option)
        if symbol in amounts:
            raise InvalidValue(f"{option}: {symbol} is given twice; give each element once",
                               field=option)
        amounts[symbol] = (value, unc)
    return amounts


def _check_amount(symbol: str, value: float, unc: float | None, option: str) -> None:
    if not math.isfinite(value) or not 0.0 <= value <= 100.0:
        raise InvalidValue(f"{option}: {symbol}={value:g} is outside 0-100 %", field=option)
    if unc is not None and (not math.isfinite(unc) or unc < 0.0):
        raise InvalidValue(f"{option}: the uncertainty of {symbol} must be a number >= 0, "
                           f"got {unc:g}", field=option)


def _normalise_amounts(amounts: Mapping[str, Any], option: str
                       ) -> dict[str, tuple[float, float | None]]:
    """Accept ``{symbol: value}`` or ``{symbol: (value, unc)}``; check every entry."""
    if not amounts:
        raise InvalidValue(f"{option}: no element amounts given; expected at least Fe and S",
                           field=option)
    clean: dict[str, tuple[float, float | None]] = {}
    for key, given in amounts.items():
        symbol = _element_symbol(str(key), option)
        if isinstance(given, (tuple, list)):
            if len(given) != 2:
                raise InvalidValue(f"{option}: {symbol} must be (value, uncertainty), got {given!r}",
                                   field=option)
            value, unc = given
        else:
            value, unc = given, None
        try:
            value = float(value)
            unc = None if unc is None else float(unc)
        except (TypeError, ValueError):
            raise InvalidValue(f"{option}: {symbol} amount {given!r} is not a number",
                               field=option) from None
        _check_amount(symbol, value, unc, option)
        if symbol in clean:
            raise InvalidValue(f"{option}: {symbol} is given twice; give each element once",
                               field=option)
        clean[symbol] = (value, unc)
    missing = [s for s in ("Fe", "S") if s not in clean]
    if missing:
        raise InvalidValue(f"{option}: Fe and S are both needed to derive x; missing "
                           f"{' and '.join(missing)}", field=option)
    if clean["S"][0] <= 0.0:
        raise InvalidValue(f"{option}: S must be greater than zero to derive x", field=option)
    return clean


# --------------------------------------------------------------------------- derived values

def _result_from_x(x: float, x_unc: float | None, *, basis: str,
                   amounts: Mapping[str, tuple[float, float | None]],
                   total: float | None, warnings: list[str],
                   parameters: dict[str, Any]) -> CompositionResult:
    ratio = 1.0 - x
    # Fe at.% = 100 r / (1 + r); d/dr = 100 / (1 + r)^2.
    fe_at = 100.0 * ratio / (1.0 + ratio)
    fe_at_unc = None if x_unc is None else 100.0 * x_unc / (1.0 + ratio) ** 2
    lo, hi = parameters.get("x_window", (0.0, 0.2))
    if not lo <= x <= hi:
        warnings.append(
            f"x = {x:.4f} is outside {lo:g}..{hi:g}: pyrrhotite spans about x = 0 (troilite, FeS) "
            f"to 0.125 (Fe7S8); check the analysis")
    return CompositionResult(
        x=x, x_uncertainty=x_unc, fe_s_ratio=ratio, fe_s_ratio_uncertainty=x_unc,
        fe_atomic_percent=fe_at, fe_atomic_percent_uncertainty=fe_at_unc,
        total_wt=total if basis == "wt" else None, total=total,
        warnings=tuple(warnings), basis=basis, amounts=dict(amounts), parameters=parameters)


def _check_total(total: float, window: tuple[float, float], unit: str, warnings: list[str]) -> None:
    lo, hi = window
    if not lo <= total <= hi:
        warnings.append(f"analytical total {total:.2f} {unit} is outside {lo:g}-{hi:g} {unit}; "
                        f"a good analysis sums to about 100 (missing elements, oxidation, "
                        f"or a calibration problem)")


def _note_other_elements(amounts: Mapping[str, tuple[float, float | None]], unit: str,
                         warnings: list[str]) -> None:
    others = [f"{s} {v:g} {unit}" for s, (v, _) in amounts.items() if s not in ("Fe", "S") and v > 0]
    if others:
        warnings.append(f"x uses Fe and S only; {', '.join(others)} counted in the total only")


def composition_from_wt(amounts: Mapping[str, Any], *,
                        include_atomic_weight_uncertainty: bool = False,
                        total_window: tuple[float, float] = (98.5, 101.5),
                        x_window: tuple[float, float] = (0.0, 0.2),
                        option: str = "--wt") -> CompositionResult:
    """x in Fe(1-x)S from element mass fractions in wt%.

    ``n_i = w_i / M_i``, ``r = n_Fe / n_S = (w_Fe M_S) / (w_S M_Fe)``, ``x = 1 - r``;
    first-order propagation gives ``u(x) = r sqrt(sum (u_i / q_i)^2)`` over
    ``q = w_Fe, w_S`` (and ``M_Fe, M_S`` when asked).

    Parameters
    ----------
    amounts : mapping
        ``{symbol: (value_wt_percent, uncertainty_or_None)}`` (a bare number is
        read as a value without uncertainty).  Fe and S are required.
    include_atomic_weight_uncertainty : bool
        Add the IUPAC atomic-weight uncertainties (absolute uncertainty of x).
        Off by default because they are common to every analysis.
    total_window : (float, float)
        Warn when the sum of all amounts lies outside it, in wt%.  The default
        98.5-101.5 wt% is the usual acceptance band for a microprobe analysis
        (common practice, no single source).
    x_window : (float, float)
        Warn when x lies outside it.
    option : str
        Option name in error messages.

    Returns
    -------
    CompositionResult
        ``x_uncertainty`` is None when Fe or S was given without uncertainty.

    References
    ----------
    Prohaska, T. et al. (2022). Standard atomic weights of the elements 2021
    (IUPAC Technical Report). Pure Appl. Chem. 94.
    """
    clean = _normalise_amounts(amounts, option)
    (w_fe, u_fe), (w_s, u_s) = clean["Fe"], clean["S"]
    m_fe, um_fe = ATOMIC_WEIGHTS["Fe"]
    m_s, um_s = ATOMIC_WEIGHTS["S"]
    ratio = (w_fe / m_fe) / (w_s / m_s)
    warnings: list[str] = []
    # dr/dw_Fe = M_S / (w_S M_Fe) is written out so that w_Fe = 0 still works.
    terms = [(m_s / (w_s * m_fe), u_fe), (ratio / w_s, u_s)]
    if include_atomic_weight_uncertainty:
        terms += [(ratio / m_fe, um_fe), (ratio / m_s, um_s)]
    ratio_unc = _propagate(terms, warnings)
    total = math.fsum(v for v, _ in clean.values())
    _check_total(total, total_window, "wt%", warnings)
    _note_other_elements(clean, "wt%", warnings)
    parameters = {
        "atomic_weights_g_per_mol": {s: ATOMIC_WEIGHTS[s][0] for s in ("Fe", "S")},
        "atomic_weights_source": "IUPAC 2021 (Prohaska et al., 2022)",
        "include_atomic_weight_uncertainty": include_atomic_weight_uncertainty,
        "total_window": tuple(total_window),
        "x_window": tuple(x_window),
    }
    return _result_from_x(1.0 - ratio, ratio_unc, basis="wt", amounts=clean, total=total,
                          warnings=warnings, parameters=parameters)


def composition_from_at(amounts: Mapping[str, Any], *,
                        total_window: tuple[float, float] = (98.5, 101.5),
                        x_window: tuple[float, float] = (0.0, 0.2),
                        option: str = "--at") -> CompositionResult:
    """x in Fe(1-x)S from atomic percentages: ``r = at_Fe / at_S``, ``x = 1 - r``.

    No atomic weight enters.  ``total_wt`` is None; ``total`` is the sum in at%,
    which should be 100 when every element was reported (warned outside
    ``total_window``).

    Parameters
    ----------
    amounts : mapping
        ``{symbol: (value_at_percent, uncertainty_or_None)}``; Fe and S required.
    total_window, x_window : (float, float)
        Warning bands, as in :func:`composition_from_wt`.
    option : str
        Option name in error messages.

    Returns
    -------
    CompositionResult
    """
    clean = _normalise_amounts(amounts, option)
    (a_fe, u_fe), (a_s, u_s) = clean["Fe"], clean["S"]
    ratio = a_fe / a_s
    warnings: list[str] = []
    ratio_unc = _propagate([(1.0 / a_s, u_fe), (ratio / a_s, u_s)], warnings)
    total = math.fsum(v for v, _ in clean.values())
    _check_total(total, total_window, "at%", warnings)
    _note_other_elements(clean, "at%", warnings)
    parameters = {"total_window": tuple(total_window), "x_window": tuple(x_window)}
    return _result_from_x(1.0 - ratio, ratio_unc, basis="at", amounts=clean, total=total,
                          warnings=warnings, parameters=parameters)


def _propagate(terms: list[tuple[float, float | None]], warnings: list[str]) -> float | None:
    """First-order propagation: sqrt(sum (df/dq * u_q)^2); None if any u_q is None."""
    if any(u is None for _, u in terms):
        warnings.append("Fe or S was given without an uncertainty: x has no uncertainty")
        return None
    return math.sqrt(math.fsum((d * u) ** 2 for d, u in terms))  # type: ignore[operator]


# --------------------------------------------------------------------------- combining

def combine_compositions(results: Iterable[CompositionResult], *,
                         birge_inflate_above: float = 1.0,
                         x_window: tuple[float, float] = (0.0, 0.2)) -> CompositionResult:
    """Weighted mean of several analyses of one specimen.

    With standard uncertainties ``u_i`` the mean is ``sum(x_i / u_i^2) /
    sum(1 / u_i^2)`` with internal uncertainty ``u = (sum 1/u_i^2)^-1/2``.  The
    Birge ratio ``R_B = sqrt(chi^2 / (n - 1))``, ``chi^2 = sum ((x_i - mean) /
    u_i)^2``, measures whether the analyses scatter more than their
    uncertainties allow; when ``R_B > birge_inflate_above`` (default 1, the
    scale-factor rule of the Particle Data Group) the uncertainty is multiplied
    by ``R_B`` and a warning says so.  The same number equals the
    parameter uncertainty of a weighted least-squares fit of a constant with
    the residual variance estimated from the data.

    When any analysis lacks a usable uncertainty (None or zero), the plain mean
    is returned with the standard error of the mean (None for one analysis),
    and a warning says so.

    Parameters
    ----------
    results : iterable of CompositionResult
        At least one.
    birge_inflate_above : float
        Inflate the uncertainty only when the Birge ratio exceeds this.
    x_window : (float, float)
        Warning band for the combined x.

    Returns
    -------
    CompositionResult
        ``basis`` is the common basis of the inputs, or ``"combined"`` when
        they differ; ``parameters`` records ``n``, ``birge_ratio`` and whether
        the uncertainty was inflated.

    References
    ----------
    Birge, R. T. (1932). The calculation of errors by the method of least
    squares. Phys. Rev. 40, 207-227.
    """
    items = list(results)
    if not items:
        raise InvalidValue("compositions: nothing to combine; expected at least one analysis",
                           field="compositions")
    xs = [r.x for r in items]
    uncs = [r.x_uncertainty for r in items]
    bases = {r.basis for r in items}
    basis = bases.pop() if len(bases) == 1 else "combined"
    warnings: list[str] = []
    parameters: dict[str, Any] = {"n": len(items), "birge_inflate_above": birge_inflate_above,
                                  "x_window": tuple(x_window)}
    if all(u is not None and u > 0.0 for u in uncs):
        weights = [1.0 / u ** 2 for u in uncs]  # type: ignore[operator]
        wsum = math.fsum(weights)
        mean = math.fsum(w * x for w, x in zip(weights, xs)) / wsum
        unc = 1.0 / math.sqrt(wsum)
        birge = None
        inflated = False
        if len(items) > 1:
            chi2 = math.fsum(w * (x - mean) ** 2 for w, x in zip(weights, xs))
            birge = math.sqrt(chi2 / (len(items) - 1))
            if birge > birge_inflate_above:
                unc *= birge
                inflated = True
                warnings.append(f"the {len(items)} analyses scatter more than their uncertainties "
                                f"allow (Birge ratio {birge:.2f}); uncertainty multiplied by it")
        parameters.update(method="weighted mean", birge_ratio=birge, inflated=inflated)
    else:
        mean = math.fsum(xs) / len(xs)
        if len(xs) > 1:
            var = math.fsum((x - mean) ** 2 for x in xs) / (len(xs) - 1)
            unc = math.sqrt(var / len(xs))
        else:
            unc = None
        warnings.append("at least one analysis has no uncertainty: plain mean of x, "
                        "with the standard error of the mean")
        parameters.update(method="plain mean", birge_ratio=None, inflated=False)
    return _result_from_x(mean, unc, basis=basis, amounts={}, total=None, warnings=warnings,
                          parameters=parameters)


# --------------------------------------------------------------------------- (102) spacing

#: Calibration of the NiAs-subcell (102) spacing against composition:
#: N = c0 + c1 (d - d0) + c2 (d - d0)^2, N in atomic % Fe, d in angstrom.
D102_CALIBRATION: Mapping[str, Any] = MappingProxyType({
    "c0": 45.212, "c1": 72.86, "c2": 311.5, "d0_angstrom": 2.0400,
    "valid_fe_atomic_percent": (45.0, 50.0)})


def fe_atomic_percent_from_d102(d_m: float, d_uncertainty_m: float | None = None
                                ) -> tuple[float, float | None]:
    """Atomic % Fe (100 Fe/(Fe+S)) from the subcell (102) spacing, with its uncertainty.

    Parameters
    ----------
    d_m : float
        d(102) of the NiAs-type subcell, in metres.
    d_uncertainty_m : float or None
        Standard uncertainty of ``d_m``, in metres.

    References
    ----------
    Toulmin, P. & Barton, P. B. (1964). A thermodynamic study of pyrite and
    pyrrhotite. Geochim. Cosmochim. Acta 28, 641; fitted to Arnold, R. G. &
    Reichen, L. E. (1962), Am. Mineral. 47, 105.
    """
    _check_length(d_m, "d102")
    if d_uncertainty_m is not None and (not math.isfinite(d_uncertainty_m) or d_uncertainty_m < 0):
        raise InvalidValue(f"d102 uncertainty: expected a length >= 0 in metres, got {d_uncertainty_m!r}",
                           field="d102")
    cal = D102_CALIBRATION
    delta = d_m * 1e10 - cal["d0_angstrom"]
    n_fe = cal["c0"] + cal["c1"] * delta + cal["c2"] * delta ** 2
    if d_uncertainty_m is None:
        return n_fe, None
    slope = cal["c1"] + 2.0 * cal["c2"] * delta  # at.% per angstrom
    return n_fe, abs(slope) * d_uncertainty_m * 1e10


def x_from_d102(d_m: float, d_uncertainty_m: float | None = None) -> CompositionResult:
    """x in Fe(1-x)S from the (102) spacing of the NiAs-type subcell.

    The calibration ``N = 45.212 + 72.86 (d - 2.0400) + 311.5 (d - 2.0400)^2``
    (N atomic % Fe, d in angstrom) gives N; then ``r = N / (100 - N)`` and
    ``x = 1 - r`` (for Fe(1-x)S the Fe atom fraction is (1 - x)/(2 - x)).  The
    uncertainty carries only that of ``d`` (not the calibration's own).  A
    warning is given outside 45-50 at.% Fe, the calibrated range.  The
    calibration holds for hexagonal or quenched material: in monoclinic
    pyrrhotite the (102) peak splits.

    Parameters
    ----------
    d_m : float
        d(102) of the subcell, in metres (e.g. 2.0585e-10 for Fe7S8).
    d_uncertainty_m : float or None
        Its standard uncertainty, in metres.

    Returns
    -------
    CompositionResult
        ``basis == "d102"``; ``parameters`` records the calibration.

    References
    ----------
    Toulmin, P. & Barton, P. B. (1964). Geochim. Cosmochim. Acta 28, 641.
    Arnold, R. G. & Reichen, L. E. (1962). Am. Mineral. 47, 105.
    """
    n_fe, n_unc = fe_atomic_percent_from_d102(d_m, d_uncertainty_m)
    warnings: list[str] = []
    lo, hi = D102_CALIBRATION["valid_fe_atomic_percent"]
    if not lo <= n_fe <= hi:
        warnings.append(f"d(102) = {d_m * 1e10:.4f} A gives {n_fe:.2f} at.% Fe, outside the "
                        f"calibrated {lo:g}-{hi:g} at.% Fe")
    if n_fe >= 100.0 or n_fe <= 0.0:
        raise InvalidValue(f"d102: {d_m * 1e10:.4f} A is far outside the calibration "
                           f"(gives {n_fe:.1f} at.% Fe)", field="d102")
    ratio = n_fe / (100.0 - n_fe)
    # dr/dN = 100 / (100 - N)^2
    x_unc = None if n_unc is None else 100.0 * n_unc / (100.0 - n_fe) ** 2
    parameters = {"calibration": dict(D102_CALIBRATION),
                  "calibration_source": "Toulmin & Barton (1964); Arnold & Reichen (1962)",
                  "d102_m": d_m, "d102_uncertainty_m": d_uncertainty_m,
                  "x_window": (0.0, 0.2)}
    return _result_from_x(1.0 - ratio, x_unc, basis="d102", amounts={}, total=None,
                          warnings=warnings, parameters=parameters)


def _check_length(value: float, name: str) -> None:
    try:
        ok = math.isfinite(value) and value > 0
    except TypeError:
        ok = False
    if not ok:
        raise InvalidValue(f"{name}: expected a positive length in metres, got {value!r}", field=name)
    if value > 1e-8:
        raise InvalidValue(f"{name}: {value!r} m is not an interplanar spacing; give d in metres "
                           f"(2.0585e-10 m = 2.0585 A)", field=name)


# --------------------------------------------------------------------------- superstructure

def validate_superstructure(label: str, option: str = "--superstructure") -> str:
    """Check and normalise a superstructure label: ``'4c'`` -> ``'4C'``.

    Accepted: a positive number (integer or decimal, for non-integral NC
    types such as 5.5C) or ``N`` or ``M``, followed by ``C``, case-insensitive,
    surrounding spaces ignored (pattern ``^(\\d+(\\.\\d+)?|N|M)C$``).

    Raises
    ------
    InvalidValue
        Naming ``option`` when the label does not fit.
    """
    text = (label or "").strip()
    m = _SUPERSTRUCTURE.match(text)
    if not m or (m.group(1)[0].isdigit() and float(m.group(1)) == 0.0):
        raise InvalidValue(f"{option}: {label!r} is not a superstructure label; expected a "
                           f"number or N or M followed by C, e.g. 4C, 5C, 11C, NC", field=option)
    head = m.group(1).upper()
    return f"{head}C"

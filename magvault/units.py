"""Units: one pint registry for the whole program, and quantity parsing.

Storage is SI.  CGS magnetic units follow the NBS/IEEE table "Units for Magnetic
Properties": 1 emu = 1e-3 A m^2, 1 Oe = 1000/(4 pi) A/m, 1 G = 1e-4 T.  pint has
no ``emu``, so it is defined here; Oe and G are given directly in SI so that no
Gaussian context is needed (pint's own definitions route through the CODATA
mu0 and differ from the exact factors by ~7e-11 relative).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import pint

from .errors import InvalidValue

_REGISTRY: pint.UnitRegistry | None = None


def registry() -> pint.UnitRegistry:
    """The shared registry, built on first use (building it takes a noticeable fraction of a second)."""
    global _REGISTRY
    if _REGISTRY is None:
        reg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
        reg.define("emu = 1e-3 * ampere * meter ** 2")
        # Field strength H in oersted as mu0*H in tesla (1 Oe <-> 1e-4 T); kept as a
        # separate unit so that "Oe" in a field column converts to mu0*H directly.
        reg.define("oersted_mu0H = 1e-4 * tesla = Oe_mu0H")
        reg.define("gauss_T = 1e-4 * tesla = G_T")
        _REGISTRY = reg
    return _REGISTRY


def __getattr__(name: str):
    # ``from magvault.units import ureg`` builds the registry on first use.
    if name == "ureg":
        return registry()
    raise AttributeError(name)


def Q_(*args, **kwargs):  # noqa: N802  (pint's own spelling)
    return registry().Quantity(*args, **kwargs)

__all__ = ["registry", "ureg", "Q_", "Measured", "parse_quantity", "to_si"]

_PLUSMINUS = re.compile(r"\s*(?:\+/-|\+-|±)\s*")
_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_QTY = re.compile(
    rf"^\s*(?P<value>{_NUMBER})(?:\s*(?:\+/-|\+-|±)\s*(?P<unc>{_NUMBER}))?\s*(?P<unit>.*?)\s*$"
)


@dataclass(frozen=True)
class Measured:
    """A value in SI with its standard uncertainty (None when not given)."""

    value: float
    uncertainty: float | None
    unit: str  # SI unit the value is expressed in

    def __str__(self) -> str:
        if self.uncertainty is None:
            return f"{self.value:g} {self.unit}"
        return f"{self.value:g} ± {self.uncertainty:g} {self.unit}"


def parse_quantity(text: str, *, dimension: str, field: str = "value",
                   positive: bool = False, allow_unitless: bool = False,
                   default_unit: str | None = None) -> Measured:
    """Parse ``'12.5 mg'``, ``'12.5mg'`` or ``'12.50+/-0.02 mg'`` into SI.

    Parameters
    ----------
    text : str
        The user's text.
    dimension : str
        SI unit the result is wanted in, e.g. ``"kg"``, ``"K"``, ``"T"``, ``"s"``.
    field : str
        Name used in error messages (``"--mass"``).
    positive : bool
        Refuse zero and negative values.
    allow_unitless, default_unit :
        Accept a bare number, read in ``default_unit`` (or in ``dimension``).

    Raises
    ------
    InvalidValue
        With a one-line message naming ``field`` and what was expected.
    """
    if text is None or not str(text).strip():
        raise InvalidValue(f"{field}: empty; expected a number with a unit, e.g. '12.5 mg'", field=field)
    m = _QTY.match(str(text))
    if not m:
        raise InvalidValue(
            f"{field}: cannot read {text!r}; expected a number with a unit such as "
            f"'12.5 {dimension}' or '12.50+/-0.02 {dimension}'", field=field)
    unit = m.group("unit").strip()
    if not unit:
        if not allow_unitless:
            raise InvalidValue(f"{field}: {text!r} has no unit; write it with one, e.g. '{m.group('value')} {_example_unit(dimension)}'",
                               field=field)
        unit = default_unit or dimension
    value = float(m.group("value"))
    unc = float(m.group("unc")) if m.group("unc") else None
    try:
        q = Q_(value, unit).to(dimension)
        # The uncertainty is a difference, so offset units (degC) convert correctly.
        u = (Q_(value + unc, unit).to(dimension).magnitude - q.magnitude) if unc is not None else None
    except (pint.errors.UndefinedUnitError, pint.errors.DimensionalityError, AttributeError,
            ValueError, TypeError, AssertionError) as exc:
        raise InvalidValue(f"{field}: unit {unit!r} in {text!r} is not a unit of {dimension} "
                           f"({type(exc).__name__})", field=field) from None
    # 12.5 mg -> 1.2499999999999999e-05 kg is a floating-point artefact of the
    # conversion; no input carries more than 15 significant digits.
    q = Q_(float(f"{q.magnitude:.15g}"), dimension)
    if u is not None:
        u = float(f"{u:.15g}")
    if not math.isfinite(q.magnitude):
        raise InvalidValue(f"{field}: {text!r} is not a finite number", field=field)
    if positive and q.magnitude <= 0:
        raise InvalidValue(f"{field}: must be greater than zero, got {text!r}", field=field)
    if u is not None and u < 0:
        raise InvalidValue(f"{field}: the uncertainty in {text!r} must not be negative", field=field)
    return Measured(float(q.magnitude), None if u is None else float(u), dimension)


def to_si(value: float, unit: str, dimension: str) -> float:
    """Convert one number from ``unit`` to ``dimension`` (an SI unit string)."""
    return float(Q_(value, unit).to(dimension).magnitude)


def _example_unit(dimension: str) -> str:
    return {"kg": "mg", "K": "K", "T": "mT", "s": "h", "m": "mm", "degree": "deg"}.get(dimension, dimension)

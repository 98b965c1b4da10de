"""Unit spellings -> SI factors, checked against the NBS/IEEE table and against pint.

The expected factors below are written from the NBS/IEEE table "Units for Magnetic
Properties" (1 emu = 1e-3 A m^2; 1 emu/g = 1 A m^2/kg; 1 emu/cm^3 = 1e3 A/m;
1 Oe = 1000/(4 pi) A/m, i.e. mu0*H = 1e-4 T per Oe; 1 G = 1e-4 T; volume
susceptibility SI = 4 pi x CGS; mass susceptibility 1 cm^3/g = 4 pi x 1e-3 m^3/kg)
and from the definitions of the SI and the temperature scales (NIST SP 811, 2008),
not from the code's own table.
"""

from __future__ import annotations

import math

import pytest

from magvault.errors import InvalidValue
from magvault.ingest import si_conversion, split_header
from magvault.units import Q_

PI = math.pi

# (spelling as written, column family, expected quantity, expected factor to SI)
NBS_IEEE_TABLE = [
    # magnetic moment: 1 emu = 1e-3 A m^2
    ("Am2", "moment", "moment", 1.0),
    ("A m2", "moment", "moment", 1.0),
    ("Am^2", "moment", "moment", 1.0),
    ("A·m²", "moment", "moment", 1.0),
    ("A m^2", None, "moment", 1.0),
    ("emu", "moment", "moment", 1e-3),
    ("memu", "moment", "moment", 1e-6),
    # mass magnetisation: 1 emu/g = 1 A m^2/kg
    ("Am2/kg", "moment", "mass_moment", 1.0),
    ("Am²/kg", "moment", "mass_moment", 1.0),
    ("A m2 kg-1", None, "mass_moment", 1.0),
    ("emu/g", "moment", "mass_moment", 1.0),
    # magnetisation: 1 emu/cm^3 = 1e3 A/m
    ("emu/cm3", "moment", "magnetisation", 1e3),
    ("emu/cm^3", None, "magnetisation", 1e3),
    # field as mu0*H: 1 Oe -> 1e-4 T; 1 G = 1e-4 T
    ("Oe", "field", "field", 1e-4),
    ("kOe", "field", "field", 1e-1),
    ("G", "field", "field", 1e-4),
    ("mT", "field", "field", 1e-3),
    ("T", "field", "field", 1.0),
    # susceptibility: SI volume = 4 pi CGS volume; 1 cm^3/g = 4 pi 1e-3 m^3/kg
    ("SI", "chi", "volume_susceptibility", 1.0),
    ("emu/(cm3 Oe)", "chi", "volume_susceptibility", 4 * PI),
    ("emu/cm3/Oe", "chi", "volume_susceptibility", 4 * PI),
    ("cm3/g", "chi", "mass_susceptibility", 4 * PI * 1e-3),
    ("emu/(g Oe)", "chi", "mass_susceptibility", 4 * PI * 1e-3),
    ("m3/kg", "chi", "mass_susceptibility", 1.0),
    ("x1e-6 SI", "chi", "volume_susceptibility", 1e-6),
    ("10⁻⁶ SI", "chi", "volume_susceptibility", 1e-6),
    # heat capacity: 1 J/(g K) = 1000 J/(kg K)
    ("J/mol/K", "heat_capacity", "molar_heat_capacity", 1.0),
    ("J mol-1 K-1", "heat_capacity", "molar_heat_capacity", 1.0),
    ("J/(mol K)", "heat_capacity", "molar_heat_capacity", 1.0),
    ("J/(mol·K)", "heat_capacity", "molar_heat_capacity", 1.0),
    ("J K-1 mol-1", None, "molar_heat_capacity", 1.0),
    ("J/g/K", "heat_capacity", "specific_heat_capacity", 1e3),
    ("J/(g K)", "heat_capacity", "specific_heat_capacity", 1e3),
    ("mJ/(g K)", None, "specific_heat_capacity", 1.0),
    # frequency and time (SI prefixes)
    ("Hz", "frequency", "frequency", 1.0),
    ("kHz", "frequency", "frequency", 1e3),
    ("MHz", "frequency", "frequency", 1e6),
    ("s", "time", "time", 1.0),
    ("min", "time", "time", 60.0),
    ("h", "time", "time", 3600.0),
    # angles: two-theta stays in degrees; other angles go to radians
    ("deg", "two_theta", "two_theta", 1.0),
    ("2theta", None, "two_theta", 1.0),
    ("2θ", None, "two_theta", 1.0),
    ("°2θ", None, "two_theta", 1.0),
    ("deg", "phase", "angle", PI / 180.0),
    ("rad", "phase", "angle", 1.0),
    # intensities
    ("counts", "intensity", "counts", 1.0),
    ("cps", "intensity", "count_rate", 1.0),
    # lengths, masses, rates
    ("A", "wavelength", "length", 1e-10),
    ("Å", "wavelength", "length", 1e-10),
    ("nm", "wavelength", "length", 1e-9),
    ("mg", "mass", "mass", 1e-6),
    ("K/min", "sweep_rate", "temperature_rate", 1.0 / 60.0),
    ("°C/min", "sweep_rate", "temperature_rate", 1.0 / 60.0),
    ("C/min", "sweep_rate", "temperature_rate", 1.0 / 60.0),
]


@pytest.mark.parametrize("spelling, family, quantity, factor", NBS_IEEE_TABLE)
def test_spelling_table_against_nbs_ieee_factors(spelling, family, quantity, factor):
    """Each spelling reaches the factor of the NBS/IEEE table of units for magnetic properties
    (or the SI definition of the prefix), exactly to 1e-12."""
    conv = si_conversion(spelling, "col", family)
    assert conv.quantity == quantity
    assert conv.factor == pytest.approx(factor, rel=1e-12)
    assert conv.offset == 0.0


@pytest.mark.parametrize("spelling, family, offset", [
    ("K", "temperature", 0.0),
    ("°C", "temperature", 273.15),
    ("deg C", "temperature", 273.15),
    ("degC", "temperature", 273.15),
    ("C", "temperature", 273.15),
    ("℃", "temperature", 273.15),
    ("Celsius", None, 273.15),
])
def test_celsius_and_kelvin(spelling, family, offset):
    """T/K = t/°C + 273.15 (definition of the Celsius scale, NIST SP 811, 2008)."""
    conv = si_conversion(spelling, "Temp", family)
    assert conv.quantity == "temperature"
    assert conv.factor == pytest.approx(1.0, rel=1e-15)
    assert conv.offset == pytest.approx(offset, abs=1e-12)


@pytest.mark.parametrize("celsius", [-273.15, -40.0, 0.0, 26.85, 320.0, 1000.0])
def test_temperature_conversions_agree_with_pint(celsius):
    """Celsius and Fahrenheit to kelvin agree with pint (a reference library)."""
    c = si_conversion("°C", "T", "temperature")
    assert celsius * c.factor + c.offset == pytest.approx(Q_(celsius, "degC").to("K").magnitude, abs=1e-9)
    f = si_conversion("°F", "T", "temperature")
    fahrenheit = celsius * 9 / 5 + 32
    assert fahrenheit * f.factor + f.offset == pytest.approx(Q_(fahrenheit, "degF").to("K").magnitude,
                                                             abs=1e-9)
    # -40 °F is -40 °C: a fact of the two scales (common practice, no single source).
    if celsius == -40.0:
        assert fahrenheit * f.factor + f.offset == pytest.approx(233.15, abs=1e-9)


def test_oersted_via_pint_gaussian_context_and_mu0():
    """1 Oe = 1000/(4 pi) A/m (NBS/IEEE); pint's Gaussian context gives the same H, and
    mu0*H with pint's CODATA mu0 is 1e-4 T to 1e-9 (the exact CGS factor differs by ~7e-11)."""
    h_am = Q_(1.0, "Oe").to("A/m", "Gaussian").magnitude
    assert h_am == pytest.approx(1000 / (4 * PI), rel=1e-9)
    via_am = si_conversion("A/m", "H", "field")
    assert h_am * via_am.factor == pytest.approx(si_conversion("Oe", "H", "field").factor, rel=1e-9)
    mu0 = Q_(1.0, "mu_0").to("T*m/A").magnitude
    assert via_am.factor == pytest.approx(mu0, rel=1e-12)


def test_moment_and_magnetisation_agree_with_pint_after_defining_emu():
    """pint with emu = 1e-3 A m^2 gives the same factors for emu/g and emu/cm^3."""
    assert si_conversion("emu/g").factor == pytest.approx(Q_(1, "emu/g").to("A*m**2/kg").magnitude, rel=1e-12)
    assert si_conversion("emu/cm3").factor == pytest.approx(Q_(1, "emu/cm**3").to("A/m").magnitude, rel=1e-12)


@pytest.mark.parametrize("spelling, family, expected_fragment", [
    ("C", None, "°C"),             # Celsius or coulomb
    ("deg", "temperature", "°C"),  # °C, °F or K
    ("emu", "chi", "emu/(cm3 Oe)"),  # volume or mass susceptibility
    ("mhz", "frequency", "MHz"),   # milli- or mega-hertz
    ("", "chi", "SI"),
])
def test_ambiguous_units_are_refused_with_candidates(spelling, family, expected_fragment):
    with pytest.raises(InvalidValue) as info:
        si_conversion(spelling, "Temp", family)
    message = info.value.message
    assert "Temp" in message and expected_fragment in message


def test_unknown_unit_names_column_and_candidates():
    with pytest.raises(InvalidValue) as info:
        si_conversion("blorps", "Moment", "moment")
    assert "'Moment'" in info.value.message and "emu" in info.value.message


@pytest.mark.parametrize("header, name, unit", [
    ("Temperature (K)", "Temperature", "K"),
    ("M [emu]", "M", "emu"),
    ("field/Oe", "field", "Oe"),
    ("T_K", "T", "K"),
    ("M_emu", "M", "emu"),
    ("Temp (°C)", "Temp", "°C"),
    ("Cp (J/mol/K)", "Cp", "J/mol/K"),
    ("Cp (J/(mol K))", "Cp", "J/(mol K)"),
    ("Moment (A m2)", "Moment", "A m2"),
    ("mu0H (T)", "mu0H", "T"),
    ("Field (Oe)", "Field", "Oe"),
    ("chi_quad_SI", "chi_quad", "SI"),
    ("Temperature K", "Temperature", "K"),
    ("M/Ms", "M/Ms", None),
    ("two_theta", "two_theta", None),
    ("temperature_K", "temperature_K", None),  # a canonical name is kept whole
])
def test_split_header(header, name, unit):
    assert split_header(header) == (name, unit)

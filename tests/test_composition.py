"""Tests for magvault.analysis.composition.

Outside references used here:
- periodictable (general-purpose library): element symbols, standard atomic
  weights, molar masses and mass fractions of Fe7S8, FeS and Fe(1-x)S.
- IUPAC 2021 standard atomic weights, Prohaska et al. (2022), Pure Appl. Chem.
  94, 573: Fe 55.845(2), S 32.06(2).
- uncertainties (general-purpose library): first-order propagation.
- scipy.optimize.curve_fit: weighted least-squares fit of a constant, whose
  parameter uncertainty is the internal one (absolute_sigma=True) or the one
  scaled by the Birge ratio (absolute_sigma=False); Birge (1932), Phys. Rev. 40, 207.
- gemmi (general-purpose library): d(102) of the troilite subcell, from the
  cell of Evans (1970), Science 167, 621.
- Toulmin & Barton (1964), Geochim. Cosmochim. Acta 28, 641: the d(102)
  calibration -- FROM MEMORY (not seen in a stored copy of the paper).
"""

from __future__ import annotations

import math

import gemmi
import numpy as np
import periodictable
import pytest
from uncertainties import ufloat

from magvault.analysis.composition import (
    ATOMIC_WEIGHTS,
    ELEMENT_SYMBOLS,
    CompositionResult,
    combine_compositions,
    composition_from_at,
    composition_from_wt,
    fe_atomic_percent_from_d102,
    parse_element_amount,
    parse_element_amounts,
    validate_superstructure,
    x_from_d102,
)
from magvault.errors import InvalidValue


# --------------------------------------------------------------------------- constants

def test_atomic_weights_match_periodictable_and_iupac_2021():
    """Prohaska et al. (2022), IUPAC 2021: Fe 55.845(2), S 32.06(2); periodictable 2.1 agrees."""
    assert ATOMIC_WEIGHTS["Fe"] == (55.845, 0.002)
    assert ATOMIC_WEIGHTS["S"] == (32.06, 0.02)
    assert ATOMIC_WEIGHTS["Fe"][0] == pytest.approx(periodictable.Fe.mass, abs=1e-9)
    assert ATOMIC_WEIGHTS["S"][0] == pytest.approx(periodictable.S.mass, abs=1e-9)


def test_molar_masses_of_fes_and_fe7s8_match_periodictable():
    """M(FeS) = 87.905 g/mol, M(Fe7S8) = 647.395 g/mol (periodictable.formula(...).mass)."""
    m_fe, m_s = ATOMIC_WEIGHTS["Fe"][0], ATOMIC_WEIGHTS["S"][0]
    assert m_fe + m_s == pytest.approx(periodictable.formula("FeS").mass, rel=1e-12)
    assert 7 * m_fe + 8 * m_s == pytest.approx(periodictable.formula("Fe7S8").mass, rel=1e-12)
    assert 7 * m_fe + 8 * m_s == pytest.approx(647.395, abs=1e-9)


def test_element_symbols_match_periodictable():
    """All 118 symbols, in order of atomic number, as periodictable lists them."""
    reference = [el.symbol for el in periodictable.elements if el.number > 0]
    assert list(ELEMENT_SYMBOLS) == reference


# --------------------------------------------------------------------------- from wt%

def test_fe7s8_hand_computed_example():
    """Fe7S8 written out by hand with the IUPAC 2021 weights (Prohaska et al., 2022).

    M(Fe7S8) = 7 * 55.845 + 8 * 32.06 = 390.915 + 256.48 = 647.395 g/mol
    w(Fe) = 390.915 / 647.395 = 60.3829 wt%,  w(S) = 256.48 / 647.395 = 39.6171 wt%
    n(Fe) = 60.383 / 55.845 = 1.0812607 mol per 100 g
    n(S)  = 39.617 / 32.06  = 1.2357143 mol per 100 g
    Fe/S  = 1.0812607 / 1.2357143 = 0.875009,  x = 1 - 0.875009 = 0.124991 (~0.125)
    Fe at.% = 100 * 0.875009 / 1.875009 = 46.667
    """
    r = composition_from_wt({"Fe": (60.383, 0.3), "S": (39.617, 0.3)})
    assert isinstance(r, CompositionResult)
    assert r.basis == "wt"
    assert r.fe_s_ratio == pytest.approx(0.875009, abs=2e-6)
    assert r.x == pytest.approx(0.124991, abs=2e-6)
    assert r.x == pytest.approx(0.125, abs=1e-4)
    assert r.fe_atomic_percent == pytest.approx(46.667, abs=1e-3)
    assert r.total_wt == pytest.approx(100.0)
    assert r.warnings == ()


@pytest.mark.parametrize("x_true", [0.0, 0.05, 0.0909, 0.125, 0.15])
def test_x_recovered_from_periodictable_mass_fractions(x_true):
    """Mass fractions of Fe(1-x)S computed by periodictable give back x."""
    formula = periodictable.formula(f"Fe{1 - x_true}S")
    wt = {str(el): 100.0 * frac for el, frac in formula.mass_fraction.items()}
    r = composition_from_wt({"Fe": (wt["Fe"], 0.1), "S": (wt["S"], 0.1)})
    assert r.x == pytest.approx(x_true, abs=1e-12)
    # For Fe(1-x)S the Fe atom fraction is (1-x)/(2-x).
    assert r.fe_atomic_percent == pytest.approx(100 * (1 - x_true) / (2 - x_true), rel=1e-12)


def test_wt_uncertainty_matches_uncertainties_package():
    """First-order propagation agrees with the `uncertainties` package."""
    fe, s = ufloat(60.5, 0.3), ufloat(39.1, 0.25)
    m_fe, m_s = ATOMIC_WEIGHTS["Fe"][0], ATOMIC_WEIGHTS["S"][0]
    ratio = (fe / m_fe) / (s / m_s)
    x = 1 - ratio
    fe_at = 100 * ratio / (1 + ratio)
    r = composition_from_wt({"Fe": (60.5, 0.3), "S": (39.1, 0.25)})
    assert r.x == pytest.approx(x.nominal_value, rel=1e-12)
    assert r.x_uncertainty == pytest.approx(x.std_dev, rel=1e-10)
    assert r.fe_s_ratio_uncertainty == pytest.approx(ratio.std_dev, rel=1e-10)
    assert r.fe_atomic_percent == pytest.approx(fe_at.nominal_value, rel=1e-12)
    assert r.fe_atomic_percent_uncertainty == pytest.approx(fe_at.std_dev, rel=1e-10)


def test_wt_uncertainty_with_atomic_weights_matches_uncertainties_package():
    """Including the IUPAC atomic-weight uncertainties, checked with `uncertainties`."""
    fe, s = ufloat(60.5, 0.3), ufloat(39.1, 0.25)
    m_fe, m_s = ufloat(55.845, 0.002), ufloat(32.06, 0.02)
    x = 1 - (fe / m_fe) / (s / m_s)
    plain = composition_from_wt({"Fe": (60.5, 0.3), "S": (39.1, 0.25)})
    full = composition_from_wt({"Fe": (60.5, 0.3), "S": (39.1, 0.25)},
                               include_atomic_weight_uncertainty=True)
    assert full.x_uncertainty == pytest.approx(x.std_dev, rel=1e-10)
    assert full.x_uncertainty > plain.x_uncertainty
    assert full.parameters["include_atomic_weight_uncertainty"] is True


def test_zero_iron_still_propagates():
    """dr/dw_Fe is finite at w_Fe = 0; checked with `uncertainties`."""
    fe, s = ufloat(0.0, 0.1), ufloat(53.0, 0.2)
    ratio = (fe / ATOMIC_WEIGHTS["Fe"][0]) / (s / ATOMIC_WEIGHTS["S"][0])
    r = composition_from_wt({"Fe": (0.0, 0.1), "S": (53.0, 0.2)}, total_window=(0, 200))
    assert r.x == 1.0
    assert r.x_uncertainty == pytest.approx(ratio.std_dev, rel=1e-10)
    assert any("outside 0..0.2" in w for w in r.warnings)


def test_missing_uncertainty_gives_none_and_says_so():
    r = composition_from_wt({"Fe": 60.383, "S": (39.617, 0.3)})
    assert r.x == pytest.approx(0.125, abs=1e-4)
    assert r.x_uncertainty is None
    assert r.fe_s_ratio_uncertainty is None
    assert any("without an uncertainty" in w for w in r.warnings)


@pytest.mark.parametrize("fe,s,warned", [
    (60.0, 38.4, True),    # 98.4 < 98.5
    (60.0, 38.5, False),   # 98.5 is inside the band
    (61.0, 40.5, False),   # 101.5 is inside the band
    (61.0, 40.6, True),    # 101.6
])
def test_total_warning_rule_98_5_to_101_5(fe, s, warned):
    """The acceptance band 98.5-101.5 wt% (common practice, no single source)."""
    r = composition_from_wt({"Fe": (fe, 0.3), "S": (s, 0.3)})
    assert any("analytical total" in w for w in r.warnings) is warned
    assert r.total_wt == pytest.approx(fe + s)


def test_x_outside_pyrrhotite_range_is_warned_not_refused():
    # Pyrite-like FeS2 composition by weight: Fe 46.55, S 53.45 -> x ~ 0.5.
    r = composition_from_wt({"Fe": (46.55, 0.3), "S": (53.45, 0.3)})
    assert r.x == pytest.approx(0.5, abs=2e-3)
    assert any("outside 0..0.2" in w for w in r.warnings)
    # Metal excess (x < 0) is warned too.
    r = composition_from_wt({"Fe": (64.5, 0.3), "S": (35.5, 0.3)})
    assert r.x < 0
    assert any("outside 0..0.2" in w for w in r.warnings)


def test_other_elements_count_in_total_only():
    r = composition_from_wt({"Fe": (59.6, 0.3), "S": (39.5, 0.3), "Ni": (0.8, 0.05)})
    assert r.total_wt == pytest.approx(99.9)
    only_fe_s = composition_from_wt({"Fe": (59.6, 0.3), "S": (39.5, 0.3)})
    assert r.x == only_fe_s.x
    assert any("Ni 0.8 wt%" in w for w in r.warnings)


@pytest.mark.parametrize("amounts,needle", [
    ({}, "no element amounts"),
    ({"Fe": (60.0, 0.3)}, "missing S"),
    ({"S": (39.0, 0.3)}, "missing Fe"),
    ({"Fe": (60.0, 0.3), "S": (0.0, 0.3)}, "S must be greater than zero"),
    ({"Fe": (160.0, 0.3), "S": (39.0, 0.3)}, "outside 0-100"),
    ({"Fe": (60.0, -0.3), "S": (39.0, 0.3)}, "uncertainty of Fe"),
    ({"Fe": ("sixty", 0.3), "S": (39.0, 0.3)}, "not a number"),
    ({"Fe": (60.0, 0.3), "S": (39.0, 0.3), "Qq": (1.0, 0.1)}, "not a chemical element"),
    ({"Fe": (60.0, 0.3, 1), "S": (39.0, 0.3)}, "(value, uncertainty)"),
])
def test_bad_amounts_are_refused_naming_the_option(amounts, needle):
    with pytest.raises(InvalidValue) as err:
        composition_from_wt(amounts)
    assert err.value.message.startswith("--wt:")
    assert needle in err.value.message
    assert err.value.field == "--wt"


# --------------------------------------------------------------------------- from at%

def test_at_percent_of_fe7s8():
    """Fe7S8 by atoms: Fe 7/15 = 46.6667 at.%, S 8/15 = 53.3333 at.%, x = 1 - 7/8 = 0.125."""
    r = composition_from_at({"Fe": (700 / 15, 0.2), "S": (800 / 15, 0.2)})
    assert r.basis == "at"
    assert r.x == pytest.approx(0.125, abs=1e-12)
    assert r.total_wt is None
    assert r.total == pytest.approx(100.0)
    fe, s = ufloat(700 / 15, 0.2), ufloat(800 / 15, 0.2)
    assert r.x_uncertainty == pytest.approx((1 - fe / s).std_dev, rel=1e-10)


def test_at_and_wt_agree_for_the_same_material():
    """wt% from periodictable and the matching at% give the same x."""
    formula = periodictable.formula("Fe0.92S")
    wt = {str(el): 100 * f for el, f in formula.mass_fraction.items()}
    from_wt = composition_from_wt({"Fe": (wt["Fe"], 0.1), "S": (wt["S"], 0.1)})
    from_at = composition_from_at({"Fe": (100 * 0.92 / 1.92, 0.1), "S": (100 / 1.92, 0.1)})
    assert from_wt.x == pytest.approx(0.08, abs=1e-12)
    assert from_at.x == pytest.approx(0.08, abs=1e-12)


def test_at_errors_name_at_option():
    with pytest.raises(InvalidValue, match=r"^--at: .*missing S"):
        composition_from_at({"Fe": (46.0, 0.2)})


# --------------------------------------------------------------------------- parsing

@pytest.mark.parametrize("text,expected", [
    ("Fe=60.5+/-0.3", ("Fe", 60.5, 0.3)),
    ("Fe=60.5", ("Fe", 60.5, None)),
    ("S = 39.1 +- 0.3", ("S", 39.1, 0.3)),
    ("S=39.1±0.3", ("S", 39.1, 0.3)),
    ("fe=60.5%", ("Fe", 60.5, None)),
    ("NI=0.8+/-0.05", ("Ni", 0.8, 0.05)),
    ("co=1e-1", ("Co", 0.1, None)),
])
def test_parse_element_amount_accepts(text, expected):
    assert parse_element_amount(text) == expected


@pytest.mark.parametrize("text,needle", [
    ("Fe60.5", "cannot read"),
    ("Fe=", "cannot read"),
    ("Fe=abc", "cannot read"),
    ("Fe=60.5+/-", "cannot read"),
    ("", "cannot read"),
    ("Xx=1.0", "not a chemical element"),
    ("Fe=101", "outside 0-100"),
    ("Fe=-1", "outside 0-100"),
    ("Fe=60+/--0.3", "uncertainty"),
])
def test_parse_element_amount_refuses_naming_the_option(text, needle):
    with pytest.raises(InvalidValue) as err:
        parse_element_amount(text, option="--at")
    assert err.value.message.startswith("--at:")
    assert needle in err.value.message


def test_parse_element_amounts_collects_and_refuses_duplicates():
    amounts = parse_element_amounts(["Fe=60.5+/-0.3", "S=39.1+/-0.3"])
    assert amounts == {"Fe": (60.5, 0.3), "S": (39.1, 0.3)}
    assert composition_from_wt(amounts).total_wt == pytest.approx(99.6)
    with pytest.raises(InvalidValue, match="Fe is given twice"):
        parse_element_amounts(["Fe=60.5", "fe=60.4"])


# --------------------------------------------------------------------------- combining

def _fake(x: float, u: float | None, basis: str = "wt") -> CompositionResult:
    return CompositionResult(x=x, x_uncertainty=u, fe_s_ratio=1 - x, fe_s_ratio_uncertainty=u,
                             fe_atomic_percent=100 * (1 - x) / (2 - x), total_wt=None,
                             warnings=(), basis=basis)


def _constant_fit(xs, us, absolute_sigma):
    from scipy.optimize import curve_fit

    def constant(_, c):
        return np.full(len(xs), c)

    popt, pcov = curve_fit(constant, np.arange(len(xs)), np.asarray(xs), p0=[np.mean(xs)],
                           sigma=np.asarray(us), absolute_sigma=absolute_sigma)
    return popt[0], math.sqrt(pcov[0, 0])


def test_weighted_mean_of_consistent_analyses_is_not_inflated():
    """Weighted mean vs scipy curve_fit with absolute_sigma=True (internal uncertainty)."""
    xs, us = [0.120, 0.123, 0.118], [0.004, 0.006, 0.005]
    r = combine_compositions([_fake(x, u) for x, u in zip(xs, us)])
    mean, unc = _constant_fit(xs, us, absolute_sigma=True)
    assert r.x == pytest.approx(mean, rel=1e-9)
    assert r.x_uncertainty == pytest.approx(unc, rel=1e-6)
    assert r.x == pytest.approx(np.average(xs, weights=1 / np.square(us)), rel=1e-12)
    assert r.parameters["birge_ratio"] < 1
    assert r.parameters["inflated"] is False
    assert r.basis == "wt"
    assert r.warnings == ()


def test_scattered_analyses_inflate_by_birge_ratio():
    """Birge (1932): scaled uncertainty equals curve_fit's with absolute_sigma=False."""
    xs, us = [0.100, 0.125, 0.090, 0.130], [0.003, 0.003, 0.004, 0.005]
    r = combine_compositions([_fake(x, u) for x, u in zip(xs, us)])
    mean, scaled = _constant_fit(xs, us, absolute_sigma=False)
    _, internal = _constant_fit(xs, us, absolute_sigma=True)
    assert r.x == pytest.approx(mean, rel=1e-9)
    assert r.x_uncertainty == pytest.approx(scaled, rel=1e-6)
    assert r.x_uncertainty > internal
    assert r.parameters["birge_ratio"] == pytest.approx(scaled / internal, rel=1e-6)
    assert any("Birge ratio" in w for w in r.warnings)


def test_combining_without_uncertainties_falls_back_to_plain_mean():
    xs = [0.11, 0.12, 0.13]
    r = combine_compositions([_fake(0.11, 0.004), _fake(0.12, None), _fake(0.13, 0.004)])
    assert r.x == pytest.approx(0.12)
    assert r.x_uncertainty == pytest.approx(np.std(xs, ddof=1) / math.sqrt(3), rel=1e-12)
    assert r.parameters["method"] == "plain mean"
    one = combine_compositions([_fake(0.11, None)])
    assert one.x == 0.11 and one.x_uncertainty is None


def test_combining_mixed_methods_and_real_analyses():
    wt = composition_from_wt({"Fe": (60.383, 0.3), "S": (39.617, 0.3)})
    d = x_from_d102(2.0585e-10, 0.0003e-10)
    r = combine_compositions([wt, d])
    assert r.basis == "combined"
    w1, w2 = 1 / wt.x_uncertainty ** 2, 1 / d.x_uncertainty ** 2
    assert r.x == pytest.approx((w1 * wt.x + w2 * d.x) / (w1 + w2), rel=1e-12)
    assert r.fe_s_ratio == pytest.approx(1 - r.x)


def test_combining_nothing_is_refused():
    with pytest.raises(InvalidValue, match="nothing to combine"):
        combine_compositions([])


# --------------------------------------------------------------------------- d(102)

def test_d102_calibration_points_from_memory():
    """Toulmin & Barton (1964) calibration -- FROM MEMORY, not checked against the paper.

    N = 45.212 + 72.86 (d - 2.0400) + 311.5 (d - 2.0400)^2 gives 45.212 at.% at
    2.0400 A, about 50.0 at.% at the troilite subcell (2.0938 A) and 46.67 at.%
    (Fe7S8) near 2.0585 A.
    """
    assert fe_atomic_percent_from_d102(2.0400e-10)[0] == pytest.approx(45.212, abs=1e-9)
    assert fe_atomic_percent_from_d102(2.0938e-10)[0] == pytest.approx(50.0, abs=0.05)
    assert fe_atomic_percent_from_d102(2.0585e-10)[0] == pytest.approx(46.67, abs=0.01)
    r = x_from_d102(2.0585e-10)
    assert r.basis == "d102"
    assert r.x == pytest.approx(0.125, abs=5e-4)
    assert r.x_uncertainty is None
    assert r.fe_atomic_percent == pytest.approx(100 * (1 - r.x) / (2 - r.x), rel=1e-12)


def test_d102_of_troilite_cell_from_gemmi_gives_x_near_zero():
    """Troilite a = 5.962 A, c = 11.750 A (Evans, 1970, Science 167, 621); NiAs subcell
    A = a/sqrt(3), C = c/2; d(102) from gemmi.UnitCell.calculate_d (2.09234 A).  The
    calibration (from memory, Toulmin & Barton 1964) should then give FeS, x ~ 0."""
    sub = gemmi.UnitCell(5.962 / math.sqrt(3), 5.962 / math.sqrt(3), 11.750 / 2, 90, 90, 120)
    d102 = sub.calculate_d([1, 0, 2])
    assert d102 == pytest.approx(2.09234, abs=1e-5)
    r = x_from_d102(d102 * 1e-10)
    # The calibration puts FeS at d = 2.0935 A, 0.0012 A above Evans's cell: with
    # dN/dd ~ 106 at.%/A that is 0.12 at.% Fe, i.e. x ~ 0.005.  A band of 0.01
    # still fails on a wrong sign or scale (each moves x by more than 0.05).
    assert 0.0 <= r.x < 0.01
    assert r.warnings == ()


def test_d102_uncertainty_matches_uncertainties_package():
    d = ufloat(2.0585, 0.0004)
    n = 45.212 + 72.86 * (d - 2.0400) + 311.5 * (d - 2.0400) ** 2
    x = 1 - n / (100 - n)
    r = x_from_d102(2.0585e-10, 0.0004e-10)
    assert r.fe_atomic_percent == pytest.approx(n.nominal_value, rel=1e-9)
    assert r.fe_atomic_percent_uncertainty == pytest.approx(n.std_dev, rel=1e-6)
    assert r.x == pytest.approx(x.nominal_value, rel=1e-9)
    assert r.x_uncertainty == pytest.approx(x.std_dev, rel=1e-6)


def test_d102_outside_calibration_is_warned():
    r = x_from_d102(2.0300e-10)  # N ~ 44.5 at.% Fe
    assert any("outside the calibrated 45-50" in w for w in r.warnings)
    r = x_from_d102(2.1000e-10)  # N ~ 50.7 at.% Fe
    assert any("outside the calibrated 45-50" in w for w in r.warnings)


@pytest.mark.parametrize("d", [2.0585, -2e-10, 0.0, float("nan"), "2.0e-10"])
def test_d102_refuses_non_lengths(d):
    """Angstrom numbers given as metres (2.0585) and non-positive values are refused."""
    with pytest.raises(InvalidValue, match="^d102:"):
        x_from_d102(d)


# --------------------------------------------------------------------------- superstructure

@pytest.mark.parametrize("label,expected", [
    ("4C", "4C"), ("4c", "4C"), (" 5C ", "5C"), ("1C", "1C"), ("2C", "2C"), ("3C", "3C"),
    ("6C", "6C"), ("11C", "11C"), ("NC", "NC"), ("nc", "NC"), ("MC", "MC"), ("5.5C", "5.5C"),
])
def test_superstructure_labels_accepted(label, expected):
    assert validate_superstructure(label) == expected


@pytest.mark.parametrize("label", ["4", "C", "4CC", "4A", "0C", "-4C", "4.C", "XC", "", "4 C"])
def test_superstructure_labels_refused(label):
    with pytest.raises(InvalidValue, match="^--superstructure: "):
        validate_superstructure(label)

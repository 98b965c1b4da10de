"""Curie-Weiss fit checked against outside references.

Outside references:
* the Curie-Weiss law chi = C/(T - theta) with known C and theta (Weiss,
  1907);
* :func:`numpy.polyfit` (weighted line with its covariance) and the
  ``uncertainties`` package (first-order propagation with correlations) for
  theta = -a/b and C = 1/b and their standard uncertainties (JCGM 100:2008,
  section 5.2);
* mean-field theory: above Tc, in a small field, the reduced magnetisation of
  a spin-1/2 mean-field magnet is m = h/(T - Tc), i.e. Curie-Weiss with
  theta = Tc and C = h = g J mu_B B/k_B (Weiss, 1907; Blundell, 2001,
  "Magnetism in Condensed Matter", section 5.1), with mu_B/k_B from CODATA
  through scipy.constants.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants
from uncertainties import correlated_values

from magvault.analysis.curieweiss import analyse_curie_weiss
from magvault.analysis.meanfield import curve_with_field
from magvault.errors import InvalidValue

THETA, C_VOL = 585.0, 0.35


def _results(outcome):
    return {r.quantity: r for r in outcome.results}


def test_exact_law_is_recovered():
    """Noise-free chi = C/(T - theta) gives back C and theta (Weiss 1907)."""
    T = np.linspace(620.0, 900.0, 141)
    out = analyse_curie_weiss(T, C_VOL / (T - THETA))
    res = _results(out)
    assert res["theta_K"].value == pytest.approx(THETA, rel=1e-12)
    assert res["curie_constant"].value == pytest.approx(C_VOL, rel=1e-12)
    assert res["theta_K"].unit == "K" and res["curie_constant"].unit == "K"
    assert res["theta_K"].uncertainty < 1e-9
    assert out.method == "curie-weiss" and out.version == "1.0"
    # no transition in this curve: the default rule keeps every point
    assert out.diagnostics["fit_range_K"] == [620.0, 900.0]


def test_uncertainties_match_polyfit_and_uncertainties_package():
    """u(theta), u(C) equal the propagation of numpy.polyfit's covariance with `uncertainties`.

    Weighting "propagated": u(1/chi) = u(chi)/chi^2, so polyfit weights w =
    chi^2 (polyfit's w multiplies residuals); covariance scaled by the
    residual variance (polyfit cov=True, N - 2 degrees of freedom).
    """
    rng = np.random.default_rng(7)
    T = np.linspace(620.0, 900.0, 141)
    chi = C_VOL / (T - THETA) + 2e-5 * rng.standard_normal(T.size)
    res = _results(analyse_curie_weiss(T, chi, fit_above_K=620.0))
    coef, cov = np.polyfit(T, 1 / chi, 1, w=chi**2, cov=True)
    b, a = correlated_values(coef, cov)
    theta, curie = -a / b, 1 / b
    assert res["theta_K"].value == pytest.approx(theta.nominal_value, rel=1e-9)
    assert res["theta_K"].uncertainty == pytest.approx(theta.std_dev, rel=1e-6)
    assert res["curie_constant"].value == pytest.approx(curie.nominal_value, rel=1e-9)
    assert res["curie_constant"].uncertainty == pytest.approx(curie.std_dev, rel=1e-6)
    # uniform weighting is plain least squares on 1/chi
    res_u = _results(analyse_curie_weiss(T, chi, fit_above_K=620.0, weighting="uniform"))
    coef_u, cov_u = np.polyfit(T, 1 / chi, 1, cov=True)
    b_u, a_u = correlated_values(coef_u, cov_u)
    assert res_u["theta_K"].value == pytest.approx((-a_u / b_u).nominal_value, rel=1e-9)
    assert res_u["theta_K"].uncertainty == pytest.approx((-a_u / b_u).std_dev, rel=1e-6)


def test_theta_uncertainty_is_honest():
    """Over 50 noise seeds theta lies within 2 stated uncertainties in at least 90% of cases."""
    T = np.linspace(620.0, 900.0, 141)
    errors, stated = [], []
    for seed in range(50):
        rng = np.random.default_rng(seed)
        chi = C_VOL / (T - THETA) + 1e-5 * rng.standard_normal(T.size)
        theta = _results(analyse_curie_weiss(T, chi, fit_above_K=620.0))["theta_K"]
        errors.append(theta.value - THETA)
        stated.append(theta.uncertainty)
    errors, stated = np.array(errors), np.array(stated)
    assert np.mean(np.abs(errors) <= 2 * stated) >= 0.9
    assert np.sqrt(np.mean(errors**2)) >= np.mean(stated) / 3


def test_mean_field_paramagnet_has_theta_equal_to_tc():
    """Mean-field spin-1/2 magnet above Tc in 0.01 T: theta = Tc, C = mu_B B/k_B (reduced units).

    The default rule finds the ordering drop near 590 K and starts the fit
    30 K above it; theta is a result of its own, not the ordering temperature
    (for a ferrimagnet the two differ; here mean-field theory makes them equal).
    """
    T = np.linspace(300.0, 800.0, 501)
    m = curve_with_field(T, 590.0, 0.01)
    out = analyse_curie_weiss(T, m)
    res = _results(out)
    zeeman = constants.physical_constants["Bohr magneton in K/T"][0] * 0.01
    assert res["theta_K"].value == pytest.approx(590.0, abs=1e-4)
    assert res["curie_constant"].value == pytest.approx(zeeman, rel=1e-6)
    rule = out.diagnostics["fit_start_rule"]
    assert abs(rule["transition_K"] - 590.0) < 3.0
    assert out.diagnostics["fit_range_K"][0] == pytest.approx(rule["transition_K"] + 30.0, abs=1.0)
    assert out.parameters["margin_K"] == 30.0 and out.parameters["fit_above_K"] is None


def test_curvature_near_the_transition_is_reported():
    """Fitting too close to Tc of a mean-field magnet in 1 T: 1/chi bends and the diagnostic shows it."""
    T = np.linspace(592.0, 800.0, 209)
    m = curve_with_field(T, 590.0, 1.0)
    near = analyse_curie_weiss(T, m, fit_above_K=592.0)
    far = analyse_curie_weiss(T, m, fit_above_K=700.0)
    assert abs(near.diagnostics["curvature_z"]) > 10
    assert abs(_results(far)["theta_K"].value - 590.0) < abs(_results(near)["theta_K"].value - 590.0)


def test_mass_susceptibility_units_and_bad_points():
    T = np.linspace(620.0, 900.0, 57)
    chi_mass = 4.4e-5 / (T - THETA)    # m^3 K/kg over K
    chi_mass[3] = -1e-9                # a point that cannot be inverted
    out = analyse_curie_weiss(T, chi_mass, unit="m^3/kg", fit_above_K=600.0)
    res = _results(out)
    assert res["curie_constant"].unit == "m^3 K/kg"
    assert res["curie_constant"].value == pytest.approx(4.4e-5, rel=1e-9)
    assert any("chi <= 0" in w for w in out.warnings)
    assert out.diagnostics["n_fit"] == 56
    assert _results(analyse_curie_weiss(T[4:], chi_mass[4:], unit="chi_mass_m3_per_kg"))[
        "curie_constant"].unit == "m^3 K/kg"


def test_refusals_name_the_field():
    T = np.linspace(620.0, 900.0, 57)
    chi = C_VOL / (T - THETA)
    with pytest.raises(InvalidValue) as err:
        analyse_curie_weiss(T, chi, unit="emu/g")
    assert err.value.field == "unit"
    with pytest.raises(InvalidValue) as err:
        analyse_curie_weiss(T, chi, weighting="robust")
    assert err.value.field == "weighting"
    with pytest.raises(InvalidValue) as err:
        analyse_curie_weiss(T, chi, fit_above_K=899.0)
    assert err.value.field == "temperature_K"
    with pytest.raises(InvalidValue) as err:
        analyse_curie_weiss(T, 1.0 / (1000.0 - T))   # 1/chi falls with T
    assert err.value.field == "chi"
    with pytest.raises(InvalidValue) as err:
        analyse_curie_weiss(T, chi[:-1])
    assert err.value.field == "chi"


def test_repeated_temperatures_are_refused():
    T = np.array([700.0] * 5 + [701.0] * 5)
    with pytest.raises(InvalidValue) as err:
        analyse_curie_weiss(T, C_VOL / (T - THETA), fit_above_K=650.0)
    assert err.value.field == "temperature_K"

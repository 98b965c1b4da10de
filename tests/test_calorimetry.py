"""Heat-capacity anomalies checked against outside references.

Outside references:
* the Debye model, Cv = 9 n R (T/theta_D)^3 int_0^(theta_D/T) t^4 e^t/(e^t - 1)^2 dt
  (Debye, 1912, Ann. Phys. 344, 789): values Cv/(3R) = 0.951732, 0.825408,
  0.368635 at theta_D/T = 1, 2, 5 (REFERENCES.md "Heat capacity", computed
  with scipy there; standard tables agree, from memory), an independent
  evaluation with :func:`scipy.integrate.quad`, and its two limits: the
  Dulong-Petit value 3 n R at high T and Debye's T^3 law
  (12 pi^4/5) n R (T/theta_D)^3 at low T (Debye, 1912);
* R = 8.314462618 J/(mol K), exact in the 2019 SI (scipy.constants.R, CODATA 2018);
* excess entropy and enthalpy of a triangular dCp whose integrals are written
  out analytically below, scaled to R ln 5 = 13.3816 J/(mol K), the magnetic
  entropy of an S = 2 ion (REFERENCES.md, "Heat capacity");
* the FWHM of a Gaussian, 2 sqrt(2 ln 2) sigma (a standard identity);
* the weighted least-squares Debye baseline against :func:`scipy.optimize.curve_fit`.
The planted-recovery test (data made like the demo's, seed_demo.synthesis.cp)
checks the method recovers what was planted; it is not an outside check.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import constants
from scipy.integrate import quad
from scipy.optimize import curve_fit

from magvault.analysis.calorimetry import (GAS_CONSTANT, analyse_heat_capacity, debye_heat_capacity,
                                           debye_reduced, from_series)
from magvault.analysis.pipeline import NothingToAnalyse
from magvault.errors import InvalidValue
from seed_demo import physics, synthesis

R = constants.N_A * constants.k  # J/(mol K), exact in the 2019 SI (scipy.constants)
T_GRID = np.arange(300.0, 650.5, 1.0)  # the demo's calorimetry grid
LINEAR = 0.0035  # J/(mol K^2), the demo's linear term


def _results(outcome, quantity):
    return [r for r in outcome.results if r.quantity == quantity]


def _one(outcome, quantity):
    (row,) = _results(outcome, quantity)
    return row


def _demo_like(seed, *, x, theta_D, anomalies):
    """A calorimetry run made exactly as the demo makes one (seed_demo.synthesis.cp)."""
    p = {"theta_D_K": theta_D, "atoms_per_formula": 2.0 - x,
         "molar_mass_g_per_mol": (1.0 - x) * physics.ATOMIC_WEIGHT_FE + physics.ATOMIC_WEIGHT_S,
         "anomalies": anomalies, "sweep_rate_K_per_s": 2.0 / 60.0}
    table = synthesis.cp(p, None, np.random.default_rng(seed)).tables[0][1]
    return table, p


# --------------------------------------------------------------------------- Debye function

def test_gas_constant_is_the_exact_2019_si_value():
    """R = N_A k_B, exact since 2019 (scipy.constants, CODATA 2018); 8.314462618 J/(mol K) to 10 digits."""
    assert GAS_CONSTANT == pytest.approx(constants.N_A * constants.k, rel=1e-15)
    assert GAS_CONSTANT == pytest.approx(constants.R, rel=1e-15)
    assert GAS_CONSTANT == pytest.approx(8.314462618, abs=5e-10)  # REFERENCES.md, 10 digits


@pytest.mark.parametrize("x, expected", [(1.0, 0.951732), (2.0, 0.825408), (5.0, 0.368635)])
def test_debye_against_reference_values(x, expected):
    """Cv/(3R) at theta_D/T = 1, 2, 5 (REFERENCES.md, computed with scipy there)."""
    theta = 400.0
    cv = debye_heat_capacity(theta / x, theta, 1)
    assert float(cv) / (3 * R) == pytest.approx(expected, abs=1e-6)


def test_debye_against_independent_quadrature():
    """9 n R (T/thetaD)^3 int_0^x t^4 e^t/(e^t-1)^2 dt by scipy.integrate.quad, T from 0.5 to 10^4 K."""
    theta, n = 420.0, 1.9
    T = np.concatenate([np.geomspace(0.5, 50.0, 15), np.linspace(60.0, 2000.0, 40), [1e4]])

    def integrand(t):
        # e^-t form: no overflow at large t
        return t**4 * np.exp(-t) / (-np.expm1(-t)) ** 2 if t > 0 else 0.0

    expected = []
    for temp in T:
        x = theta / temp
        integral, _ = quad(integrand, 0.0, x, epsabs=0.0, epsrel=1e-13, limit=200)
        expected.append(9.0 * n * R * (temp / theta) ** 3 * integral)
    got = debye_heat_capacity(T, theta, n)
    assert got.shape == T.shape
    np.testing.assert_allclose(got, expected, rtol=1e-11)


def test_debye_limits_dulong_petit_and_t_cubed():
    """High T: 3 n R (1 - x^2/20 + ...); low T: (12 pi^4/5) n R (T/thetaD)^3 (Debye, 1912)."""
    n, theta = 2.0, 400.0
    hot = np.array([1e5, 1e7])
    np.testing.assert_allclose(debye_heat_capacity(hot, theta, n), 3 * n * R * (1 - (theta / hot) ** 2 / 20),
                               rtol=1e-12)
    assert debye_heat_capacity(1e12, theta, n) == pytest.approx(3 * n * R, rel=1e-15)
    cold = np.array([0.1, 1.0, 2.0, 4.0])  # x = 4000 .. 100: exponential corrections below 1e-30
    t3 = 12 * np.pi**4 / 5 * n * R * (cold / theta) ** 3
    np.testing.assert_allclose(debye_heat_capacity(cold, theta, n), t3, rtol=1e-12)
    # at x = 10 the T^3 law is already off by a measurable amount: the function is not just the law
    assert debye_heat_capacity(40.0, theta, n) < 0.99 * 12 * np.pi**4 / 5 * n * R * (40.0 / theta) ** 3
    assert float(debye_heat_capacity(0.0, theta, n)) == 0.0
    assert float(debye_reduced(np.array(0.0))) == 1.0


def test_debye_is_vectorised_and_refuses_bad_input():
    theta = np.array([300.0, 400.0])
    out = debye_heat_capacity(np.array([[200.0], [500.0]]), theta, 2)
    assert out.shape == (2, 2)
    assert out[0, 0] == pytest.approx(float(debye_heat_capacity(200.0, 300.0, 2)), rel=1e-15)
    with pytest.raises(InvalidValue) as err:
        debye_heat_capacity([300.0], -5.0)
    assert err.value.field == "theta_D_K" and "theta_D_K" in err.value.message
    with pytest.raises(InvalidValue) as err:
        debye_heat_capacity([-1.0, 300.0], 400.0)
    assert err.value.field == "temperature_K"
    with pytest.raises(InvalidValue) as err:
        debye_heat_capacity([300.0], 400.0, 0)
    assert err.value.field == "atoms_per_formula"


# --------------------------------------------------------------------------- excess entropy and enthalpy

T1, TM, T2 = 400.0, 560.0, 600.0  # triangle: 0 at T1, peak at TM, 0 at T2 (all grid points)


def _triangle_entropy_per_height():
    """int dCp/T dT of a triangle of unit height, written out:

    rising part h (T - T1)/(TM - T1): h [(TM - T1) - T1 ln(TM/T1)] / (TM - T1)
    falling part h (T2 - T)/(T2 - TM): h [T2 ln(T2/TM) - (T2 - TM)] / (T2 - TM)
    """
    return (((TM - T1) - T1 * np.log(TM / T1)) / (TM - T1)
            + (T2 * np.log(T2 / TM) - (T2 - TM)) / (T2 - TM))


def _triangle(T, height):
    return height * np.interp(T, [T1, TM, T2], [0.0, 1.0, 0.0], left=0.0, right=0.0)


def test_excess_entropy_of_triangle_is_r_ln5():
    """A triangular dCp scaled to dS = R ln 5 = 13.3816 J/(mol K) (REFERENCES.md) on a Debye lattice.

    Noise-free: dS from the written-out integral to 1e-5 relative (the
    trapezoid rule on dCp/T over 1 K steps), dH = h (T2 - T1)/2 exactly
    (trapezoid of a piecewise-linear function with grid-point vertices).
    """
    height = R * np.log(5.0) / _triangle_entropy_per_height()
    cp = debye_heat_capacity(T_GRID, 390.0, 2.0) + LINEAR * T_GRID + _triangle(T_GRID, height)
    out = analyse_heat_capacity(T_GRID, cp, atoms_per_formula=2.0)
    dS = _one(out, "excess_entropy")
    dH = _one(out, "excess_enthalpy")
    assert dS.unit == "J/(mol K)" and dH.unit == "J/mol"
    assert dS.value == pytest.approx(13.3816, abs=2e-4)
    assert dS.value == pytest.approx(R * np.log(5.0), rel=1e-5)
    assert dH.value == pytest.approx(height * (T2 - T1) / 2, rel=1e-7)
    assert dS.diagnostics["anomaly_temperature_K"] == pytest.approx(TM, abs=0.01)
    (tr,) = out.transitions
    assert tr.temperature_K == pytest.approx(TM, abs=0.01)
    # the half-maximum points of the triangle are exact under linear interpolation
    assert tr.width_K == pytest.approx((T2 - T1) / 2, abs=1e-6)
    assert _one(out, "theta_D_K").value == pytest.approx(390.0, rel=1e-6)
    assert _one(out, "linear_coefficient").value == pytest.approx(LINEAR, rel=1e-6)


def test_excess_entropy_uncertainty_covers_the_truth():
    """With 0.15 % noise, dS = R ln 5 lies within 2 stated uncertainties for >= 85 % of 30 seeds."""
    height = R * np.log(5.0) / _triangle_entropy_per_height()
    clean = debye_heat_capacity(T_GRID, 390.0, 2.0) + LINEAR * T_GRID + _triangle(T_GRID, height)
    z, u = [], []
    for seed in range(30):
        rng = np.random.default_rng(1000 + seed)
        cp = clean + rng.normal(0.0, 1.5e-3 * clean)
        dS = _one(analyse_heat_capacity(T_GRID, cp, atoms_per_formula=2.0), "excess_entropy")
        z.append((dS.value - R * np.log(5.0)) / dS.uncertainty)
        u.append(dS.uncertainty)
    z = np.abs(np.array(z))
    assert np.mean(z <= 2.0) >= 0.85
    # and the stated uncertainty is not inflated: a few tenths of a percent of dS
    assert np.median(u) < 0.01 * R * np.log(5.0)


def test_rectangular_excess_per_kg_with_polynomial_baseline():
    """A rectangle of height h from 470.5 to 520.5 K: dH = h * 50 K, dS = h ln(520.5/470.5).

    Data in J/(kg K) without a molar mass: the Debye baseline cannot be used,
    the polynomial one is, and a warning says so.  The trapezoid integral of a
    step whose edges lie midway between grid points is exact for dH; with
    0.15 % noise both integrals lie within 3 stated uncertainties, which are
    below 1 % of the values.
    """
    molar = 0.0820  # kg/mol, an invented formula mass
    h = 60.0  # J/(kg K)
    lattice = (debye_heat_capacity(T_GRID, 400.0, 2.0) + LINEAR * T_GRID) / molar
    excess = np.where((T_GRID > 470.5) & (T_GRID < 520.5), h, 0.0)
    clean = lattice + excess
    cp = clean + np.random.default_rng(21).normal(0.0, 1.5e-3 * clean)
    out = analyse_heat_capacity(T_GRID, cp, unit="J/(kg K)", polynomial_degree=4)
    assert any("polynomial baseline" in w for w in out.warnings)
    assert out.parameters["baseline_used"] == "polynomial"
    assert not _results(out, "theta_D_K")
    dH, dS = _one(out, "excess_enthalpy"), _one(out, "excess_entropy")
    assert dH.unit == "J/kg" and dS.unit == "J/(kg K)"
    assert abs(dH.value - h * 50.0) <= 3 * dH.uncertainty < 0.01 * h * 50.0
    expected_dS = h * np.log(520.5 / 470.5)
    assert abs(dS.value - expected_dS) <= 3 * dS.uncertainty < 0.01 * expected_dS


# --------------------------------------------------------------------------- peak position and width

def test_gaussian_peak_position_and_fwhm():
    """Noise-free Gaussian excess (sigma 4 K) at a fractional position: parabola vertex and FWHM = 2.3548 sigma."""
    centre, sig = 512.37, 4.0
    cp = (debye_heat_capacity(T_GRID, 380.0, 2.0) + LINEAR * T_GRID
          + 2.5 * np.exp(-0.5 * ((T_GRID - centre) / sig) ** 2))
    out = analyse_heat_capacity(T_GRID, cp)
    (tr,) = out.transitions
    assert tr.diagnostics["refinement"] == "parabola"
    assert tr.temperature_K == pytest.approx(centre, abs=0.02)
    assert tr.width_K == pytest.approx(2 * np.sqrt(2 * np.log(2)) * sig, rel=0.01)
    assert tr.kind == "vacancy-order" and tr.primary and tr.method == "excess-maximum"
    # grid term of the uncertainty: 1 K / sqrt(12)
    assert tr.uncertainty_K >= 1 / np.sqrt(12)


def test_overlapping_peaks_are_split_and_primary_marks_the_strongest():
    """Two overlapping Gaussians in the ordering window: two anomalies, components by height."""
    cp = (debye_heat_capacity(T_GRID, 400.0, 2.0) + LINEAR * T_GRID
          + 1.5 * np.exp(-0.5 * ((T_GRID - 575.0) / 5.0) ** 2)
          + 3.0 * np.exp(-0.5 * ((T_GRID - 600.0) / 5.0) ** 2))
    cp = cp + np.random.default_rng(3).normal(0.0, 1.5e-3 * cp)
    out = analyse_heat_capacity(T_GRID, cp)
    assert len(out.diagnostics["regions_K"]) == 1  # one contiguous excess region ...
    rows = sorted(out.transitions, key=lambda t: t.temperature_K)
    assert len(rows) == 2  # ... split into two anomalies
    assert [r.kind for r in rows] == ["ordering", "ordering"]
    assert rows[0].temperature_K == pytest.approx(575.0, abs=3 * rows[0].uncertainty_K)
    assert rows[1].temperature_K == pytest.approx(600.0, abs=3 * rows[1].uncertainty_K)
    assert [r.component for r in rows] == [2, 1]
    assert [r.primary for r in rows] == [False, True]
    assert len(_results(out, "excess_enthalpy")) == 2


def test_temperature_uncertainty_coverage_over_noise_seeds():
    """The stated u(T) is honest: demo-made lambda anomalies at random positions, 30 seeds.

    |T - T_planted| <= 2u in >= 90 % of cases and <= u in >= 60 %; and u is
    not inflated (median below 1 K on a 1 K grid).  Smooth (Gaussian) peaks
    are checked the same way over 15 seeds.
    """
    rng = np.random.default_rng(2024)
    z, u = [], []
    for seed in range(30):
        tc, tv = rng.uniform(586.0, 598.0), rng.uniform(478.0, 495.0)
        table, _ = _demo_like(seed, x=0.06, theta_D=float(rng.uniform(360.0, 430.0)),
                              anomalies=[{"temperature_K": tc, "height_J_per_mol_K": 4.0},
                                         {"temperature_K": tv, "height_J_per_mol_K": 3.0}])
        out = analyse_heat_capacity(table["temperature_K"], table["heat_capacity_J_per_mol_K"],
                                    atoms_per_formula=1.94)
        found = {t.kind: t for t in out.transitions}
        assert set(found) == {"ordering", "vacancy-order"}
        for kind, planted in (("ordering", tc), ("vacancy-order", tv)):
            z.append((found[kind].temperature_K - planted) / found[kind].uncertainty_K)
            u.append(found[kind].uncertainty_K)
    for seed in range(15):
        centre = rng.uniform(500.0, 520.0)
        clean = (debye_heat_capacity(T_GRID, 400.0, 2.0) + LINEAR * T_GRID
                 + 1.0 * np.exp(-0.5 * ((T_GRID - centre) / 3.0) ** 2))
        cp = clean + np.random.default_rng(500 + seed).normal(0.0, 1.5e-3 * clean)
        (tr,) = analyse_heat_capacity(T_GRID, cp).transitions
        z.append((tr.temperature_K - centre) / tr.uncertainty_K)
        u.append(tr.uncertainty_K)
    z = np.abs(np.array(z))
    assert np.mean(z <= 2.0) >= 0.90
    assert np.mean(z <= 1.0) >= 0.60
    assert np.median(u) < 1.0


# --------------------------------------------------------------------------- baseline

def test_debye_baseline_matches_curve_fit():
    """theta_D and a with their uncertainties equal scipy.optimize.curve_fit on the same points.

    Given constant noise sigma: weights 1/sigma^2, covariance from the Jacobian,
    scaled by the reduced chi-square when above 1 (curve_fit absolute_sigma
    True, or False when the reduced chi-square exceeds 1).
    """
    rng = np.random.default_rng(11)
    clean = debye_heat_capacity(T_GRID, 410.0, 1.9) + LINEAR * T_GRID
    cp = clean + rng.normal(0.0, 0.07, T_GRID.size)
    out = analyse_heat_capacity(T_GRID, cp, atoms_per_formula=1.9, noise_sigma=0.07,
                                exclude_K=[(560.0, 610.0)])
    assert out.diagnostics["region_rule"] == "given"
    assert out.diagnostics["regions_K"] == [[560.0, 610.0]]
    keep = (T_GRID < 560.0) | (T_GRID > 610.0)

    def model(T, theta, a):
        return debye_heat_capacity(T, theta, 1.9) + a * T

    red = out.diagnostics["baseline"]["reduced_chi2"]
    popt, pcov = curve_fit(model, T_GRID[keep], cp[keep], p0=(400.0, 0.003),
                           sigma=np.full(keep.sum(), 0.07), absolute_sigma=red <= 1.0)
    theta, a = _one(out, "theta_D_K"), _one(out, "linear_coefficient")
    assert theta.value == pytest.approx(popt[0], rel=1e-6)
    assert a.value == pytest.approx(popt[1], rel=1e-5)
    assert theta.uncertainty == pytest.approx(np.sqrt(pcov[0, 0]), rel=1e-3)
    assert a.uncertainty == pytest.approx(np.sqrt(pcov[1, 1]), rel=1e-3)
    assert a.unit == "J/(mol K^2)" and theta.unit == "K"
    # nothing stands above the noise in the given region: no anomaly is claimed
    assert out.transitions == ()


def test_planted_demo_runs_are_recovered():
    """Planted recovery (not an outside check): the demo's three kinds of calorimetry run.

    Data made by seed_demo.synthesis.cp (Debye lattice with n = 2 - x, linear
    term 0.0035 J/(mol K^2), lambda anomalies of heights from
    seed_demo.scenario, 0.15 % noise).  Each planted anomaly temperature lies
    within 3 stated uncertainties, theta_D and the linear term within 3, and
    dH within 3 of the planted h (15 K + 2 K) less the tail beyond the region.
    """
    cases = [
        (0.12, 395.0, [("ordering", 592.63, 4.0)]),
        (0.06, 372.0, [("ordering", 589.21, 4.0), ("vacancy-order", 487.55, 3.0)]),
        (0.008, 421.0, [("ordering", 594.08, 4.0), (None, 440.0 - 2500 * 0.008 + 1.3, 9.0)]),
    ]
    for seed, (x, theta, planted) in enumerate(cases):
        table, p = _demo_like(seed, x=x, theta_D=theta,
                              anomalies=[{"temperature_K": t, "height_J_per_mol_K": h} for _, t, h in planted])
        T, cp = table["temperature_K"], table["heat_capacity_J_per_mol_K"]
        out = analyse_heat_capacity(T, cp, atoms_per_formula=p["atoms_per_formula"])
        assert out.method == "heat-capacity-anomalies" and out.version == "1.0"
        assert len(out.transitions) == len(planted)
        th = _one(out, "theta_D_K")
        assert abs(th.value - theta) <= 3 * th.uncertainty
        lin = _one(out, "linear_coefficient")
        assert abs(lin.value - LINEAR) <= 3 * lin.uncertainty
        for kind, t_planted, h in planted:
            tr = min(out.transitions, key=lambda t: abs(t.temperature_K - t_planted))
            assert abs(tr.temperature_K - t_planted) <= 3 * tr.uncertainty_K
            if kind is not None:
                assert tr.kind == kind and tr.primary
            dH = next(r for r in _results(out, "excess_enthalpy")
                      if r.diagnostics["anomaly_temperature_K"] == tr.temperature_K)
            lo = dH.diagnostics["region_K"][0]
            # the lambda's exponential tail below the region, h 15 K e^{-(Tc - lo)/15 K}, is not counted
            expected = h * 17.0 - h * 15.0 * np.exp(-(t_planted - lo) / 15.0)
            assert abs(dH.value - expected) <= 3 * dH.uncertainty
            assert tr.width_K == pytest.approx((15.0 + 2.0) * np.log(2.0), abs=1.0)


def test_per_kg_debye_baseline_with_molar_mass_agrees_with_per_mol():
    """The same run per kg (with its molar mass) gives the same theta_D, and dH/dS divided by M."""
    table, p = _demo_like(5, x=0.1, theta_D=405.0,
                          anomalies=[{"temperature_K": 591.4, "height_J_per_mol_K": 4.0}])
    M = p["molar_mass_g_per_mol"] * 1e-3
    T = table["temperature_K"]
    mol = analyse_heat_capacity(T, table["heat_capacity_J_per_mol_K"], atoms_per_formula=1.9)
    kg = analyse_heat_capacity(T, table["heat_capacity_J_per_kg_K"], unit="J/(kg K)", atoms_per_formula=1.9,
                               molar_mass_kg_per_mol=M)
    assert _one(kg, "theta_D_K").value == pytest.approx(_one(mol, "theta_D_K").value, rel=1e-6)
    assert _one(kg, "linear_coefficient").unit == "J/(kg K^2)"
    assert _one(kg, "excess_enthalpy").value == pytest.approx(_one(mol, "excess_enthalpy").value / M, rel=1e-6)
    assert _one(kg, "excess_entropy").unit == "J/(kg K)"
    assert _one(kg, "excess_entropy").value == pytest.approx(_one(mol, "excess_entropy").value / M, rel=1e-6)
    assert kg.transitions[0].temperature_K == pytest.approx(mol.transitions[0].temperature_K, abs=1e-6)


def test_parameters_recorded_and_rerun_identical():
    table, _ = _demo_like(9, x=0.1, theta_D=390.0, anomalies=[{"temperature_K": 593.0, "height_J_per_mol_K": 4.0}])
    args = (table["temperature_K"], table["heat_capacity_J_per_mol_K"])
    a = analyse_heat_capacity(*args, atoms_per_formula=1.9, window_K=7.0)
    b = analyse_heat_capacity(*args, **{k: v for k, v in a.parameters.items()
                                        if k not in ("unit", "run_kind", "baseline_used")})
    assert a.parameters["window_K"] == 7.0 and a.parameters["seed"] == 0
    assert [t.temperature_K for t in a.transitions] == [t.temperature_K for t in b.transitions]
    assert [t.uncertainty_K for t in a.transitions] == [t.uncertainty_K for t in b.transitions]
    assert [r.value for r in a.results] == [r.value for r in b.results]


# --------------------------------------------------------------------------- refusals

def test_bad_input_is_refused_naming_the_field():
    T = T_GRID
    cp = debye_heat_capacity(T, 400.0, 2.0) + LINEAR * T
    cases = [
        (dict(temperature_K=T, heat_capacity=cp[:-1]), "heat_capacity"),
        (dict(temperature_K=T[:10], heat_capacity=cp[:10]), "heat_capacity"),
        (dict(temperature_K=np.where(T == 300.0, -3.0, T), heat_capacity=cp), "temperature_K"),
        (dict(temperature_K=T, heat_capacity=cp, unit="J/(g K)"), "unit"),
        (dict(temperature_K=T, heat_capacity=cp, atoms_per_formula=0), "atoms_per_formula"),
        (dict(temperature_K=T, heat_capacity=cp, smoothness=3), "smoothness"),
        (dict(temperature_K=T, heat_capacity=cp, baseline="spline"), "baseline"),
        (dict(temperature_K=T, heat_capacity=cp, exclude_K=[(500.0, 400.0)]), "exclude_K"),
        (dict(temperature_K=T, heat_capacity=cp, molar_mass_kg_per_mol=-1.0), "molar_mass_kg_per_mol"),
        (dict(temperature_K=T, heat_capacity=cp, exclude_K=[(250.0, 700.0)]), "heat_capacity"),
    ]
    for kwargs, field in cases:
        with pytest.raises(InvalidValue) as err:
            analyse_heat_capacity(**kwargs)
        assert err.value.field == field, kwargs
        assert field in err.value.message or field == "heat_capacity" and "points" in err.value.message
    # non-finite rows are left out, not refused, while enough remain
    bad = cp.copy()
    bad[::50] = np.nan
    out = analyse_heat_capacity(T, bad)
    assert any("non-finite" in w for w in out.warnings)


# --------------------------------------------------------------------------- adapter

def test_from_series_adapter():
    table, _ = _demo_like(4, x=0.12, theta_D=400.0,
                          anomalies=[{"temperature_K": 590.5, "height_J_per_mol_K": 4.0}])
    frame = pd.DataFrame(table)
    out = from_series(frame, {})
    assert out.parameters["signal_column"] == "heat_capacity_J_per_mol_K"
    assert out.parameters["fit_atoms"] is True
    assert any("atoms_per_formula" in w for w in out.warnings)
    atoms = _one(out, "atoms_per_formula")
    assert abs(atoms.value - 1.88) <= 3 * atoms.uncertainty
    (tr,) = out.transitions
    assert tr.kind == "ordering" and abs(tr.temperature_K - 590.5) <= 3 * tr.uncertainty_K
    fixed = from_series(frame, {"atoms_per_formula": 1.88})
    assert fixed.parameters["fit_atoms"] is False and not _results(fixed, "atoms_per_formula")
    per_kg = from_series(frame.drop(columns=["heat_capacity_J_per_mol_K"]), {"sweep_rate_K_per_s": 0.03})
    assert per_kg.parameters["signal_column"] == "heat_capacity_J_per_kg_K"
    assert per_kg.parameters["baseline_used"] == "polynomial"
    assert _one(per_kg, "excess_enthalpy").unit == "J/kg"
    with pytest.raises(NothingToAnalyse):
        from_series(frame.drop(columns=["heat_capacity_J_per_mol_K", "heat_capacity_J_per_kg_K"]), {})
    with pytest.raises(NothingToAnalyse):
        from_series(frame.drop(columns=["temperature_K"]), {})
    with pytest.raises(InvalidValue) as err:
        from_series(frame, {"atoms_per_formula": "two"})
    assert err.value.field == "atoms_per_formula"

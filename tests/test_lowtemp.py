"""Low-temperature transitions and field dependence checked against outside references.

Outside references:
* the shapes of a smooth step and of its derivative peak: an error-function
  step has a Gaussian derivative with FWHM = 2 sqrt(2 ln 2) sigma; a logistic
  step 1/(1 + exp(-(T - T0)/s)) has a sech^2 derivative with FWHM =
  2 ln(3 + 2 sqrt 2) s (both follow from the definitions; the Gaussian
  factor is also checked against scipy.stats.norm);
* :func:`scipy.special.ndtr` and :func:`scipy.stats.norm` for the planted
  curves;
* facts of the trade for the catalogue windows (common practice, no single
  source): the low-temperature transition of 4C pyrrhotite near 30-34 K,
  the Verwey transition of magnetite near 118-125 K;
* weighted straight-line fits of :func:`scipy.optimize.curve_fit` (with
  absolute_sigma True and False) and :func:`numpy.polyfit` for the field
  dependence (Bevington & Robinson, 2003, "Data Reduction and Error Analysis",
  sections 6.3-6.4).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy.optimize import brentq, curve_fit
from scipy.special import ndtr
from scipy.stats import norm

from magvault.analysis.lowtemp import LowTemperatureSettings, analyse_low_temperature, field_dependence
from magvault.analysis.meanfield import reduced_magnetisation
from magvault.analysis.results import TransitionEstimate
from magvault.errors import InvalidValue

T_LOW = np.arange(5.0, 60.0 + 1e-9, 0.1)   # a 5-60 K warming run in 0.1 K steps


def _background(T):
    """A gently falling background (a few per mille over the run)."""
    return 1.0 - 0.0008 * (T - 5.0) - 2e-6 * (T - 5.0) ** 2


def _erf_step(T, t0, sigma, height):
    return height * ndtr((T - t0) / sigma)


def _logistic_step(T, t0, scale, height):
    return height / (1.0 + np.exp(-(T - t0) / scale))


def _rows(outcome, kind="low-t", branch="heating"):
    return sorted((t for t in outcome.transitions if t.kind == kind and t.branch == branch),
                  key=lambda t: t.component)


# --------------------------------------------------------------------------
# Positions, widths and their uncertainties
# --------------------------------------------------------------------------

@pytest.mark.parametrize("shape", ["erf", "logistic"])
def test_noise_free_step_position_and_width(shape):
    """Position at the centre; width = FWHM of the derivative peak.

    Gaussian FWHM = 2 sqrt(2 ln 2) sigma (checked against scipy.stats.norm
    here); sech^2 FWHM = 2 ln(3 + 2 sqrt 2) s (from the definition: the
    logistic density c(1 - c) falls to half its peak where c = (2 -+ sqrt 2)/4).
    The low-temperature transition of 4C pyrrhotite lies near 30-34 K
    (common practice, no single source): kind ``low-t``.
    """
    sigma = 1.2
    # half width at half maximum of a unit Gaussian, found numerically from scipy's pdf
    half = norm.pdf(0.0) / 2
    x_half = brentq(lambda x: norm.pdf(x) - half, 0.1, 5.0, xtol=1e-14)
    assert 2 * x_half == pytest.approx(2 * np.sqrt(2 * np.log(2)), rel=1e-12)
    if shape == "erf":
        y = _background(T_LOW) - _erf_step(T_LOW, 32.3, sigma, 0.05)
        expected_width = 2 * x_half * sigma
        options = {}
    else:
        scale = 0.8
        y = _background(T_LOW) - _logistic_step(T_LOW, 32.3, scale, 0.05)
        c_lo, c_hi = (2 - np.sqrt(2)) / 4, (2 + np.sqrt(2)) / 4
        expected_width = scale * (np.log(c_hi / (1 - c_hi)) - np.log(c_lo / (1 - c_lo)))
        assert expected_width == pytest.approx(2 * np.log(3 + 2 * np.sqrt(2)) * scale)
        options = {"step_shape": "logistic"}
    out = analyse_low_temperature(T_LOW, y, **options)
    rows = _rows(out)
    assert len(rows) == 1
    row = rows[0]
    assert row.method == "dmdt-peak" and row.primary and row.component == 1
    assert row.temperature_K == pytest.approx(32.3, abs=1e-4)
    assert row.width_K == pytest.approx(expected_width, rel=1e-3)
    width = next(r for r in out.results if r.quantity == "transition_width_K")
    assert width.value == pytest.approx(row.width_K) and width.unit == "K"
    assert row.diagnostics["relative_height"] == pytest.approx(0.05 / _background(32.3), rel=1e-3)


@pytest.mark.slow
@pytest.mark.parametrize("noise", [0.001, 0.003, 0.01])
def test_step_position_uncertainty_is_honest(noise):
    """Coverage of the stated uncertainty of low-temperature step positions.

    60 seeds per noise level (noise in units of the signal): erf steps of
    3-8% height and sigma 0.7-1.5 K planted at 30-34 K on a sloping
    background.  The position of component 1 lies within 2 stated standard
    uncertainties of the planted one in at least 90% of cases, and the RMS
    error is at least a third of the mean stated uncertainty.  Measured over
    300 seeds at 0.1%: the normalised errors have standard deviation 1.00
    and 95.7% coverage (the least-squares covariance is honest here).
    """
    errors, stated = [], []
    for seed in range(60):
        rng = np.random.default_rng(seed)
        t0, height, sigma = rng.uniform(30, 34), rng.uniform(0.03, 0.08), rng.uniform(0.7, 1.5)
        y = _background(T_LOW) - _erf_step(T_LOW, t0, sigma, height) + noise * rng.standard_normal(T_LOW.size)
        rows = _rows(analyse_low_temperature(T_LOW, y))
        assert rows, f"seed {seed}: step not found"
        errors.append(rows[0].temperature_K - t0)
        stated.append(rows[0].uncertainty_K)
    errors, stated = np.array(errors), np.array(stated)
    coverage = np.mean(np.abs(errors) <= 2 * stated)
    rms = float(np.sqrt(np.mean(errors**2)))
    assert coverage >= 0.9, f"coverage {coverage:.2f}"
    assert rms >= np.mean(stated) / 3
    assert rms <= 2 * np.mean(stated)


@pytest.mark.parametrize("shape, widths", [("erf", (1.0, 0.8)), ("logistic", (0.7, 0.6))])
def test_two_steps_five_kelvin_apart_are_two_components(shape, widths):
    """A split transition: steps of 5% and 2.5% five kelvin apart, at 0.3% noise.

    Over 20 seeds every curve gives two rows of kind low-t, component 1 the
    stronger (the earlier one here) and the only primary; each component
    lies within 2 stated uncertainties of its planted position in at least
    80% of the seeds and never beyond 4.5.  Measured over 40 seeds: the
    normalised errors of the weaker component have a standard deviation of
    about 1.2 (its stated uncertainty is some 20% small, from its overlap
    with the stronger one), of the stronger about 1.0.  Resolving limit
    (measured): at 1% noise a 2.5% step 5 K from a 5% one is merged into it
    in about half the cases.
    """
    step = _erf_step if shape == "erf" else _logistic_step
    z1, z2 = [], []
    for seed in range(20):
        rng = np.random.default_rng(seed)
        t1 = rng.uniform(30.0, 33.0)
        t2 = t1 + 5.0
        y = (_background(T_LOW) - step(T_LOW, t1, widths[0], 0.05) - step(T_LOW, t2, widths[1], 0.025)
             + 0.003 * rng.standard_normal(T_LOW.size))
        rows = _rows(analyse_low_temperature(T_LOW, y, step_shape=shape))
        assert [r.component for r in rows] == [1, 2], f"seed {seed}"
        assert [r.primary for r in rows] == [True, False]
        assert rows[0].diagnostics["height"] > rows[1].diagnostics["height"]
        z1.append((rows[0].temperature_K - t1) / rows[0].uncertainty_K)
        z2.append((rows[1].temperature_K - t2) / rows[1].uncertainty_K)
    z1, z2 = np.abs(z1), np.abs(z2)
    assert np.mean(z1 <= 2) >= 0.8 and np.mean(z2 <= 2) >= 0.8
    assert z1.max() < 4.5 and z2.max() < 4.5


def test_heating_and_cooling_with_hysteresis():
    """Warming at 33 K, cooling at 31 K: two primary rows and a -2 K thermal hysteresis."""
    rng = np.random.default_rng(4)
    warm, cool = T_LOW, T_LOW[::-1]
    T = np.concatenate([cool, warm])   # cooled first, then warmed
    y = np.concatenate([_background(cool) - _erf_step(cool, 31.0, 1.0, 0.05),
                        _background(warm) - _erf_step(warm, 33.0, 1.0, 0.05)])
    y = y + 0.002 * rng.standard_normal(T.size)
    out = analyse_low_temperature(T, y)
    heat, cooling = _rows(out, branch="heating"), _rows(out, branch="cooling")
    assert len(heat) == len(cooling) == 1
    assert abs(heat[0].temperature_K - 33.0) <= 2 * heat[0].uncertainty_K
    assert abs(cooling[0].temperature_K - 31.0) <= 2 * cooling[0].uncertainty_K
    hyst = next(r for r in out.results if r.quantity == "thermal_hysteresis_K")
    assert hyst.diagnostics["kind"] == "low-t" and hyst.unit == "K"
    assert abs(hyst.value + 2.0) <= 2 * hyst.uncertainty
    assert hyst.uncertainty == pytest.approx(np.hypot(heat[0].uncertainty_K, cooling[0].uncertainty_K))


def test_kinds_on_a_full_low_temperature_curve():
    """Steps at 32.5 K and 121 K on a 10-300 K curve are low-t and verwey; one at 70 K is unassigned.

    Windows of the catalogue (common practice, no single source): low-t
    20-45 K, Verwey 95-145 K; nothing between them.
    """
    rng = np.random.default_rng(9)
    T = np.linspace(10.0, 300.0, 1000)
    y = (reduced_magnetisation(T, 590.0) - _erf_step(T, 32.5, 1.0, 0.05) - _erf_step(T, 121.0, 1.5, 0.03)
         - _erf_step(T, 70.0, 1.2, 0.03) + 0.003 * rng.standard_normal(T.size))
    out = analyse_low_temperature(T, y)
    found = {t.kind: t for t in out.transitions}
    assert set(found) == {"low-t", "verwey", "unassigned"}
    for kind, planted in (("low-t", 32.5), ("verwey", 121.0), ("unassigned", 70.0)):
        assert abs(found[kind].temperature_K - planted) <= 3 * found[kind].uncertainty_K
        assert found[kind].primary and found[kind].component == 1
    assert all(t.kind not in ("ordering", "magnetite-curie") for t in out.transitions)


def test_susceptibility_steps_are_peaks_of_dchi_dT():
    """A rise of chi on warming is a peak of +dchi/dT; read as a moment it is no drop at all."""
    rng = np.random.default_rng(12)
    chi = 1e-3 * (1.0 + 0.08 * ndtr((T_LOW - 33.0) / 1.2)) + 2e-6 * rng.standard_normal(T_LOW.size)
    out = analyse_low_temperature(T_LOW, chi, signal_kind="susceptibility", run_kind="susceptibility")
    rows = _rows(out)
    assert len(rows) == 1 and abs(rows[0].temperature_K - 33.0) <= 3 * rows[0].uncertainty_K
    assert _rows(analyse_low_temperature(T_LOW, chi)) == []


def test_noise_only_curve_gives_nothing():
    rng = np.random.default_rng(1)
    out = analyse_low_temperature(T_LOW, _background(T_LOW) + 0.003 * rng.standard_normal(T_LOW.size))
    assert out.transitions == ()


def test_recorded_parameters_and_determinism():
    rng = np.random.default_rng(21)
    y = _background(T_LOW) - _erf_step(T_LOW, 32.0, 1.0, 0.05) + 0.003 * rng.standard_normal(T_LOW.size)
    first = analyse_low_temperature(T_LOW, y)
    assert first == analyse_low_temperature(T_LOW, y)
    expected = {"run_kind": "thermomagnetic", "signal_kind": "moment", "search_K": None,
                **{k: (list(v) if isinstance(v, tuple) else v)
                   for k, v in dataclasses.asdict(LowTemperatureSettings()).items()}}
    assert first.parameters == expected
    assert first.method == "low-temperature-peaks" and first.version == "1.0"
    assert first.diagnostics["method_versions"]["dmdt-peak"] == "1.0"
    changed = analyse_low_temperature(T_LOW, y, background_degree=1, search_K=(20.0, 45.0))
    assert changed.parameters["background_degree"] == 1 and changed.parameters["search_K"] == [20.0, 45.0]
    with pytest.raises(InvalidValue) as err:
        analyse_low_temperature(T_LOW, y, step_shape="boxcar")
    assert err.value.field == "step_shape"
    with pytest.raises(InvalidValue) as err:
        analyse_low_temperature(T_LOW, y, windw=3)
    assert err.value.field == "windw"
    with pytest.raises(InvalidValue) as err:
        analyse_low_temperature(T_LOW, y, signal_kind="moment_A_m2")
    assert err.value.field == "signal_kind"


# --------------------------------------------------------------------------
# Field dependence
# --------------------------------------------------------------------------

def _estimate(t, u, kind="low-t", branch="heating"):
    return TransitionEstimate(kind=kind, temperature_K=t, uncertainty_K=u, method="dmdt-peak", branch=branch,
                              primary=True)


def test_field_dependence_matches_weighted_least_squares_references():
    """Slope and intercept agree with numpy.polyfit and scipy's curve_fit (Bevington & Robinson 2003).

    With scatter consistent with the stated uncertainties (chi^2/dof <= 1)
    the covariance is the unscaled one (polyfit cov="unscaled", curve_fit
    absolute_sigma=True); with excess scatter it is scaled by chi^2/dof
    (polyfit cov=True, curve_fit absolute_sigma=False).  curve_fit iterates,
    so it is compared to 1e-6 only.
    """
    fields = np.array([0.0, 0.5, 1.0, 2.0, 5.0])
    u = np.array([0.10, 0.08, 0.10, 0.12, 0.15])
    for scatter in (0.02, 0.6):
        rng = np.random.default_rng(3)
        t = 32.0 - 0.35 * fields + scatter * rng.standard_normal(fields.size)
        out = field_dependence([(b, _estimate(ti, ui)) for b, ti, ui in zip(fields, t, u)])
        slope = next(r for r in out.results if r.quantity == "dT_dB_K_per_T")
        intercept = next(r for r in out.results if r.quantity == "zero_field_temperature_K")
        assert slope.unit == "K/T" and intercept.unit == "K"
        chi2_dof = out.diagnostics["chi2"] / out.diagnostics["dof"]
        coef, cov = np.polyfit(fields, t, 1, w=1 / u, cov="unscaled" if chi2_dof <= 1.0 else True)
        assert slope.value == pytest.approx(coef[0], rel=1e-10)
        assert intercept.value == pytest.approx(coef[1], rel=1e-12)
        assert slope.uncertainty == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-10)
        assert intercept.uncertainty == pytest.approx(np.sqrt(cov[1, 1]), rel=1e-10)
        popt, pcov = curve_fit(lambda b, a0, a1: a0 + a1 * b, fields, t, sigma=u,
                               absolute_sigma=chi2_dof <= 1.0)
        assert slope.value == pytest.approx(popt[1], rel=1e-6)
        assert slope.uncertainty == pytest.approx(np.sqrt(pcov[1, 1]), rel=1e-6)
    assert chi2_dof > 1.0  # the second case did exercise the scaling


def test_field_dependence_without_uncertainties_is_ordinary_least_squares():
    fields = [0.1, 0.5, 1.0, 3.0]
    temps = [32.1, 31.95, 31.8, 31.05]
    out = field_dependence([(b, _estimate(t, None)) for b, t in zip(fields, temps)])
    slope = next(r for r in out.results if r.quantity == "dT_dB_K_per_T")
    coef, cov = np.polyfit(fields, temps, 1, cov=True)
    assert slope.value == pytest.approx(coef[0], rel=1e-10)
    assert slope.uncertainty == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-10)
    assert out.diagnostics["weighted"] is False


def test_field_dependence_refuses_what_it_cannot_fit():
    with pytest.raises(InvalidValue) as err:
        field_dependence([(0.0, _estimate(32.0, 0.1)), (1.0, _estimate(120.0, 0.1, kind="verwey"))])
    assert err.value.field == "kind"
    with pytest.raises(InvalidValue) as err:
        field_dependence([(1.0, _estimate(32.0, 0.1)), (1.0, _estimate(32.2, 0.1))])
    assert err.value.field == "field_T"
    with pytest.raises(InvalidValue) as err:
        field_dependence([(0.0, _estimate(32.0, 0.1)), (1.0, _estimate(32.2, 0.1, branch="cooling"))])
    assert err.value.field == "branch"
    with pytest.raises(InvalidValue):
        field_dependence([(0.0, _estimate(32.0, 0.1))])
    with pytest.raises(InvalidValue) as err:
        field_dependence([(0.0, _estimate(32.0, None)), (1.0, _estimate(32.2, None))])
    assert err.value.field == "uncertainty_K"


def test_high_temperature_run_is_not_searched_below_room_temperature():
    """A 300-700 K run is not searched for low-temperature transitions; the outcome says why."""
    T = np.linspace(300.0, 700.0, 601)
    out = analyse_low_temperature(T, reduced_magnetisation(T, 590.0))
    assert out.transitions == () and out.results == ()
    assert any("search_ceiling_K" in w for w in out.warnings)

"""The curve arithmetic behind the overlay and the shift explorer, against outside references.

Outside references: the Savitzky & Golay (1964) property that a least-squares
polynomial of degree p reproduces any polynomial of degree <= p exactly (so its
slope is exact), calculus for the slope of a logistic step, numpy's linear
interpolation for normalisation to a reference temperature, the
``uncertainties`` package for propagating an intercept-slope covariance
through a + b x, and the size of plotly.js's typed-array encoding (base64 of
float32 bytes: 4 bytes a value, 4/3 growth).
"""

from __future__ import annotations

import base64
import json
import math

import numpy as np
import pandas as pd
import pytest
from uncertainties import correlated_values

from magvault.paths import part

part("webui")  # makes magvault.webui importable from a source tree, an editable install or a wheel
from magvault.webui.views import curves as cv  # noqa: E402
from magvault.webui.views import explore_figures as ef  # noqa: E402


def test_slope_of_a_quadratic_is_exact_on_a_uniform_grid():
    """Savitzky & Golay (1964), Anal. Chem. 36, 1627: a degree-p window fit reproduces degree-p polynomials."""
    t = np.linspace(10.0, 60.0, 201)
    y = 3.0 - 0.4 * t + 0.015 * t**2
    d = cv.derivative(t, y, window_points=9, polyorder=2)
    np.testing.assert_allclose(d.temperature_K, t)
    np.testing.assert_allclose(d.slope, -0.4 + 0.03 * t, rtol=0, atol=1e-10)
    assert (d.window_points, d.polyorder) == (9, 2)
    assert d.step_K == pytest.approx(0.25)


def test_slope_of_a_smooth_step_matches_calculus_on_an_uneven_grid():
    """The slope of y = 1 - a / (1 + exp(-(T - Tt)/w)) is -a e / (w (1 + e)^2), e = exp(-(T - Tt)/w) (calculus)."""
    rng = np.random.default_rng(3)
    t = np.sort(np.concatenate([np.linspace(5.0, 60.0, 300), rng.uniform(5.0, 60.0, 100)]))
    t = np.unique(t)
    a, tt, w = 0.03, 32.0, 1.5
    e = lambda x: np.exp(-(x - tt) / w)  # noqa: E731
    y = 1 - a / (1 + e(t))
    d = cv.derivative(t, y)
    exact = -a * e(d.temperature_K) / (w * (1 + e(d.temperature_K)) ** 2)
    inner = slice(10, -10)
    # The window (about 1.2 K) is narrow next to the step's width, so the smoothing bias stays near 1 % of the peak.
    np.testing.assert_allclose(d.slope[inner], exact[inner], atol=0.02 * np.abs(exact).max())
    assert d.temperature_K[np.argmin(d.slope)] == pytest.approx(tt, abs=0.2)


def test_short_curves_shrink_the_window_or_fall_back_to_differences():
    t = np.array([1.0, 2.0, 3.0])
    d = cv.derivative(t, 2 * t, window_points=9, polyorder=2)
    np.testing.assert_allclose(d.slope, [2.0, 2.0, 2.0])
    assert d.window_points == 3
    d = cv.derivative(t[:2], 2 * t[:2], window_points=9, polyorder=2)
    np.testing.assert_allclose(d.slope, [2.0, 2.0])
    assert d.window_points == 0
    assert cv.derivative(t[:1], t[:1]).slope.size == 0


def test_normalising_to_a_reference_temperature_uses_linear_interpolation():
    """numpy.interp is the reference for the value at T_ref."""
    t = np.array([5.0, 10.0, 20.0, 40.0])
    y = np.array([4.0, 3.0, 2.5, 1.0])
    out, why = cv.normalise(t, y, "reference", reference_K=15.0)
    assert why is None
    np.testing.assert_allclose(out, y / np.interp(15.0, t, y))
    assert float(np.interp(15.0, t, out)) == pytest.approx(1.0)
    out, why = cv.normalise(t, y, "max")
    assert np.max(np.abs(out)) == pytest.approx(1.0) and out[0] == pytest.approx(1.0)
    out, why = cv.normalise(t, y, "reference", reference_K=50.0)
    assert out is None and "does not reach 50 K" in why
    out, why = cv.normalise(t, np.zeros(4), "max")
    assert out is None and "zero" in why
    out, why = cv.normalise(t, y, "none")
    assert out is y and why is None
    with pytest.raises(ValueError, match="normalisation"):
        cv.normalise(t, y, "sideways")


def test_branches_are_split_sorted_and_repeated_temperatures_averaged():
    series = pd.DataFrame({"temperature_K": [10.0, 12.0, 12.0, 11.0, 30.0, 20.0, np.nan],
                           "moment_A_m2": [1.0, 2.0, 4.0, 1.5, 9.0, 8.0, 7.0],
                           "branch": ["heating", "heating", "heating", "heating", "cooling", "cooling", "cooling"]})
    out = {b.name: b for b in cv.branches(series, "moment_A_m2")}
    assert set(out) == {"heating", "cooling"}
    np.testing.assert_allclose(out["heating"].temperature_K, [10.0, 11.0, 12.0])
    np.testing.assert_allclose(out["heating"].value, [1.0, 1.5, 3.0])
    np.testing.assert_allclose(out["cooling"].temperature_K, [20.0, 30.0])
    single = cv.branches(series.drop(columns="branch"), "moment_A_m2")
    assert [b.name for b in single] == [None]
    assert cv.branches(series, "no_such_column") == []


def test_value_at_and_cut():
    t, y = np.array([1.0, 2.0, 3.0]), np.array([10.0, 20.0, 30.0])
    assert cv.value_at(t, y, 2.5) == pytest.approx(25.0)
    assert math.isnan(cv.value_at(t, y, 3.5))
    tc, yc = cv.cut(t, y, 1.5, None)
    np.testing.assert_allclose(tc, [2.0, 3.0])
    np.testing.assert_allclose(yc, [20.0, 30.0])


def test_line_band_matches_uncertainty_propagation():
    """The ``uncertainties`` package propagates the (intercept, slope) covariance through a + b x."""
    cov = np.array([[10.95, -97.26], [-97.26, 872.29]])  # invented, correlated like a real fit
    a, b = correlated_values([30.4, 16.1], cov)
    xs = np.array([0.0, 0.09, 0.11, 0.13])
    expected = [(a + b * x).std_dev for x in xs]
    np.testing.assert_allclose(cv.line_prediction_uncertainty(xs, cov), expected, rtol=1e-12)


def test_points_per_curve_keeps_the_budget_and_its_bounds():
    assert cv.points_per_curve(200, budget=60_000, most=1500) == 300
    assert cv.points_per_curve(10, budget=60_000, most=1500) == 1500
    assert cv.points_per_curve(5000, budget=60_000, most=1500) == 60
    assert cv.points_per_curve(0, budget=60_000, most=1500) == 1500


def test_typed_arrays_are_float32_base64():
    """plotly.js typed-array spec: dtype plus base64 of the little-endian bytes (4 bytes per float32)."""
    values = np.array([1.5, -2.25, 600.125])
    spec = ef.typed_array(values)
    assert spec["dtype"] == "f4"
    decoded = np.frombuffer(base64.b64decode(spec["bdata"]), dtype="<f4")
    np.testing.assert_array_equal(decoded, values.astype(np.float32))


def test_two_hundred_decimated_curves_stay_under_two_megabytes():
    """200 curves at the overlay's budget of points: the figure JSON carries well under 2 MB."""
    per_curve = cv.points_per_curve(200, budget=60_000, most=1500)
    t = np.linspace(5.0, 200.0, per_curve)
    curves = [ef.OverlayCurve(i, f"S{i % 10}", "heating", t, np.cos(t / (10 + i)), "#1d5f7a", "", f"/run/{i}",
                              "low-t 31.00 ± 0.15 K") for i in range(200)]
    markers = [ef.OverlayMarker(i, f"S{i % 10}", "heating", 31.0, 0.15, 0.5, "#1d5f7a", f"/run/{i}",
                                "low-t 31.00 ± 0.15 K") for i in range(200)]
    fig = ef.overlay_figure(curves, markers, x_title="Temperature (K)", y_title="M / max|M|",
                            colouring=ef.Colouring("x", True, 0.09, 0.12), webgl=True, kind_label="low-t")
    size = len(fig.figure_json.encode())
    # Lower bound: the coordinates alone, 2 x 4 bytes a point, grown by 4/3 in base64.
    assert 200 * per_curve * 8 * 4 / 3 < size <= 2_000_000
    doc = json.loads(fig.figure_json)
    assert {t["type"] for t in doc["data"][:200]} == {"scattergl"}
    assert len(fig.marker_shapes) == 200
    assert [doc["layout"]["shapes"][i]["x0"] for i in fig.marker_shapes] == [31.0] * 200


def test_user_text_cannot_open_markup_or_template_fields_in_plot_text():
    assert ef.esc("<b onclick=x>%{y}</b>\nnext") == "&lt;b onclick=x&gt;&#37;{y}&lt;/b&gt;<br>next"


def test_scaled_curves_of_one_quantity_share_its_symbol_on_the_axis():
    """M per kg beside M (a specimen without a mass), or Cp per mol beside per kg: once each curve is
    scaled they are one quantity and the axis says so; unscaled, or M beside chi, they are not."""
    from types import SimpleNamespace

    from webui.views.overlay import axis_quantity, axis_title

    def params(run_kind, norm):
        return SimpleNamespace(run_kind=run_kind, norm=norm, ref_T=20.0, y="curve")

    p = params("thermomagnetic", "max")
    column, mixed = axis_quantity({"moment_A_m2", "moment_A_m2_per_kg"}, p, None)
    assert (column, mixed) == ("moment_A_m2_per_kg", False) and axis_title(column, p, mixed) == "M / max|M|"
    p = params("calorimetry", "reference")
    column, mixed = axis_quantity({"heat_capacity_J_per_kg_K", "heat_capacity_J_per_mol_K"}, p, None)
    assert axis_title(column, p, mixed) == "Cp / Cp(20 K)"
    p = params("thermomagnetic", "max")
    assert axis_quantity({"moment_A_m2", "chi_vol"}, p, None)[1] is True
    assert axis_title(*axis_quantity({"moment_A_m2", "chi_vol"}, p, None)[:1], p, True) == "signal / max|signal|"
    p = params("thermomagnetic", "none")
    assert axis_quantity({"moment_A_m2", "moment_A_m2_per_kg"}, p, "moment_A_m2_per_kg") == ("moment_A_m2_per_kg", True)

"""Tests of magvault.queries.correlate: lines, outliers, the composition map, angles.

Outside references:
- numpy.polyfit (w = 1/sigma; cov='unscaled' is the inverse normal matrix; cov=True
  scales it by chi2/(n-2), the Birge ratio squared: Birge 1932, Phys. Rev. 40, 207).
- Bevington & Robinson (2003), Data Reduction and Error Analysis, ch. 6 (citation from
  memory; the formulas are written out and checked against numpy.polyfit).
- gemmi's UnitCell orthogonalisation matrix (x along a, y in the a-b plane, z along c*,
  as in the International Tables for Crystallography, Vol. B, 1.1).
- scipy.spatial.transform.Rotation for a rotated specimen frame.
"""

from __future__ import annotations

import math

import gemmi
import numpy as np
import pandas as pd
import pytest
from scipy.spatial.transform import Rotation

from magvault.errors import InvalidValue
from magvault.queries.correlate import composition_map, correlate, field_angle_to_c_deg


def points(x, t, u):
    return pd.DataFrame({"specimen": [f"SPEC-{k}" for k in range(len(x))], "x": x,
                         "temperature_K": t, "uncertainty_K": u})


def test_correlation_line_agrees_with_numpy_polyfit():
    rng = np.random.default_rng(4)
    x = rng.uniform(0.07, 0.13, 15)
    u = rng.uniform(0.05, 0.3, 15)
    t = 36.0 - 35.0 * x + rng.normal(0, 0.5, 15)      # scatter beyond u: Birge ratio > 1
    result = correlate(points(x, t, u), x="x")
    coef, cov_unscaled = np.polyfit(x, t, 1, w=1 / u, cov="unscaled")
    _, cov_scaled = np.polyfit(x, t, 1, w=1 / u, cov=True)
    assert (result.slope, result.intercept) == pytest.approx((coef[0], coef[1]), rel=1e-9)
    assert result.fit.covariance[1, 1] == pytest.approx(cov_unscaled[0, 0], rel=1e-8)
    assert result.fit.birge_ratio > 1
    assert result.slope_uncertainty == pytest.approx(math.sqrt(cov_scaled[0, 0]), rel=1e-8)
    assert result.intercept_uncertainty == pytest.approx(math.sqrt(cov_scaled[1, 1]), rel=1e-8)
    assert result.covariance[0, 1] == pytest.approx(cov_scaled[0, 1], rel=1e-8)
    assert result.n == 15


def test_outlier_flag_worked_by_hand():
    # x = 0, 1, 2, 3, 4; T = 30, 31, 32, 33, 40 (+/- 0.5 each): equal weights, so
    # ordinary least squares (Bevington & Robinson ch. 6):
    # x mean 2, T mean 33.2; Sxy = (-2)(-3.2) + (-1)(-2.2) + 0 + (1)(-0.2) + (2)(6.8) = 22
    # Sxx = 10 -> slope 2.2, intercept 33.2 - 4.4 = 28.8
    # residuals: 30-28.8 = 1.2, 31-31.0 = 0, 32-33.2 = -1.2, 33-35.4 = -2.4, 40-37.6 = 2.4
    # median |r| = 1.2 -> s_r = 1.4826*1.2 = 1.77912
    # point 4: 2.4/sqrt(0.25 + 1.77912^2) = 2.4/1.84804 = 1.29867 -> not an outlier at N = 3,
    # but flagged at N = 1.2; point 1: 0 -> never.
    data = points([0.0, 1.0, 2.0, 3.0, 4.0], [30.0, 31.0, 32.0, 33.0, 40.0], [0.5] * 5)
    result = correlate(data, x="x", sigma=1.2)
    assert result.slope == pytest.approx(2.2) and result.intercept == pytest.approx(28.8)
    assert result.scatter == pytest.approx(1.77912)
    table = result.points
    assert table["residual_K"].to_numpy() == pytest.approx([1.2, 0.0, -1.2, -2.4, 2.4], abs=1e-12)
    assert table.loc[4, "residual_sigma"] == pytest.approx(2.4 / math.sqrt(0.25 + 1.77912**2))
    assert list(table["outlier"]) == [False, False, False, True, True]
    assert list(correlate(data, x="x").points["outlier"]) == [False] * 5


def test_points_without_uncertainty_are_left_out_of_the_fit():
    data = points([0.0, 1.0, 2.0, 3.0], [30.0, 31.0, 32.0, 99.0], [0.5, 0.5, 0.5, None])
    result = correlate(data, x="x")
    assert result.n == 3 and result.slope == pytest.approx(1.0)
    last = result.points.iloc[3]
    assert pd.isna(last["outlier"]) and "left out of the fit" in last["note"]
    assert last["residual_K"] == pytest.approx(99.0 - 33.0)


def test_too_few_points_give_a_note_not_an_error():
    result = correlate(points([0.1, 0.1, 0.1], [32.0, 32.1, 32.2], [0.1] * 3), x="x")
    assert result.fit is None and "no fit" in result.note
    assert result.points["outlier"].isna().all()
    with pytest.raises(InvalidValue, match="field_T"):
        correlate(points([0.1], [32.0], [0.1]), x="field_T")


def test_composition_map_joins_x_and_notes_what_is_missing():
    transitions = pd.DataFrame({
        "specimen": ["SPEC-2", "SPEC-1", "SPEC-3", "SPEC-1"], "run": [4, 1, 7, 2],
        "kind": ["low-t", "low-t", "low-t", "ordering"],
        "temperature_K": [31.0, 32.5, 33.0, 593.0], "uncertainty_K": [0.2, 0.1, None, 2.0]})
    compositions = pd.DataFrame({"specimen": ["SPEC-1", "SPEC-2"], "x": [0.125, 0.11],
                                 "x_uncertainty": [0.003, None], "superstructure": ["4C", "NC"]})
    table = composition_map(transitions, compositions)
    assert list(zip(table["kind"], table["specimen"])) == [
        ("low-t", "SPEC-2"), ("low-t", "SPEC-1"), ("low-t", "SPEC-3"), ("ordering", "SPEC-1")]
    assert table.loc[1, "x"] == 0.125 and table.loc[1, "superstructure"] == "4C"
    assert table.loc[0, "note"] == "no uncertainty in x"
    assert table.loc[2, "note"] == "no composition x; no standard uncertainty in temperature"
    assert table.loc[3, "note"] is None
    with pytest.raises(InvalidValue, match="SPEC-1"):
        composition_map(transitions, pd.concat([compositions, compositions.iloc[:1]]))


def _c_direction_from_gemmi(cell):
    orth = np.array(gemmi.UnitCell(*cell).orth.mat.tolist())
    c = orth[:, 2]
    return c / np.linalg.norm(c)


def test_angle_to_c_in_a_hexagonal_cell():
    # hexagonal subcell of troilite, Evans (1970), Science 167, 621: c is along c* (= z)
    cell = (5.962, 5.962, 11.750, 90.0, 90.0, 120.0)
    identity = np.eye(3)
    assert field_angle_to_c_deg([0, 0, 1], identity, cell) == pytest.approx(0.0, abs=1e-12)
    assert field_angle_to_c_deg([0, 0, -2], identity, cell) == pytest.approx(0.0, abs=1e-12)
    assert field_angle_to_c_deg([1, 0, 0], identity, cell) == pytest.approx(90.0)
    assert field_angle_to_c_deg([1, 0, 1], identity, cell) == pytest.approx(45.0)


def test_angle_to_c_in_a_monoclinic_cell_agrees_with_gemmi():
    # A monoclinic pyrrhotite-like cell (a 11.90, b 6.86, c 12.90 A, beta 118 deg;
    # Powell et al. 2004, Phys. Rev. B 70, 014415, from memory): c leans 28 deg off c*.
    cell = (11.90, 6.86, 12.90, 90.0, 118.0, 90.0)
    c_hat = _c_direction_from_gemmi(cell)
    assert field_angle_to_c_deg([0, 0, 1], np.eye(3), cell) == pytest.approx(28.0, abs=1e-9)
    rng = np.random.default_rng(2)
    directions = rng.normal(size=(20, 3))
    rotation = Rotation.from_euler("zyz", [30, 50, -20], degrees=True).as_matrix()
    angles = field_angle_to_c_deg(directions, rotation, cell)
    crystal = directions @ rotation.T
    cosine = np.abs(crystal @ c_hat) / np.linalg.norm(crystal, axis=1)
    assert angles == pytest.approx(np.degrees(np.arccos(cosine)), abs=1e-9)


def test_angle_after_a_rotation_that_brings_x_onto_c():
    # specimen X maps onto crystal z (c* = c in a hexagonal cell): field along X is along c
    rotation = Rotation.from_euler("y", -90, degrees=True).as_matrix()
    assert rotation @ np.array([1.0, 0, 0]) == pytest.approx([0, 0, 1], abs=1e-12)
    cell = (5.962, 5.962, 11.750, 90.0, 90.0, 120.0)
    assert field_angle_to_c_deg([1, 0, 0], rotation, cell) == pytest.approx(0.0, abs=1e-6)
    with pytest.raises(InvalidValue, match="zero vector"):
        field_angle_to_c_deg([0, 0, 0], rotation, cell)

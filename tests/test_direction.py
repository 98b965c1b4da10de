"""Moment direction in the crystal frame, equal-area projection, Fisher statistics.

Convention under test: the orientation matrix R maps specimen-frame vectors
to the crystal's Cartesian frame with x along a, y in the a-b plane, z along
c* (International Tables orthogonalisation, also gemmi's).

Outside references:
* Hand-derived rotations (90-degree turns about each axis, written out
  element by element below) and a hexagonal cell's a* direction (30 degrees
  from a in the a-b plane, derived by hand and checked with gemmi).
* scipy.spatial.transform.Rotation for an arbitrary rotation.
* Fisher (1953), Proc. R. Soc. Lond. A 217, 295: k = (N - 1)/(N - R),
  cos(alpha95) = 1 - (N - R)/R [(1/0.05)^(1/(N-1)) - 1]; worked values of
  Tauxe (2010), Essentials of Paleomagnetism, ch. 11 (confirmed in
  REFERENCES.md); the computed five-direction example recomputed here with
  plain numpy; scipy.stats.vonmises_fisher for the coverage of alpha95.
* Lambert azimuthal equal-area projection (Snyder 1987, USGS Prof. Paper
  1395; the formula from memory): equal areas on the sphere map to equal
  areas on the plot, so uniformly distributed directions give r^2 uniform on
  [0, 1] (checked with scipy.stats.kstest).
"""

from __future__ import annotations

import gemmi
import numpy as np
import pytest
from scipy import stats
from scipy.spatial.transform import Rotation

from magvault.analysis.direction import (
    average_directions,
    azimuth_elevation,
    check_rotation,
    equal_area,
    fisher_confidence_angle_deg,
    fisher_mean,
    fisher_mean_angles,
    fisher_precision,
    moment_directions,
    to_crystal_frame,
    unit_vectors,
)
from magvault.errors import InvalidValue

# 90-degree turns, written by hand (columns are the images of X, Y, Z).
TURN_Z = np.array([[0.0, -1.0, 0.0],
                   [1.0, 0.0, 0.0],
                   [0.0, 0.0, 1.0]])  # X -> y, Y -> -x
TURN_X = np.array([[1.0, 0.0, 0.0],
                   [0.0, 0.0, -1.0],
                   [0.0, 1.0, 0.0]])  # Y -> z, Z -> -y
TURN_Y = np.array([[0.0, 0.0, 1.0],
                   [0.0, 1.0, 0.0],
                   [-1.0, 0.0, 0.0]])  # Z -> x, X -> -z


def by_quantity(outcome, quantity):
    return [r for r in outcome.results if r.quantity == quantity]


def constant_runs(moment_specimen, temperatures=None):
    """X, Y, Z runs seeing one constant specimen-frame moment (noise-free)."""
    t = np.linspace(10.0, 100.0, 10) if temperatures is None else temperatures
    return {axis: (t, np.full(t.size, moment_specimen[i])) for i, axis in enumerate("XYZ")}


# --------------------------------------------------------------------------- rotations

@pytest.mark.parametrize("matrix, moment, azimuth, elevation", [
    (TURN_Z, (1, 0, 0), 90.0, 0.0),    # X -> crystal y
    (TURN_Z, (0, 1, 0), 180.0, 0.0),   # Y -> -a
    (TURN_X, (0, 1, 0), None, 90.0),   # Y -> c*
    (TURN_X, (0, 0, 1), 270.0, 0.0),   # Z -> -y
    (TURN_Y, (0, 0, 1), 0.0, 0.0),     # Z -> a
    (TURN_Y, (1, 0, 0), None, -90.0),  # X -> -c*
    (np.eye(3), (1, 1, np.sqrt(2)), 45.0, 45.0),
])
def test_hand_derived_quarter_turns(matrix, moment, azimuth, elevation):
    oc = moment_directions(constant_runs(1e-6 * np.asarray(moment, dtype=float)), matrix,
                           component_uncertainty={"X": 1e-9, "Y": 1e-9, "Z": 1e-9})
    el = by_quantity(oc, "elevation_deg")
    assert [r.value for r in el] == pytest.approx([elevation] * len(el), abs=1e-9)
    if azimuth is not None:
        assert [r.value for r in by_quantity(oc, "azimuth_deg")] == pytest.approx(
            [azimuth] * len(el), abs=1e-9)
    assert oc.diagnostics["frame"] == "crystal"


def test_hexagonal_a_star_direction():
    """a* of a hexagonal cell lies in the a-b plane 30 degrees from a (it is
    perpendicular to b, which is 120 degrees from a): derived by hand, checked
    against gemmi's fractionalisation matrix (its first row is a*)."""
    cell = gemmi.UnitCell(5.962, 5.962, 11.750, 90, 90, 120)  # troilite cell, Evans (1970)
    a_star = np.array(cell.frac.mat)[0]
    a_star /= np.linalg.norm(a_star)
    by_hand = np.array([np.sqrt(3) / 2, 0.5, 0.0])
    assert a_star == pytest.approx(by_hand, abs=1e-12)
    # a specimen whose X axis was set along a*: R is a 30-degree turn about c*
    r = np.array([[np.sqrt(3) / 2, -0.5, 0.0],
                  [0.5, np.sqrt(3) / 2, 0.0],
                  [0.0, 0.0, 1.0]])
    assert r @ [1.0, 0.0, 0.0] == pytest.approx(a_star)
    oc = moment_directions(constant_runs([2e-6, 0.0, 0.0]), r,
                           component_uncertainty={"X": 1e-9, "Y": 1e-9, "Z": 1e-9})
    assert by_quantity(oc, "azimuth_deg")[0].value == pytest.approx(30.0, abs=1e-9)
    assert by_quantity(oc, "moment_magnitude")[0].value == pytest.approx(2e-6)


def test_arbitrary_rotation_agrees_with_scipy():
    rot = Rotation.from_euler("ZXZ", [37.0, 71.0, -128.0], degrees=True)
    vectors = np.random.default_rng(0).normal(size=(20, 3))
    assert to_crystal_frame(vectors, rot.as_matrix()) == pytest.approx(rot.apply(vectors), abs=1e-12)


@pytest.mark.parametrize("matrix, words", [
    (np.diag([1.0, 1.0, -1.0]), "reflection"),
    (np.array([[1.0, 0.1, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]]), "not orthonormal"),
    (np.eye(2), "3x3"),
])
def test_improper_orientations_are_refused(matrix, words):
    with pytest.raises(InvalidValue) as err:
        check_rotation(matrix)
    assert words in str(err.value)


def test_angles_and_vectors_round_trip():
    az = np.array([0.0, 45.0, 135.0, 270.0, 359.0])
    el = np.array([0.0, 30.0, -60.0, 89.0, -10.0])
    got_az, got_el = azimuth_elevation(unit_vectors(az, el))
    assert got_az == pytest.approx(az)
    assert got_el == pytest.approx(el)


# --------------------------------------------------------------------------- equal area

def test_equal_area_hand_values():
    """Centre, primitive circle and 45 degrees: r = sqrt(1 - sin 45) = 0.5412."""
    pts = equal_area([[0, 0, 1], [1, 0, 0], [0, 2, 0], [1, 0, 1]])
    assert pts.x == pytest.approx([0.0, 1.0, 0.0, np.sqrt(1 - np.sqrt(0.5))], abs=1e-12)
    assert pts.y == pytest.approx([0.0, 0.0, 1.0, 0.0], abs=1e-12)
    assert list(pts.hemisphere) == ["upper"] * 4


def test_other_hemisphere_is_mirrored_and_marked():
    up = equal_area([[1, 1, 1]], hemisphere="upper")
    down = equal_area([[1, 1, -1]], hemisphere="upper")
    assert (down.x[0], down.y[0]) == pytest.approx((up.x[0], up.y[0]))
    assert down.hemisphere[0] == "lower"
    lower = equal_area([[1, 1, -1], [0, 0, -3]], hemisphere="lower")
    assert lower.x[0] == pytest.approx(up.x[0]) and lower.x[1] == 0.0
    assert list(lower.hemisphere) == ["lower", "lower"]
    with pytest.raises(InvalidValue):
        equal_area([[1, 0, 0]], hemisphere="left")


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_equal_area_property_with_uniform_directions(sign):
    """Uniform directions on a hemisphere (numpy) must fill the unit disk
    uniformly: r^2 is uniform on [0, 1] (Lambert's equal-area property)."""
    v = np.random.default_rng(42).normal(size=(4000, 3))
    v[:, 2] = sign * np.abs(v[:, 2])
    pts = equal_area(v, hemisphere="upper" if sign > 0 else "lower")
    r2 = pts.x ** 2 + pts.y ** 2
    assert stats.kstest(r2, "uniform").pvalue > 0.01
    # the azimuth is kept
    az = np.degrees(np.arctan2(pts.y, pts.x)) % 360
    assert az == pytest.approx(azimuth_elevation(v)[0], abs=1e-9)


# --------------------------------------------------------------------------- Fisher statistics

@pytest.mark.parametrize("n, r, k, alpha95", [
    (20, 18.0818, 9.9051, 10.923),
    (20, 19.0899, 20.877, 7.316),
])
def test_fisher_worked_values_of_tauxe(n, r, k, alpha95):
    """Tauxe (2010), Essentials of Paleomagnetism, ch. 11: k = 9.9 and
    alpha95 = 10.9 deg; k = 20.9 and alpha95 = 7.3 deg (more digits recomputed
    in REFERENCES.md)."""
    assert fisher_precision(n, r) == pytest.approx(k, abs=6e-4)
    assert fisher_confidence_angle_deg(n, r) == pytest.approx(alpha95, abs=6e-4)


def test_fisher_computed_example_recomputed_with_numpy():
    """Five directions (D, I) = (10, 40), (20, 50), (0, 45), (350, 35), (5, 60):
    N = 5, R = 4.90568, D = 4.31, I = 46.45, k = 42.41, alpha95 = 11.88 deg
    (REFERENCES.md, computed), recomputed here independently."""
    d = np.radians([10.0, 20.0, 0.0, 350.0, 5.0])
    i = np.radians([40.0, 50.0, 45.0, 35.0, 60.0])
    xyz = np.column_stack([np.cos(i) * np.cos(d), np.cos(i) * np.sin(d), np.sin(i)])
    total = xyz.sum(axis=0)
    r = np.linalg.norm(total)
    mean_d = np.degrees(np.arctan2(total[1], total[0])) % 360
    mean_i = np.degrees(np.arcsin(total[2] / r))
    k = 4 / (5 - r)
    alpha = np.degrees(np.arccos(1 - (5 - r) / r * (20 ** (1 / 4) - 1)))
    assert (r, mean_d, mean_i, k, alpha) == pytest.approx((4.90568, 4.31, 46.45, 42.41, 11.88),
                                                          abs=6e-3)
    fm = fisher_mean_angles([10, 20, 0, 350, 5], [40, 50, 45, 35, 60])
    assert fm.n == 5
    assert fm.resultant_length == pytest.approx(r, rel=1e-12)
    assert fm.azimuth_deg == pytest.approx(mean_d, abs=1e-9)
    assert fm.elevation_deg == pytest.approx(mean_i, abs=1e-9)
    assert fm.k == pytest.approx(k, rel=1e-12)
    assert fm.alpha_deg == pytest.approx(alpha, rel=1e-12)
    oc = average_directions([10, 20, 0, 350, 5], [40, 50, 45, 35, 60])
    assert oc.method == "fisher-mean"
    values = {res.quantity: res.value for res in oc.results}
    assert values["alpha95_deg"] == pytest.approx(alpha)
    assert values["fisher_k"] == pytest.approx(k)
    assert all(res.unit in ("deg", "1") for res in oc.results)


def test_shortcut_only_at_high_precision():
    """140/sqrt(k N) approximates alpha95 only for k above ~25 (Tauxe 2010,
    ch. 11): checked at k = 99, N = 100, never at low k."""
    k = fisher_precision(100, 99.0)
    assert k == pytest.approx(99.0)
    assert fisher_confidence_angle_deg(100, 99.0) == pytest.approx(140 / np.sqrt(k * 100), rel=0.03)


def test_alpha95_covers_the_true_mean_of_scipy_fisher_samples():
    """Directions drawn from scipy.stats.vonmises_fisher (kappa = 30, N = 10):
    the true mean lies inside alpha95 in about 95% of 400 trials."""
    true_mean = np.array([0.3, -0.5, 0.8]) / np.linalg.norm([0.3, -0.5, 0.8])
    dist = stats.vonmises_fisher(true_mean, 30.0)
    rng = np.random.default_rng(7)
    inside = 0
    for _ in range(400):
        fm = fisher_mean(dist.rvs(10, random_state=rng))
        angle = np.degrees(np.arccos(np.clip(np.dot(fm.vector, true_mean), -1, 1)))
        inside += angle <= fm.alpha_deg
    # binomial(400, 0.95): standard deviation 1.1%; allow about 3 of them
    assert 0.915 <= inside / 400 <= 0.985


def test_fisher_edge_cases():
    one = fisher_mean([[0, 0, 2]])
    assert one.k is None and one.alpha_deg is None and one.elevation_deg == 90.0
    same = fisher_mean([[1, 0, 0], [2, 0, 0]])
    assert same.k == float("inf") and same.alpha_deg == 0.0
    # very scattered: the cone formula has no solution
    assert fisher_confidence_angle_deg(3, 0.5) == 180.0
    with pytest.raises(InvalidValue):
        fisher_mean([[1, 0, 0], [-1, 0, 0]])
    with pytest.raises(InvalidValue):
        fisher_mean([[0, 0, 0]])


# --------------------------------------------------------------------------- moment_directions

def planted_direction(t):
    az = 20.0 + 0.2 * (t - 100.0)
    el = 30.0 - 0.1 * (t - 100.0)
    mag = 1e-6 * (1.0 - t / 600.0)
    return az, el, mag


def three_axis_runs(rotation, noise, seed=0):
    """Runs along X, Y, Z with different temperature samplings (one on cooling)."""
    rng = np.random.default_rng(seed)
    samplings = {"X": np.linspace(10.0, 300.0, 150), "Y": np.linspace(5.0, 290.0, 170),
                 "Z": np.linspace(310.0, 20.0, 120)}
    runs = {}
    for i, (axis, t) in enumerate(samplings.items()):
        az, el, mag = planted_direction(t)
        crystal = mag[:, None] * unit_vectors(az, el)
        specimen = crystal @ rotation  # rows: R^T m for each temperature
        runs[axis] = (t, specimen[:, i] + rng.normal(0, noise, t.size))
    return runs


def test_directions_against_temperature_are_recovered_with_honest_uncertainties():
    rotation = Rotation.from_euler("ZXZ", [40.0, 25.0, -70.0], degrees=True).as_matrix()
    noise = 5e-9
    oc = moment_directions(three_axis_runs(rotation, noise), rotation, orientation_uncertainty_deg=0.0)
    assert oc.diagnostics["overlap_K"] == pytest.approx([20.0, 290.0])
    grid = np.array(oc.diagnostics["temperature_K"])
    assert grid.size == 120 - int(np.sum(np.linspace(310.0, 20.0, 120) > 290.0))
    az = by_quantity(oc, "azimuth_deg")
    el = by_quantity(oc, "elevation_deg")
    mag = by_quantity(oc, "moment_magnitude")
    assert [r.block_temperature_K for r in az] == pytest.approx(list(grid))
    for rows, planted in zip((az, el, mag), planted_direction(grid)):
        z = (np.array([r.value for r in rows]) - planted) / np.array([r.uncertainty for r in rows])
        assert np.mean(np.abs(z) <= 2) >= 0.9, rows[0].quantity
        assert 0.65 <= np.sqrt(np.mean(z ** 2)) <= 1.4, rows[0].quantity
    # the noise of each run is estimated from its own scatter
    for level in oc.diagnostics["component_noise_A_m2"].values():
        assert level == pytest.approx(noise, rel=0.25)
    ea = oc.diagnostics["equal_area"]
    assert ea["hemisphere"] == "upper" and len(ea["x"]) == grid.size
    assert az[0].diagnostics["equal_area_x"] == ea["x"][0]


def test_orientation_uncertainty_widens_the_angles():
    rotation = TURN_Z
    runs = three_axis_runs(rotation, 5e-9)
    plain = by_quantity(moment_directions(runs, rotation), "elevation_deg")[0].uncertainty
    wide = by_quantity(moment_directions(runs, rotation, orientation_uncertainty_deg=2.0),
                       "elevation_deg")[0].uncertainty
    assert wide == pytest.approx(np.hypot(plain, 2.0))


def test_fisher_average_over_a_temperature_range():
    rng = np.random.default_rng(3)
    t = np.linspace(100.0, 200.0, 40)
    m = 1e-6 * unit_vectors(np.full(t.size, 60.0), np.full(t.size, -20.0))
    runs = {axis: (t, m[:, i] + rng.normal(0, 2e-9, t.size)) for i, axis in enumerate("XYZ")}
    oc = moment_directions(runs, np.eye(3), average_range_K=(120.0, 180.0), hemisphere="lower")
    mean_az = by_quantity(oc, "mean_azimuth_deg")[0]
    mean_el = by_quantity(oc, "mean_elevation_deg")[0]
    alpha = by_quantity(oc, "alpha95_deg")[0]
    assert mean_az.method == "fisher-mean"
    assert abs(mean_az.value - 60.0) <= 3 * mean_az.uncertainty
    assert abs(mean_el.value + 20.0) <= 3 * mean_el.uncertainty
    assert 0 < alpha.value < 1.0
    assert mean_az.diagnostics["range_K"] == [120.0, 180.0]
    assert set(oc.diagnostics["equal_area"]["point_hemisphere"]) == {"lower"}


def test_non_orthogonal_directions_and_more_than_three_runs():
    t = np.linspace(10.0, 50.0, 30)
    m = np.array([2e-7, -5e-7, 3e-7])
    dirs = {"a": [1, 0, 0], "b": [1, 1, 0], "c": [0, 1, 1], "d": [1, 1, 1]}
    runs = {k: (t, np.full(t.size, np.dot(m, v) / np.linalg.norm(v))) for k, v in dirs.items()}
    oc = moment_directions(runs, None, directions=dirs, component_uncertainty={k: 1e-10 for k in dirs})
    az, el = azimuth_elevation(m)
    assert by_quantity(oc, "azimuth_deg")[0].value == pytest.approx(az[0])
    assert by_quantity(oc, "elevation_deg")[0].value == pytest.approx(el[0])
    assert oc.diagnostics["frame"] == "specimen"
    assert any("specimen frame" in w for w in oc.warnings)
    # a run along -X sees the opposite component
    flipped = constant_runs([1e-6, 0.0, 0.0])
    flipped["-X"] = (flipped["X"][0], -flipped.pop("X")[1])
    oc2 = moment_directions(flipped, np.eye(3), component_uncertainty={"-X": 1e-9, "Y": 1e-9, "Z": 1e-9})
    assert by_quantity(oc2, "azimuth_deg")[0].value == pytest.approx(0.0, abs=1e-9)


@pytest.mark.parametrize("runs, kwargs, words", [
    ({"X": ([1, 2, 3], [1, 2, 3]), "Y": ([1, 2, 3], [1, 2, 3])}, {}, "at least three"),
    ({"X": ([1, 2, 3], [1, 2, 3]), "Y": ([1, 2, 3], [1, 2, 3]), "Q": ([1, 2, 3], [1, 2, 3])}, {},
     "'Q'"),
    ({"X": ([1, 2, 3], [1, 2, 3]), "Y": ([1, 2, 3], [1, 2, 3]), "-X": ([1, 2, 3], [1, 2, 3])}, {},
     "coplanar"),
    ({"X": ([1, 2, 3], [1, 2, 3]), "Y": ([1, 2, 3], [1, 2, 3]), "Z": ([5, 6, 7], [1, 2, 3])}, {},
     "no temperature range"),
    ({"X": ([1, 3, 2], [1, 2, 3]), "Y": ([1, 2, 3], [1, 2, 3]), "Z": ([1, 2, 3], [1, 2, 3])}, {},
     "both up and down"),
    ({"X": ([1, 2, 3], [1, 2]), "Y": ([1, 2, 3], [1, 2, 3]), "Z": ([1, 2, 3], [1, 2, 3])}, {},
     "equal numbers"),
])
def test_bad_groups_are_refused(runs, kwargs, words):
    with pytest.raises(InvalidValue) as err:
        moment_directions(runs, np.eye(3), **kwargs)
    assert words in str(err.value)


def test_outcome_records_parameters_and_is_deterministic():
    runs = three_axis_runs(np.eye(3), 5e-9, seed=9)
    options = dict(grid_points=25, hemisphere="lower", orientation_uncertainty_deg=1.0)
    a = moment_directions(runs, np.eye(3), **options)
    b = moment_directions(runs, np.eye(3), **options)
    assert a == b
    assert a.method == "moment-direction" and a.version == "1.0"
    assert a.parameters["grid_points"] == 25 and a.parameters["hemisphere"] == "lower"
    assert len(by_quantity(a, "azimuth_deg")) == 25
    assert {r.unit for r in a.results} == {"deg", "A m^2"}

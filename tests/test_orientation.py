"""Tests for magvault.analysis.orientation.

Convention under test: R maps specimen-frame vectors to the crystal Cartesian
frame (x || a, y in the a-b plane, z || c*); v_crystal = R @ v_specimen.

Outside references used here:
- gemmi (general-purpose library): orthogonalisation and fractionalisation
  matrices (UnitCell.orth / UnitCell.frac), UnitCell.calculate_d, volume.
- Troilite cell a = 5.962 A, c = 11.750 A, P-62c: Evans (1970), Science 167, 621.
- scipy.spatial.transform.Rotation (general-purpose library): intrinsic Z-X-Z
  Euler rotations (Bunge's convention is their transpose), quaternions,
  rotation magnitudes and the point groups O, D6, D2, C2 (create_group).
- Bunge (1982), Texture Analysis in Materials Science, Butterworths, and
  Rowenhorst et al. (2015), Modelling Simul. Mater. Sci. Eng. 23, 083501: the
  Bunge matrix written out -- FROM MEMORY (checked here against scipy).
- Mackenzie (1958), Biometrika 45, 229: the largest disorientation between two
  cubic crystals is 62.8 degrees -- FROM MEMORY.
- Hand-derived 90-degree turns, written out in each test.
"""

from __future__ import annotations

import math

import gemmi
import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from magvault.analysis.orientation import (
    METHODS,
    Cell,
    Orientation,
    angle_to_c_deg,
    cartesian_cell_matrix,
    d_spacing,
    direction_in_crystal,
    misorientation_deg,
    nearest_axis,
    orientation_from_options,
    parse_cell,
    quaternion_to_rotation,
    read_rotation_matrix,
    reciprocal_cell_matrix,
    rotation_angle_deg,
    rotation_from_axes,
    rotation_from_bunge,
    rotation_from_matrix_text,
    rotation_to_quaternion,
    specimen_direction,
    symmetry_rotations,
)
from magvault.errors import InvalidValue

TROILITE = Cell(a=5.962e-10, b=5.962e-10, c=11.750e-10, alpha=90, beta=90, gamma=120)
# A monoclinic cell in the C2/c-like setting of 4C pyrrhotite (values from memory,
# Powell et al., 2004; only used as a generic monoclinic geometry here).
MONOCLINIC = Cell(a=11.90e-10, b=6.86e-10, c=12.90e-10, alpha=90, beta=118.0, gamma=90)
TRICLINIC_LIKE = Cell(a=5.1e-10, b=6.3e-10, c=7.7e-10, alpha=84.0, beta=101.0, gamma=97.0)

RZ90 = np.array([[0, -1, 0], [1, 0, 0], [0, 0, 1]], dtype=float)  # +90 deg about Z (active)
RX90 = np.array([[1, 0, 0], [0, 0, -1], [0, 1, 0]], dtype=float)
RY90 = np.array([[0, 0, 1], [0, 1, 0], [-1, 0, 0]], dtype=float)


def _gemmi_cell(cell: Cell) -> gemmi.UnitCell:
    return gemmi.UnitCell(cell.a * 1e10, cell.b * 1e10, cell.c * 1e10, cell.alpha, cell.beta, cell.gamma)


def _mat(m: gemmi.Mat33) -> np.ndarray:
    return np.array(m.tolist())


# --------------------------------------------------------------------------- cells

@pytest.mark.parametrize("cell", [TROILITE, MONOCLINIC, TRICLINIC_LIKE], ids=["hex", "mono", "tri"])
def test_cartesian_cell_matrix_matches_gemmi(cell):
    """Columns a, b, c in x || a, y in a-b, z || c*: gemmi's UnitCell.orth matrix (in A)."""
    ours = cartesian_cell_matrix(cell) * 1e10
    np.testing.assert_allclose(ours, _mat(_gemmi_cell(cell).orth.mat), atol=1e-9)
    assert cell.volume * 1e30 == pytest.approx(_gemmi_cell(cell).volume, rel=1e-12)


@pytest.mark.parametrize("cell", [TROILITE, MONOCLINIC, TRICLINIC_LIKE], ids=["hex", "mono", "tri"])
def test_reciprocal_matrix_matches_gemmi_fractionalisation(cell):
    """The rows of gemmi's fractionalisation matrix are a*, b*, c* (1/A)."""
    ours = reciprocal_cell_matrix(cell) * 1e-10
    np.testing.assert_allclose(ours, _mat(_gemmi_cell(cell).frac.mat).T, atol=1e-12)
    np.testing.assert_allclose(reciprocal_cell_matrix(cell).T @ cartesian_cell_matrix(cell),
                               np.eye(3), atol=1e-12)


def test_hexagonal_a_star_direction_by_hand():
    """a* is perpendicular to b (at 120 deg from a) and c: it lies 30 deg from a in the
    a-b plane, |a*| = 2 / (sqrt(3) a) (hand-derived)."""
    a_star = reciprocal_cell_matrix(TROILITE)[:, 0]
    expected = 2 / (math.sqrt(3) * TROILITE.a) * np.array([math.cos(math.radians(30)),
                                                            math.sin(math.radians(30)), 0.0])
    np.testing.assert_allclose(a_star, expected, rtol=1e-12, atol=1e-3)
    # b* of a hexagonal cell lies along y, c* along z.
    b_star = reciprocal_cell_matrix(TROILITE)[:, 1]
    assert abs(b_star[0]) < 1e-3 and abs(b_star[2]) < 1e-3 and b_star[1] > 0


@pytest.mark.parametrize("hkl", [(1, 0, 2), (1, 1, 0), (0, 0, 4), (2, 0, 1), (1, 1, 4), (3, 0, 0)])
def test_troilite_d_spacings_match_gemmi(hkl):
    """Troilite (Evans, 1970): d(hkl) against gemmi.UnitCell.calculate_d."""
    assert d_spacing(TROILITE, hkl) * 1e10 == pytest.approx(_gemmi_cell(TROILITE).calculate_d(list(hkl)),
                                                             rel=1e-12)


def test_troilite_subcell_d102_from_references():
    """NiAs subcell A = a/sqrt(3), C = c/2 of troilite: d(102) = 2.09234 A (REFERENCES, computed
    with gemmi)."""
    sub = parse_cell(f"a={5.962 / math.sqrt(3)} c={11.750 / 2}", "hexagonal")
    assert d_spacing(sub, (1, 0, 2)) * 1e10 == pytest.approx(2.09234, abs=1e-5)
    assert d_spacing(MONOCLINIC, (2, 0, -1)) * 1e10 == pytest.approx(
        _gemmi_cell(MONOCLINIC).calculate_d([2, 0, -1]), rel=1e-12)


def test_parse_cell_forms_and_system_defaults():
    hexagonal = parse_cell("a=5.962 A c=11.750 A", "hexagonal")
    assert hexagonal == TROILITE
    assert parse_cell("a=5.962, c=11.750", "Hexagonal") == TROILITE
    in_nm_pm = parse_cell("a=0.5962nm c=1175.0 pm gamma=120", "hexagonal")
    assert (in_nm_pm.a, in_nm_pm.c, in_nm_pm.gamma) == pytest.approx((5.962e-10, 11.75e-10, 120.0))
    mono = parse_cell("a=11.90 b=6.86 c=12.90 beta=118 deg", "monoclinic")
    assert (mono.a, mono.b, mono.c, mono.alpha, mono.beta, mono.gamma) == pytest.approx(
        (11.90e-10, 6.86e-10, 12.90e-10, 90.0, 118.0, 90.0))
    cubic = parse_cell("a=5.417Å", "cubic")
    assert cubic.b == cubic.c == cubic.a == pytest.approx(5.417e-10)
    ortho = parse_cell("a=5.7; b=3.4; c=6.4", "orthorhombic")
    assert (ortho.alpha, ortho.beta, ortho.gamma) == (90.0, 90.0, 90.0)
    # Troilite's volume: V = 361.70 A^3 (REFERENCES, computed; gemmi agrees above).
    assert hexagonal.volume * 1e30 == pytest.approx(361.70, abs=0.01)


@pytest.mark.parametrize("text,system,needle", [
    ("a=3.44", "hexagonal", "missing c"),
    ("a=5.7 b=3.4 c=6.4", "monoclinic", "missing beta"),
    ("a=5.7 c=6.4", "orthorhombic", "missing b"),
    ("a=3.44 c=5.73 b=3.50", "hexagonal", "b = 3.44 A"),
    ("a=3.44 c=5.73 gamma=90", "hexagonal", "gamma = 120 degrees"),
    ("a=5.7 b=3.4 c=6.4 beta=118 alpha=80", "monoclinic", "alpha = 90 degrees"),
    ("a=3.44 a=3.45 c=5.73", "hexagonal", "given twice"),
    ("a=3.44 c=5.73 d=1", "hexagonal", "cannot read"),
    ("a=3.44 mm c=5.73", "hexagonal", "cannot read"),
    ("a=-3.44 c=5.73", "hexagonal", "positive length"),
    ("a=3.44 c=five", "hexagonal", "cannot read"),
    ("a=5.7 b=3.4 c=6.4 beta=190", "monoclinic", "between 0 and 180"),
    ("a=5.7 b=3.4 c=6.4 beta=118 deg A", "monoclinic", "cannot read"),
    ("a=5.7 b=3.4 c=6.4 beta=118 A", "monoclinic", "angle in degrees"),
    ("a=3.44 c=5.73", "triclinic", "--system"),
])
def test_parse_cell_refusals_name_the_option(text, system, needle):
    with pytest.raises(InvalidValue) as err:
        parse_cell(text, system)
    assert needle in err.value.message
    assert err.value.message.startswith("--system:" if needle == "--system" else "--cell:")


# --------------------------------------------------------------------------- matrices

def test_matrix_text_turns_about_each_axis():
    """Hand-derived: +90 deg about Z, X, Y typed row by row come back exactly."""
    for text, expected in [("0,-1,0, 1,0,0, 0,0,1", RZ90), ("1 0 0 0 0 -1 0 1 0", RX90),
                           ("0,0,1;0,1,0;-1,0,0", RY90)]:
        r = rotation_from_matrix_text(text)
        np.testing.assert_array_equal(r, expected)
        assert rotation_angle_deg(r) == pytest.approx(90.0)
    # R maps specimen X onto crystal y for the Z turn: v_crystal = R @ v_specimen.
    np.testing.assert_array_equal(rotation_from_matrix_text("0,-1,0,1,0,0,0,0,1") @ [1, 0, 0], [0, 1, 0])


def test_matrix_rounded_to_four_decimals_is_reorthonormalised_and_says_so():
    typed = "0.7071,-0.7071,0, 0.7071,0.7071,0, 0,0,1"
    reading = read_rotation_matrix(typed)
    assert reading.reorthonormalised
    assert "re-orthonormalised" in reading.note
    assert 0 < reading.max_deviation < 1e-4
    np.testing.assert_allclose(reading.matrix, Rotation.from_euler("z", 45, degrees=True).as_matrix(),
                               atol=1e-12)
    np.testing.assert_allclose(reading.matrix @ reading.matrix.T, np.eye(3), atol=1e-14)
    exact = read_rotation_matrix("1,0,0,0,1,0,0,0,1")
    assert not exact.reorthonormalised and exact.note is None


@pytest.mark.parametrize("text,needle", [
    ("1,0,0,0,1,0,0,0", "expected 9 numbers"),
    ("1,0,0,0,1,0,0,0,1,0", "expected 9 numbers"),
    ("1,0,0,0,one,0,0,0,1", "'one' is not a number"),
    ("1,0,0,0,1,0,0,0,nan", "not a number"),
    ("1,0,0,0,1,0,0,0,1.05", "largest deviation 0.05"),
    ("1,0.2,0,0,1,0,0,0,1", "not orthonormal"),
    ("2,0,0,0,2,0,0,0,2", "not orthonormal"),
    ("1,0,0,0,1,0,0,0,-1", "a reflection, not a rotation"),
    ("0,1,0,1,0,0,0,0,1", "a reflection, not a rotation"),
])
def test_matrix_refusals(text, needle):
    with pytest.raises(InvalidValue) as err:
        rotation_from_matrix_text(text)
    assert err.value.message.startswith("--matrix: ")
    assert needle in err.value.message
    assert "\n" not in err.value.message


def test_matrix_tolerance_is_a_parameter():
    text = "1,0,0,0,1,0,0,0,1.005"
    with pytest.raises(InvalidValue):
        rotation_from_matrix_text(text)
    np.testing.assert_allclose(rotation_from_matrix_text(text, tolerance=1e-2), np.eye(3), atol=1e-12)


# --------------------------------------------------------------------------- axes

@pytest.mark.parametrize("text,expected", [
    # a along X and c* along Z: the frames coincide.
    ("a=X,c*=Z", np.eye(3)),
    # a along Y, c* along Z: crystal x = Y, z = Z, y = z x x = -X (rows of R).
    ("a=Y,c*=Z", np.array([[0, 1, 0], [-1, 0, 0], [0, 0, 1]])),
    # a along -Y: x = -Y, z = Z, y = Z x -Y = +X.
    ("a=-Y, c*=Z", np.array([[0, -1, 0], [1, 0, 0], [0, 0, 1]])),
    # c* along X, a along Z: x = Z, z = X, y = X x Z = -Y.
    ("c*=X a=Z", np.array([[0, 0, 1], [0, -1, 0], [1, 0, 0]])),
    # lower-case specimen axis, 'c' for c* in a hexagonal cell.
    ("a=z, c=-y", np.array([[0, 0, 1], [-1, 0, 0], [0, -1, 0]])),
])
def test_rotation_from_axes_by_hand(text, expected):
    r = rotation_from_axes(text, "hexagonal")
    np.testing.assert_array_equal(r, expected)
    assert np.linalg.det(r) == pytest.approx(1.0)
    # The named specimen axes really map onto crystal a (x) and c* (z).
    entries = dict(e.split("=") for e in text.replace(",", " ").split())
    a_dir = specimen_direction(entries["a"])
    c_dir = specimen_direction(entries.get("c*", entries.get("c")))
    np.testing.assert_allclose(r @ a_dir, [1, 0, 0])
    np.testing.assert_allclose(r @ c_dir, [0, 0, 1])


def test_axes_c_in_monoclinic_cells():
    with pytest.raises(InvalidValue, match="monoclinic cell c is not parallel to c"):
        rotation_from_axes("a=X,c=Z", "monoclinic", MONOCLINIC)
    np.testing.assert_array_equal(rotation_from_axes("a=X,c*=Z", "monoclinic", MONOCLINIC), np.eye(3))


@pytest.mark.parametrize("text,needle", [
    ("a=X", "name the specimen axes along a and c*"),
    ("a=X,c*=X", "different specimen axes"),
    ("a=X,c*=-X", "different specimen axes"),
    ("a=X,a=Y,c*=Z", "a is given twice"),
    ("a=W,c*=Z", "cannot read 'a=W'"),
    ("b=X,c*=Z", "cannot read 'b=X'"),
    ("", "name the specimen axes"),
])
def test_axes_refusals(text, needle):
    with pytest.raises(InvalidValue) as err:
        rotation_from_axes(text, "hexagonal")
    assert err.value.message.startswith("--axes: ")
    assert needle in err.value.message


# --------------------------------------------------------------------------- Bunge

@pytest.mark.parametrize("angles,expected", [
    ((0, 0, 0), np.eye(3)),
    # phi1 = 90: the specimen frame turned 90 deg about Z; crystal x = specimen Y,
    # crystal y = -X: rows (0,1,0), (-1,0,0), (0,0,1).
    ((90, 0, 0), np.array([[0, 1, 0], [-1, 0, 0], [0, 0, 1]])),
    # Phi = 90: turned about X; crystal y = Z, crystal z = -Y.
    ((0, 90, 0), np.array([[1, 0, 0], [0, 0, 1], [0, -1, 0]])),
    # phi2 alone acts like phi1 when Phi = 0.
    ((0, 0, 90), np.array([[0, 1, 0], [-1, 0, 0], [0, 0, 1]])),
    # (90, 90, 0): about Z, X' = Y; then about X' (= Y): Y'' = Z, Z'' = -Y' = X.
    # Crystal a = Y, y = Z, c* = X.
    ((90, 90, 0), np.array([[0, 1, 0], [0, 0, 1], [1, 0, 0]])),
])
def test_bunge_by_hand(angles, expected):
    np.testing.assert_allclose(rotation_from_bunge(angles), expected, atol=1e-15)
    text = ",".join(str(a) for a in angles)
    np.testing.assert_allclose(rotation_from_bunge(text), expected, atol=1e-15)


def test_bunge_matches_scipy_intrinsic_zxz_transposed():
    """Bunge's passive g (Bunge, 1982; Rowenhorst et al., 2015, from memory) equals the
    transpose of scipy's intrinsic 'ZXZ' rotation of the same angles."""
    rng = np.random.default_rng(7)
    for phi1, big_phi, phi2 in zip(rng.uniform(0, 360, 40), rng.uniform(0, 180, 40), rng.uniform(0, 360, 40)):
        ours = rotation_from_bunge((phi1, big_phi, phi2))
        ref = Rotation.from_euler("ZXZ", [phi1, big_phi, phi2], degrees=True).as_matrix().T
        np.testing.assert_allclose(ours, ref, atol=1e-13)
    ours = rotation_from_bunge("142.8 32.0 214.4")
    np.testing.assert_allclose(
        ours, Rotation.from_euler("ZXZ", [142.8, 32.0, 214.4], degrees=True).as_matrix().T, atol=1e-13)


@pytest.mark.parametrize("value", ["10,20", "10,20,30,40", "10,x,30", (10, 20), (10, 20, float("inf"))])
def test_bunge_refusals(value):
    with pytest.raises(InvalidValue, match="^--euler: "):
        rotation_from_bunge(value)


# --------------------------------------------------------------------------- quaternions, misorientation

def test_quaternion_matches_scipy_and_round_trips():
    rots = Rotation.random(60, rng=np.random.default_rng(11))
    extra = [np.eye(3), RZ90, RX90 @ RX90, np.diag([-1.0, -1.0, 1.0]), np.diag([1.0, -1.0, -1.0])]
    matrices = list(rots.as_matrix()) + extra
    for m in matrices:
        q = rotation_to_quaternion(m)
        x, y, z, w = Rotation.from_matrix(m).as_quat()  # scipy: scalar last
        ref = np.array([w, x, y, z])
        ref = -ref if ref[0] < 0 or (ref[0] == 0 and q @ ref < 0) else ref
        np.testing.assert_allclose(q, ref, atol=1e-12)
        assert q[0] >= 0
        np.testing.assert_allclose(quaternion_to_rotation(q), m, atol=1e-12)


def test_misorientation_matches_scipy_magnitude():
    rots = Rotation.random(20, rng=np.random.default_rng(3)).as_matrix()
    for r1, r2 in zip(rots[:10], rots[10:]):
        ref = math.degrees(Rotation.from_matrix(r2 @ r1.T).magnitude())
        assert misorientation_deg(r1, r2) == pytest.approx(ref, abs=1e-9)
    assert misorientation_deg(np.eye(3), RZ90) == pytest.approx(90.0)


@pytest.mark.parametrize("system,group,axis", [("cubic", "O", "Z"), ("hexagonal", "D6", "Z"),
                                               ("orthorhombic", "D2", "Z"), ("monoclinic", "C2", "Y")])
def test_symmetry_rotations_match_scipy_groups(system, group, axis):
    """622 with two-folds along a, 432, 222 and 2 (about b = y) equal scipy's point groups."""
    ours = symmetry_rotations(system)
    ref = Rotation.create_group(group, axis=axis).as_matrix()
    assert len(ours) == len(ref)
    for m in ref:
        assert min(np.max(np.abs(m - o)) for o in ours) < 1e-12


def test_misorientation_with_crystal_symmetry():
    turn = lambda deg: Rotation.from_euler("z", deg, degrees=True).as_matrix()  # noqa: E731
    # About c of a hexagonal crystal, 60 deg is a symmetry turn and 70 deg is 10 deg away.
    assert misorientation_deg(np.eye(3), turn(60), "hexagonal") == pytest.approx(0.0, abs=1e-6)
    assert misorientation_deg(np.eye(3), turn(70), "hexagonal") == pytest.approx(10.0, abs=1e-9)
    assert misorientation_deg(np.eye(3), turn(70)) == pytest.approx(70.0, abs=1e-9)
    # Reference: the minimum over scipy's D6 group.
    rots = Rotation.random(20, rng=np.random.default_rng(5)).as_matrix()
    d6 = Rotation.create_group("D6")
    for r1, r2 in zip(rots[:10], rots[10:]):
        delta = Rotation.from_matrix(r2 @ r1.T)
        ref = math.degrees(min((g * delta).magnitude() for g in d6))
        assert misorientation_deg(r1, r2, "hexagonal") == pytest.approx(ref, abs=1e-9)


def test_cubic_disorientation_never_exceeds_mackenzie_limit():
    """Mackenzie (1958), Biometrika 45, 229: at most 62.8 degrees (FROM MEMORY)."""
    rots = Rotation.random(200, rng=np.random.default_rng(1)).as_matrix()
    angles = [misorientation_deg(np.eye(3), r, "cubic") for r in rots]
    assert max(angles) <= 62.81
    assert max(angles) > 45.0  # a random sample comes near the limit


# --------------------------------------------------------------------------- directions

def test_direction_in_crystal_and_specimen_direction_parsing():
    np.testing.assert_allclose(direction_in_crystal(RZ90, "X"), [0, 1, 0])
    np.testing.assert_allclose(direction_in_crystal(RZ90, "-y"), [1, 0, 0])
    np.testing.assert_allclose(direction_in_crystal(np.eye(3), "1,1,0"), [math.sqrt(0.5)] * 2 + [0])
    np.testing.assert_allclose(direction_in_crystal(np.eye(3), [0, 0, 5]), [0, 0, 1])
    for bad in ["W", "0,0,0", "1,2", [1, 2]]:
        with pytest.raises(InvalidValue, match="^--direction: "):
            specimen_direction(bad)


def test_nearest_axis_hexagonal():
    """Hexagonal: a along x, b* along y, c* along z (hand-derived above)."""
    identity = np.eye(3)
    assert nearest_axis(identity, "X", TROILITE) == ("a", pytest.approx(0.0))
    assert nearest_axis(identity, "-X", TROILITE) == ("a", pytest.approx(0.0))
    assert nearest_axis(identity, "Y", TROILITE) == ("b*", pytest.approx(0.0, abs=1e-9))
    assert nearest_axis(identity, "Z", TROILITE) == ("c*", pytest.approx(0.0))
    twenty = [math.cos(math.radians(20)), math.sin(math.radians(20)), 0]
    assert nearest_axis(identity, twenty, TROILITE) == ("a", pytest.approx(20.0))
    # Specimen mounted with a along Y: a field along Y is along a.
    r = rotation_from_axes("a=Y,c*=Z", "hexagonal")
    assert nearest_axis(r, "Y", TROILITE) == ("a", pytest.approx(0.0))
    assert nearest_axis(r, "X", TROILITE)[0] == "b*"


def test_angle_to_c_monoclinic_and_hexagonal():
    """Monoclinic (unique axis b): c makes beta - 90 = 28 deg with c* (hand-derived)."""
    identity = np.eye(3)
    assert angle_to_c_deg(identity, "Z", MONOCLINIC) == pytest.approx(28.0, abs=1e-9)
    assert angle_to_c_deg(identity, "Y", MONOCLINIC) == pytest.approx(90.0, abs=1e-9)
    assert angle_to_c_deg(identity, "Z", TROILITE) == pytest.approx(0.0, abs=1e-12)
    # A field 30 deg from Z in the X-Z plane of a crystal mounted with c* along X.
    r = rotation_from_axes("a=Z,c*=X", "hexagonal")
    v = [math.sin(math.radians(60)), 0, math.cos(math.radians(60))]
    assert angle_to_c_deg(r, v, TROILITE) == pytest.approx(30.0, abs=1e-9)
    # Cross-check with gemmi: the c vector of the orthogonalised cell.
    c_vec = _mat(_gemmi_cell(MONOCLINIC).orth.mat)[:, 2]
    expected = math.degrees(math.acos(abs(c_vec[2]) / np.linalg.norm(c_vec)))
    assert angle_to_c_deg(identity, "Z", MONOCLINIC) == pytest.approx(expected, abs=1e-9)


# --------------------------------------------------------------------------- orientation record

def test_orientation_from_options_each_source():
    by_matrix = orientation_from_options(system="hexagonal", method="laue",
                                         matrix="0,1,0,-1,0,0,0,0,1", cell="a=5.962 c=11.750",
                                         uncertainty="2 deg")
    by_axes = orientation_from_options(system="hexagonal", method="EBSD", axes="a=Y,c*=Z")
    by_euler = orientation_from_options(system="hexagonal", method="visual", euler="90,0,0",
                                        uncertainty="0.5")
    for o in (by_matrix, by_axes, by_euler):
        np.testing.assert_allclose(o.matrix, [[0, 1, 0], [-1, 0, 0], [0, 0, 1]], atol=1e-15)
        assert not o.matrix.flags.writeable
    assert by_matrix.method == "Laue" and by_matrix.cell == TROILITE
    assert by_matrix.uncertainty_deg == pytest.approx(2.0)
    assert by_euler.uncertainty_deg == pytest.approx(0.5)
    record = by_matrix.as_dict()
    assert record["matrix"] == [0.0, 1.0, 0.0, -1.0, 0.0, 0.0, 0.0, 0.0, 1.0]
    np.testing.assert_allclose(quaternion_to_rotation(record["quaternion"]), by_matrix.matrix, atol=1e-15)
    assert record["cell"]["gamma_deg"] == 120.0


def test_orientation_from_options_reports_reorthonormalisation():
    o = orientation_from_options(system="cubic", method="diffraction",
                                 matrix="0.7071,-0.7071,0,0.7071,0.7071,0,0,0,1")
    assert len(o.notes) == 1 and "re-orthonormalised" in o.notes[0]
    assert rotation_angle_deg(o.matrix) == pytest.approx(45.0, abs=1e-9)


@pytest.mark.parametrize("kwargs,option", [
    (dict(), "--matrix/--axes/--euler"),
    (dict(axes="a=X,c*=Z", euler="0,0,0"), "--matrix/--axes/--euler"),
    (dict(axes="a=X,c*=Z", method="microscope"), "--method"),
    (dict(axes="a=X,c*=Z", system="tetragonal"), "--system"),
    (dict(axes="a=X,c*=Z", uncertainty="2 kg"), "--uncertainty"),
    (dict(axes="a=X,c*=Z", uncertainty="-2 deg"), "--uncertainty"),
    (dict(axes="a=X,c*=Z", cell="a=3.44"), "--cell"),
    (dict(matrix="1,0,0,0,1,0,0,0,-1"), "--matrix"),
    (dict(euler="1,2"), "--euler"),
])
def test_orientation_from_options_refusals(kwargs, option):
    args = dict(system="hexagonal", method="Laue") | kwargs
    with pytest.raises(InvalidValue) as err:
        orientation_from_options(**args)
    assert err.value.message.startswith(option + ":")


def test_orientation_record_refuses_reflection_and_unknown_method():
    with pytest.raises(InvalidValue, match="reflection"):
        Orientation(matrix=np.diag([1.0, 1.0, -1.0]), system="cubic", cell=None, method="Laue")
    with pytest.raises(InvalidValue, match="--method"):
        Orientation(matrix=np.eye(3), system="cubic", cell=None, method="guess")
    assert set(METHODS) == {"Laue", "EBSD", "diffraction", "visual"}

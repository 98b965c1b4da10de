"""Crystal orientation of a specimen: rotations, unit cells and directions.

Convention (used by every function here)
----------------------------------------
An orientation is a proper rotation matrix ``R`` (3x3, orthonormal,
determinant +1) that maps a vector's components in the **specimen frame**
(axes X, Y, Z marked on the specimen) to its components in the **crystal's
Cartesian frame**: ``v_crystal = R @ v_specimen``.  The crystal's Cartesian
frame has x along a, y in the a-b plane and z along c* -- the usual
orthogonalisation of the International Tables (also gemmi's).  The rows of
``R`` are therefore the crystal's x, y, z axes written in specimen components.

Lengths are in metres, angles in degrees.  Pure functions: text or numpy in,
numpy or frozen dataclasses out; refusals raise
:class:`magvault.errors.InvalidValue` with a one-line message naming the option
(``--matrix``, ``--axes``, ``--euler``, ``--cell``, ``--system``, ``--method``,
``--uncertainty``).

References
----------
Bunge, H.-J. (1982). Texture Analysis in Materials Science. Butterworths.
Rowenhorst, D. et al. (2015). Consistent representations of and conversions
between 3D rotations. Modelling Simul. Mater. Sci. Eng. 23, 083501.
International Tables for Crystallography: the reciprocal lattice and the
orthogonalisation with a along x and c* along z (gemmi's ``UnitCell.orth``).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from ..errors import InvalidValue
from ..units import parse_quantity

__all__ = [
    "SYSTEMS",
    "METHODS",
    "Cell",
    "MatrixReading",
    "Orientation",
    "parse_cell",
    "cartesian_cell_matrix",
    "reciprocal_cell_matrix",
    "d_spacing",
    "read_rotation_matrix",
    "rotation_from_matrix_text",
    "rotation_from_axes",
    "rotation_from_bunge",
    "rotation_to_quaternion",
    "quaternion_to_rotation",
    "rotation_angle_deg",
    "symmetry_rotations",
    "misorientation_deg",
    "specimen_direction",
    "direction_in_crystal",
    "nearest_axis",
    "angle_to_c_deg",
    "orientation_from_options",
    "OPTION_HELP",
]

SYSTEMS = ("hexagonal", "monoclinic", "orthorhombic", "cubic")
#: Generic technique names; the stored spelling is the one listed here.
METHODS = ("Laue", "EBSD", "diffraction", "visual")

#: One-line help texts stating the conventions, for the command line and the web form.
OPTION_HELP = {
    "--matrix": "nine numbers r11,r12,...,r33 (row order) of the rotation that maps specimen-frame "
                "vectors to the crystal frame (x along a, y in the a-b plane, z along c*)",
    "--axes": "the specimen axes along a and c*, e.g. 'a=X,c*=Z' or 'a=-Y,c*=Z' "
              "('c' may stand for c* except in monoclinic cells)",
    "--euler": "Bunge Euler angles phi1,Phi,phi2 in degrees (Z-X-Z, rotating the specimen frame "
               "onto the crystal frame)",
    "--cell": "cell parameters, lengths in angstrom, e.g. 'a=5.962 c=11.750' or "
              "'a=11.90 b=6.86 c=12.90 beta=118'",
    "--uncertainty": "angular uncertainty, e.g. '2 deg'",
}

_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_NUMBER_RE = re.compile(rf"^{_NUMBER}$")
_LENGTH_UNITS = {"": 1e-10, "A": 1e-10, "Å": 1e-10, "angstrom": 1e-10, "angstroms": 1e-10,
                 "nm": 1e-9, "pm": 1e-12}
_ANGLE_UNITS = {"", "deg", "degree", "degrees", "°"}
_CELL_TOKEN = re.compile(
    rf"(?P<key>alpha|beta|gamma|a|b|c)\s*=\s*(?P<value>{_NUMBER})\s*"
    r"(?P<unit>angstroms|angstrom|degrees|degree|deg|nm|pm|Å|A|°)?(?![A-Za-z0-9_])"
)
_SEPARATORS = re.compile(r"[\s,;]*")


# --------------------------------------------------------------------------- cells

@dataclass(frozen=True)
class Cell:
    """A unit cell: lengths ``a, b, c`` in metres, angles in degrees."""

    a: float
    b: float
    c: float
    alpha: float = 90.0
    beta: float = 90.0
    gamma: float = 90.0

    @property
    def volume(self) -> float:
        """Cell volume in m^3."""
        return float(abs(np.linalg.det(cartesian_cell_matrix(self))))

    def as_dict(self) -> dict[str, float]:
        return {"a_m": self.a, "b_m": self.b, "c_m": self.c,
                "alpha_deg": self.alpha, "beta_deg": self.beta, "gamma_deg": self.gamma}


def _check_system(system: str) -> str:
    name = str(system or "").strip().lower()
    if name not in SYSTEMS:
        raise InvalidValue(f"--system: {system!r} is not one of {', '.join(SYSTEMS)}",
                           field="--system")
    return name


def parse_cell(text: str, system: str) -> Cell:
    """Read a unit cell such as ``'a=3.44 c=5.73'`` or ``'a=5.962 A c=11.750 A'``.

    Parameters
    ----------
    text : str
        ``key=value`` pairs separated by spaces, commas or semicolons; keys
        ``a b c`` (angstrom unless followed by ``A``, ``Å``, ``nm`` or ``pm``)
        and ``alpha beta gamma`` (degrees, ``deg`` or ``°`` optional).
    system : str
        ``hexagonal`` (needs a and c; b = a, alpha = beta = 90, gamma = 120),
        ``monoclinic`` (needs a, b, c and beta; unique axis b), ``orthorhombic``
        (needs a, b, c) or ``cubic`` (needs a).  Values the system fixes may be
        given but must agree.

    Returns
    -------
    Cell
        Lengths in metres, angles in degrees.

    Raises
    ------
    InvalidValue
        Naming ``--cell``: unreadable text, a repeated or missing parameter,
        a value contradicting the system, or an impossible cell.
    """
    system = _check_system(system)
    given: dict[str, float] = {}
    text = text or ""
    pos = _SEPARATORS.match(text, 0).end()
    while pos < len(text):
        m = _CELL_TOKEN.match(text, pos)
        if not m:
            raise InvalidValue(f"--cell: cannot read {text[pos:]!r}; expected key=value pairs such as "
                               f"'a=5.962 c=11.750' (angstrom) or 'a=5.7 b=3.4 c=6.4 beta=118'",
                               field="--cell")
        key, value, unit = m.group("key"), float(m.group("value")), m.group("unit") or ""
        if key in given:
            raise InvalidValue(f"--cell: {key} is given twice", field="--cell")
        if key in "abc":
            if unit not in _LENGTH_UNITS:
                raise InvalidValue(f"--cell: {key} needs a length (A, nm, pm), got unit {unit!r}",
                                   field="--cell")
            if not (math.isfinite(value) and value > 0):
                raise InvalidValue(f"--cell: {key} must be a positive length, got {value:g}",
                                   field="--cell")
            given[key] = value * _LENGTH_UNITS[unit]
        else:
            if unit not in _ANGLE_UNITS:
                raise InvalidValue(f"--cell: {key} is an angle in degrees, got unit {unit!r}",
                                   field="--cell")
            if not 0.0 < value < 180.0:
                raise InvalidValue(f"--cell: {key} must lie between 0 and 180 degrees, got {value:g}",
                                   field="--cell")
            given[key] = value
        pos = _SEPARATORS.match(text, m.end()).end()
    return _cell_for_system(given, system)


_REQUIRED = {"hexagonal": ("a", "c"), "monoclinic": ("a", "b", "c", "beta"),
             "orthorhombic": ("a", "b", "c"), "cubic": ("a",)}


def _cell_for_system(given: dict[str, float], system: str) -> Cell:
    missing = [k for k in _REQUIRED[system] if k not in given]
    if missing:
        raise InvalidValue(f"--cell: a {system} cell needs {', '.join(_REQUIRED[system])}; "
                           f"missing {', '.join(missing)}", field="--cell")
    a = given["a"]
    fixed: dict[str, float] = {"alpha": 90.0, "beta": 90.0, "gamma": 90.0}
    if system == "hexagonal":
        fixed.update(b=a, gamma=120.0)
    elif system == "cubic":
        fixed.update(b=a, c=a)
    elif system == "monoclinic":
        del fixed["beta"]
    for key, value in fixed.items():
        if key in given and not math.isclose(given[key], value, rel_tol=1e-9):
            shown = f"{value * 1e10:g} A" if key in "abc" else f"{value:g} degrees"
            raise InvalidValue(f"--cell: a {system} cell has {key} = {shown}, got "
                               f"{given[key] * 1e10 if key in 'abc' else given[key]:g}",
                               field="--cell")
    values = {**fixed, **given}
    cell = Cell(a=values["a"], b=values["b"], c=values["c"], alpha=values["alpha"],
                beta=values["beta"], gamma=values["gamma"])
    _metric_volume_factor(cell)  # refuses impossible angle triples
    return cell


def _metric_volume_factor(cell: Cell) -> float:
    """sqrt(1 - cos^2 al - cos^2 be - cos^2 ga + 2 cos al cos be cos ga); V = abc * this."""
    ca, cb, cg = (_cos_sin(t)[0] for t in (cell.alpha, cell.beta, cell.gamma))
    inside = 1.0 - ca * ca - cb * cb - cg * cg + 2.0 * ca * cb * cg
    if inside <= 0.0:
        raise InvalidValue(f"--cell: angles alpha={cell.alpha:g}, beta={cell.beta:g}, "
                           f"gamma={cell.gamma:g} do not make a cell", field="--cell")
    return math.sqrt(inside)


def cartesian_cell_matrix(cell: Cell) -> np.ndarray:
    """Columns are the a, b, c vectors in the Cartesian frame x || a, y in a-b, z || c*.

    Parameters
    ----------
    cell : Cell
        Lengths in metres, angles in degrees.

    Returns
    -------
    ndarray, shape (3, 3)
        In metres; fractional coordinates times this matrix give Cartesian ones.

    References
    ----------
    International Tables for Crystallography: the orthogonalisation with a
    along x and c* along z (the same as gemmi's ``UnitCell.orth``).
    """
    ca, _ = _cos_sin(cell.alpha)
    cb, _ = _cos_sin(cell.beta)
    cg, sg = _cos_sin(cell.gamma)
    factor = _metric_volume_factor(cell)
    return np.array([
        [cell.a, cell.b * cg, cell.c * cb],
        [0.0, cell.b * sg, cell.c * (ca - cb * cg) / sg],
        [0.0, 0.0, cell.c * factor / sg],
    ])


def reciprocal_cell_matrix(cell: Cell) -> np.ndarray:
    """Columns are a*, b*, c* in the same Cartesian frame, in 1/m (no factor 2 pi).

    ``B = (A^-1)^T`` so that ``a_i . a*_j = delta_ij``, the crystallographers'
    reciprocal lattice (International Tables for Crystallography).
    """
    return np.linalg.inv(cartesian_cell_matrix(cell)).T


def d_spacing(cell: Cell, hkl: Sequence[float]) -> float:
    """Interplanar spacing d(hkl) in metres: ``1 / |h a* + k b* + l c*|``."""
    h = np.asarray(hkl, dtype=float)
    if h.shape != (3,) or not np.any(h):
        raise InvalidValue(f"hkl: expected three Miller indices, not all zero, got {hkl!r}", field="hkl")
    return float(1.0 / np.linalg.norm(reciprocal_cell_matrix(cell) @ h))


# --------------------------------------------------------------------------- rotations

@dataclass(frozen=True, eq=False)
class MatrixReading:
    """A rotation matrix read from the user, and what had to be done to it.

    ``max_deviation`` is the largest element-wise difference between the
    given matrix and the nearest orthonormal one; ``reorthonormalised`` says
    the stored matrix is that nearest one rather than the numbers as typed;
    ``note`` is a sentence to show the user (None when nothing was changed).
    """

    matrix: np.ndarray
    max_deviation: float
    reorthonormalised: bool
    note: str | None


def _numbers(text: str, count: int, option: str, example: str) -> list[float]:
    parts = [p for p in re.split(r"[\s,;]+", (text or "").strip()) if p]
    if len(parts) != count:
        raise InvalidValue(f"{option}: expected {count} numbers separated by commas or spaces, "
                           f"got {len(parts)} in {text!r} (e.g. {example!r})", field=option)
    values = []
    for part in parts:
        if not _NUMBER_RE.match(part):
            raise InvalidValue(f"{option}: {part!r} is not a number", field=option)
        value = float(part)
        if not math.isfinite(value):
            raise InvalidValue(f"{option}: {part!r} is not a finite number", field=option)
        values.append(value)
    return values


def read_rotation_matrix(matrix: str | Sequence[float] | np.ndarray, tolerance: float = 1e-3, *,
                         option: str = "--matrix") -> MatrixReading:
    """Check a 3x3 matrix (or its text ``'r11,r12,r13,r21,...,r33'``) as a proper rotation.

    The nearest orthonormal matrix is the orthogonal polar factor ``U V^T`` of
    the singular value decomposition ``M = U S V^T``.  A matrix farther than
    ``tolerance`` from it (largest element-wise difference) is refused; one
    within is replaced by it and the note says so.  A determinant of -1 is a
    reflection and is refused.

    Parameters
    ----------
    matrix : str or array-like
        Nine numbers in row order (the rows are the crystal x, y, z axes in
        specimen components), as text or as a (3, 3) or (9,) array.
    tolerance : float
        Largest accepted element-wise deviation from orthonormality.
    option : str
        Option named in error messages.

    Returns
    -------
    MatrixReading

    References
    ----------
    Higham, N. J. (1986). Computing the polar decomposition -- with
    applications. SIAM J. Sci. Stat. Comput. 7, 1160-1174.
    """
    if isinstance(matrix, str):
        given = np.array(_numbers(matrix, 9, option, "0,-1,0,1,0,0,0,0,1")).reshape(3, 3)
    else:
        given = np.asarray(matrix, dtype=float)
        if given.size != 9:
            raise InvalidValue(f"{option}: expected 9 numbers (3x3), got {given.size}", field=option)
        given = given.reshape(3, 3)
        if not np.all(np.isfinite(given)):
            raise InvalidValue(f"{option}: the matrix has a value that is not a finite number", field=option)
    u, _, vt = np.linalg.svd(given)
    nearest = u @ vt
    deviation = float(np.max(np.abs(given - nearest)))
    if deviation > tolerance:
        raise InvalidValue(f"{option}: not a rotation: the rows are not orthonormal (largest deviation "
                           f"{deviation:.3g} from the nearest orthonormal matrix, tolerance {tolerance:g})",
                           field=option)
    if np.linalg.det(nearest) < 0:
        raise InvalidValue(f"{option}: determinant -1: a reflection, not a rotation "
                           f"(change the sign of one row to keep the frames right-handed)", field=option)
    changed = deviation > 1e-12
    note = (f"{option}: the matrix was {deviation:.2g} from orthonormal and was re-orthonormalised "
            f"(nearest rotation by polar decomposition)") if changed else None
    result = nearest if changed else given.copy()
    result.setflags(write=False)
    return MatrixReading(matrix=result, max_deviation=deviation, reorthonormalised=changed, note=note)


def rotation_from_matrix_text(text: str, tolerance: float = 1e-3) -> np.ndarray:
    """The proper rotation typed as ``'r11,r12,r13,r21,r22,r23,r31,r32,r33'`` (see
    :func:`read_rotation_matrix`, which also reports whether it was re-orthonormalised).

    ``R`` maps specimen-frame vectors to the crystal Cartesian frame
    (x || a, y in the a-b plane, z || c*).
    """
    return read_rotation_matrix(text, tolerance, option="--matrix").matrix


_AXIS_TOKEN = re.compile(r"^(?P<axis>a|c\*|c)=(?P<sign>[+-]?)(?P<dir>[XYZxyz])$")
_UNIT = {"X": np.array([1.0, 0.0, 0.0]), "Y": np.array([0.0, 1.0, 0.0]), "Z": np.array([0.0, 0.0, 1.0])}


def rotation_from_axes(text: str, system: str, cell: Cell | None = None) -> np.ndarray:
    """The rotation given by the specimen axes that lie along a and c*.

    Parameters
    ----------
    text : str
        Two entries such as ``'a=X,c*=Z'`` or ``'a=-Y, c*=Z'``: the crystal a
        axis and the reciprocal c* axis, each along a specimen axis X, Y or Z
        with an optional sign.  ``c`` may stand for ``c*`` when the two are
        parallel (alpha = beta = 90: hexagonal, orthorhombic, cubic, or a
        given cell with those angles); in a monoclinic cell they are not.
    system : str
        Crystal system.
    cell : Cell, optional
        Used only to decide whether ``c`` is parallel to ``c*``.

    Returns
    -------
    ndarray, shape (3, 3)
        Rows: crystal x (= a direction), y = z x x, z (= c* direction), in
        specimen components; ``v_crystal = R @ v_specimen``.
    """
    system = _check_system(system)
    entries = [e for e in re.split(r"[\s,;]+", re.sub(r"\s*=\s*", "=", (text or "").strip())) if e]
    found: dict[str, np.ndarray] = {}
    for entry in entries:
        m = _AXIS_TOKEN.match(entry)
        if not m:
            raise InvalidValue(f"--axes: cannot read {entry!r}; expected entries such as 'a=X' and "
                               f"'c*=Z' (specimen axis X, Y or Z with an optional sign)", field="--axes")
        axis = m.group("axis")
        if axis == "c":
            right_angles = (cell is not None and math.isclose(cell.alpha, 90.0)
                            and math.isclose(cell.beta, 90.0))
            if system == "monoclinic" and not right_angles:
                raise InvalidValue("--axes: in a monoclinic cell c is not parallel to c*; "
                                   "name the c* direction ('c*=Z')", field="--axes")
            axis = "c*"
        if axis in found:
            raise InvalidValue(f"--axes: {axis} is given twice", field="--axes")
        sign = -1.0 if m.group("sign") == "-" else 1.0
        found[axis] = sign * _UNIT[m.group("dir").upper()]
    if set(found) != {"a", "c*"}:
        raise InvalidValue("--axes: name the specimen axes along a and c*, e.g. 'a=X,c*=Z'",
                           field="--axes")
    x_axis, z_axis = found["a"], found["c*"]
    if abs(float(x_axis @ z_axis)) > 0.5:
        raise InvalidValue("--axes: a and c* are perpendicular, so they must lie along different "
                           "specimen axes", field="--axes")
    # "+ 0.0" turns the -0.0 that sign flips leave into 0.0 (cleaner JSON).
    rotation = np.vstack([x_axis, np.cross(z_axis, x_axis), z_axis]) + 0.0
    rotation.setflags(write=False)
    return rotation


def rotation_from_bunge(angles: str | Sequence[float]) -> np.ndarray:
    """The rotation of Bunge Euler angles (phi1, Phi, phi2), in degrees.

    Bunge's convention (Z-X-Z): the specimen frame is rotated by phi1 about
    its Z, then by Phi about the new X, then by phi2 about the new Z, and then
    coincides with the crystal frame.  The matrix ``g`` below maps specimen
    components to crystal components, as every rotation in this module does::

        g = [[ c1 c2 - s1 s2 C,   s1 c2 + c1 s2 C,   s2 S],
             [-c1 s2 - s1 c2 C,  -s1 s2 + c1 c2 C,   c2 S],
             [ s1 S,             -c1 S,              C   ]]

    with ``c1 = cos phi1``, ``s1 = sin phi1``, ``C = cos Phi``, ``S = sin Phi``,
    ``c2 = cos phi2``, ``s2 = sin phi2``.

    Parameters
    ----------
    angles : str or sequence of 3 floats
        ``'phi1,Phi,phi2'`` in degrees (commas or spaces), or the three numbers.

    Returns
    -------
    ndarray, shape (3, 3)

    References
    ----------
    Bunge, H.-J. (1982). Texture Analysis in Materials Science. Butterworths.
    Rowenhorst, D. et al. (2015). Modelling Simul. Mater. Sci. Eng. 23, 083501.
    """
    if isinstance(angles, str):
        phi1, big_phi, phi2 = _numbers(angles, 3, "--euler", "30,45,60")
    else:
        try:
            values = [float(v) for v in angles]
        except (TypeError, ValueError):
            values = []
        if len(values) != 3 or not all(math.isfinite(v) for v in values):
            raise InvalidValue(f"--euler: expected three finite angles (phi1, Phi, phi2) in degrees, "
                               f"got {angles!r}", field="--euler")
        phi1, big_phi, phi2 = values
    c1, s1 = _cos_sin(phi1)
    cc, ss = _cos_sin(big_phi)
    c2, s2 = _cos_sin(phi2)
    g = np.array([
        [c1 * c2 - s1 * s2 * cc, s1 * c2 + c1 * s2 * cc, s2 * ss],
        [-c1 * s2 - s1 * c2 * cc, -s1 * s2 + c1 * c2 * cc, c2 * ss],
        [s1 * ss, -c1 * ss, cc],
    ])
    g.setflags(write=False)
    return g


def _cos_sin(degrees: float) -> tuple[float, float]:
    # Exact values at multiples of 90 degrees keep hand-written turns exact.
    quarter = degrees / 90.0
    if quarter == round(quarter):
        return [(1.0, 0.0), (0.0, 1.0), (-1.0, 0.0), (0.0, -1.0)][int(round(quarter)) % 4]
    r = math.radians(degrees)
    return math.cos(r), math.sin(r)


def _as_rotation(matrix: Any, name: str = "rotation") -> np.ndarray:
    r = np.asarray(matrix, dtype=float)
    if r.shape != (3, 3) or not np.all(np.isfinite(r)):
        raise InvalidValue(f"{name}: expected a 3x3 rotation matrix of finite numbers", field=name)
    return r


def rotation_to_quaternion(rotation: np.ndarray) -> np.ndarray:
    """Unit quaternion ``(w, x, y, z)`` of a rotation matrix, scalar first, ``w >= 0``.

    The quaternion rotates vectors as the matrix does: ``R v = q v q*``.  Uses
    Shepperd's method (the largest of the four squared components is taken
    from the diagonal, the others from off-diagonal sums), which is stable for
    every angle.

    References
    ----------
    Shepperd, S. W. (1978). Quaternion from rotation matrix. J. Guidance and
    Control 1, 223-224.
    """
    r = _as_rotation(rotation)
    trace = r[0, 0] + r[1, 1] + r[2, 2]
    candidates = [trace, r[0, 0], r[1, 1], r[2, 2]]
    k = int(np.argmax(candidates))
    if k == 0:
        w = 0.5 * math.sqrt(max(1.0 + trace, 0.0))
        q = [w, (r[2, 1] - r[1, 2]) / (4 * w), (r[0, 2] - r[2, 0]) / (4 * w), (r[1, 0] - r[0, 1]) / (4 * w)]
    elif k == 1:
        x = 0.5 * math.sqrt(max(1.0 + 2 * r[0, 0] - trace, 0.0))
        q = [(r[2, 1] - r[1, 2]) / (4 * x), x, (r[0, 1] + r[1, 0]) / (4 * x), (r[0, 2] + r[2, 0]) / (4 * x)]
    elif k == 2:
        y = 0.5 * math.sqrt(max(1.0 + 2 * r[1, 1] - trace, 0.0))
        q = [(r[0, 2] - r[2, 0]) / (4 * y), (r[0, 1] + r[1, 0]) / (4 * y), y, (r[1, 2] + r[2, 1]) / (4 * y)]
    else:
        z = 0.5 * math.sqrt(max(1.0 + 2 * r[2, 2] - trace, 0.0))
        q = [(r[1, 0] - r[0, 1]) / (4 * z), (r[0, 2] + r[2, 0]) / (4 * z), (r[1, 2] + r[2, 1]) / (4 * z), z]
    quat = np.array(q)
    quat /= np.linalg.norm(quat)
    return -quat if quat[0] < 0 else quat


def quaternion_to_rotation(quaternion: Sequence[float]) -> np.ndarray:
    """Rotation matrix of a quaternion ``(w, x, y, z)`` (normalised first)."""
    q = np.asarray(quaternion, dtype=float)
    norm = float(np.linalg.norm(q)) if q.shape == (4,) else 0.0
    if not norm or not math.isfinite(norm):
        raise InvalidValue(f"quaternion: expected four finite numbers, not all zero, got {quaternion!r}",
                           field="quaternion")
    w, x, y, z = q / norm
    return np.array([
        [1 - 2 * (y * y + z * z), 2 * (x * y - w * z), 2 * (x * z + w * y)],
        [2 * (x * y + w * z), 1 - 2 * (x * x + z * z), 2 * (y * z - w * x)],
        [2 * (x * z - w * y), 2 * (y * z + w * x), 1 - 2 * (x * x + y * y)],
    ])


def rotation_angle_deg(rotation: np.ndarray) -> float:
    """Rotation angle in degrees (0-180), from the quaternion (accurate near 0 and 180)."""
    w, *xyz = rotation_to_quaternion(rotation)
    return math.degrees(2.0 * math.atan2(float(np.linalg.norm(xyz)), abs(w)))


def symmetry_rotations(system: str) -> np.ndarray:
    """Proper rotations of the system's holohedry, in the crystal Cartesian frame.

    hexagonal: 622 (12; six-fold about z || c, two-folds every 30 degrees in
    the a-b plane starting along a); cubic: 432 (24 signed permutations);
    orthorhombic: 222 (4, about x, y, z); monoclinic: 2 (2, about y || b).

    Returns
    -------
    ndarray, shape (n, 3, 3)
    """
    system = _check_system(system)
    if system == "hexagonal":
        ops = []
        for k in range(6):
            c, s = math.cos(k * math.pi / 3), math.sin(k * math.pi / 3)
            ops.append(np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]]))
        for k in range(6):
            u = np.array([math.cos(k * math.pi / 6), math.sin(k * math.pi / 6), 0.0])
            ops.append(2.0 * np.outer(u, u) - np.eye(3))
        return np.array(ops)
    if system == "cubic":
        ops = []
        for perm in ((0, 1, 2), (1, 2, 0), (2, 0, 1), (1, 0, 2), (0, 2, 1), (2, 1, 0)):
            for signs in np.ndindex(2, 2, 2):
                m = np.zeros((3, 3))
                for row, (col, sgn) in enumerate(zip(perm, signs)):
                    m[row, col] = -1.0 if sgn else 1.0
                if np.linalg.det(m) > 0:
                    ops.append(m)
        return np.array(ops)
    if system == "orthorhombic":
        return np.array([np.diag(d) for d in ((1, 1, 1), (1, -1, -1), (-1, 1, -1), (-1, -1, 1))], dtype=float)
    return np.array([np.eye(3), np.diag([-1.0, 1.0, -1.0])])


def misorientation_deg(r1: np.ndarray, r2: np.ndarray, system: str | None = None) -> float:
    """Angle in degrees of the rotation between two orientations.

    Without ``system`` it is the angle of ``R2 R1^T``.  With a crystal system
    it is the smallest angle over the symmetry-equivalent descriptions,
    ``min_S angle(S R2 R1^T)`` with ``S`` from :func:`symmetry_rotations`
    (the disorientation when both orientations describe the same crystal
    kind).
    """
    delta = _as_rotation(r2, "r2") @ _as_rotation(r1, "r1").T
    if system is None:
        return rotation_angle_deg(delta)
    return min(rotation_angle_deg(s @ delta) for s in symmetry_rotations(system))


# --------------------------------------------------------------------------- directions

_DIRECTION = re.compile(r"^(?P<sign>[+-]?)(?P<axis>[XYZxyz])$")


def specimen_direction(direction: str | Sequence[float] | np.ndarray, option: str = "--direction"
                       ) -> np.ndarray:
    """A unit vector in the specimen frame from ``'X'``, ``'-Z'``, ``'1,1,0'`` or three numbers."""
    if isinstance(direction, str):
        m = _DIRECTION.match(direction.strip())
        if m:
            v = _UNIT[m.group("axis").upper()] * (-1.0 if m.group("sign") == "-" else 1.0)
            return v.copy()
        v = np.array(_numbers(direction, 3, option, "X or 1,1,0"))
    else:
        v = np.asarray(direction, dtype=float)
        if v.shape != (3,) or not np.all(np.isfinite(v)):
            raise InvalidValue(f"{option}: expected X, Y, Z or three finite numbers, got {direction!r}",
                               field=option)
    norm = float(np.linalg.norm(v))
    if norm == 0.0:
        raise InvalidValue(f"{option}: the direction must not be the zero vector", field=option)
    return v / norm


def direction_in_crystal(rotation: np.ndarray, v_specimen: Any) -> np.ndarray:
    """Unit vector of a specimen-frame direction in the crystal Cartesian frame, ``R v / |v|``."""
    return _as_rotation(rotation) @ specimen_direction(v_specimen)


def _axis_angle_deg(u: np.ndarray, w: np.ndarray) -> float:
    """Angle between two lines (0-90 degrees) given unit vectors; atan2 stays accurate near 0."""
    return math.degrees(math.atan2(float(np.linalg.norm(np.cross(u, w))), abs(float(u @ w))))


def nearest_axis(rotation: np.ndarray, v_specimen: Any, cell: Cell) -> tuple[str, float]:
    """The crystal axis (a, b* or c*) nearest to a specimen-frame direction.

    Axes are treated as lines, so a field along -a is along a.  These three
    are mutually perpendicular in hexagonal, orthorhombic and cubic cells
    (a perpendicular to b* and c* in every cell), which makes them a natural
    way to group runs by field direction.

    Returns
    -------
    (name, angle_deg)
        ``'a'``, ``'b*'`` or ``'c*'`` and the angle to it, 0-90 degrees; on a
        tie the first of a, b*, c* wins.
    """
    u = direction_in_crystal(rotation, v_specimen)
    recip = reciprocal_cell_matrix(cell)
    axes = {"a": cartesian_cell_matrix(cell)[:, 0], "b*": recip[:, 1], "c*": recip[:, 2]}
    angles = {name: _axis_angle_deg(u, vec / np.linalg.norm(vec)) for name, vec in axes.items()}
    best = min(angles, key=lambda name: (round(angles[name], 9), list(axes).index(name)))
    return best, angles[best]


def angle_to_c_deg(rotation: np.ndarray, v_specimen: Any, cell: Cell) -> float:
    """Angle (0-90 degrees, as between lines) of a specimen-frame direction to the crystal c axis.

    In a monoclinic cell c is inclined to c* by beta - 90 degrees, so this
    differs from the angle to c*.
    """
    u = direction_in_crystal(rotation, v_specimen)
    c_vec = cartesian_cell_matrix(cell)[:, 2]
    return _axis_angle_deg(u, c_vec / np.linalg.norm(c_vec))


# --------------------------------------------------------------------------- orientation record

@dataclass(frozen=True, eq=False)
class Orientation:
    """How a specimen's frame relates to its crystal axes.

    ``matrix`` (read-only) maps specimen-frame vectors to the crystal
    Cartesian frame (x || a, y in the a-b plane, z || c*).  ``method`` is one of
    :data:`METHODS`; ``uncertainty_deg`` a standard angular uncertainty in
    degrees; ``notes`` what was done to the input (re-orthonormalisation).
    """

    matrix: np.ndarray
    system: str
    cell: Cell | None
    method: str
    uncertainty_deg: float | None = None
    notes: tuple[str, ...] = field(default=())

    def __post_init__(self) -> None:
        reading = read_rotation_matrix(self.matrix, tolerance=1e-6, option="matrix")
        object.__setattr__(self, "matrix", reading.matrix)
        object.__setattr__(self, "system", _check_system(self.system))
        object.__setattr__(self, "method", _check_method(self.method))
        if self.uncertainty_deg is not None:
            u = float(self.uncertainty_deg)
            if not (math.isfinite(u) and u >= 0):
                raise InvalidValue(f"--uncertainty: expected an angle >= 0, got {self.uncertainty_deg!r}",
                                   field="--uncertainty")
            object.__setattr__(self, "uncertainty_deg", u)

    @property
    def quaternion(self) -> np.ndarray:
        """``(w, x, y, z)``, scalar first, ``w >= 0``; see :func:`rotation_to_quaternion`."""
        return rotation_to_quaternion(self.matrix)

    def as_dict(self) -> dict[str, Any]:
        """Plain numbers for storage or JSON (matrix row by row, cell in metres and degrees)."""
        return {"matrix": [float(v) for v in self.matrix.ravel()],
                "quaternion": [float(v) for v in self.quaternion],
                "system": self.system, "cell": None if self.cell is None else self.cell.as_dict(),
                "method": self.method, "uncertainty_deg": self.uncertainty_deg,
                "notes": list(self.notes)}


def _check_method(method: str) -> str:
    by_lower = {m.lower(): m for m in METHODS}
    name = by_lower.get(str(method or "").strip().lower())
    if name is None:
        raise InvalidValue(f"--method: {method!r} is not one of {', '.join(METHODS)}", field="--method")
    return name


def orientation_from_options(*, system: str, method: str, matrix: str | None = None,
                             axes: str | None = None, euler: str | None = None,
                             cell: str | None = None, uncertainty: str | None = None,
                             tolerance: float = 1e-3) -> Orientation:
    """Build an :class:`Orientation` from the texts of ``orientation add``'s options.

    Exactly one of ``matrix`` (nine numbers, row order), ``axes`` (``'a=X,c*=Z'``)
    and ``euler`` (Bunge phi1, Phi, phi2 in degrees) must be given.
    ``uncertainty`` is an angle such as ``'2 deg'`` (a bare number is read in
    degrees).  ``tolerance`` is passed to :func:`read_rotation_matrix`.
    """
    given = [name for name, value in (("--matrix", matrix), ("--axes", axes), ("--euler", euler))
             if value is not None]
    if len(given) != 1:
        raise InvalidValue(f"--matrix/--axes/--euler: give exactly one of them, got "
                           f"{', '.join(given) if given else 'none'}", field="--matrix")
    system = _check_system(system)
    unit_cell = parse_cell(cell, system) if cell is not None else None
    notes: tuple[str, ...] = ()
    if matrix is not None:
        reading = read_rotation_matrix(matrix, tolerance, option="--matrix")
        rotation = reading.matrix
        notes = (reading.note,) if reading.note else ()
    elif axes is not None:
        rotation = rotation_from_axes(axes, system, unit_cell)
    else:
        rotation = rotation_from_bunge(euler)  # type: ignore[arg-type]
    unc = None
    if uncertainty is not None:
        measured = parse_quantity(uncertainty, dimension="degree", field="--uncertainty",
                                  allow_unitless=True, default_unit="degree")
        if measured.value < 0:
            raise InvalidValue(f"--uncertainty: must not be negative, got {uncertainty!r}",
                               field="--uncertainty")
        unc = measured.value
    return Orientation(matrix=rotation, system=system, cell=unit_cell, method=method,
                       uncertainty_deg=unc, notes=notes)

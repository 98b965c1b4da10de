"""Moment direction in the crystal frame, equal-area projection, Fisher statistics.

Frames and conventions used throughout this module
--------------------------------------------------
* **Orientation.**  The orientation matrix R maps specimen-frame vectors to
  the crystal's Cartesian frame, with x along a, y in the a-b plane and z
  along c* (the usual orthogonalisation of the International Tables, also
  gemmi's): v_crystal = R @ v_specimen.
* **Measurement assumption.**  A group of runs is measured along three (or
  more) non-coplanar specimen directions after the same magnetising
  treatment, so that every run sees the same moment; each run records the
  moment's component along its own direction (the detection axis is the
  applied-field axis).
* **Direction.**  Azimuth is measured in the a-b plane from a (crystal x)
  towards crystal y, in [0, 360) degrees; elevation is the angle from the a-b
  plane, positive towards +c*, in [-90, 90] degrees.  The same formulas map
  declination and inclination onto a north-east-down frame, so (D, I) pairs
  may be passed wherever (azimuth, elevation) is asked for.
* **Equal-area projection.**  Lambert azimuthal equal-area projection onto
  the a-b plane, centred on +c* (``hemisphere="upper"``, the default) or on
  -c* (``"lower"``), scaled so that the primitive circle (the a-b plane) has
  radius 1: r = sqrt(1 - |sin(elevation)|), plot x = r cos(azimuth), plot y =
  r sin(azimuth), i.e. a to the right and crystal y up, seen from +c* for
  both hemispheres.  A direction of the other hemisphere is mirrored through
  the a-b plane (same azimuth, elevation of opposite sign) and marked, to be
  drawn with an open symbol.

References
----------
Fisher, R. A. (1953). Dispersion on a sphere. Proc. R. Soc. Lond. A 217,
295-305.
Tauxe, L. (2010). Essentials of Paleomagnetism, University of California
Press, chapter 11 (Fisher statistics, worked values) and appendix on
equal-area projections.
Snyder, J. P. (1987). Map Projections: A Working Manual. U.S. Geological
Survey Professional Paper 1395 (Lambert azimuthal equal-area projection).
International Tables for Crystallography Vol. B (2008), section 1.1
(orthogonalisation: x along a, z along c*).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, NamedTuple, Sequence

import numpy as np

from ..errors import InvalidValue
from .results import Outcome, ResultValue

__all__ = [
    "DIRECTION_METHOD",
    "FISHER_METHOD",
    "VERSION",
    "AXIS_LABELS",
    "FisherMean",
    "EqualArea",
    "unit_vectors",
    "azimuth_elevation",
    "check_rotation",
    "to_crystal_frame",
    "equal_area",
    "fisher_precision",
    "fisher_confidence_angle_deg",
    "fisher_mean",
    "fisher_mean_angles",
    "average_directions",
    "moment_directions",
]

DIRECTION_METHOD = "moment-direction"
FISHER_METHOD = "fisher-mean"
VERSION = "1.0"

#: Specimen axes that may be named instead of giving a vector.
AXIS_LABELS: Mapping[str, tuple[float, float, float]] = {
    "X": (1.0, 0.0, 0.0), "Y": (0.0, 1.0, 0.0), "Z": (0.0, 0.0, 1.0),
}
_HEMISPHERES = ("upper", "lower")
_CONVENTION = ("R maps specimen-frame vectors to the crystal Cartesian frame: x along a, "
               "y in the a-b plane, z along c* (International Tables orthogonalisation)")


# ----------------------------------------------------------------------------
# vectors and angles
# ----------------------------------------------------------------------------

def unit_vectors(azimuth_deg, elevation_deg) -> np.ndarray:
    """Unit vectors from azimuth and elevation.

    Parameters
    ----------
    azimuth_deg, elevation_deg : array_like
        Degrees; see the module's conventions.

    Returns
    -------
    numpy.ndarray, shape (n, 3)
        (cos el cos az, cos el sin az, sin el).
    """
    az = np.radians(np.atleast_1d(np.asarray(azimuth_deg, dtype=float)))
    el = np.radians(np.atleast_1d(np.asarray(elevation_deg, dtype=float)))
    if az.shape != el.shape:
        raise InvalidValue("azimuth_deg and elevation_deg: expected the same number of values",
                           field="elevation_deg")
    return np.column_stack([np.cos(el) * np.cos(az), np.cos(el) * np.sin(az), np.sin(el)])


def _as_vectors(vectors, name: str = "vectors") -> np.ndarray:
    v = np.asarray(vectors, dtype=float)
    if v.ndim == 1:
        v = v[None, :]
    if v.ndim != 2 or v.shape[1] != 3 or v.shape[0] == 0:
        raise InvalidValue(f"{name}: shape {np.shape(vectors)}; expected (n, 3) vectors", field=name)
    if not np.all(np.isfinite(v)):
        raise InvalidValue(f"{name}: non-finite component; expected finite numbers", field=name)
    norms = np.linalg.norm(v, axis=1)
    if np.any(norms == 0):
        raise InvalidValue(f"{name}: zero vector at row {int(np.argmin(norms))}; "
                           "a direction needs a non-zero vector", field=name)
    return v


def azimuth_elevation(vectors) -> tuple[np.ndarray, np.ndarray]:
    """Azimuth in [0, 360) and elevation in [-90, 90] degrees of vectors (any length).

    Parameters
    ----------
    vectors : array_like, shape (n, 3) or (3,)
        Cartesian vectors (crystal frame: x along a, y in the a-b plane, z
        along c*).

    Returns
    -------
    azimuth_deg, elevation_deg : numpy.ndarray
    """
    v = _as_vectors(vectors)
    az = np.degrees(np.arctan2(v[:, 1], v[:, 0])) % 360.0
    el = np.degrees(np.arctan2(v[:, 2], np.hypot(v[:, 0], v[:, 1])))
    return az, el


def check_rotation(matrix, *, tolerance: float = 1e-6, field: str = "orientation") -> np.ndarray:
    """A proper rotation matrix, or InvalidValue (the registry's own check,
    :func:`magvault.analysis.orientation.read_rotation_matrix`, at a tight tolerance).

    Parameters
    ----------
    matrix : array_like, shape (3, 3)
        The orientation matrix R: it maps specimen-frame vectors to the
        crystal's Cartesian frame with x along a, y in the a-b plane, z along
        c* (the usual orthogonalisation of the International Tables, also
        gemmi's).
    tolerance : float
        Largest accepted element-wise deviation from the nearest rotation.

    Returns
    -------
    numpy.ndarray
        The matrix as floats.
    """
    from .orientation import read_rotation_matrix

    return np.asarray(read_rotation_matrix(np.asarray(matrix, dtype=float), tolerance, option=field).matrix)


def to_crystal_frame(vectors_specimen, orientation) -> np.ndarray:
    """Specimen-frame vectors expressed in the crystal's Cartesian frame.

    Parameters
    ----------
    vectors_specimen : array_like, shape (n, 3) or (3,)
        Vectors in the specimen frame.
    orientation : array_like, shape (3, 3)
        R mapping specimen-frame vectors to the crystal's Cartesian frame
        with x along a, y in the a-b plane, z along c* (the usual
        orthogonalisation of the International Tables, also gemmi's).

    Returns
    -------
    numpy.ndarray, shape (n, 3)
        R @ v for each vector.
    """
    r = check_rotation(orientation)
    v = np.atleast_2d(np.asarray(vectors_specimen, dtype=float))
    return v @ r.T


# ----------------------------------------------------------------------------
# equal-area projection
# ----------------------------------------------------------------------------

class EqualArea(NamedTuple):
    """Equal-area plot coordinates and the hemisphere each direction lies in."""

    x: np.ndarray
    y: np.ndarray
    hemisphere: np.ndarray  # "upper" or "lower" per point (where the vector really points)


def equal_area(vectors, *, hemisphere: str = "upper") -> EqualArea:
    """Lambert azimuthal equal-area coordinates of directions.

    Parameters
    ----------
    vectors : array_like, shape (n, 3) or (3,)
        Directions (any length) in the crystal's Cartesian frame: x along a,
        y in the a-b plane, z along c*.
    hemisphere : {"upper", "lower"}
        Projection centred on +c* ("upper") or -c* ("lower").  Directions of
        the other hemisphere are mirrored through the a-b plane (same
        azimuth) and their ``hemisphere`` entry tells them apart; horizontal
        directions lie on the primitive circle and count as the projected
        hemisphere.

    Returns
    -------
    EqualArea
        ``x = r cos(azimuth)``, ``y = r sin(azimuth)`` with
        r = sqrt(1 - |sin(elevation)|) (1 on the primitive circle, 0 at the
        centre), and the per-point hemisphere.

    References
    ----------
    Snyder, J. P. (1987), Map Projections: A Working Manual, USGS Prof. Paper
    1395 (Lambert azimuthal equal-area, polar aspect: rho = 2 R sin(chi / 2),
    here divided by sqrt(2)).
    """
    if hemisphere not in _HEMISPHERES:
        raise InvalidValue(f"hemisphere: {hemisphere!r}; expected 'upper' or 'lower'",
                           field="hemisphere")
    v = _as_vectors(vectors)
    u = v / np.linalg.norm(v, axis=1)[:, None]
    rho = np.hypot(u[:, 0], u[:, 1])
    # sqrt(1 - |z|) written as rho / sqrt(1 + |z|) keeps full precision near the centre.
    r = rho / np.sqrt(1.0 + np.abs(u[:, 2]))
    safe_rho = np.where(rho > 0, rho, 1.0)
    cos_az = np.where(rho > 0, u[:, 0] / safe_rho, 1.0)
    sin_az = np.where(rho > 0, u[:, 1] / safe_rho, 0.0)
    side = np.where(u[:, 2] > 0, "upper", np.where(u[:, 2] < 0, "lower", hemisphere))
    return EqualArea(r * cos_az, r * sin_az, side)


# ----------------------------------------------------------------------------
# Fisher statistics
# ----------------------------------------------------------------------------

@dataclass(frozen=True)
class FisherMean:
    """Fisher (1953) mean of unit vectors.

    ``k`` is the best estimate of the precision parameter, (N - 1)/(N - R)
    (None for N < 2, inf when all directions coincide); ``alpha_deg`` is the
    semi-angle of the cone of confidence at ``confidence`` (alpha95 for 0.95;
    None for N < 2, 180 when the formula has no solution).
    """

    vector: tuple[float, float, float]
    azimuth_deg: float
    elevation_deg: float
    n: int
    resultant_length: float
    k: float | None
    alpha_deg: float | None
    confidence: float


def fisher_precision(n: int, resultant_length: float) -> float | None:
    """Best estimate of Fisher's precision parameter, k = (N - 1)/(N - R).

    Parameters
    ----------
    n : int
        Number of unit vectors N.
    resultant_length : float
        Length R of their vector sum.

    Returns
    -------
    float or None
        None for N < 2; inf when R = N.

    References
    ----------
    Fisher, R. A. (1953), Proc. R. Soc. Lond. A 217, 295.
    """
    if n < 2:
        return None
    spread = n - resultant_length
    return float("inf") if spread <= 0 else float((n - 1) / spread)


def fisher_confidence_angle_deg(n: int, resultant_length: float,
                                confidence: float = 0.95) -> float | None:
    """Semi-angle of the cone of confidence about the Fisher mean, degrees.

    cos(alpha) = 1 - (N - R)/R [(1/p)^(1/(N - 1)) - 1], p = 1 - confidence.
    (The shortcut 140/sqrt(k N) degrees holds only for k above about 25.)

    Parameters
    ----------
    n : int
        Number of unit vectors N.
    resultant_length : float
        Length R of their vector sum.
    confidence : float
        Confidence level (0.95 gives alpha95).

    Returns
    -------
    float or None
        Degrees; None for N < 2; 180 when the right-hand side falls below -1
        (directions too scattered for a cone).

    References
    ----------
    Fisher, R. A. (1953), Proc. R. Soc. Lond. A 217, 295; Tauxe (2010),
    Essentials of Paleomagnetism, ch. 11.
    """
    if not 0.0 < confidence < 1.0:
        raise InvalidValue(f"confidence: {confidence!r}; expected a level between 0 and 1",
                           field="confidence")
    if n < 2 or resultant_length <= 0:
        return None
    p = 1.0 - confidence
    cos_alpha = 1.0 - (n - resultant_length) / resultant_length * ((1.0 / p) ** (1.0 / (n - 1)) - 1.0)
    if cos_alpha < -1.0:
        return 180.0
    return float(np.degrees(np.arccos(min(1.0, cos_alpha))))


def fisher_mean(vectors, *, confidence: float = 0.95) -> FisherMean:
    """Fisher (1953) mean direction, precision and cone of confidence.

    Parameters
    ----------
    vectors : array_like, shape (n, 3)
        Directions (any length; each is normalised to a unit vector first).
    confidence : float
        Confidence level of the cone (0.95: alpha95).

    Returns
    -------
    FisherMean

    References
    ----------
    Fisher, R. A. (1953), Proc. R. Soc. Lond. A 217, 295.
    """
    v = _as_vectors(vectors)
    u = v / np.linalg.norm(v, axis=1)[:, None]
    total = u.sum(axis=0)
    r = float(np.linalg.norm(total))
    n = int(u.shape[0])
    if r == 0:
        raise InvalidValue("vectors: they sum to zero; the mean direction is undefined",
                           field="vectors")
    mean = total / r
    az, el = azimuth_elevation(mean)
    return FisherMean(vector=tuple(float(c) for c in mean), azimuth_deg=float(az[0]),
                      elevation_deg=float(el[0]), n=n, resultant_length=r,
                      k=fisher_precision(n, r),
                      alpha_deg=fisher_confidence_angle_deg(n, r, confidence),
                      confidence=confidence)


def fisher_mean_angles(azimuth_deg, elevation_deg, *, confidence: float = 0.95) -> FisherMean:
    """:func:`fisher_mean` of directions given as azimuth and elevation (or D and I), degrees."""
    return fisher_mean(unit_vectors(azimuth_deg, elevation_deg), confidence=confidence)


def _result(quantity: str, value: float, uncertainty: float | None, unit: str, method: str,
            block: float | None, diagnostics: dict[str, Any]) -> ResultValue:
    return ResultValue(quantity=quantity, value=float(value),
                       uncertainty=None if uncertainty is None else float(uncertainty), unit=unit,
                       method=method, block_temperature_K=block, diagnostics=diagnostics)


def _fisher_results(fm: FisherMean, block: float | None, extra: dict[str, Any]) -> list[ResultValue]:
    diag = {"n": fm.n, "resultant_length": fm.resultant_length, "confidence": fm.confidence, **extra}
    # The cone of confidence is a circle of 2-D normal scatter of the mean
    # (large k): its radius is sqrt(-2 ln(1 - confidence)) standard deviations
    # (2.45 for alpha95), which gives the standard uncertainty of the
    # elevation; the azimuth's grows as 1/cos(elevation).
    sigma = None
    if fm.alpha_deg is not None and fm.alpha_deg < 180.0:
        sigma = fm.alpha_deg / np.sqrt(-2.0 * np.log(1.0 - fm.confidence))
    cos_el = np.cos(np.radians(fm.elevation_deg))
    sigma_az = None if sigma is None or cos_el <= 0 else min(180.0, sigma / cos_el)
    name = "alpha95_deg" if fm.confidence == 0.95 else "alpha_deg"
    out = [
        _result("mean_azimuth_deg", fm.azimuth_deg, sigma_az, "deg", FISHER_METHOD, block, diag),
        _result("mean_elevation_deg", fm.elevation_deg, sigma, "deg", FISHER_METHOD, block, diag),
    ]
    if fm.alpha_deg is not None:
        out.append(_result(name, fm.alpha_deg, None, "deg", FISHER_METHOD, block, diag))
    if fm.k is not None and np.isfinite(fm.k):
        out.append(_result("fisher_k", fm.k, None, "1", FISHER_METHOD, block, diag))
    return out


def average_directions(azimuth_deg, elevation_deg, *, confidence: float = 0.95,
                       block_temperature_K: float | None = None) -> Outcome:
    """Fisher mean of several directions as an outcome (method ``fisher-mean``).

    Parameters
    ----------
    azimuth_deg, elevation_deg : array_like
        Directions, degrees (azimuth in the a-b plane from a, elevation from
        the a-b plane towards c*; or declination and inclination).
    confidence : float
        Confidence level of the cone.
    block_temperature_K : float, optional
        Temperature the directions belong to, K.

    Returns
    -------
    Outcome
        Results ``mean_azimuth_deg``, ``mean_elevation_deg`` (deg; uncertainty
        alpha95/2.45 as a standard uncertainty, for confidence 0.95),
        ``alpha95_deg`` and ``fisher_k`` (k omitted when infinite).

    References
    ----------
    Fisher, R. A. (1953), Proc. R. Soc. Lond. A 217, 295.
    """
    fm = fisher_mean_angles(azimuth_deg, elevation_deg, confidence=confidence)
    warnings = ("fewer than 2 directions: no precision or cone of confidence",) if fm.n < 2 else ()
    return Outcome(method=FISHER_METHOD, version=VERSION,
                   parameters={"confidence": confidence, "block_temperature_K": block_temperature_K},
                   results=tuple(_fisher_results(fm, block_temperature_K, {})), warnings=warnings,
                   diagnostics={"mean_vector": list(fm.vector), "n": fm.n,
                                "resultant_length": fm.resultant_length})


# ----------------------------------------------------------------------------
# moment direction from runs along several specimen axes
# ----------------------------------------------------------------------------

def _direction_vector(label: str, directions: Mapping[str, Sequence[float]] | None) -> np.ndarray:
    if directions is not None and label in directions:
        v = np.asarray(directions[label], dtype=float).ravel()
        if v.shape != (3,) or not np.all(np.isfinite(v)) or not np.linalg.norm(v) > 0:
            raise InvalidValue(f"directions[{label!r}]: expected a non-zero 3-vector in the specimen frame",
                               field="directions")
        return v / np.linalg.norm(v)
    key = label.strip().upper()
    sign = -1.0 if key.startswith("-") else 1.0
    key = key.lstrip("+-")
    if key not in AXIS_LABELS:
        raise InvalidValue(f"components: run label {label!r} is not X, Y or Z (optionally signed); "
                           "give its specimen-frame vector in `directions`", field="directions")
    return sign * np.asarray(AXIS_LABELS[key])


def _noise_from_second_differences(y: np.ndarray) -> float | None:
    """Robust white-noise level of a smooth curve: 1.4826 MAD of second differences / sqrt(6)."""
    if y.size < 5:
        return None
    d2 = y[:-2] - 2.0 * y[1:-1] + y[2:]
    return float(1.4826 * np.median(np.abs(d2 - np.median(d2))) / np.sqrt(6.0))


def _interpolate(t: np.ndarray, y: np.ndarray, grid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Linear interpolation and the factor sqrt(w^2 + (1-w)^2) by which it scales white noise."""
    values = np.interp(grid, t, y)
    hi = np.clip(np.searchsorted(t, grid, side="left"), 1, t.size - 1)
    lo = hi - 1
    span = t[hi] - t[lo]
    w = np.where(span > 0, (grid - t[lo]) / np.where(span > 0, span, 1.0), 0.0)
    return values, np.sqrt(w ** 2 + (1.0 - w) ** 2)


def moment_directions(components: Mapping[str, tuple[Any, Any]], orientation=None, *,
                      directions: Mapping[str, Sequence[float]] | None = None,
                      grid_points: int | None = None,
                      component_uncertainty: Mapping[str, float] | None = None,
                      orientation_uncertainty_deg: float | None = None,
                      hemisphere: str = "upper",
                      average_range_K: tuple[float, float] | None = None,
                      confidence: float = 0.95,
                      rotation_tolerance: float = 1e-6) -> Outcome:
    """Direction of the moment in the crystal frame against temperature.

    Measurement assumption: the runs of the group were measured along
    non-coplanar specimen directions after the same magnetising treatment,
    so they see the same moment, and each run records the moment's component
    along its own direction.  At each temperature the components give the
    moment vector in the specimen frame (solving D m = c, D holding the unit
    directions as rows; least squares for more than three runs), which the
    orientation matrix rotates into the crystal frame.

    Parameters
    ----------
    components : mapping of str to (temperature_K, moment)
        One entry per run: its label and its temperatures (K) and moment
        components (A m^2).  Labels "X", "Y", "Z" (optionally "-X" etc.) are
        the specimen axes; other labels need a vector in ``directions``.
        Each run's temperature must go one way (split warming and cooling
        first).
    orientation : array_like, shape (3, 3), optional
        R mapping specimen-frame vectors to the crystal's Cartesian frame
        with x along a, y in the a-b plane, z along c* (the usual
        orthogonalisation of the International Tables, also gemmi's).
        Without it the directions stay in the specimen frame (with a warning).
    directions : mapping of str to 3-vector, optional
        Specimen-frame direction of each run (normalised here).
    grid_points : int, optional
        Points of the common temperature grid, evenly spaced over the range
        all runs cover; default: the fewest samples any run has in that range.
    component_uncertainty : mapping of str to float, optional
        Standard uncertainty of each run's moment, A m^2; by default estimated
        from each run's scatter (robust second differences).
    orientation_uncertainty_deg : float, optional
        Standard uncertainty of the orientation, degrees, added to the
        angles (to the azimuth as sigma / cos(elevation)).
    hemisphere : {"upper", "lower"}
        Equal-area projection hemisphere (see :func:`equal_area`).
    average_range_K : (float, float), optional
        Temperatures whose grid directions are averaged with Fisher
        statistics (they are treated as independent, which holds when the
        grid is no denser than the measurements).
    confidence : float
        Confidence level of that average's cone.
    rotation_tolerance : float
        Largest accepted deviation of R R^T from the identity.

    Returns
    -------
    Outcome
        Method ``moment-direction``.  Per grid temperature (set as
        ``block_temperature_K``): ``azimuth_deg``, ``elevation_deg`` (deg) and
        ``moment_magnitude`` (A m^2), with standard uncertainties; the
        azimuth's diagnostics carry its equal-area point.  With
        ``average_range_K``: ``mean_azimuth_deg``, ``mean_elevation_deg``,
        ``alpha95_deg``, ``fisher_k`` (method ``fisher-mean``).  Diagnostics:
        the frame, the grid, equal-area coordinates, noise levels.

    References
    ----------
    Fisher, R. A. (1953), Proc. R. Soc. Lond. A 217, 295.  Snyder, J. P.
    (1987), USGS Prof. Paper 1395 (equal-area projection).
    """
    parameters: dict[str, Any] = {
        "grid_points": grid_points, "hemisphere": hemisphere,
        "orientation_uncertainty_deg": orientation_uncertainty_deg,
        "average_range_K": None if average_range_K is None else [float(v) for v in average_range_K],
        "confidence": confidence, "rotation_tolerance": rotation_tolerance,
        "component_uncertainty": None if component_uncertainty is None else dict(component_uncertainty),
        "directions": None if directions is None else {
            k: [float(c) for c in v] for k, v in directions.items()},
    }
    if hemisphere not in _HEMISPHERES:
        raise InvalidValue(f"hemisphere: {hemisphere!r}; expected 'upper' or 'lower'", field="hemisphere")
    if len(components) < 3:
        raise InvalidValue(f"components: {len(components)} run(s); expected at least three "
                           "non-coplanar directions", field="components")
    warnings: list[str] = []
    labels = list(components)
    design = np.array([_direction_vector(lb, directions) for lb in labels])
    singular = np.linalg.svd(design, compute_uv=False)
    if singular[-1] < 1e-6 * singular[0]:
        raise InvalidValue("directions: the runs' directions are coplanar; expected three "
                           "non-coplanar specimen directions", field="directions")
    if orientation is None:
        rotation = np.eye(3)
        frame = "specimen"
        warnings.append("no orientation: directions are given in the specimen frame")
    else:
        rotation = check_rotation(orientation, tolerance=rotation_tolerance)
        frame = "crystal"

    runs = {}
    for lb in labels:
        t = np.asarray(components[lb][0], dtype=float).ravel()
        y = np.asarray(components[lb][1], dtype=float).ravel()
        if t.size != y.size or t.size < 2:
            raise InvalidValue(f"components[{lb!r}]: expected equal numbers (at least 2) of "
                               "temperatures and moments", field="components")
        if not (np.all(np.isfinite(t)) and np.all(np.isfinite(y))):
            raise InvalidValue(f"components[{lb!r}]: non-finite value; expected finite numbers",
                               field="components")
        step = np.diff(t)
        if not (np.all(step >= 0) or np.all(step <= 0)) or np.all(step == 0):
            raise InvalidValue(f"components[{lb!r}]: temperature goes both up and down; expected one "
                               "branch (split warming and cooling first)", field="components")
        order = np.argsort(t, kind="stable")
        t, y = t[order], y[order]
        if component_uncertainty is not None and lb in component_uncertainty:
            sigma = float(component_uncertainty[lb])
        else:
            sigma = _noise_from_second_differences(y)
        runs[lb] = (t, y, sigma)

    lo = max(r[0][0] for r in runs.values())
    hi = min(r[0][-1] for r in runs.values())
    if not hi > lo:
        raise InvalidValue(f"components: the runs share no temperature range (latest start {lo:g} K, "
                           f"earliest end {hi:g} K)", field="components")
    if grid_points is None:
        grid_points = max(2, min(int(np.sum((r[0] >= lo) & (r[0] <= hi))) for r in runs.values()))
    if grid_points < 2:
        raise InvalidValue(f"grid_points: {grid_points}; expected at least 2", field="grid_points")
    grid = np.linspace(lo, hi, int(grid_points))

    values = np.empty((len(labels), grid.size))
    noise = np.full((len(labels), grid.size), np.nan)
    for i, lb in enumerate(labels):
        t, y, sigma = runs[lb]
        values[i], factor = _interpolate(t, y, grid)
        if sigma is not None:
            noise[i] = sigma * factor
    # m_specimen = pinv(D) c; m_crystal = R m_specimen
    to_crystal = rotation @ np.linalg.pinv(design)
    vectors = (to_crystal @ values).T
    have_noise = bool(np.all(np.isfinite(noise)))
    if not have_noise:
        warnings.append("too few points to estimate the noise of some runs: angles without uncertainty")

    az, el = azimuth_elevation(vectors)
    magnitude = np.linalg.norm(vectors, axis=1)
    projection = equal_area(vectors, hemisphere=hemisphere)
    results: list[ResultValue] = []
    u_or = 0.0 if orientation_uncertainty_deg is None else float(orientation_uncertainty_deg)
    for j, temperature in enumerate(grid):
        m = vectors[j]
        u_az = u_el = u_mag = None
        if have_noise:
            cov = to_crystal @ np.diag(noise[:, j] ** 2) @ to_crystal.T
            rho2 = m[0] ** 2 + m[1] ** 2
            r2 = rho2 + m[2] ** 2
            rho = np.sqrt(rho2)
            g_mag = m / np.sqrt(r2)
            u_mag = float(np.sqrt(g_mag @ cov @ g_mag))
            if rho > 0:
                g_az = np.array([-m[1], m[0], 0.0]) / rho2
                g_el = np.array([-m[0] * m[2] / rho, -m[1] * m[2] / rho, rho]) / r2
                var_el = np.degrees(np.sqrt(g_el @ cov @ g_el)) ** 2 + u_or ** 2
                cos_el = rho / np.sqrt(r2)
                var_az = np.degrees(np.sqrt(g_az @ cov @ g_az)) ** 2 + (u_or / cos_el) ** 2
                u_el = float(np.sqrt(var_el))
                u_az = float(min(180.0, np.sqrt(var_az)))
        block = float(temperature)
        point = {"equal_area_x": float(projection.x[j]), "equal_area_y": float(projection.y[j]),
                 "hemisphere": str(projection.hemisphere[j]), "frame": frame}
        results.append(_result("azimuth_deg", az[j], u_az, "deg", DIRECTION_METHOD, block, point))
        results.append(_result("elevation_deg", el[j], u_el, "deg", DIRECTION_METHOD, block,
                               {"frame": frame}))
        results.append(_result("moment_magnitude", magnitude[j], u_mag, "A m^2", DIRECTION_METHOD,
                               block, {"frame": frame}))

    if average_range_K is not None:
        a, b = sorted(float(v) for v in average_range_K)
        sel = (grid >= a) & (grid <= b)
        if sel.sum() == 0:
            warnings.append(f"no grid temperature in the averaging range {a:g}-{b:g} K: no mean")
        else:
            fm = fisher_mean(vectors[sel], confidence=confidence)
            results.extend(_fisher_results(fm, None, {"range_K": [a, b], "frame": frame}))

    diagnostics = {
        "frame": frame,
        "convention": _CONVENTION,
        "labels": labels,
        "directions_specimen": {lb: [float(c) for c in design[i]] for i, lb in enumerate(labels)},
        "overlap_K": [float(lo), float(hi)],
        "temperature_K": [float(t) for t in grid],
        "equal_area": {"hemisphere": hemisphere,
                       "x": [float(v) for v in projection.x],
                       "y": [float(v) for v in projection.y],
                       "point_hemisphere": [str(s) for s in projection.hemisphere]},
        "component_noise_A_m2": {lb: runs[lb][2] for lb in labels},
    }
    return Outcome(method=DIRECTION_METHOD, version=VERSION, parameters=parameters,
                   results=tuple(results), warnings=tuple(warnings), diagnostics=diagnostics)

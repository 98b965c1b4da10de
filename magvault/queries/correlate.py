"""Correlations of a transition temperature with composition, field or orientation.

A weighted straight line through (property, temperature) points, with the
covariance of its intercept and slope and a flag on points that lie far from
it; a helper that shapes the composition-temperature map; and the angle
between an applied field and the crystal's c axis, which is one of the
properties a temperature can be plotted against.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from magvault.errors import InvalidValue
from magvault.queries.stats import MAD_TO_SIGMA, LinearFit, weighted_linear_fit


@dataclass(frozen=True)
class CorrelationResult:
    """A weighted line of temperature against one property, and its points.

    ``fit`` is None (with ``note``) when too few points have a value, an
    uncertainty and distinct x.  ``slope_uncertainty`` and
    ``intercept_uncertainty`` come from ``covariance``, the fit's unscaled
    covariance inflated by the Birge ratio squared when that exceeds 1 (so a
    scatter beyond the stated uncertainties widens them); ``fit.covariance``
    keeps the unscaled one.  ``scatter`` is 1.4826 x the median absolute
    residual.  ``points`` has one row per input row.
    """

    x: str
    n: int
    fit: LinearFit | None
    slope: float | None
    slope_uncertainty: float | None
    intercept: float | None
    intercept_uncertainty: float | None
    covariance: np.ndarray | None
    scatter: float | None
    points: pd.DataFrame
    note: str | None = None
    parameters: dict[str, Any] = field(default_factory=dict)


def correlate(points: pd.DataFrame, *, x: str, sigma: float = 3.0, y: str = "temperature_K",
              u: str = "uncertainty_K", min_points: int = 3) -> CorrelationResult:
    """Weighted straight line of ``y`` against ``x``, with outlier flags.

    Parameters
    ----------
    points : DataFrame
        One row per point (a specimen estimate or a run): the ``x`` column
        (composition x in Fe(1-x)S, applied field mu0*H in T, an angle in
        degrees...), ``y`` (K) and ``u`` (K, standard uncertainty of y; rows
        without one are left out of the fit and noted, never weighted as zero).
    x : str
        Name of the property column.
    sigma : float
        Outlier threshold N on |residual| / sqrt(u_i^2 + s_r^2), with
        s_r = 1.4826 x the median absolute residual (so a point is judged
        against both its own uncertainty and the population's scatter).
    y, u : str
        Value and uncertainty columns.
    min_points : int
        Fewest points with x, y and u for a fit (at least 3, so that the
        scatter of the residuals means something).

    Returns
    -------
    CorrelationResult
        ``points`` adds ``fitted_K``, ``residual_K``, ``residual_uncertainty_K``,
        ``residual_sigma``, ``outlier`` (nullable boolean) and ``note``.

    References
    ----------
    Bevington, P. R. & Robinson, D. K. (2003). Data Reduction and Error
    Analysis for the Physical Sciences, 3rd ed., ch. 6. Birge, R. T. (1932).
    Phys. Rev. 40, 207-227. Rousseeuw, P. J. & Croux, C. (1993). J. Am. Stat.
    Assoc. 88, 1273-1283.
    """
    if not isinstance(points, pd.DataFrame):
        raise InvalidValue("points: expected a pandas DataFrame", field="points")
    missing = [c for c in (x, y, u) if c not in points.columns]
    if missing:
        raise InvalidValue(f"points: missing column(s) {', '.join(missing)}", field=missing[0])
    if not (isinstance(sigma, (int, float)) and math.isfinite(sigma) and sigma > 0):
        raise InvalidValue(f"sigma: expected a positive number, got {sigma!r}", field="sigma")
    if int(min_points) < 3:
        raise InvalidValue("min_points: expected at least 3", field="min_points")
    parameters = {"x": x, "y": y, "u": u, "sigma": float(sigma), "min_points": int(min_points),
                  "mad_to_sigma": MAD_TO_SIGMA}

    def column(name):
        try:
            return pd.to_numeric(points[name], errors="raise").to_numpy(float, na_value=np.nan)
        except (ValueError, TypeError):
            raise InvalidValue(f"{name}: expected numbers", field=name) from None

    xs, ys, us = column(x), column(y), column(u)
    n = len(points)
    has_x, has_y = np.isfinite(xs), np.isfinite(ys)
    has_u = np.isfinite(us) & (us > 0)
    used = has_x & has_y & has_u
    notes: list[list[str]] = [[] for _ in range(n)]
    for k in range(n):
        if not has_x[k]:
            notes[k].append(f"no {x}")
        if not has_y[k]:
            notes[k].append(f"no {y}")
        elif not has_u[k]:
            notes[k].append("no standard uncertainty: left out of the fit")

    fitted, residual, res_u, res_sigma = (np.full(n, np.nan) for _ in range(4))
    outlier = pd.array([pd.NA] * n, dtype="boolean")
    fit = None
    note = None
    if used.sum() < min_points or np.unique(xs[used]).size < 2:
        note = (f"fewer than {min_points} points with {x}, a value and an uncertainty, or "
                f"only one distinct {x}: no fit")
    else:
        fit = weighted_linear_fit(xs[used], ys[used], us[used])
        known = has_x & has_y
        fitted[has_x] = fit.predict(xs[has_x])
        residual[known] = ys[known] - fitted[known]
        scatter = MAD_TO_SIGMA * float(np.median(np.abs(fit.residuals)))
        res_u[used] = np.sqrt(us[used] ** 2 + scatter**2)
        res_sigma[used] = residual[used] / res_u[used]
        flags = np.abs(np.where(used, res_sigma, 0.0)) >= sigma
        outlier = pd.array(flags, dtype="boolean")
        outlier[~used] = pd.NA

    table = points.copy()
    table["fitted_K"] = fitted
    table["residual_K"] = residual
    table["residual_uncertainty_K"] = res_u
    table["residual_sigma"] = res_sigma
    table["outlier"] = outlier
    table["note"] = pd.Series(["; ".join(p) if p else None for p in notes], index=table.index,
                              dtype=object)
    if fit is None:
        return CorrelationResult(x, int(used.sum()), None, None, None, None, None, None, None,
                                 table, note, parameters)
    cov = fit.inflated_covariance
    return CorrelationResult(x, fit.n, fit, fit.slope, math.sqrt(cov[1, 1]), fit.intercept,
                             math.sqrt(cov[0, 0]), cov, scatter, table, note, parameters)


def composition_map(transitions: pd.DataFrame, compositions: pd.DataFrame) -> pd.DataFrame:
    """Shape the composition-temperature map: every transition row against x.

    Parameters
    ----------
    transitions : DataFrame
        Primary transitions of a selection: ``specimen``, ``temperature_K``,
        ``uncertainty_K`` (K) and any others (``run``, ``kind``, ``branch``...),
        kept as they are.
    compositions : DataFrame
        One row per specimen: ``specimen``, ``x`` (Fe(1-x)S),
        ``x_uncertainty``, and any others (``superstructure``, ``inherited``...).

    Returns
    -------
    DataFrame
        The transition rows with the composition columns joined on, sorted by
        ``kind`` (if present), ``x`` and ``specimen``, and a ``note`` naming
        what is missing (no x, no uncertainty in x or in the temperature).
    """
    for name, frame, need in (("transitions", transitions,
                               ("specimen", "temperature_K", "uncertainty_K")),
                              ("compositions", compositions, ("specimen", "x", "x_uncertainty"))):
        if not isinstance(frame, pd.DataFrame):
            raise InvalidValue(f"{name}: expected a pandas DataFrame", field=name)
        absent = [c for c in need if c not in frame.columns]
        if absent:
            raise InvalidValue(f"{name}: missing column(s) {', '.join(absent)}", field=absent[0])
    repeated = compositions["specimen"].duplicated()
    if repeated.any():
        code = compositions.loc[repeated, "specimen"].iloc[0]
        raise InvalidValue(f"compositions: specimen {code} appears more than once; expected "
                           "one composition per specimen", field="specimen")
    extra = [c for c in compositions.columns
             if c != "specimen" and c in transitions.columns and c != "note"]
    comp = compositions.drop(columns=extra + (["note"] if "note" in compositions.columns else []))
    table = transitions.drop(columns=["note"], errors="ignore").merge(
        comp, on="specimen", how="left", validate="many_to_one")
    x = pd.to_numeric(table["x"]).to_numpy(float, na_value=np.nan)
    ux = pd.to_numeric(table["x_uncertainty"]).to_numpy(float, na_value=np.nan)
    ut = pd.to_numeric(table["uncertainty_K"]).to_numpy(float, na_value=np.nan)
    notes = []
    for k in range(len(table)):
        parts = []
        if not np.isfinite(x[k]):
            parts.append("no composition x")
        elif not np.isfinite(ux[k]):
            parts.append("no uncertainty in x")
        if not np.isfinite(ut[k]):
            parts.append("no standard uncertainty in temperature")
        notes.append("; ".join(parts) if parts else None)
    table["note"] = pd.Series(notes, index=table.index, dtype=object)
    order = [c for c in ("kind", "x", "specimen") if c in table.columns]
    return table.sort_values(order, kind="stable", na_position="last").reset_index(drop=True)


def _c_axis_cartesian(cell) -> np.ndarray:
    """Unit vector of the c axis in the Cartesian frame x || a, y in the a-b plane, z || c*."""
    try:
        a, b, c, alpha, beta, gamma = (float(v) for v in cell)
    except (TypeError, ValueError):
        raise InvalidValue("cell: expected (a, b, c, alpha, beta, gamma) with angles in degrees",
                           field="cell") from None
    ca, cb, cg = (math.cos(math.radians(t)) for t in (alpha, beta, gamma))
    sg = math.sin(math.radians(gamma))
    volume_factor = 1.0 - ca**2 - cb**2 - cg**2 + 2.0 * ca * cb * cg
    if min(a, b, c) <= 0 or volume_factor <= 0 or sg == 0:
        raise InvalidValue("cell: the lengths and angles do not describe a cell", field="cell")
    vector = np.array([cb, (ca - cb * cg) / sg, math.sqrt(volume_factor) / sg])
    return vector / np.linalg.norm(vector)


def field_angle_to_c_deg(direction, rotation, cell) -> np.ndarray | float:
    """Angle between an applied field and the crystal's c axis, in degrees (0-90).

    Parameters
    ----------
    direction : array_like, shape (3,) or (n, 3)
        Field direction(s) in the specimen frame (any length but zero).
    rotation : array_like, shape (3, 3)
        Maps specimen-frame vectors to the crystal's Cartesian frame with x
        along a, y in the a-b plane and z along c* (the orthogonalisation of
        the International Tables for Crystallography, Vol. B, section 1.1).
    cell : sequence of 6 floats
        a, b, c (any length unit) and alpha, beta, gamma (degrees); c is not
        along z when alpha or beta differ from 90 degrees (monoclinic cells).

    Returns
    -------
    float or ndarray
        The angle between the field line and the c axis line, folded into
        [0, 90] degrees: a field along -c is as parallel to c as one along +c.
    """
    rot = np.asarray(rotation, dtype=float)
    if rot.shape != (3, 3) or not np.all(np.isfinite(rot)):
        raise InvalidValue("rotation: expected a finite 3x3 matrix", field="rotation")
    d = np.asarray(direction, dtype=float)
    single = d.ndim == 1
    d = np.atleast_2d(d)
    if d.shape[1] != 3 or not np.all(np.isfinite(d)):
        raise InvalidValue("direction: expected 3 finite components per direction",
                           field="direction")
    crystal = d @ rot.T
    length = np.linalg.norm(crystal, axis=1)
    if np.any(length == 0):
        raise InvalidValue("direction: a zero vector has no direction", field="direction")
    cosine = np.clip(np.abs(crystal @ _c_axis_cartesian(cell)) / length, 0.0, 1.0)
    angle = np.degrees(np.arccos(cosine))
    return float(angle[0]) if single else angle

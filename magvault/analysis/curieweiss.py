"""Curie-Weiss fit of the susceptibility above a magnetic transition.

Above an ordering transition the susceptibility of a paramagnet with
interacting moments follows the Curie-Weiss law

    chi = C / (T - theta),   so   1/chi = T/C - theta/C,

a straight line in T.  The paramagnetic Curie temperature theta and the
Curie constant C are results of their own: for a ferrimagnet such as
pyrrhotite, theta differs from the ordering temperature (1/chi is a
hyperbola close to Tc and becomes straight only well above it), so theta is
never averaged into the ordering temperature.

The fit is a weighted least-squares line through 1/chi.  With
``weighting="propagated"`` the weights follow from a constant absolute noise
on chi (u(1/chi) = u(chi)/chi^2, weights chi^4); ``"uniform"`` weights every
point alike.  The covariance is scaled by the residual variance, and theta =
-a/b, C = 1/b (a, b the intercept and slope) are propagated to first order
with the full covariance.

References
----------
Weiss, P. (1907). L'hypothese du champ moleculaire et la propriete
ferromagnetique. J. Phys. Theor. Appl. 6, 661.
Petrovsky, E. & Kapicka, A. (2006). J. Geophys. Res. 111, B12S27 (comparison
of methods for the Curie point, inverse susceptibility among them).
JCGM 100:2008 (GUM), section 5.2 (propagation with correlated inputs).
These citations are given from memory.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import InvalidValue
from .results import Outcome, ResultValue
from .thermomagnetic import TransitionNotFound, steepest_drop, uniform_curve

__all__ = ["CURIE_CONSTANT_UNITS", "analyse_curie_weiss", "default_fit_start"]

VERSION = "1.0"
#: Unit of the Curie constant for each accepted susceptibility unit.
CURIE_CONSTANT_UNITS = {"1": "K", "m^3/kg": "m^3 K/kg"}
_UNIT_ALIASES = {"1": "1", "": "1", "dimensionless": "1", "chi_vol": "1",
                 "m^3/kg": "m^3/kg", "m3/kg": "m^3/kg", "chi_mass_m3_per_kg": "m^3/kg"}
_WEIGHTINGS = ("propagated", "uniform")


def default_fit_start(temperature_K, chi, *, margin_K: float = 30.0, window_K: float = 10.0,
                      polyorder: int = 3, min_peak_snr: float = 5.0) -> tuple[float | None, dict[str, Any]]:
    """Lower end of the Curie-Weiss fit when none is given (a stated rule).

    The steepest drop of chi (the extremum of -dchi/dT, see
    :func:`magvault.analysis.thermomagnetic.steepest_drop`) marks the
    ordering transition, and the fit starts `margin_K` above it.  When that
    extremum lies within one Savitzky-Golay window of the low-temperature end
    (a purely paramagnetic curve, whose -dchi/dT only falls with T) or no
    drop stands out of the noise, there is no transition in the data and
    every point is used (None).

    Parameters
    ----------
    temperature_K, chi : array_like
        Temperatures (K) and susceptibilities.
    margin_K : float
        Distance above the transition where the fit starts, K.
    window_K, polyorder, min_peak_snr
        Savitzky-Golay settings of the drop search.

    Returns
    -------
    (float or None, dict)
        The start temperature in K (None: all data) and diagnostics.
    """
    curve = uniform_curve(temperature_K, chi)
    T = curve.temperature_K
    try:
        st = steepest_drop(curve, search_K=(float(T[0]), float(T[-1])), window_K=window_K,
                           polyorder=polyorder, min_peak_snr=min_peak_snr, max_window_K=window_K)
    except TransitionNotFound as exc:
        return None, {"transition_K": None, "reason": str(exc)}
    if st.temperature_K <= T[0] + st.window_K:
        return None, {"transition_K": None, "reason": "-dchi/dT is largest at the low-temperature end"}
    return st.temperature_K + margin_K, {"transition_K": st.temperature_K}


def analyse_curie_weiss(temperature_K, chi, *, fit_above_K: float | None = None,
                        fit_below_K: float | None = None, unit: str = "1",
                        weighting: str = "propagated", margin_K: float = 30.0,
                        min_points: int = 5) -> Outcome:
    """Paramagnetic Curie temperature and Curie constant from a line through 1/chi.

    Parameters
    ----------
    temperature_K : array_like
        Temperatures in K.
    chi : array_like
        Susceptibility: SI volume susceptibility (dimensionless, ``unit="1"``)
        or mass susceptibility in m^3/kg (``unit="m^3/kg"``); the column
        names ``chi_vol`` and ``chi_mass_m3_per_kg`` are accepted as units.
    fit_above_K, fit_below_K : float, optional
        Temperature range of the fit, K.  Without `fit_above_K` the rule of
        :func:`default_fit_start` applies (`margin_K` above the steepest drop
        of chi, or all data when the curve shows no transition).
    unit : str
        Unit of `chi` (see above); sets the unit of the Curie constant
        (K, or m^3 K/kg).
    weighting : {"propagated", "uniform"}
        Weights of the line fit: chi^4 (constant absolute noise on chi) or 1.
    margin_K : float
        See `fit_above_K`.
    min_points : int
        Fewest points accepted in the fit range (at least 3).

    Returns
    -------
    Outcome
        Method ``curie-weiss``; results ``theta_K`` (unit ``K``) and
        ``curie_constant`` (unit ``K`` or ``m^3 K/kg``) with standard
        uncertainties; diagnostics hold the fit range, the correlation of
        theta and C, the reduced chi-square and the significance of a
        curvature of 1/chi (a quadratic term, in standard uncertainties: a
        large value says the range still feels the transition).

    References
    ----------
    Weiss (1907); JCGM 100:2008, section 5.2.
    """
    canonical = _UNIT_ALIASES.get(str(unit).strip())
    if canonical is None:
        raise InvalidValue(f"unit must be one of {', '.join(sorted(CURIE_CONSTANT_UNITS))} "
                           f"(SI volume or mass susceptibility), got {unit!r}", field="unit")
    if weighting not in _WEIGHTINGS:
        raise InvalidValue(f"weighting must be one of {', '.join(_WEIGHTINGS)}, got {weighting!r}",
                           field="weighting")
    T = np.asarray(temperature_K, dtype=float).ravel()
    x = np.asarray(chi, dtype=float).ravel()
    if T.shape != x.shape:
        raise InvalidValue(f"temperature_K has {T.size} values but chi has {x.size}", field="chi")
    min_points = max(int(min_points), 3)
    parameters = {"fit_above_K": fit_above_K, "fit_below_K": fit_below_K, "unit": canonical,
                  "weighting": weighting, "margin_K": margin_K, "min_points": min_points}
    notes: list[str] = []
    finite = np.isfinite(T) & np.isfinite(x)
    T, x = T[finite], x[finite]
    diagnostics: dict[str, Any] = {"method_versions": {"curie-weiss": VERSION}}
    start = fit_above_K
    if start is None:
        start, rule = default_fit_start(T, x, margin_K=margin_K) if T.size >= 8 else (None, {})
        diagnostics["fit_start_rule"] = rule
    lo = -np.inf if start is None else float(start)
    hi = np.inf if fit_below_K is None else float(fit_below_K)
    in_range = (T >= lo) & (T <= hi)
    positive = x > 0
    if np.any(in_range & ~positive):
        notes.append(f"{np.count_nonzero(in_range & ~positive)} points with chi <= 0 left out "
                     "(1/chi is undefined there)")
    sel = in_range & positive
    n = int(np.count_nonzero(sel))
    if n < min_points:
        raise InvalidValue(f"only {n} points with chi > 0 between {lo:g} and {hi:g} K; at least "
                           f"{min_points} are needed for a Curie-Weiss fit", field="temperature_K")
    Ts, xs = T[sel], x[sel]
    if np.unique(Ts).size < 3:
        raise InvalidValue(f"the {n} points between {lo:g} and {hi:g} K hold fewer than 3 distinct "
                           "temperatures; a Curie-Weiss line needs a temperature range",
                           field="temperature_K")
    inv = 1.0 / xs
    w = xs**4 if weighting == "propagated" else np.ones_like(xs)
    w = w / np.mean(w)  # only relative weights matter: the covariance is scaled by the residuals
    t0 = float(np.mean(Ts))  # centre the design for conditioning
    X = np.column_stack([np.ones_like(Ts), Ts - t0])
    normal = X.T @ (w[:, None] * X)
    cov_unit = np.linalg.inv(normal)
    coef_c = cov_unit @ (X.T @ (w * inv))
    resid = inv - X @ coef_c
    dof = n - 2
    s2 = float(np.sum(w * resid**2) / dof) if dof > 0 else 0.0
    cov_c = cov_unit * s2
    # back to intercept at T = 0: a = a_c - b t0
    A = np.array([[1.0, -t0], [0.0, 1.0]])
    a, b = A @ coef_c
    cov = A @ cov_c @ A.T
    if not b > 0:
        raise InvalidValue(f"1/chi does not rise with temperature between {Ts.min():g} and {Ts.max():g} K "
                           "(slope <= 0): the data do not follow a Curie-Weiss law there",
                           field="chi")
    theta = -a / b
    C = 1.0 / b
    J = np.array([[-1.0 / b, a / b**2],   # d theta / d(a, b)
                  [0.0, -1.0 / b**2]])    # d C / d(a, b)
    cov_tc = J @ cov @ J.T
    u_theta, u_C = (float(np.sqrt(max(v, 0.0))) for v in np.diag(cov_tc))
    corr = float(cov_tc[0, 1] / (u_theta * u_C)) if u_theta > 0 and u_C > 0 else None
    curvature_z = None
    if n >= 4:
        Xq = np.column_stack([X, (Ts - t0) ** 2])
        cov_q = np.linalg.inv(Xq.T @ (w[:, None] * Xq))
        coef_q = cov_q @ (Xq.T @ (w * inv))
        rq = inv - Xq @ coef_q
        s2q = float(np.sum(w * rq**2) / (n - 3)) if n > 3 else 0.0
        uq = float(np.sqrt(cov_q[2, 2] * s2q))
        curvature_z = float(coef_q[2] / uq) if uq > 0 else None
    diagnostics.update({"fit_range_K": [float(Ts.min()), float(Ts.max())], "n_fit": n,
                        "slope_per_K": float(b), "intercept": float(a),
                        "correlation_theta_C": corr, "residual_variance": s2,
                        "curvature_z": curvature_z})
    curie_unit = CURIE_CONSTANT_UNITS[canonical]
    results = (
        ResultValue(quantity="theta_K", value=float(theta), uncertainty=u_theta, unit="K",
                    method="curie-weiss", diagnostics={"correlation_with_C": corr}),
        ResultValue(quantity="curie_constant", value=float(C), uncertainty=u_C, unit=curie_unit,
                    method="curie-weiss", diagnostics={"correlation_with_theta": corr}),
    )
    return Outcome(method="curie-weiss", version=VERSION, parameters=parameters, results=results,
                   warnings=tuple(notes), diagnostics=diagnostics)

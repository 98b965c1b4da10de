"""Hysteresis loops and backfield remanence curves.

Pure functions: arrays of applied field (mu0*H in tesla) and moment (A m^2) in,
an :class:`~magvault.analysis.results.Outcome` out.  Every numerical choice is
a keyword argument and is recorded in ``Outcome.parameters``; the functions
are deterministic.

Loop (:func:`analyse_loop`, method ``loop-corrected``)
    The loop is split into a descending and an ascending branch at its
    turning points.  One linear least-squares fit over the high-field points
    (|mu0H| >= ``high_field_fraction`` * the field reached on both sides) of
    both branches gives at once

        moment = offset + Ms * sign(H) + chi * mu0H + drift * (tau - tau_turn)

    where tau is the measurement time (or index) and tau_turn that of the
    negative turning point.  The drift term is the closure mismatch of the
    loop spread linearly over time: the positive high-field points are
    measured at the start and at the end of the loop, so a mismatch between
    them (at equal field) is what fixes the drift rate.  The offset is the
    mean of the moments at +Hmax and -Hmax (centring in moment); Ms is the
    saturation moment of the ferromagnetic part after the linear high-field
    slope chi (the paramagnetic plus high-field susceptibility, a result in
    A m^2/T) is removed.  The field axis is never shifted: a horizontal shift
    can be physical (exchange bias); it is reported as a diagnostic, and Hc is
    half the distance between the two zero crossings, which is blind to it.
    Mr is half the difference of the two branches at zero field, which is
    blind to any moment offset.  Both come from local polynomial fits around
    the crossing whose window grows only while its estimate stays consistent
    with those of smaller windows (Lepski's rule), so that a sharp feature of
    the loop near the crossing does not bias them.  Their uncertainties add
    three parts: the noise (the larger of the high-field and the local
    residual scatter), a local-misfit term (the change of the estimate when
    the polynomial degree is raised, or when the window grows by the point
    that stopped it), and the uncertainty of the fitted offset, slope and
    drift, propagated to first order.

Backfield (:func:`analyse_backfield`, method ``backfield-zero-crossing``)
    Hcr is the back field at which the remanence crosses zero, from a local
    polynomial fit against ln|mu0H| around the crossing.

Day plot (:func:`day_plot`, method ``day-plot``)
    Combines a loop and a backfield result into Mr/Ms and Hcr/Hc and a
    domain-state label from the boundaries of Day et al. (1977), each a named
    parameter.

Temperature series (:func:`loop_temperature_series`, method
``loop-temperature-series``) collects Hc(T) and Ms(T) from loops measured at
several temperatures, with weighted linear trends.

References
----------
Day, R., Fuller, M. & Schmidt, V. A. (1977). Hysteresis properties of
titanomagnetites: grain-size and compositional dependence. Phys. Earth Planet.
Inter. 13, 260-267.
Dunlop, D. J. (2002). Theory and application of the Day plot (Mrs/Ms versus
Hcr/Hc) 1. Theoretical curves and tests using titanomagnetite data. J. Geophys.
Res. 107(B3), 2056.
Tauxe, L. (2010). Essentials of Paleomagnetism, University of California Press,
chapter 5 (hysteresis, high-field slope correction, the Day plot).
"""

from __future__ import annotations

from typing import Any, NamedTuple, Sequence

import numpy as np
from scipy import constants

from ..errors import InvalidValue
from .results import Outcome, ResultValue

__all__ = [
    "LOOP_METHOD",
    "BACKFIELD_METHOD",
    "DAY_PLOT_METHOD",
    "SERIES_METHOD",
    "VERSION",
    "analyse_loop",
    "analyse_loop_blocks",
    "analyse_backfield",
    "day_plot",
    "domain_state",
    "loop_temperature_series",
]

LOOP_METHOD = "loop-corrected"
BACKFIELD_METHOD = "backfield-zero-crossing"
DAY_PLOT_METHOD = "day-plot"
SERIES_METHOD = "loop-temperature-series"
VERSION = "1.0"

_MIN_LOOP_POINTS = 20
_MIN_BACKFIELD_POINTS = 5
# A high-field group whose mean residual sits this many standard errors from
# zero means the branches do not close there (unsaturated loop, non-linear drift).
_CLOSURE_Z_WARN = 4.0


# ----------------------------------------------------------------------------
# small numerical helpers
# ----------------------------------------------------------------------------

def _as_pair(mu0H_T, moment, *, minimum: int) -> tuple[np.ndarray, np.ndarray]:
    field = np.asarray(mu0H_T, dtype=float).ravel()
    m = np.asarray(moment, dtype=float).ravel()
    if field.size != m.size:
        raise InvalidValue(f"mu0H_T has {field.size} points but moment has {m.size}; "
                           "expected one moment per field", field="moment")
    if field.size < minimum:
        raise InvalidValue(f"mu0H_T: {field.size} points; expected at least {minimum}",
                           field="mu0H_T")
    for name, arr in (("mu0H_T", field), ("moment", m)):
        bad = np.flatnonzero(~np.isfinite(arr))
        if bad.size:
            raise InvalidValue(f"{name}: non-finite value at point {int(bad[0])} "
                               f"(0-based); expected finite numbers", field=name)
    return field, m


class _LocalFit:
    """Least-squares polynomial of ``y`` against ``x`` near ``centre``.

    Uses the ``points`` samples nearest to ``centre`` in x.  The polynomial is
    written in u = (x - centre) / scale for conditioning; ``cov_unit`` is
    (V^T V)^-1, to be multiplied by the noise variance.
    """

    def __init__(self, x: np.ndarray, y: np.ndarray, centre: float, *, points: int, degree: int):
        order = np.argsort(np.abs(x - centre), kind="stable")[:points]
        xs, ys = x[order], y[order]
        self.centre = float(centre)
        self.scale = float(np.max(np.abs(xs - centre))) or 1.0
        self.x = xs
        u = (xs - centre) / self.scale
        vander = np.vander(u, degree + 1, increasing=True)
        self.coef, *_ = np.linalg.lstsq(vander, ys, rcond=None)
        # pinv: repeated field values (a hold at one field) must not break the fit
        self.cov_unit = np.linalg.pinv(vander.T @ vander)
        resid = ys - vander @ self.coef
        self.dof = xs.size - (degree + 1)
        self.residual_sd = float(np.sqrt(resid @ resid / self.dof)) if self.dof > 0 else 0.0
        self.degree = degree

    def _u(self, x: float) -> float:
        return (x - self.centre) / self.scale

    def value(self, x: float) -> float:
        return float(np.polynomial.polynomial.polyval(self._u(x), self.coef))

    def slope(self, x: float) -> float:
        d = np.polynomial.polynomial.polyder(self.coef)
        return float(np.polynomial.polynomial.polyval(self._u(x), d)) / self.scale

    def value_sd(self, x: float, noise_sd: float) -> float:
        v = self._u(x) ** np.arange(self.degree + 1)
        return float(noise_sd * np.sqrt(v @ self.cov_unit @ v))

    def root_near(self, guess: float) -> float | None:
        """Real root nearest ``guess`` inside the fitted span, else None."""
        roots = np.polynomial.polynomial.polyroots(self.coef)
        roots = roots[np.abs(roots.imag) < 1e-9].real
        if roots.size == 0:
            return None
        x_roots = self.centre + self.scale * roots
        inside = x_roots[(x_roots >= self.x.min()) & (x_roots <= self.x.max())]
        if inside.size == 0:
            return None
        return float(inside[np.argmin(np.abs(inside - guess))])


def _crossing_guess(x: np.ndarray, y: np.ndarray) -> float | None:
    """Median of the zero crossings of y (in the order given), by linear interpolation."""
    s = np.sign(y)
    idx = np.flatnonzero(s[:-1] * s[1:] < 0)
    exact = np.flatnonzero(y == 0)
    if idx.size == 0 and exact.size == 0:
        return None
    cross = list(x[exact])
    for i in idx:
        cross.append(x[i] - y[i] * (x[i + 1] - x[i]) / (y[i + 1] - y[i]))
    return float(np.median(cross))


def _local_root(x: np.ndarray, y: np.ndarray, guess: float, *, points: int, degree: int,
                iterations: int = 2) -> tuple[_LocalFit, float] | None:
    """Zero of y(x) near ``guess``: fit, re-centre on the root, fit again."""
    centre = guess
    fit = None
    root = None
    for _ in range(iterations):
        fit = _LocalFit(x, y, centre, points=points, degree=degree)
        root = fit.root_near(centre)
        if root is None:
            return None
        centre = root
    return fit, float(root)


class _LocalEstimate(NamedTuple):
    value: float        # y at the point asked for, or the root
    u_noise: float      # standard uncertainty from the noise
    u_model: float      # change when the degree is raised by one (local misfit)
    slope: float        # dy/dx there
    points: int         # points of the window chosen


def _fit_estimate(x: np.ndarray, y: np.ndarray, target: float, find_root: bool, *, points: int,
                  degree: int) -> tuple[float, _LocalFit] | None:
    if not find_root:
        fit = _LocalFit(x, y, target, points=points, degree=degree)
        return fit.value(target), fit
    found = _local_root(x, y, target, points=points, degree=degree)
    if found is None or found[0].slope(found[1]) == 0:
        return None
    return found[1], found[0]


def _local_estimate(x: np.ndarray, y: np.ndarray, target: float, *, find_root: bool,
                    max_points: int, degree: int, noise_floor: float,
                    agreement_sigma: float) -> _LocalEstimate | None:
    """A local polynomial estimate of y(target), or of the root of y near target.

    The window (the points nearest the target) grows from degree + 2 points
    up to ``max_points`` while its estimate agrees, within ``agreement_sigma``
    noise standard deviations, with those of every smaller window (Lepski's
    rule): a sharp feature nearby stops the growth before it biases the
    estimate, a smooth curve uses the whole window to average the noise.  The
    noise level is ``noise_floor`` when given (from the many high-field
    points), else the residual scatter of the largest window.  The final
    estimate carries a noise part and a model part: the change of the
    estimate when the degree is raised by one on the same points (a local
    misfit estimate in the manner of Richardson's error estimate).
    """
    max_points = min(max_points, x.size)
    smallest = degree + 2
    if max_points < smallest:
        return None
    if noise_floor > 0:
        noise = noise_floor
    else:
        noise = _LocalFit(x, y, target, points=max_points, degree=degree + 1).residual_sd
    chosen = None
    rejected_step = 0.0
    history: list[tuple[float, float]] = []
    for k in range(smallest, max_points + 1):
        got = _fit_estimate(x, y, target, find_root, points=k, degree=degree)
        if got is None:
            if chosen is None:
                continue
            break
        est, fit = got
        slope = fit.slope(est) if find_root else 1.0
        sd = fit.value_sd(est if find_root else target, noise) / abs(slope)
        if any(abs(est - e) > agreement_sigma * s for e, s in history):
            # The jump that stopped the growth shows how fast the bias grows
            # here: it bounds the bias of the window kept.
            rejected_step = abs(est - chosen[1])
            break
        history.append((est, sd))
        chosen = (k, est, fit)
    if chosen is None:
        return None
    k, est, fit = chosen
    at = est if find_root else target
    richer = _LocalFit(x, y, fit.centre, points=k, degree=degree + 1)
    slope = fit.slope(at)
    if find_root:
        other = richer.root_near(est)
        # Without a root of its own, the richer fit's value at the root,
        # turned into a shift along x by the slope, measures the same misfit.
        u_model = abs(other - est) if other is not None else abs(richer.value(est) / slope)
    else:
        u_model = abs(richer.value(target) - est)
    u_model = max(u_model, rejected_step)
    final_noise = max(noise_floor, richer.residual_sd)
    u_noise = fit.value_sd(at, final_noise) / (abs(slope) if find_root else 1.0)
    return _LocalEstimate(float(est), float(u_noise), float(u_model), float(slope), int(k))


def _ratio_uncertainty(num: float, u_num: float | None, den: float, u_den: float | None) -> float | None:
    if u_num is None or u_den is None or num == 0 or den == 0:
        return None
    r = num / den
    return float(abs(r) * np.hypot(u_num / num, u_den / den))


# ----------------------------------------------------------------------------
# loop
# ----------------------------------------------------------------------------

def _split_branches(field: np.ndarray, high_field_fraction: float) -> tuple[int, int, int] | None:
    """Start, turning point and end of a loop measured +Hmax -> -Hmax -> +Hmax.

    Points before the start (a virgin curve) and after the end (a return to
    zero) are not part of the loop.  Returns None when the field does not go
    down from a high positive value to a high negative one and back up.
    """
    turn = int(np.argmin(field))
    low = -field[turn]
    if low <= 0 or turn == 0 or turn == field.size - 1:
        return None
    start = int(np.argmax(field[:turn + 1]))
    end = turn + int(np.argmax(field[turn:]))
    top = min(field[start], field[end])
    if top <= 0 or min(top, low) < high_field_fraction * max(top, low):
        return None
    return start, turn, end


def analyse_loop(mu0H_T, moment, *, time_s=None, mass_kg: float | None = None,
                 mass_uncertainty_kg: float | None = None,
                 block_temperature_K: float | None = None,
                 high_field_fraction: float = 0.7, correct_drift: bool = True,
                 approach_exponent: float | None = None,
                 local_points: int = 11, local_degree: int = 2,
                 window_agreement_sigma: float = 2.0) -> Outcome:
    """Ms, Mr, Hc and the high-field susceptibility of one hysteresis loop.

    Parameters
    ----------
    mu0H_T : array_like
        Applied field, mu0*H in tesla, in the order measured.  The loop is
        +Hmax -> -Hmax -> +Hmax or -Hmax -> +Hmax -> -Hmax; a leading virgin
        curve and a trailing return to zero are left out.
    moment : array_like
        Moment, A m^2, one per field value.
    time_s : array_like, optional
        Measurement times, s; the drift is linear in time when given, in the
        measurement index otherwise.
    mass_kg : float, optional
        Specimen mass, kg; adds mass-normalised results.
    mass_uncertainty_kg : float, optional
        Standard uncertainty of the mass, kg.
    block_temperature_K : float, optional
        Temperature of this block of a multi-block run, K (None otherwise);
        copied onto every result.
    high_field_fraction : float
        The high-field fit uses |mu0H| >= high_field_fraction * Hmax, Hmax the
        smaller of the fields reached on the two sides (0 < f < 1).
    correct_drift : bool
        Fit and remove a moment drift linear in time (closure correction).
    approach_exponent : float, optional
        Adds a term sign(H) |mu0H|^p to the high-field fit (approach to
        saturation, e.g. p = -2; Fabian 2006); by default the ferromagnetic
        part is taken as saturated above the high-field threshold.
    local_points, local_degree : int
        Largest window (points nearest the target) and polynomial degree of
        the local fits that give Mr (at zero field) and the coercive
        crossings.
    window_agreement_sigma : float
        A local window stops growing when its estimate differs from that of
        a smaller window by more than this many noise standard deviations.

    Returns
    -------
    Outcome
        Method ``loop-corrected``.  Results: ``Ms`` (A m^2), ``Mr`` (A m^2),
        ``Hc`` (T), ``Mr_Ms`` (1), ``chi_high_field`` (A m^2/T) and, when the
        mass is known, ``Ms_mass``, ``Mr_mass`` (A m^2/kg) and
        ``chi_high_field_mass`` (m^3/kg, i.e. mu0 * chi_high_field / mass).
        ``Hc`` is missing (with a warning) when a branch does not cross
        zero.  Diagnostics hold the fitted high-field range, offset,
        drift, loop shift and closure checks.

    Raises
    ------
    InvalidValue
        Arrays of different length, too short, not finite, or not a loop.

    References
    ----------
    Tauxe, L. (2010), Essentials of Paleomagnetism, ch. 5 (slope correction,
    Ms, Mr, Hc).  Fabian, K. (2006), Approach to saturation analysis of
    hysteresis measurements in rock magnetism, Phys. Earth Planet. Inter. 154,
    299-307 (the optional approach term).  Lepskii, O. V. (1990), On a
    problem of adaptive estimation in Gaussian white noise, Theory Probab.
    Appl. 35, 454-466 (the window rule).
    """
    field, m = _as_pair(mu0H_T, moment, minimum=_MIN_LOOP_POINTS)
    if not 0.0 < high_field_fraction < 1.0:
        raise InvalidValue(f"high_field_fraction: {high_field_fraction!r}; expected a number "
                           "between 0 and 1", field="high_field_fraction")
    if local_degree < 1 or local_points < local_degree + 3:
        raise InvalidValue(f"local_points={local_points}, local_degree={local_degree}: expected "
                           "degree >= 1 and at least degree + 3 points", field="local_points")
    if mass_kg is not None and not (np.isfinite(mass_kg) and mass_kg > 0):
        raise InvalidValue(f"mass_kg: {mass_kg!r}; expected a positive mass in kg", field="mass_kg")
    if time_s is None:
        tau = np.arange(field.size, dtype=float)
        time_axis = "index"
    else:
        tau = np.asarray(time_s, dtype=float).ravel()
        if tau.size != field.size or not np.all(np.isfinite(tau)):
            raise InvalidValue("time_s: expected one finite time per field value", field="time_s")
        time_axis = "time_s"

    parameters: dict[str, Any] = {
        "high_field_fraction": high_field_fraction, "correct_drift": correct_drift,
        "approach_exponent": approach_exponent, "local_points": local_points,
        "local_degree": local_degree, "window_agreement_sigma": window_agreement_sigma,
        "drift_axis": time_axis, "mass_kg": mass_kg,
        "mass_uncertainty_kg": mass_uncertainty_kg, "block_temperature_K": block_temperature_K,
    }
    warnings: list[str] = []

    # A loop measured -Hmax -> +Hmax -> -Hmax is the same loop turned through
    # 180 degrees: analyse (-H, -M), whose Ms, Mr, Hc and slope are the same.
    flipped = False
    split = _split_branches(field, high_field_fraction)
    if split is None:
        split = _split_branches(-field, high_field_fraction)
        flipped = split is not None
    if split is None:
        raise InvalidValue("mu0H_T: not a hysteresis loop; expected the field to sweep from one "
                           "high value through the opposite one and back, reaching similar "
                           "magnitudes on both sides", field="mu0H_T")
    sign = -1.0 if flipped else 1.0
    field, m = sign * field, sign * m
    start, turn, end = split
    used = np.arange(start, end + 1)
    h_max = float(min(field[start], -field[turn], field[end]))
    threshold = high_field_fraction * h_max

    # Scaled regressors keep the normal matrix well conditioned.
    tau_span = float(np.ptp(tau[used])) or 1.0
    tau_s = (tau - tau[turn]) / tau_span
    h_s = field / h_max
    hf = used[np.abs(field[used]) >= threshold]
    columns = [np.ones(hf.size), np.sign(field[hf]), h_s[hf]]
    names = ["offset", "Ms", "chi"]
    if correct_drift:
        columns.append(tau_s[hf])
        names.append("drift")
    if approach_exponent is not None:
        columns.append(np.sign(field[hf]) * np.abs(h_s[hf]) ** approach_exponent)
        names.append("approach")
    design = np.column_stack(columns)
    if hf.size - design.shape[1] < 3:
        raise InvalidValue(f"mu0H_T: only {hf.size} points with |mu0H| >= {threshold:.4g} T; "
                           "expected more high-field points (lower high_field_fraction)",
                           field="high_field_fraction")
    if np.linalg.matrix_rank(design) < design.shape[1]:
        raise InvalidValue("time_s: the high-field points cannot separate drift from saturation "
                           "(times not increasing?); pass correct_drift=False or check the times",
                           field="time_s" if time_axis == "time_s" else "mu0H_T")
    coef, *_ = np.linalg.lstsq(design, m[hf], rcond=None)
    resid = m[hf] - design @ coef
    dof = hf.size - design.shape[1]
    hf_sd = float(np.sqrt(resid @ resid / dof))
    cov = hf_sd ** 2 * np.linalg.inv(design.T @ design)
    k = {n: i for i, n in enumerate(names)}

    # Closure check: each quarter of the high-field data should scatter about zero.
    closure: dict[str, float] = {}
    branch_of = np.where(hf <= turn, "descending", "ascending")
    for br in ("descending", "ascending"):
        for side, label in ((1.0, "positive"), (-1.0, "negative")):
            sel = (branch_of == br) & (np.sign(field[hf]) == side)
            if sel.sum() >= 2:
                closure[f"{br}_{label}"] = float(resid[sel].mean() / (hf_sd / np.sqrt(sel.sum())))
    if closure and max(abs(v) for v in closure.values()) > _CLOSURE_Z_WARN:
        warnings.append("high-field branches do not close (mean residuals "
                        + ", ".join(f"{key} {val:+.1f} sd" for key, val in closure.items())
                        + "): the loop may not be saturated or the drift not linear")

    def correction_gradient(h: float, t_scaled: float) -> np.ndarray:
        """d(correction)/d(coef) at a point: the correction is offset + chi h + drift t."""
        g = np.zeros(len(names))
        g[k["offset"]] = 1.0
        g[k["chi"]] = h / h_max
        if correct_drift:
            g[k["drift"]] = t_scaled
        return g

    corrected = m - coef[k["offset"]] - coef[k["chi"]] * h_s
    if correct_drift:
        corrected = corrected - coef[k["drift"]] * tau_s

    ms = float(coef[k["Ms"]])
    u_ms = float(np.sqrt(cov[k["Ms"], k["Ms"]]))
    chi = float(coef[k["chi"]] / h_max)
    u_chi = float(np.sqrt(cov[k["chi"], k["chi"]]) / h_max)

    branches = {"descending": np.arange(start, turn + 1), "ascending": np.arange(turn, end + 1)}
    remanence: dict[str, tuple[float, float, np.ndarray]] = {}
    crossings: dict[str, tuple[float, float, float, np.ndarray]] = {}
    windows: dict[str, dict[str, float]] = {}
    for br, idx in branches.items():
        x, y, t = field[idx], corrected[idx], tau_s[idx]
        order = np.argsort(x, kind="stable")
        options = dict(max_points=local_points, degree=local_degree, noise_floor=hf_sd,
                       agreement_sigma=window_agreement_sigma)
        at_zero = _local_estimate(x, y, 0.0, find_root=False, **options)
        if at_zero is None:
            raise InvalidValue(f"mu0H_T: the {br} branch has too few points near zero field",
                               field="mu0H_T")
        t_zero = float(np.interp(0.0, x[order], t[order]))
        remanence[br] = (at_zero.value, float(np.hypot(at_zero.u_noise, at_zero.u_model)),
                         correction_gradient(0.0, t_zero))
        windows[f"{br}_remanence"] = {"points": at_zero.points, "model_uncertainty_A_m2": at_zero.u_model}
        guess = _crossing_guess(x, y)
        cross = None if guess is None else _local_estimate(x, y, guess, find_root=True, **options)
        if cross is None:
            continue
        t_root = float(np.interp(cross.value, x[order], t[order]))
        crossings[br] = (cross.value, float(np.hypot(cross.u_noise, cross.u_model)), cross.slope,
                         correction_gradient(cross.value, t_root))
        windows[f"{br}_crossing"] = {"points": cross.points, "model_uncertainty_T": cross.u_model}

    # Mr = (M_desc(0) - M_asc(0)) / 2; a correction error dtheta moves each by -g . dtheta.
    (r_d, u_d, g_d), (r_a, u_a, g_a) = remanence["descending"], remanence["ascending"]
    mr = 0.5 * (r_d - r_a)
    jac_mr = -0.5 * (g_d - g_a)
    u_mr = float(np.sqrt(0.25 * (u_d ** 2 + u_a ** 2) + jac_mr @ cov @ jac_mr))
    vertical_shift = 0.5 * (r_d + r_a)

    hc = u_hc = loop_shift = None
    if len(crossings) == 2:
        (h_d, uh_d, s_d, gc_d), (h_a, uh_a, s_a, gc_a) = crossings["descending"], crossings["ascending"]
        hc = 0.5 * (h_a - h_d)
        # A correction error dtheta changes the moment by -g . dtheta and moves
        # the root by +g . dtheta / slope.
        jac_hc = 0.5 * (gc_a / s_a - gc_d / s_d)
        u_hc = float(np.sqrt(0.25 * (uh_d ** 2 + uh_a ** 2) + jac_hc @ cov @ jac_hc))
        loop_shift = sign * 0.5 * (h_a + h_d)
        if hc <= 0:
            warnings.append(f"zero crossings in the wrong order (Hc = {hc:.3g} T): "
                            "check the field sign convention")
    else:
        missing = sorted(set(branches) - set(crossings))
        warnings.append(f"no zero crossing found on the {' and '.join(missing)} branch: Hc not given")

    block = None if block_temperature_K is None else float(block_temperature_K)
    fitted_range = [float(threshold), float(np.max(np.abs(field[hf])))]

    def result(quantity: str, value: float, uncertainty: float | None, unit: str,
               diagnostics: dict[str, Any] | None = None) -> ResultValue:
        return ResultValue(quantity=quantity, value=float(value),
                           uncertainty=None if uncertainty is None else float(uncertainty),
                           unit=unit, method=LOOP_METHOD, block_temperature_K=block,
                           diagnostics=diagnostics or {})

    results = [
        result("Ms", ms, u_ms, "A m^2"),
        result("Mr", mr, u_mr, "A m^2"),
        result("chi_high_field", chi, u_chi, "A m^2/T",
               {"fitted_range_T": fitted_range, "points": int(hf.size)}),
    ]
    if hc is not None:
        results.append(result("Hc", hc, u_hc, "T"))
    results.append(result("Mr_Ms", mr / ms, _ratio_uncertainty(mr, u_mr, ms, u_ms), "1"))
    if mass_kg is not None:
        rel_mass = 0.0 if mass_uncertainty_kg is None else mass_uncertainty_kg / mass_kg

        def per_mass(value: float, uncertainty: float) -> tuple[float, float]:
            v = value / mass_kg
            return v, abs(v) * float(np.hypot(uncertainty / value if value else 0.0, rel_mass))

        results.append(result("Ms_mass", *per_mass(ms, u_ms), "A m^2/kg"))
        results.append(result("Mr_mass", *per_mass(mr, u_mr), "A m^2/kg"))
        chi_mass, u_chi_mass = per_mass(chi * constants.mu_0, u_chi * constants.mu_0)
        results.append(result("chi_high_field_mass", chi_mass, u_chi_mass, "m^3/kg",
                              {"fitted_range_T": fitted_range}))

    diagnostics: dict[str, Any] = {
        "branch_order": "negative-first" if flipped else "positive-first",
        "loop_points": [int(start), int(turn), int(end)],
        "points_outside_loop": int(field.size - used.size),
        "high_field_range_T": fitted_range,
        "high_field_points": int(hf.size),
        "high_field_residual_sd_A_m2": hf_sd,
        "local_windows": windows,
        "moment_offset_A_m2": sign * float(coef[k["offset"]]),
        "moment_offset_uncertainty_A_m2": float(np.sqrt(cov[k["offset"], k["offset"]])),
        "closure_z": closure,
        "vertical_shift_A_m2": sign * float(vertical_shift),
        "loop_shift_T": loop_shift,
    }
    if correct_drift:
        per_unit = 1.0 / tau_span
        diagnostics["drift_per_" + ("s" if time_axis == "time_s" else "point") + "_A_m2"] = \
            sign * float(coef[k["drift"]]) * per_unit
        span = float(tau_s[end] - tau_s[start])
        diagnostics["closure_mismatch_A_m2"] = sign * float(coef[k["drift"]]) * span
        diagnostics["closure_mismatch_uncertainty_A_m2"] = float(
            np.sqrt(cov[k["drift"], k["drift"]])) * span
    if approach_exponent is not None:
        diagnostics["approach_coefficient_A_m2"] = float(coef[k["approach"]])
    return Outcome(method=LOOP_METHOD, version=VERSION, parameters=parameters,
                   results=tuple(results), warnings=tuple(warnings), diagnostics=diagnostics)


def analyse_loop_blocks(mu0H_T, moment, block_temperature_K, *, time_s=None,
                        **loop_options: Any) -> tuple[Outcome, ...]:
    """Analyse each block of a multi-block loop run (one loop per temperature).

    Parameters
    ----------
    mu0H_T, moment : array_like
        The run's long table: field (T) and moment (A m^2).
    block_temperature_K : array_like
        The block key of each row, K; rows with the same value form one loop,
        kept in the order given.
    time_s : array_like, optional
        Measurement times, s, split like the other columns.
    **loop_options
        Passed to :func:`analyse_loop` (``mass_kg``, ``high_field_fraction``...).

    Returns
    -------
    tuple of Outcome
        One per block, in the order the blocks first appear, each with
        ``block_temperature_K`` set on its results.
    """
    field = np.asarray(mu0H_T, dtype=float).ravel()
    m = np.asarray(moment, dtype=float).ravel()
    blocks = np.asarray(block_temperature_K, dtype=float).ravel()
    if not (field.size == m.size == blocks.size):
        raise InvalidValue("mu0H_T, moment and block_temperature_K: expected the same length",
                           field="block_temperature_K")
    times = None if time_s is None else np.asarray(time_s, dtype=float).ravel()
    _, first = np.unique(blocks, return_index=True)
    outcomes = []
    for key in blocks[np.sort(first)]:
        sel = blocks == key
        outcomes.append(analyse_loop(field[sel], m[sel], time_s=None if times is None else times[sel],
                                     block_temperature_K=float(key), **loop_options))
    return tuple(outcomes)


# ----------------------------------------------------------------------------
# backfield
# ----------------------------------------------------------------------------

def analyse_backfield(mu0H_T, moment, *, block_temperature_K: float | None = None,
                      local_points: int = 7, local_degree: int = 2,
                      window_agreement_sigma: float = 2.0, log_field: bool = True) -> Outcome:
    """Coercivity of remanence Hcr: the back field that brings the remanence to zero.

    Parameters
    ----------
    mu0H_T : array_like
        Back fields, mu0*H in tesla, applied opposite to the saturating field
        (stored negative, or as magnitudes: only |mu0H| is used).  When the
        file also holds points of the other sign (the saturating step), the
        sign held by most non-zero points is taken as the back-field sign and
        the others are left out.
    moment : array_like
        Remanent moment after each back field, A m^2.
    block_temperature_K : float, optional
        Temperature of this block of a multi-block run, K.
    local_points, local_degree : int
        Largest window and polynomial degree of the local fit around the
        crossing (the window rule of :func:`analyse_loop`).
    window_agreement_sigma : float
        As for :func:`analyse_loop`.
    log_field : bool
        Fit against ln|mu0H| (the remanence is close to linear in log field
        near Hcr); against |mu0H| otherwise.

    Returns
    -------
    Outcome
        Method ``backfield-zero-crossing``; result ``Hcr`` (T, positive), its
        standard uncertainty (noise from the residual scatter of a fit one
        degree richer over the largest window, plus the local-misfit term of
        :func:`analyse_loop`), and
        ``Mrs_backfield`` (A m^2), the remanence before the first back field.
        No ``Hcr`` (and a warning) when the remanence never crosses zero.

    References
    ----------
    Tauxe, L. (2010), Essentials of Paleomagnetism, ch. 5 (coercivity of
    remanence from the backfield curve).
    """
    field, m = _as_pair(mu0H_T, moment, minimum=_MIN_BACKFIELD_POINTS)
    if local_degree < 1 or local_points < local_degree + 3:
        raise InvalidValue(f"local_points={local_points}, local_degree={local_degree}: expected "
                           "degree >= 1 and at least degree + 3 points", field="local_points")
    parameters: dict[str, Any] = {"local_points": local_points, "local_degree": local_degree,
                                  "window_agreement_sigma": window_agreement_sigma,
                                  "log_field": log_field, "block_temperature_K": block_temperature_K}
    warnings: list[str] = []
    nonzero = field[field != 0]
    back_sign = -1.0 if np.sum(nonzero < 0) >= np.sum(nonzero > 0) else 1.0
    keep = np.sign(field) != -back_sign
    dropped = int(field.size - keep.sum())
    if dropped:
        warnings.append(f"{dropped} point(s) with a field of the saturating sign left out")
    magnitude, rem = np.abs(field[keep]), m[keep]
    order = np.argsort(magnitude, kind="stable")
    magnitude, rem = magnitude[order], rem[order]
    if magnitude.size < _MIN_BACKFIELD_POINTS:
        raise InvalidValue(f"mu0H_T: {magnitude.size} back-field points; expected at least "
                           f"{_MIN_BACKFIELD_POINTS}", field="mu0H_T")
    # Remanence from a negative saturation starts negative: turn it over.
    polarity = 1.0 if rem[0] >= 0 else -1.0
    rem = polarity * rem
    block = None if block_temperature_K is None else float(block_temperature_K)
    results = [ResultValue(quantity="Mrs_backfield", value=float(polarity * rem[0]), uncertainty=None,
                           unit="A m^2", method=BACKFIELD_METHOD, block_temperature_K=block,
                           diagnostics={"at_field_T": float(back_sign * magnitude[0])})]
    usable = magnitude > 0 if log_field else np.ones(magnitude.size, dtype=bool)
    x = np.log(magnitude[usable]) if log_field else magnitude[usable]
    y = rem[usable]
    diagnostics: dict[str, Any] = {"points_left_out": dropped,
                                   "largest_back_field_T": float(magnitude[-1])}
    guess = _crossing_guess(x, y) if x.size >= local_degree + 2 else None
    cross = None if guess is None else _local_estimate(
        x, y, guess, find_root=True, max_points=local_points, degree=local_degree, noise_floor=0.0,
        agreement_sigma=window_agreement_sigma)
    if cross is None:
        warnings.append(f"remanence does not cross zero up to {magnitude[-1]:.4g} T: Hcr not given")
    else:
        u_root = float(np.hypot(cross.u_noise, cross.u_model))
        hcr = float(np.exp(cross.value)) if log_field else cross.value
        u_hcr = hcr * u_root if log_field else u_root
        fit = _LocalFit(x, y, cross.value, points=cross.points, degree=local_degree)
        diagnostics.update({"local_residual_sd_A_m2": fit.residual_sd,
                            "local_dof": int(fit.dof),
                            "window_points": cross.points,
                            "model_uncertainty_T": hcr * cross.u_model if log_field else cross.u_model,
                            "fitted_range_T": [float(np.exp(fit.x.min()) if log_field else fit.x.min()),
                                               float(np.exp(fit.x.max()) if log_field else fit.x.max())]})
        noise_dof = min(local_points, x.size) - (local_degree + 2)
        if noise_dof < 3:
            warnings.append(f"the noise behind the Hcr uncertainty rests on {noise_dof} "
                            "degree(s) of freedom")
        results.insert(0, ResultValue(quantity="Hcr", value=hcr, uncertainty=float(u_hcr), unit="T",
                                      method=BACKFIELD_METHOD, block_temperature_K=block))
    return Outcome(method=BACKFIELD_METHOD, version=VERSION, parameters=parameters,
                   results=tuple(results), warnings=tuple(warnings), diagnostics=diagnostics)


# ----------------------------------------------------------------------------
# Day plot
# ----------------------------------------------------------------------------

def domain_state(mr_ms: float, hcr_hc: float, *, sd_min_mr_ms: float = 0.5,
                 md_max_mr_ms: float = 0.05, sd_max_hcr_hc: float = 1.5,
                 psd_md_hcr_hc: float = 4.0) -> dict[str, str]:
    """Domain-state labels from the Day et al. (1977) boundaries.

    Parameters
    ----------
    mr_ms : float
        Mr/Ms (1).
    hcr_hc : float
        Hcr/Hc (1).
    sd_min_mr_ms : float
        Mr/Ms at and above which a point is single-domain (SD) by remanence.
    md_max_mr_ms : float
        Mr/Ms below which a point is multidomain (MD) by remanence.
    sd_max_hcr_hc : float
        Hcr/Hc at and below which a point is SD by coercivity.
    psd_md_hcr_hc : float
        Hcr/Hc above which a point is MD by coercivity.  Unresolved between
        sources: Tauxe's restatement of Day et al. (1977) gives 5, the value
        usually recalled is 4 (the default); set it explicitly to choose.

    Returns
    -------
    dict
        ``by_mr_ms`` and ``by_hcr_hc`` ("SD", "PSD" or "MD" by each ratio
        alone) and ``domain_state``: the common label when both agree,
        otherwise ``"unclassified"`` (outside the three boxes of the plot,
        e.g. SD with superparamagnetic grains).

    References
    ----------
    Day, Fuller & Schmidt (1977), Phys. Earth Planet. Inter. 13, 260.
    """
    if not md_max_mr_ms < sd_min_mr_ms or not sd_max_hcr_hc < psd_md_hcr_hc:
        raise InvalidValue("Day-plot boundaries: expected md_max_mr_ms < sd_min_mr_ms and "
                           "sd_max_hcr_hc < psd_md_hcr_hc", field="psd_md_hcr_hc")
    by_mr = "SD" if mr_ms >= sd_min_mr_ms else ("MD" if mr_ms < md_max_mr_ms else "PSD")
    by_h = "SD" if hcr_hc <= sd_max_hcr_hc else ("MD" if hcr_hc > psd_md_hcr_hc else "PSD")
    return {"by_mr_ms": by_mr, "by_hcr_hc": by_h,
            "domain_state": by_mr if by_mr == by_h else "unclassified"}


def _find(outcome: Outcome, quantity: str, role: str) -> ResultValue:
    for r in outcome.results:
        if r.quantity == quantity:
            return r
    raise InvalidValue(f"{role}: no {quantity!r} result (method {outcome.method!r}); "
                       f"expected an outcome of {LOOP_METHOD if role == 'loop' else BACKFIELD_METHOD!r}"
                       f" that found it", field=role)


def day_plot(loop: Outcome, backfield: Outcome, *, sd_min_mr_ms: float = 0.5,
             md_max_mr_ms: float = 0.05, sd_max_hcr_hc: float = 1.5,
             psd_md_hcr_hc: float = 4.0, boundary_sigma: float = 2.0,
             temperature_tolerance_K: float = 1.0) -> Outcome:
    """Place one loop and its backfield run on the Day plot.

    The caller pairs the two (a backfield run with the loop of the same
    group, or else the loop of the same specimen nearest in time at the same
    temperature); this function only combines their results.

    Parameters
    ----------
    loop : Outcome
        From :func:`analyse_loop` (needs ``Mr_Ms`` and ``Hc``).
    backfield : Outcome
        From :func:`analyse_backfield` (needs ``Hcr``).
    sd_min_mr_ms, md_max_mr_ms, sd_max_hcr_hc, psd_md_hcr_hc : float
        Boundaries; see :func:`domain_state`.  ``psd_md_hcr_hc`` defaults to
        4 (the value usually recalled); Tauxe's text gives 5.
    boundary_sigma : float
        A ratio within this many standard uncertainties of a boundary is
        listed in ``near_boundaries``: its label is not firm.
    temperature_tolerance_K : float
        Loop and backfield blocks further apart than this give a warning.

    Returns
    -------
    Outcome
        Method ``day-plot``; results ``Mr_Ms`` and ``Hcr_Hc`` (1); diagnostics
        ``domain_state`` ("SD", "PSD", "MD" or "unclassified"), ``by_mr_ms``,
        ``by_hcr_hc``, ``near_boundaries`` and the boundaries used.

    References
    ----------
    Day, R., Fuller, M. & Schmidt, V. A. (1977), Phys. Earth Planet. Inter.
    13, 260-267.  Dunlop, D. J. (2002), J. Geophys. Res. 107(B3), 2056.
    """
    parameters = {"sd_min_mr_ms": sd_min_mr_ms, "md_max_mr_ms": md_max_mr_ms,
                  "sd_max_hcr_hc": sd_max_hcr_hc, "psd_md_hcr_hc": psd_md_hcr_hc,
                  "boundary_sigma": boundary_sigma,
                  "temperature_tolerance_K": temperature_tolerance_K}
    ratio = _find(loop, "Mr_Ms", "loop")
    hc = _find(loop, "Hc", "loop")
    hcr = _find(backfield, "Hcr", "backfield")
    warnings: list[str] = []
    t_loop, t_back = hc.block_temperature_K, hcr.block_temperature_K
    if t_loop is not None and t_back is not None and abs(t_loop - t_back) > temperature_tolerance_K:
        warnings.append(f"loop at {t_loop:g} K paired with a backfield run at {t_back:g} K")
    block = t_loop if t_loop is not None else t_back
    hcr_hc = hcr.value / hc.value
    u_hcr_hc = _ratio_uncertainty(hcr.value, hcr.uncertainty, hc.value, hc.uncertainty)
    labels = domain_state(ratio.value, hcr_hc, sd_min_mr_ms=sd_min_mr_ms,
                          md_max_mr_ms=md_max_mr_ms, sd_max_hcr_hc=sd_max_hcr_hc,
                          psd_md_hcr_hc=psd_md_hcr_hc)
    near: list[str] = []
    for name, value, unc, bounds in (
            ("Mr_Ms", ratio.value, ratio.uncertainty, (md_max_mr_ms, sd_min_mr_ms)),
            ("Hcr_Hc", hcr_hc, u_hcr_hc, (sd_max_hcr_hc, psd_md_hcr_hc))):
        for b in bounds:
            if unc is not None and abs(value - b) <= boundary_sigma * unc:
                near.append(f"{name}={b:g}")
    results = (
        ResultValue(quantity="Mr_Ms", value=ratio.value, uncertainty=ratio.uncertainty, unit="1",
                    method=DAY_PLOT_METHOD, block_temperature_K=block),
        ResultValue(quantity="Hcr_Hc", value=float(hcr_hc), uncertainty=u_hcr_hc, unit="1",
                    method=DAY_PLOT_METHOD, block_temperature_K=block),
    )
    diagnostics = {**labels, "near_boundaries": near, "Hc_T": hc.value, "Hcr_T": hcr.value,
                   "boundaries": {"sd_min_mr_ms": sd_min_mr_ms, "md_max_mr_ms": md_max_mr_ms,
                                  "sd_max_hcr_hc": sd_max_hcr_hc, "psd_md_hcr_hc": psd_md_hcr_hc}}
    return Outcome(method=DAY_PLOT_METHOD, version=VERSION, parameters=parameters,
                   results=results, warnings=tuple(warnings), diagnostics=diagnostics)


# ----------------------------------------------------------------------------
# loops at several temperatures
# ----------------------------------------------------------------------------

def _weighted_line(x: np.ndarray, y: np.ndarray, u: np.ndarray) -> tuple[float, float, float, float, float]:
    """Weighted straight line: slope, its uncertainty, intercept, its uncertainty, Birge ratio.

    Uncertainties are scaled by the Birge ratio sqrt(chi2 / dof) when it
    exceeds 1 (the points scatter more than their uncertainties allow).
    """
    w = 1.0 / u ** 2
    design = np.column_stack([np.ones_like(x), x])
    normal = design.T @ (design * w[:, None])
    cov = np.linalg.inv(normal)
    coef = cov @ (design.T @ (w * y))
    chi2 = float(np.sum(w * (y - design @ coef) ** 2))
    birge = float(np.sqrt(chi2 / (x.size - 2))) if x.size > 2 else 1.0
    scale = max(1.0, birge)
    return (float(coef[1]), float(np.sqrt(cov[1, 1]) * scale), float(coef[0]),
            float(np.sqrt(cov[0, 0]) * scale), birge)


def loop_temperature_series(outcomes: Sequence[Outcome], *,
                            temperatures_K: Sequence[float] | None = None, trend: bool = True,
                            min_points_for_trend: int = 3) -> Outcome:
    """Hc(T) and Ms(T) from loops measured at several temperatures.

    Parameters
    ----------
    outcomes : sequence of Outcome
        Loop outcomes (:func:`analyse_loop`), each with ``block_temperature_K``
        set on its results (the blocks of one multi-block run, from
        :func:`analyse_loop_blocks`), or separate runs of one group with
        ``temperatures_K``.
    temperatures_K : sequence of float, optional
        The temperature of each outcome, K (for a group of single-loop runs,
        from each run's conditions); overrides ``block_temperature_K``.
    trend : bool
        Add weighted straight-line trends ``dHc_dT`` (T/K) and ``dMs_dT``
        (A m^2/K) when there are enough temperatures.
    min_points_for_trend : int
        Fewest distinct temperatures for a trend.

    Returns
    -------
    Outcome
        Method ``loop-temperature-series``; results ``Hc``, ``Ms`` (and
        ``Ms_mass`` when present) at each temperature, sorted by temperature,
        with ``block_temperature_K`` set; the trends, whose diagnostics hold
        the intercept at 0 K and the Birge ratio.

    References
    ----------
    Tauxe, L. (2010), Essentials of Paleomagnetism, ch. 5.
    """
    parameters = {"trend": trend, "min_points_for_trend": min_points_for_trend,
                  "temperatures_K": None if temperatures_K is None else [float(t) for t in temperatures_K]}
    if temperatures_K is not None and len(temperatures_K) != len(outcomes):
        raise InvalidValue(f"temperatures_K: {len(temperatures_K)} values for {len(outcomes)} "
                           "outcomes; expected one temperature per loop", field="temperatures_K")
    rows = []
    for i, oc in enumerate(outcomes):
        if oc.method != LOOP_METHOD:
            raise InvalidValue(f"outcomes[{i}]: method {oc.method!r}; expected {LOOP_METHOD!r}",
                               field="outcomes")
        if temperatures_K is not None:
            rows.append((float(temperatures_K[i]), i, oc))
            continue
        temps = {r.block_temperature_K for r in oc.results}
        if len(temps) != 1 or None in temps:
            raise InvalidValue(f"outcomes[{i}]: results without block_temperature_K; expected "
                               "each loop to carry its temperature, or temperatures_K",
                               field="outcomes")
        rows.append((temps.pop(), i, oc))
    rows.sort(key=lambda row: (row[0], row[1]))
    results: list[ResultValue] = []
    warnings: list[str] = []
    series: dict[str, list[tuple[float, float, float | None]]] = {"Hc": [], "Ms": [], "Ms_mass": []}
    for temperature, _, oc in rows:
        for r in oc.results:
            if r.quantity in series:
                series[r.quantity].append((temperature, r.value, r.uncertainty))
                results.append(ResultValue(quantity=r.quantity, value=r.value, uncertainty=r.uncertainty,
                                           unit=r.unit, method=SERIES_METHOD,
                                           block_temperature_K=temperature))
    if trend:
        for quantity, name, unit in (("Hc", "dHc_dT", "T/K"), ("Ms", "dMs_dT", "A m^2/K")):
            pts = [p for p in series[quantity] if p[2] is not None and p[2] > 0]
            if len({p[0] for p in pts}) < min_points_for_trend:
                warnings.append(f"{name}: fewer than {min_points_for_trend} temperatures with "
                                f"{quantity} and an uncertainty; no trend")
                continue
            t, y, u = (np.array(col, dtype=float) for col in zip(*pts))
            slope, u_slope, intercept, u_intercept, birge = _weighted_line(t, y, u)
            results.append(ResultValue(quantity=name, value=slope, uncertainty=u_slope, unit=unit,
                                       method=SERIES_METHOD,
                                       diagnostics={"intercept_at_0K": intercept,
                                                    "intercept_uncertainty": u_intercept,
                                                    "birge_ratio": birge,
                                                    "temperature_range_K": [float(t.min()), float(t.max())]}))
    diagnostics = {"temperatures_K": [row[0] for row in rows], "loops": len(rows)}
    return Outcome(method=SERIES_METHOD, version=VERSION, parameters=parameters,
                   results=tuple(results), warnings=tuple(warnings), diagnostics=diagnostics)

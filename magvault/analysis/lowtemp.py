"""Low-temperature transitions: derivative peaks of M(T) or chi(T).

A transition below room temperature (the low-temperature transition of 4C
pyrrhotite near 30-34 K, the Verwey transition of magnetite, the Morin
transition of hematite) shows in a thermomagnetic curve as a smooth step,
that is a peak of -dM/dT (or of +dchi/dT).  Each branch (heating = warming,
cooling) is analysed on its own:

1. *Detection.*  Peaks of the Savitzky-Golay derivative, at windows from
   ``savgol_window_K`` doubling up to ``savgol_max_window_K``, that rise
   ``min_peak_snr`` times the derivative's noise above its running median.
2. *Fit.*  Detections closer than two fit half-windows form one cluster,
   fitted over a window that pins the background on both sides with a
   polynomial background plus smooth steps (error-function steps, i.e.
   Gaussian peaks of -dM/dT, or logistic steps: ``step_shape``), by
   nonlinear least squares.
3. *Forward selection.*  The fit starts from the most significant detection;
   further components (the other detections, a split of the strongest, or a
   step at the largest residual derivative) are added one at a time while
   the Bayesian information criterion falls by more than ``bic_margin`` and
   every component stays significant and separated; so two steps a few
   kelvin apart whose derivative peaks merge are still resolved as two.
   Measured resolving power: steps of 5% and 2.5% five kelvin apart with
   derivative FWHM up to about 3.5 K are resolved at 0.3% noise; at 1% noise
   the weaker is often merged into the stronger, which then comes out
   broader and displaced towards it.

Every component gives a row of method ``dmdt-peak`` with its position (the
centre of the -dM/dT peak), standard uncertainty (fit covariance scaled by
the residual variance) and width (full width at half maximum of the peak,
also a result ``transition_width_K``).  Rows of one kind and branch are
numbered by step height (1 = strongest); the derivative peak is the only
method here, so the component-1 row of each kind and branch is the primary
row.  The kind comes from the catalogue (:func:`magvault.catalogue.assign_kind`)
among the kinds that are not ordering transitions; outside every window it
is ``unassigned``.  With both branches, the cooling-minus-heating difference
of each kind's component 1 is a result ``thermal_hysteresis_K``.

:func:`field_dependence` turns estimates of one transition from runs in
several fields into the slope dT/d(mu0 H).

References
----------
Savitzky, A. & Golay, M. J. E. (1964). Anal. Chem. 36, 1627.
Schwarz, G. (1978). Estimating the dimension of a model. Ann. Stat. 6, 461
(Bayesian information criterion).
Bevington, P. R. & Robinson, D. K. (2003). Data Reduction and Error Analysis
for the Physical Sciences, 3rd ed., McGraw-Hill, chapters 6-8 (weighted
least squares; parameter uncertainties from the covariance matrix).
Birge, R. T. (1932). Phys. Rev. 40, 207 (ratio of external to internal
consistency).
These citations are given from memory.
"""

from __future__ import annotations

import dataclasses
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.ndimage import median_filter
from scipy.optimize import OptimizeWarning, curve_fit
from scipy.signal import find_peaks
from scipy.special import ndtr

from ..catalogue import UNASSIGNED, assign_kind, seed_kinds
from ..errors import InvalidValue
from .options import settings_from_options
from .results import Outcome, ResultValue, TransitionEstimate
from .thermomagnetic import (ORDERING_KINDS, TransitionNotFound, UniformCurve, derivative_noise,
                             noise_sigma, savgol, savgol_window_points, split_branches,
                             uniform_curve)

__all__ = ["LowTemperatureSettings", "StepComponent", "find_steps", "analyse_low_temperature",
           "field_dependence"]

VERSION = "1.0"
METHOD_VERSIONS = {"dmdt-peak": VERSION, "field-dependence": VERSION}
#: Full width at half maximum of the derivative peak over the step's scale parameter:
#: Gaussian (erf step) 2 sqrt(2 ln 2); logistic step (sech^2 peak) 2 ln(3 + 2 sqrt 2).
FWHM_PER_SCALE = {"erf": 2.0 * np.sqrt(2.0 * np.log(2.0)), "logistic": 2.0 * np.log(3.0 + 2.0 * np.sqrt(2.0))}
#: Peak of the derivative of a unit step of unit scale: 1/sqrt(2 pi) (erf), 1/4 (logistic).
PEAK_PER_HEIGHT = {"erf": 1.0 / np.sqrt(2.0 * np.pi), "logistic": 0.25}
_INV_SQRT_2PI = 1.0 / np.sqrt(2.0 * np.pi)
_SIGNAL_SIGNS = {"moment": -1.0, "susceptibility": 1.0}


@dataclass(frozen=True)
class LowTemperatureSettings:
    """Every numerical choice of :func:`analyse_low_temperature` (all recorded).

    Attributes
    ----------
    grid_step_K : float or None
        Uniform grid step in K (None: median spacing of the branch).
    step_shape : {"erf", "logistic"}
        Shape of each fitted step: an error function (Gaussian peak of the
        derivative) or a logistic function (sech^2 peak).  Positions are
        insensitive to the choice (both are symmetric); widths are reported
        as the FWHM of the fitted derivative peak either way.
    savgol_window_K : float
        Narrowest Savitzky-Golay window for detection, K (at least
        polyorder + 3 points).
    savgol_max_window_K : float
        Detection runs at windows from ``savgol_window_K`` doubling up to
        this width, K (narrow steps show best at narrow windows, weak broad
        ones at wide windows).  The fit itself uses the raw data.
    savgol_polyorder : int
        Savitzky-Golay polynomial order.
    search_ceiling_K : float
        With ``search_K`` None the search runs from the data start up to
        min(data end, this), below the ordering transition.
    min_peak_snr : float
        Detection: smallest peak height above the running median of the
        derivative, over the noise of the smoothed derivative.
    min_peak_prominence_snr : float
        Detection: smallest prominence over the same noise.
    baseline_window_K : float
        Width of that running median, K.
    fit_half_window_K : float
        The fit window of a cluster reaches this far beyond its outer peaks, K ...
    fit_window_fwhms : float
        ... or this many detected peak widths (FWHM), whichever is more.
    background_degree : int
        Degree of the polynomial background under the steps.
    max_components : int
        Most components per cluster.
    bic_margin : float
        A further component is kept only if the BIC falls by more than this.
    min_component_snr : float
        ... and its step height is at least this many standard uncertainties ...
    min_component_fraction : float
        ... and at least this fraction of the strongest step of the cluster ...
    min_separation_fwhm : float
        ... and its centre lies at least this fraction of the larger FWHM
        from every other centre.
    min_fit_snr : float
        A detected step is reported only if the fit gives it a height of at
        least this many standard uncertainties.
    min_fwhm_points : float
        Narrowest accepted step: the FWHM of its derivative peak must span at
        least this many grid steps (narrower "steps" are noise).
    first_scale_factors : tuple of float
        The first component of a cluster is fitted from the detected width
        times each of these factors; the lowest BIC among significant fits wins.
    max_fit_evaluations : int
        Evaluation budget of one least-squares fit (trials that need more are
        dropped).
    """

    grid_step_K: float | None = None
    step_shape: str = "erf"
    savgol_window_K: float = 1.0
    savgol_max_window_K: float = 8.0
    savgol_polyorder: int = 2
    search_ceiling_K: float = 300.0
    min_peak_snr: float = 5.0
    min_peak_prominence_snr: float = 2.0
    baseline_window_K: float = 30.0
    fit_half_window_K: float = 10.0
    fit_window_fwhms: float = 2.0
    background_degree: int = 2
    max_components: int = 3
    bic_margin: float = 10.0
    min_component_snr: float = 5.0
    min_component_fraction: float = 0.1
    min_separation_fwhm: float = 0.5
    min_fit_snr: float = 3.0
    min_fwhm_points: float = 2.0
    first_scale_factors: tuple[float, ...] = (1.0, 0.5, 0.25)
    max_fit_evaluations: int = 60

    @classmethod
    def from_options(cls, options: dict[str, Any]) -> "LowTemperatureSettings":
        settings = settings_from_options(cls, options)
        for name in ("savgol_window_K", "fit_half_window_K", "search_ceiling_K"):
            value = getattr(settings, name)
            if not (np.isfinite(value) and value > 0):
                raise InvalidValue(f"option {name} must be a positive number of kelvin, got {value!r}",
                                   field=name)
        if settings.step_shape not in FWHM_PER_SCALE:
            raise InvalidValue(f"option step_shape must be one of {', '.join(FWHM_PER_SCALE)}, got "
                               f"{settings.step_shape!r}", field="step_shape")
        if settings.grid_step_K is not None and not settings.grid_step_K > 0:
            raise InvalidValue(f"option grid_step_K must be positive or None, got {settings.grid_step_K!r}",
                               field="grid_step_K")
        if int(settings.max_components) < 1 or int(settings.background_degree) < 0:
            raise InvalidValue("options max_components >= 1 and background_degree >= 0 are required",
                               field="max_components")
        return settings


@dataclass(frozen=True)
class StepComponent:
    """One fitted step (one peak of the signed derivative).

    Attributes
    ----------
    temperature_K, uncertainty_K : float
        Centre of the derivative peak and its standard uncertainty, K.
    width_K, width_uncertainty_K : float
        Full width at half maximum of the derivative peak and its standard
        uncertainty, K.
    height, height_uncertainty : float
        Step height in signal units (positive: a peak of the signed derivative).
    relative_height : float or None
        Height over the background signal at the centre (None on a zero background).
    cluster : int
        Index of the fitted cluster the step belongs to.
    """

    temperature_K: float
    uncertainty_K: float
    width_K: float
    width_uncertainty_K: float
    height: float
    height_uncertainty: float
    relative_height: float | None
    cluster: int


# --------------------------------------------------------------------------
# Model: polynomial background plus error-function steps
# --------------------------------------------------------------------------

def _step_shape(shape: str):
    """Cumulative step F(z) and its derivative f(z) for a step shape; z = (T - T0)/scale."""
    if shape == "erf":
        return ndtr, lambda z: np.exp(-0.5 * z * z) * _INV_SQRT_2PI

    def cumulative(z):
        return 0.5 * (1.0 + np.tanh(0.5 * z))

    def density(z):
        c = cumulative(z)
        return c * (1.0 - c)

    return cumulative, density


def _model_factory(sign: float, t_mid: float, degree: int, n_steps: int, shape: str = "erf",
                   T_fit: np.ndarray | None = None):
    """S(T) = sum_j b_j (T - t_mid)^j + sign * sum_k H_k F((T - T_k)/s_k), with its Jacobian.

    The background design matrix is computed once for `T_fit` (the fit calls
    the model many times on the same temperatures).
    """
    nb = degree + 1
    F, f = _step_shape(shape)
    V_fit = None if T_fit is None else np.vander(T_fit - t_mid, nb, increasing=True)

    def design(T):
        return V_fit if T is T_fit else np.vander(T - t_mid, nb, increasing=True)

    def model(T, *p):
        out = design(T) @ np.asarray(p[:nb])
        for k in range(n_steps):
            t0, sig, h = p[nb + 3 * k: nb + 3 * k + 3]
            out = out + sign * h * F((T - t0) / sig)
        return out

    def jac(T, *p):
        J = np.empty((T.size, nb + 3 * n_steps))
        J[:, :nb] = design(T)
        for k in range(n_steps):
            t0, sig, h = p[nb + 3 * k: nb + 3 * k + 3]
            z = (T - t0) / sig
            dens = f(z)
            J[:, nb + 3 * k] = -sign * h * dens / sig
            J[:, nb + 3 * k + 1] = -sign * h * dens * z / sig
            J[:, nb + 3 * k + 2] = sign * F(z)
        return J

    return model, jac


@dataclass(frozen=True)
class _Fit:
    params: np.ndarray
    cov: np.ndarray
    rss: float
    bic: float
    n_steps: int


def _fit_cluster(T, y, sign, t_mid, degree, steps, bounds_T, sigma_bounds, max_evaluations,
                 shape="erf"):
    """Least-squares fit of background + steps from initial (T_k, sigma_k, H_k).

    Levenberg-Marquardt (MINPACK, through :func:`scipy.optimize.curve_fit`)
    without bounds, for speed; the fit is then refused when a step ends
    outside the window, narrower or wider than `sigma_bounds`, or with a
    negative height (the model is even in (sigma, H) -> (-sigma, -H), so the
    sign of sigma is normalised first), or when it needs more than
    `max_evaluations` evaluations (an unsupported component drifts instead of
    converging).
    """
    n_steps = len(steps)
    model, jac = _model_factory(sign, t_mid, degree, n_steps, shape, T_fit=T)
    cumulative, _ = _step_shape(shape)
    step_part = np.zeros_like(T)
    for t0, sig, h in steps:
        step_part += sign * h * cumulative((T - t0) / sig)
    background = np.polynomial.polynomial.polyfit(T - t_mid, y - step_part, degree)
    p0 = list(background)
    for t0, sig, h in steps:
        p0 += [float(np.clip(t0, *bounds_T)), float(np.clip(sig, *sigma_bounds)), max(float(h), 0.0)]
    try:
        # A fit that cannot estimate its covariance, or overflows while wandering, is a
        # failed trial: both are turned into exceptions here and the trial is dropped.
        with warnings.catch_warnings():
            warnings.simplefilter("error", OptimizeWarning)
            with np.errstate(over="raise", invalid="raise", divide="raise"):
                popt, pcov = curve_fit(model, T, y, p0=p0, jac=jac, method="lm",
                                       maxfev=int(max_evaluations))
    except (RuntimeError, ValueError, OptimizeWarning, FloatingPointError):
        return None
    if not np.all(np.isfinite(pcov)):
        return None
    nb = degree + 1
    for k in range(n_steps):
        j = nb + 3 * k
        if popt[j + 1] < 0:
            # Phi(-z) = 1 - Phi(z): a step (T0, -sigma, H) equals (T0, sigma, -H) with the
            # background constant raised by sign*H; map parameters and covariance linearly
            A = np.eye(popt.size)
            A[j + 1, j + 1] = A[j + 2, j + 2] = -1.0
            A[0, j + 2] = sign
            popt = A @ popt
            pcov = A @ pcov @ A.T
        t0, sig, h = popt[j: j + 3]
        if not (bounds_T[0] <= t0 <= bounds_T[1] and sigma_bounds[0] <= sig <= sigma_bounds[1] and h > 0):
            return None
    rss = float(np.sum((y - model(T, *popt)) ** 2))
    n = T.size
    bic = n * np.log(max(rss, np.finfo(float).tiny) / n) + len(popt) * np.log(n)
    return _Fit(popt, pcov, rss, float(bic), n_steps)


def _components(fit: _Fit, degree: int) -> list[tuple[float, float, float, float, float, float]]:
    nb = degree + 1
    err = np.sqrt(np.clip(np.diag(fit.cov), 0.0, None))
    out = []
    for k in range(fit.n_steps):
        j = nb + 3 * k
        out.append((fit.params[j], err[j], fit.params[j + 1], err[j + 1], fit.params[j + 2], err[j + 2]))
    return out


def _acceptable(fit: _Fit, degree: int, s: LowTemperatureSettings) -> bool:
    """Every component significant, not negligible, and apart from the others."""
    comps = _components(fit, degree)
    strongest = max(c[4] for c in comps)
    to_fwhm = FWHM_PER_SCALE[s.step_shape]
    for i, (t0, _, sig, _, h, uh) in enumerate(comps):
        if not (h >= s.min_component_snr * uh and h >= s.min_component_fraction * strongest):
            return False
        for j, (t1, _, sig1, _, _, _) in enumerate(comps):
            if j != i and abs(t0 - t1) < s.min_separation_fwhm * to_fwhm * max(sig, sig1):
                return False
    return True


def _residual_peaks(T, resid, sign, fwhm_K, step_K, polyorder, count):
    """Positions and heights of the `count` largest peaks of the smoothed residual derivative."""
    w = savgol_window_points(fwhm_K, step_K, polyorder)
    w = min(w, resid.size - (1 - resid.size % 2))
    if w <= polyorder + 1:
        return []
    d = sign * savgol(resid, w, polyorder, step_K, deriv=1)
    idx, props = find_peaks(d, height=0.0)
    top = idx[np.argsort(props["peak_heights"])[::-1][:count]]
    return [(float(T[i]), float(d[i])) for i in top]


def _resolve_cluster(T, y, sign, seeds, curve_step, s: LowTemperatureSettings):
    """Fit one cluster by forward selection of components.

    `seeds` are (T0, scale, H) starting values from the detections, most
    significant first.  The fit starts with the first seed that converges
    alone; then one component at a time is tried: each detection not yet
    covered by a component (within half its FWHM), the strongest component
    split in two, and a new step at one of the two largest peaks of the
    smoothed derivative of the residuals.  The best trial is kept when the
    BIC falls by more than ``bic_margin`` and every component stays
    significant, non-negligible and separated (:func:`_acceptable`);
    otherwise the selection stops.  (Starting from every detection at once
    lets noise spikes on the flanks of a broad step split it.)
    """
    t_mid = float(np.mean(T))
    bounds_T = (float(T[0]), float(T[-1]))
    # narrowest step: its derivative peak must span min_fwhm_points grid steps at half maximum
    shape = s.step_shape
    to_fwhm = FWHM_PER_SCALE[shape]
    sigma_bounds = (s.min_fwhm_points * curve_step / to_fwhm, 0.5 * (T[-1] - T[0]))
    degree = int(s.background_degree)
    budget = int(s.max_fit_evaluations)

    def fit(steps):
        return _fit_cluster(T, y, sign, t_mid, degree, steps, bounds_T, sigma_bounds, budget, shape)

    best = None
    for t_seed, scale, h_seed in seeds:
        # a detection at a wide window over-states the width; start also from
        # narrower scales and keep the lowest BIC among significant fits
        starts = [fit([(t_seed, scale * f, h_seed)]) for f in s.first_scale_factors]
        fits = [f for f in starts if f is not None]
        significant = [f for f in fits
                       if _components(f, degree)[0][4] >= s.min_fit_snr * _components(f, degree)[0][5]]
        if significant or fits:
            best = min(significant or fits, key=lambda f: f.bic)
            break
    if best is None:
        return None
    while best.n_steps < s.max_components:
        comps = _components(best, degree)
        kept = [(c[0], c[2], c[4]) for c in comps]
        trials = [kept + [seed] for seed in seeds
                  if all(abs(seed[0] - c[0]) > 0.5 * to_fwhm * c[2] for c in comps)]
        strongest = max(range(len(comps)), key=lambda k: comps[k][4])
        t0, _, sig, _, h, _ = comps[strongest]
        trials.append([p for k, p in enumerate(kept) if k != strongest]
                      + [(t0 - sig, sig / 1.5, h / 2.0), (t0 + sig, sig / 1.5, h / 2.0)])
        model, _ = _model_factory(sign, t_mid, degree, best.n_steps, shape)
        median_scale = float(np.median([c[2] for c in comps]))
        for t_new, slope in _residual_peaks(T, y - model(T, *best.params), sign, to_fwhm * median_scale,
                                            curve_step, s.savgol_polyorder, 2):
            trials.append(kept + [(t_new, median_scale, slope * median_scale / PEAK_PER_HEIGHT[shape])])
        candidates = [f for f in map(fit, trials) if f is not None
                      and best.bic - f.bic > s.bic_margin and _acceptable(f, degree, s)]
        if not candidates:
            break
        best = min(candidates, key=lambda f: f.bic)
    return best


def _detect(curve: UniformCurve, sign: float, search_K, s: LowTemperatureSettings, sigma: float):
    """Multi-scale detection of peaks of sign * dS/dT.

    Window rule: Savitzky-Golay windows of savgol_window_K, doubled up to
    savgol_max_window_K; at each, a peak must rise min_peak_snr noise units
    (noise of the smoothed derivative) above the running median of the
    derivative over baseline_window_K (prominence alone would let a noise
    spike beside a noise dip through), with a prominence of at least
    min_peak_prominence_snr noise units (low, so that a shoulder on the flank
    of a stronger peak is still seen; the fit prunes what it cannot support).
    A peak found at a wider window that overlaps (lies within half the larger
    width of) exactly one earlier detection replaces it when it stands out
    more (a broad step is seen best at a wide window, and a noise spike on
    its flank at a narrow one); one that overlaps several earlier detections
    is their merger and is dropped.  Returns a list of (position K, FWHM K,
    height above baseline per K, window K, snr), sorted by position.
    """
    T, y = curve.temperature_K, curve.signal
    found: list[tuple[float, float, float, float, float]] = []
    width = float(s.savgol_window_K)
    searched = False
    while width <= s.savgol_max_window_K * (1 + 1e-9):
        w = savgol_window_points(width, curve.step_K, s.savgol_polyorder)
        half = w // 2
        inside = np.flatnonzero((T >= search_K[0]) & (T <= search_K[1]))
        inside = inside[(inside >= half) & (inside < T.size - half)]
        if w > T.size or inside.size < 3:
            break
        searched = True
        d = sign * savgol(y, w, s.savgol_polyorder, curve.step_K, deriv=1)
        seg = d[inside[0]: inside[-1] + 1]
        size = max(3, int(round(s.baseline_window_K / curve.step_K)) | 1)
        base = median_filter(seg, size=min(size, seg.size - (1 - seg.size % 2)), mode="nearest")
        sigma_d = derivative_noise(sigma, w, s.savgol_polyorder, curve.step_K)
        # the relative floor matters for noise-free curves only (rounding noise)
        threshold = max(s.min_peak_snr * sigma_d, 1e-9 * float(np.max(np.abs(seg))))
        prominence = max(s.min_peak_prominence_snr * sigma_d, 1e-9 * float(np.max(np.abs(seg))))
        idx, props = find_peaks(seg - base, height=threshold, prominence=prominence, width=1.0,
                                rel_height=0.5)
        earlier = list(found)
        for i, fwhm_pts, height in zip(idx, props["widths"], props["peak_heights"]):
            t_peak = float(T[inside[0] + i])
            fwhm = float(fwhm_pts * curve.step_K)
            snr = float(height / sigma_d) if sigma_d > 0 else float("inf")
            new = (t_peak, fwhm, float(height), (w - 1) * curve.step_K, snr)
            overlaps = [f for f in earlier if abs(t_peak - f[0]) <= 0.5 * max(fwhm, f[1])]
            if not overlaps:
                found.append(new)
            elif len(overlaps) == 1 and snr > overlaps[0][4] and overlaps[0] in found:
                found[found.index(overlaps[0])] = new
        width *= 2.0
    if not searched:
        raise TransitionNotFound(f"no data inside the search range {search_K[0]:.1f}-{search_K[1]:.1f} K "
                                 "(half a window from the ends)")
    return sorted(found)


def find_steps(curve: UniformCurve, *, sign: float = -1.0, search_K: tuple[float, float],
               settings: LowTemperatureSettings | None = None) -> tuple[list[StepComponent], dict[str, Any]]:
    """Find and fit the steps of one branch (peaks of sign * dS/dT).

    Parameters
    ----------
    curve : UniformCurve
        One branch on a uniform grid.
    sign : float
        -1 for magnetisation (peaks of -dM/dT), +1 for susceptibility
        (peaks of +dchi/dT).
    search_K : (float, float)
        Temperature range searched, K.
    settings : LowTemperatureSettings, optional
        The numerical choices (defaults if None).

    Returns
    -------
    (list of StepComponent, dict)
        The components (any order) and diagnostics (detections, noise, clusters).

    References
    ----------
    Savitzky & Golay (1964); Schwarz (1978).
    """
    s = settings or LowTemperatureSettings()
    T, y = curve.temperature_K, curve.signal
    sigma = noise_sigma(y)
    found = _detect(curve, sign, search_K, s, sigma)
    diag: dict[str, Any] = {"grid_step_K": curve.step_K, "noise_sigma": sigma,
                            "search_K": [float(search_K[0]), float(search_K[1])],
                            "detected": [{"temperature_K": f[0], "fwhm_K": f[1], "window_K": f[3],
                                          "snr": f[4]} for f in found], "clusters": []}
    clusters: list[list[tuple[float, float, float, float, float]]] = []
    for f in found:
        if clusters and f[0] - clusters[-1][-1][0] <= 2.0 * s.fit_half_window_K:
            clusters[-1].append(f)
        else:
            clusters.append([f])
    components: list[StepComponent] = []
    degree = int(s.background_degree)
    for c_index, members in enumerate(clusters):
        # the background must be pinned by data on both sides of the steps: the
        # window reaches fit_half_window_K, or fit_window_fwhms detected widths, beyond them
        reach = max(s.fit_half_window_K, s.fit_window_fwhms * max(f[1] for f in members))
        lo = members[0][0] - reach
        hi = members[-1][0] + reach
        sel = (T >= lo) & (T <= hi)
        if np.count_nonzero(sel) < degree + 1 + 3 * len(members) + 5:
            diag["clusters"].append({"window_K": [float(lo), float(hi)], "fitted": False})
            continue
        # Seeds, most significant detection first: scale from the detection's
        # FWHM, height from the derivative peak height times scale / peak density.
        seeds = []
        for f in sorted(members, key=lambda f: -f[4]):
            scale = max(f[1] / FWHM_PER_SCALE[s.step_shape], curve.step_K)
            seeds.append((f[0], scale, f[2] * scale / PEAK_PER_HEIGHT[s.step_shape]))
        fit = _resolve_cluster(T[sel], y[sel], sign, seeds, curve.step_K, s)
        if fit is None:
            diag["clusters"].append({"window_K": [float(lo), float(hi)], "fitted": False})
            continue
        t_mid = float(np.mean(T[sel]))
        comps = _components(fit, degree)
        background = np.polynomial.polynomial.polyval(np.array([c[0] for c in comps]) - t_mid,
                                                      fit.params[: degree + 1])
        for (t0, ut, sig, us, h, uh), level in zip(comps, background):
            if not h >= s.min_fit_snr * uh:
                continue  # a detected peak the fit cannot support
            components.append(StepComponent(
                temperature_K=float(t0), uncertainty_K=float(ut),
                width_K=float(FWHM_PER_SCALE[s.step_shape] * sig),
                width_uncertainty_K=float(FWHM_PER_SCALE[s.step_shape] * us), height=float(h),
                height_uncertainty=float(uh),
                relative_height=float(h / abs(level)) if level != 0 else None, cluster=c_index))
        diag["clusters"].append({"window_K": [float(lo), float(hi)], "fitted": True,
                                 "n_detected": len(members), "n_components": fit.n_steps,
                                 "bic": fit.bic, "n_points": int(np.count_nonzero(sel))})
    return components, diag


def _non_ordering_kinds(kinds) -> tuple[str, ...]:
    catalogue = kinds if kinds is not None else seed_kinds()
    return tuple(k for k in catalogue if k not in ORDERING_KINDS)


def analyse_low_temperature(temperature_K, signal, branch=None, *, run_kind: str = "thermomagnetic",
                            signal_kind: str = "moment", search_K: tuple[float, float] | None = None,
                            kinds=None, **options) -> Outcome:
    """Low-temperature transitions of each branch: position, width, uncertainty, kind.

    Parameters
    ----------
    temperature_K : array_like
        Temperatures in K, in measured order.
    signal : array_like
        Moment (A m^2 or A m^2/kg) or SI susceptibility, same length.
    branch : array_like of str, optional
        ``"heating"`` (warming) / ``"cooling"`` per row; inferred from the
        temperature direction when None.
    run_kind : str
        Run kind, for the catalogue assignment.
    signal_kind : {"moment", "susceptibility"}
        Peaks of -dM/dT for a moment, of +dchi/dT for a susceptibility.
    search_K : (float, float), optional
        Range searched, K; default data start to min(data end,
        ``search_ceiling_K``).
    kinds : dict, optional
        Catalogue (default the seeded one); kinds are assigned among those
        that are not ordering transitions.
    **options
        Fields of :class:`LowTemperatureSettings` (all recorded).

    Returns
    -------
    Outcome
        Method ``low-temperature-peaks``.  Transitions of method
        ``dmdt-peak`` with ``width_K``; per kind and branch the components are
        numbered by step height and component 1 is primary.  Results:
        ``transition_width_K`` per row, and ``thermal_hysteresis_K`` per kind
        (component 1, cooling minus heating) when both branches show it.

    References
    ----------
    Savitzky & Golay (1964); Schwarz (1978); Bevington & Robinson (2003).
    """
    s = LowTemperatureSettings.from_options(options)
    if signal_kind not in _SIGNAL_SIGNS:
        raise InvalidValue(f"signal_kind must be one of {', '.join(_SIGNAL_SIGNS)}, got {signal_kind!r}",
                           field="signal_kind")
    sign = _SIGNAL_SIGNS[signal_kind]
    T = np.asarray(temperature_K, dtype=float).ravel()
    y = np.asarray(signal, dtype=float).ravel()
    if T.shape != y.shape:
        raise InvalidValue(f"temperature_K has {T.size} values but the signal has {y.size}", field="signal")
    if search_K is not None:
        search_K = (float(search_K[0]), float(search_K[1]))
        if not search_K[0] < search_K[1]:
            raise InvalidValue(f"search_K must be (low, high) in K with low < high, got {search_K!r}",
                               field="search_K")
    parameters: dict[str, Any] = {"run_kind": run_kind, "signal_kind": signal_kind,
                                  "search_K": list(search_K) if search_K else None,
                                  **{k: (list(v) if isinstance(v, tuple) else v)
                                     for k, v in dataclasses.asdict(s).items()}}
    allowed = _non_ordering_kinds(kinds)
    notes: list[str] = []
    finite = np.isfinite(T) & np.isfinite(y)
    if not np.all(finite):
        notes.append(f"{np.count_nonzero(~finite)} non-finite rows left out")
    transitions: list[TransitionEstimate] = []
    results: list[ResultValue] = []
    primaries: dict[tuple[str, str], TransitionEstimate] = {}
    diagnostics: dict[str, Any] = {"method_versions": dict(METHOD_VERSIONS), "branches": {}}
    for name, idx in split_branches(T, branch).items():
        idx = idx[finite[idx]]
        try:
            curve = uniform_curve(T[idx], y[idx], grid_step_K=s.grid_step_K)
            if search_K is None and curve.temperature_K[0] >= s.search_ceiling_K:
                notes.append(f"{name}: the data start above search_ceiling_K = {s.search_ceiling_K:g} K; "
                             "no low-temperature transition is sought (give search_K to look higher)")
                continue
            search = search_K or (float(curve.temperature_K[0]),
                                  float(min(curve.temperature_K[-1], s.search_ceiling_K)))
            comps, diag = find_steps(curve, sign=sign, search_K=search, settings=s)
        except TransitionNotFound as exc:
            notes.append(f"{name}: {exc}")
            continue
        diag["interpolated"] = curve.interpolated
        diagnostics["branches"][name] = diag
        by_kind: dict[str, list[tuple[StepComponent, Any]]] = {}
        for comp in comps:
            a = assign_kind(comp.temperature_K, run_kind, kinds=kinds, allowed=allowed)
            by_kind.setdefault(a.kind, []).append((comp, a))
        for kind, members in by_kind.items():
            members.sort(key=lambda m: -m[0].height)
            for number, (comp, a) in enumerate(members, start=1):
                row = TransitionEstimate(
                    kind=kind, temperature_K=comp.temperature_K, uncertainty_K=comp.uncertainty_K,
                    method="dmdt-peak", branch=name, component=number, primary=number == 1,
                    width_K=comp.width_K, ambiguous=a.ambiguous,
                    diagnostics={"height": comp.height, "height_uncertainty": comp.height_uncertainty,
                                 "relative_height": comp.relative_height,
                                 "width_uncertainty_K": comp.width_uncertainty_K,
                                 "cluster": comp.cluster, "candidates": list(a.candidates)})
                transitions.append(row)
                results.append(ResultValue(
                    quantity="transition_width_K", value=comp.width_K, uncertainty=comp.width_uncertainty_K,
                    unit="K", method="dmdt-peak", branch=name,
                    diagnostics={"kind": kind, "component": number, "temperature_K": comp.temperature_K}))
                if number == 1:
                    primaries[(kind, name)] = row
    for kind in sorted({k for k, _ in primaries}):
        h, c = primaries.get((kind, "heating")), primaries.get((kind, "cooling"))
        if h is not None and c is not None:
            results.append(ResultValue(
                quantity="thermal_hysteresis_K", value=c.temperature_K - h.temperature_K,
                uncertainty=float(np.hypot(h.uncertainty_K, c.uncertainty_K)), unit="K", method="dmdt-peak",
                diagnostics={"kind": kind, "heating_K": h.temperature_K, "cooling_K": c.temperature_K}))
    return Outcome(method="low-temperature-peaks", version=VERSION, parameters=parameters,
                   transitions=tuple(transitions), results=tuple(results), warnings=tuple(notes),
                   diagnostics=diagnostics)


# --------------------------------------------------------------------------
# Field dependence
# --------------------------------------------------------------------------

def field_dependence(pairs, *, birge_scaling: bool = True) -> Outcome:
    """Slope dT/d(mu0 H) of one transition from runs at several fields.

    Weighted least squares of T against mu0*H with weights 1/u^2 when every
    estimate has a positive uncertainty (covariance from the weights, scaled
    by the Birge ratio sqrt(chi^2/dof) when that exceeds 1 and
    `birge_scaling` is set); ordinary least squares with the covariance
    scaled by the residual variance otherwise (then at least 3 points).

    Parameters
    ----------
    pairs : iterable of (float, TransitionEstimate)
        Applied field mu0*H in tesla and the estimate at that field; all of
        one kind (``unassigned`` is refused) and one branch.
    birge_scaling : bool
        Inflate the weighted uncertainties when the scatter exceeds them.

    Returns
    -------
    Outcome
        Method ``field-dependence``; results ``dT_dB_K_per_T`` (unit ``K/T``)
        and ``zero_field_temperature_K`` (intercept, unit ``K``).

    References
    ----------
    Bevington & Robinson (2003), sections 6.3-6.4 (straight-line fit with
    weights); Birge, R. T. (1932). Phys. Rev. 40, 207 (ratio of external to
    internal consistency).
    """
    pairs = list(pairs)
    if len(pairs) < 2:
        raise InvalidValue(f"field dependence needs estimates at two fields or more, got {len(pairs)}",
                           field="pairs")
    fields = np.array([float(b) for b, _ in pairs])
    est = [e for _, e in pairs]
    kinds = {e.kind for e in est}
    branches = {e.branch for e in est}
    if len(kinds) != 1 or UNASSIGNED in kinds:
        raise InvalidValue(f"field dependence needs estimates of one assigned kind, got {sorted(kinds)}",
                           field="kind")
    if len(branches) != 1:
        raise InvalidValue(f"field dependence needs estimates of one branch, got "
                           f"{sorted(str(b) for b in branches)}", field="branch")
    if not np.all(np.isfinite(fields)):
        raise InvalidValue("every field must be a finite number of tesla", field="field_T")
    if np.unique(fields).size < 2:
        raise InvalidValue("field dependence needs at least two different fields", field="field_T")
    t = np.array([e.temperature_K for e in est], dtype=float)
    u = np.array([e.uncertainty_K if e.uncertainty_K is not None else np.nan for e in est], dtype=float)
    weighted = bool(np.all(np.isfinite(u)) and np.all(u > 0))
    n = t.size
    if not weighted and n < 3:
        raise InvalidValue("without uncertainties on every estimate at least 3 fields are needed",
                           field="uncertainty_K")
    w = 1.0 / u**2 if weighted else np.ones(n)
    X = np.column_stack([np.ones(n), fields])
    normal = X.T @ (w[:, None] * X)
    cov = np.linalg.inv(normal)
    coef = cov @ (X.T @ (w * t))
    resid = t - X @ coef
    dof = n - 2
    chi2 = float(np.sum(w * resid**2))
    scale = 1.0
    if weighted:
        if birge_scaling and dof > 0 and chi2 / dof > 1.0:
            scale = chi2 / dof
    else:
        scale = chi2 / dof
    cov = cov * scale
    err = np.sqrt(np.diag(cov))
    diag = {"n": n, "weighted": weighted, "chi2": chi2, "dof": dof, "covariance_scale": scale,
            "correlation": float(cov[0, 1] / (err[0] * err[1])) if err[0] > 0 and err[1] > 0 else None,
            "fields_T": fields.tolist()}
    kind, branch = est[0].kind, est[0].branch
    results = (
        ResultValue(quantity="dT_dB_K_per_T", value=float(coef[1]), uncertainty=float(err[1]), unit="K/T",
                    method="field-dependence", branch=branch, diagnostics={"kind": kind, **diag}),
        ResultValue(quantity="zero_field_temperature_K", value=float(coef[0]), uncertainty=float(err[0]),
                    unit="K", method="field-dependence", branch=branch, diagnostics={"kind": kind}),
    )
    return Outcome(method="field-dependence", version=VERSION,
                   parameters={"birge_scaling": bool(birge_scaling)}, results=results, diagnostics=diag)

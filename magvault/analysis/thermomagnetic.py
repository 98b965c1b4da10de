"""Ordering temperature from thermomagnetic curves M(T) or chi(T).

Three published methods estimate the temperature at which the spontaneous
magnetisation vanishes, on the heating and the cooling branch separately:

* ``dmdt-extremum``: the extremum of -dM/dT of the Savitzky-Golay-smoothed
  curve (the inflection of M(T));
* ``two-tangent``: the intersection of the tangent at the steepest descent
  with a straight line fitted to the curve above the transition (Gromme,
  Wright & Peck, 1969);
* ``power-law``: a fit M = c + A (Tc - T)^beta near Tc with beta free (the
  critical-exponent form of Landau / mean-field theory, beta = 1/2).

In a field, or with a spread of ordering temperatures, the methods differ
systematically: the inflection lies below the maximum-curvature point and the
two-tangent intersection (Fabian, Shcherbakov & McEnroe, 2013).  The combined
(primary) estimate of a branch is therefore the plain mean of the methods with
a standard uncertainty that adds the standard deviation of that mean over the
methods (s/sqrt(n)) to the typical statistical uncertainty of one method (see
:func:`combine_methods`); no offset tuned to a model is subtracted.

Measured on noise-free zero-field mean-field curves (J = 1/2, Tc near 590 K,
2/3 K steps, default settings): dmdt-extremum 0.8-0.9 K below Tc, two-tangent
0.4-0.55 K above, power-law 0.1 K below, combined 0.1-0.2 K below with a
stated uncertainty near 0.4 K.  In a field the two-tangent intersection and
the power law move up (about +10.5 K and +4.5 K at 1 T for J = 1/2) while the
inflection stays near the zero-field Tc, so the combined value lies above the
zero-field Tc, with an uncertainty that grows with the spread.

The thermal hysteresis (cooling minus heating) is computed method by method,
so that offsets common to both branches cancel; irreversible alteration is
flagged when the branches disagree beyond noise away from the transition.

Every function is pure: arrays in, frozen dataclasses out; numerical choices
are keyword arguments (collected in :class:`OrderingSettings`) and recorded in
the returned :class:`~magvault.analysis.results.Outcome`.  Resampling uses a
fixed seed, so re-running gives identical numbers.

References
----------
Fabian, K., Shcherbakov, V. P. & McEnroe, S. A. (2013). Measuring the Curie
temperature. Geochem. Geophys. Geosyst. 14, doi:10.1029/2012GC004440.
Gromme, C. S., Wright, T. L. & Peck, D. L. (1969). J. Geophys. Res. 74, 5277
(the two-tangent method).
Savitzky, A. & Golay, M. J. E. (1964). Smoothing and differentiation of data by
simplified least squares procedures. Anal. Chem. 36, 1627.
Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap,
Chapman & Hall (residual bootstrap).
JCGM 100:2008, Evaluation of measurement data - Guide to the expression of
uncertainty in measurement (GUM).
All citations but Fabian et al. (2013) are given from memory.
"""

from __future__ import annotations

import dataclasses
import functools
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.optimize import OptimizeWarning, curve_fit
from scipy.ndimage import convolve1d
from scipy.signal import savgol_coeffs

from ..catalogue import UNASSIGNED, assign_kind
from ..errors import InvalidValue, MagvaultError
from .options import settings_from_options
from .results import Outcome, ResultValue, TransitionEstimate

__all__ = [
    "BRANCHES", "ORDERING_KINDS", "OrderingSettings", "UniformCurve", "PowerLawFit",
    "TransitionNotFound", "uniform_curve", "noise_sigma", "split_branches",
    "Steepest", "steepest_drop", "savgol", "robust_spread",
    "dmdt_extremum", "two_tangent", "power_law_fit", "combine_methods",
    "thermal_hysteresis", "alteration_check", "analyse_ordering", "analyse_series",
]

VERSION = "1.1"  # 1.1: no power-law fit for a susceptibility
BRANCHES = ("heating", "cooling")
#: Catalogue kinds that are ordering transitions (the magnetisation vanishes).
ORDERING_KINDS = ("ordering", "magnetite-curie")
METHOD_VERSIONS = {"dmdt-extremum": VERSION, "two-tangent": VERSION, "power-law": VERSION,
                   "combined": VERSION, "branch-comparison": VERSION}
# 1.4826 turns a median absolute deviation into a Gaussian standard deviation;
# a second difference of white noise has variance 6 sigma^2.
_MAD_TO_SIGMA = 1.4826
_SECOND_DIFFERENCE_VARIANCE = 6.0


class TransitionNotFound(MagvaultError):
    """A method found no transition it could measure (the message says why)."""


# --------------------------------------------------------------------------
# Settings
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class OrderingSettings:
    """Every numerical choice of :func:`analyse_ordering` (all recorded).

    Attributes
    ----------
    grid_step_K : float or None
        Step of the uniform temperature grid in K; None takes the median
        spacing of the branch.  Unevenly spaced data are interpolated onto it.
    savgol_window_K : float
        Width of the Savitzky-Golay window in K (rounded to an odd number of
        grid points, at least polyorder + 3).
    savgol_max_window_K : float
        The window is doubled, up to this width in K, while the -dM/dT
        extremum stands less than ``min_peak_snr`` above its noise
        (:func:`steepest_drop`).
    savgol_polyorder : int
        Polynomial order of the Savitzky-Golay filter.
    search_floor_K : float
        With ``search_K`` None the search runs from max(data start, this) to
        the data end, so that low-temperature steps are never taken for the
        ordering transition; data that end below it are not searched.
    min_peak_snr : float
        Smallest accepted rise of the -dM/dT extremum above its values at the
        ends of the searched range, in units of the noise of the smoothed
        derivative; below it, even at the widest window, no ordering
        transition is reported (:func:`steepest_drop`).
    tail_offset_K, tail_span_K : float
        Two-tangent method: the line above the transition is fitted to the
        data from tail_offset_K to tail_offset_K + tail_span_K above the
        steepest point (clipped at the data end).
    min_tail_points : int
        Fewest points accepted for the line above the transition.
    power_law_upper_fraction : float
        Power-law fit window rule: from the highest temperature below the
        steepest point at which the smoothed signal above the tail line still
        reaches this fraction of its value at the start of the search range ...
    power_law_above_K : float
        ... up to this many kelvin above the steepest point.
    power_law_beta_bounds : tuple of float
        Bounds of the free exponent beta.
    power_law : bool
        Whether to fit the power law at all.  It describes a spontaneous
        magnetisation M ~ (Tc - T)^beta, so :func:`analyse_series` turns it
        off for a susceptibility, whose Hopkinson peak and paramagnetic tail
        follow no such law.
    n_bootstrap : int
        Residual-bootstrap resamples for the derivative and two-tangent
        uncertainties.
    seed : int
        Seed of the resampling (fixed, so that results are reproducible).
    alteration_align : bool
        Alteration check: shift the cooling branch by the thermal hysteresis
        before comparing (a thermal lag displaces the whole curve).
    alteration_exclusion_K : float
        Alteration check: half-width of the band around the ordering
        temperature that is left out.
    alteration_bin_K : float
        Width of the temperature bins in which the branches are compared.
    alteration_min_relative : float
        Smallest mean difference of a bin, relative to the largest signal,
        that counts as alteration ...
    alteration_z : float
        ... and it must also exceed this many standard errors of the bin mean.
    """

    grid_step_K: float | None = None
    savgol_window_K: float = 5.0
    savgol_max_window_K: float = 40.0
    savgol_polyorder: int = 3
    search_floor_K: float = 300.0
    min_peak_snr: float = 10.0
    tail_offset_K: float = 20.0
    tail_span_K: float = 40.0
    min_tail_points: int = 5
    power_law_upper_fraction: float = 0.5
    power_law_above_K: float = 10.0
    power_law_beta_bounds: tuple[float, float] = (0.05, 1.5)
    power_law: bool = True
    n_bootstrap: int = 40
    seed: int = 0
    alteration_align: bool = True
    alteration_exclusion_K: float = 25.0
    alteration_bin_K: float = 20.0
    alteration_min_relative: float = 0.02
    alteration_z: float = 5.0

    @classmethod
    def from_options(cls, options: dict[str, Any]) -> "OrderingSettings":
        settings = settings_from_options(cls, options)
        settings.validate()
        return settings

    def validate(self) -> None:
        positive = ("savgol_window_K", "tail_span_K", "power_law_above_K", "alteration_bin_K",
                    "alteration_exclusion_K")
        for name in positive:
            value = getattr(self, name)
            if not (np.isfinite(value) and value > 0):
                raise InvalidValue(f"option {name} must be a positive number of kelvin, got {value!r}",
                                   field=name)
        if self.grid_step_K is not None and not (np.isfinite(self.grid_step_K) and self.grid_step_K > 0):
            raise InvalidValue(f"option grid_step_K must be positive or None, got {self.grid_step_K!r}",
                               field="grid_step_K")
        if not 0 < self.power_law_upper_fraction < 1:
            raise InvalidValue("option power_law_upper_fraction must lie between 0 and 1, got "
                               f"{self.power_law_upper_fraction!r}", field="power_law_upper_fraction")
        if int(self.n_bootstrap) < 2:
            raise InvalidValue(f"option n_bootstrap must be at least 2, got {self.n_bootstrap!r}",
                               field="n_bootstrap")
        if int(self.savgol_polyorder) < 1:
            raise InvalidValue("option savgol_polyorder must be at least 1 (a derivative is taken)",
                               field="savgol_polyorder")
        lo, hi = self.power_law_beta_bounds
        if not 0 < lo < hi:
            raise InvalidValue(f"option power_law_beta_bounds must be (low, high) with 0 < low < high, "
                               f"got {self.power_law_beta_bounds!r}", field="power_law_beta_bounds")


# --------------------------------------------------------------------------
# Curves on a uniform grid, noise, branches
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class UniformCurve:
    """One branch on a uniform, increasing temperature grid.

    Attributes
    ----------
    temperature_K : numpy.ndarray
        Uniform grid in K, increasing.
    signal : numpy.ndarray
        Signal on the grid (any unit: A m^2, A m^2/kg or SI susceptibility).
    step_K : float
        Grid step in K.
    interpolated : bool
        Whether the source was interpolated (uneven spacing or a given step).
    n_source : int
        Number of source points used.
    """

    temperature_K: np.ndarray
    signal: np.ndarray
    step_K: float
    interpolated: bool
    n_source: int


def uniform_curve(temperature_K, signal, *, grid_step_K: float | None = None,
                  uniform_tolerance: float = 0.01) -> UniformCurve:
    """Sort a curve by temperature and put it on a uniform grid.

    Parameters
    ----------
    temperature_K : array_like
        Temperatures in K, any order; non-finite rows are dropped.
    signal : array_like
        Moment, mass moment or susceptibility, same length.
    grid_step_K : float, optional
        Grid step in K; default the median spacing of the sorted, de-duplicated
        temperatures.
    uniform_tolerance : float
        Spacings within this fraction of the step count as already uniform,
        and such data are used as they are.

    Returns
    -------
    UniformCurve
        Repeated temperatures are averaged; uneven data are linearly
        interpolated onto the grid (the step is recorded in the result).
    """
    T = np.asarray(temperature_K, dtype=float).ravel()
    y = np.asarray(signal, dtype=float).ravel()
    if T.shape != y.shape:
        raise InvalidValue(f"temperature_K has {T.size} values but the signal has {y.size}",
                           field="signal")
    keep = np.isfinite(T) & np.isfinite(y)
    T, y = T[keep], y[keep]
    if T.size < 4:
        raise TransitionNotFound(f"only {T.size} finite points; at least 4 are needed")
    Tu, inverse, counts = np.unique(T, return_inverse=True, return_counts=True)
    yu = np.bincount(inverse, weights=y) / counts
    if Tu.size < 4:
        raise TransitionNotFound(f"only {Tu.size} distinct temperatures; at least 4 are needed")
    spacing = np.diff(Tu)
    step = float(np.median(spacing)) if grid_step_K is None else float(grid_step_K)
    uniform = grid_step_K is None and np.all(np.abs(spacing - step) <= uniform_tolerance * step)
    if uniform:
        return UniformCurve(Tu, yu, step, False, int(T.size))
    n = int(np.floor((Tu[-1] - Tu[0]) / step + 1e-9)) + 1
    grid = Tu[0] + step * np.arange(n)
    return UniformCurve(grid, np.interp(grid, Tu, yu), step, True, int(T.size))


def noise_sigma(signal) -> float:
    """Standard deviation of white noise on a smooth curve, from second differences.

    A robust estimate (median absolute deviation of the second differences,
    scaled to a Gaussian sigma), insensitive to the few large differences at
    a kink or a step.

    Parameters
    ----------
    signal : array_like
        Values on a uniform grid.

    Returns
    -------
    float
        sigma in the unit of the signal.

    References
    ----------
    Rousseeuw, P. J. & Croux, C. (1993). Alternatives to the median absolute
    deviation. J. Am. Stat. Assoc. 88, 1273-1283 (MAD scale factor 1.4826).
    """
    y = np.asarray(signal, dtype=float)
    if y.size < 5:
        return 0.0
    d2 = np.diff(y, 2)
    mad = np.median(np.abs(d2 - np.median(d2)))
    return float(_MAD_TO_SIGMA * mad / np.sqrt(_SECOND_DIFFERENCE_VARIANCE))


def split_branches(temperature_K, branch=None, *, direction_points: int = 5) -> dict[str, np.ndarray]:
    """Indices of the heating and cooling branches of one series.

    Parameters
    ----------
    temperature_K : array_like
        Temperatures in K in the order measured.
    branch : array_like of str, optional
        Labels ``"heating"`` / ``"cooling"`` per row.  Without labels the
        direction of the temperature (differences smoothed over
        `direction_points` rows; a plateau keeps the previous direction)
        decides.
    direction_points : int
        Rows over which the temperature differences are averaged.

    Returns
    -------
    dict
        ``{"heating": indices, "cooling": indices}`` holding only the branches
        present (each index array in measured order).
    """
    T = np.asarray(temperature_K, dtype=float).ravel()
    if branch is not None:
        labels = np.asarray(branch, dtype=object).ravel()
        if labels.size != T.size:
            raise InvalidValue(f"branch has {labels.size} labels but temperature_K has {T.size} values",
                               field="branch")
        text = np.array([str(v).strip().lower() if v is not None else "" for v in labels])
        bad = sorted(set(text) - set(BRANCHES))
        if bad:
            raise InvalidValue(f"branch labels must be 'heating' or 'cooling', found {bad[0]!r}",
                               field="branch")
        return {b: np.flatnonzero(text == b) for b in BRANCHES if np.any(text == b)}
    if T.size < 2:
        return {"heating": np.arange(T.size)}
    k = max(1, int(direction_points))
    diffs = np.diff(T)
    kernel = np.ones(k) / k
    smooth = np.convolve(diffs, kernel, mode="same")
    direction = np.zeros(T.size, dtype=int)
    current = 1 if np.sum(diffs) >= 0 else -1
    for i, d in enumerate(smooth):
        if d > 0:
            current = 1
        elif d < 0:
            current = -1
        direction[i + 1] = current
    direction[0] = direction[1]
    out = {}
    if np.any(direction > 0):
        out["heating"] = np.flatnonzero(direction > 0)
    if np.any(direction < 0):
        out["cooling"] = np.flatnonzero(direction < 0)
    return out


# --------------------------------------------------------------------------
# Smoothing helpers shared with the low-temperature analysis
# --------------------------------------------------------------------------

def savgol_window_points(window_K: float, step_K: float, polyorder: int) -> int:
    """Odd number of grid points spanning about `window_K` (at least polyorder + 3)."""
    half = int(np.floor(0.5 * window_K / step_K + 0.5))
    return int(max(2 * half + 1, polyorder + 3 + (polyorder + 3 + 1) % 2))


@functools.lru_cache(maxsize=64)
def _sg_coefficients(window_points: int, polyorder: int, deriv: int, step_K: float) -> np.ndarray:
    return savgol_coeffs(window_points, polyorder, deriv=deriv, delta=step_K)


def savgol(values, window_points: int, polyorder: int, step_K: float, deriv: int = 0) -> np.ndarray:
    """Savitzky-Golay smoothing (deriv=0) or derivative (per K) along the last axis.

    The ends (half a window) are filled by repeating the end value before
    filtering (``mode="nearest"``), so they are biased; every search in this
    package stays half a window away from the ends.

    References
    ----------
    Savitzky & Golay (1964); :func:`scipy.signal.savgol_coeffs`.
    """
    c = _sg_coefficients(int(window_points), int(polyorder), int(deriv), float(step_K))
    return convolve1d(np.asarray(values, dtype=float), c, axis=-1, mode="nearest")


def smoothed_derivative(curve: UniformCurve, window_points: int, polyorder: int,
                        values=None) -> np.ndarray:
    """Savitzky-Golay first derivative of a curve (per K), along the last axis."""
    y = curve.signal if values is None else values
    return savgol(y, window_points, polyorder, curve.step_K, deriv=1)


def derivative_noise(sigma: float, window_points: int, polyorder: int, step_K: float) -> float:
    """Standard deviation of the Savitzky-Golay derivative of white noise of `sigma`."""
    c = _sg_coefficients(int(window_points), int(polyorder), 1, float(step_K))
    return float(sigma * np.sqrt(np.sum(c**2)))


def residual_replicates(curve: UniformCurve, window_points: int, polyorder: int,
                        n_bootstrap: int, rng: np.random.Generator) -> np.ndarray:
    """Residual-bootstrap copies of a curve: smooth curve plus resampled residuals.

    Residuals about the Savitzky-Golay fit are inflated by 1/sqrt(1 - h) (h
    the filter's central weight, the leverage of a point) so that their
    spread estimates the noise; the half windows at the ends are left out of
    the residual pool (Efron & Tibshirani, 1993, section 9.5).
    """
    smooth = savgol(curve.signal, window_points, polyorder, curve.step_K)
    half = window_points // 2
    leverage = _sg_coefficients(int(window_points), int(polyorder), 0, float(curve.step_K))[half]
    resid = (curve.signal - smooth)[half:curve.signal.size - half] / np.sqrt(max(1.0 - leverage, 1e-6))
    resid = resid - resid.mean()
    picks = rng.integers(0, resid.size, size=(int(n_bootstrap), curve.signal.size))
    return smooth[None, :] + resid[picks]


def robust_spread(values) -> float:
    """Half the distance between the 15.87th and 84.13th percentiles (a Gaussian sigma).

    Used for bootstrap distributions, where a few resamples may jump to another
    local extremum and inflate a plain standard deviation.
    """
    lo, hi = np.percentile(np.asarray(values, dtype=float), [15.865, 84.135])
    return float(0.5 * (hi - lo))


def _at(values: np.ndarray, pos) -> np.ndarray:
    """Linear interpolation of values (last axis) at fractional grid positions."""
    pos = np.asarray(pos, dtype=float)
    n = values.shape[-1]
    i = np.clip(np.floor(pos).astype(int), 0, n - 2)
    f = pos - i
    if values.ndim == 1:
        return values[i] * (1.0 - f) + values[i + 1] * f
    rows = np.arange(values.shape[0])
    return values[rows, i] * (1.0 - f) + values[rows, i + 1] * f


def _refine_peak(values: np.ndarray, i) -> np.ndarray:
    """Fractional grid position of a maximum from the parabola through 3 points."""
    n = values.shape[-1]
    i = np.clip(np.asarray(i), 1, n - 2)
    if values.ndim == 1:
        left, mid, right = values[i - 1], values[i], values[i + 1]
    else:
        rows = np.arange(values.shape[0])
        left, mid, right = values[rows, i - 1], values[rows, i], values[rows, i + 1]
    denom = left - 2.0 * mid + right
    safe = np.where(denom < 0, denom, -1.0)
    offset = np.where(denom < 0, 0.5 * (left - right) / safe, 0.0)
    return i + np.clip(offset, -0.5, 0.5)


def _search_mask(curve: UniformCurve, search_K: tuple[float, float], window_points: int) -> np.ndarray:
    """Grid points inside the search range and half a window away from the ends."""
    T = curve.temperature_K
    mask = (T >= search_K[0]) & (T <= search_K[1])
    half = window_points // 2
    mask[:half] = False
    mask[T.size - half:] = False
    return mask


@dataclass(frozen=True)
class Steepest:
    """The steepest drop of a branch, shared by the three methods.

    Attributes
    ----------
    position : float
        Fractional grid index of the extremum of -dS/dT.
    temperature_K : float
        Its temperature, K.
    slope_per_K : float
        dS/dT there (negative for a drop), signal unit per K.
    level : float
        Smoothed signal there.
    snr : float
        Rise of the extremum above the ends of the range, over the noise of
        the smoothed derivative.
    window_points : int
        Savitzky-Golay window actually used (points).
    window_K : float
        The same in kelvin ((points - 1) * step).
    widened : int
        How many times the window was doubled to reach the required snr.
    """

    position: float
    temperature_K: float
    slope_per_K: float
    level: float
    snr: float
    window_points: int
    window_K: float
    widened: int


def steepest_drop(curve: UniformCurve, *, search_K: tuple[float, float], window_K: float = 5.0,
                  polyorder: int = 3, min_peak_snr: float = 10.0,
                  max_window_K: float = 40.0) -> Steepest:
    """Locate the extremum of -dS/dT of the smoothed curve inside `search_K`.

    Window rule (stated and recorded): the Savitzky-Golay window starts at
    `window_K` and is doubled, up to `max_window_K`, until the extremum rises
    at least `min_peak_snr` times the noise of the smoothed derivative (white
    noise of :func:`noise_sigma` through the filter) above the larger of the
    values of -dS/dT at the two ends of the searched range.  Otherwise no
    transition is reported: a curve whose slope is steepest at an end of the
    range (a paramagnetic tail, a transition outside the range) holds none.

    Parameters
    ----------
    curve : UniformCurve
        One branch on a uniform grid.
    search_K : (float, float)
        Temperature range in K.
    window_K, max_window_K : float
        Narrowest and widest Savitzky-Golay window, K.
    polyorder : int
        Savitzky-Golay polynomial order.
    min_peak_snr : float
        Required rise of the extremum above the ends, in noise units.

    Returns
    -------
    Steepest

    References
    ----------
    Savitzky & Golay (1964).
    """
    T = curve.temperature_K
    sigma = noise_sigma(curve.signal)
    width = float(window_K)
    widened = 0
    while True:
        w = savgol_window_points(width, curve.step_K, polyorder)
        if w > T.size:
            raise TransitionNotFound(f"the Savitzky-Golay window ({w} points) is longer than the "
                                     f"curve ({T.size} points)")
        mask = _search_mask(curve, search_K, w)
        if not np.any(mask):
            raise TransitionNotFound(f"no data inside the search range {search_K[0]:.1f}-"
                                     f"{search_K[1]:.1f} K (half a window from the ends)")
        drop = -savgol(curve.signal, w, polyorder, curve.step_K, deriv=1)
        candidates = np.flatnonzero(mask)
        i = int(candidates[np.argmax(drop[candidates])])
        sigma_d = derivative_noise(sigma, w, polyorder, curve.step_K)
        # the extremum must rise above -dS/dT at both ends of the searched range: a
        # curve that merely falls ever faster towards one end (a paramagnetic tail)
        # has its largest slope at that end and holds no transition
        rise = drop[i] - max(drop[candidates[0]], drop[candidates[-1]])
        if sigma_d > 0:
            snr = float(rise / sigma_d)
        else:
            snr = float("inf") if rise > 0 else 0.0
        if snr >= min_peak_snr:
            break
        if 2.0 * width > max_window_K:
            raise TransitionNotFound(f"no step in the search range: the largest -dS/dT rises {snr:.1f} "
                                     f"times its noise above its values at the ends of the range with "
                                     f"a {width:g} K window (at least {min_peak_snr:g} needed)")
        width *= 2.0
        widened += 1
    pos = float(_refine_peak(drop, i))
    smooth = savgol(curve.signal, w, polyorder, curve.step_K)
    return Steepest(pos, float(_at(T, pos)), float(-_at(drop, pos)), float(_at(smooth, pos)), snr, w,
                    (w - 1) * curve.step_K, widened)


def _bootstrap(curve: UniformCurve, st: Steepest, search_K, polyorder, n_bootstrap, seed):
    """Residual-bootstrap replicates: their smoothed curves, -derivatives and peak positions."""
    rng = np.random.default_rng(seed)
    w = st.window_points
    reps = residual_replicates(curve, w, polyorder, n_bootstrap, rng)
    drops = -savgol(reps, w, polyorder, curve.step_K, deriv=1)
    mask = _search_mask(curve, search_K, w)
    idx = np.argmax(np.where(mask[None, :], drops, -np.inf), axis=1)
    return reps, drops, _refine_peak(drops, idx)


# --------------------------------------------------------------------------
# The three methods
# --------------------------------------------------------------------------

def dmdt_extremum(curve: UniformCurve, *, search_K: tuple[float, float], window_K: float = 5.0,
                  polyorder: int = 3, min_peak_snr: float = 10.0, max_window_K: float = 40.0,
                  n_bootstrap: int = 40, seed: int = 0) -> TransitionEstimate:
    """Ordering temperature at the extremum of -dM/dT (the inflection of M(T)).

    Parameters
    ----------
    curve : UniformCurve
        One branch on a uniform grid (:func:`uniform_curve`).
    search_K : (float, float)
        Temperature range in K in which the extremum is sought.
    window_K, max_window_K, polyorder, min_peak_snr
        Savitzky-Golay window rule of :func:`steepest_drop`.
    n_bootstrap, seed : int
        Residual-bootstrap resamples and their fixed seed.

    Returns
    -------
    TransitionEstimate
        Method ``dmdt-extremum``, kind ``unassigned`` (the caller assigns it);
        the uncertainty is the :func:`robust_spread` of the bootstrap positions.
        On noise-free zero-field mean-field curves (J = 1/2, Tc near 590 K,
        2/3 K steps, 5 K window of order 3) the extremum lies 0.8-0.9 K below
        Tc: the smoothing rounds the square-root kink (the offset grows with
        the window); in a field the inflection lies below the two-tangent
        intersection (Fabian et al., 2013).

    References
    ----------
    Savitzky & Golay (1964); Fabian, Shcherbakov & McEnroe (2013).
    """
    st = steepest_drop(curve, search_K=search_K, window_K=window_K, polyorder=polyorder,
                       min_peak_snr=min_peak_snr, max_window_K=max_window_K)
    _, _, pos = _bootstrap(curve, st, search_K, polyorder, n_bootstrap, seed)
    u = robust_spread(_at(curve.temperature_K, pos))
    return TransitionEstimate(
        kind=UNASSIGNED, temperature_K=st.temperature_K, uncertainty_K=u, method="dmdt-extremum",
        diagnostics={"savgol_window_points": st.window_points, "savgol_window_K": st.window_K,
                     "window_doublings": st.widened, "grid_step_K": curve.step_K,
                     "peak_snr": st.snr, "slope_per_K": st.slope_per_K,
                     "n_bootstrap": int(n_bootstrap)})


def _tail_mask(curve: UniformCurve, t_steep: float, offset_K: float, span_K: float):
    T = curve.temperature_K
    lo, hi = t_steep + offset_K, t_steep + offset_K + span_K
    return (T >= lo) & (T <= hi), (float(lo), float(min(hi, T[-1])))


def two_tangent(curve: UniformCurve, *, search_K: tuple[float, float], window_K: float = 5.0,
                polyorder: int = 3, min_peak_snr: float = 10.0, max_window_K: float = 40.0,
                tail_offset_K: float = 20.0, tail_span_K: float = 40.0, min_tail_points: int = 5,
                n_bootstrap: int = 40, seed: int = 0) -> TransitionEstimate:
    """Ordering temperature where the tangent at the steepest descent meets the line above.

    The first tangent touches the smoothed curve at its steepest point (slope
    from the Savitzky-Golay derivative, :func:`steepest_drop`); the second is
    a least-squares line through the data from `tail_offset_K` to
    `tail_offset_K` + `tail_span_K` above that point.  Their intersection is
    the estimate.

    Parameters
    ----------
    curve : UniformCurve
        One branch on a uniform grid.
    search_K : (float, float)
        Range in K in which the steepest point is sought.
    window_K, max_window_K, polyorder, min_peak_snr
        Savitzky-Golay window rule of :func:`steepest_drop`.
    tail_offset_K, tail_span_K : float
        Where, above the steepest point, the second line is fitted (K).
    min_tail_points : int
        Fewest points for the second line.
    n_bootstrap, seed : int
        Residual bootstrap of the whole construction, with a fixed seed.

    Returns
    -------
    TransitionEstimate
        Method ``two-tangent``, kind ``unassigned``.  On noise-free zero-field
        mean-field curves (as in :func:`dmdt_extremum`) it lies 0.4-0.55 K
        above Tc; in a field well above (+10.5 K at 1 T for J = 1/2; Fabian
        et al., 2013).

    References
    ----------
    Gromme, Wright & Peck (1969); Fabian, Shcherbakov & McEnroe (2013).
    """
    st = steepest_drop(curve, search_K=search_K, window_K=window_K, polyorder=polyorder,
                       min_peak_snr=min_peak_snr, max_window_K=max_window_K)
    T = curve.temperature_K
    tail, tail_range = _tail_mask(curve, st.temperature_K, tail_offset_K, tail_span_K)
    if np.count_nonzero(tail) < min_tail_points:
        raise TransitionNotFound(f"only {np.count_nonzero(tail)} points from {tail_range[0]:.1f} K "
                                 f"upwards for the line above the transition ({min_tail_points} needed)")
    center = float(T[tail].mean())
    pinv = np.linalg.pinv(np.column_stack([np.ones(np.count_nonzero(tail)), T[tail] - center]))

    def intersection(t_steep, level, slope, tail_values):
        c0, c1 = pinv @ tail_values
        closing = np.asarray(slope - c1, dtype=float)
        gap = np.asarray(c0 + c1 * (t_steep - center) - level, dtype=float)
        # lines that do not close (the tangent no steeper than the tail) do not meet above
        ok = closing < 0
        return np.where(ok, t_steep + gap / np.where(ok, closing, -1.0), np.nan)

    c0, c1 = pinv @ curve.signal[tail]
    estimate = float(intersection(st.temperature_K, st.level, st.slope_per_K, curve.signal[tail]))
    if not np.isfinite(estimate):
        raise TransitionNotFound(f"the line above the transition (slope {c1:.3g} per K) is as steep as "
                                 "the tangent at the steepest point: the two do not meet")
    reps, drops, pos = _bootstrap(curve, st, search_K, polyorder, n_bootstrap, seed)
    smooth_reps = savgol(reps, st.window_points, polyorder, curve.step_K)
    # the tail window stays where it was found, so that resampling measures the noise only
    t_x = intersection(_at(T, pos), _at(smooth_reps, pos), -_at(drops, pos), reps[:, tail].T)
    t_x = t_x[np.isfinite(t_x)]
    if t_x.size < 2:
        raise TransitionNotFound("the resampled tangents do not meet the line above the transition")
    return TransitionEstimate(
        kind=UNASSIGNED, temperature_K=estimate, uncertainty_K=robust_spread(t_x), method="two-tangent",
        diagnostics={"steepest_K": st.temperature_K, "steep_slope_per_K": st.slope_per_K,
                     "tail_window_K": list(tail_range), "tail_center_K": center,
                     "tail_level_at_center": float(c0), "tail_slope_per_K": float(c1),
                     "savgol_window_points": st.window_points, "savgol_window_K": st.window_K,
                     "grid_step_K": curve.step_K, "n_bootstrap": int(n_bootstrap)})


@dataclass(frozen=True)
class PowerLawFit:
    """Result of :func:`power_law_fit`: the transition row and the exponent."""

    transition: TransitionEstimate
    beta: ResultValue


def _power_model(T, c, A, Tc, beta):
    u = np.clip(Tc - T, 0.0, None)
    return c + A * u**beta


def _power_jacobian(T, c, A, Tc, beta):
    u = Tc - T
    pos = u > 0
    up = np.where(pos, u, 1.0)
    ub = np.where(pos, up**beta, 0.0)
    jac = np.empty((T.size, 4))
    jac[:, 0] = 1.0
    jac[:, 1] = ub
    jac[:, 2] = np.where(pos, A * beta * ub / up, 0.0)
    jac[:, 3] = np.where(pos, A * ub * np.log(up), 0.0)
    return jac


def power_law_fit(curve: UniformCurve, *, search_K: tuple[float, float], window_K: float = 5.0,
                  polyorder: int = 3, min_peak_snr: float = 10.0, max_window_K: float = 40.0,
                  tail_offset_K: float = 20.0, tail_span_K: float = 40.0, min_tail_points: int = 5,
                  upper_fraction: float = 0.5, above_K: float = 10.0,
                  beta_bounds: tuple[float, float] = (0.05, 1.5)) -> PowerLawFit:
    """Ordering temperature from a fit of S = c + A (Tc - T)^beta (S = c above Tc), beta free.

    Fit-window rule (stated and recorded): the window runs from the highest
    temperature below the steepest point (:func:`steepest_drop`) at which the
    smoothed signal, above the line fitted to the tail (as in
    :func:`two_tangent`; a constant at the smallest smoothed value above the
    steepest point when there is no tail), still reaches `upper_fraction` of
    its value at the start of the search range, up to `above_K` above the
    steepest point.  Nonlinear least squares (:func:`scipy.optimize.curve_fit`,
    trust-region reflective with bounds, analytic Jacobian); standard
    uncertainties from the covariance scaled by the residual variance.

    Parameters
    ----------
    curve : UniformCurve
        One branch on a uniform grid.
    search_K : (float, float)
        Range in K in which the steepest point is sought.
    window_K, max_window_K, polyorder, min_peak_snr
        Savitzky-Golay window rule of :func:`steepest_drop`.
    tail_offset_K, tail_span_K, min_tail_points : float, float, int
        As in :func:`two_tangent`, for the baseline of the window rule.
    upper_fraction : float
        Fraction (0-1) that sets the lower end of the fit window.
    above_K : float
        Extent of the fit window above the steepest point, K.
    beta_bounds : (float, float)
        Bounds of the exponent.

    Returns
    -------
    PowerLawFit
        ``transition`` (method ``power-law``) and ``beta`` (quantity
        ``beta``, unit ``1``) with their standard uncertainties.  On noise-free
        zero-field mean-field curves (as in :func:`dmdt_extremum`) Tc comes out
        about 0.1 K low and beta near 0.48 (the window reaches where the
        mean-field curve already bends away from the critical power law;
        with upper_fraction 0.2 beta is 0.496).

    References
    ----------
    Landau, L. D. (1937). Zh. Eksp. Teor. Fiz. 7, 19 (beta = 1/2 in mean
    field); Fabian, Shcherbakov & McEnroe (2013) on extrapolating M(T) to Tc.
    """
    st = steepest_drop(curve, search_K=search_K, window_K=window_K, polyorder=polyorder,
                       min_peak_snr=min_peak_snr, max_window_K=max_window_K)
    T, y = curve.temperature_K, curve.signal
    smooth = savgol(y, st.window_points, polyorder, curve.step_K)
    tail, _ = _tail_mask(curve, st.temperature_K, tail_offset_K, tail_span_K)
    if np.count_nonzero(tail) >= min_tail_points:
        c1, c0 = np.polyfit(T[tail], y[tail], 1)
        baseline = c0 + c1 * T
    else:
        above = T >= st.temperature_K
        baseline = np.full_like(T, float(np.min(smooth[above])))
    excess = smooth - baseline
    half = st.window_points // 2
    first = np.flatnonzero(T >= search_K[0])
    start = int(max(first[0] if first.size else 0, half))  # the smoothed ends are biased
    amplitude = excess[start]
    if not amplitude > 0:
        raise TransitionNotFound("the signal at the start of the search range is not above the tail line")
    below = np.flatnonzero((T < st.temperature_K) & (excess >= upper_fraction * amplitude))
    if below.size == 0:
        raise TransitionNotFound("no point below the transition reaches the fit-window fraction")
    t_lo = float(T[below[-1]])
    t_hi = float(min(st.temperature_K + above_K, T[-1]))
    window = (T >= t_lo) & (T <= t_hi)
    n_fit = int(np.count_nonzero(window))
    if n_fit < 8:
        raise TransitionNotFound(f"only {n_fit} points in the power-law window {t_lo:.1f}-{t_hi:.1f} K")
    Tw, yw = T[window], y[window]
    c_start = float(np.interp(st.temperature_K, T, baseline))
    lo = [-np.inf, 0.0, t_lo + curve.step_K, beta_bounds[0]]
    hi = [np.inf, np.inf, t_hi, beta_bounds[1]]
    tc_start = float(np.clip(st.temperature_K + 0.5 * curve.step_K, lo[2], hi[2]))
    beta0 = float(np.clip(0.5, *beta_bounds))
    a_start = max(float(np.interp(t_lo, T, smooth)) - c_start, np.finfo(float).tiny) \
        / max(tc_start - t_lo, curve.step_K) ** beta0
    try:
        # a covariance that cannot be estimated, or an overflow while the fit wanders,
        # is a failed fit: both are turned into exceptions here and reported as such
        with warnings.catch_warnings():
            warnings.simplefilter("error", OptimizeWarning)
            with np.errstate(over="raise", invalid="raise", divide="raise"):
                popt, pcov = curve_fit(_power_model, Tw, yw, p0=[c_start, a_start, tc_start, beta0],
                                       bounds=(lo, hi), method="trf", jac=_power_jacobian,
                                       x_scale="jac", maxfev=2000)
    except (RuntimeError, ValueError, OptimizeWarning, FloatingPointError) as exc:
        raise TransitionNotFound(f"power-law fit did not converge: {exc}") from None
    perr = np.sqrt(np.clip(np.diag(pcov), 0.0, None))
    if not np.all(np.isfinite(perr)):
        raise TransitionNotFound("power-law fit covariance is not finite (window too short or flat)")
    c, A, Tc, beta = (float(v) for v in popt)
    at_bound = bool(np.isclose(beta, beta_bounds[0]) or np.isclose(beta, beta_bounds[1])
                    or np.isclose(Tc, hi[2]) or np.isclose(Tc, lo[2]))
    resid = yw - _power_model(Tw, *popt)
    corr = float(pcov[2, 3] / (perr[2] * perr[3])) if perr[2] > 0 and perr[3] > 0 else None
    diag = {"fit_window_K": [t_lo, t_hi], "n_fit": n_fit, "background": c, "amplitude": A,
            "residual_rms": float(np.sqrt(np.mean(resid**2))), "at_bound": at_bound,
            "steepest_K": st.temperature_K, "savgol_window_K": st.window_K,
            "grid_step_K": curve.step_K}
    tr = TransitionEstimate(kind=UNASSIGNED, temperature_K=Tc, uncertainty_K=float(perr[2]),
                            method="power-law", diagnostics=diag)
    bv = ResultValue(quantity="beta", value=beta, uncertainty=float(perr[3]), unit="1", method="power-law",
                     diagnostics={"fit_window_K": [t_lo, t_hi], "correlation_with_Tc": corr,
                                  "at_bound": at_bound})
    return PowerLawFit(tr, bv)


# --------------------------------------------------------------------------
# Combination, branches, alteration
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class Combined:
    """Mean of several method estimates with its standard uncertainty."""

    value: float
    uncertainty: float
    statistical: float
    between_methods: float
    methods: tuple[str, ...]


def combine_methods(values, uncertainties, methods=()) -> Combined:
    """Combine method estimates of one transition into a primary value.

    value = plain mean of the method values (the methods measure slightly
    different features of the curve, so none is preferred by its precision);
    u^2 = mean(u_i^2) + s^2/n, with u_i the methods' statistical standard
    uncertainties (they share the same data, so they are not averaged down)
    and s the sample standard deviation of the n method values: s/sqrt(n) is
    the standard deviation of their mean, the part of the uncertainty that
    carries the methods' systematic differences.

    Why s/sqrt(n) and not s: on zero-field mean-field curves the smoothing
    offsets of dmdt-extremum (below Tc) and two-tangent (above) nearly cancel
    in the mean, so the full spread would overstate the error three- to
    sixfold; with s/sqrt(n) the RMS error is about 0.4 of the stated
    uncertainty and the coverage of +/- 2u is 100% (tests/test_thermomagnetic.py).
    In a field the methods part further and the stated uncertainty grows.

    Parameters
    ----------
    values, uncertainties : sequence of float
        Method estimates (K) and their standard uncertainties (K).
    methods : sequence of str
        Method names, kept for diagnostics.

    Returns
    -------
    Combined

    References
    ----------
    JCGM 100:2008 (GUM), section 4.2 (type A evaluation from a spread of
    values) and 5.1 (combined standard uncertainty).
    """
    v = np.asarray(values, dtype=float)
    u = np.asarray(uncertainties, dtype=float)
    if v.size == 0:
        raise TransitionNotFound("no method gave an estimate")
    stat = float(np.sqrt(np.mean(u**2)))
    spread = float(np.std(v, ddof=1)) if v.size > 1 else 0.0
    between = spread / np.sqrt(v.size)
    return Combined(float(np.mean(v)), float(np.hypot(stat, between)), stat, float(between), tuple(methods))


def thermal_hysteresis(heating: dict[str, TransitionEstimate],
                       cooling: dict[str, TransitionEstimate]) -> ResultValue:
    """Cooling minus heating ordering temperature, method by method.

    The difference is taken per method (offsets common to both branches
    cancel), then combined as in :func:`combine_methods`, with each method's
    statistical uncertainty sqrt(u_h^2 + u_c^2).

    Parameters
    ----------
    heating, cooling : dict of str to TransitionEstimate
        Method estimates per branch, keyed by method name.

    Returns
    -------
    ResultValue
        Quantity ``thermal_hysteresis_K``, unit ``K``, method ``combined``.
    """
    common = [m for m in heating if m in cooling]
    if not common:
        raise TransitionNotFound("no method gave an estimate on both branches")
    diffs = [cooling[m].temperature_K - heating[m].temperature_K for m in common]
    us = [float(np.hypot(heating[m].uncertainty_K or 0.0, cooling[m].uncertainty_K or 0.0))
          for m in common]
    comb = combine_methods(diffs, us, common)
    return ResultValue(quantity="thermal_hysteresis_K", value=comb.value, uncertainty=comb.uncertainty,
                       unit="K", method="combined",
                       diagnostics={"per_method_K": dict(zip(common, map(float, diffs))),
                                    "statistical_K": comb.statistical,
                                    "between_methods_K": comb.between_methods})


def alteration_check(heating: UniformCurve, cooling: UniformCurve, transition_K: tuple[float, float], *,
                     align: bool = True, exclusion_K: float = 25.0, bin_K: float = 20.0,
                     min_relative: float = 0.02, z: float = 5.0) -> ResultValue:
    """Flag irreversible alteration: heating and cooling disagree beyond noise away from Tc.

    Rule (stated and recorded): with `align`, the cooling branch is first
    shifted by the thermal hysteresis (cooling minus heating ordering
    temperature), because a thermal lag displaces the whole curve without
    any change of the specimen; it is then interpolated onto the heating grid
    over the common range.  The band heating Tc +/- `exclusion_K` is left
    out.  The rest is cut into bins of `bin_K`; a bin counts as altered when
    its mean difference exceeds both `min_relative` of the largest heating
    signal (99th percentile of |S|) and `z` standard errors of the bin mean
    (noise of both branches from :func:`noise_sigma`).  Alteration that
    adds a magnetic phase usually raises the cooling curve; oxidation lowers
    it.

    Parameters
    ----------
    heating, cooling : UniformCurve
        The two branches.
    transition_K : (float, float)
        Ordering temperatures (heating, cooling), K.
    align : bool
        Shift the cooling branch by the thermal hysteresis first.
    exclusion_K, bin_K, min_relative, z : float
        The rule's numbers (see above).

    Returns
    -------
    ResultValue
        Quantity ``alteration``, value 1.0 (flagged) or 0.0, unit ``1``,
        method ``branch-comparison``; diagnostics ``relative_disagreement``
        (largest |bin mean| over the largest signal, signed in ``bins``),
        ``max_z`` and the bins.
    """
    Th, yh = heating.temperature_K, heating.signal
    lag = float(transition_K[1] - transition_K[0]) if align else 0.0
    # cooling value at heating temperature T is read at T + lag on the cooling branch
    Tc_grid = cooling.temperature_K - lag
    lo = max(Th[0], Tc_grid[0])
    hi = min(Th[-1], Tc_grid[-1])
    band = (transition_K[0] - exclusion_K, transition_K[0] + exclusion_K)
    sel = (Th >= lo) & (Th <= hi) & ~((Th > band[0]) & (Th < band[1]))
    # 99th percentile: the largest signal without letting one noisy point set it
    scale = float(np.percentile(np.abs(yh), 99.0))
    sigma = float(np.hypot(noise_sigma(yh), noise_sigma(cooling.signal)))
    bins: list[dict[str, Any]] = []
    flagged = False
    if np.any(sel) and scale > 0:
        Ts = Th[sel]
        diff = np.interp(Ts, Tc_grid, cooling.signal) - yh[sel]
        edges = np.arange(Ts[0], Ts[-1] + bin_K, bin_K)
        which = np.digitize(Ts, edges)
        for b in np.unique(which):
            d = diff[which == b]
            if d.size < 3:
                continue
            se = sigma / np.sqrt(d.size)
            mean = float(np.mean(d))
            z_bin = float(mean / se) if se > 0 else None
            beyond_noise = z_bin is None or abs(z_bin) > z
            flagged = flagged or (abs(mean) / scale > min_relative and beyond_noise)
            bins.append({"from_K": float(Ts[which == b][0]), "to_K": float(Ts[which == b][-1]),
                         "relative": mean / scale, "z": z_bin})
    rel = max((abs(b["relative"]) for b in bins), default=0.0)
    max_z = max((abs(b["z"]) for b in bins if b["z"] is not None), default=None)
    return ResultValue(quantity="alteration", value=1.0 if flagged else 0.0, uncertainty=None, unit="1",
                       method="branch-comparison",
                       diagnostics={"relative_disagreement": rel, "max_z": max_z, "lag_K": lag,
                                    "excluded_K": [float(band[0]), float(band[1])],
                                    "compared_K": [float(lo), float(hi)], "bins": bins})


# --------------------------------------------------------------------------
# Top level
# --------------------------------------------------------------------------

def _default_search(T: np.ndarray, floor_K: float) -> tuple[float, float] | None:
    """From max(data start, floor) to the data end; None when the data end below the floor."""
    lo, hi = float(np.min(T)), float(np.max(T))
    return (max(lo, floor_K), hi) if hi > floor_K else None


def _branch_estimates(curve: UniformCurve, search: tuple[float, float], s: OrderingSettings,
                      seed: int, notes: list[str], branch: str):
    common = dict(search_K=search, window_K=s.savgol_window_K, polyorder=s.savgol_polyorder,
                  min_peak_snr=s.min_peak_snr, max_window_K=s.savgol_max_window_K)
    rows: dict[str, TransitionEstimate] = {}
    beta = None
    try:
        rows["dmdt-extremum"] = dmdt_extremum(curve, n_bootstrap=s.n_bootstrap, seed=seed, **common)
    except TransitionNotFound as exc:
        notes.append(f"{branch}: dmdt-extremum: {exc}")
        return rows, beta
    tail = dict(tail_offset_K=s.tail_offset_K, tail_span_K=s.tail_span_K,
                min_tail_points=s.min_tail_points)
    try:
        rows["two-tangent"] = two_tangent(curve, n_bootstrap=s.n_bootstrap, seed=seed, **common, **tail)
    except TransitionNotFound as exc:
        notes.append(f"{branch}: two-tangent: {exc}")
    if not s.power_law:
        return rows, beta
    try:
        fit = power_law_fit(curve, upper_fraction=s.power_law_upper_fraction, above_K=s.power_law_above_K,
                            beta_bounds=tuple(s.power_law_beta_bounds), **common, **tail)
        rows["power-law"] = fit.transition
        beta = fit.beta
        if fit.transition.diagnostics.get("at_bound"):
            notes.append(f"{branch}: power-law: a parameter ended at its bound")
    except TransitionNotFound as exc:
        notes.append(f"{branch}: power-law: {exc}")
    return rows, beta


def analyse_ordering(temperature_K, signal, branch=None, *, run_kind: str = "thermomagnetic",
                     search_K: tuple[float, float] | None = None, kinds=None,
                     **options) -> Outcome:
    """Ordering temperature of each branch of a thermomagnetic series.

    Parameters
    ----------
    temperature_K : array_like
        Temperatures in K, in measured order.
    signal : array_like
        Moment (A m^2), mass moment (A m^2/kg) or SI susceptibility; the
        ordering transition is where it drops (the extremum of -dS/dT).
    branch : array_like of str, optional
        ``"heating"``/``"cooling"`` per row; inferred from the temperature
        direction when None (:func:`split_branches`).
    run_kind : str
        Run kind, for the catalogue assignment.
    search_K : (float, float), optional
        Range in K in which the steepest drop is sought; default from
        max(data start, ``search_floor_K``) to the data end.  One ordering
        transition per branch is reported: for a second magnetic phase call
        again with its range.
    kinds : dict, optional
        Catalogue (default the seeded one); the kind is assigned among
        :data:`ORDERING_KINDS` from the combined value, ``unassigned`` outside
        every window.
    **options
        Fields of :class:`OrderingSettings` (all recorded).

    Returns
    -------
    Outcome
        Method ``ordering-temperature``.  Transitions: per branch one row per
        method (``dmdt-extremum``, ``two-tangent``, ``power-law``) and one
        ``combined`` row marked primary.  Results: ``beta`` per branch,
        ``thermal_hysteresis_K`` and ``alteration`` when both branches exist.

    References
    ----------
    Gromme, Wright & Peck (1969); Fabian, Shcherbakov & McEnroe (2013).
    """
    s = OrderingSettings.from_options(options)
    T = np.asarray(temperature_K, dtype=float).ravel()
    y = np.asarray(signal, dtype=float).ravel()
    if T.shape != y.shape:
        raise InvalidValue(f"temperature_K has {T.size} values but the signal has {y.size}",
                           field="signal")
    if search_K is not None:
        search_K = (float(search_K[0]), float(search_K[1]))
        if not search_K[0] < search_K[1]:
            raise InvalidValue(f"search_K must be (low, high) in K with low < high, got {search_K!r}",
                               field="search_K")
    parameters: dict[str, Any] = {"run_kind": run_kind,
                                  "search_K": list(search_K) if search_K else None,
                                  **{k: (list(v) if isinstance(v, tuple) else v)
                                     for k, v in dataclasses.asdict(s).items()}}
    notes: list[str] = []
    finite = np.isfinite(T) & np.isfinite(y)
    if not np.all(finite):
        notes.append(f"{np.count_nonzero(~finite)} non-finite rows left out")
    parts = split_branches(T, branch)
    transitions: list[TransitionEstimate] = []
    results: list[ResultValue] = []
    curves: dict[str, UniformCurve] = {}
    per_branch: dict[str, dict[str, TransitionEstimate]] = {}
    combined_K: dict[str, float] = {}
    diagnostics: dict[str, Any] = {"method_versions": dict(METHOD_VERSIONS), "branches": {}}
    for name, idx in parts.items():
        idx = idx[finite[idx]]
        try:
            curve = uniform_curve(T[idx], y[idx], grid_step_K=s.grid_step_K)
        except TransitionNotFound as exc:
            notes.append(f"{name}: {exc}")
            continue
        curves[name] = curve
        search = search_K or _default_search(curve.temperature_K, s.search_floor_K)
        if search is None:
            notes.append(f"{name}: the data end below search_floor_K = {s.search_floor_K:g} K, where "
                            "no ordering transition is sought; give search_K to look lower")
            continue
        # one fixed seed per branch name, so a branch gives the same numbers alone or with the other
        rows, beta = _branch_estimates(curve, search, s, s.seed + BRANCHES.index(name), notes, name)
        diagnostics["branches"][name] = {"grid_step_K": curve.step_K, "interpolated": curve.interpolated,
                                         "n_points": curve.n_source, "search_K": list(search),
                                         "noise_sigma": noise_sigma(curve.signal)}
        if not rows:
            continue
        comb = combine_methods([r.temperature_K for r in rows.values()],
                               [r.uncertainty_K for r in rows.values()], list(rows))
        assignment = assign_kind(comb.value, run_kind, kinds=kinds, allowed=ORDERING_KINDS)
        for r in rows.values():
            transitions.append(dataclasses.replace(r, kind=assignment.kind, branch=name,
                                                   ambiguous=assignment.ambiguous))
        transitions.append(TransitionEstimate(
            kind=assignment.kind, temperature_K=comb.value, uncertainty_K=comb.uncertainty,
            method="combined", branch=name, primary=True, ambiguous=assignment.ambiguous,
            diagnostics={"methods": list(comb.methods), "statistical_K": comb.statistical,
                         "between_methods_K": comb.between_methods,
                         "candidates": list(assignment.candidates)}))
        if len(rows) < 3:
            notes.append(f"{name}: combined estimate from {len(rows)} method(s) only")
        if beta is not None:
            results.append(dataclasses.replace(beta, branch=name))
        per_branch[name] = rows
        combined_K[name] = comb.value
    if "heating" in per_branch and "cooling" in per_branch:
        try:
            results.append(thermal_hysteresis(per_branch["heating"], per_branch["cooling"]))
        except TransitionNotFound as exc:
            notes.append(f"thermal hysteresis: {exc}")
        results.append(alteration_check(
            curves["heating"], curves["cooling"], (combined_K["heating"], combined_K["cooling"]),
            align=s.alteration_align, exclusion_K=s.alteration_exclusion_K, bin_K=s.alteration_bin_K,
            min_relative=s.alteration_min_relative, z=s.alteration_z))
    return Outcome(method="ordering-temperature", version=VERSION, parameters=parameters,
                   transitions=tuple(transitions), results=tuple(results), warnings=tuple(notes),
                   diagnostics=diagnostics)


def analyse_series(temperature_K, signal, branch=None, *, run_kind: str = "thermomagnetic",
                   signal_kind: str = "moment", ordering_options: dict[str, Any] | None = None,
                   low_temperature_options: dict[str, Any] | None = None,
                   curie_weiss_options: dict[str, Any] | None = None) -> list[Outcome]:
    """Every thermomagnetic analysis of one series: one Outcome per method family.

    Runs :func:`analyse_ordering` and
    :func:`magvault.analysis.lowtemp.analyse_low_temperature` on the whole
    series and, for a susceptibility, :func:`magvault.analysis.curieweiss.analyse_curie_weiss`
    on the heating branch (the cooling branch when there is no heating one),
    whose high-temperature part is the paramagnetic one before any alteration.
    An outcome that found nothing has no rows and says why in its warnings.

    Parameters
    ----------
    temperature_K, signal, branch
        As in :func:`analyse_ordering`.
    run_kind : str
        Run kind, for the catalogue assignment.
    signal_kind : {"moment", "susceptibility"}
        What the signal is; a susceptibility also gets the Curie-Weiss fit.
    ordering_options, low_temperature_options, curie_weiss_options : dict, optional
        Keyword options of the three analyses (recorded in each outcome).

    Returns
    -------
    list of Outcome
        ``ordering-temperature``, ``low-temperature-peaks`` and, for a
        susceptibility, ``curie-weiss``.
    """
    from .curieweiss import VERSION as CURIE_WEISS_VERSION  # imported here: both import this module
    from .curieweiss import analyse_curie_weiss
    from .lowtemp import analyse_low_temperature

    ordering = {"power_law": signal_kind != "susceptibility", **(ordering_options or {})}
    outcomes = [
        analyse_ordering(temperature_K, signal, branch, run_kind=run_kind, **ordering),
        analyse_low_temperature(temperature_K, signal, branch, run_kind=run_kind, signal_kind=signal_kind,
                                **(low_temperature_options or {})),
    ]
    if signal_kind == "susceptibility":
        T = np.asarray(temperature_K, dtype=float).ravel()
        y = np.asarray(signal, dtype=float).ravel()
        parts = split_branches(T, branch)
        name = "heating" if "heating" in parts else "cooling"
        idx = parts[name]
        try:
            outcomes.append(analyse_curie_weiss(T[idx], y[idx], **(curie_weiss_options or {})))
        except InvalidValue as exc:
            if exc.field not in ("temperature_K", "chi"):
                raise  # a bad option, not data without a paramagnetic range
            outcomes.append(Outcome(method="curie-weiss", version=CURIE_WEISS_VERSION,
                                    parameters=dict(curie_weiss_options or {}),
                                    warnings=(f"{name}: {exc.message}",)))
    return outcomes

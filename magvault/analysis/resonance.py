"""Resonance spectra: Lorentzian modes, their tracks in temperature and elastic anomalies.

A resonant-ultrasound run records, at each of several temperatures (one block
each), the response of a specimen swept in frequency around its mechanical
resonances.  Each resonance is fitted with a Lorentzian on a linear
background (:func:`fit_lorentzian`), which gives its centre f0 and full
width at half maximum (FWHM), hence the internal friction

    Q^-1 = FWHM / f0.

Amplitude or power
    The demo and most exports record the *amplitude* spectrum, and this
    module fits the Lorentzian to the recorded quantity itself: the FWHM is
    the full width at half of the fitted peak height of the recorded
    amplitude (the convention of the demo's ``lorentzian`` line shape, whose
    recorded amplitude is the Lorentzian).  For a spectrum recorded as the
    magnitude of a driven harmonic oscillator, the *power* (magnitude
    squared) is the Lorentzian whose FWHM is f0/Q, and the half-maximum
    width of the magnitude is sqrt(3) times wider; such data should be
    squared before fitting.  This module does not square anything.

Modes are tracked from block to block by nearest relative frequency, and
f^2 of each mode, proportional to the elastic modulus that governs it
(scaling all moduli by s scales every frequency by sqrt(s); Migliori &
Sarrao, 1997), and Q^-1 are followed in temperature.  A phase transition
shows as a peak of Q^-1(T) (``qinv-peak``) and as a change of slope of the
modulus, hence of f^2(T) (``f2-break``).  The transitions of all modes and
both methods are combined per catalogue kind into one primary row.

What the temperature spacing permits.  A Q^-1 peak narrower than the block
spacing is only located to within the blocks around its highest point: the
stated uncertainty of ``qinv-peak`` therefore carries a rectangular (Type B)
term for the interval in which that block is the highest, of width half the
distance between its neighbours (JCGM 100:2008, 4.3.7), shared by every mode
measured on the same blocks.  With blocks 10-15 K apart this term is 3-4 K,
with 25 K about 7 K, with 40-50 K about 13 K (the demo's blocks: 3.6 K at
the ordering near 590 K, 7 K near 425 K, 13 K near 500 K).  The ``f2-break`` position is the
intersection of two straight lines and is not limited to the grid, but a
cusp-shaped softening is not two straight lines: the misfit enlarges the
profile interval (the chi-square is scaled by the residual variance).

Every function is pure: arrays in, frozen dataclasses out; the numerical
choices are keyword arguments (:class:`ResonanceSettings`) recorded in the
returned :class:`~magvault.analysis.results.Outcome`.

References
----------
Migliori, A. & Sarrao, J. L. (1997). Resonant Ultrasound Spectroscopy:
Applications to Physics, Materials Measurements, and Nondestructive
Evaluation. Wiley, New York.
Birge, R. T. (1932). The calculation of errors by the method of least
squares. Phys. Rev. 40, 207 (the Birge ratio; from memory).
Hudson, D. J. (1966). Fitting segmented curves whose join points have to be
estimated. J. Am. Stat. Assoc. 61, 1097 (two lines joined at an unknown
point; from memory).
JCGM 100:2008, Evaluation of measurement data - Guide to the expression of
uncertainty in measurement (GUM), 4.3.7 and 5.2 (from memory).
"""

from __future__ import annotations

import dataclasses
import warnings
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np
from scipy.optimize import OptimizeWarning, curve_fit
from scipy.signal import find_peaks, peak_widths
from scipy.stats import f as f_distribution

from ..catalogue import UNASSIGNED, assign_kind
from ..errors import InvalidValue, MagvaultError
from .options import settings_from_options
from .results import Outcome, ResultValue, TransitionEstimate

__all__ = [
    "VERSION", "METHOD", "LorentzianFit", "FitFailed", "ResonanceSettings", "ModePeak", "Break", "Combined",
    "fit_lorentzian", "spectrum_noise", "qinv_peaks", "f2_break", "combine_estimates",
    "analyse_resonance", "from_series",
]

VERSION = "1.0"
METHOD = "resonance-modes"
FIT_METHOD = "lorentzian-fit"
_MAD_TO_SIGMA = 1.4826          # median absolute deviation -> Gaussian standard deviation
_SECOND_DIFFERENCE_VARIANCE = 6.0  # a second difference of white noise has variance 6 sigma^2
_ONE_SIGMA = 0.6826894921370859  # probability inside +/- 1 standard deviation


class FitFailed(MagvaultError):
    """A Lorentzian could not be fitted to the points given (the message says why)."""


# --------------------------------------------------------------------------
# One Lorentzian
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class LorentzianFit:
    """A Lorentzian on a linear background, each parameter with its standard uncertainty.

    Model: ``A(f) = height * (FWHM/2)^2 / ((f - centre)^2 + (FWHM/2)^2)
    + offset + slope * (f - reference_Hz)``.

    Attributes
    ----------
    centre_Hz, centre_u_Hz : float
        Centre f0 (the maximum of the Lorentzian) and its standard uncertainty, Hz.
    fwhm_Hz, fwhm_u_Hz : float
        Full width at half maximum of the fitted amplitude Lorentzian, Hz.
    height, height_u : float
        Peak height above the background, in the unit of the amplitude.
    offset, offset_u : float
        Background at ``reference_Hz``, unit of the amplitude.
    slope_per_Hz, slope_u_per_Hz : float
        Background slope, amplitude unit per Hz.
    reference_Hz : float
        Frequency at which the background equals ``offset`` (mean of the points).
    inverse_q, inverse_q_u : float
        Q^-1 = FWHM / f0 (dimensionless), uncertainty propagated to first
        order with the covariance of centre and FWHM.
    covariance : tuple of tuple of float
        Covariance of (centre_Hz, fwhm_Hz, height, offset, slope_per_Hz),
        scaled by the residual variance.
    residual_sigma : float
        Root-mean-square residual with n - 5 degrees of freedom.
    n_points : int
        Number of points fitted.
    """

    centre_Hz: float
    centre_u_Hz: float
    fwhm_Hz: float
    fwhm_u_Hz: float
    height: float
    height_u: float
    offset: float
    offset_u: float
    slope_per_Hz: float
    slope_u_per_Hz: float
    reference_Hz: float
    inverse_q: float
    inverse_q_u: float
    covariance: tuple[tuple[float, ...], ...]
    residual_sigma: float
    n_points: int


def _lorentzian_model(x, x0, g, h, b0, b1):
    half = 0.5 * g
    return h * half * half / ((x - x0) ** 2 + half * half) + b0 + b1 * x


def _arrays(frequency_Hz, amplitude) -> tuple[np.ndarray, np.ndarray]:
    f = np.asarray(frequency_Hz, dtype=float).ravel()
    a = np.asarray(amplitude, dtype=float).ravel()
    if f.shape != a.shape:
        raise InvalidValue(f"frequency_Hz has {f.size} values but amplitude has {a.size}", field="amplitude")
    if not np.all(np.isfinite(f)):
        raise InvalidValue("frequency_Hz has non-finite values", field="frequency_Hz")
    if not np.all(np.isfinite(a)):
        raise InvalidValue("amplitude has non-finite values", field="amplitude")
    return f, a


def fit_lorentzian(frequency_Hz, amplitude, *, centre_Hz: float | None = None,
                   fwhm_Hz: float | None = None, max_evaluations: int = 2000) -> LorentzianFit:
    """Fit one resonance with a Lorentzian on a linear background.

    The demo and most exports record the amplitude spectrum: the Lorentzian
    is fitted to the recorded amplitude itself, and ``fwhm_Hz`` is its full
    width at half of the fitted peak height (the amplitude sense, as in the
    demo's line shape), so that Q^-1 = FWHM/f0.  For magnitude data whose
    square is the Lorentzian (the power sense), square the amplitude first.

    Parameters
    ----------
    frequency_Hz : array_like
        Frequencies in Hz (any order), at least 6 points.
    amplitude : array_like
        Recorded amplitude (any unit, e.g. V), same length.
    centre_Hz, fwhm_Hz : float, optional
        Starting values; default the highest point and its half-height width
        (:func:`scipy.signal.peak_widths`).
    max_evaluations : int
        Largest number of model evaluations of the least-squares fit.

    Returns
    -------
    LorentzianFit
        Parameters with standard uncertainties from
        :func:`scipy.optimize.curve_fit`, whose covariance is scaled by the
        residual variance (no weights: the noise is taken as constant).

    Raises
    ------
    InvalidValue
        Mismatched lengths or non-finite values (naming the field).
    FitFailed
        Too few points, no convergence, or a centre or width the points do
        not determine (centre outside the points, FWHM wider than them).

    References
    ----------
    Migliori & Sarrao (1997), Resonant Ultrasound Spectroscopy, Wiley.
    """
    f, a = _arrays(frequency_Hz, amplitude)
    order = np.argsort(f, kind="stable")
    f, a = f[order], a[order]
    if f.size < 6:
        raise FitFailed(f"{f.size} points; a Lorentzian on a linear background needs at least 6")
    span = float(f[-1] - f[0])
    if not span > 0:
        raise FitFailed("all frequencies are equal")
    ref = float(np.mean(f))
    scale = 0.5 * span
    x = (f - ref) / scale
    # starting values: the end points give a background line; the rest from the highest point
    slope0 = (a[-1] - a[0]) / (x[-1] - x[0])
    base0 = a[0] + slope0 * (x - x[0])
    top = int(np.argmax(a - base0))
    h0 = float(a[top] - base0[top])
    if not h0 > 0:
        raise FitFailed("no peak above the background")
    if centre_Hz is None:
        x0 = float(x[top])
    else:
        x0 = (float(centre_Hz) - ref) / scale
    if fwhm_Hz is None:
        w_idx = float(peak_widths(a - base0, [top], rel_height=0.5)[0][0])
        step = float(np.median(np.diff(x))) if x.size > 1 else 1.0
        g0 = max(w_idx * step, 2.0 * step)
    else:
        g0 = float(fwhm_Hz) / scale
    b00 = float(np.mean(base0)) - slope0 * float(np.mean(x))
    p0 = [x0, g0, h0, b00, slope0]
    lower = [x[0], 1e-9, 0.0, -np.inf, -np.inf]
    upper = [x[-1], 8.0, np.inf, np.inf, np.inf]
    p0[0] = min(max(p0[0], x[0]), x[-1])
    p0[1] = min(max(p0[1], 2e-9), 4.0)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", OptimizeWarning)
            popt, pcov = curve_fit(_lorentzian_model, x, a, p0=p0, bounds=(lower, upper),
                                   max_nfev=int(max_evaluations))
    except (RuntimeError, ValueError, OptimizeWarning) as exc:
        raise FitFailed(f"least squares did not converge ({exc})") from None
    if not np.all(np.isfinite(pcov)):
        raise FitFailed("the points do not determine every parameter (singular covariance)")
    x0, g, h, b0, b1 = (float(v) for v in popt)
    if not x[0] < x0 < x[-1]:
        raise FitFailed("the fitted centre lies at the edge of the points")
    if g * scale >= span:
        raise FitFailed(f"the fitted FWHM ({g * scale:.4g} Hz) is not narrower than the points "
                        f"({span:.4g} Hz)")
    jac = np.diag([scale, scale, 1.0, 1.0, 1.0 / scale])
    cov = jac @ pcov @ jac.T
    f0, fwhm = ref + x0 * scale, g * scale
    iq = fwhm / f0
    grad = np.array([-fwhm / f0 ** 2, 1.0 / f0])
    iq_u = float(np.sqrt(max(grad @ cov[:2, :2] @ grad, 0.0)))
    u = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    resid = a - _lorentzian_model(x, *popt)
    rms = float(np.sqrt(np.sum(resid ** 2) / (f.size - 5))) if f.size > 5 else float("nan")
    return LorentzianFit(centre_Hz=f0, centre_u_Hz=float(u[0]), fwhm_Hz=fwhm, fwhm_u_Hz=float(u[1]),
                         height=h, height_u=float(u[2]), offset=b0, offset_u=float(u[3]),
                         slope_per_Hz=b1 / scale, slope_u_per_Hz=float(u[4]), reference_Hz=ref,
                         inverse_q=iq, inverse_q_u=iq_u,
                         covariance=tuple(tuple(float(v) for v in row) for row in cov),
                         residual_sigma=rms, n_points=int(f.size))


def spectrum_noise(amplitude) -> float:
    """Noise standard deviation of a spectrum from its second differences.

    sigma = 1.4826 * MAD(second differences) / sqrt(6): a second difference
    of white noise has variance 6 sigma^2, and the median keeps the few
    points on the flanks of narrow peaks from counting as noise.
    """
    a = np.asarray(amplitude, dtype=float).ravel()
    if a.size < 3:
        return 0.0
    d2 = np.diff(a, 2)
    return float(_MAD_TO_SIGMA * np.median(np.abs(d2 - np.median(d2))) / np.sqrt(_SECOND_DIFFERENCE_VARIANCE))


# --------------------------------------------------------------------------
# Settings
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class ResonanceSettings:
    """Every numerical choice of :func:`analyse_resonance` (all recorded).

    Attributes
    ----------
    window_gap_factor : float
        Within a block, a frequency step larger than this many median steps
        starts a new window (the demo records disjoint windows around modes).
    prominence_sigma : float
        A peak must stand this many noise standard deviations
        (:func:`spectrum_noise` of the block) above its surroundings
        (the prominence of :func:`scipy.signal.find_peaks`) ...
    min_relative_prominence : float
        ... and at least this fraction of the block's amplitude range (this
        keeps rounding wiggles out on noise-free data).
    fit_window_fwhm : float
        Each peak is fitted on the points of its window within this many
        estimated FWHM of its top, cut at the midpoints to its neighbours.
    min_fit_points : int
        Fewest points for one fit.
    track_tolerance : float
        A peak joins a mode when its frequency differs from the mode's last
        fitted frequency by less than this fraction; otherwise it starts a
        new mode.  A mode missing from a block is a gap.
    min_mode_blocks : int
        Fewest fitted blocks of a mode for transitions to be sought.
    qinv_peak_sigma : float
        A local maximum of Q^-1(T) must exceed the straight line through its
        two neighbours by this many (propagated) standard uncertainties ...
    qinv_min_rise : float
        ... and by at least this fraction of that line.
    f2_break_sigma : float
        A block is a break candidate when the change of slope of f^2(T)
        there exceeds this many standard uncertainties ...
    f2_min_slope_change_per_K : float
        ... and this fraction of the mode's median f^2 per kelvin.  Stronger
        candidates suppress weaker ones within ``f2_suppress_blocks``
        (the shoulders of a softening dip curve the other way).
    f2_suppress_blocks : int
        See above.
    f2_window_blocks : int
        The two lines are fitted to the candidate block and up to this many
        blocks on each side, stopping short of another candidate and its
        immediate neighbours.
    f2_scan_step_K : float
        Step of the scan of the break temperature.
    """

    window_gap_factor: float = 4.0
    prominence_sigma: float = 10.0
    min_relative_prominence: float = 0.01
    fit_window_fwhm: float = 10.0
    min_fit_points: int = 8
    track_tolerance: float = 0.05
    min_mode_blocks: int = 5
    qinv_peak_sigma: float = 5.0
    qinv_min_rise: float = 0.1
    f2_break_sigma: float = 5.0
    f2_min_slope_change_per_K: float = 2e-4
    f2_suppress_blocks: int = 2
    f2_window_blocks: int = 3
    f2_scan_step_K: float = 0.05

    @classmethod
    def from_options(cls, options: dict[str, Any]) -> "ResonanceSettings":
        settings = settings_from_options(cls, options)
        settings.validate()
        return settings

    def validate(self) -> None:
        positive = ("window_gap_factor", "prominence_sigma", "fit_window_fwhm", "track_tolerance",
                    "qinv_peak_sigma", "f2_break_sigma", "f2_scan_step_K")
        for name in positive:
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value > 0):
                raise InvalidValue(f"option {name} must be a positive number, got {value!r}", field=name)
        for name in ("min_relative_prominence", "qinv_min_rise", "f2_min_slope_change_per_K"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value >= 0):
                raise InvalidValue(f"option {name} must be a number >= 0, got {value!r}", field=name)
        if not self.track_tolerance < 1:
            raise InvalidValue(f"option track_tolerance must be below 1, got {self.track_tolerance!r}",
                               field="track_tolerance")
        minimum = {"min_fit_points": 6, "min_mode_blocks": 3, "f2_suppress_blocks": 0, "f2_window_blocks": 2}
        for name, low in minimum.items():
            value = getattr(self, name)
            if not (isinstance(value, (int, np.integer)) and value >= low):
                raise InvalidValue(f"option {name} must be an integer >= {low}, got {value!r}", field=name)


# --------------------------------------------------------------------------
# Transitions of one mode
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class ModePeak:
    """A peak of Q^-1(T) of one mode.

    ``temperature_K`` is the vertex of the parabola through the highest block
    and its two neighbours; ``uncertainty_K`` combines ``statistical_K``
    (the Q^-1 uncertainties propagated to first order through the vertex) and ``grid_K``
    (rectangular term for the block spacing) in quadrature.
    """

    temperature_K: float
    uncertainty_K: float
    statistical_K: float
    grid_K: float
    blocks_K: tuple[float, float, float]
    rise: float
    rise_sigma: float


def _vertex(T: np.ndarray, y: np.ndarray) -> float:
    a, b, _ = np.polyfit(T - T[1], y, 2)
    return float(T[1] - b / (2.0 * a)) if a < 0 else float(T[1])


def qinv_peaks(temperature_K, inverse_q, inverse_q_u, *, sigma: float = 5.0,
               min_rise: float = 0.1) -> list[ModePeak]:
    """Peaks of Q^-1(T): local maxima standing above the line through their neighbours.

    Rule: an interior block i with Q_i above both neighbours is a peak when
    Q_i minus the straight line through blocks i-1 and i+1 (evaluated at
    T_i) exceeds `sigma` times its propagated standard uncertainty and
    `min_rise` times that line.  Its temperature is the vertex of the
    parabola through the three blocks (kept inside them); the statistical
    uncertainty propagates the Q^-1 uncertainties through the vertex
    (numerical derivatives), the grid term is (T_{i+1} - T_{i-1}) /
    (2 sqrt(12)): block i is the highest for a true peak anywhere in an
    interval of about half the distance between its neighbours, taken as a
    rectangular distribution (JCGM 100:2008, 4.3.7).

    Parameters
    ----------
    temperature_K : array_like
        Block temperatures in K (any order; sorted here).
    inverse_q, inverse_q_u : array_like
        Q^-1 and its standard uncertainty at each block.
    sigma, min_rise : float
        The rule's numbers (see above).

    Returns
    -------
    list of ModePeak
        Strongest (largest rise in sigma) first.
    """
    T = np.asarray(temperature_K, dtype=float).ravel()
    q = np.asarray(inverse_q, dtype=float).ravel()
    u = np.asarray(inverse_q_u, dtype=float).ravel()
    if not (T.shape == q.shape == u.shape):
        raise InvalidValue("temperature_K, inverse_q and inverse_q_u must have equal lengths",
                           field="inverse_q")
    order = np.argsort(T)
    T, q, u = T[order], q[order], u[order]
    out: list[ModePeak] = []
    for i in range(1, T.size - 1):
        if not (q[i] > q[i - 1] and q[i] > q[i + 1]):
            continue
        w = (T[i] - T[i - 1]) / (T[i + 1] - T[i - 1])
        line = (1.0 - w) * q[i - 1] + w * q[i + 1]
        rise = q[i] - line
        u_rise = float(np.sqrt(u[i] ** 2 + ((1 - w) * u[i - 1]) ** 2 + (w * u[i + 1]) ** 2))
        significant = rise > sigma * u_rise if u_rise > 0 else rise > 0
        if not (significant and rise > min_rise * abs(line)):
            continue
        Ts, qs, us = T[i - 1:i + 2], q[i - 1:i + 2], u[i - 1:i + 2]
        top = min(max(_vertex(Ts, qs), Ts[0]), Ts[-1])
        grad = np.zeros(3)
        for k in range(3):
            # central difference with a step far below u, so that the derivative is the linear one
            dq = 1e-4 * max(us[k], 1e-9 * abs(qs[k]), 1e-300)
            up, down = qs.copy(), qs.copy()
            up[k] += dq
            down[k] -= dq
            grad[k] = (min(max(_vertex(Ts, up), Ts[0]), Ts[-1])
                       - min(max(_vertex(Ts, down), Ts[0]), Ts[-1])) / (2.0 * dq)
        stat = float(np.sqrt(np.sum((grad * us) ** 2)))
        grid = float((Ts[2] - Ts[0]) / (2.0 * np.sqrt(12.0)))
        out.append(ModePeak(temperature_K=top, uncertainty_K=float(np.hypot(stat, grid)), statistical_K=stat,
                            grid_K=grid, blocks_K=(float(Ts[0]), float(Ts[1]), float(Ts[2])),
                            rise=float(rise), rise_sigma=float(rise / u_rise) if u_rise > 0 else float("inf")))
    out.sort(key=lambda p: -p.rise_sigma)
    return out


@dataclass(frozen=True)
class Break:
    """A slope break of f^2(T): two straight lines joined at ``temperature_K``.

    ``uncertainty_K`` is the half-width of the chi-square profile interval
    (see :func:`f2_break`); ``open_profile`` says the interval reached the
    end of the scanned range, so the uncertainty is a lower bound there.
    ``slope_change_per_K`` is (right slope - left slope) / f^2 at the break.
    """

    temperature_K: float
    uncertainty_K: float
    slopes: tuple[float, float]
    slope_change_per_K: float
    chi2_min: float
    dof: int
    threshold: float
    open_profile: bool
    blocks_K: tuple[float, ...]


def _hinge_chi2(T, y, w, Tb):
    """Weighted least squares of y = a + b1 min(T - Tb, 0) + b2 max(T - Tb, 0), for every Tb.

    Returns chi^2 (shape of Tb) and the coefficients (a, b1, b2) per Tb.
    """
    Tb = np.atleast_1d(np.asarray(Tb, dtype=float))
    d = T[None, :] - Tb[:, None]
    X = np.stack([np.ones_like(d), np.minimum(d, 0.0), np.maximum(d, 0.0)], axis=-1)  # (G, n, 3)
    Xw = X * w[None, :, None]
    A = np.einsum("gni,gnj->gij", Xw, X)
    rhs = np.einsum("gni,n->gi", Xw, y)
    coef = np.einsum("gij,gj->gi", np.linalg.pinv(A), rhs)
    r = y[None, :] - np.einsum("gni,gi->gn", X, coef)
    return np.einsum("gn,gn,n->g", r, r, w), coef


def f2_break(temperature_K, frequency_Hz, frequency_u_Hz, *, scan_step_K: float = 0.05,
             scan_K: tuple[float, float] | None = None) -> Break:
    """Break temperature of f^2(T) by two straight lines joined at a scanned temperature.

    For each trial break Tb (a grid of step `scan_step_K` over `scan_K`,
    default from the second to the second-last temperature) the continuous
    two-line model is fitted to f^2 by weighted linear least squares
    (weights 1/u(f^2)^2, u(f^2) = 2 f u(f)); the break is the minimum of
    chi^2(Tb) (Hudson, 1966).  Its uncertainty is half the width of the set
    of Tb whose chi^2 lies within a threshold of the minimum: 1 when the
    residuals agree with the stated u(f) (chi^2_min/dof <= 1), otherwise
    (chi^2_min/dof) times the 68.27 % point of F(1, dof), the profile rule
    when the variance is estimated from the residuals.

    Parameters
    ----------
    temperature_K : array_like
        Block temperatures in K, at least 5.
    frequency_Hz, frequency_u_Hz : array_like
        Mode frequency and its standard uncertainty at each block, Hz.
    scan_step_K : float
        Step of the break scan, K.
    scan_K : (float, float), optional
        Range of the scan, K.

    Returns
    -------
    Break
    """
    T = np.asarray(temperature_K, dtype=float).ravel()
    f = np.asarray(frequency_Hz, dtype=float).ravel()
    uf = np.asarray(frequency_u_Hz, dtype=float).ravel()
    if not (T.shape == f.shape == uf.shape):
        raise InvalidValue("temperature_K, frequency_Hz and frequency_u_Hz must have equal lengths",
                           field="frequency_Hz")
    if T.size < 5:
        raise InvalidValue(f"a slope break needs at least 5 temperatures, got {T.size}", field="temperature_K")
    if not (np.isfinite(scan_step_K) and scan_step_K > 0):
        raise InvalidValue(f"scan_step_K must be positive, got {scan_step_K!r}", field="scan_step_K")
    order = np.argsort(T)
    T, f, uf = T[order], f[order], uf[order]
    y = f ** 2
    uy = 2.0 * f * uf
    scale = float(np.median(y))
    y, uy = y / scale, uy / scale
    floor = 1e-12 * np.max(np.abs(y))
    w = 1.0 / np.maximum(uy, floor) ** 2
    lo, hi = (float(T[1]), float(T[-2])) if scan_K is None else (float(scan_K[0]), float(scan_K[1]))
    if not lo < hi:
        raise InvalidValue(f"scan_K must be (low, high) with low < high, got {(lo, hi)!r}", field="scan_K")
    grid = np.arange(lo, hi + 0.5 * scan_step_K, scan_step_K)
    chi2, _ = _hinge_chi2(T, y, w, grid)
    k = int(np.argmin(chi2))
    # refine the minimum between the neighbours of the coarse one
    fine = np.linspace(grid[max(k - 1, 0)], grid[min(k + 1, grid.size - 1)], 201)
    chi2_fine, coefs_fine = _hinge_chi2(T, y, w, fine)
    kf = int(np.argmin(chi2_fine))
    best, chi2_min, coef = float(fine[kf]), float(chi2_fine[kf]), coefs_fine[kf]
    dof = T.size - 4
    reduced = chi2_min / dof if dof > 0 else float("inf")
    threshold = 1.0 if reduced <= 1.0 else float(reduced * f_distribution.ppf(_ONE_SIGMA, 1, max(dof, 1)))
    level = chi2_min + threshold
    # the connected run of coarse points below the level around the minimum ...
    left = right = k
    while left > 0 and chi2[left - 1] <= level:
        left -= 1
    while right < grid.size - 1 and chi2[right + 1] <= level:
        right += 1
    open_profile = left == 0 or right == grid.size - 1
    # ... and its edges on a fine grid, by linear interpolation of chi^2 at the level
    span = np.linspace(grid[max(left - 1, 0)], grid[min(right + 1, grid.size - 1)], 401)
    prof, _ = _hinge_chi2(T, y, w, span)
    m = int(np.argmin(prof))
    lo_i, hi_i = m, m
    while lo_i > 0 and prof[lo_i - 1] <= level:
        lo_i -= 1
    while hi_i < span.size - 1 and prof[hi_i + 1] <= level:
        hi_i += 1

    def crossing(inner: int, outer: int) -> float:
        if outer < 0 or outer >= span.size:
            return float(span[inner])
        c_in, c_out = prof[inner], prof[outer]
        t = (level - c_in) / (c_out - c_in) if c_out != c_in else 0.0
        return float(span[inner] + min(max(t, 0.0), 1.0) * (span[outer] - span[inner]))

    lo_edge = min(crossing(lo_i, lo_i - 1), best)
    hi_edge = max(crossing(hi_i, hi_i + 1), best)
    u = 0.5 * (hi_edge - lo_edge)
    b1, b2 = float(coef[1]), float(coef[2])
    return Break(temperature_K=best, uncertainty_K=u, slopes=(b1 * scale, b2 * scale),
                 slope_change_per_K=(b2 - b1) / float(coef[0]) if coef[0] != 0 else float("nan"),
                 chi2_min=chi2_min, dof=dof, threshold=threshold, open_profile=open_profile,
                 blocks_K=tuple(float(t) for t in T))


def _break_candidates(T, f, uf, s: ResonanceSettings) -> list[int]:
    """Indices of blocks where the slope of f^2 changes (see ResonanceSettings)."""
    y = f ** 2
    uy = 2.0 * f * uf
    med = float(np.median(y))
    scored = []
    for i in range(1, T.size - 1):
        d1, d2 = T[i] - T[i - 1], T[i + 1] - T[i]
        ds = (y[i + 1] - y[i]) / d2 - (y[i] - y[i - 1]) / d1
        u = np.sqrt((uy[i + 1] / d2) ** 2 + (uy[i] * (1 / d1 + 1 / d2)) ** 2 + (uy[i - 1] / d1) ** 2)
        if abs(ds) > s.f2_break_sigma * u and abs(ds) / med > s.f2_min_slope_change_per_K:
            scored.append((abs(ds), i))
    chosen: list[int] = []
    for _, i in sorted(scored, reverse=True):
        if all(abs(i - j) > s.f2_suppress_blocks for j in chosen):
            chosen.append(i)
    return sorted(chosen)


# --------------------------------------------------------------------------
# Combination
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class Combined:
    """A combined estimate: value, standard uncertainty, Birge ratio (None for one estimate), count."""

    value: float
    uncertainty: float
    birge_ratio: float | None
    n: int


def combine_estimates(values, statistical, shared=None, shared_keys=None) -> Combined:
    """Weighted mean (generalised least squares) with the Birge ratio.

    Parameters
    ----------
    values, statistical : array_like
        Estimates and their independent standard uncertainties.
    shared, shared_keys : array_like, optional
        A second uncertainty term per estimate that is fully correlated among
        estimates with the same key (None: independent); for Q^-1 peaks the
        grid term of modes measured on the same three blocks.

    Returns
    -------
    Combined
        The mean and its uncertainty and the Birge ratio R = sqrt(chi^2/(n - 1))
        (Birge, 1932).  When R exceeds 1 the independent uncertainties are
        multiplied by R before the mean is taken again (without shared terms
        this multiplies the uncertainty of the mean by R); a shared term is
        not inflated, since it cannot cause scatter among the estimates.
    """
    x = np.asarray(values, dtype=float)
    st = np.asarray(statistical, dtype=float)
    n = x.size
    sh = np.zeros(n) if shared is None else np.asarray(shared, dtype=float)
    keys = [None] * n if shared_keys is None else list(shared_keys)
    S = np.diag(sh ** 2)
    for i in range(n):
        for j in range(n):
            if i != j and keys[i] is not None and keys[i] == keys[j]:
                S[i, j] = sh[i] * sh[j]
    D = np.diag(st ** 2)
    one = np.ones(n)

    def gls(C):
        Ci = np.linalg.pinv(C)
        norm = float(one @ Ci @ one)
        mean = float(one @ Ci @ x) / norm
        r = x - mean
        return mean, float(np.sqrt(1.0 / norm)), float(max(r @ Ci @ r, 0.0))

    mean, u, chi2 = gls(D + S)
    birge = float(np.sqrt(chi2 / (n - 1))) if n > 1 else None
    if birge is not None and birge > 1.0:
        # the scatter says the independent parts are understated: scale them (not the shared part)
        mean, u, _ = gls(birge ** 2 * D + S)
    return Combined(value=mean, uncertainty=u, birge_ratio=birge, n=n)


# --------------------------------------------------------------------------
# Blocks, peaks, tracking
# --------------------------------------------------------------------------

def _windows(f: np.ndarray, gap_factor: float) -> list[np.ndarray]:
    """Index arrays of the contiguous windows of a sorted frequency array."""
    if f.size < 2:
        return [np.arange(f.size)]
    steps = np.diff(f)
    positive = steps[steps > 0]
    typical = float(np.median(positive)) if positive.size else 0.0
    cuts = np.flatnonzero(steps > gap_factor * typical) + 1 if typical > 0 else np.array([], dtype=int)
    return [np.asarray(p) for p in np.split(np.arange(f.size), cuts)]


def _block_peaks(f: np.ndarray, a: np.ndarray, s: ResonanceSettings, label: str,
                 notes: list[str]) -> tuple[list[LorentzianFit], float]:
    windows = _windows(f, s.window_gap_factor)
    d2 = np.concatenate([np.diff(a[w], 2) for w in windows if w.size >= 3] or [np.zeros(0)])
    noise = float(_MAD_TO_SIGMA * np.median(np.abs(d2 - np.median(d2))) /
                  np.sqrt(_SECOND_DIFFERENCE_VARIANCE)) if d2.size else 0.0
    prominence = max(s.prominence_sigma * noise, s.min_relative_prominence * float(np.ptp(a)))
    fits: list[LorentzianFit] = []
    for w in windows:
        fw, aw = f[w], a[w]
        if fw.size < s.min_fit_points:
            if fw.size >= 3 and np.ptp(aw) > prominence:
                notes.append(f"{label}: window at {fw[0]:.6g}-{fw[-1]:.6g} Hz has only {fw.size} points "
                             f"(min_fit_points = {s.min_fit_points}); not fitted")
            continue
        peaks, props = find_peaks(aw, prominence=prominence)
        if peaks.size == 0:
            continue
        widths = peak_widths(aw, peaks, rel_height=0.5, prominence_data=(
            props["prominences"], props["left_bases"], props["right_bases"]))[0]
        step = float(np.median(np.diff(fw)))
        for n, p in enumerate(peaks):
            half = s.fit_window_fwhm * max(widths[n], 1.0) * step
            lo, hi = fw[p] - half, fw[p] + half
            if n > 0:
                lo = max(lo, 0.5 * (fw[peaks[n - 1]] + fw[p]))
            if n < peaks.size - 1:
                hi = min(hi, 0.5 * (fw[p] + fw[peaks[n + 1]]))
            sel = (fw >= lo) & (fw <= hi)
            if np.count_nonzero(sel) < s.min_fit_points:
                notes.append(f"{label}: peak near {fw[p]:.6g} Hz has only {np.count_nonzero(sel)} points "
                             f"in its fit window (min_fit_points = {s.min_fit_points})")
                continue
            try:
                fit = fit_lorentzian(fw[sel], aw[sel], centre_Hz=float(fw[p]),
                                     fwhm_Hz=max(widths[n], 1.0) * step)
            except FitFailed as exc:
                notes.append(f"{label}: peak near {fw[p]:.6g} Hz could not be fitted: {exc}")
                continue
            fits.append(fit)
    return fits, noise


def _track(blocks: list[tuple[float, list[LorentzianFit]]], tolerance: float) -> list[dict[int, LorentzianFit]]:
    """Modes as {block index: fit}; peaks join the mode of nearest relative frequency."""
    modes: list[dict[int, LorentzianFit]] = []
    last: list[float] = []
    for b, (_, fits) in enumerate(blocks):
        pairs = sorted((abs(fit.centre_Hz / last[m] - 1.0), p, m)
                       for p, fit in enumerate(fits) for m in range(len(modes))
                       if abs(fit.centre_Hz / last[m] - 1.0) < tolerance)
        used_p, used_m = set(), set()
        for _, p, m in pairs:
            if p in used_p or m in used_m:
                continue
            modes[m][b] = fits[p]
            last[m] = fits[p].centre_Hz
            used_p.add(p)
            used_m.add(m)
        for p, fit in enumerate(fits):
            if p not in used_p:
                modes.append({b: fit})
                last.append(fit.centre_Hz)
    modes.sort(key=lambda m: float(np.median([fit.centre_Hz for fit in m.values()])))
    return modes


# --------------------------------------------------------------------------
# Top level
# --------------------------------------------------------------------------

def analyse_resonance(frequency_Hz, amplitude, block_temperature_K, *, run_kind: str = "resonance",
                      kinds=None, **options) -> Outcome:
    """Modes, Q^-1 and elastic anomalies of a multi-block resonance run.

    In every block (one temperature) the resonance peaks are found with
    :func:`scipy.signal.find_peaks` (prominence at least ``prominence_sigma``
    times the block's noise, :func:`spectrum_noise`, and
    ``min_relative_prominence`` of its range), each is fitted on its own
    window of points (:func:`fit_lorentzian`), and the peaks are tracked as
    modes from block to block by nearest relative frequency (within
    ``track_tolerance`` of the mode's last fitted frequency; a mode missing
    in a block is a gap).  Modes are numbered 1, 2, ... by increasing median
    frequency.

    For every mode with at least ``min_mode_blocks`` fitted blocks,
    transitions are sought as peaks of Q^-1(T) (:func:`qinv_peaks`, method
    ``qinv-peak``) and as slope breaks of f^2(T) (:func:`f2_break` on the
    blocks around each candidate, method ``f2-break``); kinds come from
    :func:`magvault.catalogue.assign_kind` with `run_kind`.  For every kind
    other than ``unassigned`` one ``combined`` row (primary) joins all modes
    and both methods (:func:`combine_estimates`).

    Parameters
    ----------
    frequency_Hz : array_like
        Frequencies in Hz.
    amplitude : array_like
        Recorded amplitude spectrum (any unit; see :func:`fit_lorentzian` for
        the FWHM convention).
    block_temperature_K : array_like or float
        Temperature of each row's block in K (a single number for one block).
    run_kind : str
        Run kind for the catalogue assignment.
    kinds : dict, optional
        Catalogue (default the seeded one).
    **options
        Fields of :class:`ResonanceSettings` (all recorded).

    Returns
    -------
    Outcome
        Method ``resonance-modes``, version ``1.0``.  Results per block and
        mode: ``frequency_Hz`` (Hz), ``fwhm_Hz`` (Hz) and ``inverse_Q``
        (unit ``1``), method ``lorentzian-fit``, with block_temperature_K and
        ``mode`` in diagnostics.  Transitions: ``qinv-peak`` and ``f2-break``
        rows per mode (``mode`` in diagnostics) and ``combined`` rows.

    References
    ----------
    Migliori & Sarrao (1997); Hudson (1966); Birge (1932).
    """
    s = ResonanceSettings.from_options(options)
    f, a = _arrays(frequency_Hz, amplitude)
    bt = np.asarray(block_temperature_K, dtype=float).ravel()
    if bt.size == 1 and f.size != 1:
        bt = np.full(f.size, float(bt[0]))
    if bt.shape != f.shape:
        raise InvalidValue(f"block_temperature_K has {bt.size} values but frequency_Hz has {f.size}",
                           field="block_temperature_K")
    if not np.all(np.isfinite(bt)):
        raise InvalidValue("block_temperature_K has non-finite values", field="block_temperature_K")
    if f.size == 0:
        raise InvalidValue("no spectrum points", field="frequency_Hz")
    parameters: dict[str, Any] = {"run_kind": run_kind, **dataclasses.asdict(s)}
    notes: list[str] = []
    blocks: list[tuple[float, list[LorentzianFit]]] = []
    block_diag: list[dict[str, Any]] = []
    for T in np.unique(bt):
        sel = bt == T
        order = np.argsort(f[sel], kind="stable")
        fb, ab = f[sel][order], a[sel][order]
        label = f"block {T:g} K"
        fits, noise = _block_peaks(fb, ab, s, label, notes)
        if not fits:
            notes.append(f"{label}: no resonance could be fitted")
        blocks.append((float(T), fits))
        block_diag.append({"temperature_K": float(T), "n_points": int(fb.size), "noise": noise,
                           "n_peaks": len(fits)})
    modes = _track(blocks, s.track_tolerance)
    temps = [T for T, _ in blocks]
    results: list[ResultValue] = []
    rows: list[TransitionEstimate] = []
    mode_diag: list[dict[str, Any]] = []
    for number, mode in enumerate(modes, start=1):
        idx = sorted(mode)
        gaps = [temps[b] for b in range(idx[0], idx[-1] + 1) if b not in mode]
        mode_diag.append({"mode": number, "blocks_K": [temps[b] for b in idx], "gaps_K": gaps,
                          "median_frequency_Hz": float(np.median([mode[b].centre_Hz for b in idx]))})
        for b in idx:
            fit = mode[b]
            common = dict(method=FIT_METHOD, block_temperature_K=temps[b])
            diag = {"mode": number, "height": fit.height, "n_points": fit.n_points}
            results.append(ResultValue("frequency_Hz", fit.centre_Hz, fit.centre_u_Hz, "Hz", diagnostics=diag,
                                       **common))
            results.append(ResultValue("fwhm_Hz", fit.fwhm_Hz, fit.fwhm_u_Hz, "Hz", diagnostics=dict(diag),
                                       **common))
            results.append(ResultValue("inverse_Q", fit.inverse_q, fit.inverse_q_u, "1",
                                       diagnostics=dict(diag), **common))
        if len(idx) < s.min_mode_blocks:
            notes.append(f"mode {number}: fitted in {len(idx)} block(s), fewer than min_mode_blocks = "
                         f"{s.min_mode_blocks}; no transitions sought")
            continue
        T = np.array([temps[b] for b in idx])
        rows.extend(_mode_transitions(number, T, [mode[b] for b in idx], s, run_kind, kinds, notes))
    transitions = _with_combined(rows, run_kind, kinds, notes)
    diagnostics = {"method_versions": {m: VERSION for m in ("qinv-peak", "f2-break", "combined")}
                   | {FIT_METHOD: VERSION},
                   "blocks": block_diag, "modes": mode_diag,
                   "lineshape": "Lorentzian in the recorded amplitude; Q^-1 = FWHM/f0"}
    return Outcome(method=METHOD, version=VERSION, parameters=parameters, transitions=tuple(transitions),
                   results=tuple(results), warnings=tuple(notes), diagnostics=diagnostics)


def _mode_transitions(number: int, T: np.ndarray, fits: list[LorentzianFit], s: ResonanceSettings,
                      run_kind: str, kinds, notes: list[str]) -> list[TransitionEstimate]:
    out: list[TransitionEstimate] = []
    q = np.array([fit.inverse_q for fit in fits])
    uq = np.array([fit.inverse_q_u for fit in fits])
    for peak in qinv_peaks(T, q, uq, sigma=s.qinv_peak_sigma, min_rise=s.qinv_min_rise):
        out.append(TransitionEstimate(
            kind=UNASSIGNED, temperature_K=peak.temperature_K, uncertainty_K=peak.uncertainty_K,
            method="qinv-peak",
            diagnostics={"mode": number, "statistical_K": peak.statistical_K, "grid_K": peak.grid_K,
                         "blocks_K": list(peak.blocks_K), "rise": peak.rise, "rise_sigma": peak.rise_sigma}))
    f = np.array([fit.centre_Hz for fit in fits])
    uf = np.array([fit.centre_u_Hz for fit in fits])
    candidates = _break_candidates(T, f, uf, s)
    for c in candidates:
        others = [j for j in candidates if j != c]
        lo, hi = max(0, c - s.f2_window_blocks), min(T.size - 1, c + s.f2_window_blocks)
        for j in others:
            if j < c:
                lo = max(lo, j + 2)
            else:
                hi = min(hi, j - 2)
        if c - lo < 1 or hi - c < 1 or hi - lo + 1 < 5:
            notes.append(f"mode {number}: slope change near {T[c]:g} K has too few blocks around it "
                         "for two lines")
            continue
        try:
            br = f2_break(T[lo:hi + 1], f[lo:hi + 1], uf[lo:hi + 1], scan_step_K=s.f2_scan_step_K,
                          scan_K=(float(T[lo + 1]), float(T[hi - 1])))
        except InvalidValue as exc:
            notes.append(f"mode {number}: f2-break near {T[c]:g} K: {exc.message}")
            continue
        if br.open_profile:
            notes.append(f"mode {number}: f2-break near {T[c]:g} K not reported: the chi-square profile "
                         "does not close inside the blocks around it (an anomaly narrower than the block "
                         "spacing is not two straight lines)")
            continue
        out.append(TransitionEstimate(
            kind=UNASSIGNED, temperature_K=br.temperature_K, uncertainty_K=br.uncertainty_K, method="f2-break",
            diagnostics={"mode": number, "slopes_Hz2_per_K": list(br.slopes),
                         "slope_change_per_K": br.slope_change_per_K, "chi2_min": br.chi2_min, "dof": br.dof,
                         "threshold": br.threshold, "open_profile": br.open_profile,
                         "blocks_K": list(br.blocks_K)}))
    assigned = []
    for row in out:
        a = assign_kind(row.temperature_K, run_kind, kinds=kinds)
        assigned.append(dataclasses.replace(row, kind=a.kind, ambiguous=a.ambiguous,
                                            diagnostics={**row.diagnostics, "candidates": list(a.candidates)}))
    # several rows of one kind, method and mode: component 1 is the strongest (smallest uncertainty)
    final = []
    for row in assigned:
        same = [r for r in assigned if (r.kind, r.method) == (row.kind, row.method)]
        rank = sorted(same, key=lambda r: r.uncertainty_K).index(row) + 1
        final.append(dataclasses.replace(row, component=rank))
    return final


def _with_combined(rows: list[TransitionEstimate], run_kind: str, kinds, notes: list[str]) -> list[TransitionEstimate]:
    out = list(rows)
    by_kind: dict[str, list[TransitionEstimate]] = {}
    for r in rows:
        if r.component == 1 and r.kind != UNASSIGNED:
            by_kind.setdefault(r.kind, []).append(r)
    for kind, group in sorted(by_kind.items()):
        stat = [r.diagnostics.get("statistical_K", r.uncertainty_K) if r.method == "qinv-peak"
                else r.uncertainty_K for r in group]
        shared = [r.diagnostics.get("grid_K", 0.0) if r.method == "qinv-peak" else 0.0 for r in group]
        keys = [tuple(r.diagnostics["blocks_K"]) if r.method == "qinv-peak" else None for r in group]
        comb = combine_estimates([r.temperature_K for r in group], stat, shared, keys)
        a = assign_kind(comb.value, run_kind, kinds=kinds)
        if a.kind != kind:
            notes.append(f"{kind}: the combined value {comb.value:.1f} K falls outside its window "
                         f"(assigned {a.kind}); the rows' kind is kept")
        out.append(TransitionEstimate(
            kind=kind, temperature_K=comb.value, uncertainty_K=comb.uncertainty, method="combined", primary=True,
            ambiguous=any(r.ambiguous for r in group),
            diagnostics={"n": comb.n, "birge_ratio": comb.birge_ratio,
                         "methods": sorted({r.method for r in group}),
                         "modes": sorted({r.diagnostics["mode"] for r in group})}))
    return out


def from_series(frame, conditions: Mapping[str, Any] | None = None, **options) -> Outcome:
    """The resonance analysis of a stored run (canonical columns).

    Columns ``frequency_Hz`` and ``amplitude`` are required;
    ``block_temperature_K`` gives the blocks.  Without it the run's
    condition ``temperature_K`` makes a single block.  A single block gives
    per-block results (frequencies, FWHM, Q^-1) and no transitions, with a
    warning; it is not refused.  ``phase_rad`` is not used.

    Raises
    ------
    magvault.analysis.pipeline.NothingToAnalyse
        A required column is missing, there is no block temperature, or no
        row has finite values.
    """
    from .pipeline import NothingToAnalyse

    conditions = conditions or {}
    missing = [c for c in ("frequency_Hz", "amplitude") if c not in frame.columns]
    if missing:
        raise NothingToAnalyse(f"no {' or '.join(missing)} column for a resonance analysis")
    f = frame["frequency_Hz"].to_numpy(dtype=float)
    a = frame["amplitude"].to_numpy(dtype=float)
    if "block_temperature_K" in frame.columns:
        bt = frame["block_temperature_K"].to_numpy(dtype=float)
    elif conditions.get("temperature_K") is not None:
        bt = np.full(f.size, float(conditions["temperature_K"]))
    else:
        raise NothingToAnalyse("no block_temperature_K column and no temperature_K condition")
    keep = np.isfinite(f) & np.isfinite(a) & np.isfinite(bt)
    if not np.any(keep):
        raise NothingToAnalyse("no row with finite frequency, amplitude and block temperature")
    return analyse_resonance(f[keep], a[keep], bt[keep], run_kind="resonance", **options)

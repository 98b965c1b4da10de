"""Heat-capacity anomalies: lattice baseline, excess heat capacity, excess enthalpy and entropy.

A magnetic or order-disorder transition adds an excess dCp to the lattice
heat capacity.  The method (``heat-capacity-anomalies``):

1. **Lattice baseline.**  By default the Debye model (Debye, 1912) with
   theta_D free plus a linear term a*T that stands for Cp - Cv and
   anharmonicity,

       Cp_base(T) = 3 n R D(theta_D/T) + a T,

   n the atoms per formula unit (fixed, or free with ``fit_atoms=True`` as
   an effective oscillator count when the composition is not known).  A
   polynomial in T (``baseline="polynomial"``) is offered as well.  The fit
   is weighted least squares (weights 1/sigma_i^2) on the points outside the
   anomaly regions; the Debye fit profiles theta_D (the other parameters are
   linear) and takes the covariance from the full Jacobian, scaled by the
   reduced chi-square when that exceeds 1.
2. **Anomaly regions** (a stated rule, recorded).  Either given
   (``exclude_K=[(lo, hi), ...]``) or found by iteration: fit the baseline
   to the points outside the current regions; standardise the residuals by
   the noise, z_i = (Cp_i - base_i)/sigma_i; flag the points where the mean
   of z over a running window of ``window_K`` exceeds ``detect_sigma``
   standard errors of that mean (only excesses: anomalies add heat
   capacity); join flags closer than ``merge_gap_K``; grow each group
   outward while the window mean still exceeds ``grow_sigma`` standard
   errors, then by ``margin_K`` on each side; repeat until the regions no
   longer change.
3. **Anomalies.**  dCp = Cp - baseline.  A region holding several peaks of
   prominence above ``split_prominence_sigma`` noise sigmas is split at the
   minima between them.  A (sub)region whose largest excess stands
   ``min_peak_snr`` sigmas above the baseline is an anomaly.  Its temperature
   is that of the excess maximum, refined by the better (least residual over
   the five top points) of a local parabola and a local two-sided linear
   "tent" (a sharp, lambda-shaped peak is a cusp, which a parabola places
   up to nearly a grid step too far towards the slow side).  Its standard
   uncertainty adds in quadrature a rectangular term for the grid (step /
   sqrt(12)), the spread of the estimate when the top points are perturbed
   by the noise (fixed seed), and the baseline covariance propagated to
   first order.  width_K is the full width at half maximum of dCp.
4. **Excess enthalpy and entropy** of each anomaly, dH = int dCp dT and
   dS = int dCp/T dT over its region (trapezoid rule), with standard
   uncertainties from the noise (the trapezoid weights) and from the
   baseline-parameter covariance (first-order propagation).  Excess beyond
   the region (a weak tail below the noise) is not counted.

Everything is pure: arrays in, a frozen :class:`Outcome` out; every
numerical choice is a keyword option of :class:`HeatCapacitySettings`,
recorded in the outcome's parameters.

References
----------
Debye, P. (1912). Zur Theorie der spezifischen Waermen. Ann. Phys. 344, 789-839.
Gopal, E. S. R. (1966). Specific Heats at Low Temperatures. Plenum, New York
(the Debye function and its series; from memory).
Abramowitz, M. & Stegun, I. A. (1964). Handbook of Mathematical Functions,
sections 23.1 and 27.1 (Bernoulli numbers; Debye functions; from memory).
Rousseeuw, P. J. & Croux, C. (1993). J. Am. Stat. Assoc. 88, 1273 (MAD scale
factor 1.4826; from memory).
JCGM 100:2008, Evaluation of measurement data - Guide to the expression of
uncertainty in measurement (GUM), sections 4.3.7 (rectangular distribution)
and 5.2 (propagation with correlated inputs).
"""

from __future__ import annotations

import dataclasses
import functools
from dataclasses import dataclass
from math import factorial
from typing import Any, Callable, Mapping

import numpy as np
from scipy.optimize import minimize_scalar
from scipy.signal import find_peaks
from scipy.special import bernoulli

from ..catalogue import UNASSIGNED, assign_kind
from ..errors import InvalidValue
from .options import settings_from_options
from .results import Outcome, ResultValue, TransitionEstimate

__all__ = [
    "GAS_CONSTANT", "VERSION", "METHOD", "HeatCapacitySettings", "Baseline",
    "debye_heat_capacity", "debye_reduced", "analyse_heat_capacity", "from_series",
]

VERSION = "1.0"
METHOD = "heat-capacity-anomalies"
#: Molar gas constant, J/(mol K): N_A k_B, exact in the 2019 SI (8.314462618... J/(mol K)).
GAS_CONSTANT = 6.02214076e23 * 1.380649e-23
UNITS = ("J/(mol K)", "J/(kg K)")
_UNIT_ALIASES = {"J/(mol K)": "J/(mol K)", "J/(mol*K)": "J/(mol K)", "J/mol/K": "J/(mol K)",
                 "heat_capacity_J_per_mol_K": "J/(mol K)",
                 "J/(kg K)": "J/(kg K)", "J/(kg*K)": "J/(kg K)", "J/kg/K": "J/(kg K)",
                 "heat_capacity_J_per_kg_K": "J/(kg K)"}
_BASELINES = ("debye", "polynomial")
_NOISE_MODELS = ("proportional", "constant")
_MAD_TO_SIGMA = 1.4826
_SECOND_DIFFERENCE_VARIANCE = 6.0

# --------------------------------------------------------------------------
# The Debye function
# --------------------------------------------------------------------------

# Cv/(3nR) = 12 I3(x)/x^3 - 3x/(e^x - 1), I3(x) = int_0^x t^3/(e^t - 1) dt (integration
# by parts of the Debye integrand).  For small x both terms come from the Bernoulli
# expansion t/(e^t - 1) = sum B_k t^k/k! (radius 2 pi):
#     Cv/(3nR) = sum_k B_k x^k/k! * 3 (1 - k)/(k + 3) = 1 - x^2/20 + x^4/560 - ...
_SERIES_ORDER = 40
_B = bernoulli(_SERIES_ORDER)
_SERIES = np.array([_B[k] / factorial(k) * 3.0 * (1 - k) / (k + 3) for k in range(0, _SERIES_ORDER + 1, 2)])
_SMALL_X = 1.5
# For x > 1.5: int_x^inf t^3/(e^t - 1) dt = sum_k e^(-kx) (x^3/k + 3x^2/k^2 + 6x/k^3 + 6/k^4);
# 40 terms reach e^(-60) at x = 1.5.
_TAIL_TERMS = np.arange(1, 41, dtype=float)


def debye_reduced(x) -> np.ndarray:
    """Cv/(3nR) of the Debye model, (3/x^3) int_0^x t^4 e^t/(e^t - 1)^2 dt, x = theta_D/T.

    Parameters
    ----------
    x : array_like
        theta_D/T, >= 0 (``inf`` for T = 0).

    Returns
    -------
    numpy.ndarray
        Values between 0 and 1: 1 at x = 0 (Dulong-Petit), (4 pi^4/5)/x^3 at
        large x (Debye's T^3 law).  The even Bernoulli series is used for
        x <= 1.5 and the exponentially convergent tail of the Bose integral
        above, so neither small nor large x loses precision (relative error
        below 1e-13 against adaptive quadrature).

    References
    ----------
    Debye (1912); Abramowitz & Stegun (1964), 27.1 (from memory).
    """
    x = np.asarray(x, dtype=float)
    out = np.empty_like(x)
    small = x <= _SMALL_X
    xs = x[small]
    u = xs * xs
    acc = np.zeros_like(xs)
    for c in _SERIES[::-1]:  # Horner in x^2
        acc = acc * u + c
    out[small] = acc
    big = ~small
    xb = x[big]
    finite = np.isfinite(xb)
    xf = xb[finite]
    em = np.exp(-xf)
    ek = em.copy()
    tail = np.zeros_like(xf)
    for k in _TAIL_TERMS:
        tail += ek * (xf**3 / k + 3 * xf**2 / k**2 + 6 * xf / k**3 + 6 / k**4)
        ek *= em
        if not ek.size or ek.max() < 1e-20:
            break
    i3 = np.pi**4 / 15.0 - tail
    vals = np.empty_like(xb)
    vals[finite] = 12.0 * i3 / xf**3 - 3.0 * xf * em / (-np.expm1(-xf))
    vals[~finite] = 0.0
    out[big] = vals
    return out


def debye_heat_capacity(temperature_K, theta_D_K, atoms_per_formula=1) -> np.ndarray:
    """Molar isochoric heat capacity of the Debye model, J/(mol K).

    Cv = 9 n R (T/theta_D)^3 int_0^(theta_D/T) t^4 e^t/(e^t - 1)^2 dt
       = 3 n R D(theta_D/T)   (see :func:`debye_reduced`).

    Parameters
    ----------
    temperature_K : array_like
        Temperatures in K (>= 0; Cv = 0 at T = 0).
    theta_D_K : float or array_like
        Debye temperature in K (> 0), broadcast against the temperatures.
    atoms_per_formula : float
        n, atoms per formula unit (per mole of formula units); > 0.

    Returns
    -------
    numpy.ndarray
        Cv per mole of formula units, J/(mol K), with R = N_A k_B = 8.314462618... J/(mol K).

    References
    ----------
    Debye (1912).
    """
    T = np.asarray(temperature_K, dtype=float)
    theta = np.asarray(theta_D_K, dtype=float)
    n = float(atoms_per_formula)
    if np.any(~np.isfinite(T)) or np.any(T < 0):
        raise InvalidValue("temperature_K must be finite and >= 0 K", field="temperature_K")
    if np.any(~np.isfinite(theta)) or np.any(theta <= 0):
        raise InvalidValue(f"theta_D_K must be a positive number of kelvin, got {theta_D_K!r}",
                           field="theta_D_K")
    if not (np.isfinite(n) and n > 0):
        raise InvalidValue(f"atoms_per_formula must be positive, got {atoms_per_formula!r}",
                           field="atoms_per_formula")
    T, theta = np.broadcast_arrays(T, theta)
    with np.errstate(divide="ignore"):
        x = np.where(T > 0, theta / np.where(T > 0, T, 1.0), np.inf)
    return 3.0 * n * GAS_CONSTANT * debye_reduced(x)


# --------------------------------------------------------------------------
# Settings
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class HeatCapacitySettings:
    """Every numerical choice of :func:`analyse_heat_capacity` (all recorded).

    Attributes
    ----------
    baseline : {"debye", "polynomial"}
        Lattice baseline: 3 n R D(theta_D/T) + a T, or a polynomial in T.
    polynomial_degree : int
        Degree of the polynomial baseline (1 to 6).
    fit_atoms : bool
        Debye baseline: n free (an effective oscillator count, started at
        ``atoms_per_formula``) instead of fixed.
    molar_mass_kg_per_mol : float or None
        Molar mass of a formula unit; needed for a Debye baseline of data in
        J/(kg K) (without it the polynomial baseline is used, with a warning).
    theta_bounds_K : (float, float)
        Range in which theta_D is sought.
    exclude_K : sequence of (float, float) or None
        Anomaly regions given explicitly (K); None finds them by the rule of
        the module docstring.
    noise_model : {"proportional", "constant"}
        sigma_i proportional to Cp_i, or the same for every point; the level
        comes from the median absolute second difference of Cp.
    noise_sigma : float or None
        A given constant noise sigma (unit of the data) instead of the estimate.
    noise_floor_relative : float
        Smallest sigma, as a fraction of the median |Cp| (noise-free data).
    window_K : float
        Running window of the detection and growth rule, K.
    detect_sigma : float
        A window mean of z above this many standard errors flags an excess.
    grow_sigma : float
        Regions grow while the window mean exceeds this many standard errors.
    margin_K : float
        Added on each side of a grown region, K.
    merge_gap_K : float
        Flagged groups closer than this are joined, K.
    max_iterations : int
        Cap on the fit-and-flag iterations (a warning says when it was hit).
    min_points : int
        Fewest finite points accepted.
    min_baseline_points : int
        Fewest points outside the anomaly regions for the baseline fit.
    min_peak_snr : float
        Largest excess of a region, in noise sigmas, that makes it an anomaly.
    split_prominence_sigma : float
        Peak prominence, in noise sigmas, at which a region is split.
    n_resample : int
        Noise perturbations of the top points for the temperature uncertainty.
    seed : int
        Seed of those perturbations (fixed: re-running gives the same numbers).
    """

    baseline: str = "debye"
    polynomial_degree: int = 3
    fit_atoms: bool = False
    molar_mass_kg_per_mol: float | None = None
    theta_bounds_K: tuple[float, float] = (20.0, 3000.0)
    exclude_K: tuple[tuple[float, float], ...] | None = None
    noise_model: str = "proportional"
    noise_sigma: float | None = None
    noise_floor_relative: float = 1e-6
    window_K: float = 5.0
    detect_sigma: float = 4.0
    grow_sigma: float = 1.0
    margin_K: float = 5.0
    merge_gap_K: float = 3.0
    max_iterations: int = 30
    min_points: int = 20
    min_baseline_points: int = 15
    min_peak_snr: float = 5.0
    split_prominence_sigma: float = 8.0
    n_resample: int = 200
    seed: int = 0

    @classmethod
    def from_options(cls, options: dict[str, Any]) -> "HeatCapacitySettings":
        settings = settings_from_options(cls, options)
        return settings.validated()

    def validated(self) -> "HeatCapacitySettings":
        if self.baseline not in _BASELINES:
            raise InvalidValue(f"option baseline must be one of {', '.join(_BASELINES)}, got "
                               f"{self.baseline!r}", field="baseline")
        if self.noise_model not in _NOISE_MODELS:
            raise InvalidValue(f"option noise_model must be one of {', '.join(_NOISE_MODELS)}, got "
                               f"{self.noise_model!r}", field="noise_model")
        if not (isinstance(self.polynomial_degree, (int, np.integer)) and 1 <= self.polynomial_degree <= 6):
            raise InvalidValue("option polynomial_degree must be an integer from 1 to 6, got "
                               f"{self.polynomial_degree!r}", field="polynomial_degree")
        for name in ("window_K", "detect_sigma", "min_peak_snr", "split_prominence_sigma"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value > 0):
                raise InvalidValue(f"option {name} must be a positive number, got {value!r}", field=name)
        for name in ("grow_sigma", "margin_K", "merge_gap_K", "noise_floor_relative"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value >= 0):
                raise InvalidValue(f"option {name} must be a number >= 0, got {value!r}", field=name)
        for name, least in (("max_iterations", 1), ("min_points", 8), ("min_baseline_points", 5),
                            ("n_resample", 10)):
            value = getattr(self, name)
            if not (isinstance(value, (int, np.integer)) and value >= least):
                raise InvalidValue(f"option {name} must be an integer >= {least}, got {value!r}", field=name)
        m = self.molar_mass_kg_per_mol
        if m is not None and not (isinstance(m, (int, float)) and np.isfinite(m) and m > 0):
            raise InvalidValue(f"option molar_mass_kg_per_mol must be positive, got {m!r}",
                               field="molar_mass_kg_per_mol")
        if self.noise_sigma is not None and not (np.isfinite(self.noise_sigma) and self.noise_sigma > 0):
            raise InvalidValue(f"option noise_sigma must be positive, got {self.noise_sigma!r}",
                               field="noise_sigma")
        try:
            lo, hi = (float(v) for v in self.theta_bounds_K)
        except (TypeError, ValueError):
            lo = hi = float("nan")
        if not (0 < lo < hi < np.inf):
            raise InvalidValue("option theta_bounds_K must be (low, high) with 0 < low < high, got "
                               f"{self.theta_bounds_K!r}", field="theta_bounds_K")
        exclude = None
        if self.exclude_K is not None:
            try:
                exclude = tuple((float(a), float(b)) for a, b in self.exclude_K)
            except (TypeError, ValueError):
                raise InvalidValue("option exclude_K must be a list of (low, high) pairs in K, got "
                                   f"{self.exclude_K!r}", field="exclude_K") from None
            if not exclude or any(not (np.isfinite(a) and np.isfinite(b) and a < b) for a, b in exclude):
                raise InvalidValue("option exclude_K must be a non-empty list of (low, high) pairs in K "
                                   f"with low < high, got {self.exclude_K!r}", field="exclude_K")
            exclude = tuple(sorted(exclude))
        return dataclasses.replace(self, theta_bounds_K=(lo, hi), exclude_K=exclude)


# --------------------------------------------------------------------------
# Baselines
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class Baseline:
    """A fitted lattice baseline.

    Attributes
    ----------
    kind : str
        ``"debye"`` or ``"polynomial"``.
    names : tuple of str
        Parameter names (``theta_D_K``, ``linear``, ``atoms``, or ``c0``, ``c1``...).
    params : numpy.ndarray
        Parameter values (polynomial coefficients refer to (T - centre)/scale).
    covariance : numpy.ndarray
        Their covariance (scaled by the reduced chi-square when above 1).
    reduced_chi2 : float
        Weighted residual sum of squares over the degrees of freedom.
    n_points : int
        Points in the fit.
    at_bound : bool
        theta_D ended at a bound of its search range.
    evaluate : callable
        ``evaluate(T, params)`` -> baseline values.
    """

    kind: str
    names: tuple[str, ...]
    params: np.ndarray
    covariance: np.ndarray
    reduced_chi2: float
    n_points: int
    at_bound: bool
    evaluate: Callable[[np.ndarray, np.ndarray], np.ndarray]

    def values(self, T) -> np.ndarray:
        return self.evaluate(np.asarray(T, dtype=float), self.params)

    def jacobian(self, T) -> np.ndarray:
        """d baseline / d params at T (len(T) x n_params), central differences for theta_D."""
        T = np.asarray(T, dtype=float)
        cols = []
        for j, p in enumerate(self.params):
            h = 1e-6 * max(abs(p), 1e-3) if self.names[j] == "theta_D_K" else 1.0
            up, dn = self.params.copy(), self.params.copy()
            up[j] += h
            dn[j] -= h
            cols.append((self.evaluate(T, up) - self.evaluate(T, dn)) / (2 * h))
        return np.column_stack(cols)


def _wls(X: np.ndarray, y: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, float]:
    sw = np.sqrt(w)
    coef, *_ = np.linalg.lstsq(X * sw[:, None], y * sw, rcond=None)
    r = y - X @ coef
    return coef, float(np.sum(w * r * r))


def _covariance(J: np.ndarray, w: np.ndarray, chi2: float, dof: int) -> tuple[np.ndarray, float]:
    normal = J.T @ (w[:, None] * J)
    cov = np.linalg.pinv(normal)
    red = chi2 / dof if dof > 0 else float("nan")
    scale = red if np.isfinite(red) and red > 1.0 else 1.0
    return cov * scale, red


def _fit_polynomial(T: np.ndarray, y: np.ndarray, w: np.ndarray, degree: int, centre: float,
                    scale: float) -> Baseline:
    def evaluate(Tq, p):
        return np.polynomial.polynomial.polyval((Tq - centre) / scale, p)

    X = np.vander((T - centre) / scale, degree + 1, increasing=True)
    coef, chi2 = _wls(X, y, w)
    cov, red = _covariance(X, w, chi2, T.size - X.shape[1])
    return Baseline("polynomial", tuple(f"c{k}" for k in range(degree + 1)), coef, cov, red, T.size, False,
                    evaluate)


def _profile_grid(grid: np.ndarray, T: np.ndarray, y: np.ndarray, w: np.ndarray, atoms: float,
                  fit_atoms: bool, lattice_unit: float) -> np.ndarray:
    """Weighted residual sum of squares at every theta of `grid`, the linear parameters solved."""
    D = lattice_unit * debye_reduced(grid[:, None] / T[None, :])  # (grid, points)
    if not fit_atoms:
        r = y[None, :] - atoms * D
        a = (r * w * T).sum(axis=1) / np.sum(w * T * T)
        res = r - a[:, None] * T[None, :]
        return np.sum(w * res * res, axis=1)
    # two linear parameters (a, n): 2x2 normal equations per theta
    stt = np.sum(w * T * T)
    std = (w * T * D).sum(axis=1)
    sdd = (w * D * D).sum(axis=1)
    sty = np.sum(w * T * y)
    sdy = (w * D * y).sum(axis=1)
    det = stt * sdd - std**2
    with np.errstate(divide="ignore", invalid="ignore"):
        a = (sdd * sty - std * sdy) / det
        n = (stt * sdy - std * sty) / det
    res = y[None, :] - a[:, None] * T[None, :] - n[:, None] * D
    out = np.sum(w * res * res, axis=1)
    return np.where(np.isfinite(out), out, np.inf)


def _fit_debye(T: np.ndarray, y: np.ndarray, w: np.ndarray, atoms: float, fit_atoms: bool,
               per_unit: float, bounds: tuple[float, float]) -> Baseline:
    """3 n R D(theta/T) / per_unit + a T by weighted least squares, theta profiled.

    per_unit is 1 for J/(mol K) and the molar mass in kg/mol for J/(kg K).
    """
    lattice_unit = 3.0 * GAS_CONSTANT / per_unit

    def columns(theta):
        return lattice_unit * debye_reduced(theta / T)

    def solve(theta):
        D = columns(theta)
        if fit_atoms:
            coef, chi2 = _wls(np.column_stack([T, D]), y, w)
            return coef, chi2
        coef, chi2 = _wls(T[:, None], y - atoms * D, w)
        return coef, chi2

    lo, hi = bounds
    grid = np.geomspace(lo, hi, 160)
    chi = _profile_grid(grid, T, y, w, atoms, fit_atoms, lattice_unit)
    k = int(np.argmin(chi))
    a, b = np.log(grid[max(k - 1, 0)]), np.log(grid[min(k + 1, grid.size - 1)])
    res = minimize_scalar(lambda lt: solve(np.exp(lt))[1], bounds=(a, b), method="bounded",
                          options={"xatol": 1e-10})
    theta = float(np.exp(res.x)) if res.fun <= chi[k] else float(grid[k])
    coef, chi2 = solve(theta)
    at_bound = theta <= lo * 1.0001 or theta >= hi * 0.9999
    if fit_atoms:
        params = np.array([theta, coef[0], coef[1]])
        names = ("theta_D_K", "linear", "atoms")

        def evaluate(Tq, p):
            return p[2] * lattice_unit * debye_reduced(p[0] / Tq) + p[1] * Tq
    else:
        params = np.array([theta, coef[0]])
        names = ("theta_D_K", "linear")

        def evaluate(Tq, p):
            return atoms * lattice_unit * debye_reduced(p[0] / Tq) + p[1] * Tq
    base = Baseline("debye", names, params, np.zeros((len(params),) * 2), float("nan"), T.size, at_bound,
                    evaluate)
    J = base.jacobian(T)
    cov, red = _covariance(J, w, chi2, T.size - len(params))
    return dataclasses.replace(base, covariance=cov, reduced_chi2=red)


# --------------------------------------------------------------------------
# Noise and regions
# --------------------------------------------------------------------------

def _noise(T: np.ndarray, y: np.ndarray, s: HeatCapacitySettings) -> tuple[np.ndarray, dict[str, Any]]:
    """Per-point noise sigma from the median absolute second difference (robust to peaks)."""
    floor = s.noise_floor_relative * float(np.median(np.abs(y)))
    if s.noise_sigma is not None:
        return np.full_like(y, max(float(s.noise_sigma), floor)), {"model": "given",
                                                                   "sigma": float(s.noise_sigma)}
    d2 = y[2:] - 2 * y[1:-1] + y[:-2]
    if s.noise_model == "proportional":
        rel = d2 / np.abs(y[1:-1])
        level = _MAD_TO_SIGMA * float(np.median(np.abs(rel - np.median(rel)))) / np.sqrt(
            _SECOND_DIFFERENCE_VARIANCE)
        sigma = np.maximum(level * np.abs(y), floor)
        return sigma, {"model": "proportional", "relative_sigma": level}
    level = _MAD_TO_SIGMA * float(np.median(np.abs(d2 - np.median(d2)))) / np.sqrt(_SECOND_DIFFERENCE_VARIANCE)
    return np.full_like(y, max(level, floor)), {"model": "constant", "sigma": level}


def _window_sums(z: np.ndarray, half: int) -> tuple[np.ndarray, np.ndarray]:
    """Sum and count of z over a centred window of 2*half + 1 points (shorter at the ends)."""
    c = np.concatenate([[0.0], np.cumsum(z)])
    idx = np.arange(z.size)
    lo = np.maximum(idx - half, 0)
    hi = np.minimum(idx + half + 1, z.size)
    return c[hi] - c[lo], (hi - lo).astype(float)


def _intervals(mask: np.ndarray) -> list[tuple[int, int]]:
    """Inclusive index runs where mask is True."""
    out: list[tuple[int, int]] = []
    start = None
    for i, m in enumerate(mask):
        if m and start is None:
            start = i
        elif not m and start is not None:
            out.append((start, i - 1))
            start = None
    if start is not None:
        out.append((start, mask.size - 1))
    return out


def _regions_from_flags(T: np.ndarray, z: np.ndarray, half: int, s: HeatCapacitySettings) -> list[tuple[int, int]]:
    total, count = _window_sums(z, half)
    score = total / np.sqrt(count)  # window mean in standard errors of a mean of white noise
    groups = _intervals(score > s.detect_sigma)
    merged: list[list[int]] = []
    for a, b in groups:
        if merged and T[a] - T[merged[-1][1]] <= s.merge_gap_K:
            merged[-1][1] = b
        else:
            merged.append([a, b])
    grown: list[list[int]] = []
    for a, b in merged:
        while a > 0 and score[a - 1] > s.grow_sigma:
            a -= 1
        while b < T.size - 1 and score[b + 1] > s.grow_sigma:
            b += 1
        a = int(np.searchsorted(T, T[a] - s.margin_K, side="left"))
        b = int(np.searchsorted(T, T[b] + s.margin_K, side="right")) - 1
        if grown and a <= grown[-1][1] + 1:
            grown[-1][1] = max(grown[-1][1], b)
        else:
            grown.append([a, b])
    return [(a, b) for a, b in grown]


# --------------------------------------------------------------------------
# Peak position
# --------------------------------------------------------------------------

_TENT_STEPS = 201


@functools.lru_cache(maxsize=256)
def _tent_makers(offsets: tuple[float, ...]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Residual-maker matrices I - X pinv(X) of the tent for apex positions between points 2 and 4,
    and of a parabola through the five points.

    The tent y = c + l max(x0 - t, 0) + r max(t - x0, 0) is linear in (c, l, r)
    for a given apex x0; ``offsets`` are the five top points relative to the
    middle one.  Cached: a uniform grid has the same offsets for every peak.
    """
    t = np.asarray(offsets)
    x0 = np.linspace(t[1], t[3], _TENT_STEPS)
    X = np.stack([np.ones((x0.size, t.size)), np.clip(x0[:, None] - t[None, :], 0, None),
                  np.clip(t[None, :] - x0[:, None], 0, None)], axis=2)
    makers = np.eye(t.size)[None] - X @ np.linalg.pinv(X)
    P = np.vander(t, 3)
    parabola = np.eye(t.size) - P @ np.linalg.pinv(P)
    for a in (makers, x0, parabola):
        a.setflags(write=False)
    return x0, makers, parabola


def _vertex(Tt: np.ndarray, yt: np.ndarray, top: int) -> tuple[float, str]:
    """Refined position of the maximum of yt near index `top` (see the module docstring)."""
    n = Tt.size
    if top == 0 or top == n - 1:
        return float(Tt[top]), "grid"
    # local parabola through the three top points
    t0 = Tt[top]
    # parabola through the three top points (divided differences)
    (ta, tb, tc), (ya, yb, yc) = Tt[top - 1:top + 2], yt[top - 1:top + 2]
    d1, d2 = (yb - ya) / (tb - ta), (yc - yb) / (tc - tb)
    curv = (d2 - d1) / (tc - ta)
    para = 0.5 * (ta + tb) - d1 / (2 * curv) if curv < 0 else t0
    para = float(np.clip(para, ta, tc))
    if top < 2 or top > n - 3:
        return para, "parabola"
    t = Tt[top - 2:top + 3]
    v = yt[top - 2:top + 3]
    # parabola over the five top points (its residual) against the two-sided tent
    offsets, makers, parabola_maker = _tent_makers(tuple(float(v) for v in (t - t0)))
    rp = parabola_maker @ v
    r_par = float(rp @ rp)
    resid = makers @ v  # (steps, 5): residuals of the tent for every apex position
    r = np.einsum("ij,ij->i", resid, resid)
    j = int(np.argmin(r))
    best_r, best_x = float(r[j]), float(t0 + offsets[j])
    if best_r < r_par:
        return best_x, "tent"
    return para, "parabola"


def _fwhm(Tt: np.ndarray, yt: np.ndarray, top: int) -> float | None:
    half = 0.5 * yt[top]
    i = top
    while i > 0 and yt[i - 1] > half:
        i -= 1
    j = top
    while j < yt.size - 1 and yt[j + 1] > half:
        j += 1
    if i == 0 or j == yt.size - 1:
        return None
    tl = Tt[i - 1] + (half - yt[i - 1]) * (Tt[i] - Tt[i - 1]) / (yt[i] - yt[i - 1])
    tr = Tt[j] + (yt[j] - half) * (Tt[j + 1] - Tt[j]) / (yt[j] - yt[j + 1])
    return float(tr - tl)


# --------------------------------------------------------------------------
# Top level
# --------------------------------------------------------------------------

def _split(excess: np.ndarray, a: int, b: int, prominence: float) -> list[tuple[int, int]]:
    seg = excess[a:b + 1]
    peaks, _ = find_peaks(np.concatenate([[-np.inf], seg, [-np.inf]]), prominence=prominence)
    peaks = peaks - 1
    if peaks.size < 2:
        return [(a, b)]
    cuts = [a + p + int(np.argmin(seg[p:q + 1])) for p, q in zip(peaks[:-1], peaks[1:])]
    bounds = [a, *cuts, b]
    return [(bounds[k] if k == 0 else bounds[k] + 1, bounds[k + 1]) for k in range(len(bounds) - 1)]


def _trapezoid_weights(T: np.ndarray) -> np.ndarray:
    w = np.zeros_like(T)
    d = np.diff(T)
    w[:-1] += d / 2
    w[1:] += d / 2
    return w


def analyse_heat_capacity(temperature_K, heat_capacity, *, unit: str = "J/(mol K)",
                          atoms_per_formula: float = 2, run_kind: str = "calorimetry", kinds=None,
                          **options) -> Outcome:
    """Lattice baseline, excess heat capacity and anomalies of a Cp(T) curve.

    Parameters
    ----------
    temperature_K : array_like
        Temperatures in K (> 0), any order; non-finite rows are left out.
    heat_capacity : array_like
        Heat capacity at constant pressure, same length, in `unit`.
    unit : {"J/(mol K)", "J/(kg K)"}
        Per mole of formula units or per kilogram (the canonical column names
        are accepted too).  A Debye baseline of J/(kg K) data needs the option
        ``molar_mass_kg_per_mol``; without it the polynomial baseline is used
        and a warning says so.
    atoms_per_formula : float
        n of the Debye term (fixed unless ``fit_atoms=True``).
    run_kind : str
        Run kind, for the catalogue assignment.
    kinds : dict, optional
        Catalogue (default the seeded one).
    **options
        Fields of :class:`HeatCapacitySettings` (all recorded).

    Returns
    -------
    Outcome
        Method ``heat-capacity-anomalies``.  Transitions: one row per anomaly
        at the excess maximum (method ``excess-maximum``), width_K the FWHM of
        dCp, component numbered by peak height within a kind, primary for the
        strongest of each kind.  Results: ``theta_D_K`` (K) and
        ``linear_coefficient`` (J/(mol K^2) or J/(kg K^2)) of a Debye baseline
        (and ``atoms_per_formula`` with ``fit_atoms``); per anomaly
        ``excess_enthalpy`` (J/mol or J/kg) and ``excess_entropy`` (J/(mol K)
        or J/(kg K)), with the anomaly's temperature in their diagnostics.

    References
    ----------
    Debye (1912); JCGM 100:2008.
    """
    s = HeatCapacitySettings.from_options(options)
    canonical = _UNIT_ALIASES.get(str(unit).strip())
    if canonical is None:
        raise InvalidValue(f"unit must be one of {', '.join(UNITS)}, got {unit!r}", field="unit")
    try:
        n_atoms = float(atoms_per_formula)
    except (TypeError, ValueError):
        n_atoms = float("nan")
    if not (np.isfinite(n_atoms) and n_atoms > 0):
        raise InvalidValue(f"atoms_per_formula must be positive, got {atoms_per_formula!r}",
                           field="atoms_per_formula")
    T = np.asarray(temperature_K, dtype=float).ravel()
    y = np.asarray(heat_capacity, dtype=float).ravel()
    if T.shape != y.shape:
        raise InvalidValue(f"temperature_K has {T.size} values but heat_capacity has {y.size}",
                           field="heat_capacity")
    finite = np.isfinite(T) & np.isfinite(y)
    if np.any(T[finite] <= 0):
        raise InvalidValue(f"temperature_K must be positive (kelvin); {np.count_nonzero(T[finite] <= 0)} "
                           "values are <= 0", field="temperature_K")
    n_finite = int(np.count_nonzero(finite))
    if n_finite < s.min_points:
        raise InvalidValue(f"only {n_finite} finite (temperature_K, heat_capacity) pairs; at least "
                           f"{s.min_points} are needed", field="heat_capacity")
    notes: list[str] = []
    if n_finite < T.size:
        notes.append(f"{T.size - n_finite} non-finite rows left out")
    order = np.argsort(T[finite], kind="stable")
    T, y = T[finite][order], y[finite][order]

    per_mol = canonical == "J/(mol K)"
    baseline_kind = s.baseline
    per_unit = 1.0
    if baseline_kind == "debye" and not per_mol:
        if s.molar_mass_kg_per_mol is None:
            baseline_kind = "polynomial"
            notes.append("data in J/(kg K) without molar_mass_kg_per_mol: a Debye baseline needs the molar "
                         f"mass, so a polynomial baseline of degree {s.polynomial_degree} was used instead")
        else:
            per_unit = float(s.molar_mass_kg_per_mol)
    energy_unit = "J/mol" if per_mol else "J/kg"
    parameters: dict[str, Any] = {
        "unit": canonical, "atoms_per_formula": n_atoms, "run_kind": run_kind,
        "baseline_used": baseline_kind,
        **{k: ([list(p) for p in v] if k == "exclude_K" and v is not None
               else list(v) if isinstance(v, tuple) else v)
           for k, v in dataclasses.asdict(s).items()},
    }

    sigma, noise_diag = _noise(T, y, s)
    w = 1.0 / sigma**2
    centre, scale = float(np.mean(T)), float(np.ptp(T)) / 2 or 1.0

    def fit(mask: np.ndarray) -> Baseline:
        if baseline_kind == "polynomial":
            return _fit_polynomial(T[mask], y[mask], w[mask], s.polynomial_degree, centre, scale)
        return _fit_debye(T[mask], y[mask], w[mask], n_atoms, s.fit_atoms, per_unit, s.theta_bounds_K)

    def outside(regions) -> np.ndarray:
        mask = np.ones(T.size, dtype=bool)
        for a, b in regions:
            mask[a:b + 1] = False
        return mask

    step = float(np.median(np.diff(T))) if T.size > 1 else 1.0
    half = max(1, int(round(s.window_K / step / 2)))
    converged = True
    iterations = 0
    if s.exclude_K is not None:
        regions = []
        for lo, hi in s.exclude_K:
            idx = np.flatnonzero((T >= lo) & (T <= hi))
            if idx.size:
                regions.append((int(idx[0]), int(idx[-1])))
            else:
                notes.append(f"exclude_K interval ({lo:g}, {hi:g}) K holds no data")
    else:
        regions: list[tuple[int, int]] = []
        converged = False
        for iterations in range(1, s.max_iterations + 1):
            mask = outside(regions)
            if np.count_nonzero(mask) < s.min_baseline_points:
                break
            base = fit(mask)
            z = (y - base.values(T)) / sigma
            new = _regions_from_flags(T, z, half, s)
            if new == regions:
                converged = True
                break
            regions = new
        if not converged:
            notes.append(f"the anomaly regions did not settle within {s.max_iterations} iterations; the last "
                         "ones were used")
    mask = outside(regions)
    n_base = int(np.count_nonzero(mask))
    if n_base < s.min_baseline_points:
        raise InvalidValue(f"only {n_base} points lie outside the anomaly regions; the baseline needs at "
                           f"least {s.min_baseline_points} (give exclude_K or a longer temperature range)",
                           field="heat_capacity")
    base = fit(mask)
    if base.at_bound:
        notes.append(f"theta_D ended at a bound of theta_bounds_K {list(s.theta_bounds_K)}: the data do not "
                     "fix it")
    if base.reduced_chi2 > 4.0:
        notes.append(f"the baseline leaves a reduced chi-square of {base.reduced_chi2:.3g} outside the "
                     "anomalies: it does not describe the lattice part well (try fit_atoms=True, another "
                     "atoms_per_formula or the polynomial baseline); uncertainties were scaled up")
    excess = y - base.values(T)
    cov = base.covariance

    results: list[ResultValue] = []
    if base.kind == "debye":
        u = np.sqrt(np.clip(np.diag(cov), 0, None))
        linear_unit = "J/(mol K^2)" if per_mol else "J/(kg K^2)"
        results.append(ResultValue("theta_D_K", float(base.params[0]), float(u[0]), "K", METHOD,
                                   diagnostics={"at_bound": base.at_bound}))
        results.append(ResultValue("linear_coefficient", float(base.params[1]), float(u[1]), linear_unit,
                                   METHOD, diagnostics={"correlation_with_theta_D":
                                                        float(cov[0, 1] / (u[0] * u[1])) if u[0] * u[1] > 0
                                                        else None}))
        if s.fit_atoms:
            results.append(ResultValue("atoms_per_formula", float(base.params[2]), float(u[2]), "1", METHOD))

    rng = np.random.default_rng(s.seed)
    anomalies: list[dict[str, Any]] = []
    skipped: list[dict[str, Any]] = []
    for a, b in regions:
        level = float(np.median(sigma[a:b + 1]))
        for c, d in _split(excess, a, b, s.split_prominence_sigma * level):
            seg = excess[c:d + 1]
            top_local = int(np.argmax(seg))
            height = float(seg[top_local])
            snr = height / float(sigma[c + top_local])
            if snr < s.min_peak_snr:
                skipped.append({"region_K": [float(T[c]), float(T[d])], "peak_snr": snr})
                continue
            anomalies.append(_anomaly(T, excess, sigma, base, c, d, rng, s.n_resample))
            anomalies[-1]["peak_snr"] = snr
    # kinds, components (by height within a kind), primary for the strongest
    for an in anomalies:
        assignment = assign_kind(an["temperature_K"], run_kind, kinds=kinds)
        an["kind"], an["ambiguous"], an["candidates"] = assignment.kind, assignment.ambiguous, assignment.candidates
    transitions: list[TransitionEstimate] = []
    for kind in dict.fromkeys(an["kind"] for an in anomalies):
        same = sorted((an for an in anomalies if an["kind"] == kind), key=lambda an: -an["height"])
        for rank, an in enumerate(same, start=1):
            an["component"] = rank
    for an in sorted(anomalies, key=lambda an: an["temperature_K"]):
        transitions.append(TransitionEstimate(
            kind=an["kind"], temperature_K=an["temperature_K"], uncertainty_K=an["uncertainty_K"],
            method="excess-maximum", component=an["component"], primary=an["component"] == 1,
            width_K=an["width_K"], ambiguous=an["ambiguous"],
            diagnostics={"refinement": an["refinement"], "peak_excess": an["height"],
                         "peak_snr": an["peak_snr"], "region_K": an["region_K"],
                         "grid_K": an["u_grid"], "noise_K": an["u_noise"], "baseline_K": an["u_baseline"],
                         "candidates": list(an["candidates"])}))
        where = {"anomaly_temperature_K": an["temperature_K"], "kind": an["kind"],
                 "component": an["component"], "region_K": an["region_K"]}
        results.append(ResultValue("excess_enthalpy", an["dH"], an["u_dH"], energy_unit, METHOD,
                                   diagnostics=dict(where)))
        results.append(ResultValue("excess_entropy", an["dS"], an["u_dS"], canonical, METHOD,
                                   diagnostics=dict(where)))
        if an["region_K"][0] <= T[0] or an["region_K"][1] >= T[-1]:
            notes.append(f"the anomaly at {an['temperature_K']:.1f} K reaches the end of the data: its excess "
                         "enthalpy and entropy are truncated")
    if kinds is None and any(an["kind"] == UNASSIGNED for an in anomalies):
        notes.append("some anomalies lie outside every catalogue window for calorimetry (unassigned)")
    diagnostics = {
        "method_versions": {METHOD: VERSION},
        "noise": noise_diag,
        "grid_step_K": step,
        "baseline": {"kind": base.kind, "names": list(base.names), "params": base.params.tolist(),
                     "covariance": base.covariance.tolist(), "reduced_chi2": base.reduced_chi2,
                     "n_points": base.n_points, "centre_K": centre if base.kind == "polynomial" else None,
                     "scale_K": scale if base.kind == "polynomial" else None},
        "regions_K": [[float(T[a]), float(T[b])] for a, b in regions],
        "region_rule": "given" if s.exclude_K is not None else "iterative",
        "iterations": iterations, "converged": converged,
        "below_threshold": skipped,
    }
    return Outcome(method=METHOD, version=VERSION, parameters=parameters, transitions=tuple(transitions),
                   results=tuple(results), warnings=tuple(notes), diagnostics=diagnostics)


def _anomaly(T, excess, sigma, base: Baseline, c: int, d: int, rng, n_resample: int) -> dict[str, Any]:
    Tt, seg = T[c:d + 1], excess[c:d + 1]
    top = int(np.argmax(seg))
    position, how = _vertex(Tt, seg, top)
    # grid: the maximum lies somewhere within one step (rectangular, GUM 4.3.7)
    lo_i, hi_i = max(top - 1, 0), min(top + 1, Tt.size - 1)
    local_step = (Tt[hi_i] - Tt[lo_i]) / max(hi_i - lo_i, 1)
    u_grid = float(local_step / np.sqrt(12.0))
    # noise: perturb the points around the top by their sigma and redo the refinement
    k0, k1 = max(top - 4, 0), min(top + 5, Tt.size)
    Tn, yn, sn = Tt[k0:k1], seg[k0:k1], sigma[c + k0:c + k1]
    draws = []
    for _ in range(n_resample):
        yp = yn + rng.standard_normal(yn.size) * sn
        tp = int(np.argmax(yp))
        draws.append(_vertex(Tn, yp, tp)[0])
    u_noise = float(np.std(draws, ddof=1))
    # baseline: first-order propagation of its covariance through the refinement
    J = base.jacobian(Tn)
    grad = np.zeros(len(base.params))
    for j in range(yn.size):
        h = float(sn[j])
        up, dn = yn.copy(), yn.copy()
        up[j] += h
        dn[j] -= h
        dv = (_vertex(Tn, up, int(np.argmax(up)))[0] - _vertex(Tn, dn, int(np.argmax(dn)))[0]) / (2 * h)
        grad -= dv * J[j]
    u_base = float(np.sqrt(max(grad @ base.covariance @ grad, 0.0)))
    # enthalpy and entropy over the region
    wt = _trapezoid_weights(Tt)
    sig = sigma[c:d + 1]
    Jr = base.jacobian(Tt)
    dH = float(np.sum(wt * seg))
    dS = float(np.sum(wt * seg / Tt))
    gH = -(wt @ Jr)
    gS = -((wt / Tt) @ Jr)
    u_dH = float(np.sqrt(np.sum((wt * sig) ** 2) + max(gH @ base.covariance @ gH, 0.0)))
    u_dS = float(np.sqrt(np.sum((wt * sig / Tt) ** 2) + max(gS @ base.covariance @ gS, 0.0)))
    return {"temperature_K": float(position), "refinement": how,
            "uncertainty_K": float(np.sqrt(u_grid**2 + u_noise**2 + u_base**2)),
            "u_grid": u_grid, "u_noise": u_noise, "u_baseline": u_base,
            "height": float(seg[top]), "width_K": _fwhm(Tt, seg, top),
            "region_K": [float(Tt[0]), float(Tt[-1])],
            "dH": dH, "u_dH": u_dH, "dS": dS, "u_dS": u_dS}


def from_series(frame, conditions: Mapping[str, Any] | None) -> Outcome:
    """:func:`analyse_heat_capacity` of a stored canonical series.

    Parameters
    ----------
    frame : pandas.DataFrame
        Canonical columns ``temperature_K`` and ``heat_capacity_J_per_mol_K``
        (preferred) or ``heat_capacity_J_per_kg_K``.
    conditions : mapping
        Run conditions (may be empty).  Besides the canonical keys, two
        optional keys are read when present: ``atoms_per_formula`` (n of the
        Debye term, then held fixed; without it n is fitted, with a warning)
        and ``molar_mass_kg_per_mol`` (for a Debye baseline of J/(kg K) data).

    Returns
    -------
    Outcome
        As :func:`analyse_heat_capacity`; the parameters also name the column.

    Raises
    ------
    magvault.analysis.pipeline.NothingToAnalyse
        When the temperature or heat-capacity column is missing or empty.
    """
    from .pipeline import NothingToAnalyse  # here: pipeline imports the analyses

    conditions = dict(conditions or {})
    if "temperature_K" not in frame.columns:
        raise NothingToAnalyse("no temperature_K column")
    column = None
    for name in ("heat_capacity_J_per_mol_K", "heat_capacity_J_per_kg_K"):
        if name in frame.columns and np.isfinite(frame[name].to_numpy(dtype=float)).any():
            column = name
            break
    if column is None:
        raise NothingToAnalyse("no heat_capacity_J_per_mol_K or heat_capacity_J_per_kg_K column with data "
                               f"among {list(frame.columns)}")
    def number(key: str) -> float | None:
        value = conditions.get(key)
        if value is None:
            return None
        try:
            return float(value)
        except (TypeError, ValueError):
            raise InvalidValue(f"run condition {key} must be a number, got {value!r}", field=key) from None

    options: dict[str, Any] = {}
    notes: list[str] = []
    atoms = number("atoms_per_formula")
    if atoms is None:
        atoms = 2.0
        options["fit_atoms"] = True
        notes.append("the run conditions give no atoms_per_formula: the Debye term's n was fitted "
                     "(an effective oscillator count, started at 2)")
    molar = number("molar_mass_kg_per_mol")
    if molar is not None:
        options["molar_mass_kg_per_mol"] = molar
    outcome = analyse_heat_capacity(frame["temperature_K"].to_numpy(dtype=float),
                                    frame[column].to_numpy(dtype=float), unit=column,
                                    atoms_per_formula=atoms, run_kind="calorimetry", **options)
    return dataclasses.replace(outcome, parameters={**outcome.parameters, "signal_column": column},
                               warnings=tuple(notes) + outcome.warnings)

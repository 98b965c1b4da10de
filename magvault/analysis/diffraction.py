"""Lattice parameters of the NiAs-type subcell from a powder pattern.

Method
------
1. **Peaks.**  Local maxima of the counts are kept when their prominence
   (height above the higher of the two flanking minima, scipy's definition)
   is at least ``min_prominence_sigma`` times the noise of that difference,
   sqrt(u_top^2 + u_base^2), with u the standard uncertainty of the counts
   (Poisson, sqrt(max(counts, 1)), unless given), and their width at half
   prominence spans at least ``min_width_points`` samples (single-sample
   spikes are noise).
2. **Profiles.**  Each peak is fitted on a window reaching
   ``window_fwhm`` detected FWHMs either side of it; peaks whose windows
   overlap are fitted together.  The profile is a pseudo-Voigt, eta times a
   Lorentzian plus (1 - eta) times a Gaussian of the same FWHM (Wertheim et
   al., 1974), each with its own centre, FWHM, eta and area, on a linear
   background, by weighted least squares (weights 1/u^2).  The covariance is
   (J^T J)^-1 of the weighted residuals, multiplied by the reduced
   chi-square when that exceeds 1 (a misfit widens the uncertainties, it
   never narrows them).  A fitted peak counts when its area is at least
   ``min_area_significance`` standard uncertainties.
3. **d-spacings.**  Bragg's law, lambda = 2 d sin(theta), with
   u(d) = d cot(theta) u(theta).
4. **Indexing.**  The candidate reflections are those of the NiAs
   structure type in P6_3/mmc (No. 194): Fe on 2a (0,0,0), S on 2c
   (1/3,2/3,1/4).  The space group's general condition (International Tables
   for Crystallography Vol. A, table of space group 194) removes hh(-2h)l
   with l odd (in three indices: l odd whenever two of h, k and i = -h-k are
   equal, 000l included); the special conditions of the occupied sites (2a:
   l = 2n; 2c: l = 2n or h - k = 3n+1 or 3n+2) remove in addition every hkl
   with l odd and h - k = 3n.  So a reflection of the subcell is allowed when
   **l is even or h - k is not a multiple of 3**.  The cell used for indexing
   is the point of a grid within +-``cell_search_fraction`` of the guessed
   a and c (steps of ``cell_search_step``, relative) that indexes the most
   peaks within ``index_tolerance`` (relative difference of d), ties broken
   by the smallest sum of squared relative differences; with
   ``cell_search_fraction = 0`` it is the guessed cell.  A peak is indexed to
   the nearest allowed reflection when the relative difference is within
   the tolerance; a peak with a second allowed reflection of another d
   within the tolerance, or two peaks claiming the same reflection, are
   refused as ambiguous.  Indexing and refinement alternate until the set of
   indexed peaks stops changing (at most ``max_cycles`` cycles).
5. **Refinement.**  1/d^2 = 4/3 (h^2 + hk + k^2) / a^2 + l^2 / c^2 is linear
   in 1/a^2 and 1/c^2: a weighted least-squares fit (weights from u(1/d^2)
   = 2 u(d)/d^3) whose covariance is scaled by the residual variance
   (the reduced chi-square), propagated to first order to a, c, the volume
   V = sqrt(3)/2 a^2 c and c/a with the full covariance.  An uncertainty of
   the wavelength, common to every peak, adds a fully correlated relative
   uncertainty to a and c.

One pattern is measured at one temperature, so the analysis gives no
transition temperatures: a structural transition shows only in a series of
patterns (the lattice parameters against the runs' temperatures).  Only the
hexagonal subcell is refined; superstructure reflections (4C and others) and
split peaks of monoclinic cells are left unindexed and counted in a warning.

All lengths are in metres, angles in degrees 2-theta.

References
----------
Bragg, W. H. & Bragg, W. L. (1913). The reflection of X-rays by crystals.
Proc. R. Soc. Lond. A 88, 428-438.
Wertheim, G. K., Butler, M. A., West, K. W. & Buchanan, D. N. E. (1974).
Determination of the Gaussian and Lorentzian content of experimental line
shapes. Rev. Sci. Instrum. 45, 1369-1371 (the pseudo-Voigt).
International Tables for Crystallography Vol. A, space group P6_3/mmc
(No. 194): reflection conditions (from memory; checked against gemmi in the
tests).
Klug, H. P. & Alexander, L. E. (1974). X-ray Diffraction Procedures, 2nd ed.,
Wiley: least-squares refinement of cell parameters from d-spacings (from
memory).
JCGM 100:2008 (GUM), section 5.2 (propagation with correlated inputs).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np
from scipy.optimize import least_squares
from scipy.signal import find_peaks, peak_prominences, peak_widths

from ..errors import InvalidValue
from .options import settings_from_options
from .results import Outcome, ResultValue

__all__ = [
    "VERSION",
    "METHOD",
    "PeakFit",
    "CellFit",
    "LatticeSettings",
    "pseudo_voigt_profile",
    "fit_pseudo_voigt",
    "bragg_d",
    "bragg_d_uncertainty",
    "bragg_two_theta_deg",
    "hexagonal_d",
    "allowed_by_space_group",
    "allowed_in_nias_structure",
    "subcell_reflections",
    "refine_hexagonal_cell",
    "analyse_pattern",
    "from_series",
]

VERSION = "1.0"
METHOD = "lattice-from-peaks"
SYSTEMS = ("hexagonal",)
_FOUR_LN2 = 4.0 * np.log(2.0)
_GAUSS_NORM = 2.0 * np.sqrt(np.log(2.0) / np.pi)  # times 1/FWHM: peak of a unit-area Gaussian


# ------------------------------------------------------------------ profile and peak fit

def pseudo_voigt_profile(two_theta_deg, centre_deg: float, fwhm_deg: float, eta: float,
                         area: float = 1.0) -> np.ndarray:
    """Pseudo-Voigt of unit (or given) area: eta L + (1 - eta) G with a common FWHM.

    L(x) = (2 / (pi w)) / (1 + 4 (x - x0)^2 / w^2) and
    G(x) = (2 / w) sqrt(ln 2 / pi) exp(-4 ln 2 (x - x0)^2 / w^2), both of
    FWHM w and unit area (Wertheim et al., 1974).

    Parameters
    ----------
    two_theta_deg : array_like
        Abscissa, degrees.
    centre_deg, fwhm_deg : float
        Centre and full width at half maximum, degrees.
    eta : float
        Lorentzian fraction, 0 (Gaussian) to 1 (Lorentzian).
    area : float
        Integrated area (counts times degrees for a pattern).
    """
    u = (np.asarray(two_theta_deg, dtype=float) - centre_deg) / fwhm_deg
    lor = (2.0 / (np.pi * fwhm_deg)) / (1.0 + 4.0 * u * u)
    gau = (_GAUSS_NORM / fwhm_deg) * np.exp(-_FOUR_LN2 * u * u)
    return area * (eta * lor + (1.0 - eta) * gau)


@dataclass(frozen=True)
class PeakFit:
    """One fitted pseudo-Voigt peak with standard uncertainties.

    Attributes
    ----------
    centre_deg, centre_uncertainty_deg : float
        Peak position, degrees 2-theta.
    fwhm_deg, fwhm_uncertainty_deg : float
        Full width at half maximum, degrees.
    eta, eta_uncertainty : float
        Lorentzian fraction (0 to 1).
    area_counts_deg, area_uncertainty_counts_deg : float
        Integrated intensity above the background, counts times degrees.
    background_counts : float
        Linear background at the centre, counts.
    background_slope_counts_per_deg : float
        Slope of that background.
    reduced_chi_square : float
        Weighted sum of squared residuals over the degrees of freedom of the
        window's fit (all peaks fitted together count).
    n_points : int
        Points in the fit window.
    covariance_scaled : bool
        True when the covariance was multiplied by a reduced chi-square > 1.
    """

    centre_deg: float
    centre_uncertainty_deg: float
    fwhm_deg: float
    fwhm_uncertainty_deg: float
    eta: float
    eta_uncertainty: float
    area_counts_deg: float
    area_uncertainty_counts_deg: float
    background_counts: float
    background_slope_counts_per_deg: float
    reduced_chi_square: float
    n_points: int
    covariance_scaled: bool


def _as_pattern(two_theta_deg, counts, sigma) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    x = np.asarray(two_theta_deg, dtype=float).ravel()
    y = np.asarray(counts, dtype=float).ravel()
    if x.shape != y.shape:
        raise InvalidValue(f"two_theta_deg has {x.size} values but intensity_counts has {y.size}",
                           field="intensity_counts")
    if sigma is None:
        s = np.sqrt(np.maximum(y, 1.0))
    else:
        s = np.asarray(sigma, dtype=float).ravel()
        if s.shape != x.shape:
            raise InvalidValue(f"sigma has {s.size} values but the pattern has {x.size}",
                               field="intensity_sigma_counts")
    keep = np.isfinite(x) & np.isfinite(y) & np.isfinite(s)
    x, y, s = x[keep], y[keep], s[keep]
    if np.any(s <= 0):
        raise InvalidValue("every standard uncertainty of the counts must be positive",
                           field="intensity_sigma_counts")
    order = np.argsort(x, kind="stable")
    x, y, s = x[order], y[order], s[order]
    if x.size and np.any(np.diff(x) <= 0):
        raise InvalidValue("two_theta_deg repeats a value; one count per angle is expected",
                           field="two_theta_deg")
    return x, y, s


def _fit_group(x, y, s, starts: list[tuple[float, float]], centre_bounds: list[tuple[float, float]],
               eta_start: float = 0.5):
    """Least-squares fit of several pseudo-Voigt peaks on one linear background.

    Returns (params, covariance, reduced chi-square, scaled flag, x_mid); params
    per peak are (centre, fwhm, eta, area), then background (b0 at x_mid, b1).
    """
    n = len(starts)
    x_mid = 0.5 * (x[0] + x[-1])
    span = x[-1] - x[0]
    step = float(np.median(np.diff(x)))
    edge = max(2, x.size // 10)
    left, right = np.median(y[:edge]), np.median(y[-edge:])
    b1 = (right - left) / span if span > 0 else 0.0
    b0 = 0.5 * (left + right)
    p0, lo, hi = [], [], []
    for (c, w), (cl, ch) in zip(starts, centre_bounds):
        bg = b0 + b1 * (c - x_mid)
        height = max(float(np.interp(c, x, y)) - bg, 1.0)
        area = height * w / (eta_start * 2.0 / np.pi + (1 - eta_start) * _GAUSS_NORM)
        w_lo, w_hi = 0.25 * step, max(4.0 * w, 2.0 * step)
        p0 += [c, min(max(w, w_lo * 1.01), w_hi * 0.99), eta_start, area]
        lo += [cl, w_lo, 0.0, 0.0]
        hi += [ch, w_hi, 1.0, np.inf]
    p0 += [b0, b1]
    lo += [-np.inf, -np.inf]
    hi += [np.inf, np.inf]
    p0 = np.clip(np.array(p0), np.array(lo), np.array(hi))

    def model(p):
        out = p[-2] + p[-1] * (x - x_mid)
        for i in range(n):
            c, w, e, a = p[4 * i:4 * i + 4]
            out = out + pseudo_voigt_profile(x, c, w, e, a)
        return out

    def residuals(p):
        return (y - model(p)) / s

    fit = least_squares(residuals, p0, bounds=(np.array(lo), np.array(hi)), method="trf",
                        x_scale="jac", max_nfev=200 * (4 * n + 2))
    dof = x.size - p0.size
    chi2 = float(np.sum(fit.fun**2) / dof) if dof > 0 else float("nan")
    J = fit.jac
    cov = np.linalg.pinv(J.T @ J)
    scaled = bool(np.isfinite(chi2) and chi2 > 1.0)
    if scaled:
        cov = cov * chi2
    return fit.x, cov, chi2, scaled, x_mid, bool(fit.success)


def _peak_from(params, cov, i, chi2, scaled, x_mid, n_points) -> PeakFit:
    c, w, e, a = (float(v) for v in params[4 * i:4 * i + 4])
    u = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    b0, b1 = float(params[-2]), float(params[-1])
    return PeakFit(centre_deg=c, centre_uncertainty_deg=float(u[4 * i]), fwhm_deg=w,
                   fwhm_uncertainty_deg=float(u[4 * i + 1]), eta=e, eta_uncertainty=float(u[4 * i + 2]),
                   area_counts_deg=a, area_uncertainty_counts_deg=float(u[4 * i + 3]),
                   background_counts=b0 + b1 * (c - x_mid), background_slope_counts_per_deg=b1,
                   reduced_chi_square=chi2, n_points=int(n_points), covariance_scaled=scaled)


def fit_pseudo_voigt(two_theta_deg, counts, *, sigma=None, centre_guess_deg: float | None = None,
                     fwhm_guess_deg: float | None = None, eta_guess: float = 0.5) -> PeakFit:
    """Fit one pseudo-Voigt peak on a linear background by weighted least squares.

    Parameters
    ----------
    two_theta_deg : array_like
        Angles of the fit window, degrees 2-theta (the caller chooses the
        window; every point given is used).
    counts : array_like
        Counts at those angles.
    sigma : array_like, optional
        Standard uncertainties of the counts; default sqrt(max(counts, 1))
        (Poisson).  Weights are 1/sigma^2.
    centre_guess_deg, fwhm_guess_deg : float, optional
        Starting values; default the highest point above the straight line
        through the window's ends, and the width of the points above half
        that height.
    eta_guess : float
        Starting Lorentzian fraction.

    Returns
    -------
    PeakFit
        Centre, FWHM, eta and area with standard uncertainties: the
        covariance (J^T J)^-1 of the weighted residuals, times the reduced
        chi-square when that exceeds 1.  The centre is bounded to the window.

    References
    ----------
    Wertheim et al. (1974), Rev. Sci. Instrum. 45, 1369 (pseudo-Voigt).
    """
    x, y, s = _as_pattern(two_theta_deg, counts, sigma)
    if x.size < 8:
        raise InvalidValue(f"a peak fit needs at least 8 points, got {x.size}", field="two_theta_deg")
    if not 0.0 <= eta_guess <= 1.0:
        raise InvalidValue(f"eta_guess must lie between 0 and 1, got {eta_guess!r}", field="eta_guess")
    line = y[0] + (y[-1] - y[0]) * (x - x[0]) / (x[-1] - x[0])
    above = y - line
    if centre_guess_deg is None:
        centre_guess_deg = float(x[int(np.argmax(above))])
    if fwhm_guess_deg is None:
        half = 0.5 * float(np.max(above))
        n_above = int(np.count_nonzero(above >= half))
        fwhm_guess_deg = max(n_above, 2) * float(np.median(np.diff(x)))
    if not (np.isfinite(fwhm_guess_deg) and fwhm_guess_deg > 0):
        raise InvalidValue(f"fwhm_guess_deg must be positive, got {fwhm_guess_deg!r}", field="fwhm_guess_deg")
    params, cov, chi2, scaled, x_mid, _ = _fit_group(
        x, y, s, [(float(centre_guess_deg), float(fwhm_guess_deg))], [(float(x[0]), float(x[-1]))], eta_guess)
    return _peak_from(params, cov, 0, chi2, scaled, x_mid, x.size)


# ------------------------------------------------------------------ Bragg and the cell

def bragg_d(two_theta_deg, wavelength_m):
    """Spacing d = lambda / (2 sin theta) from Bragg's law (Bragg & Bragg, 1913).

    Parameters
    ----------
    two_theta_deg : float or array_like
        Scattering angle 2-theta, degrees (0 < 2-theta < 180).
    wavelength_m : float
        Wavelength, m.

    Returns
    -------
    float or ndarray
        d in m.
    """
    tt = np.asarray(two_theta_deg, dtype=float)
    if np.any(~((tt > 0) & (tt < 180))):
        raise InvalidValue("two_theta_deg must lie strictly between 0 and 180 degrees", field="two_theta_deg")
    lam = _wavelength(wavelength_m)
    d = lam / (2.0 * np.sin(np.radians(tt) / 2.0))
    return float(d) if d.ndim == 0 else d


def bragg_d_uncertainty(two_theta_deg, wavelength_m, two_theta_uncertainty_deg,
                        wavelength_uncertainty_m: float = 0.0):
    """Standard uncertainty of d from Bragg's law, to first order (GUM 5.1).

    u(d)^2 = (d cot(theta) u(theta))^2 + (d u(lambda)/lambda)^2 with
    u(theta) = u(2-theta)/2 in radians.

    Returns
    -------
    float or ndarray
        u(d) in m.
    """
    tt = np.asarray(two_theta_deg, dtype=float)
    d = np.asarray(bragg_d(tt, wavelength_m), dtype=float)
    theta = np.radians(tt) / 2.0
    u_theta = np.radians(np.asarray(two_theta_uncertainty_deg, dtype=float)) / 2.0
    lam = _wavelength(wavelength_m)
    u = np.sqrt((d * u_theta / np.tan(theta)) ** 2 + (d * float(wavelength_uncertainty_m) / lam) ** 2)
    return float(u) if u.ndim == 0 else u


def bragg_two_theta_deg(d_m, wavelength_m):
    """2-theta in degrees of spacing d (m): 2 arcsin(lambda / 2d)."""
    d = np.asarray(d_m, dtype=float)
    lam = _wavelength(wavelength_m)
    ratio = lam / (2.0 * d)
    if np.any(~((ratio > 0) & (ratio <= 1))):
        raise InvalidValue("d_m must be positive and at least half the wavelength", field="d_m")
    tt = np.degrees(2.0 * np.arcsin(ratio))
    return float(tt) if tt.ndim == 0 else tt


def _wavelength(wavelength_m) -> float:
    try:
        lam = float(wavelength_m)
    except (TypeError, ValueError):
        raise InvalidValue(f"wavelength_m must be a number of metres, got {wavelength_m!r}",
                           field="wavelength_m") from None
    if not (np.isfinite(lam) and lam > 0):
        raise InvalidValue(f"wavelength_m must be a positive number of metres, got {wavelength_m!r}",
                           field="wavelength_m")
    if not 1e-12 <= lam <= 1e-8:
        raise InvalidValue(f"wavelength_m = {lam:g} m is not an X-ray or neutron wavelength "
                           "(expected 1e-12 to 1e-8 m; 1.54e-10 for Cu K-alpha1)", field="wavelength_m")
    return lam


def hexagonal_d(h, k, l, a, c):
    """Spacing of plane (hkl) of a hexagonal cell: 1/d^2 = 4/3 (h^2 + hk + k^2)/a^2 + l^2/c^2.

    Any length unit (d comes out in the unit of a and c); vectorised over
    the indices.
    """
    h, k, l = (np.asarray(v, dtype=float) for v in (h, k, l))
    inv = 4.0 / 3.0 * (h * h + h * k + k * k) / (a * a) + l * l / (c * c)
    if np.any(inv <= 0):
        raise InvalidValue("(000) has no spacing", field="hkl")
    d = 1.0 / np.sqrt(inv)
    return float(d) if d.ndim == 0 else d


def allowed_by_space_group(h: int, k: int, l: int) -> bool:
    """General reflection condition of P6_3/mmc (International Tables Vol. A, No. 194).

    hh(-2h)l (and its equivalents: two of h, k, i = -h-k equal) requires
    l = 2n; 000l is the case h = k = 0.
    """
    h, k, l = int(h), int(k), int(l)
    i = -h - k
    return l % 2 == 0 or not (h == k or k == i or h == i)


def allowed_in_nias_structure(h: int, k: int, l: int) -> bool:
    """Reflection allowed in the NiAs structure type (P6_3/mmc, metal 2a, anion 2c).

    Site conditions (International Tables Vol. A, No. 194): 2a hkl: l = 2n;
    2c hkl: l = 2n or h - k = 3n+1 or 3n+2.  Together: l even or h - k not a
    multiple of 3 (which implies the general condition).
    """
    h, k, l = int(h), int(k), int(l)
    return l % 2 == 0 or (h - k) % 3 != 0


def subcell_reflections(a: float, c: float, d_min: float) -> list[tuple[int, int, int, float]]:
    """Allowed NiAs-type reflections with d >= d_min, one per distinct (h^2+hk+k^2, l).

    Representatives h >= k >= 0, l >= 0 (Laue class 6/mmm), sorted by d
    descending; lengths in the unit of a and c.
    """
    if not (a > 0 and c > 0 and d_min > 0):
        raise InvalidValue("a, c and d_min must be positive", field="cell_guess")
    h_max = int(np.ceil(2.0 * a / (np.sqrt(3.0) * d_min))) + 1
    l_max = int(np.ceil(c / d_min)) + 1
    out = []
    for h in range(h_max + 1):
        for k in range(h + 1):
            for l in range(l_max + 1):
                if h == k == l == 0 or not allowed_in_nias_structure(h, k, l):
                    continue
                d = hexagonal_d(h, k, l, a, c)
                if d >= d_min:
                    out.append((h, k, l, d))
    out.sort(key=lambda r: -r[3])
    return out


@dataclass(frozen=True)
class CellFit:
    """Refined hexagonal cell (metres) with standard uncertainties and correlation."""

    a_m: float
    a_uncertainty_m: float
    c_m: float
    c_uncertainty_m: float
    covariance_m2: tuple[tuple[float, float], tuple[float, float]]
    volume_m3: float
    volume_uncertainty_m3: float
    c_over_a: float
    c_over_a_uncertainty: float
    reduced_chi_square: float
    residuals_m: tuple[float, ...]
    n_peaks: int


def refine_hexagonal_cell(hkl, d_m, d_uncertainty_m, *,
                          wavelength_relative_uncertainty: float = 0.0) -> CellFit:
    """Weighted least squares of a and c on 1/d^2 = A (4/3)(h^2+hk+k^2) + C l^2.

    A = 1/a^2 and C = 1/c^2; weights 1/u(1/d^2)^2 with u(1/d^2) = 2 u(d)/d^3;
    the covariance (X^T W X)^-1 is scaled by the residual variance
    sum(w r^2)/(n - 2).  An uncertainty of the wavelength common to all
    peaks adds a fully correlated relative uncertainty to a and c.  V =
    sqrt(3)/2 a^2 c and c/a are propagated with the full covariance (GUM 5.2).

    Parameters
    ----------
    hkl : array_like, shape (n, 3)
        Indices.
    d_m, d_uncertainty_m : array_like, shape (n,)
        Observed spacings and their standard uncertainties, m.
    wavelength_relative_uncertainty : float
        u(lambda)/lambda.

    Raises
    ------
    InvalidValue
        Fewer than 3 peaks, no peak with l != 0, no peak with h or k != 0, or
        peaks that do not fix both parameters.
    """
    H = np.asarray(hkl, dtype=float).reshape(-1, 3)
    d = np.asarray(d_m, dtype=float).ravel()
    ud = np.asarray(d_uncertainty_m, dtype=float).ravel()
    n = d.size
    if H.shape[0] != n or ud.size != n:
        raise InvalidValue("hkl, d_m and d_uncertainty_m must have one entry per peak", field="hkl")
    missing = []
    if n < 3:
        missing.append(f"at least 3 indexed peaks (have {n})")
    if not np.any(H[:, 2] != 0):
        missing.append("a peak with l != 0")
    if not np.any((H[:, 0] != 0) | (H[:, 1] != 0)):
        missing.append("a peak with h or k != 0")
    if missing:
        raise InvalidValue("cannot refine a and c: missing " + "; ".join(missing), field="indexed_peaks")
    if np.any(~(ud > 0)) or np.any(~(d > 0)):
        raise InvalidValue("every d and its uncertainty must be positive", field="d_uncertainty_m")
    X = np.column_stack([4.0 / 3.0 * (H[:, 0] ** 2 + H[:, 0] * H[:, 1] + H[:, 1] ** 2), H[:, 2] ** 2])
    y = 1.0 / d**2
    uy = 2.0 * ud / d**3
    w = 1.0 / uy**2
    normal = X.T @ (w[:, None] * X)
    if np.linalg.cond(normal) > 1e12:
        raise InvalidValue("the indexed peaks do not fix a and c separately (all of one family, "
                           "e.g. 101 and 202); missing a peak of another (h^2+hk+k^2) : l^2 ratio",
                           field="indexed_peaks")
    cov_unit = np.linalg.inv(normal)
    coef = cov_unit @ (X.T @ (w * y))
    r = y - X @ coef
    dof = n - 2
    s2 = float(np.sum(w * r**2) / dof) if dof > 0 else float("nan")
    cov_AC = cov_unit * (s2 if dof > 0 else 1.0)
    A, C = coef
    if not (A > 0 and C > 0):
        raise InvalidValue("the refinement gave a non-positive 1/a^2 or 1/c^2; the indexing is wrong",
                           field="indexed_peaks")
    a, c = A**-0.5, C**-0.5
    J = np.diag([-0.5 * A**-1.5, -0.5 * C**-1.5])
    cov = J @ cov_AC @ J.T
    rel = float(wavelength_relative_uncertainty)
    cov = cov + rel**2 * np.outer([a, c], [a, c])
    V = np.sqrt(3.0) / 2.0 * a * a * c
    gV = np.array([np.sqrt(3.0) * a * c, np.sqrt(3.0) / 2.0 * a * a])
    gR = np.array([-c / a**2, 1.0 / a])
    d_calc = 1.0 / np.sqrt(X @ coef)
    return CellFit(a_m=float(a), a_uncertainty_m=float(np.sqrt(cov[0, 0])), c_m=float(c),
                   c_uncertainty_m=float(np.sqrt(cov[1, 1])),
                   covariance_m2=((float(cov[0, 0]), float(cov[0, 1])), (float(cov[1, 0]), float(cov[1, 1]))),
                   volume_m3=float(V), volume_uncertainty_m3=float(np.sqrt(gV @ cov @ gV)),
                   c_over_a=float(c / a), c_over_a_uncertainty=float(np.sqrt(max(gR @ cov @ gR, 0.0))),
                   reduced_chi_square=s2, residuals_m=tuple(float(v) for v in d - d_calc), n_peaks=n)


# ------------------------------------------------------------------ the whole pattern

@dataclass(frozen=True)
class LatticeSettings:
    """Every numerical choice of :func:`analyse_pattern` (all recorded).

    Attributes
    ----------
    min_prominence_sigma : float
        Detection: prominence over the noise sqrt(u_top^2 + u_base^2).
    min_width_points : float
        Detection: narrowest width at half prominence, in samples.
    window_fwhm : float
        Fit window: this many detected FWHMs either side of each peak.
    min_area_significance : float
        A fitted peak counts when area / u(area) reaches this.
    index_tolerance : float
        Largest relative difference |d_obs - d_calc| / d_calc of an indexed peak.
    cell_search_fraction : float
        Indexing cell searched within this relative distance of the guess.
    cell_search_step : float
        Relative grid step of that search.
    max_cycles : int
        Most alternations of indexing and refinement.
    wavelength_uncertainty_m : float
        Standard uncertainty of the wavelength (common to all peaks), m.
    """

    min_prominence_sigma: float = 6.0
    min_width_points: float = 2.0
    window_fwhm: float = 5.0
    min_area_significance: float = 3.0
    index_tolerance: float = 0.002
    cell_search_fraction: float = 0.04
    cell_search_step: float = 0.001
    max_cycles: int = 5
    wavelength_uncertainty_m: float = 0.0

    @classmethod
    def from_options(cls, options: dict[str, Any]) -> "LatticeSettings":
        settings = settings_from_options(cls, options)
        for name in ("min_prominence_sigma", "min_width_points", "window_fwhm", "index_tolerance",
                     "cell_search_step"):
            value = getattr(settings, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value > 0):
                raise InvalidValue(f"option {name} must be a positive number, got {value!r}", field=name)
        for name in ("min_area_significance", "cell_search_fraction", "wavelength_uncertainty_m"):
            value = getattr(settings, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value >= 0):
                raise InvalidValue(f"option {name} must be a number >= 0, got {value!r}", field=name)
        if settings.cell_search_fraction >= 0.2:
            raise InvalidValue("option cell_search_fraction must be below 0.2 (a wider search "
                               "finds other cells)", field="cell_search_fraction")
        if int(settings.max_cycles) < 1:
            raise InvalidValue(f"option max_cycles must be at least 1, got {settings.max_cycles!r}",
                               field="max_cycles")
        return settings


def _detect(x, y, s, settings: LatticeSettings):
    """Peak indices and FWHM estimates (degrees) by the prominence rule."""
    idx, _ = find_peaks(y)
    if idx.size == 0:
        return idx, np.array([])
    prom, left, right = peak_prominences(y, idx)
    base_idx = np.where(y[left] >= y[right], left, right)
    noise = np.sqrt(s[idx] ** 2 + s[base_idx] ** 2)
    keep = prom >= settings.min_prominence_sigma * noise
    idx, prom, left, right = idx[keep], prom[keep], left[keep], right[keep]
    if idx.size == 0:
        return idx, np.array([])
    widths, _, lips, rips = peak_widths(y, idx, rel_height=0.5, prominence_data=(prom, left, right))
    keep = widths >= settings.min_width_points
    positions = np.arange(x.size, dtype=float)
    fwhm = np.interp(rips, positions, x) - np.interp(lips, positions, x)
    return idx[keep], fwhm[keep]


def _fit_all(x, y, s, idx, fwhm, settings: LatticeSettings):
    """Fit detected peaks in groups of overlapping windows; returns (fits, rejected)."""
    lo = x[idx] - settings.window_fwhm * fwhm
    hi = x[idx] + settings.window_fwhm * fwhm
    groups: list[list[int]] = []
    for i in np.argsort(x[idx]):
        if groups and lo[i] <= max(hi[j] for j in groups[-1]):
            groups[-1].append(int(i))
        else:
            groups.append([int(i)])
    fits: list[PeakFit] = []
    rejected: list[dict[str, Any]] = []
    step = float(np.median(np.diff(x)))
    for g in groups:
        sel = (x >= min(lo[j] for j in g)) & (x <= max(hi[j] for j in g))
        xs, ys, ss = x[sel], y[sel], s[sel]
        if xs.size < 4 * len(g) + 4:
            rejected.extend({"two_theta_deg": float(x[idx[j]]), "reason": "too few points in the window"}
                            for j in g)
            continue
        starts = [(float(x[idx[j]]), float(max(fwhm[j], step))) for j in g]
        bounds = [(c - max(w, 2 * step), c + max(w, 2 * step)) for c, w in starts]
        params, cov, chi2, scaled, x_mid, ok = _fit_group(xs, ys, ss, starts, bounds)
        for n, j in enumerate(g):
            pk = _peak_from(params, cov, n, chi2, scaled, x_mid, xs.size)
            u_area = pk.area_uncertainty_counts_deg
            signif = pk.area_counts_deg / u_area if u_area > 0 else 0.0
            if not ok or not np.isfinite(pk.centre_uncertainty_deg) or pk.centre_uncertainty_deg <= 0:
                rejected.append({"two_theta_deg": pk.centre_deg, "reason": "fit did not converge"})
            elif signif < settings.min_area_significance:
                rejected.append({"two_theta_deg": pk.centre_deg,
                                 "reason": f"area only {signif:.1f} standard uncertainties"})
            else:
                fits.append(pk)
    fits.sort(key=lambda p: p.centre_deg)
    return fits, rejected


def _search_cell(d_obs, a0, c0, settings: LatticeSettings):
    """Grid point near the guess that indexes the most peaks (see the module docstring)."""
    f = settings.cell_search_fraction
    n = int(round(f / settings.cell_search_step))
    factors = 1.0 + settings.cell_search_step * np.arange(-n, n + 1)
    d_min = float(np.min(d_obs)) * (1.0 - f - 2.0 * settings.index_tolerance)
    refl = subcell_reflections(a0 * (1 + f), c0 * (1 + f), d_min)
    P = np.array([4.0 / 3.0 * (h * h + h * k + k * k) for h, k, _, _ in refl])
    Q = np.array([float(l * l) for _, _, l, _ in refl])
    A = 1.0 / (a0 * factors) ** 2
    C = 1.0 / (c0 * factors) ** 2
    inv_d2 = A[:, None, None] * P[None, None, :] + C[None, :, None] * Q[None, None, :]  # (na, nc, r)
    d_calc = inv_d2 ** -0.5
    rel = np.abs(d_obs[None, None, :, None] / d_calc[:, :, None, :] - 1.0)  # (na, nc, m, r)
    best = rel.min(axis=3)
    matched = best <= settings.index_tolerance
    count = matched.sum(axis=2)
    ssq = np.where(matched, best**2, 0.0).sum(axis=2)
    score = count - ssq / (settings.index_tolerance**2 * (d_obs.size + 1))  # count first, then residuals
    ia, ic = np.unravel_index(int(np.argmax(score)), score.shape)
    return float(a0 * factors[ia]), float(c0 * factors[ic]), int(count[ia, ic])


def _index(d_obs, a, c, tol):
    """Assign each peak its nearest allowed reflection; returns (assignments, ambiguous)."""
    refl = subcell_reflections(a, c, float(np.min(d_obs)) * (1.0 - 2.0 * tol))
    d_calc = np.array([r[3] for r in refl])
    assign: dict[int, tuple[int, int, int]] = {}
    ambiguous: dict[int, str] = {}
    for i, d in enumerate(d_obs):
        rel = np.abs(d / d_calc - 1.0)
        within = np.flatnonzero(rel <= tol)
        if within.size == 0:
            continue
        distinct = {round(d_calc[j] / d_calc[within[0]], 12) for j in within}
        if len(distinct) > 1:
            names = ", ".join("".join(str(v) for v in refl[j][:3]) for j in within)
            ambiguous[i] = f"within the tolerance of several reflections ({names})"
            continue
        j = within[int(np.argmin(rel[within]))]
        assign[i] = refl[j][:3]
    claimed: dict[tuple[int, int, int], list[int]] = {}
    for i, hkl in assign.items():
        claimed.setdefault(hkl, []).append(i)
    for hkl, peaks in claimed.items():
        if len(peaks) > 1:
            for i in peaks:
                del assign[i]
                ambiguous[i] = f"{len(peaks)} peaks claim reflection {''.join(str(v) for v in hkl)}"
    return assign, ambiguous


def analyse_pattern(two_theta_deg, counts, *, wavelength_m: float, sigma=None,
                    cell_guess: tuple[float, float] = (3.44e-10, 5.73e-10), system: str = "hexagonal",
                    temperature_K: float | None = None, **options: Any) -> Outcome:
    """Lattice parameters a and c of the NiAs-type subcell from one powder pattern.

    Parameters
    ----------
    two_theta_deg : array_like
        Scattering angles, degrees 2-theta.
    counts : array_like
        Counts.
    wavelength_m : float
        Wavelength, m (monochromatic: a K-alpha2 component is not modelled).
    sigma : array_like, optional
        Standard uncertainties of the counts; default sqrt(max(counts, 1)).
    cell_guess : (float, float)
        Guessed subcell a and c, m.
    system : {"hexagonal"}
        Crystal system of the refined cell (only the hexagonal subcell).
    temperature_K : float, optional
        Temperature of the pattern, K: reported as ``block_temperature_K``
        of every result.
    **options
        Fields of :class:`LatticeSettings`; unknown names are refused.

    Returns
    -------
    Outcome
        Method ``lattice-from-peaks``; results ``lattice_a_m`` and
        ``lattice_c_m`` (m), ``cell_volume_m3`` (m^3), ``c_over_a`` (1), each
        with a standard uncertainty; no transitions (one pattern is one
        temperature).  Diagnostics list each indexed peak (hkl, 2-theta, d,
        d_calc, residual), the unindexed, ambiguous and rejected peaks, the
        reduced chi-square of the refinement and the correlation of a and c.

    Raises
    ------
    InvalidValue
        Bad input, or fewer than 3 indexed peaks, or none with l != 0, or
        none with h or k != 0 (the message says which).

    References
    ----------
    Bragg & Bragg (1913); Wertheim et al. (1974); International Tables for
    Crystallography Vol. A, No. 194; JCGM 100:2008.
    """
    if system not in SYSTEMS:
        raise InvalidValue(f"system must be one of {', '.join(SYSTEMS)} (the NiAs-type subcell), got "
                           f"{system!r}", field="system")
    lam = _wavelength(wavelength_m)
    try:
        a0, c0 = (float(v) for v in cell_guess)
    except (TypeError, ValueError):
        raise InvalidValue(f"cell_guess must be two lengths (a, c) in metres, got {cell_guess!r}",
                           field="cell_guess") from None
    if not (np.isfinite(a0) and np.isfinite(c0) and 1e-10 < a0 < 1e-8 and 1e-10 < c0 < 1e-8):
        raise InvalidValue(f"cell_guess must be two lengths in metres between 1e-10 and 1e-8 "
                           f"(e.g. 3.44e-10, 5.73e-10), got {cell_guess!r}", field="cell_guess")
    if temperature_K is not None and not (np.isfinite(float(temperature_K)) and float(temperature_K) > 0):
        raise InvalidValue(f"temperature_K must be a positive number of kelvin, got {temperature_K!r}",
                           field="temperature_K")
    settings = LatticeSettings.from_options(dict(options))
    x, y, s = _as_pattern(two_theta_deg, counts, sigma)
    if x.size < 20:
        raise InvalidValue(f"a pattern needs at least 20 points, got {x.size}", field="two_theta_deg")
    if x[0] <= 0 or x[-1] >= 180:
        raise InvalidValue("two_theta_deg must lie strictly between 0 and 180 degrees", field="two_theta_deg")
    parameters: dict[str, Any] = dataclasses.asdict(settings)
    parameters.update({"wavelength_m": lam, "cell_guess_m": [a0, c0], "system": system,
                       "sigma": "given" if sigma is not None else "poisson",
                       "reflection_rule": "NiAs type in P6_3/mmc: l even or h - k not a multiple of 3"})
    idx, fwhm = _detect(x, y, s, settings)
    if idx.size == 0:
        raise InvalidValue("no peak stands out of the noise (prominence rule "
                           f"{settings.min_prominence_sigma:g} sigma)", field="intensity_counts")
    fits, rejected = _fit_all(x, y, s, idx, fwhm, settings)
    if not fits:
        raise InvalidValue("no detected peak gave a significant pseudo-Voigt fit", field="intensity_counts")
    tt = np.array([p.centre_deg for p in fits])
    u_tt = np.array([p.centre_uncertainty_deg for p in fits])
    d_obs = np.asarray(bragg_d(tt, lam))
    u_d = np.asarray(bragg_d_uncertainty(tt, lam, u_tt))

    a_idx, c_idx, n_search = _search_cell(d_obs, a0, c0, settings)
    assign, ambiguous = _index(d_obs, a_idx, c_idx, settings.index_tolerance)
    cell = None
    cycles = 0
    for cycles in range(1, int(settings.max_cycles) + 1):
        keys = sorted(assign)
        cell = refine_hexagonal_cell([assign[i] for i in keys], d_obs[keys], u_d[keys],
                                     wavelength_relative_uncertainty=settings.wavelength_uncertainty_m / lam)
        new_assign, new_ambiguous = _index(d_obs, cell.a_m, cell.c_m, settings.index_tolerance)
        if new_assign == assign:
            ambiguous = new_ambiguous
            break
        assign, ambiguous = new_assign, new_ambiguous
    else:  # the last re-indexing changed the set: refine once more on it
        keys = sorted(assign)
        cell = refine_hexagonal_cell([assign[i] for i in keys], d_obs[keys], u_d[keys],
                                     wavelength_relative_uncertainty=settings.wavelength_uncertainty_m / lam)
    keys = sorted(assign)
    indexed = []
    for i, r in zip(keys, cell.residuals_m):
        h, k, l = assign[i]
        indexed.append({"hkl": [h, k, l], "two_theta_deg": float(tt[i]),
                        "two_theta_uncertainty_deg": float(u_tt[i]),
                        "d_m": float(d_obs[i]), "d_uncertainty_m": float(u_d[i]),
                        "d_calc_m": float(d_obs[i] - r), "residual_m": r,
                        "fwhm_deg": fits[i].fwhm_deg, "eta": fits[i].eta,
                        "area_counts_deg": fits[i].area_counts_deg})
    unindexed = [{"two_theta_deg": float(tt[i]), "d_m": float(d_obs[i])}
                 for i in range(tt.size) if i not in assign and i not in ambiguous]
    ambiguous_list = [{"two_theta_deg": float(tt[i]), "d_m": float(d_obs[i]), "reason": why}
                      for i, why in sorted(ambiguous.items())]
    cov = np.array(cell.covariance_m2)
    corr = float(cov[0, 1] / np.sqrt(cov[0, 0] * cov[1, 1])) if cov[0, 0] > 0 and cov[1, 1] > 0 else None
    warnings = []
    if unindexed:
        warnings.append(f"{len(unindexed)} peak(s) not indexed by the NiAs-type subcell "
                        "(superstructure, split monoclinic peaks or another phase?)")
    if ambiguous_list:
        warnings.append(f"{len(ambiguous_list)} peak(s) left out as ambiguous")
    if cell.n_peaks == 3:
        warnings.append("only 3 indexed peaks: one degree of freedom scales the uncertainties")
    T = None if temperature_K is None else float(temperature_K)
    rv = dict(method=METHOD, block_temperature_K=T)
    results = (
        ResultValue(quantity="lattice_a_m", value=cell.a_m, uncertainty=cell.a_uncertainty_m, unit="m",
                    diagnostics={"correlation_with_c": corr}, **rv),
        ResultValue(quantity="lattice_c_m", value=cell.c_m, uncertainty=cell.c_uncertainty_m, unit="m",
                    diagnostics={"correlation_with_a": corr}, **rv),
        ResultValue(quantity="cell_volume_m3", value=cell.volume_m3, uncertainty=cell.volume_uncertainty_m3,
                    unit="m^3", **rv),
        ResultValue(quantity="c_over_a", value=cell.c_over_a, uncertainty=cell.c_over_a_uncertainty,
                    unit="1", **rv),
    )
    diagnostics = {"method_versions": {METHOD: VERSION}, "indexed_peaks": indexed,
                   "unindexed_peaks": unindexed, "ambiguous_peaks": ambiguous_list,
                   "rejected_peaks": rejected, "n_detected": int(idx.size), "n_indexed": cell.n_peaks,
                   "indexing_cell_m": [a_idx, c_idx], "indexed_at_search": n_search, "cycles": cycles,
                   "reduced_chi_square": cell.reduced_chi_square, "correlation_a_c": corr}
    return Outcome(method=METHOD, version=VERSION, parameters=parameters, results=results,
                   warnings=tuple(warnings), diagnostics=diagnostics)


def from_series(frame, conditions: Mapping[str, Any], **options: Any) -> Outcome:
    """:func:`analyse_pattern` on a stored diffraction series.

    Uses the columns ``two_theta_deg``, ``intensity_counts`` and, when
    present, ``intensity_sigma_counts``; the conditions ``wavelength_m``
    (required) and ``temperature_K`` (optional; else a single
    ``block_temperature_K`` of the series).  A series with several
    ``block_temperature_K`` values (several patterns) is refused.

    Raises
    ------
    magvault.analysis.pipeline.NothingToAnalyse
        A column, the wavelength, or enough points are missing.
    """
    from .pipeline import NothingToAnalyse

    for column in ("two_theta_deg", "intensity_counts"):
        if column not in frame.columns:
            raise NothingToAnalyse(f"no {column} column")
    wavelength = conditions.get("wavelength_m") if conditions else None
    if wavelength is None or (isinstance(wavelength, float) and not np.isfinite(wavelength)):
        raise NothingToAnalyse("no wavelength_m among the run's conditions")
    if "block_temperature_K" in frame.columns:
        blocks = frame["block_temperature_K"].dropna().unique()
        if blocks.size > 1:
            raise NothingToAnalyse(f"{blocks.size} patterns (block_temperature_K) in one run; "
                                   "one pattern per run is analysed")
    x = frame["two_theta_deg"].to_numpy(dtype=float)
    y = frame["intensity_counts"].to_numpy(dtype=float)
    sigma = None
    if "intensity_sigma_counts" in frame.columns:
        sigma = frame["intensity_sigma_counts"].to_numpy(dtype=float)
        if not np.all(np.isfinite(sigma)):
            sigma = None
    if np.count_nonzero(np.isfinite(x) & np.isfinite(y)) < 20:
        raise NothingToAnalyse("fewer than 20 points with an angle and a count")
    T = conditions.get("temperature_K")
    if T is None and "block_temperature_K" in frame.columns:
        blocks = frame["block_temperature_K"].dropna().unique()
        T = float(blocks[0]) if blocks.size == 1 else None
    return analyse_pattern(x, y, wavelength_m=float(wavelength), sigma=sigma,
                           temperature_K=None if T is None else float(T), **options)

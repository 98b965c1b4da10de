"""Curve arithmetic behind the overlay and the shift explorer (pure numpy/scipy, no Flask, no database).

A run's series is split into branches (heating, cooling), each sorted by
temperature with repeated temperatures averaged; it can then be normalised
(to its value at a reference temperature, or to its largest magnitude),
differentiated (dM/dT by a Savitzky-Golay filter on a uniform temperature
grid), cut to a temperature span and decimated.  The prediction band of a
straight-line fit comes from its intercept-slope covariance.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.signal import savgol_filter

#: Normalisations offered by the overlay.
NORMALISATIONS = ("none", "reference", "max")


@dataclass(frozen=True)
class Branch:
    """One branch of a run's curve, sorted by temperature (K), repeated temperatures averaged."""

    name: str | None
    temperature_K: np.ndarray
    value: np.ndarray


@dataclass(frozen=True)
class Derivative:
    """d(value)/dT on a uniform grid, and how it was made (for the page to state)."""

    temperature_K: np.ndarray
    slope: np.ndarray
    window_points: int
    polyorder: int
    step_K: float


def branches(series: pd.DataFrame, column: str, *, temperature: str = "temperature_K") -> list[Branch]:
    """The series' branches of ``column`` against temperature, each temperature-sorted.

    Rows without a ``branch`` value (a single sweep) form one branch named None.
    Non-finite points are dropped; points at the same temperature are averaged,
    so that every branch is a function of temperature (needed for interpolation
    and for a derivative).
    """
    if series is None or series.empty or column not in series.columns or temperature not in series.columns:
        return []
    t_all = pd.to_numeric(series[temperature], errors="coerce").to_numpy(float, na_value=np.nan)
    y_all = pd.to_numeric(series[column], errors="coerce").to_numpy(float, na_value=np.nan)
    if "branch" in series.columns:
        labels = series["branch"].astype(object).where(series["branch"].notna(), None).to_numpy()
    else:
        labels = np.full(len(series), None, dtype=object)
    out = []
    for name in _in_order(labels):
        rows = np.flatnonzero([lab == name for lab in labels])
        t, y = t_all[rows], y_all[rows]
        keep = np.isfinite(t) & np.isfinite(y)
        if keep.sum() < 2:
            continue
        grid, inverse = np.unique(t[keep], return_inverse=True)
        mean = np.bincount(inverse, weights=y[keep]) / np.bincount(inverse)
        if grid.size >= 2:
            out.append(Branch(name, grid, mean))
    return out


def _in_order(labels: np.ndarray) -> list:
    seen: list = []
    for lab in labels:
        if lab not in seen:
            seen.append(lab)
    return seen


def value_at(temperature_K: np.ndarray, value: np.ndarray, at_K: float) -> float:
    """Linear interpolation of a temperature-sorted curve at ``at_K``; NaN outside the curve's range."""
    if temperature_K.size == 0 or not (temperature_K[0] <= at_K <= temperature_K[-1]):
        return math.nan
    return float(np.interp(at_K, temperature_K, value))


def normalise(temperature_K: np.ndarray, value: np.ndarray, mode: str, *,
              reference_K: float | None = None) -> tuple[np.ndarray | None, str | None]:
    """The curve divided by its value at ``reference_K`` (``'reference'``) or its largest magnitude (``'max'``).

    Returns (values, None), or (None, reason) when it cannot be done: the curve
    does not reach the reference temperature, or the divisor is zero.
    ``'none'`` returns the values unchanged.
    """
    if mode == "none":
        return value, None
    if mode == "reference":
        if reference_K is None or not math.isfinite(reference_K):
            return None, "no reference temperature given"
        divisor = value_at(temperature_K, value, reference_K)
        if not math.isfinite(divisor):
            return None, f"does not reach {reference_K:g} K"
    elif mode == "max":
        divisor = float(np.max(np.abs(value))) if value.size else math.nan
    else:
        raise ValueError(f"normalisation: {mode!r} is not one of {', '.join(NORMALISATIONS)}")
    if not math.isfinite(divisor) or divisor == 0:
        return None, "its value there is zero"
    return value / divisor, None


def derivative(temperature_K: np.ndarray, value: np.ndarray, *, window_points: int = 9,
               polyorder: int = 2) -> Derivative:
    """d(value)/dT by a Savitzky-Golay filter on a uniform temperature grid.

    The curve (temperature-sorted, no repeated temperatures) is first
    interpolated linearly onto a uniform grid with as many points as it has,
    since the filter assumes equal spacing; the filter then fits a polynomial
    of degree ``polyorder`` in each window of ``window_points`` points and
    returns its slope at the window's centre (``deriv=1``; edges by fitting
    the first and last windows, scipy's ``mode='interp'``).

    Parameters
    ----------
    temperature_K : ndarray
        Increasing temperatures (K).
    value : ndarray
        The curve at those temperatures (any unit U).
    window_points : int
        Window length (made odd, and no longer than the curve).
    polyorder : int
        Degree of the local polynomial (polynomials up to this degree are
        differentiated exactly).

    Returns
    -------
    Derivative
        Grid temperatures (K) and slopes (U/K), with the window, degree and
        grid step actually used.  Curves of fewer than ``polyorder + 2``
        points get central differences (``numpy.gradient``) instead.

    References
    ----------
    Savitzky, A. & Golay, M. J. E. (1964). Smoothing and differentiation of
    data by simplified least squares procedures. Analytical Chemistry 36,
    1627-1639.
    """
    n = temperature_K.size
    if n < 2:
        return Derivative(temperature_K[:0], value[:0], 0, polyorder, math.nan)
    grid = np.linspace(float(temperature_K[0]), float(temperature_K[-1]), n)
    step = float(grid[1] - grid[0])
    uniform = np.interp(grid, temperature_K, value)
    window = min(int(window_points), n if n % 2 else n - 1)
    if window % 2 == 0:
        window -= 1
    if window <= polyorder:
        return Derivative(grid, np.gradient(uniform, grid), 0, 1, step)
    slope = savgol_filter(uniform, window, polyorder, deriv=1, delta=step, mode="interp")
    return Derivative(grid, slope, window, polyorder, step)


def cut(temperature_K: np.ndarray, value: np.ndarray, lo_K: float | None,
        hi_K: float | None) -> tuple[np.ndarray, np.ndarray]:
    """The part of a curve with lo_K <= T <= hi_K (either bound may be None)."""
    keep = np.ones(temperature_K.shape, dtype=bool)
    if lo_K is not None:
        keep &= temperature_K >= lo_K
    if hi_K is not None:
        keep &= temperature_K <= hi_K
    return temperature_K[keep], value[keep]


def points_per_curve(n_curves: int, *, budget: int, most: int, fewest: int = 60) -> int:
    """Points each curve may keep so that ``n_curves`` curves carry about ``budget`` points in all.

    Never more than ``most`` (the single-run plot's limit) and never fewer
    than ``fewest`` (below that a curve loses its shape).
    """
    if n_curves <= 0:
        return most
    return int(max(fewest, min(most, budget // n_curves)))


def line_prediction_uncertainty(x: np.ndarray, covariance: np.ndarray) -> np.ndarray:
    """Standard uncertainty of a + b x from the 2x2 covariance of (intercept a, slope b).

    sqrt([1, x] C [1, x]^T) = sqrt(C_aa + 2 x C_ab + x^2 C_bb): the usual
    propagation of a covariance matrix through a linear function.
    """
    c = np.asarray(covariance, dtype=float)
    x = np.asarray(x, dtype=float)
    variance = c[0, 0] + 2.0 * x * c[0, 1] + x * x * c[1, 1]
    return np.sqrt(np.clip(variance, 0.0, None))


__all__ = ["Branch", "Derivative", "NORMALISATIONS", "branches", "value_at", "normalise", "derivative", "cut",
           "points_per_curve", "line_prediction_uncertainty"]

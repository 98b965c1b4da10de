"""Statistics behind the collection queries.

Weighted means with the Birge ratio, weighted straight-line fits with their
covariance, the robust scatter of a population (scaled median absolute
deviation), two-sided p-values, and the exact leave-one-out versions of the
median, the median absolute deviation and the straight-line fit that the
``collection`` and ``trend`` references need.  Pure numpy: arrays in, frozen
dataclasses or arrays out.  Temperatures are in kelvin, but nothing here
depends on the unit.

Missing uncertainties are never treated as zero: the functions that take
uncertainties refuse a missing, infinite, zero or negative one, so callers
must leave such rows out first (and say so in a note).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from magvault.errors import InvalidValue

#: 1 / Phi^-1(3/4): turns a median absolute deviation into a standard deviation
#: for normally distributed values (Rousseeuw & Croux, 1993).
MAD_TO_SIGMA = 1.4826

#: sqrt(pi / 2): the standard error of the median of m normal values is about
#: 1.2533 sigma / sqrt(m) (asymptotic variance of a sample median,
#: 1 / (4 m f(median)^2) with f the normal density).
MEDIAN_STANDARD_ERROR_FACTOR = 1.2533

# Above this many elements per chunk the leave-one-out residual median works
# through its candidates in pieces, to bound memory.
_CHUNK_ELEMENTS = 2_000_000


# --------------------------------------------------------------------------
# Input checks
# --------------------------------------------------------------------------

def _values_and_uncertainties(values, uncertainties, *, field: str = "uncertainty_K",
                              allow_empty: bool = False):
    y = np.asarray(values, dtype=float).ravel()
    u = np.asarray(uncertainties, dtype=float).ravel()
    if y.shape != u.shape:
        raise InvalidValue(
            f"{field}: {u.size} uncertainties for {y.size} values; expected one each", field=field)
    if y.size == 0 and not allow_empty:
        raise InvalidValue(f"{field}: no values given; expected at least one", field=field)
    if not np.all(np.isfinite(y)):
        raise InvalidValue("a value is missing or not finite; leave such rows out first",
                           field="value")
    if not np.all(np.isfinite(u) & (u > 0)):
        raise InvalidValue(
            f"{field}: an uncertainty is missing, zero, negative or infinite; missing "
            "uncertainties are never treated as zero, so leave such rows out first", field=field)
    return y, u


# --------------------------------------------------------------------------
# Weighted mean with the Birge ratio
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class WeightedMean:
    """Inverse-variance weighted mean of n values.

    ``internal_uncertainty`` is 1/sqrt(sum of weights); ``uncertainty`` is that
    times the Birge ratio when the ratio exceeds 1 (the values scatter more than
    their uncertainties allow), else the internal one.  ``birge_ratio`` is None
    for a single value.
    """

    value: float
    uncertainty: float
    internal_uncertainty: float
    birge_ratio: float | None
    chi2: float
    n: int

    @property
    def inflated(self) -> bool:
        """Whether the uncertainty was inflated by the Birge ratio."""
        return self.birge_ratio is not None and self.birge_ratio > 1.0


def weighted_mean(values, uncertainties) -> WeightedMean:
    """Inverse-variance weighted mean, inflated by the Birge ratio when R_B > 1.

    Parameters
    ----------
    values : array_like
        The values (for instance transition temperatures, K).
    uncertainties : array_like
        Their standard uncertainties, same unit, all finite and positive.

    Returns
    -------
    WeightedMean
        value = sum(w y) / sum(w) with w = 1/u^2; internal uncertainty
        1/sqrt(sum w); chi2 = sum w (y - value)^2; R_B = sqrt(chi2 / (n - 1));
        uncertainty = internal * max(1, R_B).  One value returns itself.

    Raises
    ------
    InvalidValue
        When a value or an uncertainty is missing, or an uncertainty is not
        positive.

    References
    ----------
    Birge, R. T. (1932). The calculation of errors by the method of least
    squares. Phys. Rev. 40, 207-227.
    """
    y, u = _values_and_uncertainties(values, uncertainties)
    w = 1.0 / u**2
    total = float(w.sum())
    # Subtracting the first value first keeps the sums small for ~600 K values.
    mean = float(y[0] + np.dot(w, y - y[0]) / total)
    internal = 1.0 / math.sqrt(total)
    chi2 = float(np.dot(w, (y - mean) ** 2))
    if y.size == 1:
        return WeightedMean(mean, internal, internal, None, 0.0, 1)
    birge = math.sqrt(chi2 / (y.size - 1))
    return WeightedMean(mean, internal * max(1.0, birge), internal, birge, chi2, int(y.size))


@dataclass(frozen=True)
class GroupedWeightedMeans:
    """Weighted means of many groups at once; arrays indexed by group code.

    Groups without rows have n = 0 and NaN elsewhere; ``birge_ratio`` is NaN
    where n < 2.
    """

    value: np.ndarray
    uncertainty: np.ndarray
    internal_uncertainty: np.ndarray
    birge_ratio: np.ndarray
    chi2: np.ndarray
    n: np.ndarray


def grouped_weighted_means(codes, values, uncertainties, n_groups: int) -> GroupedWeightedMeans:
    """:func:`weighted_mean` of every group at once, vectorised.

    Parameters
    ----------
    codes : array_like of int
        Group code of each value, in ``range(n_groups)``.
    values, uncertainties : array_like
        As for :func:`weighted_mean` (uncertainties finite and positive).
    n_groups : int
        Number of groups (groups without a value get n = 0 and NaN).

    Returns
    -------
    GroupedWeightedMeans

    References
    ----------
    Birge, R. T. (1932). Phys. Rev. 40, 207-227.
    """
    codes = np.asarray(codes, dtype=np.intp).ravel()
    nan = np.full(n_groups, np.nan)
    if codes.size == 0:
        return GroupedWeightedMeans(nan, nan.copy(), nan.copy(), nan.copy(), nan.copy(),
                                    np.zeros(n_groups, dtype=np.int64))
    y, u = _values_and_uncertainties(values, uncertainties)
    if codes.shape != y.shape:
        raise InvalidValue("one group code per value expected", field="codes")
    w = 1.0 / u**2
    n = np.bincount(codes, minlength=n_groups)
    total = np.bincount(codes, weights=w, minlength=n_groups)
    has = n > 0
    # An anchor value per group (its last row) keeps the weighted sums small.
    anchor = np.zeros(n_groups)
    anchor[codes] = y
    offset = np.bincount(codes, weights=w * (y - anchor[codes]), minlength=n_groups)
    mean = nan.copy()
    mean[has] = anchor[has] + offset[has] / total[has]
    chi2 = np.bincount(codes, weights=w * (y - mean[codes]) ** 2, minlength=n_groups)
    chi2[~has] = np.nan
    internal = nan.copy()
    internal[has] = 1.0 / np.sqrt(total[has])
    birge = nan.copy()
    several = n >= 2
    birge[several] = np.sqrt(chi2[several] / (n[several] - 1))
    uncertainty = internal.copy()
    uncertainty[several] = internal[several] * np.maximum(1.0, birge[several])
    return GroupedWeightedMeans(mean, uncertainty, internal, birge, chi2, n.astype(np.int64))


# --------------------------------------------------------------------------
# Weighted straight-line fit
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class LinearFit:
    """Weighted least-squares line y = intercept + slope * x.

    ``covariance`` is the unscaled covariance of (intercept, slope): the
    inverse of the weighted normal matrix, as if the uncertainties were exact.
    ``birge_ratio`` = sqrt(chi2 / (n - 2)) (None when n = 2);
    :attr:`inflated_covariance` multiplies the covariance by R_B^2 when R_B > 1.
    """

    intercept: float
    slope: float
    covariance: np.ndarray
    residuals: np.ndarray
    chi2: float
    n: int
    birge_ratio: float | None

    @property
    def dof(self) -> int:
        return self.n - 2

    @property
    def intercept_uncertainty(self) -> float:
        return math.sqrt(self.covariance[0, 0])

    @property
    def slope_uncertainty(self) -> float:
        return math.sqrt(self.covariance[1, 1])

    @property
    def inflated_covariance(self) -> np.ndarray:
        factor = 1.0 if self.birge_ratio is None else max(1.0, self.birge_ratio) ** 2
        return self.covariance * factor

    def predict(self, x) -> np.ndarray:
        """Fitted values at x."""
        return self.intercept + self.slope * np.asarray(x, dtype=float)

    def prediction_uncertainty(self, x) -> np.ndarray:
        """sqrt([1, x] C [1, x]^T) with the unscaled covariance C."""
        x = np.asarray(x, dtype=float)
        c = self.covariance
        return np.sqrt(c[0, 0] + 2.0 * c[0, 1] * x + c[1, 1] * x**2)


def weighted_linear_fit(x, y, u) -> LinearFit:
    """Straight line through (x, y) weighted by 1/u^2.

    Parameters
    ----------
    x : array_like
        Abscissae (for instance x in Fe(1-x)S, mu0*H in T, an angle in degrees).
    y : array_like
        Ordinates (for instance temperatures, K).
    u : array_like
        Standard uncertainties of y, finite and positive.

    Returns
    -------
    LinearFit
        Solved about the weighted mean of x, which is algebraically the same as
        the normal equations but keeps rounding small.

    Raises
    ------
    InvalidValue
        Fewer than two points, fewer than two distinct x, or a missing value.

    References
    ----------
    Bevington, P. R. & Robinson, D. K. (2003). Data Reduction and Error
    Analysis for the Physical Sciences, 3rd ed., ch. 6 (weighted least squares
    for a straight line); Birge, R. T. (1932). Phys. Rev. 40, 207-227.
    """
    y, u = _values_and_uncertainties(y, u)
    x = np.asarray(x, dtype=float).ravel()
    if x.shape != y.shape:
        raise InvalidValue(f"x: {x.size} abscissae for {y.size} values; expected one each",
                           field="x")
    if not np.all(np.isfinite(x)):
        raise InvalidValue("x: an abscissa is missing; leave such rows out first", field="x")
    if np.unique(x).size < 2:
        raise InvalidValue("x: a straight line needs at least two distinct x values", field="x")
    w = 1.0 / u**2
    total = w.sum()
    x_mean = np.dot(w, x) / total
    y_mean = np.dot(w, y) / total
    dx = x - x_mean
    sxx = np.dot(w, dx**2)
    slope = np.dot(w, dx * (y - y_mean)) / sxx
    intercept = y_mean - slope * x_mean
    covariance = np.array([[1.0 / total + x_mean**2 / sxx, -x_mean / sxx],
                           [-x_mean / sxx, 1.0 / sxx]])
    residuals = y - (y_mean + slope * dx)
    chi2 = float(np.dot(w, residuals**2))
    birge = math.sqrt(chi2 / (y.size - 2)) if y.size > 2 else None
    return LinearFit(float(intercept), float(slope), covariance, residuals, chi2,
                     int(y.size), birge)


# --------------------------------------------------------------------------
# Robust scatter and significance
# --------------------------------------------------------------------------

def robust_scale(values, *, factor: float = MAD_TO_SIGMA) -> float:
    """factor x median absolute deviation about the median (1.4826 x MAD).

    Parameters
    ----------
    values : array_like
        At least one finite value.
    factor : float
        1.4826 makes the result a consistent estimate of the standard deviation
        of normally distributed values.

    References
    ----------
    Rousseeuw, P. J. & Croux, C. (1993). Alternatives to the median absolute
    deviation. J. Am. Stat. Assoc. 88, 1273-1283.
    """
    v = np.asarray(values, dtype=float).ravel()
    if v.size == 0 or not np.all(np.isfinite(v)):
        raise InvalidValue("robust scale needs at least one value and no missing values",
                           field="values")
    return float(factor * np.median(np.abs(v - np.median(v))))


def two_sided_p(sigma):
    """Two-sided p-value of a normal deviate: 2 (1 - Phi(|sigma|)) = erfc(|sigma|/sqrt 2).

    Accepts a number or an array; NaN stays NaN.
    """
    result = special.erfc(np.abs(np.asarray(sigma, dtype=float)) / math.sqrt(2.0))
    return float(result) if np.ndim(result) == 0 else result


# --------------------------------------------------------------------------
# Leave-one-out median and median absolute deviation (exact, O(n log n))
# --------------------------------------------------------------------------

def _median_without(sorted_values: np.ndarray, removed_rank) -> np.ndarray:
    """Median of ``sorted_values`` with the element at ``removed_rank`` taken out.

    After removing rank r, the remaining element at position j is the original
    one at j + (j >= r); the median needs positions (m-1)//2 and m//2 of m = n-1.
    """
    m = sorted_values.size - 1
    r = np.asarray(removed_rank)
    k1, k2 = (m - 1) // 2, m // 2
    return 0.5 * (sorted_values[k1 + (k1 >= r)] + sorted_values[k2 + (k2 >= r)])


def _ranks(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    order = np.argsort(values, kind="stable")
    rank = np.empty(values.size, dtype=np.intp)
    rank[order] = np.arange(values.size)
    return order, rank


def leave_one_out_median_mad(values) -> tuple[np.ndarray, np.ndarray]:
    """For each value, the median of the others and their median absolute deviation.

    Exact and O(n log n): once the values are sorted, the median of the others
    is a fixed position shifted by one when the removed value lies below it, so
    it takes at most three distinct values over all i.  For each of those
    centres the absolute deviations of all values are sorted once, and the
    median of the others' deviations is again a sorted position with one
    element removed.

    Parameters
    ----------
    values : array_like
        n finite values (n >= 2; with n = 1 both results are NaN).

    Returns
    -------
    (median, mad) : tuple of ndarray
        ``median[i]`` = median of values without i; ``mad[i]`` = median of
        |v_j - median[i]| over j != i (unscaled: multiply by 1.4826).
    """
    a = np.asarray(values, dtype=float).ravel()
    if not np.all(np.isfinite(a)):
        raise InvalidValue("leave-one-out median: a value is missing", field="values")
    n = a.size
    if n < 2:
        return np.full(n, np.nan), np.full(n, np.nan)
    order, rank = _ranks(a)
    median = _median_without(a[order], rank)
    mad = np.empty(n)
    # The same sorted pair gives bit-identical centres, so unique() sees <= 3.
    for centre in np.unique(median):
        chosen = median == centre
        deviation = np.abs(a - centre)
        d_order, d_rank = _ranks(deviation)
        mad[chosen] = _median_without(deviation[d_order], d_rank[chosen])
    return median, mad


# --------------------------------------------------------------------------
# Leave-one-out straight-line fit and residual scatter
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class LeaveOneOutFits:
    """For each point i, the weighted line through the other points.

    ``prediction`` is the line of the others at x_i; ``prediction_uncertainty``
    is sqrt([1, x_i] C [1, x_i]^T) with C the unscaled covariance of the
    others' intercept and slope; ``median_abs_residual`` is the median of
    |y_j - line_i(x_j)| over the others j (unscaled).  Points whose others have
    fewer than two distinct x are NaN throughout (``distinct_x`` < 2).
    """

    intercept: np.ndarray
    slope: np.ndarray
    prediction: np.ndarray
    prediction_uncertainty: np.ndarray
    median_abs_residual: np.ndarray
    m: np.ndarray
    distinct_x: np.ndarray


def leave_one_out_linear_fits(x, y, u) -> LeaveOneOutFits:
    """Weighted straight line through all points but one, for every point.

    The line of the others follows from the full weighted sums by a rank-one
    downdate (centred sums, updated as in West, 1979), so all n fits cost O(n).
    The median absolute residual of the others is exact: the others' residuals
    under line i differ from their residuals under the full line by
    delta_i(x_j), a straight line in x_j, bounded by eps_i = max |delta_i| over
    the x range.  A median moves by at most eps_i when every element moves by
    at most eps_i, so only residuals within 2 eps_i of the full-line median can
    decide it; those few candidates are recomputed and sorted.  Cost
    O(n log n + B), B the total number of candidates (about n for a large,
    well-spread collection, at most n^2 for a handful of high-leverage points).

    Parameters
    ----------
    x : array_like
        Abscissae (x in Fe(1-x)S, field in T, ...).
    y : array_like
        Values (K).
    u : array_like
        Standard uncertainties of y (K), finite and positive.

    Returns
    -------
    LeaveOneOutFits

    References
    ----------
    West, D. H. D. (1979). Updating mean and variance estimates: an improved
    method. Commun. ACM 22, 532-535. Bevington, P. R. & Robinson, D. K.
    (2003), Data Reduction and Error Analysis for the Physical Sciences, ch. 6.
    """
    y, u = _values_and_uncertainties(y, u)
    x = np.asarray(x, dtype=float).ravel()
    if x.shape != y.shape or not np.all(np.isfinite(x)):
        raise InvalidValue("x: one finite abscissa per value expected", field="x")
    n = y.size
    nan = np.full(n, np.nan)
    _, inverse, counts = np.unique(x, return_inverse=True, return_counts=True)
    n_distinct = counts.size
    distinct_x = n_distinct - (counts[inverse] == 1).astype(np.int64)
    m = np.full(n, n - 1, dtype=np.int64)
    usable = distinct_x >= 2
    if not usable.any():
        return LeaveOneOutFits(nan, nan.copy(), nan.copy(), nan.copy(), nan.copy(), m, distinct_x)

    w = 1.0 / u**2
    total = w.sum()
    x_mean = np.dot(w, x) / total
    y_mean = np.dot(w, y) / total
    dx, dy = x - x_mean, y - y_mean
    sxx = np.dot(w, dx**2)
    sxy = np.dot(w, dx * dy)
    slope_all = sxy / sxx

    i = np.flatnonzero(usable)
    rest = total - w[i]
    shrink = w[i] * total / rest
    sxx_i = sxx - shrink * dx[i] ** 2
    sxy_i = sxy - shrink * dx[i] * dy[i]
    x_mean_i = x_mean - w[i] * dx[i] / rest
    y_mean_i = y_mean - w[i] * dy[i] / rest
    slope_i = sxy_i / sxx_i

    intercept, slope = nan.copy(), nan.copy()
    prediction, pred_u, mar = nan.copy(), nan.copy(), nan.copy()
    slope[i] = slope_i
    intercept[i] = y_mean_i - slope_i * x_mean_i
    prediction[i] = y_mean_i + slope_i * (x[i] - x_mean_i)
    pred_u[i] = np.sqrt(1.0 / rest + (x[i] - x_mean_i) ** 2 / sxx_i)

    # Line of the others minus the full line, as c0 + c1 (x - x_mean).
    c0 = np.zeros(n)
    c1 = np.zeros(n)
    c0[i] = (y_mean_i - y_mean) - slope_i * (x_mean_i - x_mean)
    c1[i] = slope_i - slope_all
    residual_all = dy - slope_all * dx
    mar[i] = _median_abs_shifted_residual(residual_all, dx, c0, c1)[i]
    return LeaveOneOutFits(intercept, slope, prediction, pred_u, mar, m, distinct_x)


def _median_abs_shifted_residual(r: np.ndarray, dx: np.ndarray, c0: np.ndarray,
                                 c1: np.ndarray) -> np.ndarray:
    """For each i: median over j != i of |r_j - c0_i - c1_i dx_j|, exactly.

    See :func:`leave_one_out_linear_fits` for why only the candidates within
    2 eps_i of the unperturbed order statistics need recomputing.
    """
    n = r.size
    if n < 2:
        return np.full(n, np.nan)
    m = n - 1
    k1, k2 = (m - 1) // 2, m // 2
    v = np.abs(r)
    order, rank = _ranks(v)
    vs = v[order]
    eps = np.maximum(np.abs(c0 + c1 * dx.min()), np.abs(c0 + c1 * dx.max()))
    # Slack beyond 2 eps absorbs rounding; extra candidates cost time, not accuracy.
    slack = 2.0 * eps * (1.0 + 1e-9) + 1e-12 * (vs[-1] + eps + 1.0)
    low = vs[k1 + (k1 >= rank)] - slack
    high = vs[k2 + (k2 >= rank)] + slack
    start = np.searchsorted(vs, low, side="left")
    stop = np.searchsorted(vs, high, side="right")
    below = start - (rank < start)          # others certainly under the median pair
    span = stop - start                     # candidates, possibly including i itself

    result = np.empty(n)
    bounds = np.cumsum(span)
    first = 0
    while first < n:
        # Take points until the chunk holds about _CHUNK_ELEMENTS candidates.
        reach = bounds[first] - span[first] + _CHUNK_ELEMENTS
        last = max(first + 1, int(np.searchsorted(bounds, reach, side="right")))
        idx = np.arange(first, last)
        lengths = span[idx]
        owner = np.repeat(idx, lengths)
        seg_start = np.cumsum(lengths) - lengths
        pos = start[owner] + (np.arange(owner.size) - np.repeat(seg_start, lengths))
        keep = pos != rank[owner]
        owner, pos = owner[keep], pos[keep]
        j = order[pos]
        w = np.abs(r[j] - c0[owner] - c1[owner] * dx[j])
        sorted_w = w[np.lexsort((w, owner))]
        kept = lengths - ((rank[idx] >= start[idx]) & (rank[idx] < stop[idx]))
        base = np.cumsum(kept) - kept
        result[idx] = 0.5 * (sorted_w[base + k1 - below[idx]] + sorted_w[base + k2 - below[idx]])
        first = last
    return result


# --------------------------------------------------------------------------
# The same, for many groups at once
# --------------------------------------------------------------------------
#
# Collections grouped by parent have thousands of groups of a few specimens,
# where a Python loop over groups costs more than the arithmetic.  Groups of at
# most ``pair_limit`` members are therefore handled all at once by listing,
# for every member i, the other members j of its group (sum of n_g (n_g - 1)
# pairs) and taking medians over each i's segment; larger groups go through
# the O(n log n) single-group functions above.

def _group_sizes(codes: np.ndarray) -> np.ndarray:
    if codes.size and codes.min() < 0:
        raise InvalidValue("group codes must be non-negative integers", field="codes")
    return np.bincount(codes) if codes.size else np.zeros(0, dtype=np.int64)


def _pairs_within(codes: np.ndarray):
    """For each element i, the indices j != i of its group, in segments of m_i = n_g - 1."""
    n = codes.size
    order = np.argsort(codes, kind="stable")
    sizes = _group_sizes(codes)
    starts = np.cumsum(sizes) - sizes
    local = np.empty(n, dtype=np.intp)
    local[order] = np.arange(n) - starts[codes[order]]
    m = sizes[codes] - 1
    owner = np.repeat(np.arange(n), m)
    offsets = np.cumsum(m) - m
    t = np.arange(owner.size) - np.repeat(offsets, m)
    j = order[starts[codes[owner]] + t + (t >= local[owner])]
    return owner, j, m, offsets


def _segment_medians(owner, values, m, offsets) -> np.ndarray:
    """Median of ``values`` over each owner's segment (owner is non-decreasing)."""
    result = np.full(m.size, np.nan)
    if owner.size == 0:
        return result
    ordered = values[np.lexsort((values, owner))]
    ok = m > 0
    k1, k2 = (m[ok] - 1) // 2, m[ok] // 2
    result[ok] = 0.5 * (ordered[offsets[ok] + k1] + ordered[offsets[ok] + k2])
    return result


def _split_by_size(codes: np.ndarray, pair_limit: int):
    sizes = _group_sizes(codes)
    small = sizes[codes] <= pair_limit
    large_groups = np.flatnonzero(sizes > pair_limit)
    return small, large_groups


def grouped_leave_one_out_median_mad(values, codes, *, pair_limit: int = 64):
    """:func:`leave_one_out_median_mad` within each group, for all groups at once.

    Parameters
    ----------
    values : array_like
        Finite values.
    codes : array_like of int
        Group code of each value (non-negative integers).
    pair_limit : int
        Groups up to this size are done by listing pairs, larger ones by the
        O(n log n) method; both are exact.

    Returns
    -------
    (median, mad) : tuple of ndarray
        Per value, over the other members of its group (NaN for a group of one).
    """
    a = np.asarray(values, dtype=float).ravel()
    codes = np.asarray(codes, dtype=np.intp).ravel()
    if a.shape != codes.shape or not np.all(np.isfinite(a)):
        raise InvalidValue("one finite value per group code expected", field="values")
    median, mad = np.full(a.size, np.nan), np.full(a.size, np.nan)
    small, large_groups = _split_by_size(codes, pair_limit)
    idx = np.flatnonzero(small)
    if idx.size:
        sub_codes = np.unique(codes[idx], return_inverse=True)[1]
        owner, j, m, offsets = _pairs_within(sub_codes)
        med = _segment_medians(owner, a[idx][j], m, offsets)
        dev = np.abs(a[idx][j] - med[owner]) if owner.size else np.zeros(0)
        median[idx], mad[idx] = med, _segment_medians(owner, dev, m, offsets)
    for g in large_groups:
        members = np.flatnonzero(codes == g)
        median[members], mad[members] = leave_one_out_median_mad(a[members])
    return median, mad


def grouped_leave_one_out_linear_fits(x, y, u, codes, *, pair_limit: int = 64) -> LeaveOneOutFits:
    """:func:`leave_one_out_linear_fits` within each group, for all groups at once.

    Small groups are fitted directly from each point's list of others (two
    passes: weighted means, then centred sums), so no downdate is needed there.

    Parameters
    ----------
    x, y, u : array_like
        Abscissae, values and their standard uncertainties (finite, u > 0).
    codes : array_like of int
        Group code of each point.
    pair_limit : int
        Groups up to this size go by pairs, larger ones by the rank-one downdate.

    Returns
    -------
    LeaveOneOutFits
        Aligned with the input points.

    References
    ----------
    Bevington, P. R. & Robinson, D. K. (2003). Data Reduction and Error
    Analysis for the Physical Sciences, 3rd ed., ch. 6.
    """
    y, u = _values_and_uncertainties(y, u, allow_empty=True)
    x = np.asarray(x, dtype=float).ravel()
    codes = np.asarray(codes, dtype=np.intp).ravel()
    if x.shape != y.shape or codes.shape != y.shape or not np.all(np.isfinite(x)):
        raise InvalidValue("x: one finite abscissa and one group code per value expected",
                           field="x")
    n = y.size
    out = {name: np.full(n, np.nan) for name in
           ("intercept", "slope", "prediction", "prediction_uncertainty", "median_abs_residual")}
    m_all = np.zeros(n, dtype=np.int64)
    distinct_all = np.zeros(n, dtype=np.int64)
    small, large_groups = _split_by_size(codes, pair_limit)
    idx = np.flatnonzero(small)
    if idx.size:
        fits = _pairwise_fits(x[idx], y[idx], u[idx], np.unique(codes[idx], return_inverse=True)[1])
        for name in out:
            out[name][idx] = getattr(fits, name)
        m_all[idx], distinct_all[idx] = fits.m, fits.distinct_x
    for g in large_groups:
        members = np.flatnonzero(codes == g)
        fits = leave_one_out_linear_fits(x[members], y[members], u[members])
        for name in out:
            out[name][members] = getattr(fits, name)
        m_all[members], distinct_all[members] = fits.m, fits.distinct_x
    return LeaveOneOutFits(out["intercept"], out["slope"], out["prediction"],
                           out["prediction_uncertainty"], out["median_abs_residual"],
                           m_all, distinct_all)


def _pairwise_fits(x, y, u, codes) -> LeaveOneOutFits:
    n = y.size
    owner, j, m, offsets = _pairs_within(codes)
    nan = np.full(n, np.nan)
    # Distinct x among each point's others: count changes along its sorted list.
    xj = x[j]
    xs = xj[np.lexsort((xj, owner))]
    change = np.ones(owner.size, dtype=bool)
    if owner.size:
        change[1:] = (xs[1:] != xs[:-1]) | (owner[1:] != owner[:-1])
    distinct = np.bincount(owner[change], minlength=n).astype(np.int64)
    ok = distinct >= 2
    if not ok.any():
        return LeaveOneOutFits(nan, nan.copy(), nan.copy(), nan.copy(), nan.copy(),
                               m.astype(np.int64), distinct)
    keep = ok[owner]
    owner, j = owner[keep], j[keep]
    w = 1.0 / u[j] ** 2
    total = np.bincount(owner, weights=w, minlength=n)
    safe = np.where(ok, total, 1.0)
    x_mean = np.bincount(owner, weights=w * x[j], minlength=n) / safe
    y_mean = np.bincount(owner, weights=w * y[j], minlength=n) / safe
    dx = x[j] - x_mean[owner]
    sxx = np.bincount(owner, weights=w * dx**2, minlength=n)
    sxy = np.bincount(owner, weights=w * dx * (y[j] - y_mean[owner]), minlength=n)
    slope, intercept, prediction, pred_u = nan.copy(), nan.copy(), nan.copy(), nan.copy()
    slope[ok] = sxy[ok] / sxx[ok]
    intercept[ok] = y_mean[ok] - slope[ok] * x_mean[ok]
    prediction[ok] = y_mean[ok] + slope[ok] * (x[ok] - x_mean[ok])
    pred_u[ok] = np.sqrt(1.0 / total[ok] + (x[ok] - x_mean[ok]) ** 2 / sxx[ok])
    residual = np.abs(y[j] - y_mean[owner] - slope[owner] * dx)
    m_kept = np.where(ok, m, 0)
    mar = _segment_medians(owner, residual, m_kept, np.cumsum(m_kept) - m_kept)
    mar[~ok] = np.nan
    return LeaveOneOutFits(intercept, slope, prediction, pred_u, mar, m.astype(np.int64),
                           distinct)

"""Tests of magvault.queries.stats against formulas worked by hand and outside libraries.

Outside references used here:
- Birge, R. T. (1932), Phys. Rev. 40, 207: R_B = sqrt(chi2 / (n - 1)), inflate when R_B > 1.
- Bevington & Robinson (2003), Data Reduction and Error Analysis, ch. 6: weighted
  straight line and its covariance (the inverse of the weighted normal matrix);
  citation from memory, the formulas are written out and checked against numpy.polyfit.
- numpy.average, numpy.median, numpy.polyfit (its w is 1/sigma, not 1/sigma^2;
  cov='unscaled' gives the inverse normal matrix, cov=True scales it by chi2/(n-2)).
- scipy.stats.norm and scipy.stats.median_abs_deviation; the uncertainties package.
- Rousseeuw & Croux (1993), J. Am. Stat. Assoc. 88, 1273: MAD x 1/Phi^-1(3/4).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats
from uncertainties import ufloat

from magvault.errors import InvalidValue
from magvault.queries.stats import (
    MAD_TO_SIGMA,
    MEDIAN_STANDARD_ERROR_FACTOR,
    grouped_leave_one_out_linear_fits,
    grouped_leave_one_out_median_mad,
    grouped_weighted_means,
    leave_one_out_linear_fits,
    leave_one_out_median_mad,
    robust_scale,
    two_sided_p,
    weighted_linear_fit,
    weighted_mean,
)


# --- weighted mean and Birge ratio -------------------------------------------

def test_weighted_mean_worked_example_without_inflation():
    # Birge (1932): values 10 +/- 1 and 12 +/- 2.
    # w = 1/1^2 = 1 and 1/2^2 = 0.25; sum w = 1.25
    # mean = (1*10 + 0.25*12) / 1.25 = 13 / 1.25 = 10.4
    # internal u = 1/sqrt(1.25) = 0.894427191
    # chi2 = 1*(10-10.4)^2 + 0.25*(12-10.4)^2 = 0.16 + 0.64 = 0.8
    # R_B = sqrt(0.8 / (2-1)) = 0.894427191 < 1 -> no inflation
    result = weighted_mean([10.0, 12.0], [1.0, 2.0])
    assert result.value == pytest.approx(10.4, rel=1e-12)
    assert result.internal_uncertainty == pytest.approx(0.894427191, rel=1e-9)
    assert result.chi2 == pytest.approx(0.8, rel=1e-12)
    assert result.birge_ratio == pytest.approx(0.894427191, rel=1e-9)
    assert result.uncertainty == pytest.approx(0.894427191, rel=1e-9)
    assert not result.inflated


def test_weighted_mean_worked_example_with_birge_inflation():
    # Birge (1932): 30, 32, 34 K, each +/- 0.5 K.
    # w = 4 each, sum 12; mean = 32; internal u = 1/sqrt(12) = 0.288675135
    # chi2 = 4*(2^2 + 0 + 2^2) = 32; R_B = sqrt(32 / 2) = 4 > 1
    # u = 4 * 0.288675135 = 1.154700538
    result = weighted_mean([30.0, 32.0, 34.0], [0.5, 0.5, 0.5])
    assert result.value == pytest.approx(32.0, rel=1e-12)
    assert result.birge_ratio == pytest.approx(4.0, rel=1e-12)
    assert result.uncertainty == pytest.approx(1.154700538, rel=1e-9)
    assert result.inflated


def test_weighted_mean_agrees_with_numpy_average_and_uncertainties_package():
    # numpy.average gives the weighted value; the uncertainties package propagates
    # sum(w y)/sum(w) to the internal uncertainty 1/sqrt(sum w).
    rng = np.random.default_rng(7)
    y = rng.normal(595.0, 2.0, 9)
    u = rng.uniform(0.5, 3.0, 9)
    result = weighted_mean(y, u)
    w = 1 / u**2
    assert result.value == pytest.approx(np.average(y, weights=w), rel=1e-13)
    propagated = sum(wi * ufloat(yi, ui) for wi, yi, ui in zip(w, y, u)) / w.sum()
    assert result.internal_uncertainty == pytest.approx(propagated.std_dev, rel=1e-10)
    birge = math.sqrt(np.sum(w * (y - propagated.nominal_value) ** 2) / (y.size - 1))
    assert result.uncertainty == pytest.approx(propagated.std_dev * max(1.0, birge), rel=1e-10)


def test_single_value_is_kept_as_it_is():
    result = weighted_mean([32.7], [0.3])
    assert (result.value, result.uncertainty, result.birge_ratio, result.n) == (32.7, 0.3, None, 1)


@pytest.mark.parametrize("bad", [np.nan, 0.0, -0.1, np.inf])
def test_missing_or_zero_uncertainty_is_refused_not_treated_as_zero(bad):
    with pytest.raises(InvalidValue, match="never treated as zero"):
        weighted_mean([32.0, 33.0], [0.1, bad])


def test_grouped_weighted_means_match_one_group_at_a_time():
    # The two worked examples above, interleaved as groups 1 and 0, plus an empty group 2.
    codes = np.array([1, 0, 1, 0, 0])
    values = np.array([10.0, 30.0, 12.0, 32.0, 34.0])
    uncertainties = np.array([1.0, 0.5, 2.0, 0.5, 0.5])
    means = grouped_weighted_means(codes, values, uncertainties, 3)
    assert means.value[:2] == pytest.approx([32.0, 10.4], rel=1e-12)
    assert means.uncertainty[:2] == pytest.approx([1.154700538, 0.894427191], rel=1e-9)
    assert means.birge_ratio[:2] == pytest.approx([4.0, 0.894427191], rel=1e-9)
    assert list(means.n) == [3, 2, 0]
    assert np.isnan(means.value[2]) and np.isnan(means.uncertainty[2])


# --- weighted straight line ---------------------------------------------------

def test_weighted_linear_fit_worked_example():
    # Bevington & Robinson (2003), ch. 6, with x = 0, 1, 2; y = 1, 3, 4; u = 1:
    # S = 3, Sx = 3, Sxx = 5, Sy = 8, Sxy = 0 + 3 + 8 = 11, Delta = 3*5 - 3^2 = 6
    # slope = (S Sxy - Sx Sy)/Delta = (33 - 24)/6 = 1.5
    # intercept = (Sxx Sy - Sx Sxy)/Delta = (40 - 33)/6 = 1.1666667
    # C = [[Sxx, -Sx], [-Sx, S]] / Delta = [[5/6, -1/2], [-1/2, 1/2]]
    # residuals 1 - 7/6, 3 - 16/6, 4 - 25/6 = -1/6, 1/3, -1/6; chi2 = 1/36 + 4/36 + 1/36 = 1/6
    fit = weighted_linear_fit([0.0, 1.0, 2.0], [1.0, 3.0, 4.0], [1.0, 1.0, 1.0])
    assert fit.slope == pytest.approx(1.5, rel=1e-12)
    assert fit.intercept == pytest.approx(7 / 6, rel=1e-12)
    assert fit.covariance == pytest.approx(np.array([[5 / 6, -0.5], [-0.5, 0.5]]), rel=1e-12)
    assert fit.residuals == pytest.approx([-1 / 6, 1 / 3, -1 / 6], rel=1e-10)
    assert fit.chi2 == pytest.approx(1 / 6, rel=1e-10)
    assert fit.birge_ratio == pytest.approx(math.sqrt(1 / 6), rel=1e-10)


def test_weighted_linear_fit_agrees_with_numpy_polyfit():
    # numpy.polyfit takes w = 1/sigma and returns [slope, intercept].
    rng = np.random.default_rng(3)
    x = rng.uniform(0.07, 0.13, 12)
    u = rng.uniform(0.05, 0.6, 12)
    # scatter beyond the uncertainties, so R_B > 1
    y = 36.0 - 38.0 * x + rng.normal(0.0, 1.0, 12) * u * 3
    fit = weighted_linear_fit(x, y, u)
    coef, cov = np.polyfit(x, y, 1, w=1 / u, cov="unscaled")
    assert (fit.slope, fit.intercept) == pytest.approx((coef[0], coef[1]), rel=1e-9)
    swap = np.array([[0, 1], [1, 0]])
    assert fit.covariance == pytest.approx(swap @ cov @ swap, rel=1e-8)
    assert fit.birge_ratio > 1
    coef_scaled, cov_scaled = np.polyfit(x, y, 1, w=1 / u, cov=True)
    assert fit.inflated_covariance == pytest.approx(swap @ cov_scaled @ swap, rel=1e-8)
    point = np.array([1.0, 0.1])
    assert fit.prediction_uncertainty(0.1) == pytest.approx(
        math.sqrt(point @ fit.covariance @ point), rel=1e-12)


def test_weighted_linear_fit_needs_two_distinct_x():
    with pytest.raises(InvalidValue, match="two distinct x"):
        weighted_linear_fit([0.1, 0.1, 0.1], [32.0, 33.0, 31.0], [0.1, 0.1, 0.1])


# --- robust scale and p-values --------------------------------------------------

def test_constants_against_the_normal_distribution():
    # 1.4826 = 1 / Phi^-1(3/4) (Rousseeuw & Croux 1993), to the 5 digits we carry.
    assert MAD_TO_SIGMA == pytest.approx(1 / scipy.stats.norm.ppf(0.75), rel=5e-6)
    # 1.2533 = sqrt(pi/2): the asymptotic variance of a sample median is
    # 1/(4 m f(median)^2) (common practice, no single source); for the normal
    # density f(0) = 1/sqrt(2 pi) that is (pi/2) sigma^2 / m.
    assert MEDIAN_STANDARD_ERROR_FACTOR == pytest.approx(
        1 / (2 * scipy.stats.norm.pdf(0.0)), rel=5e-5)


def test_robust_scale_worked_example_and_scipy():
    # 1, 2, 3, 4, 100: median 3; |deviations| 2, 1, 0, 1, 97 -> median 1 -> 1.4826
    assert robust_scale([1, 2, 3, 4, 100]) == pytest.approx(1.4826, rel=1e-12)
    values = np.random.default_rng(5).normal(32.0, 0.4, 101)
    assert robust_scale(values) == pytest.approx(
        scipy.stats.median_abs_deviation(values, scale=1 / 1.4826), rel=1e-12)


@pytest.mark.parametrize("sigma", [0.0, 0.5, -1.0, 1.959963985, 3.0, -4.2, 8.5])
def test_two_sided_p_against_scipy(sigma):
    # p = 2 (1 - Phi(|sigma|)) = 2 * scipy.stats.norm.sf(|sigma|)
    assert two_sided_p(sigma) == pytest.approx(2 * scipy.stats.norm.sf(abs(sigma)), rel=1e-12)


def test_two_sided_p_textbook_values_and_arrays():
    # 1.96 sigma -> 5 %, 3 sigma -> 0.27 % (common practice, no single source)
    p = two_sided_p(np.array([1.959963985, 3.0]))
    assert p == pytest.approx([0.05, 0.0026998], rel=1e-4)


# --- leave-one-out median and MAD -------------------------------------------------

def test_leave_one_out_median_mad_worked_example():
    # values 1, 2, 4, 7, 11
    # without 1:  2, 4, 7, 11 -> median 5.5; |dev| 3.5, 1.5, 1.5, 5.5 -> sorted 1.5 1.5 3.5 5.5
    #             -> median 2.5
    # without 4:  1, 2, 7, 11 -> median 4.5; |dev| 3.5, 2.5, 2.5, 6.5 -> 3.0
    # without 11: 1, 2, 4, 7  -> median 3.0; |dev| 2, 1, 1, 4 -> 1.5
    median, mad = leave_one_out_median_mad([4.0, 1.0, 11.0, 2.0, 7.0])
    assert median[[1, 0, 2]] == pytest.approx([5.5, 4.5, 3.0])
    assert mad[[1, 0, 2]] == pytest.approx([2.5, 3.0, 1.5])


@pytest.mark.parametrize("seed", range(6))
def test_leave_one_out_median_mad_against_numpy_and_scipy(seed):
    rng = np.random.default_rng(seed)
    values = np.round(rng.normal(32.0, 1.0, rng.integers(2, 40)), seed % 3)  # ties too
    median, mad = leave_one_out_median_mad(values)
    for i in range(values.size):
        others = np.delete(values, i)
        assert median[i] == np.median(others)
        assert mad[i] == pytest.approx(
            scipy.stats.median_abs_deviation(others, scale=1.0), abs=1e-12)


def test_grouped_leave_one_out_median_mad_both_paths_agree_with_numpy():
    rng = np.random.default_rng(11)
    codes = np.repeat([0, 1, 2, 3], [1, 5, 80, 3])  # 80 > pair_limit goes the O(n log n) way
    rng.shuffle(codes)
    values = rng.normal(32.0, 0.5, codes.size)
    median, mad = grouped_leave_one_out_median_mad(values, codes, pair_limit=64)
    for i in range(values.size):
        others = values[(codes == codes[i]) & (np.arange(values.size) != i)]
        if others.size == 0:
            assert np.isnan(median[i]) and np.isnan(mad[i])
            continue
        assert median[i] == pytest.approx(np.median(others), abs=1e-12)
        assert mad[i] == pytest.approx(np.median(np.abs(others - np.median(others))), abs=1e-12)


# --- leave-one-out straight lines ---------------------------------------------------

def _polyfit_without(x, y, u, i):
    keep = np.arange(x.size) != i
    coef, cov = np.polyfit(x[keep], y[keep], 1, w=1 / u[keep], cov="unscaled")
    point = np.array([x[i], 1.0])
    residuals = y[keep] - np.polyval(coef, x[keep])
    return coef, math.sqrt(point @ cov @ point), np.median(np.abs(residuals))


@pytest.mark.parametrize("seed", range(5))
def test_leave_one_out_linear_fits_against_numpy_polyfit(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(5, 40))
    x = np.round(rng.uniform(0.07, 0.13, n), 2 + seed % 2)   # repeated x values
    u = rng.uniform(0.05, 0.5, n)
    y = 36.0 - 38.0 * x + rng.normal(0, 0.3, n) + 3.0 * (rng.random(n) < 0.15)
    fits = leave_one_out_linear_fits(x, y, u)
    for i in range(n):
        if np.unique(np.delete(x, i)).size < 2:
            assert np.isnan(fits.prediction[i])
            continue
        coef, p, mar = _polyfit_without(x, y, u, i)
        assert fits.slope[i] == pytest.approx(coef[0], rel=1e-7, abs=1e-7)
        assert fits.intercept[i] == pytest.approx(coef[1], rel=1e-9)
        assert fits.prediction[i] == pytest.approx(np.polyval(coef, x[i]), rel=1e-10)
        assert fits.prediction_uncertainty[i] == pytest.approx(p, rel=1e-7)
        assert fits.median_abs_residual[i] == pytest.approx(mar, rel=1e-8, abs=1e-10)


def test_leave_one_out_fit_with_a_high_leverage_point():
    # One specimen far out in x moves the line of the others a lot: the exact
    # residual median must still match a direct fit.
    x = np.r_[np.full(30, 0.10) + np.linspace(0, 0.002, 30), 0.125]
    y = np.r_[32.0 + np.sin(np.arange(30)) * 0.2, 30.0]
    u = np.full(31, 0.1)
    fits = leave_one_out_linear_fits(x, y, u)
    for i in (0, 15, 30):
        coef, p, mar = _polyfit_without(x, y, u, i)
        assert fits.median_abs_residual[i] == pytest.approx(mar, rel=1e-8)
        assert fits.prediction_uncertainty[i] == pytest.approx(p, rel=1e-6)


def test_grouped_leave_one_out_fits_both_paths_agree_with_numpy_polyfit():
    rng = np.random.default_rng(21)
    codes = np.repeat([0, 1, 2], [4, 70, 6])
    x = rng.uniform(0.07, 0.13, codes.size)
    u = rng.uniform(0.05, 0.5, codes.size)
    y = 35.0 - 30.0 * x + rng.normal(0, 0.3, codes.size)
    x[codes == 2] = 0.1                              # one x only: no trend in group 2
    fits = grouped_leave_one_out_linear_fits(x, y, u, codes, pair_limit=10)
    assert np.all(np.isnan(fits.prediction[codes == 2]))
    assert list(fits.m[codes == 0]) == [3, 3, 3, 3]
    for g in (0, 1):
        members = np.flatnonzero(codes == g)
        for k, i in enumerate(members):
            coef, p, mar = _polyfit_without(x[members], y[members], u[members], k)
            assert fits.prediction[i] == pytest.approx(np.polyval(coef, x[i]), rel=1e-10)
            assert fits.prediction_uncertainty[i] == pytest.approx(p, rel=1e-7)
            assert fits.median_abs_residual[i] == pytest.approx(mar, rel=1e-8, abs=1e-10)

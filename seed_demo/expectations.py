"""What the shift queries must find in the demo: predicted from the planted values.

The queries (``magvault shifts --against ...``) compare each specimen's primary
low-temperature transition estimates with a reference.  This module applies the
same formulas to the *planted* temperatures, with an assumed single-run standard
uncertainty, so that the manifest can say which specimens a query must flag and
which it must not.  Formulas (sigma = shift / combined uncertainty):

* per-specimen estimate: weighted mean of its runs (heating branch), Birge-inflated
  (Birge, 1932): u = sqrt(1/sum w) * max(1, sqrt(chi2/(n-1))).
* ``collection``: reference = median of the other m estimates, s = 1.4826 MAD of
  them; combined u = sqrt(max(s, u_i)^2 + (1.2533 s / sqrt(m))^2).  1.4826 makes
  the MAD a consistent estimator of a normal standard deviation (Rousseeuw &
  Croux, 1993); 1.2533 = sqrt(pi/2) is the large-sample standard error of a
  median in units of sigma/sqrt(m) (a classical result, common practice).
* ``trend``: weighted (1/u_j^2) straight line T(x) over the others; combined
  u = sqrt(max(s_r, u_i)^2 + p_i^2), s_r = 1.4826 median |residual| of the
  others, p_i the standard error of the line at x_i.
* ``earliest``: runs after the earliest run (their Birge-inflated weighted mean)
  against the earliest run; root-sum-square of the two uncertainties.
* ``treatment``: runs after the latest treatment against runs before it.

References
----------
.. [1] Birge, R. T. (1932). The calculation of errors by the method of least squares.
   Phys. Rev. 40, 207-227.
.. [2] Rousseeuw, P. J., & Croux, C. (1993). Alternatives to the median absolute
   deviation. J. Am. Stat. Assoc. 88, 1273-1283.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MODES = ("earliest", "treatment", "collection", "trend")

# How p_i of the trend mode is computed.  The manifest uses the weighted fit's own
# covariance (X^T W X)^-1 with W = 1/u_j^2 ("unscaled"): the scatter of the others
# enters through s_r already.  Scaling the covariance by the reduced chi-square (as
# numpy.polyfit(..., cov=True) does) lets one outlier among the others (the piece
# from another origin) inflate every p_i tenfold; the manifest reports the sigmas
# under that convention too ("expected_if_p_scaled"), for information only.
TREND_CONVENTION = "unscaled"
TREND_CONVENTIONS = ("unscaled", "scaled", "scaled-if-larger")


@dataclass(frozen=True)
class LowTRun:
    """One run that shows the low-temperature transition on warming (planted)."""

    specimen: str
    started: str          # ISO 8601 UTC, same format for all, so strings sort in time
    temperature_K: float  # planted primary (component 1) transition temperature


@dataclass(frozen=True)
class Expectation:
    shift_K: float
    combined_uncertainty_K: float

    @property
    def sigma(self) -> float:
        return self.shift_K / self.combined_uncertainty_K


def weighted_mean(values: np.ndarray, uncertainties: np.ndarray) -> tuple[float, float]:
    """Weighted mean and its Birge-inflated standard uncertainty.

    Parameters
    ----------
    values : array_like
        Temperatures, K.
    uncertainties : array_like
        Their standard uncertainties, K (> 0).

    Returns
    -------
    (mean, uncertainty) : tuple of float
        ``uncertainty = sqrt(1/sum w) * max(1, sqrt(chi2 / (n - 1)))`` with w = 1/u^2.

    References
    ----------
    .. [1] Birge, R. T. (1932). Phys. Rev. 40, 207-227.
    """
    v = np.asarray(values, dtype=float)
    u = np.asarray(uncertainties, dtype=float)
    w = 1.0 / (u * u)
    mean = float(np.sum(w * v) / np.sum(w))
    internal = float(np.sqrt(1.0 / np.sum(w)))
    if v.size < 2:
        return mean, internal
    chi2 = float(np.sum(w * (v - mean) ** 2))
    return mean, internal * max(1.0, float(np.sqrt(chi2 / (v.size - 1))))


def _by_specimen(runs: list[LowTRun]) -> dict[str, list[LowTRun]]:
    out: dict[str, list[LowTRun]] = {}
    for r in sorted(runs, key=lambda r: (r.specimen, r.started)):
        out.setdefault(r.specimen, []).append(r)
    return out


def _estimate(runs: list[LowTRun], u_run: float) -> tuple[float, float]:
    values = np.array([r.temperature_K for r in runs])
    return weighted_mean(values, np.full(values.size, u_run))


def specimen_estimates(runs: list[LowTRun], u_run: float) -> dict[str, tuple[float, float]]:
    """Per-specimen (estimate, uncertainty) in K from all its runs."""
    return {code: _estimate(rs, u_run) for code, rs in _by_specimen(runs).items()}


def collection_mode(estimates: dict[str, tuple[float, float]]) -> dict[str, Expectation]:
    out = {}
    for code, (value, u_i) in estimates.items():
        others = np.array([v for c, (v, _) in estimates.items() if c != code])
        m = others.size
        if m < 2:
            continue
        median = float(np.median(others))
        s = 1.4826 * float(np.median(np.abs(others - median)))
        combined = float(np.hypot(max(s, u_i), 1.2533 * s / np.sqrt(m)))
        out[code] = Expectation(value - median, combined)
    return out


def trend_mode(estimates: dict[str, tuple[float, float]], x: dict[str, float], *,
               convention: str = TREND_CONVENTION) -> dict[str, Expectation]:
    if convention not in TREND_CONVENTIONS:
        raise ValueError(f"convention must be one of {TREND_CONVENTIONS}, got {convention!r}")
    out = {}
    for code, (value, u_i) in estimates.items():
        others = [c for c in estimates if c != code]
        if len(others) < 3:
            continue
        xs = np.array([x[c] for c in others])
        ts = np.array([estimates[c][0] for c in others])
        w = np.array([1.0 / estimates[c][1] ** 2 for c in others])
        design = np.column_stack([np.ones_like(xs), xs])
        cov = np.linalg.inv(design.T @ (design * w[:, None]))
        coef = cov @ (design.T @ (w * ts))
        residuals = ts - design @ coef
        reduced_chi2 = float(np.sum(w * residuals ** 2) / (len(others) - 2))
        if convention == "scaled":
            cov = cov * reduced_chi2
        elif convention == "scaled-if-larger":
            cov = cov * max(1.0, reduced_chi2)
        at = np.array([1.0, x[code]])
        prediction = float(at @ coef)
        p_i = float(np.sqrt(at @ cov @ at))
        s_r = 1.4826 * float(np.median(np.abs(residuals)))
        out[code] = Expectation(value - prediction, float(np.hypot(max(s_r, u_i), p_i)))
    return out


def earliest_mode(runs: list[LowTRun], u_run: float) -> dict[str, Expectation]:
    out = {}
    for code, rs in _by_specimen(runs).items():
        if len(rs) < 2:
            continue
        first = rs[0].temperature_K
        later, u_later = _estimate(rs[1:], u_run)
        out[code] = Expectation(later - first, float(np.hypot(u_run, u_later)))
    return out


def treatment_mode(runs: list[LowTRun], treated_at: dict[str, list[str]],
                   u_run: float) -> dict[str, Expectation]:
    out = {}
    for code, rs in _by_specimen(runs).items():
        if code not in treated_at:
            continue
        latest = max(treated_at[code])
        before = [r for r in rs if r.started < latest]
        after = [r for r in rs if r.started > latest]
        if not before or not after:
            continue
        t_b, u_b = _estimate(before, u_run)
        t_a, u_a = _estimate(after, u_run)
        out[code] = Expectation(t_a - t_b, float(np.hypot(u_a, u_b)))
    return out


def expected_shifts(runs: list[LowTRun], x: dict[str, float], treated_at: dict[str, list[str]],
                    *, u_run: float, convention: str = TREND_CONVENTION) -> dict[str, dict[str, Expectation]]:
    """Expected shift and combined uncertainty per mode and specimen.

    Parameters
    ----------
    runs : list of LowTRun
        Every planted low-temperature transition seen on warming.
    x : dict
        Planted x in Fe(1-x)S per specimen.
    treated_at : dict
        ISO times of each treated specimen's treatments.
    u_run : float
        Assumed single-run standard uncertainty, K.
    convention : str
        How p_i of the trend mode is computed (see ``TREND_CONVENTIONS``).
    """
    estimates = specimen_estimates(runs, u_run)
    return {
        "earliest": earliest_mode(runs, u_run),
        "treatment": treatment_mode(runs, treated_at, u_run),
        "collection": collection_mode(estimates),
        "trend": trend_mode(estimates, x, convention=convention),
    }


def expected_flags(runs: list[LowTRun], x: dict[str, float], treated_at: dict[str, list[str]],
                   *, u_values: tuple[float, ...] = (0.1, 0.2, 0.3), must_sigma: float = 5.0,
                   must_not_sigma: float = 2.0) -> dict[str, dict[str, list[str]]]:
    """Specimens a query must flag (|sigma| >= must_sigma) and must not (|sigma| <= must_not_sigma).

    A specimen is listed only when the condition holds for every assumed single-run
    uncertainty in ``u_values``, so that the lists do not hang on what exactly the
    analysis reports; the rest are left out of both lists.
    """
    sigmas: dict[str, dict[str, list[float]]] = {m: {} for m in MODES}
    for u in u_values:
        result = expected_shifts(runs, x, treated_at, u_run=u)
        for mode in MODES:
            for code, e in result[mode].items():
                sigmas[mode].setdefault(code, []).append(abs(e.sigma))
    flags = {}
    for mode in MODES:
        per = sigmas[mode]
        flags[mode] = {
            "must": sorted(c for c, s in per.items() if min(s) >= must_sigma),
            "must_not": sorted(c for c, s in per.items() if max(s) <= must_not_sigma),
        }
    return flags

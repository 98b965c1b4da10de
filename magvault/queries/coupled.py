"""Coupled transitions: do two transitions of one specimen coincide?

A and B may be two transition kinds, one kind seen by two run kinds (a
magnetisation curve and a resonance track), or one kind by two methods.  Each
side is first reduced to a per-specimen estimate (Birge-inflated weighted
mean), then the two are paired by specimen.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from magvault.errors import InvalidValue
from magvault.queries.shifts import specimen_estimates
from magvault.queries.stats import two_sided_p

COUPLED_COLUMNS = ("specimen", "a_K", "a_uncertainty_K", "b_K", "b_uncertainty_K",
                   "difference_K", "difference_uncertainty_K", "sigma", "coincide", "note")


def coupled(rows_a: pd.DataFrame, rows_b: pd.DataFrame, *, sigma: float = 3.0) -> pd.DataFrame:
    """Per-specimen difference B - A of two transitions and whether they coincide.

    Parameters
    ----------
    rows_a, rows_b : DataFrame
        ``specimen``, ``temperature_K`` (K), ``uncertainty_K`` (K, may be
        missing: such rows are left out, never taken as zero), optional ``run``.
    sigma : float
        Threshold N: the two coincide when |B - A| / u_c < N.

    Returns
    -------
    DataFrame
        ``COUPLED_COLUMNS`` then ``a_n_runs``, ``b_n_runs``, ``p_value``; one
        row per specimen present on either side, sorted by specimen.  With
        u_c = sqrt(u_A^2 + u_B^2) (the two estimates taken as independent: if
        both come from the same curve their errors may correlate, which this
        does not model).  A specimen missing on one side, or without an
        uncertainty, gets NaN fields (None through ``to_records``) and a note.

    References
    ----------
    Birge, R. T. (1932). Phys. Rev. 40, 207-227 (per-specimen estimates);
    JCGM 100:2008 (GUM), section 5.1, combined standard uncertainty of a
    difference of uncorrelated quantities.
    """
    if not (isinstance(sigma, (int, float)) and math.isfinite(sigma) and sigma > 0):
        raise InvalidValue(f"sigma: expected a positive number, got {sigma!r}", field="sigma")
    a = specimen_estimates(rows_a).set_index("specimen")
    b = specimen_estimates(rows_b).set_index("specimen")
    specimens = sorted(set(a.index) | set(b.index), key=lambda s: (str(type(s)), s))
    a = a.reindex(specimens)
    b = b.reindex(specimens)
    ta, ua = a["temperature_K"].to_numpy(float), a["uncertainty_K"].to_numpy(float)
    tb, ub = b["temperature_K"].to_numpy(float), b["uncertainty_K"].to_numpy(float)
    n = len(specimens)
    difference = np.full(n, np.nan)
    both = np.isfinite(ta) & np.isfinite(tb)
    difference[both] = tb[both] - ta[both]
    combined = np.full(n, np.nan)
    testable = both & np.isfinite(ua) & np.isfinite(ub)
    combined[testable] = np.hypot(ua[testable], ub[testable])
    z = np.full(n, np.nan)
    z[testable] = difference[testable] / combined[testable]
    coincide = pd.array(np.abs(np.where(testable, z, 0.0)) < sigma, dtype="boolean")
    coincide[~testable] = pd.NA
    p = np.full(n, np.nan)
    p[testable] = two_sided_p(z[testable])

    notes = []
    for k in range(n):
        parts = []
        for side, frame, present in (("A", a, np.isfinite(ta[k])), ("B", b, np.isfinite(tb[k]))):
            if not present:
                parts.append(f"no {side} transition for this specimen")
            elif isinstance(frame["note"].iloc[k], str):
                parts.append(f"{side}: {frame['note'].iloc[k]}")
        notes.append("; ".join(parts) if parts else None)

    def runs(frame):
        return frame["n_runs"].fillna(0).to_numpy().astype(np.int64)

    return pd.DataFrame({
        "specimen": pd.Series(specimens, dtype=object),
        "a_K": ta, "a_uncertainty_K": ua, "b_K": tb, "b_uncertainty_K": ub,
        "difference_K": difference, "difference_uncertainty_K": combined, "sigma": z,
        "coincide": coincide, "note": pd.Series(notes, dtype=object),
        "a_n_runs": runs(a), "b_n_runs": runs(b), "p_value": p,
    })

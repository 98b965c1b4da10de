"""Tests of magvault.queries.coupled on small invented tables.

Outside references:
- Birge, R. T. (1932), Phys. Rev. 40, 207: per-specimen weighted mean, inflated when R_B > 1.
- JCGM 100:2008 (GUM), 5.1: u_c of a difference of uncorrelated quantities is the root
  sum of squares; checked against the uncertainties package.
- scipy.stats.norm for the two-sided p-value.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats
from uncertainties import ufloat

from magvault.errors import InvalidValue
from magvault.queries.coupled import COUPLED_COLUMNS, coupled
from magvault.queries.shifts import to_records


def rows(*items):
    return pd.DataFrame(items, columns=["specimen", "run", "temperature_K", "uncertainty_K"])


# A: the low-temperature transition seen on magnetisation curves; B: the same seen
# on resonance tracks (invented values near 30-34 K, common practice, no single source).
A = rows(("SPEC-1", 1, 32.0, 0.1), ("SPEC-1", 2, 32.2, 0.1),
         ("SPEC-2", 3, 32.0, 0.3), ("SPEC-3", 4, 31.5, 0.2),
         ("SPEC-4", 5, 32.0, None))
B = rows(("SPEC-1", 11, 34.0, 0.2), ("SPEC-2", 12, 32.5, 0.4),
         ("SPEC-4", 13, 32.1, 0.1), ("SPEC-5", 14, 33.0, 0.1))


def test_coupled_worked_by_hand():
    out = coupled(A, B).set_index("specimen")
    s1 = out.loc["SPEC-1"]
    # A for SPEC-1: 32.0 and 32.2 (+/- 0.1) -> mean 32.1, internal u = 1/sqrt(200) = 0.0707107
    #   chi2 = 100 (0.01 + 0.01) = 2, R_B = sqrt(2) > 1 -> u = 0.1 (Birge 1932)
    # B: 34.0 +/- 0.2. difference 1.9; u_c = sqrt(0.1^2 + 0.2^2) = 0.223606798
    # sigma = 1.9/0.223606798 = 8.49705831 -> they do not coincide
    assert s1["a_K"] == pytest.approx(32.1) and s1["a_uncertainty_K"] == pytest.approx(0.1)
    assert s1["difference_K"] == pytest.approx(1.9)
    assert s1["difference_uncertainty_K"] == pytest.approx(0.223606798)
    assert s1["sigma"] == pytest.approx(8.49705831)
    assert bool(s1["coincide"]) is False
    s2 = out.loc["SPEC-2"]
    # SPEC-2: 32.5 - 32.0 = 0.5; u_c = sqrt(0.09 + 0.16) = 0.5; sigma = 1 -> coincide
    assert s2["sigma"] == pytest.approx(1.0) and bool(s2["coincide"]) is True
    assert s2["p_value"] == pytest.approx(2 * scipy.stats.norm.sf(1.0), rel=1e-9)


def test_combined_uncertainty_agrees_with_the_uncertainties_package():
    out = coupled(A, B).set_index("specimen")
    for specimen in ("SPEC-1", "SPEC-2"):
        row = out.loc[specimen]
        difference = ufloat(row["b_K"], row["b_uncertainty_K"]) - ufloat(row["a_K"],
                                                                        row["a_uncertainty_K"])
        assert row["difference_K"] == pytest.approx(difference.nominal_value, rel=1e-12)
        assert row["difference_uncertainty_K"] == pytest.approx(difference.std_dev, rel=1e-12)


def test_unpaired_or_uncertain_specimens_get_notes_and_no_significance():
    out = coupled(A, B)
    assert list(out.columns[:len(COUPLED_COLUMNS)]) == list(COUPLED_COLUMNS)
    table = out.set_index("specimen")
    assert "no B transition" in table.loc["SPEC-3", "note"]
    assert "no A transition" in table.loc["SPEC-5", "note"]
    s4 = table.loc["SPEC-4"]
    # A has no uncertainty for SPEC-4: the difference is shown, but nothing is tested
    assert s4["difference_K"] == pytest.approx(0.1)
    assert np.isnan(s4["sigma"]) and pd.isna(s4["coincide"])
    assert s4["note"].startswith("A: ")
    json.dumps(to_records(out), allow_nan=False)


def test_threshold_and_bad_sigma():
    # SPEC-2 has sigma = 1: coincides at N = 3, not at N = 0.9
    strict = coupled(A, B, sigma=0.9).set_index("specimen")
    assert bool(strict.loc["SPEC-2", "coincide"]) is False
    with pytest.raises(InvalidValue):
        coupled(A, B, sigma=-1)
    assert math.isfinite(coupled(A, B).set_index("specimen").loc["SPEC-1", "sigma"])

"""Tests of magvault.queries.shifts: every reference mode on small invented tables.

Each expected number is worked out by hand in the comments from the formulas of
the shifts issue (item 2), with these outside sources:
- Birge, R. T. (1932), Phys. Rev. 40, 207: weighted mean inflated by R_B = sqrt(chi2/(n-1)) > 1.
- Rousseeuw & Croux (1993), J. Am. Stat. Assoc. 88, 1273: s = 1.4826 x MAD.
- Standard error of a median, 1.2533 s / sqrt(m) (sqrt(pi/2); common practice, no single source).
- Bevington & Robinson (2003), ch. 6: weighted line, C = inverse weighted normal matrix
  (citation from memory; checked against numpy.polyfit below).
- scipy.stats.norm for p = 2 (1 - Phi(|sigma|)); numpy.median and numpy.polyfit for
  brute-force recomputation on larger invented collections.
The low-temperature transition of 4C pyrrhotite lies near 30-34 K (common practice,
no single source); the tables use values in that range, all invented.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats

from magvault.errors import InvalidValue, NotFound
from magvault.queries.shifts import (
    SHIFT_COLUMNS,
    field_bin_label,
    shifts,
    specimen_estimates,
    to_records,
)

DAY = pd.Timestamp("2024-03-01T09:00:00Z")


def table(*runs):
    """rows from (specimen, run, day, temperature_K, uncertainty_K)."""
    return pd.DataFrame({
        "specimen": [r[0] for r in runs],
        "run": [r[1] for r in runs],
        "started": [DAY + pd.Timedelta(days=r[2]) for r in runs],
        "temperature_K": [r[3] for r in runs],
        "uncertainty_K": [r[4] for r in runs],
    })


def one(frame, specimen, group=None):
    hit = frame[frame["specimen"] == specimen]
    if group is not None:
        hit = hit[hit["group"] == group]
    assert len(hit) == 1
    return hit.iloc[0]


def assert_json_clean(frame):
    text = json.dumps(to_records(frame), allow_nan=False)  # raises on NaN
    assert "NaN" not in text


# --- per-specimen estimates ----------------------------------------------------

def test_specimen_estimates_birge_and_single_run():
    rows = table(("SPEC-A", 1, 0, 32.3, 0.1), ("SPEC-A", 2, 1, 32.5, 0.1),
                 ("SPEC-B", 3, 0, 31.9, 0.2))
    est = specimen_estimates(rows)
    a, b = one(est, "SPEC-A"), one(est, "SPEC-B")
    # SPEC-A: w = 100, 100 -> mean 32.4; internal u = 1/sqrt(200) = 0.0707107
    # chi2 = 100 (0.1^2 + 0.1^2) = 2; R_B = sqrt(2/1) = 1.41421 > 1 -> u = 0.1
    assert a["temperature_K"] == pytest.approx(32.4)
    assert a["birge_ratio"] == pytest.approx(math.sqrt(2))
    assert a["uncertainty_K"] == pytest.approx(0.1)
    assert a["n_runs"] == 2
    # SPEC-B: one run keeps its value and uncertainty
    assert (b["temperature_K"], b["uncertainty_K"], b["n_runs"]) == (31.9, 0.2, 1)
    assert np.isnan(b["birge_ratio"])
    assert list(est.columns) == ["specimen", "temperature_K", "uncertainty_K", "n_runs",
                                 "birge_ratio", "note"]


def test_missing_uncertainty_is_left_out_with_a_note_never_taken_as_zero():
    rows = table(("SPEC-A", 1, 0, 32.0, 0.1), ("SPEC-A", 2, 1, 35.0, None),
                 ("SPEC-B", 3, 0, 33.0, np.nan))
    est = specimen_estimates(rows)
    a, b = one(est, "SPEC-A"), one(est, "SPEC-B")
    # run 2 has no uncertainty: left out, so SPEC-A is run 1 alone
    assert (a["temperature_K"], a["uncertainty_K"], a["n_runs"]) == (32.0, 0.1, 1)
    assert "run 2" in a["note"] and "without a standard uncertainty" in a["note"]
    # SPEC-B has none at all: plain value, no uncertainty, and a note
    assert b["temperature_K"] == 33.0 and np.isnan(b["uncertainty_K"])
    assert "no significance" in b["note"]


def test_repeated_run_is_refused_naming_the_run():
    rows = table(("SPEC-A", 7, 0, 32.0, 0.1), ("SPEC-A", 7, 0, 32.1, 0.1))
    with pytest.raises(InvalidValue, match="run 7"):
        specimen_estimates(rows)


# --- fixed reference -------------------------------------------------------------

def test_fixed_reference_uses_the_specimens_own_uncertainty():
    rows = table(("SPEC-A", 1, 0, 32.3, 0.1), ("SPEC-A", 2, 1, 32.5, 0.1),
                 ("SPEC-B", 3, 0, 33.5, 0.5), ("SPEC-C", 4, 0, 32.1, 0.2))
    out = shifts(rows, None, mode="reference", reference_K=32.0)
    a, b, c = (one(out, s) for s in ("SPEC-A", "SPEC-B", "SPEC-C"))
    # SPEC-A: 32.4 +/- 0.1 (see above); shift 0.4; sigma = 0.4/0.1 = 4.0 -> flagged
    assert a["shift_K"] == pytest.approx(0.4)
    assert a["shift_uncertainty_K"] == pytest.approx(0.1)
    assert a["sigma"] == pytest.approx(4.0)
    assert bool(a["flagged"]) is True
    # SPEC-B: 1.5 / 0.5 = 3.0 exactly -> flagged, since flagged is |sigma| >= N
    assert b["sigma"] == 3.0 and bool(b["flagged"]) is True
    # SPEC-C: 0.1 / 0.2 = 0.5 -> not flagged; p = 2 * norm.sf(0.5)
    assert bool(c["flagged"]) is False
    assert c["p_value"] == pytest.approx(2 * scipy.stats.norm.sf(0.5), rel=1e-9)
    assert list(out.columns[:len(SHIFT_COLUMNS)]) == list(SHIFT_COLUMNS)
    assert_json_clean(out)


def test_flag_threshold_is_a_parameter():
    rows = table(("SPEC-A", 1, 0, 33.0, 0.5))
    # shift 1.0, sigma 2.0: flagged at N = 2, not at N = 3
    assert bool(shifts(rows, None, mode="reference", reference_K=32.0, sigma=2.0)
                .loc[0, "flagged"]) is True
    assert bool(shifts(rows, None, mode="reference", reference_K=32.0).loc[0, "flagged"]) is False


# --- collection ---------------------------------------------------------------------

FIVE = table(("SPEC-A", 1, 0, 32.0, 0.1), ("SPEC-B", 2, 0, 32.4, 0.1),
             ("SPEC-C", 3, 0, 31.8, 0.5), ("SPEC-D", 4, 0, 32.2, 0.1),
             ("SPEC-E", 5, 0, 34.0, 0.1))


def test_collection_reference_worked_by_hand():
    out = shifts(FIVE, None, mode="collection")
    e, a, c = one(out, "SPEC-E"), one(out, "SPEC-A"), one(out, "SPEC-C")
    # SPEC-E: others 31.8, 32.0, 32.2, 32.4 -> median 32.1, m = 4
    #   |dev| 0.3, 0.1, 0.1, 0.3 -> MAD 0.2 -> s = 1.4826 * 0.2 = 0.29652
    #   reference term 1.2533 * 0.29652 / sqrt(4) = 0.185814258
    #   combined = sqrt(max(0.29652, 0.1)^2 + 0.185814258^2) = 0.349930063
    #   shift = 34.0 - 32.1 = 1.9; sigma = 1.9 / 0.349930063 = 5.42965639
    assert e["reference_K"] == pytest.approx(32.1)
    assert e["m"] == 4
    assert e["reference_scatter_K"] == pytest.approx(0.29652)
    assert e["reference_uncertainty_K"] == pytest.approx(0.185814258)
    assert e["shift_uncertainty_K"] == pytest.approx(0.349930063)
    assert e["sigma"] == pytest.approx(5.42965639)
    assert bool(e["flagged"]) is True
    # SPEC-A: others 31.8, 32.2, 32.4, 34.0 -> median 32.3
    #   |dev| 0.5, 0.1, 0.1, 1.7 -> MAD 0.3 -> s = 0.44478; term 1.2533*0.44478/2 = 0.278721387
    #   combined = sqrt(0.44478^2 + 0.278721387^2) = 0.524895094; sigma = -0.3/0.5249 = -0.571542777
    assert a["reference_K"] == pytest.approx(32.3)
    assert a["shift_uncertainty_K"] == pytest.approx(0.524895094)
    assert a["sigma"] == pytest.approx(-0.571542777)
    # SPEC-C is noisier than the population: others 32.0, 32.2, 32.4, 34.0 -> median 32.3,
    #   MAD 0.2 -> s = 0.29652 < u = 0.5, so max(s, u) = 0.5
    #   combined = sqrt(0.5^2 + 0.185814258^2) = 0.533410666; sigma = -0.5/0.5334 = -0.937364084
    assert c["shift_uncertainty_K"] == pytest.approx(0.533410666)
    assert c["sigma"] == pytest.approx(-0.937364084)
    assert bool(c["flagged"]) is False


def test_collection_with_others_in_exact_agreement_uses_own_uncertainty():
    rows = table(("SPEC-A", 1, 0, 32.0, 0.1), ("SPEC-B", 2, 0, 32.0, 0.1),
                 ("SPEC-C", 3, 0, 32.0, 0.1), ("SPEC-D", 4, 0, 32.0, 0.1),
                 ("SPEC-E", 5, 0, 32.5, 0.1))
    out = shifts(rows, None, mode="collection")
    e = one(out, "SPEC-E")
    # others all 32.0 -> MAD 0 -> s = 0; combined = sqrt(max(0, 0.1)^2 + 0^2) = 0.1
    # sigma = 0.5 / 0.1 = 5
    assert e["reference_scatter_K"] == 0.0
    assert e["shift_uncertainty_K"] == pytest.approx(0.1)
    assert e["sigma"] == pytest.approx(5.0)
    assert "MAD = 0" in e["note"]


def test_collection_needs_enough_other_specimens():
    rows = FIVE[FIVE["specimen"].isin(["SPEC-A", "SPEC-B", "SPEC-D"])]
    out = shifts(rows, None, mode="collection")
    assert out["reference_K"].isna().all() and out["sigma"].isna().all()
    assert out["flagged"].isna().all()
    assert all("fewer than 3 other specimens" in n and "(m = 2)" in n for n in out["note"])
    # with min_others=2 the two others suffice: SPEC-A against 32.2, 32.4 -> median 32.3
    relaxed = shifts(rows, None, mode="collection", min_others=2)
    assert one(relaxed, "SPEC-A")["reference_K"] == pytest.approx(32.3)
    assert_json_clean(out)


def test_specimen_without_uncertainty_takes_no_part_in_the_reference():
    wild = table(("SPEC-X", 9, 0, 45.0, None))
    out = shifts(pd.concat([FIVE, wild]), None, mode="collection")
    # SPEC-E's reference is unchanged by SPEC-X's value (see the worked example)
    assert one(out, "SPEC-E")["reference_K"] == pytest.approx(32.1)
    x = one(out, "SPEC-X")
    # SPEC-X is set against all five: median 32.2; no significance without an uncertainty
    assert x["reference_K"] == pytest.approx(32.2)
    assert x["shift_K"] == pytest.approx(12.8)
    assert np.isnan(x["sigma"]) and pd.isna(x["flagged"])
    assert "no significance" in x["note"]
    assert_json_clean(out)


@pytest.mark.parametrize("seed", range(3))
def test_collection_against_numpy_median_on_an_invented_collection(seed):
    # 90 specimens, two groups (one beyond the small-group path), several runs each.
    rng = np.random.default_rng(seed)
    codes = [f"SPEC-{k:03d}" for k in range(90)]
    groups = pd.DataFrame({"specimen": codes, "group": ["4C"] * 70 + ["NC"] * 20})
    runs = []
    for k, code in enumerate(codes):
        for j in range(int(rng.integers(1, 4))):
            runs.append((code, 10 * k + j, j, 32.0 + rng.normal(0, 0.4), rng.uniform(0.05, 0.5)))
    rows = table(*runs)
    out = shifts(rows, groups, mode="collection", by="superstructure")
    est = specimen_estimates(rows).merge(groups)
    for _, row in out.iterrows():
        same = est[(est["group"] == row["group"]) & (est["specimen"] != row["specimen"])]
        t = same["temperature_K"].to_numpy()
        median = np.median(t)
        s = 1.4826 * np.median(np.abs(t - median))
        own = one(est, row["specimen"])["uncertainty_K"]
        combined = math.sqrt(max(s, own) ** 2 + (1.2533 * s / math.sqrt(t.size)) ** 2)
        assert row["reference_K"] == pytest.approx(median, abs=1e-12)
        assert row["shift_uncertainty_K"] == pytest.approx(combined, rel=1e-12)


# --- grouping ----------------------------------------------------------------------

def test_collection_grouped_by_a_specimen_property():
    specimens = pd.DataFrame({"specimen": ["SPEC-A", "SPEC-B", "SPEC-C", "SPEC-D", "SPEC-E",
                                           "SPEC-F", "SPEC-G", "SPEC-H"],
                              "group": ["4C", "4C", "4C", "4C", "NC", "NC", "NC", None]})
    rows = pd.concat([FIVE, table(("SPEC-F", 6, 0, 30.0, 0.1), ("SPEC-G", 7, 0, 30.4, 0.1),
                                  ("SPEC-H", 8, 0, 31.0, 0.1))])
    out = shifts(rows, specimens, mode="collection", by="superstructure", min_others=2)
    assert list(out.columns[:3]) == ["specimen", "group", "temperature_K"]
    # 4C: SPEC-A against B, C, D = 32.4, 31.8, 32.2 -> median 32.2
    assert one(out, "SPEC-A")["reference_K"] == pytest.approx(32.2)
    # NC: SPEC-E against F, G = 30.0, 30.4 -> median 30.2
    assert one(out, "SPEC-E")["reference_K"] == pytest.approx(30.2)
    h = one(out, "SPEC-H")
    assert h["group"] == "no superstructure" and "(m = 0)" in h["note"]


def test_grouping_by_field_bins_each_run():
    # the same specimens measured in zero field and near 1 T form separate groups
    rows = table(("SPEC-A", 1, 0, 32.0, 0.1), ("SPEC-B", 2, 0, 32.2, 0.1),
                 ("SPEC-C", 3, 0, 32.4, 0.1), ("SPEC-A", 4, 1, 33.0, 0.1),
                 ("SPEC-B", 5, 1, 33.2, 0.1), ("SPEC-C", 6, 1, 33.6, 0.1))
    rows["field_T"] = [0.0, 0.0, 0.0, 1.5, 1.5, 1.5]
    out = shifts(rows, None, mode="collection", by="field", min_others=2)
    assert sorted(set(out["group"])) == ["1e0..1e1 T", "zero field"]
    # zero field: SPEC-A against 32.2, 32.4 -> 32.3; near 1 T: SPEC-A against 33.2, 33.6 -> 33.4
    assert one(out, "SPEC-A", "zero field")["reference_K"] == pytest.approx(32.3)
    assert one(out, "SPEC-A", "1e0..1e1 T")["reference_K"] == pytest.approx(33.4)


def test_direction_groups_and_missing_orientation():
    rows = table(("SPEC-A", 1, 0, 32.0, 0.1), ("SPEC-B", 2, 0, 32.2, 0.1))
    rows["group"] = ["c*", None]
    out = shifts(rows, None, mode="reference", reference_K=32.0, by="direction")
    assert one(out, "SPEC-B")["group"] == "no orientation"


def test_grouping_needs_a_group_column():
    with pytest.raises(InvalidValue, match="group"):
        shifts(FIVE, pd.DataFrame({"specimen": ["SPEC-A"]}), mode="collection", by="origin")


# --- trend ---------------------------------------------------------------------------

TREND_SPECIMENS = pd.DataFrame({"specimen": ["SPEC-A", "SPEC-B", "SPEC-C", "SPEC-D", "SPEC-E",
                                             "SPEC-F"],
                                "x": [0.08, 0.09, 0.10, 0.11, 0.12, np.nan]})
TREND_ROWS = table(("SPEC-A", 1, 0, 33.0, 0.1), ("SPEC-B", 2, 0, 32.6, 0.1),
                   ("SPEC-C", 3, 0, 32.4, 0.1), ("SPEC-D", 4, 0, 31.8, 0.1),
                   ("SPEC-E", 5, 0, 34.0, 0.1), ("SPEC-F", 6, 0, 32.0, 0.1))


def test_trend_reference_worked_by_hand():
    out = shifts(TREND_ROWS, TREND_SPECIMENS, mode="trend")
    e = one(out, "SPEC-E")
    # SPEC-E (x = 0.12) against A-D; equal weights w = 1/0.1^2 = 100
    # x mean 0.095, T mean 32.45; dx = -0.015 -0.005 0.005 0.015; dT = 0.55 0.15 -0.05 -0.65
    # Sxy = -0.00825 - 0.00075 - 0.00025 - 0.00975 = -0.019; Sxx = 0.0005
    # slope = -0.019/0.0005 = -38; intercept = 32.45 + 38*0.095 = 36.06
    # line at 0.12: 36.06 - 4.56 = 31.5 -> shift = 34.0 - 31.5 = 2.5
    # others' residuals: 33.0-33.02, 32.6-32.64, 32.4-32.26, 31.8-31.88 = -0.02 -0.04 0.14 -0.08
    #   median |r| = (0.04 + 0.08)/2 = 0.06 -> s_r = 1.4826*0.06 = 0.088956 < u = 0.1
    # p^2 = 1/(sum w) + (x - x mean)^2 / (sum w dx^2) = 1/400 + 0.025^2/0.05 = 0.0025 + 0.0125
    # combined = sqrt(0.1^2 + 0.015) = sqrt(0.025) = 0.158113883; sigma = 15.8113883
    assert e["trend_slope_K"] == pytest.approx(-38.0)
    assert e["trend_intercept_K"] == pytest.approx(36.06)
    assert e["reference_K"] == pytest.approx(31.5)
    assert e["shift_K"] == pytest.approx(2.5)
    assert e["reference_scatter_K"] == pytest.approx(0.088956)
    assert e["reference_uncertainty_K"] == pytest.approx(math.sqrt(0.015))
    assert e["shift_uncertainty_K"] == pytest.approx(0.158113883)
    assert e["sigma"] == pytest.approx(15.8113883)
    assert e["x"] == 0.12 and e["m"] == 4
    f = one(out, "SPEC-F")
    assert f["note"] == "no composition x" and np.isnan(f["sigma"])
    assert_json_clean(out)


def test_trend_prediction_uncertainty_from_the_normal_matrix():
    # p_i = sqrt([1, x_i] C [1, x_i]^T), C = inverse of the weighted normal matrix
    # [[sum w, sum w x], [sum w x, sum w x^2]] of the others (Bevington & Robinson ch. 6),
    # here with unequal weights.
    rows = TREND_ROWS.copy()
    rows["uncertainty_K"] = [0.1, 0.3, 0.2, 0.05, 0.1, 0.1]
    out = shifts(rows, TREND_SPECIMENS, mode="trend")
    x = np.array([0.08, 0.09, 0.10, 0.11])
    w = 1 / np.array([0.1, 0.3, 0.2, 0.05]) ** 2
    normal = np.array([[w.sum(), (w * x).sum()], [(w * x).sum(), (w * x * x).sum()]])
    point = np.array([1.0, 0.12])
    p = math.sqrt(point @ np.linalg.inv(normal) @ point)
    coef = np.polyfit(x, [33.0, 32.6, 32.4, 31.8], 1, w=np.sqrt(w))
    e = one(out, "SPEC-E")
    assert e["reference_uncertainty_K"] == pytest.approx(p, rel=1e-9)
    assert e["reference_K"] == pytest.approx(np.polyval(coef, 0.12), rel=1e-12)


def test_trend_needs_three_others_with_distinct_x():
    few = shifts(TREND_ROWS[TREND_ROWS["specimen"].isin(["SPEC-A", "SPEC-B", "SPEC-C"])],
                 TREND_SPECIMENS, mode="trend")
    assert few["reference_K"].isna().all()
    assert all("fewer than 3 other specimens with x" in n for n in few["note"])
    flat = TREND_SPECIMENS.assign(x=[0.1, 0.1, 0.1, 0.1, 0.12, np.nan])
    out = shifts(TREND_ROWS, flat, mode="trend")
    assert "share one x value" in one(out, "SPEC-E")["note"]
    assert np.isnan(one(out, "SPEC-E")["reference_K"])
    # SPEC-A's others include SPEC-E at 0.12, so it has a trend
    assert np.isfinite(one(out, "SPEC-A")["reference_K"])


@pytest.mark.parametrize("seed", range(2))
def test_trend_against_numpy_polyfit_on_an_invented_collection(seed):
    rng = np.random.default_rng(seed)
    codes = [f"SPEC-{k:03d}" for k in range(40)]
    x = np.round(rng.uniform(0.07, 0.13, 40), 3)
    truth = 36.0 - 35.0 * x
    runs = [(c, k, 0, truth[k] + rng.normal(0, 0.3), rng.uniform(0.05, 0.4))
            for k, c in enumerate(codes)]
    rows = table(*runs)
    out = shifts(rows, pd.DataFrame({"specimen": codes, "x": x}), mode="trend")
    for k, code in enumerate(codes):
        keep = np.arange(40) != k
        u = rows["uncertainty_K"].to_numpy()
        t = rows["temperature_K"].to_numpy()
        coef, cov = np.polyfit(x[keep], t[keep], 1, w=1 / u[keep], cov="unscaled")
        s_r = 1.4826 * np.median(np.abs(t[keep] - np.polyval(coef, x[keep])))
        point = np.array([x[k], 1.0])
        combined = math.sqrt(max(s_r, u[k]) ** 2 + point @ cov @ point)
        row = one(out, code)
        assert row["reference_K"] == pytest.approx(np.polyval(coef, x[k]), rel=1e-10)
        assert row["shift_uncertainty_K"] == pytest.approx(combined, rel=1e-8)


# --- earliest, treatment, run ---------------------------------------------------------

def test_earliest_run_reference_worked_by_hand():
    rows = table(("SPEC-P", 13, 8, 32.7, 0.2), ("SPEC-P", 11, 0, 32.0, 0.1),
                 ("SPEC-P", 12, 4, 32.5, 0.1),
                 ("SPEC-Q", 20, 0, 31.0, 0.1),
                 ("SPEC-R", 31, 0, 30.0, 0.1), ("SPEC-R", 32, 1, 31.0, 0.1),
                 ("SPEC-R", 33, 2, 33.0, 0.1))
    out = shifts(rows, None, mode="earliest")
    p, q, r = (one(out, s) for s in ("SPEC-P", "SPEC-Q", "SPEC-R"))
    # SPEC-P: earliest is run 11 (32.0 +/- 0.1); compared runs 12 and 13:
    #   w = 100, 25; mean = (3250 + 817.5)/125 = 32.54; internal u = 1/sqrt(125) = 0.0894427
    #   chi2 = 100*0.04^2 + 25*0.16^2 = 0.8; R_B = 0.894 < 1 -> u = 0.0894427
    #   combined = sqrt(0.0894427^2 + 0.1^2) = sqrt(0.018) = 0.134164079
    #   shift = 0.54; sigma = 0.54/0.134164079 = 4.02492236
    assert p["reference_run"] == 11 and p["reference_K"] == 32.0
    assert p["temperature_K"] == pytest.approx(32.54)
    assert p["uncertainty_K"] == pytest.approx(0.0894427191)
    assert p["shift_uncertainty_K"] == pytest.approx(0.134164079)
    assert p["sigma"] == pytest.approx(4.02492236)
    assert p["n_runs"] == 2 and p["reference_n_runs"] == 1
    # SPEC-Q has one run: nothing to compare
    assert np.isnan(q["shift_K"]) and q["note"] == "no runs after the earliest"
    # SPEC-R: compared 31.0 and 33.0 (+/- 0.1): mean 32.0, internal u = 1/sqrt(200) = 0.0707107
    #   chi2 = 100 + 100 = 200; R_B = sqrt(200) = 14.1421 -> u = 1.0
    #   combined = sqrt(1 + 0.01) = 1.00498756; sigma = 2/1.00498756 = 1.99007438
    assert r["uncertainty_K"] == pytest.approx(1.0)
    assert r["sigma"] == pytest.approx(1.99007438)
    assert bool(r["flagged"]) is False
    assert_json_clean(out)


def test_earliest_tie_goes_to_the_lower_run_id():
    rows = table(("SPEC-P", 5, 0, 32.0, 0.1), ("SPEC-P", 4, 0, 32.2, 0.1),
                 ("SPEC-P", 6, 3, 32.4, 0.1))
    p = one(shifts(rows, None, mode="earliest"), "SPEC-P")
    assert p["reference_run"] == 4 and p["reference_K"] == 32.2
    assert "share the earliest start" in p["note"]


def test_treatment_reference_worked_by_hand():
    rows = table(("SPEC-T", 1, 0, 32.0, 0.2), ("SPEC-T", 2, 1, 32.2, 0.2),
                 ("SPEC-T", 3, 3, 33.0, 0.1),
                 ("SPEC-U", 4, 0, 32.0, 0.1), ("SPEC-U", 5, 3, 32.1, 0.1),
                 ("SPEC-V", 6, 0, 32.0, 0.1))
    treatments = pd.DataFrame({
        "specimen": ["SPEC-T", "SPEC-T", "SPEC-V"],
        "at": [DAY - pd.Timedelta(days=30), DAY + pd.Timedelta(days=2),
               DAY + pd.Timedelta(days=1)]})
    out = shifts(rows, None, mode="treatment", treatments=treatments)
    t, u, v = (one(out, s) for s in ("SPEC-T", "SPEC-U", "SPEC-V"))
    # SPEC-T: latest treatment on day 2; before: 32.0, 32.2 (+/- 0.2) -> 32.1,
    #   internal u = 0.2/sqrt(2) = 0.141421; chi2 = 25*(0.01 + 0.01) = 0.5; R_B < 1
    #   after: 33.0 +/- 0.1; shift 0.9; combined = sqrt(0.01 + 0.02) = 0.173205081
    #   sigma = 0.9/0.173205081 = 5.19615242
    assert t["reference_K"] == pytest.approx(32.1)
    assert t["reference_uncertainty_K"] == pytest.approx(0.141421356)
    assert t["shift_uncertainty_K"] == pytest.approx(0.173205081)
    assert t["sigma"] == pytest.approx(5.19615242)
    assert t["treatment_at"] == DAY + pd.Timedelta(days=2)
    assert u["note"] == "no treatment recorded" and np.isnan(u["sigma"])
    assert "no runs after the latest treatment" in v["note"]
    records = to_records(out)
    assert records[0]["treatment_at"].startswith("2024-03-03T09:00:00")
    assert_json_clean(out)


def test_against_one_run_worked_by_hand():
    rows = table(("SPEC-P", 10, 0, 32.0, 0.1), ("SPEC-P", 11, 1, 32.3, 0.1),
                 ("SPEC-P", 12, 2, 32.5, 0.3), ("SPEC-Q", 20, 3, 40.0, 0.1))
    out = shifts(rows, None, mode="run", reference_run=11)
    # only SPEC-P; later than run 11 is run 12 alone: 32.5 +/- 0.3 against 32.3 +/- 0.1
    # shift 0.2; combined = sqrt(0.09 + 0.01) = 0.316227766; sigma = 0.632455532
    assert list(out["specimen"]) == ["SPEC-P"]
    row = out.iloc[0]
    assert row["shift_K"] == pytest.approx(0.2)
    assert row["shift_uncertainty_K"] == pytest.approx(0.316227766)
    assert row["sigma"] == pytest.approx(0.632455532)
    assert row["reference_run"] == 11 and row["n_runs"] == 1
    with pytest.raises(NotFound, match="run 99"):
        shifts(rows, None, mode="run", reference_run=99)


def test_per_specimen_modes_need_start_times_and_run_ids():
    rows = table(("SPEC-P", 10, 0, 32.0, 0.1), ("SPEC-P", 11, 1, 32.3, 0.1),
                 ("SPEC-P", 12, 2, 32.5, 0.1))
    rows.loc[2, "started"] = pd.NaT
    p = one(shifts(rows, None, mode="earliest"), "SPEC-P")
    assert p["n_runs"] == 1 and "without a start time" in p["note"]
    with pytest.raises(InvalidValue, match="run"):
        shifts(rows.drop(columns="run"), None, mode="earliest")


# --- contract details ---------------------------------------------------------------

@pytest.mark.parametrize("kwargs, field", [
    ({"mode": "nearest"}, "mode"),
    ({"mode": "reference"}, "reference_K"),
    ({"mode": "run"}, "reference_run"),
    ({"mode": "treatment"}, "treatments"),
    ({"mode": "collection", "sigma": 0}, "sigma"),
    ({"mode": "collection", "by": "colour"}, "by"),
])
def test_bad_requests_name_the_field(kwargs, field):
    with pytest.raises(InvalidValue) as caught:
        shifts(FIVE, None, **kwargs)
    assert caught.value.field == field


def test_trend_needs_x():
    with pytest.raises(InvalidValue, match="x"):
        shifts(FIVE, pd.DataFrame({"specimen": ["SPEC-A"]}), mode="trend")


@pytest.mark.parametrize("mode, extra", [
    ("reference", {"reference_K": 32.0}), ("collection", {}), ("earliest", {}),
    ("treatment", {"treatments": pd.DataFrame({"specimen": [], "at": []})}),
])
def test_empty_selection_gives_an_empty_table_with_the_contract_columns(mode, extra):
    out = shifts(FIVE.iloc[:0], None, mode=mode, **extra)
    assert len(out) == 0
    assert set(SHIFT_COLUMNS) <= set(out.columns)
    assert to_records(out) == []


def test_to_records_turns_every_missing_kind_into_none():
    frame = pd.DataFrame({
        "f": [1.5, np.nan], "i": pd.array([3, pd.NA], dtype="Int64"),
        "b": pd.array([True, pd.NA], dtype="boolean"), "s": ["a", None],
        "t": [pd.Timestamp("2024-01-02T03:04:05Z"), pd.NaT], "inf": [np.inf, 2.0],
        "n": np.array([7, 8], dtype=np.int64),
    })
    records = to_records(frame)
    assert records == [
        {"f": 1.5, "i": 3, "b": True, "s": "a", "t": "2024-01-02T03:04:05+00:00",
         "inf": None, "n": 7},
        {"f": None, "i": None, "b": None, "s": None, "t": None, "inf": 2.0, "n": 8},
    ]
    assert type(records[0]["n"]) is int and type(records[0]["i"]) is int
    json.dumps(records, allow_nan=False)


# --- field bins ------------------------------------------------------------------------

def test_field_bin_labels():
    assert field_bin_label(0.0) == "zero field"
    assert field_bin_label(None) == "unknown field"
    assert field_bin_label(np.nan) == "unknown field"
    assert field_bin_label(0.05) == "1e-2..1e-1 T"
    assert field_bin_label(-0.5) == "1e-1..1e0 T"   # the magnitude is binned
    assert field_bin_label(2e-4, zero_below_T=1e-3) == "zero field"
    assert field_bin_label(0.3, edges_T=[0.01, 0.1, 1.0]) == "0.1..1 T"
    assert field_bin_label(5.0, edges_T=[0.01, 0.1, 1.0]) == ">=1 T"
    assert field_bin_label(0.001, edges_T=[0.01, 0.1, 1.0]) == "<0.01 T"
    with pytest.raises(InvalidValue):
        field_bin_label("strong")


@pytest.mark.parametrize("value", [1e-3, 0.01, 0.1, 1.0, 10.0, 0.3, 7e-5, 9.999999, 14.0])
def test_decade_bins_match_exact_decimal_exponents(value):
    # Decades [10^k, 10^(k+1)) (common practice, no single source); Python's decimal
    # module gives the exact exponent k of the value as written, powers of ten included.
    from decimal import Decimal
    k = Decimal(repr(value)).adjusted()
    assert field_bin_label(value) == f"1e{k}..1e{k + 1} T"


def test_run_started_at_the_treatment_time_is_left_out():
    # Before or after cannot be told for a run logged at the treatment's own time.
    rows = table(("SPEC-W", 1, 0, 32.0, 0.1), ("SPEC-W", 2, 2, 35.0, 0.1),
                 ("SPEC-W", 3, 3, 32.3, 0.1))
    treatments = pd.DataFrame({"specimen": ["SPEC-W"], "at": [DAY + pd.Timedelta(days=2)]})
    w = one(shifts(rows, None, mode="treatment", treatments=treatments), "SPEC-W")
    assert (w["reference_n_runs"], w["n_runs"]) == (1, 1)
    # 32.3 against 32.0 (+/- 0.1 each): shift 0.3, combined sqrt(0.02) = 0.141421356
    assert w["shift_K"] == pytest.approx(0.3)
    assert w["shift_uncertainty_K"] == pytest.approx(0.141421356)
    assert "started at the treatment time left out (run 2)" in w["note"]

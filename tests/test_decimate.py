"""Tests for magvault.analysis.decimate (largest-triangle-three-buckets).

Outside reference: Steinarsson (2013), "Downsampling Time Series for Visual
Representation", MSc thesis, University of Iceland.  `reference_lttb` below is
a plain, loop-by-loop implementation written from the thesis' description of
the algorithm: keep the first and the last point; split the points between
them into (threshold - 2) buckets of equal size; for each bucket in turn keep
the point that forms the largest triangle with the point kept last and the
average point of the next bucket (the last point, for the last bucket).  Bucket
boundaries are computed with exact fractions so that only the algorithm, not
floating-point rounding, is compared.
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from magvault.analysis import decimate
from magvault.analysis.decimate import bucket_bounds, lttb
from magvault.errors import InvalidValue


def reference_lttb(x, y, threshold):
    """LTTB as described by Steinarsson (2013), one point at a time, in pure Python."""
    n = len(x)
    if threshold >= n or threshold == 0:
        return list(range(n))
    every = Fraction(n - 2, threshold - 2)
    sampled = [0]
    a = 0
    for i in range(threshold - 2):
        # The average point of the next bucket (or the last point, for the last bucket).
        avg_start = math.floor((i + 1) * every) + 1
        avg_end = min(math.floor((i + 2) * every) + 1, n)
        count = avg_end - avg_start
        avg_x = sum(x[avg_start:avg_end]) / count
        avg_y = sum(y[avg_start:avg_end]) / count
        # This bucket.
        start = math.floor(i * every) + 1
        end = math.floor((i + 1) * every) + 1
        max_area, next_a = -1.0, start
        for j in range(start, end):
            area = 0.5 * abs(x[a] * (y[j] - avg_y) + x[j] * (avg_y - y[a]) + avg_x * (y[a] - y[j]))
            if area > max_area:
                max_area, next_a = area, j
        sampled.append(next_a)
        a = next_a
    sampled.append(n - 1)
    return sampled


def _walk(seed: int, n: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = np.cumsum(rng.uniform(0.1, 1.0, n)) + 4.0
    y = np.cumsum(rng.normal(size=n))
    return x, y


# --------------------------------------------------------------------------- against the reference

def test_hand_worked_example():
    """Eight points, four kept; bucket size (8 - 2)/(4 - 2) = 3: [1, 2, 3] and [4, 5, 6].

    Bucket 1: a = (0, 0); next-bucket average c = ((4+5+6)/3, (3+6+1)/3) = (5, 10/3).
    Twice the area |bx * 10/3 - 5 by|: point 1 (1, 2): 6.67; point 2 (2, 1): 1.67;
    point 3 (3, 0): 10  -> point 3 (not the highest point of the bucket).
    Bucket 2: a = (3, 0); c = the last point (7, 0): twice the area 4 |by| -> point 5 (y = 6).
    """
    x = [0, 1, 2, 3, 4, 5, 6, 7]
    y = [0, 2, 1, 0, 3, 6, 1, 0]
    assert lttb(x, y, 4).tolist() == [0, 3, 5, 7]
    assert reference_lttb(x, y, 4) == [0, 3, 5, 7]


@pytest.mark.parametrize("seed,n,n_out", [(0, 5000, 500), (1, 5000, 300), (2, 5000, 100),
                                          (3, 1001, 3), (4, 997, 996), (5, 20000, 150),
                                          (6, 64, 10), (7, 5000, 2500)])
def test_matches_reference_implementation(seed, n, n_out):
    x, y = _walk(seed, n)
    expected = reference_lttb(x.tolist(), y.tolist(), n_out)
    assert lttb(x, y, n_out).tolist() == expected


@pytest.mark.parametrize("n,n_out", [(5000, 500), (5000, 60), (3000, 1000)])
def test_both_code_paths_agree_with_reference(monkeypatch, n, n_out):
    """The successor-table path and the bucket-by-bucket path give the same points."""
    x, y = _walk(n + n_out, n)
    expected = reference_lttb(x.tolist(), y.tolist(), n_out)
    monkeypatch.setattr(decimate, "_PAIR_TABLE_MAX_WIDTH", 0)
    assert lttb(x, y, n_out).tolist() == expected
    monkeypatch.setattr(decimate, "_PAIR_TABLE_MAX_WIDTH", 10**9)
    monkeypatch.setattr(decimate, "_PAIR_TABLE_LIMIT", 10**12)
    assert lttb(x, y, n_out).tolist() == expected


def test_ties_on_quantised_data_go_to_the_earlier_point(monkeypatch):
    """A digitised curve (integer x and y) has many equal areas; with exact arithmetic
    both paths keep the earlier point, as the reference's strict '>' does."""
    x = np.arange(5000.0)
    y = np.round(20 * np.sin(x / 300))
    for n_out in (100, 300, 1000):
        expected = reference_lttb(x.tolist(), y.tolist(), n_out)
        assert lttb(x, y, n_out).tolist() == expected
        monkeypatch.setattr(decimate, "_PAIR_TABLE_MAX_WIDTH", 0)
        assert lttb(x, y, n_out).tolist() == expected
        monkeypatch.undo()


def test_both_paths_break_rounding_ties_identically(monkeypatch):
    """With inexact x (0.1 steps) near-ties depend on rounding; both paths use the same
    arithmetic, so they keep the same points."""
    x = np.arange(5000) * 0.1
    y = np.round(20 * np.sin(x / 30)) / 7
    table = lttb(x, y, 300)
    monkeypatch.setattr(decimate, "_PAIR_TABLE_MAX_WIDTH", 0)
    assert np.array_equal(lttb(x, y, 300), table)


def test_curve_going_back_and_forth_in_x():
    """A heating-cooling cycle: buckets follow the point order, as in the reference."""
    t = np.concatenate([np.linspace(300, 700, 1500), np.linspace(700, 300, 1500)])
    m = np.tanh((600 - t) / 15) + 0.01 * np.random.default_rng(9).normal(size=t.size)
    assert lttb(t, m, 200).tolist() == reference_lttb(t.tolist(), m.tolist(), 200)


@settings(max_examples=40, deadline=None)
@given(n=st.integers(3, 400), data=st.data())
def test_property_matches_reference(n, data):
    n_out = data.draw(st.integers(2, n + 5))
    seed = data.draw(st.integers(0, 2**31))
    x, y = _walk(seed, n)
    result = lttb(x, y, n_out)
    expected = reference_lttb(x.tolist(), y.tolist(), n_out) if n_out > 2 else [0, n - 1]
    if n_out >= n:
        expected = list(range(n))
    assert result.tolist() == expected


# --------------------------------------------------------------------------- properties

@pytest.mark.parametrize("n_out", [2, 3, 50, 499])
def test_first_last_count_and_monotone(n_out):
    x, y = _walk(12, 5000)
    idx = lttb(x, y, n_out)
    assert idx.dtype == np.int64
    assert idx[0] == 0 and idx[-1] == 4999
    assert idx.size == n_out
    assert np.all(np.diff(idx) > 0)
    if n_out > 2:
        bounds = bucket_bounds(5000, n_out)
        # Exactly one point from every bucket.
        assert np.all((idx[1:-1] >= bounds[:-1]) & (idx[1:-1] < bounds[1:]))


@settings(max_examples=30, deadline=None)
@given(position=st.integers(0, 1999), n_out=st.integers(3, 300), sign=st.sampled_from([-1.0, 1.0]))
def test_a_spike_is_always_kept(position, n_out, sign):
    rng = np.random.default_rng(position)
    x = np.linspace(300.0, 700.0, 2000)
    y = 0.01 * rng.normal(size=x.size) + np.tanh((600 - x) / 20)
    y[position] += sign * 1e3
    assert position in lttb(x, y, n_out)


def test_straight_line_gives_evenly_spaced_points():
    """On a line every triangle is flat, so the first point of each bucket is kept.

    Buckets of 8 points with integer coordinates keep every area exactly zero.
    """
    n_out = 52
    n = 2 + 8 * (n_out - 2)
    x = np.arange(n, dtype=float)
    y = 3.0 * x - 7.0
    idx = lttb(x, y, n_out)
    assert idx[0] == 0 and idx[-1] == n - 1
    assert np.all(np.diff(idx[1:-1]) == 8)
    assert idx[1] == 1


def test_units_do_not_change_the_choice():
    x, y = _walk(21, 3000)
    assert np.array_equal(lttb(x, y, 200), lttb(x * 1e-3 + 273.15, y * 1e6, 200))


def test_indices_pick_other_columns():
    x, y = _walk(22, 1000)
    sigma = np.abs(y) * 0.01
    idx = lttb(x, y, 100)
    picked = np.column_stack([x, y, sigma])[idx]
    assert picked.shape == (100, 3)
    assert np.array_equal(picked[:, 2], sigma[idx])


# --------------------------------------------------------------------------- NaN, small inputs, errors

def test_nan_points_are_dropped_and_indices_refer_to_the_original():
    x, y = _walk(31, 3000)
    y_nan = y.copy()
    x_nan = x.copy()
    bad = np.array([0, 5, 17, 1500, 2999])
    y_nan[bad[:3]] = np.nan
    x_nan[bad[3]] = np.inf
    y_nan[bad[4]] = np.nan
    idx = lttb(x_nan, y_nan, 150)
    assert not np.isin(idx, bad).any()
    keep = np.setdiff1d(np.arange(3000), bad)
    expected = keep[reference_lttb(x[keep].tolist(), y[keep].tolist(), 150)]
    assert idx.tolist() == expected.tolist()
    assert idx[0] == 1 and idx[-1] == 2998


def test_n_out_at_least_length_returns_everything_finite():
    x, y = _walk(41, 40)
    assert lttb(x, y, 40).tolist() == list(range(40))
    assert lttb(x, y, 1000).tolist() == list(range(40))
    y[3] = np.nan
    assert lttb(x, y, 40).tolist() == [i for i in range(40) if i != 3]
    assert lttb([], [], 10).tolist() == []


@pytest.mark.parametrize("x,y,n_out,needle", [
    ([1, 2, 3], [1, 2, 3], 1, "n_out: at least 2"),
    ([1, 2, 3], [1, 2, 3], 2.5, "n_out: expected a whole number"),
    ([1, 2, 3], [1, 2, 3], True, "n_out: expected a whole number"),
    ([1, 2, 3], [1, 2], 2, "x, y: expected two 1-D arrays"),
    ([[1, 2], [3, 4]], [[1, 2], [3, 4]], 2, "x, y: expected two 1-D arrays"),
])
def test_refusals(x, y, n_out, needle):
    with pytest.raises(InvalidValue, match=f"^{needle}"):
        lttb(x, y, n_out)

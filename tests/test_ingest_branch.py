"""Heating/cooling labels from the temperature direction.

The reference is the constructed temperature programme itself (which rows were on
the way up, which on the way down); noise is Gaussian from numpy's generator.
"""

from __future__ import annotations

import numpy as np
import pytest

from magvault.errors import InputFileError
from magvault.ingest import label_branches
from magvault.ingest.branch import normalise_branch_values


def programme(n_up, n_hold, n_down, t0=300.0, t1=700.0, noise=0.0, seed=0):
    rng = np.random.default_rng(seed)
    t = np.concatenate([np.linspace(t0, t1, n_up), np.full(n_hold, t1), np.linspace(t1, t0, n_down)])
    truth = np.array(["heating"] * (n_up + n_hold) + ["cooling"] * n_down, dtype=object)
    return t + rng.normal(0.0, noise, len(t)) if noise else t, truth


def test_clean_sweep_up_and_down():
    t, truth = programme(300, 0, 300)
    labels = label_branches(t)
    mismatch = np.flatnonzero(labels != truth)
    assert len(mismatch) <= 5 and (len(mismatch) == 0 or 295 <= mismatch.min())


@pytest.mark.parametrize("seed", range(5))
def test_noisy_sweep_with_plateau_keeps_previous_branch(seed):
    # 0.3 K thermometer noise on a 1.3 K/step ramp; a 40-point hold at the top.
    t, truth = programme(300, 40, 300, noise=0.3, seed=seed)
    labels = label_branches(t)
    wrong = np.flatnonzero(labels != truth)
    # Only rows within half a smoothing window of the start of cooling may differ.
    assert np.all((wrong >= 335) & (wrong < 345)), wrong
    assert (labels[300:335] == "heating").all()


def test_long_finely_sampled_sweep_where_noise_exceeds_each_step():
    """1e6 points: each step (8e-4 K) is far below the 0.05 K noise, so the default
    window grows with the series (n // 200 points)."""
    t, truth = programme(500_000, 0, 500_000, noise=0.05, seed=3)
    labels = label_branches(t)
    wrong = np.flatnonzero(labels != truth)
    assert len(wrong) < 2_000
    assert wrong.min() >= 499_000 and wrong.max() <= 501_500


def test_short_series_flat_series_and_gaps():
    assert list(label_branches(np.array([300.0, 310.0, 320.0, 330.0]))) == ["heating"] * 4
    assert list(label_branches(np.array([330.0, 320.0]))) == ["cooling"] * 2
    assert list(label_branches(np.full(5, 300.0))) == [""] * 5
    t = np.linspace(300, 400, 50)
    t[10:13] = np.nan
    assert (label_branches(t) == "heating").all()
    assert len(label_branches(np.array([]))) == 0


def test_cooling_first_then_heating():
    t = np.concatenate([np.linspace(300, 10, 200), np.linspace(10, 300, 200)])
    labels = label_branches(t)
    assert (labels[:195] == "cooling").all() and (labels[206:] == "heating").all()


def test_file_labels_are_normalised_or_refused_with_line():
    values = np.array(["Heating", "up", "warming", "DOWN", "c"], dtype=object)
    out = normalise_branch_values(values, np.arange(2, 7), source_name="b.csv", column="dir")
    assert list(out) == ["heating", "heating", "heating", "cooling", "cooling"]
    with pytest.raises(InputFileError) as info:
        normalise_branch_values(np.array(["up", "sideways"], dtype=object), np.array([5, 6]),
                                source_name="b.csv", column="dir")
    assert (info.value.line, info.value.column) == (6, "dir")


@pytest.mark.parametrize("window", [1, 3, 9, 49])
def test_moving_average_matches_numpy_means(window):
    """The cumulative-sum moving average equals numpy's mean over each (shrinking) window."""
    from magvault.ingest.branch import _moving_average

    x = np.random.default_rng(window).normal(size=60)
    half = window // 2
    expected = [x[max(0, i - half): i + half + 1].mean() for i in range(len(x))]
    np.testing.assert_allclose(_moving_average(x, window), expected, rtol=1e-12, atol=1e-12)

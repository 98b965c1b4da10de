"""Asking the collection, end to end: a small collection written by hand, derived, then queried.

Seven specimens of 4C-bearing pyrrhotite carry a low-temperature step near 32 K
(common practice, no single source: 30-34 K); two are shifted by a few kelvin:
B5 is off by +3 K in every run (it should stand out against the collection and
the trend), and A2 was annealed between runs and moved by +2.5 K (it should
stand out against its own earlier run and its runs before the treatment).
"""

from __future__ import annotations

import json
import math

import pytest
from sqlalchemy import select
from click.testing import CliRunner

from magvault.cli import main
from magvault.errors import InvalidValue, NotFound
from exports import low_t_csv

SPECIMENS = {  # code: (x in Fe(1-x)S, step temperature of its runs in K)
    "A1": (0.118, [32.0, 32.0]),
    "A2": (0.120, [32.1, 34.6, 34.6]),  # annealed after its first run
    "A3": (0.121, [31.9]),
    "B4": (0.122, [32.2, 32.2]),
    "B5": (0.119, [35.0, 35.0]),        # shifted in every run
    "B6": (0.123, [32.1]),
    "C7": (0.117, [31.8, 31.8]),
}


def wt_for_x(x: float) -> list[str]:
    """Fe and S wt% of Fe(1-x)S with IUPAC 2021 atomic weights (Fe 55.845, S 32.06)."""
    fe, s = (1 - x) * 55.845, 32.06
    return [f"Fe={100 * fe / (fe + s):.4f}+/-0.05", f"S={100 * s / (fe + s):.4f}+/-0.05"]


@pytest.fixture
def collection(vault, tmp_path):
    seed = 10
    for code, (x, temps) in SPECIMENS.items():
        vault.add_specimen(code, mass="5 mg", origin="Ridge" if code[0] != "C" else "Valley")
        vault.add_composition(code, method="microprobe", wt=wt_for_x(x), superstructure="4C")
        for i, t0 in enumerate(temps):
            if code == "A2" and i == 1:
                vault.add_treatment("A2", kind="anneal", at="2026-03-01T12:00Z",
                                    conditions=["temperature=573 K", "duration=2 h", "atmosphere=argon"])
            path = tmp_path / f"{code}-{i}.csv"
            path.write_text(low_t_csv(t0, seed=seed, noise=0.0007))
            seed += 1
            vault.ingest(path, specimen=code, kind="thermomagnetic",
                         overrides=[f"started=2026-03-0{1 + i}T09:00Z", "field=0.1 T"])
    summary = vault.derive(all=True)
    assert not summary["failed"]
    return vault


def flagged(frame) -> set[str]:
    return set(frame.loc[frame["flagged"].fillna(False).astype(bool), "specimen"])


def test_every_specimen_has_its_low_t_estimate(collection):
    primary = collection.transitions(kind="low-t", primary_only=True, branch="heating")
    assert primary.groupby("specimen").size().to_dict() == {c: len(t) for c, (_, t) in SPECIMENS.items()}


def test_shifts_against_the_collection_and_the_trend_flag_the_shifted_specimen(collection):
    for mode in ("collection", "trend"):
        frame = collection.shifts("low-t", against=mode)
        assert flagged(frame) == {"B5"}, (mode, frame[["specimen", "sigma"]])
        row = frame.set_index("specimen").loc["B5"]
        assert row["shift_K"] == pytest.approx(3.0, abs=0.6)
        assert row["sigma"] > 3


def test_shifts_against_earliest_and_treatment_flag_the_annealed_specimen(collection):
    for mode in ("earliest", "treatment"):
        frame = collection.shifts("low-t", against=mode)
        assert flagged(frame) == {"A2"}, mode
        row = frame.set_index("specimen").loc["A2"]
        assert row["shift_K"] == pytest.approx(2.5, abs=0.5)
        # Two runs after against one before: the estimate is their weighted mean and
        # the combined uncertainty the root sum of squares of the two sides.
        assert row["shift_uncertainty_K"] == pytest.approx(math.hypot(row["uncertainty_K"],
                                                                      row["reference_uncertainty_K"]))
    frame = collection.shifts("low-t", against="treatment").set_index("specimen")
    assert frame.loc["A1", "note"] and math.isnan(frame.loc["A1", "sigma"])


def test_fixed_reference_and_against_run(collection):
    frame = collection.shifts("low-t", reference=32.0).set_index("specimen")
    assert "B5" in flagged(frame.reset_index())
    assert frame.loc["B5", "shift_uncertainty_K"] == pytest.approx(frame.loc["B5", "uncertainty_K"])
    runs = collection.runs(specimen="A2")
    first = int(runs["id"].iloc[0])
    by_run = collection.shifts("low-t", against_run=first)
    assert list(by_run["specimen"]) == ["A2"] and flagged(by_run) == {"A2"}


def test_grouping_by_origin_adds_a_group(collection):
    frame = collection.shifts("low-t", against="collection", by="origin")
    assert set(frame["group"]) == {"Ridge", "Valley"}
    # Valley holds one specimen: no reference can be formed, and the note says so.
    c7 = frame.set_index("specimen").loc["C7"]
    assert math.isnan(c7["sigma"]) and "fewer than" in c7["note"]


@pytest.mark.parametrize("kwargs, error", [
    ({}, InvalidValue), ({"against": "collection", "reference": 30}, InvalidValue),
    ({"against": "neighbours"}, InvalidValue), ({"against": "collection", "sigma": -1}, InvalidValue),
    ({"against": "collection", "by": "colour"}, InvalidValue), ({"against_run": 9999}, NotFound),
])
def test_bad_shift_requests_are_refused(collection, kwargs, error):
    with pytest.raises(error):
        collection.shifts("low-t", **kwargs)
    with pytest.raises(NotFound, match="known kinds"):
        collection.shifts("not-a-kind", against="collection")


def test_correlation_against_composition_and_the_map(collection):
    res = collection.correlate("low-t", against="x")
    assert res.n == len(SPECIMENS) and res.slope is not None
    # Seven points, two of them disturbed: B5 stands furthest above the weighted line.
    worst = res.points.sort_values("residual_sigma").iloc[-1]
    assert worst["specimen"] == "B5" and worst["residual_K"] > 1.5
    points = collection.composition_map(kinds=["low-t"])
    assert len(points) == sum(len(t) for _, t in SPECIMENS.values())
    assert points["x"].notna().all() and points["x_uncertainty"].notna().all()


def test_coupled_by_two_methods_and_saved_queries(collection):
    pair = collection.coupled(kind="ordering", methods="dmdt-extremum,two-tangent")
    assert list(pair.columns[:3]) == ["specimen", "a", "b"]  # nothing ordered here: all notes
    collection.save_query("lowt-trend", "shifts", {"kind": "low-t", "against": "trend"})
    again = collection.run_saved_query("lowt-trend")
    assert flagged(again) == {"B5"}
    assert [q["name"] for q in collection.saved_queries()] == ["lowt-trend"]


def test_cli_shifts_json_is_the_contract_and_never_nan(collection, db_url):
    runner = CliRunner()
    for args in (["--against", "collection"], ["--against", "treatment"], ["--reference", "32"],
                 ["--against", "trend", "--by", "superstructure"]):
        out = runner.invoke(main, ["--db", db_url, "shifts", "--kind", "low-t", *args, "--json"])
        assert out.exit_code == 0, out.stderr
        rows = json.loads(out.stdout)  # json.loads accepts NaN; the text must not contain it
        assert "NaN" not in out.stdout and "Infinity" not in out.stdout
        for r in rows:
            assert {"specimen", "temperature_K", "uncertainty_K", "reference_K", "shift_K", "shift_uncertainty_K",
                    "sigma", "flagged", "note"} <= set(r)
            assert r["flagged"] in (True, False, None)
            if r["sigma"] is None:
                assert r["note"]
    bad = runner.invoke(main, ["--db", db_url, "shifts", "--kind", "low-t", "--json"])
    assert bad.exit_code == 1 and "exactly one" in bad.stderr
    saved = runner.invoke(main, ["--db", db_url, "shifts", "--kind", "low-t", "--against", "earliest", "--save",
                                 "first-runs"])
    assert saved.exit_code == 0
    rerun = json.loads(runner.invoke(main, ["--db", db_url, "query", "run", "first-runs", "--json"]).stdout)
    assert {r["specimen"] for r in rerun if r["flagged"]} == {"A2"}


def test_the_column_wise_composition_summary_agrees_with_the_registry(vault):
    """Shifts read compositions without ORM objects; the numbers must be the registry's own."""
    from magvault.services.collection import composition_summary
    from magvault.services.listing import composition_map
    from magvault.store.models import Specimen

    vault.add_specimen("P", mass="50 mg")
    vault.add_specimen("P-a", parent="P", mass="5 mg")           # inherits P's combined analyses
    vault.add_specimen("Q", mass="5 mg")                         # one analysis
    vault.add_specimen("R", mass="5 mg")                         # none
    vault.add_composition("P", method="microprobe", wt=wt_for_x(0.10), superstructure="4C")
    vault.add_composition("P", method="microprobe", wt=wt_for_x(0.13), superstructure="5C")
    vault.add_composition("Q", method="microprobe", wt=wt_for_x(0.09))
    with vault.read() as s:
        parents = dict(s.execute(select(Specimen.id, Specimen.parent_id)).all())
        codes = dict(s.execute(select(Specimen.id, Specimen.code)).all())
        fast = {codes[k]: v for k, v in composition_summary(s, parents).items()}
        full = {codes[k]: v for k, v in composition_map(s).items()}
    assert set(fast) == set(full) == {"P", "P-a", "Q"}
    for code, (x, u, label) in fast.items():
        assert x == pytest.approx(full[code]["x"], rel=1e-12)
        assert u == pytest.approx(full[code]["x_uncertainty"], rel=1e-12)
        assert label == full[code]["superstructure"]
    assert fast["P-a"] == fast["P"] and fast["P"][2] == "5C"

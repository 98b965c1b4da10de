"""Deriving through the Vault: recorded derivations, reuse, versions, and recovery from exports.

Curves here are written the way a new user's magnetometer would export them
(CGS units, Celsius, decimal commas) from the Weiss mean-field model (solved with
scipy in magvault.analysis.meanfield, itself checked against scipy's brentq in
test_meanfield.py) and a smooth low-temperature step.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from magvault.analysis.results import Outcome
from magvault.cli import main
from magvault.services import derive as derive_service
from magvault.store.models import Run, Series

from exports import low_t_csv, ordering_csv_celsius_decimal_comma


def test_low_t_step_from_an_export_is_found_within_its_uncertainty(vault, tmp_path):
    vault.add_specimen("U1", mass="20 mg")
    path = tmp_path / "lowt.csv"
    path.write_text(low_t_csv(32.4, seed=1))
    run = vault.ingest(path, specimen="U1", kind="thermomagnetic").run_id
    summary = vault.derive(run=run)
    assert summary["derivations_created"] >= 1 and not summary["failed"]
    rows = vault.transitions(kind="low-t", primary_only=True)
    assert len(rows) == 1
    row = rows.iloc[0]
    assert row["run"] == run and row["branch"] == "heating" and row["component"] == 1
    assert 0 < row["uncertainty_K"] < 0.5
    assert abs(row["temperature_K"] - 32.4) <= 3 * row["uncertainty_K"]


def test_ordering_from_celsius_and_decimal_commas(vault, tmp_path):
    vault.add_specimen("U2")
    path = tmp_path / "furnace.csv"
    path.write_text(ordering_csv_celsius_decimal_comma(593.0, seed=2), encoding="utf-8")
    run = vault.ingest(path, specimen="U2", kind="thermomagnetic").run_id
    vault.derive(run=run)
    primary = vault.transitions(kind="ordering", primary_only=True)
    assert len(primary) == 1
    t = primary.iloc[0]
    # Zero-field mean-field curve: the stated uncertainty must cover the planted Tc.
    assert abs(t["temperature_K"] - 593.0) <= 2 * t["uncertainty_K"]
    methods = set(vault.transitions(kind="ordering")["method"])
    assert {"dmdt-extremum", "two-tangent", "combined"} <= methods
    # Pyrrhotite orders near 590 K (common practice, no single source): the catalogue assigned it.
    assert t["kind"] == "ordering"


def test_rederiving_reuses_records_and_versions_replace_in_listings(vault, tmp_path):
    vault.add_specimen("U3")
    path = tmp_path / "lowt.csv"
    path.write_text(low_t_csv(31.0, seed=3))
    run = vault.ingest(path, specimen="U3", kind="thermomagnetic").run_id
    first = vault.derive(run=run)
    again = vault.derive(run=run)
    assert again["derivations_created"] == 0 and again["derivations_reused"] == first["derivations_created"]
    before = vault.transitions(run=run)
    derivations = vault.derivations(run)
    low = next(d for d in derivations if d["method"] == "low-temperature-peaks")
    assert low["version"] and low["parameters"] and low["input_runs"] == [run] and len(low["input_hashes"]) == 1
    assert low["software_version"]

    # A new version of the method on the same inputs becomes the current one.
    old_rows = before[before["derivation"] == low["id"]]
    fake = Outcome(method="low-temperature-peaks", version="99.0", parameters={"note": "newer"},
                   transitions=())
    with vault.write() as s:
        from magvault.analysis.results import TransitionEstimate

        fake = Outcome(method=fake.method, version=fake.version, parameters=fake.parameters, transitions=(
            TransitionEstimate(kind="low-t", temperature_K=31.5, uncertainty_K=0.2, method="dmdt-peak",
                               branch="heating", primary=True),))
        r = s.get(Run, run)
        series = s.query(Series).filter_by(run_id=run).one()
        derive_service.store_outcome(s, fake, [(r, series)])
    now = vault.transitions(run=run, kind="low-t")
    assert list(now["temperature_K"]) == [31.5]
    every = vault.transitions(run=run, kind="low-t", all_versions=True)
    assert len(every) == len(now) + len(old_rows[old_rows["kind"] == "low-t"])
    assert vault.derivations(run, all_versions=False)[-1]["version"] in {"99.0", low["version"]}


def test_retracted_runs_leave_the_listings(vault, tmp_path):
    vault.add_specimen("U4")
    ids = []
    for seed in (4, 5):
        path = tmp_path / f"lowt{seed}.csv"
        path.write_text(low_t_csv(32.0, seed=seed))
        ids.append(vault.ingest(path, specimen="U4", kind="thermomagnetic").run_id)
    vault.derive(all=True)
    assert set(vault.transitions(kind="low-t", primary_only=True)["run"]) == set(ids)
    vault.retract_run(ids[0], reason="thermometer lead came loose")
    assert set(vault.transitions(kind="low-t", primary_only=True)["run"]) == {ids[1]}
    assert set(vault.results()["run"]) <= {ids[1]}


def test_loop_and_backfield_give_ratios_for_the_day_plot(vault, tmp_path):
    from magvault.analysis.stonerwohlfarth import random_uniaxial_backfield, random_uniaxial_loop

    vault.add_specimen("U5", mass="15 mg")
    field = np.concatenate([np.linspace(1.0, -1.0, 201), np.linspace(-1.0, 1.0, 201)])
    H, m = random_uniaxial_loop(field, 0.1, n_particles=400, seed=1, sampling="even")
    loop = tmp_path / "loop.csv"
    loop.write_text("Field (Oe),Moment (emu)\n" + "".join(f"{h * 1e4:.3f},{v * 3e-3:.7e}\n" for h, v in zip(H, m)))
    back_fields = -np.linspace(0.0, 0.2, 81)
    Hb, mb = random_uniaxial_backfield(back_fields, 0.1, n_particles=400, seed=1, sampling="even")
    back = tmp_path / "back.csv"
    back.write_text("mu0H (T),M (A m2)\n" + "".join(f"{h:.5f},{v * 3e-6:.7e}\n" for h, v in zip(Hb, mb)))
    vault.ingest(loop, specimen="U5", kind="hysteresis", group="loop-1")
    vault.ingest(back, specimen="U5", kind="backfield", group="loop-1")
    summary = vault.derive(all=True)
    assert not summary["failed"]
    res = vault.results(specimen="U5")
    got = {q: res[res["quantity"] == q] for q in ("Ms", "Mr", "Hc", "Hcr", "Hcr_Hc", "Ms_mass")}
    assert all(len(v) >= 1 for v in got.values()), {k: len(v) for k, v in got.items()}
    # A random uniaxial single-domain ensemble (Stoner-Wohlfarth): Mr/Ms = 0.5 and Hcr/Hc = 1.09
    # (Tauxe, Essentials of Paleomagnetism, ch. 5).
    ratios = res[(res["quantity"] == "Mr_Ms") & (res["method"] == "loop-corrected")]
    assert ratios["value"].iloc[0] == pytest.approx(0.5, abs=0.03)
    assert got["Hcr_Hc"]["value"].iloc[0] == pytest.approx(1.09, abs=0.08)
    assert got["Ms"]["unit"].iloc[0] == "A m^2" or "A" in got["Ms"]["unit"].iloc[0]
    assert got["Ms_mass"]["value"].iloc[0] == pytest.approx(got["Ms"]["value"].iloc[0] / 15e-6, rel=1e-6)


def test_cli_derive_and_listings_json(db_url, tmp_path):
    runner = CliRunner()
    path = tmp_path / "lowt.csv"
    path.write_text(low_t_csv(33.0, seed=6))
    assert runner.invoke(main, ["--db", db_url, "specimen", "add", "U6"]).exit_code == 0
    assert runner.invoke(main, ["--db", db_url, "ingest", str(path), "--specimen", "U6", "--kind",
                                "thermomagnetic"]).exit_code == 0
    out = runner.invoke(main, ["--db", db_url, "derive", "--all", "--json"])
    assert out.exit_code == 0 and json.loads(out.stdout)["runs"] == 1
    rows = json.loads(runner.invoke(main, ["--db", db_url, "transitions", "--json"]).stdout)
    for key in ("specimen", "run", "kind", "temperature_K", "uncertainty_K", "method", "branch", "component",
                "primary"):
        assert key in rows[0]
    results = json.loads(runner.invoke(main, ["--db", db_url, "results", "--json"]).stdout)
    for r in results:
        assert {"specimen", "run", "quantity", "value", "uncertainty", "unit", "method",
                "block_temperature_K"} <= set(r)
    assert runner.invoke(main, ["--db", db_url, "derive"]).exit_code == 2
    assert runner.invoke(main, ["--db", db_url, "derive", "--run", "77"]).exit_code == 1

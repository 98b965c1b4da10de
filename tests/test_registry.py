"""The specimen registry through the Vault: inheritance, orientations, treatments in time, instruments."""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from magvault.cli import main
from magvault.errors import InvalidValue

# Fe7S8 (x = 0.125) by weight with IUPAC 2021 atomic weights (Prohaska et al., 2022):
# M(Fe7S8) = 7 x 55.845 + 8 x 32.06 = 647.395 g/mol; Fe 390.915/647.395 = 60.383 wt%, S 39.617 wt%.
FE7S8_WT = ["Fe=60.383+/-0.20", "S=39.617+/-0.20"]


def test_child_inherits_composition_until_analysed(vault):
    vault.add_specimen("P", mass="100 mg", kind="single crystal")
    vault.add_specimen("P-a", parent="P", mass="40 mg")
    vault.add_specimen("P-a-1", parent="P-a", mass="10 mg")
    out = vault.add_composition("P", method="microprobe", wt=FE7S8_WT, superstructure="4c")
    assert out["x"] == pytest.approx(0.125, abs=2e-4) and out["superstructure"] == "4C"
    grandchild = vault.specimen("P-a-1")
    assert grandchild["composition"]["inherited"] and grandchild["composition"]["from"] == "P"
    assert grandchild["x"] == pytest.approx(out["x"])
    vault.add_composition("P-a-1", method="microprobe", wt=["Fe=63.2+/-0.2", "S=36.8+/-0.2"])
    own = vault.specimen("P-a-1")
    assert not own["composition"]["inherited"] and own["x"] < 0.02
    frame = vault.specimens().set_index("code")
    assert frame.loc["P-a", "composition_inherited"] == True  # noqa: E712  (pandas object column)
    assert frame.loc["P-a-1", "composition_inherited"] == False  # noqa: E712


def test_several_analyses_combine_by_weighted_mean(vault):
    vault.add_specimen("W")
    a = vault.add_composition("W", method="microprobe", wt=["Fe=60.30+/-0.10", "S=39.70+/-0.10"])
    b = vault.add_composition("W", method="microprobe", wt=["Fe=60.50+/-0.20", "S=39.50+/-0.20"])
    comp = vault.specimen("W")["composition"]
    w = np.array([a["x_uncertainty"], b["x_uncertainty"]]) ** -2.0
    mean = (w[0] * a["x"] + w[1] * b["x"]) / w.sum()
    assert comp["x"] == pytest.approx(mean, rel=1e-9) and comp["n_analyses"] == 2


def test_composition_warnings_and_refusals(vault):
    vault.add_specimen("Q")
    out = vault.add_composition("Q", method="microprobe", wt=["Fe=55.0+/-0.3", "S=36.0+/-0.3"])
    assert any("total" in w for w in out["warnings"])  # 91 wt% is far from 100
    with pytest.raises(InvalidValue):
        vault.add_composition("Q", method="microprobe", wt=["Fe=60"], at=["Fe=47", "S=53"])
    with pytest.raises(InvalidValue, match="superstructure"):
        vault.add_composition("Q", method="microprobe", wt=FE7S8_WT, superstructure="4X")


def test_orientation_is_stored_as_a_proper_rotation_and_inherited_by_same_orientation_cuts(vault):
    vault.add_specimen("O")
    vault.add_specimen("O-a", parent="O", same_orientation=True)
    vault.add_specimen("O-b", parent="O")
    # Hand-derived: a 90-degree turn about z maps specimen X onto crystal y and specimen Y onto -x.
    vault.add_orientation("O", matrix="0,-1,0,1,0,0,0,0,1", system="hexagonal", cell="a=3.44 c=5.73",
                          method="Laue", uncertainty="2 deg")
    child = vault.specimen("O-a")["orientation"]
    assert child["inherited"] and child["from"] == "O"
    R = np.array(child["matrix"]).reshape(3, 3)
    np.testing.assert_allclose(R @ [1, 0, 0], [0, 1, 0], atol=1e-12)
    assert vault.specimen("O-b")["orientation"] is None
    for bad, match in (("1,0,0,0,1,0,0,0,-1", "reflection"), ("1,0,0,0,2,0,0,0,1", "rotation|orthonormal"),
                       ("1,0,0", "9 numbers")):
        with pytest.raises(InvalidValue, match=match):
            vault.add_orientation("O", matrix=bad, system="hexagonal", method="Laue")


def test_treatments_place_runs_before_and_after(vault):
    vault.add_specimen("T")
    r1 = vault.log_run("T", "thermomagnetic", started="2026-03-01T09:00Z")
    vault.add_treatment("T", kind="anneal", at="2026-03-02T10:00Z", conditions=["temperature=573K", "duration=2h"])
    r2 = vault.log_run("T", "thermomagnetic", started="2026-03-03T09:00Z")
    vault.add_treatment("T", kind="quench", at="2026-03-04T10:00Z")
    r3 = vault.log_run("T", "thermomagnetic", started="2026-03-05T09:00Z")
    timeline = vault.specimen("T")["timeline"]
    assert [s["treatment"]["kind"] if s["treatment"] else None for s in timeline] == [None, "anneal", "quench"]
    assert [s["runs"] for s in timeline] == [[r1], [r2], [r3]]


def test_instrument_calibration_file_goes_to_the_raw_store(vault, tmp_path):
    vault.add_instrument("furnace magnetometer", kind="magnetometer", place="room B12")
    cal = tmp_path / "cal.txt"
    cal.write_bytes(b"reference sphere: 1.000e-3 A m2\n")
    vault.calibrate_instrument("furnace magnetometer", at="2026-01-06", note="moment scale", file=cal)
    inst = vault.instruments()[0]
    assert inst["name"] == "furnace magnetometer" and inst["calibrations"][0]["file"] == "cal.txt"
    import hashlib

    data, name, _ = vault.raw_file(hashlib.sha256(cal.read_bytes()).hexdigest())
    assert data == cal.read_bytes() and name == "cal.txt"
    vault.add_specimen("I1")
    run_id = vault.log_run("I1", "hysteresis", instrument="furnace magnetometer")
    assert vault.run(run_id)["instrument"] == "furnace magnetometer"


def test_cli_registry_commands(db_url):
    runner = CliRunner()

    def ok(*args):
        r = runner.invoke(main, ["--db", db_url, *args])
        assert r.exit_code == 0, r.output
        return r

    ok("specimen", "add", "CC-1", "--mass", "412.3+/-0.1 mg", "--dims", "8.1 x 6.0 x 4.2 mm", "--kind",
       "single crystal")
    ok("specimen", "add", "CC-1a", "--parent", "CC-1", "--mass", "12.5 mg", "--same-orientation")
    ok("composition", "add", "CC-1", "--method", "microprobe", *[a for w in FE7S8_WT for a in ("--wt", w)])
    ok("orientation", "add", "CC-1", "--axes", "a=X,c*=Z", "--system", "hexagonal", "--method", "Laue")
    ok("orientation", "add", "CC-1", "--euler", "90,0,0", "--system", "hexagonal", "--method", "EBSD")
    ok("treatment", "add", "CC-1a", "--kind", "anneal", "--at", "2026-11-03T10:00Z", "--set", "temperature=573K",
       "--set", "duration=2h", "--set", "atmosphere=argon")
    ok("instrument", "add", "cryo magnetometer", "--kind", "magnetometer", "--place", "room B14")
    doc = json.loads(ok("specimen", "show", "CC-1a", "--json").stdout)
    assert doc["lineage"]["ancestors"] == ["CC-1"] and doc["x"] == pytest.approx(0.125, abs=2e-4)
    assert doc["orientation"]["inherited"] and doc["treatments"][0]["conditions"]["duration_s"] == 7200
    text = ok("specimen", "show", "CC-1a").stdout
    for needle in ("Lineage", "CC-1", "x = 0.12", "ANNEAL", "Orientation"):
        assert needle in text
    bad = runner.invoke(main, ["--db", db_url, "orientation", "add", "CC-1", "--matrix", "1,0,0,0,1,0,0,0,-1",
                               "--system", "hexagonal", "--method", "Laue"])
    assert bad.exit_code == 1 and "reflection" in bad.stderr

"""Importing through the Vault: atomic, idempotent, explained failures, nothing half-written."""

from __future__ import annotations

import json
import multiprocessing

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from sqlalchemy import text

import magvault
from magvault.cli import main
from magvault.errors import Duplicate, InputFileError, InvalidValue, MagvaultError, NotFound

CURVE = "Temperature (K),Moment (emu)\n" + "".join(f"{300 + i},{(1 - i / 400) * 2e-3:.6e}\n" for i in range(300))


def snapshot(vault) -> dict[str, int]:
    with vault.engine.connect() as conn:
        return {t: conn.execute(text(f"SELECT count(*) FROM {t}")).scalar_one()
                for t in ("run", "raw_file", "series", "event")}


@pytest.fixture
def curve(tmp_path):
    path = tmp_path / "mt.csv"
    path.write_text(CURVE)
    return path


def test_ingest_converts_cgs_and_keeps_the_exact_bytes(vault, curve):
    vault.add_specimen("S1", mass="10 mg")
    report = vault.ingest(curve, specimen="S1", kind="thermomagnetic")
    series = vault.series(report.run_id)
    # NBS/IEEE "Units for Magnetic Properties": 1 emu = 1e-3 A m^2.
    assert series["moment_A_m2"].iloc[0] == pytest.approx(2e-6, rel=1e-12)
    # Mass normalisation with the specimen's recorded mass (10 mg): 1 emu/g = 1 A m^2/kg.
    assert series["moment_A_m2_per_kg"].iloc[0] == pytest.approx(2e-6 / 1e-5, rel=1e-12)
    assert series["temperature_K"].dtype == np.float64
    data, name, media = vault.raw_file(report.sha256)
    assert data == curve.read_bytes() and name == "mt.csv"
    runs = vault.runs()
    assert runs.iloc[0]["status"] == "recorded" and runs.iloc[0]["sha256"] == report.sha256


def test_same_bytes_same_specimen_is_a_duplicate_unless_again(vault, curve):
    vault.add_specimen("S1")
    vault.add_specimen("S2")
    first = vault.ingest(curve, specimen="S1", kind="thermomagnetic").run_id
    before = snapshot(vault)
    with pytest.raises(Duplicate, match=f"run {first}"):
        vault.ingest(curve, specimen="S1", kind="thermomagnetic")
    assert snapshot(vault) == before
    again = vault.ingest(curve, specimen="S1", kind="thermomagnetic", again=True)
    other = vault.ingest(curve, specimen="S2", kind="thermomagnetic")
    assert again.reused_bytes and other.reused_bytes
    after = snapshot(vault)
    assert after["raw_file"] == before["raw_file"]  # one stored copy shared by three runs
    assert after["run"] == before["run"] + 2


def test_logged_run_receives_its_file(vault, curve):
    vault.add_specimen("S1")
    run_id = vault.log_run("S1", "thermomagnetic", status="running")
    report = vault.ingest(curve, run=run_id)
    assert report.run_id == run_id
    assert vault.run(run_id)["status"] == "recorded"
    with pytest.raises(InvalidValue, match="recorded"):
        vault.ingest(curve, run=run_id, again=True)


@pytest.mark.parametrize("content, error, match", [
    (b"", InputFileError, "empty"),
    (b"\x00\x01\x02\x03binary\x00\x00" * 50, InputFileError, "binary"),
    (b"Temperature (K),Moment (emu)\n300,1e-3\n301,abc\n", InputFileError, "line 3"),
    (b"Temperature (K),Moment (parsecs)\n300,1e-3\n301,2e-3\n", InputFileError, "parsecs"),
    (b"Voltage (V),Current (A)\n1,2\n3,4\n", InputFileError, "temperature"),
])
def test_bad_files_leave_nothing_behind(vault, tmp_path, content, error, match):
    vault.add_specimen("S1")
    path = tmp_path / "bad.csv"
    path.write_bytes(content)
    before = snapshot(vault)
    with pytest.raises(error, match=match):
        vault.ingest(path, specimen="S1", kind="thermomagnetic")
    assert snapshot(vault) == before


@pytest.mark.parametrize("kwargs, error, match", [
    ({"specimen": "NOPE", "kind": "thermomagnetic"}, NotFound, "NOPE"),
    ({"specimen": "S1"}, InvalidValue, "--kind"),
    ({"run": 999}, NotFound, "999"),
    ({"specimen": "S1", "kind": "thermomagnetic", "instrument": "ghost"}, NotFound, "ghost"),
    ({"specimen": "S1", "kind": "thermomagnetic", "direction": "sideways"}, InvalidValue, "direction"),
    ({"specimen": "S1", "kind": "thermomagnetic", "overrides": ["field=lots"]}, InvalidValue, "field"),
    ({"specimen": "S1", "kind": "thermomagnetic", "profile": "none-such"}, NotFound, "none-such"),
])
def test_bad_arguments_leave_nothing_behind(vault, curve, kwargs, error, match):
    vault.add_specimen("S1")
    before = snapshot(vault)
    with pytest.raises(error, match=match):
        vault.ingest(curve, **kwargs)
    assert snapshot(vault) == before


def test_missing_file_is_a_value_error(vault, tmp_path):
    vault.add_specimen("S1")
    with pytest.raises(InvalidValue, match="no such file"):
        vault.ingest(tmp_path / "nope.csv", specimen="S1", kind="thermomagnetic")


def test_utf16_with_bom_imports_and_without_bom_asks_for_an_encoding(vault, tmp_path):
    vault.add_specimen("S1")
    with_bom = tmp_path / "u16.csv"
    with_bom.write_bytes(CURVE.encode("utf-16"))  # Python writes the byte-order mark
    assert vault.ingest(with_bom, specimen="S1", kind="thermomagnetic").rows == 300
    bare = tmp_path / "u16le.csv"
    bare.write_bytes(CURVE.replace("300,", "299.5,").encode("utf-16-le"))
    with pytest.raises(InputFileError, match="encoding"):
        vault.ingest(bare, specimen="S1", kind="thermomagnetic")
    assert vault.ingest(bare, specimen="S1", kind="thermomagnetic", encoding="utf-16-le").rows == 300


def test_file_mass_disagreement_is_reported_and_recorded_mass_wins(vault, tmp_path):
    vault.add_specimen("S1", mass="10 mg")
    path = tmp_path / "sectioned.csv"
    path.write_text("mass = 10.5 mg\nfield = 5000 Oe\n[data]\nTemperature (K),Moment (emu)\n"
                    + "".join(f"{300 + i},{1e-3 * (1 - i / 100):.5e}\n" for i in range(50)))
    report = vault.ingest(path, specimen="S1", kind="thermomagnetic")
    assert any("10.5 mg" in w and "10 mg" in w for w in report.warnings)
    conditions = vault.run(report.run_id)["conditions"]
    assert conditions["mass_kg"] == pytest.approx(1e-5)
    # 5000 Oe as mu0*H = 0.5 T (NBS/IEEE table: 1 Oe <-> 1e-4 T).
    assert conditions["field_T"] == pytest.approx(0.5)


def test_diffraction_without_wavelength_is_refused_with_advice(vault, tmp_path):
    vault.add_specimen("S1")
    path = tmp_path / "pattern.xy"
    path.write_text("# 2theta (deg)  intensity (counts)\n" + "".join(f"{20 + i * 0.02:.2f} {100 + i % 7}\n"
                                                                     for i in range(200)))
    with pytest.raises(MagvaultError, match="wavelength"):
        vault.ingest(path, specimen="S1", kind="diffraction")
    report = vault.ingest(path, specimen="S1", kind="diffraction", overrides=["wavelength=Cu K-alpha1"])
    # International Tables for Crystallography Vol. C (2006), Table 4.2.2.6: Cu K-alpha1 = 1.54059292 A.
    assert vault.run(report.run_id)["conditions"]["wavelength_m"] == pytest.approx(1.54059292e-10, rel=1e-9)


def test_preview_writes_nothing(vault, curve):
    vault.add_specimen("S1")
    before = snapshot(vault)
    parsed = vault.preview(curve, kind="thermomagnetic")
    assert parsed.shape == "delimited" and "moment_A_m2" in parsed.series.columns
    assert "temperature_K" in parsed.preview()
    assert snapshot(vault) == before


def test_profile_from_run_reads_a_renamed_export(vault, tmp_path):
    vault.add_specimen("S1")
    odd = tmp_path / "odd.csv"
    odd.write_text("Probe reading (K),Signal (emu)\n" + "".join(f"{300 + i},{1e-3 * (1 - i / 100):.5e}\n"
                                                                for i in range(50)))
    report = vault.ingest(odd, specimen="S1", kind="thermomagnetic",
                          mapping="Probe reading=temperature_K,Signal=moment_A_m2")
    vault.save_profile("probe", from_run=report.run_id)
    again = tmp_path / "odd2.csv"
    again.write_text(odd.read_text().replace("300,", "299,"))
    second = vault.ingest(again, specimen="S1", kind="thermomagnetic", profile="probe")
    assert vault.series(second.run_id)["temperature_K"].iloc[0] == pytest.approx(299.0)
    assert vault.run(second.run_id)["series"][0]["profile"] == "probe"


def _ingest_same_bytes(url: str, path: str, code: str) -> int:
    import magvault as mv

    with mv.open(url) as v:
        return v.ingest(path, specimen=code, kind="thermomagnetic").run_id


def test_two_processes_storing_the_same_bytes_end_with_one_copy(db_url, curve):
    with magvault.open(db_url) as vault:
        for code in ("P1", "P2", "P3", "P4"):
            vault.add_specimen(code)
    ctx = multiprocessing.get_context("spawn")
    with ctx.Pool(4) as pool:
        ids = pool.starmap(_ingest_same_bytes, [(db_url, str(curve), c) for c in ("P1", "P2", "P3", "P4")])
    assert len(set(ids)) == 4
    with magvault.open(db_url) as vault:
        assert snapshot(vault)["raw_file"] == 1


def test_cli_ingest_prints_the_run_id_and_refuses_with_exit_1(db_url, curve):
    runner = CliRunner()
    assert runner.invoke(main, ["--db", db_url, "specimen", "add", "S1"]).exit_code == 0
    ok = runner.invoke(main, ["--db", db_url, "ingest", str(curve), "--specimen", "S1", "--kind", "thermomagnetic"])
    assert ok.exit_code == 0 and ok.stdout.strip().isdigit()
    dup = runner.invoke(main, ["--db", db_url, "ingest", str(curve), "--specimen", "S1", "--kind", "thermomagnetic"])
    assert dup.exit_code == 1 and "--again" in dup.stderr and len(dup.stderr.strip().splitlines()) == 1
    preview = runner.invoke(main, ["--db", db_url, "ingest", str(curve), "--kind", "thermomagnetic", "--preview"])
    assert preview.exit_code == 0 and "moment_A_m2" in preview.stdout
    runs = json.loads(runner.invoke(main, ["--db", db_url, "runs", "--json"]).stdout)
    assert len(runs) == 1
    assert issubclass(InputFileError, MagvaultError)


def test_many_runs_series_are_read_at_once_newest_version_first(vault, curve):
    """The overlay page reads hundreds of runs' series in one statement; each must be its run's newest."""
    from magvault.services import runs as run_service
    from magvault.store.frames import pack_frame

    vault.add_specimen("S1")
    first = vault.ingest(curve, specimen="S1", kind="thermomagnetic").run_id
    second = vault.ingest(curve, specimen="S1", kind="thermomagnetic", again=True).run_id
    planned = vault.log_run("S1", "thermomagnetic")
    corrected = vault.series(second).assign(temperature_K=lambda f: f["temperature_K"] + 0.5)
    with vault.write() as s:
        run_service.store_series(s, run_service.get_run(s, second), pack_frame(corrected),
                                 columns=list(corrected.columns), n_rows=len(corrected), shape="delimited",
                                 encoding="utf-8", profile_name=None, mapping=[])
    got = vault.series_of([first, second, planned, str(second)])
    assert set(got) == {first, second}
    pd.testing.assert_frame_equal(got[first], vault.series(first))
    pd.testing.assert_frame_equal(got[second], corrected)
    assert vault.series(second, version=1)["temperature_K"].iloc[0] + 0.5 == got[second]["temperature_K"].iloc[0]


_KILLED_IMPORT = """
import sys, time
import magvault
from magvault.services import runs

url, path, flag = sys.argv[1:4]
original = runs.store_series

def stalled(*args, **kwargs):
    # Raw bytes and run are written, the transaction is open: say so, then wait to be killed.
    open(flag, "w").close()
    time.sleep(60)
    return original(*args, **kwargs)

runs.store_series = stalled
with magvault.open(url) as vault:
    vault.ingest(path, specimen="K1", kind="thermomagnetic")
"""


def test_an_import_killed_mid_write_leaves_nothing_and_the_same_bytes_import_afterwards(db_url, curve, tmp_path):
    """DESIGN.md section 8: a killed import leaves no partial state; re-importing the bytes is recognised."""
    import signal
    import subprocess
    import sys
    import time

    with magvault.open(db_url) as vault:
        vault.add_specimen("K1")
        before = snapshot(vault)
    flag = tmp_path / "inside-the-transaction"
    child = subprocess.Popen([sys.executable, "-c", _KILLED_IMPORT, db_url, str(curve), str(flag)])
    try:
        deadline = time.monotonic() + 60
        while not flag.exists():
            assert child.poll() is None, "the import ended before reaching its write"
            assert time.monotonic() < deadline, "the import never reached its write"
            time.sleep(0.05)
        child.send_signal(signal.SIGKILL)
        child.wait(timeout=30)
    finally:
        if child.poll() is None:
            child.kill()
    with magvault.open(db_url) as vault:
        assert snapshot(vault) == before
        first = vault.ingest(curve, specimen="K1", kind="thermomagnetic")
        assert not first.reused_bytes  # nothing of the killed import survived
        with pytest.raises(Duplicate):
            vault.ingest(curve, specimen="K1", kind="thermomagnetic")
        after = snapshot(vault)
        assert after["run"] == before["run"] + 1 and after["raw_file"] == before["raw_file"] + 1

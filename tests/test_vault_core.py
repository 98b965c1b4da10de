"""The service API: opening, specimens and lineage, runs, retract/supersede, the event log."""

from __future__ import annotations

import multiprocessing
import os

import numpy as np
import pandas as pd
import pytest
from sqlalchemy import text

import magvault
from magvault.errors import Duplicate, InvalidValue, MissingDatabase, NotFound
from magvault.store.frames import pack_frame, unpack_frame


def snapshot(vault) -> dict[str, int]:
    with vault.engine.connect() as conn:
        return {t: conn.execute(text(f"SELECT count(*) FROM {t}")).scalar_one()
                for t in ("specimen", "run", "raw_file", "series", "event", "origin", "treatment")}


def test_missing_sqlite_file_is_refused_unless_created(tmp_path):
    path = tmp_path / "none.db"
    with pytest.raises(MissingDatabase, match="magvault --db .* init"):
        magvault.open(path)
    assert not path.exists()
    with magvault.open(path, create=True) as vault:
        assert vault.specimens().empty
    with magvault.open(path) as vault:  # now it exists
        assert vault.backend == "sqlite"


def test_sqlite_runs_in_wal_mode_with_foreign_keys(tmp_path):
    with magvault.open(tmp_path / "v.db", create=True) as vault:
        with vault.engine.connect() as conn:
            assert conn.exec_driver_sql("PRAGMA journal_mode").scalar().lower() == "wal"
            assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
            assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() >= 10_000


def test_specimen_lineage_and_mass(vault):
    out = vault.add_specimen("KR-1", mass="412.3+/-0.1 mg", kind="single crystal", dims="8.1 x 6.0 x 4.2 mm",
                             origin="Ridge cut")
    assert out["mass_kg"] == pytest.approx(412.3e-6)
    assert out["mass_uncertainty_kg"] == pytest.approx(0.1e-6)
    assert out["dimensions"]["values_m"] == pytest.approx([8.1e-3, 6.0e-3, 4.2e-3])
    vault.add_specimen("KR-1a", parent="KR-1", mass="200 mg")
    vault.add_specimen("KR-1a-i", parent="KR-1a", mass="50 mg")
    heavy = vault.add_specimen("KR-1b", parent="KR-1", mass="250 mg")
    assert heavy["warnings"] and "more than" in heavy["warnings"][0]  # 450 mg of pieces from 412 mg
    doc = vault.specimen("KR-1a-i")
    assert doc["lineage"]["ancestors"] == ["KR-1a", "KR-1"]
    assert doc["lineage"]["root"] == "KR-1"
    assert doc["origin"] == "Ridge cut"  # inherited from the parent crystal
    tree = doc["lineage"]["tree"]
    assert tree["code"] == "KR-1" and [c["code"] for c in tree["children"]] == ["KR-1a", "KR-1b"]
    frame = vault.specimens()
    assert list(frame["code"]) == ["KR-1", "KR-1a", "KR-1a-i", "KR-1b"]
    assert frame.set_index("code").loc["KR-1a-i", "parent"] == "KR-1a"
    assert frame["mass_kg"].dtype == np.float64


@pytest.mark.parametrize("kwargs, error, match", [
    ({"code": "A1", "mass": "-3 mg"}, InvalidValue, "greater than zero"),
    ({"code": "A1", "mass": "3"}, InvalidValue, "no unit"),
    ({"code": "A1", "mass": "3 parsec"}, InvalidValue, "not a unit of kg"),
    ({"code": "A1", "mass": "three mg"}, InvalidValue, "cannot read"),
    ({"code": "A1", "parent": "NOPE"}, NotFound, "NOPE"),
    ({"code": "bad code!"}, InvalidValue, "code"),
    ({"code": "A1", "dims": "2 by 3"}, InvalidValue, "dims"),
    ({"code": "A1", "kind": "rock"}, InvalidValue, "kind"),
    ({"code": "A1", "same_orientation": True}, InvalidValue, "--parent"),
    ({"code": "EXISTING"}, Duplicate, "already exists"),
])
def test_bad_specimen_input_changes_nothing(vault, kwargs, error, match):
    vault.add_specimen("EXISTING", mass="1 mg")
    before = snapshot(vault)
    with pytest.raises(error, match=match):
        vault.add_specimen(**kwargs)
    assert snapshot(vault) == before


def test_run_log_retract_supersede_and_events(vault):
    vault.add_specimen("P1", mass="10 mg")
    first = vault.log_run("P1", "hysteresis", started="2026-03-01T10:00Z", direction="z", group="axes-1")
    runs = vault.runs()
    assert runs["id"].dtype == np.int64
    row = runs.set_index("id").loc[first]
    assert (row["specimen"], row["kind"], row["status"], row["direction"], row["group"]) == \
        ("P1", "hysteresis", "planned", "Z", "axes-1")
    assert row["started"] == "2026-03-01T10:00:00Z"
    second = vault.log_run("P1", "hysteresis")
    with pytest.raises(InvalidValue, match="no data yet"):
        vault.supersede_run(first, by=second)
    vault.retract_run(first, reason="specimen fell off the holder")
    assert vault.runs().set_index("id").loc[first, "status"] == "retracted"
    with pytest.raises(InvalidValue, match="reason"):
        vault.retract_run(first, reason="")
    events = vault.events(specimen="P1")
    assert list(events["action"]) == ["create", "create", "create", "retract"]
    retract = events.iloc[-1]
    assert retract["before"]["status"] == "planned" and retract["after"]["status"] == "retracted"
    assert retract["message"] == "specimen fell off the holder"
    assert retract["user"]


@pytest.mark.parametrize("direction, stored", [("X", "X"), ("-y", "-Y"), ("0,0,2", "0,0,1"), ("1,1,0", "0.707107,0.707107,0")])
def test_direction_is_normalised(vault, direction, stored):
    vault.add_specimen("D1")
    run_id = vault.log_run("D1", "thermomagnetic", direction=direction)
    assert vault.run(run_id)["direction"] == stored


@pytest.mark.parametrize("kwargs, match", [
    ({"kind": "magic"}, "kind"), ({"specimen": "NOPE"}, "NOPE"), ({"direction": "Q"}, "direction"),
    ({"started": "yesterday"}, "ISO 8601"), ({"instrument": "ghost"}, "ghost"),
])
def test_bad_run_log_changes_nothing(vault, kwargs, match):
    vault.add_specimen("D1")
    before = snapshot(vault)
    args = {"specimen": "D1", "kind": "thermomagnetic", **kwargs}
    with pytest.raises((InvalidValue, NotFound), match=match):
        vault.log_run(args.pop("specimen"), args.pop("kind"), **args)
    assert snapshot(vault) == before


def test_treatment_conditions_in_si(vault):
    vault.add_specimen("T1")
    vault.add_treatment("T1", kind="anneal", at="2026-11-03T10:00Z",
                        conditions=["temperature=573K", "duration=2h", "atmosphere=argon"])
    vault.add_treatment("T1", kind="quench", at="2026-11-01", conditions={"temperature": "300 degC"})
    treatments = vault.specimen("T1")["treatments"]
    assert [t["kind"] for t in treatments] == ["quench", "anneal"]  # time order
    assert treatments[1]["conditions"] == {"temperature_K": 573.0, "duration_s": 7200.0, "atmosphere": "argon"}
    assert treatments[0]["conditions"]["temperature_K"] == pytest.approx(573.15)  # pint: 300 degC


def test_series_blob_round_trip_keeps_names_and_dtypes():
    frame = pd.DataFrame({"temperature_K": np.linspace(10, 700, 5), "moment_A_m2": np.arange(5, dtype=float),
                          "branch": pd.Series(["heating", "heating", None, "cooling", "cooling"], dtype="str"),
                          "n": np.arange(5, dtype=np.int64)})
    back = unpack_frame(pack_frame(frame))
    assert list(back.columns) == list(frame.columns)
    assert back["temperature_K"].dtype == np.float64 and back["n"].dtype == np.int64
    np.testing.assert_array_equal(back["temperature_K"], frame["temperature_K"])
    assert back["branch"].isna().tolist() == [False, False, True, False, False]
    assert back["branch"].iloc[3] == "cooling"


def _add_many(url: str, prefix: str, n: int) -> int:
    import magvault as mv

    with mv.open(url) as v:
        for i in range(n):
            v.add_specimen(f"{prefix}-{i}", mass="1 mg")
    return n


def test_concurrent_writers_lose_nothing(db_url):
    """Several processes log at once: every specimen lands, none twice, no lock error."""
    ctx = multiprocessing.get_context("spawn")
    with ctx.Pool(4) as pool:
        done = pool.starmap(_add_many, [(db_url, f"W{k}", 12) for k in range(4)])
    assert sum(done) == 48
    with magvault.open(db_url) as vault:
        codes = vault.specimens()["code"]
        assert len(codes) == 48 and codes.is_unique
        assert (vault.events()["entity"] == "specimen").sum() == 48


def test_python_module_and_public_api():
    assert callable(magvault.open)
    assert "Vault" in magvault.__all__ and magvault.Vault.__name__ == "Vault"
    assert os.path.basename(magvault.__file__) == "__init__.py"


def test_series_blobs_of_the_earlier_text_layout_still_read():
    """Blobs written before text columns were coded (fixed-width unicode plus a mask) still unpack."""
    import io

    buf = io.BytesIO()
    np.savez(buf, __columns__=np.asarray(["temperature_K", "branch"]), c0=np.array([300.0, 310.0, 320.0]),
             c1=np.asarray(["heating", "", "cooling"]), __mask__c1=np.array([False, True, False]))
    back = unpack_frame(buf.getvalue())
    assert list(back.columns) == ["temperature_K", "branch"]
    assert back["branch"].isna().tolist() == [False, True, False]
    assert back["branch"].iloc[2] == "cooling"


@pytest.mark.parametrize("branch", [[None, None], [], ["heating"] * 2])
def test_coded_text_columns_round_trip_when_empty_or_all_missing(branch):
    n = len(branch)
    frame = pd.DataFrame({"temperature_K": np.arange(n, dtype=float), "branch": pd.Series(branch, dtype="str")})
    back = unpack_frame(bytes(pack_frame(frame)))
    assert len(back) == n
    assert back["branch"].isna().tolist() == frame["branch"].isna().tolist()
    assert back["branch"].fillna("-").tolist() == frame["branch"].fillna("-").tolist()


def test_whole_column_time_text_matches_the_row_by_row_form():
    import datetime as dt

    from magvault.services.derive import iso_column, utc_column
    from magvault.timeutil import iso

    stored = ["2026-03-01 09:00:00.000000", "2026-03-01 09:00:00.250000", None,
              dt.datetime(2025, 12, 31, 23, 59, 59, 5)]
    expected = [iso(dt.datetime(2026, 3, 1, 9, 0)), iso(dt.datetime(2026, 3, 1, 9, 0, 0, 250000)), None,
                iso(dt.datetime(2025, 12, 31, 23, 59, 59, 5))]
    assert list(iso_column(utc_column(stored))) == expected

"""Bundles: the frozen dataset holds the exact bytes, SI tables, derived values and checksums.

Checked against outside definitions: SHA-256 recomputed with hashlib; the Frictionless
Data Package descriptor (every resource has a name and a path; https://specs.frictionlessdata.io,
from memory) and the Citation File Format 1.2.0 required keys (cff-version, message, title,
authors; from memory).
"""

from __future__ import annotations

import hashlib
import json

import pandas as pd
import pytest
from click.testing import CliRunner
from sqlalchemy import text

from exports import low_t_csv
from magvault.cli import main
from magvault.errors import InvalidValue


@pytest.fixture
def filled(vault, tmp_path):
    vault.add_specimen("B1", mass="5 mg")
    vault.add_specimen("B2", mass="6 mg")
    files = {}
    for code, t0 in (("B1", 32.0), ("B2", 33.0)):
        path = tmp_path / f"{code}.csv"
        path.write_text(low_t_csv(t0, seed=int(t0)))
        files[code] = path
        vault.ingest(path, specimen=code, kind="thermomagnetic")
    vault.derive(all=True)
    return vault, files


def test_bundle_holds_exact_bytes_tables_and_checksums(filled, tmp_path):
    vault, files = filled
    out = tmp_path / "dataset"
    doc = vault.bundle(out, name="lowt-paper", specimens=["B1"], title="Low-T step", authors=["postdoc"])
    assert doc["version"] == 1 and doc["specimens"] == ["B1"]
    raw = list((out / "raw").iterdir())
    assert len(raw) == 1 and raw[0].read_bytes() == files["B1"].read_bytes()
    for line in (out / "SHA256SUMS").read_text().splitlines():
        digest, rel = line.split("  ", 1)
        assert hashlib.sha256((out / rel).read_bytes()).hexdigest() == digest
    package = json.loads((out / "datapackage.json").read_text())
    assert package["name"] and all(r["name"] and r["path"] for r in package["resources"])
    assert all((out / r["path"]).is_file() for r in package["resources"])
    cff = (out / "CITATION.cff").read_text()
    for key in ("cff-version: 1.2.0", "message:", "title:", "authors:"):
        assert key in cff
    transitions = pd.read_csv(out / "derived" / "transitions.csv")
    assert set(transitions["specimen"]) == {"B1"} and "uncertainty_K" in transitions.columns
    series = pd.read_csv(next((out / "series").iterdir()))
    assert {"temperature_K", "moment_A_m2"} <= set(series.columns)
    derivations = json.loads((out / "derived" / "derivations.json").read_text())
    assert all(d["method"] and d["version"] and d["input_hashes"] for d in derivations)
    assert vault.verify(out) == []
    again = vault.bundle(tmp_path / "dataset-2", name="lowt-paper")
    assert again["version"] == 2 and again["specimens"] == ["B1", "B2"]


def test_verify_finds_changed_missing_and_added_files(filled, tmp_path):
    vault, _ = filled
    out = tmp_path / "d"
    vault.bundle(out)
    (out / "runs.csv").write_text("tampered\n")
    (out / "specimens.json").unlink()
    (out / "notes.txt").write_text("added later")
    problems = " | ".join(vault.verify(out))
    assert "runs.csv: changed" in problems and "specimens.json: missing" in problems
    assert "notes.txt: not part" in problems


def test_bundle_refuses_a_used_folder_and_an_empty_selection(filled, tmp_path):
    vault, _ = filled
    used = tmp_path / "used"
    used.mkdir()
    (used / "x").write_text("x")
    with pytest.raises(InvalidValue, match="not empty"):
        vault.bundle(used)
    with pytest.raises(InvalidValue, match="no recorded runs"):
        vault.bundle(tmp_path / "none", kinds=["calorimetry"])


def test_verify_store_detects_altered_bytes(filled, db_url):
    vault, _ = filled
    assert vault.verify() == []
    with vault.engine.begin() as conn:
        conn.execute(text("UPDATE raw_file SET data = :d WHERE id = (SELECT min(id) FROM raw_file)"), {"d": b"x"})
    assert len(vault.verify()) == 1
    result = CliRunner().invoke(main, ["--db", db_url, "verify"])
    assert result.exit_code == 1 and "do not match" in result.stdout

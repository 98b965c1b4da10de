"""The command line: DESIGN.md section 7's contract for the core commands, exit codes and JSON."""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from magvault.cli import main


@pytest.fixture
def cli(db_url):
    runner = CliRunner()

    def invoke(*args, ok=True):
        result = runner.invoke(main, ["--db", db_url, *args], catch_exceptions=False)
        if ok:
            assert result.exit_code == 0, (args, result.output, result.stderr)
        return result

    return invoke


def test_specimen_add_list_show_json(cli):
    cli("specimen", "add", "CC-1", "--mass", "12.5 mg", "--kind", "single crystal")
    cli("specimen", "add", "CC-1a", "--parent", "CC-1", "--mass", "4.0mg")
    rows = json.loads(cli("specimen", "list", "--json").stdout)
    by_code = {r["code"]: r for r in rows}
    assert by_code["CC-1a"]["parent"] == "CC-1" and by_code["CC-1"]["parent"] is None
    assert by_code["CC-1"]["mass_kg"] == pytest.approx(12.5e-6)
    assert by_code["CC-1"]["kind"] == "single crystal"
    doc = json.loads(cli("specimen", "show", "CC-1", "--json").stdout)
    assert doc["lineage"]["children"] == ["CC-1a"]
    text = cli("specimen", "show", "CC-1a").stdout
    assert "CC-1" in text and "<- this specimen" in text


@pytest.mark.parametrize("args, needle", [
    (["specimen", "add", "CC-1", "--mass", "1 mg"], "already exists"),
    (["specimen", "add", "CC-2", "--mass", "-3 mg"], "greater than zero"),
    (["specimen", "add", "CC-3", "--mass", "3"], "no unit"),
    (["specimen", "add", "CC-4", "--parent", "NOPE"], "NOPE"),
    (["specimen", "show", "NOPE"], "not found"),
    (["run", "retract", "abc", "--reason", "bad data"], "whole numbers"),
    (["run", "retract", "999", "--reason", "bad data"], "not found"),
    (["treatment", "add", "CC-1", "--kind", "anneal", "--at", "soon"], "ISO 8601"),
    (["treatment", "add", "CC-1", "--kind", "anneal", "--at", "2026-01-01", "--set", "temperature=hot"], "temperature"),
    (["events", "--since", "last week"], "ISO 8601"),
])
def test_validated_values_exit_1_with_one_line(cli, args, needle):
    cli("specimen", "add", "CC-1", "--mass", "12.5 mg")
    before = cli("events", "--json").stdout
    result = cli(*args, ok=False)
    assert result.exit_code == 1, result.output
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and needle in lines[0], result.stderr
    assert "Traceback" not in result.output
    assert cli("events", "--json").stdout == before


@pytest.mark.parametrize("args", [
    ["bogus"], ["specimen", "add"], ["runs", "--kind", "nonsense"], ["specimen", "list", "--nope"],
    ["run", "retract", "1"],
])
def test_usage_errors_exit_2(cli, args):
    result = cli(*args, ok=False)
    assert result.exit_code == 2, result.output


def test_runs_json_and_kinds_json(cli):
    cli("specimen", "add", "CC-1")
    run_id = int(cli("run", "log", "--specimen", "CC-1", "--kind", "thermomagnetic", "--started",
                     "2026-02-02T08:00Z").stdout)
    rows = json.loads(cli("runs", "--json").stdout)
    assert rows == [{**rows[0], "id": run_id, "specimen": "CC-1", "kind": "thermomagnetic", "status": "planned",
                     "started": "2026-02-02T08:00:00Z"}]
    kinds = json.loads(cli("kinds", "--json").stdout)
    by_id = {k["id"]: k for k in kinds}
    for k in kinds:
        assert {"id", "name", "typical_K", "window_K", "run_kinds"} <= set(k)
    # Facts of the trade (common practice, no single source; DESIGN.md section 3):
    assert 30 <= by_id["low-t"]["typical_K"][0] <= by_id["low-t"]["typical_K"][1] <= 34
    assert by_id["low-t"]["window_K"] == [20.0, 45.0]
    assert by_id["ordering"]["typical_K"][0] <= 590 <= by_id["ordering"]["typical_K"][1]


def test_every_command_has_help():
    runner = CliRunner()

    def walk(group, path):
        for name, cmd in group.commands.items():
            result = runner.invoke(main, [*path, name, "--help"])
            assert result.exit_code == 0, (path, name, result.output)
            assert cmd.help or cmd.short_help, f"{' '.join(path + [name])} has no help text"
            if hasattr(cmd, "commands"):
                walk(cmd, [*path, name])

    walk(main, [])


def test_missing_database_is_a_one_line_error(tmp_path):
    result = CliRunner().invoke(main, ["--db", str(tmp_path / "nothing.db"), "specimen", "list"])
    assert result.exit_code == 1
    assert "init" in result.stderr and len(result.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "nothing.db").exists()


def test_db_from_environment(tmp_path, monkeypatch):
    monkeypatch.setenv("MAGVAULT_DB", str(tmp_path / "env.db"))
    assert CliRunner().invoke(main, ["init"]).exit_code == 0
    assert (tmp_path / "env.db").exists()

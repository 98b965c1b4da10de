"""The JSON API: mirrors the Vault's queries, validates parameters, and is described by OpenAPI 3.1.

Outside references: RFC 8259 (JSON has no NaN or Infinity: documents are parsed
with a parser that refuses them) and the OpenAPI Specification 3.1.0 (required
fields of the document, operations and parameters; schemas are JSON Schema
2020-12, where a nullable type is written ["number", "null"]).
"""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pytest

from magvault.paths import part

from browser.webui_data import build_collection

webui = part("webui")


def _strict(text: str):
    def refuse(name):
        raise AssertionError(f"{name} is not JSON (RFC 8259)")

    return json.loads(text, parse_constant=refuse)


@pytest.fixture
def api(vault, db_url):
    made = build_collection(vault)
    app = webui.create_app(db_url, {"TESTING": True})
    client = app.test_client()

    def get(url, status=200, **query):
        r = client.get(url, query_string=query or None)
        assert r.status_code == status, (url, r.status_code, r.get_data(as_text=True)[:500])
        assert r.mimetype == "application/json"
        return _strict(r.get_data(as_text=True))

    yield get, vault, made, app
    app.extensions["magvault"].close()


def test_specimens_mirror_the_vault_with_nulls_for_missing_values(api):
    get, vault, made, _ = api
    rows = get("/api/specimens")
    frame = vault.specimens()
    assert [r["code"] for r in rows] == list(frame["code"])
    by_code = {r["code"]: r for r in rows}
    root = by_code[made.root]
    assert root["parent"] is None and root["mass_kg"] == pytest.approx(310e-6)
    assert root["mass_uncertainty_kg"] == pytest.approx(0.1e-6)
    assert by_code[made.piece]["composition_inherited"] is True
    assert by_code[made.piece]["x"] == pytest.approx(frame.set_index("code").loc[made.piece, "x"])
    assert by_code[made.piece]["n_runs"] == 2
    assert [r["code"] for r in get("/api/specimens", run_kind="hysteresis")] == [made.piece]
    assert [r["code"] for r in get("/api/specimens", x_max="0.05")] == [made.powder]
    masses = [r["mass_kg"] for r in get("/api/specimens", sort="mass", order="desc")]
    assert masses == sorted(masses, reverse=True)


def test_one_specimen_and_its_lineage(api):
    get, vault, made, _ = api
    doc = get(f"/api/specimens/{made.piece}")
    assert doc["lineage"]["ancestors"] == [made.root]
    assert [c["code"] for c in doc["lineage"]["descendants"]] == [made.grandchild]
    assert [r["id"] for r in doc["runs"]] == [made.thermo_run, made.loop_run]
    assert doc["orientation"]["inherited"] is True
    error = get("/api/specimens/NOPE", status=404)
    assert error == {"error": "specimen 'NOPE' not found; `magvault specimen list` shows the codes",
                     "field": "specimen", "status": 404}


def test_runs_and_one_run(api):
    get, vault, made, _ = api
    rows = get("/api/runs")
    assert [r["id"] for r in rows] == list(vault.runs()["id"])
    planned = next(r for r in rows if r["id"] == made.planned_run)
    assert planned["status"] == "planned" and planned["n_rows"] is None and planned["sha256"] is None
    assert [r["id"] for r in get("/api/runs", kind="hysteresis")] == [made.loop_run]
    assert [r["id"] for r in get("/api/runs", specimen=made.second_piece)] == [made.planned_run]
    run = get(f"/api/runs/{made.thermo_run}")
    assert run["raw_file"]["name"] == "tf1a_heating.csv" and run["series"][0]["n_rows"] == 3000
    assert get(f"/api/runs/{made.thermo_run}/derivations") == vault.derivations(made.thermo_run)


def test_series_full_and_decimated(api):
    get, vault, made, _ = api
    full = get(f"/api/runs/{made.thermo_run}/series")
    frame = vault.series(made.thermo_run)
    assert full["n_rows"] == full["n_returned"] == len(frame) and not full["decimated"]
    assert full["columns"] == list(frame.columns)
    np.testing.assert_allclose(full["data"]["moment_A_m2"], frame["moment_A_m2"], rtol=0, atol=0)
    small = get(f"/api/runs/{made.thermo_run}/series", max_points="300")
    assert small["decimated"] and 2 <= small["n_returned"] <= 300 * 2  # at most 300 per branch
    t = small["data"]["temperature_K"]
    assert t[0] == frame["temperature_K"].iloc[0] and t[-1] == frame["temperature_K"].iloc[-1]
    peak = frame["moment_A_m2"].abs().max()
    assert max(abs(v) for v in small["data"]["moment_A_m2"]) == peak  # LTTB keeps the extreme


def test_derived_values_and_the_catalogue(api):
    get, vault, made, _ = api
    rows = get("/api/transitions")
    assert [(r["kind"], r["temperature_K"], r["uncertainty_K"], r["run"]) for r in rows] == \
        [("ordering", 597.9, 1.2, made.thermo_run)]
    assert get("/api/transitions", kind="low-t") == [] and get("/api/transitions", branch="cooling") == []
    results = {r["quantity"]: r for r in get("/api/results", specimen=made.piece)}
    assert results["Hc"]["value"] == 0.0123 and results["Hc"]["unit"] == "T"
    assert results["Ms"]["block_temperature_K"] is None
    assert get("/api/results", run=str(made.planned_run)) == []
    kinds = get("/api/kinds")
    assert {k["id"] for k in kinds} == {k["id"] for k in vault.kinds()}
    assert get("/api/counts") == vault.counts()
    events = get("/api/events", specimen=made.root)
    assert events and all(e["specimen"] == made.root for e in events)
    assert get("/api/events", since="2999-01-01") == []
    assert len(get("/api/events", limit="3")) == 3


@pytest.mark.parametrize("url, query, field, words", [
    ("/api/runs", {"kind": "sideways"}, "kind", "Must be one of"),
    ("/api/runs", {"colour": "red"}, "colour", "unknown parameter; this route takes: specimen, kind, status"),
    ("/api/transitions", {"run": "abc"}, "run", "Not a valid integer"),
    ("/api/transitions", {"run": "2147483648"}, "run", "less than or equal to 2147483647"),
    ("/api/events", {"since": "last week"}, "since", "cannot read 'last week'"),
    ("/api/specimens", {"x_min": "0.2", "x_max": "0.1"}, "x_max", "below x_min"),
    ("/api/specimens", {"x_min": "-1e999"}, "x_min", ""),
    ("/api/runs/1/series", {"max_points": "1"}, "max_points", "greater than or equal to 2"),
])
def test_bad_parameters_are_400_naming_the_parameter(api, url, query, field, words):
    get, *_ = api
    error = get(url, status=400, **query)
    assert error["field"] == field and error["status"] == 400
    assert error["error"].startswith(f"{field}: ") and words in error["error"]


def test_unknown_records_are_404(api):
    get, *_ = api
    assert get("/api/runs/999999", status=404)["field"] == "run"
    assert get("/api/runs/999999/series", status=404)["status"] == 404
    assert "openapi.json" in get("/api/nothing-here", status=404)["error"]


def test_openapi_document_describes_every_route_and_what_it_returns(api):
    get, vault, made, app = api
    doc = get("/api/openapi.json")
    # OpenAPI Specification 3.1.0: required fields of the document, info, operations and parameters.
    assert doc["openapi"].startswith("3.1.")
    assert doc["info"]["title"] and doc["info"]["version"]
    api_rules = {re.sub(r"<(?:[a-z]+(?:\([^)]*\))?:)?(\w+)>", r"{\1}", r.rule) for r in app.url_map.iter_rules()
                 if r.rule.startswith("/api/") and r.rule not in ("/api/", "/api/openapi.json")}
    assert set(doc["paths"]) == api_rules
    for path, item in doc["paths"].items():
        op = item["get"]
        assert op["responses"]["200"]["content"]["application/json"]["schema"]
        templated = set(re.findall(r"{(\w+)}", path))
        in_path = {p["name"] for p in op["parameters"] if p["in"] == "path"}
        assert templated == in_path and all(p["required"] for p in op["parameters"] if p["in"] == "path")
        assert len({(p["name"], p["in"]) for p in op["parameters"]}) == len(op["parameters"])
    # Each documented response has exactly the documented properties, of the documented JSON types.
    schemas = doc["components"]["schemas"]
    samples = {
        "/api/specimens": get("/api/specimens"), "/api/runs": get("/api/runs"),
        "/api/runs/{run_id}": get(f"/api/runs/{made.thermo_run}"),
        "/api/runs/{run_id}/series": get(f"/api/runs/{made.thermo_run}/series", max_points="50"),
        "/api/events": get("/api/events", limit="20"), "/api/kinds": get("/api/kinds"),
        "/api/counts": get("/api/counts"), "/api/specimens/{code}": get(f"/api/specimens/{made.piece}"),
    }
    for path, body in samples.items():
        schema = doc["paths"][path]["get"]["responses"]["200"]["content"]["application/json"]["schema"]
        items = body if schema.get("type") == "array" else [body]
        ref = schema["items"]["$ref"] if schema.get("type") == "array" else schema["$ref"]
        component = schemas[ref.rsplit("/", 1)[1]]
        for item in items:
            assert set(item) == set(component["properties"]), path
            for name, value in item.items():
                _check_type(value, component["properties"][name], f"{path}.{name}")


_JSON_TYPES = {"string": str, "integer": int, "number": (int, float), "boolean": bool, "object": dict,
               "array": list, "null": type(None)}


def _check_type(value, schema, where):
    if "type" not in schema:
        return
    types = schema["type"] if isinstance(schema["type"], list) else [schema["type"]]
    ok = any(isinstance(value, _JSON_TYPES[t]) and not (t in ("integer", "number") and isinstance(value, bool))
             for t in types)
    assert ok, f"{where}: {value!r} is not {types}"
    if isinstance(value, float):
        assert math.isfinite(value)

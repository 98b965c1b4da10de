"""The JSON API under /api/: read-only mirrors of the Vault's queries, described at /api/openapi.json.

Every route validates its query string with a marshmallow schema (unknown or
bad parameters are a 400 naming the parameter), asks the Vault, and serialises
with an output schema.  Missing values are ``null`` (never NaN: the documents
are strict JSON).
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
from flask import Blueprint, Response, request, url_for
from marshmallow import Schema, ValidationError

import magvault
from magvault.errors import InvalidValue

from .. import apischema as S
from ..figures import _groups, choose_axes, decimate, group_column
from ..selection import Selection, select_specimens
from .common import plain, records, vault

bp = Blueprint("api", __name__, url_prefix="/api")


@dataclass(frozen=True)
class Route:
    rule: str
    endpoint: str
    summary: str
    query: Schema
    response: Schema
    many: bool


ROUTES: list[Route] = []


def documented(rule: str, summary: str, query: type[Schema] = S.NoQuery, response: type[Schema] | None = None,
               many: bool = False):
    """Register a GET route and its description for the OpenAPI document."""
    def wrap(view: Callable):
        ROUTES.append(Route(rule, view.__name__, summary, query(), response() if response else None, many))
        bp.add_url_rule(rule, view.__name__, view, methods=["GET"])
        return view
    return wrap


def json_response(doc: Any, status: int = 200) -> Response:
    body = json.dumps(doc, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
    return Response(body, status=status, mimetype="application/json")


def args_for(schema: Schema) -> dict[str, Any]:
    """The query string loaded by ``schema``; a bad or unknown parameter is an InvalidValue naming it."""
    raw = {k: v for k, v in request.args.items()}
    try:
        return schema.load(raw)
    except ValidationError as exc:
        name = sorted(exc.messages, key=str)[0]
        message = exc.messages[name]
        text = message[0] if isinstance(message, list) and message else str(message)
        if text == "Unknown field.":
            known = ", ".join(schema.fields) or "no parameters"
            text = f"unknown parameter; this route takes: {known}"
        raise InvalidValue(f"{name}: {text}", field=str(name)) from None


def dump(schema: Schema, doc: Any, many: bool = False) -> Any:
    return schema.dump(plain(doc), many=many)


RUN_ID = "<int(min=1, max=2147483647):run_id>"


@bp.get("/")
def index():
    return json_response({
        "name": "magvault", "version": magvault.__version__,
        "openapi": url_for("api.openapi"),
        "routes": [{"path": _openapi_path(r.rule), "summary": r.summary} for r in ROUTES],
    })


@documented("/specimens", "Specimens with composition, origin and run counts; filterable and sortable",
            S.SpecimensQuery, S.SpecimenRow, many=True)
def specimens():
    a = args_for(S.SpecimensQuery())
    v = vault()
    sel = Selection(q=a.get("q"), origin=a.get("origin"), superstructure=a.get("superstructure"),
                    x_min=a.get("x_min"), x_max=a.get("x_max"), run_kind=a.get("run_kind"),
                    transition=a.get("transition"), sort=a.get("sort", "code"), descending=a.get("order") == "desc")
    with_run_kind = set(v.runs(kind=sel.run_kind)["specimen"]) if sel.run_kind else None
    with_transition = None
    if sel.transition:
        with_transition = set(v.transitions(kind=sel.transition, primary_only=True)["specimen"])
    frame = select_specimens(v.specimens(), sel, with_run_kind=with_run_kind, with_transition=with_transition)
    return json_response(dump(S.SpecimenRow(), records(frame), many=True))


@documented("/specimens/<path:code>", "One specimen: lineage, orientation, compositions, treatments, runs",
            S.NoQuery, S.SpecimenDetail)
def specimen(code: str):
    args_for(S.NoQuery())
    return json_response(dump(S.SpecimenDetail(), vault().specimen(code)))


@documented("/runs", "Runs, oldest first", S.RunsQuery, S.RunRow, many=True)
def runs():
    a = args_for(S.RunsQuery())
    return json_response(dump(S.RunRow(), records(vault().runs(**a)), many=True))


@documented(f"/runs/{RUN_ID}", "One run with its series versions and raw file", S.NoQuery, S.RunDetail)
def run(run_id: int):
    args_for(S.NoQuery())
    return json_response(dump(S.RunDetail(), vault().run(run_id)))


@documented(f"/runs/{RUN_ID}/series", "A run's normalised series in SI, optionally decimated (LTTB)",
            S.SeriesQuery, S.SeriesDoc)
def series(run_id: int):
    a = args_for(S.SeriesQuery())
    v = vault()
    doc = v.run(run_id)
    frame = v.series(run_id, version=a.get("version"))
    version = a.get("version") or (doc["series"][-1]["version"] if doc["series"] else 1)
    n_rows = len(frame)
    max_points = a.get("max_points")
    if max_points and n_rows > max_points:
        axes = choose_axes(frame, doc["kind"])
        if axes is not None:
            x, y = (frame[c].to_numpy(dtype=float) for c in axes)
            keep = np.sort(np.concatenate([rows[decimate(x[rows], y[rows], max_points)]
                                           for _, rows in _groups(frame, group_column(frame))]))
            frame = frame.iloc[keep]
    data = {str(c): plain(frame[c].tolist()) for c in frame.columns}
    return json_response(dump(S.SeriesDoc(), {
        "run": run_id, "version": version, "n_rows": n_rows, "n_returned": len(frame),
        "decimated": len(frame) < n_rows, "columns": [str(c) for c in frame.columns], "data": data}))


@documented(f"/runs/{RUN_ID}/derivations", "How each derived value of a run was made", S.NoQuery,
            S.DerivationRow, many=True)
def derivations(run_id: int):
    args_for(S.NoQuery())
    return json_response(dump(S.DerivationRow(), vault().derivations(run_id), many=True))


@documented("/transitions", "Derived transition temperatures (K) with uncertainties", S.TransitionsQuery,
            S.TransitionRow, many=True)
def transitions():
    a = args_for(S.TransitionsQuery())
    return json_response(dump(S.TransitionRow(), records(vault().transitions(**a)), many=True))


@documented("/results", "Other derived values (SI) with uncertainties", S.ResultsQuery, S.ResultRow, many=True)
def results():
    a = args_for(S.ResultsQuery())
    return json_response(dump(S.ResultRow(), records(vault().results(**a)), many=True))


@documented("/events", "The audit log, oldest first", S.EventsQuery, S.EventRow, many=True)
def events():
    a = args_for(S.EventsQuery())
    return json_response(dump(S.EventRow(), records(vault().events(**a)), many=True))


@documented("/kinds", "The transition catalogue", S.NoQuery, S.KindRow, many=True)
def kinds():
    args_for(S.NoQuery())
    return json_response(dump(S.KindRow(), vault().kinds(), many=True))


@documented("/counts", "Numbers of specimens, runs, compositions, orientations, treatments", S.NoQuery, S.Counts)
def counts():
    args_for(S.NoQuery())
    return json_response(dump(S.Counts(), vault().counts()))


# --- OpenAPI ------------------------------------------------------------------------------------

_CONVERTER = re.compile(r"<(?:(?P<conv>[a-z]+)(?:\([^)]*\))?:)?(?P<name>\w+)>")


def _openapi_path(rule: str) -> str:
    return "/api" + _CONVERTER.sub(lambda m: "{" + m.group("name") + "}", rule)


def _path_parameters(rule: str) -> list[dict[str, Any]]:
    out = []
    for m in _CONVERTER.finditer(rule):
        schema: dict[str, Any] = ({"type": "integer", "minimum": 1, "maximum": S.MAX_ID}
                                  if m.group("conv") == "int" else {"type": "string"})
        out.append({"name": m.group("name"), "in": "path", "required": True, "schema": schema})
    return out


def openapi_document() -> dict[str, Any]:
    components: dict[str, Any] = {"ErrorDoc": S.json_schema(S.ErrorDoc())}
    paths: dict[str, Any] = {}
    error = {"description": "bad parameter or unknown record",
             "content": {"application/json": {"schema": {"$ref": "#/components/schemas/ErrorDoc"}}}}
    for r in ROUTES:
        name = type(r.response).__name__
        components[name] = S.json_schema(r.response)
        ref: dict[str, Any] = {"$ref": f"#/components/schemas/{name}"}
        body = {"type": "array", "items": ref} if r.many else ref
        paths[_openapi_path(r.rule)] = {"get": {
            "operationId": r.endpoint, "summary": r.summary,
            "parameters": _path_parameters(r.rule) + S.query_parameters(r.query),
            "responses": {"200": {"description": "OK", "content": {"application/json": {"schema": body}}},
                          "400": error, "404": error},
        }}
    return {
        "openapi": "3.1.0",
        "info": {"title": "magvault dashboard API", "version": magvault.__version__,
                 "description": "Read-only JSON mirrors of the vault's queries. Values are SI; names carry "
                                "their unit (temperature_K, mass_kg). Missing values are null."},
        "servers": [{"url": "/"}],
        "paths": paths,
        "components": {"schemas": components},
    }


@bp.get("/openapi.json")
def openapi():
    return json_response(openapi_document())

"""marshmallow schemas of the JSON API (query parameters in, documents out) and their OpenAPI form.

Query schemas refuse unknown parameters, so a typo is a 400 naming the
parameter rather than a silently ignored filter.  Output schemas fix the
fields and types each route returns; :func:`json_schema` turns both into the
JSON Schema that /api/openapi.json publishes (OpenAPI 3.1 uses JSON Schema
2020-12, so ``"type": ["number", "null"]`` marks a nullable number).
"""

from __future__ import annotations

from typing import Any

from marshmallow import RAISE, Schema, ValidationError, fields, validate, validates_schema

from magvault.store.models import BRANCHES, RUN_KINDS, RUN_STATUSES

from .selection import SORT_KEYS

MAX_ID = 2_147_483_647


def _id(**kw):
    return fields.Integer(validate=validate.Range(1, MAX_ID), metadata={"description": "a run id"}, **kw)


def _text(max_len: int = 200, **kw):
    return fields.String(validate=validate.Length(1, max_len), **kw)


# --- query parameters -------------------------------------------------------------------------

class Query(Schema):
    class Meta:
        unknown = RAISE


class SpecimensQuery(Query):
    q = _text(100, metadata={"description": "text in code, parent, origin, storage, kind or superstructure"})
    origin = _text()
    superstructure = _text(16)
    x_min = fields.Float(validate=validate.Range(0, 1), metadata={"description": "lowest x in Fe(1-x)S"})
    x_max = fields.Float(validate=validate.Range(0, 1), metadata={"description": "highest x in Fe(1-x)S"})
    run_kind = fields.String(validate=validate.OneOf(RUN_KINDS))
    transition = _text(32, metadata={"description": "a transition kind id (see /api/kinds)"})
    sort = fields.String(validate=validate.OneOf(tuple(SORT_KEYS)))
    order = fields.String(validate=validate.OneOf(("asc", "desc")))

    @validates_schema
    def _range(self, data, **kwargs):
        if data.get("x_min") is not None and data.get("x_max") is not None and data["x_max"] < data["x_min"]:
            raise ValidationError("x_max is below x_min; give the range low to high", field_name="x_max")


class RunsQuery(Query):
    specimen = _text(64)
    kind = fields.String(validate=validate.OneOf(RUN_KINDS))
    status = fields.String(validate=validate.OneOf(RUN_STATUSES))


class SeriesQuery(Query):
    version = fields.Integer(validate=validate.Range(1, MAX_ID),
                             metadata={"description": "series version (newest by default)"})
    max_points = fields.Integer(validate=validate.Range(2, 10_000_000),
                                metadata={"description": "decimate each curve to this many points (LTTB)"})


class TransitionsQuery(Query):
    specimen = _text(64)
    kind = _text(32)
    run = _id()
    method = _text(64)
    primary_only = fields.Boolean()
    branch = fields.String(validate=validate.OneOf(BRANCHES))
    all_versions = fields.Boolean()


class ResultsQuery(Query):
    specimen = _text(64)
    run = _id()
    quantity = _text(64)
    all_versions = fields.Boolean()


class EventsQuery(Query):
    specimen = _text(64)
    user = _text(64)
    since = _text(40, metadata={"description": "ISO 8601 date or date-time (UTC when no zone)"})
    until = _text(40, metadata={"description": "ISO 8601 date or date-time (UTC when no zone)"})
    limit = fields.Integer(validate=validate.Range(1, 100_000), metadata={"description": "newest N events"})


class NoQuery(Query):
    pass


# --- documents out -----------------------------------------------------------------------------

def _s(**kw):
    return fields.String(allow_none=True, **kw)


def _f(**kw):
    return fields.Float(allow_none=True, **kw)


class SpecimenRow(Schema):
    code = fields.String(required=True)
    parent = _s()
    kind = _s()
    mass_kg = _f()
    mass_uncertainty_kg = _f()
    origin = _s()
    x = _f(metadata={"description": "x in Fe(1-x)S (inherited from an ancestor when not analysed)"})
    x_uncertainty = _f()
    superstructure = _s()
    composition_inherited = fields.Boolean(allow_none=True)
    oriented = fields.Boolean()
    n_runs = fields.Integer()
    storage = _s()
    created_at = _s()


class RunRow(Schema):
    id = fields.Integer(required=True)
    specimen = fields.String()
    kind = fields.String()
    status = fields.String()
    started = _s()
    finished = _s()
    instrument = _s()
    operator = _s()
    direction = _s()
    group = _s()
    source_name = _s()
    sha256 = _s()
    n_rows = fields.Integer(allow_none=True)
    conditions = fields.Dict(allow_none=True)


class RunDetail(Schema):
    id = fields.Integer(required=True)
    specimen = fields.String()
    kind = fields.String()
    status = fields.String()
    started = _s()
    finished = _s()
    instrument = _s()
    operator = _s()
    direction = _s()
    group = _s()
    conditions = fields.Dict(allow_none=True)
    source_name = _s()
    sha256 = _s()
    notes = _s()
    reason = _s()
    superseded_by = fields.Integer(allow_none=True)
    series = fields.List(fields.Dict())
    raw_file = fields.Dict(allow_none=True)


class SpecimenDetail(Schema):
    code = fields.String(required=True)
    parent = _s()
    kind = _s()
    mass_kg = _f()
    mass_uncertainty_kg = _f()
    dimensions = fields.Dict(allow_none=True)
    origin = _s()
    same_orientation = fields.Boolean()
    storage = _s()
    notes = _s()
    created_at = _s()
    lineage = fields.Dict()
    orientation = fields.Dict(allow_none=True)
    compositions = fields.List(fields.Dict())
    composition = fields.Dict(allow_none=True)
    x = _f()
    x_uncertainty = _f()
    treatments = fields.List(fields.Dict())
    timeline = fields.List(fields.Dict())
    runs = fields.List(fields.Dict())
    images = fields.List(fields.Dict())


class SeriesDoc(Schema):
    run = fields.Integer()
    version = fields.Integer()
    n_rows = fields.Integer(metadata={"description": "rows in the stored series"})
    n_returned = fields.Integer()
    decimated = fields.Boolean()
    columns = fields.List(fields.String())
    data = fields.Dict(keys=fields.String(), values=fields.List(fields.Raw(allow_none=True)))


class TransitionRow(Schema):
    specimen = fields.String()
    run = fields.Integer()
    kind = fields.String()
    temperature_K = fields.Float()
    uncertainty_K = _f()
    method = fields.String()
    branch = _s()
    component = fields.Integer()
    primary = fields.Boolean()
    width_K = _f()
    ambiguous = fields.Boolean()
    derivation = fields.Integer()
    current = fields.Boolean()
    run_kind = fields.String()
    started = _s()


class ResultRow(Schema):
    specimen = fields.String()
    run = fields.Integer()
    quantity = fields.String()
    value = _f()
    uncertainty = _f()
    unit = _s()
    method = fields.String()
    block_temperature_K = _f()
    branch = _s()
    derivation = fields.Integer()
    current = fields.Boolean()
    run_kind = fields.String()


class DerivationRow(Schema):
    id = fields.Integer()
    method = fields.String()
    version = fields.String()
    parameters = fields.Dict(allow_none=True)
    input_runs = fields.List(fields.Integer())
    input_hashes = fields.List(fields.String())
    software_version = _s()
    operator = _s()
    created_at = _s()
    current = fields.Boolean()
    warnings = fields.List(fields.String(), allow_none=True)
    n_transitions = fields.Integer()
    n_results = fields.Integer()


class EventRow(Schema):
    id = fields.Integer()
    at = fields.String()
    user = _s()
    action = fields.String()
    entity = fields.String()
    entity_id = _s()
    specimen = _s()
    message = _s()
    before = fields.Raw(allow_none=True)
    after = fields.Raw(allow_none=True)


class KindRow(Schema):
    id = fields.String()
    name = fields.String()
    typical_K = fields.List(fields.Float())
    window_K = fields.List(fields.Float())
    run_kinds = fields.List(fields.String())
    mineral = _s()
    note = _s()
    seeded = fields.Boolean()


class Counts(Schema):
    specimens = fields.Integer()
    runs = fields.Integer()
    compositions = fields.Integer()
    orientations = fields.Integer()
    treatments = fields.Integer()


class ErrorDoc(Schema):
    error = fields.String(required=True, metadata={"description": "one line naming what to fix"})
    field = _s()
    status = fields.Integer()


# --- JSON Schema for the OpenAPI description ------------------------------------------------

def field_schema(field: fields.Field) -> dict[str, Any]:
    """JSON Schema (2020-12, as OpenAPI 3.1 uses it) of one marshmallow field."""
    if isinstance(field, fields.Nested):
        out: dict[str, Any] = {"$ref": f"#/components/schemas/{type(field.schema).__name__}"}
    elif isinstance(field, fields.List):
        out = {"type": "array", "items": field_schema(field.inner)}
    elif isinstance(field, fields.Dict):
        out = {"type": "object"}
        if field.value_field is not None:
            out["additionalProperties"] = field_schema(field.value_field)
    elif isinstance(field, fields.Boolean):
        out = {"type": "boolean"}
    elif isinstance(field, fields.Integer):
        out = {"type": "integer"}
    elif isinstance(field, (fields.Float, fields.Number)):
        out = {"type": "number"}
    elif isinstance(field, fields.String):
        out = {"type": "string"}
    else:
        out = {}
    for v in field.validators:
        if isinstance(v, validate.OneOf):
            out["enum"] = list(v.choices)
        elif isinstance(v, validate.Range):
            if v.min is not None:
                out["minimum"] = v.min
            if v.max is not None:
                out["maximum"] = v.max
        elif isinstance(v, validate.Length):
            if v.min is not None:
                out["minLength"] = v.min
            if v.max is not None:
                out["maxLength"] = v.max
    if field.allow_none and "type" in out:
        out["type"] = [out["type"], "null"]
    description = (field.metadata or {}).get("description")
    if description:
        out["description"] = description
    return out


def json_schema(schema: Schema) -> dict[str, Any]:
    props = {name: field_schema(f) for name, f in schema.fields.items()}
    required = [name for name, f in schema.fields.items() if f.required]
    out: dict[str, Any] = {"type": "object", "properties": props}
    if required:
        out["required"] = required
    return out


def query_parameters(schema: Schema) -> list[dict[str, Any]]:
    return [{"name": name, "in": "query", "required": bool(f.required), "schema": field_schema(f)}
            for name, f in schema.fields.items()]

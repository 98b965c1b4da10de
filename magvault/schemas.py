"""Validation at the boundary: marshmallow schemas for everything a user hands the vault.

The CLI, the web app and notebooks pass plain strings and numbers; the schemas
turn them into SI values and refuse bad input with a message that names the
field.  :func:`load` converts marshmallow's errors into one :class:`InvalidValue`.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np
from marshmallow import EXCLUDE, Schema, ValidationError, fields, validate, validates_schema

from .errors import InvalidValue
from .vocabulary import INSTRUMENT_KINDS, RUN_KINDS, RUN_STATUSES, SPECIMEN_KINDS
from .timeutil import parse_datetime
from .units import Measured, parse_quantity

CODE_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._/-]{0,63}$")


def load(schema: Schema, data: dict[str, Any]) -> dict[str, Any]:
    """Validate ``data``; raise :class:`InvalidValue` naming the first bad field."""
    try:
        return schema.load(data)
    except ValidationError as exc:
        field, message = _first_message(exc.messages)
        raise InvalidValue(f"{field}: {message}", field=field) from None


def _first_message(messages: Any, prefix: str = "") -> tuple[str, str]:
    if isinstance(messages, dict):
        key = sorted(messages, key=str)[0]
        name = f"{prefix}.{key}" if prefix else str(key)
        return _first_message(messages[key], name)
    if isinstance(messages, list) and messages:
        first = messages[0]
        if isinstance(first, (dict, list)):
            return _first_message(first, prefix)
        return prefix or "value", str(first)
    return prefix or "value", str(messages)


class Code(fields.String):
    """A specimen (or instrument, profile) code: letters, digits and ._/- up to 64 characters."""

    def _deserialize(self, value, attr, data, **kwargs):
        text = super()._deserialize(value, attr, data, **kwargs).strip()
        if not CODE_PATTERN.match(text):
            raise ValidationError(f"{text!r} is not a valid code: use 1-64 letters, digits, '.', '_', '/' "
                                  "or '-', starting with a letter or digit")
        return text


class Name(fields.String):
    """A free name (instrument, origin, profile): 1-64 printable characters, spaces allowed."""

    def _deserialize(self, value, attr, data, **kwargs):
        text = super()._deserialize(value, attr, data, **kwargs).strip()
        if not text or len(text) > 64 or any(not c.isprintable() for c in text):
            raise ValidationError(f"{text!r} is not a usable name: 1-64 printable characters")
        return text


class Quantity(fields.Field):
    """Text such as '12.5 mg' or '12.50+/-0.02 mg' -> :class:`Measured` in SI."""

    def __init__(self, dimension: str, *, positive: bool = False, **kwargs):
        super().__init__(**kwargs)
        self.dimension, self.positive = dimension, positive

    def _deserialize(self, value, attr, data, **kwargs) -> Measured:
        if isinstance(value, Measured):
            return value
        try:
            return parse_quantity(str(value), dimension=self.dimension, field=attr or "value",
                                  positive=self.positive)
        except InvalidValue as exc:
            # parse_quantity prefixes the field name; load() adds it again
            raise ValidationError(exc.message.split(": ", 1)[-1]) from None


class When(fields.Field):
    """An ISO 8601 date or date-time, UTC when no zone is given."""

    def _deserialize(self, value, attr, data, **kwargs):
        try:
            return parse_datetime(value, field=attr or "date")
        except InvalidValue as exc:
            raise ValidationError(exc.message.split(": ", 1)[-1]) from None


class Dimensions(fields.Field):
    """'2.1 x 1.5 x 0.8 mm' (optionally '+/- 0.05 mm') -> {'values_m', 'uncertainty_m', 'text'}."""

    _PATTERN = re.compile(
        r"^\s*(?P<nums>[0-9.eE+-]+(?:\s*[x×*]\s*[0-9.eE+-]+){0,2})\s*"
        r"(?:(?:\+/-|±)\s*(?P<unc>[0-9.eE+-]+))?\s*(?P<unit>[A-Za-zµμ]+)\s*$")

    def _deserialize(self, value, attr, data, **kwargs):
        m = self._PATTERN.match(str(value))
        if not m:
            raise ValidationError(f"cannot read {value!r}; expected e.g. '2.1 x 1.5 x 0.8 mm' "
                                  "or '2.1 x 1.5 x 0.8 +/- 0.05 mm'")
        unit = m.group("unit").replace("µ", "u").replace("μ", "u")
        try:
            nums = [parse_quantity(f"{n} {unit}", dimension="m", field=attr, positive=True).value
                    for n in re.split(r"\s*[x×*]\s*", m.group("nums"))]
            unc = (parse_quantity(f"{m.group('unc')} {unit}", dimension="m", field=attr).value
                   if m.group("unc") else None)
        except InvalidValue as exc:
            raise ValidationError(exc.message.split(": ", 1)[-1]) from None
        return {"values_m": nums, "uncertainty_m": unc, "text": str(value).strip()}


class Direction(fields.Field):
    """The applied field's (or beam's) direction in the specimen frame: X, Y, Z (signed) or 'x,y,z'."""

    def _deserialize(self, value, attr, data, **kwargs):
        return normalise_direction(value)


def normalise_direction(value: str) -> str:
    text = str(value).strip().replace(" ", "")
    if re.fullmatch(r"[+-]?[XYZxyz]", text):
        sign = "-" if text.startswith("-") else ""
        return sign + text[-1].upper()
    parts = text.split(",")
    try:
        vec = np.array([float(p) for p in parts])
    except ValueError:
        vec = np.array([])
    if vec.shape != (3,) or not np.all(np.isfinite(vec)) or np.linalg.norm(vec) == 0:
        raise ValidationError(f"{value!r} is not a direction; use X, Y, Z (optionally signed, e.g. -Z) "
                              "or three numbers 'x,y,z' in the specimen frame")
    vec = vec / np.linalg.norm(vec)
    return ",".join(f"{c:.6g}" for c in vec)


def direction_vector(text: str | None) -> np.ndarray | None:
    """Unit vector in the specimen frame for a stored direction (None when not recorded)."""
    if not text:
        return None
    if text.lstrip("+-") in ("X", "Y", "Z"):
        vec = np.zeros(3)
        vec["XYZ".index(text[-1])] = -1.0 if text.startswith("-") else 1.0
        return vec
    return np.array([float(p) for p in text.split(",")])


class _Strict(Schema):
    class Meta:
        unknown = EXCLUDE


class SpecimenIn(_Strict):
    code = Code(required=True)
    parent = Code(load_default=None, allow_none=True)
    mass = Quantity("kg", positive=True, load_default=None, allow_none=True)
    kind = fields.String(load_default=None, allow_none=True, validate=validate.OneOf(SPECIMEN_KINDS))
    dims = Dimensions(load_default=None, allow_none=True)
    origin = fields.String(load_default=None, allow_none=True, validate=validate.Length(1, 200))
    storage = fields.String(load_default=None, allow_none=True, validate=validate.Length(max=200))
    notes = fields.String(load_default=None, allow_none=True)
    same_orientation = fields.Boolean(load_default=False)
    created = When(load_default=None, allow_none=True)

    @validates_schema
    def _orientation_needs_parent(self, data, **kwargs):
        if data.get("same_orientation") and not data.get("parent"):
            raise ValidationError("--same-orientation needs --parent (the piece it was cut from)",
                                  field_name="same_orientation")


class RunLogIn(_Strict):
    specimen = Code(required=True)
    kind = fields.String(required=True, validate=validate.OneOf(RUN_KINDS))
    status = fields.String(load_default="planned", validate=validate.OneOf(("planned", "running")))
    started = When(load_default=None, allow_none=True)
    instrument = fields.String(load_default=None, allow_none=True)
    operator = fields.String(load_default=None, allow_none=True, validate=validate.Length(max=64))
    direction = Direction(load_default=None, allow_none=True)
    group = fields.String(load_default=None, allow_none=True, validate=validate.Length(1, 64))
    notes = fields.String(load_default=None, allow_none=True)


class ReasonIn(_Strict):
    reason = fields.String(required=True, validate=validate.Length(min=3, error="give a reason of a few words"))


class InstrumentIn(_Strict):
    name = Name(required=True)
    kind = fields.String(required=True, validate=validate.OneOf(INSTRUMENT_KINDS))
    place = fields.String(load_default=None, allow_none=True, validate=validate.Length(max=200))
    notes = fields.String(load_default=None, allow_none=True)


class CalibrationIn(_Strict):
    name = Name(required=True)
    at = When(required=True)
    note = fields.String(load_default=None, allow_none=True)


class TreatmentIn(_Strict):
    specimen = Code(required=True)
    kind = fields.String(required=True, validate=validate.Length(1, 32))
    at = When(required=True)
    notes = fields.String(load_default=None, allow_none=True)


class SavedQueryIn(_Strict):
    name = Name(required=True)


RUN_STATUS_CHOICES = RUN_STATUSES

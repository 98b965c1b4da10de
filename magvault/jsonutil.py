"""Plain JSON values from what the vault holds (datetimes, numpy scalars, NaN)."""

from __future__ import annotations

import datetime as dt
import math
from typing import Any


def jsonable(value: Any) -> Any:
    """Plain JSON values: datetimes as ISO 8601 with Z, NaN and infinities as None, numpy scalars unwrapped."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, dt.datetime):
        from .timeutil import iso

        return iso(value)
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if hasattr(value, "item") and callable(value.item):  # numpy scalars
        return jsonable(value.item())
    return value

"""Helpers shared by the views: the app's Vault, JSON-safe records, small parsers."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
from flask import current_app

from magvault.vault import Vault


def vault() -> Vault:
    return current_app.extensions["magvault"]


def plain(value: Any) -> Any:
    """Plain JSON values: NaN, NA and infinities become None; numpy scalars become Python ones."""
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return [plain(v) for v in value.tolist()]
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, pd.Timestamp):
        return value.isoformat()
    return value


def records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    """DataFrame rows as plain dicts (None for missing values)."""
    if frame is None or frame.empty:
        return []
    return [plain(r) for r in frame.astype(object).to_dict("records")]


def positive_int(text: Any, default: int | None = None) -> int | None:
    """A whole number >= 1 from query text, else ``default`` (None when junk is given)."""
    if text is None or str(text).strip() == "":
        return default
    try:
        number = int(str(text).strip())
    except ValueError:
        return None
    return number if number >= 1 else None

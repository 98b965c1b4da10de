"""Keyword options of an analysis, checked against its settings dataclass."""

from __future__ import annotations

import dataclasses
from typing import Any, TypeVar

from ..errors import InvalidValue

T = TypeVar("T")


def settings_from_options(cls: type[T], options: dict[str, Any]) -> T:
    """Build ``cls(**options)``, refusing option names the analysis does not have."""
    names = {f.name for f in dataclasses.fields(cls)}
    unknown = sorted(set(options) - names)
    if unknown:
        raise InvalidValue(f"unknown option(s) {', '.join(unknown)}; expected some of "
                           f"{', '.join(sorted(names))}", field=unknown[0])
    return cls(**options)

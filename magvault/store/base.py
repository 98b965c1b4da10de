"""Declarative base, naming convention and column types shared by every model."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Any

from sqlalchemy import JSON, DateTime, Integer, MetaData, String, TypeDecorator
from sqlalchemy.dialects.postgresql import JSONB
from sqlalchemy.orm import DeclarativeBase, mapped_column

# One naming convention, so Alembic can name (and later drop) every constraint.
NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


class UTCDateTime(TypeDecorator):
    """Timezone-aware UTC datetimes on both back-ends.

    SQLite has no time zones, so values are stored as naive UTC and handed back
    aware; naive input is refused rather than guessed.
    """

    impl = DateTime
    cache_ok = True

    def process_bind_param(self, value: dt.datetime | None, dialect) -> dt.datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given to the database; use UTC-aware datetimes")
        return value.astimezone(dt.timezone.utc).replace(tzinfo=None)

    def process_result_value(self, value: dt.datetime | None, dialect) -> dt.datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=dt.timezone.utc)


JSONType = JSON().with_variant(JSONB(), "postgresql")

intpk = Annotated[int, mapped_column(Integer, primary_key=True)]
utc = Annotated[dt.datetime, mapped_column(UTCDateTime())]
text64 = Annotated[str, mapped_column(String(64))]
text200 = Annotated[str, mapped_column(String(200))]
jsondict = Annotated[dict[str, Any], mapped_column(JSONType, default=dict)]


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)
    type_annotation_map = {
        dt.datetime: UTCDateTime(),
        dict[str, Any]: JSONType,
        list[str]: JSONType,
        list[int]: JSONType,
        list[float]: JSONType,
        list[dict[str, Any]]: JSONType,
    }


def utcnow() -> dt.datetime:
    return dt.datetime.now(dt.timezone.utc)

"""Column types shared by every table: aware UTC timestamps, portable JSON, sized strings."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Annotated, Any

from sqlalchemy import JSON, DateTime, Dialect, String, Text, TypeDecorator
from sqlalchemy.dialects.postgresql import JSONB
from sqlalchemy.orm import mapped_column

# JSONB on PostgreSQL (indexable, compact); plain JSON (text) everywhere else.
JSONType = JSON().with_variant(JSONB(), "postgresql")


def utcnow() -> datetime:
    """The current time as an aware UTC datetime."""
    return datetime.now(UTC)


class UtcDateTime(TypeDecorator[datetime]):
    """A timestamp that goes in as UTC and comes out aware, on SQLite as on PostgreSQL.

    SQLite has no time zone type: SQLAlchemy writes the wall-clock digits and drops the offset, so
    an aware non-UTC value would be stored wrong and values read back are naive. Converting to UTC
    on the way in keeps stored strings comparable (`lease_until < :now`) and tagging UTC on the
    way out keeps Python comparisons between aware datetimes working.
    """

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime refused: pass an aware datetime (see utcnow())")
        return value.astimezone(UTC)

    def process_result_value(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            return value.replace(tzinfo=UTC)
        return value.astimezone(UTC)


# Reusable column shapes; nullability still comes from the Mapped[...] annotation.
Hash64 = Annotated[str, mapped_column(String(64))]
Short = Annotated[str, mapped_column(String(16))]
LongText = Annotated[str, mapped_column(Text)]
CreatedAt = Annotated[datetime, mapped_column(default=utcnow)]
JsonDoc = dict[str, Any]
JsonList = list[Any]

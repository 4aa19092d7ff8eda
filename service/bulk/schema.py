"""Column types of the bulk outputs, written once for Arrow (Parquet) and Spark.

Each output table is a tuple of ``Column``s; ``arrow_schema`` and ``spark_ddl`` give the same
table to pyarrow (the local engine and the summary) and to Spark (``mapInArrow`` output), so the
two engines write identical rows. pyarrow is imported only when a schema is built.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from enum import Enum
from typing import Any


class Kind(Enum):
    """A column's type: (Arrow builder name, Spark DDL type)."""

    STRING = ("string", "string")
    DOUBLE = ("float64", "double")
    LONG = ("int64", "bigint")
    BOOL = ("bool_", "boolean")
    TIMESTAMP = ("timestamp", "timestamp")
    STRINGS = ("list_string", "array<string>")
    BINARY = ("binary", "binary")


@dataclass(frozen=True, slots=True)
class Column:
    """One column: its name (unit in the name for numbers) and type; every column is nullable."""

    name: str
    kind: Kind


def arrow_type(kind: Kind) -> Any:
    """The pyarrow type of a column kind (timestamps are UTC microseconds)."""
    import pyarrow as pa

    if kind is Kind.TIMESTAMP:
        return pa.timestamp("us", tz="UTC")
    if kind is Kind.STRINGS:
        return pa.list_(pa.string())
    return getattr(pa, kind.value[0])()


def arrow_schema(columns: Sequence[Column]) -> Any:
    """A ``pyarrow.Schema`` of the columns, in order."""
    import pyarrow as pa

    return pa.schema([pa.field(c.name, arrow_type(c.kind)) for c in columns])


def spark_ddl(columns: Sequence[Column]) -> str:
    """The Spark DDL schema string of the columns (``name type, ...``)."""
    return ", ".join(f"`{c.name}` {c.kind.value[1]}" for c in columns)


def union(*tables: Sequence[Column]) -> tuple[Column, ...]:
    """Every column of the tables once, in first-seen order; a name must keep its type."""
    seen: dict[str, Column] = {}
    for table in tables:
        for column in table:
            other = seen.setdefault(column.name, column)
            if other.kind is not column.kind:
                raise ValueError(f"column {column.name} has two types")
    return tuple(seen.values())

"""Counts of patterns, gas exchange, grades and findings by month and location (``summary/``).

Each worker counts the result rows it writes into a ``Tally``; the tallies travel to the
driver as small count rows (``COUNT_COLUMNS``) and are added up there, so the summary of a
billion gases is built without reading the results again, and both engines count with this
same code. Months are calendar months of the gas's time in UTC.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from datetime import datetime

from .rows import GRADE_COLUMNS
from .schema import Column, Kind

COUNT_COLUMNS: tuple[Column, ...] = (
    Column("tally_table", Kind.STRING),
    Column("tally_month", Kind.STRING),
    Column("tally_location", Kind.STRING),
    Column("tally_name", Kind.STRING),
    Column("tally_value", Kind.STRING),
    Column("tally_count", Kind.LONG),
)

# The summary tables: name -> (columns after month and location).
TABLES: dict[str, tuple[str, ...]] = {
    "gases": (),
    "patterns": ("pattern",),
    "gas_exchange": ("gas_exchange",),
    "grades": ("mechanism", "grade"),
    "findings": ("finding",),
}
PATIENTS = "patients"

Key = tuple[str, str, str, str, str]  # table, month, location ("" for none), name, value


@dataclass(slots=True)
class Tally:
    """Counts by (table, month, location, name, value); ``patients`` counts groups seen."""

    counts: Counter[Key] = field(default_factory=Counter)

    def add_result(self, row: Mapping[str, object]) -> None:
        """Count one result row."""
        time = row["time"]
        assert isinstance(time, datetime)
        month = time.strftime("%Y-%m")
        location = str(row["location"] or "")
        c = self.counts
        c["gases", month, location, "", ""] += 1
        c["patterns", month, location, "", str(row["pattern"])] += 1
        c["gas_exchange", month, location, "", str(row["gas_exchange"])] += 1
        for mechanism, column in GRADE_COLUMNS.items():
            c["grades", month, location, mechanism, str(row[column])] += 1
        findings = row["findings"]
        assert isinstance(findings, list)
        for finding in findings:
            c["findings", month, location, "", str(finding)] += 1

    def add_patient(self) -> None:
        self.counts[PATIENTS, "", "", "", ""] += 1

    def rows(self) -> list[dict[str, object]]:
        """The counts as rows of ``COUNT_COLUMNS``."""
        return [
            {
                "tally_table": table,
                "tally_month": month,
                "tally_location": location,
                "tally_name": name,
                "tally_value": value,
                "tally_count": count,
            }
            for (table, month, location, name, value), count in self.counts.items()
        ]

    def merge_rows(self, rows: Iterable[Mapping[str, object]]) -> None:
        """Add count rows (from another worker) to this tally."""
        for r in rows:
            key = (
                str(r["tally_table"]),
                str(r["tally_month"]),
                str(r["tally_location"]),
                str(r["tally_name"]),
                str(r["tally_value"]),
            )
            count = r["tally_count"]
            assert isinstance(count, int)
            self.counts[key] += count

    def merge(self, other: Tally) -> None:
        self.counts.update(other.counts)

    @property
    def gases(self) -> int:
        return sum(n for k, n in self.counts.items() if k[0] == "gases")

    @property
    def patients(self) -> int:
        return self.counts[PATIENTS, "", "", "", ""]

    def table(self, name: str, names: Mapping[str, str]) -> list[dict[str, object]]:
        """One summary table, sorted: month, location, location_name, its columns, gases.

        ``names`` maps a Location reference to its name (``Location.name``), when known.
        """
        extra = TABLES[name]
        out: list[dict[str, object]] = []
        for (table, month, location, key_name, value), count in sorted(self.counts.items()):
            if table != name:
                continue
            row: dict[str, object] = {
                "month": month,
                "location": location or None,
                "location_name": names.get(location) if location else None,
            }
            if name == "grades":
                row["mechanism"], row["grade"] = key_name, value
            elif extra:
                row[extra[0]] = value
            row["gases"] = count
            out.append(row)
        return out


def table_columns(name: str) -> tuple[Column, ...]:
    """The columns of one summary table."""
    return (
        Column("month", Kind.STRING),
        Column("location", Kind.STRING),
        Column("location_name", Kind.STRING),
        *(Column(c, Kind.STRING) for c in TABLES[name]),
        Column("gases", Kind.LONG),
    )

"""Memory does not grow with the number of patients: the local engine holds one partition at a
time, and the number of partitions grows with the input.

Checked at a bounded size: four times the patients give about four times the partitions and
the same most records held at once (``largest_partition_records``), with partitions of 1 MiB.
Loading everything at once would hold four times the records.
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

from service.bulk.export import open_export
from service.bulk.local import run_local
from service.bulk.output import prepare
from service.bulk.patient import JobContext, runtime_for
from service.bulk.pseudonym import Pseudonymiser
from service.bulk.settings import BulkSettings
from service.bulk.synth import write_export
from service.config import Settings


def _held(tmp_path: Path, patients: int) -> tuple[int, int, int]:
    """(partitions, most records held at once, records read) for an invented export."""
    export_dir = tmp_path / f"export-{patients}"
    write_export(export_dir, patients=patients, seed=11)
    settings = Settings()
    context = JobContext(
        settings,
        BulkSettings(partition_mib=1),
        Pseudonymiser(),
        datetime(2027, 1, 1, tzinfo=UTC),
        runtime_for(settings).ruleset.content_hash,
    )
    out = prepare(str(tmp_path / f"out-{patients}"))
    stats, _ = run_local(open_export(str(export_dir)), out, context, workers=1)
    return stats.partitions, stats.largest_partition_records, stats.records


def test_four_times_the_patients_hold_no_more_records_at_once(tmp_path: Path) -> None:
    small = _held(tmp_path, 100)
    large = _held(tmp_path, 400)
    assert large[2] > 3.5 * small[2]  # four times the input...
    assert large[0] >= 3 * small[0]  # ...in about four times the partitions...
    assert large[1] < 1.4 * small[1]  # ...holds about as many records at once
    assert large[1] < 0.4 * large[2]

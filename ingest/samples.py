"""The raw layer's sample schema and part files.

Layout under ``store.samples_dir``::

    bucket=<vehicle_bucket>/month=<YYYY-MM>/part-<UTC stamp>-<random>.parquet

One part file per (bucket, month) per ingest chunk holds many trips, rows
sorted by trip_id then time. Part files are immutable; ``trips.sample_file``
says which part holds a trip's rows, so rows of a replaced trip left in an
older part are never read. Unreferenced parts are removed by
``catalog.collect_garbage``.

A missing numeric cell is NaN, a signal the log lacks is an all-null column;
a missing switch or DTC cell is null.
"""

from __future__ import annotations

import time
import uuid
from pathlib import Path

import pyarrow as pa

from tracktrue.schema import NUMERIC_SIGNALS, SAMPLE_COLUMNS
from tracktrue.store import atomic_write_parquet

SWITCH_SIGNALS = ("brake", "lamp_abs", "lamp_esc")


_TYPES: dict[str, pa.DataType] = {
    "vehicle_id": pa.string(),
    "trip_id": pa.string(),
    "time": pa.timestamp("us", tz="UTC"),
    "dtc": pa.string(),
    **{name: pa.bool_() for name in SWITCH_SIGNALS},
    **{name: pa.float64() for name in NUMERIC_SIGNALS},
}
#: Exactly tracktrue.schema.SAMPLE_COLUMNS, in that order.
SAMPLE_SCHEMA = pa.schema([pa.field(name, _TYPES[name]) for name in SAMPLE_COLUMNS])

def part_path(samples_dir: Path, bucket: int, month: str) -> Path:
    stamp = time.strftime("%Y%m%dT%H%M%S", time.gmtime())
    return samples_dir / f"bucket={bucket}" / f"month={month}" / f"part-{stamp}-{uuid.uuid4().hex[:12]}.parquet"


def write_part(path: Path, trip_tables: list[pa.Table]) -> None:
    """Write trips (each already sorted by time) into one part, ordered by trip_id."""
    ordered = sorted(trip_tables, key=lambda t: t.column("trip_id")[0].as_py())
    atomic_write_parquet(path, pa.concat_tables(ordered))

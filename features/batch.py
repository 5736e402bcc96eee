"""The unit of work every engine runs: the pending trips of one sample part file.

A part file holds whole trips (ingest writes each trip into exactly one part),
so one file is one task for the local engine, its process pool and Dask alike,
and no engine ever has to shuffle samples between tasks. The task reads its
file once into numpy columns, slices them per trip and calls the pure
per-trip function; what it returns is plain rows, cheap to send back.

The file may be a local path or an fsspec URL (``file://``, ``s3://`` …,
with the matching fsspec backend installed where the task runs).
"""

from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from features.columns import FEATURE_INPUTS, slice_rows, table_columns
from features.extract import extract_trip_features
from tracktrue.errors import UserError
from tracktrue.schema import SAMPLE_COLUMNS

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class TripTask:
    """One trip to compute, with everything the per-trip function needs besides its samples."""

    trip_id: str
    vehicle_id: str
    start_time: object  #: passed through to the row
    platform: str | None
    spec: Mapping  #: the vehicle's registry row, steering parameters filled per platform


@dataclass(frozen=True)
class FileResult:
    rows: list[dict]
    problem: str | None = None  #: why the file could not be read (its trips stay pending)


class UnreadableSamples(Exception):
    """A sample part file that cannot be read or lacks canonical columns."""


def locate(root: str, sample_file: str) -> str:
    """Where a sample file (a path relative to the store root) is, under a root path or URL."""
    return f"{root.rstrip('/')}/{sample_file}" if "://" in root else str(Path(root) / sample_file)


def compute_file(location: str, tasks: Sequence[TripTask]) -> FileResult:
    """Feature rows of ``tasks`` from the sample part file at ``location`` (path or fsspec URL)."""
    try:
        table = read_sample_file(location)
    except UnreadableSamples as exc:
        log.warning("cannot read %s: %s", location, exc)
        return FileResult([], str(exc))
    return FileResult(trip_rows(table, tasks))


def read_sample_file(location: str) -> pa.Table:
    """The columns the features read (plus trip_id) of one part file; raises UnreadableSamples."""
    try:
        source, filesystem = _open(location)
        parquet = pq.ParquetFile(source, filesystem=filesystem) if filesystem else pq.ParquetFile(source)
        names = parquet.schema_arrow.names
        missing = [c for c in SAMPLE_COLUMNS if c not in names]
        if missing:
            raise UnreadableSamples(f"missing columns {missing}")
        return parquet.read(columns=["trip_id", *FEATURE_INPUTS])
    except (OSError, ValueError) as exc:  # pyarrow's ArrowIOError / ArrowInvalid are these
        raise UnreadableSamples(str(exc).splitlines()[0] if str(exc) else type(exc).__name__) from exc


def trip_rows(table: pa.Table, tasks: Sequence[TripTask]) -> list[dict]:
    """One feature row per task; a trip absent from the table gets the too_few_samples row."""
    columns = table_columns(table)
    rows_of = trip_row_index(table.column("trip_id"))
    empty = slice(0, 0)
    out = []
    for task in tasks:
        row = extract_trip_features(slice_rows(columns, rows_of.get(task.trip_id, empty)), task.spec)
        row.update(trip_id=task.trip_id, vehicle_id=task.vehicle_id, start_time=task.start_time,
                   platform=task.platform)
        out.append(row)
    return out


def trip_row_index(trip_ids: pa.ChunkedArray) -> dict[str, slice | np.ndarray]:
    """Rows of each trip: a slice when its rows are contiguous (ingest sorts parts by trip), else indices."""
    encoded = pc.dictionary_encode(trip_ids).combine_chunks()
    codes = encoded.indices.to_numpy(zero_copy_only=False)
    names = encoded.dictionary.to_pylist()
    if codes.size == 0:
        return {}
    starts = np.flatnonzero(np.concatenate(([True], codes[1:] != codes[:-1])))
    if starts.size == len(names):  # every trip in one run
        ends = np.append(starts[1:], codes.size)
        return {names[codes[s]]: slice(int(s), int(e)) for s, e in zip(starts, ends)}
    order = np.argsort(codes, kind="stable")
    bounds = np.searchsorted(codes[order], np.arange(len(names) + 1))
    return {name: order[bounds[i]:bounds[i + 1]] for i, name in enumerate(names)}


def _open(location: str):
    """(path, filesystem) for pyarrow; filesystem None for a plain local path."""
    if "://" not in location:
        return location, None
    try:
        from fsspec.core import url_to_fs
    except ImportError:  # pragma: no cover - fsspec comes with the dask extra
        raise UserError(f"{location}: store URLs need fsspec (pip install 'tracktrue[dask]')") from None
    filesystem, path = url_to_fs(location)
    return path, filesystem

"""Read-only access to the published tables, cached on their generations.

DESIGN.md: the batch stages hold a DuckDB file that allows one writer at a
time, so the dashboard never opens it. Every query runs on a fresh in-memory
DuckDB connection over the Parquet files of the tables' current generations.
A cache entry is keyed on those generations, so a new publish is picked up on
the next rerun and a run in progress (which writes a ``*.tmp`` folder and then
switches a pointer) never shows half a table.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import duckdb
import pandas as pd
import streamlit as st

from tracktrue.duckframes import to_frame
from tracktrue.store import SCHEMA_FILE, Store, TableMissing

#: The stage command that publishes each table, for the "not yet published" note.
PUBLISHER: dict[str, str] = {
    "vehicle_status": "tracktrue score",
    "trip_scores": "tracktrue score",
    "vehicle_drift": "tracktrue score",
    "peer_bands": "tracktrue score",
    "trip_features": "tracktrue features",
    "trips": "tracktrue ingest",
    "vehicles": "tracktrue ingest --vehicles vehicles.csv",
    "ingested_files": "tracktrue ingest",
    "rejects": "tracktrue ingest",
}

_TABLE_REF = re.compile(r"\{(\w+)\}")


@dataclass(frozen=True)
class Missing:
    """Which table a page needs but cannot find, and how to make it."""

    table: str

    @property
    def message(self) -> str:
        command = PUBLISHER.get(self.table, "the earlier stages")
        return (f"The table `{self.table}` has not been published in this store yet. "
                f"Run `{command}` (or `tracktrue demo` for a demonstration store) and reload.")


def table_source(store: Store, name: str) -> str:
    """A DuckDB ``read_parquet`` expression over a table's current files."""
    files = store.table_files(name)
    if not files:  # an empty table keeps its columns in the schema file
        files = [store.tables_dir(name) / store.generation(name) / SCHEMA_FILE]
    listed = ", ".join("'" + str(f).replace("'", "''") + "'" for f in files)
    return f"read_parquet([{listed}], union_by_name = true)"


def run_query(store: Store, sql: str, params: Sequence = ()) -> pd.DataFrame:
    """Run ``sql`` with ``{table}`` placeholders on an in-memory connection (uncached)."""
    sources = {name: f"({'SELECT * FROM ' + table_source(store, name)})" for name in _TABLE_REF.findall(sql)}
    con = duckdb.connect(":memory:")
    try:
        return to_frame(con.execute(_TABLE_REF.sub(lambda m: sources[m.group(1)], sql), list(params)))
    finally:
        con.close()


def generations_key(store: Store, sql: str) -> tuple[tuple[str, str], ...]:
    """The generations of the tables a query reads (raises TableMissing)."""
    key = []
    for name in sorted(set(_TABLE_REF.findall(sql))):
        gen = store.generation(name)
        if gen is None:
            raise TableMissing(name)
        key.append((name, gen))
    return tuple(key)


@st.cache_data(show_spinner=False, max_entries=256)
def _cached(root: str, generations: tuple, sql: str, params: tuple) -> pd.DataFrame:
    del generations  # part of the cache key only
    return run_query(Store(Path(root)), sql, params)


def query(store: Store, sql: str, params: Sequence = ()) -> pd.DataFrame | Missing:
    """Cached query; a ``Missing`` instead of an exception when a table is not there yet."""
    try:
        key = generations_key(store, sql)
    except TableMissing as exc:
        return Missing(str(exc.args[0]))
    try:
        return _cached(str(store.root), key, sql, tuple(params))
    except (FileNotFoundError, duckdb.IOException):
        # The generation was swept between reading the pointer and the files:
        # read the pointer again once.
        return _cached(str(store.root), generations_key(store, sql), sql, tuple(params))


def has_columns(store: Store, name: str) -> set[str]:
    """Column names of a published table (empty set when not published)."""
    result = query(store, f"SELECT * FROM {{{name}}} LIMIT 0")
    return set() if isinstance(result, Missing) else set(result.columns)


def read_trip_samples(root: str, sample_file: str, trip_id: str) -> pd.DataFrame:
    """One trip's canonical samples, ordered by time (uncached)."""
    con = duckdb.connect(":memory:")
    try:
        return to_frame(con.execute("SELECT * FROM read_parquet(?) WHERE trip_id = ? ORDER BY time",
                                    [str(Path(root) / sample_file), trip_id]))
    finally:
        con.close()


@st.cache_data(show_spinner=False, max_entries=64)
def trip_samples(root: str, sample_file: str, trip_id: str) -> pd.DataFrame:
    """Cached samples; part files are immutable, so path and id are the whole key."""
    return read_trip_samples(root, sample_file, trip_id)

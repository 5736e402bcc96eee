"""The batch catalog (DuckDB at ``store.catalog_path``) and its published copies.

Tables: ``vehicles``, ``trips``, ``trip_signals``, ``ingested_files``, ``rejects``. Only batch
jobs open the DuckDB file (one writer); readers read the Parquet tables that
``publish`` writes with ``Store.publish_table``.

Atomicity: a chunk's part files are written first (each atomically), then
one DuckDB transaction records its trips, files and rejects. A kill before
the commit leaves only unreferenced part files (removed by
``collect_garbage``) and the files are read again on the next run; a kill
after it leaves the catalog ahead of the published tables, and the next run
(which always publishes) catches up. No partial trip is ever visible.
"""

from __future__ import annotations

import logging
from pathlib import Path

import duckdb
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from tracktrue.schema import (
    NUMERIC_SIGNALS,
    REGISTRY_OPTIONAL,
    REGISTRY_REQUIRED,
    TRIP_SIGNALS_COLUMNS,
    TRIPS_COLUMNS,
)
from tracktrue.store import Store

log = logging.getLogger(__name__)

#: Published ``trips`` columns: the contract's, then ingest's quality columns.
TRIP_COLUMNS: tuple[str, ...] = (
    *TRIPS_COLUMNS,
    "sample_file",
    "source_sha256",
    "signals",
    "missing_fraction",
    *(f"resolution_{s}" for s in NUMERIC_SIGNALS),
    "odometer_start_km",
    "odometer_end_km",
)
VEHICLE_COLUMNS: tuple[str, ...] = (*REGISTRY_REQUIRED, *REGISTRY_OPTIONAL, "spec_source")
FILE_COLUMNS: tuple[str, ...] = ("path", "sha256", "status", "reason", "n_rows", "n_rejected", "n_trips", "ingested_at")
REJECT_COLUMNS: tuple[str, ...] = ("source_file", "row", "reason")
_TEXT = {"trip_id", "vehicle_id", "signal", "source_file", "sample_file", "source_sha256", "signals", "platform", "depot",
         "vin", "spec_source", "path", "sha256", "status", "reason"}
_INT = {"n_samples", "n_rows", "n_rejected", "n_trips", "row"}
_TIME = {"start_time", "end_time", "ingested_at"}
_BOOL = {"present"}
_DATE = {"next_service_date"}
_KEYS = {"trips": "trip_id", "vehicles": "vehicle_id", "ingested_files": "path"}
TABLE_COLUMNS = {"trips": TRIP_COLUMNS, "trip_signals": TRIP_SIGNALS_COLUMNS, "vehicles": VEHICLE_COLUMNS,
                 "ingested_files": FILE_COLUMNS, "rejects": REJECT_COLUMNS}


def _sql_type(col: str) -> str:
    if col in _TEXT:
        return "VARCHAR"
    if col in _INT:
        return "BIGINT"
    if col in _TIME:
        return "TIMESTAMPTZ"
    if col in _BOOL:
        return "BOOLEAN"
    if col in _DATE:
        return "DATE"
    return "DOUBLE"


def open_catalog(store: Store) -> duckdb.DuckDBPyConnection:
    """Open (and create) the catalog; timestamps are read and written as UTC."""
    con = duckdb.connect(str(store.catalog_path))
    con.execute("SET TimeZone = 'UTC'")
    for name, columns in TABLE_COLUMNS.items():
        defs = ", ".join(f'"{c}" {_sql_type(c)}' + (" PRIMARY KEY" if _KEYS.get(name) == c else "") for c in columns)
        con.execute(f"CREATE TABLE IF NOT EXISTS {name} ({defs})")
        for c in columns:  # a catalog written by an older version gains the columns added since
            con.execute(f'ALTER TABLE {name} ADD COLUMN IF NOT EXISTS "{c}" {_sql_type(c)}')
    return con


def frame(name: str, rows: list[dict]) -> pd.DataFrame:
    """Rows as a DataFrame with exactly the table's columns (missing ones null)."""
    columns = TABLE_COLUMNS[name]
    return pd.DataFrame([{c: r.get(c) for c in columns} for r in rows], columns=list(columns))


def insert(con: duckdb.DuckDBPyConnection, name: str, df: pd.DataFrame, replace: bool = False) -> None:
    """Insert a frame (columns in table order); ``replace`` upserts on the key."""
    if df.empty:
        return
    con.register("_incoming", _arrow(name, df))
    cols = ", ".join(f'"{c}"' for c in TABLE_COLUMNS[name])
    verb = "INSERT OR REPLACE" if replace else "INSERT"
    con.execute(f"{verb} INTO {name} ({cols}) SELECT {cols} FROM _incoming")
    con.unregister("_incoming")


def _arrow(name: str, df: pd.DataFrame) -> pa.Table:
    fields = []
    for c in TABLE_COLUMNS[name]:
        sql = _sql_type(c)
        typ = {"VARCHAR": pa.string(), "BIGINT": pa.int64(), "TIMESTAMPTZ": pa.timestamp("us", tz="UTC"),
               "DOUBLE": pa.float64(), "BOOLEAN": pa.bool_(), "DATE": pa.date32()}[sql]
        fields.append(pa.field(c, typ))
    return pa.Table.from_pandas(df[list(TABLE_COLUMNS[name])], schema=pa.schema(fields), preserve_index=False)


def file_states(con: duckdb.DuckDBPyConnection) -> tuple[dict[str, tuple[str, str]], dict[str, str]]:
    """(path -> (sha256, status), sha256 -> path of the ingested copy)."""
    rows = con.execute("SELECT path, sha256, status FROM ingested_files").fetchall()
    by_path = {p: (h, s) for p, h, s in rows}
    by_hash = {h: p for p, h, s in rows if s in ("ingested", "replaced")}
    return by_path, by_hash


def registry_vins(con: duckdb.DuckDBPyConnection) -> dict[str, str]:
    """Upper-case VIN -> vehicle_id for registry rows that give a VIN."""
    rows = con.execute("SELECT upper(vin), vehicle_id FROM vehicles "
                       "WHERE spec_source = 'registry' AND vin IS NOT NULL").fetchall()
    return dict(rows)


def trip_owners(con: duckdb.DuckDBPyConnection) -> dict[str, str]:
    """trip_id -> source_file of every stored trip (one query per run, not per file)."""
    return dict(con.execute("SELECT trip_id, source_file FROM trips").fetchall())


def commit_chunk(con, trips: list[dict], signal_rows: list[dict], files: list[dict], rejects: list[dict],
                 vins: dict[str, str], replaced_paths: list[str]) -> None:
    """Record one chunk in a single transaction (see the module docstring)."""
    con.execute("BEGIN TRANSACTION")
    try:
        for path in replaced_paths:
            con.execute("DELETE FROM trip_signals WHERE trip_id IN (SELECT trip_id FROM trips WHERE source_file = ?)",
                        [path])
            con.execute("DELETE FROM trips WHERE source_file = ?", [path])
            con.execute("DELETE FROM rejects WHERE source_file = ?", [path])
        insert(con, "trips", frame("trips", trips))
        insert(con, "trip_signals", frame("trip_signals", signal_rows))
        insert(con, "ingested_files", frame("ingested_files", files), replace=True)
        insert(con, "rejects", frame("rejects", rejects))
        seen = sorted({t["vehicle_id"] for t in trips})
        if seen:
            con.execute("INSERT INTO vehicles (vehicle_id) SELECT unnest(?) ON CONFLICT DO NOTHING", [seen])
        for vid, vin in vins.items():
            con.execute("UPDATE vehicles SET vin = ? WHERE vehicle_id = ? AND vin IS NULL", [vin, vid])
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise


def publish(con: duckdb.DuckDBPyConnection, store: Store) -> None:
    """Publish every catalog table (each as a new generation)."""
    order = {"trips": "vehicle_id, start_time", "trip_signals": "trip_id, signal", "vehicles": "vehicle_id", "ingested_files": "path",
             "rejects": "source_file, \"row\""}
    for name, columns in TABLE_COLUMNS.items():
        cols = ", ".join(f'"{c}"' for c in columns)
        table = con.execute(f"SELECT {cols} FROM {name} ORDER BY {order[name]}").to_arrow_table()
        store.publish_table(name, table)


def collect_garbage(con: duckdb.DuckDBPyConnection, store: Store) -> int:
    """Remove part files no trip refers to, in the catalog or in a kept published generation."""
    if not store.samples_dir.is_dir():
        return 0
    referenced = {r[0] for r in con.execute("SELECT DISTINCT sample_file FROM trips").fetchall()}
    base = store.tables_dir("trips")
    if base.is_dir():
        for gen in base.iterdir():
            if gen.is_dir() and gen.name.startswith("gen-") and not gen.name.endswith(".tmp"):
                for f in gen.glob("*.parquet"):
                    referenced.update(pq.read_table(f, columns=["sample_file"]).column(0).to_pylist())
    removed = 0
    for f in list(store.samples_dir.rglob("*.parquet")) + list(store.samples_dir.rglob(".*.tmp")):
        rel = f.relative_to(store.root).as_posix()
        if rel not in referenced:
            f.unlink(missing_ok=True)
            removed += 1
    if removed:
        log.info("removed %d unreferenced sample part file(s)", removed)
    return removed


def relative(store: Store, path: Path) -> str:
    return path.relative_to(store.root).as_posix()

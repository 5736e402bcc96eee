"""The dashboard's own durable file: inspection plan, outcomes, depot capacities.

It is SQLite in WAL mode at ``store.dashboard_db_path`` and nothing else ever
opens it for writing, so the batch jobs' DuckDB lock never meets it
(DESIGN.md). Outcomes are keyed on ``vehicle_id`` and a date, which survive a
rebuild of the store.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import sqlite3
from collections.abc import Iterator

import pandas as pd

from tracktrue.schema import COMPONENTS
from tracktrue.store import Store

OUTCOMES: tuple[str, ...] = ("fault_found", "no_fault_found")
DEFAULT_CAPACITY_PER_DAY = 2
#: Depot name used for vehicles the registry gives none.
NO_DEPOT = "(no depot)"

_SCHEMA = f"""
CREATE TABLE IF NOT EXISTS plan_entries (
    id INTEGER PRIMARY KEY,
    vehicle_id TEXT NOT NULL,
    depot TEXT NOT NULL,
    planned_date TEXT NOT NULL,
    priority INTEGER NOT NULL,
    pinned INTEGER NOT NULL DEFAULT 0,
    state TEXT NOT NULL DEFAULT 'open' CHECK (state IN ('open', 'done', 'removed')),
    added_at TEXT NOT NULL
);
CREATE UNIQUE INDEX IF NOT EXISTS one_open_entry_per_vehicle
    ON plan_entries (vehicle_id) WHERE state = 'open';
CREATE TABLE IF NOT EXISTS outcomes (
    id INTEGER PRIMARY KEY,
    vehicle_id TEXT NOT NULL,
    date TEXT NOT NULL,
    outcome TEXT NOT NULL CHECK (outcome IN {OUTCOMES!r}),
    component TEXT NOT NULL CHECK (component IN {COMPONENTS!r}),
    note TEXT NOT NULL DEFAULT '',
    recorded_at TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS depot_capacity (
    depot TEXT PRIMARY KEY,
    per_day INTEGER NOT NULL CHECK (per_day >= 0)
);
"""


@contextlib.contextmanager
def connect(store: Store) -> Iterator[sqlite3.Connection]:
    """A write connection (creates the file and schema); commits on success."""
    store.root.mkdir(parents=True, exist_ok=True)
    con = sqlite3.connect(store.dashboard_db_path, timeout=10)
    try:
        con.execute("PRAGMA journal_mode=WAL")
        con.execute("PRAGMA synchronous=NORMAL")
        con.executescript(_SCHEMA)
        with con:
            yield con
    finally:
        con.close()


@contextlib.contextmanager
def connect_readonly(store: Store) -> Iterator[sqlite3.Connection | None]:
    """A read-only connection, or None when the dashboard has never written."""
    path = store.dashboard_db_path
    if not path.exists():
        yield None
        return
    con = sqlite3.connect(f"{path.resolve().as_uri()}?mode=ro", uri=True, timeout=10)
    try:
        yield con
    finally:
        con.close()


def _now() -> str:
    return dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")


# ---- plan -----------------------------------------------------------------
PLAN_COLUMNS = ("id", "vehicle_id", "depot", "planned_date", "priority", "pinned")


def open_plan(store: Store) -> pd.DataFrame:
    """Open plan entries ordered by date and priority (planned_date as date)."""
    with connect_readonly(store) as con:
        if con is None or not has_table(con, "plan_entries"):
            frame = pd.DataFrame({c: pd.Series(dtype="object") for c in PLAN_COLUMNS})
        else:
            frame = pd.read_sql_query(
                f"SELECT {', '.join(PLAN_COLUMNS)} FROM plan_entries WHERE state = 'open' "
                "ORDER BY planned_date, priority", con)
    frame["planned_date"] = pd.to_datetime(frame["planned_date"]).dt.date
    frame["pinned"] = frame["pinned"].astype(bool)
    return frame


def add_entries(store: Store, entries: pd.DataFrame) -> None:
    """Insert proposed entries (vehicle_id, depot, planned_date, priority)."""
    now = _now()
    rows = [(r.vehicle_id, r.depot, r.planned_date.isoformat(), int(r.priority), now)
            for r in entries.itertuples(index=False)]
    with connect(store) as con:
        con.executemany("INSERT INTO plan_entries (vehicle_id, depot, planned_date, priority, added_at) "
                        "VALUES (?, ?, ?, ?, ?)", rows)


def set_dates(store: Store, dates: dict[int, dt.date], pin: bool) -> None:
    """Move entries (by id) to new dates; a manual move pins the entry."""
    with connect(store) as con:
        con.executemany("UPDATE plan_entries SET planned_date = ?, pinned = MAX(pinned, ?) WHERE id = ?",
                        [(d.isoformat(), int(pin), int(i)) for i, d in dates.items()])


def remove_entry(store: Store, entry_id: int) -> None:
    with connect(store) as con:
        con.execute("UPDATE plan_entries SET state = 'removed' WHERE id = ? AND state = 'open'", (int(entry_id),))


# ---- capacity -------------------------------------------------------------
def capacities(store: Store) -> dict[str, int]:
    """Per-depot inspections per working day that the manager set."""
    with connect_readonly(store) as con:
        if con is None or not has_table(con, "depot_capacity"):
            return {}
        return dict(con.execute("SELECT depot, per_day FROM depot_capacity").fetchall())


def set_capacity(store: Store, depot: str, per_day: int) -> None:
    with connect(store) as con:
        con.execute("INSERT INTO depot_capacity (depot, per_day) VALUES (?, ?) "
                    "ON CONFLICT (depot) DO UPDATE SET per_day = excluded.per_day", (depot, int(per_day)))


# ---- outcomes -------------------------------------------------------------
def record_outcome(store: Store, vehicle_id: str, date: dt.date, outcome: str, component: str,
                   note: str = "") -> None:
    """Store an inspection's outcome and close the vehicle's open plan entry."""
    if outcome not in OUTCOMES:
        raise ValueError(f"outcome must be one of {OUTCOMES}, got {outcome!r}")
    if outcome == "no_fault_found":
        component = "none"
    elif component not in COMPONENTS or component == "none":
        raise ValueError(f"a fault found needs a component from {COMPONENTS[:-1]}, got {component!r}")
    with connect(store) as con:
        con.execute("INSERT INTO outcomes (vehicle_id, date, outcome, component, note, recorded_at) "
                    "VALUES (?, ?, ?, ?, ?, ?)", (vehicle_id, date.isoformat(), outcome, component, note, _now()))
        con.execute("UPDATE plan_entries SET state = 'done' WHERE vehicle_id = ? AND state = 'open'", (vehicle_id,))


def has_table(con: sqlite3.Connection, name: str) -> bool:
    return con.execute("SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = ?", (name,)).fetchone() is not None

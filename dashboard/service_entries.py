"""Service events entered on the vehicle record, kept in the dashboard's own SQLite file.

The dashboard never opens the batch catalog (DESIGN.md), so an entry waits
here until the next ``tracktrue update`` run reads it with
``read_service_entries`` and folds it into the published ``service_events``
table (source ``dashboard``), where models/ sees it beside the imported ones.
The entries here are the whole of that source: an entry deleted here is
removed from ``service_events`` by the next update.
"""

from __future__ import annotations

import datetime as dt

import pandas as pd

from dashboard.workshop import connect, connect_readonly, has_table
from tracktrue.schema import SERVICE_EVENT_KINDS
from tracktrue.store import Store

ENTRY_COLUMNS = ("entry_id", "vehicle_id", "date", "kind", "component", "note", "recorded_at")
_SCHEMA = f"""
CREATE TABLE IF NOT EXISTS service_entries (
    entry_id INTEGER PRIMARY KEY,
    vehicle_id TEXT NOT NULL,
    date TEXT NOT NULL,
    kind TEXT NOT NULL CHECK (kind IN {SERVICE_EVENT_KINDS!r}),
    component TEXT NOT NULL DEFAULT '',
    note TEXT NOT NULL DEFAULT '',
    recorded_at TEXT NOT NULL
);
CREATE UNIQUE INDEX IF NOT EXISTS one_entry_per_event ON service_entries (vehicle_id, date, kind, component);
"""


def add_service_entry(store: Store, vehicle_id: str, date: dt.date, kind: str, component: str = "",
                      note: str = "") -> None:
    """Record one service event for the next update run to publish.

    Entering the same event (vehicle, date, kind, component) again replaces
    its note, as a re-import of a CSV does, so the fold never meets a duplicate.
    """
    if kind not in SERVICE_EVENT_KINDS:
        raise ValueError(f"kind must be one of {SERVICE_EVENT_KINDS}, got {kind!r}")
    now = dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")
    with connect(store) as con:
        con.executescript(_SCHEMA)
        con.execute("INSERT INTO service_entries (vehicle_id, date, kind, component, note, recorded_at) "
                    "VALUES (?, ?, ?, ?, ?, ?) ON CONFLICT (vehicle_id, date, kind, component) "
                    "DO UPDATE SET note = excluded.note, recorded_at = excluded.recorded_at",
                    (vehicle_id, date.isoformat(), kind, component, note.strip(), now))


def delete_service_entry(store: Store, entry_id: int) -> bool:
    """Delete a (mistyped) entry; the next update removes it from service_events too. False if it was gone."""
    with connect(store) as con:
        con.executescript(_SCHEMA)
        return con.execute("DELETE FROM service_entries WHERE entry_id = ?", (int(entry_id),)).rowcount > 0


def read_service_entries(store: Store) -> pd.DataFrame:
    """Every entry, oldest first, as text (``date`` YYYY-MM-DD); empty when none. Never writes."""
    with connect_readonly(store) as con:
        if con is None or not has_table(con, "service_entries"):
            return pd.DataFrame({c: pd.Series(dtype=object) for c in ENTRY_COLUMNS})
        return pd.read_sql_query(f"SELECT {', '.join(ENTRY_COLUMNS)} FROM service_entries ORDER BY entry_id", con)

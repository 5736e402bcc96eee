"""Snoozes: an alert put off until a date, with a reason. One source of truth, in the dashboard's SQLite.

Both ``tracktrue snooze`` and the dashboard's snooze control write here (the
dashboard's own file: the batch catalog is never opened by them). The next
``tracktrue update`` publishes the rows as the ``snoozes`` table
(``read_snoozes``), which scoring applies (models/stability.py): a snooze
takes effect, and a cleared one ends, at the next update. A snooze is
compared with the ranking's as-of date: it holds while the as-of date is on
or before ``until``.
"""

from __future__ import annotations

import datetime as dt

import pandas as pd

from dashboard.workshop import connect, connect_readonly, has_table
from models.stability import SNOOZABLE, empty_snoozes
from tracktrue.errors import UserError
from tracktrue.schema import SNOOZE_COLUMNS
from tracktrue.store import Store

_SCHEMA = """
CREATE TABLE IF NOT EXISTS snoozes (
    vehicle_id TEXT PRIMARY KEY,
    until TEXT NOT NULL,
    reason TEXT NOT NULL CHECK (length(trim(reason)) > 0),
    snoozed_status TEXT NOT NULL,
    snoozed_component TEXT NOT NULL,
    created_at TEXT NOT NULL
);
"""


def snooze_vehicle(store: Store, vehicle_id: str, until: dt.date, reason: str) -> dict:
    """Snooze a vehicle's current alert (as published in vehicle_status); returns the stored row.

    The vehicle's status and component now are kept: a lit lamp, a higher
    status or another component later cancels the snooze. A lamp_lit vehicle
    cannot be snoozed (DESIGN.md, "Safety"), and a vehicle without an alert
    (ok, verifying, too few trips) has nothing to put off: a snooze of it
    would be stored and never shown. A new snooze replaces the vehicle's
    earlier one.
    """
    reason = reason.strip()
    if not reason:
        raise UserError("a snooze needs a reason (--reason TEXT)")
    row = _published_row(store, vehicle_id)
    as_of = pd.Timestamp(row["as_of"]).date()
    if until < as_of:
        raise UserError(f"--until {until} is before the ranking's as-of date {as_of}: the snooze would already "
                        "have expired")
    if row["status"] == "lamp_lit":
        raise UserError(f"{vehicle_id} has a lit ABS/ESC warning lamp: it needs service whatever its rank and "
                        "cannot be snoozed")
    status = row.get("held_status", row["status"]) if row["status"] == "snoozed" else row["status"]
    if status not in SNOOZABLE:
        raise UserError(f"{vehicle_id} has no alert to put off (status {row['status']}): only a watch or inspect "
                        "vehicle can be snoozed")
    stored = {"vehicle_id": vehicle_id, "until": until.isoformat(), "reason": reason, "snoozed_status": status,
              "snoozed_component": row["suspected_component"] or "none",
              "created_at": dt.datetime.now(dt.timezone.utc).isoformat(timespec="microseconds")}
    with connect(store) as con:
        con.executescript(_SCHEMA)
        con.execute(f"INSERT OR REPLACE INTO snoozes ({', '.join(SNOOZE_COLUMNS)}) VALUES (?, ?, ?, ?, ?, ?)",
                    [stored[c] for c in SNOOZE_COLUMNS])
    return stored


def clear_snooze(store: Store, vehicle_id: str) -> bool:
    """Remove a vehicle's snooze; False when it had none."""
    with connect(store) as con:
        con.executescript(_SCHEMA)
        return con.execute("DELETE FROM snoozes WHERE vehicle_id = ?", (vehicle_id,)).rowcount > 0


def read_snoozes(store: Store) -> pd.DataFrame:
    """Every stored snooze (SNOOZE_COLUMNS; ``until`` a date, ``created_at`` UTC). Never writes."""
    with connect_readonly(store) as con:
        if con is None or not has_table(con, "snoozes"):
            frame = empty_snoozes()
        else:
            frame = pd.read_sql_query(f"SELECT {', '.join(SNOOZE_COLUMNS)} FROM snoozes ORDER BY vehicle_id", con)
    frame["until"] = pd.to_datetime(frame["until"]).dt.date
    frame["created_at"] = pd.to_datetime(frame["created_at"], utc=True, format="ISO8601")
    return frame


def _published_row(store: Store, vehicle_id: str) -> dict:
    if not store.has_table("vehicle_status"):
        raise UserError("no ranking published yet: run `tracktrue update` first", exit_code=4)
    status = store.read_table("vehicle_status")
    row = status[status["vehicle_id"] == vehicle_id]
    if row.empty:
        raise UserError(f"unknown vehicle {vehicle_id!r}: it is not in the published ranking")
    return row.iloc[0].to_dict()

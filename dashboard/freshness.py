"""How old the published results are, and the warning every page shows when they are too old.

A nightly ``tracktrue update`` that silently stopped leaves a ranking that
looks fine but misses every log since. The age is measured from the last
successful update run (``runs/last_success.json``), or, for stores built by
the stage commands alone, from when ``vehicle_status`` was last published.
Vehicles that stopped sending logs are a different question, answered on the
Log intake page.
"""

from __future__ import annotations

import datetime as dt
import os

import streamlit as st

from tracktrue.store import Store
from tracktrue.update import read_last_success

STALE_HOURS_ENV = "TRACKTRUE_STALE_HOURS"
DEFAULT_STALE_HOURS = 36.0
_GENERATION_TIME = "gen-%Y%m%dT%H%M%S"


def last_refresh(store: Store) -> tuple[dt.datetime, str] | None:
    """(UTC time the results were last refreshed, what it was measured from), or None."""
    record = read_last_success(store) or {}
    try:
        return dt.datetime.fromisoformat(record["finished_at"]).astimezone(dt.timezone.utc), "last successful update"
    except (KeyError, TypeError, ValueError):
        pass
    gen = store.generation("vehicle_status")
    if gen is None:
        return None
    try:
        published = dt.datetime.strptime(gen[: len("gen-YYYYmmddTHHMMSS")], _GENERATION_TIME)
    except ValueError:
        pointer = store.tables_dir("vehicle_status") / "CURRENT"
        published = dt.datetime.fromtimestamp(pointer.stat().st_mtime, dt.timezone.utc).replace(tzinfo=None)
    return published.replace(tzinfo=dt.timezone.utc), "last publish of the ranking"


def default_stale_hours() -> float:
    """$TRACKTRUE_STALE_HOURS when it is a positive number, else 36 h."""
    try:
        hours = float(os.environ.get(STALE_HOURS_ENV, ""))
    except ValueError:
        return DEFAULT_STALE_HOURS
    return hours if hours > 0 else DEFAULT_STALE_HOURS


def describe_age(age: dt.timedelta) -> str:
    hours = age.total_seconds() / 3600
    if hours < 48:
        return f"{hours:.0f} h"
    return f"{int(hours // 24)} days {hours % 24:.0f} h"


def staleness_banner(store: Store, now: dt.datetime | None = None) -> None:
    """Sidebar setting for the allowed age, and a warning above the page when the results are older."""
    limit_h = st.sidebar.number_input("Warn when results are older than (hours)", min_value=1.0, max_value=24.0 * 90,
                                      value=default_stale_hours(), step=6.0, key="stale_hours",
                                      help=f"Default 36 h, or ${STALE_HOURS_ENV}.")
    refreshed = last_refresh(store)
    if refreshed is None:
        return
    when, measured_from = refreshed
    age = (now or dt.datetime.now(dt.timezone.utc)) - when
    if age <= dt.timedelta(hours=limit_h):
        return
    st.warning(f"These results are {describe_age(age)} old ({measured_from} at {when:%Y-%m-%d %H:%M} UTC), "
               f"longer than the {limit_h:g} h allowed: logs that arrived since are not ranked. Check the "
               f"scheduled `tracktrue update` and its log (`{store.runs_dir / 'update.log'}`).",
               icon=":material/schedule:")
    st.page_link("views/intake.py", label="Vehicles that stopped sending logs: Log intake",
                 icon=":material/inbox:")

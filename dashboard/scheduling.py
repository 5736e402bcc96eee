"""Proposing inspection dates within each depot's workshop capacity.

Vehicles are booked in priority order (the ranking's order) on the earliest
working day (Monday to Friday; public holidays are not known here) on which
their depot still has a free slot. Entries the manager moved by hand are
pinned: they keep their date and use up their day's slot.
"""

from __future__ import annotations

import datetime as dt
from collections import Counter
from collections.abc import Iterable, Mapping

import pandas as pd

#: How far ahead a proposal may look before giving up (about a year).
MAX_WORKING_DAYS_AHEAD = 260


def is_working_day(day: dt.date) -> bool:
    return day.weekday() < 5


def next_working_day(day: dt.date) -> dt.date:
    """``day`` itself if it is a working day, else the following Monday."""
    while not is_working_day(day):
        day += dt.timedelta(days=1)
    return day


def capacity_of(depot: str, capacities: Mapping[str, int], default: int) -> int:
    return int(capacities.get(depot, default))


def propose_dates(
    queue: pd.DataFrame,
    booked: Iterable[tuple[str, dt.date]],
    start: dt.date,
    capacities: Mapping[str, int],
    default_capacity: int,
) -> pd.DataFrame:
    """Dates for ``queue`` (vehicle_id, depot, priority), booked around ``booked``.

    Returns ``queue`` in priority order with a ``planned_date`` column;
    ``planned_date`` is None where the depot has no capacity within
    MAX_WORKING_DAYS_AHEAD working days (capacity 0, say).
    """
    load = Counter(booked)
    first = next_working_day(start)
    out = queue.sort_values("priority", kind="stable").reset_index(drop=True)
    dates: list[dt.date | None] = []
    for depot in out["depot"]:
        cap = capacity_of(depot, capacities, default_capacity)
        day, chosen = first, None
        for _ in range(MAX_WORKING_DAYS_AHEAD if cap > 0 else 0):
            if load[(depot, day)] < cap:
                chosen = day
                load[(depot, day)] += 1
                break
            day = next_working_day(day + dt.timedelta(days=1))
        dates.append(chosen)
    return out.assign(planned_date=dates)


def day_load(plan: pd.DataFrame) -> Counter:
    """Booked slots per (depot, date) of a plan frame."""
    return Counter(zip(plan["depot"], plan["planned_date"]))


def move_problem(plan: pd.DataFrame, entry_id: int, new_date: dt.date,
                 capacities: Mapping[str, int], default_capacity: int) -> str | None:
    """Why an entry cannot move to ``new_date`` (None when it can)."""
    row = plan.loc[plan["id"] == entry_id]
    if row.empty:
        return f"plan entry {entry_id} is not in the open plan"
    depot = row["depot"].iloc[0]
    if not is_working_day(new_date):
        return f"{new_date:%A %d %B %Y} is not a working day"
    others = plan.loc[plan["id"] != entry_id]
    cap = capacity_of(depot, capacities, default_capacity)
    if day_load(others)[(depot, new_date)] >= cap:
        return f"{depot} is already at its capacity of {cap} on {new_date:%a %d %b %Y}"
    return None

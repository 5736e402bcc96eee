"""Proposing inspection dates within each depot's workshop capacity.

Vehicles are booked in priority order (the ranking's order) on the earliest
working day (Monday to Friday; public holidays are not known here) on which
their depot still has a free slot. Entries the manager moved by hand are
pinned: they keep their date and use up their day's slot.

Planning around service: where the registry gives a vehicle's
``next_service_date``, an inspection is combined with that service (booked on
its day) when the service falls within ``COMBINE_WINDOW_DAYS`` (10) days of
the plan start, or within ``INSPECT_COMBINE_DAYS`` (5) for an ``inspect``
vehicle, whose sensor fault is likely developing; never for a lit lamp
(DESIGN.md, "Safety": it needs service whatever its rank). A combined booking
needs a free slot on the service day; without one the earliest free day is
proposed as usual. The windows are a planning choice, not fitted to data: a
watch alert can wait ten days for a visit the vehicle makes anyway, an
inspect alert five at most.
"""

from __future__ import annotations

import datetime as dt
from collections import Counter
from collections.abc import Iterable, Mapping

import pandas as pd

#: How far ahead a proposal may look before giving up (about a year).
MAX_WORKING_DAYS_AHEAD = 260
#: How soon a scheduled service must be for an inspection to wait for it (module doc).
COMBINE_WINDOW_DAYS = 10
INSPECT_COMBINE_DAYS = 5
NEVER_COMBINED = frozenset({"lamp_lit"})


def is_working_day(day: dt.date) -> bool:
    return day.weekday() < 5


def next_working_day(day: dt.date) -> dt.date:
    """``day`` itself if it is a working day, else the following Monday."""
    while not is_working_day(day):
        day += dt.timedelta(days=1)
    return day


def capacity_of(depot: str, capacities: Mapping[str, int], default: int) -> int:
    return int(capacities.get(depot, default))


def combine_date(status: str | None, service_date, start: dt.date) -> dt.date | None:
    """The service day to book an inspection on, or None (module doc: windows, lamp_lit)."""
    if status in NEVER_COMBINED or service_date is None or pd.isna(service_date):
        return None
    day = pd.Timestamp(service_date).date()
    window = INSPECT_COMBINE_DAYS if status == "inspect" else COMBINE_WINDOW_DAYS
    if not (start <= day <= start + dt.timedelta(days=window)) or not is_working_day(day):
        return None
    return day


def service_note(planned: dt.date, service_date) -> str:
    """What a plan row says about the vehicle's next service."""
    if service_date is None or pd.isna(service_date):
        return ""
    day = pd.Timestamp(service_date).date()
    if day == planned:
        return f"combined with its scheduled service on {day:%a %d %b}"
    if planned < day <= planned + dt.timedelta(days=COMBINE_WINDOW_DAYS):
        return f"service due {day:%a %d %b}, {(day - planned).days} days after this inspection"
    return ""


def propose_dates(
    queue: pd.DataFrame,
    booked: Iterable[tuple[str, dt.date]],
    start: dt.date,
    capacities: Mapping[str, int],
    default_capacity: int,
) -> pd.DataFrame:
    """Dates for ``queue`` (vehicle_id, depot, priority, optional preferred_date), booked around ``booked``.

    Returns ``queue`` in priority order with a ``planned_date`` column;
    ``planned_date`` is None where the depot has no capacity within
    MAX_WORKING_DAYS_AHEAD working days (capacity 0, say). A preferred date
    (``combine_date``) is taken when its day has a free slot.
    """
    load = Counter(booked)
    first = next_working_day(start)
    out = queue.sort_values("priority", kind="stable").reset_index(drop=True)
    preferred = out["preferred_date"] if "preferred_date" in out else pd.Series(None, index=out.index, dtype=object)
    dates: list[dt.date | None] = []
    for depot, wish in zip(out["depot"], preferred):
        cap = capacity_of(depot, capacities, default_capacity)
        if wish is not None and not pd.isna(wish) and load[(depot, wish)] < cap:
            load[(depot, wish)] += 1
            dates.append(wish)
            continue
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

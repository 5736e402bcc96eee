"""Putting vehicles on the workshop plan: scheduling rules applied to the stored plan."""

from __future__ import annotations

import datetime as dt

import pandas as pd

from dashboard import workshop
from dashboard.exports import plan_csv, plan_ics
from dashboard.scheduling import day_load, next_working_day, propose_dates
from dashboard.wording import SAFETY_CAUTION, component_label
from dashboard.workshop import DEFAULT_CAPACITY_PER_DAY, NO_DEPOT
from tracktrue.store import Store


def default_start(today: dt.date | None = None) -> dt.date:
    """The first working day after today: a plan made today starts tomorrow."""
    today = today or dt.date.today()
    return next_working_day(today + dt.timedelta(days=1))


def add_vehicles(store: Store, picked: pd.DataFrame, start: dt.date) -> tuple[list[str], list[str]]:
    """Book ``picked`` (vehicle_id, depot, rank) around the open plan.

    Returns (booked vehicle ids, vehicle ids that found no free day); vehicles
    already on the plan are left where they are.
    """
    plan = workshop.open_plan(store)
    fresh = picked.loc[~picked["vehicle_id"].isin(plan["vehicle_id"])]
    queue = pd.DataFrame({"vehicle_id": fresh["vehicle_id"].astype(str),
                          "depot": fresh["depot"].fillna(NO_DEPOT).astype(str),
                          "priority": fresh["rank"].astype(int)})
    booked = propose_dates(queue, day_load(plan).elements(), start, workshop.capacities(store),
                           DEFAULT_CAPACITY_PER_DAY)
    ok = booked.loc[booked["planned_date"].notna()]
    if not ok.empty:
        workshop.add_entries(store, ok)
    return ok["vehicle_id"].tolist(), booked.loc[booked["planned_date"].isna(), "vehicle_id"].tolist()


def replan(store: Store, start: dt.date) -> list[str]:
    """Propose new dates for every unpinned entry, by priority; returns those left without a day."""
    plan = workshop.open_plan(store)
    pinned, loose = plan.loc[plan["pinned"]], plan.loc[~plan["pinned"]]
    proposal = propose_dates(loose[["id", "vehicle_id", "depot", "priority"]], day_load(pinned).elements(),
                             start, workshop.capacities(store), DEFAULT_CAPACITY_PER_DAY)
    placed = proposal.loc[proposal["planned_date"].notna()]
    workshop.set_dates(store, dict(zip(placed["id"], placed["planned_date"])), pin=False)
    return proposal.loc[proposal["planned_date"].isna(), "vehicle_id"].tolist()


def with_status(plan: pd.DataFrame, status: pd.DataFrame) -> pd.DataFrame:
    """Open plan entries beside the vehicles' current ranking row (the plan keeps its depot)."""
    return plan.merge(status.drop(columns=["depot"]), on="vehicle_id", how="left")


def export_csv(detail: pd.DataFrame) -> str:
    """The plan as the CSV a workshop opens in a spreadsheet."""
    return plan_csv(pd.DataFrame({
        "date": [d.isoformat() for d in detail["planned_date"]],
        "depot": detail["depot"], "vehicle_id": detail["vehicle_id"], "priority": detail["priority"],
        "platform": detail["platform"], "status": detail["status"],
        "suspected_component": detail["suspected_component"], "what_to_check": detail["suggestion"],
        "evidence": detail["evidence"]}))


def export_ics(detail: pd.DataFrame, stamp: dt.datetime) -> str:
    """The plan as all-day calendar entries, each carrying the safety caution."""
    return plan_ics(pd.DataFrame({
        "vehicle_id": detail["vehicle_id"], "depot": detail["depot"], "planned_date": detail["planned_date"],
        "summary": [f"Inspect {v}: {component_label(c) or 'chassis sensors'}"
                    for v, c in zip(detail["vehicle_id"], detail["suspected_component"])],
        "description": [f"Priority {p}. {s if isinstance(s, str) else ''}\nEvidence: {e if isinstance(e, str) and e else '-'}"
                        for p, s, e in zip(detail["priority"], detail["suggestion"], detail["evidence"])]}),
        stamp, SAFETY_CAUTION)

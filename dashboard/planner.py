"""Putting vehicles on the workshop plan: scheduling rules applied to the stored plan."""

from __future__ import annotations

import datetime as dt

import pandas as pd

from dashboard import workshop
from dashboard.exports import plan_csv, plan_ics
from dashboard.scheduling import combine_date, day_load, next_working_day, propose_dates, service_note
from dashboard.tables import has_columns, query
from dashboard.wording import SAFETY_CAUTION, component_label
from dashboard.workshop import DEFAULT_CAPACITY_PER_DAY, NO_DEPOT
from tracktrue.store import Store


def default_start(today: dt.date | None = None) -> dt.date:
    """The first working day after today: a plan made today starts tomorrow."""
    today = today or dt.date.today()
    return next_working_day(today + dt.timedelta(days=1))


def service_dates(store: Store) -> dict[str, dt.date]:
    """Each vehicle's ``next_service_date`` from the registry (none when the registry has no such column)."""
    if "next_service_date" not in has_columns(store, "vehicles"):
        return {}
    rows = query(store, "SELECT vehicle_id, CAST(next_service_date AS DATE) AS d FROM {vehicles} "
                        "WHERE next_service_date IS NOT NULL")
    return {v: pd.Timestamp(d).date() for v, d in zip(rows["vehicle_id"], rows["d"])}


def _preferred(vehicle_ids: pd.Series, statuses: pd.Series, services: dict, start: dt.date) -> list:
    return [combine_date(s, services.get(v), start) for v, s in zip(vehicle_ids, statuses)]


def add_vehicles(store: Store, picked: pd.DataFrame, start: dt.date) -> tuple[list[str], list[str]]:
    """Book ``picked`` (vehicle_id, depot, rank, optional status) around the open plan.

    A vehicle whose scheduled service is due soon is booked on its service day
    (dashboard.scheduling, "Planning around service"). Returns (booked vehicle
    ids, vehicle ids that found no free day); vehicles already on the plan are
    left where they are.
    """
    plan = workshop.open_plan(store)
    fresh = picked.loc[~picked["vehicle_id"].isin(plan["vehicle_id"])]
    statuses = fresh["status"] if "status" in fresh else pd.Series(None, index=fresh.index, dtype=object)
    queue = pd.DataFrame({"vehicle_id": fresh["vehicle_id"].astype(str),
                          "depot": fresh["depot"].fillna(NO_DEPOT).astype(str),
                          "priority": fresh["rank"].astype(int),
                          "preferred_date": _preferred(fresh["vehicle_id"], statuses, service_dates(store), start)})
    booked = propose_dates(queue, day_load(plan).elements(), start, workshop.capacities(store),
                           DEFAULT_CAPACITY_PER_DAY)
    ok = booked.loc[booked["planned_date"].notna()]
    if not ok.empty:
        workshop.add_entries(store, ok)
    return ok["vehicle_id"].tolist(), booked.loc[booked["planned_date"].isna(), "vehicle_id"].tolist()


def replan(store: Store, start: dt.date, status: pd.DataFrame | None = None) -> list[str]:
    """Propose new dates for every unpinned entry, by priority; returns those left without a day.

    ``status`` (vehicle_id, status) lets entries whose service is due soon move onto its day."""
    plan = workshop.open_plan(store)
    pinned, loose = plan.loc[plan["pinned"]], plan.loc[~plan["pinned"]]
    current = (dict(zip(status["vehicle_id"], status["status"])) if status is not None else {})
    loose = loose.assign(preferred_date=_preferred(loose["vehicle_id"], loose["vehicle_id"].map(current),
                                                   service_dates(store), start))
    proposal = propose_dates(loose[["id", "vehicle_id", "depot", "priority", "preferred_date"]],
                             day_load(pinned).elements(),
                             start, workshop.capacities(store), DEFAULT_CAPACITY_PER_DAY)
    placed = proposal.loc[proposal["planned_date"].notna()]
    workshop.set_dates(store, dict(zip(placed["id"], placed["planned_date"])), pin=False)
    return proposal.loc[proposal["planned_date"].isna(), "vehicle_id"].tolist()


def with_status(plan: pd.DataFrame, status: pd.DataFrame, services: dict | None = None) -> pd.DataFrame:
    """Open plan entries beside the vehicles' current ranking row (the plan keeps its depot), with
    what each row says about the vehicle's next scheduled service (``service_note``)."""
    out = plan.merge(status.drop(columns=["depot"]), on="vehicle_id", how="left")
    services = services or {}
    out["service_note"] = [service_note(d, services.get(v)) for v, d in zip(out["vehicle_id"], out["planned_date"])]
    return out


def export_csv(detail: pd.DataFrame) -> str:
    """The plan as the CSV a workshop opens in a spreadsheet."""
    return plan_csv(pd.DataFrame({
        "date": [d.isoformat() for d in detail["planned_date"]],
        "depot": detail["depot"], "vehicle_id": detail["vehicle_id"], "priority": detail["priority"],
        "platform": detail["platform"], "status": detail["status"],
        "suspected_component": detail["suspected_component"], "what_to_check": detail["suggestion"],
        "evidence": detail["evidence"], "service": detail["service_note"]}))


def export_ics(detail: pd.DataFrame, stamp: dt.datetime) -> str:
    """The plan as all-day calendar entries, each carrying the safety caution."""
    return plan_ics(pd.DataFrame({
        "vehicle_id": detail["vehicle_id"], "depot": detail["depot"], "planned_date": detail["planned_date"],
        "summary": [f"Inspect {v}: {component_label(c) or 'chassis sensors'}"
                    for v, c in zip(detail["vehicle_id"], detail["suspected_component"])],
        "description": [f"Priority {p}. {s if isinstance(s, str) else ''}\nEvidence: {e if isinstance(e, str) and e else '-'}"
                        + (f"\nService: {n}" if n else "")
                        for p, s, e, n in zip(detail["priority"], detail["suggestion"], detail["evidence"],
                                              detail["service_note"])]}),
        stamp, SAFETY_CAUTION)

"""Planning around service: an inspection joins a scheduled service due soon (dashboard.scheduling), and says so."""

import datetime as dt
from pathlib import Path

import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

import dashboard
from dashboard import planner, workshop
from dashboard.scheduling import COMBINE_WINDOW_DAYS, INSPECT_COMBINE_DAYS, combine_date, propose_dates, service_note
from test_dashboard_fixture import build_store
from tracktrue.store import STORE_ENV

MONDAY = dt.date(2026, 4, 6)


@pytest.mark.parametrize("status, days_ahead, combined", [
    ("watch", 0, True), ("watch", COMBINE_WINDOW_DAYS, True), ("watch", COMBINE_WINDOW_DAYS + 1, False),
    ("inspect", INSPECT_COMBINE_DAYS - 1, True), ("inspect", INSPECT_COMBINE_DAYS + 2, False),
    ("lamp_lit", 1, False), ("snoozed", 4, True), ("watch", -1, False),
])
def test_an_inspection_waits_for_a_service_only_within_its_window_and_never_with_a_lit_lamp(status, days_ahead,
                                                                                             combined):
    service = MONDAY + dt.timedelta(days=days_ahead)
    if service.weekday() >= 5:
        service -= dt.timedelta(days=2)
    assert (combine_date(status, service, MONDAY) == service) is combined


def test_a_service_on_a_weekend_or_unknown_is_not_a_booking_day():
    assert combine_date("watch", dt.date(2026, 4, 11), MONDAY) is None  # a Saturday
    assert combine_date("watch", None, MONDAY) is None and combine_date("watch", pd.NaT, MONDAY) is None


def test_a_preferred_service_day_is_taken_when_its_depot_has_a_slot_else_the_earliest_free_day():
    thursday = MONDAY + dt.timedelta(days=3)
    queue = pd.DataFrame({"vehicle_id": ["A", "B", "C"], "depot": "North", "priority": [1, 2, 3],
                          "preferred_date": [thursday, thursday, None]})
    out = propose_dates(queue, [], MONDAY, {"North": 1}, 2)
    assert out["planned_date"].tolist() == [thursday, MONDAY, MONDAY + dt.timedelta(days=1)]


def test_a_plan_row_says_when_it_is_combined_with_the_service_or_the_service_comes_soon_after():
    thursday = MONDAY + dt.timedelta(days=3)
    assert service_note(thursday, thursday) == "combined with its scheduled service on Thu 09 Apr"
    assert service_note(MONDAY, thursday) == "service due Thu 09 Apr, 3 days after this inspection"
    assert service_note(MONDAY, MONDAY + dt.timedelta(days=40)) == "" and service_note(MONDAY, None) == ""


@pytest.fixture
def store(tmp_path, monkeypatch):
    store = build_store(tmp_path / "store")
    vehicles = store.read_table("vehicles")
    status = store.read_table("vehicle_status").set_index("vehicle_id")
    watch = status.index[status["status"] == "watch"][0]
    lit = status.index[status["status"] == "lamp_lit"][0]
    vehicles["next_service_date"] = None
    vehicles.loc[vehicles["vehicle_id"].isin([watch, lit]), "next_service_date"] = MONDAY + dt.timedelta(days=3)
    vehicles["next_service_date"] = pd.to_datetime(vehicles["next_service_date"]).dt.date
    store.publish_table("vehicles", vehicles)
    monkeypatch.setenv(STORE_ENV, str(store.root))
    return store, watch, lit


def test_planning_books_a_watch_vehicle_on_its_service_day_and_a_lit_lamp_at_once(store):
    store, watch, lit = store
    status = store.read_table("vehicle_status")
    picked = status[status["vehicle_id"].isin([watch, lit])][["vehicle_id", "depot", "rank", "status"]]
    booked, unplaced = planner.add_vehicles(store, picked, MONDAY)
    assert sorted(booked) == sorted([watch, lit]) and not unplaced
    plan = workshop.open_plan(store).set_index("vehicle_id")["planned_date"]
    assert plan[watch] == MONDAY + dt.timedelta(days=3) and plan[lit] == MONDAY
    detail = planner.with_status(workshop.open_plan(store), status, planner.service_dates(store)).set_index("vehicle_id")
    assert detail.at[watch, "service_note"] == "combined with its scheduled service on Thu 09 Apr"
    assert detail.at[lit, "service_note"] == "service due Thu 09 Apr, 3 days after this inspection"
    assert "combined with its scheduled service" in planner.export_csv(detail.reset_index())


def test_without_a_next_service_date_column_planning_is_unchanged(tmp_path):
    store = build_store(tmp_path / "plain")
    assert planner.service_dates(store) == {}


def test_the_plan_page_shows_the_service_column(store):
    store, watch, _ = store
    status = store.read_table("vehicle_status")
    planner.add_vehicles(store, status[status["vehicle_id"] == watch][["vehicle_id", "depot", "rank", "status"]],
                         MONDAY)
    at = AppTest.from_file(str(Path(dashboard.__file__).with_name("app.py")), default_timeout=60).run()
    at.switch_page("views/plan.py").run()
    assert not at.exception, [e.value for e in at.exception]
    table = next(f.value for f in at.dataframe if "Service" in f.value.columns)
    assert table.set_index("Vehicle").at[watch, "Service"] == "combined with its scheduled service on Thu 09 Apr"

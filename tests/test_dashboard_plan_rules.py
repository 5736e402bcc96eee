"""The dashboard's pure pieces: scheduling, exports, display formulas, the outcomes file."""

import csv
import datetime as dt
import io

import numpy as np
import pandas as pd
import pytest

from dashboard import planner, workshop
from dashboard.exports import escape_text, fold_line, neutralise_cell, plan_csv, plan_ics
from dashboard.outcomes import OUTCOME_COLUMNS, read_outcomes
from dashboard.scheduling import move_problem, propose_dates
from dashboard.traces import drilldown_frames, smoothed_derivative, yaw_from_rear_wheels_rps, yaw_from_steering_rps
from tracktrue.store import Store
from tracktrue.units import DEG_RAD, G0_MPS2, KPH_MPS

MONDAY = dt.date(2026, 3, 2)


def queue(*rows):
    return pd.DataFrame(rows, columns=["vehicle_id", "depot", "priority"])


def test_proposals_fill_each_depot_up_to_its_capacity_in_priority_order_on_weekdays_only():
    q = queue(("c", "A", 3), ("a", "A", 1), ("b", "A", 2), ("x", "B", 4), ("d", "A", 5), ("e", "A", 6))
    out = propose_dates(q, [], MONDAY + dt.timedelta(days=4), {"A": 2}, default_capacity=1)  # a Friday
    dates = dict(zip(out["vehicle_id"], out["planned_date"]))
    friday, monday, tuesday = MONDAY + dt.timedelta(days=4), MONDAY + dt.timedelta(days=7), MONDAY + dt.timedelta(days=8)
    assert list(out["vehicle_id"]) == ["a", "b", "c", "x", "d", "e"]
    assert dates == {"a": friday, "b": friday, "c": monday, "d": monday, "e": tuesday, "x": friday}


def test_proposals_book_around_existing_entries_and_give_up_on_a_depot_without_capacity():
    q = queue(("a", "A", 1), ("z", "Z", 2))
    out = propose_dates(q, [("A", MONDAY), ("A", MONDAY)], MONDAY, {"Z": 0}, default_capacity=2)
    assert out.loc[0, "planned_date"] == MONDAY + dt.timedelta(days=1)
    assert out.loc[1, "planned_date"] is None


def test_a_move_onto_a_full_day_or_a_weekend_is_refused():
    plan = pd.DataFrame({"id": [1, 2, 3], "depot": ["A", "A", "B"], "planned_date": [MONDAY, MONDAY, MONDAY]})
    tuesday = MONDAY + dt.timedelta(days=1)
    assert move_problem(plan, 3, tuesday, {}, 2) is None
    assert "capacity" in move_problem(pd.concat([plan, plan.assign(id=[4, 5, 6], depot="B")]), 3, MONDAY, {}, 2)
    assert "not a working day" in move_problem(plan, 1, MONDAY - dt.timedelta(days=1), {}, 2)


def test_replanning_keeps_entries_moved_by_hand(tmp_path):
    store = Store.open(tmp_path)
    picked = pd.DataFrame({"vehicle_id": ["a", "b", "c"], "depot": ["A", "A", "A"], "rank": [1, 2, 3]})
    booked, unplaced = planner.add_vehicles(store, picked, MONDAY)
    assert booked == ["a", "b", "c"] and unplaced == []
    plan = workshop.open_plan(store)
    c_id = int(plan.loc[plan["vehicle_id"] == "c", "id"].iloc[0])
    workshop.set_dates(store, {c_id: MONDAY}, pin=True)  # over capacity on purpose: a pinned entry stays
    planner.replan(store, MONDAY)
    dates = dict(zip(*workshop.open_plan(store)[["vehicle_id", "planned_date"]].T.values))
    assert dates == {"c": MONDAY, "a": MONDAY, "b": MONDAY + dt.timedelta(days=1)}


# ---- exports -----------------------------------------------------------------
def test_csv_cells_a_spreadsheet_would_run_are_quoted_and_the_file_parses():
    # OWASP "CSV Injection": cells starting with = + - @ tab or CR are prefixed with '.
    frame = pd.DataFrame({"vehicle_id": ["=HYPERLINK(\"x\")", "+1", "-2", "@SUM", "\tA", "\rB", "ok, \"quoted\""],
                          "note": ["a\nb", None, "", "x", "y", "z", "w"]})
    rows = list(csv.reader(io.StringIO(plan_csv(frame), newline="")))
    assert rows[0] == ["vehicle_id", "note"]
    assert [r[0] for r in rows[1:]] == ["'=HYPERLINK(\"x\")", "'+1", "'-2", "'@SUM", "'\tA", "'\rB", "ok, \"quoted\""]
    assert rows[1][1] == "a\nb" and rows[2][1] == ""
    assert neutralise_cell(float("nan")) == ""


def unfold(text: str) -> list[str]:
    """RFC 5545 3.1: remove CRLF followed by one space or tab."""
    return text.replace("\r\n ", "").replace("\r\n\t", "").split("\r\n")[:-1]


def check_rfc5545_lines(text: str) -> None:
    """A small RFC 5545 check: CRLF only, <= 75 octets a line, folded continuation lines."""
    assert text.endswith("\r\n")
    assert "\n" not in text.replace("\r\n", "") and "\r" not in text.replace("\r\n", "")
    for line in text.split("\r\n")[:-1]:
        assert len(line.encode("utf-8")) <= 75, line
    for line in unfold(text):
        name = line.split(":", 1)[0].split(";", 1)[0]
        assert name and name.replace("-", "").isalnum() and name.isupper(), line


def test_ics_escapes_text_and_folds_lines_at_75_octets_without_splitting_characters():
    # RFC 5545 3.3.11: backslash, semicolon, comma, newline are escaped in TEXT.
    assert escape_text("a\\b;c,d\ne") == "a\\\\b\\;c\\,d\\ne"
    long = "DESCRIPTION:" + "é" * 100  # two octets each: a naive cut splits one
    folded = fold_line(long)
    check_rfc5545_lines(folded)
    assert unfold(folded) == [long]


def test_ics_plan_has_one_all_day_event_per_entry_with_uid_and_dtstamp():
    plan = pd.DataFrame({"vehicle_id": ["TT-1", "TT-2"], "depot": ["North; yard", "Harbour"],
                         "planned_date": [MONDAY, MONDAY + dt.timedelta(days=1)],
                         "summary": ["Inspect TT-1: wheel sensor RL", "Inspect TT-2, tyre"],
                         "description": ["Line one\nLine two " + "x" * 120, "plain"]})
    text = plan_ics(plan, dt.datetime(2026, 3, 1, 12, 0, tzinfo=dt.timezone.utc), "Safety, first.")
    check_rfc5545_lines(text)
    lines = unfold(text)
    assert lines[0] == "BEGIN:VCALENDAR" and lines[-1] == "END:VCALENDAR"
    assert "VERSION:2.0" in lines and any(x.startswith("PRODID:") for x in lines)
    events = [i for i, x in enumerate(lines) if x == "BEGIN:VEVENT"]
    assert len(events) == 2 and lines.count("END:VEVENT") == 2
    assert "DTSTART;VALUE=DATE:20260302" in lines and "DTEND;VALUE=DATE:20260303" in lines
    assert lines.count("DTSTAMP:20260301T120000Z") == 2
    uids = [x for x in lines if x.startswith("UID:")]
    assert len(set(uids)) == 2
    assert "LOCATION:North\\; yard" in lines
    assert any(x.startswith("DESCRIPTION:Line one\\nLine two") and x.endswith("Safety\\, first.") for x in lines)


# ---- display formulas --------------------------------------------------------
def test_rear_axle_yaw_matches_the_worked_example():
    # CHECKS.md, kinematic yaw r = (v_right - v_left)/track: 19.8 and 20.2 m/s on 1.5 m -> 0.26667 rad/s.
    assert yaw_from_rear_wheels_rps(19.8, 20.2, 1.5) == pytest.approx(0.26667, abs=1e-5)


def test_steering_yaw_matches_the_single_track_worked_example():
    # CHECKS.md, Rajamani SI form (from memory): r = V*delta/(L + K_V V^2), K_V = 2.0833e-3 rad/(m/s^2),
    # V = 20 m/s, delta = 0.02 rad road-wheel angle, L = 2.7 m -> r = 0.113208 rad/s.
    # Our K_us in rad/g: L*(1 + K_us/(g L) V^2) = L + K_V V^2  =>  K_us = K_V * g.
    k_v = (1500 / 2.7) * (1.5 / 80e3 - 1.2 / 80e3)
    assert k_v == pytest.approx(2.0833e-3, rel=1e-4)
    r = yaw_from_steering_rps(20.0, 0.02 * 16.0, wheelbase_m=2.7, steering_ratio=16.0,
                              understeer_rad_per_g=k_v * G0_MPS2)
    assert r == pytest.approx(0.113208, abs=1e-6)


def test_wheel_derived_acceleration_of_a_steady_speed_ramp():
    t = np.arange(0, 30, 0.1)
    assert np.allclose(smoothed_derivative(t, 2.0 + 0.5 * t)[20:-20], 0.5)


def test_drilldown_converts_to_display_units_and_marks_each_wheels_deviation():
    n = 50
    t = pd.Timestamp("2026-03-02", tz="UTC") + pd.to_timedelta(np.arange(n) / 10, unit="s")
    samples = pd.DataFrame({"time": t, "wheel_speed_fl": 10.0, "wheel_speed_fr": 10.0, "wheel_speed_rl": 10.0,
                            "wheel_speed_rr": 10.3, "yaw_rate": 0.1, "steering_angle": 0.0, "accel_long": G0_MPS2})
    frames = drilldown_frames(samples, {"track_rear_m": 1.5, "wheelbase_m": 3.0, "steering_ratio": 16.0})
    speed = frames["speed"].groupby("series")["value"].mean()
    assert speed["wheel fl"] == pytest.approx(10.0 / KPH_MPS)  # 36 km/h
    dev = frames["deviation"].groupby("series")["value"].mean()
    assert dev["wheel rr"] == pytest.approx(0.3 / KPH_MPS) and dev["wheel fl"] == pytest.approx(-0.1 / KPH_MPS)
    yaw = frames["yaw"].groupby("series")["value"].mean()
    assert yaw["measured"] == pytest.approx(0.1 / DEG_RAD)
    assert yaw["from rear wheels"] == pytest.approx(0.3 / 1.5 / DEG_RAD)
    assert yaw["from steering"] == pytest.approx(0.0)
    assert frames["accel"].groupby("series")["value"].mean()["measured"] == pytest.approx(1.0)


def test_drilldown_leaves_out_estimates_whose_spec_is_missing():
    t = pd.Timestamp("2026-03-02", tz="UTC") + pd.to_timedelta(np.arange(10), unit="s")
    samples = pd.DataFrame({"time": t, **{f"wheel_speed_{p}": 5.0 for p in ("fl", "fr", "rl", "rr")},
                            "yaw_rate": 0.0})
    frames = drilldown_frames(samples, {"track_rear_m": float("nan")})
    assert set(frames["yaw"]["series"]) == {"measured"}


# ---- outcomes file -----------------------------------------------------------
def test_read_outcomes_is_empty_and_creates_nothing_when_the_dashboard_never_wrote(tmp_path):
    store = Store.open(tmp_path)
    frame = read_outcomes(store)
    assert list(frame.columns) == list(OUTCOME_COLUMNS) and frame.empty
    assert not store.dashboard_db_path.exists()


def test_outcomes_are_stored_in_a_wal_sqlite_file_and_read_back_as_labels(tmp_path):
    store = Store.open(tmp_path)
    workshop.record_outcome(store, "TT-1", MONDAY, "fault_found", "wheel_sensor_rl", "tone ring cracked")
    workshop.record_outcome(store, "TT-2", MONDAY, "no_fault_found", "yaw_sensor", "")
    import sqlite3
    assert sqlite3.connect(store.dashboard_db_path).execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    frame = read_outcomes(store)
    assert frame[["vehicle_id", "outcome", "component"]].values.tolist() == [
        ["TT-1", "fault_found", "wheel_sensor_rl"], ["TT-2", "no_fault_found", "none"]]
    assert frame["date"].iloc[0] == pd.Timestamp(MONDAY)
    with pytest.raises(ValueError, match="component"):
        workshop.record_outcome(store, "TT-3", MONDAY, "fault_found", "none")

"""Every dashboard page driven through Streamlit's AppTest on a small fixture store."""

import csv
import datetime as dt
import io
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import duckdb
import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

import dashboard
from dashboard import planner, workshop
from dashboard.scheduling import is_working_day
from dashboard.wording import SAFETY_CAUTION, STATUS_LABELS, component_label
from test_dashboard_fixture import build_store
from test_dashboard_plan_rules import check_rfc5545_lines, unfold
from tracktrue.schema import STATUSES
from tracktrue.store import STORE_ENV, Store

APP = Path(dashboard.__file__).with_name("app.py")
PAGES = ("views/triage.py", "views/plan.py", "views/vehicle.py", "views/intake.py")


@pytest.fixture(scope="module")
def fixture_root(tmp_path_factory):
    return build_store(tmp_path_factory.mktemp("store")).root


@pytest.fixture
def store(fixture_root, tmp_path, monkeypatch):
    """A private copy of the fixture store (plan and outcomes are written per test)."""
    import shutil
    root = tmp_path / "store"
    shutil.copytree(fixture_root, root)
    monkeypatch.setenv(STORE_ENV, str(root))
    return Store(root)


def open_page(page: str | None = None) -> AppTest:
    at = AppTest.from_file(str(APP), default_timeout=60).run()
    if page:
        at.switch_page(page).run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def triage_vehicles(at: AppTest) -> list[str]:
    return at.dataframe[0].value["Vehicle"].tolist()


def tick(at: AppTest, rows: list[int]) -> AppTest:
    at.session_state["triage_table"] = {"selection": {"rows": rows, "columns": [], "cells": []}}
    return at.run()


def frame_with(at: AppTest, column: str) -> pd.DataFrame:
    """The first table on the page that has ``column`` (plain tables carry no key in AppTest)."""
    return next(f.value for f in at.dataframe if column in f.value.columns)


def texts(elements) -> str:
    return "\n".join(str(e.value) for e in elements)


def test_every_page_renders_without_an_exception(store):
    for page in PAGES:
        at = open_page(page)
        assert at.title[0].value in {"Fleet triage", "Workshop plan", "Vehicle record", "Log intake"}


def test_triage_lists_vehicles_in_the_published_order_which_is_the_order_of_tracktrue_rank(store):
    at = open_page()
    published = store.read_table("vehicle_status").sort_values("rank")
    assert triage_vehicles(at) == published["vehicle_id"].tolist()
    models = pytest.importorskip("models")
    if hasattr(models, "ranking_table"):
        assert triage_vehicles(at) == models.ranking_table(store)["vehicle_id"].tolist()


def test_triage_counts_each_status_and_shows_the_safety_caution(store):
    at = open_page()
    counts = store.read_table("vehicle_status")["status"].value_counts()
    assert tuple(STATUS_LABELS) == STATUSES  # every status has its wording, in rank order
    shown = {m.label: int(m.value) for m in at.metric[:len(STATUSES)]}
    assert shown == {label: int(counts.get(s, 0)) for s, label in STATUS_LABELS.items()}
    assert SAFETY_CAUTION in texts(at.warning)
    assert "lamp lit" in texts(at.error)


def test_triage_filters_narrow_the_table_to_the_chosen_values(store):
    at = open_page()
    at.multiselect(key="filter_status").set_value(["inspect", "lamp_lit"]).run()
    assert sorted(at.dataframe[0].value["Status"]) == ["Inspect", "Lamp lit"]
    at.multiselect(key="filter_status").set_value([]).run()
    at.multiselect(key="filter_platform").set_value(["pickup"]).run()
    at.multiselect(key="filter_depot").set_value(["Harbour"]).run()
    frame = at.dataframe[0].value
    assert len(frame) > 0 and set(frame["Platform"]) == {"pickup"} and set(frame["Depot"]) == {"Harbour"}
    at.multiselect(key="filter_platform").set_value([]).run()
    at.multiselect(key="filter_depot").set_value([]).run()
    at.multiselect(key="filter_suspected_component").set_value(["wheel_sensor_rl"]).run()
    assert triage_vehicles(at) == ["TT-001"]


def test_ticked_vehicles_join_the_plan_by_priority_within_each_depots_daily_capacity(store):
    workshop.set_capacity(store, "North yard", 1)
    at = open_page()
    n = len(triage_vehicles(at))
    tick(at, list(range(n)))
    at.button(key="add_to_plan").click().run()
    assert f"Planned {n} vehicle(s)." in texts(at.success)
    plan = workshop.open_plan(store)
    assert len(plan) == n
    assert all(is_working_day(d) for d in plan["planned_date"])
    per_day = plan.groupby(["depot", "planned_date"]).size()
    for (depot, _), booked in per_day.items():
        assert booked <= (1 if depot == "North yard" else workshop.DEFAULT_CAPACITY_PER_DAY)
    for _, part in plan.groupby("depot"):  # a higher priority never waits behind a lower one
        assert part.sort_values("priority")["planned_date"].is_monotonic_increasing
    tick(at, [0])
    at.button(key="add_to_plan").click().run()
    assert "already on the plan" in texts(at.success)
    assert len(workshop.open_plan(store)) == n


def test_plan_page_moves_entries_only_onto_free_working_days_and_exports_parse(store):
    status = store.read_table("vehicle_status")
    picked = status.head(5)[["vehicle_id", "depot", "rank"]]
    planner.add_vehicles(store, picked, dt.date(2026, 3, 2))
    at = open_page("views/plan.py")
    assert SAFETY_CAUTION in texts(at.warning)
    assert at.dataframe[0].value["Vehicle"].tolist() == workshop.open_plan(store)["vehicle_id"].tolist()
    first = workshop.open_plan(store).iloc[0]
    at.selectbox(key="move_entry").set_value(int(first["id"]))
    at.date_input(key="move_date").set_value(dt.date(2026, 3, 7)).run()  # a Saturday
    at.button(key="move").click().run()
    assert "not a working day" in texts(at.error)
    at.date_input(key="move_date").set_value(dt.date(2026, 3, 20)).run()
    at.button(key="move").click().run()
    moved = workshop.open_plan(store).set_index("id").loc[int(first["id"])]
    assert moved["planned_date"] == dt.date(2026, 3, 20) and moved["pinned"]

    assert {b.label for b in at.get("download_button")} == {"Download plan (CSV)", "Download plan (calendar, .ics)"}
    detail = planner.with_status(workshop.open_plan(store), status)
    rows = list(csv.DictReader(io.StringIO(planner.export_csv(detail), newline="")))
    assert [r["vehicle_id"] for r in rows] == detail["vehicle_id"].tolist()
    evidence = {r["vehicle_id"]: r["evidence"] for r in rows}
    assert evidence["TT-003"].startswith("'-")  # the fixture's "-fr ratio" cell would run as a formula
    ics = planner.export_ics(detail, dt.datetime(2026, 3, 1, tzinfo=dt.timezone.utc))
    check_rfc5545_lines(ics)
    assert sum(line == "BEGIN:VEVENT" for line in unfold(ics)) == 5


def test_an_outcome_recorded_on_the_plan_page_survives_a_restart_and_shows_in_the_history(store):
    planner.add_vehicles(store, store.read_table("vehicle_status").head(2)[["vehicle_id", "depot", "rank"]],
                         dt.date(2026, 3, 2))
    at = open_page("views/plan.py")
    at.selectbox(key="outcome_vehicle").set_value("TT-001")
    at.date_input(key="outcome_date").set_value(dt.date(2026, 3, 3))
    at.radio(key="outcome_kind").set_value("fault_found").run()
    at.selectbox(key="outcome_component").set_value("wheel_sensor_rl")
    at.text_area(key="outcome_note").input("tone ring cracked, sensor replaced").run()
    at.button(key="save_outcome").click().run()
    assert not at.exception

    restarted = open_page("views/vehicle.py")  # a new session: state only from the file
    restarted.selectbox(key="vehicle_pick").set_value("TT-001").run()
    history = frame_with(restarted, "outcome")
    assert history[["outcome", "component", "note"]].values.tolist() == [
        ["Fault found", component_label("wheel_sensor_rl"), "tone ring cracked, sensor replaced"]]
    assert "TT-001" not in workshop.open_plan(store)["vehicle_id"].tolist()


def test_vehicle_record_draws_every_trace_with_units_on_its_axes(store):
    at = open_page("views/vehicle.py")
    at.selectbox(key="vehicle_pick").set_value("TT-001").run()
    specs = [json.loads(c.proto.spec) for c in at.get("vega_lite_chart")]
    titles = json.dumps(specs)
    for unit in ("wheel speed (km/h)", "deviation (km/h)", "yaw rate (deg/s)", "acceleration (g)",
                 "time since trip start (s)", "trip start (UTC)", '"title": "%"'):
        assert unit in titles, unit
    assert "lamp_abs on" in texts(at.caption)  # the fixture's samples light the lamp half way


def test_intake_lists_rejections_and_the_vehicle_that_went_quiet(store):
    at = open_page("views/intake.py")
    assert {m.label: m.value for m in at.metric}["Rows rejected"] == "3"
    reasons = frame_with(at, "rows_rejected")
    assert reasons.set_index("reason")["rows_rejected"].to_dict()["time goes backwards"] == 2
    quiet = frame_with(at, "days_quiet")
    assert quiet["vehicle_id"].tolist() == ["TT-012"]
    at.number_input(key="intake_quiet_days").set_value(60).run()
    assert "Every vehicle logged a trip in the last 60 days." in texts(at.success)


def test_each_page_says_which_command_publishes_a_missing_table(tmp_path, monkeypatch):
    monkeypatch.setenv(STORE_ENV, str(tmp_path / "empty"))
    for page, command in zip(PAGES, ("tracktrue score", "tracktrue score", "tracktrue score", "tracktrue ingest")):
        at = open_page(page)
        assert command in texts(at.info), page


HOLD_CATALOG = """
import sys, duckdb
con = duckdb.connect(sys.argv[1])  # read-write: the batch jobs' lock
con.execute("CREATE TABLE IF NOT EXISTS busy AS SELECT 1 AS x")
print("holding", flush=True)
sys.stdin.read()
"""


def test_pages_render_while_a_batch_job_holds_the_catalog_for_writing(store):
    holder = subprocess.Popen([sys.executable, "-c", HOLD_CATALOG, str(store.catalog_path)],
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "holding"
        with pytest.raises(duckdb.IOException):  # the lock is really held
            duckdb.connect(str(store.catalog_path), read_only=True)
        for page in PAGES:
            at = open_page(page)
            assert not at.info or "has not been published" not in texts(at.info)
        assert triage_vehicles(open_page()) == store.read_table("vehicle_status").sort_values("rank")["vehicle_id"].tolist()
    finally:
        holder.stdin.close()
        holder.wait(timeout=30)


def test_a_new_publish_is_shown_on_the_next_run(store):
    at = open_page()
    status = store.read_table("vehicle_status")
    reordered = status.iloc[::-1].assign(rank=range(1, len(status) + 1))
    store.publish_table("vehicle_status", reordered)
    assert triage_vehicles(at.run()) == reordered["vehicle_id"].tolist()


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    return True


def test_a_terminated_dashboard_stops_its_server(tmp_path):
    # SIGTERM, how a service manager (or the browser test) stops `tracktrue dashboard`, must
    # reach the server it started, or the server keeps the port after the command is gone.
    pidfile = tmp_path / "server.pid"
    server = f"import os, time; open({str(pidfile)!r}, 'w').write(str(os.getpid())); time.sleep(120)"
    launcher = ("import sys, dashboard; from tracktrue.store import Store; "
                f"dashboard.streamlit_command = lambda port, host: [sys.executable, '-c', {server!r}]; "
                f"sys.exit(dashboard.launch(Store({str(tmp_path)!r})))")
    proc = subprocess.Popen([sys.executable, "-c", launcher], stderr=subprocess.DEVNULL)
    server_pid = None
    try:
        deadline = time.monotonic() + 30
        while not (pidfile.exists() and pidfile.read_text().strip()):
            assert proc.poll() is None and time.monotonic() < deadline
            time.sleep(0.05)
        server_pid = int(pidfile.read_text())
        time.sleep(0.2)  # the launcher is in its wait by now
        proc.terminate()
        proc.wait(timeout=20)
        deadline = time.monotonic() + 10
        while _alive(server_pid) and time.monotonic() < deadline:
            time.sleep(0.05)
        assert not _alive(server_pid)
    finally:
        proc.kill()
        if server_pid is not None and _alive(server_pid):
            os.kill(server_pid, signal.SIGKILL)


def test_launch_binds_locally_headless_without_usage_statistics(monkeypatch, capsys, tmp_path):
    seen = {}

    class FakeServer:
        def __init__(self, cmd, env):
            seen.update(cmd=cmd, env=env)

        def wait(self):
            return 0

    monkeypatch.setattr(dashboard.subprocess, "Popen", FakeServer)
    assert dashboard.launch(Store(tmp_path), port=8765) == 0
    cmd = seen["cmd"]
    assert cmd[1:4] == ["-m", "streamlit", "run"] and cmd[4].endswith("app.py")
    for flag in ("--server.address=127.0.0.1", "--server.port=8765", "--server.headless=true",
                 "--browser.gatherUsageStats=false"):
        assert flag in cmd
    assert seen["env"][STORE_ENV] == str(tmp_path.resolve())
    assert "no login" not in capsys.readouterr().err
    dashboard.launch(Store(tmp_path), port=8765, host="0.0.0.0")
    assert "--server.address=0.0.0.0" in seen["cmd"] and "no login" in capsys.readouterr().err

"""Service events: validation with line numbers, idempotent import, the published table, dashboard entries."""

import datetime as dt
import json
import os
from pathlib import Path

import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

import dashboard
from dashboard.service_entries import add_service_entry, read_service_entries
from ingest import run_ingest
from ingest.service_events import import_service_events
from models.service import epoch_keys, service_table, statistic_family
from synthetic_fleet import generate_fleet
from tracktrue.cli import main
from tracktrue.errors import UserError
from tracktrue.schema import SERVICE_EVENTS_COLUMNS
from tracktrue.store import STORE_ENV, Store
from tracktrue.update import read_last_success, run_update

REGISTRY = """vehicle_id,platform,wheelbase_m,track_front_m,track_rear_m,steering_ratio,tyre_radius_m
VAN-01,van,3.4,1.7,1.7,17,0.34
VAN-02,van,3.4,1.7,1.7,17,0.34
"""
TODAY = dt.date(2026, 6, 1)


def registry_only_store(tmp_path: Path, registry: str = REGISTRY) -> Store:
    """A store that knows the registry's vehicles and has no logs (``tmp_path/no-logs`` is empty)."""
    (tmp_path / "vehicles.csv").write_text(registry)
    (tmp_path / "no-logs").mkdir()
    store = Store.open(tmp_path / "store")
    run_ingest([tmp_path / "no-logs"], store, vehicles_csv=tmp_path / "vehicles.csv")
    return store


@pytest.fixture
def store(tmp_path) -> Store:
    """A store that knows two vehicles (registry only, no logs)."""
    return registry_only_store(tmp_path)


def write(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


def test_bad_rows_are_rejected_with_their_line_and_problem_and_good_rows_are_stored(store, tmp_path):
    csv = write(tmp_path / "events.csv", """vehicle_id,date,kind,component,note
VAN-01,2026-05-02,sensor_replaced,wheel_sensor_fl,new sensor
VAN-01,2026-02-30,repair,,no such day
VAN-02,2026-05-03,polishing,,unknown kind
VAN-99,2026-05-03,repair,,unknown vehicle
VAN-02,2026-05-04,alignment,front_axle,four-wheel alignment
VAN-02,2026-05-04,wheel_alignment,front_axle,same event again
VAN-02,2026-07-01,repair,,after today
VAN-02,2026-05-05,repair,gearbox,unknown component
VAN-02,05/06/2026,repair,,not ISO
""")
    summary = import_service_events(csv, store, today=TODAY)
    lines = dict(summary.rejects)
    assert sorted(lines) == [3, 4, 5, 7, 8, 9, 10]
    assert "'2026-02-30' is not a date" in lines[3]
    assert "kind 'polishing' is not one of" in lines[4]
    assert "vehicle 'VAN-99' is not known" in lines[5]
    assert "same event" in lines[7] and "line 6" in lines[7]
    assert "in the future" in lines[8]
    assert "component 'gearbox'" in lines[9]
    assert "'05/06/2026' is not a date (YYYY-MM-DD)" in lines[10]
    assert (summary.added, summary.exit_code) == (2, 1)
    rejects = store.read_table("rejects")
    mine = rejects[rejects["source_file"] == str(csv.resolve())]
    assert sorted(mine["row"]) == sorted(lines)


def test_reimporting_the_same_file_adds_nothing_and_a_changed_note_updates_it(store, tmp_path):
    text = "vehicle_id,date,kind,component,note\nVAN-01,2026-05-02,tyre_change,tyres,winter set\n"
    csv = write(tmp_path / "events.csv", text)
    first = import_service_events(csv, store, today=TODAY)
    again = import_service_events(csv, store, today=TODAY)
    assert (first.added, again.added, again.already_stored) == (1, 0, 1)
    write(csv, text.replace("winter set", "winter set (3 mm tread)"))
    edited = import_service_events(csv, store, today=TODAY)
    assert (edited.added, edited.notes_updated) == (0, 1)
    table = store.read_table("service_events")
    assert table["note"].tolist() == ["winter set (3 mm tread)"]


def test_a_maintenance_systems_wording_reads_as_our_kinds_and_components(store, tmp_path):
    csv = write(tmp_path / "events.csv", "vehicle_id,date,kind,component\n"
                "VAN-01,2026-05-01,Tire Replacement,Tire FL\nVAN-01,2026-05-02,tyre rotation,all tyres\n"
                "VAN-02,2026-05-02,Sensor replacement,Wheel sensor RR\nVAN-02,2026-05-03,Tyres fitted,rear-axle\n")
    summary = import_service_events(csv, store, today=TODAY)
    table = store.read_table("service_events").sort_values(["vehicle_id", "date"])
    assert table[["kind", "component"]].values.tolist() == [
        ["tyre_change", "tyre_fl"], ["sensor_replaced", "wheel_sensor_rr"], ["tyre_change", "rear_axle"]]
    assert [line for line, _ in summary.rejects] == [3]  # 'all tyres' names no area: 'tyres' does


def test_published_table_has_the_contract_columns_and_models_reads_it(store, tmp_path):
    csv = write(tmp_path / "events.csv", "Vehicle_ID;Date;Kind\nVAN-02;2026-05-04;Alignment\n")  # no component/note
    import_service_events(csv, store, today=TODAY)
    table = store.read_table("service_events")
    assert tuple(table.columns) == SERVICE_EVENTS_COLUMNS
    assert table.iloc[0][["kind", "component", "note"]].tolist() == ["wheel_alignment", "", ""]
    events = service_table(table)
    assert events["event_time"].iloc[0] == pd.Timestamp("2026-05-04", tz="UTC")
    # an alignment starts no new baseline in models/service.py (its documented rule)
    trips = pd.DataFrame({"vehicle_id": ["VAN-02"], "start_time": [pd.Timestamp("2026-05-10", tz="UTC")]})
    assert epoch_keys(trips, events, "sensor").tolist() == ["VAN-02|0"]


def test_command_line_reports_file_and_lines_and_exits_1(store, tmp_path, capsys):
    csv = write(tmp_path / "events.csv", "vehicle_id,date,kind\nVAN-01,2026-13-01,repair\n")
    assert main(["service-events", str(csv), "--store", str(store.root)]) == 1
    out = capsys.readouterr().out
    assert str(csv.resolve()) in out and "line 2: date '2026-13-01' is not a date" in out


def test_missing_column_is_a_usage_error_naming_the_file(store, tmp_path, capsys):
    csv = write(tmp_path / "events.csv", "vehicle_id,when,kind\nVAN-01,2026-05-01,repair\n")
    assert main(["service-events", str(csv), "--store", str(store.root)]) == 2
    err = capsys.readouterr().err
    assert str(csv) in err and "missing required column(s) date" in err


def test_events_before_any_vehicle_is_known_are_a_missing_prerequisite(tmp_path, capsys):
    csv = write(tmp_path / "events.csv", "vehicle_id,date,kind\nVAN-01,2026-05-01,repair\n")
    assert main(["service-events", str(csv), "--store", str(tmp_path / "empty-store")]) == 4
    assert "no vehicles are known yet" in capsys.readouterr().err


def test_the_simulators_service_history_imports_without_rejects(tmp_path):
    fleet = tmp_path / "fleet"
    generate_fleet(fleet, n_vehicles=4, days=3, seed=11)
    store = Store.open(tmp_path / "store")
    code = main(["ingest", str(fleet / "logs"), "--vehicles", str(fleet / "vehicles.csv"),
                 "--service-events", str(fleet / "service_history.csv"), "--store", str(store.root)])
    assert code in (0, 1)  # 1: the simulated loggers' duplicate-time rows, which ingest rejects
    history = pd.read_csv(fleet / "service_history.csv")
    assert len(history) > 0, "seed 11 should record some tyre work in 3 days"
    table = store.read_table("service_events")
    assert len(table) == len(history)
    rejects = store.read_table("rejects")
    assert not rejects["source_file"].str.endswith("service_history.csv").any()


def test_form_entries_reach_the_published_table_through_update(tmp_path, monkeypatch):
    store = Store.open(tmp_path / "store")
    (tmp_path / "vehicles.csv").write_text(REGISTRY)
    (tmp_path / "no-logs").mkdir()
    run_ingest([tmp_path / "no-logs"], store, vehicles_csv=tmp_path / "vehicles.csv")
    monkeypatch.setenv(STORE_ENV, str(store.root))
    # the vehicle record lists vehicles from vehicle_status: publish a minimal one
    store.publish_table("vehicle_status", pd.DataFrame({
        "rank": [1], "vehicle_id": ["VAN-01"], "platform": ["van"], "score": [0.1], "status": ["ok"],
        "suspected_component": ["none"], "evidence": [""], "flagged_since": [pd.NaT], "last_trip": [pd.NaT],
        "depot": [None], "suggestion": [""], "lamp_on": [False], "n_trips": [3], "as_of": [pd.NaT]}))
    at = AppTest.from_file(str(Path(dashboard.__file__).with_name("app.py")), default_timeout=60).run()
    at.switch_page("views/vehicle.py").run()
    at.selectbox(key="service_kind").select("tone_ring_replaced")
    at.selectbox(key="service_component").select("wheel_sensor_rl")
    at.text_input(key="service_note").input("cracked ring")
    at.button(key="FormSubmitter:service_event_form-Record service event").click().run()
    assert not at.exception, [e.value for e in at.exception]
    entries = read_service_entries(store)
    assert entries[["vehicle_id", "kind", "component", "note"]].values.tolist() == [
        ["VAN-01", "tone_ring_replaced", "wheel_sensor_rl", "cracked ring"]]
    assert not store.has_table("service_events")  # the dashboard never writes the batch side

    # With no trips, update stops at scoring (a missing prerequisite, exit 4), but the fold comes
    # before it; the slow test below checks a full run on a simulated fleet.
    with pytest.raises(UserError) as info:
        run_update([tmp_path / "no-logs"], store)
    assert info.value.exit_code == 4
    table = store.read_table("service_events")
    assert table[["vehicle_id", "kind", "component", "source"]].values.tolist() == [
        ["VAN-01", "tone_ring_replaced", "wheel_sensor_rl", "dashboard"]]


@pytest.mark.slow
def test_update_rescores_after_a_dashboard_entry_and_models_see_it(tmp_path):
    fleet = tmp_path / "fleet"
    generate_fleet(fleet, n_vehicles=3, days=3, seed=5)
    store = Store.open(tmp_path / "store")
    run_update([fleet / "logs"], store, vehicles_csv=fleet / "vehicles.csv")
    vid = store.read_table("vehicle_status")["vehicle_id"].iloc[0]
    add_service_entry(store, vid, dt.date(2026, 3, 3), "sensor_replaced", "yaw_sensor", "replaced")
    second = run_update([fleet / "logs"], store)
    assert second.scored and second.counts["service_events_added"] == 1
    assert second.counts["trips_computed"] == 0
    table = store.read_table("service_events")
    assert (table["source"] == "dashboard").sum() == 1
    third = run_update([fleet / "logs"], store)
    assert not third.scored and third.counts["service_events_added"] == 0
    assert read_last_success(store)["scoring_inputs"] == third.fingerprint
    assert json.loads((store.runs_dir / "last_success.json").read_text())["counts"]["trips_scored"] == 0
    assert os.path.getsize(store.runs_dir / "update.log") > 0


def test_entering_the_same_event_twice_in_the_dashboard_keeps_one_entry_with_the_newest_note(tmp_path):
    store = Store.open(tmp_path / "store")
    add_service_entry(store, "VAN-01", dt.date(2026, 5, 2), "calibration", "steering_angle_sensor", "first")
    add_service_entry(store, "VAN-01", dt.date(2026, 5, 2), "calibration", "steering_angle_sensor", "second")
    assert read_service_entries(store)["note"].tolist() == ["second"]
    with pytest.raises(ValueError, match="kind must be one of"):
        add_service_entry(store, "VAN-01", dt.date(2026, 5, 2), "polishing")


def test_tyre_work_restarts_the_statistics_that_lean_on_the_wheels_speed_scale():
    # a full set of new tyres is a larger rolling radius on every wheel: the wheel ratios do not
    # move, but the yaw gain against the wheel estimate and yaw against the single-track model
    # (its speed is the wheels') do, together (models.service.WHEEL_SCALE_STATISTICS)
    for moved in ("wheel_ratio_fl", "yaw_vs_wheels", "accel_long_vs_wheels", "yaw_gain", "steering_vs_yaw"):
        assert statistic_family(moved) == "tyre", moved
    for unmoved in ("yaw", "accel_long", "accel_lat", "wheel_signal_rr"):
        assert statistic_family(unmoved) == "sensor", unmoved

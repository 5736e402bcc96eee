"""What a manager enters and `tracktrue update` folds in: snoozes (command and dashboard, one store),
deleted service entries, no-fault-found outcomes from the plan page."""

import datetime as dt
from pathlib import Path

import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

import dashboard
from dashboard.service_entries import add_service_entry, read_service_entries
from dashboard.snoozes import read_snoozes
from test_service_events import registry_only_store
from tracktrue.cli import main
from tracktrue.errors import UserError
from tracktrue.schema import SNOOZE_COLUMNS, VEHICLE_STATUS_COLUMNS
from tracktrue.store import STORE_ENV, Store
from tracktrue.update import run_update

AS_OF = dt.date(2026, 3, 20)
REGISTRY = """vehicle_id,platform,wheelbase_m,track_front_m,track_rear_m,steering_ratio,tyre_radius_m
VAN-01,van,3.4,1.7,1.7,17,0.34
VAN-02,van,3.4,1.7,1.7,17,0.34
VAN-03,van,3.4,1.7,1.7,17,0.34
"""


@pytest.fixture
def store(tmp_path) -> Store:
    """Registry of three vehicles and a published ranking: inspect, lamp_lit, ok (no logs)."""
    store = registry_only_store(tmp_path, REGISTRY)
    status = pd.DataFrame({
        "rank": [1, 2, 3], "vehicle_id": ["VAN-02", "VAN-01", "VAN-03"], "platform": "van", "score": [0.7, 0.6, 0.4],
        "status": ["lamp_lit", "inspect", "ok"],
        "suspected_component": ["yaw_sensor", "wheel_sensor_fl", "none"], "evidence": "",
        "flagged_since": [AS_OF, AS_OF, None], "last_trip": pd.Timestamp(AS_OF, tz="UTC"), "depot": None,
        "suggestion": "", "lamp_on": [True, False, False], "n_trips": 10, "as_of": AS_OF})
    status = status.reindex(columns=list(VEHICLE_STATUS_COLUMNS))
    status["raw_status"] = status["status"]
    store.publish_table("vehicle_status", status)
    return store


def snooze(store, *args) -> int:
    return main(["snooze", *args, "--store", str(store.root)])


def test_a_snooze_is_stored_with_its_reason_expiry_and_the_alert_it_puts_off(store, capsys):
    assert snooze(store, "VAN-01", "--until", "2026-03-27", "--reason", "booked in on Friday") == 0
    assert "inspect snoozed until 2026-03-27 (booked in on Friday)" in capsys.readouterr().out
    row = read_snoozes(store).iloc[0]
    assert list(read_snoozes(store).columns) == list(SNOOZE_COLUMNS)
    assert (row["vehicle_id"], row["until"], row["reason"], row["snoozed_status"], row["snoozed_component"]) == (
        "VAN-01", dt.date(2026, 3, 27), "booked in on Friday", "inspect", "wheel_sensor_fl")
    # a second snooze replaces the first; --clear removes it
    assert snooze(store, "VAN-01", "--until", "2026-04-03", "--reason", "parts late") == 0
    assert read_snoozes(store)["until"].tolist() == [dt.date(2026, 4, 3)]
    assert snooze(store, "VAN-01", "--clear") == 0 and read_snoozes(store).empty
    assert snooze(store, "VAN-01", "--clear") == 0
    assert "had no snooze" in capsys.readouterr().out


@pytest.mark.parametrize("args, message", [
    (["VAN-02", "--until", "2026-03-27", "--reason", "x"], "lit ABS/ESC warning lamp"),
    (["VAN-01", "--until", "2026-03-19", "--reason", "x"], "before the ranking's as-of date 2026-03-20"),
    (["VAN-01", "--until", "2026-03-27", "--reason", "  "], "needs a reason"),
    (["VAN-01", "--until", "2026-03-27"], "needs --until DATE and --reason TEXT"),
    (["VAN-09", "--until", "2026-03-27", "--reason", "x"], "unknown vehicle 'VAN-09'"),
    (["VAN-03", "--until", "2026-03-27", "--reason", "x"], "no alert to put off (status ok)"),
    (["VAN-01", "--clear", "--reason", "x"], "--clear takes no"),
])
def test_a_snooze_that_cannot_be_made_is_refused_with_the_reason(store, capsys, args, message):
    assert snooze(store, *args) == 2
    assert message in capsys.readouterr().err
    assert read_snoozes(store).empty


def test_update_publishes_the_snoozes_before_scoring(store, tmp_path):
    snooze(store, "VAN-01", "--until", "2026-03-27", "--reason", "booked in")
    # no trips: update stops at features (exit 4), after the snoozes were folded in
    with pytest.raises(UserError) as info:
        run_update([tmp_path / "no-logs"], store)
    assert info.value.exit_code == 4
    published = store.read_table("snoozes")
    assert published[["vehicle_id", "reason", "snoozed_status"]].values.tolist() == [["VAN-01", "booked in", "inspect"]]
    snooze(store, "VAN-01", "--clear")
    with pytest.raises(UserError):
        run_update([tmp_path / "no-logs"], store)
    assert store.read_table("snoozes").empty


def vehicle_page(store, monkeypatch, vehicle: str) -> AppTest:
    monkeypatch.setenv(STORE_ENV, str(store.root))
    at = AppTest.from_file(str(Path(dashboard.__file__).with_name("app.py")), default_timeout=60).run()
    at.switch_page("views/vehicle.py").run()
    at.selectbox(key="vehicle_pick").select(vehicle).run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def test_the_vehicle_record_snoozes_and_clears_in_the_same_store_as_the_command(store, monkeypatch):
    at = vehicle_page(store, monkeypatch, "VAN-01")
    at.date_input(key="vehicle_snooze_until").set_value(dt.date(2026, 3, 25))
    at.text_input(key="vehicle_snooze_reason").input("waiting for a sensor")
    at.button(key="FormSubmitter:vehicle_snooze_form-Snooze").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert read_snoozes(store)[["vehicle_id", "until", "reason"]].values.tolist() == [
        ["VAN-01", dt.date(2026, 3, 25), "waiting for a sensor"]]
    assert "Takes effect at the next `tracktrue update`" in "\n".join(m.value for m in at.markdown)
    at.button(key="vehicle_snooze_clear").click().run()
    assert read_snoozes(store).empty


def test_the_vehicle_record_offers_no_snooze_for_a_lit_lamp(store, monkeypatch):
    at = vehicle_page(store, monkeypatch, "VAN-02")
    assert "cannot be snoozed" in "\n".join(c.value for c in at.caption)
    assert not [b for b in at.button if b.key and b.key.startswith("FormSubmitter:vehicle_snooze_form")]


def test_the_vehicle_record_offers_no_snooze_for_a_vehicle_without_an_alert(store, monkeypatch):
    at = vehicle_page(store, monkeypatch, "VAN-03")
    assert "Only a vehicle with a watch or inspect alert can be snoozed." in "\n".join(c.value for c in at.caption)
    assert not [b for b in at.button if b.key and b.key.startswith("FormSubmitter:vehicle_snooze_form")]


def test_a_mistyped_service_entry_is_deleted_only_after_a_confirmation_and_update_removes_it(store, monkeypatch,
                                                                                               tmp_path):
    add_service_entry(store, "VAN-01", dt.date(2026, 3, 18), "repair", "yaw_sensor", "wrong vehicle")
    add_service_entry(store, "VAN-01", dt.date(2026, 3, 19), "calibration", "steering_angle_sensor", "right")
    with pytest.raises(UserError):
        run_update([tmp_path / "no-logs"], store)  # folds both in, then stops: no trips
    assert len(store.read_table("service_events")) == 2
    at = vehicle_page(store, monkeypatch, "VAN-01")
    first = int(read_service_entries(store)["entry_id"].iloc[0])
    at.selectbox(key="service_delete_pick").select(first).run()
    at.button(key="service_delete").click().run()
    assert "Delete the entry 2026-03-18 repair yaw sensor (wrong vehicle)?" in "\n".join(w.value for w in at.warning)
    assert len(read_service_entries(store)) == 2  # nothing deleted before the confirmation
    at.button(key="service_delete_cancel").click().run()
    assert len(read_service_entries(store)) == 2
    at.button(key="service_delete").click().run()
    at.button(key="service_delete_confirm").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert read_service_entries(store)["note"].tolist() == ["right"]
    with pytest.raises(UserError):
        run_update([tmp_path / "no-logs"], store)
    events = store.read_table("service_events")
    assert events[["kind", "note", "source"]].values.tolist() == [["calibration", "right", "dashboard"]]


def test_a_no_fault_found_outcome_from_the_plan_page_becomes_a_service_event(store, tmp_path):
    from dashboard.workshop import record_outcome

    record_outcome(store, "VAN-01", dt.date(2026, 3, 19), "no_fault_found", "none", "sensor and ring look fine")
    record_outcome(store, "VAN-03", dt.date(2026, 3, 19), "fault_found", "yaw_sensor", "loose connector")
    with pytest.raises(UserError):
        run_update([tmp_path / "no-logs"], store)  # folds it in, then stops: no trips
    events = store.read_table("service_events")
    assert events[["vehicle_id", "kind", "component", "note", "source"]].values.tolist() == [
        ["VAN-01", "no_fault_found", "", "sensor and ring look fine", "dashboard outcomes"]]

"""`tracktrue rank --changes [--since DATE]` and the triage page's "What changed", from status_history."""

import contextlib
import csv
import datetime as dt
import io
import json
from pathlib import Path

import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

import dashboard
from models.changes import CHANGE_COLUMNS
from tracktrue.cli import main
from tracktrue.schema import STATUS_HISTORY_COLUMNS
from tracktrue.store import STORE_ENV, Store

#: Three runs of six vehicles: (status, component) per vehicle; invented to exercise every kind of change.
RUNS = {
    ("r1", dt.date(2026, 3, 9)): {"A": ("ok", "none"), "B": ("watch", "yaw_sensor"), "C": ("inspect", "tyre_fl"),
                                   "D": ("inspect", "wheel_sensor_fl"), "E": ("verifying", "none"),
                                   "F": ("watch", "yaw_sensor")},
    ("r2", dt.date(2026, 3, 10)): {"A": ("watch", "yaw_sensor"), "B": ("inspect", "yaw_sensor"),
                                    "C": ("watch", "tyre_fl"), "D": ("ok", "none"), "E": ("ok", "none"),
                                    "F": ("watch", "accel_lat_sensor")},
    ("r3", dt.date(2026, 3, 11)): {"A": ("watch", "yaw_sensor"), "B": ("inspect", "yaw_sensor"),
                                    "C": ("snoozed", "tyre_fl"), "D": ("ok", "none"), "E": ("ok", "none"),
                                    "F": ("watch", "accel_lat_sensor"), "G": ("insufficient_data", "none")},
}


@pytest.fixture
def store(tmp_path) -> Store:
    store = Store.open(tmp_path / "store")
    rows = []
    for k, ((run_id, as_of), vehicles) in enumerate(RUNS.items()):
        for vid, (status, component) in vehicles.items():
            rows.append({"run_id": run_id, "created_at": pd.Timestamp("2026-03-10T02:00Z") + pd.Timedelta(days=k),
                         "as_of": as_of, "vehicle_id": vid, "raw_status": status, "held_status": status,
                         "status": status, "score": 0.5 + 0.01 * k, "suspected_component": component,
                         "flagged_since": None, "last_trip": pd.Timestamp(as_of, tz="UTC"), "last_repair": None})
    store.publish_table("status_history", pd.DataFrame(rows)[list(STATUS_HISTORY_COLUMNS)])
    return store


def changes(store, *extra) -> list[dict]:
    return changes_and_code(store, *extra)[0]


def changes_and_code(store, *extra):
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = main(["rank", "--changes", "--format", "csv", "--store", str(store.root), *extra])
    return list(csv.DictReader(io.StringIO(out.getvalue()))), code


def test_changes_between_the_last_two_runs_are_exactly_the_status_differences(store):
    rows, code = changes_and_code(store)
    assert code == 0
    assert [(r["vehicle_id"], r["change"], r["from_status"], r["to_status"]) for r in rows] == [
        ("C", "cleared", "watch", "snoozed"), ("G", "other", "not ranked", "insufficient_data")]
    assert list(rows[0]) == list(CHANGE_COLUMNS)


def test_since_a_date_compares_with_the_last_run_as_of_a_day_before_it(store):
    rows = changes(store, "--since", "2026-03-10")
    got = {r["vehicle_id"]: (r["change"], r["from_status"], r["to_status"], r["from_component"], r["to_component"])
           for r in rows}
    assert got == {
        "A": ("new", "ok", "watch", "none", "yaw_sensor"),
        "B": ("escalated", "watch", "inspect", "yaw_sensor", "yaw_sensor"),
        "C": ("cleared", "inspect", "snoozed", "tyre_fl", "tyre_fl"),
        "D": ("cleared", "inspect", "ok", "wheel_sensor_fl", "none"),
        "E": ("other", "verifying", "ok", "none", "none"),
        "F": ("component", "watch", "watch", "yaw_sensor", "accel_lat_sensor"),
        "G": ("other", "not ranked", "insufficient_data", "", "none"),
    }
    # ordered by kind, then vehicle
    assert [r["change"] for r in rows] == ["new", "escalated", "cleared", "cleared", "component", "other", "other"]


def test_a_de_escalation_is_listed_as_such(store):
    rows = changes(store, "--since", "2026-03-10")
    assert "de-escalated" not in {r["change"] for r in rows}
    history = store.read_table("status_history")
    history.loc[(history["run_id"] == "r3") & (history["vehicle_id"] == "B"), "status"] = "watch"
    store.publish_table("status_history", history)
    rows = changes(store)
    assert ("B", "de-escalated", "inspect", "watch") in [(r["vehicle_id"], r["change"], r["from_status"],
                                                          r["to_status"]) for r in rows]


def test_the_table_and_json_forms_name_both_runs(store, capsys):
    assert main(["rank", "--changes", "--store", str(store.root)]) == 0
    out = capsys.readouterr().out
    assert out.startswith("changes from run r2 (as of 2026-03-10") and "to run r3 (as of 2026-03-11" in out
    assert "cleared       C" in out and "watch → snoozed (tyre_fl)" in out
    assert main(["rank", "--changes", "--format", "json", "--store", str(store.root)]) == 0
    assert [r["vehicle_id"] for r in json.loads(capsys.readouterr().out)] == ["C", "G"]


@pytest.mark.parametrize("args, code, message", [
    (["--since", "2026-03-09"], 4, "no run as of a day before 2026-03-09"),
    (["--status", "watch"], 2, "takes no --status"),
])
def test_unusable_change_requests_say_why(store, capsys, args, code, message):
    assert main(["rank", "--changes", "--store", str(store.root), *args]) == code
    assert message in capsys.readouterr().err


def test_since_without_changes_and_a_store_without_history_are_told(tmp_path, capsys):
    assert main(["rank", "--since", "2026-03-09", "--store", str(tmp_path / "s")]) == 2
    assert "--since goes with --changes" in capsys.readouterr().err
    Store.open(tmp_path / "s")  # a store, but no scoring run yet
    assert main(["rank", "--changes", "--store", str(tmp_path / "s")]) == 4
    assert "no status history yet" in capsys.readouterr().err


def test_the_triage_page_shows_the_same_changes(store, monkeypatch):
    monkeypatch.setenv(STORE_ENV, str(store.root))
    at = AppTest.from_file(str(Path(dashboard.__file__).with_name("views") / "triage.py"), default_timeout=60)
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    table = next(f.value for f in at.dataframe if "Change" in f.value.columns)
    assert table[["Vehicle", "Change", "Was", "Now"]].values.tolist() == [
        ["C", "Cleared", "Watch", "Snoozed"], ["G", "Other status change", "not ranked", "Too few trips"]]
    at.selectbox(key="changes_since").select(dt.date(2026, 3, 10)).run()
    table = next(f.value for f in at.dataframe if "Change" in f.value.columns)
    assert len(table) == 7 and table["Change"].iloc[0] == "New alert"

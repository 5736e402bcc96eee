"""`tracktrue update`: one run at a time, consistent store, nothing recomputed without new input, staleness."""

import datetime as dt
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

import dashboard
import features
from dashboard.freshness import last_refresh
from synthetic_fleet import generate_fleet
from tracktrue.cli import main
from tracktrue.store import STORE_ENV, Store
from tracktrue.update import read_last_success

APP = Path(dashboard.__file__).with_name("app.py")


@pytest.fixture(scope="module")
def fleet(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("fleet")
    generate_fleet(out, n_vehicles=3, days=3, seed=5)
    return out


def update_command(fleet: Path, store: Path) -> list[str]:
    return [sys.executable, "-m", "tracktrue.cli", "update", str(fleet / "logs"), "--vehicles",
            str(fleet / "vehicles.csv"), "--service-events", str(fleet / "service_history.csv"),
            "--store", str(store)]


def wait_for(path: Path, proc: subprocess.Popen, timeout_s: float = 60) -> None:
    deadline = time.monotonic() + timeout_s
    while not path.exists():
        assert proc.poll() is None, f"first run ended before taking the lock: {proc.communicate()}"
        assert time.monotonic() < deadline, f"{path} never appeared"
        time.sleep(0.02)


@pytest.mark.slow
def test_a_second_concurrent_run_exits_3_naming_the_holder_and_the_store_stays_consistent(fleet, tmp_path):
    store = tmp_path / "store"
    first = subprocess.Popen(update_command(fleet, store), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        wait_for(store / "runs" / "update.lock", first)
        os.kill(first.pid, signal.SIGSTOP)  # hold the first run inside its lock while the second starts
        try:
            second = subprocess.run(update_command(fleet, store), capture_output=True, text=True, timeout=120)
        finally:
            os.kill(first.pid, signal.SIGCONT)
        out, err = first.communicate(timeout=300)
    finally:
        if first.poll() is None:
            first.kill()
    assert second.returncode == 3, second.stderr
    assert f"tracktrue update (pid {first.pid}" in second.stderr
    assert first.returncode in (0, 1), err  # 1: the simulated loggers' duplicate-time rows are rejected

    s = Store(store)
    trips = s.read_table("trips")
    assert trips["trip_id"].is_unique and len(trips) == len(list((fleet / "logs").rglob("*.csv")))
    assert set(s.read_table("trip_features")["trip_id"]) == set(trips["trip_id"])
    assert set(s.read_table("vehicle_status")["vehicle_id"]) == set(trips["vehicle_id"])
    record = read_last_success(s)
    assert record["counts"]["trips_added"] == len(trips) and record["scored"]
    assert not (store / "runs" / "update.lock").exists()

    rerun = subprocess.run(update_command(fleet, store), capture_output=True, text=True, timeout=300)
    assert rerun.returncode == 0, rerun.stderr
    assert "skipped: nothing new" in rerun.stdout
    again = read_last_success(s)
    assert again["counts"]["trips_added"] == 0 and again["counts"]["trips_computed"] == 0
    assert not again["scored"] and again["finished_at"] >= record["finished_at"]
    assert len(Store(store).read_table("trips")) == len(trips)
    log = (store / "runs" / "update.log").read_text()
    assert log.count(": start: tracktrue update") == 3 and "not started" in log


def test_a_failing_stage_exits_5_naming_it_and_leaves_the_earlier_tables_published(fleet, tmp_path, monkeypatch,
                                                                                    capsys):
    def broken(*args, **kwargs):
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(features, "run_features", broken)
    store = tmp_path / "store"
    code = main(["update", str(fleet / "logs"), "--vehicles", str(fleet / "vehicles.csv"), "--store", str(store)])
    assert code == 5
    err = capsys.readouterr().err
    assert "stage 'features' failed (RuntimeError: disk on fire)" in err and "update.log" in err
    assert "Traceback" in (store / "runs" / "update.log").read_text()
    assert read_last_success(Store(store)) is None
    assert len(Store(store).read_table("trips")) > 0 and not Store(store).has_table("trip_features")
    assert not (store / "runs" / "update.lock").exists()


def test_a_missing_input_path_is_a_usage_error(tmp_path, capsys):
    assert main(["update", str(tmp_path / "nowhere"), "--store", str(tmp_path / "store")]) == 2
    assert "no such file or folder" in capsys.readouterr().err


def write_last_success(store: Path, finished: dt.datetime) -> None:
    (store / "runs").mkdir(parents=True, exist_ok=True)
    (store / "runs" / "last_success.json").write_text(json.dumps({"finished_at": finished.isoformat()}))


def staleness_warnings(store: Path, monkeypatch) -> list[str]:
    monkeypatch.setenv(STORE_ENV, str(store))
    at = AppTest.from_file(str(APP), default_timeout=60).run()
    at.switch_page("views/intake.py").run()
    assert not at.exception, [e.value for e in at.exception]
    return [w.value for w in at.warning if "results are" in w.value]


def test_staleness_warning_says_how_old_the_results_are(tmp_path, monkeypatch):
    store = tmp_path / "store"
    write_last_success(store, dt.datetime.now(dt.timezone.utc) - dt.timedelta(days=3, hours=2))
    warnings = staleness_warnings(store, monkeypatch)
    assert len(warnings) == 1 and "3 days 2 h old" in warnings[0] and "36 h allowed" in warnings[0]


def test_no_staleness_warning_for_a_recent_run_or_a_longer_allowed_age(tmp_path, monkeypatch):
    store = tmp_path / "store"
    write_last_success(store, dt.datetime.now(dt.timezone.utc) - dt.timedelta(hours=5))
    assert staleness_warnings(store, monkeypatch) == []
    write_last_success(store, dt.datetime.now(dt.timezone.utc) - dt.timedelta(hours=70))
    monkeypatch.setenv("TRACKTRUE_STALE_HOURS", "72")
    assert staleness_warnings(store, monkeypatch) == []


def test_without_an_update_record_the_age_comes_from_the_ranking_publish(tmp_path):
    store = Store.open(tmp_path / "store")
    assert last_refresh(store) is None
    before = dt.datetime.now(dt.timezone.utc).replace(microsecond=0)
    store.publish_table("vehicle_status", pd.DataFrame({"vehicle_id": ["VAN-01"]}))
    when, measured_from = last_refresh(store)
    assert measured_from == "last publish of the ranking"
    assert before <= when <= dt.datetime.now(dt.timezone.utc)

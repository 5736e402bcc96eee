"""The ingest run against a store: published tables, idempotence, replacement, kills, hostile ids, registry."""

import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import duckdb
import pandas as pd
import pytest

from ingest import run_ingest
from ingest.catalog import FILE_COLUMNS, TRIP_COLUMNS, VEHICLE_COLUMNS
from tracktrue.errors import UserError
from tracktrue.schema import SAMPLE_COLUMNS, TRIPS_COLUMNS
from tracktrue.store import Store

FIXTURES = Path(__file__).parent / "fixtures" / "ingest"


def _log(vehicle: str, start: str, n: int = 20, speed_kph: float = 36.0) -> str:
    t0 = pd.Timestamp(start)
    rows = [f"{(t0 + pd.Timedelta(seconds=0.1 * i)).isoformat()},{speed_kph + 0.01 * i:.2f},{speed_kph:.2f},0.5"
            for i in range(n)]
    return f"# vehicle: {vehicle}\ntime,FL [km/h],FR [km/h],Yaw rate [deg/s]\n" + "\n".join(rows) + "\n"


def _fleet(folder: Path, n_files: int = 6, rows: int = 20) -> Path:
    for i in range(n_files):
        (folder / f"v{i % 3}").mkdir(parents=True, exist_ok=True)
        start = pd.Timestamp("2026-03-01T00:00:00Z") + pd.Timedelta(hours=7 * i)
        (folder / f"v{i % 3}" / f"log_{i}.CSV").write_text(_log(f"V{i % 3}", start.isoformat(), rows))
    return folder


def _samples(store: Store, trips: pd.DataFrame) -> pd.DataFrame:
    con = duckdb.connect()
    parts = [con.execute(f"SELECT * FROM read_parquet('{store.root / f}') WHERE trip_id = ?", [t]).to_arrow_table().to_pandas()
             for t, f in zip(trips.trip_id, trips.sample_file)]
    return pd.concat(parts, ignore_index=True).sort_values(["trip_id", "time"], ignore_index=True)


def _snapshot(store: Store) -> dict:
    trips = store.read_table("trips").sort_values("trip_id", ignore_index=True)
    files = store.read_table("ingested_files").drop(columns=["ingested_at"]).sort_values("path", ignore_index=True)
    return {
        "trips": trips.drop(columns=["sample_file"]),
        "files": files,
        "rejects": store.read_table("rejects").sort_values(["source_file", "row"], ignore_index=True),
        "vehicles": store.read_table("vehicles").sort_values("vehicle_id", ignore_index=True),
        "samples": _samples(store, trips),
    }


def _assert_same(a: dict, b: dict) -> None:
    for key in a:
        pd.testing.assert_frame_equal(a[key], b[key], check_dtype=False)


def test_published_tables_carry_the_contract_columns(tmp_path):
    store = Store.open(tmp_path / "store")
    summary = run_ingest([FIXTURES], store)
    trips = store.read_table("trips")
    assert tuple(trips.columns) == TRIP_COLUMNS and tuple(trips.columns[: len(TRIPS_COLUMNS)]) == TRIPS_COLUMNS
    assert tuple(store.read_table("ingested_files").columns) == FILE_COLUMNS
    assert tuple(store.read_table("rejects").columns) == ("source_file", "row", "reason")
    assert tuple(store.read_table("vehicles").columns) == VEHICLE_COLUMNS
    assert str(trips.start_time.dtype) == "datetime64[us, UTC]"
    sample = pd.read_parquet(store.root / trips.sample_file.iloc[0])
    assert tuple(sample.columns) == SAMPLE_COLUMNS
    assert all(f.startswith("samples/bucket=") and "/month=2026-03/part-" in f for f in trips.sample_file)
    files = store.read_table("ingested_files").set_index("path")
    assert files.loc[str(FIXTURES / "empty.csv"), "status"] == "rejected"
    assert summary.exit_code == 1 and "rejected" in summary.describe()
    # every data line is either stored or rejected
    ingested = files[files.status == "ingested"]
    stored = trips.groupby("source_file").n_samples.sum()
    assert (ingested.n_rows == stored.reindex(ingested.index).fillna(0) + ingested.n_rejected).all()


def test_a_clean_run_exits_zero(tmp_path):
    summary = run_ingest([_fleet(tmp_path / "logs")], Store.open(tmp_path / "store"))
    assert summary.exit_code == 0 and summary.trips == 6 and summary.rows == 120


def test_reingest_of_the_same_folder_adds_nothing(tmp_path):
    logs = _fleet(tmp_path / "logs")
    store = Store.open(tmp_path / "store")
    run_ingest([logs], store)
    before, parts = _snapshot(store), sorted(store.samples_dir.rglob("*.parquet"))
    again = run_ingest([logs], store)
    assert again.ingested == 0 and again.unchanged == 6 and again.exit_code == 0
    _assert_same(before, _snapshot(store))
    assert sorted(store.samples_dir.rglob("*.parquet")) == parts


def test_a_renamed_copy_is_a_duplicate_and_adds_nothing(tmp_path):
    logs = _fleet(tmp_path / "logs", n_files=2)
    store = Store.open(tmp_path / "store")
    run_ingest([logs], store)
    shutil.copy(logs / "v0" / "log_0.CSV", logs / "v0" / "renamed.txt")
    shutil.copy(logs / "v0" / "log_0.CSV", logs / "v0" / "renamed.TSV")
    (logs / "v0" / "notes.md").write_text("not a log")
    summary = run_ingest([logs], store)
    assert len(summary.duplicates) == 2
    files = store.read_table("ingested_files").set_index("path")
    assert files.loc[str(logs / "v0" / "renamed.txt"), "status"] == "duplicate"
    assert files.loc[str(logs / "v0" / "renamed.TSV"), "status"] == "duplicate"
    assert str(logs / "v0" / "notes.md") not in files.index
    assert len(store.read_table("trips")) == 2


def test_a_changed_file_replaces_its_trips(tmp_path):
    logs = _fleet(tmp_path / "logs", n_files=2)
    store = Store.open(tmp_path / "store")
    run_ingest([logs], store)
    path = logs / "v0" / "log_0.CSV"
    path.write_text(_log("V0", "2026-03-01T00:00:00Z", n=30, speed_kph=72.0))
    summary = run_ingest([logs], store)
    assert summary.replaced == 1
    trips = store.read_table("trips")
    mine = trips[trips.source_file == str(path)]
    assert len(trips) == 2 and mine.n_samples.tolist() == [30]
    assert _samples(store, mine).wheel_speed_fr.iloc[0] == pytest.approx(20.0)
    assert store.read_table("ingested_files").set_index("path").loc[str(path), "status"] == "replaced"
    referenced = {store.root / f for f in trips.sample_file}
    assert referenced <= set(store.samples_dir.rglob("*.parquet"))


def test_input_files_are_never_modified(tmp_path):
    logs = _fleet(tmp_path / "logs", n_files=2)
    before = {p: (p.read_bytes(), p.stat().st_mtime_ns) for p in logs.rglob("*.CSV")}
    run_ingest([logs], Store.open(tmp_path / "store"))
    assert before == {p: (p.read_bytes(), p.stat().st_mtime_ns) for p in logs.rglob("*.CSV")}


@pytest.mark.parametrize("hostile", ["../../x", "'; DROP TABLE trips; --", 'a"b\'c', "/etc/passwd", "C:\\temp\\v"])
def test_a_hostile_vehicle_id_is_stored_as_data_and_writes_nothing_outside_the_store(tmp_path, hostile):
    logs = tmp_path / "work" / "logs"
    logs.mkdir(parents=True)
    body = "time,Vehicle ID,FL [km/h]\n" + "".join(
        f'2026-03-02T07:00:0{i}Z,"{hostile.replace(chr(34), chr(34) * 2)}",10\n' for i in range(3))
    (logs / "h.csv").write_text(body)
    store = Store.open(tmp_path / "work" / "store")
    outside_before = sorted(p for p in tmp_path.rglob("*") if store.root not in p.parents)
    run_ingest([logs], store)
    assert sorted(p for p in tmp_path.rglob("*") if store.root not in p.parents and p != store.root) == \
        [p for p in outside_before if p != store.root]
    assert store.read_table("trips").vehicle_id.tolist() == [hostile]
    assert store.read_table("vehicles").vehicle_id.tolist() == [hostile]
    for p in store.samples_dir.rglob("*"):
        rel = p.relative_to(store.samples_dir).parts
        assert rel[0].startswith("bucket=") and rel[0][7:].isdigit()


def test_missing_paths_and_bad_gaps_are_user_errors(tmp_path):
    store = Store.open(tmp_path / "store")
    with pytest.raises(UserError, match="no such file"):
        run_ingest([tmp_path / "nope"], store)
    with pytest.raises(UserError, match="trip-gap"):
        run_ingest([tmp_path], store, trip_gap_s=0)


def _load_registry(tmp_path, text: str, n_files: int = 2):
    """Ingest a small fleet with the registry ``text``: (vehicles by id, this registry's rejects by line, summary)."""
    tmp_path.mkdir(parents=True, exist_ok=True)
    reg = tmp_path / "vehicles.csv"
    reg.write_text(text)
    store = Store.open(tmp_path / "store")
    summary = run_ingest([_fleet(tmp_path / "logs", n_files=n_files)], store, vehicles_csv=reg)
    rejects = store.read_table("rejects")
    mine = rejects[rejects.source_file == str(reg)].set_index("row")["reason"].to_dict()
    return store.read_table("vehicles").set_index("vehicle_id"), mine, summary


def test_registry_rows_load_and_bad_rows_are_reported_with_line_and_problem(tmp_path):
    vehicles, mine, summary = _load_registry(tmp_path, (
        "vehicle_id,platform,wheelbase_m,track_front_m,track_rear_m,steering_ratio,tyre_radius_m,depot,vin\n"
        "V0,van-a,3.4,1.7,1.7,16,0.33,North,1M8GDM9AXKP042788\n"
        "V1,van-a,34,1.7,1.7,16,0.33,North,\n"
        "V2,van-a,3.4,1.7,1.7,abc,0.33,North,\n"
        "V0,van-b,3.4,1.7,1.7,16,0.33,North,\n"), n_files=3)
    assert vehicles.loc["V0", "platform"] == "van-a" and vehicles.loc["V0", "spec_source"] == "registry"
    assert pd.isna(vehicles.loc["V1", "platform"]) and pd.isna(vehicles.loc["V1", "spec_source"])  # seen in logs only
    assert "wheelbase_m = 34" in mine[3] and "millimetres" not in mine[3]
    assert "steering_ratio is not a number" in mine[4] and "already given" in mine[5]
    assert summary.exit_code == 1


def test_a_blank_or_absent_steering_ratio_loads_as_missing_for_estimation_and_other_blanks_are_reported(tmp_path):
    """DESIGN.md: a missing spec is estimated per platform from the data (features.platform_params)."""
    vehicles, mine, _ = _load_registry(tmp_path, (
        "vehicle_id,platform,wheelbase_m,track_front_m,track_rear_m,steering_ratio,tyre_radius_m\n"
        "V0,van-a,3.4,1.7,1.7,,0.33\n"
        "V1,van-a,,1.7,1.7,16,0.33\n"))
    assert vehicles.loc["V0", "spec_source"] == "registry" and pd.isna(vehicles.loc["V0", "steering_ratio"])
    assert mine == {3: "wheelbase_m is empty"}
    without, mine, _ = _load_registry(tmp_path / "no column", (
        "vehicle_id,platform,wheelbase_m,track_front_m,track_rear_m,tyre_radius_m\nV0,van-a,3.4,1.7,1.7,0.33\n"))
    assert pd.isna(without.loc["V0", "steering_ratio"]) and mine == {}
    _, mine, _ = _load_registry(tmp_path / "mm", (
        "vehicle_id,platform,wheelbase_m,track_front_m,track_rear_m,steering_ratio,tyre_radius_m\n"
        "V0,van-a,3400,1.7,1.7,16,0.33\n"))
    assert mine == {2: "wheelbase_m = 3400 is outside the plausible range 1.5..8 "
                       "(millimetres? the column is in metres)"}


def test_registry_headers_as_a_spreadsheet_writes_them_with_lengths_in_other_units(tmp_path):
    # the same van in metres and in a spreadsheet's headers: mm, cm, inches (1 in = 0.0254 m exactly, NIST SP 811)
    vehicles, mine, _ = _load_registry(tmp_path, (
        "Vehicle ID,Platform,Wheelbase (mm),track_front_cm,Track Rear [m],Steering Ratio,Tire radius (in),Depot\n"
        "V0,van-a,3400,170,1.7,16,13,North\n"))
    assert mine == {}
    row = vehicles.loc["V0"]
    assert row.wheelbase_m == pytest.approx(3.4) and row.track_front_m == pytest.approx(1.7)
    assert row.track_rear_m == 1.7 and row.steering_ratio == 16 and row.tyre_radius_m == pytest.approx(0.3302)
    assert row.depot == "North"
    _, mine, _ = _load_registry(tmp_path / "range", (
        "vehicle_id,platform,wheelbase_mm,track_front_m,track_rear_m,steering_ratio,tyre_radius_m\n"
        "V0,van-a,34,1.7,1.7,16,0.33\n"))
    assert mine == {2: "wheelbase_m = 0.034 is outside the plausible range 1.5..8"}  # checked in metres


def test_registry_next_service_date_is_published_as_a_date_and_a_bad_one_is_reported(tmp_path):
    vehicles, mine, _ = _load_registry(tmp_path, (
        "vehicle_id,platform,wheelbase_m,track_front_m,track_rear_m,steering_ratio,tyre_radius_m,next_service_date\n"
        "V0,van-a,3.4,1.7,1.7,16,0.33,2026-04-09\n"
        "V1,van-a,3.4,1.7,1.7,16,0.33,\n"
        "V2,van-a,3.4,1.7,1.7,16,0.33,09/04/2026\n"), n_files=3)
    assert pd.Timestamp(vehicles.loc["V0", "next_service_date"]).date() == pd.Timestamp("2026-04-09").date()
    assert pd.isna(vehicles.loc["V1", "next_service_date"])
    assert "next_service_date '09/04/2026' is not a date" in mine[4]


def test_a_catalog_from_before_next_service_date_gains_the_column(tmp_path):
    store = Store.open(tmp_path / "store")
    run_ingest([_fleet(tmp_path / "logs", n_files=2)], store)
    con = duckdb.connect(str(store.catalog_path))
    con.execute("ALTER TABLE vehicles DROP COLUMN next_service_date")
    con.close()
    reg = tmp_path / "vehicles.csv"
    reg.write_text("vehicle_id,platform,wheelbase_m,track_front_m,track_rear_m,steering_ratio,tyre_radius_m,"
                   "next_service_date\nV0,van-a,3.4,1.7,1.7,16,0.33,2026-04-09\n")
    run_ingest([tmp_path / "logs"], store, vehicles_csv=reg)
    assert store.read_table("vehicles")["next_service_date"].notna().sum() == 1


def test_registry_without_a_required_column_is_a_user_error(tmp_path):
    reg = tmp_path / "vehicles.csv"
    reg.write_text("vehicle_id,platform\nV0,van\n")
    with pytest.raises(UserError, match="wheelbase_m"):
        run_ingest([tmp_path], Store.open(tmp_path / "store"), vehicles_csv=reg)


_KILLABLE = """
import sys, time
import ingest.run as run
from ingest import run_ingest
from tracktrue.store import Store
run.CHUNK_ROWS = 1          # commit after every file, so a kill lands between commits
real = run.write_part
def slow_write(path, tables):
    real(path, tables)
    time.sleep(0.05)        # widen the window between a part file and its commit
run.write_part = slow_write
run_ingest([sys.argv[1]], Store.open(sys.argv[2]))
"""


@pytest.mark.slow
def test_a_kill_mid_run_then_a_rerun_gives_the_same_store_as_an_uninterrupted_run(tmp_path):
    logs = _fleet(tmp_path / "logs", n_files=30, rows=50)
    reference = Store.open(tmp_path / "reference")
    run_ingest([logs], reference)
    store = Store.open(tmp_path / "killed")
    script = tmp_path / "killable.py"
    script.write_text(_KILLABLE)
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).parents[1])}
    for wait_parts in (3, 12):  # kill twice, at different points
        proc = subprocess.Popen([sys.executable, str(script), str(logs), str(store.root)], env=env)
        deadline = time.time() + 60
        while len(list(store.samples_dir.rglob("*.parquet"))) < wait_parts and proc.poll() is None:
            assert time.time() < deadline
            time.sleep(0.01)
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        assert proc.returncode == -signal.SIGKILL, "the run finished before it could be killed"
    run_ingest([logs], store)
    _assert_same(_snapshot(reference), _snapshot(store))
    referenced = {store.root / f for f in store.read_table("trips").sample_file}
    assert set(store.samples_dir.rglob("*.parquet")) == referenced  # orphans of the kills are collected


def test_command_line_prints_the_summary_and_returns_the_documented_exit_codes(tmp_path, capsys):
    from tracktrue.cli import main

    store = str(tmp_path / "store")
    assert main(["ingest", str(FIXTURES / "bad_rows.csv"), "--store", store]) == 1
    out = capsys.readouterr().out
    assert "1 ingested" in out and "row(s) rejected" in out
    assert main(["ingest", str(_fleet(tmp_path / "logs", n_files=1)), "--store", store]) == 0
    assert main(["ingest", str(tmp_path / "missing"), "--store", store]) == 2
    assert "no such file" in capsys.readouterr().err


def test_progress_bars_run_when_asked(tmp_path, capsys):
    summary = run_ingest([_fleet(tmp_path / "logs", n_files=2)], Store.open(tmp_path / "store"), progress=True)
    assert summary.trips == 2
    assert "file" in capsys.readouterr().err


def test_a_file_whose_every_row_is_rejected_is_named_in_the_summary_with_its_first_reason(tmp_path):
    """Timestamps without a UTC offset reject every row: the summary must say so per file, not only count."""
    logs = tmp_path / "logs"
    logs.mkdir()
    (logs / "naive.csv").write_bytes(b"# vehicle: Z\ntime,FL [km/h]\n2026-03-02T08:00:00,10\n2026-03-02T08:00:01,10\n")
    summary = run_ingest([logs], Store.open(tmp_path / "store"))
    assert summary.trips == 0 and summary.exit_code == 1
    assert summary.no_trip_files == [(str(logs / "naive.csv"), summary.no_trip_files[0][1])]
    text = summary.describe()
    assert "files with no trip stored (1):" in text
    assert "naive.csv: 2 of 2 row(s) rejected, e.g. line 3: " in text and "no UTC offset" in text

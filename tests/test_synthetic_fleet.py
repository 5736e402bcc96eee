"""The fleet over days: ground truth, lamps, service history, export styles, determinism."""

import datetime as dt
import hashlib
import io

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
import pytest

from synthetic_fleet import DEMO_DAYS, DEMO_VEHICLES, FAULTS, LAMP_SEVERITY, generate_fleet, plan_fleet
from synthetic_fleet.export import STYLES
from synthetic_fleet.faults import SENSOR_FAULT_KINDS, TYRE_DISTRACTOR_KINDS, parse_fault
from test_synthetic_trip import _metrics  # noqa: E402 (tests/ is on sys.path under pytest's rootdir import)
from tracktrue.schema import COMPONENTS, REGISTRY_OPTIONAL, REGISTRY_REQUIRED
from tracktrue.vin import vin_problem

START = dt.date(2026, 3, 2)


def read_export(path):
    """One exported trip back in canonical SI units, by the style's own header table."""
    text = path.read_text(encoding="utf-8")
    style = STYLES["B"] if text.startswith("#") else STYLES["A"]
    meta = dict(line[2:].split(": ", 1) for line in text.splitlines() if line.startswith("# "))
    body = "\n".join(line for line in text.splitlines() if not line.startswith("#"))
    if style.decimal_comma:  # the only commas in a style-B file are decimal commas
        body = body.replace(",", ".")
    raw = pacsv.read_csv(io.BytesIO(body.encode("utf-8")), parse_options=pacsv.ParseOptions(delimiter=style.delimiter),
                         convert_options=pacsv.ConvertOptions(column_types={"DTC": pa.string()},
                                                                        strings_can_be_null=True)).to_pandas()
    out = pd.DataFrame()
    for col in style.columns:
        if col.signal == "time":
            out["time"] = (pd.Timestamp(meta["start"]) + pd.to_timedelta(raw[col.header], unit="s")
                           if style.relative_time else pd.to_datetime(raw[col.header], utc=True))
        elif col.signal in ("vin", "dtc"):
            out[col.signal] = raw[col.header].astype("string")
        elif col.signal in ("brake", "lamp_abs", "lamp_esc"):
            out[col.signal] = raw[col.header].astype(bool)
        else:
            out[col.signal] = raw[col.header].astype(float) * col.si_per_unit
    return style, meta, out


@pytest.fixture(scope="module")
def fleet(tmp_path_factory):
    """A month of a small fleet at a low rate (fast), with one developing sensor fault."""
    out = tmp_path_factory.mktemp("fleet") / "out"
    summary = generate_fleet(out, n_vehicles=4, days=30, seed=3, rate_hz=2.0)
    return out, summary


@pytest.fixture(scope="module")
def logs(fleet):
    """Every exported trip of the fixture fleet, read back once: path -> (style, metadata, SI frame)."""
    out, _ = fleet
    return {f: read_export(f) for f in sorted((out / "logs").rglob("*.csv"))}


def test_demo_fleet_plan_has_every_fault_kind_and_the_right_shares():
    plan = plan_fleet(DEMO_VEHICLES, DEMO_DAYS, seed=7)
    faults = [v.fault.name for v in plan.vehicles if v.fault]
    kinds = {parse_fault(f).kind for f in faults}
    assert kinds == set(SENSOR_FAULT_KINDS) | set(TYRE_DISTRACTOR_KINDS)
    n_sensor = sum(parse_fault(f).is_sensor_fault for f in faults)
    assert 0.3 <= n_sensor / DEMO_VEHICLES <= 0.4
    assert 1 <= len(faults) - n_sensor <= 0.15 * DEMO_VEHICLES
    lit = [d for d in plan.lamp_dates.values() if d is not None]
    assert 1 <= len(lit) < n_sensor  # some lamps light within the period, not all
    samples = sum(t.duration_s for trips in plan.trips.values() for t in trips) * 10.0
    assert samples < 8.5e6  # the demo chain's budget (about 8 million samples at 10 Hz)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_lamps_light_only_after_onset_and_only_for_sensor_faults(seed):
    plan = plan_fleet(24, 40, seed=seed)
    for v in plan.vehicles:
        lamp = plan.lamp_dates[v.vehicle_id]
        lit_trips = [t for t in plan.trips[v.vehicle_id] if t.condition.lamp_from_s is not None]
        if v.fault is None or not parse_fault(v.fault.name).is_sensor_fault:
            assert lamp is None and not lit_trips
            continue
        onset = START + dt.timedelta(days=int(v.fault.onset_day))
        if lamp is not None:
            if v.fault.growth == "gradual":
                assert lamp > onset  # days or weeks after the onset, never at once
            assert lamp >= onset
            for t in lit_trips:
                if v.fault.growth == "intermittent":  # a stored code: lit from the dropout to the key-off
                    assert t.condition.severity < LAMP_SEVERITY
                    assert t.condition.lamp_from_s == t.condition.dropout_bursts[0][0] > 0
                else:
                    assert t.condition.severity >= LAMP_SEVERITY
            first = min(t.start for t in lit_trips)
            assert first.date() == lamp


def test_fault_severity_is_zero_before_onset_and_grows_after():
    plan = plan_fleet(24, 60, seed=5)
    for v in plan.vehicles:
        if v.fault is None:
            continue
        days = np.linspace(0, 60, 241)
        s = np.array([v.fault.severity(d) for d in days])
        assert np.all(s[days < v.fault.onset_day] == 0)
        assert np.all(np.diff(s) >= 0) and s[-1] > 0


def test_fleet_tables_follow_the_contracts(fleet):
    out, summary = fleet
    vehicles = pd.read_csv(out / "vehicles.csv")
    assert list(vehicles.columns) == [*REGISTRY_REQUIRED, "understeer_gradient_deg_per_g", "depot", "vin",
                                      "next_service_date"]
    services = pd.to_datetime(vehicles.next_service_date).dt.date
    assert (services >= START + dt.timedelta(days=summary.days)).all()
    assert set(REGISTRY_OPTIONAL) <= set(vehicles.columns)
    assert all(vin_problem(v) is None for v in vehicles.vin)
    truth = pd.read_csv(out / "truth.csv", dtype=str, keep_default_na=False)
    assert list(truth.columns) == ["vehicle_id", "fault", "component", "onset_date", "lamp_date", "growth"]
    assert set(truth.fault) <= set(FAULTS) and set(truth.component) <= set(COMPONENTS) - {"none"}
    assert set(truth.growth) <= {"gradual", "sudden", "intermittent"}
    loggers = pd.read_csv(out / "loggers.csv")
    assert list(loggers.columns) == ["vehicle_id", "logger_kind", "wheel_sensor_type", "rate_hz",
                                     "wheel_speed_step_kph"]
    assert list(loggers.vehicle_id) == list(vehicles.vehicle_id)
    assert set(loggers.logger_kind) <= {"polled", "bus_capture", "telematics"}
    assert set(loggers.wheel_sensor_type) <= {"passive", "active"}
    episodes = pd.read_csv(out / "lamp_episodes.csv")
    assert list(episodes.columns) == ["vehicle_id", "trip_start", "kind", "from_s", "to_s"]
    assert set(episodes.kind) <= {"intervention", "esc_off", "intermittent_code"}
    history = pd.read_csv(out / "service_history.csv")
    assert list(history.columns) == ["vehicle_id", "date", "kind", "component", "note"]
    files = sorted((out / "logs").rglob("*.csv"))
    assert len(files) == summary.n_files and {f.parent.name for f in files} <= set(vehicles.vehicle_id)
    assert "samples" in summary.describe() and str(out / "truth.csv") in summary.describe()


def test_both_export_styles_appear_with_units_in_their_headers(logs):
    seen = {style.name: (f, meta, df) for f, (style, meta, df) in logs.items()}
    assert set(seen) == {"A", "B"}
    f, meta, df = seen["B"]
    assert meta["vehicle"] == f.parent.name and meta["start"].endswith("Z")
    header = next(line for line in f.read_text(encoding="utf-8").splitlines() if not line.startswith("#"))
    assert "LF wheel spd (mph)" in header and "Yaw rate (°/s)" in header and "(m/s²)" in header
    f, _, df = seen["A"]
    assert f.read_text().splitlines()[1].split(",")[1].endswith("Z")  # ISO-8601 UTC
    assert "Wheel Speed FL [km/h]" in f.read_text().splitlines()[0]


def test_lamp_and_trouble_code_appear_in_the_logs_only_from_the_lamp_date(fleet, logs):
    out, _ = fleet
    truth = pd.read_csv(out / "truth.csv", dtype=str, keep_default_na=False)
    lit = truth[truth.lamp_date != ""]
    assert len(lit) >= 1, "the fixture fleet should have a lamp within its month"
    episodes = pd.read_csv(out / "lamp_episodes.csv")
    for vid in pd.read_csv(out / "vehicles.csv").vehicle_id:
        row = truth[truth.vehicle_id == vid]
        lamp_date = row.lamp_date.iloc[0] if len(row) else ""
        intermittent = len(row) and row.growth.iloc[0] == "intermittent"
        for f in sorted((out / "logs" / vid).glob("*.csv")):
            _, _, df = logs[f]
            start = pd.Timestamp(f.stem.split("_")[1])
            mine = episodes[(episodes.vehicle_id == vid) & (pd.to_datetime(episodes.trip_start) == start)]
            coded = df.dtc.notna()
            day = df.time.iloc[0].date().isoformat()
            if not lamp_date or day < lamp_date or (intermittent and "intermittent_code" not in set(mine.kind)):
                assert not df.lamp_abs.any() and not coded.any(), f.name
            elif day > lamp_date and not intermittent:
                assert coded.all() and (df.lamp_abs | df.lamp_esc).all() and df.dtc.str.startswith("TT-").all(), f.name
            # an ESC lamp without a code is an intervention or ESC switched off, never a fault
            since_s = (df.time - start).dt.total_seconds().to_numpy()
            quiet = mine[mine.kind != "intermittent_code"]
            inside = np.zeros(len(df), dtype=bool)
            for lo, hi in zip(quiet.from_s, quiet.to_s.fillna(np.inf)):  # empty: until the key is off
                inside |= (since_s >= lo - 1.0) & (since_s <= hi + 1.0)
            assert not (df.lamp_esc & ~coded & ~inside).any(), f.name


def test_the_logged_fault_grows_after_onset_in_its_own_signal(fleet, logs):
    out, _ = fleet
    truth = pd.read_csv(out / "truth.csv", dtype=str, keep_default_na=False)
    vehicles = pd.read_csv(out / "vehicles.csv").set_index("vehicle_id")
    row = truth[truth.fault.map(lambda f: parse_fault(f).is_sensor_fault)].iloc[0]
    fault = parse_fault(row.fault)
    key, size = {
        "tone_ring": (f"jitter_{fault.position}_pct", None), "air_gap": (f"dropouts_{fault.position}", None),
        "yaw_offset": ("yaw_rest_dps", 1.5), "yaw_gain": ("yaw_gain", 0.07), "steer_offset": ("steer_center_deg", 7.0),
        "accel_long_offset": ("accel_long_rest_g", 0.05), "accel_lat_offset": ("accel_lat_cruise_g", 0.05),
    }[fault.kind]
    spec = vehicles.loc[row.vehicle_id].to_dict()
    before, late = [], []
    files = sorted((out / "logs" / row.vehicle_id).glob("*.csv"))
    for f in files:
        _, _, df = logs[f]
        value = _metrics(df, spec)[key]
        (before if df.time.iloc[0].date().isoformat() < row.onset_date else late).append(value)
    early, last = np.nanmedian(before), np.nanmedian(late[-4:])
    assert abs(last - early) > (0.5 * size if size else 3 * max(abs(early), 0.01)), (row.fault, early, last)


def _digest(out):
    h = hashlib.sha256()
    for f in sorted(out.rglob("*.csv")):
        h.update(f.relative_to(out).as_posix().encode())
        h.update(f.read_bytes())
    return h.hexdigest()


def test_the_same_seed_writes_byte_identical_files(tmp_path):
    a = generate_fleet(tmp_path / "a", n_vehicles=3, days=3, seed=11, rate_hz=2.0)
    b = generate_fleet(tmp_path / "b", n_vehicles=3, days=3, seed=11, rate_hz=2.0)
    c = generate_fleet(tmp_path / "c", n_vehicles=3, days=3, seed=12, rate_hz=2.0)
    assert a.n_files > 0 and _digest(tmp_path / "a") == _digest(tmp_path / "b")
    assert _digest(tmp_path / "a") != _digest(tmp_path / "c")


@pytest.mark.slow
def test_worker_processes_write_the_same_bytes_as_one_process(tmp_path):
    generate_fleet(tmp_path / "one", n_vehicles=3, days=2, seed=11, rate_hz=2.0, workers=1)
    generate_fleet(tmp_path / "two", n_vehicles=3, days=2, seed=11, rate_hz=2.0, workers=2)
    assert _digest(tmp_path / "one") == _digest(tmp_path / "two")


def test_analog_voltage_columns_are_extra_and_off_by_default(tmp_path):
    generate_fleet(tmp_path / "v", n_vehicles=2, days=2, seed=4, rate_hz=2.0, analog_accel=True)
    generate_fleet(tmp_path / "plain", n_vehicles=2, days=2, seed=4, rate_hz=2.0)
    f = sorted((tmp_path / "v" / "logs").rglob("*.csv"))[0]
    plain = tmp_path / "plain" / f.relative_to(tmp_path / "v")
    lines = [line for line in f.read_text(encoding="utf-8").splitlines() if not line.startswith("#")]
    plain_header = [line for line in plain.read_text(encoding="utf-8").splitlines() if not line.startswith("#")][0]
    assert "(V)" not in plain_header and "[V]" not in plain_header
    assert lines[0].startswith(plain_header) and lines[0].count("V") > plain_header.count("V")
    delim = ";" if ";" in lines[0] else ","
    volts = np.array([[float(x.replace(",", ".")) for x in line.split(delim)[-2:]] for line in lines[1:]
                      if "" not in line.split(delim)[-2:]])
    # common practice: a 5 V-referenced accelerometer rests near 2.5 V and stays within 0.5-4.5 V
    assert np.all((volts > 0.5) & (volts < 4.5)) and abs(np.median(volts) - 2.5) < 0.1


def test_an_output_folder_with_other_content_is_refused(tmp_path):
    (tmp_path / "notes.txt").write_text("mine")
    with pytest.raises(Exception, match="not empty"):
        generate_fleet(tmp_path, n_vehicles=1, days=1, seed=1)
    assert (tmp_path / "notes.txt").read_text() == "mine"

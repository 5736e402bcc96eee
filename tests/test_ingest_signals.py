"""Real logs, not clean ones: sign checks, invert, read-lag alignment, per-signal quality, speed-only logs."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from ingest import run_ingest
from ingest.logfile import read_log
from ingest.profile import Profile, load_profile
from tracktrue.schema import TRIP_SIGNALS_COLUMNS, WHEEL_SPEED_COLUMNS
from tracktrue.store import Store
from tracktrue.units import KPH_MPS

T0 = pd.Timestamp("2026-03-02T07:00:00Z")


def _csv(columns: dict[str, np.ndarray], t_s: np.ndarray, fmt: str = "{:.4f}") -> bytes:
    times = [(T0 + pd.Timedelta(seconds=float(s))).isoformat() for s in t_s]
    cells = [[fmt.format(x) if isinstance(x, float) and math.isfinite(x) else ("" if isinstance(x, float) else str(x))
              for x in values.tolist()] for values in columns.values()]
    lines = ["# vehicle: SIG-1", ",".join(["time", *columns])]
    lines += [",".join([t, *row]) for t, row in zip(times, zip(*cells))]
    return ("\n".join(lines) + "\n").encode()


def _frame(result) -> pd.DataFrame:
    return pd.concat([t.samples.to_pandas() for t in result.trips], ignore_index=True)


def _turning(yaw_sign: float = 1.0, ax_sign: float = 1.0) -> bytes:
    # Steady kinematics on a 1.5 m rear track: r = (v_rr - v_rl) / track (kinematic yaw of a
    # non-steered axle) and a_x = dv/dt (CHECKS.md); ISO 8855 signs: left turns and speeding up positive.
    t = np.arange(0, 120, 0.1)
    r = 0.2 * np.sin(t / 5)
    v = 12 + 4 * np.sin(t / 7)
    ax = 4 / 7 * np.cos(t / 7)
    return _csv({"RL [m/s]": v - 0.75 * r, "RR [m/s]": v + 0.75 * r, "Yaw rate [rad/s]": yaw_sign * r,
                 "Long accel [m/s^2]": ax_sign * ax}, t)


def test_an_inverted_yaw_sign_is_reported_naming_the_signal_and_invert_in_a_profile_reads_it_right(tmp_path):
    flipped = read_log(_turning(yaw_sign=-1), "y.csv", "V", Profile(), 300)
    assert [w.split()[0] for w in flipped.warnings if "ISO 8855" in w] == ["yaw_rate"]
    profile_path = tmp_path / "p.toml"
    profile_path.write_text('[columns."Yaw rate"]\nsignal = "yaw_rate"\nunit = "rad/s"\ninvert = true\n')
    fixed = read_log(_turning(yaw_sign=-1), "y.csv", "V", load_profile(profile_path), 300)
    assert not any("ISO 8855" in w for w in fixed.warnings)
    right = _frame(read_log(_turning(), "y.csv", "V", Profile(), 300))
    assert _frame(fixed).yaw_rate.to_numpy() == pytest.approx(right.yaw_rate.to_numpy())


def test_longitudinal_acceleration_positive_in_deceleration_is_reported():
    assert not any("ISO 8855" in w for w in read_log(_turning(), "a.csv", "V", Profile(), 300).warnings)
    flipped = read_log(_turning(ax_sign=-1), "a.csv", "V", Profile(), 300)
    assert [w.split()[0] for w in flipped.warnings if "ISO 8855" in w] == ["accel_long"]


def _accelerating(lag_ms: int, companion: bool) -> bytes:
    """Four wheels at 10 Hz while speeding up at 2 m/s²; FL's cells are read ``lag_ms`` before the row,
    which a read-lag companion column says when ``companion``."""
    t = np.arange(0, 30, 0.1)
    v = 5.0 + 2.0 * t
    columns = {f"{p} [km/h]": v / KPH_MPS for p in ("FR", "RL", "RR")}
    late = 5.0 + 2.0 * (t - lag_ms / 1000.0)
    columns["Wheel speed FL [km/h]"] = late / KPH_MPS
    if companion:
        columns["Wheel speed FL @ms"] = np.full(t.size, lag_ms)
    return _csv(columns, t, "{:.2f}")


def test_a_read_lag_column_removes_the_bias_a_late_read_puts_between_wheels():
    # A value read 0.2 s early while accelerating at 2 m/s² is 0.4 m/s low (v = v0 + a·t).
    def residual(result) -> float:
        df = _frame(result).iloc[5:-5]
        return float(np.median(df.wheel_speed_fl - df.wheel_speed_fr))

    skewed = read_log(_accelerating(200, companion=False), "s.csv", "V", Profile(), 300)
    assert residual(skewed) == pytest.approx(-0.4, abs=0.01)
    aligned = read_log(_accelerating(200, companion=True), "s.csv", "V", Profile(), 300)
    assert aligned.unusable is None and aligned.rejects == []
    assert not any("columns not used" in w for w in aligned.warnings)
    assert abs(residual(aligned)) < 0.01
    row = {r["signal"]: r for r in aligned.trips[0].signal_rows}
    assert row["wheel_speed_fl"]["read_lag_s"] == pytest.approx(0.2)
    assert math.isnan(row["wheel_speed_fr"]["read_lag_s"])


def test_aligned_values_keep_the_logged_step():
    t = np.arange(0, 30, 0.5)
    v = np.round((5.0 + 1.0 * t) / KPH_MPS)  # whole km/h
    data = {"FL [km/h]": v, "FR [km/h]": v, "FL @ms": np.full(t.size, 150)}
    df = _frame(read_log(_csv(data, t, "{:.0f}"), "q.csv", "V", Profile(), 300))
    steps = np.round(df.wheel_speed_fl.to_numpy() / KPH_MPS, 6)
    assert np.all(steps == np.round(steps))


def test_bad_read_lag_cells_reject_their_rows_a_switch_lag_is_accepted_a_lag_of_no_column_is_a_warning():
    t = np.arange(0, 5, 0.5)
    lag = np.full(t.size, 100.0)
    lag[3], lag[6] = -5.0, 120_000.0
    r = read_log(_csv({"FL [km/h]": np.full(t.size, 30.0), "FL @ms": lag, "Oil temp @ms": lag,
                       "Brake switch": np.zeros(t.size, int), "Brake switch @ms": np.full(t.size, 50)}, t),
                 "b.csv", "V", Profile(), 300)
    reasons = dict(r.rejects)
    assert len(reasons) == 2 and all("read lag" in why for why in reasons.values())
    assert [w for w in r.warnings if "@ms" in w] == ["columns not used: 'Oil temp @ms (a read-lag column of no column "
                                                     "read)'"]


def test_a_second_read_lag_column_for_one_signal_is_a_warning_naming_that_signals_column():
    t = np.arange(0, 5, 0.5)
    r = read_log(_csv({"FL [km/h]": np.full(t.size, 30.0), "FL @ms": np.full(t.size, 100.0),
                       "FL [km/h] @ms": np.full(t.size, 200.0)}, t), "d.csv", "V", Profile(), 300)
    assert r.rejects == []
    assert [w for w in r.warnings if "@ms" in w] == ["columns not used: 'FL [km/h] @ms (a second read-lag column "
                                                     "for FL [km/h])'"]
    assert {row["signal"]: row["read_lag_s"] for row in r.trips[0].signal_rows}["wheel_speed_fl"] == 0.1


def test_a_speed_only_telematics_log_is_ingested_with_null_wheel_columns(tmp_path):
    t = np.arange(0, 600, 1.0)
    v = np.clip(t / 10, 0, 25) / KPH_MPS * 1.0
    log = _csv({"Vehicle speed [km/h]": np.round(v), "ESC lamp": np.zeros(t.size, int),
                "DTC": np.array([""] * t.size, object)}, t, "{:.0f}")
    r = read_log(log, "tm.csv", "V", Profile(), 300)
    assert r.unusable is None and r.rejects == [] and len(r.trips) == 1
    df = _frame(r)
    for column in (*WHEEL_SPEED_COLUMNS, "yaw_rate", "steering_angle", "accel_long", "accel_lat"):
        assert df[column].isna().all(), column
    assert df.vehicle_speed.notna().all()
    assert r.trips[0].info["distance_km"] > 1.0  # from the vehicle speed
    rows = {x["signal"]: x for x in r.trips[0].signal_rows}
    assert rows["vehicle_speed"]["present"] and not rows["wheel_speed_fl"]["present"]
    assert math.isnan(rows["wheel_speed_fl"]["rate_hz"])


def _polled(step_kph: float, stale_every: int) -> tuple[bytes, float]:
    """A 5 Hz log whose FL repeats its previous value every ``stale_every``-th row."""
    t = np.arange(0, 300, 0.2)
    v = (15 + 5 * np.sin(t / 20)) / KPH_MPS
    fl = np.round(v / step_kph) * step_kph
    stale = np.arange(t.size) % stale_every == 0
    stale[0] = False
    fl[stale] = fl[np.flatnonzero(stale) - 1]
    return _csv({"FL [km/h]": fl, "FR [km/h]": v}, t, "{:.3f}"), float(np.mean(stale))


def test_trip_signals_record_each_signals_fresh_rate_step_and_stale_share():
    log, stale_share = _polled(0.1, stale_every=4)
    rows = {x["signal"]: x for x in read_log(log, "p.csv", "V", Profile(), 300).trips[0].signal_rows}
    fl, fr = rows["wheel_speed_fl"], rows["wheel_speed_fr"]
    assert fl["step_si"] == pytest.approx(0.1 * KPH_MPS, rel=1e-3)
    assert fl["stale_frac"] >= stale_share - 0.01
    assert fl["rate_hz"] <= 5.0 * (1 - stale_share) + 0.05
    assert fr["stale_frac"] < 0.02 and fr["rate_hz"] == pytest.approx(5.0, rel=0.03)
    assert not rows["yaw_rate"]["present"]


def test_the_store_publishes_trip_signals_and_replaces_them_with_their_file(tmp_path):
    logs = tmp_path / "logs"
    logs.mkdir()
    path = logs / "p.csv"
    path.write_bytes(_polled(0.1, 4)[0])
    store = Store(tmp_path / "store")
    run_ingest([logs], store)
    first = store.read_table("trip_signals")
    assert list(first.columns) == list(TRIP_SIGNALS_COLUMNS)
    trips = store.read_table("trips")
    assert len(first) == 9 * len(trips) and set(first.trip_id) == set(trips.trip_id)
    path.write_bytes(_polled(1.0, 4)[0])  # new content, same path: the trip is replaced
    run_ingest([logs], store)
    again = store.read_table("trip_signals")
    assert len(again) == len(first)
    step = again.set_index("signal").loc["wheel_speed_fl", "step_si"]
    assert step == pytest.approx(KPH_MPS, rel=1e-3)

"""The in-memory trip API: contract, determinism, and that each fault shows where its physics puts it."""

import warnings

import numpy as np
import pandas as pd
import pytest

from synthetic_fleet import CONFOUNDERS, FAULTS, LAMP_SEVERITY, PLATFORMS, trip_samples
from tracktrue.schema import POSITIONS, REGISTRY_OPTIONAL, REGISTRY_REQUIRED, SAMPLE_COLUMNS, WHEEL_SPEED_COLUMNS
from tracktrue.vin import vin_problem

DEG = np.pi / 180
G0 = 9.80665  # standard gravity, exact (3rd CGPM 1901; ISO 80000-3)


def _metrics(df: pd.DataFrame, spec: dict) -> dict:
    """Crude per-trip summaries, enough to see a fault; the real features live in features/."""
    with warnings.catch_warnings():  # a short trip may have no standstill or cruise: NaN, said once
        warnings.simplefilter("ignore", RuntimeWarning)
        return _metrics_of(df, spec)


def _metrics_of(df: pd.DataFrame, spec: dict) -> dict:
    w = df[list(WHEEL_SPEED_COLUMNS)].to_numpy()
    mean = np.nanmean(w, axis=1)
    still = (np.nanmax(w, axis=1) == 0) & ~df.brake.isna()
    r_wheels = (df.wheel_speed_rr - df.wheel_speed_rl) / spec["track_rear_m"]
    cruise = (mean > 8) & (np.abs(r_wheels) < 0.01)
    moving = mean > 5
    out = {
        "yaw_rest_dps": np.nanmedian(df.yaw_rate[still]) / DEG,
        "steer_center_deg": np.nanmedian(df.steering_angle[cruise]) / DEG,
        "accel_long_rest_g": np.nanmedian(df.accel_long[still]) / G0,
        "accel_lat_cruise_g": np.nanmedian(df.accel_lat[cruise]) / G0,
    }
    ok = moving & r_wheels.notna() & df.yaw_rate.notna()
    out["yaw_gain"] = np.polyfit(r_wheels[ok], df.yaw_rate[ok], 1)[0]
    for i, p in enumerate(POSITIONS):
        others = np.nanmedian(np.delete(w, i, axis=1), axis=1)  # median of three: robust to one bad wheel
        rel = (w[:, i] - others) / np.maximum(others, 1.0)
        out[f"ratio_{p}_pct"] = 100 * np.nanmedian(rel[cruise])
        d = np.diff(rel[moving & (w[:, i] > 0)])
        out[f"jitter_{p}_pct"] = 100 * np.nanmedian(np.abs(d - np.nanmedian(d)))
        out[f"dropouts_{p}"] = int(np.sum((w[:, i] == 0) & (others > 3)))
    for i, j in ((0, 1), (2, 3), (0, 2), (1, 3)):  # axle and side pairs: each sees only its two wheels
        pair_mean = 0.5 * (w[:, i] + w[:, j])
        rel = (w[:, i] - w[:, j]) / np.maximum(pair_mean, 1.0)
        d = np.diff(rel[(pair_mean > 5) & (w[:, i] > 0) & (w[:, j] > 0)])
        out[f"pair_jitter_{POSITIONS[i]}{POSITIONS[j]}_pct"] = 100 * np.nanmedian(np.abs(d - np.nanmedian(d)))
    return out


def test_trip_samples_returns_canonical_si_columns_and_a_registry_row():
    df, spec = trip_samples(duration_s=300, seed=1)
    assert list(df.columns) == list(SAMPLE_COLUMNS)
    assert str(df.time.dt.tz) == "UTC" and df.time.is_monotonic_increasing
    assert df.vehicle_id.notna().all() and df.trip_id.nunique() == 1
    assert set(REGISTRY_REQUIRED + REGISTRY_OPTIONAL) <= set(spec)
    assert vin_problem(spec["vin"]) is None
    assert df.wheel_speed_fl.max() < 40  # m/s, not km/h
    assert np.abs(df.yaw_rate).max() < 1.5  # rad/s
    assert 9 < 1 / df.time.diff().dt.total_seconds().median() < 11


def test_the_same_seed_gives_the_same_trip():
    a, _ = trip_samples(fault="tone_ring_fr", duration_s=200, seed=4)
    b, _ = trip_samples(fault="tone_ring_fr", duration_s=200, seed=4)
    pd.testing.assert_frame_equal(a, b)
    c, _ = trip_samples(fault="tone_ring_fr", duration_s=200, seed=5)
    assert not a[["wheel_speed_fl"]].equals(c[["wheel_speed_fl"]])


def test_names_are_listed_for_iteration_and_unknown_names_are_refused():
    assert len(PLATFORMS) >= 3 and "air_gap_rl" in FAULTS and "spare_fr" in CONFOUNDERS
    with pytest.raises(ValueError, match="unknown fault"):
        trip_samples(fault="flux_capacitor")
    with pytest.raises(ValueError, match="unknown confounder"):
        trip_samples(confounders=("rain",))
    with pytest.raises(ValueError, match="unknown platform"):
        trip_samples("tractor")


@pytest.fixture(scope="module")
def healthy():
    return {p: _metrics(*trip_samples(p, drive="town", seed=21)) for p in PLATFORMS}


def _faulty(fault, platform="lwb_van", severity=1.0):
    return _metrics(*trip_samples(platform, fault=fault, fault_severity=severity, drive="town", seed=21))


def test_damaged_tone_ring_raises_jitter_on_that_wheel_only(healthy):
    m = _faulty("tone_ring_rl")
    h = healthy["lwb_van"]
    assert m["jitter_rl_pct"] > 3 * h["jitter_rl_pct"]
    # the pairs with rl jitter; the pairs without it do not
    for pair in ("rlrr", "flrl"):
        assert m[f"pair_jitter_{pair}_pct"] > 3 * h[f"pair_jitter_{pair}_pct"]
    for pair in ("flfr", "frrr"):
        assert m[f"pair_jitter_{pair}_pct"] == pytest.approx(h[f"pair_jitter_{pair}_pct"], rel=1e-9)


def test_air_gap_drops_out_at_low_speed_on_that_wheel_only(healthy):
    m = _faulty("air_gap_fr")
    assert m["dropouts_fr"] > 20
    assert all(m[f"dropouts_{p}"] == 0 for p in ("fl", "rl", "rr"))
    assert all(healthy[k][f"dropouts_{p}"] == 0 for k in PLATFORMS for p in POSITIONS)


@pytest.mark.parametrize("fault,key,size", [
    ("yaw_offset", "yaw_rest_dps", 1.5),
    ("steer_offset", "steer_center_deg", 7.0),
    ("accel_long_offset", "accel_long_rest_g", 0.05),
    ("accel_lat_offset", "accel_lat_cruise_g", 0.05),
    ("yaw_gain", "yaw_gain", 0.07),
])
def test_offset_and_gain_faults_shift_their_own_signal_by_their_size(healthy, fault, key, size):
    m = _faulty(fault)
    h = healthy["lwb_van"]
    assert abs(m[key] - h[key]) == pytest.approx(size, rel=0.25)
    # the wheels do not see it
    for p in POSITIONS:
        assert m[f"ratio_{p}_pct"] == pytest.approx(h[f"ratio_{p}_pct"], abs=0.05)


def test_deflating_tyre_raises_that_wheels_ratio_without_jitter_or_dropouts(healthy):
    m = _faulty("tyre_deflation_fl", platform="pickup")
    h = healthy["pickup"]
    assert m["ratio_fl_pct"] - h["ratio_fl_pct"] == pytest.approx(1.0, abs=0.3)  # 1 % smaller radius
    assert m["jitter_fl_pct"] < 1.5 * h["jitter_fl_pct"] + 0.02 and m["dropouts_fl"] == 0


@pytest.mark.parametrize("fault", ["air_gap_rr", "yaw_gain", "tyre_deflation_rr"])
def test_lamp_lights_only_over_the_threshold_and_never_for_tyres(fault):
    below, _ = trip_samples(fault=fault, fault_severity=1.0, duration_s=200, seed=2)
    above, _ = trip_samples(fault=fault, fault_severity=LAMP_SEVERITY, duration_s=200, seed=2)
    assert not below.lamp_abs.any() and not below.lamp_esc.any() and below.dtc.isna().all()
    if fault.startswith("tyre"):
        assert not above.lamp_esc.any() and above.dtc.isna().all()
    else:
        assert above.lamp_esc.all() and above.dtc.str.startswith("TT-").all()
        assert above.lamp_abs.all() == fault.startswith("air_gap")


@pytest.mark.parametrize("confounder", CONFOUNDERS)
def test_confounders_never_light_a_lamp(confounder):
    df, _ = trip_samples("pickup", confounders=(confounder,), duration_s=200, seed=3)
    assert not df.lamp_abs.any() and not df.lamp_esc.any() and df.dtc.isna().all()


def _same(a: pd.Series, b: pd.Series) -> bool:
    """Equal, numbers to the last few bits (the single-track model's round trip δ → r is not bit-exact)."""
    if a.dtype.kind == "f":
        return bool(np.allclose(a, b, rtol=1e-12, atol=1e-12, equal_nan=True))
    return a.equals(b)


def _touched(fault: str) -> set[str]:
    name = fault.rsplit("_", 1)
    if name[-1] in POSITIONS:
        return {f"wheel_speed_{name[-1]}", "vehicle_speed"}  # the controller's speed uses every wheel
    return {"yaw_offset": {"yaw_rate"}, "yaw_gain": {"yaw_rate"}, "steer_offset": {"steering_angle"},
            "accel_long_offset": {"accel_long"}, "accel_lat_offset": {"accel_lat"}}[fault]


@pytest.mark.parametrize("fault", FAULTS)
def test_a_fault_changes_its_own_signals_and_nothing_else(fault):
    healthy, _ = trip_samples("compact_van", duration_s=150, seed=9)
    faulty, _ = trip_samples("compact_van", fault=fault, duration_s=150, seed=9)
    changed = {c for c in healthy.columns if not _same(healthy[c], faulty[c])}
    assert changed == _touched(fault)


_WHEELS = {*WHEEL_SPEED_COLUMNS, "vehicle_speed"}
_CONFOUNDER_TOUCHES = {
    "rough_road": _WHEELS | {"yaw_rate", "accel_long", "accel_lat"},
    "tyre_change": _WHEELS, **{f"spare_{p}": {f"wheel_speed_{p}", "vehicle_speed"} for p in POSITIONS},
    # understeer changes the steering needed; the body pitches; loaded tyres roll on a smaller radius
    "full_load": _WHEELS | {"steering_angle", "accel_long"}, "towing": _WHEELS | {"steering_angle", "accel_long"},
    "temperature": {"yaw_rate", "accel_long", "accel_lat"}, "slope_parking": {"accel_long"},
}


@pytest.mark.parametrize("confounder", CONFOUNDERS)
def test_a_confounder_changes_only_the_signals_it_acts_on(confounder):
    healthy, _ = trip_samples("lwb_van", duration_s=150, seed=9)
    other, _ = trip_samples("lwb_van", confounders=(confounder,), duration_s=150, seed=9)
    changed = {c for c in healthy.columns if not _same(healthy[c], other[c])}
    assert changed <= _CONFOUNDER_TOUCHES[confounder] and changed

"""The CSV writer: values within the logged resolution, exact units, reference formatting."""

import numpy as np
import pandas as pd
import pytest

from synthetic_fleet.export import STYLES, _numbers, iso_utc_ms, write_trip_csv
from synthetic_fleet.logger import LOGGERS
from synthetic_fleet.platforms import platform
from synthetic_fleet.sensors import SensorHealth, TripCondition
from synthetic_fleet.trip import simulate_trip
from test_synthetic_fleet import read_export  # noqa: E402 (tests/ is on sys.path under pytest)
from tracktrue.schema import NUMERIC_SIGNALS

START = pd.Timestamp("2026-03-02T07:14:00Z")


def _trip(logger: str, fault: str | None = None):
    rng = np.random.default_rng(8)
    return simulate_trip(platform("pickup"), SensorHealth.draw(rng),
                         TripCondition(fault=fault, severity=2.0 if fault else 0.0, lamp_from_s=60.0 if fault else None),
                         vehicle_id="EXP-1", start=START, drive="town", duration_s=240.0, fleet_rate_hz=10.0,
                         logger=LOGGERS[logger], rng=rng)


@pytest.mark.parametrize("logger", ["bus_capture", "polled"])
@pytest.mark.parametrize("style_name", sorted(STYLES))
def test_exported_values_equal_the_simulated_ones_within_half_a_logged_step(tmp_path, style_name, logger):
    sim = _trip(logger, fault="yaw_offset")
    style = STYLES[style_name]
    path = tmp_path / "EXP-1.csv"
    write_trip_csv(path, style, vehicle_id="EXP-1", vin="TV9PKU3D0TS000001", start_ms=START.value // 1_000_000,
                   time_ms=sim.time_ms, columns=sim.columns, polled=logger == "polled", analog=False)
    _, meta, df = read_export(path)
    assert len(df) == sim.n_samples
    got_ms = (df.time - START).dt.total_seconds().to_numpy() * 1000
    np.testing.assert_allclose(got_ms, sim.time_ms, atol=1e-6)
    for sig in NUMERIC_SIGNALS:
        step = style.resolution_si(sig, polled=logger == "polled")
        truth, got = sim.columns[sig], df[sig].to_numpy(dtype=float)
        assert (np.isnan(got) == np.isnan(truth)).all(), sig
        ok = ~np.isnan(truth)
        assert np.max(np.abs(got[ok] - truth[ok])) <= step / 2 * (1 + 1e-9), sig
    for sig in ("brake", "lamp_abs", "lamp_esc"):
        assert (df[sig].to_numpy() == sim.columns[sig]).all()
    assert (df.dtc.fillna("").to_numpy() == np.where(sim.columns["dtc"] != None, "TT-Y01", "")).all()  # noqa: E711
    if logger == "bus_capture":  # a polled logger reads the lamp and the code at different instants
        assert (sim.columns["dtc"] != None).tolist() == sim.columns["lamp_esc"].tolist()  # noqa: E711


def test_style_b_speeds_are_in_miles_per_hour():
    # NIST SP 811 (2008) B.8: 1 mile = 1609.344 m exactly, so 1 mph = 0.44704 m/s.
    col = STYLES["B"].column("wheel_speed_fl")
    assert "(mph)" in col.header and col.si_per_unit == pytest.approx(0.44704, abs=1e-15)
    assert STYLES["A"].column("wheel_speed_fl").si_per_unit == pytest.approx(1 / 3.6, abs=1e-15)
    # 3rd CGPM (1901): g0 = 9.80665 m/s² for the [g] columns.
    assert STYLES["A"].column("accel_long").si_per_unit == 9.80665


def test_iso_timestamps_match_numpys_formatting():
    # Reference implementation: numpy.datetime_as_string in UTC with millisecond unit.
    rng = np.random.default_rng(2)
    ms = np.sort(rng.integers(1_772_400_000_000, 1_780_000_000_000, 2000))
    expected = np.datetime_as_string(ms.astype("datetime64[ms]"), unit="ms", timezone="UTC")
    assert iso_utc_ms(ms).to_pylist() == expected.tolist()


@pytest.mark.parametrize("decimals,comma", [(0, False), (1, True), (2, False), (3, True)])
def test_number_text_matches_pythons_fixed_point_formatting(decimals, comma):
    # Reference: Python's format(x, ".Nf") of the value rounded to the step; NaN → empty cell.
    rng = np.random.default_rng(decimals)
    x = np.concatenate([rng.normal(0, 20, 500), [np.nan, -0.0004, 0.0, 29.9995]])
    got = _numbers(x[None, :], np.array([decimals]), comma)[0].to_pylist()
    for value, text in zip(x, got):
        if np.isnan(value):
            assert text is None
            continue
        ref = f"{np.rint(value * 10**decimals) / 10**decimals + 0.0:.{decimals}f}"
        assert text == (ref.replace(".", ",") if comma else ref)

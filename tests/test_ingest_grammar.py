"""Header grammar and unit factors of the ingest stage."""

import math

import numpy as np
import pytest

from ingest.columns import plan_columns
from ingest.grammar import normalise_unit, recognise, unit_factor
from ingest.logfile import read_log
from ingest.profile import Profile


@pytest.mark.parametrize("header,signal,unit", [
    # wheel positions in both conventions, abbreviated and spelled out, before or after the signal word
    ("WSS_FL [km/h]", "wheel_speed_fl", "km/h"),
    ("Wheel Speed FR (kph)", "wheel_speed_fr", "kph"),
    ("wheel spd RL [mph]", "wheel_speed_rl", "mph"),
    ("WheelSpeedRR [m/s]", "wheel_speed_rr", "m/s"),
    ("Wheel Spd LF (kph)", "wheel_speed_fl", "kph"),
    ("RF wheel speed [km/h]", "wheel_speed_fr", "km/h"),
    ("LR WSS [km/h]", "wheel_speed_rl", "km/h"),
    ("front left wheel speed (mph)", "wheel_speed_fl", "mph"),
    ("Left Front Wheel Speed (mph)", "wheel_speed_fl", "mph"),
    ("left rear wheel speed [m/s]", "wheel_speed_rl", "m/s"),
    ("Wheel speed rear right [km/h]", "wheel_speed_rr", "km/h"),
    ("right front wss (km/h)", "wheel_speed_fr", "km/h"),
    ("FL [km/h]", "wheel_speed_fl", "km/h"),
    ("wheel_speed_rr_kph", "wheel_speed_rr", "kph"),
    ("ws_fl_kmh", "wheel_speed_fl", "kmh"),
    # a unit as the last word, without brackets
    ("Wheel Speed FL km/h", "wheel_speed_fl", "km/h"),
    ("LR wheel speed m/s", "wheel_speed_rl", "m/s"),
    ("Yaw rate deg/s", "yaw_rate", "deg/s"),
    ("Lateral acceleration m/s²", "accel_lat", "m/s²"),
    ("Wheel speed FL, km/h", "wheel_speed_fl", "km/h"),
    ("Yaw rate | deg/s", "yaw_rate", "deg/s"),
    ("Wheel speed FL {km/h}", "wheel_speed_fl", "km/h"),
    ("GPS speed [km/h]", "vehicle_speed", "km/h"),
    # the other signals
    ("Yaw rate [deg/s]", "yaw_rate", "deg/s"),
    ("yawRate (rad/s)", "yaw_rate", "rad/s"),
    ("Yaw Rate (°/s)", "yaw_rate", "°/s"),
    ("Steering wheel angle [deg]", "steering_angle", "deg"),
    ("Steering angle (°)", "steering_angle", "°"),
    ("SWA [rad]", "steering_angle", "rad"),
    # trade abbreviations: steering angle sensor, yaw rate sensor (common practice)
    ("SAS [deg]", "steering_angle", "deg"),
    ("YRS [°/s]", "yaw_rate", "°/s"),
    ("Longitudinal acceleration [m/s²]", "accel_long", "m/s²"),
    ("long accel [g]", "accel_long", "g"),
    ("G sensor long (m/s^2)", "accel_long", "m/s^2"),
    ("Lateral Acceleration (ft/s²)", "accel_lat", "ft/s²"),
    ("lat accel [g]", "accel_lat", "g"),
    ("G sensor lat [V]", "accel_lat", "V"),
    ("Vehicle speed [km/h]", "vehicle_speed", "km/h"),
    ("speed (mph)", "vehicle_speed", "mph"),
    ("Brake switch", "brake", None),
    ("ABS lamp", "lamp_abs", None),
    ("ESC warning lamp", "lamp_esc", None),
    ("DTC", "dtc", None),
    ("Odometer [km]", "odometer", "km"),
    ("Vehicle ID", "vehicle_id", None),
    ("VIN", "vin", None),
    ("Timestamp", "time", None),
    ("Date", "date", None),
    ("Log date (UTC)", "date", "UTC"),
    ("time [s]", "time", "s"),
    ("epoch_ms", "time", "ms"),
])
def test_header_names_its_canonical_signal_and_unit(header, signal, unit):
    rec = recognise(header)
    assert (rec.signal, rec.unit) == (signal, unit)


@pytest.mark.parametrize("header", ["Cabin temp [degC]", "wheel speed [km/h]", "Engine RPM", "foo", ""])
def test_unrecognised_or_ambiguous_headers_name_no_signal(header):
    assert recognise(header).signal is None


def test_unit_factors_are_the_exact_si_values():
    # NIST SP 811 (2008) appendix B: 1 mph = 0.44704 m/s, 1 km/h = 1/3.6 m/s, 1 ft = 0.3048 m (exact).
    assert unit_factor("wheel_speed_fl", "mph")[0] == pytest.approx(0.44704, abs=1e-15)
    assert unit_factor("wheel_speed_fl", "km/h")[0] == pytest.approx(1 / 3.6, abs=1e-15)
    assert unit_factor("accel_lat", "ft/s²")[0] == 0.3048
    # 3rd CGPM (1901) / ISO 80000-3: g0 = 9.80665 m/s^2 exactly.
    assert unit_factor("accel_long", "g")[0] == 9.80665
    # 180 degrees = pi radians (definition of the degree).
    assert unit_factor("yaw_rate", "°/s")[0] * 180 == pytest.approx(math.pi, rel=1e-15)
    assert unit_factor("steering_angle", "deg")[0] * 180 == pytest.approx(math.pi, rel=1e-15)


def test_stored_values_are_converted_with_the_exact_factors():
    csv = ("# vehicle: U1\ntime,FL [mph],FR [km/h],RL [m/s],Yaw rate [deg/s],Steering angle [°],"
           "Long accel [g],Lat accel [ft/s^2]\n2026-03-02T07:00:00Z,1,3.6,2,90,-180,1,1\n").encode()
    row = read_log(csv, "u.csv", "x", Profile(), 300).trips[0].samples.to_pylist()[0]
    assert row["wheel_speed_fl"] == pytest.approx(0.44704, rel=1e-15)  # NIST SP 811
    assert row["wheel_speed_fr"] == pytest.approx(1.0, rel=1e-15)  # 3.6 km/h = 1 m/s
    assert row["wheel_speed_rl"] == 2.0
    assert row["yaw_rate"] == pytest.approx(math.pi / 2, rel=1e-15)
    assert row["steering_angle"] == pytest.approx(-math.pi, rel=1e-15)
    assert row["accel_long"] == 9.80665  # CGPM 1901
    assert row["accel_lat"] == pytest.approx(0.3048, rel=1e-15)  # NIST SP 811


@pytest.mark.parametrize("signal,written,canonical", [
    ("accel_lat", "m/s/s", "m/s^2"), ("accel_lat", "m/sec^2", "m/s^2"), ("accel_lat", "ft/sec/sec", "ft/s^2"),
    ("accel_lat", "m s-2", "m/s^2"), ("accel_lat", "m·s⁻²", "m/s^2"), ("yaw_rate", "deg s-1", "deg/s"),
    ("yaw_rate", "°/sec", "°/s"), ("wheel_speed_fl", "km h-1", "km/h"), ("wheel_speed_fl", "m s^-1", "m/s"),
    ("wheel_speed_fl", "mi/hr", "mi/h"), ("wheel_speed_fl", "miles/h", "mi/h"), ("wheel_speed_fl", "km/hr", "km/h"),
    ("steering_angle", "degree", "deg"),
])
def test_unit_spellings_of_other_tools_mean_the_same_unit(signal, written, canonical):
    assert normalise_unit(written) == canonical
    assert unit_factor(signal, written) == unit_factor(signal, canonical) and unit_factor(signal, written)[1] is None


def test_milli_g_is_a_thousandth_of_standard_gravity():
    # 3rd CGPM (1901): g0 = 9.80665 m/s^2 exactly; the SI prefix milli = 10^-3 (SI Brochure, 9th ed., table 7).
    assert unit_factor("accel_lat", "mg")[0] == pytest.approx(9.80665e-3, rel=1e-15)


@pytest.mark.parametrize("header,word", [
    ("WSS FL", "no unit"),
    ("WSS FL furlongs", "no unit"),
    ("Vehicle speed m", "needs speed"),
    ("WSS FL [furlong/fortnight]", "unknown unit"),
    ("WSS FL [deg/s]", "needs speed"),
    ("Lat accel [V]", "zero point and sensitivity"),
])
def test_a_numeric_signal_without_a_usable_unit_is_a_column_error(header, word):
    plan = plan_columns(["time", header], Profile())
    assert len(plan.errors) == 1 and word in plan.errors[0] and header in plan.errors[0]
    assert "time" in plan.columns and len(plan.columns) == 1


def test_a_second_column_for_the_same_signal_is_not_used():
    plan = plan_columns(["time", "FL [km/h]", "wheel speed front left [mph]"], Profile())
    assert plan.columns["wheel_speed_fl"].header == "FL [km/h]"
    assert plan.errors == [] and "already read from 'FL [km/h]'" in plan.ignored[0]


def test_resolution_is_the_smallest_step_in_si_units():
    rows = "\n".join(f"2026-03-02T07:00:{i:02d}Z,{36 + i},{v}" for i, v in enumerate([1.0, 1.5, 1.5, 2.5, 2.0]))
    csv = f"# vehicle: R\ntime,FL [km/h],Yaw rate [deg/s]\n{rows}\n".encode()
    info = read_log(csv, "r.csv", "x", Profile(), 300).trips[0].info
    assert info["resolution_wheel_speed_fl"] == pytest.approx(1 / 3.6)
    assert info["resolution_yaw_rate"] == pytest.approx(0.5 * math.pi / 180)
    assert np.isnan(info["resolution_accel_lat"])
    assert info["sample_rate_hz"] == pytest.approx(1.0)

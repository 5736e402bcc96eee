"""CSV dialects, time bases, identity, profiles and row validation, from small fixtures."""

import math

import numpy as np
from pathlib import Path

import pandas as pd
import pytest

from ingest.logfile import read_log
from ingest.profile import Profile, load_profile
from tracktrue.errors import UserError

FIXTURES = Path(__file__).parent / "fixtures" / "ingest"


def _read(name: str, profile: Profile | None = None, gap_s: float = 300.0):
    path = FIXTURES / name
    return read_log(path.read_bytes(), path.name, path.parent.name, profile or Profile(), gap_s)


def _frame(result) -> pd.DataFrame:
    return pd.concat([t.samples.to_pandas() for t in result.trips], ignore_index=True)


def test_comma_file_with_every_canonical_signal_is_read_in_si():
    r = _read("comma_iso_full.csv")
    assert r.unusable is None and r.rejects == [] and len(r.trips) == 1
    df = _frame(r)
    assert df.vehicle_id.unique().tolist() == ["BUS-04"]
    assert df.wheel_speed_fl.iloc[0] == pytest.approx(10.0)  # 36 km/h
    assert df.accel_long.iloc[3] == pytest.approx(-0.1 * 9.80665)
    assert df.yaw_rate.iloc[4] == pytest.approx(4 * math.pi / 180)
    assert df.brake.tolist() == [False, False, True, True, False]
    assert df.lamp_abs.tolist() == [False, False, False, False, True]
    assert df.dtc.iloc[3] == "TT-W31" and pd.isna(df.dtc.iloc[0])
    assert r.trips[0].info["odometer_end_km"] == pytest.approx(12000.1)
    assert "Cabin temp" in r.warnings[0]


def test_offsets_are_converted_to_utc():
    # row 4 is written 08:14:00.300+01:00, i.e. 07:14:00.300Z
    df = _frame(_read("comma_iso_full.csv"))
    assert df.time.iloc[3] == pd.Timestamp("2026-03-02T07:14:00.300Z")
    assert str(df.time.dtype) == "datetime64[us, UTC]"


def test_latin1_semicolon_decimal_comma_comment_lines_and_crlf():
    r = _read("semicolon_decimal_comma_latin1.csv")
    assert r.unusable is None and r.rejects == []
    df = _frame(r)
    assert len(df) == 3  # a comment line between rows, a delimiter-only line and trailing blank lines are not rows
    assert df.vehicle_id.unique().tolist() == ["TAXI-31"]
    assert df.steering_angle.tolist() == pytest.approx([math.pi / 2, -math.pi / 2, math.pi / 4])  # [°]
    assert df.yaw_rate.iloc[0] == pytest.approx(1.5 * math.pi / 180)  # [°/s] in Latin-1
    assert df.accel_lat.iloc[0] == pytest.approx(0.25)  # [m/s²]
    # relative seconds from '# start: 2026-03-02T08:14:00+01:00'
    assert df.time.iloc[2] == pd.Timestamp("2026-03-02T07:14:00.400Z")
    assert r.trips[0].lines.tolist() == [4, 5, 7]


def test_bom_crlf_epoch_milliseconds_and_vin_column():
    r = _read("bom_crlf_epoch_ms.csv")
    df = _frame(r)
    assert r.unusable is None and len(df) == 3 and r.warnings == []
    assert df.time.iloc[1] == pd.Timestamp(1772435640020, unit="ms", tz="UTC")
    assert df.vehicle_id.iloc[0] == "1M8GDM9AXKP042788"  # no ID column, no '# vehicle:': the VIN column
    assert df.wheel_speed_fl.iloc[0] == pytest.approx(20.0)  # 72 kph
    assert df.accel_lat.iloc[0] == pytest.approx(3.2808 * 0.3048)


def test_tab_file_with_epoch_seconds_warns_about_a_bad_vin():
    r = _read("tab_epoch_s_bad_vin.txt")
    assert r.trips[0].vehicle_id == "1M8GDM9A1KP042788"
    assert any("check digit" in w for w in r.warnings)
    assert _frame(r).time.iloc[1] == pd.Timestamp(1772435640.5, unit="s", tz="UTC")


def test_relative_time_takes_its_start_from_the_file_name_and_identity_from_the_folder():
    r = _read("VAN-17/trip_20260302T071400Z.csv")
    df = _frame(r)
    assert df.vehicle_id.unique().tolist() == ["VAN-17"]
    assert df.time.iloc[1] == pd.Timestamp("2026-03-02T07:14:00.5Z")
    assert df.wheel_speed_rr.iloc[0] == pytest.approx(10 * 0.44704)  # mph, NIST SP 811


def test_relative_time_without_any_start_makes_the_file_unusable():
    csv = b"t [s],FL [km/h]\n0,10\n1,10\n"
    r = read_log(csv, "nostart.csv", "V", Profile(), 300)
    assert r.unusable and "no start" in r.unusable and r.n_rejected == 2


def test_naive_iso_times_are_rejected_unless_a_timezone_is_given():
    csv = b"# vehicle: Z\ntime,FL [km/h]\n2026-03-02T08:00:00,10\n2026-03-02T08:00:01,10\n"
    r = read_log(csv, "naive.csv", "V", Profile(), 300)
    assert len(r.rejects) == 2 and "no UTC offset" in r.rejects[0][1]
    zoned = read_log(b"# timezone: Europe/Vienna\n" + csv, "naive.csv", "V", Profile(), 300)
    # 2 March is winter time in Vienna: UTC+1 (IANA tz database)
    assert _frame(zoned).time.iloc[0] == pd.Timestamp("2026-03-02T07:00:00Z")


@pytest.mark.parametrize("stamp,hint", [
    ("08:00:00.250", "time of day without a date"),
    ("02/03/2026 08:00:00", "day/month order is ambiguous"),
    ("02.03.2026 08:00", "day/month order is ambiguous"),
    ("soon", "neither an ISO 8601 time nor a number"),
])
def test_unreadable_times_are_rejected_with_what_to_export_instead(stamp, hint):
    csv = f"# vehicle: Z\n# start: 2026-03-02T08:00:00Z\ntime,FL [km/h]\n{stamp},10\n{stamp},10\n".encode()
    r = read_log(csv, "clock.csv", "V", Profile(), 300)
    assert r.trips == [] and [line for line, _ in r.rejects] == [4, 5]
    assert all(hint in why and repr(stamp) in why for _, why in r.rejects)


def test_a_log_with_two_ignition_cycles_becomes_two_trips():
    r = _read("two_ignition_cycles.csv")
    assert [t.info["n_samples"] for t in r.trips] == [3, 2]
    assert len({t.trip_id for t in r.trips}) == 2
    assert len(_read("two_ignition_cycles.csv", gap_s=2000).trips) == 1


def test_bad_rows_are_rejected_with_line_and_reason_and_missing_cells_are_kept():
    r = _read("bad_rows.csv")
    reasons = dict(r.rejects)
    assert "'abc' is not a number" in reasons[4]
    assert "outside the physical range" in reasons[5] and "outside the physical range" in reasons[13]
    assert "on/off" in reasons[6]
    assert "earlier than a previous" in reasons[8]
    assert "fields" in reasons[10]
    assert "ISO 8601" in reasons[11]
    assert "no UTC offset" in reasons[12]
    assert "repeats an earlier row's time" in reasons[15]
    kept = r.trips[0].lines.tolist()
    assert kept == [3, 7, 9, 14]  # line 9 has an empty yaw cell: kept, as a null
    assert math.isnan(_frame(r).yaw_rate.iloc[2])
    assert r.n_rows == len(kept) + len(r.rejects)


@pytest.mark.parametrize("name,word", [
    ("empty.csv", "empty"), ("binary.csv", "binary"), ("no_time.csv", "no time column"),
    ("no_wheel_speed.csv", "no usable wheel speed"),
])
def test_unusable_files_say_why(name, word):
    assert word in _read(name).unusable


def test_column_errors_leave_the_other_columns_in_use():
    r = _read("no_units.csv")
    assert len(r.column_errors) == 3 and r.unusable is None
    assert _frame(r).wheel_speed_fr.tolist() == pytest.approx([10.0, 10.0])


def test_profile_maps_voltage_accelerometer_inverts_and_scales():
    profile = load_profile(FIXTURES / "analog_profile.toml")
    r = _read("analog.csv", profile)
    df = _frame(r)
    # a = (V - zero_v) / v_per_g g: 3.3 V -> +1 g, 1.7 V -> -1 g with 2.5 V and 0.8 V/g
    assert df.accel_long.tolist() == pytest.approx([0.0, 9.80665, -9.80665])
    assert df.yaw_rate.tolist() == pytest.approx([-10 * math.pi / 180, 10 * math.pi / 180, 0.0])
    assert df.wheel_speed_fl.tolist() == pytest.approx([10.0, 20.0, 0.0])  # 0.01 km/h counts
    # the other voltage column has no calibration in the profile: a column error, not a guess
    assert any("Lat accel [V]" in e for e in r.column_errors)


@pytest.mark.parametrize("text,word", [
    ('[columns."x"]\nsignal = "warp_drive"\n', "not a canonical signal"),
    ('[columns."x"]\nsignal = "accel_long"\nunit = "V"\nzero_v = 2.5\n', "zero_v and v_per_g"),
    ('[columns."x"]\nsignal = "yaw_rate"\nunit = "km/h"\n', "needs angular rate"),
    ('[time]\nformat = "sundial"\n', "format"),
    ('[time]\ntimezone = "Mars/Olympus"\n', "unknown time zone 'Mars/Olympus'"),
    ('[columns."x"]\nsignal = "yaw_rate"\ninvert = "yes"\n', "true or false"),
    ("this is = not toml [", "not valid TOML"),
])
def test_bad_profiles_are_user_errors_naming_the_problem(tmp_path, text, word):
    path = tmp_path / "p.toml"
    path.write_text(text)
    with pytest.raises(UserError, match=word):
        load_profile(path)


def test_the_example_profile_is_valid():
    profile = load_profile(Path(__file__).parents[1] / "ingest" / "profile_example.toml")
    assert profile.columns["ain3"].v_per_g == 0.8


def _turning_log(yaw_sign: float, ay_sign: float) -> bytes:
    # Steady-state kinematics on a 1.5 m track at 10 m/s: r = (v_rr - v_rl) / track and a_y = v * r
    # (rigid-body kinematics; CHECKS.md), left turns positive (ISO 8855).
    t = np.arange(0, 60, 0.1)
    r = 0.2 * np.sin(t / 5)  # rad/s, left and right turns
    v_rl, v_rr = 10 - r * 0.75, 10 + r * 0.75
    rows = [f"{pd.Timestamp('2026-03-02T07:00:00Z') + pd.Timedelta(seconds=float(s))},"
            f"{a:.3f},{b:.3f},{yaw_sign * ri:.4f},{ay_sign * 10 * ri:.3f}" for s, a, b, ri in zip(t, v_rl, v_rr, r)]
    return ("# vehicle: S\ntime,RL [m/s],RR [m/s],Yaw rate [rad/s],Lat accel [m/s^2]\n" + "\n".join(rows)).encode()


def test_signs_that_contradict_the_wheels_are_warned_about_never_flipped():
    assert not any("ISO 8855" in w for w in read_log(_turning_log(1, 1), "s.csv", "V", Profile(), 300).warnings)
    flipped = read_log(_turning_log(-1, 1), "s.csv", "V", Profile(), 300)
    assert any(w.startswith("yaw_rate correlates negatively") for w in flipped.warnings)
    assert any(w.startswith("accel_lat correlates negatively") for w in flipped.warnings)
    assert _frame(flipped).yaw_rate.iloc[10] < 0  # stored as logged
    ay_only = read_log(_turning_log(1, -1), "s.csv", "V", Profile(), 300)
    assert [w.split()[0] for w in ay_only.warnings] == ["accel_lat"]


def _read_bytes(raw: bytes, name: str = "log.csv"):
    return read_log(raw, name, "fixtures", Profile(), 300.0)


def _body(name: str = "comma_iso_full.csv") -> bytes:
    """The fixture without its comment line: header first."""
    return b"".join((FIXTURES / name).read_bytes().splitlines(keepends=True)[1:])


def test_a_preamble_before_the_header_is_skipped_warned_about_and_read_as_metadata():
    # a title line with a comma in it, key: value lines, a blank line (written for tracktrue's tests)
    preamble = b"Trip log export, generated 2026-03-02\nVehicle: YARD-7\nUnits: metric\n\n"
    plain = _read_bytes(_body())
    r = _read_bytes(preamble + _body())
    assert r.unusable is None and r.rejects == []
    assert _frame(r).drop(columns="vehicle_id").equals(_frame(plain).drop(columns="vehicle_id"))
    assert _frame(r).vehicle_id.unique().tolist() == ["BUS-04"]  # the ID column still comes first
    assert r.trips[0].lines.tolist() == [line + 4 for line in plain.trips[0].lines.tolist()]
    assert any("3 line(s) before the header on line 5" in w and "Trip log export" in w for w in r.warnings)
    # without an ID column the preamble's 'Vehicle:' line names the vehicle, as a '# vehicle:' line would
    body = _body().replace(b"Vehicle ID,", b"Fleet tag,")
    assert _frame(_read_bytes(preamble + body)).vehicle_id.unique().tolist() == ["YARD-7"]


def test_a_header_is_kept_when_its_first_data_row_is_broken():
    lines = _body().splitlines(keepends=True)
    broken = lines[0] + b"BUS-04,2026-03-02T07:13:59.900Z,36.00\n" + b"".join(lines[1:])
    r = _read_bytes(broken)
    assert r.unusable is None and not any("preamble" in w for w in r.warnings)
    assert [line for line, _ in r.rejects] == [2] and len(_frame(r)) == 5


def test_a_file_of_single_column_lines_still_says_so():
    r = _read_bytes(b"just a note\nanother note\n")
    assert "single column" in r.unusable and "line 1" in r.unusable


def test_a_gzipped_log_reads_as_the_plain_one_and_a_cut_one_says_truncated():
    import gzip

    plain = _read_bytes(_body())
    packed = gzip.compress(_body())
    r = _read_bytes(packed, "log.csv.gz")
    assert r.unusable is None and _frame(r).equals(_frame(plain))
    assert "truncated" in _read_bytes(packed[: len(packed) // 2], "log.csv.gz").unusable
    assert "cannot be decompressed" in _read_bytes(packed[:10] + b"\x00" * 40, "log.csv.gz").unusable
    assert "gzip-compressed, and what it holds: binary" in _read_bytes(gzip.compress(bytes(range(256)) * 8)).unusable
    two = gzip.compress(_body()[:200]) + gzip.compress(_body()[200:])  # members one after another: gzip -c a b
    assert _frame(_read_bytes(two, "log.csv.gz")).equals(_frame(plain))


def test_folders_are_searched_for_gzipped_exports_too(tmp_path):
    from ingest.run import find_files
    from tracktrue.store import Store

    for name in ("a.csv.gz", "b.TSV.GZ", "c.csv", "notes.gz", "d.parquet"):
        (tmp_path / name).write_bytes(b"x")
    found = [p.name for p in find_files([tmp_path], Store.open(tmp_path / "store"))]
    assert found == ["a.csv.gz", "b.TSV.GZ", "c.csv"]


def _date_time_log(dates: list[str], times: list[str], head: str = "") -> bytes:
    rows = "".join(f"{d},{t},36.0,36.0,36.0,36.0\n" for d, t in zip(dates, times))
    return (head + "Vehicle ID,Date,Time,WSS_FL [km/h],WSS_FR [km/h],WSS_RL [km/h],WSS_RR [km/h]\n"
            ).encode() + b"".join(f"VAN-2,{r}".encode() for r in rows.splitlines(keepends=True))


def test_a_date_column_beside_times_of_day_makes_full_times_across_midnight():
    # rows either side of midnight, written for tracktrue's tests
    dates, times = ["2026-03-02", "2026-03-02", "2026-03-03"], ["23:59:59.800Z", "23:59:59.900Z", "00:00:00.000Z"]
    r = _read_bytes(_date_time_log(dates, times))
    assert r.unusable is None and r.rejects == []
    assert _frame(r).time.tolist() == [pd.Timestamp("2026-03-02T23:59:59.800Z"), pd.Timestamp("2026-03-02T23:59:59.900Z"),
                                       pd.Timestamp("2026-03-03T00:00:00Z")]
    # without an offset the file's '# timezone:' applies, as to any ISO time: 08:14 in Berlin in March is 07:14Z
    local = _read_bytes(_date_time_log(["2026-03-02"] * 2, ["8:14:00.0", "8:14:00.1"], "# timezone: Europe/Berlin\n"))
    assert _frame(local).time.iloc[0] == pd.Timestamp("2026-03-02T07:14:00Z")
    naive = _read_bytes(_date_time_log(["2026-03-02"] * 2, ["08:14:00.0", "08:14:00.1"]))
    assert len(naive.rejects) == 2 and "no UTC offset" in naive.rejects[0][1]


def test_a_slash_date_beside_times_of_day_is_rejected_as_a_slash_date():
    r = _read_bytes(_date_time_log(["02/03/2026"] * 2, ["08:14:00Z", "08:14:01Z"]))
    assert len(r.rejects) == 2 and "day/month order is ambiguous" in r.rejects[0][1]


def test_a_date_column_beside_full_times_is_not_used_and_said_so():
    log = _date_time_log(["2026-03-02"] * 2, ["2026-03-02T08:14:00Z", "2026-03-02T08:14:01Z"])
    r = _read_bytes(log)
    assert r.rejects == [] and _frame(r).time.iloc[1] == pd.Timestamp("2026-03-02T08:14:01Z")
    assert any("'Date' (the time column carries the date)" in w for w in r.warnings)


def test_a_units_row_under_the_names_gives_the_columns_their_units():
    # names on one line, units on the next, as data-acquisition exports write them (written for tracktrue's tests)
    log = (b"Vehicle ID;Time;Speed FL;Speed FR;Speed RL;Speed RR;Yaw rate;Lat accel;Brake\n"
           b";s;km/h;km/h;km/h;km/h;deg/sec;m/s/s;\n"
           b"VAN-3;0,0;36,0;36,0;36,0;36,0;2,0;0,5;0\n"
           b"VAN-3;0,1;36,0;36,0;36,0;36,0;2,0;0,5;1\n")
    r = _read_bytes(log, "VAN-3_20260302T071400Z.csv")
    assert r.unusable is None and r.rejects == [] and r.column_errors == []
    df = _frame(r)
    assert df.wheel_speed_fl.iloc[0] == pytest.approx(10.0)  # 36 km/h
    assert df.yaw_rate.iloc[0] == pytest.approx(2 * math.pi / 180)
    assert df.accel_lat.iloc[0] == pytest.approx(0.5) and df.brake.tolist() == [False, True]
    assert df.time.iloc[1] == pd.Timestamp("2026-03-02T07:14:00.100Z")
    assert r.trips[0].lines.tolist() == [3, 4]


def test_a_first_data_row_without_numbers_is_not_taken_for_units():
    lines = _body().splitlines(keepends=True)
    empty_row = b"BUS-04,2026-03-02T07:13:59.900Z" + b"," * (lines[0].count(b",") - 1) + b"\n"
    r = _read_bytes(lines[0] + empty_row + b"".join(lines[1:]))
    assert r.unusable is None and r.rejects == [] and len(_frame(r)) == 6
    assert math.isnan(_frame(r).wheel_speed_fl.iloc[0])


@pytest.mark.parametrize("decimal_comma,cells,values", [
    (True, ["12.345,6", "1.234.567", "-2.000,25", "3,5", "1.234"], [12345.6, 1234567.0, -2000.25, 3.5, 1.234]),
    (False, ["12,345.6", "1,234,567", "3.5"], [12345.6, 1234567.0, 3.5]),
])
def test_digit_grouping_is_read_where_it_cannot_be_a_decimal_mark(decimal_comma, cells, values):
    import pyarrow as pa

    from ingest.reader import to_float

    got, bad = to_float(pa.array(cells), decimal_comma)
    assert got.tolist() == pytest.approx(values) and not bad.any()
    # one mark alone stays what it was: '1,234' in a point-decimal file is no number (1.234 or 1234?)
    assert to_float(pa.array(["1,234"]), False)[1].tolist() == [True]


def test_a_gzip_file_expanding_past_the_bound_is_refused_not_read(monkeypatch):
    import gzip

    import ingest.reader as reader

    monkeypatch.setattr(reader, "GZIP_MAX_BYTES", 100)
    assert "larger than" in _read_bytes(gzip.compress(_body()), "log.csv.gz").unusable
    two = gzip.compress(_body()[:60]) + gzip.compress(_body()[60:])
    assert "larger than" in _read_bytes(two, "log.csv.gz").unusable


def test_two_bit_status_error_and_not_available_read_as_unknown_and_flashing_as_on():
    # SAE J1939-71 discrete parameters: 00 off, 01 on, 10 error, 11 not available (from memory)
    rows = "".join(f"2026-03-02T07:00:0{i}Z,36,36,{brake},{lamp}\n"
                   for i, (brake, lamp) in enumerate([(0, "0"), (1, "flashing"), (2, "1"), (3, "3"), (1, "Error")]))
    r = _read_bytes(("# vehicle: TRK-9\ntimestamp,FL [km/h],FR [km/h],Brake,ABS lamp\n" + rows).encode())
    assert r.rejects == []
    df = _frame(r)
    assert df.brake.tolist()[:2] == [False, True] and df.brake.isna().tolist() == [False, False, True, True, False]
    assert df.lamp_abs.tolist()[1:3] == [True, True] and df.lamp_abs.isna().tolist()[3:] == [True, True]


def test_signed_wheel_speeds_while_reversing_are_kept_and_implausible_ones_rejected():
    rows = ("# vehicle: TRK-3\ntimestamp,FL [km/h],FR [km/h]\n2026-03-02T07:00:00Z,-5,-5\n"
            "2026-03-02T07:00:01Z,-80,-5\n2026-03-02T07:00:02Z,0,0\n")
    r = _read_bytes(rows.encode())
    assert [line for line, _ in r.rejects] == [4] and "outside the physical range" in r.rejects[0][1]
    assert _frame(r).wheel_speed_fl.tolist() == pytest.approx([-5 / 3.6, 0.0])


def test_a_header_over_rows_of_mixed_field_counts_is_kept_and_no_later_row_taken_for_it():
    # found by tests/test_ingest_properties.py: rows of 6, 5 and 7 fields under a 5-field header
    log = ("time,WSS FL [km/h],WSS FR [km/h],Yaw rate [deg/s],Brake\n"
           "2026-03-02T07:00:00.0Z,0.000,0.000,0.00,0,extra\n2026-03-02T07:00:00.1Z,0.000,0.000,0.00,0\n"
           "2026-03-02T07:00:00.2Z,12,5,,0.000,,on\n")
    r = read_log(log.encode(), "p.csv", "PROP", Profile(), 300)
    assert r.unusable is None and not any("preamble" in w for w in r.warnings)
    assert [int(x) for t in r.trips for x in t.lines] == [3] and [line for line, _ in r.rejects] == [2, 4]

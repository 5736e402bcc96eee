"""Round trip: the simulator's own values -> its CSV export styles -> ingest -> equal within the logged resolution."""

import numpy as np
import pandas as pd
import pytest

from ingest.logfile import read_log
from ingest.profile import load_profile
from tracktrue.schema import NUMERIC_SIGNALS
from tracktrue.vin import with_check_digit

export = pytest.importorskip("synthetic_fleet.export", reason="synthetic_fleet's CSV writer has not landed")
from synthetic_fleet.logger import LOGGERS  # noqa: E402
from synthetic_fleet.platforms import platform  # noqa: E402
from synthetic_fleet.sensors import SensorHealth, TripCondition  # noqa: E402
from synthetic_fleet.trip import simulate_trip  # noqa: E402

START = pd.Timestamp("2026-03-02T08:00:00Z")


def _simulated(logger: str, seed: int):
    rng = np.random.default_rng(seed)
    return simulate_trip(platform("compact_van"), SensorHealth.draw(rng),
                         TripCondition(fault=None, severity=0.0, lamp_from_s=None), vehicle_id="RT-1", start=START,
                         drive="mixed", duration_s=90.0, fleet_rate_hz=10.0, logger=LOGGERS[logger], rng=rng)


def _export(tmp_path, style_name: str, logger: str, analog: bool, seed: int = 11):
    sim = _simulated(logger, seed)
    style = export.STYLES[style_name]
    path = tmp_path / "RT-1" / "RT-1_20260302T080000Z.csv"
    vin = with_check_digit("TV9CVA2E0SH004211")
    export.write_trip_csv(path, style, vehicle_id="RT-1", vin=vin, start_ms=START.value // 1_000_000,
                          time_ms=sim.time_ms, columns=sim.columns, polled=logger == "polled", analog=analog)
    return sim, style, path, vin


def _stored_with_source_rows(result, path):
    header_line = next(i for i, line in enumerate(path.read_text().splitlines(), 1) if not line.startswith("#"))
    frames = []
    for trip in result.trips:
        df = trip.samples.to_pandas()
        df["sim_row"] = trip.lines - header_line - 1
        frames.append(df)
    return pd.concat(frames, ignore_index=True)


@pytest.mark.parametrize("logger", ["bus_capture", "polled"])
@pytest.mark.parametrize("style_name", sorted(export.STYLES))
def test_every_export_style_round_trips_within_the_logged_resolution(tmp_path, style_name, logger):
    sim, style, path, vin = _export(tmp_path, style_name, logger, analog=False)
    r = read_log(path.read_bytes(), path.name, path.parent.name, load_profile(None), 300)
    assert r.unusable is None and r.column_errors == []
    assert not any("ISO 8855" in w for w in r.warnings)  # the simulator's signs agree with its wheels
    df = _stored_with_source_rows(r, path)
    assert df.vehicle_id.unique().tolist() == [vin if style_name == "A" else "RT-1"]
    rows = df.sim_row.to_numpy()
    expected_us = START.value // 1000 + sim.time_ms[rows] * 1000
    assert (df.time.astype("int64").to_numpy() == expected_us).all()  # ms in the export, exact
    for sig in NUMERIC_SIGNALS:
        if not any(c.signal == sig for c in style.columns):
            assert df[sig].isna().all()
            continue
        step = style.resolution_si(sig, polled=logger == "polled")
        truth = sim.columns[sig][rows]
        got = df[sig].to_numpy(dtype=float)
        assert (np.isnan(got) == np.isnan(truth)).all(), sig
        ok = ~np.isnan(truth)
        # rounding to the logged step errs by at most half a step (plus float noise)
        assert np.max(np.abs(got[ok] - truth[ok]), initial=0.0) <= step / 2 * (1 + 1e-9) + 1e-12, sig
    for sig in ("brake", "lamp_abs", "lamp_esc"):
        assert (df[sig].to_numpy(dtype=bool) == sim.columns[sig][rows].astype(bool)).all()
    # every row of the file is either stored or rejected (the logger duplicates some rows on purpose)
    assert len(df) + len(r.rejects) == len(sim.time_ms)
    assert all("repeats an earlier row's time" in why for _, why in r.rejects)


@pytest.mark.parametrize("style_name", sorted(export.STYLES))
def test_analog_accelerometer_voltages_round_trip_through_a_profile(tmp_path, style_name):
    sim, style, path, _ = _export(tmp_path, style_name, "bus_capture", analog=True)
    lines = []
    for si_col, v_col in zip((style.column("accel_long"), style.column("accel_lat")), style.analog_columns):
        lines += [f'[columns."{si_col.header}"]', 'signal = "ignore"',
                  f'[columns."{v_col.header}"]', f'signal = "{v_col.signal}"', 'unit = "V"',
                  f"zero_v = {export.ANALOG_ZERO_V}", f"v_per_g = {export.ANALOG_V_PER_G}"]
    profile_path = tmp_path / "analog.toml"
    profile_path.write_text("\n".join(lines) + "\n")
    r = read_log(path.read_bytes(), path.name, path.parent.name, load_profile(profile_path), 300)
    df = _stored_with_source_rows(r, path)
    for v_col in style.analog_columns:
        sig = v_col.signal
        # the converter's step, then the export's rounding to v_col.decimals, each errs by half a step
        bound_v = export.ANALOG_STEP_V / 2 + 0.5 * 10.0**-v_col.decimals
        bound_mps2 = bound_v / export.ANALOG_V_PER_G * 9.80665  # g0, CGPM 1901
        truth = sim.columns[sig][df.sim_row.to_numpy()]
        ok = np.isfinite(truth) & (np.abs(truth) < 2 * 9.80665)  # inside the converter's 0..5 V span
        err = np.abs(df[sig].to_numpy(dtype=float)[ok] - truth[ok])
        assert err.max() <= bound_mps2 * (1 + 1e-9), sig


@pytest.mark.slow
def test_a_generated_fleet_ingests_whole_and_joins_its_registry(tmp_path):
    from ingest import run_ingest
    from synthetic_fleet import generate_fleet
    from tracktrue.store import Store

    fleet = generate_fleet(tmp_path / "fleet", n_vehicles=3, days=1, seed=5)
    store = Store.open(tmp_path / "store")
    summary = run_ingest([fleet.out / "logs"], store, vehicles_csv=fleet.out / "vehicles.csv")
    assert summary.rejected_files == [] and summary.column_errors == []
    assert set(summary.reject_kinds) <= {"duplicate time"}  # the simulated logger repeats rows on purpose
    trips, vehicles = store.read_table("trips"), store.read_table("vehicles")
    assert set(trips.vehicle_id) <= set(vehicles.vehicle_id[vehicles.spec_source == "registry"])  # VINs joined
    assert (trips.n_samples > 0).all() and trips.trip_id.is_unique

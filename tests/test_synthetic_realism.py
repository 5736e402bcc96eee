"""Field realities of the simulator: tooth timing, sensor types, road input, logger kinds, lamps, held-out config."""

import dataclasses
import datetime as dt

import numpy as np
import pandas as pd
import pytest

from synthetic_fleet import DEMO_DAYS, DEMO_VEHICLES, HELD_OUT, LOGGER_KINDS, generate_fleet, plan_fleet, trip_samples
from synthetic_fleet.config import DEFAULT, WheelModule
from synthetic_fleet.drive import DriveTrace
from synthetic_fleet.export import STYLES, write_trip_csv
from synthetic_fleet.fleet import lamp_episodes
from synthetic_fleet.logger import LOGGERS
from synthetic_fleet.platforms import platform
from synthetic_fleet.segments import Segments
from synthetic_fleet.sensors import SensorHealth, TripCondition, _road_input
from synthetic_fleet.tone_ring import module_speeds, speed_quantum_mps
from synthetic_fleet.trip import simulate_trip
from test_synthetic_fleet import _digest  # noqa: E402 (tests/ is on sys.path under pytest)
from tracktrue.schema import NUMERIC_SIGNALS, WHEEL_SPEED_COLUMNS

START = pd.Timestamp("2026-03-02T07:14:00Z")
RADIUS, TEETH = 0.35, 48


def _ring_speeds(speed_mps: np.ndarray, module: WheelModule, rate_hz: float = 100.0, error=None, missing=None):
    """Module speeds of four wheels all turning at ``speed_mps`` (one trip on a ``rate_hz`` grid)."""
    n = len(speed_mps)
    trips = Segments.of([n])
    error = np.zeros((4, 1, TEETH)) if error is None else error
    missing = np.zeros((4, 1, TEETH), dtype=bool) if missing is None else missing
    omega = np.tile(speed_mps / RADIUS, (4, 1))
    return module_speeds(omega, trips, rate_hz, RADIUS, TEETH, module, np.full((4, 1), 0.3), error, missing)


def test_counted_teeth_give_the_true_speed_within_one_tooth_per_window():
    # Textbook kinematics: a tooth passes every 2πr/N of travel, so n teeth counted in a window of T
    # seconds give v = n·2πr/(N·T), and the true mean speed lies within one tooth, Δv = 2πr/(N·T).
    module = WheelModule(method="count", tick_s=0.01, window_s=0.1)
    dv = speed_quantum_mps(RADIUS, TEETH, 0.1)
    assert dv == pytest.approx(2 * np.pi * 0.35 / (48 * 0.1))  # 0.4581 m/s
    rate = 100.0
    t = np.arange(6000) / rate
    true = 3.0 + 25.0 * t / t[-1]  # a steady acceleration from 3 to 28 m/s
    got = _ring_speeds(true, module, rate)[0]
    # the window's mean speed: the speed held over each grid step, averaged over the 10 steps before
    window_mean = pd.Series(np.r_[0.0, true[:-1]]).rolling(10).mean().to_numpy()
    ok = slice(20, None)
    assert np.all(np.abs(got[ok] - window_mean[ok]) <= dv * (1 + 1e-9))
    steps = got[ok] / dv
    np.testing.assert_allclose(steps, np.round(steps), atol=1e-9)  # a whole number of teeth
    assert np.mean(np.abs(got[ok] - window_mean[ok])) > 0.2 * dv  # the quantisation is really there


def test_timed_tooth_edges_give_the_true_speed_of_a_perfect_ring():
    # Kinematics (v = r·Δθ/Δt): the angle between the first and the last edge of the window over the
    # time between them is exact at a constant speed.
    got = _ring_speeds(np.full(3000, 17.3), WheelModule(), rate_hz=50.0)
    assert np.all(got[:, 5:] == pytest.approx(17.3, rel=1e-9))


def test_a_broken_tooth_spikes_its_own_wheel_only():
    error = np.zeros((4, 1, TEETH))
    missing = np.zeros((4, 1, TEETH), dtype=bool)
    missing[1, 0, 7] = True  # wheel fr
    error[1, 0, 20] = 0.3
    got = _ring_speeds(np.full(5000, 12.0), WheelModule(), 50.0, error, missing)
    healthy = np.delete(got, 1, axis=0)[:, 5:]
    assert np.all(healthy == pytest.approx(12.0, rel=1e-9))
    rel = got[1, 5:] / 12.0 - 1.0
    # Kinematics: one pitch is 2πr/N = 45.8 mm of travel, so at 12 m/s about 5 edges fall in a 20 ms
    # window; a missing edge reads about 1 tooth in 5 slow, one 0.3 pitch late about 0.3 in 4 fast.
    # The bounds below are looser than those figures (design choice).
    assert rel.min() < -0.1 and rel.max() > 0.05
    assert 0.05 < np.mean(np.abs(rel) > 0.02) < 0.6  # spikes, not a steady error


def test_passive_sensors_read_nothing_below_a_few_kph_and_active_ones_read_walking_pace():
    # Common practice: an inductive (passive) sensor's amplitude grows with speed, so it reads 0
    # below a few km/h; a powered (active) sensor reads down to walking pace. The 0.8 m/s and
    # 0.1 m/s cutoffs are our model's choices (sensors.CUTOFF_MPS), not measured values.
    assert platform("lwb_van").wheel_sensor_kind == "passive" and platform("compact_van").wheel_sensor_kind == "active"
    passive, _ = trip_samples("lwb_van", drive="town", duration_s=600, seed=4)
    active, _ = trip_samples("compact_van", drive="town", duration_s=600, seed=4)
    p = passive[list(WHEEL_SPEED_COLUMNS)].to_numpy().ravel()
    a = active[list(WHEEL_SPEED_COLUMNS)].to_numpy().ravel()
    p, a = p[p > 0], a[a > 0]
    assert p.min() >= 0.8 - 1e-9
    assert np.any((a > 0.1) & (a < 0.8))


def test_the_rear_wheel_meets_the_road_input_wheelbase_over_speed_after_the_front(monkeypatch):
    import synthetic_fleet.sensors as sensors

    monkeypatch.setattr(sensors, "ROUGH_RIPPLE_FRAC", 0.0)  # only the wheel tracks' profiles
    monkeypatch.setattr(sensors, "ROUGH_WHEEL_FRAC", 0.0)
    spec = platform("lwb_van")
    rate, v, n = 50.0, 10.0, 5000
    t = np.arange(n) / rate
    trace = DriveTrace(t, np.full(n, v), np.zeros(n), np.zeros(n), np.zeros(n), np.zeros(n),
                       np.zeros(n, dtype=bool), np.zeros(n, dtype=bool))
    ripple = _road_input(trace, spec, [np.random.default_rng(1)], [TripCondition(rough_road=True)])
    delay = int(round(spec.wheelbase_m / v * rate))  # kinematics: the rear axle is L behind, L/v later
    lags = np.arange(0, 40)
    corr = [np.corrcoef(ripple[0, 100:-100], np.roll(ripple[2], -k)[100:-100])[0, 1] for k in lags]
    assert lags[int(np.argmax(corr))] == delay and max(corr) > 0.95
    assert abs(np.corrcoef(ripple[0], ripple[1])[0, 1]) < 0.2  # left and right tracks differ


def _export(tmp_path, logger_kind: str, style: str):
    rng = np.random.default_rng(8)
    sim = simulate_trip(platform("pickup"), SensorHealth.draw(rng), TripCondition(), vehicle_id="EXP-1",
                        start=START, drive="town", duration_s=240.0, fleet_rate_hz=10.0,
                        logger=LOGGERS[logger_kind], rng=rng)
    path = tmp_path / f"{logger_kind}_{style}.csv"
    write_trip_csv(path, STYLES[style], vehicle_id="EXP-1", vin="TV9PKU3D0TS000001", start_ms=START.value // 1_000_000,
                   time_ms=sim.time_ms, columns=sim.columns, polled=logger_kind != "bus_capture", analog=False,
                   read_lag_ms=sim.read_lag_ms)
    lines = [line for line in path.read_text(encoding="utf-8").splitlines() if not line.startswith("#")]
    return sim, lines[0].split(STYLES[style].delimiter), [line.split(STYLES[style].delimiter) for line in lines[1:]]


def test_polled_style_a_logs_carry_each_cells_read_lag_of_50_to_300_ms(tmp_path):
    # 50-300 ms and the " @ms" column are our polled logger's design (DESIGN.md "Logger kinds").
    sim, header, rows = _export(tmp_path, "polled", "A")
    assert header[header.index("Wheel Speed FL [km/h]") + 1] == "Wheel Speed FL @ms"
    assert header[header.index("Yaw Rate [deg/s]") + 1] == "Yaw Rate @ms"
    lag_cols = [i for i, h in enumerate(header) if h.endswith(" @ms")]
    assert len(lag_cols) == len(header) - 2 - len(lag_cols)  # every signal but time and VIN has one
    lags = np.array([[int(r[i]) for i in lag_cols] for r in rows])
    assert lags.min() >= 50 and lags.max() <= 300
    assert len(np.unique(lags)) > 3  # the cells of one row are read at different instants
    assert rows and sim.rate_hz == 5.0
    _, header_b, _ = _export(tmp_path, "polled", "B")
    assert not any("@ms" in h for h in header_b)


def test_polled_cells_hold_the_value_read_at_their_lag():
    rng = np.random.default_rng(3)
    profile = dataclasses.replace(LOGGERS["polled"], stale_prob=0.0, missing_cell_prob=0.0, wheel_step_kph=1e-6)
    sim = simulate_trip(platform("pickup"), SensorHealth.draw(rng), TripCondition(), vehicle_id="P-1", start=START,
                        drive="suburban", duration_s=300.0, fleet_rate_hz=10.0, logger=profile, rng=rng)
    # A cell read later (smaller lag) sees the wheel later: over a steady acceleration the later read is
    # faster by a·Δt (kinematics, v(t + Δt) ≈ v(t) + a·Δt). The four wheels move together, so their
    # differences follow their lags. The 0.5 correlation floor is a design choice.
    once = np.r_[True, np.diff(sim.time_ms) > 0]  # a duplicated row is the same reading again
    w = np.array([sim.columns[c][once] for c in WHEEL_SPEED_COLUMNS])
    lag_s = np.array([sim.read_lag_ms[c][once] for c in WHEEL_SPEED_COLUMNS]) / 1000.0
    accel = np.gradient(sim.columns["vehicle_speed"][once], sim.time_ms[once] / 1000.0)
    moving = (w.min(axis=0) > 5) & (np.abs(accel) > 0.5)
    diff = w[0] - w[1]
    predicted = -(lag_s[0] - lag_s[1]) * accel
    assert np.corrcoef(diff[moving], predicted[moving])[0, 1] > 0.5


def test_telematics_logs_carry_vehicle_speed_lamps_and_codes_only(tmp_path):
    # The headers are our own export format (export.py); the signal set is our telematics design.
    _, header, rows = _export(tmp_path, "telematics", "A")
    assert header == ["VIN", "Timestamp", "Vehicle Speed [km/h]", "ABS Lamp", "ESC Lamp", "DTC"]
    _, header_b, _ = _export(tmp_path, "telematics", "B")
    assert not any("wheel" in h.lower() or "yaw" in h.lower() for h in header_b)
    df, _ = trip_samples(logger_kind="telematics", rate_hz=1.0, duration_s=300, seed=2)
    assert df[[c for c in NUMERIC_SIGNALS if c != "vehicle_speed"]].isna().all().all()
    assert df.vehicle_speed.notna().all() and (np.diff(df.time.astype("int64")) > 0.5e9).all()


def test_trip_samples_logs_each_logger_kind():
    bus, _ = trip_samples(duration_s=200, seed=1)
    polled, _ = trip_samples(duration_s=200, seed=1, logger_kind="polled", rate_hz=2.0, wheel_step_kph=1.0)
    assert len(polled) < 0.3 * len(bus)
    steps = polled.wheel_speed_fl.dropna().to_numpy() * 3.6
    np.testing.assert_allclose(steps, np.round(steps), atol=1e-9)  # whole km/h
    with pytest.raises(ValueError, match="logger kind"):
        trip_samples(duration_s=60, logger_kind="obd")


def test_esc_interventions_and_esc_off_light_the_esc_lamp_without_a_code():
    # Common practice: the ESC lamp flashes while the system intervenes and stays lit while ESC is
    # switched off, with no trouble code stored. The times below are this test's own choice.
    rng = np.random.default_rng(5)
    cond = TripCondition(esc_flashes=((100.0, 103.0),), esc_off_from_s=200.0)
    sim = simulate_trip(platform("lwb_van"), SensorHealth.draw(rng), cond, vehicle_id="L-1", start=START,
                        drive="town", duration_s=400.0, fleet_rate_hz=10.0, logger=LOGGERS["bus_capture"], rng=rng)
    t = sim.time_ms / 1000.0
    expected = ((t >= 100.0) & (t < 103.0)) | (t >= 200.0)
    near_edge = np.min(np.abs(t[:, None] - np.array([100.0, 103.0, 200.0])[None, :]), axis=1) < 0.05
    assert (sim.columns["lamp_esc"] == expected)[~near_edge].all()
    assert not sim.columns["lamp_abs"].any() and all(c is None for c in sim.columns["dtc"])


def test_an_intermittent_sensor_stores_its_code_and_the_lamp_goes_out_at_the_next_key_cycle():
    # Common practice: a wheel-speed fault lights the lamp until the ignition is cycled; a fault not
    # seen again after the self-test leaves the lamp out, its code stored. The code text is our own (TT-).
    rng = np.random.default_rng(6)
    health = SensorHealth.draw(rng)
    burst = TripCondition(fault="air_gap_fl", severity=1.0, growth="intermittent", dropout_bursts=((150.0, 152.0),),
                          lamp_from_s=150.0)
    after = dataclasses.replace(burst, dropout_bursts=(), lamp_from_s=None)
    trips = [simulate_trip(platform("compact_van"), health, c, vehicle_id="C-1", start=START, drive="suburban",
                           duration_s=300.0, fleet_rate_hz=10.0, logger=LOGGERS["bus_capture"],
                           rng=np.random.default_rng(k)) for k, c in enumerate((burst, after))]
    t = trips[0].time_ms / 1000.0
    cols = trips[0].columns
    in_burst = (t >= 150.0) & (t < 152.0)
    assert (cols["wheel_speed_fl"][in_burst] == 0).all() and (cols["wheel_speed_fr"][in_burst] > 0).any()
    coded = np.array([c is not None for c in cols["dtc"]])
    assert (coded == (t >= 150.0)).all() and (cols["lamp_abs"] == (t >= 150.0)).all()
    nxt = trips[1].columns
    assert not nxt["lamp_abs"].any() and not nxt["lamp_esc"].any() and all(c is None for c in nxt["dtc"])
    assert (nxt["wheel_speed_fl"] > 0).sum() > 0.5 * (nxt["wheel_speed_fr"] > 0).sum()


@pytest.mark.parametrize("config", [DEFAULT, HELD_OUT])
def test_lamp_episodes_follow_the_lamp_semantics(config):
    plan = plan_fleet(24, 40, seed=3, config=config)
    episodes = lamp_episodes(plan)
    assert {"intervention", "esc_off"} <= set(episodes.kind)
    flashes = episodes[episodes.kind == "intervention"]
    # 1.5-5 s per intervention is our simulator's choice (fleet._lamp_without_fault)
    assert ((flashes.to_s - flashes.from_s).between(1.5, 5.0)).all()  # a few seconds
    assert episodes[episodes.kind != "intervention"].to_s.isna().all()  # until the key is off
    growth = {v.vehicle_id: v.fault.growth for v in plan.vehicles if v.fault}
    coded = episodes[episodes.kind == "intermittent_code"]
    assert all(growth.get(vid) == "intermittent" for vid in coded.vehicle_id)
    for v in plan.vehicles:
        for t in plan.trips[v.vehicle_id]:
            c = t.condition
            if c.esc_flashes or c.esc_off_from_s is not None:
                assert c.lamp_from_s is None or c.fault is not None  # no lamp of their own


def test_sudden_and_intermittent_faults_are_marked_and_show_nothing_before():
    # Common practice: an active (powered) sensor does not fade with a widening air gap; it works
    # until it fails, for good or intermittently. Sudden/intermittent growth is only drawn for those.
    seen = set()
    for seed in (1, 2, 3, 7):
        plan = plan_fleet(24, 40, seed=seed)
        for v in plan.vehicles:
            if v.fault is None or v.fault.growth == "gradual":
                continue
            seen.add(v.fault.growth)
            onset = v.fault.onset_day
            assert all(v.fault.severity(d) == 0 for d in np.linspace(0, onset - 1e-6, 20))
            if v.fault.name.startswith("air_gap"):
                assert v.spec.wheel_sensor_kind == "active"
    assert seen == {"sudden", "intermittent"}


def test_the_demo_fleet_has_every_logger_kind_and_both_sensor_fault_growths():
    # The counts follow from config.DEFAULT's shares (design choices), not from any real fleet.
    plan = plan_fleet(DEMO_VEHICLES, DEMO_DAYS, seed=7)
    kinds = pd.Series([v.logger.name for v in plan.vehicles]).value_counts()
    assert set(kinds.index) == set(LOGGER_KINDS)
    assert kinds["bus_capture"] > DEMO_VEHICLES / 2 and kinds["polled"] >= 3 and 2 <= kinds["telematics"] <= 3
    polled = [v.logger for v in plan.vehicles if v.logger.name == "polled"]
    assert all(1.0 <= p.rate_hz <= 5.0 and 0.1 <= p.wheel_step_kph <= 1.0 for p in polled)
    wheel_faults = {v.spec.wheel_sensor_kind for v in plan.vehicles if v.fault and v.fault.name.startswith("air_gap")}
    assert wheel_faults == {"active", "passive"}


def test_tread_wear_and_seasonal_swaps():
    # DESIGN.md: tread wear alone is about 1.4 % of radius over a tyre's life; a light commercial
    # vehicle's tyre lasts two to three years of daily service (from memory).
    assert 0.010 < DEFAULT.tyre_wear_per_day * 2.5 * 365 < 0.02
    plan = plan_fleet(24, 60, seed=5)
    swaps = [r for v in plan.vehicles for r in v.service_rows if r["note"].startswith("seasonal swap")]
    assert swaps and all(r["kind"] == "tyre_change" for r in swaps)
    assert all(dt.date(2026, 3, 10) <= dt.date.fromisoformat(r["date"]) <= dt.date(2026, 4, 20) for r in swaps)
    v = next(v for v in plan.vehicles if not v.tyre_events)
    trips = plan.trips[v.vehicle_id]
    first, last = trips[0].condition.tyre_factor, trips[-1].condition.tyre_factor
    driven = [0, 1] if v.spec.driven_axle == "front" else [2, 3]
    assert np.all(last < first) and np.all((first - last)[driven] > np.delete(first - last, driven))


def test_the_held_out_configuration_differs_from_the_tuning_one_and_is_deterministic(tmp_path):
    differ = {f.name for f in dataclasses.fields(DEFAULT)
              if getattr(DEFAULT, f.name) != getattr(HELD_OUT, f.name)}
    assert {"polled_rates_hz", "polled_wheel_steps_kph", "bus_rate_factor", "lamp_after_days", "growth_shapes",
            "rough_share_factor", "heavy_load_share", "wheel_module"} <= differ
    a = generate_fleet(tmp_path / "a", n_vehicles=6, days=2, seed=11, rate_hz=2.0, config=HELD_OUT)
    generate_fleet(tmp_path / "b", n_vehicles=6, days=2, seed=11, rate_hz=2.0, config="held-out")
    c = generate_fleet(tmp_path / "c", n_vehicles=6, days=2, seed=11, rate_hz=2.0)
    assert a.config == "held-out" and c.config == "tuning"
    assert _digest(tmp_path / "a") == _digest(tmp_path / "b") != _digest(tmp_path / "c")
    held = pd.read_csv(tmp_path / "a" / "loggers.csv")
    assert set(held[held.logger_kind == "bus_capture"].rate_hz) == {3.0}  # 1.5 × the fleet's 2 Hz
    with pytest.raises(ValueError, match="held-out"):
        plan_fleet(2, 2, seed=1, config="nonsense")


@pytest.mark.parametrize("step_kph,decimals", [(0.03125, 5), (0.25, 2), (1.0, 1)])
def test_wheel_speeds_print_their_loggers_step_exactly(tmp_path, step_kph, decimals):
    kind = "bus_capture" if step_kph < 0.1 else "polled"
    rng = np.random.default_rng(4)
    sim = simulate_trip(platform("pickup"), SensorHealth.draw(rng), TripCondition(), vehicle_id="S-1", start=START,
                        drive="suburban", duration_s=200.0, fleet_rate_hz=10.0,
                        logger=dataclasses.replace(LOGGERS[kind], wheel_step_kph=step_kph), rng=rng)
    path = tmp_path / "s.csv"
    write_trip_csv(path, STYLES["A"], vehicle_id="S-1", vin="TV9PKU3D0TS000001", start_ms=START.value // 1_000_000,
                   time_ms=sim.time_ms, columns=sim.columns, polled=kind == "polled", analog=False,
                   wheel_step_kph=step_kph)
    df = pd.read_csv(path, dtype={"Wheel Speed FL [km/h]": str})
    text = df["Wheel Speed FL [km/h]"].dropna()
    assert text.str.split(".").str[1].str.len().eq(decimals).all()
    kph = text.astype(float).to_numpy()
    np.testing.assert_allclose(kph / step_kph, np.round(kph / step_kph), atol=1e-6)
    assert len(np.unique(kph)) > 20

"""Peer-group normalisation: like with like, leave-one-out, rate classes, floors, fallback."""

from __future__ import annotations

import numpy as np
import pandas as pd

from models.peers import MAD_TO_SIGMA, assign_peer_groups, normalise, peer_statistics, rate_class


def _fleet(values: dict[str, list[float]], platform: str = "van", rate_hz: float = 10.0) -> pd.DataFrame:
    rows = [{"vehicle_id": v, "platform": platform, "sample_rate_hz": rate_hz, "x": x,
             "start_time": pd.Timestamp("2026-03-02", tz="UTC") + pd.Timedelta(hours=i)}
            for v, xs in values.items() for i, x in enumerate(xs)]
    return pd.DataFrame(rows)


def test_mad_scale_factor_makes_mad_a_sigma_estimate():
    # 1.4826 ≈ 1/Φ⁻¹(0.75) (scipy as the reference implementation)
    from scipy.stats import norm

    assert abs(MAD_TO_SIGMA - 1.0 / norm.ppf(0.75)) < 1e-4


def test_small_platform_median_does_not_absorb_its_faulty_member():
    rng = np.random.default_rng(0)
    vals = {f"V{i}": list(rng.normal(0.0, 0.1, 20)) for i in range(4)}
    vals["BAD"] = list(rng.normal(1.0, 0.1, 20))
    df = _fleet(vals)
    df[["peer_group", "peer_fallback"]] = assign_peer_groups(df, min_peer_vehicles=3)
    stats = peer_statistics(df, ["x"], rel_floor=0.0, min_ref_trips=5)
    z = normalise(df, stats, ["x"])["x"]
    bad = z[df["vehicle_id"] == "BAD"].median()
    assert bad > 8  # against the four healthy peers only
    healthy = z[df["vehicle_id"] != "BAD"].abs().median()
    assert healthy < 1.5


def test_loggers_of_different_rates_are_never_peers():
    df = pd.concat([_fleet({f"A{i}": [0.1] * 3 for i in range(5)}, rate_hz=1.0),
                    _fleet({f"B{i}": [0.1] * 3 for i in range(5)}, rate_hz=50.0)])
    groups = assign_peer_groups(df, min_peer_vehicles=5)["peer_group"]
    assert groups[df["vehicle_id"].str.startswith("A").to_numpy()].nunique() == 1
    assert set(groups[df["vehicle_id"].str.startswith("A").to_numpy()]).isdisjoint(
        groups[df["vehicle_id"].str.startswith("B").to_numpy()])
    assert list(rate_class(pd.Series([1.0, 10.0, 50.0, np.nan]))) == ["lt3hz", "3to20hz", "ge20hz", "unknown_rate"]


def test_platform_with_too_few_vehicles_falls_back_to_fleet_and_is_marked():
    df = pd.concat([_fleet({f"A{i}": [0.0] * 3 for i in range(6)}, platform="van"),
                    _fleet({"T0": [0.0] * 3, "T1": [0.0] * 3}, platform="truck")])
    g = assign_peer_groups(df, min_peer_vehicles=5)
    trucks = df["platform"].eq("truck").to_numpy()
    assert g.loc[trucks, "peer_fallback"].all() and not g.loc[~trucks, "peer_fallback"].any()
    assert set(g.loc[trucks, "peer_group"]) == {"fleet/3to20hz"}


def test_feature_without_healthy_spread_is_scaled_by_its_floor_not_by_zero():
    vals = {f"V{i}": [0.0] * 10 for i in range(5)}
    vals["V5"] = [0.0] * 9 + [5.0]
    df = _fleet(vals).rename(columns={"x": "wheel_dropouts_fl"})
    df[["peer_group", "peer_fallback"]] = assign_peer_groups(df, 3)
    stats = peer_statistics(df, ["wheel_dropouts_fl"], rel_floor=0.1, min_ref_trips=5)
    z = normalise(df, stats, ["wheel_dropouts_fl"])["wheel_dropouts_fl"]
    assert np.isfinite(z).all() and z.max() == 5.0  # floor 1 event per 100 km


def test_missing_feature_stays_missing_after_normalisation():
    df = _fleet({f"V{i}": [0.0, np.nan, 0.1, 0.2, -0.1, 0.05] for i in range(5)})
    df[["peer_group", "peer_fallback"]] = assign_peer_groups(df, 3)
    z = normalise(df, peer_statistics(df, ["x"], 0.1, 5), ["x"])["x"]
    assert z.isna().sum() == 5


def test_peer_groups_are_platform_by_logger_kind_when_the_features_name_it():
    buses = _fleet({f"B{i}": [0.1] * 3 for i in range(5)}, rate_hz=50.0).assign(logger_kind="bus_capture")
    polled = _fleet({f"P{i}": [0.1] * 3 for i in range(5)}, rate_hz=50.0).assign(logger_kind="polled")
    few = _fleet({"Q0": [0.1] * 3, "Q1": [0.1] * 3}, platform="truck", rate_hz=2.0).assign(logger_kind="polled")
    unknown = _fleet({f"U{i}": [0.1] * 3 for i in range(5)}, rate_hz=2.0).assign(logger_kind=None)
    df = pd.concat([buses, polled, few, unknown], ignore_index=True)
    g = assign_peer_groups(df, min_peer_vehicles=5)
    group_of = g["peer_group"].groupby(df["vehicle_id"].str[0]).agg(lambda s: set(s))
    # same platform and rate, different logger kind: never peers
    assert group_of["B"] == {"van/bus_capture"} and group_of["P"] == {"van/polled"}
    # a group too small falls back to the fleet of the same logger kind, marked
    assert group_of["Q"] == {"fleet/polled"} and g.loc[df["vehicle_id"].str.startswith("Q"), "peer_fallback"].all()
    # a trip whose logger kind is unknown is grouped by its sample rate
    assert group_of["U"] == {"van/lt3hz"}


def test_a_fallback_group_is_compared_with_the_whole_fleet_of_its_logger_kind_not_just_its_leftovers():
    # three pickups (too few for their own group) that happen to agree closely, and six vans
    # whose healthy offsets spread ±0.1: a pickup 0.15 off its two fellows is ordinary fleet-wide
    rng = np.random.default_rng(2)
    vans = {f"V{i}": list(rng.normal(off, 0.01, 12)) for i, off in enumerate(np.linspace(-0.1, 0.1, 6))}
    pickups = {"P0": list(rng.normal(0.05, 0.01, 12)), "P1": list(rng.normal(0.06, 0.01, 12)),
               "P2": list(rng.normal(-0.1, 0.01, 12))}
    df = pd.concat([_fleet(vans, platform="van"), _fleet(pickups, platform="pickup")], ignore_index=True)
    df[["peer_group", "peer_fallback"]] = assign_peer_groups(df, min_peer_vehicles=5)
    stats = peer_statistics(df, ["x"], rel_floor=0.0, min_ref_trips=5)
    z = normalise(df, stats, ["x"])["x"]
    assert abs(z[df["vehicle_id"] == "P2"].median()) < 3  # against the two other pickups alone it is ~20


def test_a_healthy_own_level_in_a_small_platform_is_scaled_by_the_class_between_vehicle_spread():
    # a vehicle's own level (a yaw zero) spreads between vehicles: four pickups that happen to
    # agree within 0.03 cannot say that a fifth at −0.18 is extreme when the class's vans spread
    # 0.1 about their centre (tuning seed 202); a real fault (1.5) still stands out
    rng = np.random.default_rng(4)
    pickups = {f"P{i}": list(c + rng.normal(0, 0.01, 20)) for i, c in enumerate((0.05, 0.06, 0.07, 0.08))}
    vans = {f"V{i}": list(c + rng.normal(0, 0.01, 20)) for i, c in enumerate(rng.normal(0, 0.1, 8))}
    def z_of(level: float) -> float:
        df = pd.concat([_fleet({**pickups, "ODD": list(level + rng.normal(0, 0.01, 20))}, platform="pickup"),
                        _fleet(vans, platform="van")], ignore_index=True)
        df[["peer_group", "peer_fallback"]] = assign_peer_groups(df, min_peer_vehicles=5)
        z = normalise(df, peer_statistics(df, ["x"], rel_floor=0.0, min_ref_trips=5), ["x"])["x"]
        return float(z[df["vehicle_id"] == "ODD"].median())
    assert abs(z_of(-0.18)) < 4.0
    assert z_of(1.5) > 8.0


def test_a_feature_only_two_vehicles_measure_has_no_peer_score_rather_than_one_vehicles_level():
    # five vehicles, of which two measure the steering centre (the others' logs cannot): each would
    # otherwise be scored against the other's level alone
    rng = np.random.default_rng(3)
    vals = {f"V{i}": list(rng.normal(0.0, 0.05, 12)) for i in range(5)}
    df = _fleet(vals)
    df["steer"] = np.nan
    df.loc[df["vehicle_id"] == "V0", "steer"] = -1.0
    df.loc[df["vehicle_id"] == "V1", "steer"] = 0.3
    df[["peer_group", "peer_fallback"]] = assign_peer_groups(df, min_peer_vehicles=3)
    stats = peer_statistics(df, ["x", "steer"], rel_floor=0.0, min_ref_trips=5)
    z = normalise(df, stats, ["x", "steer"])
    assert z["steer"].isna().all()
    assert z["x"].notna().all()
    df.loc[df["vehicle_id"] == "V2", "steer"] = 0.0  # three measure it: two peers each
    z = normalise(df, peer_statistics(df, ["x", "steer"], rel_floor=0.0, min_ref_trips=5), ["x", "steer"])
    assert z.loc[df["vehicle_id"] == "V0", "steer"].notna().all()

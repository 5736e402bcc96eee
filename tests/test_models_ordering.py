"""The ranking's order: status, then a suspected sensor before a tyre before none, then score."""

from __future__ import annotations

import pandas as pd

from models.ordering import ranked


def _frame(rows):
    return pd.DataFrame(rows, columns=["vehicle_id", "status", "suspected_component", "score"])


def test_within_a_status_a_suspected_sensor_outranks_a_tyre_whatever_the_scores():
    df = _frame([
        ("tyre-high", "watch", "tyre_fl", 0.9),
        ("ok-high", "ok", "none", 0.95),
        ("yaw-low", "watch", "yaw_sensor", 0.2),
        ("wheel-mid", "watch", "wheel_sensor_rr", 0.5),
        ("none-watch", "watch", "none", 0.99),
        ("lit", "lamp_lit", "tyre_rr", 0.1),
        ("inspect", "inspect", "accel_lat_sensor", 0.3),
    ])
    out = ranked(df)
    assert list(out["vehicle_id"]) == ["lit", "inspect", "wheel-mid", "yaw-low", "tyre-high", "none-watch", "ok-high"]
    assert list(out["rank"]) == list(range(1, 8))
    assert list(out.columns) == ["rank", *df.columns]


def test_a_flag_after_the_status_sorts_before_the_component_class():
    # the published ranking puts a no-fault-found vehicle below the rest of its status (models.stability)
    df = _frame([("nff-sensor", "inspect", "yaw_sensor", 0.9), ("sensor", "inspect", "yaw_sensor", 0.1)])
    df["_nff"] = [True, False]
    assert list(ranked(df, after_status=("_nff",))["vehicle_id"]) == ["sensor", "nff-sensor"]

"""Which trip_features columns the model uses, and which component each one points at.

The rule lives here and nowhere else: the model features are
tracktrue.schema.CORE_FEATURES (those present), followed by any *extra*
numeric column whose name starts with a chassis-signal family prefix
(``wheel_``, ``yaw_``, ``steer_``, ``accel_``, ``lat_``) and that is not an
identifier, a quality column, a lamp/trouble-code summary or a resolution /
rate / count bookkeeping column. features/ may add per-wheel extras (e.g.
accelerometer agreement per wheel); they join the model without an edit here.
"""

from __future__ import annotations

import pandas as pd

from tracktrue.schema import CORE_FEATURES, POSITIONS, QUALITY_COLUMNS

ID_COLUMNS: tuple[str, ...] = ("trip_id", "vehicle_id", "start_time", "end_time", "platform")
FEATURE_PREFIXES: tuple[str, ...] = ("wheel_", "yaw_", "steer_", "accel_", "lat_")
#: Name fragments that mark bookkeeping rather than a measured disagreement.
NON_FEATURE_FRAGMENTS: tuple[str, ...] = ("resolution", "_rate", "_hz", "count", "lamp", "dtc", "quality", "reason")

POSITION_WORDS: dict[str, str] = {"fl": "front-left", "fr": "front-right", "rl": "rear-left", "rr": "rear-right"}


def model_features(trip_features: pd.DataFrame) -> list[str]:
    """The model's feature columns in a stable order (core first, then extras sorted)."""
    core = [c for c in CORE_FEATURES if c in trip_features.columns]
    excluded = set(ID_COLUMNS) | set(QUALITY_COLUMNS) | set(CORE_FEATURES)
    extras = sorted(
        c
        for c in trip_features.columns
        if c not in excluded
        and c.startswith(FEATURE_PREFIXES)
        and not any(frag in c for frag in NON_FEATURE_FRAGMENTS)
        and pd.api.types.is_numeric_dtype(trip_features[c])
        and not pd.api.types.is_bool_dtype(trip_features[c])
    )
    return core + extras


def feature_position(name: str) -> str | None:
    """The wheel position a feature names (``wheel_jitter_rl_pct`` → ``rl``), else None."""
    parts = name.split("_")
    hits = [p for p in POSITIONS if p in parts]
    return hits[0] if len(hits) == 1 else None


def feature_kind(name: str) -> str:
    """Which evidence family a feature belongs to; attribution reasons on these.

    ``wheel_signal`` (jitter, dropouts, other per-wheel agreement: sensor or
    tone ring), ``wheel_ratio`` (rolling radius or tooth count), then the
    non-wheel sources. Features that compare a sensor's level with the wheels
    (``yaw_offset_dps``, ``steer_center_deg``,
    ``lat_residual_g``, ``accel_long_residual_g``) are ``*_vs_wheels`` kinds,
    because a wheel fault shows in them too (Isermann's residual table).
    """
    if name.startswith("wheel_ratio_"):
        return "wheel_ratio"
    if name.startswith("wheel_") and feature_position(name):
        return "wheel_signal"
    table = {
        "yaw_rest_dps": "yaw",
        "yaw_offset_dps": "yaw_vs_wheels",
        # a slope: a wheel-radius offset moves the intercept, not the gain; its own kind, because
        # a gain error and an offset are two fault modes with different witnesses (attribution)
        "yaw_gain": "yaw_gain",
        "steer_center_deg": "steering_vs_wheels",
        "steer_yaw_residual_dps": "steering_vs_yaw",
        "accel_long_rest_g": "accel_long",
        "accel_long_residual_g": "accel_long_vs_wheels",
        "accel_lat_rest_g": "accel_lat",
        "lat_residual_g": "accel_lat_vs_wheels",
    }
    if name in table:
        return table[name]
    for prefix, kind in (("yaw_", "yaw"), ("steer_", "steering_vs_yaw"), ("accel_long", "accel_long"),
                         ("accel_lat", "accel_lat"), ("lat_", "accel_lat")):
        if name.startswith(prefix):
            return kind
    return "other"


def evidence_key(name: str) -> str:
    """The attribution / drift key of a feature: its kind, plus the wheel for wheel kinds."""
    kind = feature_kind(name)
    return f"{kind}_{feature_position(name)}" if kind.startswith("wheel_") else kind


def describe_feature(name: str) -> tuple[str, str]:
    """Plain words and display unit for evidence text: (``rear-left wheel jitter``, ``%``)."""
    pos = feature_position(name)
    where = f"{POSITION_WORDS[pos]} " if pos else ""
    words = {
        "wheel_ratio": ("wheel speed ratio", "%"),
        "wheel_jitter": ("wheel jitter", "%"),
        "wheel_dropouts": ("wheel-speed dropouts", "per 100 km"),
        "wheel_accel_disagree": ("wheel acceleration against the accelerometer", "g"),
        "wheel_onset": ("wheel signal missing up to", "m/s"),
        "yaw_rest": ("yaw rate at standstill", "deg/s"),
        "yaw_offset": ("yaw-rate offset against the wheels", "deg/s"),
        "yaw_gain": ("yaw-rate gain against the wheels", ""),
        "steer_center": ("steering centre while driving straight", "deg"),
        "steer_yaw": ("yaw against the steering model", "deg/s"),
        "accel_long_rest": ("longitudinal acceleration at standstill", "g"),
        "accel_long_residual": ("longitudinal acceleration against the wheels", "g"),
        "accel_lat_rest": ("lateral acceleration at standstill", "g"),
        "lat_residual": ("lateral acceleration against speed × yaw", "g"),
    }
    for key, (text, unit) in words.items():
        parts = key.split("_")
        stem = [p for p in name.split("_") if p not in POSITIONS]
        if stem[: len(parts)] == parts:
            return where + text, unit
    unit = "%" if name.endswith("_pct") else "g" if name.endswith("_g") else "deg/s" if name.endswith("_dps") else ""
    return where + name.replace("_", " "), unit

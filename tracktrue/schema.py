"""Names every stage agrees on (DESIGN.md, "Contracts").

Kept in one place so a rename is one edit and a test can check that each
published table carries exactly these columns. Nothing here computes anything.
"""

from __future__ import annotations

#: Wheel positions, always in this order (STYLE.md).
POSITIONS: tuple[str, ...] = ("fl", "fr", "rl", "rr")

WHEEL_SPEED_COLUMNS: tuple[str, ...] = tuple(f"wheel_speed_{p}" for p in POSITIONS)

#: Canonical sample columns (SI units, ISO 8855 axes: x forward, y left, z up;
#: yaw and steering positive to the left) and their units.
SAMPLE_UNITS: dict[str, str] = {
    "vehicle_id": "text",
    "trip_id": "text",
    "time": "timestamp UTC",
    **{c: "m/s" for c in WHEEL_SPEED_COLUMNS},
    "vehicle_speed": "m/s",
    "yaw_rate": "rad/s",
    "steering_angle": "rad",
    "accel_long": "m/s^2",
    "accel_lat": "m/s^2",
    "brake": "bool",
    "lamp_abs": "bool",
    "lamp_esc": "bool",
    "dtc": "text",
}
SAMPLE_COLUMNS: tuple[str, ...] = tuple(SAMPLE_UNITS)
OPTIONAL_SAMPLE_COLUMNS: frozenset[str] = frozenset(
    {"vehicle_speed", "brake", "lamp_abs", "lamp_esc", "dtc"}
)
NUMERIC_SIGNALS: tuple[str, ...] = (
    *WHEEL_SPEED_COLUMNS,
    "vehicle_speed",
    "yaw_rate",
    "steering_angle",
    "accel_long",
    "accel_lat",
)

#: Vehicle registry (vehicles.csv) columns.
REGISTRY_REQUIRED: tuple[str, ...] = (
    "vehicle_id",
    "platform",
    "wheelbase_m",
    "track_front_m",
    "track_rear_m",
    "steering_ratio",
    "tyre_radius_m",
)
REGISTRY_OPTIONAL: tuple[str, ...] = ("understeer_gradient_deg_per_g", "depot", "vin", "next_service_date")

#: Catalog tables published for readers.
TRIPS_COLUMNS: tuple[str, ...] = (
    "trip_id",
    "vehicle_id",
    "start_time",
    "end_time",
    "n_samples",
    "distance_km",
    "sample_rate_hz",
    "source_file",
)
REJECTS_COLUMNS: tuple[str, ...] = ("source_file", "row", "reason")
#: Published by ingest: one row per trip and canonical numeric signal, from the
#: values as logged (ingest/trips.py signal_records): fresh values per second
#: while moving, smallest non-zero step (SI), share of stale repeats, median
#: read lag in s (NaN without a read-lag column).
TRIP_SIGNALS_COLUMNS: tuple[str, ...] = ("trip_id", "signal", "present", "rate_hz", "step_si", "stale_frac",
                                         "read_lag_s")

#: suspected_component vocabulary of the ranking output.
COMPONENTS: tuple[str, ...] = (
    *(f"wheel_sensor_{p}" for p in POSITIONS),
    *(f"tyre_{p}" for p in POSITIONS),
    "yaw_sensor",
    "steering_angle_sensor",
    "accel_long_sensor",
    "accel_lat_sensor",
    "none",
)

#: Ranking output columns (`tracktrue rank --format csv|json`).
RANKING_COLUMNS: tuple[str, ...] = (
    "rank",
    "vehicle_id",
    "platform",
    "score",
    "status",
    "suspected_component",
    "evidence",
    "flagged_since",
    "last_trip",
)

#: Per-trip features named in DESIGN.md; features/ may add more.
CORE_FEATURES: tuple[str, ...] = (
    *(f"wheel_ratio_{p}_pct" for p in POSITIONS),
    *(f"wheel_jitter_{p}_pct" for p in POSITIONS),
    *(f"wheel_dropouts_{p}" for p in POSITIONS),
    "yaw_rest_dps",
    "yaw_offset_dps",
    "yaw_gain",
    "steer_center_deg",
    "steer_yaw_residual_dps",
    "accel_long_rest_g",
    "accel_lat_rest_g",
    "accel_long_residual_g",
    "lat_residual_g",
)

#: Vehicle statuses of the ranking, most urgent first. ``lamp_lit`` vehicles
#: need service whatever their score and are shown, never hidden. ``snoozed``:
#: an alert the manager put off until a date (models/stability.py);
#: ``verifying``: repaired, waiting for enough trips to confirm the repair;
#: ``insufficient_data`` is never shown as ``ok``.
STATUSES: tuple[str, ...] = ("lamp_lit", "inspect", "watch", "snoozed", "verifying", "ok", "insufficient_data")
#: The statuses that are alerts (an inspection or a closer look is asked for).
ALERT_STATUSES: tuple[str, ...] = ("lamp_lit", "inspect", "watch")

#: Published by models/ (one row per vehicle, ordered by rank). Starts with the
#: ranking contract; the rest serves the dashboard and `tracktrue vehicle`.
VEHICLE_STATUS_COLUMNS: tuple[str, ...] = (
    *RANKING_COLUMNS,
    "depot",
    "suggestion",
    "lamp_on",
    "n_trips",
    "as_of",
    "raw_status",  # the scorer's status before hysteresis, verification, labels and snoozes
    "status_note",  # why the status differs from raw_status (held, verifying, snoozed, ...)
    "label",  # e.g. a no-fault-found inspection of the alert
    "snoozed_until",
    "snooze_reason",
)

#: Published by models/: one row per vehicle and scoring run (appended), the
#: memory that hysteresis and ``tracktrue rank --changes`` read.
STATUS_HISTORY_COLUMNS: tuple[str, ...] = (
    "run_id",
    "created_at",
    "as_of",
    "vehicle_id",
    "raw_status",
    "held_status",  # after hysteresis, before verification and snoozes
    "status",  # as published
    "score",
    "suspected_component",
    "flagged_since",
    "last_trip",
    "last_repair",  # date of the latest repair-kind service event the run knew of
)

#: Snoozes (``tracktrue snooze`` and the dashboard), published by ``tracktrue update`` as ``snoozes``.
SNOOZE_COLUMNS: tuple[str, ...] = ("vehicle_id", "until", "reason", "snoozed_status", "snoozed_component",
                                   "created_at")

#: Published by models/: one row per scored trip (plus ``z_<feature>`` columns,
#: the peer-normalised value of each model feature).
TRIP_SCORES_COLUMNS: tuple[str, ...] = (
    "trip_id",
    "vehicle_id",
    "start_time",
    "peer_group",
    "score",
    "top_feature",
    "top_z",
)

#: Published by models/: the drift detector's path per vehicle and statistic.
VEHICLE_DRIFT_COLUMNS: tuple[str, ...] = (
    "vehicle_id",
    "trip_id",
    "start_time",
    "statistic",
    "value",
    "cusum_hi",
    "cusum_lo",
    "threshold",
    "alarm",
)

#: Published by models/: the healthy band of each feature per peer group.
PEER_BANDS_COLUMNS: tuple[str, ...] = ("peer_group", "feature", "p05", "p50", "p95", "n_vehicles")

#: Quality columns every trip_features row carries.
QUALITY_COLUMNS: tuple[str, ...] = (
    "duration_s",
    "distance_km",
    "sample_rate_hz",
    "missing_fraction",
    "standstill_s",
    "cruise_s",
    "moving_s",
)

#: Service events (``tracktrue service-events FILE.csv`` and the dashboard's
#: entry form), published by ingest as ``service_events``. The kinds are the
#: ones models/service.py tells apart (tyre work, alignment, the rest).
SERVICE_EVENT_KINDS: tuple[str, ...] = (
    "repair",
    "sensor_replaced",
    "tone_ring_replaced",
    "wheel_alignment",
    "calibration",
    "tyre_change",
    "tyre_rotation",
    "spare_fitted",
    "spare_removed",
    "no_fault_found",
)
#: Other spellings accepted on import and stored as the kind they name (after lower case, spaces and
#: hyphens as underscores, and "tire" as "tyre": ingest.grammar.vocabulary_key).
SERVICE_EVENT_KIND_ALIASES: dict[str, str] = {
    "alignment": "wheel_alignment", "tracking": "wheel_alignment",
    "tyre_replacement": "tyre_change", "tyre_replaced": "tyre_change", "tyres_replaced": "tyre_change",
    "new_tyres": "tyre_change", "tyre_fitted": "tyre_change", "tyres_fitted": "tyre_change",
    "tyre_rotated": "tyre_rotation", "tyres_rotated": "tyre_rotation", "rotation": "tyre_rotation",
    "sensor_replacement": "sensor_replaced", "tone_ring_replacement": "tone_ring_replaced",
    "recalibration": "calibration", "nff": "no_fault_found", "spare_on": "spare_fitted", "spare_off": "spare_removed",
}
#: Components a service event may name besides ``COMPONENTS``: work on a whole
#: axle or on all four tyres. An empty component means the whole vehicle.
SERVICE_EVENT_AREAS: tuple[str, ...] = ("front_axle", "rear_axle", "tyres")
SERVICE_EVENTS_COLUMNS: tuple[str, ...] = ("vehicle_id", "date", "kind", "component", "note", "source")

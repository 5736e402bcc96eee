"""Service events (repairs, tyre work, alignments) start a new baseline for what they touched.

DESIGN.md, "Service events": a repaired vehicle must not top the list the next
morning, and a tyre change must not look like a failing wheel sensor. Each
event starts a new *epoch* for the drift statistics it can move:

* tyre work (change, rotation, spare fitted/removed) → the wheel-ratio
  statistics, the residuals that compare a sensor with the wheels, and the
  two that lean on the wheels' speed scale: the yaw gain against the wheel
  estimate and yaw against the single-track model (its v is the wheels'), both
  moved by a full set of new tyres (a new tread is a larger radius: on a
  tuning seed's 70 days a healthy van's recorded new tyres all round took
  the two together past their alarm);
* any other recorded repair or inspection outcome → every statistic;
* a wheel alignment → nothing: an alignment should remove deviations, and a
  steering offset that appears at one is exactly the fault to catch (an
  alignment without steering-sensor recalibration).

Events come from a published ``service_events`` table (vehicle_id, date or
event_time, kind) when one exists.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

TYRE_EVENT_KINDS = frozenset({"tyre_change", "tyre_rotation", "spare_fitted", "spare_removed"})
NO_RESET_KINDS = frozenset({"wheel_alignment"})
FAMILIES = ("tyre", "sensor")


#: Drift statistics outside the wheel ratios and the versus-wheels residuals that a tyre event moves
#: through the wheels' common speed scale (module doc).
WHEEL_SCALE_STATISTICS = frozenset({"yaw_gain", "steering_vs_yaw"})


def statistic_family(statistic: str) -> str:
    """``tyre`` for statistics a tyre event moves, else ``sensor``."""
    moved = statistic.startswith("wheel_ratio_") or "_vs_wheels" in statistic or statistic in WHEEL_SCALE_STATISTICS
    return "tyre" if moved else "sensor"


def service_table(events: pd.DataFrame | None) -> pd.DataFrame:
    """vehicle_id, event_time (UTC), kind — empty when there are none."""
    if events is None or len(events) == 0:
        return pd.DataFrame({"vehicle_id": pd.Series(dtype=object),
                             "event_time": pd.Series(dtype="datetime64[ns, UTC]"), "kind": pd.Series(dtype=object)})
    col = "event_time" if "event_time" in events.columns else "date"
    kind = events["kind"].astype(str) if "kind" in events.columns else pd.Series("repair", index=events.index)
    return pd.DataFrame({"vehicle_id": events["vehicle_id"].astype(str).to_numpy(),
                         "event_time": pd.to_datetime(events[col], utc=True).to_numpy(),
                         "kind": kind.to_numpy()}).drop_duplicates()


def epoch_keys(trips: pd.DataFrame, events: pd.DataFrame, family: str) -> np.ndarray:
    """A key per trip, ``vehicle|n`` with n the number of resetting events before it."""
    resets = ~events["kind"].isin(NO_RESET_KINDS)
    if family == "sensor":
        resets &= ~events["kind"].isin(TYRE_EVENT_KINDS)
    ev = events[resets]
    n = np.zeros(len(trips), dtype=int)
    if len(ev):
        merged = trips[["vehicle_id", "start_time"]].reset_index(drop=True).reset_index().merge(
            ev[["vehicle_id", "event_time"]], on="vehicle_id", how="inner")
        before = merged[merged["event_time"] <= merged["start_time"]]
        counts = before.groupby("index").size()
        n[counts.index.to_numpy()] = counts.to_numpy()
    return (trips["vehicle_id"].astype(str).to_numpy() + "|" + n.astype(str)).astype(object)

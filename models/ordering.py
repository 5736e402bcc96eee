"""The ranking's order, one rule for the scorer's ranking and the published (stabilised) one.

Status first (tracktrue.schema.STATUSES: a lit lamp, then inspect, watch, ...).
Within a status, a suspected *sensor* comes before a suspected tyre, and a tyre
before no component: the manager's list answers "which vehicle goes to the
workshop for its ABS/ESC sensors", and a tyre suspicion is a pressure and size
check at the depot, not a sensor inspection. Then the vehicle score, highest
first.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from tracktrue.schema import COMPONENTS, STATUSES

#: The components of the ranking vocabulary (tracktrue.schema.COMPONENTS) that are sensors.
SENSOR_COMPONENTS: frozenset[str] = frozenset(c for c in COMPONENTS if not c.startswith("tyre_") and c != "none")


def component_class(components: pd.Series) -> np.ndarray:
    """0 for a sensor, 1 for a tyre, 2 for anything else (``none``)."""
    c = components.fillna("none").astype(str)
    return np.where(c.isin(SENSOR_COMPONENTS), 0, np.where(c.str.startswith("tyre_"), 1, 2))


def ranked(status: pd.DataFrame, after_status: tuple[str, ...] = ()) -> pd.DataFrame:
    """``status`` sorted as the module doc says, with a fresh ``rank`` column first.

    ``after_status``: boolean columns sorting False first, right after the status
    (the published ranking puts no-fault-found vehicles below the rest of their status).
    """
    order = {s: i for i, s in enumerate(STATUSES)}
    keys = pd.DataFrame({"_o": status["status"].map(order).to_numpy(),
                         "_c": component_class(status["suspected_component"])}, index=status.index)
    df = pd.concat([status, keys], axis=1)
    by = ["_o", *after_status, "_c", "score"]
    df = df.sort_values(by, ascending=[True] * (len(by) - 1) + [False], kind="stable")
    df = df.drop(columns=["_o", "_c", "rank"], errors="ignore").reset_index(drop=True)
    df.insert(0, "rank", np.arange(1, len(df) + 1))
    return df

"""Inspection outcomes as real labels for ``tracktrue evaluate``.

The dashboard records them (``workshop.record_outcome``); this module is the
one pure read other stages may import.
"""

from __future__ import annotations

import pandas as pd

from dashboard.workshop import connect_readonly, has_table
from tracktrue.store import Store

OUTCOME_COLUMNS = ("vehicle_id", "date", "outcome", "component", "note")


def read_outcomes(store: Store) -> pd.DataFrame:
    """Every recorded outcome, oldest first; empty when nothing was recorded.

    ``date`` is the inspection date (datetime64, midnight), ``outcome`` is
    ``fault_found`` or ``no_fault_found``, ``component`` is from
    ``tracktrue.schema.COMPONENTS`` (``none`` when no fault was found).
    Never creates or writes the file.
    """
    with connect_readonly(store) as con:
        if con is None or not has_table(con, "outcomes"):
            frame = pd.DataFrame({c: pd.Series(dtype="str") for c in OUTCOME_COLUMNS})
        else:
            frame = pd.read_sql_query(
                f"SELECT {', '.join(OUTCOME_COLUMNS)} FROM outcomes ORDER BY date, id", con)
    frame["date"] = pd.to_datetime(frame["date"])
    return frame

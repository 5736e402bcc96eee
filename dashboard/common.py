"""What every page needs: the store it serves, and how a missing table is told."""

from __future__ import annotations

import os

import pandas as pd
import streamlit as st

from dashboard.tables import Missing, query
from dashboard.wording import SAFETY_CAUTION
from tracktrue.store import STORE_ENV, Store

#: Session keys shared between pages.
PICKED_VEHICLE = "picked_vehicle"


def current_store() -> Store:
    """The store named by $TRACKTRUE_STORE (set by ``dashboard.launch``); never created here."""
    return Store.open(os.environ.get(STORE_ENV), create=False)


def table_or_note(store: Store, sql: str, params=()) -> pd.DataFrame | None:
    """The query's result, or None after telling the user which command publishes the table."""
    result = query(store, sql, params)
    if isinstance(result, Missing):
        st.info(result.message, icon=":material/hourglass_empty:")
        return None
    return result


def safety_caution() -> None:
    st.warning(SAFETY_CAUTION, icon=":material/health_and_safety:")

"""The triage page's "What changed": the same comparison as ``tracktrue rank --changes`` (models.changes)."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from dashboard.tables import Missing, query
from dashboard.wording import CHANGE_LABELS, STATUS_LABELS, component_label
from models.changes import run_changes
from tracktrue.errors import UserError
from tracktrue.store import Store


def changes_section(store: Store) -> None:
    """New, escalated, de-escalated and cleared alerts since the previous run (or a chosen date)."""
    st.subheader("What changed")
    history = query(store, "SELECT * FROM {status_history}")
    if isinstance(history, Missing) or history.empty:
        st.caption("No run history yet: the comparison appears after the next `tracktrue update`.")
        return
    dates = sorted(pd.to_datetime(history["as_of"]).dt.date.unique())
    options = [None, *dates[1:]]
    since = st.selectbox("Compare the last run with", options, key="changes_since",
                         format_func=lambda d: "the run before it" if d is None else f"the last run as of a day before {d}")
    try:
        changes = run_changes(history, since=since)
    except UserError as exc:
        st.info(str(exc))
        return
    st.caption(changes.heading())
    table = changes.table
    if table.empty:
        if changes.baseline is not None:
            st.success("No vehicle changed status.")
        return
    counts = table["change"].value_counts()
    for col, (kind, label) in zip(st.columns(len(CHANGE_LABELS)), CHANGE_LABELS.items()):
        col.metric(label, int(counts.get(kind, 0)))
    st.dataframe(pd.DataFrame({
        "Change": table["change"].map(CHANGE_LABELS),
        "Vehicle": table["vehicle_id"],
        "Was": table["from_status"].map(lambda s: STATUS_LABELS.get(s, s)),
        "Now": table["to_status"].map(lambda s: STATUS_LABELS.get(s, s)),
        "Component was": table["from_component"].fillna("").map(component_label),
        "Component now": table["to_component"].fillna("").map(component_label),
        "Score now": table["to_score"],
    }), key="changes_table", hide_index=True, width="stretch",
        column_config={"Score now": st.column_config.NumberColumn(format="%.2f")})

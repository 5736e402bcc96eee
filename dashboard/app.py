"""Entry script that ``streamlit run`` serves: the page list and what every page shows (staleness)."""

import streamlit as st

from dashboard.common import current_store
from dashboard.freshness import staleness_banner

st.set_page_config(page_title="tracktrue", page_icon=":material/tire_repair:", layout="wide")

PAGES = [
    st.Page("views/triage.py", title="Fleet triage", icon=":material/format_list_numbered:",
            url_path="triage", default=True),
    st.Page("views/plan.py", title="Workshop plan", icon=":material/event_available:", url_path="plan"),
    st.Page("views/vehicle.py", title="Vehicle record", icon=":material/timeline:", url_path="vehicle"),
    st.Page("views/intake.py", title="Log intake", icon=":material/inbox:", url_path="intake"),
]

page = st.navigation(PAGES, position="sidebar")
staleness_banner(current_store())
page.run()

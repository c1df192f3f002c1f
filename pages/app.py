"""Fulcrum's app: the entry script `fulcrum app` runs. It opens on the invented demo cohort."""
import streamlit as st

import fulcrum_ui as ui
import ui_theme

ui.setup()
PAGES = [
    st.Page("page_cohort.py", title="Cohort", url_path="cohort", default=True),
    st.Page("page_outcomes.py", title="Outcomes by index", url_path="outcomes"),
    st.Page("page_values.py", title="Values", url_path="values"),
    st.Page("page_selection.py", title="Randomised vs chosen", url_path="selection"),
    st.Page("page_patient.py", title="Patient", url_path="patient"),
    st.Page("page_maps.py", title="Two indices", url_path="maps"),
    st.Page("page_report.py", title="Report", url_path="report"),
]
page = st.navigation(PAGES)
ui.sidebar(ui.workspace())
ui_theme.header(ui.workspace())
page.run()

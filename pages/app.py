"""Fulcrum's app: the entry script `fulcrum app` runs. It opens on the invented demo cohort."""
import streamlit as st

import fulcrum_ui as ui
import ui_theme

ui.setup()
# The pages in the order the sidebar lists them: (file, title, url path). Add a page with one line here.
PAGES = [
    ("page_cohort.py", "Cohort", "cohort"),
    ("page_outcomes.py", "Outcomes by index", "outcomes"),
    ("page_values.py", "Values", "values"),
    ("page_selection.py", "Randomised vs chosen", "selection"),
    ("page_patient.py", "Patient", "patient"),
    ("page_meeting.py", "Meeting view", "meeting"),
    ("page_maps.py", "Two indices", "maps"),
    ("page_rules.py", "Rules per 100 patients", "rules"),
    ("page_evidence.py", "More evidence", "evidence"),
    ("page_report.py", "Report", "report"),
]
page = st.navigation([st.Page(file, title=title, url_path=path, default=i == 0)
                      for i, (file, title, path) in enumerate(PAGES)])
ws = ui.workspace()
if page.url_path != "meeting":  # the meeting view is one screen of its own and names cohort and patient itself
    ui_theme.header(ws, ui.patient_line(ws))  # the app's header (pages/ui_theme.py draws it)
ui.sidebar(ws)
page.run()

"""Meeting view: the patient in hand on one screen (and one printed A4 page) for a multidisciplinary meeting."""
import streamlit as st

import fulcrum_ui as ui
from explorer import CAUTIONS, meeting

# This page keeps to one screen: a short title, no introduction block (the cautions are in the view itself).
st.markdown("<style>[data-testid='stMainBlockContainer']{padding-top:1.2rem;padding-bottom:0.5rem}</style>",
            unsafe_allow_html=True)
ws = ui.workspace()
fs = ui.fitted(ws)
if fs is None:
    st.stop()
names = [ix.name for ix in ws.spec.indices]
titles = {ix.name: ix.title for ix in ws.spec.indices}
top = st.columns([1.2, 1.8, 1.3, 1.5], vertical_alignment="bottom")
with top[0]:
    st.markdown("### Meeting view")
with top[1]:
    index = st.selectbox("Speak along", names, format_func=titles.get, key=ui.seed("mindex", names[0]))
view = ui.patient_view(ws, fs, index=index)
rows = ui.curve_rows(ws)
if view is None or rows is None:
    st.stop()
choice = ui.patient(ws)
fields = ui.patient_fields(ws)
coverage = ui.attempt(ws.coverage, view.primary_index, keeping=None) if ws.cohort.randomised is not None else None
content = ui.attempt(meeting.meeting_content, view, rows, CAUTIONS, patient=choice.describe(fields),
                     whose=ui.whose_words(ws, choice), titles={o.name: o.title for o in ws.spec.outcomes},
                     coverage=coverage)
if content is None:
    st.stop()
with top[2]:
    st.download_button("Print (A4 PDF)", data=lambda: meeting.meeting_pdf(content), on_click="ignore",
                       file_name="meeting_view.pdf", mime="application/pdf", icon=":material/print:")
with top[3]:
    st.page_link("page_patient.py", label="Change the patient", icon=":material/edit:")
st.html(meeting.meeting_html(content))

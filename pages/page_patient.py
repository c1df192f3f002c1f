"""Patient: one patient's place along each index, each arm's predicted outcomes, and what the weights favour."""
import streamlit as st

import fulcrum_ui as ui

ws = ui.workspace()
st.title("Patient")
ui.cautions()
ui.not_available("The patient view", "explorer/patient.py")

"""Two indices: which arm is favoured over the plane of two indices, where the arms break even, the patient's point."""
import json

import streamlit as st

import fulcrum_ui as ui
from explorer import appstate as aps
from explorer import charts_maps, maps, values
from explorer.spec import MapSpec

MODELS = "map_models"
KINDS = {"ordinal": "states of function", "survival_function": "survival x function among survivors"}
ws = ui.page_head(
    "Two indices",
    "Two ways of seeing a patient at once: each arm's model in two indices, the arm favoured at every pair of "
    "values, and the break-even line where the arms come out level. The map is blank where patients are too few.")
arms = list(ws.spec.cohort.arms)
spec = ws.spec
names = [ix.name for ix in spec.indices]
if len(names) < 2:
    st.info("The map needs two indices and this spec has one. Add another index on the Cohort page.")
    st.stop()
fs = ui.fitted(ws)
if fs is None:
    st.stop()

# ------------------------------------------------------------------------------------------
# Which two indices, which outcome
# ------------------------------------------------------------------------------------------
titles = {ix.name: ix.title for ix in spec.indices}
targets = ([maps.COMPOSITE] if spec.values else []) + [o.name for o in spec.outcomes]
target_titles = {maps.COMPOSITE: "Composite (the value of outcomes)"} | {o.name: o.title for o in spec.outcomes}
start = maps.default_map(spec)
c1, c2, c3 = st.columns(3)
with c1:
    first = st.selectbox("Index across", names, format_func=titles.get, key=ui.seed("map_first", start.indices[0]))
others = [n for n in names if n != first]
if st.session_state.get(ui.key("map_second")) not in others:
    st.session_state[ui.key("map_second")] = start.indices[1] if start.indices[1] in others else others[0]
with c2:
    second = st.selectbox("Index up", others, format_func=titles.get, key=ui.key("map_second"))
with c3:
    target = st.selectbox("Outcome", targets, format_func=target_titles.get,
                          key=ui.seed("map_target", start.target if start.target in targets else targets[0]))
interaction = st.checkbox("Let the effect of one index depend on the other (add their product to each arm's model)",
                          key=ui.seed("map_interaction", bool(start.interaction)))
kind = "ordinal"
if target == maps.COMPOSITE:
    kinds = [k for k in values.default_kinds(spec) if k in values.WEIGHTED_KINDS]
    if len(kinds) > 1:
        kind = st.radio("Composite", kinds, horizontal=True, format_func=lambda k: KINDS.get(k, k),
                        key=ui.seed("map_kind", kinds[0]))
map_spec = MapSpec(indices=(first, second), target=target, interaction=interaction)

# ------------------------------------------------------------------------------------------
# The models, fitted once per choice and kept for this session
# ------------------------------------------------------------------------------------------
v = spec.values
cache_key = (*aps.fit_key(ws.data_sha256, spec), first, second, target, interaction, kind,
             v and (v.outcome, v.survival_outcome, v.utility_outcome))
cache = st.session_state.setdefault(MODELS, {})
model = cache.get(cache_key)
if model is None:
    with st.spinner("Fitting each arm's model in the two indices..."):
        model = ui.attempt(maps.prepare_map, fs, map_spec, kind=kind)
    if model is None:
        st.stop()
    while len(cache) >= 4:
        cache.pop(next(iter(cache)))
    cache[cache_key] = model


# ------------------------------------------------------------------------------------------
# The session's patient (the one in the sidebar)
# ------------------------------------------------------------------------------------------
point = None
view = ui.patient_view(ws, fs)
if view is not None and first in view.placements and second in view.placements:
    point = (view.placements[first].value, view.placements[second].value)

# ------------------------------------------------------------------------------------------
# The map, in a picture and in words
# ------------------------------------------------------------------------------------------
row = ui.attempt(maps.map_row, model, weights=v.weights if v else None, patient=point)
if row is None:
    st.stop()
text = maps.describe_map(row, arms)
ui.altair(charts_maps.decision_map_chart(row, arms), text)
if point is None:
    st.caption("The patient in hand could not be placed on both indices; set their values on the Patient page.")
for w in row["warnings"]:
    st.warning(aps.md_escape(w))
with st.expander("The models behind the map"):
    ui.sentence(row["methods"])
    for note in row["notes"]:
        ui.sentence(note)
    st.dataframe(maps.coefficient_table(row), hide_index=True, width="stretch")
st.download_button("This map (.json)", data=json.dumps(row, allow_nan=False), file_name=f"map_{first}_{second}.json",
                   mime="application/json", on_click="ignore", icon=":material/download:")

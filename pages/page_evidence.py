"""More evidence: where along each index today's uncertainty matters for decisions, and a planner for the next study."""
import functools
import json

import streamlit as st

import fulcrum_ui as ui
from explorer import charts_evidence as ce
from explorer import evidence as ev
from explorer import planner as pl

ws = ui.page_head(
    "More evidence",
    "For researchers planning what to study next. **Where does uncertainty matter?** For each index value, how much "
    "patients would gain if we knew the true curves instead of today's estimates (the expected value of perfect "
    "information), per 100 patients. **What study would settle it?** Simulated studies that add randomised patients "
    "to this cohort, recruited in different parts of the index.")
spec = ws.spec
r = ui.result(ws)
if r is None:
    st.stop()
fs = r.fitset
rows = r.document.get("evidence") or ui.attempt(ev.evidence_rows, fs, r.composite, r.replicates)
if not rows:
    st.stop()

# ------------------------------------------------------------------------------------------
# Value of information along the index
# ------------------------------------------------------------------------------------------
st.header("Where uncertainty matters")
titles = {ix.name: ix.title for ix in spec.indices}
index = st.selectbox("Index", [ix.name for ix in spec.indices], format_func=titles.get, key=ui.seed("ev_index",
                                                                                                    spec.indices[0].name))
mine = [row for row in rows if row["index"] == index]
labels = {i: ce.evidence_title(row) for i, row in enumerate(mine)}
pick = st.selectbox("Outcome or composite", list(labels), format_func=labels.get, key=ui.key(f"ev_row_{index}"))
row = mine[pick]
ui.altair(ce.evidence_chart(row, titles[index], style=False), row["sentence"])
with st.expander("The numbers along the index"):
    st.dataframe(ce.evidence_table(row, every=10), hide_index=True)
st.caption(f"Uncertainty from the {row['method']}. Margin subtracted before the choice; threshold "
           f"{row['threshold'] if row['threshold'] is not None else 'not stated'} {row['units']}.")

# ------------------------------------------------------------------------------------------
# Planner
# ------------------------------------------------------------------------------------------
st.header("Plan the next study")
st.markdown("Each simulated study draws new patients from this cohort's spread of the index (and covariates), "
            "randomises them 1:1, draws their outcomes from each arm's fitted model, refits, and recomputes the "
            "break-even interval. Three ways to recruit are compared.")
outcomes = {o.name: o.title for o in spec.outcomes if not o.among_survivors}
c1, c2 = st.columns(2)
with c1:
    outcome = st.selectbox("Break-even to settle", list(outcomes), format_func=outcomes.get,
                           key=ui.seed("plan_outcome", next(iter(outcomes))))
    goal = st.radio("Target", ["interval width", "clear difference at an index value"], horizontal=True,
                    key=ui.seed("plan_goal", "interval width"))
with c2:
    lo, hi = fs.pair(outcome, index).x_range
    if goal == "interval width":
        width = st.number_input(f"Widest acceptable break-even interval ({titles[index]})", min_value=0.01,
                                value=float(round((hi - lo) / 4, 2)), key=ui.key(f"plan_width_{index}"))
        target = pl.Target(width=width)
    else:
        at = st.number_input(f"Clear difference at {titles[index]}", min_value=float(lo), max_value=float(hi),
                             value=float(round((lo + hi) / 2, 1)), key=ui.key(f"plan_at_{index}"))
        chance = st.slider("Wanted chance", 0.5, 0.99, 0.8, key=ui.seed("plan_chance", 0.8))
        target = pl.Target(chance=chance, at=at)
    sims = st.select_slider("Simulated studies per strategy and size", [20, 50, 100, 200, 400],
                            value=spec.evidence.simulations if spec.evidence and spec.evidence.simulations in
                            (20, 50, 100, 200, 400) else 200, key=ui.key("plan_sims"))
if st.button("Simulate the next study", type="primary"):
    doc = ui.with_progress("Simulating studies:", functools.partial(pl.plan_study, simulations=sims), fs, outcome,
                           index, target)
    if doc is not None:
        st.session_state[ui.key("plan_doc")] = doc
doc = st.session_state.get(ui.key("plan_doc"))
if doc is not None:
    ui.altair(ce.plan_chart(doc, style=False), " ".join(doc["summary"]))
    st.dataframe(ce.plan_table(doc), hide_index=True)
    st.caption(doc["method"])
    st.download_button("Download the plan (JSON)", json.dumps(doc, indent=1), file_name="fulcrum-plan.json",
                       mime="application/json")

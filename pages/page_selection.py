"""Randomised vs chosen: do patients who chose a treatment fare differently from those randomised to it?"""
import pandas as pd
import streamlit as st

import fulcrum_ui as ui
from explorer import appstate as aps
from explorer import charts_selection, words

ws = ui.page_head(
    "Randomised vs chosen",
    "Patients allocated at random and patients whose treatment was chosen can differ in ways the data do not "
    "show. Here each arm's outcomes in chosen patients are set against the same arm's randomised patients at "
    "the same index value, and the break-even points are compared.")
arms = list(ws.spec.cohort.arms)
if ws.cohort.randomised is None:
    st.warning("The cohort has no allocation column, so randomised and chosen patients cannot be told apart. "
               "Name the allocation column on the Cohort page.")
    st.stop()
if ui.fitted(ws) is None:
    st.stop()

names = [ix.name for ix in ws.spec.indices]
titles = {ix.name: ix.title for ix in ws.spec.indices}
index = st.radio("Index", names, format_func=titles.get, horizontal=True, key=ui.seed("sindex", names[0]))

st.header(f"Where the randomised patients are, along {titles[index]}")
coverage = ui.attempt(ws.coverage, index)
if coverage:
    ui.altair(charts_selection.coverage_chart(coverage, arms, index_label=titles[index]),
              charts_selection.describe_coverage(coverage, arms, titles[index]))
    with st.expander(f"Patients per window of {titles[index]}"):
        st.dataframe(charts_selection.coverage_frame(coverage, arms), hide_index=True, width="stretch")

with_shift = ws.has_selection(None)
if not with_shift and st.button("Add intervals for the shift in break-even (bootstrap, takes a while)"):
    if ui.with_progress("Bootstrap of the break-even shift:", ws.selection, None) is not None:
        st.rerun()
with st.spinner("Comparing randomised and chosen patients..."):
    result = ui.attempt(ws.selection, None if with_shift else 0)
if result is None:
    st.stop()


def span(ci) -> str:
    """An interval as people read it ("-0.063 to 0.078"), open ends said in words."""
    lo, hi = (list(ci or []) + [None, None])[:2]
    return f"{'open' if lo is None else words.fmt(lo)} to {'open' if hi is None else words.fmt(hi)}"


st.header(f"Randomised and chosen patients along {titles[index]}")
marker = ui.patient_marker(ws, ws.fitset(), index)
ui.patient_caption(marker)
for outcome in ws.spec.outcomes:
    rows = [r for r in result.rows if r["index"] == index and r["outcome"] == outcome.name]
    if not rows:
        continue
    st.subheader(outcome.title)
    ui.altair(charts_selection.selection_break_even_chart(rows[0], index_title=titles[index]),
              "Break-even points: " + "; ".join(
                  f"{what} " + (", ".join(f"{b['x']:.3g}" for b in rows[0].get(key) or []) or "none in range")
                  for key, what in charts_selection.SELECTION_SETS) + ".")
    for row in rows:
        ui.altair(charts_selection.selection_chart(row, arms, index_title=titles[index], patient=marker),
                  charts_selection.describe_selection(row))
    table = pd.DataFrame([{"arm": r["arm"], f"chosen minus randomised ({r.get('measure', outcome.title)})":
                           words.fmt(r["effect"]), "interval": span(r["ci"]), "randomised patients": r["n_randomised"],
                           "chosen patients": r["n_chosen"],
                           "does it vary along the index? (p)": words.fmt(r.get("varies_with_index_p"))}
                          for r in rows])
    st.dataframe(table.astype(str), hide_index=True, width="stretch")
    ev = rows[0].get("e_value")
    if ev and ev.get("e_value") is not None:
        st.caption(f"E-value {ev['e_value']:.3g}: " + aps.md_escape(ev.get("note", "")))
    with st.expander("Balance after weighting, and notes"):
        for r in rows:
            if r.get("balance"):
                st.markdown(f"**{aps.md_escape(r['arm'])}**")
                st.dataframe(pd.DataFrame(r["balance"]).astype(str), hide_index=True, width="stretch")
        if rows[0].get("adjusted") and rows[0]["adjusted"].get("note"):
            st.caption(aps.md_escape(rows[0]["adjusted"]["note"]))
        for w in dict.fromkeys(w for r in rows for w in r.get("warnings", [])):
            st.caption("Note: " + aps.md_escape(w))

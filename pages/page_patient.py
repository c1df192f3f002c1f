"""Patient: one patient's place along each index, each arm's predicted outcomes, and what the weights favour."""
import streamlit as st

import fulcrum_ui as ui
from explorer import CAUTIONS
from explorer import appstate as aps

ENTER, PICK = "Enter this patient's values", "Pick a patient from the cohort"
ws, patient = ui.page_head(
    "Patient",
    "Place one patient on the curves: where they sit on each index, what each arm predicts for people like "
    "them, and which arm the stated values favour. Nothing is refitted.",
    needs=("patient", "The patient view"))
arms = list(ws.spec.cohort.arms)
charts = ui.engine("charts")
fs = ui.fitted(ws)
if fs is None:
    st.stop()

# ------------------------------------------------------------------------------------------
# Who: entered values or a cohort row (its identifier is never shown or exported)
# ------------------------------------------------------------------------------------------
how = st.radio("Patient", [ENTER, PICK], horizontal=True, key=ui.seed("patient_how", ENTER))
values, row = {}, None
if how == PICK:
    position = st.number_input(f"Cohort row (1 to {ws.cohort.n:,}; no identifiers are shown)", min_value=1,
                               max_value=ws.cohort.n, step=1, key=ui.seed("patient_row", 1))
    row = int(position) - 1
else:
    fields = aps.patient_fields(ws.spec, ws.index_values(), ws.cohort.frame)
    cols = st.columns(min(len(fields), 4) or 1)
    for i, f in enumerate(fields):
        with cols[i % len(cols)]:
            if f["numeric"]:
                step = 1.0 if f["discrete"] else max((f["max"] - f["min"]) / 100, 0.01)
                values[f["key"]] = st.number_input(f["label"], step=step, key=ui.seed(f"pv:{f['key']}", f["default"]),
                                                   help=f"Cohort range {f['min']:.3g} to {f['max']:.3g}")
            else:
                values[f["key"]] = st.selectbox(f["label"], f["options"], key=ui.seed(f"pv:{f['key']}", f["default"]))

names = [ix.name for ix in ws.spec.indices]
titles = {ix.name: ix.title for ix in ws.spec.indices}
index = st.radio("Speak along", names, format_func=titles.get, horizontal=True, key=ui.seed("pindex", names[0]))
weights = ws.spec.values.weights if ws.spec.values else None
view = ui.attempt(patient.place_patient, fs, values, row=row, weights=weights, index=index)
if view is None:
    st.stop()

# ------------------------------------------------------------------------------------------
# Where the patient sits, and the limits of what the cohort can say
# ------------------------------------------------------------------------------------------
st.header("Where this patient sits")
st.dataframe([{"index": pl.label, "value": pl.value, "cohort percentile": round(pl.percentile),
               "cohort range": f"{pl.cohort_range[0]:.3g} to {pl.cohort_range[1]:.3g}",
               "inside the cohort's range": "no" if pl.outside else "yes", "from": pl.source}
              for pl in view.placements.values()], hide_index=True, width="stretch")
for limit in view.limits:
    st.warning(aps.md_escape(limit))

pl = view.placements.get(index)
if pl is None:
    st.stop()
marker = {"x": pl.value, "label": f"this patient ({pl.value:.3g}, percentile {pl.percentile:.0f})"}

# ------------------------------------------------------------------------------------------
# Which arm the weights favour, and how firmly
# ------------------------------------------------------------------------------------------
judgements = [j for j in view.judgements if j.index == index]
if judgements:
    st.header("What the stated values favour")
    for j in judgements:
        st.info(aps.md_escape(j.sentence))

# ------------------------------------------------------------------------------------------
# Each arm's predicted outcomes, in words, pictures and on the curves
# ------------------------------------------------------------------------------------------
st.header(f"Predictions for people like this patient ({titles[index]} {pl.value:.3g})")
preds = [p for p in view.predictions if p.index == index]
curve_rows = {(r["outcome"], r["index"]): r for r in (ws.curve_rows() or [])}
for p in preds:
    st.subheader(p.title)
    for s in [p.sentence, *p.states_sentences, p.uncertainty]:
        ui.sentence(s)
    probs = patient.icon_probabilities(p)
    if charts is not None and probs:
        levels = list(next(iter(probs.values())))
        colours = charts.state_colours(levels)
        icon_cols = st.columns(len(arms))
        for col, arm in zip(icon_cols, arms):
            with col:
                chart = charts.icon_array_chart(probs[arm], f"With {arm}", colours)
                ui.show_chart(chart)
                st.caption(aps.md_escape(ui.description(chart) or ""))
    table = [{"arm": a, "estimate": e.estimate, "interval": f"{e.lower:.3g} to {e.upper:.3g}"}
             for a, e in p.arms.items()]
    dist = [{"arm": a, "state": lv, "probability": v[0], "interval": f"{v[1]:.2f} to {v[2]:.2f}"}
            for a, e in p.arms.items() for lv, v in (e.distribution or {}).items()]
    with st.expander("On the curve, and the numbers"):
        row_json = curve_rows.get((p.outcome, index))
        if charts is not None and row_json is not None:
            ui.altair(charts.outcome_chart(row_json, arms, patient=marker, index_label=titles[index]))
        st.dataframe(dist or table, hide_index=True, width="stretch")

# ------------------------------------------------------------------------------------------
# The one-page summary for the meeting record (no identifiers)
# ------------------------------------------------------------------------------------------
st.header("One-page summary")
html = ui.attempt(patient.patient_summary_html, view, CAUTIONS)
if html is not None:
    st.download_button("Printable summary (.html, no identifiers)", data=html, file_name="patient_summary.html",
                       mime="text/html", on_click="ignore", icon=":material/print:")

"""Patient: one patient's place along each index, a short values conversation, each arm's predicted outcomes,
and what the values favour; a printable summary (HTML and PDF) for the meeting record."""
import dataclasses
import datetime as dt
import json

import streamlit as st

import fulcrum_ui as ui
from explorer import CAUTIONS
from explorer import appstate as aps
from explorer import charts_curves, charts_patient, patient_pdf, patient_summary
from explorer import conversation as conv

ENTER, PICK = "Enter this patient's values", "Pick a patient from the cohort"
WHOSE = {"patient": "The patient", "proxy": "Someone speaking for the patient", "team": "The treating team"}
ws = ui.page_head(
    "Patient",
    "Place one patient on the curves: where they sit on each index, what each arm predicts for people like "
    "them, and which arm their values favour. Nothing is refitted.")
arms = list(ws.spec.cohort.arms)
fs = ui.fitted(ws)
if fs is None:
    st.stop()


def words(level: str) -> str:
    return str(level).replace("_", " ")


# ------------------------------------------------------------------------------------------
# Who: entered values or a cohort row (its identifier is never shown or exported)
# ------------------------------------------------------------------------------------------
choice = ui.patient(ws)
how = st.radio("Patient", [ENTER, PICK], horizontal=True,
               key=ui.pkey("patient_how", PICK if choice.how == "row" else ENTER))
position = choice.row
entered = dict(choice.values)
if how == PICK:
    position = int(st.number_input(f"Cohort row (1 to {ws.cohort.n:,}; no identifiers are shown)", min_value=1,
                                   max_value=ws.cohort.n, step=1,
                                   key=ui.pkey("patient_row", int(choice.row or 0) + 1))) - 1
else:
    fields = ui.patient_fields(ws)
    cols = st.columns(min(len(fields), 4) or 1)
    for i, f in enumerate(fields):
        with cols[i % len(cols)]:
            if f["numeric"]:
                step = 1.0 if f["discrete"] else max((f["max"] - f["min"]) / 100, 0.01)
                entered[f["key"]] = st.number_input(f["label"], step=step,
                                                    key=ui.pkey(f"pv:{f['key']}", float(choice.values[f["key"]])),
                                                    help=f"Cohort range {f['min']:.3g} to {f['max']:.3g}")
            else:
                entered[f["key"]] = st.selectbox(f["label"], f["options"],
                                                 key=ui.pkey(f"pv:{f['key']}", choice.values[f["key"]]))
new_choice = dataclasses.replace(choice, how="row" if how == PICK else "entered", values=entered, row=position)
if new_choice != choice:
    ui.set_patient(new_choice)
    st.rerun()  # so the sidebar, drawn before this page, shows the patient just entered

names = [ix.name for ix in ws.spec.indices]
titles = {ix.name: ix.title for ix in ws.spec.indices}
index = st.radio("Speak along", names, format_func=titles.get, horizontal=True, key=ui.seed("pindex", names[0]))


# ------------------------------------------------------------------------------------------
# What matters to the patient: a short values conversation, turned into weights that stay editable
# ------------------------------------------------------------------------------------------
def keep_valid(key: str, options: list[str]) -> None:
    """Drop choices that are no longer offered (a state moved to another answer)."""
    if key in st.session_state:
        st.session_state[key] = [o for o in st.session_state[key] if o in options]


def conversation(levels: list[str], current) -> None:
    """The guided questions; 'Use these values' applies the weights to the analysis and keeps the record."""
    living = levels[:-1]
    who = st.radio("Whose values are these?", list(WHOSE), format_func=WHOSE.get, horizontal=True,
                   key=ui.seed("conv_whose", current.whose if current else "patient"))
    q = conv.questions(who)
    st.markdown(f"**1.** {aps.md_escape(q['acceptable'])} (Death is the fixed point of the scale, so it is not "
                "asked about.)")
    acceptable = st.multiselect("Acceptable states", living, format_func=words, key=ui.seed("conv_acceptable", []))
    rest = [lv for lv in living if lv not in acceptable]
    st.markdown(f"**2.** {aps.md_escape(q['worse'])}")
    keep_valid(ui.key("conv_worse"), rest)
    worse = st.multiselect("Worse than death", rest, format_func=words, key=ui.seed("conv_worse", []))
    st.markdown(f"**3.** {aps.md_escape(q['ranking'])}")
    order = st.multiselect("Order, best first (any left out follow in the list's order)", living, format_func=words,
                           key=ui.seed("conv_order", living))
    ratings = None
    if st.checkbox(f"**4.** {q['ratings']} (optional)", key=ui.seed("conv_rate", False)):
        base = ui.attempt(conv.weights_from_answers, levels, acceptable, worse, order)
        if base is None:
            return
        ratings = {}
        cols = st.columns(min(len(living), 4))
        for i, lv in enumerate(living):
            group = "acceptable" if lv in acceptable else "worse" if lv in worse else "neither"
            with cols[i % len(cols)]:
                ratings[lv] = st.number_input(f"{words(lv)} (0 = death, 100 = best)", min_value=-100, max_value=100,
                                              step=5, key=ui.seed(f"conv_rating:{lv}:{group}",
                                                                  int(round(100 * base[lv]))))
    c1, c2, c3 = st.columns(3)
    with c1:
        day = st.date_input("Date", key=ui.seed("conv_date", dt.date.today()))
    with c2:
        clock = st.time_input("Time", key=ui.seed("conv_time", dt.datetime.now().time().replace(second=0,
                                                                                              microsecond=0)))
    with c3:
        by = st.text_input("Recorded by (optional; shown in the summary)", key=ui.seed("conv_by", ""))
    record = ui.attempt(conv.record_conversation, levels, acceptable, worse, order, ratings, whose=who,
                        when=dt.datetime.combine(day, clock), recorded_by=by, keeping="The weights in use are kept.")
    if record is None:
        return
    st.markdown("The weights these answers give (death 0, best state 1):")
    st.dataframe([{"state": words(lv), "weight": w} for lv, w in record.weights.items()], hide_index=True)
    for note in record.notes:
        st.caption(aps.md_escape(note))
    if st.button("Use these values", type="primary", key=ui.key("conv_use")):
        changed = ui.update_spec(lambda s: aps.edit_spec(s, {"values": {
            "weights": record.weights, "whose": record.whose, "preset": None, "acceptable": list(acceptable)}}))
        if changed or ws.spec.values.weights == record.weights:
            ui.set_patient(dataclasses.replace(ui.patient(ui.workspace()), record=record))
            for lv in levels:
                st.session_state.pop(ui.key(f"pw:{lv}"), None)
            st.rerun()


def weights_in_use(levels: list[str]) -> None:
    """The weights the judgements use, editable; a change marks the record as edited."""
    v = ui.workspace().spec.values
    cols = st.columns(min(len(levels), 5))
    edited = {}
    for i, lv in enumerate(levels):
        with cols[i % len(cols)]:
            edited[lv] = st.number_input(words(lv), min_value=-1.0, max_value=1.0, step=0.05, format="%.2f",
                                         key=ui.seed(f"pw:{lv}", float(v.weights.get(lv, 0.0))))
    if edited != dict(v.weights):
        ui.update_spec(lambda s: aps.edit_spec(s, {"values": {"weights": edited, "preset": None}}))


record = None
if ws.spec.values is not None:
    levels = list(ws.spec.outcome(ws.spec.values.outcome).levels)
    st.header("What matters to the patient")
    kept = choice.record
    with st.expander("A short values conversation: the answers become the weights below", expanded=kept is None):
        conversation(levels, kept)
    st.subheader("Weights in use (death 0, best state 1; you can still change them)")
    weights_in_use(levels)
    ws = ui.workspace()
    record = ui.current_record(ws, ui.patient(ws))
    for line in record.sentences():
        ui.sentence(line)

view = ui.patient_view(ws, fs, index=index)
if view is None:
    st.stop()

# ------------------------------------------------------------------------------------------
# Where the patient sits, and the limits of what the cohort can say
# ------------------------------------------------------------------------------------------
st.header("Where this patient sits")
ui.sentence(view.place_sentence(index))
st.dataframe([{"index": pl.label, "value": pl.value, "cohort percentile": round(pl.percentile),
               "cohort range": f"{pl.cohort_range[0]:.3g} to {pl.cohort_range[1]:.3g}",
               "inside the cohort's range": "no" if pl.outside else "yes", "from": pl.source}
              for pl in view.placements.values()], hide_index=True, width="stretch")
for limit in view.limits:
    st.warning(aps.md_escape(limit))
if view.timing:
    st.info(aps.md_escape(view.timing))

pl = view.placements.get(index)
if pl is None:
    st.stop()
marker = {"x": pl.value, "label": f"this patient ({pl.value:.3g}, percentile {pl.percentile:.0f})"}

# ------------------------------------------------------------------------------------------
# Which arm the weights favour, and how firmly
# ------------------------------------------------------------------------------------------
judgements = [j for j in view.judgements if j.index == index]
if judgements:
    st.header("What these values favour")
    for j in judgements:
        st.info(aps.md_escape(j.sentence))
        if j.level_sentence:
            ui.sentence(j.level_sentence)
        st.caption(aps.md_escape(j.detail))

# ------------------------------------------------------------------------------------------
# Each arm's predicted outcomes, in words, pictures and on the curves
# ------------------------------------------------------------------------------------------
st.header(f"Predictions for people like this patient ({titles[index]} {pl.value:.3g})")
preds = [p for p in view.predictions if p.index == index]
curve_rows = {(r["outcome"], r["index"]): r for r in (ws.curve_rows() or [])}
for p in preds:
    st.subheader(p.title)
    for s in [p.sentence, *p.states_sentences, p.uncertainty, *([p.level_sentence] if p.level_sentence else [])]:
        ui.sentence(s)
    probs = patient_summary.icon_probabilities(p)
    if probs:
        chart = charts_patient.per_hundred_chart(probs, f"{p.title}: out of 100 people like this", width=880)
        ui.show_chart(chart)
        st.caption(aps.md_escape(ui.description(chart) or ""))
    with st.expander("On the curve, and the numbers"):
        row_json = curve_rows.get((p.outcome, index))
        if row_json is not None:
            ui.altair(charts_curves.outcome_chart(row_json, arms, patient=marker, index_label=titles[index]))
        table = patient_summary.outcome_table(p, arms)
        st.dataframe([{"": r[0], **dict(zip(arms, r[1:]))} for r in table], hide_index=True, width="stretch")

# ------------------------------------------------------------------------------------------
# The summary for the meeting record (no identifiers unless added here)
# ------------------------------------------------------------------------------------------
st.header("Summary for the meeting record")
ident = st.text_input("Add a name or record number to the summary (optional; leave empty to keep it anonymous)",
                      key=ui.seed("summary_ident", ""))
identifiers = {"Patient": ident.strip()} if ident.strip() else None
kwargs = {"identifiers": identifiers}
note = "with the name or number added" if identifiers else "no identifiers"
c1, c2, c3 = st.columns(3)
with c1:  # made when clicked, so moving a weight never waits for the files
    st.download_button(f"Printable summary (.html, {note})", file_name="patient_summary.html", mime="text/html",
                       data=lambda: patient_summary.summary_html(view, CAUTIONS, **kwargs), on_click="ignore",
                       icon=":material/print:")
with c2:
    st.download_button(f"Summary as PDF ({note})", file_name="patient_summary.pdf", mime="application/pdf",
                       data=lambda: patient_pdf.view_pdf(view, CAUTIONS, **kwargs), on_click="ignore",
                       icon=":material/picture_as_pdf:")
with c3:
    st.download_button(f"Patient view (.json, {note})", file_name="patient_view.json", mime="application/json",
                       data=lambda: json.dumps(view.to_json(identifiers), indent=1), on_click="ignore",
                       icon=":material/data_object:")

"""Values: weigh each outcome state, see which arm the weights favour along the index, and how firmly."""
import pandas as pd
import streamlit as st

import fulcrum_ui as ui
from explorer import appstate as aps
from explorer import charts_curves, charts_values, values
from explorer.models import describe
from explorer.presets import available_presets, preset_weights
from explorer.words import fmt as charts_fmt

CUSTOM = "custom"
WHOSE = {"patient": "the patient's own", "proxy": "a proxy's, on the patient's behalf", "team": "the team's"}
ws = ui.page_head(
    "Values",
    "How much is each outcome state worth? Give the best state 1 and death 0; a state judged worse than death "
    "goes below 0. The composite is each arm's expected value of these weights along the index.")
arms = list(ws.spec.cohort.arms)

ordinal = [o for o in ws.spec.outcomes if describe(o).levels]
if ws.spec.values is None:
    if not ordinal:
        st.warning("The spec has no ordinal outcome (a ranked list of states such as independent, home with help, "
                   "care home, bedbound, dead), so there is nothing to weigh. Declare one on the Cohort page.")
        st.stop()
    pick = st.selectbox("Which outcome's states should be weighed?", [o.name for o in ordinal],
                        format_func=lambda n: ws.spec.outcome(n).title)
    if st.button("Weigh its states", type="primary"):
        if ui.update_spec(lambda s: aps.add_values(s, pick)):
            st.rerun()
    st.stop()

v = ws.spec.values
outcome = ws.spec.outcome(v.outcome)
levels = list(outcome.levels)

# ------------------------------------------------------------------------------------------
# Weights: a preset to start from, then one slider per state
# ------------------------------------------------------------------------------------------
st.header(f"Weights for {outcome.title}")
presets = available_presets(levels)
labels = {p.name: p.label for p in presets} | {CUSTOM: "My own weights"}
p1, p2 = st.columns([2, 1])
with p2:
    whose = st.radio("Whose values are these?", list(WHOSE), format_func=WHOSE.get, key=ui.seed("whose", v.whose))
    acceptable = st.multiselect("States the patient would find acceptable", levels,
                                default=[lv for lv in v.acceptable if lv in levels], key=ui.key("acceptable"))


def apply_preset() -> None:
    name = st.session_state[ui.key("preset")]
    if name == CUSTOM:
        return
    try:
        weights = preset_weights(name, levels, st.session_state.get(ui.key("acceptable"), []))
    except Exception as exc:
        st.session_state["preset_error"] = exc
        return
    for lv in levels:
        st.session_state[ui.key(f"w:{lv}")] = float(weights[lv])


with p1:
    start = v.preset if v.preset in labels else CUSTOM
    preset = st.selectbox("Start from", list(labels), format_func=labels.get, key=ui.seed("preset", start),
                          on_change=apply_preset)
    source = next((p.source for p in presets if p.name == preset), None)
    if source:
        st.caption("Source: " + aps.md_escape(source))
if "preset_error" in st.session_state:
    ui.show_error(st.session_state.pop("preset_error"), "The weights are unchanged.")

def to_custom() -> None:
    st.session_state[ui.key("preset")] = CUSTOM


cols = st.columns(min(len(levels), 5))
weights = {}
for i, lv in enumerate(levels):
    with cols[i % len(cols)]:
        weights[lv] = st.slider(lv.replace("_", " "), -1.0, 1.0, step=0.01, on_change=to_custom,
                                key=ui.seed(f"w:{lv}", float(v.weights.get(lv, 0.0))))

chosen = None if preset == CUSTOM else preset
if (weights, whose, chosen, tuple(acceptable)) != (v.weights, v.whose, v.preset, tuple(v.acceptable)):
    ui.update_spec(lambda s: aps.edit_spec(s, {"values": {"weights": weights, "whose": whose, "preset": chosen,
                                                          "acceptable": list(acceptable)}}))
    ws = ui.workspace()
    v = ws.spec.values

# ------------------------------------------------------------------------------------------
# The composite along the chosen index (re-weighting only: nothing is refitted)
# ------------------------------------------------------------------------------------------
if ui.fitted(ws) is None:
    st.stop()
prepared = ui.attempt(ws.composites)
if not prepared:
    st.stop()
names = [ix.name for ix in ws.spec.indices]
titles = {ix.name: ix.title for ix in ws.spec.indices}
index = st.radio("Index", names, format_func=titles.get, horizontal=True, key=ui.seed("vindex", names[0]))
here = {k: cm for k, cm in prepared.items() if k[1] == index}
anchor = next(iter(here.values()))
lo, hi = anchor.x_range
discrete = bool(ws.index_values()[index].info.get("discrete"))
marker = ui.patient_marker(ws, ws.fitset(), index)
ui.patient_caption(marker)
start = marker["x"] if marker is not None and lo <= marker["x"] <= hi else values.default_threshold_x(anchor)
x0 = st.slider(f"Test how far the weights can move at {titles[index]} =", float(lo), float(hi),
               step=1.0 if discrete else (hi - lo) / 100,
               key=ui.seed(f"x0:{index}", float(round(start) if discrete else start)))
summaries = ui.attempt(values.reweight, here, v.weights, values=v, margin=ws.spec.analysis.margin,
                       threshold_at={index: x0})
if summaries is None:
    st.stop()
rows = values.composite_rows(ws.fitset(), summaries, v)

st.header(f"Value of outcomes along {titles[index]}")
for row, ((form, _), _) in zip(rows, summaries.items()):
    st.subheader(row["label"])  # the composite's title in words (values.prepare_composite)
    if form in values.WEIGHTED_KINDS:
        st.caption(f"Uses the weights above: {WHOSE[v.whose]} values.")
    else:
        st.caption("Does not use the weights above: time alive is counted at each survivor's own quality of life "
                   "from the cohort (quality-adjusted time, in the survival outcome's time units).")
    ui.altair(charts_curves.composite_chart(row, arms, patient=marker, index_label=titles[index]),
              charts_curves.describe_row(row, arms, titles[index], margin=ws.spec.analysis.margin))
    for w in row.get("warnings", []):
        st.warning(aps.md_escape(w))
    for note in row.get("notes", []):
        st.caption(aps.md_escape(note))

    th = row.get("thresholds")
    if th:
        with st.expander("How far can these weights move before the answer changes?", expanded=False):
            lw = charts_values.leeway(th)
            chart = charts_values.leeway_chart(lw, arms, where=f"{titles[index]} {x0:.3g}")
            ui.show_chart(chart)
            ui.sentence(ui.description(chart) or "")
            st.dataframe(charts_values.leeway_table(lw), hide_index=True, width="stretch")

    acc = row.get("acceptability")
    if acc:
        chart = charts_values.preference_chart(acc, arms, index_title=titles[index], spread=v.spread, ranges=v.ranges,
                                          discrete=discrete)
        ui.altair(chart, ui.description(chart))

with st.expander("Uncertainty about the weights themselves"):
    spread = st.slider("Let each weight vary by plus or minus", 0.0, 0.5, step=0.05,
                       key=ui.seed("spread", float(v.spread)))
    if spread != v.spread and ui.update_spec(lambda s: aps.with_settings(s, spread=spread)):
        st.rerun()
    st.caption(f"The chance {arms[0]} is preferred combines the models' uncertainty with weights drawn evenly "
               "within this range (death stays at its weight).")

def rounded(v) -> str:
    return "" if v is None else charts_fmt(v)


def span(ci) -> str:
    return "" if not ci or ci[0] is None else f"{charts_fmt(ci[0])} to {charts_fmt(ci[1])}"


def pairwise_window(window, label: str) -> str:
    """A window along the index as people say it: "Clinical Frailty Scale 1-3"."""
    if window is None:
        return "everyone"
    if isinstance(window, dict) and "from" in window:
        return f"{label} {charts_fmt(window['from'])}-{charts_fmt(window['to'])}"
    return str(window)


# ------------------------------------------------------------------------------------------
# The hierarchical pairwise comparison
# ------------------------------------------------------------------------------------------
st.header("Pairwise comparison of patients")
st.markdown("Every patient in one arm is compared with every patient in the other, outcome by outcome in "
            "order of priority; a pair is decided by the first outcome that separates them.")
if st.checkbox("Compute the pairwise comparison (with its own bootstrap)", key=ui.key("pairwise_on")):
    prow = ui.with_progress("Pairwise comparison:", ws.pairwise, index)
    if prow:
        order = [ws.spec.outcome(n).title for n in (ws.spec.pairwise.priority if ws.spec.pairwise else ())]
        if order:
            st.markdown("**Order of priority:** " + " → ".join(aps.md_escape(t) for t in order))
        table = pd.DataFrame([{"patients": pairwise_window(r["window"], titles.get(index, "index")),
                               f"{arms[0]}": r["n_first"], f"{arms[1]}": r["n_second"],
                               "win ratio": rounded(r["win_ratio"]), "win ratio interval": span(r["win_ratio_ci"]),
                               "net benefit": rounded(r["net_benefit"]),
                               "net benefit interval": span(r["net_benefit_ci"]),
                               "clearly favours": r["favours"] or "neither"} for r in prow])
        st.dataframe(table.astype(str), hide_index=True, width="stretch")
        st.caption("Win ratio: pairs won by the first arm over pairs lost (above 1 favours it). Net benefit: "
                   "the share of pairs won minus the share lost (above 0 favours the first arm).")
        overall = prow[0]
        if overall.get("win_ratio") is not None:
            ui.sentence(f"Across everyone, {arms[0]} wins {overall['wins']:,} and loses {overall['losses']:,} "
                        f"of {overall['pairs']:,} pairs (win ratio {overall['win_ratio']:.3g}).")

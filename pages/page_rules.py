"""Rules for a service: what a threshold rule along an index does per 100 patients, against everyone-one-arm."""
import pandas as pd
import streamlit as st

import fulcrum_ui as ui
from explorer import appstate as aps
from explorer import exports, policy
from explorer import policy_charts as pcharts
from explorer import target as target_mod

CACHE = "policy_sets"
ws = ui.page_head(
    "Rules per 100 patients",
    "A break-even point answers \"which arm for this patient?\". A team reviewing its practice asks next: \"if we "
    "gave one arm below a threshold and the other above it, what would happen to 100 of our patients?\" Each "
    "patient's predicted outcomes under the arm the rule gives are averaged (standardisation); move the threshold "
    "to see the consequences change.")
spec = ws.spec
arms = list(spec.cohort.arms)
fs = ui.fitted(ws)
if fs is None:
    st.stop()

# ------------------------------------------------------------------------------------------
# Whose patients, which index
# ------------------------------------------------------------------------------------------
names = policy.policy_indices(spec)
titles = {ix.name: ix.title for ix in spec.indices}
c1, c2 = st.columns(2)
with c1:
    index = st.selectbox("Index the threshold lies on", names, format_func=titles.get, key=ui.seed("rule_index", names[0]))
with c2:
    sources = ["the cohort"] + (["the [target] file of the spec"] if spec.target else []) + ["a file of our own patients"]
    source = st.radio("Patients the rule is applied to", sources, key=ui.seed("rule_source", sources[-2] if spec.target
                                                                                else sources[0]))
upload = None
if source == "a file of our own patients":
    upload = st.file_uploader("Our own patients: CSV, TSV, Excel (.xlsx) or Parquet with the index's columns "
                              "(no outcomes needed)", type=["csv", "tsv", "xlsx", "parquet"], key=ui.key("rule_upload"))
    if upload is None:
        st.info("Choose a file of local patients, or apply the rule to the cohort.")
        st.stop()

weights = spec.values.weights if spec.values else None
cache_key = (*aps.fit_key(ws.data_sha256, spec), index, source, upload.file_id if upload else None,
             tuple(sorted((weights or {}).items())))
cache = st.session_state.setdefault(CACHE, {})
ps = cache.get(cache_key)
if ps is None:
    with st.spinner("Working out every rule along the index..."):
        target = None
        if source == "the [target] file of the spec":
            target = ui.attempt(target_mod.load_target, spec, fs.indices, [index])
        elif upload is not None:
            target = ui.attempt(target_mod.load_target, spec, fs.indices, [index], data=upload.getvalue(),
                                filename=upload.name, keeping="The cohort and settings are kept.")
        if source != "the cohort" and target is None:
            st.stop()
        ps = ui.attempt(policy.prepare_index, fs, index, target, weights=weights)
    if ps is None:
        st.stop()
    while len(cache) >= 6:
        cache.pop(next(iter(cache)))
    cache[cache_key] = ps
rows = policy.rows(ps)

# ------------------------------------------------------------------------------------------
# Which measure, which direction, which threshold
# ------------------------------------------------------------------------------------------
choices = list(dict.fromkeys((r["outcome"], r["composite"]) for r in sorted(rows, key=lambda r: not r["composite"])))
labels = {(r["outcome"], r["composite"]): r["title"] for r in rows}
c1, c2 = st.columns(2)
with c1:
    what = st.selectbox("Judge the rule by", choices, format_func=labels.get, key=ui.seed("rule_what", choices[0]))
with c2:
    direction = st.radio("Rule", list(policy.DIRECTIONS), horizontal=False, key=ui.seed("rule_dir", "first_below"),
                         format_func=lambda d: policy.rule_words(d, tuple(arms), titles[index]))
row = next(r for r in rows if (r["outcome"], r["composite"]) == what and r["direction"] == direction)
ts = [p["threshold"] for p in row["curve"]]
t = st.select_slider(f"Threshold t on {titles[index]}", options=ts, value=row["best"]["threshold"],
                     format_func=lambda v: f"{v:.3g}", key=ui.key(f"rule_t_{index}_{what}_{direction}"))
here = policy.at_threshold(ps, row["outcome"] if not row["composite"] else f"composite:{row['composite']}",
                           direction, t)

st.header(f"Per 100 of {ps.target.name} ({ps.target.n} patients)")
unit = pcharts.unit_words(row)
m1, m2, m3 = st.columns(3)
m1.metric(f"The rule at {t:.3g}", policy.fmt(here["value"], row["counts_patients"]),
          help=f"{unit}; interval {policy.fmt(here['ci'][0])} to {policy.fmt(here['ci'][1])}")
m2.metric(f"Everyone {arms[0]}", policy.fmt(here["all_first"], row["counts_patients"]))
m3.metric(f"Everyone {arms[1]}", policy.fmt(here["all_second"], row["counts_patients"]))
ui.altair(pcharts.rule_curve_chart(row, arms, t, index_title=titles[index]), pcharts.describe_rule(row, arms, t))
for r in rows:
    if r.get("levels") and r["direction"] == direction:
        chart = pcharts.frequency_chart(r, arms, t)
        if chart is not None:
            ui.altair(chart, pcharts.per_hundred_words(r, arms, t))

st.subheader(f"Every outcome under this rule (threshold {t:.3g})")
table = pd.DataFrame(policy.consequences(ps, direction, t)).astype(str)
st.dataframe(table, hide_index=True, width="stretch")
st.download_button("Download this table (CSV, for the minutes)", exports.to_csv_safe(table),
                   file_name=f"rule_{index}_{t:.3g}.csv", mime="text/csv", key=ui.key("rule_csv"))

cp = row.get("current_practice")
if cp:
    with st.expander("What current practice achieves among the chosen patients"):
        ui.sentence(f"The cohort's {cp['n']} chosen patients, as treated: {policy.fmt(cp['value'])} per 100 "
                    f"(interval {policy.fmt(cp['ci'][0])} to {policy.fmt(cp['ci'][1])}). The best rule in this "
                    f"direction for them (threshold {policy.fmt(cp['best_rule_threshold'], False)}) gives "
                    f"{policy.fmt(cp['regret'])} more per 100 (interval {policy.fmt(cp['regret_ci'][0])} to "
                    f"{policy.fmt(cp['regret_ci'][1])}).")
        st.caption(aps.md_escape(cp["note"]))
with st.expander("How this is worked out, and what to keep in mind"):
    ui.sentence(f"Intervals: {row['interval']}. " + policy.sentence(row, arms))
    for w in row.get("warnings", []):
        st.caption("Note: " + aps.md_escape(w))

"""Outcomes by index: each arm's curve along an index, where the arms break even, and every break-even point."""
import streamlit as st

import fulcrum_ui as ui
from explorer import appstate as aps
from explorer import charts_checks, charts_common, charts_curves, headline_table, margins, observed
from explorer.models import describe

LEVELS = [0.8, 0.9, 0.95, 0.99]
ws = ui.page_head(
    "Outcomes by index",
    "Where do the two arms do equally well (the break-even point), and which does better on either side? The "
    "table answers for every outcome and index; below it, one chart per outcome, with its checks and methods "
    "in tabs.")
arms = list(ws.spec.cohort.arms)
names = [ix.name for ix in ws.spec.indices]
titles = {ix.name: ix.title for ix in ws.spec.indices}
index = st.radio("Index", names, format_func=titles.get, horizontal=True, key=ui.seed("index", names[0]))
headline = st.container()

# ------------------------------------------------------------------------------------------
# Settings that re-summarise (never refit)
# ------------------------------------------------------------------------------------------
a = ws.spec.analysis
levels = sorted(set(LEVELS) | {a.level})
settings = st.expander("Settings: the margin, the interval level and bootstrap intervals", expanded=False)
c1, c2, c3 = settings.columns(3)
with c1:
    margin = st.number_input("Margin: the smallest difference worth having (default for probabilities and composites)",
                             step=0.01, format="%.3f", key=ui.seed("margin", float(a.margin)))
with c2:
    level = st.selectbox("Interval level", levels, format_func=lambda v: f"{v:.0%}", key=ui.seed("level", a.level))
with c3:
    bands = st.radio("Clear-difference regions use", ["pointwise", "simultaneous"], horizontal=True,
                     format_func=lambda v: {"pointwise": "pointwise intervals",
                                            "simultaneous": "simultaneous bands"}[v], key=ui.seed("bands", a.bands))
if (margin, level, bands) != (a.margin, a.level, a.bands):
    ui.update_spec(lambda s: aps.with_settings(s, margin=margin, level=level, bands=bands))
    ws = ui.workspace()
with st.expander("Margin per outcome (each in its own units; the margin above is the default for probabilities)"):
    own = {o.name: st.number_input(f"{o.title} ({margins.units_words(o)})", format="%.3f",
                                   step=0.01 if describe(o).probability else 1.0,
                                   key=ui.seed(f"margin:{o.name}:{ws.spec.analysis.margin}", ws.spec.margin_for(o)))
           for o in ws.spec.outcomes}
    changed = {n: v for n, v in own.items() if v != ws.spec.margin_for(ws.spec.outcome(n))}
    if changed and ui.update_spec(lambda s: margins.with_margins(s, changed)):
        ws = ui.workspace()

with settings:
    st.markdown("**Bootstrap intervals (run on request).** Analytic intervals are shown by default. The bootstrap refits every model on resampled "
                "patients; it takes longer and runs only when you ask.")
    b1, b2 = st.columns([1, 2])
    with b1:
        reps = st.number_input("Replicates", min_value=20, max_value=5000, step=50,
                               key=ui.seed("replicates", int(ws.spec.analysis.replicates)))
    if reps != ws.spec.analysis.replicates:
        ui.update_spec(lambda s: aps.with_settings(s, replicates=int(reps)))
        ws = ui.workspace()
    use_boot = True
    with b2:
        if ws.has_bootstrap():
            use_boot = st.checkbox(f"Use the bootstrap intervals ({ws.spec.analysis.replicates} replicates)",
                                   value=True, key=ui.key("use_boot"))
        elif st.button(f"Run the bootstrap ({ws.spec.analysis.replicates} replicates)"):
            if ui.fitted(ws) is not None:
                ui.with_progress("Bootstrap replicates:", ws.run_bootstrap)
                st.rerun()

rows = ui.curve_rows(ws, bootstrap=use_boot)
if rows is None:
    st.stop()
with st.spinner("Checking the curves against the data..."):
    checks = ui.attempt(ws.checks) or []
doc = {"arms": arms, "results": rows, "checks": checks}

# ------------------------------------------------------------------------------------------
# The headline: every outcome and index in one table, at the top of the page
# ------------------------------------------------------------------------------------------
with headline:
    table = headline_table.headline_table([r for r in rows if r["index"] == index], checks,
                                          {o.name: o.title for o in ws.spec.outcomes})
    # a static table: every cell wraps and reads in full at 1400 px (a data grid cut the break-even column short)
    st.table(table.drop(columns=["index"]), hide_index=True)
    clusters = ui.attempt(ws.clustering)
    st.caption(f"{aps.md_escape(arms[0])} is drawn in blue, {aps.md_escape(arms[1])} in orange. "
               + aps.md_escape(charts_checks.describe_clustering(clusters)))
    for w in (clusters or {}).get("warnings", []):
        st.caption("Note: " + aps.md_escape(w))
    with st.expander("Every break-even point on every index, with the test numbers (for the record)"):
        st.dataframe(charts_checks.breakeven_summary_table(doc), hide_index=True, width="stretch")


# ------------------------------------------------------------------------------------------
# One index at a time: the effect-modification test, a chart and its sentence per outcome, the checks
# ------------------------------------------------------------------------------------------
def show_effect_modification(check: dict | None) -> None:
    """The test of whether the effect changes along the index, said before any break-even point."""
    em = (check or {}).get("effect_modification")
    if not em:
        return
    text = "**Does the effect change along the index?** " + aps.md_escape(charts_checks.describe_effect_modification(em))
    (st.warning if em.get("weak_evidence") else st.success)(text)


def show_checks(check: dict, row: dict, label: str) -> None:
    """Observed against fitted, calibration, sliding windows and, for survival, Kaplan-Meier curves and the
    break-even by horizon: each said in words, and drawn as a chart on request (charts are slow to send)."""
    outcome = ws.spec.outcome(row["outcome"])
    draw = st.toggle("Draw these checks as charts", key=ui.key(f"draw:{row['outcome']}:{row['index']}"))

    def piece(make_chart, text: str) -> None:
        if draw:
            ui.altair(make_chart(), text)
        else:
            ui.sentence(text)

    piece(lambda: charts_checks.observed_fitted_chart(check, arms, row, index_label=label),
          charts_checks.describe_observed_fitted(check, label))
    st.dataframe(charts_checks.calibration_table(check), hide_index=True, width="stretch")
    ui.sentence(charts_checks.describe_calibration(check))
    piece(lambda: charts_checks.sliding_window_chart(check, arms, row, index_label=label),
          charts_checks.describe_sliding_window(check, arms, label))
    if describe(outcome).follow_up:
        km = {"units": outcome.units, "horizon": outcome.horizon, "label": outcome.title}
        overall = ui.attempt(ws.km_curves, outcome.name)
        if overall:
            piece(lambda: charts_checks.kaplan_meier_chart(overall, arms, **km),
                  charts_checks.describe_km(overall, units=outcome.units, horizon=outcome.horizon))
        banded = ui.attempt(ws.km_curves, outcome.name, row["index"]) if draw else None
        if banded:
            chart = charts_checks.kaplan_meier_bands_chart(banded, arms, index_label=label, **km)
            ui.altair(chart)
            st.caption(aps.md_escape(ui.description(chart)))
        if check.get("horizon_curve"):
            piece(lambda: charts_checks.horizon_chart(check, arms, row, index_label=label, units=outcome.units),
                  charts_checks.describe_horizon(check, label, outcome.units))


show_points = st.checkbox("Show each patient beneath the curves" + (" (triangles: randomised, dots: chosen)"
                                                                     if ws.cohort.randomised is not None else ""),
                          value=True, key=ui.key("points"))
st.header(f"Outcomes along {titles[index]}")
marker = ui.patient_marker(ws, ws.fitset(), index)
ui.patient_caption(marker)
if ws.fitset().population is not None:
    st.caption(aps.md_escape(f"These curves rest on {ws.fitset().population.words} ({ws.fitset().population.reason})."))
for row in [r for r in doc["results"] if r["index"] == index]:
    st.subheader(ws.spec.outcome(row["outcome"]).title)
    check = charts_common.check_for(checks, row["outcome"], index)
    points = ui.attempt(observed.cohort_points, ws.fitset(), row["outcome"], index) if show_points else None
    ui.altair(charts_curves.outcome_chart(row, arms, points, patient=marker, index_label=titles[index]),
              " ".join(t for t in (charts_curves.describe_row(row, arms, titles[index], margin=ws.spec.analysis.margin),
                                   charts_checks.describe_percentiles(row, titles[index])) if t))
    for w in row.get("warnings", []) + (check or {}).get("warnings", []):  # check warnings outside the tabs
        st.caption("Note: " + aps.md_escape(w))
    tabs = st.tabs(["Difference and numbers", "Does the difference change?",
                    "Can the curves be trusted?", "Method"])
    with tabs[0]:
        ui.altair(charts_curves.difference_chart(row, arms, margin=ws.spec.analysis.margin, index_label=titles[index]))
        st.dataframe(charts_curves.curve_table(row, arms, every=max(1, len(row["curve"]) // 25)), hide_index=True,
                     width="stretch")
    with tabs[1]:
        show_effect_modification(check)
    with tabs[2]:
        if check is not None:
            show_checks(check, row, titles[index])
        else:
            st.caption("The checks are switched off in the spec ([analysis] checks = false).")
    with tabs[3]:
        for arm, text in (row.get("methods") or {}).items():
            st.markdown(f"**{aps.md_escape(arm)}:** {aps.md_escape(text)}")
        if points is not None and points.attrs.get("sample_note"):
            st.caption(aps.md_escape(points.attrs["sample_note"]))

notes = list(ws.cohort.warnings) + [w for iv in ws.index_values().values() for w in iv.warnings]
if notes:
    with st.expander(f"Warnings about the cohort and indices ({len(notes)})"):
        for w in notes:
            st.markdown("- " + aps.md_escape(w))

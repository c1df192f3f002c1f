"""Report: take the analysis away as results (JSON), the spec with the current weights, an offline report,
and each chart as a picture."""
import streamlit as st

import fulcrum_ui as ui
from explorer import CAUTIONS, patient_pdf, patient_summary
from explorer import appstate as aps
from explorer import charts_common, charts_curves, exports, results
from explorer.report import render_report

ws = ui.page_head(
    "Report",
    "Everything here reflects the current settings: the cohort, the weights, the margin and the interval level. "
    "The spec file reloads all of them on the Cohort page or with `fulcrum analyse`.")
arms = list(ws.spec.cohort.arms)

st.header("Save the settings")
st.download_button("Spec with the current weights, indices and margin (.toml)", data=aps.spec_text(ws.results_spec()),
                   file_name="fulcrum_spec.toml", mime="application/toml", on_click="ignore", icon=":material/save:")

res = ui.result(ws, bootstrap=True)
if res is None:
    st.stop()
doc = res.document

st.header("Results")
c1, c2 = st.columns(2)
with c1:
    st.download_button("Results (.json)", data=results.dumps(doc), file_name="fulcrum_results.json",
                       mime="application/json", on_click="ignore", icon=":material/data_object:")
with c2:
    st.download_button("Offline report (.html, opens with no network)", data=lambda: render_report(res),
                       file_name="fulcrum_report.html", mime="text/html", on_click="ignore",
                       icon=":material/description:")
table = aps.breakeven_table(doc)
c3, c4 = st.columns(2)
with c3:
    st.download_button("Break-even table (.csv)", data=lambda: exports.to_csv_safe(table),
                       file_name="fulcrum_break_evens.csv", mime="text/csv", on_click="ignore",
                       icon=":material/table:")
with c4:
    st.download_button("Break-even table (.xlsx)", data=lambda: exports.to_xlsx_safe(table),
                       file_name="fulcrum_break_evens.xlsx", on_click="ignore", icon=":material/table:",
                       mime="application/vnd.openxmlformats-officedocument.spreadsheetml.sheet")
st.caption("Spreadsheet cells that begin with =, +, -, @ or a control character are written as plain text, so "
           "no label from the data can run as a formula.")
st.caption(f"Data sha256 {doc['inputs']['data_sha256'][:16]}..., spec {doc['inputs']['spec_canonical_sha256'][:16]}..., "
           f"seed {doc['inputs']['seed']}, {doc['inputs']['interval']} intervals at {doc['inputs']['level']:.0%}.")

st.dataframe(charts_curves.breakeven_table(doc), hide_index=True, width="stretch")

st.header("The patient in hand")
view = ui.patient_view(ws, res.fitset)
if view is not None:
    ui.sentence(f"{ui.patient_line(ws) or ''}. " + view.place_sentence())
    st.caption("The report above is about the cohort. The patient's own summary (no identifiers; add a name on the "
               "Patient page) is made from the same fits and the weights in use.")
    q1, q2 = st.columns(2)
    with q1:
        st.download_button("Patient summary (.html)", file_name="patient_summary.html", mime="text/html",
                           data=lambda: patient_summary.summary_html(view, CAUTIONS), on_click="ignore",
                           icon=":material/print:", key=ui.key("report_patient_html"))
    with q2:
        st.download_button("Patient summary (.pdf)", file_name="patient_summary.pdf", mime="application/pdf",
                           data=lambda: patient_pdf.view_pdf(view, CAUTIONS), on_click="ignore",
                           icon=":material/picture_as_pdf:", key=ui.key("report_patient_pdf"))

st.header("Charts as pictures")
catalogue = aps.chart_catalogue(doc, {ix.name: ix.title for ix in ws.spec.indices},
                                {o.name: o.title for o in ws.spec.outcomes})
if not catalogue:
    st.stop()
pick = st.selectbox("Chart", list(range(len(catalogue))), format_func=lambda i: catalogue[i]["label"],
                    key=ui.key("chart_pick"))
item = catalogue[pick]
build = charts_curves.composite_chart if item["composite"] else charts_curves.outcome_chart
marker = None
if st.checkbox("Mark the patient in hand on the picture", value=True, key=ui.key("report_marker")):
    marker = ui.patient_marker(ws, res.fitset, item["row"]["index"])
chart = build(item["row"], arms, patient=marker, index_label=item["index_label"])
ui.altair(chart, charts_curves.describe_row(item["row"], arms, item["index_label"], margin=ws.spec.analysis.margin))
p1, p2 = st.columns(2)
with p1:
    st.download_button("PNG picture", data=lambda: charts_common.chart_to_png(chart), file_name=item["file"] + ".png",
                       mime="image/png", on_click="ignore", key=ui.key(f"png:{pick}"), icon=":material/image:")
with p2:
    st.download_button("SVG drawing", data=lambda: charts_common.chart_to_svg(chart), file_name=item["file"] + ".svg",
                       mime="image/svg+xml", on_click="ignore", key=ui.key(f"svg:{pick}"), icon=":material/draw:")

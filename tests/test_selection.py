"""Randomised versus chosen patients: selection effects, break-even shifts, weighting, balance and E-values.

Outside references: the E-value formula and worked example of VanderWeele & Ding (Ann Intern Med 2017),
Austin's standardised mean difference (Stat Med 2009; weighted form Austin & Stuart, Stat Med 2015)
computed by hand, statsmodels Logit / OLS for the propensity model, the likelihood-ratio test and the
delta-method mean, and simulations whose truth is known in closed form (invented data, only here).
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from scipy.special import expit

from explorer import fitting as ft
from explorer import results as res
from explorer import selection as sel
from explorer import weighting
from explorer.cohort import load_cohort
from explorer.errors import FulcrumError
from explorer.spec import parse_spec

ARMS = ("laparotomy", "non-operative")


# ------------------------------------------------------------------------------------------
# Synthetic cohorts with a closed-form truth
# ------------------------------------------------------------------------------------------
def _fitset(frame: pd.DataFrame, outcome: dict, *, covariates: tuple[str, ...] = ("c",), **analysis) -> ft.FitSet:
    spec = parse_spec({
        "cohort": {"path": "cohort.csv", "arm": "arm", "arms": list(ARMS), "allocation": "allocation"},
        "outcomes": [{"name": "y", **outcome}],
        "indices": [{"name": "x", "column": "x"}],
        "analysis": {"seed": 3, "population": "all", **analysis},  # the all-patient pairs these tests examine
        "selection": {"covariates": list(covariates)},
    })
    cohort = load_cohort(spec, data=frame.to_csv(index=False).encode(), filename="cohort.csv")
    return ft.fit_all(spec, cohort)


def _allocation(rng: np.random.Generator, n: int, share_randomised: float, choice_logit: np.ndarray | None = None):
    """Randomised patients get a fair coin; chosen patients choose the first arm with P = expit(choice_logit)."""
    randomised = rng.random(n) < share_randomised
    p_first = np.full(n, 0.5) if choice_logit is None else expit(choice_logit)
    first = np.where(randomised, rng.random(n) < 0.5, rng.random(n) < p_first)
    return randomised, first


def _frame(x, c, randomised, first, **cols) -> pd.DataFrame:
    return pd.DataFrame({"x": x, "c": c, "allocation": np.where(randomised, "randomised", "chosen"),
                         "arm": np.where(first, ARMS[0], ARMS[1]), **cols})


# Continuous: y = a + b x + kappa c + e, c ~ Bernoulli(1/2) measured, e ~ N(0, 1). Chosen patients pick the first
# arm with logit -1.5 + 3 c, so among chosen patients of an arm E[c] differs from 1/2 and the selection effect is
# the constant kappa (P(c = 1 | chosen, arm) - 1/2), the same at every index value. Truth break-even: 5.
CONT = {ARMS[0]: (0.0, 1.0), ARMS[1]: (4.0, 0.2)}
CONT_BE = 5.0
THETA = (-1.5, 3.0)


def _continuous(seed: int, n: int, kappa: float, share_randomised: float = 0.4):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, n)
    c = (rng.random(n) < 0.5).astype(float)
    randomised, first = _allocation(rng, n, share_randomised, THETA[0] + THETA[1] * c)
    a = np.where(first, CONT[ARMS[0]][0], CONT[ARMS[1]][0])
    b = np.where(first, CONT[ARMS[0]][1], CONT[ARMS[1]][1])
    y = a + b * x + kappa * (c - 0.5) + rng.normal(0, 1, n)
    return _frame(x, c, randomised, first, y=y)


def _continuous_truth(kappa: float, share_randomised: float = 0.4) -> dict:
    """Closed form: per-arm selection effect, and the all-patient break-even (the per-arm all-patient mean is
    linear in x because the choice ignores x, so the linear fit is correctly specified)."""
    p1 = expit(THETA[0] + THETA[1])  # P(first | c = 1, chosen)
    p0 = expit(THETA[0])  # P(first | c = 0, chosen)
    c_first = p1 / (p1 + p0)  # P(c = 1 | first, chosen), c ~ Bernoulli(1/2)
    c_second = (1 - p1) / ((1 - p1) + (1 - p0))
    delta = {ARMS[0]: kappa * (c_first - 0.5), ARMS[1]: kappa * (c_second - 0.5)}
    chosen_first = (1 - share_randomised) * (p1 + p0) / 2
    chosen_second = (1 - share_randomised) * (1 - (p1 + p0) / 2)
    share = {ARMS[0]: chosen_first / (chosen_first + share_randomised / 2),
             ARMS[1]: chosen_second / (chosen_second + share_randomised / 2)}
    (a1, b1), (a2, b2) = CONT[ARMS[0]], CONT[ARMS[1]]
    all_be = (a2 + share[ARMS[1]] * delta[ARMS[1]] - a1 - share[ARMS[0]] * delta[ARMS[0]]) / (b1 - b2)
    return {"delta": delta, "all_be": all_be, "shift": all_be - CONT_BE}


# Binary: logit P(y = 1) = a + b (x - 5) + delta_arm * chosen; survival: log hazard = a + b (x - 5) + delta_arm *
# chosen, exponential times, censored at time 2, measure S(1). delta is unmeasured (c drives only the choice).
# In both, the arms' linear predictors are equal at x = 5, the true break-even.
BIN = {ARMS[0]: (0.0, -0.5), ARMS[1]: (0.0, -0.1)}
SURV = {ARMS[0]: (-1.0, 0.5), ARMS[1]: (-1.0, 0.2)}
SHIFT = {ARMS[0]: 0.9, ARMS[1]: -0.6}


def _linear_predictor(params: dict, x: np.ndarray, first: np.ndarray, chosen: np.ndarray, delta: dict) -> np.ndarray:
    a = np.where(first, params[ARMS[0]][0], params[ARMS[1]][0])
    b = np.where(first, params[ARMS[0]][1], params[ARMS[1]][1])
    d = np.where(first, delta[ARMS[0]], delta[ARMS[1]])
    return a + b * (x - 5.0) + d * chosen


def _binary(seed: int, n: int, delta: dict, share_randomised: float = 0.4):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, n)
    c = rng.normal(0, 1, n)
    randomised, first = _allocation(rng, n, share_randomised, 1.0 * c)
    eta = _linear_predictor(BIN, x, first, ~randomised, delta)
    return _frame(x, c, randomised, first, y=(rng.random(n) < expit(eta)).astype(int))


def _survival(seed: int, n: int, delta: dict, share_randomised: float = 0.4):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, n)
    c = rng.normal(0, 1, n)
    randomised, first = _allocation(rng, n, share_randomised, 1.0 * c)
    rate = np.exp(_linear_predictor(SURV, x, first, ~randomised, delta))
    t = rng.exponential(1.0 / rate)
    return _frame(x, c, randomised, first, time=np.minimum(t, 2.0), event=(t <= 2.0).astype(int))


def _true_measure(kind: str, arm: str, x: np.ndarray, chosen: bool, delta: dict) -> np.ndarray:
    params = BIN if kind == "binary" else SURV
    a, b = params[arm]
    eta = a + b * (x - 5.0) + (delta[arm] if chosen else 0.0)
    return expit(eta) if kind == "binary" else np.exp(-np.exp(eta) * 1.0)


OUTCOMES = {"continuous": {"kind": "continuous", "column": "y"},
            "binary": {"kind": "binary", "column": "y"},
            "survival": {"kind": "survival", "time": "time", "event": "event", "horizon": 1.0}}


def _make(kind: str, seed: int, n: int, selection: bool) -> pd.DataFrame:
    if kind == "continuous":
        return _continuous(seed, n, kappa=2.0 if selection else 0.0)
    delta = SHIFT if selection else {a: 0.0 for a in ARMS}
    return (_binary if kind == "binary" else _survival)(seed, n, delta)


def _true_effect(kind: str, arm: str, x_randomised: np.ndarray, selection: bool) -> float:
    """Truth of the overall selection effect: averaged over the arm's randomised patients' index values."""
    if not selection:
        return 0.0
    if kind == "continuous":
        return _continuous_truth(2.0)["delta"][arm]
    return float(np.mean(_true_measure(kind, arm, x_randomised, True, SHIFT)
                         - _true_measure(kind, arm, x_randomised, False, SHIFT)))


# ------------------------------------------------------------------------------------------
# E-values
# ------------------------------------------------------------------------------------------
def test_e_value_published_worked_example():
    # VanderWeele & Ding, Ann Intern Med 2017 (memory): RR 3.9 (95% CI 1.8 to 8.7) for a child not breastfed;
    # E-value 7.26 for the estimate and 3.0 for the lower confidence limit.
    ev = sel.e_value(3.9, 1.8, 8.7)
    assert ev.point == pytest.approx(7.26, abs=0.005)
    assert ev.ci == pytest.approx(3.0, abs=1e-12)


@pytest.mark.parametrize("rr,lo,hi", [(2.0, 1.3, 3.1), (0.4, 0.25, 0.7), (0.8, 0.5, 1.2), (1.5, 0.9, 2.4)])
def test_e_value_formula_and_limit_closest_to_one(rr, lo, hi):
    # VanderWeele & Ding 2017: E = RR* + sqrt(RR* (RR* - 1)) with RR* = RR or 1/RR; for the confidence limit
    # closest to 1, the same, or 1 when the interval includes 1.
    def formula(r):
        r = 1 / r if r < 1 else r
        return r + math.sqrt(r * (r - 1))

    ev = sel.e_value(rr, lo, hi)
    assert ev.point == pytest.approx(formula(rr), rel=1e-12)
    near = lo if rr >= 1 else hi
    expected_ci = 1.0 if (lo <= 1 <= hi) else formula(near)
    assert ev.ci == pytest.approx(expected_ci, rel=1e-12)
    assert sel.e_value(rr).ci is None


def test_e_value_conversions():
    # VanderWeele & Ding 2017 and its appendix: common outcome OR -> sqrt(OR); common outcome HR ->
    # (1 - 0.5^sqrt(HR)) / (1 - 0.5^sqrt(1/HR)); standardised difference d -> exp(0.91 d); rare outcome: as is.
    hr = 1.8
    rr_hr = (1 - 0.5 ** math.sqrt(hr)) / (1 - 0.5 ** math.sqrt(1 / hr))
    assert sel.e_value(hr, kind="hr_common").rr == pytest.approx(rr_hr, rel=1e-12)
    assert sel.e_value(hr, kind="hr_rare").point == pytest.approx(sel.e_value(hr).point, rel=1e-12)
    assert sel.e_value(2.25, kind="or_common").rr == pytest.approx(1.5, rel=1e-12)
    ev = sel.e_value(0.5, 0.2, 0.8, kind="smd")
    assert ev.rr == pytest.approx(math.exp(0.455), rel=1e-12)
    assert ev.ci == pytest.approx(sel.e_value(math.exp(0.91 * 0.2)).point, rel=1e-12)
    assert sel.e_value(1.0).point == 1.0
    with pytest.raises(FulcrumError):
        sel.e_value(-0.3)
    with pytest.raises(FulcrumError):
        sel.e_value(1.2, kind="hazard")


# ------------------------------------------------------------------------------------------
# Balance and the propensity model
# ------------------------------------------------------------------------------------------
def test_smd_against_hand_computation():
    # Austin 2009: d = (mean1 - mean0) / sqrt((s1^2 + s0^2) / 2), sample variances; 0/1 covariates use p(1 - p).
    a, b = np.array([1.0, 2.0, 4.0, 7.0]), np.array([2.0, 3.0, 3.0])
    # means 3.5 and 8/3; variances (6.25 + 2.25 + 0.25 + 12.25) / 3 = 7 and (4/9 + 1/9 + 1/9) / 2 = 1/3
    assert weighting.smd(a, b) == pytest.approx((3.5 - 8 / 3) / math.sqrt((7 + 1 / 3) / 2), rel=1e-12)
    # 0/1: p = 3/4 and 1/4
    assert weighting.smd(np.array([1, 1, 1, 0.0]), np.array([0, 0, 1, 0.0])) == pytest.approx(
        0.5 / math.sqrt((0.1875 + 0.1875) / 2), rel=1e-12)
    # weighted (Austin & Stuart 2015): mean sum(wx)/sum(w), variance sum(w)/(sum(w)^2 - sum(w^2)) sum w (x - m)^2
    w = np.array([1.0, 2.0, 1.0, 0.5])
    m = (1 + 4 + 4 + 3.5) / 4.5  # 12.5 / 4.5
    var = 4.5 / (4.5 ** 2 - (1 + 4 + 1 + 0.25)) * (1 * (1 - m) ** 2 + 2 * (2 - m) ** 2 + (4 - m) ** 2
                                                    + 0.5 * (7 - m) ** 2)
    assert weighting.smd(a, b, w, np.ones(3)) == pytest.approx((m - 8 / 3) / math.sqrt((var + 1 / 3) / 2), rel=1e-12)


def test_propensity_matches_statsmodels_logit_and_weights_follow_the_formula():
    # Reference: statsmodels Logit (unpenalised maximum likelihood), as scikit-learn's with penalty=None must be.
    rng = np.random.default_rng(5)
    n = 800
    frame = pd.DataFrame({"age": rng.normal(80, 7, n), "cfs": rng.integers(1, 10, n).astype(float),
                          "sex": rng.choice(["F", "M"], n), "lactate": rng.lognormal(0.6, 0.4, n)})
    lp = -0.3 + 0.04 * (frame.age - 80) - 0.35 * (frame.cfs - 5) + 0.3 * (frame.sex == "M")
    first = rng.random(n) < expit(lp.to_numpy())
    covs = ("age", "cfs", "sex", "lactate")
    wt = sel.propensity_weights(frame, covs, first, truncate=(0.0, 100.0))
    X = sel.covariate_design(frame, covs)
    assert list(X.columns) == ["age", "cfs", "sex = M", "lactate"]
    ref = sm.Logit(first.astype(float), sm.add_constant(X)).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
    ours = np.r_[wt.intercept, wt.coef]
    assert np.allclose(ours, ref.params.to_numpy(), rtol=1e-5, atol=1e-5)
    e = ref.predict(sm.add_constant(X)).to_numpy()
    share = first.mean()
    stabilised = np.where(first, share / e, (1 - share) / (1 - e))
    assert np.allclose(wt.weights, stabilised, rtol=1e-5)
    assert wt.n_truncated == 0
    truncated = sel.propensity_weights(frame, covs, first, truncate=(5.0, 95.0))
    lo, hi = np.percentile(stabilised, [5, 95])
    assert np.allclose(truncated.weights, np.clip(stabilised, lo, hi), rtol=1e-5)
    assert truncated.n_truncated == int(((stabilised < lo) | (stabilised > hi)).sum())
    cfs = next(b for b in wt.balance if b["covariate"] == "cfs")
    assert cfs["flag_before"] and not cfs["flag_after"]
    assert "only the measured covariates" in wt.to_json(ARMS)["note"]


# ------------------------------------------------------------------------------------------
# Pieces checked against statsmodels
# ------------------------------------------------------------------------------------------
def test_varies_with_index_is_the_likelihood_ratio_of_statsmodels_logit_fits():
    # Reference: statsmodels Logit of y ~ x + chosen against y ~ x + chosen + chosen:x in one arm.
    fs = _fitset(_binary(21, 1200, {ARMS[0]: 0.6, ARMS[1]: 0.0}), OUTCOMES["binary"])
    pf = fs.pair("y", "x")
    rand = fs.cohort.randomised.to_numpy(bool)
    for arm in ARMS:
        chosen = (~rand[pf.rows[arm]]).astype(float)
        d = pf.data[arm]
        stat, df, p = sel.varies_with_index(pf, arm, chosen.astype(bool))
        X1 = np.column_stack([np.ones(len(d)), d.x, chosen])
        X2 = np.column_stack([X1, chosen * d.x])
        ll1 = sm.Logit(d.y, X1).fit(disp=0, tol=1e-12).llf
        ll2 = sm.Logit(d.y, X2).fit(disp=0, tol=1e-12).llf
        assert df == 1
        assert stat == pytest.approx(2 * (ll2 - ll1), abs=1e-5, rel=1e-5)
        assert p == pytest.approx(stats.chi2.sf(2 * (ll2 - ll1), 1), abs=1e-5)


def test_curve_average_of_a_line_is_statsmodels_prediction_at_the_mean():
    # The mean of a + b x_i over patients is the prediction at mean(x); its standard error is statsmodels OLS
    # get_prediction's se_mean there.
    fs = _fitset(_continuous(8, 600, kappa=0.0), OUTCOMES["continuous"])
    d = fs.pair("y", "x").data[ARMS[0]]
    fit = fs.pair("y", "x").fits[ARMS[0]]
    xs = d.x[:250]
    mean, var, how = sel.curve_average(fit, xs)
    ols = sm.OLS(d.y, sm.add_constant(d.x)).fit()
    pred = ols.get_prediction(np.array([[1.0, xs.mean()]]))
    assert how == "delta"
    assert mean == pytest.approx(float(pred.predicted_mean[0]), abs=1e-8)
    assert math.sqrt(var) == pytest.approx(float(pred.se_mean[0]), rel=1e-4)


# ------------------------------------------------------------------------------------------
# Simulations: known selection effect and none
# ------------------------------------------------------------------------------------------
def _effects(fs: ft.FitSet) -> tuple[sel.SelectionPair, dict[str, sel.SelectionEffect]]:
    sp = sel.fit_selection(fs, "y", "x")
    return sp, {arm: sel.selection_effect(sp, arm, fs.spec) for arm in ARMS}


@pytest.mark.parametrize("kind,reps,n", [("continuous", 30, 600), ("binary", 30, 800), ("survival", 20, 700)])
def test_repeated_simulation_coverage_and_no_false_flags(kind, reps, n):
    # Invented data with closed-form truth. Under selection, the interval of the overall selection effect covers
    # the truth; without selection, neither the Wald test nor the likelihood-ratio test flags at the 5% level
    # more often than a binomial(tests, 0.05) count exceeds with probability 0.001.
    misses = flags_wald = flags_lr = tests = 0
    for r in range(reps):
        for selection in (True, False):
            fs = _fitset(_make(kind, 1000 + r, n, selection), OUTCOMES[kind], covariates=())
            sp, eff = _effects(fs)
            for arm in ARMS:
                e = eff[arm]
                truth = _true_effect(kind, arm, sp.randomised.data[arm].x, selection)
                if selection:
                    misses += not (e.overall_ci[0] <= truth <= e.overall_ci[1])
                else:
                    tests += 1
                    flags_wald += e.p_value < 0.05
                    flags_lr += sp.varies[arm][2] < 0.05
    intervals = 2 * reps
    assert misses <= intervals - stats.binom.ppf(0.001, intervals, 0.95), (misses, intervals)
    bound = stats.binom.ppf(0.999, tests, 0.05)
    assert flags_wald <= bound and flags_lr <= bound, (flags_wald, flags_lr, tests)


@pytest.mark.parametrize("kind", ["continuous", "binary", "survival"])
def test_randomised_break_even_recovers_truth_and_all_patients_are_shifted(kind):
    # Invented data, fixed seed, large enough that the all-patient shift is many standard errors: the randomised
    # interval contains the true break-even (5) and the all-patient interval does not.
    fs = _fitset(_make(kind, 77, 4000, True), OUTCOMES[kind])
    out = sel.analyse_selection(fs, shift_interval="delta")
    row = out.rows[0]
    (rb,), (ab,) = row["randomised_break_even"], row["all_break_even"]
    assert rb["ci"][0] <= CONT_BE <= rb["ci"][1], rb
    assert not ab["ci"][0] <= CONT_BE <= ab["ci"][1], ab
    assert row["shift"] == pytest.approx(ab["x"] - rb["x"], abs=2e-6)
    assert row["shift_ci"][0] is not None and not row["shift_ci"][0] <= 0 <= row["shift_ci"][1]
    assert all(r["p_value"] < 0.05 for r in out.rows)
    sp = out.pairs[("y", "x")]
    for arm in ARMS:
        eff = out.effects[("y", "x", arm)]
        if kind == "continuous":
            truth = np.full(len(eff.grid), _continuous_truth(2.0)["delta"][arm])
        else:
            truth = _true_measure(kind, arm, eff.grid, True, SHIFT) - _true_measure(kind, arm, eff.grid, False, SHIFT)
        inside = (eff.lower <= truth) & (truth <= eff.upper)
        assert inside.mean() > 0.8, (arm, inside.mean())  # pointwise 95% bands along a single smooth curve
        assert not eff.sparse.any()
    assert sp.n[ARMS[0]]["randomised"] + sp.n[ARMS[1]]["randomised"] == int(fs.cohort.randomised.sum())


def test_weighting_removes_measured_selection_only():
    # Continuous design: the selection acts through the measured c, so weighting on c recovers the true
    # break-even (5) from chosen patients alone and balances c. Binary design: the selection is an unmeasured
    # shift, so the weighted break-even stays away from 5 although c is balanced.
    fs = _fitset(_continuous(31, 4000, kappa=2.0), OUTCOMES["continuous"])
    row = sel.analyse_selection(fs, shift_interval="delta").rows[0]
    (adj,) = row["adjusted_break_even"]
    assert adj["ci"][0] <= CONT_BE <= adj["ci"][1], adj
    (c,) = row["balance"]
    assert c["flag_before"] and abs(c["smd_after"]) < 1e-6
    assert row["adjusted"]["target"] == "chosen patients"
    assert row["e_value"]["kind"] == "smd" and row["e_value"]["e_value"] >= 1.0

    fs = _fitset(_binary(32, 6000, SHIFT), OUTCOMES["binary"])
    row = sel.analyse_selection(fs, shift_interval="delta").rows[0]
    (adj,) = row["adjusted_break_even"]
    assert not adj["ci"][0] <= CONT_BE <= adj["ci"][1], adj
    assert not row["balance"][0]["flag_after"]
    assert "unmeasured" in row["adjusted"]["note"]


def test_shift_interval_delta_and_bootstrap_cover_the_closed_form_shift():
    # Continuous design: the all-patient break-even's limit is known in closed form (see _continuous_truth).
    truth = _continuous_truth(2.0)["shift"]
    fs = _fitset(_continuous(41, 3000, kappa=2.0), OUTCOMES["continuous"], replicates=60)
    delta = sel.analyse_selection(fs, shift_interval="delta").rows[0]
    boot = sel.analyse_selection(fs, shift_interval="bootstrap").rows[0]
    assert delta["shift_interval"] == "delta" and boot["shift_interval"] == "bootstrap-percentile"
    assert boot["shift_replicates"] == 60
    for row in (delta, boot):
        assert row["shift_ci"][0] <= truth <= row["shift_ci"][1], row["shift_ci"]
    width = lambda r: r["shift_ci"][1] - r["shift_ci"][0]  # noqa: E731
    assert 0.6 < width(delta) / width(boot) < 1.6


def test_sparse_randomised_stretch_is_marked_and_coverage_counts():
    # Randomised patients only below x = 6: bands above hold none, so the curve is marked there and a warning says so.
    frame = _continuous(51, 1500, kappa=1.0)
    frame.loc[(frame.x > 6) & (frame.allocation == "randomised"), "allocation"] = "chosen"
    fs = _fitset(frame, OUTCOMES["continuous"])
    out = sel.analyse_selection(fs, replicates=0)
    row = out.rows[0]
    assert row["shift_interval"] == "delta"
    marked = np.array([p["randomised_sparse"] for p in row["curve"]])
    xs = np.array([p["x"] for p in row["curve"]])
    assert marked[xs > 6.5].all() and not marked[xs < 5.5].any()
    assert any("fewer than 10 per band" in w for w in row["warnings"])
    cov = out.coverage["x"]
    rand = frame.allocation == "randomised"
    for arm in ARMS:
        for alloc, mask in (("randomised", rand), ("chosen", ~rand)):
            assert sum(w["n"][arm][alloc] for w in cov) == int(((frame.arm == arm) & mask).sum())
    assert [w["sparse"] for w in cov] == [w["n"][ARMS[0]]["randomised"] < 10 or w["n"][ARMS[1]]["randomised"] < 10
                                          for w in cov]


def test_randomised_coverage_bands_on_a_discrete_index():
    # Hand count: a 1-9 index with 40 patients per level; deciles merge into one band per level (the last band
    # holds 8 and 9), counted by pandas groupby as the reference.
    rng = np.random.default_rng(2)
    x = np.repeat(np.arange(1, 10), 40).astype(float)
    n = len(x)
    randomised, first = _allocation(rng, n, 0.3)
    frame = _frame(x, rng.normal(size=n), randomised, first, y=x + rng.normal(size=n))
    fs = _fitset(frame, OUTCOMES["continuous"])
    cov = sel.randomised_coverage(fs, "x")
    edges = [w["from"] for w in cov] + [cov[-1]["to"]]
    band = np.clip(np.searchsorted(edges, x, side="right") - 1, 0, len(cov) - 1)
    ref = frame.assign(band=band).groupby(["band", "arm", "allocation"]).size()
    for k, w in enumerate(cov):
        for arm in ARMS:
            for alloc in ("randomised", "chosen"):
                assert w["n"][arm][alloc] == int(ref.get((k, arm, alloc), 0))
    assert edges[0] == 1.0 and edges[-1] == 9.0


def test_rows_follow_the_results_schema_and_say_what_weighting_cannot_do():
    fs = _fitset(_survival(61, 1500, SHIFT), OUTCOMES["survival"], replicates=20)
    rows = sel.selection_rows(fs, shift_interval="bootstrap")
    doc = res.document(fs.spec, data_sha256="0" * 64, spec_bytes=b"x", rows=[], composite=[], selection=rows,
                       warnings=[])
    res.validate(doc)
    res.dumps(doc)
    assert [r["arm"] for r in rows] == list(ARMS)
    arm = fs.cohort.frame["arm"]
    for r in rows:
        assert r["n_randomised"] + r["n_chosen"] == int((arm == r["arm"]).sum())
        assert r["shift_interval"] == "bootstrap-percentile" and r["shift_replicates"] == 20
        assert r["e_value"]["kind"] == "rr"
        assert "unmeasured" in r["adjusted"]["note"]


def test_no_allocation_column_gives_no_rows():
    frame = _continuous(71, 300, kappa=0.0)
    spec = parse_spec({"cohort": {"path": "c.csv", "arm": "arm", "arms": list(ARMS)},
                       "outcomes": [{"name": "y", **OUTCOMES["continuous"]}],
                       "indices": [{"name": "x", "column": "x"}]})
    cohort = load_cohort(spec, data=frame.to_csv(index=False).encode(), filename="c.csv")
    fs = ft.fit_all(spec, cohort)
    assert sel.selection_rows(fs) == []
    assert sel.randomised_coverage(fs, "x") == []

"""Value weights and composites: presets against published numbers, composite break-even points against
closed-form truth on simulated proportional-odds cohorts, delta variances against simulation, threshold
flips and acceptability probabilities against brute force.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize
from scipy.special import expit

import explorer.models as models
from explorer import fitting as ft
from explorer import presets
from explorer import values as vl
from explorer.errors import FulcrumError
from explorer.models.base import Basis, OutcomeData
from explorer.presets import default_weights
from explorer.spec import parse_spec

LEVELS = ("independent", "home_with_help", "care_home", "bedbound", "dead")
ARMS = ("laparotomy", "non-operative")
# Invented simulation truth: per arm P(Y <= k | x) = expit(c_k - b x), levels best first.
# The cumulative probabilities cross at x = 0.45, 0.9, 1.35 and 2.0 (cut gap / slope gap), so the alive-vs-dead
# break-even is 2.0 and every composite with decreasing weights breaks even between 0.45 and 2.0.
SURVIVAL_BREAK_EVEN = 2.0
CUTS = {"laparotomy": np.array([-0.5, 0.6, 1.6, 2.6]) + 2.4 * np.array([0.45, 0.9, 1.35, SURVIVAL_BREAK_EVEN]),
        "non-operative": np.array([-0.5, 0.6, 1.6, 2.6])}
SLOPE = {"laparotomy": 3.4, "non-operative": 1.0}
# Invented survival truth for the survival x function composite: hazard lam * exp(beta x), horizon 2.
HAZ = {"laparotomy": (0.04, 1.1), "non-operative": (0.12, 0.4)}
HORIZON = 2.0
X_MAX = 3.0


def true_dist(arm: str, x) -> np.ndarray:
    x = np.atleast_1d(np.asarray(x, float))
    cum = expit(CUTS[arm][None, :] - SLOPE[arm] * x[:, None])
    cum = np.column_stack([cum, np.ones(len(x))])
    return np.diff(np.column_stack([np.zeros(len(x)), cum]), axis=1)


def true_survival(arm: str, x) -> np.ndarray:
    lam, beta = HAZ[arm]
    return np.exp(-lam * HORIZON * np.exp(beta * np.asarray(x, float)))


def true_composite(arm: str, x, w: np.ndarray, kind: str = "ordinal") -> np.ndarray:
    P = true_dist(arm, x)
    if kind == "ordinal":
        return P @ w
    S = true_survival(arm, x)
    living = P[:, :-1] / P[:, :-1].sum(axis=1, keepdims=True)
    return S * (living @ w[:-1]) + (1 - S) * w[-1]


def true_break_even(w: np.ndarray, kind: str = "ordinal") -> float:
    f = lambda x: float(true_composite(ARMS[0], x, w, kind)[0] - true_composite(ARMS[1], x, w, kind)[0])  # noqa
    return optimize.brentq(f, 0.01, X_MAX - 0.01, xtol=1e-12)


def simulate(n_per_arm: int, seed: int) -> dict[str, OutcomeData]:
    rng = np.random.default_rng(seed)
    out = {}
    for arm in ARMS:
        x = rng.uniform(0, X_MAX, n_per_arm)
        cum = np.cumsum(true_dist(arm, x), axis=1)
        y = (rng.random(n_per_arm)[:, None] > cum).sum(axis=1).astype(float)
        lam, beta = HAZ[arm]
        t = rng.exponential(1.0 / (lam * np.exp(beta * x)))
        event = (t <= 3.0).astype(float)
        out[arm] = OutcomeData(x=x, y=np.minimum(y, len(LEVELS) - 1), time=np.minimum(t, 3.0), event=event)
    return out


SPEC = {
    "cohort": {"path": "unused.csv", "arm": "arm", "arms": list(ARMS)},
    "outcomes": [
        {"name": "function", "kind": "ordinal", "column": "function", "levels": list(LEVELS)},
        {"name": "alive", "kind": "survival", "time": "time", "event": "dead", "horizon": HORIZON,
         "measure": "survival"},
    ],
    "indices": [{"name": "frailty", "column": "frailty"}],
    "values": {"outcome": "function", "survival_outcome": "alive", "spread": 0.1, "draws": 2000},
    "analysis": {"grid": 161},
}


def fitset(data: dict[str, OutcomeData], spec_dict: dict = SPEC) -> ft.FitSet:
    """Fit both outcomes per arm with explorer.models.fit_model and assemble a FitSet by hand."""
    spec = parse_spec(spec_dict)
    basis = Basis("linear")
    pairs = {}
    for o in spec.outcomes:
        fits, ds = {}, {}
        for arm in ARMS:
            d = data[arm]
            ds[arm] = OutcomeData(x=d.x, y=d.y) if o.kind == "ordinal" else OutcomeData(x=d.x, time=d.time,
                                                                                         event=d.event)
            fits[arm] = models.fit_model(o, arm, basis, ds[arm])
        xs = np.concatenate([d.x for d in ds.values()])
        rows = {arm: np.arange(len(ds[arm])) for arm in ARMS}
        pairs[(o.name, "frailty")] = ft.PairFit(o, "frailty", basis, fits, ds, rows, (float(xs.min()),
                                                                                      float(xs.max())))
    return ft.FitSet(spec, None, {}, pairs, n_fits=2 * len(pairs))


@pytest.fixture(scope="module")
def big() -> ft.FitSet:
    return fitset(simulate(2000, seed=11))


# ------------------------------------------------------------------------------------------
# Presets
# ------------------------------------------------------------------------------------------
MRS = tuple(str(i) for i in range(7))


def test_utility_weighted_mrs_matches_chaisinanunkul_2015():
    # Chaisinanunkul et al., Stroke 2015;46:2238: utility-weighted mRS 0-6 (memory, confirmed against the abstract).
    w = presets.preset_weights("uw_mrs", MRS)
    assert [w[k] for k in MRS] == [1.0, 0.91, 0.76, 0.65, 0.33, 0.0, 0.0]
    assert "Chaisinanunkul" in presets.PRESETS["uw_mrs"].source


def test_hong_saver_utilities_are_one_minus_published_disability_weights():
    # Hong & Saver, Stroke 2009: disability weights 0, 0.046, 0.212, 0.331, 0.652, 0.944, 1.0 for mRS 0-6
    # (memory, confirmed against the abstract); utility = 1 - weight.
    w = presets.preset_weights("hong_saver", [f"mRS {i}" for i in range(7)])
    published = [0, 0.046, 0.212, 0.331, 0.652, 0.944, 1.0]
    assert list(w.values()) == pytest.approx([1 - d for d in published], abs=1e-12)
    assert "Hong & Saver" in presets.PRESETS["hong_saver"].source


def test_wang_pooled_utilities_include_a_state_worse_than_death():
    # Wang et al., Stroke 2020;51:2411: pooled utilities 0.96 ... -0.18, 0 for mRS 0-6 (confirmed against abstract).
    w = presets.preset_weights("wang_pooled", MRS)
    assert list(w.values()) == [0.96, 0.83, 0.72, 0.54, 0.22, -0.18, 0.0]


def test_general_presets_and_applicability():
    # common practice: equal steps from 1 to 0; survival only = alive vs dead; acceptable only = 0/1 indicator.
    assert presets.preset_weights("equal_steps", LEVELS) == default_weights(LEVELS) == \
        {"independent": 1.0, "home_with_help": 0.75, "care_home": 0.5, "bedbound": 0.25, "dead": 0.0}
    assert list(presets.preset_weights("survival_only", LEVELS).values()) == [1, 1, 1, 1, 0]
    assert list(presets.preset_weights("acceptable_only", LEVELS, ["independent", "home_with_help"]).values()) == \
        [1, 1, 0, 0, 0]
    assert [p.name for p in presets.available_presets(LEVELS)] == ["equal_steps", "survival_only", "acceptable_only"]
    assert {"uw_mrs", "hong_saver"} <= {p.name for p in presets.available_presets(MRS)}
    with pytest.raises(FulcrumError, match="does not apply"):
        presets.preset_weights("uw_mrs", LEVELS)
    with pytest.raises(FulcrumError, match="accept"):
        presets.preset_weights("acceptable_only", LEVELS)


def test_weights_outside_minus_one_to_one_are_refused():
    with pytest.raises(FulcrumError, match="outside -1 to 1") as e:
        vl.check_weights({**default_weights(LEVELS), "bedbound": -1.5}, LEVELS)
    assert e.value.key == "values.weights.bedbound"
    with pytest.raises(FulcrumError, match="no weight"):
        vl.check_weights({"independent": 1.0}, LEVELS)
    with pytest.raises(FulcrumError, match="not a level"):
        vl.check_weights({**default_weights(LEVELS), "walking": 0.3}, LEVELS)


def test_conditional_label_marks_survivor_only_outcomes():
    spec = parse_spec({**SPEC, "outcomes": SPEC["outcomes"] + [
        {"name": "qol", "kind": "continuous", "column": "qol", "among_survivors": True, "label": "Quality of life"}]})
    assert "conditional on being alive" in vl.conditional_label(spec.outcome("qol"))
    assert vl.conditional_label(spec.outcome("alive")) == "alive"
    assert "truncation by death" in vl.truncation_note(spec.outcome("qol"))
    assert vl.truncation_note(spec.outcome("alive")) is None


# ------------------------------------------------------------------------------------------
# Composite break-even against closed-form truth
# ------------------------------------------------------------------------------------------
WEIGHT_SETS = {
    "equal": np.array([1.0, 0.75, 0.5, 0.25, 0.0]),
    "steep": np.array([1.0, 0.8, 0.45, 0.1, 0.0]),
    "acceptable": np.array([1.0, 1.0, 0.0, 0.0, 0.0]),
    "worse_than_death": np.array([1.0, 0.7, 0.3, -0.2, 0.0]),
}


@pytest.mark.parametrize("name", list(WEIGHT_SETS))
def test_ordinal_composite_break_even_within_015_of_closed_form_truth(big, name):
    # Truth: brentq (scipy) on the true per-arm proportional-odds composites E[w](x) (closed form above).
    w = WEIGHT_SETS[name]
    (s, info), = vl.composite_summaries(big, w, kinds=["ordinal"]).values()
    assert len(s.break_even) == 1
    b = s.break_even[0]
    assert abs(b.x - true_break_even(w)) < 0.15
    assert b.interval == "test-inversion" and b.ci[0] < b.x < b.ci[1]
    # test inversion: the interval's ends are where the pointwise band of the difference reaches zero (common
    # practice: a confidence set for a root is the set where the test of a zero difference does not reject)
    for end in b.ci:
        touching = min(abs(np.interp(end, s.grid, s.lower)), abs(np.interp(end, s.grid, s.upper)))
        assert touching < 0.01 * np.ptp(s.difference), (end, touching)
    assert b.favours_below == ARMS[0]
    assert info.weights == pytest.approx(dict(zip(LEVELS, w)))


def test_survival_function_composite_break_even_within_015_of_truth(big):
    # Truth: S(2 | x) = exp(-lam 2 e^{beta x}) times the proportional-odds distribution over living levels.
    for w in (WEIGHT_SETS["equal"], WEIGHT_SETS["steep"]):
        s, info = vl.composite_summaries(big, w, kinds=["survival_function"])[("survival_function", "frailty")]
        assert abs(s.break_even[0].x - true_break_even(w, "survival_function")) < 0.15
        assert any("independent" in n for n in info.notes)


def test_survival_only_weights_reproduce_survival_curve(big):
    # With every living level 1 and death 0, S x E[w | alive] is S itself (law of total expectation).
    w = np.array([1.0, 1.0, 1.0, 1.0, 0.0])
    s, _ = vl.composite_summaries(big, w, kinds=["survival_function"])[("survival_function", "frailty")]
    pf = big.pair("alive", "frailty")
    assert s.first == pytest.approx(pf.fits[ARMS[0]].measure(s.grid), abs=1e-12)
    se = (s.upper - s.difference) / 1.959963984540054
    direct = np.sqrt(pf.fits[ARMS[0]].measure_var(s.grid) + pf.fits[ARMS[1]].measure_var(s.grid))
    assert se == pytest.approx(direct, rel=1e-6)


def test_break_even_moves_toward_survival_break_even_as_living_weights_rise(big):
    # Truth: alive-vs-dead break-even is (c1 - c2) / (b1 - b2) for the last cut-point = 4.8 / 2.4 = 2.
    surv = np.array([1.0, 1.0, 1.0, 1.0, 0.0])
    assert true_break_even(surv) == pytest.approx(SURVIVAL_BREAK_EVEN, abs=1e-9)
    est_surv = vl.composite_summaries(big, surv, kinds=["ordinal"])[("ordinal", "frailty")][0].break_even[0].x
    assert abs(est_surv - SURVIVAL_BREAK_EVEN) < 0.15
    gaps_true, gaps_est = [], []
    for t in (0.0, 0.5, 0.8, 0.95):
        w = np.array([1.0, 0.75 + 0.25 * t, 0.5 + 0.5 * t, 0.25 + 0.75 * t, 0.0])
        x = vl.composite_summaries(big, w, kinds=["ordinal"])[("ordinal", "frailty")][0].break_even[0].x
        assert abs(x - true_break_even(w)) < 0.15
        gaps_true.append(abs(true_break_even(w) - SURVIVAL_BREAK_EVEN))
        gaps_est.append(abs(x - est_surv))
    assert np.all(np.diff(gaps_true) < 0) and np.all(np.diff(gaps_est) < 0)


def test_reweighting_never_refits(big, monkeypatch):
    calls = []
    real = models.fit_model

    def counting(*args, **kwargs):
        calls.append(1)
        return real(*args, **kwargs)

    monkeypatch.setattr(models, "fit_model", counting)
    monkeypatch.setattr(ft, "fit_model", counting)
    prepared = vl.prepare_composites(big)
    first = vl.reweight(prepared, WEIGHT_SETS["equal"])
    second = vl.reweight(prepared, WEIGHT_SETS["acceptable"])
    again = vl.composite_summaries(big, WEIGHT_SETS["steep"])
    assert calls == []
    key = ("ordinal", "frailty")
    assert first[key][0].break_even[0].x != second[key][0].break_even[0].x
    assert set(again) == {("ordinal", "frailty"), ("survival_function", "frailty")}


def test_missing_distribution_is_a_clear_error(big):
    pf = big.pair("function", "frailty")
    broken = dict(big.pairs)

    class NoDist:
        def __init__(self, fit):
            self.fit, self.arm = fit, fit.arm

        def distribution(self, x):
            return None

    broken[("function", "frailty")] = ft.PairFit(pf.outcome, pf.index, pf.basis,
                                                 {a: NoDist(f) for a, f in pf.fits.items()}, pf.data, pf.rows,
                                                 pf.x_range)
    fs = ft.FitSet(big.spec, None, {}, broken)
    with pytest.raises(FulcrumError, match="no level probabilities"):
        vl.composite_summaries(fs, kinds=["ordinal"])


# ------------------------------------------------------------------------------------------
# Delta-method variance against simulation
# ------------------------------------------------------------------------------------------
def test_delta_variance_agrees_with_variance_over_simulated_cohorts():
    # Parametric check: empirical variance of the estimated composite difference over 300 cohorts drawn from
    # the true models, against the mean delta-method variance (the ratio's own sampling error is about 8%).
    w = WEIGHT_SETS["steep"]
    xs = np.array([0.3, 1.0, 2.5])
    est = {k: [] for k in vl.WEIGHTED_KINDS}
    var = {k: [] for k in vl.WEIGHTED_KINDS}
    for rep in range(300):
        fs = fitset(simulate(400, seed=1000 + rep))
        for kind in vl.WEIGHTED_KINDS:
            cm = vl.prepare_composite(fs, kind, "frailty")
            L, C = cm.at(xs, True)
            est[kind].append((L[0] - L[1]) @ w)
            var[kind].append(np.einsum("gij,i,j->g", C[0] + C[1], w, w))
    for kind in vl.WEIGHTED_KINDS:
        ratio = np.var(est[kind], axis=0, ddof=1) / np.mean(var[kind], axis=0)
        assert np.all((ratio > 0.75) & (ratio < 1.3)), (kind, ratio)
        truth = true_composite(ARMS[0], xs, w, kind) - true_composite(ARMS[1], xs, w, kind)
        se = np.sqrt(np.mean(var[kind], axis=0) / 300)
        assert np.all(np.abs(np.mean(est[kind], axis=0) - truth) < 4 * se)


# ------------------------------------------------------------------------------------------
# Threshold analysis
# ------------------------------------------------------------------------------------------
def test_threshold_flips_solve_the_difference_exactly_and_match_brute_force(big):
    cm = vl.prepare_composite(big, "ordinal", "frailty")
    w = WEIGHT_SETS["equal"]
    x = 3.5
    th = vl.thresholds(cm, w, x, margin=0.0)
    assert th["favours"] == (ARMS[0] if cm.difference(np.array([x]), w)[0] > 0 else ARMS[1])
    ts = np.linspace(-1, 1, 4001)
    flips = 0
    for k, st in enumerate(th["states"]):
        ws = np.tile(w, (len(ts), 1))
        ws[:, k] = ts
        brute = np.array([cm.difference(np.array([x]), v)[0] for v in ws[::20]])  # brute force over the models
        sign_change = np.any(np.sign(brute[:-1]) != np.sign(brute[1:]))
        if st["flip_weight"] is None:
            assert not sign_change and st["message"] == "no flip within [-1, 1]"
            continue
        flips += 1
        assert sign_change
        v = w.copy()
        v[k] = st["flip_weight"]
        assert abs(cm.difference(np.array([x]), v)[0]) < 1e-9
        i = np.flatnonzero(np.sign(brute[:-1]) != np.sign(brute[1:]))[0]
        assert ts[::20][i] <= st["flip_weight"] <= ts[::20][i + 1]
    assert flips >= 1


def test_threshold_map_agrees_with_the_models(big):
    cm = vl.prepare_composite(big, "ordinal", "frailty")
    w = WEIGHT_SETS["equal"]
    cells = vl.threshold_map(cm, w, 3.0, "home_with_help", "bedbound", n=11)
    assert len(cells) == 121
    for c in cells[::7]:
        v = w.copy()
        v[1], v[3] = c["weight_a"], c["weight_b"]
        d = cm.difference(np.array([3.0]), v)[0]
        assert c["difference"] == pytest.approx(d, abs=1e-12)
        assert c["favours"] == (ARMS[0] if d > 0 else ARMS[1])
    assert {c["favours"] for c in cells} == set(ARMS)


# ------------------------------------------------------------------------------------------
# Acceptability under weight uncertainty
# ------------------------------------------------------------------------------------------
def test_acceptability_is_certain_far_from_break_even_and_even_at_it(big):
    # Symmetric spread around interior weights: at the break-even the composite difference is a symmetric
    # variable around zero, so each arm is favoured with probability one half (Lahdelma et al. 1998 setting).
    cm = vl.prepare_composite(big, "ordinal", "frailty")
    w = np.array([0.9, 0.7, 0.4, 0.1, 0.0])
    s = vl.summarise_composite(cm, w, margin=0.0)
    x0 = s.break_even[0].x
    acc = vl.acceptability(cm, w, spread=0.1, draws=4000, seed=3, margin=0.0, x=np.array([0.2, x0, 2.9]))
    assert acc[0]["first"] > 0.99 and acc[2]["second"] > 0.99
    assert acc[1]["first"] == pytest.approx(0.5, abs=0.03)
    assert all(a["first"] + a["second"] == pytest.approx(1.0) for a in acc)
    along = vl.acceptability(cm, w, spread=0.1, draws=500, seed=3, margin=0.0)
    p = np.array([a["first"] for a in along])
    assert p[0] > 0.99 and p[-1] < 0.01
    assert vl.acceptability(cm, w, spread=0.1, draws=500, seed=3) == along  # seeded


def test_weight_draws_respect_ranges_spread_and_fixed_death():
    rng = np.random.default_rng(0)
    w = np.array([1.0, 0.75, 0.5, 0.25, 0.0])
    W = vl.draw_weights(LEVELS, w, {"care_home": (0.2, 0.3)}, 0.1, 5000, rng)
    assert W[:, 0].min() >= 0.9 and W[:, 0].max() <= 1.0
    assert W[:, 2].min() >= 0.2 and W[:, 2].max() <= 0.3
    assert np.all(W[:, 4] == 0.0)
    assert W[:, 1].mean() == pytest.approx(0.75, abs=0.01)


# ------------------------------------------------------------------------------------------
# Bootstrap and JSON rows
# ------------------------------------------------------------------------------------------
def test_composite_rows_have_the_results_row_shape_and_validate(big):
    from explorer import results as res

    summaries = vl.composite_summaries(big, WEIGHT_SETS["equal"])
    frailty = np.concatenate([d.x for d in next(iter(big.pairs.values())).data.values()])
    iv = type("IV", (), {"info": {"kind": "column", "label": "frailty"}, "values": frailty})()
    fs = ft.FitSet(big.spec, None, {"frailty": iv}, big.pairs)
    rows = vl.composite_rows(fs, summaries)
    assert {r["kind"] for r in rows} == {"ordinal", "survival_function"}
    for r in rows:
        assert r["outcome"] == "composite"
        for key in ("weights", "whose", "notes", "thresholds", "acceptability", "break_even", "curve"):
            assert key in r
        assert len(r["acceptability"]) == len(r["curve"])
    doc = res.document(big.spec, data_sha256="0" * 64, spec_bytes=b"x", rows=[], composite=rows, selection=[],
                       warnings=[])
    res.validate(doc)
    res.dumps(doc)


# ------------------------------------------------------------------------------------------
# End to end: cohort file -> fit_all -> composites (quality-adjusted too) -> bootstrap -> JSON rows
# ------------------------------------------------------------------------------------------
# Invented utility among survivors: mean a + b x per arm, unrelated to survival, observed only in those alive at 2.
UTILITY = {"laparotomy": (0.80, -0.20), "non-operative": (0.60, -0.05)}


def true_rmst(arm: str, x) -> np.ndarray:
    lam, beta = HAZ[arm]
    rate = lam * np.exp(beta * np.asarray(x, float))
    return (1 - np.exp(-rate * HORIZON)) / rate


def true_quality_adjusted(arm: str, x) -> np.ndarray:
    a, b = UTILITY[arm]
    return true_rmst(arm, x) * (a + b * np.asarray(x, float))


def fit_cohort(folder, measure: str, replicates: int) -> tuple[ft.FitSet, list[dict]]:
    """Write the simulated cohort and its spec, then fit and bootstrap through explorer.fitting."""
    import pandas as pd

    from explorer.spec import load_spec

    data = simulate(1000, seed=5)
    rng = np.random.default_rng(6)
    frames = []
    for arm, d in data.items():
        a, b = UTILITY[arm]
        qol = a + b * d.x + rng.normal(0, 0.15, len(d.x))
        alive = ~((d.time <= HORIZON) & (d.event == 1))
        frames.append(pd.DataFrame({"arm": arm, "frailty": d.x, "function": np.asarray(LEVELS)[d.y.astype(int)],
                                    "time": d.time, "dead": d.event.astype(int), "qol": np.where(alive, qol, np.nan)}))
    pd.concat(frames).to_csv(folder / "cohort.csv", index=False)
    (folder / "spec.toml").write_text(f"""
[cohort]
path = "cohort.csv"
arm = "arm"
arms = {list(ARMS)!r}

[[outcomes]]
name = "function"
kind = "ordinal"
column = "function"
levels = {list(LEVELS)!r}

[[outcomes]]
name = "alive"
kind = "survival"
time = "time"
event = "dead"
horizon = {HORIZON}
measure = "{measure}"

[[outcomes]]
name = "qol"
kind = "continuous"
column = "qol"
among_survivors = true

[[indices]]
name = "frailty"
column = "frailty"

[values]
outcome = "function"
survival_outcome = "alive"
utility_outcome = "qol"
spread = 0.1
whose = "patient"

[analysis]
replicates = {replicates}
grid = 121
""".replace("'", '"'))
    fs = ft.fit_all(load_spec(folder / "spec.toml"))
    return fs, ft.run_bootstrap(fs, keep_distribution=("function",))


@pytest.fixture(scope="module")
def cohort_fits(tmp_path_factory):
    return fit_cohort(tmp_path_factory.mktemp("values_survival"), "survival", 100)


def test_quality_adjusted_composite_break_even_matches_closed_form(cohort_fits):
    # Truth: exponential RMST (1 - e^{-r h}) / r times the linear survivors' utility; root by scipy brentq.
    fs, _ = cohort_fits
    s, info = vl.composite_summaries(fs, kinds=["quality_adjusted"])[("quality_adjusted", "frailty")]
    f = lambda x: float(true_quality_adjusted(ARMS[0], x) - true_quality_adjusted(ARMS[1], x))  # noqa
    truth = optimize.brentq(f, 0.01, X_MAX - 0.01)
    assert len(s.break_even) == 1 and abs(s.break_even[0].x - truth) < 0.15
    assert info.weights is None and info.thresholds is None
    assert any("approximated" in n for n in info.notes)
    assert "conditional on being alive" in info.measure


def test_bootstrap_composite_reuses_replicates_and_agrees_with_delta(cohort_fits, monkeypatch):
    fs, reps = cohort_fits
    calls = []
    monkeypatch.setattr(ft, "fit_model", lambda *a, **k: calls.append(1))
    w = WEIGHT_SETS["equal"]
    analytic = vl.composite_summaries(fs, w, kinds=["ordinal", "survival_function"])
    boot = vl.composite_summaries(fs, w, kinds=["ordinal", "survival_function"], replicates=reps)
    assert calls == []
    for key in analytic:
        a, b = analytic[key][0].break_even[0], boot[key][0].break_even[0]
        assert b.interval == "bootstrap-percentile" and a.x == b.x
        assert b.ci[0] < b.x < b.ci[1]
        ratio = (b.ci[1] - b.ci[0]) / (a.ci[1] - a.ci[0])
        assert 0.6 < ratio < 1.6, (key, ratio)
        acc = boot[key][1].acceptability
        assert acc[0]["first"] > 0.99 and acc[-1]["second"] > 0.99


def test_bootstrap_without_level_probabilities_is_a_clear_error(cohort_fits):
    fs, reps = cohort_fits
    stripped = [{k: {n: v for n, v in r.items() if not n.startswith("dist_")} for k, r in rep.items()}
                for rep in reps[:5]]
    with pytest.raises(FulcrumError, match="keep_distribution"):
        vl.composite_summaries(fs, kinds=["ordinal"], replicates=stripped)


def test_json_rows_from_a_fitted_cohort_validate(cohort_fits):
    from explorer import results as res

    fs, reps = cohort_fits
    summaries = vl.composite_summaries(fs, replicates=reps)
    rows = vl.composite_rows(fs, summaries)
    assert [r["kind"] for r in rows] == ["ordinal", "survival_function", "quality_adjusted"]
    assert all(r["whose"] == "patient" and r["outcome"] == "composite" for r in rows)
    assert rows[0]["thresholds"]["states"][0]["level"] == "independent"
    doc = res.document(fs.spec, data_sha256=fs.cohort.sha256, spec_bytes=b"spec", rows=[], composite=rows,
                       selection=[], warnings=[])
    res.validate(doc)


def test_rmst_measure_gives_the_same_composites_and_bootstraps_quality_adjusted(cohort_fits, tmp_path):
    # Same data with the survival outcome measured as RMST: survival at the horizon comes from the Cox model's
    # cumulative hazard instead of its measure, so the survival x function composite must not change; the
    # replicates now hold RMST, so quality-adjusted survival gets bootstrap intervals.
    fs_s, _ = cohort_fits
    fs_r, reps_r = fit_cohort(tmp_path, "rmst", 30)
    w = WEIGHT_SETS["steep"]
    for kind in ("survival_function", "quality_adjusted"):
        a = vl.composite_summaries(fs_s, w, kinds=[kind])[(kind, "frailty")][0]
        b = vl.composite_summaries(fs_r, w, kinds=[kind])[(kind, "frailty")][0]
        assert b.difference == pytest.approx(a.difference, abs=1e-9)
        assert b.upper == pytest.approx(a.upper, abs=1e-9)
    boot = vl.composite_summaries(fs_r, w, replicates=reps_r)
    assert boot[("quality_adjusted", "frailty")][0].break_even[0].interval == "bootstrap-percentile"
    s, info = boot[("survival_function", "frailty")]
    assert s.break_even[0].interval == "test-inversion" and any("analytic (test-inversion)" in n for n in info.notes)


def test_equal_weights_give_no_break_even_and_say_why(big):
    # common practice: with one weight for every state each arm's composite is that weight, so no difference.
    s, info = vl.composite_summaries(big, [0.5] * 5, kinds=["ordinal"])[("ordinal", "frailty")]
    assert s.break_even == [] and np.allclose(s.difference, 0.0, atol=1e-12)
    assert any("same weight" in m for m in s.warnings)

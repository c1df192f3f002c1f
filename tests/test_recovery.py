"""Recovery of known break-even points through the whole pipeline (file -> spec -> analyse).

Each cohort is simulated with a break-even known in closed form (invented data, truth exact). The
estimate must lie within 0.1 index units of the same per-arm model fitted directly with a reference
library (statsmodels or lifelines), and the 95% interval must cover the truth, for both the analytic
and the bootstrap method. One fixed seed per kind: coverage in general is measured by
explorer.coverage_study (docs/validation.md), not here.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from lifelines import CoxPHFitter
from scipy import optimize
from scipy.special import expit
from statsmodels.miscmodels.ordinal_model import OrderedModel

from explorer.analysis import analyse
from explorer.spec import parse_spec_text

N = 4000
ARMS = ("alpha", "beta")


def _x(rng, n):
    return rng.uniform(0.0, 10.0, n)


def continuous(rng):
    # first: 1 + 0.5x, second: 3 + 0.1x -> cross at x = 5
    rows = []
    for arm, (a, b, s) in zip(ARMS, ((1.0, 0.5, 2.0), (3.0, 0.1, 1.5))):
        x = _x(rng, N // 2)
        rows.append(pd.DataFrame({"arm": arm, "x": x, "y": a + b * x + rng.normal(0, s, len(x))}))
    return pd.concat(rows), 5.0, 'kind = "continuous"\ncolumn = "y"'


def survival(rng):
    # exponential hazards log(lambda) = a + b x: -3 + 0.3x vs -2 + 0.1x -> equal at x = 5 for every horizon
    rows = []
    for arm, (a, b) in zip(ARMS, ((-3.0, 0.3), (-2.0, 0.1))):
        x = _x(rng, N // 2)
        t = rng.exponential(1.0 / np.exp(a + b * x))
        c = rng.uniform(1.0, 6.0, len(x))
        rows.append(pd.DataFrame({"arm": arm, "x": x, "time": np.minimum(t, c), "dead": (t <= c).astype(int)}))
    return pd.concat(rows), 5.0, 'kind = "survival"\ntime = "time"\nevent = "dead"\nhorizon = 2.0'


LEVELS = ("good", "fair", "poor", "worst")


def ordinal(rng):
    # per-arm proportional odds, logit P(Y <= k) = theta_k - beta x, favourable = first two levels:
    # theta_2 - beta x equal in both arms: 3 - 0.4x = 1.5 - 0.1x -> x = 5
    rows = []
    for arm, (theta, beta) in zip(ARMS, (((2.0, 3.0, 4.0), 0.4), ((0.5, 1.5, 2.5), 0.1))):
        x = _x(rng, N // 2)
        cum = expit(np.asarray(theta)[None, :] - beta * x[:, None])
        y = (rng.uniform(size=len(x))[:, None] > cum).sum(axis=1)
        rows.append(pd.DataFrame({"arm": arm, "x": x, "f": [LEVELS[k] for k in y]}))
    spec = f'kind = "ordinal"\ncolumn = "f"\nlevels = {list(LEVELS)!r}\nfavourable = ["good", "fair"]'.replace("'", '"')
    return pd.concat(rows), 5.0, spec


# --- the same per-arm models fitted directly with reference libraries ------------------------------
def reference_curve(kind, frame, arm):
    d = frame[frame.arm == arm]
    if kind == "continuous":
        fit = sm.OLS(d.y.to_numpy(), sm.add_constant(d.x.to_numpy())).fit()  # statsmodels OLS
        return lambda x: fit.params[0] + fit.params[1] * x
    if kind == "survival":
        cph = CoxPHFitter().fit(d[["x", "time", "dead"]], "time", "dead")  # lifelines Cox, Efron ties
        return lambda x: cph.predict_survival_function(pd.DataFrame({"x": np.atleast_1d(x)}), times=[2.0]
                                                       ).to_numpy()[0]
    codes = pd.Categorical(d.f, categories=LEVELS, ordered=True)
    fit = OrderedModel(pd.Series(codes), d[["x"]].to_numpy(), distr="logit").fit(method="bfgs", disp=False,
                                                                               gtol=1e-10, maxiter=2000)
    return lambda x: fit.model.predict(fit.params, exog=np.atleast_1d(x)[:, None])[:, :2].sum(axis=1)


def reference_break_even(kind, frame):
    f1, f2 = (reference_curve(kind, frame, a) for a in ARMS)
    return optimize.brentq(lambda x: float(np.squeeze(f1(np.array([x])) - f2(np.array([x])))), 0.5, 9.5)


SPEC = """
[cohort]
path = "cohort.csv"
arm = "arm"
arms = ["alpha", "beta"]

[[outcomes]]
name = "y"
{outcome}

[[indices]]
name = "x"
column = "x"

[analysis]
interval = "{interval}"
replicates = 200
seed = 7
workers = 1
"""


@pytest.fixture(scope="module", params=["continuous", "survival", "ordinal"])
def case(request, tmp_path_factory):
    kind = request.param
    rng = np.random.default_rng({"continuous": 101, "survival": 202, "ordinal": 303}[kind])
    frame, truth, outcome = {"continuous": continuous, "survival": survival, "ordinal": ordinal}[kind](rng)
    folder = tmp_path_factory.mktemp(kind)
    frame.to_csv(folder / "cohort.csv", index=False)
    return kind, frame, truth, outcome, folder


@pytest.mark.parametrize("interval", ["analytic", "bootstrap"])
def test_break_even_recovered_and_covered(case, interval):
    kind, frame, truth, outcome, folder = case
    spec = parse_spec_text(SPEC.format(outcome=outcome, interval=interval), base_dir=folder)
    doc = analyse(spec).document
    (row,) = doc["results"]
    (be,) = [b for b in row["break_even"] if not b["extrapolated"]]
    reference = reference_break_even(kind, frame)
    assert abs(be["x"] - reference) < 0.1, (be["x"], reference)
    lo, hi = be["ci"]
    assert be["interval_shape"] == "finite", be
    assert lo <= truth <= hi, (lo, truth, hi)
    assert be["interval"] == ("bootstrap-percentile" if interval == "bootstrap" else
                              {"continuous": "fieller", "survival": "fieller", "ordinal": "fieller"}[kind])
    # which arm is ahead below the crossing follows from the generating lines (closed form)
    below = {"continuous": "beta", "survival": "alpha", "ordinal": "alpha"}[kind]
    assert be["favours_below"] == below and be["favours_above"] != below


def test_margin_moves_the_break_even_and_picks_the_interval(case):
    kind, frame, truth, outcome, folder = case
    spec = parse_spec_text(SPEC.format(outcome=outcome, interval="analytic"), base_dir=folder)
    base = analyse(spec).document["results"][0]["break_even"][0]
    spec = dataclasses.replace(spec, outcomes=(dataclasses.replace(spec.outcomes[0], margin=0.02),))
    (row,) = analyse(spec).document["results"]
    (be,) = row["break_even"]
    assert row["margin"] == 0.02  # the outcome's own margin, in its own units
    # Fieller stays exact for a continuous difference at any margin (still linear); elsewhere a non-zero
    # margin is not a zero on the linear-predictor scale, so the pointwise test is inverted
    assert be["interval"] == ("fieller" if kind == "continuous" else "test-inversion")
    # a positive margin asks the first arm for more, so the break-even moves away from the first arm's side
    assert (be["x"] < base["x"]) == (be["favours_below"] == "alpha")

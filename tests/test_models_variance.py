"""Delta-method variances of the survival measures against their spread over simulated cohorts.

Closed-form truth: exponential hazards lambda0 * exp(b x), uniform censoring, so survival at the
horizon is exp(-lambda h) and restricted mean survival is (1 - exp(-lambda h)) / lambda.
"""
from __future__ import annotations

import numpy as np
import pytest

from explorer.models.base import Basis, OutcomeData
from explorer.models.cox import CoxFit
from explorer.models.weibull import WeibullFit

LAMBDA0, B, HORIZON, N, REPS = 0.3, 0.4, 2.0, 250, 250
XS = np.array([0.5, 2.0, 3.5])


def truth(measure: str) -> np.ndarray:
    lam = LAMBDA0 * np.exp(B * XS)
    return np.exp(-lam * HORIZON) if measure == "survival" else (1 - np.exp(-lam * HORIZON)) / lam


def cohort(rng: np.random.Generator) -> OutcomeData:
    x = rng.uniform(0, 4, N)
    t = rng.exponential(1 / (LAMBDA0 * np.exp(B * x)))
    c = rng.uniform(0.5, 6.0, N)
    return OutcomeData(x=x, time=np.minimum(t, c), event=(t <= c).astype(float))


@pytest.fixture(scope="module")
def replicates():
    rng = np.random.default_rng(2024)
    out = {}
    for _ in range(REPS):
        d = cohort(rng)
        for name, fit in (("cox", CoxFit("s", "a", Basis(), d, HORIZON, checks=False)),
                          ("weibull", WeibullFit("s", "a", Basis(), d, HORIZON))):
            for measure in ("survival", "rmst"):
                fit.measure_name = measure
                out.setdefault((name, measure), []).append((fit.measure(XS), fit.measure_var(XS)))
    return {k: (np.array([e for e, _ in v]), np.array([s for _, s in v])) for k, v in out.items()}


@pytest.mark.parametrize("model", ["cox", "weibull"])
@pytest.mark.parametrize("measure", ["survival", "rmst"])
def test_delta_variance_matches_simulated_spread(replicates, model, measure):
    est, var = replicates[(model, measure)]
    empirical = est.var(axis=0, ddof=1)
    ratio = var.mean(axis=0) / empirical
    # the Monte Carlo SD of a variance from 250 replicates is about 9%; allow about 2.5 of them
    assert np.all((ratio > 0.77) & (ratio < 1.3)), ratio
    # estimates centre on the closed-form truth
    assert np.all(np.abs(est.mean(axis=0) - truth(measure)) < 4 * np.sqrt(empirical / REPS) + 0.002)

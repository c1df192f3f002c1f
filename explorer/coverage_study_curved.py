"""Coverage scenarios where the difference is not a straight line on the model's scale, or Fieller needs care:
a spline shape, a non-zero margin on a probability, and a covariate-adjusted Cox fit.

Each has a truth known in closed form (or solved exactly from closed-form curves), on an index uniform on
0 to 10, censoring as in explorer/coverage_study.py. explorer/coverage_study.py wraps these as its Scenario entries.
"""
from __future__ import annotations

from typing import Callable, NamedTuple

import numpy as np
from scipy import optimize
from scipy.special import expit, logit

from .models.base import OutcomeData
from .spec import OutcomeSpec

X_RANGE = (0.0, 10.0)
HORIZON = 2.0
CENSOR = (1.0, 6.0)
MARGIN = 0.05  # the margin of the margin scenarios, a probability (five percentage points)
CURVE = 0.03  # the first arm's quadratic term on the model scale (spline scenarios): roots at x = 5 and x = 15
BIN = ((1.0, -0.3), (-0.5, 0.0))  # logit: 1 - 0.3x = -0.5 at x = 5
SURV = ((-3.0, 0.3), (-2.0, 0.1))  # log hazard: -3 + 0.3x = -2 + 0.1x at x = 5
ADJUST = 0.5  # the covariate's log hazard ratio, the same in both arms, so the break-even does not depend on it


class Curved(NamedTuple):
    name: str
    outcome: OutcomeSpec
    simulate: Callable[[np.random.Generator, int, int], OutcomeData]
    truth: float
    shape: str = "linear"


def _x(rng: np.random.Generator, n: int) -> np.ndarray:
    return rng.uniform(*X_RANGE, n)


def _curve(arm: int, x: np.ndarray, coef, bend: float) -> np.ndarray:
    a, b = coef[arm]
    return a + b * x + (bend * (x - 5.0) ** 2 if arm == 0 else 0.0)


def _binary(rng, n, arm, bend=0.0):
    x = _x(rng, n)
    return OutcomeData(x=x, y=(rng.uniform(size=n) < expit(_curve(arm, x, BIN, bend))).astype(float))


def _survival(rng, n, arm, bend=0.0, adjust=False):
    x = _x(rng, n)
    z = rng.normal(0.0, 1.0, n) if adjust else None
    eta = _curve(arm, x, SURV, bend) + (ADJUST * z if adjust else 0.0)
    t = rng.exponential(1.0 / np.exp(eta))
    c = rng.uniform(*CENSOR, n)
    d = OutcomeData(x=x, time=np.minimum(t, c), event=(t <= c).astype(float))
    if adjust:
        d.z, d.z_names = z[:, None], ("z",)
    return d


def sim_binary_spline(rng, n, arm):
    return _binary(rng, n, arm, CURVE)


def sim_survival_spline(rng, n, arm):
    return _survival(rng, n, arm, CURVE)


def sim_binary(rng, n, arm):
    return _binary(rng, n, arm)


def sim_survival(rng, n, arm):
    return _survival(rng, n, arm)


def sim_survival_adjusted(rng, n, arm):
    return _survival(rng, n, arm, adjust=True)


def binary_margin_truth() -> float:
    """expit(1 - 0.3x) - expit(-0.5) = MARGIN, in closed form."""
    return float((1.0 - logit(expit(-0.5) + MARGIN)) / 0.3)


def survival_margin_truth() -> float:
    """exp(-2 exp(-3 + 0.3x)) - exp(-2 exp(-2 + 0.1x)) = MARGIN, solved exactly (the only root on 0-10)."""
    def f(x):
        return (np.exp(-HORIZON * np.exp(SURV[0][0] + SURV[0][1] * x))
                - np.exp(-HORIZON * np.exp(SURV[1][0] + SURV[1][1] * x)) - MARGIN)

    return float(optimize.brentq(f, *X_RANGE, xtol=1e-13))


def curved_scenarios() -> list[Curved]:
    binary = OutcomeSpec(name="y", kind="binary", column="y")
    surv = OutcomeSpec(name="y", kind="survival", time="t", event="e", horizon=HORIZON, measure="survival",
                       model="cox")
    return [Curved("binary spline", binary, sim_binary_spline, 5.0, "spline"),
            Curved("survival spline", surv, sim_survival_spline, 5.0, "spline"),
            Curved("binary margin", OutcomeSpec(**{**binary.__dict__, "margin": MARGIN}), sim_binary,
                   binary_margin_truth()),
            Curved("survival margin", OutcomeSpec(**{**surv.__dict__, "margin": MARGIN}), sim_survival,
                   survival_margin_truth()),
            Curved("survival adjusted", OutcomeSpec(**{**surv.__dict__, "adjust": ("z",)}), sim_survival_adjusted,
                   5.0)]

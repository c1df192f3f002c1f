"""Multi-covariate models that give a linear predictor, for prognostic indices.

Cox, logistic and proportional odds reuse the per-arm models' likelihoods (explorer.models) on a
covariate matrix; linear regression is least squares. Each returns a `LinearPredictor`:
intercept + X @ coef. Proportional odds: P(Y <= j) = expit(cut_j - X @ coef), so a higher
predictor means worse levels (coded best first); the cut-points are not part of the predictor.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from ..models.common import inverse, newton
from ..models.cox_kernel import CoxKernel
from ..models.glm import fit_logistic
from ..models.ordinal import ordinal_loglik



@dataclass
class LinearPredictor:
    """A fitted linear predictor: intercept + X @ coef; cov is the covariance of coef."""

    coef: np.ndarray
    cov: np.ndarray
    intercept: float = 0.0
    converged: bool = True
    extra: dict = field(default_factory=dict)

    def __call__(self, X: np.ndarray) -> np.ndarray:
        return self.intercept + np.asarray(X, float) @ self.coef

    @property
    def se(self) -> np.ndarray:
        return np.sqrt(np.clip(np.diag(self.cov), 0.0, None))


@dataclass
class Target:
    """The outcome a prognostic model is fitted to: y (0/1, codes 0..K-1 best first, or values) or time/event;
    family: the FAMILIES entry that fits it (the outcome kind's facts say which)."""

    family: str
    y: np.ndarray | None = None
    time: np.ndarray | None = None
    event: np.ndarray | None = None

    def take(self, rows: np.ndarray) -> Target:
        pick = (lambda a: None if a is None else a[rows])  # noqa: E731
        return Target(self.family, pick(self.y), pick(self.time), pick(self.event))


def fit_linear_predictor(X: np.ndarray, target: Target, start: np.ndarray | None = None) -> LinearPredictor:
    """Fit the target's family on covariates X (n x p, finite); start: coefficients to start Newton's method
    from (a bootstrap replicate starts from the cohort's fit)."""
    X = np.asarray(X, float).reshape(len(X), -1)
    fit = FAMILIES[target.family].fit
    return fit(X, target, None if start is None or np.shape(start) != (X.shape[1],) else np.asarray(start, float))


def _cox(X: np.ndarray, t: Target, start: np.ndarray | None) -> LinearPredictor:
    kernel = CoxKernel(np.asarray(t.time, float), np.asarray(t.event, float), X, np.ones(len(X)))
    beta, _, _, H, _, ok = newton(kernel.evaluate, np.zeros(X.shape[1]) if start is None else start)
    return LinearPredictor(beta, inverse(-H), 0.0, bool(ok))


def _logistic(X: np.ndarray, t: Target, start: np.ndarray | None) -> LinearPredictor:
    y = np.asarray(t.y, float)
    if start is not None:
        ybar = np.clip(np.mean(y), 1e-6, 1 - 1e-6)
        start = np.r_[np.log(ybar / (1 - ybar)) - np.mean(X @ start), start]
    beta, _, H, _, ok, separated = fit_logistic(np.column_stack([np.ones(len(X)), X]), y, np.ones(len(X)), start)
    cov = inverse(-H)
    return LinearPredictor(beta[1:], cov[1:, 1:], float(beta[0]), bool(ok and not separated))


def _linear(X: np.ndarray, t: Target, start: np.ndarray | None = None) -> LinearPredictor:
    Z = np.column_stack([np.ones(len(X)), X])
    y = np.asarray(t.y, float)
    b, *_ = np.linalg.lstsq(Z, y, rcond=None)
    dof = max(len(y) - Z.shape[1], 1)
    sigma2 = float(np.sum((y - Z @ b) ** 2) / dof)
    cov = sigma2 * inverse(Z.T @ Z)
    return LinearPredictor(b[1:], cov[1:, 1:], float(b[0]), True, {"sigma": np.sqrt(sigma2)})


def _proportional_odds(X: np.ndarray, t: Target, start: np.ndarray | None = None) -> LinearPredictor:
    observed, code = np.unique(np.asarray(t.y, float), return_inverse=True)
    code = code.reshape(-1)
    m = len(observed) - 1
    cum = np.clip(np.cumsum(np.bincount(code, minlength=m + 1))[:-1] / len(code), 1e-6, 1 - 1e-6)
    start = np.r_[np.log(cum / (1 - cum)), np.zeros(X.shape[1]) if start is None else start]
    params, _, _, H, _, ok = newton(ordinal_loglik(X, code, np.ones(len(X)), m + 1), start)
    cov = inverse(-H)
    return LinearPredictor(params[m:], cov[m:, m:], 0.0, bool(ok), {"cuts": params[:m]})


@dataclass(frozen=True)
class Family:
    """One kind of multi-covariate model for a prognostic index, as its report words it.

    name: the report's `model`; scale: what the linear predictor is on; intercept: the predictor keeps one
    (logistic, linear); flips: a higher predictor means a higher outcome value, so an outcome where higher is
    better is turned round to make a higher index mean a worse prognosis (Cox and proportional odds predictors
    already rise with hazard and worse levels); events: which values count as events for the events-per-covariate
    rule ("event": the event column, "ones": patients coded 1, None: not counted); predicted and orientation:
    sentences with {title}, {by} (the horizon words) and {direction} (higher or lower) to fill.
    """

    name: str
    scale: str
    fit: Callable
    intercept: bool
    flips: bool
    events: str | None
    predicted: str
    orientation: str


FAMILIES = {
    "cox": Family("Cox", "log hazard", _cox, False, False, "event",
                  "predicted risk of the event in '{title}' by {by}",
                  "a higher predicted hazard of the event in '{title}'"),
    "logistic": Family("logistic", "log odds", _logistic, True, True, "ones",
                       "predicted probability that '{title}' is 1", "{direction} predicted odds of {title}"),
    "proportional_odds": Family("proportional odds", "log odds of a worse level", _proportional_odds, False, False,
                                None, "predicted probability of a level of '{title}' worse than the best",
                                "higher odds of a worse level of {title}"),
    "linear": Family("linear", "predicted outcome", _linear, True, True, None, "predicted '{title}'",
                     "a {direction} predicted {title}"),
}

"""Logistic (binary outcome, measure P(1)) and linear (continuous outcome, measure the mean) per arm.

Logistic: Newton-Raphson with the analytic Hessian; robust=True gives the HC0 sandwich (cluster sums
when clusters are given). Linear: weighted least squares; the model-based variance uses
sigma^2 = sum w e^2 / (sum w - p), i.e. frequency weights; with bounds on the outcome (bounded counts
such as days at home) or robust=True it uses HC3 when unweighted and unclustered, otherwise HC0 or
the cluster sum, with no small-sample factor.
"""
from __future__ import annotations

import math

import numpy as np

from ..errors import FulcrumError
from .base import ArmLikelihood, Basis, OutcomeData
from .common import (ArmFit, check_rank, effect_size, events_per_term_warning, expit, inverse, linear_pair, newton,
                     one_blas_thread, prepare, quad_form, sandwich)

SEPARATION_SIZE = 10.0


def logistic_loglik(D: np.ndarray, y: np.ndarray, w: np.ndarray):
    """fun(beta) -> (loglik, gradient, Hessian) of a weighted logistic regression on design D."""
    def fun(beta: np.ndarray):
        eta = D @ beta
        ll = float(w @ (y * eta - np.logaddexp(0.0, eta)))
        p = expit(eta)
        g = D.T @ (w * (y - p))
        H = -(D.T * (w * p * (1 - p))) @ D
        return ll, g, H
    return fun


def gaussian_loglik(D: np.ndarray, y: np.ndarray, w: np.ndarray):
    """Normal linear model with parameters (beta, log sigma), the likelihood LinearFit maximises."""
    def fun(theta: np.ndarray):
        beta, s = theta[:-1], theta[-1]
        e = y - D @ beta
        inv = math.exp(-2 * s)
        ll = float(w @ (-0.5 * math.log(2 * math.pi) - s - 0.5 * e * e * inv))
        we = w * e
        g = np.r_[D.T @ we * inv, float(w @ (e * e)) * inv - w.sum()]
        H = np.empty((len(theta), len(theta)))
        H[:-1, :-1] = -(D.T * w) @ D * inv
        H[:-1, -1] = H[-1, :-1] = -2 * (D.T @ we) * inv
        H[-1, -1] = -2 * float(w @ (e * e)) * inv
        return ll, g, H
    return fun


def fit_logistic(D: np.ndarray, y: np.ndarray, w: np.ndarray, start: np.ndarray | None = None, n_index: int = 1):
    """Weighted logistic maximum likelihood on D = [1, index basis (n_index columns), covariates].

    Returns (beta, loglik, Hessian, iterations, converged, separated).
    """
    p = D.shape[1]
    if start is None or np.shape(start) != (p,):
        ybar = np.clip((w @ y) / w.sum(), 1e-6, 1 - 1e-6)
        start = np.r_[np.log(ybar / (1 - ybar)), np.zeros(p - 1)]
    beta, ll, g, H, it, ok = newton(logistic_loglik(D, y, w), start)
    separated = effect_size(beta[1:], D[:, 1:], w, n_index) > SEPARATION_SIZE or not ok
    return beta, ll, H, it, ok, separated


class _GlmFit(ArmFit):
    """Shared shape of the two GLMs: design [1, basis(x), z], linear predictor eta = D beta."""

    def _design(self, x: np.ndarray) -> np.ndarray:
        rows = self.rows(x)
        return np.column_stack([np.ones(len(rows)), rows])

    def _eta(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        D = self._design(x)
        return D @ self.params_, D

    def _design_of(self, d: OutcomeData) -> tuple[np.ndarray, np.ndarray]:
        prep = prepare(self.basis, d, self.arm, self.outcome)
        return np.column_stack([np.ones(len(prep.w)), prep.X]), prep.w

    def linear_terms(self) -> tuple[np.ndarray, np.ndarray] | None:
        """c0 + c1 x on the linear-predictor scale (logit for binary, mean for continuous)."""
        if not self.basis.is_linear:
            return None
        g0 = self._design(np.zeros(1))[0]
        g1 = np.zeros(len(self.params_))
        g1[1] = 1.0
        return np.array([g0 @ self.params_, self.params_[1]]), linear_pair(self.cov_, g0, g1)


class LogisticFit(_GlmFit):
    """Logistic regression in one arm; measure P(outcome = 1)."""

    @one_blas_thread
    def __init__(self, outcome: str, arm: str, basis: Basis, data: OutcomeData, start: np.ndarray | None = None,
                 robust: bool = False) -> None:
        prep = prepare(basis, data, arm, outcome)
        self._init_common(arm, outcome, basis, prep)
        y = _outcome_values(data, arm, outcome)
        bad = np.flatnonzero(~np.isin(y, (0.0, 1.0)))
        if len(bad):
            raise FulcrumError(f"outcome '{outcome}', arm '{arm}': a binary outcome must hold 0 or 1.",
                               rows=bad + 1, hint="Recode the outcome column as 0/1.")
        check_rank(prep.X, prep.names, arm, outcome, prep.w)
        used = prep.w > 0
        self.n_events_ = int(y[used].sum())
        if self.n_events_ in (0, int(used.sum())):
            raise FulcrumError(f"outcome '{outcome}': every patient in arm '{arm}' has the same value "
                               f"({int(y[used][0])}), so no model can be fitted.",
                               hint="Check the outcome coding, or leave this outcome out for this comparison.")
        D = np.column_stack([np.ones(self.n_), prep.X])
        self.param_names_ = ("intercept",) + prep.names
        beta, ll, H, it, ok, separated = fit_logistic(D, y, prep.w, start, basis.n_columns)
        self.params_, self.loglik_, self.iterations_, self.converged_ = beta, ll, it, ok and not separated
        self.cov_ = inverse(-H)
        if robust:
            p = expit(D @ beta)
            self.cov_ = sandwich(self.cov_, D * (y - p)[:, None], prep.w, prep.cluster)
            self.robust_ = True
        if separated:
            self.warnings_.append(f"Logistic regression in arm '{arm}' shows separation: some index values "
                                  "predict the outcome perfectly, so coefficients grow without bound and its "
                                  "estimates are unreliable.")
        events = min(self.n_events_, int(used.sum()) - self.n_events_)
        self.warnings_ += events_per_term_warning(events, D.shape[1] - 1, arm, "patients in the rarer outcome group")
        self.method_ = (f"Logistic regression in arm '{arm}', {self._shape_words()}{self._held_at()}"
                        f"{self._cov_words()}; probability of the outcome.")

    restricted_words = "a logistic model with arm-specific intercepts"

    def likelihood(self, d: OutcomeData, kernel=None) -> ArmLikelihood:
        """The logistic log-likelihood; the index terms follow the intercept."""
        D, w = self._design_of(d)
        return ArmLikelihood(logistic_loglik(D, np.asarray(d.y, float), w), self.params_,
                             np.arange(1, self.basis.n_columns + 1))

    def measure(self, x: np.ndarray) -> np.ndarray:
        return expit(self._eta(x)[0])

    def measure_link(self) -> tuple[str, float | None]:
        return ("logit", 1.0)

    def measure_var(self, x: np.ndarray) -> np.ndarray:
        eta, D = self._eta(x)
        p = expit(eta)
        return (p * (1 - p)) ** 2 * quad_form(D, self.cov_)


class LinearFit(_GlmFit):
    """Linear regression in one arm; measure the mean outcome."""

    @one_blas_thread
    def __init__(self, outcome: str, arm: str, basis: Basis, data: OutcomeData, robust: bool = False,
                 bounded: bool = False) -> None:
        prep = prepare(basis, data, arm, outcome)
        self._init_common(arm, outcome, basis, prep)
        y = _outcome_values(data, arm, outcome)
        check_rank(prep.X, prep.names, arm, outcome, prep.w)
        D = np.column_stack([np.ones(self.n_), prep.X])
        w = prep.w
        self.param_names_ = ("intercept",) + prep.names
        sw = np.sqrt(w)
        beta = np.linalg.lstsq(D * sw[:, None], y * sw, rcond=None)[0]
        resid = y - D @ beta
        k = D.shape[1]
        rss = float(w @ resid ** 2)
        dof = w.sum() - k
        if dof <= 0:
            raise FulcrumError(f"outcome '{outcome}', arm '{arm}': too few patients for {k} model terms.",
                               hint="Use fewer adjustment covariates or a linear shape for the index.")
        self.sigma2_ = rss / dof
        bread = inverse((D.T * w) @ D)
        self.params_, self.n_events_, self.iterations_, self.converged_ = beta, None, 1, True
        self.loglik_ = float(-0.5 * w.sum() * (np.log(2 * np.pi * rss / w.sum()) + 1))
        self.cov_ = self.sigma2_ * bread
        self.cov_kind_ = "model"
        if robust or bounded:
            self.robust_ = True
            if prep.cluster is None and not prep.weighted:
                h = np.einsum("ij,jk,ik->i", D, bread, D)
                self.cov_ = sandwich(bread, D * (resid / (1 - h))[:, None], w, None)
                self.cov_kind_ = "HC3"
            else:
                self.cov_ = sandwich(bread, D * resid[:, None], w, prep.cluster)
                self.cov_kind_ = "cluster" if prep.cluster is not None else "HC0"
        why = " (bounded outcome)" if bounded else ""
        cov = f"; {self.cov_kind_} sandwich standard errors{why}" if self.robust_ else ""
        self.method_ = (f"Linear regression in arm '{arm}', {self._shape_words()}{self._held_at()}{cov}; "
                        "mean outcome.")

    restricted_words = "a linear model with arm-specific intercepts and residual variances"

    def likelihood(self, d: OutcomeData, kernel=None) -> ArmLikelihood:
        """The normal log-likelihood in (coefficients, log sigma), at the maximum-likelihood sigma."""
        D, w = self._design_of(d)
        y = np.asarray(d.y, float)
        rss = float(w @ (y - D @ self.params_) ** 2)
        return ArmLikelihood(gaussian_loglik(D, y, w), np.r_[self.params_, 0.5 * math.log(rss / w.sum())],
                             np.arange(1, self.basis.n_columns + 1))

    def measure(self, x: np.ndarray) -> np.ndarray:
        return self._eta(x)[0]

    def measure_var(self, x: np.ndarray) -> np.ndarray:
        return quad_form(self._design(x), self.cov_)


def _outcome_values(data: OutcomeData, arm: str, outcome: str) -> np.ndarray:
    if data.y is None:
        raise FulcrumError(f"outcome '{outcome}', arm '{arm}': the outcome values are missing.",
                           hint="Pass complete cases for this outcome.")
    y = np.asarray(data.y, float).reshape(-1)
    bad = np.flatnonzero(~np.isfinite(y))
    if len(bad):
        raise FulcrumError(f"outcome '{outcome}', arm '{arm}': the outcome has missing or non-numeric values.",
                           rows=bad + 1, hint="Drop or fill these rows before fitting.")
    return y

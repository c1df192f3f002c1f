"""Weibull accelerated failure time per arm: smooth survival curves along the index.

log T = mu(x) + W / rho with W standard minimum-extreme-value: S(t | x) = exp(-(t / exp(mu))^rho).
Parameters: log-scale intercept, index and covariate coefficients (on mu), then log rho. Maximum
likelihood by Newton-Raphson with the analytic gradient and Hessian; delta-method variances use a
central-difference Jacobian of the measure.
"""
from __future__ import annotations

import numpy as np
from scipy.special import gamma as gamma_fn, gammainc

from ..errors import FulcrumError
from .base import ArmLikelihood, Basis, OutcomeData, numerical_jacobian
from .common import (ArmFit, at_risk_warning, check_rank, events_per_term_warning, inverse, newton,
                     one_blas_thread, prepare, quad_form, sandwich)
from .cox import survival_arrays


def _pieces(D: np.ndarray, logt: np.ndarray, params: np.ndarray):
    s = params[-1]
    rho = np.exp(s)
    z = rho * (logt - D @ params[:-1])
    return s, rho, z, np.exp(z)


def weibull_loglik(D: np.ndarray, logt: np.ndarray, d: np.ndarray, w: np.ndarray):
    """fun(params) -> (loglik, gradient, Hessian) for the Weibull AFT model on design D."""
    def fun(params: np.ndarray):
        s, rho, z, ez = _pieces(D, logt, params)
        if not np.all(np.isfinite(ez)):
            return -np.inf, None, None
        ll = float(w @ (d * (s + z - logt) - ez))
        dmu = rho * (ez - d)
        ds = d + (d - ez) * z
        g = np.r_[D.T @ (w * dmu), w @ ds]
        hmm = -rho ** 2 * ez
        hms = rho * (ez - d) + rho * ez * z
        hss = (d - ez) * z - ez * z ** 2
        k = D.shape[1]
        H = np.empty((k + 1, k + 1))
        H[:k, :k] = (D.T * (w * hmm)) @ D
        H[:k, k] = H[k, :k] = D.T @ (w * hms)
        H[k, k] = w @ hss
        return ll, g, H
    return fun


class WeibullFit(ArmFit):
    """A fitted per-arm Weibull AFT model; measure 'survival' at the horizon or 'rmst' to it."""

    @one_blas_thread
    def __init__(self, outcome: str, arm: str, basis: Basis, data: OutcomeData, horizon: float,
                 measure: str = "survival", start: np.ndarray | None = None, robust: bool = False) -> None:
        prep = prepare(basis, data, arm, outcome)
        self._init_common(arm, outcome, basis, prep)
        t, e = survival_arrays(data, arm, outcome)
        self.horizon, self.measure_name = float(horizon), measure
        w = prep.w
        self.n_events_ = int(e[w > 0].sum())
        if self.n_events_ == 0:
            raise FulcrumError(f"outcome '{outcome}': arm '{arm}' has no events, so a Weibull model cannot be "
                               "fitted.", hint="Check the event coding.")
        check_rank(prep.X, prep.names, arm, outcome, w)
        D = np.column_stack([np.ones(self.n_), prep.X])
        k = D.shape[1]
        self.param_names_ = ("intercept",) + prep.names + ("log shape",)
        logt = np.log(t)
        fun = weibull_loglik(D, logt, e, w)
        if start is None or np.shape(start) != (k + 1,) or not np.isfinite(fun(np.asarray(start, float))[0]):
            start = np.r_[np.log((w @ t) / (w @ e)), np.zeros(k)]
        params, ll, g, H, it, ok = newton(fun, np.asarray(start, float))
        self.params_, self.loglik_, self.iterations_ = params, ll, it
        self.cov_ = inverse(-H)
        if robust:
            _, rho, z, ez = _pieces(D, logt, params)
            scores = np.column_stack([D * (rho * (ez - e))[:, None], e + (e - ez) * z])
            self.cov_ = sandwich(self.cov_, scores, w, prep.cluster)
            self.robust_ = True
        self.converged_ = ok
        if not self.converged_:
            self.warnings_.append(f"The Weibull model in arm '{arm}' did not converge; its estimates are unreliable.")
        self.warnings_ += events_per_term_warning(self.n_events_, k, arm)
        if self.horizon > t.max():
            self.warnings_.append(f"The horizon {self.horizon:g} lies beyond the last follow-up time in arm "
                                  f"'{arm}' ({t.max():g}); the Weibull curve extrapolates there.")
        self.warnings_ += at_risk_warning(t, w, self.horizon, arm)
        self.method_ = (f"Weibull accelerated failure time model in arm '{arm}', {self._shape_words()}"
                        f"{self._held_at()}{self._cov_words()}; "
                        f"{'survival probability' if measure == 'survival' else 'restricted mean survival'} "
                        f"at {self.horizon:g}.")

    restricted_words = "a Weibull model with arm-specific intercept and shape"

    def likelihood(self, d: OutcomeData, kernel=None) -> ArmLikelihood:
        """The Weibull log-likelihood; the index terms follow the intercept."""
        prep = prepare(self.basis, d, self.arm, self.outcome)
        t, e = survival_arrays(d, self.arm, self.outcome)
        D = np.column_stack([np.ones(len(prep.w)), prep.X])
        return ArmLikelihood(weibull_loglik(D, np.log(t), e, prep.w), self.params_,
                             np.arange(1, self.basis.n_columns + 1))

    def _cumhaz(self, x: np.ndarray, params: np.ndarray) -> np.ndarray:
        mu = params[0] + self.rows(x) @ params[1:-1]
        return np.exp(np.exp(params[-1]) * (np.log(self.horizon) - mu))

    def _rmst_value(self, x: np.ndarray, params: np.ndarray) -> np.ndarray:
        lam = np.exp(params[0] + self.rows(x) @ params[1:-1])
        rho = np.exp(params[-1])
        return lam * gamma_fn(1 + 1 / rho) * gammainc(1 / rho, (self.horizon / lam) ** rho)

    def _with_var(self, f, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        x = np.asarray(x, float)
        return f(x, self.params_), quad_form(numerical_jacobian(f, self.params_, x), self.cov_)

    def survival_at(self, x: np.ndarray, times: np.ndarray) -> np.ndarray:
        """S(t | x) for every x (rows) and t (columns)."""
        mu = self.params_[0] + self.rows(x) @ self.params_[1:-1]
        rho = np.exp(self.params_[-1])
        return np.exp(-np.exp(rho * (np.log(np.asarray(times, float))[None, :] - mu[:, None])))

    def cumulative_hazard(self, x: np.ndarray) -> np.ndarray:
        """H(horizon | x) = (horizon / exp(mu(x)))^rho."""
        return self._cumhaz(np.asarray(x, float), self.params_)

    def cumulative_hazard_var(self, x: np.ndarray) -> np.ndarray:
        return self._with_var(self._cumhaz, x)[1]

    def rmst(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Restricted mean survival to the horizon and its delta-method variance."""
        return self._with_var(self._rmst_value, x)

    def measure(self, x: np.ndarray) -> np.ndarray:
        if self.measure_name == "rmst":
            return self._rmst_value(np.asarray(x, float), self.params_)
        return np.exp(-self.cumulative_hazard(x))

    def measure_link(self) -> tuple[str, float | None]:
        """Survival on the log cumulative hazard scale (the model's own); RMST as a share of the horizon, logit."""
        return ("logit", self.horizon) if self.measure_name == "rmst" else ("cloglog", 1.0)

    def measure_var(self, x: np.ndarray) -> np.ndarray:
        if self.measure_name == "rmst":
            return self.rmst(x)[1]
        return np.exp(-2 * self.cumulative_hazard(x)) * self.cumulative_hazard_var(x)

"""Cox proportional hazards per arm: survival or restricted mean survival at a horizon along the index.

Coefficients by Newton-Raphson on the Efron partial likelihood (cox_kernel.py). The baseline is
Breslow's estimator, dH0(t_j) = (weighted events at t_j) / (weighted risk-set sum of exp(eta)), the
same increments lifelines reports (not the Efron-adjusted increments of R's survfit). Variances of
survival and RMST follow Tsiatis: baseline increments treated as uncorrelated given beta (variance
dN/S0^2), plus the coefficient part through the derivative of the baseline with respect to beta; the
coefficient part uses cov_, so it is robust when the fit is.
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from ..errors import FulcrumError
from .base import ArmLikelihood, Basis, OutcomeData
from .common import (ArmFit, at_risk_warning, check_rank, effect_size, events_per_term_warning, inverse,
                     linear_pair, newton, one_blas_thread, prepare, quad_form, sandwich)
from .cox_kernel import CoxKernel

PH_ALPHA = 0.01
SEPARATION_SIZE = 10.0
CHUNK = 2_000_000


def survival_arrays(data: OutcomeData, arm: str, outcome: str) -> tuple[np.ndarray, np.ndarray]:
    """Checked follow-up times (positive) and 0/1 events."""
    for what, v in (("time", data.time), ("event", data.event)):
        if v is None:
            raise FulcrumError(f"outcome '{outcome}', arm '{arm}': the {what} column is missing.",
                               hint="Pass complete cases with time and event.")
    t = np.asarray(data.time, float).reshape(-1)
    e = np.asarray(data.event, float).reshape(-1)
    bad = np.flatnonzero(~np.isfinite(t) | (t <= 0))
    if len(bad):
        raise FulcrumError(f"outcome '{outcome}', arm '{arm}': follow-up times must be positive numbers.",
                           column="time", rows=bad + 1, hint="Fix or drop rows with zero, negative or missing times.")
    bad = np.flatnonzero(~np.isin(e, (0.0, 1.0)))
    if len(bad):
        raise FulcrumError(f"outcome '{outcome}', arm '{arm}': the event column must hold 1 (event) or 0 "
                           "(censored).", column="event", rows=bad + 1, hint="Recode the event column as 0/1.")
    return t, e


class CoxFit(ArmFit):
    """A fitted per-arm Cox model; measure is 'survival' (probability event-free at horizon) or 'rmst'.

    baseline_times_ / baseline_cumhaz_: the Breslow cumulative hazard at every event time, for a
    patient at the arm's (weighted) covariate means `mean_` (as lifelines reports it).
    """

    @one_blas_thread
    def __init__(self, outcome: str, arm: str, basis: Basis, data: OutcomeData, horizon: float,
                 measure: str = "survival", start: np.ndarray | None = None, robust: bool = False,
                 checks: bool = True) -> None:
        prep = prepare(basis, data, arm, outcome)
        self._init_common(arm, outcome, basis, prep)
        t, e = survival_arrays(data, arm, outcome)
        self.horizon, self.measure_name = float(horizon), measure
        self.param_names_ = prep.names
        self.n_events_ = int(e[prep.w > 0].sum())
        if self.n_events_ == 0:
            raise FulcrumError(f"outcome '{outcome}': arm '{arm}' has no events, so a Cox model cannot be fitted.",
                               hint="Check the event coding, or compare this outcome with a longer follow-up.")
        check_rank(prep.X, prep.names, arm, outcome, prep.w)
        k = CoxKernel(t, e, prep.X, prep.w)
        self.mean_ = k.mean
        p = prep.X.shape[1]
        warm = start is not None and np.shape(start) == (p,) and np.all(np.isfinite(start))
        try:
            beta, ll, g, H, it, ok = newton(k.evaluate, np.asarray(start, float) if warm else np.zeros(p))
        except ValueError:
            beta, ll, g, H, it, ok = newton(k.evaluate, np.zeros(p))
        self.params_, self.loglik_, self.iterations_, self.converged_ = beta, ll, it, ok
        self.score_, self.hessian_ = g, H  # at params_: the effect-modification test starts from them
        model_cov = inverse(-H)
        self.cov_ = model_cov
        if robust:
            self.cov_ = sandwich(model_cov, k.score_residuals(beta), prep.w, prep.cluster)
            self.robust_ = True
        self._baseline(k, beta)
        if effect_size(beta, prep.X, prep.w, basis.n_columns) > SEPARATION_SIZE or not ok:
            self.converged_ = False
            self.warnings_.append(f"The Cox model in arm '{arm}' did not settle: coefficients grow without bound "
                                  "(some values predict every event or none); its estimates are unreliable.")
        self.warnings_ += events_per_term_warning(self.n_events_, p, arm)
        self._horizon_warnings(t, prep.w)
        if checks:
            self._ph_check(k, beta, model_cov)
        self.method_ = (f"Cox proportional hazards model in arm '{arm}' (Efron ties, Breslow baseline), "
                        f"{self._shape_words()}{self._held_at()}{self._cov_words()}; "
                        f"{'survival probability' if measure == 'survival' else 'restricted mean survival'} "
                        f"at {self.horizon:g}.")

    def _baseline(self, k: CoxKernel, beta: np.ndarray) -> None:
        self._set_baseline(*k.baseline(beta))

    def _set_baseline(self, times: np.ndarray, dH: np.ndarray, v: np.ndarray, xbar: np.ndarray) -> None:
        """Keep the Breslow increments (CoxKernel.baseline) up to the horizon, and the whole cumulative hazard."""
        keep = times <= self.horizon
        self.event_times_, self.dH_, self.dH_var_, self.xbar_ = times[keep], dH[keep], v[keep], xbar[keep]
        self.baseline_times_, self.baseline_cumhaz_ = times, np.cumsum(dH)
        self.H0h_ = float(self.dH_.sum())
        self.Vh_ = float(self.dH_var_.sum())
        self.Qh_ = self.dH_ @ self.xbar_ if len(self.dH_) else np.zeros(xbar.shape[1])

    def _horizon_warnings(self, t: np.ndarray, w: np.ndarray) -> None:
        if self.horizon > t.max():
            self.warnings_.append(f"The horizon {self.horizon:g} lies beyond the last follow-up time in arm "
                                  f"'{self.arm}' ({t.max():g}); its survival curve is carried flat from there.")
        self.warnings_ += at_risk_warning(t, w, self.horizon, self.arm)
        if self.H0h_ == 0:
            self.warnings_.append(f"No events occur by the horizon {self.horizon:g} in arm '{self.arm}'; survival "
                                  "there is estimated as 1 with no spread.")

    def _ph_check(self, k: CoxKernel, beta: np.ndarray, V: np.ndarray) -> None:
        """Scaled Schoenfeld residuals against the rank of event time, one chi-square (1 df) per term."""
        s = k.schoenfeld(beta)
        D = len(s)
        if D < 3:
            return
        scaled = D * s @ V
        g = np.arange(1, D + 1, dtype=float)
        g -= g.mean()
        chi2 = (g @ scaled) ** 2 / (D * np.diag(V) * (g @ g))
        p = stats.chi2.sf(chi2, 1)
        self.checks_["proportional_hazards"] = {n: (float(c), float(q)) for n, c, q in
                                                zip(self.param_names_, chi2, p)}
        bad = [f"{n} (p = {q:.2g})" for n, q in zip(self.param_names_, p) if q < PH_ALPHA]
        if bad:
            self.warnings_.append(f"Proportional hazards look doubtful in arm '{self.arm}' for the terms: "
                                  f"{', '.join(bad)} (scaled Schoenfeld residuals against the rank of event time).")

    # ---- likelihood, for the trust checks (base.Fitted) ---------------------------------
    restricted_words = "a Cox model stratified by arm (arm-specific baseline hazards)"

    def likelihood_kernel(self, d: OutcomeData) -> CoxKernel:
        """The risk-set bookkeeping of this fit, rebuilt from its data."""
        prep = prepare(self.basis, d, self.arm, self.outcome)
        t, e = survival_arrays(d, self.arm, self.outcome)
        return CoxKernel(t, e, prep.X, prep.w)

    def likelihood(self, d: OutcomeData, kernel: CoxKernel | None = None) -> ArmLikelihood:
        """The Efron partial log-likelihood; the index terms are the first basis columns."""
        k = kernel if kernel is not None else self.likelihood_kernel(d)
        return ArmLikelihood(k.evaluate, self.params_, np.arange(self.basis.n_columns))

    def own_likelihood(self) -> tuple | None:
        """Kept from the last Newton step, so the effect-modification test needs no new pass over the rows."""
        h = getattr(self, "hessian_", None)
        return None if h is None else (self.loglik_, self.score_, h)

    def at_horizon(self, horizon: float, d: OutcomeData, kernel: CoxKernel | None = None,
                   baseline: tuple | None = None) -> CoxFit:
        """Read at another horizon: the Breslow baseline up to it from `baseline` (the whole of
        CoxKernel.baseline at params_, which serves every horizon) or from `kernel`."""
        view = super().at_horizon(horizon, d)
        if baseline is None:
            baseline = (kernel or self.likelihood_kernel(d)).baseline(self.params_)
        view._set_baseline(*baseline)
        return view

    # ---- predictions -------------------------------------------------------------------
    def _centred(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        Xc = self.rows(x) - self.mean_
        return Xc, np.exp(Xc @ self.params_)

    def cumulative_hazard(self, x: np.ndarray) -> np.ndarray:
        """H(horizon | x)."""
        _, r = self._centred(x)
        return r * self.H0h_

    def cumulative_hazard_var(self, x: np.ndarray) -> np.ndarray:
        """Var H(horizon | x): r^2 sum dN/S0^2 plus q'Vq with q = dH/dbeta (Tsiatis)."""
        Xc, r = self._centred(x)
        q = r[:, None] * (self.H0h_ * Xc - self.Qh_)
        return r ** 2 * self.Vh_ + quad_form(q, self.cov_)

    def survival_at(self, x: np.ndarray, times: np.ndarray) -> np.ndarray:
        """S(t | x) for every x (rows) and t (columns), Breslow step function."""
        _, r = self._centred(x)
        cum = np.r_[0.0, self.baseline_cumhaz_]
        idx = np.searchsorted(self.baseline_times_, np.asarray(times, float), side="right")
        return np.exp(-np.outer(r, cum[idx]))

    def measure(self, x: np.ndarray) -> np.ndarray:
        if self.measure_name == "rmst":
            return self.rmst(x)[0]
        return np.exp(-self.cumulative_hazard(x))

    def measure_link(self) -> tuple[str, float | None]:
        """Survival on the log cumulative hazard scale (the model's own); RMST as a share of the horizon, logit."""
        return ("logit", self.horizon) if self.measure_name == "rmst" else ("cloglog", 1.0)

    def measure_var(self, x: np.ndarray) -> np.ndarray:
        if self.measure_name == "rmst":
            return self.rmst(x)[1]
        return np.exp(-2 * self.cumulative_hazard(x)) * self.cumulative_hazard_var(x)

    def rmst(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """RMST to the horizon and its delta-method variance, in chunks of index values."""
        Xc, r = self._centred(x)
        edges = np.r_[0.0, self.event_times_, self.horizon]
        width = np.diff(edges)
        H0 = np.r_[0.0, np.cumsum(self.dH_)]
        Q = np.vstack([np.zeros((1, len(self.params_))), np.cumsum(self.dH_[:, None] * self.xbar_, axis=0)])
        est, var = np.empty(len(r)), np.empty(len(r))
        step = max(1, CHUNK // len(width))
        for a in range(0, len(r), step):
            rs, Xs = r[a:a + step], Xc[a:a + step]
            SW = np.exp(-np.outer(rs, H0)) * width
            est[a:a + step] = SW.sum(axis=1)
            tail = np.cumsum(SW[:, ::-1], axis=1)[:, ::-1][:, 1:]
            base = rs ** 2 * (tail ** 2 @ self.dH_var_)
            grad = -rs[:, None] * ((SW @ H0)[:, None] * Xs - SW @ Q)
            var[a:a + step] = base + quad_form(grad, self.cov_)
        return est, var

    def linear_terms(self) -> tuple[np.ndarray, np.ndarray] | None:
        """log H(horizon | x) = c0 + c1 x; survival is exp(-exp(L)), the same decreasing map in both arms."""
        if not self.basis.is_linear or self.measure_name != "survival" or self.H0h_ <= 0:
            return None
        Xc0 = self.rows(np.zeros(1))[0] - self.mean_
        c0 = np.log(self.H0h_) + Xc0 @ self.params_
        c1 = self.params_[0]
        g0 = Xc0 - self.Qh_ / self.H0h_
        e1 = np.eye(len(self.params_))[0]
        cov = linear_pair(self.cov_, g0, e1)
        cov[0, 0] += self.Vh_ / self.H0h_ ** 2
        return np.array([c0, c1]), cov

"""Proportional odds (cumulative logit) per arm: logit P(Y <= k) = theta_k - eta, levels best first.

Higher eta means worse levels. Parameters are the natural cut-points theta_1 < ... < theta_{K-1}
followed by the coefficients; the log-likelihood is concave in them (Pratt 1981), so Newton-Raphson
with step halving that refuses any step breaking the order converges from the marginal start.
Levels nobody in the arm reached are left out of the fit and given probability 0.
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from ..errors import FulcrumError
from .base import ArmLikelihood, Basis, OutcomeData
from .common import (ArmFit, check_rank, effect_size, expit, inverse, linear_pair, newton, one_blas_thread, prepare,
                     quad_form, sandwich)
from .glm import SEPARATION_SIZE, fit_logistic

PO_ALPHA = 0.01


def _cell_terms(theta: np.ndarray, eta: np.ndarray, y: np.ndarray):
    """Per row, with a = theta_y - eta and b = theta_{y-1} - eta (infinite at the ends): F(a), F(b),
    their densities and the cell probability F(a) - F(b) = F(a) F(-b) (1 - exp(b - a)), which keeps
    full precision in both tails."""
    cuts = np.concatenate(([-np.inf], theta, [np.inf]))
    up = cuts[1:][y] - eta
    lo = cuts[:-1][y] - eta
    Fa, Fnb = expit(up), expit(-lo)
    Fb = 1.0 - Fnb
    gap = -np.expm1(-np.diff(cuts))
    return Fa, Fb, Fa * (1 - Fa), Fb * Fnb, Fa * Fnb * gap[y]


def ordinal_loglik(X: np.ndarray, y: np.ndarray, w: np.ndarray, K: int):
    """fun(params) -> (loglik, gradient, Hessian) with params = (theta_1..theta_{K-1}, beta); the last
    evaluation is kept, so checking a start value and starting Newton from it cost one pass.

    Terms of a missing cut (the top level has no upper cut, the bottom no lower one) are exactly 0,
    so per-level sums run over every row: bin y holds the upper cut theta_y, bin y - 1 the lower.
    """
    m = K - 1
    Xt = np.ascontiguousarray(X.T)

    def upper(v):
        return np.bincount(y, weights=v, minlength=K)[:m]

    def lower(v):
        return np.bincount(y, weights=v, minlength=K)[1:]

    last: list = [None, None]

    def fun(params: np.ndarray):
        if last[0] is not None and np.array_equal(last[0], params):
            return last[1]
        last[0], last[1] = np.array(params, float), _evaluate(params)
        return last[1]

    def _evaluate(params: np.ndarray):
        theta, beta = params[:m], params[m:]
        if np.any(np.diff(theta) <= 0):
            return -np.inf, None, None
        eta = beta @ Xt
        Fa, Fb, fa, fb, p = _cell_terms(theta, eta, y)
        if np.any(p <= 0):
            return -np.inf, None, None
        ll = float(w @ np.log(p))
        da, db = fa / p, -fb / p
        faa = fa * (1 - 2 * Fa) / p - da ** 2
        fbb = -fb * (1 - 2 * Fb) / p - db ** 2
        fab = -da * db
        g = np.concatenate((upper(w * da) + lower(w * db), -(Xt @ (w * (da + db)))))
        H = np.zeros((len(g), len(g)))
        H[:m, :m] = np.diag(upper(w * faa) + lower(w * fbb))
        off = lower(w * fab)[:m - 1]
        H[np.arange(1, m), np.arange(m - 1)] = off
        H[np.arange(m - 1), np.arange(1, m)] = off
        ca, cb = w * (faa + fab), w * (fab + fbb)
        cross = -np.stack([upper(ca * col) + lower(cb * col) for col in Xt], axis=1)
        H[:m, m:] = cross
        H[m:, :m] = cross.T
        H[m:, m:] = (Xt * (w * (faa + 2 * fab + fbb))) @ Xt.T
        return ll, g, H

    return fun


def ordinal_scores(X: np.ndarray, y: np.ndarray, theta: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """Per-row gradients of the log-likelihood (unweighted), for sandwich covariances."""
    m = len(theta)
    _, _, fa, fb, p = _cell_terms(theta, X @ beta, y)
    da, db = fa / p, -fb / p
    S = np.zeros((len(y), m + X.shape[1]))
    top, bot = np.flatnonzero(y < m), np.flatnonzero(y > 0)
    S[top, y[top]] += da[top]
    S[bot, y[bot] - 1] += db[bot]
    S[:, m:] = -X * (da + db)[:, None]
    return S


class OrdinalFit(ArmFit):
    """A fitted per-arm proportional odds model; measure = P(a favourable level)."""

    @one_blas_thread
    def __init__(self, outcome: str, arm: str, basis: Basis, data: OutcomeData, levels: tuple[str, ...],
                 favourable: tuple[str, ...], start: np.ndarray | None = None, robust: bool = False,
                 checks: bool = True) -> None:
        prep = prepare(basis, data, arm, outcome)
        self._init_common(arm, outcome, basis, prep)
        self.levels = tuple(levels)
        K = len(levels)
        fav = np.isin(np.arange(K), [levels.index(f) for f in favourable])
        self.favourable_mask_ = fav
        y = self._codes(data, K)
        used = prep.w > 0
        present = np.bincount(y[used], minlength=K) > 0
        self.observed_ = np.flatnonzero(present)
        if len(self.observed_) < 2:
            raise FulcrumError(f"outcome '{outcome}': every patient in arm '{arm}' is in the same level "
                               f"('{levels[self.observed_[0]]}'), so no model can be fitted.",
                               hint="Check the level coding and `levels`, or leave this outcome out for this comparison.")
        missing = [levels[k] for k in range(K) if not present[k]]
        if missing:
            self.warnings_.append(f"No patient in arm '{arm}' is in level(s) {', '.join(missing)}; the model uses "
                                  "the levels seen in this arm and gives the others probability 0.")
        yk = np.searchsorted(self.observed_, y)
        yk = np.where(used, yk, 0)
        Ko = len(self.observed_)
        m = Ko - 1
        check_rank(prep.X, prep.names, arm, outcome, prep.w)
        self.param_names_ = tuple(f"cut {levels[self.observed_[j]]}|{levels[self.observed_[j + 1]]}"
                                  for j in range(m)) + prep.names
        fun = ordinal_loglik(prep.X, yk, prep.w, Ko)
        params0 = self._start(yk, prep.w, Ko, prep.X.shape[1], start, fun)
        params, ll, g, H, it, ok = newton(fun, params0)
        self.params_, self.loglik_, self.iterations_ = params, ll, it
        self.cov_ = inverse(-H)
        if robust:
            self.cov_ = sandwich(self.cov_, ordinal_scores(prep.X, yk, params[:m], params[m:]), prep.w, prep.cluster)
            self.robust_ = True
        spread = np.diff(params[:m]).max() if m > 1 else 0.0
        separated = (effect_size(params[m:], prep.X, prep.w, basis.n_columns) > SEPARATION_SIZE
                     or spread > 4 * SEPARATION_SIZE)
        self.converged_ = ok and not separated
        if not self.converged_:
            self.warnings_.append(f"The proportional odds model in arm '{arm}' did not settle: some index values "
                                  "predict the level perfectly (separation), so its estimates are unreliable.")
        self.n_events_ = None
        if checks and m >= 2:
            self._po_check(prep.X, yk, prep.w, params)
        self.method_ = (f"Proportional odds (cumulative logit) model in arm '{arm}', {self._shape_words()}"
                        f"{self._held_at()}{self._cov_words()}; probability of "
                        f"{' or '.join(favourable)}.")

    def _codes(self, data: OutcomeData, K: int) -> np.ndarray:
        if data.y is None:
            raise FulcrumError(f"outcome '{self.outcome}', arm '{self.arm}': the level codes are missing.",
                               hint="Pass complete cases for this outcome.")
        raw = np.asarray(data.y, float).reshape(-1)
        bad = np.flatnonzero(~np.isfinite(raw) | (raw != np.round(raw)) | (raw < 0) | (raw > K - 1))
        if len(bad):
            raise FulcrumError(f"outcome '{self.outcome}', arm '{self.arm}': level codes must be whole numbers "
                               f"0 to {K - 1} (best first).", rows=bad + 1, hint="Map each level name to its position.")
        return raw.astype(int)

    @staticmethod
    def _start(y, w, K, p, start, fun) -> np.ndarray:
        if start is not None and np.shape(start) == (K - 1 + p,) and np.isfinite(fun(np.asarray(start, float))[0]):
            return np.asarray(start, float)
        cum = np.cumsum(np.bincount(y, weights=w, minlength=K))[:-1] / w.sum()
        cum = np.clip(cum, 1e-6, 1 - 1e-6)
        return np.r_[np.log(cum / (1 - cum)), np.zeros(p)]

    def _po_check(self, X: np.ndarray, y: np.ndarray, w: np.ndarray, params: np.ndarray) -> None:
        """Brant's Wald test: the slopes of the K-1 binary logits I(Y > k) are equal.

        Each binary logit starts from the ordinal fit, logit P(Y > k) = eta - theta_k.
        """
        D = np.column_stack([np.ones(len(y)), X])
        p = X.shape[1]
        m = len(params) - p
        betas, probs, infos = [], [], []
        for k in range(m):
            yb = (y > k).astype(float)
            start = np.r_[-params[k], params[m:]]
            beta, _, H, _, ok, separated = fit_logistic(D, yb, w, start, self.basis.n_columns)
            if not ok or separated:
                self.checks_["proportional_odds"] = {"chi2": None, "df": None, "p": None,
                                                     "note": f"not run: the binary logit at cut {k + 1} separates"}
                return
            betas.append(beta)
            probs.append(expit(D @ beta))
            infos.append(inverse(-H))
        V = np.zeros((m * p, m * p))
        for k in range(m):
            for j in range(k, m):
                mid = probs[j] * (1 - probs[k])
                blk = infos[k] @ ((D.T * (w * mid)) @ D) @ infos[j]
                V[k * p:(k + 1) * p, j * p:(j + 1) * p] = blk[1:, 1:]
                V[j * p:(j + 1) * p, k * p:(k + 1) * p] = blk[1:, 1:].T
        b = np.concatenate([bb[1:] for bb in betas])
        C = np.zeros(((m - 1) * p, m * p))
        for k in range(1, m):
            C[(k - 1) * p:k * p, :p] = np.eye(p)
            C[(k - 1) * p:k * p, k * p:(k + 1) * p] = -np.eye(p)
        diff = C @ b
        chi2 = float(diff @ np.linalg.pinv(C @ V @ C.T) @ diff)
        dof = (m - 1) * p
        pval = float(stats.chi2.sf(chi2, dof))
        self.checks_["proportional_odds"] = {"chi2": chi2, "df": dof, "p": pval}
        if pval < PO_ALPHA:
            self.warnings_.append(f"Proportional odds look doubtful in arm '{self.arm}' (Brant's test comparing "
                                  f"the binary logits at each cut: chi-square {chi2:.1f} on {dof} df, "
                                  f"p = {pval:.2g}).")

    # ---- predictions -------------------------------------------------------------------
    restricted_words = "a proportional odds model with arm-specific cut-points"

    def likelihood(self, d: OutcomeData, kernel=None) -> ArmLikelihood:
        """The proportional odds log-likelihood over the levels this arm reached; the index terms follow the
        cut-points."""
        prep = prepare(self.basis, d, self.arm, self.outcome)
        yk = np.searchsorted(self.observed_, np.asarray(d.y, float).astype(int))
        m = len(self.observed_) - 1
        q = self.basis.n_columns
        return ArmLikelihood(ordinal_loglik(prep.X, yk, prep.w, m + 1), self.params_, np.arange(m, m + q))

    def _parts(self, x: np.ndarray):
        R = self.rows(x)
        m = len(self.observed_) - 1
        eta = R @ self.params_[m:]
        F = expit(self.params_[:m][None, :] - eta[:, None])
        return R, m, F

    def distribution(self, x: np.ndarray) -> np.ndarray:
        _, m, F = self._parts(x)
        cum = np.hstack([np.zeros((len(F), 1)), F, np.ones((len(F), 1))])
        out = np.zeros((len(F), len(self.levels)))
        out[:, self.observed_] = np.diff(cum, axis=1)
        return out

    def distribution_jacobian(self, x: np.ndarray) -> np.ndarray:
        """d P(level) / d params_: (len(x), K, len(params_)), analytic."""
        R, m, F = self._parts(x)
        f = F * (1 - F)
        n, q = len(F), len(self.params_)
        Jc = np.zeros((n, m + 2, q))
        Jc[:, 1:m + 1, :m] = f[:, :, None] * np.eye(m)[None]
        Jc[:, 1:m + 1, m:] = -f[:, :, None] * R[:, None, :]
        out = np.zeros((n, len(self.levels), q))
        out[:, self.observed_, :] = np.diff(Jc, axis=1)
        return out

    def measure(self, x: np.ndarray) -> np.ndarray:
        return self.distribution(x)[:, self.favourable_mask_].sum(axis=1)

    def measure_link(self) -> tuple[str, float | None]:
        return ("logit", 1.0)

    def measure_var(self, x: np.ndarray) -> np.ndarray:
        G = self.distribution_jacobian(x)[:, self.favourable_mask_, :].sum(axis=1)
        return quad_form(G, self.cov_)

    def linear_terms(self) -> tuple[np.ndarray, np.ndarray] | None:
        """logit P(favourable) = theta_c - eta = c0 + c1 x, when the favourable levels lead the order."""
        if not self.basis.is_linear:
            return None
        c = int(self.favourable_mask_.sum())
        if not self.favourable_mask_[:c].all():
            return None
        j = int(np.searchsorted(self.observed_, c)) - 1
        m = len(self.observed_) - 1
        if j < 0 or j >= m:
            return None
        q = len(self.params_)
        g0 = np.zeros(q)
        g0[j] = 1.0
        g0[m:] = -self.rows(np.zeros(1))[0]
        g1 = np.zeros(q)
        g1[m] = -1.0
        return np.array([g0 @ self.params_, -self.params_[m]]), linear_pair(self.cov_, g0, g1)

"""Exact, vectorised Cox partial likelihood with Efron ties: one sort, segment sums, cumulative sums.

Weights and tied events: when every weight is a whole number, weights are frequencies and the fit
equals the fit to duplicated rows, ties included (a tied set with total event weight D takes D Efron
steps), so bootstrap replicates may be run as multinomial weights. Otherwise the tie correction
follows R's survival package and lifelines: a tied set of d event rows takes d steps, each carrying
the mean weight of the tied events. Rows with weight 0 are left out. Every Efron sum over the steps
is reduced to a few per-time scalars, so no pass builds an array larger than (terms x rows), and
covariates are held transposed so passes run over contiguous memory.
"""
from __future__ import annotations

import numpy as np

MAX_STEPS_PER_ROW = 50


def _tail_sums(v: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Sums of v[..., s:] for each start s (sorted ascending): segment sums then a reverse cumsum."""
    seg = np.add.reduceat(v, starts, axis=-1)
    return np.cumsum(seg[..., ::-1], axis=-1)[..., ::-1]


class CoxKernel:
    """Risk-set bookkeeping for one arm, computed once; `evaluate(beta)` is then a few passes over n rows."""

    def __init__(self, time: np.ndarray, event: np.ndarray, X: np.ndarray, w: np.ndarray) -> None:
        self.n = len(time)
        positive = w > 0
        kept = None if positive.all() else np.flatnonzero(positive)
        if kept is not None:
            time, event, X, w = time[kept], event[kept], X[kept], w[kept]
        d = event > 0
        first_events = np.concatenate((np.flatnonzero(d), np.flatnonzero(~d)))
        order = first_events[np.argsort(time[first_events], kind="stable")]
        self.order = order if kept is None else kept[order]
        t = time[order]
        self.w = w[order]
        self.mean = (w @ X) / w.sum()
        self.Xt = X.T[:, order]
        self.Xt -= self.mean[:, None]
        dth = np.flatnonzero(d[order])
        self.deaths = dth
        td = t[dth]
        first = np.r_[True, td[1:] != td[:-1]]
        tie_start = np.flatnonzero(first)
        self.row_group = np.cumsum(first) - 1
        self.event_times = td[tie_start]
        rows = np.diff(np.r_[tie_start, len(dth)])
        self.risk_row = dth[tie_start]
        bounds = np.column_stack([self.risk_row, self.risk_row + rows]).reshape(-1)
        self._tie_bounds = bounds[:-1] if bounds[-1] >= len(t) else bounds
        self.wd = np.add.reduceat(self.w[dth], tie_start)
        whole = np.all(self.w == np.round(self.w)) and self.wd.sum() <= MAX_STEPS_PER_ROW * len(t)
        self.frequency = bool(whole)
        self.steps = np.round(self.wd).astype(int) if whole else rows
        self.step_weight = np.ones(len(rows)) if whole else self.wd / rows
        self.inv = np.repeat(np.arange(len(rows)), self.steps)
        start = np.r_[0, np.cumsum(self.steps)[:-1]]
        self.c = (np.arange(len(self.inv)) - start[self.inv]) / self.steps[self.inv]
        self.k = np.searchsorted(self.event_times, t, side="right")
        self.Xd = self.Xt[:, dth]
        self.wXd = self.Xd @ self.w[dth]
        self._work: np.ndarray | None = None

    def _scaled(self, v: np.ndarray) -> np.ndarray:
        """Xt * v in one work array kept between evaluations: Newton makes many, and at a million rows fresh
        (terms x rows) arrays cost more in page faults than the arithmetic."""
        if self._work is None:
            self._work = np.empty_like(self.Xt)
        return np.multiply(self.Xt, v, out=self._work)

    def _tied(self, v: np.ndarray) -> np.ndarray:
        """Sums of v over each time's tied events (events sort first within a time)."""
        return np.add.reduceat(v, self._tie_bounds, axis=-1)[..., ::2]

    def _group(self, v: np.ndarray) -> np.ndarray:
        return np.bincount(self.inv, weights=v, minlength=len(self.wd))

    def _sums(self, beta: np.ndarray):
        eta = beta @ self.Xt
        shift = float(eta.max())
        wr = self.w * np.exp(eta - shift)
        wrx = self._scaled(wr)
        R, R1 = _tail_sums(wr, self.risk_row), _tail_sums(wrx, self.risk_row)
        T, T1 = self._tied(wr), self._tied(wrx)
        phi = R[self.inv] - self.c * T[self.inv]
        return eta, shift, wr, R1, T1, phi

    def evaluate(self, beta: np.ndarray):
        """Log partial likelihood, gradient and Hessian at beta (centred design)."""
        eta, shift, wr, R1, T1, phi = self._sums(beta)
        if not np.all(phi > 0) or not np.all(np.isfinite(R1)):
            return -np.inf, None, None
        c, wb = self.c, self.step_weight[self.inv]
        a = wb / phi
        e = a / phi
        ll = float(self.w[self.deaths] @ eta[self.deaths] - wb @ (np.log(phi) + shift))
        A, B = self._group(a), self._group(a * c)
        g = self.wXd - R1 @ A + T1 @ B
        coef = np.r_[0.0, np.cumsum(A)][self.k]
        coef[self.deaths] -= B[self.row_group]
        E0, E1, E2 = self._group(e), self._group(e * c), self._group(e * c * c)
        cross = (R1 * E1) @ T1.T
        info = (self._scaled(wr * coef) @ self.Xt.T - (R1 * E0) @ R1.T + cross + cross.T - (T1 * E2) @ T1.T)
        return ll, g, -(info + info.T) / 2.0

    def baseline(self, beta: np.ndarray):
        """Breslow increments at the centred design (X = mean): times, dH, var(dH), mean covariates per time."""
        wr = self.w * np.exp(beta @ self.Xt)
        R, R1 = _tail_sums(wr, self.risk_row), _tail_sums(self._scaled(wr), self.risk_row)
        return self.event_times, self.wd / R, self.wd / R ** 2, (R1 / R).T

    def _weighted_means(self, R1: np.ndarray, T1: np.ndarray, phi: np.ndarray, f: np.ndarray) -> np.ndarray:
        """Per time, sum over Efron steps of f_l * (R1 - c_l T1) / phi_l."""
        return R1 * self._group(f / phi) - T1 * self._group(f * self.c / phi)

    def schoenfeld(self, beta: np.ndarray) -> np.ndarray:
        """Schoenfeld residuals of the event rows in time order (Efron-averaged expected covariates)."""
        _, _, _, R1, T1, phi = self._sums(beta)
        abar = self._weighted_means(R1, T1, phi, np.ones_like(phi)) / self.steps
        return (self.Xd - abar[:, self.row_group]).T

    def score_residuals(self, beta: np.ndarray) -> np.ndarray:
        """Per-row score residuals (Lin and Wei, Efron version), unweighted, in the caller's row order.

        sum_i w_i U_i equals the score, so sum of (w_i U_i)(w_i U_i)' is the sandwich meat.
        """
        eta, shift, wr, R1, T1, phi = self._sums(beta)
        r = np.exp(eta - shift)
        inv, c, dth, own = self.inv, self.c, self.deaths, self.row_group
        a = self.step_weight[inv] / phi
        A, A2 = self._group(a), self._group(a * (1 - c))
        Bv = self._weighted_means(R1, T1, phi, a)
        B2 = self._weighted_means(R1, T1, phi, a * (1 - c))
        Acum = np.r_[0.0, np.cumsum(A)][self.k]
        Bcum = np.hstack([np.zeros((len(beta), 1)), np.cumsum(Bv, axis=1)])[:, self.k]
        Acum[dth] += (A2 - A)[own]
        Bcum[:, dth] += (B2 - Bv)[:, own]
        U = -r * (self.Xt * Acum - Bcum)
        abar = self._weighted_means(R1, T1, phi, np.ones_like(phi)) / self.steps
        U[:, dth] += self.Xd - abar[:, own]
        out = np.zeros((self.n, len(beta)))
        out[self.order] = U.T
        return out

"""Pieces every per-arm model shares: input checks, the design matrix, Newton-Raphson, sandwiches.

Weights everywhere are case weights that multiply each row's log-likelihood contribution, so
model-based fits treat them as frequency weights: integer weights act as duplicated rows (for the
Cox model too, ties included; see cox_kernel.py), and non-integer weights such as inverse-probability
weights are allowed. Robust covariances treat them as
probability weights: each row's score is multiplied by its weight before the outer product, the
usual choice for inverse-probability weighting.
"""
from __future__ import annotations

import copy
import functools
from contextlib import nullcontext
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import FulcrumError
from .base import Basis, OutcomeData

NEWTON_TOL = 1e-9
MAX_MAGNITUDE = 1e12
MIN_AT_RISK = 10
_BLAS: list = []


def one_blas_thread(init):
    """Run a model fit with BLAS on one thread: the fits are tall-skinny products, where extra BLAS threads
    only spin (and slow everything badly when the cores are busy); threadpoolctl comes with scikit-learn."""
    @functools.wraps(init)
    def wrapper(*args, **kwargs):
        with _blas_limit():
            return init(*args, **kwargs)
    return wrapper


def _blas_limit():
    if not _BLAS:
        try:
            from threadpoolctl import ThreadpoolController
            _BLAS.append(ThreadpoolController())
        except ImportError:
            _BLAS.append(None)
    return _BLAS[0].limit(limits=1, user_api="blas") if _BLAS[0] is not None else nullcontext()


@dataclass
class Prepared:
    """One arm's checked arrays: design columns (index basis then covariates) and weights."""

    X: np.ndarray
    w: np.ndarray
    names: tuple[str, ...]
    z_ref: np.ndarray
    z_names: tuple[str, ...]
    cluster: np.ndarray | None
    weighted: bool


def basis_names(basis: Basis) -> tuple[str, ...]:
    """Readable names of the index basis columns."""
    if basis.is_linear:
        return ("index",)
    return ("index",) + tuple(f"index spline {j}" for j in range(1, basis.n_columns))


def prepare(basis: Basis, data: OutcomeData, arm: str, outcome: str) -> Prepared:
    """Check one arm's data and build [basis(x), z]; z_ref defaults to this arm's weighted mean of z.

    Callers comparing two arms should pass the same z_ref to both (for example the pooled mean).
    """
    x = _sized(_finite(data.x, "the index", arm, outcome), "the index", arm, outcome)
    n = len(x)
    B = basis(x)
    z_names = tuple(data.z_names)
    if data.z is not None and np.size(data.z):
        z = np.asarray(data.z, float).reshape(n, -1)
        if not z_names:
            z_names = tuple(f"z{j + 1}" for j in range(z.shape[1]))
        for j, name in enumerate(z_names):
            _sized(_finite(z[:, j], name, arm, outcome), name, arm, outcome)
        z_ref = np.asarray(data.z_ref, float).reshape(-1) if data.z_ref is not None else None
        if z_ref is not None and len(z_ref) != z.shape[1]:
            raise FulcrumError(f"outcome '{outcome}', arm '{arm}': {len(z_ref)} reference values were given for "
                               f"{z.shape[1]} adjustment covariates.", hint="Give one reference value per covariate.")
    else:
        z, z_ref, z_names = np.zeros((n, 0)), np.zeros(0), ()
    weighted = data.weights is not None
    w = np.ones(n) if not weighted else _finite(data.weights, "the weights", arm, outcome)
    for what, v in (("outcome", data.y), ("time", data.time), ("event", data.event), ("weights", w),
                    ("cluster", data.cluster)):
        if v is not None and np.size(v) != n:
            raise FulcrumError(f"outcome '{outcome}', arm '{arm}': the {what} values number {np.size(v)}, but "
                               f"there are {n} index values.", hint="Pass one value per patient for every column.")
    bad = np.flatnonzero(w < 0)
    if len(bad):
        raise FulcrumError(f"outcome '{outcome}', arm '{arm}': case weights must not be negative.",
                           rows=bad + 1, hint="Check how the weights were made; use 0 to leave a row out.")
    if not w.sum() > 0:
        raise FulcrumError(f"outcome '{outcome}', arm '{arm}': every case weight is zero.",
                           hint="Give at least some rows a positive weight.")
    if z_ref is None:
        z_ref = (w @ z) / w.sum()
    cluster = None
    if data.cluster is not None:
        cluster = pd.factorize(np.asarray(data.cluster).reshape(-1), sort=True)[0]  # np.unique's codes, by hashing
    return Prepared(np.column_stack([B, z]), w, basis_names(basis) + z_names, z_ref, z_names, cluster, weighted)


def _finite(values: np.ndarray | None, what: str, arm: str, outcome: str) -> np.ndarray:
    if values is None:
        raise FulcrumError(f"outcome '{outcome}', arm '{arm}': {what} is missing.",
                           hint="Pass complete cases for this outcome.")
    v = np.asarray(values, float).reshape(-1)
    bad = np.flatnonzero(~np.isfinite(v))
    if len(bad):
        raise FulcrumError(f"outcome '{outcome}', arm '{arm}': {what} has missing or non-numeric values.",
                           column=what, rows=bad + 1, hint="Drop or fill these rows before fitting.")
    return v


def _sized(v: np.ndarray, what: str, arm: str, outcome: str) -> np.ndarray:
    """Refuse values so large that the fits lose their precision (e.g. a formula index such as exp(age))."""
    big = np.abs(v) > MAX_MAGNITUDE
    if big.any():
        raise FulcrumError(f"outcome '{outcome}', arm '{arm}': {what} reaches {v[np.argmax(np.abs(v))]:.3g} for "
                           f"{int(big.sum())} patient(s); values beyond {MAX_MAGNITUDE:g} in size cannot be fitted "
                           "reliably.", hint="Rescale it, for example divide by 1,000 or take log().")
    return v


def check_rank(X: np.ndarray, names: tuple[str, ...], arm: str, outcome: str, w: np.ndarray) -> None:
    """Raise naming the first design column that is constant or a combination of earlier ones.

    Works on the weighted correlation of the centred columns (an intercept or baseline is implied).
    """
    p = X.shape[1]
    n_used = int((w > 0).sum())
    if n_used <= p + 1:
        raise FulcrumError(f"outcome '{outcome}', arm '{arm}': {n_used} rows are too few for {p} model terms.",
                           hint="Use fewer adjustment covariates or a linear shape for the index.")
    m = (w @ X) / w.sum()
    Xc = X - m
    G = (Xc.T * w if np.any(w != 1.0) else Xc.T) @ Xc  # unweighted rows: the same products, one copy fewer
    sd = np.sqrt(np.clip(np.diag(G), 0.0, None))
    for j in range(p):
        resid = 1.0
        if sd[j] > 1e-12 * (1.0 + np.abs(m[j])) * np.sqrt(w.sum()) and j > 0:
            C = G[:j + 1, :j + 1] / np.outer(sd[:j + 1], sd[:j + 1])
            coef = np.linalg.lstsq(C[:j, :j], C[:j, j], rcond=None)[0]
            resid = 1.0 - C[:j, j] @ coef
        elif sd[j] <= 1e-12 * (1.0 + np.abs(m[j])) * np.sqrt(w.sum()):
            resid = 0.0
        if resid < 1e-10:
            raise FulcrumError(f"outcome '{outcome}', arm '{arm}': the model term '{names[j]}' is constant or "
                               "fully determined by the other terms in this arm, so its effect cannot be estimated.",
                               column=names[j], hint="Remove it from 'adjust', or use a linear shape for the index.")


def newton(fun, start: np.ndarray, max_iter: int = 100, tol: float = NEWTON_TOL):
    """Maximise a concave-ish log-likelihood by Newton-Raphson with step halving.

    fun(beta) -> (loglik, gradient, hessian); returns (beta, loglik, gradient, hessian, iterations,
    converged). Stops one full step after the Newton decrement g'(-H)^-1 g falls below
    tol * (1 + |loglik|), so the returned point is accurate far beyond that tolerance.
    """
    beta = np.asarray(start, float).copy()
    ll, g, H = fun(beta)
    if not np.isfinite(ll):
        raise ValueError("log-likelihood not finite at the start")
    for it in range(1, max_iter + 1):
        step = _ascent_direction(g, H)
        dec = float(g @ step)
        if not np.isfinite(dec):
            return beta, ll, g, H, it, False
        t = 1.0
        while True:
            trial = beta + t * step
            out = fun(trial)
            if np.isfinite(out[0]) and out[0] >= ll - 1e-12 * (1.0 + abs(ll)):
                break
            t *= 0.5
            if t < 1e-10:
                return beta, ll, g, H, it, dec <= tol * (1.0 + abs(ll))
        beta, (ll, g, H) = trial, out
        if dec <= tol * (1.0 + abs(ll)) and t == 1.0:
            return beta, ll, g, H, it, True
    return beta, ll, g, H, max_iter, False


def _ascent_direction(g: np.ndarray, H: np.ndarray) -> np.ndarray:
    """Solve (-H) d = g, adding a ridge when -H is not positive definite (far from the optimum)."""
    A = -H
    ridge = 0.0
    scale = max(float(np.max(np.abs(np.diag(A)))), 1e-12)
    for _ in range(60):
        try:
            c = np.linalg.cholesky(A + ridge * np.eye(len(g)))
            return np.linalg.solve(c.T, np.linalg.solve(c, g))
        except np.linalg.LinAlgError:
            ridge = scale * 1e-8 if ridge == 0.0 else ridge * 10.0
    return g / scale


def inverse(info: np.ndarray) -> np.ndarray:
    """Inverse of an information matrix, symmetrised; pseudo-inverse if singular."""
    try:
        v = np.linalg.inv(info)
    except np.linalg.LinAlgError:
        v = np.linalg.pinv(info)
    return (v + v.T) / 2.0


def sandwich(bread: np.ndarray, scores: np.ndarray, w: np.ndarray, cluster: np.ndarray | None) -> np.ndarray:
    """bread (sum_i (w_i u_i)(w_i u_i)') bread, summing weighted scores within clusters first (HC0 style)."""
    s = scores * w[:, None]
    if cluster is not None:
        s = _sum_by(s, cluster)
    meat = s.T @ s
    v = bread @ meat @ bread
    return (v + v.T) / 2.0


def _sum_by(a: np.ndarray, groups: np.ndarray) -> np.ndarray:
    out = np.zeros((int(groups.max()) + 1, a.shape[1]))
    np.add.at(out, groups, a)
    return out


def expit(v: np.ndarray) -> np.ndarray:
    """Logistic function 1 / (1 + exp(-v)), exact in both tails and faster than scipy's."""
    with np.errstate(over="ignore"):
        return 1.0 / (1.0 + np.exp(-v))


def quad_form(G: np.ndarray, V: np.ndarray) -> np.ndarray:
    """Row-wise g' V g for the rows of G."""
    return np.einsum("ij,jk,ik->i", G, V, G)


def effect_size(beta: np.ndarray, X: np.ndarray, w: np.ndarray, n_index: int) -> float:
    """Largest weighted SD of one term's share of the linear predictor (the index basis columns form one term).

    Values above about 10 (a log odds or log hazard ratio of 10 per SD) only arise when estimates run off
    to infinity, as under separation.
    """
    if X.shape[1] == 0:
        return 0.0
    parts = [X[:, :n_index] @ beta[:n_index]] + [X[:, j] * beta[j] for j in range(n_index, X.shape[1])]
    sds = [np.sqrt(np.average((v - np.average(v, weights=w)) ** 2, weights=w)) for v in parts]
    return float(max(sds))


def at_risk_warning(t: np.ndarray, w: np.ndarray, horizon: float, arm: str) -> list[str]:
    """A warning when fewer than 10 patients are still followed at the horizon (common practice)."""
    n = int(((t >= horizon) & (w > 0)).sum())
    if horizon <= t.max() and n < MIN_AT_RISK:
        return [f"Only {n} patient{'s are' if n != 1 else ' is'} still followed at the horizon {horizon:g} in arm "
                f"'{arm}' (fewer than {MIN_AT_RISK}); the estimate there rests on very few patients."]
    return []


def events_per_term_warning(events: float, terms: int, arm: str, what: str = "events") -> list[str]:
    """A warning when there are fewer than 10 events per model term (common practice)."""
    if events < 10 * terms:
        return [f"Arm '{arm}' has only {events:g} {what} for {terms} model terms (fewer than 10 per term); "
                "estimates may be unstable."]
    return []


class ArmFit:
    """Attributes and helpers shared by every fitted per-arm model (see base.Fitted)."""

    arm: str
    outcome: str
    params_: np.ndarray
    cov_: np.ndarray
    param_names_: tuple[str, ...]
    n_: int
    n_events_: int | None
    converged_: bool
    iterations_: int
    warnings_: list[str]
    method_: str
    loglik_: float
    basis: Basis
    z_ref: np.ndarray
    z_names: tuple[str, ...]
    robust_: bool
    checks_: dict

    def _init_common(self, arm: str, outcome: str, basis: Basis, prep: Prepared) -> None:
        self.arm, self.outcome, self.basis = arm, outcome, basis
        self.z_ref, self.z_names = prep.z_ref, prep.z_names
        self.n_ = int((prep.w > 0).sum())
        self.warnings_, self.checks_ = [], {}
        self.robust_ = False

    def rows(self, x: np.ndarray) -> np.ndarray:
        """Design rows [basis(x), z_ref] at index values x."""
        B = self.basis(np.asarray(x, float).reshape(-1))
        return np.column_stack([B, np.tile(self.z_ref, (len(B), 1))])

    def distribution(self, x: np.ndarray) -> np.ndarray | None:
        return None

    def distribution_jacobian(self, x: np.ndarray) -> np.ndarray | None:
        return None

    def linear_terms(self) -> tuple[np.ndarray, np.ndarray] | None:
        return None

    def likelihood_kernel(self, d: OutcomeData):
        """Reusable bookkeeping of this model's likelihood (see base.Fitted); none for most models."""
        return None

    def own_likelihood(self) -> tuple | None:
        """(loglik, gradient, Hessian) at params_ kept from the fit, or None (then the checks evaluate it)."""
        return None

    def at_horizon(self, horizon: float, d: OutcomeData, kernel=None, baseline: tuple | None = None):
        """This fit read at another horizon without refitting (the coefficients do not depend on it)."""
        view = copy.copy(self)
        view.horizon = float(horizon)
        return view

    def measure_link(self) -> tuple[str, float | None]:
        """(link, span): the measure lies in [0, span] and its band is built on this link scale (see
        breakeven.link_band); ("identity", None) for an unbounded measure such as a mean."""
        return ("identity", None)

    def summary(self) -> list[tuple[str, float, float]]:
        """(name, estimate, standard error) for every parameter."""
        se = np.sqrt(np.diag(self.cov_))
        return [(n, float(b), float(s)) for n, b, s in zip(self.param_names_, self.params_, se)]

    def _held_at(self) -> str:
        if not self.z_names:
            return ""
        vals = ", ".join(f"{n} = {v:.4g}" for n, v in zip(self.z_names, self.z_ref))
        return f", adjusted for {', '.join(self.z_names)} (curves hold {vals})"

    def _shape_words(self) -> str:
        if self.basis.is_linear:
            return "the index entered linearly"
        return f"the index entered as a restricted cubic spline with {len(self.basis.knots)} knots"

    def _cov_words(self) -> str:
        return "; robust (sandwich) standard errors" if self.robust_ else ""


def linear_pair(cov: np.ndarray, g0: np.ndarray, g1: np.ndarray) -> np.ndarray:
    """2x2 covariance of two linear combinations g0'params and g1'params."""
    G = np.vstack([g0, g1])
    c = G @ cov @ G.T
    return (c + c.T) / 2.0

"""What every per-arm outcome model offers, and the index basis they share.

Break-even, bootstrap, values, selection, the patient view and the report only use this
protocol, so none of them branches on the outcome kind.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable, Protocol, runtime_checkable

import numpy as np

# Harrell's default knot quantiles for restricted cubic splines (Regression Modeling Strategies, 2nd ed., 2.4.6).
HARRELL_QUANTILES = {
    3: (0.10, 0.50, 0.90),
    4: (0.05, 0.35, 0.65, 0.95),
    5: (0.05, 0.275, 0.50, 0.725, 0.95),
}


@dataclass(frozen=True)
class Basis:
    """Maps index values to design columns: linear ([x]) or a restricted cubic spline.

    Knots come from the pooled cohort, so both arms' curves use the same columns.
    """

    shape: str = "linear"
    knots: tuple[float, ...] = ()

    @classmethod
    def from_index(cls, x: np.ndarray, shape: str = "linear", n_knots: int = 4) -> Basis:
        if shape == "linear":
            return cls("linear")
        x = np.asarray(x, float)
        x = x[np.isfinite(x)]
        knots = np.unique(np.quantile(x, HARRELL_QUANTILES[n_knots]))
        if len(knots) < 3:
            return cls("linear")
        return cls("spline", tuple(float(k) for k in knots))

    @property
    def n_columns(self) -> int:
        return 1 if self.shape == "linear" else len(self.knots) - 1

    @property
    def is_linear(self) -> bool:
        return self.shape == "linear"

    def __call__(self, x: np.ndarray) -> np.ndarray:
        x = np.asarray(x, float).reshape(-1)
        if self.shape == "linear":
            return x[:, None]
        t = np.asarray(self.knots)
        k = len(t)
        scale = (t[-1] - t[0]) ** 2  # Harrell's normalisation keeps columns on the scale of x
        cols = [x]
        pos = lambda u: np.maximum(u, 0.0) ** 3  # noqa: E731
        for j in range(k - 2):
            cols.append((pos(x - t[j]) - pos(x - t[k - 2]) * (t[k - 1] - t[j]) / (t[k - 1] - t[k - 2])
                         + pos(x - t[k - 1]) * (t[k - 2] - t[j]) / (t[k - 1] - t[k - 2])) / scale)
        return np.column_stack(cols)


@dataclass
class OutcomeData:
    """One arm's data for one outcome, already cleaned (complete cases, numeric).

    y: continuous values, 0/1 for binary, level codes 0..K-1 (best first) for ordinal.
    time/event: survival. z: adjustment covariates (n x k), z_ref: the values they are held at.
    weights: optional non-negative case weights (integer weights act as duplicated rows).
    """

    x: np.ndarray
    y: np.ndarray | None = None
    time: np.ndarray | None = None
    event: np.ndarray | None = None
    z: np.ndarray | None = None
    z_names: tuple[str, ...] = ()
    z_ref: np.ndarray | None = None
    weights: np.ndarray | None = None
    cluster: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.x)


@runtime_checkable
class Fitted(Protocol):
    """A model of one outcome in one arm along the index.

    measure(x): the outcome's scalar measure (as the outcome defines it, not yet oriented by
    higher_is_better) at index values x, adjustment covariates held at z_ref.
    measure_var(x): its sampling variance at each x (model-based; cluster-robust when fitted so).
    distribution(x): level probabilities (len(x), K) for ordinal outcomes, else None.
    distribution_jacobian(x): d distribution / d params_, (len(x), K, len(params_)); ordinal only.
    measure_link(): (link, span): the measure lies in [0, span] (span None: unbounded) and its bands are built on
    the link scale ("identity" | "logit" | "cloglog") and transformed back.
    linear_terms(): (coef, cov) of c0 + c1 x, a linear predictor on which the measure is a strictly
    monotone map of the same form in both arms, when the basis is linear and Fieller applies; else None.

    For the trust checks (explorer.trust), without knowing which model this is:
    likelihood(d, kernel): the log-likelihood this model maximised, rebuilt from its data `d`, as an
    ArmLikelihood (its parameters, and which of them are the index terms); likelihood_kernel(d): reusable
    bookkeeping of that likelihood (a Cox model's risk sets) or None; own_likelihood(): (loglik, gradient,
    Hessian) kept from the fit, or None; at_horizon(h, d, kernel, baseline): the same fit read at another
    horizon, without refitting; restricted_words: the model with index terms common to both arms, in words.
    """

    arm: str
    params_: np.ndarray
    cov_: np.ndarray
    n_: int
    n_events_: int | None
    converged_: bool
    warnings_: list[str]

    def measure(self, x: np.ndarray) -> np.ndarray: ...

    def measure_var(self, x: np.ndarray) -> np.ndarray: ...

    def distribution(self, x: np.ndarray) -> np.ndarray | None: ...

    def distribution_jacobian(self, x: np.ndarray) -> np.ndarray | None: ...

    def linear_terms(self) -> tuple[np.ndarray, np.ndarray] | None: ...

    def measure_link(self) -> tuple[str, float | None]: ...

    restricted_words: str

    def likelihood(self, d: OutcomeData, kernel: Any = None) -> ArmLikelihood: ...

    def likelihood_kernel(self, d: OutcomeData) -> Any: ...

    def own_likelihood(self) -> tuple | None: ...

    def at_horizon(self, horizon: float, d: OutcomeData, kernel: Any = None, baseline: tuple | None = None
                   ) -> Fitted: ...


@dataclass
class ArmLikelihood:
    """One arm's log-likelihood as a function of its parameters; `shared` are the index-term positions."""

    fun: Callable
    params: np.ndarray
    shared: np.ndarray


def numerical_jacobian(f, params: np.ndarray, x: np.ndarray, rel: float = 1e-6) -> np.ndarray:
    """Central differences of f(x, params) with respect to params: (len(x), len(params))."""
    params = np.asarray(params, float)
    cols = []
    for j in range(len(params)):
        h = rel * max(1.0, abs(params[j]))
        up, dn = params.copy(), params.copy()
        up[j] += h
        dn[j] -= h
        cols.append((f(x, up) - f(x, dn)) / (2 * h))
    return np.column_stack(cols) if cols else np.zeros((len(np.atleast_1d(x)), 0))


@dataclass
class FitReport:
    """Small record kept beside a fit for the methods paragraph and diagnostics."""

    method: str
    n: int
    n_events: int | None = None
    iterations: int = 0
    converged: bool = True
    notes: list[str] = field(default_factory=list)

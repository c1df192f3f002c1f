"""The naive reference the benchmark compares against: per-arm fits written directly on lifelines and statsmodels.

Nothing here is shared with explorer/ beyond reading the same cohort columns, so the timings show what the
same job costs when every model (and every bootstrap replicate) is refitted with the usual libraries.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
import statsmodels.api as sm
from lifelines import CoxPHFitter
from statsmodels.miscmodels.ordinal_model import OrderedModel

# Tight convergence, so coefficients can be compared with ours to 1e-6 (DESIGN.md 2b: both sides converged tightly).
LIFELINES_TIGHT = dict(precision=1e-10, r_precision=1e-14, max_steps=200)
ORDERED_GTOL = 1e-8


def cox_fit(time: np.ndarray, event: np.ndarray, X: np.ndarray) -> CoxPHFitter:
    """lifelines CoxPHFitter (Efron ties, Breslow baseline) on columns x0..x{p-1}."""
    df = pd.DataFrame(X, columns=[f"x{j}" for j in range(X.shape[1])]).assign(T=time, E=event)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return CoxPHFitter().fit(df, "T", "E", fit_options=LIFELINES_TIGHT)


def cox_survival_at(fit: CoxPHFitter, X: np.ndarray, horizon: float) -> np.ndarray:
    """P(event-free at horizon | x) for every row of X."""
    df = pd.DataFrame(X, columns=[f"x{j}" for j in range(X.shape[1])])
    return fit.predict_survival_function(df, times=[horizon]).to_numpy()[0]


def ordinal_fit(y: np.ndarray, X: np.ndarray):
    """statsmodels OrderedModel (cumulative logit) by BFGS, as its documentation fits it."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return OrderedModel(y, X, distr="logit").fit(method="bfgs", disp=False, maxiter=5000, gtol=ORDERED_GTOL)


def ordinal_natural(params: np.ndarray, n_beta: int) -> np.ndarray:
    """OrderedModel's (beta, first cut, log increments) as (natural cut-points, beta), our parameter order."""
    cuts = params[n_beta:]
    return np.r_[cuts[0] + np.r_[0.0, np.cumsum(np.exp(cuts[1:]))], params[:n_beta]]


def ordinal_distribution(res, X: np.ndarray) -> np.ndarray:
    """Level probabilities (rows of X by observed levels)."""
    return np.asarray(res.model.predict(res.params, exog=X))


def linear_fit(y: np.ndarray, X: np.ndarray):
    """statsmodels OLS with an intercept."""
    return sm.OLS(y, sm.add_constant(X, has_constant="add")).fit()


@dataclass
class ReferencePair:
    """One outcome along one index, as the reference fits it: per arm, cohort rows with complete data."""

    kind: str
    rows: dict[str, np.ndarray]
    x: np.ndarray
    y: np.ndarray | None
    time: np.ndarray | None
    event: np.ndarray | None
    horizon: float | None
    favourable: int
    grid: np.ndarray


def reference_curves(pair: ReferencePair, drawn: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Refit each arm on the drawn cohort rows and return its measure on the grid (and level probabilities)."""
    out = {}
    G = pair.grid[:, None]
    for arm, rows in pair.rows.items():
        r = drawn[arm][np.isin(drawn[arm], rows)]
        X = pair.x[r][:, None]
        if pair.kind == "survival":
            out[arm] = cox_survival_at(cox_fit(pair.time[r], pair.event[r], X), G, pair.horizon)
        elif pair.kind == "ordinal":
            res = ordinal_fit(pair.y[r].astype(int), X)
            dist = ordinal_distribution(res, G)
            out[arm] = dist[:, :pair.favourable].sum(axis=1)
            out[f"{arm} levels"] = dist
        else:
            out[arm] = linear_fit(pair.y[r], X).predict(sm.add_constant(G, has_constant="add"))
    return out


def reference_replicate(pairs: list[ReferencePair], arm_rows: dict[str, np.ndarray],
                        cluster_rows: list[np.ndarray] | None, rng: np.random.Generator) -> list[dict]:
    """One naive bootstrap replicate: resample (whole clusters when named, else patients within arm), refit all."""
    if cluster_rows is None:
        drawn = {arm: np.sort(rng.choice(r, size=len(r), replace=True)) for arm, r in arm_rows.items()}
    else:
        picked = rng.integers(0, len(cluster_rows), len(cluster_rows))
        every = np.sort(np.concatenate([cluster_rows[k] for k in picked]))
        drawn = {arm: every[np.isin(every, r)] for arm, r in arm_rows.items()}
    return [reference_curves(p, drawn) for p in pairs]


def cross_fit_replicate(X: np.ndarray, time: np.ndarray, event: np.ndarray, fit: np.ndarray, folds: int,
                        seed: int, rng: np.random.Generator) -> np.ndarray:
    """One replicate of a cross-fitted Cox index written the usual way: draw patients, scikit-learn's KFold over
    the drawn fitting set, lifelines on the whole set and on each fold's complement; out-of-fold linear
    predictors of the drawn fitting set."""
    from sklearn.model_selection import KFold

    drawn = np.sort(rng.choice(len(X), size=len(X), replace=True))
    rows = drawn[fit[drawn]]
    cox_fit(time[rows], event[rows], X[rows])
    unique = np.unique(rows)
    lp = np.empty(len(rows))
    for _train, held_u in KFold(folds, shuffle=True, random_state=seed).split(unique):
        held = np.isin(rows, unique[held_u])
        model = cox_fit(time[rows[~held]], event[rows[~held]], X[rows[~held]])
        lp[held] = X[rows[held]] @ model.params_.to_numpy()
    return lp

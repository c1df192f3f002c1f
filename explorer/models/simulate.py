"""New patients' outcomes drawn from a fitted per-arm model, for planning the next study.

`simulate(fit, x, z, rng)` returns an OutcomeData for new patients at index values x (and adjustment
covariates z, one row per patient, when the model is adjusted), their outcomes drawn from the fitted model as if
it were the truth. Survival outcomes are followed to the horizon and censored there (administrative censoring),
which loses nothing for a measure taken at the horizon. Each model class has its own draw here, so nothing
outside models/ needs to know how an outcome kind is simulated.
"""
from __future__ import annotations

from typing import Callable

import numpy as np

from ..errors import FulcrumError
from .base import OutcomeData
from .common import expit
from .cox import CoxFit
from .glm import LinearFit, LogisticFit
from .ordinal import OrdinalFit
from .weibull import WeibullFit


def _design_rows(fit, x: np.ndarray, z: np.ndarray | None) -> np.ndarray:
    """[basis(x), z] for new patients; z defaults to the model's reference values."""
    B = fit.basis(np.asarray(x, float).reshape(-1))
    k = len(fit.z_ref) if fit.z_ref is not None else 0
    if k == 0:
        return B
    Z = np.tile(fit.z_ref, (len(B), 1)) if z is None else np.asarray(z, float).reshape(len(B), k)
    return np.column_stack([B, Z])


def _survival_data(x: np.ndarray, z: np.ndarray | None, t: np.ndarray, horizon: float) -> OutcomeData:
    event = (t <= horizon).astype(float)
    return OutcomeData(x=np.asarray(x, float), time=np.minimum(t, horizon), event=event, z=z)


def _cox(fit: CoxFit, x, z, rng) -> OutcomeData:
    r = np.exp((_design_rows(fit, x, z) - fit.mean_) @ fit.params_)
    need = rng.exponential(size=len(r)) / r  # event when the baseline cumulative hazard reaches this
    idx = np.searchsorted(fit.baseline_cumhaz_, need, side="left")
    times = np.r_[fit.baseline_times_, np.inf]
    return _survival_data(x, z, times[idx], fit.horizon)


def _weibull(fit: WeibullFit, x, z, rng) -> OutcomeData:
    p = fit.params_
    mu = p[0] + _design_rows(fit, x, z) @ p[1:-1]
    t = np.exp(mu) * rng.exponential(size=len(mu)) ** (1.0 / np.exp(p[-1]))
    return _survival_data(x, z, t, fit.horizon)


def _logistic(fit: LogisticFit, x, z, rng) -> OutcomeData:
    p = expit(fit.params_[0] + _design_rows(fit, x, z) @ fit.params_[1:])
    return OutcomeData(x=np.asarray(x, float), y=(rng.random(len(p)) < p).astype(float), z=z)


def _linear(fit: LinearFit, x, z, rng) -> OutcomeData:
    mean = fit.params_[0] + _design_rows(fit, x, z) @ fit.params_[1:]
    return OutcomeData(x=np.asarray(x, float), y=mean + rng.normal(0.0, np.sqrt(fit.sigma2_), len(mean)), z=z)


def _ordinal(fit: OrdinalFit, x, z, rng) -> OutcomeData:
    m = len(fit.observed_) - 1
    eta = _design_rows(fit, x, z) @ fit.params_[m:]
    cum = expit(fit.params_[:m][None, :] - eta[:, None])  # P(level <= j), best first
    pick = (rng.random(len(eta))[:, None] > cum).sum(axis=1)
    return OutcomeData(x=np.asarray(x, float), y=fit.observed_[pick].astype(float), z=z)


_DRAWS: dict[type, Callable] = {CoxFit: _cox, WeibullFit: _weibull, LogisticFit: _logistic, LinearFit: _linear,
                                OrdinalFit: _ordinal}


def simulate(fit, x: np.ndarray, z: np.ndarray | None, rng: np.random.Generator) -> OutcomeData:
    """Outcomes for new patients at x (and z) drawn from `fit` as if it were the truth."""
    draw = _DRAWS.get(type(fit))
    if draw is None:
        raise FulcrumError(f"outcome '{getattr(fit, 'outcome', '?')}': this model cannot simulate new patients, so "
                           "the study planner cannot use it.", hint="Plan the next study on another outcome.")
    return draw(fit, np.asarray(x, float).reshape(-1), z, rng)


def append(old: OutcomeData, new: OutcomeData) -> OutcomeData:
    """Today's patients followed by the new ones (no weights or clusters: new patients are independent)."""
    def cat(a, b):
        return None if a is None or b is None else np.concatenate([a, b])
    return OutcomeData(x=cat(old.x, new.x), y=cat(old.y, new.y), time=cat(old.time, new.time),
                       event=cat(old.event, new.event), z=cat(old.z, new.z), z_names=old.z_names, z_ref=old.z_ref,
                       weights=None if old.weights is None else np.r_[old.weights, np.ones(len(new.x))])

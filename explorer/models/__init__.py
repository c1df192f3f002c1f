"""Per-arm outcome models behind one protocol (base.Fitted); `fit_model` picks the model for an outcome through
the registry of outcome kinds (kinds.py), which also holds every other fact about a kind (`describe`)."""
from __future__ import annotations

import numpy as np

from .base import ArmLikelihood, Basis, Fitted, OutcomeData
from .cox import CoxFit
from .glm import LinearFit, LogisticFit
from .ordinal import OrdinalFit
from .kinds import KINDS, OutcomeFacts, OutcomeKind, describe, kind_of, register, unregister
from .weibull import WeibullFit

__all__ = ["fit_model", "Basis", "Fitted", "OutcomeData", "ArmLikelihood", "CoxFit", "WeibullFit", "OrdinalFit",
           "LogisticFit", "LinearFit", "KINDS", "OutcomeFacts", "OutcomeKind", "describe", "kind_of", "register",
           "unregister"]


def fit_model(outcome, arm: str, basis: Basis, data: OutcomeData, start: np.ndarray | None = None,
              robust: bool = False, *, checks: bool = True) -> Fitted:
    """Fit `outcome` in one arm along the index: design [basis(x), z], curves at z = data.z_ref
    (default: this arm's weighted mean of z; pass the same z_ref to both arms).

    data.weights are case weights: the model-based fit treats them as frequencies (integer weights equal
    duplicated rows, Cox ties included), and robust=True treats them as probability weights, as
    inverse-probability weighting needs. start: warm start for Newton (ignored if its shape does not
    fit). robust: sandwich covariance, cluster-robust when data.cluster is given. checks=False skips
    the proportional hazards / odds diagnostics (bootstrap replicates do not need them).
    """
    return kind_of(outcome).fit(outcome, arm, basis, data, start, robust, checks)

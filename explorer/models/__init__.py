"""Per-arm outcome models behind one protocol (base.Fitted); `fit_model` picks the model for an outcome."""
from __future__ import annotations

import numpy as np

from ..errors import FulcrumError
from ..spec import OutcomeSpec
from .base import Basis, Fitted, OutcomeData
from .cox import CoxFit
from .glm import LinearFit, LogisticFit
from .ordinal import OrdinalFit
from .weibull import WeibullFit

__all__ = ["fit_model", "Basis", "Fitted", "OutcomeData", "CoxFit", "WeibullFit", "OrdinalFit", "LogisticFit",
           "LinearFit"]


def fit_model(outcome: OutcomeSpec, arm: str, basis: Basis, data: OutcomeData, start: np.ndarray | None = None,
              robust: bool = False, *, checks: bool = True) -> Fitted:
    """Fit `outcome` in one arm along the index: design [basis(x), z], curves at z = data.z_ref
    (default: this arm's weighted mean of z; pass the same z_ref to both arms).

    data.weights are case weights: the model-based fit treats them as frequencies (integer weights equal
    duplicated rows, Cox ties included), and robust=True treats them as probability weights, as
    inverse-probability weighting needs. start: warm start for Newton (ignored if its shape does not
    fit). robust: sandwich covariance, cluster-robust when data.cluster is given. checks=False skips
    the proportional hazards / odds diagnostics (bootstrap replicates do not need them).
    """
    kind = outcome.kind
    if kind == "survival":
        if outcome.horizon is None:
            raise FulcrumError(f"survival outcome '{outcome.name}' needs a horizon.", key=f"outcomes '{outcome.name}'",
                               hint="Add horizon = ... in the units of the time column.")
        measure = outcome.measure or "survival"
        if (outcome.model or "cox") == "weibull":
            return WeibullFit(outcome.name, arm, basis, data, outcome.horizon, measure, start, robust)
        return CoxFit(outcome.name, arm, basis, data, outcome.horizon, measure, start, robust, checks)
    if kind == "ordinal":
        favourable = outcome.favourable or outcome.levels[:-1]
        return OrdinalFit(outcome.name, arm, basis, data, outcome.levels, favourable, start, robust, checks)
    if kind == "binary":
        return LogisticFit(outcome.name, arm, basis, data, start, robust)
    if kind == "continuous":
        return LinearFit(outcome.name, arm, basis, data, robust, bounded=outcome.bounds is not None)
    raise FulcrumError(f"outcome '{outcome.name}' has an unknown kind '{kind}'.", key=f"outcomes '{outcome.name}'",
                       hint="Use continuous, binary, ordinal or survival.")


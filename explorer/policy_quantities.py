"""Per-patient predictions under each arm, with delta-method factors, for the rule consequences (policy.py).

For each quantity (an outcome's measure, one level of an ordinal outcome, a composite under given weights) and
each arm: the prediction m(u) at the population's distinct index values u and a factor F with
Cov(m(u_i), m(u_j)) ~= F_i . F_j (the delta method: F = dm/dparams @ cov^(1/2)). Means over patients are then
sums of rows, and their variances squared norms. Only the fitted-model protocol is used; where a model's measure
cannot be differentiated through its parameters, the factor is the pointwise standard error in one column
(perfectly correlated errors along the index, which errs wide) and the interval is labelled "bound".
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import fitting as ft
from . import values as vl
from .models import describe
from .models.base import Fitted
from .selection import param_gradient


@dataclass
class Quantity:
    """One quantity at the population's distinct index values: per-arm predictions and delta factors."""

    key: str                   # outcome name, "<outcome>:<level>", or "composite:<kind>"
    title: str
    role: str                  # "outcome" | "level" | "composite"
    sign: float                # +1 when higher is better
    probability: bool          # the per-100 value counts patients
    units: str | None
    value: tuple[np.ndarray, np.ndarray]
    factor: tuple[np.ndarray, np.ndarray]
    interval: str              # "delta" | "bound"
    parent: str | None = None  # for a level: its outcome
    boot: tuple[np.ndarray, np.ndarray] | None = None   # per-replicate predictions (R, len(u)) per arm


def sqrt_psd(C: np.ndarray) -> np.ndarray:
    """S with S S' = C (C symmetric positive semi-definite, small negative eigenvalues set to zero)."""
    C = np.asarray(C, float)
    C = (C + C.T) / 2
    w, V = np.linalg.eigh(C)
    return V * np.sqrt(np.clip(w, 0.0, None))


def _linear_factor(fit: Fitted, x: np.ndarray) -> np.ndarray | None:
    """From linear_terms(): the measure is g(c0 + c1 x), so dm = g'(eta) [1 x] d(c0, c1); kept only when it
    reproduces measure_var."""
    terms = fit.linear_terms()
    if terms is None or not np.isfinite(terms[0]).all() or terms[0][1] == 0:
        return None
    (c0, c1), C = terms
    h = 1e-5 * max(1.0, float(np.max(np.abs(x))))
    gprime = (np.asarray(fit.measure(x + h), float) - np.asarray(fit.measure(x - h), float)) / (2 * h * c1)
    F = (gprime[:, None] * np.column_stack([np.ones(len(x)), x])) @ sqrt_psd(C)
    probe = x[[0, -1]]
    want = np.asarray(fit.measure_var(probe), float)
    got = np.einsum("ij,ij->i", F[[0, -1]], F[[0, -1]])
    if not np.allclose(got, want, rtol=1e-3, atol=1e-12 + 1e-6 * float(np.max(want))):
        return None
    return F


def measure_factor(fit: Fitted, x: np.ndarray) -> tuple[np.ndarray, str]:
    """(F, how) for fit.measure at x: Cov(measure(x_i), measure(x_j)) ~= F_i . F_j."""
    x = np.asarray(x, float)
    G = param_gradient(fit, x)
    if G is not None:
        return G @ sqrt_psd(fit.cov_), "delta"
    F = _linear_factor(fit, x)
    if F is not None:
        return F, "delta"
    return np.sqrt(np.maximum(np.asarray(fit.measure_var(x), float), 0.0))[:, None], "bound"


def _level_terms(fit: Fitted, x: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Expected weight P(x) @ w and its factor, from the model's level probabilities and their Jacobian."""
    P = np.asarray(fit.distribution(x), float)
    J = np.asarray(fit.distribution_jacobian(x), float)
    return P @ w, np.einsum("mkp,k->mp", J, w) @ sqrt_psd(fit.cov_)


def _worst(*hows: str) -> str:
    return "bound" if "bound" in hows else "delta"


def outcome_quantities(pf: ft.PairFit, u: np.ndarray) -> list[Quantity]:
    """The outcome's measure and, when the model gives level probabilities, each level's probability."""
    arms = list(pf.fits)
    o = pf.outcome
    out = []
    vals, facs, hows = [], [], []
    for a in arms:
        F, how = measure_factor(pf.fits[a], u)
        vals.append(np.asarray(pf.fits[a].measure(u), float))
        facs.append(F)
        hows.append(how)
    out.append(Quantity(o.name, o.title, "outcome", pf.sign, describe(o).probability, o.units, tuple(vals), tuple(facs),
                        _worst(*hows)))
    P0 = pf.fits[arms[0]].distribution(u[:1])
    if P0 is not None:
        levels = o.levels if len(o.levels) == np.shape(P0)[1] else tuple(f"level {j + 1}" for j in range(P0.shape[1]))
        for j, lv in enumerate(levels):
            w = np.eye(len(levels))[j]
            terms = [_level_terms(pf.fits[a], u, w) for a in arms]
            out.append(Quantity(f"{o.name}:{lv}", f"{o.title}: {lv}", "level", 1.0, True, None,
                                tuple(t[0] for t in terms), tuple(t[1] for t in terms), "delta", parent=o.name))
    return out


def composite_quantities(fs: ft.FitSet, index: str, u: np.ndarray, weights: dict | None = None) -> list[Quantity]:
    """Each composite the spec asks for (values.default_kinds) under the stated (or given) weights."""
    spec = fs.spec
    v = spec.values
    if v is None:
        return []
    out = []
    pf_ord = fs.pair(v.outcome, index)
    arms = list(pf_ord.fits)
    w = vl.check_weights(weights if weights is not None else v.weights, pf_ord.outcome.levels)
    for form in vl.default_kinds(spec):
        vals, facs, hows = [], [], []
        for a in arms:
            if form == "ordinal":
                m, F = _level_terms(pf_ord.fits[a], u, w)
                how = "delta"
            elif form == "survival_function":
                so = spec.outcome(v.survival_outcome)
                m, F, how = _survival_function(pf_ord.fits[a], fs.pair(so.name, index), a, u, w)
            else:
                m, F, how = _quality_adjusted(fs, index, a, u)
            vals.append(m)
            facs.append(F)
            hows.append(how)
        title = f"Composite ({form.replace('_', ' ')})"
        units = None
        if form == "quality_adjusted":
            so = vl.survival_outcome_of(spec)
            units = f"quality-adjusted {so.units}" if so.units else "quality-adjusted time"
        out.append(Quantity(f"composite:{form}", title, "composite", 1.0, False, units, tuple(vals), tuple(facs),
                            _worst(*hows)))
    return out


def _survival_factor(pf_surv: ft.PairFit, arm: str, u: np.ndarray, want: str) -> tuple[np.ndarray, np.ndarray, str]:
    """Survival at the horizon (want="survival") or RMST (want="rmst") with its factor."""
    fit, o = pf_surv.fits[arm], pf_surv.outcome
    if o.measure == want:
        F, how = measure_factor(fit, u)
        return np.asarray(fit.measure(u), float), F, how
    m, var = (vl.survival_at_horizon if want == "survival" else vl.rmst_at_horizon)(fit, o, u)
    return m, np.sqrt(np.maximum(var, 0.0))[:, None], "bound"


def _survival_function(fit_ord: Fitted, pf_surv: ft.PairFit, arm: str, u: np.ndarray, w: np.ndarray
                       ) -> tuple[np.ndarray, np.ndarray, str]:
    """S x (expected weight among the living levels) + (1 - S) x weight of death, and its factor (the two
    models independent, as in values.survival_function_levels)."""
    P = np.asarray(fit_ord.distribution(u), float)
    J = np.asarray(fit_ord.distribution_jacobian(u), float)
    S, FS, how = _survival_factor(pf_surv, arm, u, "survival")
    A = P[:, :-1].sum(axis=1)
    qw = (P[:, :-1] @ w[:-1]) / A
    dq = (w[None, :-1] - qw[:, None]) / A[:, None]                  # d qw / d p_living
    G = S[:, None] * np.einsum("mjp,mj->mp", J[:, :-1, :], dq)
    m = S * qw + (1 - S) * w[-1]
    return m, np.column_stack([G @ sqrt_psd(fit_ord.cov_), (qw - w[-1])[:, None] * FS]), how


def _quality_adjusted(fs: ft.FitSet, index: str, arm: str, u: np.ndarray) -> tuple[np.ndarray, np.ndarray, str]:
    spec = fs.spec
    so = vl.survival_outcome_of(spec)
    R, FR, how_r = _survival_factor(fs.pair(so.name, index), arm, u, "rmst")
    fit_u = fs.pair(spec.values.utility_outcome, index).fits[arm]
    U = np.asarray(fit_u.measure(u), float)
    FU, how_u = measure_factor(fit_u, u)
    return R * U, np.column_stack([U[:, None] * FR, R[:, None] * FU]), _worst(how_r, how_u)


def quantities(fs: ft.FitSet, index: str, u: np.ndarray, weights: dict | None = None) -> list[Quantity]:
    """Every outcome (those measured only among survivors left out: a rule's consequence for them is not a
    per-100 count), its levels, and every composite, at the distinct index values u."""
    out = []
    for o in fs.spec.outcomes:
        if o.among_survivors:
            continue
        out += outcome_quantities(fs.pair(o.name, index), u)
    return out + composite_quantities(fs, index, u, weights)


def _interp_rows(grid: np.ndarray, Y: np.ndarray, u: np.ndarray) -> np.ndarray:
    """np.interp of every row of Y (R, G) from grid to u, in one step."""
    j = np.clip(np.searchsorted(grid, u, side="right") - 1, 0, len(grid) - 2)
    t = np.clip((u - grid[j]) / (grid[j + 1] - grid[j]), 0.0, 1.0)
    return Y[:, j] * (1 - t) + Y[:, j + 1] * t


def attach_replicates(fs: ft.FitSet, index: str, qs: list[Quantity], u: np.ndarray, reps: list[dict],
                      weights: dict | None = None) -> None:
    """Per-replicate predictions at u from the analysis's bootstrap records (curves on each pair's grid), for the
    outcomes and composites; levels keep their delta intervals. Failed replicates are left out."""
    n = fs.spec.analysis.grid
    cms = {(k, index): vl.prepare_composite(fs, k, index, reps) for k in vl.default_kinds(fs.spec)}
    for q in qs:
        if q.role == "outcome":
            pf = fs.pair(q.key, index)
            grid = ft.grid_for(pf, n)
            recs = [r[(q.key, index)] for r in reps if "failed" not in r[(q.key, index)]]
            if not recs:
                continue
            q.boot = tuple(_interp_rows(grid, np.array([r[s] for r in recs], float), u) for s in ("first", "second"))
            q.interval = "bootstrap-percentile"
        elif q.role == "composite":
            cm = cms.get((q.key.split(":", 1)[1], index))
            if cm is None or cm.boot is None:
                continue
            w = vl.weights_for(cm, weights)
            ok = cm.boot_ok
            q.boot = tuple(_interp_rows(cm.grid, cm.boot[j][ok] @ w, u) for j in (0, 1))
            q.interval = "bootstrap-percentile"

"""Randomised versus chosen patients: selection effects, break-even shifts, weighting and E-values.

Comprehensive cohort design (Olschewski & Scheurlen 1985): randomised and chosen patients are
followed together. Everything here compares fits on the randomised patients with fits on the chosen
or on all patients, and reweights the chosen patients by an unpenalised propensity model.
"""
from __future__ import annotations

import copy
import dataclasses
import functools
import math
from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from . import breakeven as be
from . import fitting as ft
from .errors import FulcrumError
from .models import describe, fit_model
from .models.base import Fitted, numerical_jacobian
from .models.common import basis_names
from .models.words import measure_words
from .result_rows import index_info_json
from .resampling import ArmArrays, Progress, refit_arms, run_replicates
from .spec import OutcomeSpec, SelectionSpec, Spec
from .weighting import Weighting, covariate_design, propensity_weights
from .weighting import rounded as _r

EVALUE_KINDS = ("rr", "rr_rare", "hr_common", "hr_rare", "or_common", "or_rare", "smd")
WINDOWS = 10  # quantile bands of the index for the randomised coverage
SHIFT_REPLICATES = 200  # the bootstrap of the break-even shift uses at most this many replicates


# ------------------------------------------------------------------------------------------
# E-values (VanderWeele & Ding, Ann Intern Med 2017)
# ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class EValue:
    """An E-value for an estimate and for the confidence limit closest to 1, with the risk ratios used."""

    kind: str
    rr: float
    rr_ci: tuple[float | None, float | None]
    point: float
    ci: float | None

    def to_json(self) -> dict:
        return {"kind": self.kind, "rr": _r(self.rr), "rr_ci": [_r(self.rr_ci[0]), _r(self.rr_ci[1])],
                "e_value": _r(self.point), "e_value_ci": _r(self.ci)}


def approximate_rr(value: float, scale: str = "rr") -> float:
    """An estimate on the risk-ratio scale, by the conversions of VanderWeele & Ding 2017 (and its appendix).

    rr/rr_rare/hr_rare/or_rare: as is; or_common: sqrt(OR); hr_common: (1 - 0.5^sqrt(HR)) / (1 - 0.5^sqrt(1/HR));
    smd (a standardised mean difference d): exp(0.91 d).
    """
    if scale not in EVALUE_KINDS:
        raise FulcrumError(f"unknown E-value kind '{scale}'.", hint=f"Use one of {', '.join(EVALUE_KINDS)}.")
    v = float(value)
    if not math.isfinite(v) or (scale != "smd" and v <= 0):
        raise FulcrumError(f"an E-value needs a positive finite ratio (or a finite standardised difference); "
                           f"got {value!r} for kind '{scale}'.", hint="Check the estimate passed to e_value.")
    if scale == "smd":
        return math.exp(0.91 * v)
    if scale == "or_common":
        return math.sqrt(v)
    if scale == "hr_common":
        return (1.0 - 0.5 ** math.sqrt(v)) / (1.0 - 0.5 ** math.sqrt(1.0 / v))
    return v


def _e(rr: float) -> float:
    rr = 1.0 / rr if rr < 1.0 else rr
    return rr + math.sqrt(rr * (rr - 1.0))


def e_value(estimate: float, lo: float | None = None, hi: float | None = None, kind: str = "rr") -> EValue:
    """How strongly an unmeasured confounder would need to be tied to both treatment and outcome (risk-ratio
    scale) to explain the estimate away; and the same for the confidence limit closest to 1 (1 if the
    interval includes 1). VanderWeele & Ding, Ann Intern Med 2017."""
    rr = approximate_rr(estimate, kind)
    rlo = None if lo is None else approximate_rr(lo, kind)
    rhi = None if hi is None else approximate_rr(hi, kind)
    ci: float | None = None
    if rr >= 1.0 and rlo is not None:
        ci = 1.0 if rlo <= 1.0 else _e(rlo)
    elif rr < 1.0 and rhi is not None:
        ci = 1.0 if rhi >= 1.0 else _e(rhi)
    return EValue(kind, rr, (rlo, rhi), _e(rr), ci)


# ------------------------------------------------------------------------------------------
# Averages of a fitted curve over patients, with their variance
# ------------------------------------------------------------------------------------------
def param_gradient(fit: Fitted, x: np.ndarray) -> np.ndarray | None:
    """d measure(x) / d params_ by central differences, kept only when it reproduces measure_var (so the
    measure depends on params_ alone and cov_ covers all its uncertainty); else None."""
    p = np.asarray(fit.params_, float)
    cov = np.asarray(fit.cov_, float)
    if p.ndim != 1 or cov.shape != (len(p), len(p)):
        return None
    trial = copy.copy(fit)

    def f(xx: np.ndarray, params: np.ndarray) -> np.ndarray:
        trial.params_ = params
        return np.asarray(trial.measure(xx), float)

    probe = np.quantile(x, [0.1, 0.5, 0.9])
    G = numerical_jacobian(f, p, probe)
    want = np.asarray(fit.measure_var(probe), float)
    got = np.einsum("ij,jk,ik->i", G, cov, G)
    if not np.allclose(got, want, rtol=1e-3, atol=1e-12 + 1e-6 * float(np.max(want, initial=0.0))):
        return None
    return numerical_jacobian(f, p, x)


def _linear_cov(fit: Fitted, u: np.ndarray, v: np.ndarray) -> np.ndarray | None:
    """Cov(measure(u_i), measure(v_j)) from linear_terms(): the measure is g(c0 + c1 x), so g' = (dm/dx) / c1
    and the covariance is g'(u) g'(v) [1 u] C [1 v]'. Kept only when it reproduces measure_var; else None."""
    terms = fit.linear_terms()
    if terms is None or not np.isfinite(terms[0]).all() or terms[0][1] == 0:
        return None
    (c0, c1), C = terms
    C = np.asarray(C, float)

    def slope(x: np.ndarray) -> np.ndarray:
        h = 1e-5 * max(1.0, float(np.max(np.abs(x))))
        return (np.asarray(fit.measure(x + h), float) - np.asarray(fit.measure(x - h), float)) / (2 * h * c1)

    def cov(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        A, B = np.column_stack([np.ones(len(a)), a]), np.column_stack([np.ones(len(b)), b])
        return slope(a)[:, None] * (A @ C @ B.T) * slope(b)[None, :]

    probe = np.r_[u, v][[0, -1]]
    want = np.asarray(fit.measure_var(probe), float)
    if not np.allclose(np.diag(cov(probe, probe)), want, rtol=1e-3, atol=1e-12 + 1e-6 * float(np.max(want))):
        return None
    return cov(u, v)


def curve_cov(fit: Fitted, u: np.ndarray, v: np.ndarray) -> np.ndarray | None:
    """Cov(measure(u_i), measure(v_j)) by the delta method: from a params_ gradient that reproduces
    measure_var, from linear_terms() (linear basis: a monotone map of one line, e.g. a Cox model's log
    cumulative hazard at the horizon), or from the model's own measure_cov; None when none is available."""
    u, v = np.atleast_1d(np.asarray(u, float)), np.atleast_1d(np.asarray(v, float))
    G = param_gradient(fit, np.r_[u, v])
    if G is not None:
        return G[:len(u)] @ np.asarray(fit.cov_, float) @ G[len(u):].T
    L = _linear_cov(fit, u, v)
    if L is not None:
        return L
    cov_fn = getattr(fit, "measure_cov", None)
    if cov_fn is not None:
        return np.asarray(cov_fn(np.r_[u, v]), float)[:len(u), len(u):]
    return None


def curve_average(fit: Fitted, x: np.ndarray, most: int = 400) -> tuple[float, float, str]:
    """Mean of fit.measure over the index values x (patients) and its variance, with how it was found:
    'delta' (exact delta method, see curve_cov) or 'bound' ((mean pointwise SD)^2: it assumes perfectly
    correlated errors along the index, so it errs wide). More than `most` distinct values are summarised
    by `most` quantiles for the variance."""
    x = np.asarray(x, float)
    u, counts = np.unique(x, return_counts=True)
    a = counts / counts.sum()
    mean = float(a @ np.asarray(fit.measure(u), float))
    if len(u) > most:
        u, a = np.quantile(x, (np.arange(most) + 0.5) / most), np.full(most, 1.0 / most)
    c = curve_cov(fit, u, u)
    if c is not None:
        return mean, float(a @ c @ a), "delta"
    sd = np.sqrt(np.maximum(np.asarray(fit.measure_var(u), float), 0.0))
    return mean, float((a @ sd) ** 2), "bound"


# ------------------------------------------------------------------------------------------
# Where along the index the randomised evidence lies
# ------------------------------------------------------------------------------------------
def _settings(spec: Spec) -> SelectionSpec:
    return spec.selection or SelectionSpec()


def window_edges(x: np.ndarray, windows: int = WINDOWS) -> np.ndarray:
    """Quantile bands of the index (ties merged, so a discrete index gets one band per run of levels)."""
    x = np.asarray(x, float)
    x = x[np.isfinite(x)]
    return np.unique(np.quantile(x, np.linspace(0.0, 1.0, windows + 1)))


def window_of(edges: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Band number of each x; values beyond the ends go to the first or last band."""
    return np.clip(np.searchsorted(edges, np.asarray(x, float), side="right") - 1, 0, max(len(edges) - 2, 0))


def _window_counts(edges: np.ndarray, x: np.ndarray) -> np.ndarray:
    return np.bincount(window_of(edges, x), minlength=max(len(edges) - 1, 1))


def randomised_coverage(fs: ft.FitSet, index: str, windows: int = WINDOWS) -> list[dict]:
    """Patients per quantile band of the index, by arm and allocation, with `sparse` where either arm has
    fewer randomised patients than [selection] min_per_window; [] when the cohort names no allocation."""
    rand = fs.cohort.randomised
    if rand is None:
        return []
    spec = fs.spec
    x = np.asarray(fs.indices[index].values, float)
    ok = np.isfinite(x)
    edges = window_edges(x[ok], windows)
    arm_col = fs.cohort.frame[spec.cohort.arm].to_numpy()
    is_rand = rand.to_numpy(bool)
    least = _settings(spec).min_per_window
    counts = {arm: {alloc: _window_counts(edges, x[ok & (arm_col == arm) & (is_rand == r)])
                    for alloc, r in (("randomised", True), ("chosen", False))} for arm in spec.cohort.arms}
    out = []
    for k in range(len(edges) - 1):
        n = {arm: {alloc: int(c[k]) for alloc, c in counts[arm].items()} for arm in spec.cohort.arms}
        out.append({"from": _r(edges[k]), "to": _r(edges[k + 1]), "n": n,
                    "sparse": any(n[arm]["randomised"] < least for arm in spec.cohort.arms)})
    return out


def _sparse_words(edges: np.ndarray, counts: np.ndarray, least: int, arm: str, what: str) -> list[str]:
    """One sentence per run of adjacent bands with too few randomised patients in this arm."""
    low = counts < least
    out, k = [], 0
    while k < len(low):
        if not low[k]:
            k += 1
            continue
        j = k
        while j + 1 < len(low) and low[j + 1]:
            j += 1
        n = int(counts[k:j + 1].sum())
        out.append(f"{what}: between {edges[k]:.3g} and {edges[j + 1]:.3g} only {n} randomised {arm} patients "
                   f"(fewer than {least} per band); the randomised curve and the selection effect there rest on "
                   "the model, not on randomised patients.")
        k = j + 1
    return out


# ------------------------------------------------------------------------------------------
# Fits by allocation
# ------------------------------------------------------------------------------------------
@dataclass
class SelectionPair:
    """One outcome along one index fitted on randomised, chosen, all and weighted chosen patients."""

    outcome: OutcomeSpec
    index: str
    all: ft.PairFit
    randomised: ft.PairFit | None
    chosen: ft.PairFit | None
    adjusted: ft.PairFit | None
    weighting: Weighting | None
    varies: dict[str, tuple[float, int, float] | None]
    n: dict[str, dict[str, int]]
    edges: np.ndarray
    warnings: list[str] = field(default_factory=list)
    sparse: dict[str, list[str]] = field(default_factory=dict)


FIT_ERRORS = (FulcrumError, np.linalg.LinAlgError, ValueError, FloatingPointError)


def _subset_fit(fs: ft.FitSet, pf: ft.PairFit, rows: dict[str, np.ndarray], label: str, warnings: list[str],
                weights: dict[str, np.ndarray] | None = None) -> ft.PairFit | None:
    """fit_pair on given rows, or None with a warning saying why it could not be fitted."""
    empty = [arm for arm, r in rows.items() if len(r) == 0]
    if empty:
        warnings.append(f"{pf.outcome.title}: no {label} {' or '.join(empty)} patients with complete data, so "
                        f"the {label}-only curves cannot be fitted.")
        return None
    try:
        sub = ft.fit_pair(fs.spec, fs.cohort, pf.outcome, fs.indices[pf.index], pf.basis, rows=rows,
                          weights=weights)
    except FIT_ERRORS as exc:
        warnings.append(f"{pf.outcome.title}: the {label}-only curves could not be fitted ({exc}).")
        return None
    warnings.extend(f"{label.capitalize()} patients only: {w}" for w in sub.warnings)
    return sub


def varies_with_index(pf: ft.PairFit, arm: str, chosen: np.ndarray) -> tuple[float, int, float]:
    """Likelihood-ratio test that the selection effect in this arm changes along the index: the arm's model
    on all its patients with a chosen indicator, against the same with chosen x index-basis terms.
    Returns (statistic, df, p)."""
    d = pf.data[arm]
    c = np.asarray(chosen, float)
    n = len(d)
    B = pf.basis(d.x)
    base = np.asarray(d.z, float).reshape(n, -1) if d.z is not None and np.size(d.z) else np.zeros((n, 0))
    ref = getattr(pf.fits[arm], "z_ref", None)
    ref = np.asarray(ref, float).reshape(-1) if base.shape[1] and ref is not None else base.mean(axis=0)
    inter = tuple(f"chosen x {b}" for b in basis_names(pf.basis))
    one = dataclasses.replace(d, z=np.column_stack([base, c]), z_names=tuple(d.z_names) + ("chosen",),
                              z_ref=np.r_[ref, 0.0], weights=None)
    two = dataclasses.replace(d, z=np.column_stack([base, c, c[:, None] * B]),
                              z_names=tuple(d.z_names) + ("chosen",) + inter,
                              z_ref=np.r_[ref, np.zeros(1 + B.shape[1])], weights=None)
    f1 = fit_model(pf.outcome, arm, pf.basis, one, checks=False)
    f2 = fit_model(pf.outcome, arm, pf.basis, two, checks=False)
    stat = max(2.0 * (float(f2.loglik_) - float(f1.loglik_)), 0.0)
    return stat, B.shape[1], float(stats.chi2.sf(stat, B.shape[1]))


def _robust_refit(pf: ft.PairFit) -> ft.PairFit:
    """Refit weighted arms with sandwich variances (weights as probability weights), from the fitted values."""
    fits = {arm: fit_model(pf.outcome, arm, pf.basis, pf.data[arm], start=f.params_, robust=True, checks=False)
            for arm, f in pf.fits.items()}
    return dataclasses.replace(pf, fits=fits)


def _adjusted_fit(fs: ft.FitSet, pf: ft.PairFit, chosen_rows: dict[str, np.ndarray], warnings: list[str],
                  cache: dict | None = None) -> tuple[ft.PairFit | None, Weighting | None]:
    """Weighted per-arm fits of the chosen patients (complete covariates), stabilised IPW, robust variances.
    `cache` keeps propensity models by the rows they were fitted on (outcomes often share them across indices)."""
    sel = _settings(fs.spec)
    if not sel.covariates:
        warnings.append(f"{pf.outcome.title}: no [selection] covariates are named, so the chosen patients are "
                        "not reweighted.")
        return None, None
    arms = fs.spec.cohort.arms
    frame = fs.cohort.frame
    design = covariate_design(frame, sel.covariates)
    complete = design.notna().all(axis=1).to_numpy()
    rows = {arm: r[complete[r]] for arm, r in chosen_rows.items()}
    left = {arm: len(chosen_rows[arm]) - len(rows[arm]) for arm in arms}
    if any(left.values()):
        warnings.append(f"{pf.outcome.title}: " + ", ".join(f"{k} chosen {a} patients" for a, k in left.items() if k)
                        + " left out of the weighted analysis for missing selection covariates (complete cases).")
    if any(len(rows[a]) == 0 for a in arms):
        warnings.append(f"{pf.outcome.title}: the weighted analysis needs chosen patients in both arms.")
        return None, None
    allrows = np.concatenate([rows[a] for a in arms])
    first = np.r_[np.ones(len(rows[arms[0]]), bool), np.zeros(len(rows[arms[1]]), bool)]
    key = (allrows.tobytes(), len(rows[arms[0]]))
    try:
        wt = cache[key] if cache is not None and key in cache else propensity_weights(
            frame.iloc[allrows].reset_index(drop=True), sel.covariates, first, sel.truncate)
    except FIT_ERRORS as exc:
        warnings.append(f"{pf.outcome.title}: the propensity model could not be fitted ({exc}).")
        return None, None
    if cache is not None:
        cache[key] = wt
    warnings.extend(f"{pf.outcome.title}, weighting: {w}" for w in wt.warnings)
    weights = {arms[0]: wt.weights[first], arms[1]: wt.weights[~first]}
    adj = _subset_fit(fs, pf, rows, "weighted chosen", warnings, weights=weights)
    if adj is None:
        return None, wt
    try:
        adj = _robust_refit(adj)
    except FIT_ERRORS as exc:
        warnings.append(f"{pf.outcome.title}: sandwich variances for the weighted fits failed ({exc}).")
        return None, wt
    return adj, wt


def fit_selection(fs: ft.FitSet, outcome: str, index: str, cache: dict | None = None) -> SelectionPair:
    """Randomised-only, chosen-only, all-patient and weighted chosen fits of one outcome along one index,
    and per arm the likelihood-ratio test of a selection effect that varies with the index."""
    if fs.cohort.randomised is None:
        raise FulcrumError("the selection analysis needs an allocation column.", key="cohort.allocation",
                           hint='Add allocation = "column" to [cohort].')
    pf = fs.everyone(outcome, index)
    rand = fs.cohort.randomised.to_numpy(bool)
    r_rows = {arm: rows[rand[rows]] for arm, rows in pf.rows.items()}
    c_rows = {arm: rows[~rand[rows]] for arm, rows in pf.rows.items()}
    warnings: list[str] = []
    randomised = _subset_fit(fs, pf, r_rows, "randomised", warnings)
    chosen = _subset_fit(fs, pf, c_rows, "chosen", warnings)
    varies: dict[str, tuple[float, int, float] | None] = {}
    for arm, rows in pf.rows.items():
        flag = ~rand[rows]
        if flag.all() or not flag.any():
            varies[arm] = None
            continue
        try:
            varies[arm] = varies_with_index(pf, arm, flag)
        except FIT_ERRORS as exc:
            varies[arm] = None
            warnings.append(f"{pf.outcome.title}, {arm}: the test of a selection effect varying with the index "
                            f"could not be fitted ({exc}).")
    if fs.spec.cohort.cluster:
        warnings.append(f"{pf.outcome.title}: the likelihood-ratio test of a selection effect varying with the "
                        "index treats patients as independent (it ignores the clusters).")
    adjusted, weighting = _adjusted_fit(fs, pf, c_rows, warnings, cache)
    x = np.asarray(fs.indices[index].values, float)
    edges = window_edges(x[np.isfinite(x)])
    least = _settings(fs.spec).min_per_window
    sparse = {arm: _sparse_words(edges, _window_counts(edges, x[rows]), least, arm,
                                 f"{pf.outcome.title} along {index}") for arm, rows in r_rows.items()}
    n = {arm: {"randomised": int(len(r_rows[arm])), "chosen": int(len(c_rows[arm]))} for arm in pf.rows}
    return SelectionPair(pf.outcome, index, pf, randomised, chosen, adjusted, weighting, varies, n, edges, warnings,
                         sparse)


# ------------------------------------------------------------------------------------------
# The selection effect: chosen minus randomised, in one arm, at the same index value
# ------------------------------------------------------------------------------------------
@dataclass
class SelectionEffect:
    """Chosen minus randomised measure in one arm: along the index (pointwise delta interval) and averaged
    over the index values of that arm's randomised patients (Wald test of zero)."""

    arm: str
    grid: np.ndarray
    effect: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    sparse: np.ndarray
    overall: float
    overall_ci: tuple[float, float]
    p_value: float
    method: str


def selection_effect(sp: SelectionPair, arm: str, spec: Spec) -> SelectionEffect | None:
    if sp.randomised is None or sp.chosen is None:
        return None
    rf, cf = sp.randomised.fits[arm], sp.chosen.fits[arm]
    grid = ft.grid_for(sp.all, spec.analysis.grid)
    grid = grid[ft.in_range(sp.all, grid)]
    z = be.critical_value(spec.analysis.level)
    eff = cf.measure(grid) - rf.measure(grid)
    se = np.sqrt(np.maximum(cf.measure_var(grid) + rf.measure_var(grid), 0.0))
    xr = sp.randomised.data[arm].x
    mc, vc, how_c = curve_average(cf, xr)
    mr, vr, how_r = curve_average(rf, xr)
    overall, sd = mc - mr, math.sqrt(max(vc + vr, 0.0))
    p = float(2 * stats.norm.sf(abs(overall) / sd)) if sd > 0 else (1.0 if overall == 0 else 0.0)
    counts = _window_counts(sp.edges, xr)
    sparse = counts[window_of(sp.edges, grid)] < _settings(spec).min_per_window
    method = "delta" if how_c == how_r == "delta" else "bound"
    return SelectionEffect(arm, grid, eff, eff - z * se, eff + z * se, sparse, overall,
                           (overall - z * sd, overall + z * sd), p, method)


# ------------------------------------------------------------------------------------------
# Break-even from randomised patients versus all patients, and the shift by a stratified bootstrap
# ------------------------------------------------------------------------------------------
def break_evens(pf: ft.PairFit | None, spec: Spec) -> list[be.BreakEven] | None:
    return None if pf is None else ft.analytic_summary(pf, spec).break_even


def matched(randomised: list[be.BreakEven] | None, everyone: list[be.BreakEven] | None
            ) -> tuple[be.BreakEven, be.BreakEven] | None:
    """The randomised-only and all-patient break-even points closest to each other."""
    if not randomised or not everyone:
        return None
    return min(((r, a) for r in randomised for a in everyone), key=lambda p: abs(p[0].x - p[1].x))


def shift_delta(sp: SelectionPair, randomised: be.BreakEven, everyone: be.BreakEven, level: float
                ) -> tuple[float, float] | None:
    """Delta-method interval for (all-patient minus randomised-only break-even). The randomised patients are
    part of everyone, so Cov(all, randomised fit) = Var(all fit) to first order (an efficient estimator's
    covariance with any other consistent one, as in Hausman's test): var = v_all / s_all^2 + v_rand / s_rand^2
    - 2 Cov_all(x_rand, x_all) / (s_all s_rand), with v the variance of the difference and s its slope at each
    root. None when a curve gives no covariance along the index or the variance is not positive."""
    if sp.randomised is None:
        return None
    xr, xa = np.array([randomised.x]), np.array([everyone.x])
    sr, sa = randomised.slope, everyone.slope
    if not (np.isfinite(sr) and np.isfinite(sa)) or sr == 0 or sa == 0:
        return None
    va = sum(float(f.measure_var(xa)[0]) for f in sp.all.fits.values())
    vr = sum(float(f.measure_var(xr)[0]) for f in sp.randomised.fits.values())
    cross = 0.0
    for f in sp.all.fits.values():
        c = curve_cov(f, xr, xa)
        if c is None:
            return None
        cross += float(c[0, 0])
    var = va / sa ** 2 + vr / sr ** 2 - 2.0 * cross / (sa * sr)
    if not var > 0:
        return None
    shift, half = everyone.x - randomised.x, be.critical_value(level) * math.sqrt(var)
    return shift - half, shift + half


@dataclass
class _ShiftJob:
    outcome: str
    index: str
    basis: object
    arrays: dict[str, ArmArrays]
    grid: np.ndarray
    x_randomised: float
    x_all: float
    start_all: dict[str, np.ndarray]
    start_randomised: dict[str, np.ndarray]


@dataclass
class _ShiftPayload:
    spec: Spec
    strata: list[np.ndarray]
    randomised: np.ndarray
    jobs: list[_ShiftJob]


def _nearest_root(fits: dict[str, Fitted], sign: float, grid: np.ndarray, margin: float, x0: float) -> float:
    first, second = fits.values()
    roots = ft.grid_roots(grid, sign * (first.measure(grid) - second.measure(grid)) - margin)
    return float(roots[np.argmin(np.abs(roots - x0))]) if len(roots) else math.nan


def _shift_replicate(payload: _ShiftPayload, rng: np.random.Generator) -> dict[tuple[str, str], float]:
    """Resample patients within arm x allocation strata; refit all-patient and randomised-only curves."""
    draw = np.sort(np.concatenate([rng.choice(s, size=len(s), replace=True) for s in payload.strata]))
    rand = draw[payload.randomised[draw]]
    spec, out = payload.spec, {}
    for job in payload.jobs:
        outcome = spec.outcome(job.outcome)
        try:
            pa = refit_arms(outcome, job.basis, job.arrays, dict.fromkeys(job.arrays, draw), job.start_all)
            pr = refit_arms(outcome, job.basis, job.arrays, dict.fromkeys(job.arrays, rand), job.start_randomised)
        except FIT_ERRORS:
            out[(job.outcome, job.index)] = math.nan
            continue
        m, sign = spec.margin_for(outcome), 1.0 if outcome.higher_is_better else -1.0
        out[(job.outcome, job.index)] = (_nearest_root(pa, sign, job.grid, m, job.x_all)
                                         - _nearest_root(pr, sign, job.grid, m, job.x_randomised))
    return out


def shift_bootstrap(fs: ft.FitSet, pairs: dict[tuple[str, str], tuple[SelectionPair, be.BreakEven, be.BreakEven]],
                    replicates: int, progress: Progress | None = None) -> dict[tuple[str, str], np.ndarray]:
    """Bootstrap draws of (all-patient minus randomised-only break-even), resampling within arm x allocation
    strata so every replicate keeps the numbers randomised and chosen in each arm; seeded from analysis.seed."""
    spec = fs.spec
    rand = fs.cohort.randomised.to_numpy(bool)
    arm_col = fs.cohort.frame[spec.cohort.arm].to_numpy()
    strata = [s for arm in spec.cohort.arms for r in (True, False)
              if len(s := np.flatnonzero((arm_col == arm) & (rand == r)))]
    jobs = []
    for (o, i), (sp, rb, ab) in pairs.items():
        grid = ft.grid_for(sp.all, spec.analysis.grid)
        arrays = {arm: ArmArrays.of(sp.all.data[arm], r, len(rand)) for arm, r in sp.all.rows.items()}
        jobs.append(_ShiftJob(o, i, sp.all.basis, arrays, grid, rb.x, ab.x,
                              {a: f.params_ for a, f in sp.all.fits.items()},
                              {a: f.params_ for a, f in sp.randomised.fits.items()}))
    if not jobs or replicates <= 0:
        return {}
    payload = _ShiftPayload(spec, strata, rand, jobs)
    reps = run_replicates(functools.partial(_shift_replicate, payload), replicates, spec.analysis.seed,
                          workers=spec.analysis.workers, scheduler=spec.analysis.scheduler, progress=progress)
    return {key: np.array([rep[key] for rep in reps], float) for key in pairs}


# ------------------------------------------------------------------------------------------
# E-values of the weighted (selection-adjusted) comparison of the arms in chosen patients
# ------------------------------------------------------------------------------------------
def _comparison(outcome: OutcomeSpec, m: tuple[float, float], v: tuple[float, float], sd_y: float | None,
                z: float) -> tuple[float, float, float, str] | None:
    """(estimate, lo, hi, kind) of first versus second: a risk ratio, or a standardised difference for a mean."""
    facts = describe(outcome)
    if not facts.probability:
        if not sd_y:
            return None
        d, se = (m[0] - m[1]) / sd_y, math.sqrt(max(v[0] + v[1], 0.0)) / sd_y
        return d, d - z * se, d + z * se, "smd"
    risk = (1.0 - m[0], 1.0 - m[1]) if facts.follow_up else m  # survival's event is the complement
    if min(risk) <= 0.0:
        return None
    rr = risk[0] / risk[1]
    se = math.sqrt(max(v[0] / risk[0] ** 2 + v[1] / risk[1] ** 2, 0.0))
    return rr, rr * math.exp(-z * se), rr * math.exp(z * se), "rr"


def adjusted_e_value(sp: SelectionPair, spec: Spec) -> dict | None:
    """E-values of the weighted comparison: averaged over the chosen patients' index values and at the
    quartiles of their index. Risk ratio for binary, ordinal (favourable) and survival (event by the
    horizon) outcomes; exp(0.91 d) for continuous ones (VanderWeele & Ding 2017)."""
    adj, o = sp.adjusted, sp.outcome
    facts = describe(o)
    if adj is None or (facts.follow_up and not facts.probability):  # restricted mean survival: no risk ratio
        return None
    arms = list(adj.fits)
    f1, f2 = adj.fits[arms[0]], adj.fits[arms[1]]
    z = be.critical_value(spec.analysis.level)
    sd_y = None
    if not facts.probability:
        v = [np.var(adj.data[a].y, ddof=1) for a in arms]
        sd_y = math.sqrt((v[0] + v[1]) / 2.0)
    x = np.concatenate([adj.data[a].x for a in arms])
    a1, a2 = curve_average(f1, x), curve_average(f2, x)
    entries = []
    overall = _comparison(o, (a1[0], a2[0]), (a1[1], a2[1]), sd_y, z)
    for q in (0.25, 0.5, 0.75):
        xq = np.array([np.quantile(x, q)])
        c = _comparison(o, (float(f1.measure(xq)[0]), float(f2.measure(xq)[0])),
                        (float(f1.measure_var(xq)[0]), float(f2.measure_var(xq)[0])), sd_y, z)
        if c is not None:
            entries.append({"x": _r(xq[0]), "quantile": q, "estimate": _r(c[0]), "ci": [_r(c[1]), _r(c[2])],
                            **e_value(c[0], c[1], c[2], c[3]).to_json()})
    if overall is None:
        return None
    if not facts.probability:
        what = f"standardised difference in {measure_words(o)} (d; risk ratio approximated by exp(0.91 d))"
    elif facts.follow_up:
        what = f"risk ratio of the event by {o.horizon:g}{' ' + o.units if o.units else ''}"
    else:
        what = f"risk ratio of the {measure_words(o)}"
    return {"comparison": f"{arms[0]} versus {arms[1]} in chosen patients, weighted", "scale": what,
            "estimate": _r(overall[0]), "ci": [_r(overall[1]), _r(overall[2])],
            "interval": "delta" if a1[2] == a2[2] == "delta" else "bound",
            **e_value(overall[0], overall[1], overall[2], overall[3]).to_json(), "at": entries,
            "note": "The E-value is the risk ratio an unmeasured confounder would need with both the choice of "
                    "treatment and the outcome, beyond the measured covariates, to explain the weighted "
                    "difference away (VanderWeele & Ding 2017)."}


# ------------------------------------------------------------------------------------------
# The whole selection analysis and its JSON rows
# ------------------------------------------------------------------------------------------
@dataclass
class SelectionResults:
    """Fits, effects and JSON rows of the selection analysis, plus the randomised coverage per index."""

    pairs: dict[tuple[str, str], SelectionPair]
    effects: dict[tuple[str, str, str], SelectionEffect | None]
    rows: list[dict]
    coverage: dict[str, list[dict]]


def analyse_selection(fs: ft.FitSet, *, shift_interval: str | None = None, replicates: int | None = None,
                      progress: Progress | None = None) -> SelectionResults:
    """Every outcome x index x arm: selection effect, break-even from randomised, all and weighted chosen
    patients, their shift and E-values. Empty when the cohort names no allocation column.

    The shift's interval: "bootstrap" within arm x allocation strata, seeded from analysis.seed, with
    `replicates` (None: min(analysis.replicates, SHIFT_REPLICATES)); replicates = 0 gives the quick delta
    interval instead (see shift_delta). shift_interval = "delta" or "bootstrap" overrides that choice.
    """
    spec = fs.spec
    if fs.cohort.randomised is None:
        return SelectionResults({}, {}, [], {})
    if shift_interval is None:
        shift_interval = "delta" if replicates == 0 else "bootstrap"
    if shift_interval not in ("delta", "bootstrap"):
        raise FulcrumError(f"unknown shift interval '{shift_interval}'.", hint="Use 'delta' or 'bootstrap'.")
    if replicates is None or (shift_interval == "bootstrap" and replicates <= 0):
        replicates = min(spec.analysis.replicates, SHIFT_REPLICATES)
    cache: dict = {}
    pairs = {key: fit_selection(fs, *key, cache=cache) for key in fs.pairs}
    bes, shift_jobs = {}, {}
    for key, sp in pairs.items():
        rb, ab, jb = (break_evens(sp.randomised, spec), break_evens(sp.all, spec), break_evens(sp.adjusted, spec))
        bes[key] = (rb, ab, jb)
        m = matched(rb, ab)
        if m is not None:
            shift_jobs[key] = (sp, *m)
    draws = shift_bootstrap(fs, shift_jobs, replicates, progress) if shift_interval == "bootstrap" else {}
    effects, rows = {}, []
    for key, sp in pairs.items():
        rb, ab, jb = bes[key]
        shift = _shift_json(key, shift_jobs, draws, spec, shift_interval, replicates)
        ev = adjusted_e_value(sp, spec)
        for arm in spec.cohort.arms:
            eff = selection_effect(sp, arm, spec)
            effects[(*key, arm)] = eff
            row = _row(sp, arm, eff, (rb, ab, jb), shift, ev)
            row.update(probability=describe(sp.outcome).probability, index_info=index_info_json(fs.indices[sp.index]))
            rows.append(row)
    coverage = {ix.name: randomised_coverage(fs, ix.name) for ix in spec.indices}
    return SelectionResults(pairs, effects, rows, coverage)


def selection_rows(fs: ft.FitSet, *, shift_interval: str | None = None, replicates: int | None = None,
                   progress: Progress | None = None) -> list[dict]:
    """The JSON `selection` rows (see analyse_selection)."""
    return analyse_selection(fs, shift_interval=shift_interval, replicates=replicates, progress=progress).rows


def _shift_json(key: tuple[str, str], jobs: dict, draws: dict, spec: Spec, how: str, replicates: int) -> dict:
    title = f"{spec.outcome(key[0]).title} along {key[1]}"
    out = {"shift": None, "shift_ci": [None, None], "shift_interval": None, "shift_replicates": None,
           "shift_no_root_share": None, "warnings": []}
    if key not in jobs:
        out["warnings"].append(f"{title}: no shift is given, as the randomised-only or the all-patient curves "
                               "have no break-even point in the searched range.")
        return out
    sp, rb, ab = jobs[key]
    out["shift"] = _r(ab.x - rb.x)
    if how == "delta":
        ci = shift_delta(sp, rb, ab, spec.analysis.level)
        if ci is None:
            out["warnings"].append(f"{title}: the shift has no delta-method interval (the model gives no "
                                   "covariance along the index, or the variance came out non-positive); set interval = "
                                   "\"bootstrap\" for a bootstrap interval.")
        else:
            out.update(shift_ci=[_r(ci[0]), _r(ci[1])], shift_interval="delta")
        return out
    d = draws.get(key)
    if d is None:
        out["warnings"].append(f"{title}: no bootstrap was run for the shift, so it has no interval.")
        return out
    ok = np.isfinite(d)
    lo, hi = be.percentile_interval(d[ok], spec.analysis.level) if ok.any() else (None, None)
    share = float(np.mean(~ok))
    out.update(shift_ci=[_r(lo), _r(hi)], shift_interval="bootstrap-percentile", shift_replicates=int(replicates),
               shift_no_root_share=_r(share))
    if share > 0.05:
        out["warnings"].append(f"{title}: in {share:.0%} of the bootstrap replicates one of the curves had no "
                               "break-even point in the searched range (or could not be fitted); the shift interval "
                               "leaves them out.")
    return out


def _row(sp: SelectionPair, arm: str, eff: SelectionEffect | None, bes: tuple, shift: dict, ev: dict | None
         ) -> dict:
    rb, ab, jb = bes
    as_json = (lambda b: None if b is None else [x.to_json() for x in b])  # noqa: E731
    varies = sp.varies.get(arm)
    warnings = list(sp.warnings) + sp.sparse.get(arm, []) + shift["warnings"]
    if eff is not None and eff.method == "bound":
        warnings.append(f"{sp.outcome.title}, {arm}: the interval of the overall selection effect assumes the "
                        "curve's errors are perfectly correlated along the index, so it errs on the wide side.")
    curve = [] if eff is None else [
        {"x": _r(x), "effect": _r(e), "ci": [_r(lo), _r(hi)], "randomised_sparse": bool(s)}
        for x, e, lo, hi, s in zip(eff.grid, eff.effect, eff.lower, eff.upper, eff.sparse)]
    return {
        "outcome": sp.outcome.name, "index": sp.index, "arm": arm, "measure": measure_words(sp.outcome),
        "effect": None if eff is None else _r(eff.overall),
        "ci": [None, None] if eff is None else [_r(eff.overall_ci[0]), _r(eff.overall_ci[1])],
        "p_value": None if eff is None else _r(eff.p_value),
        "effect_interval": None if eff is None else eff.method,
        "effect_over": "the index values of this arm's randomised patients",
        "varies_with_index_p": None if varies is None else _r(varies[2]),
        "varies_with_index": None if varies is None else {"statistic": _r(varies[0]), "df": varies[1]},
        "randomised_break_even": as_json(rb), "all_break_even": as_json(ab), "adjusted_break_even": as_json(jb),
        **{k: v for k, v in shift.items() if k != "warnings"},
        "n_randomised": sp.n[arm]["randomised"], "n_chosen": sp.n[arm]["chosen"],
        "balance": None if sp.weighting is None else sp.weighting.balance,
        "adjusted": None if sp.weighting is None else sp.weighting.to_json(tuple(sp.all.fits)),
        "e_value": ev,
        "curve": curve,
        "warnings": list(dict.fromkeys(warnings)),
    }

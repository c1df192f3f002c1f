"""Can the curves be trusted? Observed versus fitted along the index, calibration, sliding-window
differences, a test of effect modification, the break-even across horizons, and the baseline table.

Everything works on a fitted set (explorer.fitting.FitSet) and returns JSON-ready rows; nothing
here refits the main analysis except the restricted model of the effect-modification test.
"""
from __future__ import annotations

import copy
import dataclasses
import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Callable

import numpy as np
from scipy import stats

from . import breakeven as be
from . import fitting as ft
from .cohort import Cohort
from .errors import FulcrumError
from .indices import MAX_DISCRETE_LEVELS, IndexValues
from .km import kaplan_meier, km_json, nice_ticks, normal_quantile
from .models import describe
from .models.base import ArmLikelihood, OutcomeData
from .models.common import newton
from .models.words import measure_words
from .numeric import r6
from .spec import OutcomeSpec
from .weighting import SMD_FLAG, smd

BANDS = 5
WINDOW, STEP = 300, 100
MAX_WINDOWS = 100
MIN_PER_BAND = 10  # patients per arm a band must hold; smaller bands are merged with their neighbour
ALPHA = 0.05
HORIZONS = 12
AT_RISK_SHARE, AT_RISK_MIN = 0.10, 20
MIN_CLUSTERS = 20


# ------------------------------------------------------------------------------------------
# Bands of the index
# ------------------------------------------------------------------------------------------
def band_codes(x_by_arm: dict[str, np.ndarray], bands: int = BANDS, by_level: bool | None = None
               ) -> tuple[dict[str, np.ndarray], list[tuple]]:
    """Band of every patient, per arm, and the bands' (from, to) index values.

    A discrete index (by_level; by default, one with at most `bands` distinct values) with at most 12
    levels is banded by level, any other by quantiles of the pooled values (ties stay together);
    neighbouring bands are merged until each holds 10 patients of each arm.
    """
    pooled = np.concatenate(list(x_by_arm.values()))
    levels = np.unique(pooled)
    if by_level is None:
        by_level = len(levels) <= bands
    if by_level and len(levels) <= MAX_DISCRETE_LEVELS:
        edges = levels
    else:
        edges = np.unique(np.quantile(pooled, np.linspace(0, 1, bands + 1)[:-1]))
    group = lambda v: np.searchsorted(edges, v, side="right") - 1  # noqa: E731
    counts = np.array([np.bincount(group(x), minlength=len(edges)) for x in x_by_arm.values()])
    merged = np.zeros(len(edges), int)
    band, held = 0, np.zeros(len(counts))
    for j in range(len(edges)):
        merged[j] = band
        held += counts[:, j]
        if held.min() >= MIN_PER_BAND and j < len(edges) - 1:
            band, held = band + 1, np.zeros(len(counts))
    if band > 0 and held.min() < MIN_PER_BAND:
        merged[merged == band] = band - 1
    codes = {a: merged[group(x)] for a, x in x_by_arm.items()}
    of_pooled = merged[group(pooled)]
    spans = [(float(pooled[of_pooled == b].min()), float(pooled[of_pooled == b].max()))
             for b in range(int(merged.max()) + 1)]
    return codes, spans


# ------------------------------------------------------------------------------------------
# Observed values in a group of patients (no model)
# ------------------------------------------------------------------------------------------
@dataclass
class Observed:
    """A nonparametric estimate of the outcome's measure with its variance and interval."""

    value: float | None
    var: float | None
    ci: tuple[float | None, float | None]
    n: int
    levels: list[float] | None = None
    note: str | None = None
    binomial: bool = False  # a proportion: its band variance comes from the fitted value


def wilson(k: float, n: float, level: float) -> tuple[float, float]:
    """Wilson score interval for a proportion (Wilson, JASA 1927)."""
    z = normal_quantile(level)
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return centre - half, centre + half


def observed(outcome: OutcomeSpec, d, level: float) -> Observed:
    """The measure among these patients, unweighted: Kaplan-Meier at the horizon (or RMST to it), the
    proportion (favourable levels for ordinal outcomes, with every level's share) or the mean, as the outcome's
    kind says (models.describe(...).observed_by)."""
    n = len(d.x)
    if n == 0:
        return Observed(None, None, (None, None), 0, note="no patients")
    facts = describe(outcome)
    return _OBSERVERS[facts.observed_by](facts, d, level, n)


def _observed_km(facts, d, level: float, n: int) -> Observed:
    km = kaplan_meier(d.time, d.event, level=level)
    h = float(facts.horizon)
    if km.last_time() < h and km.survival[-1] > 0:
        return Observed(None, None, (None, None), n,
                        note=f"follow-up ends at {km.last_time():g}, before the horizon {h:g}")
    if not facts.probability:
        est, var = km.rmst(h)
        z = normal_quantile(level)
        return Observed(est, var, (est - z * math.sqrt(var), est + z * math.sqrt(var)), n)
    lo, hi = km.interval_at(h)
    return Observed(float(km.at(h)[0]), float(km.variance_at(h)[0]), (float(lo[0]), float(hi[0])), n)


def _observed_proportion(facts, d, level: float, n: int) -> Observed:
    y = np.asarray(d.y, float)
    levels = None
    if facts.levels:
        fav = np.isin(np.arange(len(facts.levels)), [facts.levels.index(f) for f in facts.favourable])
        levels = (np.bincount(y.astype(int), minlength=len(facts.levels)) / n).tolist()
        y = fav[y.astype(int)].astype(float)
    p = float(y.mean())
    return Observed(p, p * (1 - p) / n, wilson(y.sum(), n, level), n, levels, binomial=True)


def _observed_mean(facts, d, level: float, n: int) -> Observed:
    y = np.asarray(d.y, float)
    m = float(y.mean())
    if n < 2:
        return Observed(m, None, (None, None), n, note="one patient")
    var = float(y.var(ddof=1) / n)
    t = _t_quantile(level, n - 1)
    return Observed(m, var, (m - t * math.sqrt(var), m + t * math.sqrt(var)), n)


_OBSERVERS: dict[str, Callable] = {"kaplan_meier": _observed_km, "proportion": _observed_proportion,
                                   "mean": _observed_mean}


@lru_cache(maxsize=4096)
def _t_quantile(level: float, df: int) -> float:
    return float(stats.t.ppf(0.5 + level / 2, df))


def favourable(outcome: OutcomeSpec) -> tuple[str, ...]:
    return describe(outcome).favourable


def _subset(d, keep: np.ndarray):
    """The index and outcome values of the rows in `keep`: all that `observed` reads (covariates,
    weights and clusters are left out, so large cohorts copy little)."""
    return OutcomeData(**{name: np.asarray(v)[keep] for name in ("x", "y", "time", "event")
                          if (v := getattr(d, name)) is not None})


def patient_fit(fit, d):
    """A view of `fit` whose curves use each patient's own adjustment covariates (row i of d.z) instead
    of the reference values, so band averages of fitted values compare with observed ones."""
    if not getattr(fit, "z_names", ()) or d.z is None:
        return fit
    z = np.asarray(d.z, float).reshape(len(d.x), -1)

    def rows(x: np.ndarray) -> np.ndarray:
        x = np.asarray(x, float).reshape(-1)
        if len(x) != len(z):
            raise ValueError("a per-patient view takes exactly the patients' own index values")
        return np.column_stack([fit.basis(x), z])

    view = copy.copy(fit)
    view.rows = rows
    return view


# ------------------------------------------------------------------------------------------
# Observed versus fitted along the index, and calibration
# ------------------------------------------------------------------------------------------
def observed_vs_fitted(pf: ft.PairFit, bands: int = BANDS, level: float = 0.95, by_level: bool | None = None
                       ) -> tuple[list[dict], list[dict], list[str]]:
    """Per arm and band: the observed measure with its interval beside the mean fitted value; then a
    calibration summary per arm and the warnings."""
    o = pf.outcome
    codes, spans = band_codes({a: d.x for a, d in pf.data.items()}, bands, by_level)
    rows, calib, warnings = [], [], []
    for arm, fit in pf.fits.items():
        d = pf.data[arm]
        fitted_all = patient_fit(fit, d).measure(d.x)
        dist_all = patient_fit(fit, d).distribution(d.x) if describe(o).levels else None
        obs, fits = [], []
        for b, (lo, hi) in enumerate(spans):
            keep = codes[arm] == b
            ob = observed(o, _subset(d, keep), level)
            f = float(fitted_all[keep].mean()) if keep.any() else None
            row = {"arm": arm, "band_from": r6(lo), "band_to": r6(hi), "n": int(keep.sum()),
                   "observed": r6(ob.value), "observed_ci": [r6(ob.ci[0]), r6(ob.ci[1])], "fitted": r6(f)}
            if ob.levels is not None and keep.any():
                row["levels"] = [{"level": lv, "observed": r6(po), "fitted": r6(pfit)} for lv, po, pfit in
                                 zip(o.levels, ob.levels, dist_all[keep].mean(axis=0))]
            if ob.note:
                warnings.append(f"{o.title}, {arm}, {pf.index} {lo:.3g} to {hi:.3g}: no observed value ({ob.note}).")
            rows.append(row)
            obs.append(ob)
            fits.append(f)
        calib.append({"arm": arm, **calibration(o, obs, fits, pf.basis.n_columns + 1)})
        warnings.extend(misfit_words(o, arm, pf.index, calib[-1], level))
    return rows, calib, warnings


def misfit_words(o: OutcomeSpec, arm: str, index: str, calib: dict, level: float) -> list[str]:
    """A warning when the band chi-square rejects the fitted curve at the analysis level."""
    p = calib.get("p_value")
    if p is None or p >= 1.0 - level:
        return []
    return [f"{o.title}, {arm}, along {index}: the fitted curve misses the observed band values (band chi-square "
            f"{calib['chi2']:.3g} on {calib['df']} df, p = {p:.2g}); the model's shape along the index may be wrong "
            "for this arm. Look at the observed-versus-fitted table, or try shape = \"spline\"."]


def calibration(outcome: OutcomeSpec, obs: list[Observed], fitted: list[float | None], n_params: int) -> dict:
    """Observed band values regressed on mean fitted values (weights 1 / variance), and a band chi-square.

    In-sample, a patient-level recalibration of a maximum-likelihood fit returns slope 1 and intercept 0
    by construction, so misfit is judged by band: the chi-square sums (observed - fitted)^2 / variance
    over bands (Hosmer-Lemeshow style, variance from the fitted proportion for proportions, Greenwood for
    Kaplan-Meier, the band's sample variance for means) on bands - parameters degrees of freedom (approximate).
    """
    o, f, v = [], [], []
    probability = describe(outcome).probability
    for ob, fv in zip(obs, fitted):
        if ob.value is None or fv is None:
            continue
        var = ob.var
        if ob.binomial or (probability and not var):
            var = fv * (1 - fv) / ob.n
        if var is None or not var > 0:
            continue
        o.append(ob.value)
        f.append(fv)
        v.append(var)
    o, f, v = np.array(o), np.array(f), np.array(v)
    out = {"bands": int(len(o)), "slope": None, "intercept": None, "chi2": None, "df": None, "p_value": None,
           "max_abs_z": None,
           "method": "weighted least squares of observed band values on mean fitted values; band chi-square"}
    if len(o) == 0:
        return out
    z = (o - f) / np.sqrt(v)
    df = len(o) - n_params
    out["max_abs_z"] = r6(float(np.max(np.abs(z))))
    if df >= 1:
        chi2 = float(z @ z)
        out.update(chi2=r6(chi2), df=int(df), p_value=r6(float(stats.chi2.sf(chi2, df))))
    if len(o) >= 3 and np.ptp(f) > 0:
        W = 1 / v
        D = np.column_stack([np.ones(len(f)), f])
        coef = np.linalg.solve((D.T * W) @ D, (D.T * W) @ o)
        out.update(intercept=r6(float(coef[0])), slope=r6(float(coef[1])))
    return out


# ------------------------------------------------------------------------------------------
# Sliding windows (Bonetti & Gelber, Biostatistics 2004)
# ------------------------------------------------------------------------------------------
def window_starts(n: int, window: int, step: int) -> tuple[list[int], int, int, list[str]]:
    """Start positions of overlapping windows of `window` patients moving by `step`; the last window ends
    with the last patient. Very large cohorts widen both so at most 100 windows are made."""
    notes = []
    if n <= window:
        return [0], n, step, ([f"only {n} patients, so the sliding window holds them all."] if n < window else [])
    if (n - window) / step + 1 > MAX_WINDOWS:
        factor = (n - window) / step / (MAX_WINDOWS - 1)
        window, step = int(math.ceil(window * factor)), int(math.ceil(step * factor))
        window = min(window, n)
        notes.append(f"windows widened to {window} patients moving by {step} to keep at most {MAX_WINDOWS} windows.")
    starts = list(range(0, n - window + 1, step))
    if starts[-1] != n - window:
        starts.append(n - window)
    return starts, window, step, notes


def sliding_windows(pf: ft.PairFit, window: int = WINDOW, step: int = STEP, level: float = 0.95
                    ) -> tuple[list[dict], list[str]]:
    """Nonparametric first-minus-second difference (oriented) in overlapping windows of patients ordered
    along the index (ties by cohort row), beside the model's difference at the window's median index."""
    arms = list(pf.fits)
    x = np.concatenate([pf.data[a].x for a in arms])
    rows = np.concatenate([pf.rows[a] for a in arms])
    order = np.lexsort((rows, x))
    arm_of = np.concatenate([np.full(len(pf.data[a].x), i) for i, a in enumerate(arms)])[order]
    pos = np.concatenate([np.arange(len(pf.data[a].x)) for a in arms])[order]
    x = x[order]
    starts, width, _, notes = window_starts(len(x), window, step)
    z = be.critical_value(level)
    dfn = ft.difference_fn(pf)
    model = _at_each(dfn, x)
    out, empty, warnings = [], [], [f"{pf.outcome.title} along {pf.index}: {n}" for n in notes]
    for s in starts:
        window_arm, window_pos = arm_of[s:s + width], pos[s:s + width]
        parts = [observed(pf.outcome, _subset(pf.data[a], np.sort(window_pos[window_arm == i])), level)
                 for i, a in enumerate(arms)]
        xs = x[s:s + width]
        rec = {"from": r6(xs.min()), "to": r6(xs.max()), "median": float(np.median(xs)), "n_first": parts[0].n,
               "n_second": parts[1].n, "difference": None, "ci": [None, None],
               "model_average": r6(float(np.mean(model[s:s + width])))}
        if all(p.value is not None and p.var is not None for p in parts):
            diff = pf.sign * (parts[0].value - parts[1].value)
            se = math.sqrt(parts[0].var + parts[1].var)
            rec.update(difference=r6(diff), ci=[r6(diff - z * se), r6(diff + z * se)])
        else:
            empty.append("; ".join(f"{a}: {p.note or 'too few patients'}" for a, p in zip(arms, parts)
                                   if p.value is None or p.var is None))
        out.append(rec)
    if empty:
        warnings.append(f"{pf.outcome.title} along {pf.index}: {len(empty)} of {len(out)} windows have no "
                        f"nonparametric difference (first: {empty[0]}).")
    at_median = dfn(np.array([rec["median"] for rec in out]))
    for rec, m in zip(out, at_median):
        rec["median"], rec["model_difference"] = r6(rec["median"]), r6(float(m))
    return out, warnings


def _at_each(fn: Callable[[np.ndarray], np.ndarray], x_sorted: np.ndarray) -> np.ndarray:
    """fn at every value of a sorted array, evaluated once per distinct value (a discrete index has few)."""
    new = np.r_[True, x_sorted[1:] != x_sorted[:-1]] if len(x_sorted) else np.zeros(0, bool)
    return fn(x_sorted[new])[np.cumsum(new) - 1]


# ------------------------------------------------------------------------------------------
# Effect modification: likelihood-ratio test of the arm-by-index terms
# ------------------------------------------------------------------------------------------
def arm_likelihood(outcome: OutcomeSpec, fit, d, kernel=None) -> ArmLikelihood:
    """The log-likelihood each per-arm model maximised, rebuilt from its data (a Cox model's from `kernel`
    when given), at its fitted parameters: the model's own (base.Fitted.likelihood)."""
    return fit.likelihood(d, kernel)


def common_slope_fit(parts: list[ArmLikelihood], at_params: list[tuple] | None = None
                     ) -> tuple[float, np.ndarray, bool]:
    """Maximise the sum of the arms' log-likelihoods with the index terms shared and everything else
    (intercepts, cut-points, Cox baselines, covariate terms, scales) arm-specific.

    at_params: each arm's (loglik, gradient, Hessian) at its own parameters; Newton then starts from the
    maximum of their quadratic expansions, next to the answer, instead of the arms' averaged index terms.
    """
    q = len(parts[0].shared)
    own = [np.setdiff1d(np.arange(len(p.params)), p.shared) for p in parts]
    sizes = [len(o) for o in own]
    total = q + sum(sizes)
    maps = []
    at = q
    for p, o, k in zip(parts, own, sizes):
        P = np.zeros((len(p.params), total))
        P[p.shared, np.arange(q)] = 1.0
        P[o, at + np.arange(k)] = 1.0
        maps.append(P)
        at += k
    start = np.r_[np.mean([p.params[p.shared] for p in parts], axis=0),
                  np.concatenate([p.params[o] for p, o in zip(parts, own)])]

    def fun(theta: np.ndarray):
        ll, g, H = 0.0, np.zeros(total), np.zeros((total, total))
        for p, P in zip(parts, maps):
            li, gi, Hi = p.fun(P @ theta)
            if not np.isfinite(li):
                return -np.inf, None, None
            ll, g, H = ll + li, g + P.T @ gi, H + P.T @ Hi @ P
        return ll, g, H

    if at_params is not None:
        near = _quadratic_start(maps, [p.params for p in parts], at_params)
        if near is not None:
            try:
                theta, ll, _, _, _, ok = newton(fun, near)
                if ok:
                    return ll, theta, ok
            except ValueError:
                pass
    theta, ll, _, _, _, ok = newton(fun, start)
    return ll, theta, ok


def _at_own_params(fit, part: ArmLikelihood, same_kernel: bool) -> tuple:
    """(loglik, gradient, Hessian) of an arm at its own fit: a model that kept them from its last Newton step
    on the same kernel (a Cox fit) needs no new pass over the rows; any other is evaluated."""
    own = fit.own_likelihood() if same_kernel else None
    return own if own is not None else part.fun(part.params)


def _quadratic_start(maps: list[np.ndarray], params: list[np.ndarray], at_params: list[tuple]
                     ) -> np.ndarray | None:
    """The maximiser of the sum of each arm's second-order expansion about its own fit, or None."""
    A = sum(P.T @ -H @ P for P, (_, _, H) in zip(maps, at_params))
    b = sum(P.T @ (-H @ p + g) for P, p, (_, g, H) in zip(maps, params, at_params))
    try:
        theta = np.linalg.solve(A, b)
    except np.linalg.LinAlgError:
        return None
    return theta if np.all(np.isfinite(theta)) else None


def effect_modification(pf: ft.PairFit, clustered: bool = False, index_label: str | None = None,
                        kernels: dict | None = None) -> dict:
    """Likelihood-ratio test that the index terms differ between the arms (df = index basis columns).

    Unrestricted: the two per-arm fits (their log-likelihoods add). Restricted: shared index terms with
    arm-specific intercepts, cut-points or scale, arm-specific covariate terms and, for Cox models,
    arm-specific baseline hazards (stratified by arm).
    """
    o, arms = pf.outcome, list(pf.fits)
    kernels = kernels or {}
    parts = [arm_likelihood(o, pf.fits[a], pf.data[a], kernels.get(a)) for a in arms]
    at_params = [_at_own_params(pf.fits[a], p, a in kernels) for a, p in zip(arms, parts)]
    ll_u = sum(v[0] for v in at_params)
    usable = all(np.isfinite(v[0]) and v[1] is not None for v in at_params)
    ll_r, _, ok = common_slope_fit(parts, at_params if usable else None)
    df = pf.basis.n_columns
    stat = max(2.0 * (ll_u - ll_r), 0.0)
    p = float(stats.chi2.sf(stat, df))
    restricted = pf.fits[arms[0]].restricted_words
    weak = not p < ALPHA
    index = index_label or pf.index
    head = (f"{o.title}: the test of whether the difference between {arms[0]} and {arms[1]} changes along "
            f"{index} gives p = {p:.2g} (likelihood ratio {stat:.2f} on {df} df)")
    sentence = (head + (": the break-even point rests on weak evidence of any change in effect along the index."
                        if weak else ": the data show the effect changing along the index."))
    notes = []
    if not ok:
        notes.append(f"{o.title} along {index}: the model with a common index effect did not converge; the test "
                     "is unreliable.")
    method = f"likelihood ratio: per-arm models against {restricted} and index terms common to both arms"
    if clustered:
        method += "; patients treated as independent (clusters ignored), so the evidence may be overstated"
    return {"statistic": r6(stat), "df": int(df), "p_value": r6(p), "weak_evidence": bool(weak),
            "sentence": sentence, "method": method, "converged": bool(ok), "warnings": notes}


# ------------------------------------------------------------------------------------------
# The break-even point as a function of the horizon (survival outcomes)
# ------------------------------------------------------------------------------------------
def horizon_grid(pf: ft.PairFit, horizons: int = HORIZONS) -> np.ndarray:
    """From the 10th percentile of event times to the end of follow-up in the arm that ends first,
    with the spec's horizon added."""
    times = np.concatenate([d.time[d.event > 0] for d in pf.data.values()])
    end = min(float(d.time.max()) for d in pf.data.values())
    start = float(np.quantile(times, 0.10)) if len(times) else end / horizons
    grid = np.linspace(min(start, end), end, horizons)
    return np.unique(np.r_[grid, float(pf.outcome.horizon)])


def at_horizon(fit, d, horizon: float, kernel=None, baseline: tuple | None = None):
    """The same fitted model read at another horizon, without refitting (base.Fitted.at_horizon): the
    coefficients do not depend on the horizon; a Cox model takes its Breslow baseline up to the new horizon
    from `baseline` (the whole of CoxKernel.baseline at its coefficients, which serves every horizon) or from
    `kernel`."""
    return fit.at_horizon(horizon, d, kernel, baseline)


def pair_kernels(pf: ft.PairFit) -> dict:
    """Each arm's reusable likelihood kernel (a Cox arm's risk sets), built once and shared by the
    effect-modification test and the horizon curve; arms whose model has none are left out."""
    kernels = {a: f.likelihood_kernel(pf.data[a]) for a, f in pf.fits.items()}
    return {a: k for a, k in kernels.items() if k is not None}


def at_pair_horizon(pf: ft.PairFit, horizon: float, kernels: dict | None = None,
                    baselines: dict | None = None) -> ft.PairFit:
    """Both arms' fits read at another horizon (see at_horizon)."""
    kernels, baselines = kernels or {}, baselines or {}
    fits = {a: at_horizon(f, pf.data[a], horizon, kernels.get(a), baselines.get(a)) for a, f in pf.fits.items()}
    return dataclasses.replace(pf, outcome=dataclasses.replace(pf.outcome, horizon=float(horizon)), fits=fits,
                               warnings=[])


def horizon_curve(fs: ft.FitSet, pf: ft.PairFit, horizons: int = HORIZONS,
                  kernels: dict | None = None) -> tuple[list[dict], list[str]]:
    """Break-even point (with its interval) at a grid of horizons, and numbers at risk there; horizons
    where fewer than 10% of an arm (or fewer than 20 patients) remain at risk are flagged.

    Every horizon reads the same fits: each Cox arm's baseline is computed once, over all event times."""
    spec, arms = fs.spec, list(pf.fits)
    main = ft.analytic_summary(pf, spec).break_even
    target = main[0].x if main else None
    kernels = pair_kernels(pf) if kernels is None else kernels
    baselines = {a: k.baseline(pf.fits[a].params_) for a, k in kernels.items()}
    times = {a: np.sort(pf.data[a].time) for a in arms}
    out, flagged = [], []
    for h in horizon_grid(pf, horizons):
        s = ft.analytic_summary(at_pair_horizon(pf, h, kernels, baselines), spec)
        risk = [len(times[a]) - int(np.searchsorted(times[a], h, side="left")) for a in arms]
        beyond = any(r < max(AT_RISK_MIN, AT_RISK_SHARE * len(pf.data[a].time)) for r, a in zip(risk, arms))
        pick = None
        if s.break_even:
            ref = target if target is not None else s.break_even[0].x
            pick = min(s.break_even, key=lambda b: abs(b.x - ref))
            target = pick.x if not main else target
        out.append({"horizon": r6(h), "break_even": None if pick is None else r6(pick.x),
                    "ci": [None, None] if pick is None else [r6(pick.ci[0]), r6(pick.ci[1])],
                    "interval": None if pick is None else pick.interval,
                    "break_evens": [b.to_json() for b in s.break_even], "favours_throughout": s.favours_throughout,
                    "at_risk_first": risk[0], "at_risk_second": risk[1], "beyond_follow_up": bool(beyond),
                    "spec_horizon": bool(np.isclose(h, pf.outcome.horizon))})
        if beyond:
            flagged.append(h)
    warnings = []
    if flagged:
        warnings.append(f"{pf.outcome.title} along {pf.index}: from a horizon of {min(flagged):g} on, fewer than "
                        f"{AT_RISK_SHARE:.0%} of an arm's patients (or fewer than {AT_RISK_MIN}) remain at risk; "
                        "break-even points there rest on few patients.")
    return out, warnings


# ------------------------------------------------------------------------------------------
# All checks for every outcome x index
# ------------------------------------------------------------------------------------------
def pair_checks(fs: ft.FitSet, pf: ft.PairFit, *, bands: int = BANDS, window: int = WINDOW,
                step: int = STEP) -> dict:
    """Every check for one outcome along one index, as one JSON row."""
    level = fs.spec.analysis.level
    o = pf.outcome
    iv = fs.indices.get(pf.index)
    ovf, calib, w1 = observed_vs_fitted(pf, bands, level, _discrete(iv))
    windows, w2 = sliding_windows(pf, window, step, level)
    kernels = pair_kernels(pf)
    em = effect_modification(pf, clustered=bool(fs.spec.cohort.cluster),
                             index_label=None if iv is None else iv.info.get("label"), kernels=kernels)
    row = {"outcome": o.name, "index": pf.index, "kind": o.kind, "measure": measure_words(o),
           "probability": describe(o).probability,
           "observed_vs_fitted": ovf, "calibration": calib, "sliding_window": windows,
           "window": {"patients": window, "step": step},
           "effect_modification": {k: v for k, v in em.items() if k != "warnings"}}
    warnings = w1 + w2 + em["warnings"]
    if describe(o).follow_up:
        row["horizon_curve"], w3 = horizon_curve(fs, pf, kernels=kernels)
        warnings += w3
    row["warnings"] = list(dict.fromkeys(warnings))
    return row


def _discrete(iv: IndexValues | None) -> bool | None:
    return None if iv is None else bool(iv.info.get("discrete"))


def checks_rows(fs: ft.FitSet, *, bands: int = BANDS, window: int = WINDOW, step: int = STEP) -> list[dict]:
    """The JSON `checks` rows: one per outcome x index (see pair_checks)."""
    return [pair_checks(fs, pf, bands=bands, window=window, step=step) for pf in fs.pairs.values()]


def clustering(fs: ft.FitSet) -> dict | None:
    """Which clustered intervals the analysis used and over how many clusters; a warning below 20 clusters,
    where sandwich variances and cluster bootstraps both run too narrow. None without a cluster column."""
    spec = fs.spec
    column = spec.cohort.cluster
    if not column:
        return None
    f = fs.cohort.frame
    arm = f[spec.cohort.arm].to_numpy()
    labels = f[column]
    k = int(labels.nunique())
    method = ("bootstrap resampling whole clusters" if spec.analysis.interval == "bootstrap" else
              "cluster-robust (sandwich) variances, scores summed within clusters (Lin & Wei, JASA 1989 for Cox)")
    out = {"column": column, "clusters": k,
           "clusters_per_arm": {a: int(labels[arm == a].nunique()) for a in spec.cohort.arms},
           "method": method, "warnings": ["The checks (effect-modification tests, observed-versus-fitted bands, "
                                          "sliding windows) treat patients as independent, ignoring the clusters."]}
    if k < MIN_CLUSTERS:
        out["warnings"].append(f"Only {k} clusters ('{column}'): with fewer than {MIN_CLUSTERS}, clustered "
                               "intervals tend to be too narrow; read them as approximate.")
    return out


# ------------------------------------------------------------------------------------------
# Kaplan-Meier curves for charts
# ------------------------------------------------------------------------------------------
def km_curves(cohort: Cohort, outcome: OutcomeSpec | str, index: IndexValues | np.ndarray | None = None,
              bands: int | None = None, level: float = 0.95) -> list[dict]:
    """Kaplan-Meier curves per arm, overall and (with an index and bands) per band of the index, with
    numbers at risk at ticks shared by every curve. Complete cases of the outcome (and index)."""
    spec = cohort.spec
    o = spec.outcome(outcome) if isinstance(outcome, str) else outcome
    if not describe(o).follow_up:
        raise FulcrumError(f"Kaplan-Meier curves need a survival outcome; '{o.name}' is {o.kind}.",
                           key=f"outcomes '{o.name}'", hint="Choose a survival outcome.")
    f = cohort.frame
    ok = cohort.complete(o)
    x = None
    if index is not None:
        x = np.asarray(index.values if isinstance(index, IndexValues) else index, float)
        ok &= np.isfinite(x)
    arm_col = f[spec.cohort.arm].to_numpy()
    t, e = f[o.time].to_numpy(float), f[o.event].to_numpy(float)
    ticks = nice_ticks(float(t[ok].max()) if ok.any() else 0.0)
    out = []
    for arm in spec.cohort.arms:
        sel = ok & (arm_col == arm)
        out.append({"outcome": o.name, "arm": arm, "band": None,
                    **km_json(kaplan_meier(t[sel], e[sel], level=level), ticks)})
    if x is not None and bands:
        rows = {arm: np.flatnonzero(ok & (arm_col == arm)) for arm in spec.cohort.arms}
        by_level = _discrete(index) if isinstance(index, IndexValues) else None
        codes, spans = band_codes({a: x[r] for a, r in rows.items()}, bands, by_level)
        for b, (lo, hi) in enumerate(spans):
            for arm, r in rows.items():
                sel = r[codes[arm] == b]
                if len(sel) == 0:
                    continue
                out.append({"outcome": o.name, "arm": arm,
                            "band": {"from": r6(lo), "to": r6(hi), "label": f"{lo:g}" if lo == hi else f"{lo:g} to {hi:g}"},
                            **km_json(kaplan_meier(t[sel], e[sel], level=level), ticks)})
    return out


def km_rows(fs: ft.FitSet, bands: int = BANDS) -> list[dict]:
    """The JSON `kaplan_meier` rows: per survival outcome, each arm's curve over all patients (index null), then
    for each index its curves in `bands` bands of the index (km_curves rows, each naming its index; none when
    bands is 0)."""
    level = fs.spec.analysis.level
    out: list[dict] = []
    for o in (o for o in fs.spec.outcomes if describe(o).follow_up):
        out += [dict(c, index=None) for c in km_curves(fs.cohort, o, level=level)]
        for name, iv in (fs.indices.items() if bands else ()):
            out += [dict(c, index=name) for c in km_curves(fs.cohort, o, iv, bands=bands, level=level) if c["band"]]
    return out


# ------------------------------------------------------------------------------------------
# Baseline characteristics by arm and allocation
# ------------------------------------------------------------------------------------------
def _describe(v: np.ndarray, binary: bool) -> dict:
    ok = v[np.isfinite(v)]
    n = len(ok)
    mean = float(ok.mean()) if n else None
    sd = float(ok.std(ddof=1)) if n > 1 else None
    if mean is None:
        text = "no values"
    elif binary:
        text = f"{100 * mean:.0f}% ({int(ok.sum())} of {n})"
    else:
        text = f"{mean:.3g} (SD {sd:.3g})" if sd is not None else f"{mean:.3g}"
    return {"n": int(n), "missing": int(len(v) - n), "mean": r6(mean), "sd": r6(sd), "text": text}


def _smd_entry(a: np.ndarray, b: np.ndarray, binary: bool, compare: str, among: str) -> dict:
    a, b = a[np.isfinite(a)], b[np.isfinite(b)]
    value = smd(a, b, binary=binary) if len(a) > 1 and len(b) > 1 else None
    return {"compare": compare, "among": among, "smd": r6(value),
            "imbalanced": None if value is None else bool(abs(value) > SMD_FLAG)}


def baseline_table(cohort: Cohort, covariates: list[str] | tuple[str, ...] | None = None) -> list[dict]:
    """Per covariate: mean (SD) or share by arm, overall and among randomised and chosen patients, with
    standardised mean differences between the arms and between chosen and randomised patients
    (|SMD| above 0.1 flagged; Austin, Stat Med 2009)."""
    spec, f = cohort.spec, cohort.frame
    covariates = list(spec.cohort.covariates if covariates is None else covariates)
    first, second = spec.cohort.arms
    arm = f[spec.cohort.arm].to_numpy()
    groups = {"all patients": np.ones(len(f), bool)}
    if cohort.randomised is not None:
        rnd = cohort.randomised.to_numpy(bool)
        groups.update({"randomised": rnd, "chosen": ~rnd})
    out = []
    for name in covariates:
        if name not in f.columns:
            raise FulcrumError(f"the baseline table asks for covariate '{name}', which was not loaded.",
                               column=name, key="cohort.covariates",
                               hint="List it under [cohort] covariates so the cohort reader loads it.")
        v = f[name].to_numpy(float)
        finite = v[np.isfinite(v)]
        binary = bool(len(finite) and np.isin(finite, (0.0, 1.0)).all())
        cells = [{"arm": a, "allocation": g, **_describe(v[m & (arm == a)], binary)}
                 for g, m in groups.items() for a in (first, second)]
        smds = [_smd_entry(v[m & (arm == first)], v[m & (arm == second)], binary, f"{first} vs {second}", g)
                for g, m in groups.items()]
        if cohort.randomised is not None:
            smds += [_smd_entry(v[groups["chosen"] & (arm == a)], v[groups["randomised"] & (arm == a)], binary,
                                "chosen vs randomised", a) for a in (first, second)]
        out.append({"covariate": name, "binary": binary, "groups": cells, "smd": smds})
    return out


def baseline_sentence(table: list[dict]) -> str:
    """One sentence naming the covariates whose |SMD| exceeds 0.1 in any comparison."""
    flagged = [f"{r['covariate']} ({s['compare']}, {s['among']}: {s['smd']:.2f})" for r in table for s in r["smd"]
               if s["imbalanced"]]
    if not flagged:
        return "Every standardised mean difference is within 0.1."
    return "Standardised mean differences above 0.1: " + "; ".join(flagged) + "."

"""Multiple imputation by chained equations, refits on each imputed cohort, and Rubin's rules.

Imputation uses scikit-learn's IterativeImputer (Bayesian ridge, posterior draws) separately within
each arm, so every interaction with the arm is kept; the model holds every outcome, every index and
the cohort covariates. Survival outcomes enter as the event indicator and the Nelson-Aalen cumulative
hazard (White & Royston, Stat Med 2009) and are never imputed themselves. Estimates are combined by
Rubin's rules (Rubin 1987; van Buuren, Flexible Imputation of Missing Data, 2nd ed., section 2.3).
"""
from __future__ import annotations

import dataclasses
import math
import warnings as _warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from . import breakeven as be
from . import fitting as ft
from .cohort import Cohort
from .errors import FulcrumError
from .indices import IndexValues
from .km import nelson_aalen_at
from .models import describe
from .numeric import r6
from .spec import OutcomeSpec, Spec

M = 5
MAX_ITER = 5
CURVE_POINTS = 50
NOTE = ("Multiple imputation assumes values are missing at random given the variables in the imputation model "
        "(every outcome, every index and the cohort covariates, imputed separately in each arm). Survival times "
        "are not imputed: censoring is assumed non-informative, that is, patients lost to follow-up are assumed "
        "to share the outlook of those still followed.")


# ------------------------------------------------------------------------------------------
# Rubin's rules
# ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Pooled:
    """Rubin's rules for m estimates: mean, within (W), between (B) and total T = W + (1 + 1/m) B variance,
    degrees of freedom and the share of the variance due to missing data, (1 + 1/m) B / T."""

    estimate: np.ndarray
    within: np.ndarray
    between: np.ndarray
    total: np.ndarray
    df: np.ndarray
    missing_information: np.ndarray
    m: int

    def interval(self, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
        """estimate -/+ t(df) sqrt(T), the t quantile at Rubin's degrees of freedom."""
        t = stats.t.ppf(0.5 + level / 2, self.df)
        half = t * np.sqrt(self.total)
        return self.estimate - half, self.estimate + half


def rubin(estimates: np.ndarray, variances: np.ndarray, df_complete: float | None = None) -> Pooled:
    """Combine per-imputation estimates (rows) and their variances elementwise (Rubin 1987, 3.1.2-3.1.6).

    df: Rubin's (m - 1)(1 + 1/r)^2 with r = (1 + 1/m) B / W; given the complete-data degrees of freedom,
    the Barnard-Rubin (Biometrika 1999) small-sample version instead.
    """
    q = np.asarray(estimates, float)
    u = np.asarray(variances, float)
    m = q.shape[0]
    qbar = q.mean(axis=0)
    w = u.mean(axis=0)
    b = q.var(axis=0, ddof=1) if m > 1 else np.zeros_like(qbar)
    t = w + (1 + 1 / m) * b
    with np.errstate(divide="ignore", invalid="ignore"):
        lam = np.where(t > 0, (1 + 1 / m) * b / t, 0.0)
        df = np.where(lam > 0, (m - 1) / lam ** 2, np.inf)
        if df_complete is not None:
            obs = (df_complete + 1) / (df_complete + 3) * df_complete * (1 - lam)
            df = np.where(lam > 0, 1 / (1 / df + 1 / obs), obs)
    return Pooled(qbar, w, b, t, df, lam, m)


# ------------------------------------------------------------------------------------------
# Imputing the cohort
# ------------------------------------------------------------------------------------------
@dataclass
class Imputed:
    """One completed cohort and its index values."""

    cohort: Cohort
    indices: dict[str, IndexValues]


def _structural(cohort: Cohort, outcome: OutcomeSpec) -> np.ndarray:
    """Rows whose value is missing by design: patients who died, for an outcome measured among survivors."""
    f = cohort.frame
    none = np.zeros(len(f), bool)
    if not outcome.among_survivors or not outcome.column:
        return none
    for o in cohort.spec.outcomes:
        if describe(o).follow_up:
            return f[outcome.column].isna().to_numpy() & (f[o.event] == 1).to_numpy()
    return none


def _columns(spec: Spec, cohort: Cohort, indices: dict[str, IndexValues]) -> pd.DataFrame:
    """The numeric matrix of the imputation model: outcomes (survival as event and Nelson-Aalen hazard),
    covariates and index values, one column each (an index that is a covariate column is not repeated)."""
    f = cohort.frame
    arm = f[spec.cohort.arm].to_numpy()
    cols: dict[str, np.ndarray] = {}
    for o in spec.outcomes:
        facts = describe(o)
        if facts.follow_up:
            t, e = f[o.time].to_numpy(float), f[o.event].to_numpy(float)
            h = np.full(len(f), np.nan)
            for a in spec.cohort.arms:
                ok = (arm == a) & np.isfinite(t) & np.isfinite(e)
                if ok.any():
                    h[ok] = nelson_aalen_at(t[ok], e[ok])
            cols.setdefault(f"event:{o.event}", e)
            cols.setdefault(f"hazard:{o.time}:{o.event}", h)
        elif facts.levels:
            codes = f[o.column].cat.codes.to_numpy().astype(float)
            cols.setdefault(o.column, np.where(codes < 0, np.nan, codes))
        else:
            cols.setdefault(o.column, f[o.column].to_numpy(float))
    for o in spec.outcomes:
        for c in o.adjust:
            cols.setdefault(c, f[c].to_numpy(float))
    for c in spec.cohort.covariates:
        if c in f.columns:
            cols.setdefault(c, f[c].to_numpy(float))
    for name, iv in indices.items():
        if iv.info.get("column") not in cols:
            cols[f"index:{name}"] = np.asarray(iv.values, float)
    return pd.DataFrame(cols)


def impute(fs: ft.FitSet, m: int = M, seed: int | None = None) -> tuple[list[Imputed], dict[str, int]]:
    """m completed copies of the cohort (seeds drawn from the analysis seed) and the count of values
    filled per column (values missing by design, such as deaths for an outcome among survivors, stay missing)."""
    from sklearn.exceptions import ConvergenceWarning
    from sklearn.experimental import enable_iterative_imputer  # noqa: F401
    from sklearn.impute import IterativeImputer
    from threadpoolctl import (
        threadpool_limits,  # small matrices: one BLAS thread avoids thread contention
    )

    spec, cohort = fs.spec, fs.cohort
    seed = spec.analysis.seed if seed is None else seed
    table = _columns(spec, cohort, fs.indices)
    missing = table.isna().to_numpy()
    arm = cohort.frame[spec.cohort.arm].to_numpy()
    seeds = np.random.SeedSequence(seed).generate_state(m)
    out = []
    for s in seeds:
        filled = table.to_numpy(float).copy()
        for k, a in enumerate(spec.cohort.arms):
            rows = np.flatnonzero(arm == a)
            if not missing[rows].any():
                continue
            imp = IterativeImputer(sample_posterior=True, max_iter=MAX_ITER, random_state=int(s) + k,
                                   skip_complete=True, keep_empty_features=True)
            with _warnings.catch_warnings(), threadpool_limits(1, user_api="blas"):
                _warnings.simplefilter("ignore", ConvergenceWarning)
                filled[rows] = imp.fit_transform(filled[rows])
        out.append(_completed(fs, table, filled))
    for o in spec.outcomes:
        if o.among_survivors and o.column in table.columns:
            missing[:, table.columns.get_loc(o.column)] &= ~_structural(cohort, o)
    counts = {c: int(n) for c, n in zip(table.columns, missing.sum(axis=0)) if n and not c.startswith("hazard:")}
    return out, counts


def _completed(fs: ft.FitSet, table: pd.DataFrame, filled: np.ndarray) -> Imputed:
    """Write imputed values back in each column's own terms: levels, 0/1, bounds, observed index levels."""
    spec, cohort = fs.spec, fs.cohort
    frame = cohort.frame.copy()
    values = dict(zip(table.columns, filled.T))
    for o in spec.outcomes:
        facts = describe(o)
        if facts.follow_up:
            continue
        v = values[o.column]
        if facts.levels:
            codes = np.clip(np.round(v), 0, len(o.levels) - 1).astype(int)
            keep = ~_structural(cohort, o)
            frame[o.column] = pd.Categorical.from_codes(np.where(keep, codes, -1), categories=list(o.levels))
            continue
        if facts.values == "zero_one":
            v = np.clip(np.round(v), 0, 1)
        elif o.bounds is not None:
            v = np.clip(v, *o.bounds)
        frame[o.column] = np.where(_structural(cohort, o), np.nan, v)
    for c in [*spec.cohort.covariates, *(a for o in spec.outcomes for a in o.adjust)]:
        if c in values and c in frame.columns:
            old = cohort.frame[c].to_numpy(float)
            binary = np.isin(old[np.isfinite(old)], (0.0, 1.0)).all()
            frame[c] = np.clip(np.round(values[c]), 0, 1) if binary else values[c]
    indices = {}
    for name, iv in fs.indices.items():
        v = values.get(f"index:{name}", values.get(iv.info.get("column")))
        levels = iv.info.get("levels")
        if iv.info.get("discrete") and levels:
            lv = np.asarray(levels, float)
            v = lv[np.abs(v[:, None] - lv[None, :]).argmin(axis=1)]
        indices[name] = dataclasses.replace(iv, values=np.where(np.isfinite(iv.values), iv.values, v))
    return Imputed(dataclasses.replace(cohort, frame=frame), indices)


# ------------------------------------------------------------------------------------------
# Refits and pooled break-evens
# ------------------------------------------------------------------------------------------
def _imputed_counts(fs: ft.FitSet, pf: ft.PairFit) -> dict[str, int]:
    """Values this pair's analysis would gain from imputation, per column (survival times never)."""
    f, o = fs.cohort.frame, pf.outcome
    out = {}
    if not describe(o).follow_up:
        out[o.column] = int((f[o.column].isna().to_numpy() & ~_structural(fs.cohort, o)).sum())
    for c in o.adjust:
        out[c] = int(f[c].isna().sum())
    out[f"index {pf.index}"] = int((~np.isfinite(fs.indices[pf.index].values)).sum())
    return {k: v for k, v in out.items() if v}


def _pooled_fieller(pf: ft.PairFit, terms: list, level: float) -> list[dict]:
    """Pool the linear difference a + b x by Rubin's rules (mean, W + (1 + 1/m) B as 2x2 matrices) and take
    Fieller's set at the t critical value with Rubin's degrees of freedom for a + b x at the pooled root."""
    m = len(terms)
    ab = np.array([[t[0], t[1]] for t in terms])
    a, b = ab.mean(axis=0)
    if b == 0:
        return []
    x0 = -a / b
    lo_s, hi_s = be.search_range(*pf.x_range)
    if not lo_s <= x0 <= hi_s:
        return []
    W = np.mean([t[2] for t in terms], axis=0)
    B = np.cov(ab.T, ddof=1)
    T = W + (1 + 1 / m) * B
    g = np.array([1.0, x0])
    lam = (1 + 1 / m) * (g @ B @ g) / (g @ T @ g)
    df = (m - 1) / lam ** 2 if lam > 0 else math.inf
    crit = float(stats.t.ppf(0.5 + level / 2, df))
    lo, hi, shape = be.fieller_set(a, b, T, crit)
    return [{"x": r6(x0), "ci": [r6(lo), r6(hi)], "interval": "rubin-fieller", "interval_shape": shape,
             "df": r6(df), "missing_information": r6(lam),
             "per_imputation": [r6(-t[0] / t[1]) if t[1] else None for t in terms]}]


def _pooled_inversion(grid: np.ndarray, diff: Pooled, margin: float, roots: np.ndarray, level: float
                      ) -> list[dict]:
    """Per root of the pooled difference curve: the stretch around it where the pooled band (Rubin's total
    variance, t at Rubin's degrees of freedom) holds the margin, the test inversion the complete-case analysis
    uses; open where the band never leaves the margin. Between grid points the band is interpolated linearly."""
    lo, hi = diff.interval(level)
    outside = np.maximum(lo - margin, margin - hi)  # <= 0 exactly where the band holds the margin
    bes = []
    for r in roots:
        a, b, shape = be.inverted_test_interval(lambda x: np.interp(x, grid, outside), float(r), grid, outside)
        bes.append({"x": r6(float(r)), "ci": [r6(a), r6(b)], "interval": "rubin-test-inversion",
                    "interval_shape": shape})
    return bes


def pooled_pair(fs: ft.FitSet, pf: ft.PairFit, completed: list[Imputed]) -> dict:
    """Refit one outcome x index on every completed cohort; pool the curves and break-evens by Rubin's rules."""
    spec, level, margin = fs.spec, fs.spec.analysis.level, ft.margin_of(fs.spec, pf)
    arms = list(pf.fits)
    grid = ft.grid_for(pf, spec.analysis.grid)
    fits, curves = [], {k: ([], []) for k in ("first", "second", "difference")}
    for c in completed:
        p = ft.fit_pair(spec, c.cohort, pf.outcome, c.indices[pf.index], pf.basis, checks=False,
                        population=fs.population)  # the headline's patients, as the complete-case fit
        fits.append(p)
        m = [p.fits[a].measure(grid) for a in arms]
        v = [p.fits[a].measure_var(grid) for a in arms]
        for key, est, var in (("first", m[0], v[0]), ("second", m[1], v[1]),
                              ("difference", p.sign * (m[0] - m[1]), v[0] + v[1])):
            curves[key][0].append(est)
            curves[key][1].append(var)
    pooled = {k: rubin(np.array(e), np.array(v)) for k, (e, v) in curves.items()}
    dbar = pooled["difference"].estimate
    terms = [ft.fieller_terms(p, margin) for p in fits]
    if all(t is not None for t in terms):
        bes, warnings = _pooled_fieller(pf, terms, level), []
    else:
        bes, warnings = _pooled_inversion(grid, pooled["difference"], margin, ft.grid_roots(grid, dbar - margin),
                                          level), []
    for b in bes:
        below, above = (float(np.interp(b["x"] + d, grid, dbar)) - margin for d in (-1e-3, 1e-3))
        b["favours_below"] = arms[0] if below > 0 else arms[1]
        b["favours_above"] = arms[0] if above > 0 else arms[1]
        b["extrapolated"] = not (pf.x_range[0] <= b["x"] <= pf.x_range[1])
    keep = ft.in_range(pf, grid)
    step = max(1, int(keep.sum()) // CURVE_POINTS)
    bands = {key: pr.interval(level) for key, pr in pooled.items()}
    curve = []
    for i in np.flatnonzero(keep)[::step]:
        point = {"x": r6(grid[i])}
        for key, pr in pooled.items():
            lo, hi = bands[key]
            point[key] = r6(float(pr.estimate[i]))
            point[f"{key}_ci"] = [r6(float(lo[i])), r6(float(hi[i]))]
        curve.append(point)
    n = {a: int(np.mean([len(p.data[a].x) for p in fits])) for a in arms}
    return {"n": n, "break_even": bes, "curve": curve, "warnings": warnings}


def imputed_break_evens(fs: ft.FitSet, m: int = M) -> list[dict]:
    """The JSON `imputation` rows: complete-case and multiply imputed break-evens side by side, per outcome
    x index, with the pooled curves. Pairs with nothing to impute keep the complete-case analysis."""
    spec = fs.spec
    if m < 2:
        raise FulcrumError(f"multiple imputation needs at least 2 imputations; {m} were asked for.",
                           hint="Use m = 5 or more (20 or more when much is missing).")
    completed, _ = impute(fs, m) if any(_imputed_counts(fs, pf) for pf in fs.pairs.values()) else ([], {})
    rows = []
    for pf in fs.pairs.values():
        cc = ft.analytic_summary(pf, spec)
        gains = _imputed_counts(fs, pf)
        row = {"outcome": pf.outcome.name, "index": pf.index, "m": int(m), "seed": spec.analysis.seed,
               "imputed_values": gains,
               "complete_case": {"n": {a: int(f.n_) for a, f in pf.fits.items()},
                                 "break_even": [b.to_json() for b in cc.break_even]},
               "note": NOTE, "method": _method(m), "warnings": []}
        if gains:
            row["imputed"] = pooled_pair(fs, pf, completed)
            row["warnings"] = row["imputed"].pop("warnings")
        else:
            row["imputed"] = None
            row["warnings"].append(f"{pf.outcome.title} along {pf.index}: no values are missing, so the "
                                   "complete-case analysis stands.")
        if describe(pf.outcome).follow_up:
            t, e = (fs.cohort.frame[c] for c in (pf.outcome.time, pf.outcome.event))
            lost = int((t.isna() | e.isna()).sum())
            if lost:
                row["warnings"].append(f"{pf.outcome.title}: {lost} patients without follow-up time or event "
                                       "status stay out (survival outcomes are not imputed).")
        rows.append(row)
    return rows


def _method(m: int) -> str:
    return (f"{m} imputations by chained equations (scikit-learn IterativeImputer, Bayesian ridge with posterior "
            "draws, separately in each arm; survival outcomes as event and Nelson-Aalen cumulative hazard, White & "
            "Royston 2009); each outcome refitted per imputation; curves and break-even points pooled by Rubin's "
            "rules (Rubin 1987), break-even variances by the delta method.")

"""Rule consequences: what a threshold rule along an index does per 100 patients of a target population.

A rule "first arm when the index is below t, else the second" (or the reverse) gives each patient of the
population one arm; the rule's expected outcome is the mean of each patient's predicted outcome under the arm
the rule gives (standardisation, the parametric g-formula: Hernan & Robins, Causal Inference: What If, ch. 13),
times 100. With the patients sorted by index every threshold is a cumulative sum, so a whole rule curve costs
one pass. Intervals: the delta method over the per-arm models (each arm's predictions share that arm's
parameters, so the covariance across patients is kept through a low-rank factor F with Cov = F F'), or
percentiles over the bootstrap replicates when the analysis uses them.

Quantities (policy_quantities.py): every outcome's measure (deaths by a horizon read as 100 minus the alive),
every level of an ordinal outcome, and every composite under the stated weights.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field

import numpy as np

from . import breakeven as be
from .errors import printable
from .fitting import grid_roots
from .models.common import one_blas_thread
from .policy_quantities import Quantity, attach_replicates, quantities
from .target import Target, cohort_target, load_target, overlap

DIRECTIONS = ("first_below", "second_below")
MAX_DISCRETE = 30   # an index with at most this many distinct values gets thresholds between its levels
DRAWS = 2000        # simulated curves for the best threshold's analytic interval
_critical = functools.lru_cache(maxsize=8)(be.critical_value)


@dataclass
class Support:
    """The target patients of one index collapsed to distinct values u with shares a (summing to 1)."""

    u: np.ndarray
    a: np.ndarray
    n: int


def support_of(x: np.ndarray) -> Support:
    x = np.asarray(x, float)
    x = x[np.isfinite(x)]
    u, counts = np.unique(x, return_counts=True)
    return Support(u, counts / max(len(x), 1), len(x))


def thresholds_for(u: np.ndarray, n: int = 101) -> np.ndarray:
    """Candidate thresholds t for "below t": whole-level indices get the midpoints between levels; others an even
    grid. The first threshold puts nobody below and the last puts everybody below, so the ends are the blanket
    rules."""
    if len(u) == 1:
        return np.array([u[0] - 0.5, u[0] + 0.5])
    if len(u) <= MAX_DISCRETE:
        mids = (u[:-1] + u[1:]) / 2
        return np.r_[u[0] - (mids[0] - u[0]), mids, u[-1] + (u[-1] - mids[-1])]
    step = (u[-1] - u[0]) / (n - 1)
    return u[0] + step * np.arange(n + 1)   # the last lies one step above the highest value


@dataclass
class Curve:
    """Per-100 expected value of one quantity under every threshold rule in one direction, with intervals."""

    thresholds: np.ndarray
    value: np.ndarray            # (T,)
    lower: np.ndarray
    upper: np.ndarray
    first_share: np.ndarray      # share (per 100) given the first arm at each threshold
    all_first: tuple[float, float, float]
    all_second: tuple[float, float, float]
    best: int                    # position of the best threshold (oriented by higher_is_better)
    best_ci: tuple[float | None, float | None]
    best_value_ci: tuple[float, float]
    gain_first: tuple[float, float, float]    # best minus all-first, with interval
    gain_second: tuple[float, float, float]
    flat: tuple[float, float]                 # thresholds within the tolerance of the best (the run holding it)
    interval: str
    draws_best: np.ndarray | None = field(default=None, repr=False)


def _cum(a: np.ndarray, M: np.ndarray) -> np.ndarray:
    """Cumulative sums of a-weighted rows, with a leading zero row: C[k] = sum_{j<k} a_j M_j."""
    W = a[:, None] * M if M.ndim == 2 else a * M
    return np.concatenate([np.zeros((1,) + W.shape[1:]), np.cumsum(W, axis=0)])


def _norm2(F: np.ndarray) -> np.ndarray:
    return np.einsum("...j,...j->...", F, F)


def _interval(v: np.ndarray, var: np.ndarray, z: float) -> tuple[np.ndarray, np.ndarray]:
    se = np.sqrt(np.maximum(var, 0.0))
    return v - z * se, v + z * se


def rule_curve(q: Quantity, sup: Support, thresholds: np.ndarray, direction: str, level: float, tolerance: float,
               rng: np.random.Generator | None = None, boot: tuple[np.ndarray, np.ndarray] | None = None,
               best_interval: bool = True) -> Curve:
    """The rule curve of one quantity: 100 x mean over the population of the prediction under the rule's arm.

    boot: per-replicate predictions (R, len(u)) for the first and second arm at sup.u (bootstrap intervals);
    otherwise the quantity's delta-method factors give the intervals. best_interval=False skips the simulation
    behind the best threshold's analytic interval (left open) where nobody reads it.
    """
    k = np.searchsorted(sup.u, thresholds, side="left")          # distinct values below each threshold
    m1, m2 = q.value
    c1, c2 = _cum(sup.a, m1), _cum(sup.a, m2)
    lo_arm, hi_arm = (0, 1) if direction == "first_below" else (1, 0)
    cs = (c1, c2)
    total = (c1[-1], c2[-1])
    v = 100 * (cs[lo_arm][k] + total[hi_arm] - cs[hi_arm][k])
    share = 100 * np.r_[0.0, np.cumsum(sup.a)][k]
    if direction != "first_below":
        share = 100 - share
    all_first, all_second = 100 * total[0], 100 * total[1]
    s = q.sign
    best = int(np.argmax(s * v))
    z = _critical(level)
    if boot is not None:
        B = [100 * _cum(sup.a, b.T).T for b in boot]             # (R, len(u)+1) per arm
        V = B[lo_arm][:, k] + B[hi_arm][:, -1:] - B[hi_arm][:, k]
        lower, upper = np.quantile(V, [0.5 - level / 2, 0.5 + level / 2], axis=0)
        picks = np.argmax(s * V, axis=1)
        tl, th = np.quantile(thresholds[picks], [0.5 - level / 2, 0.5 + level / 2])
        bv = V[:, best]
        gains = (bv - B[0][:, -1], bv - B[1][:, -1])
        qq = [0.5 - level / 2, 0.5 + level / 2]
        g1, g2 = (tuple(np.quantile(g, qq)) for g in gains)
        af, asd = (tuple(np.quantile(Bx[:, -1], qq)) for Bx in B)
        best_value_ci = (float(lower[best]), float(upper[best]))
        how = "bootstrap-percentile"
    else:
        F1, F2 = q.factor
        C1, C2 = _cum(sup.a, F1), _cum(sup.a, F2)
        Cs = (C1, C2)
        lowF = 100 * Cs[lo_arm][k]                                 # (T, q_lo)
        highF = 100 * (Cs[hi_arm][-1][None] - Cs[hi_arm][k])       # (T, q_hi)
        var = _norm2(lowF) + _norm2(highF)
        lower, upper = _interval(v, var, z)
        if best_interval:
            rng = rng or np.random.default_rng(0)
            Z_lo = rng.standard_normal((lowF.shape[1], DRAWS))
            Z_hi = rng.standard_normal((highF.shape[1], DRAWS))
            V = v[:, None] + lowF @ Z_lo + highF @ Z_hi            # (T, DRAWS): the linearised curve, simulated
            picks = np.argmax(s * V, axis=0)
            tl, th = np.quantile(thresholds[picks], [0.5 - level / 2, 0.5 + level / 2])
        else:
            picks, tl, th = np.array([best]), math.nan, math.nan
        tot = (100 * C1[-1], 100 * C2[-1])
        rule_f = {lo_arm: lowF[best], hi_arm: highF[best]}
        g1, g2 = ((float(x) for x in _interval(np.array(v[best] - 100 * total[arm]),
                                               np.array(_norm2(rule_f[arm] - tot[arm]) + _norm2(rule_f[1 - arm])), z))
                  for arm in (0, 1))
        g1, g2 = tuple(g1), tuple(g2)
        af = tuple(float(x) for x in _interval(np.array(all_first), np.array(_norm2(tot[0])), z))
        asd = tuple(float(x) for x in _interval(np.array(all_second), np.array(_norm2(tot[1])), z))
        best_value_ci = (float(lower[best]), float(upper[best]))
        how = q.interval
    flat_ok = s * v >= s * v[best] - tolerance
    lo_i = best
    while lo_i > 0 and flat_ok[lo_i - 1]:
        lo_i -= 1
    hi_i = best
    while hi_i < len(v) - 1 and flat_ok[hi_i + 1]:
        hi_i += 1
    return Curve(thresholds, v, np.asarray(lower, float), np.asarray(upper, float), share,
                 (float(all_first), float(af[0]), float(af[1])), (float(all_second), float(asd[0]), float(asd[1])),
                 best, (float(tl), float(th)), best_value_ci,
                 (float(v[best] - all_first), float(g1[0]), float(g1[1])),
                 (float(v[best] - all_second), float(g2[0]), float(g2[1])),
                 (float(thresholds[lo_i]), float(thresholds[hi_i])), how, thresholds[picks])


# ------------------------------------------------------------------------------------------
# One index: every quantity's rule curves over the target population, and current practice
# ------------------------------------------------------------------------------------------
@dataclass
class PolicySet:
    """Everything the rows, the page and the report show for one index; re-reading a threshold costs nothing."""

    index: str
    title: str
    units: str | None
    discrete: bool
    arms: tuple[str, str]
    target: Target
    thresholds: np.ndarray
    quantities: list[Quantity]
    curves: dict[tuple[str, str], Curve]
    overlap: dict
    current: dict[tuple[str, str], dict]
    break_evens: dict[str, list[dict]]
    level: float
    tolerance: float
    warnings: list[str] = field(default_factory=list)

    def quantity(self, key: str) -> Quantity:
        return next(q for q in self.quantities if q.key == key)


def _chosen(fs) -> tuple[np.ndarray, np.ndarray] | None:
    """Rows of chosen (not randomised) patients and whether each got the first arm; None without allocation."""
    c = fs.cohort
    if c.randomised is None:
        return None
    rows = np.flatnonzero(~c.randomised.to_numpy(bool))
    if not len(rows):
        return None
    first = c.frame[fs.spec.cohort.arm].to_numpy()[rows] == fs.spec.cohort.arms[0]
    return rows, first


def _shares(u: np.ndarray, x: np.ndarray, mask: np.ndarray | None = None) -> np.ndarray:
    """Share of the patients x (only those in mask, over all of x) at each distinct value u."""
    a = np.zeros(len(u))
    ok = np.isfinite(x)
    total = max(int(ok.sum()), 1)
    keep = ok if mask is None else ok & mask
    np.add.at(a, np.searchsorted(u, x[keep]), 1.0)
    return a / total


def _current(q: Quantity, u: np.ndarray, a_first: np.ndarray, a_second: np.ndarray, curve: Curve,
             sup: Support, thresholds: np.ndarray, direction: str, level: float, n: int) -> dict:
    """The observed allocation among chosen patients against the best rule (for them) and the blanket rules."""
    z = _critical(level)
    cur = 100 * (a_first @ q.value[0] + a_second @ q.value[1])
    best = curve.best
    k = int(np.searchsorted(sup.u, thresholds[best], side="left"))
    lo_arm, hi_arm = (0, 1) if direction == "first_below" else (1, 0)
    shares = (a_first, a_second)
    if q.boot is not None:
        cur_r = 100 * (q.boot[0] @ a_first + q.boot[1] @ a_second)
        B = [100 * _cum(sup.a, b.T).T for b in q.boot]
        best_r = B[lo_arm][:, k] + B[hi_arm][:, -1] - B[hi_arm][:, k]
        qq = [0.5 - level / 2, 0.5 + level / 2]
        ci = tuple(np.quantile(cur_r, qq))
        rci = tuple(np.quantile(q.sign * (best_r - cur_r), qq))
    else:
        cf = [100 * (a_first @ q.factor[0]), 100 * (a_second @ q.factor[1])]
        C = [100 * _cum(sup.a, F) for F in q.factor]
        rule_f = {lo_arm: C[lo_arm][k], hi_arm: C[hi_arm][-1] - C[hi_arm][k]}
        ci = tuple(_interval(np.array(cur), np.array(_norm2(cf[0]) + _norm2(cf[1])), z))
        d = q.sign * (curve.value[best] - cur)
        rci = tuple(_interval(np.array(d), np.array(_norm2(rule_f[0] - cf[0]) + _norm2(rule_f[1] - cf[1])), z))
    return {"population": "chosen patients of the cohort, as treated", "n": n,
            "value": _r(cur), "ci": [_r(ci[0]), _r(ci[1])],
            "best_rule_threshold": _r(thresholds[best]), "best_rule_value": _r(curve.value[best]),
            "regret": _r(q.sign * (curve.value[best] - cur)), "regret_ci": [_r(rci[0]), _r(rci[1])],
            "all_first": _r(curve.all_first[0]), "all_second": _r(curve.all_second[0]),
            "first_share": _r(100 * a_first.sum() / max(a_first.sum() + a_second.sum(), 1e-300)),
            "changed": _r(100 * (shares[hi_arm][:k].sum() + shares[lo_arm][k:].sum())),
            "note": "Regret is the best threshold rule's expected value minus that of the allocation the chosen "
                    "patients received, both predicted from the per-arm models for the same patients (oriented so "
                    "that positive means the rule does better). The best rule is chosen on the same data, so the "
                    "regret is optimistic for the rule."}


def _r(v) -> float | None:
    if v is None or not np.isfinite(v):
        return None
    return float(round(float(v), 6))


@one_blas_thread
def prepare_index(fs, index: str, target: Target | None = None, *, replicates: list[dict] | None = None,
                  weights: dict | None = None, tolerance: float | None = None) -> PolicySet:
    """Rule curves along one index for every outcome, level and composite, over the target population."""
    spec = fs.spec
    ix = spec.index(index)
    target = target or cohort_target(spec, fs.indices)
    pol = spec.policy
    tolerance = (pol.tolerance if pol else 1.0) if tolerance is None else tolerance
    xt = np.asarray(target.index[index], float)
    sup_t = support_of(xt)
    chosen = _chosen(fs)
    xc = np.asarray(fs.indices[index].values, float)[chosen[0]] if chosen else np.zeros(0)
    if chosen and not np.isfinite(xc).any():
        chosen = None
    u = np.unique(np.r_[sup_t.u, xc[np.isfinite(xc)]])
    sup = Support(u, _shares(u, xt), sup_t.n)
    thresholds = thresholds_for(sup_t.u, pol.thresholds if pol else 101)
    qs = quantities(fs, index, u, weights)
    if replicates is not None:
        attach_replicates(fs, index, qs, u, replicates, weights)
    rng = np.random.default_rng(spec.analysis.seed)
    curves = {}
    current = {}
    if chosen:
        a_first = _shares(u, xc, chosen[1])
        a_second = _shares(u, xc, ~chosen[1])
        sup_c = Support(u, a_first + a_second, int(np.isfinite(xc).sum()))
    for q in qs:
        for d in DIRECTIONS:
            curves[(q.key, d)] = rule_curve(q, sup, thresholds, d, spec.analysis.level, tolerance, rng, q.boot,
                                            best_interval=q.role != "level")
            if chosen and q.role != "level":
                cc = rule_curve(q, sup_c, thresholds, d, spec.analysis.level, tolerance, rng, q.boot,
                                best_interval=False)
                current[(q.key, d)] = _current(q, u, a_first, a_second, cc, sup_c, thresholds, d,
                                               spec.analysis.level, sup_c.n)
    sides = break_even_sides(fs, index, sup, weights)
    pf0 = fs.pair(next(o.name for o in spec.outcomes), index)
    support = {a: (float(np.min(d.x)), float(np.max(d.x))) for a, d in pf0.data.items()}
    ov = overlap(target, index, ix.title, support, ix.units)
    warnings = list(target.warnings) + ([ov["warning"]] if ov["warning"] else [])
    if any(q.interval == "bound" for q in qs):
        warnings.append("Some models could not be differentiated through their parameters, so their rule intervals "
                        "assume perfectly correlated errors along the index (labelled 'bound'; they err wide).")
    if any(o.adjust for o in spec.outcomes):
        warnings.append("Adjustment covariates are held at their reference values in every prediction, so the "
                        "standardisation averages over the index only, not over the patients' other covariates.")
    discrete = len(sup_t.u) <= MAX_DISCRETE
    return PolicySet(index, ix.title, ix.units, discrete, tuple(spec.cohort.arms), target, thresholds, qs, curves,
                     ov, current, sides, spec.analysis.level, tolerance, warnings)


def break_even_sides(fs, index: str, sup: Support, weights: dict | None = None, points: int = 400) -> dict:
    """Where each outcome's and composite's arms break even along the index (roots of the oriented difference on a
    fine grid over the cohort's range), and how many per 100 of the target population lie below each: a
    break-even is a statement about one patient and does not move with the case mix; how many patients lie on
    each side of it does."""
    lo, hi = fs.pair(fs.spec.outcomes[0].name, index).x_range
    grid = np.linspace(lo, hi, points)
    arms = fs.spec.cohort.arms
    cum = np.r_[0.0, np.cumsum(sup.a)]
    out = {}
    for q in quantities(fs, index, grid, weights):
        if q.role == "level":
            continue
        d = q.sign * (q.value[0] - q.value[1])
        found = []
        for x in grid_roots(grid, d):
            above = float(np.interp(x + 1e-9 * (hi - lo), grid, d))
            found.append({"x": _r(x), "target_below": _r(100 * cum[np.searchsorted(sup.u, x, side="left")]),
                          "favours_below": arms[0] if above < 0 else arms[1]})
        out[q.key] = found
    return out


def policy_indices(spec) -> list[str]:
    """The indices the rules run along: those [policy] names that the spec (perhaps edited since) still has, or
    every index."""
    pol = spec.policy
    names = [ix.name for ix in spec.indices]
    chosen = [n for n in (pol.indices if pol else ()) if n in names]
    return chosen or names


def prepare(fs, target: Target | None = None, *, replicates: list[dict] | None = None,
            weights: dict | None = None) -> dict[str, PolicySet]:
    return {ix: prepare_index(fs, ix, target, replicates=replicates, weights=weights) for ix in policy_indices(fs.spec)}


# ------------------------------------------------------------------------------------------
# JSON rows and sentences
# ------------------------------------------------------------------------------------------
def rule_words(direction: str, arms: tuple[str, str], index_title: str, t: float | str = "t") -> str:
    lo, hi = (arms[0], arms[1]) if direction == "first_below" else (arms[1], arms[0])
    tt = t if isinstance(t, str) else f"{t:.3g}"
    return f"{lo} when {index_title} is below {tt}, else {hi}"


def _triple(t: tuple[float, float, float]) -> dict:
    return {"value": _r(t[0]), "ci": [_r(t[1]), _r(t[2])]}


def rows(ps: PolicySet) -> list[dict]:
    """One row per quantity (outcome or composite; levels inside their outcome's row) and direction."""
    out = []
    arms = ps.arms
    for q in ps.quantities:
        if q.role == "level":
            continue
        for d in DIRECTIONS:
            c = ps.curves[(q.key, d)]
            b = c.best
            composite = q.key.split(":", 1)[1] if q.role == "composite" else None
            row = {"outcome": "composite" if composite else q.key, "composite": composite, "title": q.title,
                   "index": ps.index, "direction": d,
                   "rule": rule_words(d, arms, ps.title),
                   "per": 100, "counts_patients": q.probability, "units": q.units,
                   "higher_is_better": q.sign > 0, "interval": c.interval,
                   "target": {"name": ps.target.name, "n": ps.target.n, "source": ps.target.source},
                   "curve": [{"threshold": _r(t), "first_share": _r(s), "value": _r(v), "ci": [_r(lo), _r(hi)]}
                             for t, s, v, lo, hi in zip(c.thresholds, c.first_share, c.value, c.lower, c.upper)],
                   "all_first": _triple(c.all_first), "all_second": _triple(c.all_second),
                   "best": {"threshold": _r(c.thresholds[b]), "ci": [_r(c.best_ci[0]), _r(c.best_ci[1])],
                            "value": _r(c.value[b]), "value_ci": [_r(c.best_value_ci[0]), _r(c.best_value_ci[1])],
                            "first_share": _r(c.first_share[b]),
                            "blanket": bool(b in (0, len(c.thresholds) - 1)),
                            "gain_over_all_first": _triple(c.gain_first),
                            "gain_over_all_second": _triple(c.gain_second)},
                   "flat_range": {"from": _r(c.flat[0]), "to": _r(c.flat[1]), "tolerance": _r(ps.tolerance)},
                   "current_practice": ps.current.get((q.key, d)),
                   "break_evens": ps.break_evens.get(q.key, []),
                   "overlap": ps.overlap, "warnings": list(ps.warnings)}
            levels = [x for x in ps.quantities if x.role == "level" and x.parent == q.key]
            if levels:
                row["levels"] = [_level_json(x, ps.curves[(x.key, d)], b) for x in levels]
            out.append(row)
    return out


def _level_json(q: Quantity, c: Curve, best: int) -> dict:
    return {"level": q.key.split(":", 1)[1], "values": [_r(v) for v in c.value],
            "all_first": _triple(c.all_first), "all_second": _triple(c.all_second),
            "at_best": {"value": _r(c.value[best]), "ci": [_r(c.lower[best]), _r(c.upper[best])]}}


def policy_rows(fs, target: Target | None = None, *, replicates: list[dict] | None = None) -> tuple[list[dict], list[str]]:
    """The results JSON `policy` rows for the indices the spec names, and the warnings to show at the top."""
    sets = prepare(fs, target, replicates=replicates)
    out, warnings = [], []
    for ps in sets.values():
        out += rows(ps)
        warnings += ps.warnings
    return out, list(dict.fromkeys(warnings))


def at_threshold(ps: PolicySet, key: str, direction: str, t: float) -> dict:
    """The per-100 consequences of one rule at threshold t (the nearest candidate at or below t) for the page:
    the value with its interval, the blanket rules, and each level when the quantity has them."""
    c = ps.curves[(key, direction)]
    j = int(np.clip(np.searchsorted(c.thresholds, t, side="right") - 1, 0, len(c.thresholds) - 1))
    out = {"threshold": float(c.thresholds[j]), "first_share": float(c.first_share[j]), "value": float(c.value[j]),
           "ci": (float(c.lower[j]), float(c.upper[j])), "all_first": c.all_first[0], "all_second": c.all_second[0],
           "levels": {}}
    for q in ps.quantities:
        if q.role == "level" and q.parent == key:
            lc = ps.curves[(q.key, direction)]
            out["levels"][q.key.split(":", 1)[1]] = (float(lc.value[j]), float(lc.lower[j]), float(lc.upper[j]),
                                                      lc.all_first[0], lc.all_second[0])
    return out


def fmt(v: float | None, probability: bool = True) -> str:
    if v is None or not math.isfinite(v):
        return "open"
    if probability:
        return f"{v:.0f}" if abs(v) >= 10 else f"{v:.1f}"
    return f"{v:.3g}"


def sentence(row: dict, arms: tuple[str, str] | list[str]) -> str:
    """What the row says, in words for minutes of a meeting."""
    b = row["best"]
    unit = "patients" if row["counts_patients"] else (row["units"] or "units")
    who = f"{row['target']['name']} ({row['target']['n']} patients)"
    if b["blanket"]:
        which = arms[0] if abs(b["first_share"] - 100) < 1e-9 else arms[1]
        best = f"no threshold beats giving everyone {which}"
    else:
        best = (f"the best threshold is {b['threshold']:.3g} (interval {fmt(b['ci'][0], False)} to "
                f"{fmt(b['ci'][1], False)}; within {row['flat_range']['tolerance']:g} per 100 of the best from "
                f"{row['flat_range']['from']:.3g} to {row['flat_range']['to']:.3g})")
    s = (f"{row['title']}, per 100 of {who}, rule '{row['rule']}': {best}, with {fmt(b['value'])} {unit} per 100 "
         f"(interval {fmt(b['value_ci'][0])} to {fmt(b['value_ci'][1])}) against {fmt(row['all_first']['value'])} "
         f"if everyone had {arms[0]} and {fmt(row['all_second']['value'])} if everyone had {arms[1]}.")
    cp = row.get("current_practice")
    if cp:
        more = "more" if (cp["regret"] or 0) >= 0 else "less"
        s += (f" Among {cp['n']} chosen patients as treated: {fmt(cp['value'])} per 100; the best rule for them would "
              f"change the arm of {fmt(cp['changed'])} in 100 and give {fmt(abs(cp['regret'] or 0))} {more} (difference "
              f"{fmt(cp['regret_ci'][0])} to {fmt(cp['regret_ci'][1])}).")
    for b in row.get("break_evens") or []:
        s += (f" The arms break even at {b['x']:.3g} ({b['favours_below']} better below); {fmt(b['target_below'])} of "
              f"100 of {row['target']['name']} lie below it.")
    return s


def analysis_rows(fs, *, replicates: list[dict] | None = None) -> tuple[list[dict], list[str]]:
    """What analyse() adds: the rows over the spec's [target] patients (or the cohort), and their warnings."""
    spec = fs.spec
    target = load_target(spec, fs.indices, policy_indices(spec)) if spec.target is not None else None
    return policy_rows(fs, target, replicates=replicates)


def text_table(doc: dict) -> str:
    """The rule-consequence lines of `fulcrum analyse`: one line per outcome or composite x index x direction."""
    rows_ = doc.get("policy") or []
    if not rows_:
        return ""
    arms = doc["arms"]
    head = ["outcome", "index", "rule", "best t [interval]", "flat range", "per 100 at best [interval]",
            f"all {arms[0]}", f"all {arms[1]}", "as treated: regret [interval]"]
    lines = []
    for r in rows_:
        b, cp = r["best"], r.get("current_practice")
        lo_arm = arms[0] if r["direction"] == "first_below" else arms[1]
        best_t = "none (blanket)" if b["blanket"] else f"{b['threshold']:.3g} [{fmt(b['ci'][0], False)}, " \
                                                       f"{fmt(b['ci'][1], False)}]"
        lines.append([r["title"], r["index"], f"{lo_arm} below t", best_t,
                      f"{r['flat_range']['from']:.3g}-{r['flat_range']['to']:.3g}",
                      f"{fmt(b['value'])} [{fmt(b['value_ci'][0])}, {fmt(b['value_ci'][1])}]",
                      fmt(r["all_first"]["value"]), fmt(r["all_second"]["value"]),
                      f"{fmt(cp['regret'])} [{fmt(cp['regret_ci'][0])}, {fmt(cp['regret_ci'][1])}]" if cp else "-"])
    lines = [[printable(c) for c in line] for line in lines]
    widths = [max(len(str(x)) for x in col) for col in zip(head, *lines)]
    t = rows_[0]["target"]
    out = ["", f"Rules along an index, per 100 patients of {printable(t['name'])} ({t['n']} patients); best under the "
               f"stated values, flat range within {rows_[0]['flat_range']['tolerance']:g} per 100 of the best; 'as "
               "treated' compares the cohort's chosen patients' own treatment with the best rule for them:",
           "  ".join(h.ljust(w) for h, w in zip(head, widths)), "  ".join("-" * w for w in widths)]
    out += ["  ".join(str(c).ljust(w) for c, w in zip(line, widths)) for line in lines]
    return "\n".join(out)


def consequences(ps: PolicySet, direction: str, t: float) -> list[dict]:
    """Every outcome and composite under one rule (direction, threshold t) against the blanket rules, for a table:
    title, what the numbers count, the rule's value per 100 with its interval, everyone-first, everyone-second."""
    out = []
    for q in ps.quantities:
        if q.role == "level":
            continue
        a = at_threshold(ps, q.key, direction, t)
        unit = "patients" if q.probability else (q.units or "total")
        out.append({"outcome": q.title, "per 100": unit, "under the rule": fmt(a["value"], q.probability),
                    "interval": f"{fmt(a['ci'][0], q.probability)} to {fmt(a['ci'][1], q.probability)}",
                    f"everyone {ps.arms[0]}": fmt(a["all_first"], q.probability),
                    f"everyone {ps.arms[1]}": fmt(a["all_second"], q.probability),
                    "higher is better": "yes" if q.sign > 0 else "no"})
    return out

"""A planner for the next study: how many more randomised patients, in which index range, would settle a break-even.

Each simulated study draws new patients' index values (and adjustment covariates) from today's cohort, restricted
or re-weighted by a recruitment strategy, randomises them 1:1, draws their outcomes from each arm's fitted model as
if it were the truth (explorer.models.simulate), appends them to today's cohort, refits both arms and recomputes
the break-even and its interval with the analysis's own method. Over many simulated studies per strategy and size
it reports the median interval width and the chance of reaching the target, each with its simulation error.
"""
from __future__ import annotations

import dataclasses
import functools
import json
import math
from dataclasses import dataclass
from importlib import resources
from typing import Sequence

import numpy as np

from . import CAUTIONS
from . import fitting as ft
from .errors import FulcrumError
from .margins import margin_for
from .models import fit_model
from .models.simulate import append, simulate
from .resampling import Progress, run_blocks

STRATEGIES = {
    "whole_range": "spread over the whole index range, as today's cohort is spread",
    "around_break_even": "concentrated around today's break-even (the quarter of the cohort nearest to it)",
    "fill_thin": "filling the stretches of the index where randomised patients are thinnest",
}
THIN_BINS = 10
NEAR_SHARE = 0.25


@dataclass
class Target:
    """What the next study should achieve: a break-even interval no wider than `width`, or a clear difference
    at the index value `at` with probability `chance`."""

    width: float | None = None
    chance: float | None = None
    at: float | None = None

    def words(self, index_label: str) -> str:
        if self.width is not None:
            return f"a break-even interval no wider than {self.width:g} on {index_label}"
        return f"a clear difference between the arms at {index_label} {self.at:g}"


@dataclass
class Setting:
    """Everything one simulated study needs, picklable for the workers."""

    pf: ft.PairFit
    spec: object
    pool_x: np.ndarray
    pool_z: np.ndarray | None
    weights: dict[str, np.ndarray]
    cells: list[tuple[str, int]]
    simulations: int
    x0: float | None
    at: float | None


def _pool(pf: ft.PairFit) -> tuple[np.ndarray, np.ndarray | None]:
    """Every patient of the pair (both arms): their index values and adjustment covariates."""
    x = np.concatenate([pf.data[a].x for a in pf.fits])
    zs = [pf.data[a].z for a in pf.fits]
    return x, (None if any(z is None for z in zs) else np.vstack(zs))


def strategy_weights(x: np.ndarray, randomised: np.ndarray | None, x0: float | None) -> dict[str, np.ndarray]:
    """Sampling weights over today's patients for each recruitment strategy (each sums to 1)."""
    n = len(x)
    out = {"whole_range": np.full(n, 1.0 / n)}
    centre = x0 if x0 is not None and np.isfinite(x0) else float(np.median(x))
    dist = np.abs(x - centre)
    near = dist <= np.quantile(dist, NEAR_SHARE)
    out["around_break_even"] = near / near.sum()
    edges = np.unique(np.quantile(x, np.linspace(0, 1, THIN_BINS + 1)))
    bins = np.clip(np.searchsorted(edges, x, side="right") - 1, 0, max(len(edges) - 2, 0))
    counted = randomised if randomised is not None and randomised.any() else np.ones(n, bool)
    per_bin = np.bincount(bins[counted], minlength=bins.max() + 1).astype(float)
    w = 1.0 / (per_bin[bins] + 1.0)
    out["fill_thin"] = w / w.sum()
    return out


def _interval(pf: ft.PairFit, spec, x0: float | None, at: float | None) -> tuple[float, bool | None]:
    """The width of the break-even interval nearest x0 (inf when open or when no break-even remains), and
    whether the difference is clear at `at`."""
    s = ft.analytic_summary(pf, spec)
    width = math.inf
    if s.break_even:
        ref = x0 if x0 is not None else s.break_even[0].x
        b = min(s.break_even, key=lambda b: abs(b.x - ref))
        lo, hi = b.ci
        if lo is not None and hi is not None and b.interval_shape == "finite":
            width = float(hi - lo)
    clear = None
    if at is not None:
        lo_at = float(np.interp(at, s.grid, s.lower))
        hi_at = float(np.interp(at, s.grid, s.upper))
        margin = margin_for(spec, pf.outcome)
        clear = bool(lo_at > margin or hi_at < margin)
    return width, clear


def _one_study(st: Setting, strategy: str, size: int, rng: np.random.Generator) -> tuple[float, bool | None]:
    pf = st.pf
    pick = rng.choice(len(st.pool_x), size=size, replace=True, p=st.weights[strategy])
    arms = list(pf.fits)
    n_first = size // 2 + (size % 2) * int(rng.integers(0, 2))  # 1:1, an odd patient to either arm
    to_first = rng.permutation(np.arange(size) < n_first)
    fits, data = {}, {}
    for arm, mask in zip(arms, (to_first, ~to_first)):
        rows = pick[mask]
        z = None if st.pool_z is None else st.pool_z[rows]
        new = simulate(pf.fits[arm], st.pool_x[rows], z, rng)
        data[arm] = append(pf.data[arm], new) if len(rows) else pf.data[arm]
        fits[arm] = fit_model(pf.outcome, arm, pf.basis, data[arm], start=pf.fits[arm].params_, checks=False)
    grown = dataclasses.replace(pf, fits=fits, data=data, warnings=[])
    return _interval(grown, st.spec, st.x0, st.at)


def _block(st: Setting, seeds: Sequence[np.random.SeedSequence]) -> list:
    out = []
    for s in seeds:
        i = s.spawn_key[-1]
        strategy, size = st.cells[i // st.simulations]
        try:
            out.append(_one_study(st, strategy, size, np.random.default_rng(s)))
        except (FulcrumError, np.linalg.LinAlgError, ValueError, FloatingPointError):
            out.append(None)
    return out


def _median_ci(w: np.ndarray, level: float = 0.95) -> tuple[float, float, float]:
    """The median and a distribution-free interval for it (binomial order statistics)."""
    w = np.sort(w)
    n = len(w)
    from scipy import stats

    z = stats.norm.ppf(0.5 + level / 2)
    lo = max(int(math.floor(n / 2 - z * math.sqrt(n) / 2)), 0)
    hi = min(int(math.ceil(n / 2 + z * math.sqrt(n) / 2)), n - 1)
    return float(np.median(w)), float(w[lo]), float(w[hi])


def _num(v: float) -> float | None:
    return None if not math.isfinite(v) else float(f"{v:.6g}")


def plan_study(fs: ft.FitSet, outcome: str, index: str, target: Target, *, sizes: Sequence[int] | None = None,
               simulations: int | None = None, strategies: Sequence[str] | None = None, seed: int | None = None,
               workers: int | None = None, progress: Progress | None = None) -> dict:
    """The `plan` document: per strategy and size, the median break-even interval width and the chance of reaching
    the target, from simulated studies that add randomised patients to today's cohort."""
    spec = fs.spec
    if (outcome, index) not in fs.pairs:
        raise FulcrumError(f"there is no outcome '{outcome}' along index '{index}' in this analysis.",
                           hint="Name an outcome and an index of the spec with --outcome and --index.")
    if (target.width is None) == (target.chance is None):
        raise FulcrumError("the planner needs one target: a break-even interval width, or a chance of a clear "
                           "difference at an index value.", hint="Give --target-width W, or --target-chance P "
                                                                 "with --at INDEX=VALUE.")
    if target.chance is not None and target.at is None:
        raise FulcrumError("a target chance needs the index value where the difference should be clear.",
                           hint="Add --at INDEX=VALUE.")
    ev = spec.evidence
    sizes = tuple(sizes or (ev.sizes if ev else (100, 250, 500, 1000, 2000)))
    simulations = int(simulations or (ev.simulations if ev else 200))
    strategies = tuple(strategies or STRATEGIES)
    for s in strategies:
        if s not in STRATEGIES:
            raise FulcrumError(f"unknown recruitment strategy '{s}'.", hint=f"Use {', '.join(STRATEGIES)}.")
    pf = fs.pair(outcome, index)
    today = ft.analytic_summary(pf, spec)
    x0 = today.break_even[0].x if today.break_even else None
    if x0 is not None and target.at is None and len(today.break_even) > 1:
        x0 = min((b.x for b in today.break_even), key=lambda v: abs(v - float(np.median(_pool(pf)[0]))))
    pool_x, pool_z = _pool(pf)
    randomised = None
    if fs.cohort.randomised is not None:
        r = fs.cohort.randomised.to_numpy(bool)
        randomised = np.concatenate([r[pf.rows[a]] for a in pf.fits])
    weights = strategy_weights(pool_x, randomised, x0)
    cells = [(s, int(n)) for s in strategies for n in sizes]
    # a simulated study needs only the break-even and its interval (roots and interval ends are refined off the grid),
    # so its curves are drawn on a coarser grid than the report's
    lean = dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, grid=min(spec.analysis.grid, 60)))
    st = Setting(pf, lean, pool_x, pool_z, weights, cells, simulations, x0, target.at)
    n_workers = workers if workers is not None else spec.analysis.workers
    results = run_blocks(functools.partial(_block, st), len(cells) * simulations, spec.analysis.seed,
                         workers=n_workers, progress=progress)
    rows = []
    for k, (s, n) in enumerate(cells):
        chunk = [r for r in results[k * simulations:(k + 1) * simulations] if r is not None]
        failed = simulations - len(chunk)
        widths = np.array([r[0] for r in chunk], float)
        if target.width is not None:
            hit = widths <= target.width
        else:
            hit = np.array([bool(r[1]) for r in chunk])
        p = float(hit.mean()) if len(hit) else float("nan")
        med, mlo, mhi = _median_ci(widths) if len(widths) else (math.nan,) * 3
        rows.append({"strategy": s, "new_patients": n, "simulations": len(chunk), "failed": failed,
                     "width": _num(med), "width_ci": [_num(mlo), _num(mhi)],
                     "finite_share": _num(float(np.isfinite(widths).mean())) if len(widths) else None,
                     "chance": _num(p), "chance_se": _num(math.sqrt(p * (1 - p) / max(len(hit), 1)))})
    label = fs.indices[index].info.get("label") or index
    today_be = today.break_even[0] if today.break_even else None
    doc = {
        "kind": "fulcrum-plan",
        "outcome": outcome, "index": index, "arms": list(spec.cohort.arms),
        "target": {"width": target.width, "chance": target.chance, "at": target.at,
                   "words": target.words(label)},
        "today": {"n": {a: int(len(pf.data[a].x)) for a in pf.fits},
                  "break_even": None if today_be is None else _num(today_be.x),
                  "ci": None if today_be is None else [_num(v) if v is not None else None for v in today_be.ci],
                  "interval": None if today_be is None else today_be.interval,
                  "width": _num(_interval(pf, spec, x0, target.at)[0])},
        "strategies": [{"name": s, "description": STRATEGIES[s]} for s in strategies],
        "rows": rows,
        "seed": spec.analysis.seed, "simulations": simulations, "sizes": list(sizes),
        "method": ("New patients are drawn from today's cohort (index and adjustment covariates) with the strategy's "
                   "weights, randomised 1:1, their outcomes drawn from each arm's fitted model as if it were the truth "
                   "(survival followed to the horizon), appended to today's cohort; both arms are refitted and the "
                   "break-even interval recomputed with the analysis's analytic method. Width is the median over the "
                   "simulated studies (an open interval counts as infinitely wide), with a distribution-free 95% "
                   "interval for the median; the chance carries its binomial standard error."),
        "cautions": list(CAUTIONS),
    }
    doc["summary"] = summary_lines(doc)
    return doc


def plan_schema() -> dict:
    """The JSON Schema of the plan document (explorer/schema/plan.schema.json), with a description per field."""
    return json.loads(resources.files("explorer.schema").joinpath("plan.schema.json").read_text())


def summary_lines(doc: dict) -> list[str]:
    """Plain lines: for each strategy the smallest size that reaches the target at least 80% of the time."""
    out = []
    for s in doc["strategies"]:
        rows = [r for r in doc["rows"] if r["strategy"] == s["name"]]
        good = [r for r in rows if r["chance"] is not None and r["chance"] >= 0.8]
        if good:
            r = good[0]
            out.append(f"{s['description'].capitalize()}: {r['new_patients']} new patients reach "
                       f"{doc['target']['words']} in {100 * r['chance']:.0f}% of simulated studies.")
        else:
            best = max(rows, key=lambda r: r["chance"] or 0.0)
            out.append(f"{s['description'].capitalize()}: even {best['new_patients']} new patients reach "
                       f"{doc['target']['words']} in only {100 * (best['chance'] or 0):.0f}% of simulated studies.")
    return out


__all__ = ["Target", "STRATEGIES", "strategy_weights", "plan_study", "plan_schema", "summary_lines"]

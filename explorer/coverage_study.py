"""Measured coverage: simulate cohorts with known break-even points and check every interval method.

    python -m explorer.coverage_study_cli [--replicates 500] [--sizes 300 1000 3000] [--boot 200] [--workers 2]
    fulcrum check-methods ...

Each study runs the tool's own code (per-arm models, fitting.analytic_summary, fitting.bootstrap_summary,
values.analytic_composite / bootstrap_composite, selection.selection_effect / varies_with_index) on
invented data whose truth is known in closed form. Writes docs/validation.json and docs/validation.md.
"""
from __future__ import annotations

import dataclasses
import datetime as _dt
import functools
import json
import math
import os
import platform
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
from scipy import optimize
from scipy.special import expit

from . import breakeven as be
from . import fitting as ft
from . import selection as sel
from . import values as vl
from .coverage_study_curved import curved_scenarios
from .models import fit_model
from .models.base import Basis, OutcomeData
from .resampling import run_replicates
from .spec import AnalysisSpec, CohortSpec, OutcomeSpec, Spec

X_RANGE = (0.0, 10.0)
TARGET = (0.935, 0.965)
ARMS = ("first", "second")
FIT_ERRORS = sel.FIT_ERRORS
ANALYTIC = ("fieller", "test-inversion", "delta")
BOOT = "bootstrap-percentile"
INTERVALS = (*ANALYTIC, BOOT)
INVERTED = "inverted band (investigation)"


@dataclass(frozen=True)
class Scenario:
    """One outcome kind with a closed-form truth; simulate(rng, n, arm) draws one arm (0 first, 1 second)."""

    name: str
    outcome: OutcomeSpec
    simulate: Callable[[np.random.Generator, int, int], OutcomeData]
    truth: float
    weights: tuple[float, ...] | None = None
    shape: str = "linear"


# ---- closed-form scenarios: the truths cross at x = 5 (the composite's is solved exactly) --------------
def _x(rng: np.random.Generator, n: int) -> np.ndarray:
    return rng.uniform(*X_RANGE, n)


CONT = ((1.0, 0.5, 2.0), (3.0, 0.1, 1.5))  # intercept, slope, residual SD: 1 + 0.5x = 3 + 0.1x at x = 5
BIN = ((1.0, -0.3), (-0.5, 0.0))  # logit: 1 - 0.3x = -0.5 at x = 5
ORD_THETA = ((2.0, 3.0, 4.0), (0.5, 1.5, 2.5))  # P(level <= b) = expit(theta_2 - beta x): 3 - 0.4x = 1.5 - 0.1x
ORD_BETA = (0.4, 0.1)
SURV = ((-3.0, 0.3), (-2.0, 0.1))  # log hazard: -3 + 0.3x = -2 + 0.1x at x = 5, so S(horizon) cross there too
HORIZON = 2.0
CENSOR = (1.0, 6.0)  # censoring uniform on this range
COMP_THETA = ((1.0, 2.0, 3.0, 4.0), (0.2, 0.8, 1.4, 3.5))
COMP_BETA = (0.35, 0.15)
COMP_WEIGHTS = (1.0, 0.7, 0.3, 0.1, 0.0)


def sim_continuous(rng, n, arm):
    x = _x(rng, n)
    a, b, s = CONT[arm]
    return OutcomeData(x=x, y=a + b * x + rng.normal(0, s, n))


def sim_binary(rng, n, arm):
    x = _x(rng, n)
    a, b = BIN[arm]
    return OutcomeData(x=x, y=(rng.uniform(size=n) < expit(a + b * x)).astype(float))


def po_probs(x: np.ndarray, theta, beta: float) -> np.ndarray:
    """Level probabilities (len(x), K) of the proportional odds model logit P(Y <= k) = theta_k - beta x."""
    cum = expit(np.asarray(theta)[None, :] - beta * np.asarray(x, float)[:, None])
    cum = np.column_stack([np.zeros(len(cum)), cum, np.ones(len(cum))])
    return np.diff(cum, axis=1)


def _sim_po(rng, n, theta, beta):
    x = _x(rng, n)
    p = po_probs(x, theta, beta)
    u = rng.uniform(size=n)[:, None]
    y = (u > np.cumsum(p, axis=1)).sum(axis=1)
    return OutcomeData(x=x, y=np.minimum(y, p.shape[1] - 1).astype(float))


def sim_ordinal(rng, n, arm):
    return _sim_po(rng, n, ORD_THETA[arm], ORD_BETA[arm])


def sim_composite(rng, n, arm):
    return _sim_po(rng, n, COMP_THETA[arm], COMP_BETA[arm])


def sim_survival(rng, n, arm):
    x = _x(rng, n)
    a, b = SURV[arm]
    t = rng.exponential(1.0 / np.exp(a + b * x))
    c = rng.uniform(*CENSOR, n)
    return OutcomeData(x=x, time=np.minimum(t, c), event=(t <= c).astype(float))


def sim_same(sim: Callable, rng, n, arm):
    """Both arms drawn from the first arm's model: no difference at any index value."""
    return sim(rng, n, 0)


def composite_truth() -> float:
    """The index value where the arms' expected weights are equal (the only sign change on 0-10)."""
    w = np.asarray(COMP_WEIGHTS)

    def diff(x):
        return float(po_probs(np.array([x]), COMP_THETA[0], COMP_BETA[0])[0] @ w
                     - po_probs(np.array([x]), COMP_THETA[1], COMP_BETA[1])[0] @ w)

    return float(optimize.brentq(diff, *X_RANGE, xtol=1e-13))


LV4 = ("a", "b", "c", "d")
LV5 = ("well", "help", "care", "bed", "dead")
OUTCOMES = {
    "continuous": OutcomeSpec(name="y", kind="continuous", column="y"),
    "binary": OutcomeSpec(name="y", kind="binary", column="y"),
    "ordinal": OutcomeSpec(name="y", kind="ordinal", column="y", levels=LV4, favourable=LV4[:2]),
    "survival": OutcomeSpec(name="y", kind="survival", time="t", event="e", horizon=HORIZON, measure="survival",
                            model="cox"),
    "composite": OutcomeSpec(name="y", kind="ordinal", column="y", levels=LV5, favourable=LV5[:-1]),
}
SIMULATORS = {"continuous": sim_continuous, "binary": sim_binary, "ordinal": sim_ordinal, "survival": sim_survival,
              "composite": sim_composite}


def scenarios() -> list[Scenario]:
    out = [Scenario(k, OUTCOMES[k], SIMULATORS[k], 5.0) for k in ("continuous", "binary", "ordinal", "survival")]
    out += [Scenario("composite", OUTCOMES["composite"], sim_composite, composite_truth(), COMP_WEIGHTS)]
    return out + [Scenario(c.name, c.outcome, c.simulate, c.truth, shape=c.shape) for c in curved_scenarios()]


def null_scenarios() -> list[Scenario]:
    """Identical arms for every kind: any clear-difference region is a false one."""
    return [Scenario(k, OUTCOMES[k], functools.partial(sim_same, SIMULATORS[k]), math.nan,
                     COMP_WEIGHTS if k == "composite" else None) for k in SIMULATORS]


def study_spec(sc: Scenario, analysis: AnalysisSpec | None = None) -> Spec:
    """The smallest Spec the analysis code reads: two arms, one outcome, one index."""
    return Spec(cohort=CohortSpec(path=Path("simulated.csv"), arm="arm", arms=ARMS), outcomes=(sc.outcome,),
                indices=(), analysis=analysis or AnalysisSpec())


# ---- one simulated study ------------------------------------------------------------------------
def fit_arms(sc: Scenario, data: dict[str, OutcomeData], basis: Basis, starts: dict | None = None) -> dict:
    return {arm: fit_model(sc.outcome, arm, basis, d, start=None if starts is None else starts[arm], checks=False)
            for arm, d in data.items()}


def pair_of(sc: Scenario, data: dict[str, OutcomeData], basis: Basis | None = None) -> ft.PairFit:
    """Both arms fitted on the scenario's shape (spline knots from the pooled index, as the tool places them),
    adjustment covariates held at their pooled mean (as fitting.fit_pair holds them)."""
    xs = np.concatenate([d.x for d in data.values()])
    basis = basis or Basis.from_index(xs, sc.shape)
    if any(d.z is not None for d in data.values()):
        z_ref = np.concatenate([d.z for d in data.values()]).mean(axis=0)
        for d in data.values():
            d.z_ref = z_ref
    return ft.PairFit(sc.outcome, "x", basis, fit_arms(sc, data, basis), data, {},
                      (float(xs.min()), float(xs.max())))


def composite_model(pf: ft.PairFit, spec: Spec) -> vl.CompositeModel:
    """The tool's ordinal composite (expected state weight) built from a fitted pair, as values.prepare_composite does."""
    at = vl.ordinal_evaluator(pf)
    grid = ft.grid_for(pf, spec.analysis.grid)
    L, C = at(grid, True)
    return vl.CompositeModel("ordinal", "x", pf.outcome.levels, ARMS, pf, spec, grid, L, C, at, "expected weight")


def analytic(sc: Scenario, pf: ft.PairFit, spec: Spec) -> tuple[be.CurveSummary, vl.CompositeModel | None]:
    if sc.weights is None:
        return ft.analytic_summary(pf, spec), None
    cm = composite_model(pf, spec)
    return vl.analytic_composite(cm, np.asarray(sc.weights)), cm


def delta_interval(pf: ft.PairFit, b: be.BreakEven, level: float) -> tuple:
    """The delta-method interval the tool uses when Fieller does not apply, for the same root."""
    v = sum(float(f.measure_var(np.array([b.x]))[0]) for f in pf.fits.values())
    lo, hi, shape = be.delta_root_interval(b.x, v, b.slope, be.critical_value(level))
    return lo, hi, shape


def composite_delta_interval(cm: vl.CompositeModel, w: np.ndarray, b: be.BreakEven, level: float) -> tuple:
    """The delta-method interval the tool used for composites before test inversion, for the same root."""
    _, C = cm.at(np.array([b.x]), True)
    v = float(w @ (C[0][0] + C[1][0]) @ w)
    return be.delta_root_interval(b.x, v, b.slope, be.critical_value(level))


def inverted_interval(diff: Callable, var: Callable, x0: float, margin: float, crit: float, lo: float, hi: float,
                      n: int = 801) -> tuple:
    """The tool's test-inversion interval (breakeven.inverted_test_interval, used for composites) applied to any
    outcome's difference, on n points of the searched range [lo, hi]; with a linear predictor it is Fieller's set."""
    def g(x):
        x = np.atleast_1d(np.asarray(x, float))
        return (np.asarray(diff(x), float) - margin) ** 2 - crit ** 2 * np.asarray(var(x), float)

    return be.inverted_test_interval(g, x0, np.linspace(lo, hi, n))


def _inverted(pf: ft.PairFit, spec: Spec, x0: float) -> tuple:
    diff = ft.difference_fn(pf)
    var = lambda x: sum(f.measure_var(x) for f in pf.fits.values())  # noqa: E731
    lo, hi = be.search_range(*pf.x_range)
    return inverted_interval(diff, var, x0, spec.margin_for(pf.outcome), be.critical_value(spec.analysis.level), lo, hi)


def resample(d: OutcomeData, idx: np.ndarray) -> OutcomeData:
    take = lambda a: None if a is None else a[idx]  # noqa: E731
    return OutcomeData(x=d.x[idx], y=take(d.y), time=take(d.time), event=take(d.event), z=take(d.z),
                       z_names=d.z_names, z_ref=d.z_ref)


def bootstrap(sc: Scenario, pf: ft.PairFit, spec: Spec, base: be.CurveSummary, cm: vl.CompositeModel | None,
              boot: int, rng: np.random.Generator) -> be.CurveSummary:
    """Resample patients within each arm, refit from the fitted values, and summarise as the tool does."""
    starts = {arm: f.params_ for arm, f in pf.fits.items()}
    grid = base.grid
    firsts, seconds, dists = [], [], []
    for _ in range(boot):
        data = {arm: resample(d, rng.integers(0, len(d), len(d))) for arm, d in pf.data.items()}
        try:
            fits = fit_arms(sc, data, pf.basis, starts)
        except FIT_ERRORS:
            for kept in (firsts, seconds, dists):
                kept.append(None)
            continue
        f, s = (fits[a] for a in ARMS)
        firsts.append(f.measure(grid).astype(np.float32))
        seconds.append(s.measure(grid).astype(np.float32))
        dists.append((f.distribution(grid), s.distribution(grid)) if cm is not None else None)
    if cm is not None:
        ok = np.array([d is not None for d in dists])
        G, K = cm.L[0].shape
        cm.boot = [np.stack([d[j] if d is not None else np.full((G, K), np.nan) for d in dists]) for j in (0, 1)]
        cm.boot_ok = ok
        return vl.bootstrap_composite(cm, np.asarray(sc.weights), base)
    diffs = [None if f is None else pf.sign * (f.astype(float) - s.astype(float)) for f, s in zip(firsts, seconds)]
    return ft.bootstrap_summary(pf, spec, diffs, firsts, seconds, base)


def study_record(b: be.BreakEven, ci: tuple | None = None) -> tuple:
    lo, hi, shape = ci if ci is not None else (*b.ci, b.interval_shape)
    return (float(b.x), lo, hi, shape)


def one_study(sc: Scenario, n: int, boot: int, spec: Spec, rng: np.random.Generator) -> dict:
    """Simulate n patients (half per arm), estimate, and record each method's interval around the truth."""
    data = {"first": sc.simulate(rng, n // 2, 0), "second": sc.simulate(rng, n - n // 2, 1)}
    try:
        pf = pair_of(sc, data)
        s, cm = analytic(sc, pf, spec)
    except FIT_ERRORS as exc:
        return {"failed": f"{type(exc).__name__}: {exc}"}
    out: dict = {"converged": all(f.converged_ for f in pf.fits.values())}
    if not s.break_even:
        return {**out, **{m: None for m in (*INTERVALS, INVERTED)}, "analytic_method": None}
    i = int(np.argmin([abs(b.x - sc.truth) for b in s.break_even]))
    est = s.break_even[i]
    out["analytic_method"] = est.interval
    out[est.interval] = study_record(est)
    if est.interval in ("fieller", "test-inversion"):
        out["delta"] = study_record(est, delta_interval(pf, est, spec.analysis.level))
    if cm is not None:
        out["delta"] = study_record(est, composite_delta_interval(cm, np.asarray(sc.weights), est, spec.analysis.level))
    else:
        out[INVERTED] = study_record(est, _inverted(pf, spec, est.x))
    if boot:
        bs = bootstrap(sc, pf, spec, s, cm, boot, rng)
        out[BOOT] = study_record(bs.break_even[i])
    return out


def null_study(sc: Scenario, n: int, spec: Spec, rng: np.random.Generator) -> dict:
    """Identical arms: does the tool show any clear-difference region, with pointwise and simultaneous bands?"""
    data = {"first": sc.simulate(rng, n // 2, 0), "second": sc.simulate(rng, n - n // 2, 1)}
    try:
        pf = pair_of(sc, data)
        out = {}
        for band in ("pointwise", "simultaneous"):
            sp = dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, bands=band))
            out[band] = bool(analytic(sc, pf, sp)[0].clear_difference)
    except FIT_ERRORS as exc:
        return {"failed": f"{type(exc).__name__}: {exc}"}
    return out


# ---- selection effect: randomised and chosen patients in a comprehensive cohort ------------------------
RANDOMISED_SHARE = 0.25
SELECTION_SHIFT = (0.0, 0.1)  # the set effect: chosen first-arm patients' linear predictor + 0.1 x
SELECTION_KINDS = ("continuous", "binary")


def _selection_arm(sim: str, x: np.ndarray, arm: int, shift: np.ndarray, rng) -> np.ndarray:
    if sim == "continuous":
        a, b, s = CONT[arm]
        return a + b * x + shift + rng.normal(0, s, len(x))
    a, b = BIN[arm]
    return (rng.uniform(size=len(x)) < expit(a + b * x + shift)).astype(float)


def selection_study(sim: str, n: int, effect: bool, spec: Spec, rng: np.random.Generator) -> dict:
    """A cohort where a quarter are randomised and the rest choose (the frail more often the second arm).

    Without effect, chosen and randomised patients share each arm's outcome model; with it, chosen first-arm
    patients' linear predictor rises by 0.1 x. Returns the first arm's p-values of the averaged
    selection effect (Wald) and of its variation along the index (likelihood ratio)."""
    x = _x(rng, n)
    rand = rng.uniform(size=n) < RANDOMISED_SHARE
    first = np.where(rand, rng.uniform(size=n) < 0.5, rng.uniform(size=n) < expit(1.0 - 0.2 * x))
    shift = np.where(effect & ~rand & first, SELECTION_SHIFT[0] + SELECTION_SHIFT[1] * x, 0.0)
    y = np.empty(n)
    for arm, mask in ((0, first), (1, ~first)):
        y[mask] = _selection_arm(sim, x[mask], arm, shift[mask], rng)
    sc = Scenario(sim, OUTCOMES[sim], sim_continuous, math.nan)
    masks = {"first": first, "second": ~first}
    try:
        pairs = {who: pair_of(sc, {arm: OutcomeData(x=x[m & keep], y=y[m & keep]) for arm, m in masks.items()})
                 for who, keep in (("all", np.ones(n, bool)), ("randomised", rand), ("chosen", ~rand))}
        sp = sel.SelectionPair(sc.outcome, "x", pairs["all"], pairs["randomised"], pairs["chosen"], None, None, {},
                               {}, sel.window_edges(x))
        eff = sel.selection_effect(sp, "first", spec)
        lr = sel.varies_with_index(pairs["all"], "first", ~rand[first])
    except FIT_ERRORS as exc:
        return {"failed": f"{type(exc).__name__}: {exc}"}
    return {"wald": eff.p_value, "lr": lr[2], "method": eff.method}


# ---- summaries ------------------------------------------------------------------------------------
def covers(rec: tuple, truth: float) -> bool:
    """Whether an interval (or two-ray / unbounded set, per docs 2b) contains the truth."""
    _, lo, hi, shape = rec
    if shape == "two_rays":
        return truth <= lo or truth >= hi
    return (lo is None or lo <= truth) and (hi is None or hi >= truth)


def summarise_method(records: list, truth: float) -> dict:
    """Coverage over all studies (no root counts as a miss); bias and RMSE over studies with a root."""
    n = len(records)
    est = [r for r in records if r is not None]
    xs = np.array([r[0] for r in est], float)
    finite = [r for r in est if r[3] == "finite"]
    widths = [r[2] - r[1] for r in finite]
    return {"coverage": sum(covers(r, truth) for r in est) / n if n else None,
            "bias": float(np.mean(xs - truth)) if len(xs) else None,
            "rmse": float(np.sqrt(np.mean((xs - truth) ** 2))) if len(xs) else None,
            "median_width": float(np.median(widths)) if widths else None,
            "no_root_share": 1 - len(est) / n if n else None,
            "not_finite_share": (len(est) - len(finite)) / n if n else None}


def round_row(v):
    return None if v is None else round(float(v), 4)


def coverage_rows(sc: Scenario, n: int, recs: list[dict], boot: int, seconds: float) -> list[dict]:
    ok = [r for r in recs if "failed" not in r]
    failed = len(recs) - len(ok)
    methods = sorted({r["analytic_method"] for r in ok if r.get("analytic_method")})
    if "fieller" in methods or "test-inversion" in methods:
        methods.append("delta")
    if not boot and any(r.get(INVERTED) for r in ok):
        methods.append(INVERTED)
    if boot:
        methods.append(BOOT)
    rows = []
    for m in dict.fromkeys(methods):
        summ = summarise_method([r.get(m) for r in ok], sc.truth)
        rows.append({"scenario": sc.name, "kind": sc.name, "method": m, "n": n, "replicates": len(ok),
                     "failed": failed, "not_converged": sum(not r.get("converged", True) for r in ok),
                     "bootstrap_resamples": boot if m == BOOT else None, "truth": round_row(sc.truth),
                     **{k: round_row(v) for k, v in summ.items()}, "seconds": round(seconds, 1)})
    return rows


def logged(task: Callable, path: str, key: dict, rng: np.random.Generator) -> dict:
    """Run one study and append its record to a JSON-lines file, so a long run can be stopped and still used."""
    rec = task(rng)
    ss = rng.bit_generator.seed_seq
    line = json.dumps({**key, "seed": int(ss.entropy), "study": int(ss.spawn_key[-1]), "rec": rec})
    with open(path, "a", encoding="utf-8") as fh:
        fh.write(line + "\n")
    return rec


def rows_from_records(paths: list[str]) -> list[dict]:
    """Coverage rows from record files: studies pooled across runs and seeds, each (seed, study) counted once."""
    groups: dict[tuple, dict] = {}
    for path in paths:
        for line in Path(path).read_text(encoding="utf-8").splitlines():
            if not line.strip():
                continue
            try:
                d = json.loads(line)
            except json.JSONDecodeError:  # a line cut short when a run was stopped
                continue
            groups.setdefault((d["scenario"], d["n"], d["boot"]), {})[(d["seed"], d["study"])] = d["rec"]
    by_name = {sc.name: sc for sc in scenarios()}
    rows = []
    for (name, n, boot), recs in groups.items():
        part = [r if r is None or "failed" in r else
                {k: (tuple(x) if isinstance(x, list) else x) for k, x in r.items()} for r in recs.values()]
        rows += [r for r in coverage_rows(by_name[name], n, part, boot, 0.0) if (r["method"] == BOOT) == bool(boot)]
    for r in rows:
        r.pop("seconds", None)
    return rows


def run(replicates: int = 500, sizes=(300, 1000, 3000), boot: int = 200, workers: int = 1, seed: int = 20261201,
        names: tuple[str, ...] | None = None, boot_replicates: int | None = None,
        parts=("analytic", "bootstrap", "null", "selection"), progress=None,
        log: Callable[[str], None] | None = None, records: str | None = None) -> list[dict]:
    """Every coverage, false-region and selection-test row. boot_replicates: studies with a bootstrap (the
    first ones of the analytic studies, same seeds; default: as many as the analytic ones)."""
    spec0 = AnalysisSpec()
    rows: list[dict] = []
    say = log or (lambda s: None)
    nb = replicates if boot_replicates is None else boot_replicates
    for k, sc in enumerate(scenarios()):
        if names and sc.name not in names:
            continue
        spec = study_spec(sc, spec0)
        for n in sizes:
            s = seed + 100_003 * k + n
            for part, b, reps in (("analytic", 0, replicates), ("bootstrap", boot, nb)):
                if part not in parts or not reps or (part == "bootstrap" and not boot):
                    continue
                t0 = time.monotonic()
                task = functools.partial(one_study, sc, n, b, spec)
                if records:
                    task = functools.partial(logged, task, records, {"scenario": sc.name, "n": n, "boot": b})
                recs = run_replicates(task, reps, s, workers=workers, progress=progress)
                rows += [r for r in coverage_rows(sc, n, recs, b, time.monotonic() - t0)
                         if (r["method"] == BOOT) == (part == "bootstrap")]
                say(f"{sc.name} n={n}: {part} {time.monotonic() - t0:.0f}s")
    if "null" in parts:
        for k, sc in enumerate(null_scenarios()):
            if names and sc.name not in names:
                continue
            for n in sizes:
                recs = run_replicates(functools.partial(null_study, sc, n, study_spec(sc, spec0)), replicates,
                                      seed + 7 * n + 31 * k, workers=workers)
                ok = [r for r in recs if "failed" not in r]
                for band in ("pointwise", "simultaneous"):
                    rows.append({"scenario": "no effect modification", "kind": sc.name, "method": f"{band} band",
                                 "n": n, "replicates": len(ok), "failed": len(recs) - len(ok),
                                 "false_clear_difference_rate": round_row(np.mean([r[band] for r in ok]))})
                say(f"null {sc.name} n={n} done")
    if "selection" in parts:
        for k, kind in enumerate(SELECTION_KINDS):
            spec = study_spec(Scenario(kind, OUTCOMES[kind], sim_continuous, math.nan), spec0)
            for n in sizes:
                for effect in (False, True):
                    recs = run_replicates(functools.partial(selection_study, kind, n, effect, spec), replicates,
                                          seed + 13 * n + 101 * k + int(effect), workers=workers)
                    ok = [r for r in recs if "failed" not in r]
                    for test in ("wald", "lr"):
                        rows.append({"scenario": "selection effect", "kind": kind, "method": {
                            "wald": "averaged effect (Wald)", "lr": "varies with index (likelihood ratio)"}[test],
                            "n": n, "replicates": len(ok), "failed": len(recs) - len(ok),
                            "selection": "set effect" if effect else "none",
                            "rejection_rate": round_row(np.mean([r[test] < 0.05 for r in ok]))})
                say(f"selection {kind} n={n} done")
    mark_defaults(rows)
    return rows


def best_rows(rows: list[dict], scenario: str, method: str) -> dict[int, dict]:
    """The method's row at each size; where several, the one with the most bootstrap resamples, then studies
    (closest to the tool's own default of 1,000 replicates)."""
    out: dict[int, dict] = {}
    for r in rows:
        if r.get("scenario") == scenario and r.get("method") == method and "coverage" in r:
            rank = (r.get("bootstrap_resamples") or 0, r["replicates"])
            if r["n"] not in out or rank >= (out[r["n"]].get("bootstrap_resamples") or 0, out[r["n"]]["replicates"]):
                out[r["n"]] = r
    return out


def meets_target(rows: list[dict], scenario: str, method: str) -> bool:
    """Whether the method was measured at every size >= 1,000 the scenario was run at, within the target."""
    sizes = {r["n"] for r in rows if r.get("scenario") == scenario and "coverage" in r and r["n"] >= 1000}
    own = {n: r["coverage"] for n, r in best_rows(rows, scenario, method).items() if n >= 1000}
    return bool(sizes) and set(own) == sizes and all(c is not None and TARGET[0] <= c <= TARGET[1]
                                                     for c in own.values())


def mark_defaults(rows: list[dict]) -> None:
    """The default per scenario: the analytic method the tool picks, unless it misses the target at n >= 1,000
    and the bootstrap meets it (then the bootstrap)."""
    for sc in dict.fromkeys(r["scenario"] for r in rows if "coverage" in r):
        rs = [r for r in rows if r["scenario"] == sc and "coverage" in r]
        own = next((m for m in ANALYTIC if any(r["method"] == m for r in rs)), "delta")
        default = own if meets_target(rs, sc, own) or not meets_target(rs, sc, BOOT) else BOOT
        chosen = {id(r) for r in best_rows(rs, sc, default).values()}
        for r in rs:
            r["default"] = id(r) in chosen


# ---- outputs ------------------------------------------------------------------------------------------
def _pct(v):
    return "" if v is None else f"{100 * v:.1f}%"


def _num(v):
    return "" if v is None else f"{v:.3f}"


SCENARIO_WORDS = (
    "Each scenario simulates two arms of equal size along an index uniform on 0 to 10, with a break-even point "
    "known in closed form (x = 5; the composite's is solved exactly, x = 5.675). Continuous: linear means; binary: "
    "logistic; ordinal: per-arm proportional odds (4 levels, favourable = the best two); survival: exponential "
    "event times with censoring uniform on 1 to 6, per-arm Cox models, survival at 2; composite: expected state "
    "weight over 5 levels (weights 1, 0.7, 0.3, 0.1, 0) from per-arm proportional odds models. The index enters "
    "linearly, margin 0, level 95%. Coverage counts an unbounded or two-ray set as covering when it contains the "
    "truth; studies with no estimated root count as misses. Bias and RMSE are over studies with a root; the "
    "median width is over finite intervals. Where a study has several roots, the one nearest the truth is scored. "
    "Bootstrap: patients resampled within each arm, models refitted from the study's estimates, percentile "
    "intervals by the tool's own summary code; bootstrap studies are the first ones of the analytic studies "
    "(same simulated cohorts) unless the notes above say otherwise. Monte Carlo standard error of a coverage near 95% from R studies: about "
    "0.22 / sqrt(R) (0.5 points at 2,000 studies, 1.5 at 200).")


def _coverage_table(rows: list[dict]) -> list[str]:
    out = ["| scenario | method | n | studies | coverage | bias | RMSE | median width | no root | not finite "
           "| default |", "|---|---|---|---|---|---|---|---|---|---|---|"]
    for r in rows:
        out.append(f"| {r['scenario']} | {_label(r)} | {r['n']:,} | {r['replicates']} | "
                   f"{_pct(r['coverage'])} | {_num(r['bias'])} | {_num(r['rmse'])} | {_num(r['median_width'])} "
                   f"| {_pct(r['no_root_share'])} | {_pct(r['not_finite_share'])} | "
                   f"{'yes' if r.get('default') else ''} |")
    return out


def _label(r: dict) -> str:
    return r["method"] + (f" ({r['bootstrap_resamples']} resamples)" if r.get("bootstrap_resamples") else "")


def summary_lines(rows: list[dict]) -> list[str]:
    """Per scenario: the default method and whether it meets the target; every method outside it, by size."""
    cov_rows = [r for r in rows if r.get("method") in INTERVALS and "coverage" in r]
    out = []
    for sc in dict.fromkeys(r["scenario"] for r in cov_rows):
        rs = [r for r in cov_rows if r["scenario"] == sc]
        default = next((r["method"] for r in rs if r.get("default")), None)
        if default is None:  # e.g. the refitted fitted-index scenario: an option, never the tool's default
            out.append(f"- **{sc}**: an option, not a default: " + "; ".join(
                f"{_label(r)} {_pct(r['coverage'])} at {r['n']:,}" for r in rs) + ".")
            continue
        big = ", ".join(f"{_pct(r['coverage'])} at {n:,}" for n, r in sorted(best_rows(rs, sc, default).items())
                        if n >= 1000)
        ok = "meets" if meets_target(rs, sc, default) else "misses"
        missing = [f"{_label(r)} {_pct(r['coverage'])} at {r['n']:,}" for r in rs
                   if not TARGET[0] <= r["coverage"] <= TARGET[1]]
        out.append(f"- **{sc}**: default {default} ({big}; {ok} the target)."
                   + (f" Outside 93.5-96.5%: {'; '.join(missing)}." if missing else ""))
    return out


def markdown(rows: list[dict], settings: dict, notes: str = "") -> str:
    cpu = platform.processor() or platform.machine()
    tool = [r for r in rows if r.get("method") in INTERVALS and "coverage" in r]
    probe = [r for r in rows if r.get("method") == INVERTED]
    lines = ["# Measured coverage of Fulcrum's intervals", "",
             f"Run on {settings.get('date', _dt.date.today().isoformat())}: {cpu}, {os.cpu_count()} cores "
             f"(shared with other work), Python {platform.python_version()}, {platform.system()}.", "",
             f"Settings: `{json.dumps({k: v for k, v in settings.items() if k != 'date'})}`.", "",
             "Made by `python -m explorer.coverage_study_cli` (also `fulcrum check-methods`); every row is in "
             "`validation.json`, and the interval rows ship as `explorer/validation_results.json`, from which the "
             "tool labels each break-even interval with its measured coverage (`explorer/coverage.py`).", ""]
    if notes:
        lines += [notes.strip(), ""]
    lines += ["## Summary", "", "Target: the default method's coverage within 93.5-96.5% at n >= 1,000.", ""]
    lines += summary_lines(rows)
    lines += ["", "## Break-even intervals", "", SCENARIO_WORDS, ""] + _coverage_table(tool)
    if probe:
        lines += ["", "### Investigation: the pointwise test inverted", "",
                  "The tool uses this interval for composites (method test-inversion above); here it is computed for "
                  "the other outcomes too, for comparison only. It is the set of index values around the root where "
                  "the pointwise (delta-method) test of a zero difference does not reject, found on 801 points of the "
                  "searched range with its ends refined by Brent's method ('not finite': the set reaches the end of "
                  "the range). Where Fieller applies on a linear scale it is Fieller's set; it shows whether a miss "
                  "of the delta interval comes from the variance of the difference or from linearising the root.",
                  ""]
        lines += _coverage_table(probe)
    lines += ["", "## False clear-difference regions", "",
              "Both arms drawn from the first arm's model, so the true difference is zero at every index value. "
              "The rate is the share of studies showing any clear-difference region anywhere on the searched range "
              "(analytic bands: Johnson-Neyman on the linear scale where Fieller applies, else delta; "
              "simultaneous bands use the Scheffe-type critical value).", "",
              "| outcome | band | n | studies | studies with a false region |", "|---|---|---|---|---|"]
    lines += [f"| {r['kind']} | {r['method']} | {r['n']:,} | {r['replicates']} | "
              f"{_pct(r['false_clear_difference_rate'])} |" for r in rows if "false_clear_difference_rate" in r]
    lines += ["", "## Selection-effect tests", "",
              f"A quarter of patients randomised (half to each arm); the rest choose, the frail more often the "
              f"second arm. 'none': chosen and randomised patients share each arm's outcome model (the rate is the "
              f"test's size). 'set effect': chosen first-arm patients' linear predictor (mean, or log odds) rises by "
              f"{SELECTION_SHIFT[1]} x (the rate is the power). Tests of the first arm at the 5% level, by "
              f"explorer.selection: the selection effect averaged over the randomised patients' index values "
              f"(Wald), and its variation along the index (likelihood ratio).", "",
              "| outcome | test | selection | n | studies | rejected at 5% |", "|---|---|---|---|---|---|"]
    lines += [f"| {r['kind']} | {r['method']} | {r['selection']} | {r['n']:,} | {r['replicates']} | "
              f"{_pct(r['rejection_rate'])} |" for r in rows if "rejection_rate" in r]
    return "\n".join(lines) + "\n"


def json_rows(rows: list[dict]) -> list[dict]:
    """Every row, the contract's fields first; interval rows are the ones the tool reads (explorer/coverage.py)."""
    keys = ("scenario", "kind", "method", "n", "replicates", "coverage", "bias", "rmse", "median_width",
            "no_root_share", "not_finite_share", "default")
    return [{**{k: r.get(k) for k in keys if k in r}, **{k: v for k, v in r.items() if k not in keys}}
            for r in rows]


def write_outputs(rows: list[dict], out_dir: Path, settings: dict, packaged: Path | None = None,
                  notes: str = "") -> None:
    out_dir.mkdir(parents=True, exist_ok=True)
    doc = json_rows(rows)
    (out_dir / "validation.json").write_text(json.dumps(doc, indent=1) + "\n")
    (out_dir / "validation.md").write_text(markdown(rows, settings, notes))
    if packaged is not None:
        packaged.write_text(json.dumps([r for r in doc if r["method"] in INTERVALS], indent=1) + "\n")


_SECTION = {"no effect modification": 1, "selection effect": 2}
_KIND = {k: i for i, k in enumerate(SIMULATORS)}


def merge_runs(runs: list[dict]) -> tuple[list[dict], dict]:
    """Rows of several runs in one list (defaults marked afresh) and their settings side by side. Where runs
    measured the same thing, the row with more studies is kept (the later run's on a tie)."""
    best: dict[tuple, dict] = {}
    for r in (r for run_ in runs for r in run_["rows"]):
        key = (r["scenario"], r.get("kind"), r["method"], r["n"], r.get("selection"), r.get("bootstrap_resamples"))
        if key not in best or r["replicates"] >= best[key]["replicates"]:
            best[key] = r
    order = {m: i for i, m in enumerate((*ANALYTIC, BOOT, INVERTED))}
    rows = sorted(best.values(), key=lambda r: (_SECTION.get(r["scenario"], 0), _KIND.get(r.get("kind"), 9),
                                                r["n"], order.get(r["method"], 9), r.get("selection") or ""))
    mark_defaults(rows)
    settings = {"date": max(run_["settings"]["date"] for run_ in runs), "runs": [run_["settings"] for run_ in runs]}
    return rows, settings

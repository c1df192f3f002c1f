"""Measured coverage along a fitted prognostic index: break-evens whose index is estimated from several covariates.

    python -m explorer.coverage_study_fitted [--studies 1000] [--boot-studies 500] [--boot 100] --rows FILE
    (then merge FILE into docs/validation.* with `python -m explorer.coverage_study_cli --merge ...`)

Each study draws four covariates, a true linear predictor eta = Z @ GAMMA, and each arm's outcome from eta (the
second arm's linear predictor is eta itself, the first arm's does not depend on eta, so the arms break even at
eta = ETA_STAR). The tool then does what an analysis does: it cross-fits the prognostic model on the second arm
(indices.prognostic.cross_fitted_index, 5 folds), fits each arm along the fitted index, and finds the break-even
with its analytic interval (the index held fixed) and a bootstrap refitting the index in every replicate
(refit_index = true; the code path of fitting.boot_replicate: Refitter.values and resampling.refit_arms).
The truth lives on the true linear predictor's scale and is mapped to the fitted index through the fitted model's
absolute prediction (the common scale of prognostic.anchor): on the fitted index the true break-even is the value
whose predicted log cumulative hazard at the horizon (survival) or predicted log odds (binary) equals the true one
at eta = ETA_STAR.
"""
from __future__ import annotations

import argparse
import datetime as _dt
import functools
import json
import math
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.special import expit

from . import fitting as ft
from .coverage import fitted_scenario
from .coverage_study import ARMS, BOOT, CENSOR, FIT_ERRORS, HORIZON, OUTCOMES, study_record, round_row, summarise_method
from .indices.prognostic import cross_fitted_index
from .models import fit_model
from .models.base import Basis, OutcomeData
from .resampling import ArmArrays, refit_arms, run_replicates
from .spec import AnalysisSpec, CohortSpec, IndexSpec, PrognosticSpec, Spec

KINDS = ("survival", "binary")
COVARIATES = ("z1", "z2", "z3", "z4")
GAMMA = np.array([0.6, 0.5, -0.4, 0.3])  # true linear predictor eta = Z @ GAMMA (z4 binary)
ETA_STAR = 0.3
SURV_F = {"first": (-1.7, 0.0), "second": (-2.0, 1.0)}  # log hazard a + b eta: equal at eta = 0.3
BIN_F = {"first": (0.2, 0.0), "second": (0.5, -1.0)}  # logit P(y = 1) a + b eta: equal at eta = 0.3
FOLDS = 5
REFITTED = "refitted"


def simulate(sim: str, n: int, rng: np.random.Generator) -> pd.DataFrame:
    """n patients, half per arm: covariates, arm and the outcome drawn from the true linear predictor."""
    Z = np.column_stack([rng.normal(size=(n, 3)), rng.uniform(size=n) < 0.4]).astype(float)
    eta = Z @ GAMMA
    arm = np.where(np.arange(n) < n // 2, ARMS[0], ARMS[1])
    frame = pd.DataFrame(Z, columns=list(COVARIATES))
    frame["arm"] = arm
    first = arm == ARMS[0]
    if sim == "survival":
        a = np.where(first, SURV_F["first"][0], SURV_F["second"][0])
        b = np.where(first, SURV_F["first"][1], SURV_F["second"][1])
        t = rng.exponential(1.0 / np.exp(a + b * eta))
        c = rng.uniform(*CENSOR, n)
        frame["t"], frame["e"] = np.minimum(t, c), (t <= c).astype(float)
    else:
        a = np.where(first, BIN_F["first"][0], BIN_F["second"][0])
        b = np.where(first, BIN_F["first"][1], BIN_F["second"][1])
        frame["y"] = (rng.uniform(size=n) < expit(a + b * eta)).astype(float)
    return frame


def true_absolute(sim: str) -> float:
    """The second arm's absolute prediction at the true break-even, oriented like the index (higher = worse):
    log cumulative hazard at the horizon (survival), log odds of y = 0 (binary)."""
    if sim == "survival":
        a, b = SURV_F["second"]
        return math.log(HORIZON) + a + b * ETA_STAR
    a, b = BIN_F["second"]
    return -(a + b * ETA_STAR)


def study_spec(sim: str) -> Spec:
    return Spec(cohort=CohortSpec(path=Path("simulated.csv"), arm="arm", arms=ARMS), outcomes=(OUTCOMES[sim],),
                indices=(IndexSpec("score", prognostic=PrognosticSpec("y", COVARIATES, "second", FOLDS)),),
                analysis=AnalysisSpec())


def _curves(pf: ft.PairFit, fits: dict, grid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return fits[ARMS[0]].measure(grid).astype(np.float32), fits[ARMS[1]].measure(grid).astype(np.float32)


def _summary(pf: ft.PairFit, spec: Spec, base, kept: list) -> tuple:
    firsts = [None if k is None else k[0] for k in kept]
    seconds = [None if k is None else k[1] for k in kept]
    diffs = [None if k is None else pf.sign * (k[0].astype(float) - k[1].astype(float)) for k in kept]
    return ft.bootstrap_summary(pf, spec, diffs, firsts, seconds, base)


def one_study(sim: str, n: int, boot: int, rng: np.random.Generator) -> dict:
    """One simulated cohort: the analytic interval, and with boot > 0 both bootstraps, around the mapped truth."""
    spec = study_spec(sim)
    frame = simulate(sim, n, rng)
    seed = int(rng.integers(0, 2**31 - 1))
    try:
        values, model, _ = cross_fitted_index(spec.indices[0], frame, spec, key="indices[0]", seed=seed, level=0.95)
        rows = {arm: np.flatnonzero(frame["arm"].to_numpy() == arm) for arm in ARMS}
        data = {}
        for arm, r in rows.items():
            d = OutcomeData(x=values[r])
            if sim == "survival":
                d.time, d.event = frame["t"].to_numpy()[r], frame["e"].to_numpy()[r]
            else:
                d.y = frame["y"].to_numpy()[r]
            data[arm] = d
        sc_outcome = spec.outcomes[0]
        basis = Basis("linear")
        xs = values[np.isfinite(values)]
        pf = ft.PairFit(sc_outcome, "score", basis, {}, data, rows, (float(xs.min()), float(xs.max())))
        pf.fits = {arm: _fit(sc_outcome, arm, basis, d) for arm, d in data.items()}
        s = ft.analytic_summary(pf, spec)
    except FIT_ERRORS as exc:
        return {"failed": f"{type(exc).__name__}: {exc}"}
    refitter = model.refitter(frame, spec)
    truth = true_absolute(sim) - model.sign * refitter.offset
    out: dict = {"truth": truth, "converged": all(f.converged_ for f in pf.fits.values()),
                 "index_converged": bool(model.report["converged"])}
    if not s.break_even:
        return {**out, "analytic_method": None}
    i = int(np.argmin([abs(b.x - truth) for b in s.break_even]))
    est = s.break_even[i]
    out["analytic_method"] = est.interval
    out[est.interval] = study_record(est)
    if boot:
        arrays = {arm: ArmArrays.of(data[arm], rows[arm], n) for arm in ARMS}
        starts = {arm: f.params_ for arm, f in pf.fits.items()}
        refitted = []
        for _ in range(boot):
            draw = {arm: np.sort(rng.choice(r, size=len(r), replace=True)) for arm, r in rows.items()}
            try:
                x = refitter.values(np.sort(np.concatenate(list(draw.values()))))[0]
                refitted.append(_curves(pf, refit_arms(sc_outcome, basis, arrays, draw, starts, x), s.grid))
            except FIT_ERRORS:
                refitted.append(None)
        out[REFITTED] = study_record(_summary(pf, spec, s, refitted).break_even[i])
        out["refit_failed"] = sum(k is None for k in refitted)
    return out


def _fit(outcome, arm, basis, d):
    return fit_model(outcome, arm, basis, d, checks=False)


def _shifted(rec, truth: float):
    """A record on the scale where the truth is 0 (each study's truth differs: it is mapped through its own fit)."""
    if rec is None:
        return None
    x, lo, hi, shape = rec
    return (x - truth, None if lo is None else lo - truth, None if hi is None else hi - truth, shape)


def coverage_rows(sim: str, n: int, recs: list[dict], boot: int) -> list[dict]:
    """Rows like validation.coverage_rows: the analytic method and the bootstrap holding the index fixed under
    '<kind>, fitted index', the bootstrap refitting it under '<kind>, fitted index, refitted'."""
    ok = [r for r in recs if "failed" not in r]
    failed = len(recs) - len(ok)
    with_boot = [r for r in ok if REFITTED in r]
    methods = [(m, fitted_scenario(sim), ok, None) for m in dict.fromkeys(r["analytic_method"] for r in ok
                                                                         if r.get("analytic_method"))]
    methods += [(REFITTED, fitted_scenario(sim, True), with_boot, boot)]
    out = []
    for method, name, part, resamples in methods:
        if not part:
            continue
        summ = summarise_method([_shifted(r.get(method), r["truth"]) for r in part], 0.0)
        out.append({"scenario": name, "kind": sim, "method": BOOT if method == REFITTED else method, "n": n,
                    "replicates": len(part), "failed": failed,
                    "not_converged": sum(not r.get("converged", True) or not r.get("index_converged", True)
                                         for r in part),
                    "bootstrap_resamples": resamples, "truth": ETA_STAR, "truth_scale": "true linear predictor",
                    "index": "fitted", **{k: round_row(v) for k, v in summ.items()}})
    return out


def _task(sim: str, n: int, boot_until: int, boot: int, rng: np.random.Generator) -> dict:
    study = int(rng.bit_generator.seed_seq.spawn_key[-1])
    return one_study(sim, n, boot if study < boot_until else 0, rng)


def run(studies: int = 1000, boot_studies: int = 500, boot: int = 100, n: int = 1000, seed: int = 20261202,
        kinds=KINDS, records: str | None = None, log=print) -> list[dict]:
    """Every fitted-index coverage row; the first boot_studies studies of each simulated kind also run both bootstraps."""
    rows = []
    for sim in kinds:
        t0 = time.time()
        task = functools.partial(_task, sim, n, boot_studies, boot)
        if records:
            task = functools.partial(_logged, task, records, {"kind": sim, "n": n, "boot": boot})
        recs = run_replicates(task, studies, seed + KINDS.index(sim))
        rows += coverage_rows(sim, n, recs, boot)
        log(f"{sim}: {studies} studies in {time.time() - t0:.0f} s")
    return rows


def run_backwards(studies: int, n: int, seed: int, kinds, records: str, boot: int = 0) -> None:
    """Studies from the last one down, kinds in turn, logged to `records` (with boot > 0 every study runs the
    bootstrap): run beside run() with the same seed, the two meet in the middle and every study is one cohort, so
    an interrupted pair of runs still covers both kinds and rows_from_records counts each study once."""
    seeds = {sim: np.random.SeedSequence(seed + KINDS.index(sim)).spawn(studies) for sim in kinds}
    for i in reversed(range(studies)):
        for sim in kinds:
            _logged(functools.partial(_task, sim, n, studies if boot else 0, boot), records,
                    {"kind": sim, "n": n, "boot": boot}, np.random.default_rng(seeds[sim][i]))


def _logged(task, path: str, key: dict, rng: np.random.Generator) -> dict:
    rec = task(rng)
    with open(path, "a", encoding="utf-8") as fh:
        fh.write(json.dumps({**key, "study": int(rng.bit_generator.seed_seq.spawn_key[-1]), "rec": rec}) + "\n")
    return rec


def rows_from_records(paths: list[str], boot: int) -> list[dict]:
    """Coverage rows from record files written by run(records=...) or run_backwards, each (sim, study) counted
    once (a study with a bootstrap wins over the same study without)."""
    groups: dict[tuple, dict] = {}
    for path in paths:
        for line in Path(path).read_text(encoding="utf-8").splitlines():
            try:
                d = json.loads(line)
            except json.JSONDecodeError:
                continue
            rec = {k: (tuple(v) if isinstance(v, list) else v) for k, v in d["rec"].items()}
            known = groups.setdefault((d["kind"], d["n"]), {})
            if d["study"] not in known or REFITTED in rec:
                known[d["study"]] = rec
    return [r for (sim, n), recs in groups.items() for r in coverage_rows(sim, n, list(recs.values()), boot)]


SCENARIO_WORDS = (
    "Fitted index: 1,000 patients (half per arm), four covariates (three standard normal, one binary with "
    "P = 0.4), true linear predictor eta = 0.6 z1 + 0.5 z2 - 0.4 z3 + 0.3 z4. Survival: exponential event times "
    "with log hazard -2 + eta (second arm) and -1.7 (first arm), censoring uniform on 1 to 6, survival "
    "at 2; binary: logit P(y = 1) 0.5 - eta (second) and 0.2 (first). The arms break even at eta = 0.3. "
    "Each study cross-fits the prognostic model on the second arm (Cox or logistic, 5 folds) and fits each arm "
    "along that fitted index. The truth is mapped to each study's fitted index through the fitted model's "
    "absolute prediction: the index value whose predicted log cumulative hazard at 2 (survival) or predicted log "
    "odds of y = 0 (binary) equals the true one at eta = 0.3 (so coverage is of the break-even expressed as a "
    "predicted risk, the common scale on which refitted replicates are compared). '<kind>, fitted index' rows hold "
    "the index fixed (the analytic interval); "
    "'<kind>, fitted index, refitted' rows refit the index in every bootstrap replicate (refit_index = true). "
    "Bootstrap studies are among the first 500 of the analytic studies (the same cohorts), with fewer resamples per "
    "study than the tool's default (stated in the table) to keep the run short.")


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m explorer.coverage_study_fitted", description=__doc__.splitlines()[0])
    p.add_argument("--studies", type=int, default=1000)
    p.add_argument("--boot-studies", type=int, default=500)
    p.add_argument("--boot", type=int, default=100, help="bootstrap resamples per study")
    p.add_argument("--n", type=int, default=1000)
    p.add_argument("--seed", type=int, default=20261202)
    p.add_argument("--kinds", nargs="*", default=list(KINDS))
    p.add_argument("--records", help="append every study's record to this JSON-lines file while running")
    p.add_argument("--from-records", nargs="+", help="make the rows from these record files instead of running")
    p.add_argument("--backwards", action="store_true",
                   help="studies last first (see run_backwards); analytic only when --boot-studies is 0")
    p.add_argument("--rows", required=True, help="write the rows and settings here (JSON), for coverage_study_cli --merge")
    a = p.parse_args(argv)
    settings = {"date": _dt.date.today().isoformat(), "fitted_index": True, "studies": a.studies,
                "bootstrap_studies": a.boot_studies, "bootstrap_resamples": a.boot, "n": a.n, "seed": a.seed}
    if a.backwards:
        run_backwards(a.studies, a.n, a.seed, tuple(a.kinds), a.records, a.boot if a.boot_studies else 0)
        return 0
    if a.from_records:
        rows = rows_from_records(a.from_records, a.boot)
    else:
        rows = run(a.studies, a.boot_studies, a.boot, a.n, a.seed, tuple(a.kinds), a.records)
    Path(a.rows).write_text(json.dumps({"settings": settings, "rows": rows}, indent=1) + "\n")
    for r in rows:
        print(r["scenario"], r["method"], r["replicates"], r["coverage"], r["median_width"])
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

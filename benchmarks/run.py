"""Speed and scale benchmark: Fulcrum against a naive lifelines/statsmodels reference, measured in one run.

    python benchmarks/run.py [--quick] [--json OUT] [--workdir DIR]

(a) one per-arm Cox fit, (b) one proportional-odds fit, (c) the demo spec (3 outcomes x 2 indices) with
bootstrap replicates, (d) re-weighting the composite, (e) peak memory of a 1M-row x 20-column analysis,
(f) a 1M-row survival analysis end to end, (g) the whole demo spec with analytic intervals at 10k patients,
(h) the app in Debian's Chromium on the demo (first page, page switches, a control change) and the offline
report's size and opening time (benchmarks/app_speed.py; `--only-app` runs just this),
(i) a survival analysis on a DuckDB file of 10M patients x 20 columns against the same rows in Parquet
(`--only-database` runs (i) alone),
(j) the default study plan on the demo (3 strategies x 5 sizes x 200 simulated studies, two workers),
(k) the rule-consequence curve along one index for every outcome and composite at 10k patients,
(l) bootstrap replicates refitting the cross-fitted prognostic index (refit_index = true) at 2,400 patients.
Medians of repeated runs; targets are printed beside the
measurements (DESIGN.md section 8) and are never asserted in tests. The data are the invented demo cohort.
"""
from __future__ import annotations

import argparse
import dataclasses
import datetime as dt
import json
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd
import tomllib

ROOT = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(ROOT), str(Path(__file__).resolve().parent)]

import reference as ref  # noqa: E402

from explorer import analysis as an  # noqa: E402
from explorer import demo  # noqa: E402
from explorer import fitting as ft  # noqa: E402
from explorer import values as vl  # noqa: E402
from explorer.cohort import column_roles, load_cohort  # noqa: E402
from explorer.indices import needed_columns  # noqa: E402
from explorer.models import fit_model  # noqa: E402
from explorer.models.base import Basis, OutcomeData  # noqa: E402
from explorer.spec import OutcomeSpec, load_spec, parse_spec, to_toml  # noqa: E402

SEED = 20261202
FIRST = demo.ARMS[0]
SURVIVAL = OutcomeSpec("alive", "survival", time="days_followed", event="died", horizon=365.0, measure="survival")
FUNCTION = OutcomeSpec("function", "ordinal", column="function_6m", levels=demo.LEVELS, favourable=demo.FAVOURABLE)
EXTRA = {"heart_rate": (92.0, 16.0), "systolic_bp": (128.0, 22.0), "creatinine": (95.0, 30.0),
         "crp": (80.0, 45.0), "wcc": (12.0, 4.0), "urea": (8.0, 3.0)}  # invented admission values (mean, sd)

SETTINGS = {
    "full": dict(cox=(10_000, 100_000, 1_000_000), ordinal=(10_000, 100_000), boot_n=10_000, replicates=1000,
                 ref_replicates=3, big=1_000_000, runs=5, ref_runs=3, refit_n=2400, refit_replicates=1000,
                 database_n=10_000_000),
    "quick": dict(cox=(10_000, 100_000), ordinal=(10_000, 50_000), boot_n=5_000, replicates=200,
                  ref_replicates=1, big=200_000, runs=3, ref_runs=1, refit_n=2400, refit_replicates=200,
                  database_n=1_000_000),
}
TARGETS = {"cox_fit_ratio": (">=", 10.0), "bootstrap_seconds": ("<=", 60.0), "bootstrap_ratio": (">=", 20.0),
           "reweight_ms": ("<=", 50.0), "peak_rss_mb": ("<=", 2500.0), "survival_1m_seconds": ("<=", 20.0),
           "full_analytic_seconds": ("<=", 2.0), "refit_bootstrap_seconds": ("<=", 120.0),
           "duckdb_10m_seconds": ("<=", 60.0), "duckdb_10m_peak_mb": ("<=", 4096.0),
           "policy_curve_seconds": ("<=", 0.5), "plan_seconds": ("<=", 60.0)}


# ------------------------------------------------------------------------------------------
# Measuring
# ------------------------------------------------------------------------------------------
def timed(fn: Callable[[], Any], runs: int) -> tuple[float, Any]:
    """Median wall time of `runs` calls, and the last call's value."""
    times, value = [], None
    for _ in range(runs):
        t = time.perf_counter()
        value = fn()
        times.append(time.perf_counter() - t)
    return float(np.median(times)), value


def cpu_seconds() -> float:
    """CPU seconds of this process and its live children (joblib's worker processes), user plus system."""
    import psutil

    own = psutil.Process()
    total = sum(own.cpu_times()[:2])
    for child in own.children(recursive=True):
        try:
            total += sum(child.cpu_times()[:2])
        except psutil.Error:
            pass
    return total


def verdict(key: str, value: float | None) -> str:
    if value is None or key not in TARGETS:
        return ""
    op, goal = TARGETS[key]
    met = value >= goal if op == ">=" else value <= goal
    return f"  [target {op} {goal:g}: {'met' if met else 'NOT MET'}]"


def say(text: str) -> None:
    print(text, flush=True)


def machine() -> dict:
    model = next((ln.split(":", 1)[1].strip() for ln in Path("/proc/cpuinfo").read_text().splitlines()
                  if ln.startswith("model name")), platform.processor()) if Path("/proc/cpuinfo").exists() else ""
    return {"nproc": os.cpu_count(), "cpu": model, "python": platform.python_version(),
            "numpy": np.__version__, "platform": platform.platform()}


# ------------------------------------------------------------------------------------------
# Data
# ------------------------------------------------------------------------------------------
def arm_rows(frame: pd.DataFrame, n: int, column: str | None = None) -> pd.DataFrame:
    """The first n patients of the first arm (with `column` known)."""
    keep = frame.arm.to_numpy() == FIRST
    if column:
        keep &= frame[column].notna().to_numpy()
    rows = frame[keep]
    if len(rows) < n:
        raise SystemExit(f"only {len(rows)} rows for a {n}-row fit; generate a larger cohort")
    return rows.iloc[:n]


def with_extra_columns(frame: pd.DataFrame, seed: int) -> pd.DataFrame:
    """The demo columns plus six invented admission measurements: 20 columns in all."""
    rng = np.random.default_rng(seed)
    extra = {k: np.round(np.maximum(rng.normal(m, s, len(frame)), 0.1 * m), 1) for k, (m, s) in EXTRA.items()}
    return frame.assign(**extra)


def demo_raw(directory: Path) -> dict:
    return tomllib.loads((directory / "demo.toml").read_text())


def restricted_spec(directory: Path, replicates: int, workers: int):
    """The demo spec with 3 outcomes x 2 indices, bootstrap intervals."""
    raw = demo_raw(directory)
    raw["outcomes"] = [o for o in raw["outcomes"] if o["name"] in ("alive", "function", "qol")]
    raw["indices"] = [i for i in raw["indices"] if i["name"] in ("cfs", "age")]
    raw["maps"] = [m for m in raw.get("maps", []) if set(m["indices"]) <= {"cfs", "age"}]
    raw["values"].pop("survival_outcome", None)
    raw["analysis"].update(interval="bootstrap", replicates=replicates, workers=workers)
    return parse_spec(raw, base_dir=directory)


def refit_spec(directory: Path, replicates: int, refit: bool):
    """The demo spec with 3 outcomes x 2 indices (frailty and the cross-fitted risk index), bootstrap intervals."""
    raw = demo_raw(directory)
    raw["outcomes"] = [o for o in raw["outcomes"] if o["name"] in ("alive", "function", "qol")]
    raw["indices"] = [i for i in raw["indices"] if i["name"] in ("cfs", "risk")]
    raw["maps"] = [m for m in raw.get("maps", []) if set(m["indices"]) <= {"cfs", "risk"}]
    raw["values"].pop("survival_outcome", None)
    raw["analysis"].update(interval="bootstrap", replicates=replicates, workers=2, refit_index=refit)
    return parse_spec(raw, base_dir=directory)


def refit_case(directory: Path, replicates: int, ref_k: int) -> dict:
    """(l) analyse() with the index refitted in every replicate, against the same analysis holding it fixed and
    against a naive lifelines/scikit-learn cross-fit of the index per replicate (measured on ref_k replicates)."""
    out: dict[str, Any] = {"replicates": replicates, "workers": 2}
    for refit in (True, False):
        spec = refit_spec(directory, replicates, refit)
        cohort = load_cohort(spec, extra_columns=needed_columns(spec))
        t, c = time.perf_counter(), cpu_seconds()
        res = an.analyse(spec, cohort)
        key = "refit" if refit else "fixed"
        out[f"{key}_s"], out[f"{key}_cpu_s"] = time.perf_counter() - t, cpu_seconds() - c
        out["patients"] = cohort.n
        if refit:
            model = res.fitset.indices["risk"].model
            r = model.refitter(cohort.frame, spec)
            rngs = [np.random.default_rng(s) for s in np.random.SeedSequence(SEED).spawn(ref_k)]
            t0 = time.perf_counter()
            for rng in rngs:
                r.values(np.sort(rng.choice(len(r.Xc), size=len(r.Xc), replace=True)))
            out["ours_index_per_replicate_s"] = (time.perf_counter() - t0) / ref_k
            t0 = time.perf_counter()
            for rng in rngs:
                ref.cross_fit_replicate(r.Xc, r.target.time, r.target.event, r.fit_mask, r.folds, r.seed, rng)
            out["reference_index_per_replicate_s"] = (time.perf_counter() - t0) / ref_k
    out["refit_over_fixed"] = out["refit_s"] / out["fixed_s"]
    out["index_ratio"] = out["reference_index_per_replicate_s"] / out["ours_index_per_replicate_s"]
    return out


def write_big_specs(directory: Path, data_name: str) -> tuple[Path, Path]:
    """(the demo spec as a registry would run it on the 20-column cohort: analytic, the six extra columns as
    adjustment covariates, no allocation; a one-outcome survival spec on the same file)."""
    raw = demo_raw(directory)
    raw["cohort"]["path"] = data_name
    raw["cohort"]["covariates"] += list(EXTRA)
    for o in raw["outcomes"]:
        if o["name"] in ("alive", "function"):
            o["adjust"] = list(EXTRA)
    raw["cohort"].pop("allocation")  # a registry: no randomised patients, so no selection analysis
    raw.pop("selection")
    full = directory / "big.toml"
    full.write_text(to_toml(parse_spec(raw, base_dir=directory), relative_to=directory))
    survival = {"cohort": {k: raw["cohort"][k] for k in ("path", "id", "arm", "arms")},
                "outcomes": [o for o in raw["outcomes"] if o["name"] == "alive"],
                "indices": [i for i in raw["indices"] if i["name"] == "cfs"], "analysis": {"interval": "analytic"}}
    path = directory / "survival.toml"
    path.write_text(to_toml(parse_spec(survival, base_dir=directory), relative_to=directory))
    return full, path


# ------------------------------------------------------------------------------------------
# (a) Cox and (b) proportional odds: one per-arm fit
# ------------------------------------------------------------------------------------------
def cox_case(frame: pd.DataFrame, n: int, runs: int, ref_runs: int) -> dict:
    a = arm_rows(frame, n)
    x, t, e = (a[c].to_numpy(float) for c in ("cfs", "days_followed", "died"))
    ours_s, fit = timed(lambda: fit_model(SURVIVAL, FIRST, Basis(), OutcomeData(x=x, time=t, event=e)), runs)
    ref_s, rf = timed(lambda: ref.cox_fit(t, e, x[:, None]), ref_runs)
    theirs = rf.params_.to_numpy()
    rel = float(np.max(np.abs(fit.params_ - theirs) / np.abs(theirs)))
    return {"rows": n, "ours_s": ours_s, "reference_s": ref_s, "ratio": ref_s / ours_s, "coef_rel_diff": rel,
            "ours_runs": runs, "reference_runs": ref_runs}


def ordinal_case(frame: pd.DataFrame, n: int, runs: int, ref_runs: int) -> dict:
    a = arm_rows(frame, n, "function_6m")
    x = a.cfs.to_numpy(float)
    y = a.function_6m.map({lv: i for i, lv in enumerate(demo.LEVELS)}).to_numpy(float)
    ours_s, fit = timed(lambda: fit_model(FUNCTION, FIRST, Basis(), OutcomeData(x=x, y=y)), runs)
    ref_s, rf = timed(lambda: ref.ordinal_fit(y.astype(int), x[:, None]), ref_runs)
    theirs = ref.ordinal_natural(np.asarray(rf.params), 1)
    diff = float(np.max(np.abs(fit.params_ - theirs) / (1e-5 + 1e-5 * np.abs(theirs))))
    return {"rows": n, "ours_s": ours_s, "reference_s": ref_s, "ratio": ref_s / ours_s,
            "agreement_in_tolerances": diff, "ours_runs": runs, "reference_runs": ref_runs}


def fit_lines(name: str, rows: list[dict], extra: Callable[[dict], str]) -> None:
    for r in rows:
        say(f"  {r['rows']:>9,} rows: ours {r['ours_s']:.3f} s (median of {r['ours_runs']}), reference "
            f"{r['reference_s']:.3f} s (median of {r['reference_runs']}), ratio {r['ratio']:.1f}x; {extra(r)}"
            + (verdict(name, r["ratio"]) if name == "cox_fit_ratio" and r["rows"] == 100_000 else ""))


# ------------------------------------------------------------------------------------------
# (c) bootstrap of the demo spec and (d) re-weighting
# ------------------------------------------------------------------------------------------
def reference_pairs(spec, frame: pd.DataFrame) -> list[ref.ReferencePair]:
    """The reference's view of the spec: per outcome and index, complete-case rows per arm."""
    arm = frame[spec.cohort.arm].to_numpy()
    pairs = []
    for ix in spec.indices:
        x = pd.to_numeric(frame[ix.column], errors="coerce").to_numpy(float)
        for o in spec.outcomes:
            ok = frame[list(o.columns)].notna().all(axis=1).to_numpy() & np.isfinite(x)
            rows = {a: np.flatnonzero(ok & (arm == a)) for a in spec.cohort.arms}
            y = (frame[o.column].map({lv: i for i, lv in enumerate(o.levels)}).to_numpy(float)
                 if o.kind == "ordinal" else None if o.kind == "survival" else frame[o.column].to_numpy(float))
            t = frame[o.time].to_numpy(float) if o.kind == "survival" else None
            e = frame[o.event].to_numpy(float) if o.kind == "survival" else None
            grid = np.linspace(np.nanmin(x[ok]), np.nanmax(x[ok]), spec.analysis.grid)
            pairs.append(ref.ReferencePair(o.kind, rows, x, y, t, e, o.horizon, len(o.favourable), grid))
    return pairs


def reference_bootstrap(spec, directory: Path, k: int) -> tuple[float, float]:
    """Median wall and CPU seconds of one naive replicate (lifelines/statsmodels refits), over k replicates."""
    frame = pd.read_csv(spec.cohort.path)
    pairs = reference_pairs(spec, frame)
    arm = frame[spec.cohort.arm].to_numpy()
    arm_rows_ = {a: np.flatnonzero(arm == a) for a in spec.cohort.arms}
    clusters = None
    if spec.cohort.cluster:
        codes = pd.factorize(frame[spec.cohort.cluster].astype(str))[0]
        clusters = [np.flatnonzero(codes == c) for c in range(codes.max() + 1)]
    rngs = [np.random.default_rng(s) for s in np.random.SeedSequence(SEED).spawn(k)]
    times, cpu = [], []
    for rng in rngs:
        t, c = time.perf_counter(), time.process_time()
        ref.reference_replicate(pairs, arm_rows_, clusters, rng)
        times.append(time.perf_counter() - t)
        cpu.append(time.process_time() - c)
    return float(np.median(times)), float(np.median(cpu))


def bootstrap_case(directory: Path, replicates: int, ref_k: int) -> tuple[dict, an.Results]:
    spec = restricted_spec(directory, replicates, workers=2)
    t = time.perf_counter()
    cohort = load_cohort(spec)
    load_s = time.perf_counter() - t
    t, c = time.perf_counter(), cpu_seconds()
    res = an.analyse(spec, cohort)  # first, so it pays for starting the worker processes
    total_s, total_cpu = time.perf_counter() - t, cpu_seconds() - c
    t = time.perf_counter()
    fs = ft.fit_all(spec, cohort)
    fit_s = time.perf_counter() - t
    t, c = time.perf_counter(), cpu_seconds()
    ft.run_bootstrap(fs, keep_distribution=(spec.values.outcome,))
    models_s, models_cpu = time.perf_counter() - t, cpu_seconds() - c
    per_rep, per_rep_cpu = reference_bootstrap(spec, directory, ref_k)
    ref_serial = per_rep * replicates
    out = {"patients": cohort.n, "replicates": replicates, "workers": 2, "load_s": load_s, "fit_all_s": fit_s,
           "model_bootstrap_s": models_s, "analyse_s": total_s, "reference_per_replicate_s": per_rep,
           "reference_replicates_measured": ref_k, "reference_serial_s_extrapolated": ref_serial,
           "reference_two_cores_s_extrapolated": ref_serial / 2, "ratio": ref_serial / total_s,
           "ratio_reference_on_two_cores": ref_serial / 2 / total_s, "ratio_models_only": ref_serial / models_s,
           "analyse_cpu_s": total_cpu, "model_bootstrap_cpu_s": models_cpu,
           "reference_per_replicate_cpu_s": per_rep_cpu, "reference_cpu_s_extrapolated": per_rep_cpu * replicates,
           "cpu_ratio": per_rep_cpu * replicates / total_cpu}
    return out, res


def reweight_case(res: an.Results, changes: int = 21) -> dict:
    """Milliseconds per weight change, as the values page re-weights (the composites of one index)."""
    out = {}
    levels = res.spec.outcome(res.spec.values.outcome).levels
    index = res.spec.indices[0].name
    for label, reps in (("bootstrap", res.replicates), ("analytic", None)):
        prepared = vl.prepare_composites(res.fitset, replicates=reps)
        here = {k: cm for k, cm in prepared.items() if k[1] == index}
        base = dict(res.spec.values.weights)
        times = []
        for h in np.linspace(0.5, 0.95, changes):
            w = dict(base, **{levels[1]: float(h)})
            t = time.perf_counter()
            vl.reweight(here, w)
            times.append(time.perf_counter() - t)
        out[label] = 1000 * float(np.median(times[1:]))
        out[f"{label}_composites"] = len(here)
    return out


FULL_CHILD = """
import json, sys
sys.path.insert(0, sys.argv[3])
from run import full_analytic_case_here
print(json.dumps(full_analytic_case_here(sys.argv[1], int(sys.argv[2]))))
"""


def full_analytic_case_here(directory: str | Path, runs: int) -> dict:
    """(g) in this process: the whole demo spec (every outcome, index, composite, the selection analysis, the
    pairwise comparison, trust checks and maps) with analytic intervals, timed after one warm-up call."""
    spec = load_spec(Path(directory) / "demo.toml")
    spec = dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, interval="analytic"))
    cohort = load_cohort(spec, extra_columns=needed_columns(spec))
    an.analyse(spec, cohort)
    fit_s, _ = timed(lambda: ft.fit_all(spec, cohort), runs)
    seconds, _ = timed(lambda: an.analyse(spec, cohort), runs)
    return {"patients": cohort.n, "outcomes": len(spec.outcomes), "indices": len(spec.indices), "seconds": seconds,
            "runs": runs, "fit_all_s": fit_s}


def full_analytic_case(directory: Path, runs: int) -> dict:
    """(g) in a fresh process, as the app's server process runs one analysis (this process holds the benchmark's
    2.2M-row cohort and its bootstrap workers)."""
    cmd = [sys.executable, "-c", FULL_CHILD,
           str(directory), str(runs), str(Path(__file__).resolve().parent)]
    out = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True)
    if out.returncode != 0:
        raise SystemExit(f"the full analytic analysis failed:\n{out.stderr[-2000:]}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def policy_reference(fs, index: str) -> int:
    """(k) reference: each threshold rule done the straightforward way with the engine's own tools: for every
    outcome, threshold and arm, the mean prediction over the patients the rule gives that arm and its delta-method
    variance (selection.curve_average, which refits nothing). Outcomes only (composites have no such tool)."""
    from explorer import policy as po
    from explorer.selection import curve_average

    x = np.asarray(fs.indices[index].values, float)
    x = x[np.isfinite(x)]
    thresholds = po.thresholds_for(np.unique(x), fs.spec.policy.thresholds if fs.spec.policy else 101)
    done = 0
    for o in fs.spec.outcomes:
        if o.among_survivors:
            continue
        pf = fs.pair(o.name, index)
        first, second = (pf.fits[a] for a in fs.spec.cohort.arms)
        for t in thresholds:
            below = x < t
            for fit, part in ((first, x[below]), (second, x[~below])):
                if len(part):
                    curve_average(fit, part)
            done += 1
    return done


def policy_case(directory: Path, runs: int) -> dict:
    """(k) the rule curves along the frailty scale: every outcome, level and composite of the demo, both directions,
    the blanket rules, best thresholds with intervals, analytic (delta) intervals, over the cohort's patients."""
    from explorer import policy as po

    spec = load_spec(directory / "demo.toml")
    spec = dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, interval="analytic"))
    cohort = load_cohort(spec, extra_columns=needed_columns(spec))
    fs = ft.fit_all(spec, cohort)
    po.prepare_index(fs, "cfs")
    cpu = time.process_time()
    seconds, ps = timed(lambda: po.prepare_index(fs, "cfs"), runs)
    cpu = (time.process_time() - cpu) / runs
    ref_runs = max(1, runs // 2)
    ref_cpu = time.process_time()
    ref_s, rules = timed(lambda: policy_reference(fs, "cfs"), ref_runs)
    ref_cpu = (time.process_time() - ref_cpu) / ref_runs
    return {"patients": cohort.n, "index": "cfs", "thresholds": len(ps.thresholds),
            "quantities": len(ps.quantities), "curves": len(ps.curves), "seconds": seconds, "cpu_s": cpu,
            "reference_s": ref_s, "reference_cpu_s": ref_cpu, "reference_rules": rules, "ratio": ref_s / seconds,
            "cpu_ratio": ref_cpu / cpu, "runs": runs}


# ------------------------------------------------------------------------------------------
# (j) the study planner
# ------------------------------------------------------------------------------------------
def plan_case(directory: Path, ref_k: int = 3) -> dict:
    """The default plan (explorer.planner.plan_study) for one-year survival along frailty on the shipped-size demo,
    against a naive planner that refits each simulated study's two arms with lifelines (extrapolated from ref_k)."""
    from explorer import planner as pl
    from explorer.models.simulate import append, simulate

    spec = load_spec(directory / "demo.toml")
    spec = dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, workers=2))
    fs = ft.fit_all(spec)
    target = pl.Target(width=1.0)
    t, c = time.perf_counter(), cpu_seconds()
    doc = pl.plan_study(fs, "alive", "cfs", target)
    seconds, cpu = time.perf_counter() - t, cpu_seconds() - c
    studies = len(doc["rows"]) * doc["simulations"]
    pf = fs.pair("alive", "cfs")
    rng = np.random.default_rng(SEED)
    ref_times = []
    for size in (doc["sizes"] * ref_k)[:ref_k]:
        t0 = time.perf_counter()
        for arm, fit in pf.fits.items():
            new = simulate(fit, rng.choice(pf.data[arm].x, size // 2), None, rng)
            d = append(pf.data[arm], new)
            ref.cox_fit(d.time, d.event, d.x[:, None])
        ref_times.append(time.perf_counter() - t0)
    ref_per = float(np.median(ref_times))
    return {"patients": fs.cohort.n, "studies": studies, "strategies": len(doc["strategies"]),
            "sizes": doc["sizes"], "simulations": doc["simulations"], "workers": 2, "seconds": seconds,
            "cpu_seconds": cpu, "reference_per_study_s": ref_per, "reference_studies_measured": ref_k,
            "reference_serial_s_extrapolated": ref_per * studies, "ratio": ref_per * studies / seconds}


def plan_lines(report: dict, work: Path) -> None:
    plan_dir = work / "plan"
    demo.write_demo(plan_dir)
    say("(j) the default study plan (3 strategies x 5 sizes x 200 simulated studies of one-year survival along "
        "frailty, refit and interval each), demo cohort of 2,400, workers = 2")
    j = plan_case(plan_dir)
    report["plan"], report["plan_seconds"] = j, j["seconds"]
    say(f"  ours: {j['seconds']:.1f} s for {j['studies']} simulated studies{verdict('plan_seconds', j['seconds'])} "
        f"(CPU {j['cpu_seconds']:.0f} s in this process; workers' CPU not counted)")
    say(f"  reference: lifelines refits of both arms alone, {j['reference_per_study_s']:.2f} s per study (median of "
        f"{j['reference_studies_measured']}), EXTRAPOLATED to {j['reference_serial_s_extrapolated']:.0f} s serial; "
        f"ratio {j['ratio']:.1f}x")


# ------------------------------------------------------------------------------------------
# (e) and (f): a fresh process per analysis, through the command line
# ------------------------------------------------------------------------------------------
CHILD = """
import sys
from pathlib import Path
from explorer.cli import main
code = main(["analyse", sys.argv[1], "--json", sys.argv[2], "--quiet"])
status = Path("/proc/self/status")
hwm = [ln.split()[1] for ln in status.read_text().splitlines() if ln.startswith("VmHWM")] if status.exists() else []
print(hwm[0] if hwm else "", file=sys.stderr)
sys.exit(code)
"""


def cli_run(spec: Path, out: Path) -> dict:
    """`fulcrum analyse SPEC --json OUT` in a fresh process: wall and CPU seconds, and its peak RSS in MB.

    The peak is the child's own VmHWM: ru_maxrss would count the benchmark process it was forked from.
    """
    cmd = [sys.executable, "-c", CHILD, str(spec), str(out)]
    t = time.perf_counter()
    proc = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    seconds = time.perf_counter() - t
    err = proc.stderr.read().decode(errors="replace").strip()
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"fulcrum analyse {spec} failed:\n{err}")
    last = err.splitlines()[-1] if err else ""
    peak = int(last) / 1024 if last.isdigit() else usage.ru_maxrss / 1024
    return {"seconds": seconds, "cpu_seconds": usage.ru_utime + usage.ru_stime, "user_seconds": usage.ru_utime,
            "system_seconds": usage.ru_stime, "peak_rss_mb": peak, "load_average": list(os.getloadavg())}


# ------------------------------------------------------------------------------------------
# The run
# ------------------------------------------------------------------------------------------
def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--quick", action="store_true", help="smaller sizes, under 5 minutes")
    p.add_argument("--json", metavar="OUT", help="write the measurements here")
    p.add_argument("--workdir", help="keep generated data here (default: a temporary folder, removed)")
    p.add_argument("--only-app", action="store_true", help="run only (h), the app and report in Chromium")
    p.add_argument("--only-database", action="store_true", help="run only (i), the DuckDB file")
    p.add_argument("--only-plan", action="store_true", help="run only (j), the default study plan")
    args = p.parse_args(argv)
    mode = "quick" if args.quick else "full"
    s = SETTINGS[mode]
    work = Path(args.workdir) if args.workdir else Path(tempfile.mkdtemp(prefix="fulcrum-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    report: dict[str, Any] = {"mode": mode, "date": dt.datetime.now().isoformat(timespec="seconds"),
                              "machine": machine(), "load_average_start": list(os.getloadavg()), "settings": s}
    say(f"Fulcrum benchmark ({mode}) on {report['machine']['nproc']} x {report['machine']['cpu']}, load average "
        f"{' '.join(f'{v:.2f}' for v in report['load_average_start'])}")
    try:
        if args.only_plan:
            plan_lines(report, work)
        else:
            if not (args.only_app or args.only_database):
                run_all(report, s, work)
            if not args.only_database:
                app_all(report, work)
            if not args.only_app:
                database_run(report, s, work)
    finally:
        if not args.workdir:
            shutil.rmtree(work, ignore_errors=True)
    report["load_average_end"] = list(os.getloadavg())
    report["total_s"] = time.perf_counter() - started
    say(f"done in {report['total_s']:.0f} s; load average at the end "
        f"{' '.join(f'{v:.2f}' for v in report['load_average_end'])}")
    if args.json:
        Path(args.json).write_text(json.dumps(report, indent=2) + "\n")
    return 0


def run_all(report: dict, s: dict, work: Path) -> None:
    t = time.perf_counter()
    frame, _ = demo.generate(int(2.2 * max(max(s["cox"]), s["big"])), seed=SEED)
    say(f"invented cohort of {len(frame):,} patients generated in {time.perf_counter() - t:.0f} s")

    say("(a) one per-arm Cox fit (Efron ties), ours (explorer.models.fit_model) vs lifelines CoxPHFitter")
    report["cox_fit"] = [cox_case(frame, n, s["runs"] if n < 1_000_000 else 3, s["ref_runs"] if n < 1_000_000 else 1)
                         for n in s["cox"]]
    fit_lines("cox_fit_ratio", report["cox_fit"],
              lambda r: f"coefficients agree to {r['coef_rel_diff']:.1e} relative [1e-6: "
                        f"{'met' if r['coef_rel_diff'] <= 1e-6 else 'NOT MET'}]")
    report["cox_fit_ratio"] = report["cox_fit"][-1]["ratio"]

    say("(b) one proportional-odds fit, ours vs statsmodels OrderedModel (BFGS)")
    report["ordinal_fit"] = [ordinal_case(frame, n, s["runs"], s["ref_runs"]) for n in s["ordinal"]]
    fit_lines("ordinal_fit_ratio", report["ordinal_fit"],
              lambda r: f"largest difference {r['agreement_in_tolerances']:.2f} x (1e-5 + 1e-5 |value|)")
    report["ordinal_fit_ratio"] = report["ordinal_fit"][-1]["ratio"]

    boot_dir = work / "boot"
    demo.write_demo(boot_dir, n=s["boot_n"], seed=SEED)
    say(f"(c) demo spec, {s['boot_n']:,} patients, 3 outcomes x 2 indices, {s['replicates']} bootstrap "
        "replicates, workers = 2")
    b, res = bootstrap_case(boot_dir, s["replicates"], s["ref_replicates"])
    report["bootstrap"], report["bootstrap_seconds"] = b, b["analyse_s"]
    report["bootstrap_ratio"] = b["ratio"]
    say(f"  ours: whole analyse() {b['analyse_s']:.1f} s{verdict('bootstrap_seconds', b['analyse_s'])}; of which "
        f"model bootstrap alone {b['model_bootstrap_s']:.1f} s (fit_all {b['fit_all_s']:.2f} s, load "
        f"{b['load_s']:.2f} s)")
    say(f"  reference: {b['reference_per_replicate_s']:.2f} s per replicate (median of "
        f"{b['reference_replicates_measured']} measured), EXTRAPOLATED to {b['replicates']} replicates: "
        f"{b['reference_serial_s_extrapolated']:.0f} s serial, {b['reference_two_cores_s_extrapolated']:.0f} s "
        "if it used both cores perfectly")
    say(f"  ratio (naive serial reference / our whole analysis) {b['ratio']:.1f}x"
        f"{verdict('bootstrap_ratio', b['ratio'])}; if the reference used both cores perfectly "
        f"{b['ratio_reference_on_two_cores']:.1f}x; against our model bootstrap alone {b['ratio_models_only']:.1f}x")
    say(f"  CPU seconds (load-free): ours {b['analyse_cpu_s']:.0f} s (main process and workers; "
        f"{b['analyse_cpu_s'] / 2:.0f} s on two free cores), model bootstrap alone {b['model_bootstrap_cpu_s']:.0f} s; "
        f"reference {b['reference_per_replicate_cpu_s']:.2f} s per replicate, "
        f"{b['reference_cpu_s_extrapolated']:.0f} s extrapolated; CPU ratio {b['cpu_ratio']:.1f}x")

    say("(d) re-weighting the composites of one index after a weight change (values.reweight)")
    rw = reweight_case(res)
    report["reweight"], report["reweight_ms"] = rw, rw["bootstrap"]
    say(f"  with {s['replicates']} bootstrap replicates: {rw['bootstrap']:.1f} ms ({rw['bootstrap_composites']} "
        f"composites){verdict('reweight_ms', rw['bootstrap'])}; analytic: {rw['analytic']:.1f} ms")

    g = full_analytic_case(boot_dir, s["runs"])
    report["full_analytic"] = g
    report["full_analytic_seconds"] = g["seconds"] if g["patients"] >= 10_000 else None
    say(f"(g) the whole demo spec ({g['outcomes']} outcomes x {g['indices']} indices, composites, selection, pairwise, "
        f"checks, maps), analytic intervals, {g['patients']:,} patients: {g['seconds']:.2f} s (median of {g['runs']}; "
        f"fit_all {g['fit_all_s']:.2f} s)" + (verdict("full_analytic_seconds", g["seconds"]) if g["patients"] >= 10_000
                                             else " [10k target: full run]"))

    h = policy_case(boot_dir, s["runs"])
    report["policy_curve"] = h
    report["policy_curve_seconds"] = h["seconds"] if h["patients"] >= 10_000 else None
    say(f"(k) rule curves along the frailty scale ({h['quantities']} outcomes, levels and composites x 2 directions, "
        f"{h['thresholds']} thresholds, analytic intervals), {h['patients']:,} patients: {h['seconds']:.3f} s "
        f"(median of {h['runs']})" + (verdict("policy_curve_seconds", h["seconds"]) if h["patients"] >= 10_000
                                        else " [10k target: full run]")
        + f" (CPU {h['cpu_s']:.3f} s); reference (outcomes only, one mean and variance per rule and arm): "
          f"{h['reference_s']:.3f} s (CPU {h['reference_cpu_s']:.3f} s), ratio {h['ratio']:.1f}x (CPU "
          f"{h['cpu_ratio']:.1f}x)")

    refit_dir = work / "refit"
    demo.write_demo(refit_dir, n=s["refit_n"], seed=SEED)
    say(f"(l) demo spec, {s['refit_n']:,} patients, 3 outcomes x 2 indices (frailty, cross-fitted risk), "
        f"{s['refit_replicates']} bootstrap replicates refitting the risk index (refit_index = true), workers = 2")
    h = refit_case(refit_dir, s["refit_replicates"], 20)
    report["refit_bootstrap"] = h
    report["refit_bootstrap_seconds"] = h["refit_s"] if s["refit_replicates"] >= 1000 else None
    say(f"  whole analyse() {h['refit_s']:.1f} s (CPU {h['refit_cpu_s']:.0f} s, {h['refit_cpu_s'] / 2:.0f} s on two "
        f"free cores)" + (verdict("refit_bootstrap_seconds", h["refit_s"]) if s["refit_replicates"] >= 1000
                          else " [1,000-replicate target: full run]"))
    say(f"  the same analysis holding the index fixed: {h['fixed_s']:.1f} s (CPU {h['fixed_cpu_s']:.0f} s); refitting "
        f"costs {h['refit_over_fixed']:.2f}x")
    say(f"  refitting the index alone, per replicate: ours {1000 * h['ours_index_per_replicate_s']:.1f} ms, naive "
        f"lifelines + scikit-learn cross-fit {1000 * h['reference_index_per_replicate_s']:.0f} ms (20 replicates "
        f"each): {h['index_ratio']:.1f}x")

    big = with_extra_columns(frame.iloc[:s["big"]], SEED)
    big.to_parquet(boot_dir / "big.parquet", index=False)
    full_spec, surv_spec = write_big_specs(boot_dir, "big.parquet")
    say(f"(e) peak memory of the demo spec (analytic) on {len(big):,} rows x {big.shape[1]} columns (Parquet), "
        "in a fresh process")
    e = cli_run(full_spec, boot_dir / "big.json")
    report["big_analysis"], report["peak_rss_mb"] = e, e["peak_rss_mb"]
    say(f"  peak RSS {e['peak_rss_mb']:.0f} MB{verdict('peak_rss_mb', e['peak_rss_mb'])}; wall {e['seconds']:.1f} s "
        f"(CPU {e['cpu_seconds']:.1f} s: user {e['user_seconds']:.1f}, system {e['system_seconds']:.1f})")

    read = len(column_roles(load_spec(surv_spec)))
    say(f"(f) survival analysis end to end on {len(big):,} rows (Parquet load of {read} of {big.shape[1]} columns: "
        "the outcome adjusted for the six extra measurements; both arms, analytic intervals, fulcrum analyse in a "
        "fresh process)")
    f = cli_run(surv_spec, boot_dir / "survival.json")
    report["survival_analysis"] = {**f, "columns_read": read}
    report["survival_1m_seconds"] = f["seconds"] if len(big) >= 1_000_000 else None
    say(f"  wall {f['seconds']:.1f} s (CPU {f['cpu_seconds']:.1f} s: user {f['user_seconds']:.1f}, system "
        f"{f['system_seconds']:.1f}; peak RSS {f['peak_rss_mb']:.0f} MB, load average {f['load_average'][0]:.1f})"
        + (verdict("survival_1m_seconds", f["seconds"]) if len(big) >= 1_000_000 else " [1M target: full run]"))

    plan_lines(report, work)


def app_all(report: dict, work: Path) -> None:
    import app_speed

    say("(h) the app in Debian's Chromium on the demo, and the demo's offline report")
    (work / "app").mkdir(exist_ok=True)
    h = {**app_speed.app_case(work / "app"), **app_speed.report_case(work)}
    report["app"] = h
    for line in app_speed.lines(h):
        say(line)


def database_run(report: dict, s: dict, work: Path) -> None:
    from database_case import database_case

    n = s["database_n"]
    say(f"(i) survival analysis end to end on a DuckDB file of {n:,} patients x 20 columns (fulcrum analyse in a "
        "fresh process), against the same rows in Parquet")
    i = database_case(work / "database", n, SEED, cli_run)
    report["database"] = i
    full = n >= 10_000_000
    report["duckdb_10m_seconds"] = i["duckdb"]["seconds"] if full else None
    report["duckdb_10m_peak_mb"] = i["duckdb"]["peak_rss_mb"] if full else None
    note = "" if full else " [10M target: full run]"
    say(f"  files written in {i['write_s']:.0f} s (DuckDB file {i['file_mb']:.0f} MB); read {len(i['columns_read'])} "
        f"of {i['columns']} columns ({', '.join(i['columns_read'])}), {i['rows_read']:,} rows")
    for name in ("duckdb", "parquet"):
        r = i[name]
        say(f"  {name}: wall {r['seconds']:.1f} s (CPU {r['cpu_seconds']:.1f} s), peak RSS {r['peak_rss_mb']:.0f} MB"
            + ((verdict("duckdb_10m_seconds", r["seconds"]) + verdict("duckdb_10m_peak_mb", r["peak_rss_mb"]))
               if name == "duckdb" and full else note if name == "duckdb" else ""))
    say(f"  ratio DuckDB / Parquet: wall {i['ratio_seconds']:.2f}x, peak {i['ratio_peak']:.2f}x; same break-even "
        f"points: {'yes' if i['same_results_as_parquet'] else 'NO'}")


if __name__ == "__main__":
    sys.exit(main())

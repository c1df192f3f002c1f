"""Scale-out and fast paths: the same answer from every backend, and the fast kernels against lifelines and
statsmodels on random data with heavy ties and frequency weights (the outside datasets are in test_models_*)."""
from __future__ import annotations

import dataclasses
import json
import warnings

import numpy as np
import pandas as pd
import pytest
import tomllib
from lifelines import CoxPHFitter
from statsmodels.miscmodels.ordinal_model import OrderedModel
from test_models_support import close

from explorer import analysis as an
from explorer import demo
from explorer import fitting as ft
from explorer.cohort import load_cohort
from explorer.models.base import Basis, OutcomeData
from explorer.models.cox import CoxFit
from explorer.models.ordinal import OrdinalFit
from explorer.sampling import plot_sample, sample_note
from explorer.spec import parse_spec

TIGHT = dict(precision=1e-12, r_precision=1e-15, max_steps=200)


@pytest.fixture(scope="module")
def small_spec(tmp_path_factory):
    """The demo spec on 600 invented patients, 3 outcomes x 2 indices, 20 bootstrap replicates (the model,
    selection-shift and pairwise bootstraps all go through the backend)."""
    d = tmp_path_factory.mktemp("scale")
    demo.write_demo(d, n=600)
    raw = tomllib.loads((d / "demo.toml").read_text())
    raw["outcomes"] = [o for o in raw["outcomes"] if o["name"] in ("alive", "function", "qol")]
    raw["indices"] = [i for i in raw["indices"] if i["name"] in ("cfs", "age")]
    raw["maps"] = [m for m in raw.get("maps", []) if set(m["indices"]) <= {"cfs", "age"}]
    raw["values"].pop("survival_outcome", None)
    raw["analysis"].update(interval="bootstrap", replicates=20, seed=7, checks=False)
    return parse_spec(raw, base_dir=d)


def _with(spec, **analysis):
    return dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, **analysis))


def _comparable(doc: dict) -> dict:
    """The results document without what names the backend: the run time and the spec's backend settings
    (and the hashes of the spec that hold them)."""
    doc = json.loads(json.dumps(doc, default=str))
    doc["tool"].pop("generated_at", None)
    for key in ("spec_sha256", "spec_canonical_sha256"):
        doc["inputs"].pop(key, None)
    for key in ("workers", "scheduler"):
        doc.get("spec", {}).get("analysis", {}).pop(key, None)
    return doc


@pytest.mark.slow  # over 10 s on two cores
def test_serial_joblib_and_dask_give_identical_results(small_spec, monkeypatch):
    import sys

    from dask.distributed import LocalCluster

    # Worker processes are spawned, and spawn re-runs the parent's __main__ file; an AppTest run earlier in
    # this pytest worker may have left the app's script there, which cannot run outside Streamlit.
    main = sys.modules["__main__"]
    monkeypatch.setattr(main, "__spec__", None, raising=False)
    monkeypatch.delattr(main, "__file__", raising=False)

    serial = _comparable(an.analyse(_with(small_spec, workers=1)).document)
    # the bootstrap really ran: its intervals are percentile intervals from the replicates
    methods = {b["interval"] for r in serial["results"] for b in r["break_even"]}
    assert methods == {"bootstrap-percentile"}, methods
    joblib = _comparable(an.analyse(_with(small_spec, workers=2)).document)
    with LocalCluster(n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None) as cluster:
        dask = _comparable(an.analyse(_with(small_spec, scheduler=cluster.scheduler_address)).document)
    # one seed per replicate (explorer.resampling): identical whatever the backend or number of workers
    assert json.dumps(joblib, sort_keys=True) == json.dumps(serial, sort_keys=True)
    assert json.dumps(dask, sort_keys=True) == json.dumps(serial, sort_keys=True)


def test_replicate_refits_equal_fit_pair_on_the_drawn_rows(small_spec):
    # the definition of a replicate: fit_pair (the full-data path) on the drawn rows; the fast path must match it
    # (all patients unweighted, as fit_pair is called here; weighted headlines carry their fixed weights into refits)
    spec = _with(small_spec, interval="analytic", population="all")
    cohort = load_cohort(spec)
    fs = ft.fit_all(spec, cohort)
    payload = ft.boot_payload(fs, ("function",))
    for seed in (1, 2):
        rec = ft.boot_replicate(payload, np.random.default_rng(seed))
        draw = ft.draw_rows(payload, np.random.default_rng(seed))
        for key, pf in fs.pairs.items():
            rows = {arm: draw[arm][np.isin(draw[arm], r)] for arm, r in pf.rows.items()}
            slow = ft.fit_pair(spec, cohort, pf.outcome, fs.indices[key[1]], pf.basis, rows=rows,
                               start={a: f.params_ for a, f in pf.fits.items()}, checks=False)
            grid = payload.pairs[key][3]
            first, second = (slow.fits[a].measure(grid).astype(np.float32) for a in pf.fits)
            assert np.array_equal(rec[key]["first"], first) and np.array_equal(rec[key]["second"], second)


def _loop_nearest(grid: np.ndarray, y: np.ndarray, x0: float) -> float:
    """Plain loop: linear interpolation at each strict sign change, grid points where y is exactly 0."""
    roots = []
    for i in range(len(grid)):
        if y[i] == 0:
            roots.append(grid[i])
        if i + 1 < len(grid) and y[i] * y[i + 1] < 0:
            roots.append(grid[i] - y[i] * (grid[i + 1] - grid[i]) / (y[i + 1] - y[i]))
    if not roots:
        return np.nan
    return min(sorted(roots), key=lambda r: abs(r - x0))


def test_vectorised_break_even_draws_match_a_plain_loop():
    rng = np.random.default_rng(5)
    grid = np.linspace(0.0, 10.0, 41)
    Y = np.round(rng.normal(size=(300, 41)), 1)  # rounding makes exact zeros and repeated values
    Y[:20] = np.abs(Y[:20]) + 0.1  # no root
    Y[20] = np.where(grid < 5, 1.0, -1.0) * np.abs(grid - 5)  # exact zero at x0 itself
    Y[21] = np.cos(grid)  # roots at pi/2 and 3 pi/2, equally far from pi: the lower one is taken
    for x0 in (np.pi, 5.0, 0.0):
        got = ft.nearest_grid_roots(grid, Y, x0)
        want = np.array([_loop_nearest(grid, y, x0) for y in Y])
        assert np.array_equal(np.isnan(got), np.isnan(want))
        np.testing.assert_array_equal(got[~np.isnan(got)], want[~np.isnan(want)])


def _tied_survival(n: int, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Random survival data with heavy ties (times on a coarse grid), three covariates, one of them binary."""
    rng = np.random.default_rng(seed)
    X = np.column_stack([rng.normal(size=n), rng.integers(0, 2, n), rng.uniform(-1, 1, n)])
    t = np.ceil(rng.exponential(1.0 / np.exp(X @ np.array([0.6, -0.8, 0.3]))) * 4) / 4
    c = np.ceil(rng.uniform(0, 2.5, n) * 4) / 4
    return np.minimum(t, np.maximum(c, 0.25)), (t <= c).astype(float), X


def test_cox_frequency_weights_against_lifelines_on_duplicated_rows():
    time, event, X = _tied_survival(400, 11)
    w = np.random.default_rng(12).integers(0, 4, len(time)).astype(float)
    assert len(np.unique(time[event == 1])) < 0.1 * event.sum()  # heavy ties
    fit = CoxFit("alive", "all", Basis(), OutcomeData(x=X[:, 0], time=time, event=event, z=X[:, 1:],
                                                     z_names=("b", "u"), weights=w), horizon=1.5)
    rep = np.repeat(np.arange(len(time)), w.astype(int))
    df = pd.DataFrame({"x": X[rep, 0], "b": X[rep, 1], "u": X[rep, 2], "T": time[rep], "E": event[rep]})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = CoxPHFitter().fit(df, "T", "E", fit_options=TIGHT)
    # lifelines CoxPHFitter (Efron ties) on the rows duplicated by their weights
    close(fit.params_, ref.params_[["x", "b", "u"]].values)
    close(np.sqrt(np.diag(fit.cov_)), ref.standard_errors_[["x", "b", "u"]].values)


def test_ordinal_frequency_weights_against_statsmodels_on_duplicated_rows():
    rng = np.random.default_rng(21)
    n = 500
    x, z = rng.normal(size=n), rng.integers(0, 2, n).astype(float)
    latent = 0.9 * x - 0.5 * z + rng.logistic(size=n)
    y = np.digitize(latent, [-1.0, 0.2, 1.5])
    w = rng.integers(0, 4, n).astype(float)
    fit = OrdinalFit("level", "all", Basis(), OutcomeData(x=x, y=y.astype(float), z=z[:, None], z_names=("z",),
                                                          weights=w), ("a", "b", "c", "d"), ("a", "b"))
    rep = np.repeat(np.arange(n), w.astype(int))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = OrderedModel(y[rep], np.column_stack([x, z])[rep], distr="logit").fit(
            method="bfgs", disp=False, maxiter=5000, gtol=1e-10)
    # statsmodels OrderedModel on the duplicated rows; its cut-points are the first cut then log increments
    p = np.asarray(ref.params)
    cuts = p[2] + np.r_[0.0, np.cumsum(np.exp(p[3:]))]
    close(fit.params_, np.r_[cuts, p[:2]])


def test_plot_sample_keeps_group_shares_and_every_row_when_small():
    frame = pd.DataFrame({"arm": np.r_[np.repeat("a", 9000), np.repeat("b", 1000)], "v": np.arange(10_000)})
    assert plot_sample(frame, 20_000) is frame and sample_note(10_000, 10_000) is None
    s = plot_sample(frame, 5000, seed=3, by="arm")
    # proportional allocation within strata (common practice): 4,500 and 500 of the 5,000 points
    assert len(s) == 5000 and s.v.is_unique and s.v.is_monotonic_increasing
    assert s.arm.value_counts().to_dict() == {"a": 4500, "b": 500}
    assert s.equals(plot_sample(frame, 5000, seed=3, by="arm"))
    assert not s.equals(plot_sample(frame, 5000, seed=4, by="arm"))
    assert len(plot_sample(frame, 333, seed=1)) == 333
    assert "5,000 of 10,000" in sample_note(10_000, 5000, seed=3)

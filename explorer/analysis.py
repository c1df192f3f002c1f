"""The one orchestrator: Spec + Cohort -> fitted models -> curves, break-evens, composites -> Results.

Fitting (`fit_all`) and summarising (`summarise`) are separate so the app can re-weight the
composite, move the margin or place a patient without refitting anything.
"""
from __future__ import annotations

import dataclasses
import functools
import math
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np
import pandas as pd

from . import breakeven as be
from .cohort import Cohort, load_cohort
from .errors import FulcrumError
from .indices import IndexValues, compute_index, needed_columns
from .models import fit_model
from .models.base import Basis, Fitted, OutcomeData
from .numeric import captured
from .population import Population, resolve
from .resampling import ArmArrays, Progress, refit_arms, run_replicates
from .spec import OutcomeSpec, Spec

SPARSE_SHARE = 0.05  # an arm holding under 5% of the patients in a stretch of the index is flagged
STRETCHES = 10


@dataclass
class PairFit:
    """One outcome along one index: both arms' fits and what they were fitted on."""

    outcome: OutcomeSpec
    index: str
    basis: Basis
    fits: dict[str, Fitted]
    data: dict[str, OutcomeData]
    rows: dict[str, np.ndarray]  # cohort row positions used per arm
    x_range: tuple[float, float]
    warnings: list[str] = field(default_factory=list)
    population: str = "all"  # the patients the fits rest on (explorer.population)

    @property
    def sign(self) -> float:
        return 1.0 if self.outcome.higher_is_better else -1.0


@dataclass
class FitSet:
    spec: Spec
    cohort: Cohort
    indices: dict[str, IndexValues]
    pairs: dict[tuple[str, str], PairFit]
    n_fits: int = 0
    population: Population | None = None
    notes: list[str] = field(default_factory=list)  # population notes and numerical warnings from fitting
    _everyone: dict[tuple[str, str], PairFit] = field(default_factory=dict)

    def pair(self, outcome: str, index: str) -> PairFit:
        return self.pairs[(outcome, index)]

    def everyone(self, outcome: str, index: str) -> PairFit:
        """The all-patient fit of one pair (the headline fit itself when the headline rests on all patients)."""
        pf = self.pairs[(outcome, index)]
        if self.population is None or self.population.name == "all":
            return pf
        if (outcome, index) not in self._everyone:
            self._everyone[(outcome, index)] = fit_pair(self.spec, self.cohort, self.spec.outcome(outcome),
                                                        self.indices[index], pf.basis)
        return self._everyone[(outcome, index)]


# ------------------------------------------------------------------------------------------
# Fitting
# ------------------------------------------------------------------------------------------
def compute_indices(spec: Spec, cohort: Cohort) -> dict[str, IndexValues]:
    return {ix.name: compute_index(ix, cohort.frame, spec=spec) for ix in spec.indices}


def outcome_data(spec: Spec, cohort: Cohort, outcome: OutcomeSpec, x: np.ndarray, rows: np.ndarray,
                 z_ref: np.ndarray | None) -> OutcomeData:
    """The cleaned arrays of one outcome for the given cohort rows (positions)."""
    f = cohort.frame
    d = OutcomeData(x=np.asarray(x[rows], float))
    if outcome.kind == "survival":
        d.time = f[outcome.time].to_numpy(float)[rows]
        d.event = f[outcome.event].to_numpy(float)[rows]
    elif outcome.kind == "ordinal":
        d.y = np.asarray(f[outcome.column].cat.codes.to_numpy()[rows], float)
    else:
        d.y = f[outcome.column].to_numpy(float)[rows]
    if outcome.adjust:
        d.z = adjustment_rows(f, outcome, rows)
        d.z_names = tuple(outcome.adjust)
        d.z_ref = z_ref
    if spec.cohort.cluster:
        d.cluster = f[spec.cohort.cluster].astype(str).to_numpy()[rows]
    return d


def adjustment_rows(frame: pd.DataFrame, outcome: OutcomeSpec, rows: np.ndarray) -> np.ndarray:
    """The adjustment covariates of the given rows, (rows x covariates), built column by column so a large
    cohort is never copied whole."""
    z = np.empty((len(rows), len(outcome.adjust)))
    for j, c in enumerate(outcome.adjust):
        z[:, j] = frame[c].to_numpy(float)[rows]
    return z


@dataclass
class SharedData:
    """One outcome's arrays per arm, kept by fit_all so the pairs of every index share them: only the
    index column differs between indices (rows must match: an index with missing values drops others)."""

    rows: dict[str, np.ndarray]
    data: dict[str, OutcomeData]
    z_ref: np.ndarray | None

    def matches(self, rows: dict[str, np.ndarray]) -> bool:
        return set(rows) == set(self.rows) and all(np.array_equal(rows[a], self.rows[a]) for a in rows)


def _robust(spec: Spec, outcome: OutcomeSpec) -> bool:
    return bool(spec.cohort.cluster) or (outcome.kind == "continuous" and outcome.bounds is not None)


def fit_pair(spec: Spec, cohort: Cohort, outcome: OutcomeSpec, index: IndexValues, basis: Basis,
             rows: dict[str, np.ndarray] | None = None, weights: dict[str, np.ndarray] | None = None,
             start: dict[str, np.ndarray] | None = None, robust: bool | None = None,
             checks: bool = True, shared: dict[str, SharedData] | None = None,
             population: Population | None = None) -> PairFit:
    """Fit one outcome in each arm along one index (complete cases, counted in warnings).

    robust=None picks sandwich variances where the spec calls for them (clusters, bounded counts);
    checks=False skips model diagnostics (bootstrap replicates and subset fits do not need them);
    `shared` (outcome name -> SharedData) lets the pairs of several indices share the outcome's arrays;
    `population` restricts, weights or adjusts the fits as the headline population says (explorer.population).
    """
    f = cohort.frame
    x = np.asarray(index.values, float)
    arm_col = f[spec.cohort.arm].to_numpy()
    ok = cohort.complete(outcome) & np.isfinite(x)
    warnings: list[str] = []
    keep = True if population is None or population.keep is None else population.keep
    if population is not None and population.name != "all":
        outcome = population.outcome(outcome)
        ok = ok & cohort.complete(outcome)
    if rows is None:
        rows = {arm: np.flatnonzero(ok & keep & (arm_col == arm)) for arm in spec.cohort.arms}
        dropped = {arm: int(((arm_col == arm) & keep & ~ok).sum()) for arm in spec.cohort.arms}
        if any(dropped.values()):
            warnings.append(f"{outcome.title} along {index.info.get('label', index.name)}: "
                            + ", ".join(f"{n} {arm} patients" for arm, n in dropped.items() if n)
                            + " left out for missing values (complete cases).")
    if population is not None and population.weights is not None and weights is None:
        weights = {arm: population.weights[r] for arm, r in rows.items()}
        robust = True  # propensity weights: sandwich variances (weights as probability weights)
    known = shared.get(outcome.name) if shared is not None and weights is None else None
    if known is not None and not known.matches(rows):
        known = None
    z_ref = None if known is None else known.z_ref
    if outcome.adjust and known is None:
        all_rows = np.concatenate([rows[a] for a in spec.cohort.arms])
        z_ref = np.array([f[c].to_numpy(float)[all_rows].mean() for c in outcome.adjust])
    fits, data = {}, {}
    for arm in spec.cohort.arms:
        if known is not None:
            d = dataclasses.replace(known.data[arm], x=np.asarray(x[rows[arm]], float))
        else:
            d = outcome_data(spec, cohort, outcome, x, rows[arm], z_ref)
        if weights is not None:
            d.weights = weights[arm]
        data[arm] = d
        if len(d) == 0:
            raise FulcrumError(f"no {arm} patients have complete data for outcome '{outcome.name}'.",
                               column=outcome.column or outcome.time,
                               hint="Check the outcome and index columns for this arm.")
        fits[arm] = fit_model(outcome, arm, basis, d, start=None if start is None else start.get(arm),
                              robust=_robust(spec, outcome) if robust is None else robust, checks=checks)
        warnings.extend(f"{arm}, {outcome.title}: {w}" for w in fits[arm].warnings_)
    if shared is not None and weights is None and known is None:
        shared[outcome.name] = SharedData(rows, data, z_ref)
    xs = x[np.concatenate(list(rows.values()))]
    pf = PairFit(outcome, index.name, basis, fits, data, rows, (float(np.min(xs)), float(np.max(xs))), warnings,
                 population="all" if population is None else population.name)
    pf.warnings.extend(sparse_stretches(pf, spec))
    return pf


def sparse_stretches(pf: PairFit, spec: Spec) -> list[str]:
    """Flag stretches of the index where one arm holds under 5% of the patients."""
    xs = {arm: d.x for arm, d in pf.data.items()}
    pooled = np.concatenate(list(xs.values()))
    edges = np.unique(np.quantile(pooled, np.linspace(0, 1, STRETCHES + 1)))
    out = []
    for lo, hi in zip(edges[:-1], edges[1:]):
        counts = {arm: int(((v >= lo) & (v <= hi)).sum()) for arm, v in xs.items()}
        total = sum(counts.values())
        for arm, c in counts.items():
            if total and c / total < SPARSE_SHARE:
                out.append(f"{pf.outcome.title}: between {lo:.3g} and {hi:.3g} on {pf.index}, {arm} has {c} of "
                           f"{total} patients (under {SPARSE_SHARE:.0%}); the curves there rest on the model.")
    return out


def fit_all(spec: Spec, cohort: Cohort | None = None, *, indices: dict[str, IndexValues] | None = None,
            progress: Progress | None = None) -> FitSet:
    """Both arms' fits of every outcome along every index, on the headline population (explorer.population)."""
    if cohort is None:
        cohort = load_cohort(spec, extra_columns=needed_columns(spec))
    notes: list[str] = []
    with captured(notes, "fitting the models"):
        if indices is None:
            indices = compute_indices(spec, cohort)
        population = resolve(spec, cohort)
        pairs = _fit_pairs(spec, cohort, indices, population, progress)
    return FitSet(spec, cohort, indices, pairs, n_fits=2 * len(pairs), population=population,
                  notes=population.warnings + notes)


def _fit_pairs(spec: Spec, cohort: Cohort, indices: dict[str, IndexValues], population: Population,
               progress: Progress | None) -> dict[tuple[str, str], PairFit]:
    pairs = {}
    total = len(spec.outcomes) * len(spec.indices)
    k = 0
    shared: dict[str, SharedData] = {}
    for ix in spec.indices:
        iv = indices[ix.name]
        basis = Basis.from_index(iv.values, spec.analysis.shape, spec.analysis.knots)
        for outcome in spec.outcomes:
            pairs[(outcome.name, ix.name)] = fit_pair(spec, cohort, outcome, iv, basis, shared=shared,
                                                      population=population)
            k += 1
            if progress:
                progress(k, total)
    return pairs


# ------------------------------------------------------------------------------------------
# Curves and break-even points
# ------------------------------------------------------------------------------------------
def grid_for(pf: PairFit, n: int) -> np.ndarray:
    lo, hi = be.search_range(*pf.x_range)
    return np.linspace(lo, hi, n)


def in_range(pf: PairFit, grid: np.ndarray) -> np.ndarray:
    lo, hi = pf.x_range
    eps = 1e-9 * max(1.0, hi - lo)
    return (grid >= lo - eps) & (grid <= hi + eps)


def fieller_terms(pf: PairFit, margin: float) -> tuple[float, float, np.ndarray] | None:
    """(a, b, cov) of the linear difference c0 + c1 x when Fieller applies, else None."""
    first, second = (pf.fits[a] for a in _arms(pf))
    t1, t2 = first.linear_terms(), second.linear_terms()
    if t1 is None or t2 is None:
        return None
    identity = pf.outcome.kind == "continuous"
    if margin != 0.0 and not identity:
        return None
    (c1, v1), (c2, v2) = t1, t2
    a = float(c1[0] - c2[0]) - (pf.sign * margin if identity else 0.0)
    b = float(c1[1] - c2[1])
    return a, b, np.asarray(v1, float) + np.asarray(v2, float)


def _arms(pf: PairFit) -> list[str]:
    return list(pf.fits)


def difference_fn(pf: PairFit) -> Callable[[np.ndarray], np.ndarray]:
    first, second = (pf.fits[a] for a in _arms(pf))
    return lambda x: pf.sign * (first.measure(x) - second.measure(x))


def margin_of(spec: Spec, pf: PairFit) -> float:
    """The pair's margin as `spec` sets it now (the app reuses fits when only margins change)."""
    try:
        return spec.margin_for(spec.outcome(pf.outcome.name))
    except KeyError:
        return spec.margin_for(pf.outcome)


def diff_span(pf: PairFit) -> float | None:
    """The half-width of the range the difference can take (1 for two probabilities), or None: unbounded."""
    links = {f.measure_link() for f in pf.fits.values()}
    if len(links) != 1:
        return None
    link, span = links.pop()
    return None if link == "identity" else span


def variance_fn(pf: PairFit) -> Callable[[np.ndarray], np.ndarray]:
    first, second = (pf.fits[a] for a in _arms(pf))
    return lambda x: first.measure_var(x) + second.measure_var(x)


def analytic_summary(pf: PairFit, spec: Spec) -> be.CurveSummary:
    """Curves, bands, break-evens and clear-difference regions from the fitted models (no resampling).

    Bands: each arm's on its link scale, the difference's on atanh(d / span), so neither leaves the measure's
    range. Break-even intervals: Fieller where the difference is a straight line on the model's scale with a zero
    margin (there Fieller is the test inversion), else by default the test inversion itself (the stretch where the
    pointwise band holds the margin, unbounded when the band never leaves it); `curved_interval = "delta"` gives
    the delta method instead, labelled so."""
    a = spec.analysis
    margin = margin_of(spec, pf)
    arms = _arms(pf)
    first, second = pf.fits[arms[0]], pf.fits[arms[1]]
    grid = grid_for(pf, a.grid)
    m1, m2 = first.measure(grid), second.measure(grid)
    v1, v2 = first.measure_var(grid), second.measure_var(grid)
    diff = pf.sign * (m1 - m2)
    z = be.critical_value(a.level)
    crit = z if a.bands == "pointwise" else simultaneous_critical(pf, a.level)
    span = diff_span(pf)
    s = be.CurveSummary(grid, m1, m2, diff, *be.diff_band(diff, v1 + v2, crit, span), band=a.bands,
                        first_band=be.link_band(m1, v1, z, *first.measure_link()),
                        second_band=be.link_band(m2, v2, z, *second.measure_link()), margin=margin)
    terms = fieller_terms(pf, margin)
    dfn, vfn = difference_fn(pf), variance_fn(pf)
    g = be.inversion_statistic(dfn, vfn, margin, z, span)
    g_grid = None
    lo, hi = be.search_range(*pf.x_range)
    step = 1e-4 * (hi - lo)
    for x0 in be.find_roots(lambda x: dfn(x) - margin, lo, hi):
        below, above = be.favoured_side(dfn, x0, margin, step, *arms)
        slope = float((dfn(np.array([x0 + step])) - dfn(np.array([x0 - step])))[0] / (2 * step))
        if terms is not None:
            ci_lo, ci_hi, shape = be.fieller_set(terms[0], terms[1], terms[2], z)
            method = "fieller"
        elif a.curved_interval == "delta":
            ci_lo, ci_hi, shape = be.delta_root_interval(x0, float(vfn(np.array([x0]))[0]), slope, z)
            method = "delta"
        else:
            if g_grid is None:
                g_grid = be.inversion_statistic(lambda x: diff, lambda x: v1 + v2, margin, z, span)(grid)
            ci_lo, ci_hi, shape = be.inverted_test_interval(g, x0, grid, on_grid=g_grid)
            method = "test-inversion"
        s.break_even.append(be.BreakEven(x0, (ci_lo, ci_hi), method, shape, not _inside(pf, x0), below, above,
                                         slope=slope))
    if terms is not None:
        s.clear_difference = be.regions_from_linear(grid, terms[0], terms[1], terms[2], crit,
                                                    _linear_sign(pf), *arms)
    else:
        s.clear_difference = be.regions(grid, s.lower, s.upper, margin, *arms)
    _finish(pf, s)
    return s


def _linear_sign(pf: PairFit) -> float:
    """+1 when a higher linear predictor means a better oriented measure, else -1."""
    first = pf.fits[_arms(pf)[0]]
    c, _ = first.linear_terms()
    x0 = pf.x_range[0]
    h = max(1e-3, 1e-3 * (pf.x_range[1] - pf.x_range[0]))
    dm = float(first.measure(np.array([x0 + h]))[0] - first.measure(np.array([x0]))[0]) * pf.sign
    dl = c[1] * h
    if dl == 0 or dm == 0:
        return 1.0
    return 1.0 if (dm > 0) == (dl > 0) else -1.0


def simultaneous_critical(pf: PairFit, level: float) -> float:
    """Scheffe-type critical value over the difference's coefficients along the index."""
    from scipy import stats

    return float(math.sqrt(stats.chi2.ppf(level, pf.basis.n_columns + 1)))


def _inside(pf: PairFit, x: float) -> bool:
    lo, hi = pf.x_range
    return lo - 1e-9 <= x <= hi + 1e-9


def _finish(pf: PairFit, s: be.CurveSummary) -> None:
    arms = _arms(pf)
    for b in s.break_even:
        if b.extrapolated:
            s.warnings.append(f"{pf.outcome.title}: the break-even point {b.x:.3g} lies outside the observed "
                              f"{pf.index} range ({pf.x_range[0]:.3g} to {pf.x_range[1]:.3g}); it is an "
                              f"extrapolation.")
    if not s.break_even:  # no root of (difference - margin) in the searched range: one side of the margin throughout
        mid = s.difference[in_range(pf, s.grid)]
        s.favours_throughout = arms[0] if np.nanmean(mid) - s.margin > 0 else arms[1]


# ------------------------------------------------------------------------------------------
# Bootstrap
# ------------------------------------------------------------------------------------------
@dataclass
class BootPayload:
    """What a replicate needs: the spec, the cohort arrays and each pair's rows and start values."""

    spec: Spec
    cohort: Cohort
    indices: dict[str, IndexValues]
    pairs: dict[tuple[str, str], tuple[Basis, dict[str, np.ndarray], dict[str, np.ndarray], np.ndarray]]
    arm_rows: dict[str, np.ndarray]
    keep_distribution: tuple[str, ...] = ()
    cluster_rows: list[np.ndarray] | None = None
    extra: dict[str, Any] = field(default_factory=dict)


def boot_payload(fs: FitSet, keep_distribution: tuple[str, ...] = ()) -> BootPayload:
    """Everything a replicate needs, computed once: rows per arm, warm starts, and in
    extra["arm_data"][pair][arm] each fit's arrays (resampling.ArmArrays), so replicates skip the frame."""
    spec = fs.spec
    arm_col = fs.cohort.frame[spec.cohort.arm].to_numpy()
    keep = True if fs.population is None or fs.population.keep is None else fs.population.keep
    arm_rows = {arm: np.flatnonzero(keep & (arm_col == arm)) for arm in spec.cohort.arms}
    pairs, arm_data = {}, {}
    for key, pf in fs.pairs.items():
        starts = {arm: f.params_ for arm, f in pf.fits.items()}
        pairs[key] = (pf.basis, pf.rows, starts, grid_for(pf, spec.analysis.grid))
        arm_data[key] = {arm: ArmArrays.of(pf.data[arm], r, len(arm_col)) for arm, r in pf.rows.items()}
    cluster_rows = None
    if spec.cohort.cluster:
        codes, _ = pd.factorize(fs.cohort.frame[spec.cohort.cluster].astype(str))
        order = np.argsort(codes, kind="stable")
        cluster_rows = np.split(order, np.flatnonzero(np.diff(codes[order])) + 1)
    refit = {}
    if spec.analysis.refit_index:
        refit = {name: iv.model.refitter(fs.cohort.frame, spec) for name, iv in fs.indices.items()
                 if hasattr(iv.model, "refitter")}
    return BootPayload(spec, fs.cohort, fs.indices, pairs, arm_rows, keep_distribution, cluster_rows=cluster_rows,
                       extra={"arm_data": arm_data, "refit": refit})


INDEX_KEY = "@index"  # replicate records of a refitted index sit under (INDEX_KEY, index name)


def refit_indices(payload: BootPayload, draw: dict[str, np.ndarray]) -> dict[str, tuple[np.ndarray, dict] | None]:
    """Each refitted prognostic index on one draw (None where its model could not be fitted)."""
    drawn = np.sort(np.concatenate(list(draw.values())))
    out: dict[str, tuple[np.ndarray, dict] | None] = {}
    for name, refitter in payload.extra.get("refit", {}).items():
        try:
            out[name] = refitter.values(drawn)
        except (FulcrumError, np.linalg.LinAlgError, ValueError, FloatingPointError):
            out[name] = None
    return out


def draw_rows(payload: BootPayload, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """One bootstrap draw of cohort rows per arm: patients within arm, or whole clusters when named."""
    if payload.cluster_rows is None:
        return {arm: np.sort(rng.choice(rows, size=len(rows), replace=True)) for arm, rows in payload.arm_rows.items()}
    picked = rng.integers(0, len(payload.cluster_rows), len(payload.cluster_rows))
    rows = np.sort(np.concatenate([payload.cluster_rows[k] for k in picked]))
    return {arm: rows[np.isin(rows, r)] for arm, r in payload.arm_rows.items()}


def boot_replicate(payload: BootPayload, rng: np.random.Generator) -> dict[tuple[str, str], dict[str, np.ndarray]]:
    """Resample patients within each arm (or whole clusters), refit every model, return curves on the grid."""
    draw = draw_rows(payload, rng)
    refitted = refit_indices(payload, draw)
    out: dict = {(INDEX_KEY, name): ({"failed": np.array(True)} if r is None else r[1]) for name, r in refitted.items()}
    for (oname, iname), (basis, rows, starts, grid) in payload.pairs.items():
        outcome = payload.spec.outcome(oname)
        try:
            if iname in refitted and refitted[iname] is None:
                raise FloatingPointError("the index could not be refitted")
            x = refitted[iname][0] if iname in refitted else None
            fits = refit_arms(outcome, basis, payload.extra["arm_data"][(oname, iname)], draw, starts, x)
        except (FulcrumError, np.linalg.LinAlgError, ValueError, FloatingPointError):
            out[(oname, iname)] = {"failed": np.array(True)}
            continue
        arms = list(rows)
        rec = {"first": fits[arms[0]].measure(grid).astype(np.float32),
               "second": fits[arms[1]].measure(grid).astype(np.float32)}
        if oname in payload.keep_distribution:
            rec["dist_first"] = fits[arms[0]].distribution(grid).astype(np.float32)
            rec["dist_second"] = fits[arms[1]].distribution(grid).astype(np.float32)
        out[(oname, iname)] = rec
    return out


def run_bootstrap(fs: FitSet, *, progress: Progress | None = None, replicates: int | None = None,
                  keep_distribution: tuple[str, ...] = ()) -> list[dict]:
    a = fs.spec.analysis
    payload = boot_payload(fs, keep_distribution)
    task = functools.partial(boot_replicate, payload)
    return run_replicates(task, replicates or a.replicates, a.seed, workers=a.workers, scheduler=a.scheduler,
                          progress=progress)


def grid_roots(grid: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Roots of a curve given on a grid, by linear interpolation between sign changes."""
    y = np.asarray(y, float)
    s = np.sign(y)
    idx = np.flatnonzero(s[:-1] * s[1:] < 0)
    exact = grid[s == 0]
    r = grid[idx] - y[idx] * (grid[idx + 1] - grid[idx]) / (y[idx + 1] - y[idx])
    return np.sort(np.concatenate([r, exact]))


def nearest_grid_roots(grid: np.ndarray, Y: np.ndarray, x0: float) -> np.ndarray:
    """For each row of Y, the grid_roots root nearest x0 (the lower of two equally near), NaN when none."""
    s = np.sign(Y)
    i, j = np.nonzero(s[:, :-1] * s[:, 1:] < 0)
    zi, zj = np.nonzero(s == 0)
    roots = np.concatenate([grid[j] - Y[i, j] * (grid[j + 1] - grid[j]) / (Y[i, j + 1] - Y[i, j]), grid[zj]])
    rows = np.concatenate([i, zi])
    order = np.lexsort((roots, np.abs(roots - x0), rows))
    rows, roots = rows[order], roots[order]
    first = np.r_[True, rows[1:] != rows[:-1]] if len(rows) else np.zeros(0, bool)
    out = np.full(len(Y), np.nan)
    out[rows[first]] = roots[first]
    return out


def bootstrap_summary(pf: PairFit, spec: Spec, curves: list[np.ndarray | None] | np.ndarray,
                      firsts: list[np.ndarray] | np.ndarray, seconds: list[np.ndarray] | np.ndarray,
                      base: be.CurveSummary | None = None, failed: int = 0, margin: float | None = None
                      ) -> be.CurveSummary:
    """Percentile intervals for the curves, the difference and each break-even point.

    curves, firsts, seconds: one entry per replicate (None where it failed), or (R, grid) arrays of the
    replicates that were fitted, with `failed` counting those left out. margin: the outcome's own by default
    (a composite passes its own).
    """
    a = spec.analysis
    arms = _arms(pf)
    if base is None:
        base = analytic_summary(pf, spec)
    if isinstance(curves, np.ndarray):
        D, F, S = (np.asarray(M, float) for M in (curves, firsts, seconds))
    else:
        ok = [i for i, c in enumerate(curves) if c is not None]
        failed = len(curves) - len(ok)
        D = np.array([curves[i] for i in ok], float)
        F = np.array([firsts[i] for i in ok], float)
        S = np.array([seconds[i] for i in ok], float)
    qlo, qhi = 0.5 - a.level / 2, 0.5 + a.level / 2
    grid = base.grid
    (dlo, dhi), (flo, fhi), (slo, shi) = (np.quantile(M, [qlo, qhi], axis=0) for M in (D, F, S))
    margin = margin_of(spec, pf) if margin is None else float(margin)
    s = be.CurveSummary(grid, base.first, base.second, base.difference, dlo, dhi, band="pointwise",
                        first_band=(flo, fhi), second_band=(slo, shi), margin=margin)
    if a.bands == "simultaneous":
        sd = np.maximum(D.std(axis=0, ddof=1), 1e-12)
        tmax = np.max(np.abs(D - base.difference) / sd, axis=1)
        crit = float(np.quantile(tmax, a.level))
        s.lower, s.upper, s.band = base.difference - crit * sd, base.difference + crit * sd, "simultaneous"
        if (span := diff_span(pf)) is not None:  # a difference of bounded measures cannot leave [-span, span]
            s.lower, s.upper = np.clip(s.lower, -span, span), np.clip(s.upper, -span, span)
    s.clear_difference = be.regions(grid, s.lower, s.upper, margin, *arms)
    Y = D - margin
    favoured_first = np.mean(Y, axis=1) > 0
    for b in base.break_even:
        draws = nearest_grid_roots(grid, Y, b.x)
        # no root: the break-even moved past the searched range on the side the replicate implies
        past = np.where(favoured_first == (b.favours_below == arms[0]), math.inf, -math.inf)
        draws = np.where(np.isnan(draws), past, draws)
        lo, hi = be.percentile_interval(draws, a.level)
        s.break_even.append(dataclasses.replace(b, ci=(lo, hi), interval="bootstrap-percentile",
                                                interval_shape=be.shape_of(lo, hi),
                                                no_root_share=float(np.mean(~np.isfinite(draws)))))
    s.favours_throughout = base.favours_throughout
    s.warnings = list(base.warnings)
    if failed:
        s.warnings.append(f"{pf.outcome.title}: {failed} of {len(D) + failed} bootstrap replicates could not be "
                          f"fitted and were left out.")
    return s


def pair_curves(pf: PairFit, reps: list[dict]) -> tuple[list, list, list]:
    key = (pf.outcome.name, pf.index)
    diffs, firsts, seconds = [], [], []
    for rep in reps:
        rec = rep[key]
        if "failed" in rec:
            diffs.append(None)
            firsts.append(None)
            seconds.append(None)
            continue
        firsts.append(rec["first"])
        seconds.append(rec["second"])
        diffs.append(pf.sign * (rec["first"].astype(float) - rec["second"].astype(float)))
    return diffs, firsts, seconds


# ------------------------------------------------------------------------------------------
# The whole analysis
# ------------------------------------------------------------------------------------------
@dataclass
class Results:
    """Everything one analysis produced: fits (for re-use), curve summaries and the JSON document."""

    fitset: FitSet
    summaries: dict[tuple[str, str], be.CurveSummary]
    document: dict
    replicates: list[dict] | None = None
    composite: dict = field(default_factory=dict)
    selection: Any = None

    @property
    def spec(self) -> Spec:
        return self.fitset.spec


def summarise(fs: FitSet, replicates: list[dict] | None = None) -> dict[tuple[str, str], be.CurveSummary]:
    out = {}
    for key, pf in fs.pairs.items():
        base = analytic_summary(pf, fs.spec)
        if replicates is not None:
            diffs, firsts, seconds = pair_curves(pf, replicates)
            base = bootstrap_summary(pf, fs.spec, diffs, firsts, seconds, base)
        out[key] = base
    return out


def analyse(spec: Spec, cohort: Cohort | None = None, *, spec_bytes: bytes | None = None,
            progress: Progress | None = None, fitset: FitSet | None = None,
            replicates: list[dict] | None = None) -> Results:
    """Run the analysis the spec describes; `progress(done, total)` reports resampling steps.

    `fitset` and `replicates` let a caller (the app) pass fits and bootstrap replicates it already has.
    Numerical warnings (overflow and the like) become result warnings instead of reaching the terminal.
    """
    fs = fitset or fit_all(spec, cohort)
    numeric: list[str] = []
    with captured(numeric, "summarising the fits"):
        out = _analyse(spec, fs, spec_bytes, progress, replicates)
    out.document["warnings"] = list(dict.fromkeys(out.document["warnings"] + numeric))
    return out


def _analyse(spec: Spec, fs: FitSet, spec_bytes: bytes | None, progress: Progress | None,
             replicates: list[dict] | None) -> Results:
    from . import checks as ck
    from . import headline as hl
    from . import imputation as im
    from . import maps as mp
    from . import pairwise as pw
    from . import results as res
    from . import selection as sel
    from . import values as vl

    reps = replicates
    if reps is None and spec.analysis.interval == "bootstrap":
        keep = (spec.values.outcome,) if spec.values else ()
        reps = run_bootstrap(fs, progress=progress, keep_distribution=keep)
    summaries = summarise(fs, reps)
    rows = [res.curve_row(fs.pairs[key], s, res.index_info_json(fs.indices[key[1]])) for key, s in summaries.items()]
    composite = vl.composite_summaries(fs, replicates=reps) if spec.values else {}
    selection = None
    if spec.cohort.allocation and fs.cohort.randomised is not None:
        selection = sel.analyse_selection(fs, replicates=0 if spec.analysis.interval == "analytic" else None,
                                          progress=progress)
    pairwise = []
    if spec.pairwise is not None:
        for ix in spec.indices:
            pairwise += pw.pairwise_rows(spec, fs.cohort, ix.name, fs.indices[ix.name].values,
                                         seed=spec.analysis.seed, progress=progress, interval=spec.analysis.interval)
    hl.annotate(fs, rows, selection.rows if selection else [])
    warnings = list(fs.cohort.warnings) + fs.notes
    for iv in fs.indices.values():
        warnings.extend(iv.warnings)
    if reps is not None and any(ix.prognostic for ix in spec.indices) and not spec.analysis.refit_index:
        warnings.append("The bootstrap held each cross-fitted prognostic index fixed at its out-of-fold values; "
                        "its intervals do not include the uncertainty of fitting the index (refit_index = true "
                        "refits it in every replicate).")
    extra: dict[str, Any] = {"population": hl.population_json(fs), "pairwise": pairwise,
                             "checks": ck.checks_rows(fs) if spec.analysis.checks else [],
                             "baseline": ck.baseline_table(fs.cohort) if spec.cohort.covariates else []}
    extra["kaplan_meier"] = ck.km_rows(fs, bands=ck.BANDS if spec.analysis.checks else 0)
    extra["coverage"] = [{"index": ix, "windows": w} for ix, w in selection.coverage.items()] if selection else []
    clusters = ck.clustering(fs)
    if clusters:
        extra["clustering"] = clusters
        warnings += clusters["warnings"]
    extra["maps"] = mp.decision_maps(fs)
    extra["imputation"] = im.imputed_break_evens(fs, m=spec.analysis.imputations) if spec.analysis.imputations else []
    if spec.policy is not None:
        from . import policy as po

        extra["policy"], policy_warnings = po.analysis_rows(fs, replicates=reps)
        warnings += policy_warnings
    if spec.evidence is not None:
        from . import evidence as ev  # features sit beside each other; imported here like the others above

        extra["evidence"] = ev.evidence_rows(fs, composite, reps)
    doc = res.document(spec, data_sha256=fs.cohort.sha256, spec_bytes=spec_bytes, rows=rows,
                       composite=vl.composite_rows(fs, composite) if composite else [],
                       selection=selection.rows if selection else [], warnings=warnings, extra=extra,
                       source=fs.cohort.source)
    return Results(fs, summaries, doc, reps, composite, selection)

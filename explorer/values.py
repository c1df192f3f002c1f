"""State weights, the composite along the index, threshold analysis and acceptability under weight uncertainty.

Every composite is linear in the weights: each arm's composite is L(x) @ w, where L(x) holds the
"effective level probabilities" (the ordinal model's level distribution, or survival times the
distribution among the living levels). Models are fitted once; `prepare_composites` evaluates L and
its delta-method covariance on the grid, so re-weighting is matrix products only.
"""
from __future__ import annotations

import copy
import dataclasses
from dataclasses import dataclass, field
from typing import Callable, Sequence

import numpy as np
from scipy import special

from . import breakeven as be
from . import fitting as ft
from .coverage import label_composites
from .errors import FulcrumError
from .numeric import jsonable, quad, r6
from .presets import PRESETS, check_weights, default_weights
from .models import describe
from .result_rows import curve_row, index_info_json
from .spec import OutcomeSpec, Spec, ValuesSpec
from .timepoints import mismatch

KINDS = ("ordinal", "survival_function", "quality_adjusted")
WEIGHTED_KINDS = ("ordinal", "survival_function")


def conditional_label(outcome: OutcomeSpec) -> str:
    """The outcome's display label, marked as conditional on survival when measured only in survivors."""
    if outcome.among_survivors:
        return f"{outcome.title} (survivors only: conditional on being alive)"
    return outcome.title


def truncation_note(outcome: OutcomeSpec) -> str | None:
    """The truncation-by-death sentence shown beside an outcome measured only in survivors."""
    if not outcome.among_survivors:
        return None
    return (f"{outcome.title} is measured only in patients who were alive, so its comparison between arms is among "
            "different groups of survivors (truncation by death); the composite compares the arms over everyone.")


# ------------------------------------------------------------------------------------------
# Composite models: L(x) and its covariance per arm, evaluated from the fitted models
# ------------------------------------------------------------------------------------------
Evaluator = Callable[[np.ndarray, bool], tuple[list[np.ndarray], list[np.ndarray] | None]]


@dataclass
class CompositeModel:
    """One composite along one index, ready to re-weight without refitting.

    L[a]: (G, K) effective level probabilities of arm a on `grid`; C[a]: (G, K, K) their delta covariance.
    at(x, with_cov): the same from the fitted models at any index values. boot[a]: (R, G, K) per bootstrap
    replicate (None rows where a replicate failed), or None when the interval is analytic.
    """

    form: str  # the composite's form: one of KINDS
    index: str
    levels: tuple[str, ...]
    arms: tuple[str, str]
    pair: ft.PairFit
    spec: Spec
    grid: np.ndarray
    L: list[np.ndarray]
    C: list[np.ndarray]
    at: Evaluator
    measure: str
    notes: list[str] = field(default_factory=list)
    boot: list[np.ndarray] | None = None
    boot_ok: np.ndarray | None = None
    cache: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def weighted(self) -> bool:
        return self.form in WEIGHTED_KINDS

    @property
    def x_range(self) -> tuple[float, float]:
        return self.pair.x_range

    def difference(self, x: np.ndarray, w: np.ndarray) -> np.ndarray:
        L, _ = self.at(np.asarray(x, float).reshape(-1), False)
        return (L[0] - L[1]) @ w

    def derived(self, name: str, sources: tuple, make: Callable[[], object]) -> object:
        """A weight-free value computed from `sources` (objects this model holds), kept in `cache` until any
        of them is replaced, so re-weighting does not redo it."""
        hit = self.cache.get(name)
        if hit is not None and len(hit[0]) == len(sources) and all(a is b for a, b in zip(hit[0], sources)):
            return hit[1]
        value = make()
        self.cache[name] = (sources, value)
        return value

    def fitted_replicates(self) -> tuple[np.ndarray, np.ndarray]:
        """Both arms' (R, G, K) replicate arrays without the replicates that failed."""
        return self.derived("fitted_replicates", (*self.boot, self.boot_ok),
                            lambda: (self.boot[0][self.boot_ok], self.boot[1][self.boot_ok]))


@dataclass
class CompositeInfo:
    """What the composite row says beyond the curve: the weights, whose they are, and the caveats."""

    form: str  # the composite's form: one of KINDS
    index: str
    measure: str
    weights: dict[str, float] | None
    whose: str
    notes: list[str]
    thresholds: dict | None = None
    acceptability: list[dict] | None = None
    model: CompositeModel | None = None


def _sandwich(J: np.ndarray, cov: np.ndarray) -> np.ndarray:
    return np.einsum("gkp,pq,glq->gkl", J, cov, J)


def _distribution(fit, x: np.ndarray, with_cov: bool, outcome: OutcomeSpec) -> tuple[np.ndarray, np.ndarray | None]:
    P = fit.distribution(x)
    if P is None:
        raise FulcrumError(f"the model of '{outcome.name}' in arm '{fit.arm}' gives no level probabilities, so the "
                           "composite cannot be formed.", key="values.outcome",
                           hint="Name an ordinal outcome in [values] whose model reports a level distribution.")
    P = np.asarray(P, float)
    if not with_cov:
        return P, None
    J = fit.distribution_jacobian(x)
    if J is None:
        raise FulcrumError(f"the model of '{outcome.name}' in arm '{fit.arm}' gives no derivatives of its level "
                           "probabilities, so the composite has no interval.", key="values.outcome",
                           hint="Use an ordinal model that reports distribution_jacobian.")
    return P, _sandwich(np.asarray(J, float), np.asarray(fit.cov_, float))


def survival_at_horizon(fit, outcome: OutcomeSpec, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """P(alive at the outcome's horizon | x) and its variance, whatever the outcome's own measure."""
    if outcome.measure == "survival":
        return np.asarray(fit.measure(x), float), np.asarray(fit.measure_var(x), float)
    if hasattr(fit, "cumulative_hazard") and hasattr(fit, "cumulative_hazard_var"):
        S = np.exp(-np.asarray(fit.cumulative_hazard(x), float))
        return S, S ** 2 * np.asarray(fit.cumulative_hazard_var(x), float)
    raise FulcrumError(f"the model of '{outcome.name}' does not report survival at the horizon with its variance.",
                       key="values.survival_outcome", hint="Set measure = \"survival\" for this outcome.")


def rmst_at_horizon(fit, outcome: OutcomeSpec, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Restricted mean survival to the horizon | x and its variance, whatever the outcome's own measure."""
    if outcome.measure == "rmst":
        return np.asarray(fit.measure(x), float), np.asarray(fit.measure_var(x), float)
    rmst = getattr(fit, "rmst", None) or getattr(fit, "_rmst", None)
    if rmst is None:
        raise FulcrumError(f"the model of '{outcome.name}' does not report restricted mean survival.",
                           key="values.utility_outcome", hint="Set measure = \"rmst\" for the survival outcome.")
    est, var = rmst(x)
    return np.asarray(est, float), np.asarray(var, float)


def ordinal_evaluator(pf: ft.PairFit) -> Evaluator:
    arms = list(pf.fits)

    def at(x: np.ndarray, with_cov: bool):
        out = [_distribution(pf.fits[a], x, with_cov, pf.outcome) for a in arms]
        return [o[0] for o in out], ([o[1] for o in out] if with_cov else None)
    return at


def _alive_levels(P: np.ndarray, S: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """L = [S * p_living / sum(p_living), 1 - S]; also q = p_living / A and A."""
    A = P[:, :-1].sum(axis=1)
    q = P[:, :-1] / A[:, None]
    return np.column_stack([S[:, None] * q, 1.0 - S]), q, A


def survival_function_levels(P: np.ndarray, S: np.ndarray, CP: np.ndarray | None, vS: np.ndarray | None
                             ) -> tuple[np.ndarray, np.ndarray | None]:
    """Effective level probabilities of P(alive) x function among survivors, with delta covariance.

    The two models are independent by assumption: Cov(L) = S^2 M CP M' + var(S) u u', with
    M = d(p_living/A)/dp and u = dL/dS = [q, -1].
    """
    L, q, A = _alive_levels(P, S)
    if CP is None:
        return L, None
    G, K = P.shape
    M = np.zeros((G, K, K))
    eye = np.eye(K - 1)
    M[:, :-1, :-1] = (eye[None] - q[:, :, None]) / A[:, None, None]
    u = np.column_stack([q, -np.ones(G)])
    C = (S ** 2)[:, None, None] * np.einsum("gij,gjk,glk->gil", M, CP, M)
    C += vS[:, None, None] * u[:, :, None] * u[:, None, :]
    return L, C


def _survival_function_evaluator(pf_ord: ft.PairFit, pf_surv: ft.PairFit) -> Evaluator:
    arms = list(pf_ord.fits)

    def at(x: np.ndarray, with_cov: bool):
        Ls, Cs = [], []
        for a in arms:
            P, CP = _distribution(pf_ord.fits[a], x, with_cov, pf_ord.outcome)
            S, vS = survival_at_horizon(pf_surv.fits[a], pf_surv.outcome, x)
            L, C = survival_function_levels(P, S, CP, vS)
            Ls.append(L)
            Cs.append(C)
        return Ls, (Cs if with_cov else None)
    return at


def _quality_adjusted_evaluator(pf_surv: ft.PairFit, pf_util: ft.PairFit) -> Evaluator:
    arms = list(pf_surv.fits)

    def at(x: np.ndarray, with_cov: bool):
        Ls, Cs = [], []
        for a in arms:
            R, vR = rmst_at_horizon(pf_surv.fits[a], pf_surv.outcome, x)
            U = np.asarray(pf_util.fits[a].measure(x), float)
            vU = np.asarray(pf_util.fits[a].measure_var(x), float)
            Ls.append((R * U)[:, None])
            Cs.append((vR * U ** 2 + R ** 2 * vU)[:, None, None])
        return Ls, (Cs if with_cov else None)
    return at


def _relabel(pf: ft.PairFit, title: str, parts: list[ft.PairFit]) -> ft.PairFit:
    """The anchor pair with the composite's title and every part's warnings, for the shared summary code."""
    warnings = list(dict.fromkeys(w for p in parts for w in p.warnings))
    return dataclasses.replace(pf, outcome=dataclasses.replace(pf.outcome, label=title), warnings=warnings)


def survival_outcome_of(spec: Spec) -> OutcomeSpec | None:
    v = spec.values
    if v is not None and v.survival_outcome:
        return spec.outcome(v.survival_outcome)
    return next((o for o in spec.outcomes if describe(o).follow_up), None)


def _horizon_words(o: OutcomeSpec) -> str:
    return f"{o.horizon:g}" + (f" {o.units}" if o.units else "")


def default_kinds(spec: Spec) -> tuple[str, ...]:
    """The composites the spec asks for: always the ordinal one, plus those its [values] keys enable."""
    v = spec.values
    if v is None:
        return ()
    kinds = ["ordinal"]
    if v.survival_outcome:
        kinds.append("survival_function")
    if v.utility_outcome and survival_outcome_of(spec) is not None:
        kinds.append("quality_adjusted")
    return tuple(kinds)


def prepare_composite(fs: ft.FitSet, form: str, index: str, replicates: list[dict] | None = None,
                      values: ValuesSpec | None = None) -> CompositeModel:
    """Evaluate one composite's level probabilities and covariances on the grid from the fitted models."""
    spec = fs.spec
    values = values or spec.values
    if values is None:
        raise FulcrumError("the spec has no [values] section, so there is no composite.", key="values",
                           hint="Add [values] naming the ordinal outcome whose states are weighted.")
    if form not in KINDS:
        raise FulcrumError(f"'{form}' is not a kind of composite.", hint=f"Kinds: {', '.join(KINDS)}.")
    pf_ord = fs.pair(values.outcome, index)
    ordinal = pf_ord.outcome
    notes: list[str] = []
    whose = {"patient": "the patient", "proxy": "a proxy speaking for the patient", "team": "the treating team"}
    if form == "ordinal":
        levels = ordinal.levels
        anchor, at = pf_ord, ordinal_evaluator(pf_ord)
        parts = [pf_ord]
        measure = f"expected weight of {ordinal.title}"
        notes.append(f"Each arm's composite is the expected weight over the levels of {ordinal.title}, from its "
                     "fitted level probabilities; the weights are those of " + whose.get(values.whose, values.whose)
                     + ".")
    elif form == "survival_function":
        if not values.survival_outcome:
            raise FulcrumError("the survival x function composite needs a survival outcome.",
                               key="values.survival_outcome", hint="Name the survival outcome in [values].")
        so = spec.outcome(values.survival_outcome)
        pf_surv = fs.pair(so.name, index)
        levels = ordinal.levels
        anchor, at = pf_ord, _survival_function_evaluator(pf_ord, pf_surv)
        parts = [pf_ord, pf_surv]
        measure = f"alive at {_horizon_words(so)} x expected weight of survivors' states"
        notes.append(f"P(alive at {_horizon_words(so)}) from '{so.title}' times the expected weight among survivors "
                     f"from '{ordinal.title}' (its probabilities over the levels other than '{levels[-1]}', taken as "
                     f"death); death counts with weight {{death}}. This is the law of total expectation: both models "
                     f"must refer to the same horizon and population, the function model describing patients "
                     f"alive then; the two models are treated as independent in the intervals.")
    else:
        so = survival_outcome_of(spec)
        if so is None or not values.utility_outcome:
            raise FulcrumError("quality-adjusted survival needs a survival outcome and a utility outcome.",
                               key="values.utility_outcome", hint="Name utility_outcome in [values] and add a "
                               "survival outcome.")
        uo = spec.outcome(values.utility_outcome)
        pf_surv, pf_util = fs.pair(so.name, index), fs.pair(uo.name, index)
        levels = ("quality-adjusted survival",)
        anchor, at = pf_surv, _quality_adjusted_evaluator(pf_surv, pf_util)
        parts = [pf_surv, pf_util]
        measure = (f"quality-adjusted {so.units or 'time'} alive up to {_horizon_words(so)} (restricted mean "
                   f"survival x {conditional_label(uo)})")  # the values carry their units
        notes.append(f"Quality-adjusted survival is approximated as restricted mean survival to {_horizon_words(so)} "
                     f"times the mean {uo.title} of survivors at that index value: this assumes quality of life is "
                     "constant over the period and the same, while alive, in those who died as in the survivors "
                     "measured; the two models are treated as independent in the intervals.")
    title = {"ordinal": f"Expected value of the weights ({ordinal.title})", "survival_function": "Survival combined "
             "with function", "quality_adjusted": "Quality-adjusted survival"}[form]  # words, never the kind's name
    pair = _relabel(anchor, title, parts)
    pair.warnings.extend(mismatch([p.outcome for p in parts]))  # outcomes measured at different times
    grid = ft.grid_for(anchor, spec.analysis.grid)
    L, C = at(grid, True)
    cm = CompositeModel(form, index, tuple(levels), tuple(anchor.fits), pair, spec, grid, L, C, at, measure, notes)
    if replicates is not None:
        _attach_replicates(cm, fs, values, replicates)
    return cm


def _rep_curve(rec: dict, key: str, src_grid: np.ndarray, grid: np.ndarray) -> np.ndarray:
    v = np.asarray(rec[key], float)
    return v if v.shape == grid.shape and np.array_equal(src_grid, grid) else np.interp(grid, src_grid, v)


def _attach_replicates(cm: CompositeModel, fs: ft.FitSet, values: ValuesSpec, reps: list[dict]) -> None:
    """Per-replicate effective level probabilities on the composite grid, from run_bootstrap records."""
    spec, index, n = fs.spec, cm.index, fs.spec.analysis.grid
    if cm.form in WEIGHTED_KINDS:
        fitted = [rep[(values.outcome, index)] for rep in reps if "failed" not in rep[(values.outcome, index)]]
        if fitted and "dist_first" not in fitted[0]:
            raise FulcrumError("the bootstrap replicates do not hold the level probabilities of "
                               f"'{values.outcome}', so the composite's bootstrap interval cannot be formed.",
                               key="analysis.interval", hint="Run the bootstrap with keep_distribution="
                               f"('{values.outcome}',).")
    if cm.form == "survival_function":
        so = spec.outcome(values.survival_outcome)
        if so.measure != "survival":
            cm.notes.append("The bootstrap replicates hold restricted mean survival, not survival at the horizon, "
                            "so this composite's interval is the analytic (test-inversion) one.")
            return
        surv_grid = ft.grid_for(fs.pair(so.name, index), n)
    if cm.form == "quality_adjusted":
        so = survival_outcome_of(spec)
        if so.measure != "rmst":
            cm.notes.append("The bootstrap replicates hold survival at the horizon, not restricted mean survival, "
                            "so this composite's interval is the analytic (test-inversion) one.")
            return
        surv_grid = ft.grid_for(fs.pair(so.name, index), n)
        util = values.utility_outcome
        util_grid = ft.grid_for(fs.pair(util, index), n)
    G, K = len(cm.grid), len(cm.levels)
    out = [np.full((len(reps), G, K), np.nan), np.full((len(reps), G, K), np.nan)]
    ok = np.ones(len(reps), bool)
    for r, rep in enumerate(reps):
        if cm.form == "quality_adjusted":
            rs, ru = rep[(so.name, index)], rep[(util, index)]
            if "failed" in rs or "failed" in ru:
                ok[r] = False
                continue
            for j, side in enumerate(("first", "second")):
                out[j][r, :, 0] = _rep_curve(rs, side, surv_grid, cm.grid) * _rep_curve(ru, side, util_grid, cm.grid)
            continue
        ro = rep[(values.outcome, index)]
        if "failed" in ro:
            ok[r] = False
            continue
        if cm.form == "ordinal":
            out[0][r], out[1][r] = ro["dist_first"], ro["dist_second"]
            continue
        rs = rep[(so.name, index)]
        if "failed" in rs:
            ok[r] = False
            continue
        for j, side in enumerate(("first", "second")):
            P = np.asarray(ro[f"dist_{side}"], float)
            out[j][r] = _alive_levels(P, _rep_curve(rs, side, surv_grid, cm.grid))[0]
    cm.boot, cm.boot_ok = out, ok


def prepare_composites(fs: ft.FitSet, *, kinds: Sequence[str] | None = None, replicates: list[dict] | None = None,
                       values: ValuesSpec | None = None) -> dict[tuple[str, str], CompositeModel]:
    """Every requested composite along every index, ready for `reweight` (no model is refitted)."""
    values = values or fs.spec.values
    if values is None:
        return {}
    kinds = tuple(kinds) if kinds is not None else default_kinds(dataclasses.replace(fs.spec, values=values))
    return {(k, ix.name): prepare_composite(fs, k, ix.name, replicates, values)
            for k in kinds for ix in fs.spec.indices}


# ------------------------------------------------------------------------------------------
# Summaries: curves, break-even points and intervals for given weights
# ------------------------------------------------------------------------------------------
def weights_for(cm: CompositeModel, weights: dict[str, float] | Sequence[float] | None) -> np.ndarray:
    if not cm.weighted:
        return np.ones(1)
    if weights is None:
        weights = cm.spec.values.weights if cm.spec.values else default_weights(cm.levels)
    return check_weights(weights, cm.levels)


def _margin(cm: CompositeModel, margin: float | None) -> float:
    return cm.spec.analysis.margin if margin is None else float(margin)


def analytic_composite(cm: CompositeModel, w: np.ndarray, margin: float | None = None) -> be.CurveSummary:
    """Composite curves with delta-method bands, break-even points with test-inversion intervals (the stretch
    around each root where the pointwise band holds the margin), regions."""
    a = cm.spec.analysis
    margin = _margin(cm, margin)
    m1, m2 = cm.L[0] @ w, cm.L[1] @ w
    v1, v2 = np.maximum(quad(cm.C[0], w), 0.0), np.maximum(quad(cm.C[1], w), 0.0)
    diff = m1 - m2
    se = np.sqrt(np.maximum(v1 + v2, 0.0))
    z = be.critical_value(a.level)
    crit = z if a.bands == "pointwise" else ft.simultaneous_critical(cm.pair, a.level)
    s = be.CurveSummary(cm.grid, m1, m2, diff, diff - crit * se, diff + crit * se, band=a.bands,
                        first_band=(m1 - z * np.sqrt(v1), m1 + z * np.sqrt(v1)),
                        second_band=(m2 - z * np.sqrt(v2), m2 + z * np.sqrt(v2)), margin=margin)
    if cm.weighted and np.ptp(w) == 0.0:
        s.warnings.append("Every state carries the same weight, so the arms cannot differ on this composite.")
        return s
    dfn = lambda x: cm.difference(x, w)  # noqa: E731
    lo, hi = be.search_range(*cm.x_range)
    step = 1e-4 * (hi - lo)
    for x0 in be.find_roots(lambda x: dfn(x) - margin, lo, hi):
        below, above = be.favoured_side(dfn, x0, margin, step, *cm.arms)
        slope = float((dfn(np.array([x0 + step])) - dfn(np.array([x0 - step])))[0] / (2 * step))
        ci_lo, ci_hi, shape = be.inverted_test_interval(_test_statistic(cm, w, margin, z), x0, cm.grid,
                                                        (diff - margin) ** 2 - z * z * (v1 + v2))
        s.break_even.append(be.BreakEven(x0, (ci_lo, ci_hi), "test-inversion", shape,
                                         not ft.in_observed_range(cm.pair, x0), below, above, slope=slope))
    s.clear_difference = be.regions(cm.grid, s.lower, s.upper, margin, *cm.arms)
    ft.finish_summary(cm.pair, s)
    return s


def _test_statistic(cm: CompositeModel, w: np.ndarray, margin: float, crit: float) -> Callable:
    """x -> (composite difference - margin)^2 - crit^2 var: not above 0 where the pointwise test does not reject."""
    def g(x: np.ndarray) -> np.ndarray:
        L, C = cm.at(np.asarray(x, float).reshape(-1), True)
        d = (L[0] - L[1]) @ w - margin
        return d * d - crit * crit * np.maximum(quad(C[0], w) + quad(C[1], w), 0.0)
    return g


def bootstrap_composite(cm: CompositeModel, w: np.ndarray, base: be.CurveSummary, margin: float | None = None
                        ) -> be.CurveSummary:
    """Percentile intervals from the replicates' composite curves (the replicates refitted every model used)."""
    B0, B1 = cm.fitted_replicates()
    F, S = B0 @ w, B1 @ w
    spec = cm.spec
    return ft.bootstrap_summary(cm.pair, spec, F - S, F, S, base, failed=int(np.sum(~cm.boot_ok)),
                                margin=_margin(cm, margin))


def summarise_composite(cm: CompositeModel, weights: dict[str, float] | Sequence[float] | None = None, *,
                        margin: float | None = None) -> be.CurveSummary:
    """The composite's CurveSummary for these weights: bootstrap intervals when replicates are attached."""
    return _summary(cm, weights_for(cm, weights), margin)


def _summary(cm: CompositeModel, w: np.ndarray, margin: float | None) -> be.CurveSummary:
    """Analytic summary, with bootstrap intervals when replicates are attached. A composite without weights
    gives the same summary whatever the weights, so it is made once per margin and copied out."""
    def make() -> be.CurveSummary:
        s = analytic_composite(cm, w, margin)
        return bootstrap_composite(cm, w, s, margin) if cm.boot is not None else s
    if cm.weighted:
        return make()
    sources = (cm.spec, *cm.L, *cm.C, *(cm.boot or ()), cm.boot_ok)
    return copy.deepcopy(cm.derived(("summary", _margin(cm, margin)), sources, make))


def reweight(prepared: dict[tuple[str, str], CompositeModel], weights: dict[str, float] | Sequence[float] | None
             = None, *, values: ValuesSpec | None = None, margin: float | None = None,
             threshold_at: dict[str, float] | None = None, with_acceptability: bool = True,
             keys: Sequence[tuple[str, str]] | None = None
             ) -> dict[tuple[str, str], tuple[be.CurveSummary, CompositeInfo]]:
    """Summaries for new weights from prepared composites: matrix products and root refinement only.

    keys: only these (kind, index) composites, e.g. the one on screen.
    """
    out = {}
    for key, cm in prepared.items():
        if keys is not None and key not in keys:
            continue
        v = values or cm.spec.values
        w = weights_for(cm, weights if weights is not None else v.weights)
        s = _summary(cm, w, margin)
        info = CompositeInfo(cm.form, cm.index, cm.measure,
                             dict(zip(cm.levels, map(float, w))) if cm.weighted else None, v.whose,
                             _notes(cm, w), model=cm)
        if cm.weighted:
            x0 = (threshold_at or {}).get(cm.index, default_threshold_x(cm))
            info.thresholds = thresholds(cm, w, x0, margin=margin)
            if with_acceptability:
                info.acceptability = acceptability(cm, w, ranges=v.ranges, spread=v.spread, draws=v.draws,
                                                   seed=cm.spec.analysis.seed, margin=margin)
        out[key] = (s, info)
    return out


def _notes(cm: CompositeModel, w: np.ndarray) -> list[str]:
    death = f"{w[-1]:g}" if cm.weighted else "0"
    notes = [n.replace("{death}", death) for n in cm.notes]
    if cm.weighted and (w[-1] != 0.0 or np.max(w) != 1.0):
        notes.append(f"The weights do not run from 1 (best state) to 0 (death): best {np.max(w):g}, "
                     f"'{cm.levels[-1]}' {w[-1]:g}.")
    if cm.weighted and np.any(w < 0):
        below = [lv for lv, x in zip(cm.levels, w) if x < 0]
        notes.append(f"Judged worse than death: {', '.join(below)}.")
    return notes


def composite_summaries(fs: ft.FitSet, weights: dict[str, float] | Sequence[float] | None = None, *,
                        kinds: Sequence[str] | None = None, replicates: list[dict] | None = None,
                        margin: float | None = None, threshold_at: dict[str, float] | None = None
                        ) -> dict[tuple[str, str], tuple[be.CurveSummary, CompositeInfo]]:
    """Every composite of the spec (or `kinds`) along every index, from the fitted models (never refitted)."""
    prepared = prepare_composites(fs, kinds=kinds, replicates=replicates)
    return reweight(prepared, weights, margin=margin, threshold_at=threshold_at)


def composite_rows(fs: ft.FitSet, summaries: dict[tuple[str, str], tuple[be.CurveSummary, CompositeInfo]],
                   values_spec: ValuesSpec | None = None) -> list[dict]:
    """JSON `composite` rows in the shape of result_rows.curve_row, outcome 'composite'."""
    values_spec = values_spec or fs.spec.values
    rows = []
    for (kind, index), (s, info) in summaries.items():
        cm = info.model
        row = curve_row(cm.pair, s, index_info_json(fs.indices[index]))
        row.update({"outcome": "composite", "measure": info.measure, "kind": kind, "probability": False,
                    "higher_is_better": True,
                    "among_survivors": False, "values_outcome": values_spec.outcome if values_spec else None,
                    "weights": None if info.weights is None else {k: r6(v) for k, v in info.weights.items()},
                    "preset": values_spec.preset if values_spec else None,
                    "preset_source": PRESETS[values_spec.preset].source
                    if values_spec and values_spec.preset in PRESETS else None,
                    "whose": info.whose, "notes": list(info.notes), "thresholds": jsonable(info.thresholds),
                    "acceptability": jsonable(info.acceptability)})
        row["methods"] = {"composite": " ".join(info.notes)}
        rows.append(row)
    return label_composites(rows, fs.spec)


# ------------------------------------------------------------------------------------------
# Threshold analysis (Pauker & Kassirer 1980): the weight at which the favoured arm flips
# ------------------------------------------------------------------------------------------
def default_threshold_x(cm: CompositeModel) -> float:
    """The median index value of the patients behind the composite's anchor outcome."""
    return cm.derived("median_x", (cm.pair,),
                      lambda: float(np.median(np.concatenate([d.x for d in cm.pair.data.values()]))))


def _favours(cm: CompositeModel, d: float) -> str | None:
    return cm.arms[0] if d > 0 else cm.arms[1] if d < 0 else None


def level_differences(cm: CompositeModel, x: float) -> np.ndarray:
    """First minus second effective level probabilities at index value x: the composite difference is this @ w."""
    L, _ = cm.at(np.array([float(x)]), False)
    return L[0][0] - L[1][0]


def thresholds(cm: CompositeModel, weights: dict[str, float] | Sequence[float], x: float,
               margin: float | None = None) -> dict:
    """For each state, the weight at which the favoured arm flips at x, holding the other weights fixed.

    The difference (first minus second) is linear in each weight, so the flip weight is exact:
    t = w_k - (delta @ w - margin) / delta_k, reported when it lies within [-1, 1].
    """
    w = weights_for(cm, weights)
    m = _margin(cm, margin)
    delta = level_differences(cm, x)
    d = float(delta @ w) - m
    states = []
    for k, lv in enumerate(cm.levels):
        flip = None
        if abs(delta[k]) > 1e-12 * max(1.0, float(np.abs(delta).max())):
            t = w[k] - d / delta[k]
            if -1.0 <= t <= 1.0:
                flip = float(t)
        entry = {"level": lv, "weight": float(w[k]), "flip_weight": flip, "effect_per_unit": float(delta[k])}
        if flip is None:
            entry["message"] = "no flip within [-1, 1]"
        else:
            rising = (delta[k] > 0)
            entry["favours_above"] = cm.arms[0] if rising else cm.arms[1]
            entry["favours_below"] = cm.arms[1] if rising else cm.arms[0]
            entry["message"] = (f"{entry['favours_above']} is favoured when the weight of '{lv}' is above "
                                f"{flip:.3g}, {entry['favours_below']} when it is below")
        states.append(entry)
    return {"x": float(x), "difference": d + m, "margin": m, "favours": _favours(cm, d), "states": states}


def threshold_map(cm: CompositeModel, weights: dict[str, float] | Sequence[float], x: float, state_a: str,
                  state_b: str, n: int = 41, margin: float | None = None) -> list[dict]:
    """The favoured arm over a grid of two states' weights in [-1, 1]^2, other weights held fixed."""
    w = weights_for(cm, weights)
    for s in (state_a, state_b):
        if s not in cm.levels:
            raise FulcrumError(f"'{s}' is not a level of the weighted outcome.",
                               hint=f"Levels: {', '.join(cm.levels)}.")
    if state_a == state_b:
        raise FulcrumError("the threshold map needs two different states.", hint="Choose two different levels.")
    ia, ib = cm.levels.index(state_a), cm.levels.index(state_b)
    delta = level_differences(cm, x)
    m = _margin(cm, margin)
    rest = float(delta @ w - delta[ia] * w[ia] - delta[ib] * w[ib]) - m
    ts = np.linspace(-1.0, 1.0, n)
    A, B = np.meshgrid(ts, ts, indexing="ij")
    D = rest + delta[ia] * A + delta[ib] * B
    return [{"state_a": state_a, "weight_a": float(a), "state_b": state_b, "weight_b": float(b),
             "difference": float(d + m), "favours": _favours(cm, float(d))}
            for a, b, d in zip(A.ravel(), B.ravel(), D.ravel())]


# ------------------------------------------------------------------------------------------
# Weight uncertainty (stochastic multicriteria acceptability analysis, Lahdelma et al. 1998)
# ------------------------------------------------------------------------------------------
def weight_bounds(levels: Sequence[str], weights: np.ndarray, ranges: dict[str, tuple[float, float]] | None,
                  spread: float) -> tuple[np.ndarray, np.ndarray]:
    """Per level, the interval weights are drawn from: its range, else +/- spread clipped to [-1, 1].

    Death (the last level) stays at its stated weight unless a range is given for it.
    """
    ranges = ranges or {}
    lo, hi = weights - spread, weights + spread
    lo[-1] = hi[-1] = weights[-1]
    for k, lv in enumerate(levels):
        if lv in ranges:
            lo[k], hi[k] = ranges[lv]
    for lv in ranges:
        if lv not in levels:
            raise FulcrumError(f"a range is given for '{lv}', which is not a level.", key=f"values.ranges.{lv}",
                               hint=f"Levels: {', '.join(levels)}.")
    lo, hi = np.clip(lo, -1.0, 1.0), np.clip(hi, -1.0, 1.0)
    if np.any(lo > hi):
        raise FulcrumError("a weight range has its low end above its high end.", key="values.ranges",
                           hint="Give each range as [low, high].")
    return lo, hi


def draw_weights(levels: Sequence[str], weights: np.ndarray, ranges: dict[str, tuple[float, float]] | None,
                 spread: float, draws: int, rng: np.random.Generator) -> np.ndarray:
    """(draws, K) weight vectors, each level uniform over its interval (see weight_bounds)."""
    lo, hi = weight_bounds(levels, np.asarray(weights, float).copy(), ranges, spread)
    return lo + (hi - lo) * rng.random((draws, len(levels)))


def acceptability(cm: CompositeModel, weights: dict[str, float] | Sequence[float], *,
                  ranges: dict[str, tuple[float, float]] | None = None, spread: float = 0.0, draws: int = 500,
                  seed: int = 1, margin: float | None = None, use_bootstrap: bool = True,
                  x: np.ndarray | None = None) -> list[dict]:
    """P(each arm is favoured) along the index, over weight draws combined with model uncertainty.

    Model uncertainty: with bootstrap replicates, draw d uses replicate d mod R; otherwise the
    difference at each x is normal with the delta variance w' Sigma_x w, and the chance it exceeds
    the margin is averaged over the weight draws (the exact expectation of a normal draw per weight draw).
    Points: the composite grid within the observed range, or the index values `x`.
    """
    w = weights_for(cm, weights)
    m = _margin(cm, margin)
    W = draw_weights(cm.levels, w, ranges, spread, draws, np.random.default_rng(seed))
    if x is None:
        keep = ft.in_range(cm.pair, cm.grid)
        xs = cm.grid[keep]
    else:
        xs = np.asarray(x, float).reshape(-1)
    if use_bootstrap and cm.boot is not None and cm.boot_ok.any():
        B = cm.derived(("draw_differences", xs.tobytes(), draws), (*cm.boot, cm.boot_ok),
                       lambda: _draw_differences(cm, xs, draws))
        D = np.einsum("dgk,dk->dg", B, W)
        p_first = np.mean(m < D, axis=0)
    else:
        if x is None:
            delta, Sig = (cm.L[0] - cm.L[1])[keep], (cm.C[0] + cm.C[1])[keep]
        else:
            L, C = cm.at(xs, True)
            delta, Sig = L[0] - L[1], C[0] + C[1]
        K = len(cm.levels)
        # plain einsum, not BLAS: these products are small, and threaded BLAS stalls on a busy machine
        mean = np.einsum("gk,dk->gd", delta, W)
        WW = (W[:, :, None] * W[:, None, :]).reshape(len(W), K * K)
        sd = np.sqrt(np.maximum(np.einsum("gk,dk->gd", Sig.reshape(len(Sig), K * K), WW), 0.0))
        z = (mean - m) / np.where(sd > 0, sd, 1.0)
        p_first = np.where(sd > 0, special.ndtr(z), (mean > m).astype(float)).mean(axis=1)
    return [{"x": float(v), "first": float(p), "second": float(1.0 - p)} for v, p in zip(xs, p_first)]


def _draw_differences(cm: CompositeModel, xs: np.ndarray, draws: int) -> np.ndarray:
    """(draws, len(xs), K) first-minus-second replicate arrays at xs, weight draw d using replicate d mod R."""
    B0, B1 = cm.fitted_replicates()
    n = min(draws, len(B0))
    return _at_points(B0[:n] - B1[:n], cm.grid, xs)[np.arange(draws) % n]


def _at_points(B: np.ndarray, grid: np.ndarray, xs: np.ndarray) -> np.ndarray:
    """Replicate arrays (R, G, K) linearly interpolated along the grid at index values xs: (R, len(xs), K)."""
    if len(xs) == len(grid) and np.array_equal(xs, grid):
        return B
    i = np.clip(np.searchsorted(grid, xs) - 1, 0, len(grid) - 2)
    f = np.clip((xs - grid[i]) / (grid[i + 1] - grid[i]), 0.0, 1.0)[None, :, None]
    return B[:, i] * (1 - f) + B[:, i + 1] * f

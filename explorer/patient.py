"""One patient placed on the fitted curves: predictions per arm with intervals, the arm their values favour,
the limits of what the cohort can say about them, and plain-language sentences in natural frequencies.

Nothing is refitted: the patient's index values come from each index's own model (a column, a formula, or
the mean of the cross-fitted prognostic models), and every estimate from the fitted per-arm models.
"""
from __future__ import annotations

import math
import re
from dataclasses import asdict, dataclass, field
from typing import Any, Mapping

import numpy as np
import pandas as pd
from scipy import stats

from . import breakeven as be
from .analysis import SPARSE_SHARE, STRETCHES, FitSet, PairFit
from .charts import fmt, per_hundred, words
from .errors import FulcrumError
from .results import _jsonable
from .spec import OutcomeSpec

WHOSE = {"patient": "the patient's", "proxy": "a proxy's", "team": "the treating team's"}
CODED = re.compile(r"covariate '(.+)' is text with two values: coded '(.*)' = 1, '(.*)' = 0\.$")
FIRM = 0.95
LEANING = 0.80


@dataclass
class Placement:
    """The patient on one index: value, cohort percentile, and whether the cohort covers it."""

    name: str
    label: str
    value: float
    percentile: float
    discrete: bool
    units: str | None
    cohort_range: tuple[float, float]
    outside: bool
    source: str  # "entered" | "computed from entered values" | "cohort record"


@dataclass
class ArmEstimate:
    """One arm's measure at the patient's index value, with its interval (and level probabilities if ordinal)."""

    arm: str
    estimate: float
    lower: float
    upper: float
    per_100: int | None = None
    per_100_lower: int | None = None
    per_100_upper: int | None = None
    distribution: dict[str, tuple[float, float, float]] | None = None
    distribution_per_100: dict[str, int] | None = None


@dataclass
class Prediction:
    """One outcome along one index at the patient's value: both arms, the difference and the sentences."""

    outcome: str
    title: str
    index: str
    measure: str
    kind: str
    probability: bool
    x: float
    arms: dict[str, ArmEstimate]
    difference: float
    difference_ci: tuple[float, float]
    clear: bool
    favours: str | None
    sentence: str
    uncertainty: str
    states_sentences: list[str] = field(default_factory=list)


@dataclass
class ValueJudgement:
    """Which arm the stated weights favour at the patient's index value, and how firmly."""

    kind: str
    index: str
    x: float
    weights: dict[str, float] | None
    whose: str
    measure: str
    arms: dict[str, tuple[float, float, float]]
    difference: float
    difference_ci: tuple[float, float]
    probability_first_better: float
    favours: str
    firmness: str
    sentence: str


@dataclass
class PatientView:
    """Everything shown about one patient; `to_json` carries no identifier unless one is passed in."""

    arms: tuple[str, str]
    level: float
    margin: float
    primary_index: str
    placements: dict[str, Placement]
    predictions: list[Prediction]
    judgements: list[ValueJudgement]
    limits: list[str]
    source: str

    def prediction(self, outcome: str, index: str | None = None) -> Prediction:
        index = index or self.primary_index
        for p in self.predictions:
            if p.outcome == outcome and p.index == index:
                return p
        raise KeyError((outcome, index))

    def sentences(self, index: str | None = None) -> list[str]:
        """The natural-frequency sentences along one index (the primary index by default)."""
        index = index or self.primary_index
        out = []
        for p in self.predictions:
            if p.index == index:
                out.extend([p.sentence, *p.states_sentences, p.uncertainty])
        out.extend(j.sentence for j in self.judgements if j.index == index)
        return out

    def to_json(self, identifiers: Mapping[str, Any] | None = None) -> dict:
        doc = {"arms": list(self.arms), "level": self.level, "margin": self.margin,
               "primary_index": self.primary_index, "source": self.source,
               "placements": {k: _jsonable(asdict(v)) for k, v in self.placements.items()},
               "predictions": [_jsonable(asdict(p)) for p in self.predictions],
               "judgements": [_jsonable(asdict(j)) for j in self.judgements],
               "limits": list(self.limits)}
        if identifiers:
            doc["identifiers"] = {str(k): str(v) for k, v in identifiers.items()}
        return doc


# ------------------------------------------------------------------------------------------
# Index values
# ------------------------------------------------------------------------------------------
def _index_value(fs: FitSet, name: str, values: Mapping[str, float], row: int | None) -> tuple[float, str] | str:
    """(value, source) for one index, or the reason it cannot be placed."""
    iv = fs.indices[name]
    if name in values:
        return float(values[name]), "entered"
    cols = tuple(getattr(iv.model, "columns", ()) or ())
    if cols and all(c in values for c in cols):
        frame = pd.DataFrame([{c: _coded(fs, c, values[c]) for c in cols}])
        return float(np.asarray(iv.model.compute(frame), float)[0]), "computed from entered values"
    if row is not None:
        return float(iv.values[row]), "cohort record"
    missing = [c for c in cols if c not in values]
    return "no value was given for " + ", ".join(missing or [name])


def text_codings(fs: FitSet) -> dict[str, dict[str, float]]:
    """How the cohort coded two-valued text covariates as 0/1 (e.g. sex 'F' = 0, 'M' = 1)."""
    codings = dict(getattr(fs.cohort, "codings", None) or {})
    for note in fs.cohort.notes:
        m = CODED.match(note)
        if m and m.group(1) not in codings:
            codings[m.group(1)] = {m.group(2): 1.0, m.group(3): 0.0}
    return codings


def _coded(fs: FitSet, column: str, value: Any) -> float:
    """An entered covariate value as a number, text mapped the way the cohort coded it."""
    if not isinstance(value, str):
        return value
    try:
        return float(value)
    except ValueError:
        pass
    coding = text_codings(fs).get(column)
    if coding is None or value not in coding:
        known = f" It was coded {', '.join(f'{k!r} = {v:g}' for k, v in coding.items())}." if coding else ""
        raise FulcrumError(f"the value {value!r} given for '{column}' is not one the cohort holds.{known}",
                           column=column, hint="Give the value as it appears in the cohort file, or as a number.")
    return coding[value]


def _placement(fs: FitSet, name: str, value: float, source: str) -> Placement:
    from .indices import percentile_of

    iv = fs.indices[name]
    finite = iv.finite
    lo, hi = float(finite.min()), float(finite.max())
    discrete = bool(iv.info.get("discrete"))
    if discrete:
        value = float(round(value))
    return Placement(name, str(iv.info.get("label") or name), value, float(percentile_of(iv, value)), discrete,
                     iv.info.get("units"), (lo, hi), not (lo <= value <= hi), source)


def _check_row(fs: FitSet, row: int | None) -> None:
    n = len(fs.cohort.frame)
    if row is not None and not (0 <= int(row) < n):
        raise FulcrumError(f"there is no cohort patient at position {row}; the cohort has {n}.",
                           hint=f"Choose a position from 0 to {n - 1}.")


# ------------------------------------------------------------------------------------------
# Predictions
# ------------------------------------------------------------------------------------------
def measure_bounds(outcome: OutcomeSpec) -> tuple[float, float]:
    """The range a measure can take: probabilities [0, 1], RMST [0, horizon], bounded outcomes their bounds."""
    if is_probability(outcome):
        return 0.0, 1.0
    if outcome.kind == "survival":
        return 0.0, float(outcome.horizon)
    if outcome.bounds is not None:
        return float(outcome.bounds[0]), float(outcome.bounds[1])
    return -math.inf, math.inf


def is_probability(outcome: OutcomeSpec) -> bool:
    return outcome.kind in ("binary", "ordinal") or (outcome.kind == "survival" and outcome.measure != "rmst")


def _count(p: float) -> int:
    return int(math.floor(100.0 * p + 0.5))


def _arm_estimate(pf: PairFit, arm: str, x: float, z: float) -> ArmEstimate:
    fit = pf.fits[arm]
    xa = np.array([x])
    m = float(fit.measure(xa)[0])
    se = math.sqrt(max(float(fit.measure_var(xa)[0]), 0.0))
    lo_b, hi_b = measure_bounds(pf.outcome)
    m = min(max(m, lo_b), hi_b)
    est = ArmEstimate(arm, m, max(m - z * se, lo_b), min(m + z * se, hi_b))
    if is_probability(pf.outcome):
        est.per_100, est.per_100_lower, est.per_100_upper = _count(est.estimate), _count(est.lower), _count(est.upper)
    P = fit.distribution(xa)
    if P is not None and pf.outcome.kind == "ordinal":
        P = np.clip(np.asarray(P, float)[0], 0.0, 1.0)
        P = P / P.sum()
        J = fit.distribution_jacobian(xa)
        sd = (np.sqrt(np.maximum(np.einsum("kp,pq,kq->k", J[0], fit.cov_, J[0]), 0.0)) if J is not None
              else np.full(len(P), np.nan))
        levels = pf.outcome.levels
        est.distribution = {lv: (float(p), float(max(p - z * s, 0.0)), float(min(p + z * s, 1.0)))
                            for lv, p, s in zip(levels, P, sd)}
        est.distribution_per_100 = per_hundred(dict(zip(levels, P)))
    return est


def _where(pl: Placement) -> str:
    if pl.discrete:
        return f"For people at level {int(pl.value)} on the {pl.label}"
    unit = f" {pl.units}" if pl.units else ""
    return f"For people with {pl.label} {fmt(pl.value)}{unit}"


def _event_words(o: OutcomeSpec) -> str:
    if o.kind == "survival":
        unit = f" {o.units}" if o.units else ""
        return f"would be alive at {o.horizon:g}{unit}"
    if o.kind == "ordinal":
        fav = o.favourable or o.levels[:-1]
        return "would be " + " or ".join(words(v) for v in fav) + f" ({o.title})"
    return f"would have {o.title}"


def _sentence(pf: PairFit, pl: Placement, ests: dict[str, ArmEstimate], arms: tuple[str, str]) -> str:
    o = pf.outcome
    a, b = (ests[arm] for arm in arms)
    if is_probability(o):
        return (f"{_where(pl)}, about {a.per_100} of 100 {_event_words(o)} with {arms[0]} (likely between "
                f"{a.per_100_lower} and {a.per_100_upper}), and about {b.per_100} of 100 with {arms[1]} (likely "
                f"between {b.per_100_lower} and {b.per_100_upper}).")
    unit = f" {o.units}" if o.units else ""
    if o.kind == "survival":
        head = f"{_where(pl)}, people would live on average about {fmt(a.estimate)} of the first {o.horizon:g}{unit}"
    else:
        head = f"{_where(pl)}, the average {o.title} would be about {fmt(a.estimate)}{unit}"
    return (f"{head} with {arms[0]} (likely between {fmt(a.lower)} and {fmt(a.upper)}), and about "
            f"{fmt(b.estimate)} with {arms[1]} (likely between {fmt(b.lower)} and {fmt(b.upper)}).")


def _states_sentences(pf: PairFit, ests: dict[str, ArmEstimate], arms: tuple[str, str]) -> list[str]:
    out = []
    for arm in arms:
        d = ests[arm].distribution_per_100
        if d:
            parts = [f"{n} {words(lv)}" for lv, n in d.items()]
            out.append(f"With {arm}, of 100 people like this about " + ", ".join(parts[:-1]) + f" and {parts[-1]}"
                       + f" ({pf.outcome.title}).")
    return out


def _uncertainty(pf: PairFit, clear: bool, favours: str | None) -> str:
    if clear:
        return f"For people like this the difference in {pf.outcome.title} is clear: the data favour {favours}."
    return (f"For people like this the difference in {pf.outcome.title} is not clear: its interval includes no "
            "difference.")


def predict(fs: FitSet, outcome: str, pl: Placement) -> Prediction:
    """One outcome at the patient's value of one index, from the fitted models."""
    a = fs.spec.analysis
    pf = fs.pair(outcome, pl.name)
    arms = tuple(pf.fits)
    z = be.critical_value(a.level)
    ests = {arm: _arm_estimate(pf, arm, pl.value, z) for arm in arms}
    xa = np.array([pl.value])
    raw = [float(pf.fits[arm].measure(xa)[0]) for arm in arms]
    var = sum(float(pf.fits[arm].measure_var(xa)[0]) for arm in arms)
    d = pf.sign * (raw[0] - raw[1])
    se = math.sqrt(max(var, 0.0))
    ci = (d - z * se, d + z * se)
    clear = ci[0] > a.margin or ci[1] < a.margin
    favours = (arms[0] if d > a.margin else arms[1]) if clear else None
    return Prediction(outcome, pf.outcome.title, pl.name, _measure(pf.outcome), pf.outcome.kind,
                      is_probability(pf.outcome), pl.value, ests, d, ci, clear, favours,
                      _sentence(pf, pl, ests, arms), _uncertainty(pf, clear, favours),
                      _states_sentences(pf, ests, arms))


def _measure(o: OutcomeSpec) -> str:
    from .results import measure_words

    return measure_words(o)


# ------------------------------------------------------------------------------------------
# Values: which arm the weights favour, and how firmly
# ------------------------------------------------------------------------------------------
def firmness(p_first: float, arms: tuple[str, str]) -> tuple[str, str]:
    """(favoured arm, how firm in words) from the chance the first arm gives the higher value."""
    fav = arms[0] if p_first >= 0.5 else arms[1]
    p = max(p_first, 1 - p_first)
    if p >= FIRM:
        return fav, "firmly"
    if p >= LEANING:
        return fav, "leaning"
    return fav, "not clearly"


def judge(fs: FitSet, pl: Placement, weights: Mapping[str, float] | None = None) -> list[ValueJudgement]:
    """Each composite of the spec at the patient's index value: the favoured arm and the chance it is ahead."""
    from . import values as val

    spec = fs.spec
    if spec.values is None:
        return []
    out = []
    z = be.critical_value(spec.analysis.level)
    whose = WHOSE.get(spec.values.whose, spec.values.whose)
    for kind in val.default_kinds(spec):
        cm = val.prepare_composite(fs, kind, pl.name)
        w = val.check_weights(dict(weights) if weights is not None else spec.values.weights, cm.levels) \
            if cm.weighted else np.ones(1)
        L, C = cm.at(np.array([pl.value]), True)
        m = [float(L[i][0] @ w) for i in (0, 1)]
        v = [float(w @ C[i][0] @ w) for i in (0, 1)]
        d, se = m[0] - m[1], math.sqrt(max(v[0] + v[1], 0.0))
        margin = spec.analysis.margin
        p_first = float(stats.norm.cdf((d - margin) / se)) if se > 0 else float(d > margin)
        arms = tuple(cm.arms)
        fav, firm = firmness(p_first, arms)
        per_arm = {arm: (m[i], m[i] - z * math.sqrt(max(v[i], 0)), m[i] + z * math.sqrt(max(v[i], 0)))
                   for i, arm in enumerate(arms)}
        p_fav = p_first if fav == arms[0] else 1 - p_first
        wd = dict(zip(cm.levels, map(float, w))) if cm.weighted else None
        sentence = _judgement_sentence(kind, fav, firm, p_fav, d, (d - z * se, d + z * se), arms,
                                       whose if cm.weighted else None)
        out.append(ValueJudgement(kind, pl.name, pl.value, wd, spec.values.whose, cm.measure, per_arm, d,
                                  (d - z * se, d + z * se), p_first, fav, firm, sentence))
    return out


def chance_words(p: float) -> str:
    """A chance as 'about n in 100', never claiming certainty."""
    n = _count(p)
    if n >= 100:
        return "more than 99 in 100"
    if n <= 0:
        return "less than 1 in 100"
    return f"about {n} in 100"


def _judgement_sentence(kind: str, fav: str, firm: str, p_fav: float, d: float, ci: tuple[float, float],
                        arms: tuple[str, str], whose: str | None) -> str:
    what = f"With {whose} weights ({words(kind)} composite)" if whose else f"On {words(kind)} survival"
    head = {"not clearly": f"{what}, neither option is clearly ahead",
            "leaning": f"{what}, the balance leans towards {fav}",
            "firmly": f"{what}, {fav} is firmly favoured"}[firm]
    return (f"{head}: given the uncertainty in the models, the chance that {fav} gives the higher expected value "
            f"is {chance_words(p_fav)} (difference {arms[0]} minus {arms[1]} {fmt(d)}, likely between "
            f"{fmt(ci[0])} and {fmt(ci[1])}).")


# ------------------------------------------------------------------------------------------
# Limits
# ------------------------------------------------------------------------------------------
def _limits(fs: FitSet, pl: Placement) -> list[str]:
    out = []
    lo, hi = pl.cohort_range
    if pl.outside:
        out.append(f"This patient's {pl.label} ({fmt(pl.value)}) lies outside the cohort's range ({fmt(lo)} to "
                   f"{fmt(hi)}): every estimate along it is an extrapolation.")
    arm_col = fs.cohort.frame[fs.spec.cohort.arm].to_numpy()
    x = fs.indices[pl.name].values
    ok = np.isfinite(x)
    if pl.discrete:
        a = z = pl.value
        where = f"At level {int(pl.value)} of the {pl.label}"
    else:
        edges = np.unique(np.quantile(x[ok], np.linspace(0, 1, STRETCHES + 1)))
        if len(edges) < 2:
            return out
        k = int(np.clip(np.searchsorted(edges, pl.value, side="right") - 1, 0, len(edges) - 2))
        a, z = edges[k], edges[k + 1]
        where = f"Near this patient's {pl.label} ({fmt(a)} to {fmt(z)})"
    inside = ok & (x >= a) & (x <= z)
    total = int(inside.sum())
    for arm in fs.spec.cohort.arms:
        c = int((inside & (arm_col == arm)).sum())
        if total and c / total < SPARSE_SHARE:
            out.append(f"{where}, {arm} has only {c} of {total} patients: the estimates there rest on the model "
                       "more than on patients like this one.")
    return out


def _adjust_limits(fs: FitSet) -> list[str]:
    out = []
    for o in fs.spec.outcomes:
        if o.adjust:
            pf = next(p for (on, _), p in fs.pairs.items() if on == o.name)
            fit = next(iter(pf.fits.values()))
            held = ", ".join(f"{n} = {fmt(v)}" for n, v in zip(getattr(fit, "z_names", ()), getattr(fit, "z_ref", ())))
            out.append(f"{o.title}: the estimates hold {', '.join(o.adjust)} at the cohort's values ({held}), "
                       "not at this patient's own.")
    return out


# ------------------------------------------------------------------------------------------
# The view
# ------------------------------------------------------------------------------------------
def place_patient(fs: FitSet, values: Mapping[str, float] | None = None, *, row: int | None = None,
                  weights: Mapping[str, float] | None = None, index: str | None = None) -> PatientView:
    """Place one patient on every index and outcome.

    values: index values by index name, or covariate values by column (each index computed by its own
    model); row: a cohort position (0-based) whose recorded index values fill what `values` leaves out.
    weights: state weights for the composite (default: the spec's). index: the index to speak along first.
    """
    values = dict(values or {})
    _check_row(fs, row)
    if not values and row is None:
        raise FulcrumError("no values were given for the patient.",
                           hint="Give index values (e.g. {'cfs': 6}) or the covariates the indices use.")
    spec = fs.spec
    placements, limits = {}, []
    for ix in spec.indices:
        got = _index_value(fs, ix.name, values, row)
        if isinstance(got, str):
            limits.append(f"{ix.title} could not be placed: {got}.")
            continue
        value, source = got
        if not math.isfinite(value):
            limits.append(f"{ix.title} could not be placed: its value is missing.")
            continue
        pl = _placement(fs, ix.name, value, source)
        if pl.discrete and pl.value != value:
            limits.append(f"{pl.label} takes whole levels; {fmt(value)} was taken as level {int(pl.value)}.")
        placements[ix.name] = pl
    if not placements:
        raise FulcrumError("none of the indices could be placed for this patient.",
                           hint="Give each index's value, or every covariate its formula or model uses.")
    primary = index if index in placements else next(iter(placements))
    preds, judgements = [], []
    for name, pl in placements.items():
        limits.extend(_limits(fs, pl))
        preds.extend(predict(fs, o.name, pl) for o in spec.outcomes)
        judgements.extend(judge(fs, pl, weights))
    limits.extend(_adjust_limits(fs))
    source = "a cohort record" if row is not None and not values else \
        "entered values" if row is None else "a cohort record with entered values"
    return PatientView(tuple(spec.cohort.arms), spec.analysis.level, spec.analysis.margin, primary, placements,
                       preds, judgements, list(dict.fromkeys(limits)), source)


# ------------------------------------------------------------------------------------------
# The printable one-page summary
# ------------------------------------------------------------------------------------------
def icon_probabilities(p: Prediction) -> dict[str, dict[str, float]] | None:
    """Per arm, the state probabilities an icon array shows: ordinal levels, or alive / dead."""
    out = {}
    for arm, e in p.arms.items():
        if e.distribution:
            out[arm] = {lv: v[0] for lv, v in e.distribution.items()}
        elif p.kind == "survival" and p.probability:
            out[arm] = {"alive": e.estimate, "dead": 1.0 - e.estimate}
        else:
            return None
    return out


def _icon_outcomes(view: PatientView) -> list[Prediction]:
    along = [p for p in view.predictions if p.index == view.primary_index]
    ordinal = [p for p in along if p.kind == "ordinal"][:1]
    survival = [p for p in along if p.kind == "survival" and p.probability][:1]
    return survival + ordinal


def patient_summary_html(view: PatientView, cautions: tuple[str, ...] | list[str], *,
                         identifiers: Mapping[str, Any] | None = None) -> str:
    """A printable one-page HTML summary: icon arrays per arm (inline SVG), values used, favoured arm, limits."""
    from markupsafe import Markup

    from .charts import chart_to_svg, icon_array_chart, state_colours
    from .report import render_template

    arrays = []
    for p in _icon_outcomes(view):
        probs = icon_probabilities(p)
        if not probs:
            continue
        levels = list(next(iter(probs.values())))
        colours = state_colours(levels)
        svgs = [(arm, Markup(chart_to_svg(icon_array_chart(probs[arm], "", colours, side=150, legend=None))))
                for arm in view.arms]
        counts = {arm: per_hundred(probs[arm]) for arm in view.arms}
        rows = [(words(lv), colours[lv], [counts[arm][lv] for arm in view.arms]) for lv in levels]
        arrays.append({"title": p.title, "svgs": svgs, "rows": rows})
    pl = view.placements[view.primary_index]
    judgements = [j for j in view.judgements if j.index == view.primary_index]
    weights = next((j for j in judgements if j.weights), None)
    return render_template(
        "patient.html", view=view, cautions=list(cautions), identifiers=dict(identifiers or {}), arrays=arrays,
        primary=pl, placements=list(view.placements.values()),
        sentences=[f"{p.sentence} {p.uncertainty}" for p in view.predictions if p.index == view.primary_index],
        judgements=judgements, weights=weights, whose=WHOSE.get(weights.whose, weights.whose) if weights else "",
        fmt=fmt, words=words)

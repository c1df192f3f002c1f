"""One patient placed on the fitted curves: predictions per arm with intervals, the arm their values favour,
the limits of what the cohort can say about them, and plain-language sentences in natural frequencies.

Nothing is refitted: the patient's index values come from each index's own model (a column, a formula, or
the mean of the cross-fitted prognostic models), and every estimate from the fitted per-arm models.
"""
from __future__ import annotations

import math
import re
from dataclasses import asdict, dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import stats

from . import breakeven as be
from . import values as val
from .words import fmt, per_hundred, words
from .conversation import WHO_SHORT, ValuesRecord
from .errors import FulcrumError
from .fitting import SPARSE_SHARE, STRETCHES, FitSet, PairFit
from .indices import percentile_of
from .models import describe
from .indices.prognostic import about_index_plain
from .models.words import measure_words
from .numeric import jsonable
from .spec import OutcomeSpec, SelectionSpec

WHOSE = {"patient": "the patient's", "proxy": "a proxy's", "team": "the treating team's"}
CODED = re.compile(r"covariate '(.+)' is text with two values: coded '(.*)' = 1, '(.*)' = 0\.$")
LEANING = 0.80
HORIZON_WORDS = {"days": {365: "one year", 366: "one year", 730: "two years", 182: "six months",
                          183: "six months", 90: "three months", 91: "three months"},
                 "months": {12: "one year", 6: "six months", 24: "two years", 3: "three months"},
                 "years": {1: "one year", 2: "two years", 5: "five years"}}


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
class LevelVerdict:
    """The comparison at one whole level of a discrete index: the difference, its interval, who is ahead."""

    level: int
    difference: float
    difference_ci: tuple[float, float]
    favours: str | None
    clear: bool


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
    horizon: float | None = None
    units: str | None = None
    by_level: list[LevelVerdict] | None = None
    level_sentence: str | None = None


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
    detail: str = ""
    by_level: list[LevelVerdict] | None = None
    level_sentence: str | None = None


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
    timing: str | None = None
    record: ValuesRecord | None = None
    combined: tuple[str, ...] = ()  # the survival and function outcomes the values combine (one horizon)

    def prediction(self, outcome: str, index: str | None = None) -> Prediction:
        index = index or self.primary_index
        for p in self.predictions:
            if p.outcome == outcome and p.index == index:
                return p
        raise KeyError((outcome, index))

    def place_sentence(self, index: str | None = None) -> str:
        pl = self.placements[index or self.primary_index]
        return f"These figures are for people like this patient: {_position(pl)}."

    def sentences(self, index: str | None = None) -> list[str]:
        """Everything said in words along one index (the primary by default): where the patient sits, the
        natural-frequency sentences, the level-by-level statements, what the values favour, and the limits."""
        index = index or self.primary_index
        out = [self.place_sentence(index)]
        for p in self.predictions:
            if p.index == index:
                out.extend([p.sentence, *p.states_sentences, p.uncertainty, *([p.level_sentence] if p.level_sentence
                                                                               else [])])
        for j in self.judgements:
            if j.index == index:
                out.extend([j.sentence, *([j.level_sentence] if j.level_sentence else [])])
        out.extend(self.limits)
        if self.timing:
            out.append(self.timing)
        return out

    def to_json(self, identifiers: Mapping[str, Any] | None = None) -> dict:
        doc = {"arms": list(self.arms), "level": self.level, "margin": self.margin,
               "primary_index": self.primary_index, "source": self.source,
               "placements": {k: jsonable(asdict(v)) for k, v in self.placements.items()},
               "predictions": [jsonable(asdict(p)) for p in self.predictions],
               "judgements": [jsonable(asdict(j)) for j in self.judgements],
               "limits": list(self.limits), "timing": self.timing,
               "values_record": self.record.to_json() if self.record else None}
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
    return describe(outcome).range or (-math.inf, math.inf)


def count_of_100(p: float) -> int:
    """A probability as a whole count out of 100 (halves round up)."""
    return int(math.floor(100.0 * p + 0.5))


def _arm_estimate(pf: PairFit, arm: str, x: float, z: float) -> ArmEstimate:
    fit = pf.fits[arm]
    xa = np.array([x])
    m = float(fit.measure(xa)[0])
    se = math.sqrt(max(float(fit.measure_var(xa)[0]), 0.0))
    lo_b, hi_b = measure_bounds(pf.outcome)
    m = min(max(m, lo_b), hi_b)
    est = ArmEstimate(arm, m, max(m - z * se, lo_b), min(m + z * se, hi_b))
    if describe(pf.outcome).probability:
        est.per_100, est.per_100_lower, est.per_100_upper = count_of_100(est.estimate), count_of_100(est.lower), count_of_100(est.upper)
    P = fit.distribution(xa)
    if P is not None and describe(pf.outcome).levels:
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


def _differences(pf: PairFit, xs: np.ndarray, z: float) -> tuple[np.ndarray, np.ndarray]:
    """First minus second (oriented so that higher is better) at xs, and its standard error."""
    arms = tuple(pf.fits)
    raw = [np.asarray(pf.fits[arm].measure(xs), float) for arm in arms]
    var = sum(np.asarray(pf.fits[arm].measure_var(xs), float) for arm in arms)
    return pf.sign * (raw[0] - raw[1]), np.sqrt(np.maximum(var, 0.0))


def _verdict(d: float, lo: float, hi: float, margin: float, arms: Sequence[str]) -> tuple[bool, str | None]:
    """(clear, favoured arm) for a difference and its interval: ahead by the point estimate, clear when the
    interval leaves out the margin."""
    favours = arms[0] if d > margin else arms[1] if d < margin else None
    return bool(lo > margin or hi < margin), favours


def whole_levels(pl: Placement) -> np.ndarray:
    """The whole levels of a discrete index within the cohort's range."""
    lo, hi = pl.cohort_range
    return np.arange(math.ceil(lo - 1e-9), math.floor(hi + 1e-9) + 1, dtype=float)


def _by_level(xs: np.ndarray, d: np.ndarray, se: np.ndarray, z: float, margin: float, arms: Sequence[str]
              ) -> list[LevelVerdict]:
    out = []
    for x, di, si in zip(xs, d, se):
        lo, hi = float(di - z * si), float(di + z * si)
        clear, fav = _verdict(float(di), lo, hi, margin, arms)
        out.append(LevelVerdict(int(x), float(di), (lo, hi), fav, clear))
    return out


def level_runs(levels: Sequence[int]) -> str:
    """'levels 1 to 3, 5 and 8 to 9' for sorted whole levels (runs of consecutive levels joined)."""
    runs: list[list[int]] = []
    for v in levels:
        if runs and v == runs[-1][-1] + 1:
            runs[-1].append(v)
        else:
            runs.append([v])
    parts = [f"{r[0]}" if len(r) == 1 else f"{r[0]} to {r[-1]}" for r in runs]
    head = "level " if len(levels) == 1 else "levels "
    return head + (parts[0] if len(parts) == 1 else ", ".join(parts[:-1]) + " and " + parts[-1])


def level_sentence(intro: str, verdicts: list[LevelVerdict], arms: Sequence[str]) -> str | None:
    """Level-by-level words for a discrete index: where each arm is ahead and where the difference is clear."""
    if not verdicts:
        return None
    ahead = [(arm, [v.level for v in verdicts if v.favours == arm]) for arm in arms]
    parts = [f"{arm}{' is' if not k else ''} ahead at {level_runs(lv)}" for k, (arm, lv) in
             enumerate([a for a in ahead if a[1]])]
    even = [v.level for v in verdicts if v.favours is None]
    if even:
        parts.append(f"neither ahead at {level_runs(even)}")
    head = f"{intro}, " + ", and ".join(parts) + "."
    clear = [v.level for v in verdicts if v.clear]
    tail = (f" The difference is clear at {level_runs(clear)}." if clear
            else " At no level is the difference clear.")
    return head + tail


def horizon_words(horizon: float, units: str | None) -> str:
    """A survival horizon as people say it ('one year' for 365 days), else the number and its units."""
    named = HORIZON_WORDS.get((units or "").lower(), {}).get(horizon)
    if named:
        return named
    return f"{horizon:g} {units}" if units else f"time {horizon:g}"


def _position(pl: Placement) -> str:
    if pl.discrete:
        return f"level {int(pl.value)} on the {pl.label}"
    unit = f" {pl.units}" if pl.units else ""
    return f"{pl.label} {fmt(pl.value)}{unit}"


def _event_words(o: OutcomeSpec) -> str:
    facts = describe(o)
    if facts.follow_up:
        return f"would be alive at {horizon_words(o.horizon, o.units)}"
    if facts.levels:
        return "would be " + " or ".join(words(v) for v in facts.favourable)
    return f"would have this outcome ({o.title})"


def _sentence(o: OutcomeSpec, ests: dict[str, ArmEstimate], arms: tuple[str, str]) -> str:
    """Each arm's estimate with its interval: natural frequencies for probabilities, else the average."""
    out = []
    unit = f" {o.units}" if o.units else ""
    for i, arm in enumerate(arms):
        e = ests[arm]
        likely = (f"(likely between {e.per_100_lower} and {e.per_100_upper})" if describe(o).probability
                  else f"(likely between {fmt(e.lower)} and {fmt(e.upper)})")
        if describe(o).probability:
            who = "people like this " if i == 0 else ""
            out.append(f"With {arm}, about {e.per_100} of 100 {who}{_event_words(o)} {likely}.")
        elif describe(o).follow_up:
            out.append(f"With {arm}, people like this would live on average about {fmt(e.estimate)} of the first "
                       f"{o.horizon:g}{unit} {likely}.")
        else:
            head = f"{o.title}: with {arm}, the average" if i == 0 else f"With {arm}, it"
            out.append(f"{head} would be about {fmt(e.estimate)}{unit} {likely}.")
    return " ".join(out)


def _states_sentences(pf: PairFit, ests: dict[str, ArmEstimate], arms: tuple[str, str]) -> list[str]:
    out = []
    for arm in arms:
        d = ests[arm].distribution_per_100
        if d:
            parts = [f"{n} {words(lv)}" for lv, n in d.items()]
            out.append(f"With {arm}, of 100 people like this about " + ", ".join(parts[:-1]) + f" and {parts[-1]}.")
    return out


def _uncertainty(o: OutcomeSpec, clear: bool, favours: str | None) -> str:
    if clear:
        return f"For {o.title}, the data clearly favour {favours} for people like this."
    return f"For {o.title}, the data cannot tell which option is better for people like this."


def predict(fs: FitSet, outcome: str, pl: Placement) -> Prediction:
    """One outcome at the patient's value of one index, from the fitted models."""
    a = fs.spec.analysis
    pf = fs.pair(outcome, pl.name)
    o = pf.outcome
    arms = tuple(pf.fits)
    z = be.critical_value(a.level)
    ests = {arm: _arm_estimate(pf, arm, pl.value, z) for arm in arms}
    d, se = (float(v[0]) for v in _differences(pf, np.array([pl.value]), z))
    ci = (d - z * se, d + z * se)
    margin = fs.spec.margin_for(fs.spec.outcome(outcome))  # the outcome's own margin, in its own units
    clear, favours = _verdict(d, *ci, margin, arms)
    favours = favours if clear else None
    by_level = sentence = None
    if pl.discrete:
        xs = whole_levels(pl)
        by_level = _by_level(xs, *_differences(pf, xs, z), z, margin, arms)
        sentence = level_sentence(f"For {o.title}", by_level, arms)
    return Prediction(outcome, o.title, pl.name, _measure(o), o.kind, describe(o).probability, pl.value, ests, d, ci,
                      clear, favours, _sentence(o, ests, arms), _uncertainty(o, clear, favours),
                      _states_sentences(pf, ests, arms), describe(o).horizon, o.units,
                      by_level, sentence)


def _measure(o: OutcomeSpec) -> str:
    return measure_words(o)


def timing_sentence(outcomes: Sequence[OutcomeSpec]) -> str | None:
    """The times the outcomes are counted at, said in words when they are not all the same known time."""
    timed = {o.name: describe(o).follow_up for o in outcomes}
    surv = [o for o in outcomes if timed[o.name]]
    others = [o for o in outcomes if not timed[o.name]]
    if len({(o.horizon, o.units) for o in surv}) <= 1 and not others:
        return None
    text = ["The outcomes are not all counted at the same time."]
    text += [f"{o.title} is counted at {o.horizon:g}{' ' + o.units if o.units else ''}." for o in surv]
    if others:
        text.append(f"The {'other outcomes are' if surv else 'outcomes are'} counted when the cohort recorded them, "
                    "as their names say.")
    return " ".join(text)


# ------------------------------------------------------------------------------------------
# Values: which arm the weights favour, and how firmly
# ------------------------------------------------------------------------------------------
def firmness(p_first: float, arms: tuple[str, str], level: float = 0.95) -> tuple[str, str]:
    """(favoured arm, how firm in words) from the chance the first arm gives the higher value: "firmly" exactly
    when the two-sided interval at `level` leaves out the margin (chance above 0.5 + level / 2), so the words
    agree with "the difference is clear"."""
    fav = arms[0] if p_first >= 0.5 else arms[1]
    p = max(p_first, 1 - p_first)
    if p > 0.5 + level / 2:
        return fav, "firmly"
    if p >= LEANING:
        return fav, "leaning"
    return fav, "not clearly"


def _composite_words(fs: FitSet, form: str, whose: str) -> str:
    v = fs.spec.values
    ordinal = fs.spec.outcome(v.outcome).title
    who = WHO_SHORT.get(whose, whose)
    if form == "ordinal":
        return f"Weighing the states of {ordinal} by {who} values"
    if form == "survival_function":
        so = fs.spec.outcome(v.survival_outcome)
        return (f"Weighing survival at {horizon_words(so.horizon, so.units)} and the states of {ordinal} "
                f"by {who} values")
    return "Counting time alive, weighted by quality of life"


def judge(fs: FitSet, pl: Placement, weights: Mapping[str, float] | None = None, whose: str | None = None
          ) -> list[ValueJudgement]:
    """Each composite of the spec at the patient's index value: the favoured arm and the chance it is ahead."""
    spec = fs.spec
    if spec.values is None:
        return []
    out = []
    z = be.critical_value(spec.analysis.level)
    margin = spec.analysis.margin
    whose = whose or spec.values.whose
    for kind in val.default_kinds(spec):
        cm = val.prepare_composite(fs, kind, pl.name)
        w = val.check_weights(dict(weights) if weights is not None else spec.values.weights, cm.levels) \
            if cm.weighted else np.ones(1)
        xs = np.concatenate([[pl.value], whole_levels(pl) if pl.discrete else []])
        L, C = cm.at(xs, True)
        m = np.array([L[i] @ w for i in (0, 1)])
        v = np.array([np.einsum("gij,i,j->g", C[i], w, w) for i in (0, 1)])
        dd, ss = m[0] - m[1], np.sqrt(np.maximum(v[0] + v[1], 0.0))
        d, se = float(dd[0]), float(ss[0])
        p_first = float(stats.norm.cdf((d - margin) / se)) if se > 0 else float(d > margin)
        arms = tuple(cm.arms)
        fav, firm = firmness(p_first, arms, spec.analysis.level)
        sd = np.sqrt(np.maximum(v[:, 0], 0.0))
        per_arm = {arm: (float(m[i, 0]), float(m[i, 0] - z * sd[i]), float(m[i, 0] + z * sd[i]))
                   for i, arm in enumerate(arms)}
        p_fav = p_first if fav == arms[0] else 1 - p_first
        ci = (d - z * se, d + z * se)
        what = _composite_words(fs, kind, whose)
        by_level = _by_level(xs[1:], dd[1:], ss[1:], z, margin, arms) if pl.discrete else None
        lv_sentence = level_sentence("By this measure", by_level, arms) if by_level else None
        out.append(ValueJudgement(kind, pl.name, pl.value, dict(zip(cm.levels, map(float, w))) if cm.weighted
                                  else None, whose, cm.measure, per_arm, d, ci, p_first, fav, firm,
                                  _judgement_sentence(what, fav, firm, p_fav), _judgement_detail(per_arm, d, ci, arms),
                                  by_level, lv_sentence))
    return out


def chance_words(p: float) -> str:
    """A chance as 'about n in 100', never claiming certainty."""
    n = count_of_100(p)
    if n >= 100:
        return "more than 99 in 100"
    if n <= 0:
        return "less than 1 in 100"
    return f"about {n} in 100"


def _judgement_sentence(what: str, fav: str, firm: str, p_fav: float) -> str:
    head = {"not clearly": f"{what}, neither option is clearly ahead.",
            "leaning": f"{what}, the balance leans towards {fav}.",
            "firmly": f"{what}, {fav} is clearly ahead."}[firm]
    return (f"{head} How sure: {fav} comes out ahead on these values in {chance_words(p_fav)} plausible versions "
            "of the estimates (a measure of certainty, not a chance of survival).")


def _judgement_detail(per_arm: dict[str, tuple[float, float, float]], d: float, ci: tuple[float, float],
                      arms: tuple[str, str]) -> str:
    each = "; ".join(f"with {arm} {fmt(e[0])} (likely between {fmt(e[1])} and {fmt(e[2])})"
                     for arm, e in per_arm.items())
    return (f"Expected value {each}. Difference, {arms[0]} minus {arms[1]}: {fmt(d)} (likely between "
            f"{fmt(ci[0])} and {fmt(ci[1])}).")


# ------------------------------------------------------------------------------------------
# Limits
# ------------------------------------------------------------------------------------------
def _stretch(fs: FitSet, pl: Placement) -> tuple[np.ndarray, str] | None:
    """The cohort patients near this patient (at their whole level, or in their tenth of the index), and where."""
    x = fs.indices[pl.name].values
    ok = np.isfinite(x)
    if pl.discrete:
        return ok & (x == pl.value), f"At level {int(pl.value)} of the {pl.label}"
    edges = np.unique(np.quantile(x[ok], np.linspace(0, 1, STRETCHES + 1)))
    if len(edges) < 2:
        return None
    k = int(np.clip(np.searchsorted(edges, pl.value, side="right") - 1, 0, len(edges) - 2))
    a, z = edges[k], edges[k + 1]
    return ok & (x >= a) & (x <= z), f"Near this patient's {pl.label} ({fmt(a)} to {fmt(z)})"


def _limits(fs: FitSet, pl: Placement) -> list[str]:
    out = []
    info = fs.indices[pl.name].info
    if "prognostic" in info:
        a = fs.spec.analysis
        out.append(about_index_plain(pl.label, info["prognostic"], a.interval, a.refit_index))
    lo, hi = pl.cohort_range
    if pl.outside:
        out.append(f"This patient's {pl.label} ({fmt(pl.value)}) is outside the range seen in the cohort ({fmt(lo)} "
                   f"to {fmt(hi)}). Every figure for it is a guess beyond the data.")
    got = _stretch(fs, pl)
    if got is None:
        return out
    inside, where = got
    arm_col = fs.cohort.frame[fs.spec.cohort.arm].to_numpy()
    total = int(inside.sum())
    for arm in fs.spec.cohort.arms:
        c = int((inside & (arm_col == arm)).sum())
        if total and c / total < SPARSE_SHARE:
            out.append(f"{where}, only {c} of {total} patients had {arm}. The figures there rest on the model "
                       "more than on patients like this one.")
    out.extend(_randomised_limits(fs, inside, where))
    return out


def _randomised_limits(fs: FitSet, inside: np.ndarray, where: str) -> list[str]:
    """Few randomised patients in either arm near the patient: the comparison there rests on chosen treatment."""
    rand = fs.cohort.randomised
    if rand is None:
        return []
    least = (fs.spec.selection or SelectionSpec()).min_per_window
    arm_col = fs.cohort.frame[fs.spec.cohort.arm].to_numpy()
    is_rand = rand.to_numpy(bool)
    n = {arm: int((inside & is_rand & (arm_col == arm)).sum()) for arm in fs.spec.cohort.arms}
    if all(c >= least for c in n.values()):
        return []
    counts = " and ".join(f"{c} had {arm}" for arm, c in n.items())
    return [f"{where}, few patients were given their treatment at random: {counts} (fewer than {least} in an arm). "
            "Where treatment was chosen, the people in each group may differ in ways the data do not show."]


def _adjust_limits(fs: FitSet) -> list[str]:
    out = []
    for o in fs.spec.outcomes:
        if o.adjust:
            pf = next(p for (on, _), p in fs.pairs.items() if on == o.name)
            fit = next(iter(pf.fits.values()))
            held = ", ".join(f"{n} = {fmt(v)}" for n, v in zip(getattr(fit, "z_names", ()), getattr(fit, "z_ref", ())))
            out.append(f"{o.title}: the figures hold {', '.join(o.adjust)} at the cohort's values ({held}), "
                       "not at this patient's own.")
    return out


# ------------------------------------------------------------------------------------------
# The view
# ------------------------------------------------------------------------------------------
def place_patient(fs: FitSet, values: Mapping[str, float] | None = None, *, row: int | None = None,
                  weights: Mapping[str, float] | None = None, index: str | None = None,
                  record: ValuesRecord | None = None) -> PatientView:
    """Place one patient on every index and outcome.

    values: index values by index name, or covariate values by column (each index computed by its own
    model); row: a cohort position (0-based) whose recorded index values fill what `values` leaves out.
    weights: state weights for the composite (default: the record's, else the spec's). index: the index to
    speak along first. record: whose values the weights are, when given and where they came from.
    """
    values = dict(values or {})
    _check_row(fs, row)
    if not values and row is None:
        raise FulcrumError("no values were given for the patient.",
                           hint="Give index values (e.g. {'cfs': 6}) or the covariates the indices use.")
    spec = fs.spec
    if weights is None and record is not None:
        weights = record.weights
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
        if ix.bounds is not None and not ix.bounds[0] <= value <= ix.bounds[1]:
            raise FulcrumError(f"the patient's {ix.title} is {fmt(value)}, outside the index's bounds {fmt(ix.bounds[0])} "
                               f"to {fmt(ix.bounds[1])}.", key=f"indices '{ix.name}'.bounds",
                               hint="Check the value entered for this patient.")
        pl = _placement(fs, ix.name, value, source)
        if pl.discrete and pl.value != value:
            limits.append(f"{pl.label} takes whole levels; {fmt(value)} was taken as level {int(pl.value)}.")
        placements[ix.name] = pl
    if not placements:
        raise FulcrumError("none of the indices could be placed for this patient.",
                           hint="Give each index's value, or every covariate its formula or model uses.")
    primary = index if index in placements else next(iter(placements))
    preds, judgements = [], []
    for pl in placements.values():
        limits.extend(_limits(fs, pl))
        preds.extend(predict(fs, o.name, pl) for o in spec.outcomes)
        judgements.extend(judge(fs, pl, weights, record.whose if record else None))
    limits.extend(_adjust_limits(fs))
    limits.extend(_disagreements(fs, preds, placements))
    limits.extend(_death_sources(fs, preds))
    source = "a cohort record" if row is not None and not values else \
        "entered values" if row is None else "a cohort record with entered values"
    v = spec.values
    combined = tuple(n for n in ((v.survival_outcome, v.outcome) if v else ()) if n)
    return PatientView(tuple(spec.cohort.arms), spec.analysis.level, spec.analysis.margin, primary, placements,
                       preds, judgements, list(dict.fromkeys(limits)), source, timing_sentence(spec.outcomes), record,
                       combined)


def _disagreements(fs: FitSet, preds: list[Prediction], placements: dict[str, Placement]) -> list[str]:
    """One sentence per outcome whose verdict for this patient differs between indices, showing each."""
    out = []
    for o in fs.spec.outcomes:
        mine = [p for p in preds if p.outcome == o.name]
        said = {(p.clear, p.favours if p.clear else None) for p in mine}
        if len(mine) > 1 and len(said) > 1:
            each = " ".join(f"Along {placements[p.index].label}: "
                            + (f"{p.favours} is clearly ahead." if p.clear else "neither is clearly ahead.") for p in mine)
            out.append(f"The indices disagree for this patient on {o.title}. {each} Each index sorts patients in "
                       "its own way, so read both.")
    return out


def _death_sources(fs: FitSet, preds: list[Prediction]) -> list[str]:
    """Deaths by the horizon come from the survival outcome the values name; when the function outcome's last
    level (death) gives another figure, say where each comes from and why they differ."""
    v = fs.spec.values
    if v is None or not v.survival_outcome:
        return []
    out = []
    last = fs.spec.outcome(v.outcome).levels[-1]
    for ps in (p for p in preds if p.outcome == v.survival_outcome):
        pf = next((p for p in preds if p.outcome == v.outcome and p.index == ps.index), None)
        if pf is None:
            continue
        pairs = [(arm, 100 - (ps.arms[arm].per_100 or 0), (pf.arms[arm].distribution_per_100 or {}).get(last))
                 for arm in fs.spec.cohort.arms]
        if all(b is None or a == b for _, a, b in pairs):
            continue
        each = " ".join(f"{arm}: {a} in 100 from {ps.title}, {b} in 100 from {pf.title}." for arm, a, b in pairs)
        along = fs.indices[ps.index].info.get("label") or ps.index  # the index's label, never its internal name
        out.append(f"Two models give deaths by {horizon_words(ps.horizon, ps.units)}, along {along}. {each} "
                   "Use the first for death. It uses all follow-up, and the survival-with-function value takes "
                   "death from it. The second models the state at one time only, so it can differ.")
    return out


def patient_document(fs: FitSet, view: PatientView, cautions: Sequence[str], notes: Sequence[str] = ()) -> dict:
    """What `fulcrum patient --json` writes: the cautions, the population and model behind each number, and
    the patient's predictions, verdicts and judgements (the same numbers as the app's patient view)."""
    doc = view.to_json()
    pop = fs.population
    doc["cautions"] = list(cautions)
    doc["population"] = None if pop is None else pop.to_json()
    doc["warnings"] = list(dict.fromkeys([*fs.notes, *notes]))
    for p in doc["predictions"]:
        pf = fs.pair(p["outcome"], p["index"])
        p["population"] = pf.population
        p["models"] = {arm: getattr(f, "method_", "") for arm, f in pf.fits.items()}
    return doc


def patient_lines(doc: dict) -> list[str]:
    """The patient view as printed lines: per index and outcome, each arm's prediction with its interval and
    per-100 counts by state, the verdict, the population and models, then the limits and the cautions."""
    out = [f"Patient placed from {doc['source']}; headline population: "
           f"{(doc.get('population') or {}).get('words', 'all patients')}."]
    for p in doc["predictions"]:
        pl = doc["placements"][p["index"]]
        out.append(f"{p['title']} along {pl['label']} = {fmt(pl['value'])} (cohort percentile {pl['percentile']:.0f}):")
        for arm, e in p["arms"].items():
            line = f"  {arm}: {fmt(e['estimate'])} [{fmt(e['lower'])}, {fmt(e['upper'])}]"
            if e.get("per_100") is not None:
                line += f"; {e['per_100']} in 100 ({e['per_100_lower']} to {e['per_100_upper']})"
            if e.get("distribution_per_100"):
                line += "; per 100: " + ", ".join(f"{k} {v}" for k, v in e["distribution_per_100"].items())
            out.append(line)
        lo, hi = p["difference_ci"]
        verdict = f"{p['favours']} clearly ahead" if p["clear"] else "neither clearly ahead"
        out.append(f"  difference {fmt(p['difference'])} [{fmt(lo)}, {fmt(hi)}]: {verdict}; rests on "
                   f"{p['population']} patients")
        out.extend(f"  model, {arm}: {m}" for arm, m in p["models"].items())
    out.extend(f"note: {n}" for n in doc["limits"])
    out.extend(f"warning: {w}" for w in doc.get("warnings", []))
    out.append("Caution: " + " ".join(doc["cautions"]))
    return out

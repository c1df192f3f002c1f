"""One home for every fact about an outcome kind: what its measure is, and which model fits it.

Each kind (continuous, binary, ordinal, survival) is a small class registered in KINDS. Everything above the
models asks `describe(outcome)` (an OutcomeFacts: is the measure a probability, its range, its horizon, its
levels, which columns it reads, ...) or `kind_of(outcome).fit(...)`, and never compares `outcome.kind` itself.
Adding a kind means one class here (or `register(...)` from elsewhere, as tests/test_toy_kind.py does) and the
spec's parsing of its keys. The models import nothing from explorer but errors, so the spec's margin checks
(explorer/margins.py) can use these facts while parsing.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ..errors import FulcrumError
from .cox import CoxFit
from .glm import LinearFit, LogisticFit
from .ordinal import OrdinalFit
from .weibull import WeibullFit


@dataclass(frozen=True)
class OutcomeFacts:
    """What the layers above the models need to know about one outcome's measure.

    probability: the measure is a probability (survival at a horizon, binary, ordinal favourable levels).
    span: the width of the range the measure can take (1 for a probability, the horizon for restricted mean
    survival, high - low for a bounded mean), None when unbounded.
    horizon: the time the measure is read at (time-to-event kinds), else None.
    follow_up: the outcome is a follow-up time with an event flag (Kaplan-Meier curves, horizon checks,
    censoring); time/event name its columns.
    levels / favourable: an ordered outcome's levels (best first) and the ones counted favourable, else ().
    columns: the cohort columns the outcome itself reads (adjustment covariates not included).
    observed_by: the nonparametric estimate that matches the measure: "kaplan_meier", "proportion" or "mean".
    range: the (low, high) the measure can take (0 to 1 for a probability, 0 to the horizon for restricted mean
    survival, a bounded mean's bounds), None when unbounded.
    margin_what: the measure's differences in words, for a margin that cannot be met.
    default_units: the units a margin is read in when the outcome names none.
    model: the per-arm model in words (e.g. "logistic regression").
    pairwise: how two patients compare on it (pairwise.Rule): "follow_up" (the one seen to die first, within the
    horizon, while the other is known to live longer, is worse), "rank" (a lower level code, best first, is
    better) or "value" (the values compare, oriented by higher_is_better).
    values: what one patient's recorded value is: "time_event" (follow-up time and a 0/1 event), "level" (a level,
    coded 0..K-1 best first), "zero_one" (0 or 1) or "number".
    prognostic: the multi-covariate model a prognostic index of this outcome is fitted with (indices.lp_models
    FAMILIES: "cox", "logistic", "proportional_odds", "linear"), None when the kind offers none.
    """

    kind: str
    probability: bool
    span: float | None
    horizon: float | None
    follow_up: bool
    levels: tuple[str, ...]
    favourable: tuple[str, ...]
    columns: tuple[str, ...]
    observed_by: str
    range: tuple[float, float] | None
    margin_what: str
    default_units: str
    model: str
    pairwise: str
    values: str
    prognostic: str | None


class OutcomeKind:
    """One outcome kind: its facts (`describe`) and its per-arm model (`fit`). Subclasses set `name`."""

    name = ""

    def describe(self, o: Any) -> OutcomeFacts:
        raise NotImplementedError

    def fit(self, o: Any, arm: str, basis, data, start=None, robust: bool = False, checks: bool = True):
        raise NotImplementedError

    def robust(self, o: Any) -> bool:
        """Whether this outcome's intervals need sandwich variances whatever the clustering (bounded means)."""
        return False

    def arrays(self, o: Any, frame: Any, rows: Any) -> dict:
        """The OutcomeData fields this kind's model reads, for the given cohort rows (positions) of a checked
        cohort frame: y from the outcome's column, as numbers."""
        return {"y": frame[o.column].to_numpy(float)[rows]}


class Continuous(OutcomeKind):
    name = "continuous"

    def describe(self, o: Any) -> OutcomeFacts:
        rng = None if o.bounds is None else (float(o.bounds[0]), float(o.bounds[1]))
        span = None if rng is None else float(o.bounds[1] - o.bounds[0])
        return OutcomeFacts(self.name, False, span, None, False, (), (), (o.column,), "mean", rng,
                            "means within the outcome's bounds", "the outcome's units", "linear regression",
                            "value", "number", "linear")

    def fit(self, o, arm, basis, data, start=None, robust=False, checks=True):
        return LinearFit(o.name, arm, basis, data, robust, bounded=o.bounds is not None)

    def robust(self, o: Any) -> bool:
        return o.bounds is not None


class Binary(OutcomeKind):
    name = "binary"

    def describe(self, o: Any) -> OutcomeFacts:
        return OutcomeFacts(self.name, True, 1.0, None, False, (), (), (o.column,), "proportion", (0.0, 1.0),
                            "probabilities", "the outcome's units", "logistic regression", "value",
                            "zero_one", "logistic")

    def fit(self, o, arm, basis, data, start=None, robust=False, checks=True):
        return LogisticFit(o.name, arm, basis, data, start, robust)


class Ordinal(OutcomeKind):
    name = "ordinal"

    def describe(self, o: Any) -> OutcomeFacts:
        levels = tuple(o.levels)
        favourable = tuple(o.favourable) or levels[:-1]
        return OutcomeFacts(self.name, True, 1.0, None, False, levels, favourable, (o.column,), "proportion",
                            (0.0, 1.0), "probabilities", "the outcome's units", "proportional odds model", "rank",
                            "level", "proportional_odds")

    def arrays(self, o: Any, frame: Any, rows: Any) -> dict:
        """y: the level codes 0..K-1, best first (the checked cohort holds the column as categories)."""
        return {"y": frame[o.column].cat.codes.to_numpy()[rows].astype(float)}

    def fit(self, o, arm, basis, data, start=None, robust=False, checks=True):
        f = self.describe(o)
        return OrdinalFit(o.name, arm, basis, data, f.levels, f.favourable, start, robust, checks)


class Survival(OutcomeKind):
    name = "survival"

    def describe(self, o: Any) -> OutcomeFacts:
        probability = o.measure != "rmst"
        horizon = None if o.horizon is None else float(o.horizon)
        span = 1.0 if probability else horizon or None
        rng = (0.0, 1.0) if probability else None if horizon is None else (0.0, horizon)
        model = ("Weibull accelerated failure time model" if (o.model or "cox") == "weibull"
                 else "Cox proportional hazards model")
        return OutcomeFacts(self.name, probability, span, horizon, True, (), (), (o.time, o.event), "kaplan_meier",
                            rng, "probabilities" if probability else "restricted mean survival times",
                            "time units", model, "follow_up", "time_event",
                            "cox")

    def arrays(self, o: Any, frame: Any, rows: Any) -> dict:
        return {"time": frame[o.time].to_numpy(float)[rows], "event": frame[o.event].to_numpy(float)[rows]}

    def fit(self, o, arm, basis, data, start=None, robust=False, checks=True):
        if o.horizon is None:
            raise FulcrumError(f"survival outcome '{o.name}' needs a horizon.", key=f"outcomes '{o.name}'",
                               hint="Add horizon = ... in the units of the time column.")
        measure = o.measure or "survival"
        if (o.model or "cox") == "weibull":
            return WeibullFit(o.name, arm, basis, data, o.horizon, measure, start, robust)
        return CoxFit(o.name, arm, basis, data, o.horizon, measure, start, robust, checks)


KINDS: dict[str, OutcomeKind] = {k.name: k for k in (Continuous(), Binary(), Ordinal(), Survival())}


def register(kind: OutcomeKind) -> None:
    """Add (or replace) an outcome kind; the spec still has to accept its keys."""
    KINDS[kind.name] = kind


def unregister(name: str) -> None:
    KINDS.pop(name, None)


def kind_of(outcome: Any) -> OutcomeKind:
    """The registered kind of an outcome; a clear error for an unknown one."""
    kind = KINDS.get(outcome.kind)
    if kind is None:
        raise FulcrumError(f"outcome '{outcome.name}' has an unknown kind '{outcome.kind}'.",
                           key=f"outcomes '{outcome.name}'",
                           hint=f"Use {', '.join(list(KINDS)[:-1])} or {list(KINDS)[-1]}.")
    return kind


def describe(outcome: Any) -> OutcomeFacts:
    """The facts about one outcome's measure (see OutcomeFacts)."""
    return kind_of(outcome).describe(outcome)

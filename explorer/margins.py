"""Each outcome's margin (the smallest difference worth having), in that outcome's own units.

An outcome's own `margin` wins; the analysis-level `margin` is a default only for measures on a probability
scale (survival at a horizon, binary, ordinal) and for composites; means and restricted mean survival take 0
unless they set their own. A margin whose size reaches the measure's whole range is refused.
Works on the spec's dataclasses by their fields and the kinds' facts (models.kinds, which imports nothing above
errors), so spec.py can call it while parsing.
"""
from __future__ import annotations

from typing import Any

from .errors import FulcrumError
from .models.kinds import describe


def measure_span(outcome: Any) -> float | None:
    """The width of the range the measure can take (1 for a probability, the horizon for RMST, high - low for a
    bounded mean), or None when it is unbounded: the outcome kind's own fact (models.kinds)."""
    return describe(outcome).span


def margin_for(spec: Any, outcome: Any) -> float:
    """The margin of one outcome in its own units: its own `margin`, else `analysis.margin` on a probability
    scale, else 0."""
    if outcome.margin is not None:
        return float(outcome.margin)
    return float(spec.analysis.margin) if describe(outcome).probability else 0.0


def check(margin: float | None, span: float | None, key: str, what: str, source: str | None) -> None:
    """Refuse a margin whose size reaches the range the measure can take (e.g. 1 or more for a probability)."""
    if margin is None or span is None or abs(margin) < span:
        return
    raise FulcrumError(f"'{key}' is {margin:g}, but the difference of {what} cannot reach {span:g} in size, so no "
                       "index value could ever meet this margin.", file=source, key=key,
                       hint=f"Give the smallest difference worth having in the measure's own units, between "
                            f"{-span:g} and {span:g} (for example 0.05 for five percentage points).")


def check_outcome(outcome: Any, source: str | None) -> Any:
    """The outcome, after refusing a margin outside what its measure can take."""
    if outcome.margin is not None:
        facts = describe(outcome)
        check(outcome.margin, facts.span, f"outcomes '{outcome.name}'.margin", facts.margin_what, source)
    return outcome


def side_words(arm: str | None, arms: Any, margin: float) -> str:
    """Who one side of the margin favours, in words: the arm itself with no margin; with one, never a plain
    'favours': '<first> better by more than the margin (m)' or '<first> not better by more than the margin (m)'.
    A side labelled with the second arm is where the first arm's advantage falls short of the margin."""
    if arm is None:
        return "neither arm"
    if not margin:
        return str(arm)
    first = arms[0]
    return f"{first} {'better' if arm == first else 'not better'} by more than the margin ({margin:.3g})"


def with_margins(spec: Any, margins: dict[str, float | None]) -> Any:
    """The spec with these outcomes' own margins set (None: back to the default), each checked against its
    measure's range; the app's per-outcome margin inputs use it (nothing is refitted)."""
    import dataclasses

    outcomes = tuple(check_outcome(dataclasses.replace(o, margin=None if margins[o.name] is None
                                                       else float(margins[o.name])), spec.source)
                     if o.name in margins else o for o in spec.outcomes)
    return dataclasses.replace(spec, outcomes=outcomes)


def units_words(outcome: Any) -> str:
    """The units a margin is given in, for labels: 'probability', or the outcome's own units."""
    facts = describe(outcome)
    if facts.probability:
        return "probability, e.g. 0.05"
    return outcome.units or facts.default_units

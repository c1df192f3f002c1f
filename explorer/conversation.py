"""The values conversation: a patient's (or proxy's, or team's) answers about outcome states turned into state
weights, and the record of whose values they are, when they were given and where the weights came from.

Weights use the scale of explorer/values.py: death (the last level) 0, the best state 1, worse than death below 0.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any, Mapping, Sequence

from .errors import FulcrumError
from .presets import PRESETS
from .spec import WHOSE

SOURCES = ("conversation", "edited", "spec")  # besides these, a preset's name from explorer.presets.PRESETS
ACCEPTABLE_SPAN = 0.5   # acceptable states step down from 1 by rank, staying above 1 - ACCEPTABLE_SPAN
NOT_ACCEPTABLE_TOP = 0.2  # not acceptable but not worse than death: between 0 and this
WORSE_DEPTH = 0.5       # worse than death: between 0 and minus this
WHO = {"patient": "the patient's own values", "proxy": "the values a proxy gave on the patient's behalf",
       "team": "the treating team's values"}
WHO_SHORT = {"patient": "the patient's", "proxy": "the proxy's", "team": "the team's"}


def _words(level: str) -> str:
    return str(level).replace("_", " ")


def _check_levels(levels: Sequence[str], given: Sequence[str], what: str) -> tuple[str, ...]:
    living = tuple(levels[:-1])
    out = []
    for lv in given:
        if lv == levels[-1]:
            raise FulcrumError(f"'{lv}' is the last level, taken as death, so it cannot be {what}.",
                               key=f"conversation.{what.replace(' ', '_')}",
                               hint="Death is the fixed point of the scale (weight 0); choose among the other states.")
        if lv not in living:
            raise FulcrumError(f"'{lv}' is not a state of this outcome.", key=f"conversation.{what.replace(' ', '_')}",
                               hint=f"States: {', '.join(living)}.")
        if lv in out:
            raise FulcrumError(f"'{lv}' is given twice.", key=f"conversation.{what.replace(' ', '_')}",
                               hint="Give each state once.")
        out.append(lv)
    return tuple(out)


def full_ranking(levels: Sequence[str], ranking: Sequence[str] | None) -> tuple[str, ...]:
    """The living states best first: the ranked ones in the given order, any left out after them in level order."""
    ranked = _check_levels(levels, ranking or (), "ranked")
    return ranked + tuple(lv for lv in levels[:-1] if lv not in ranked)


def _ratings(levels: Sequence[str], ratings: Mapping[str, float] | None) -> dict[str, float]:
    out = {}
    for lv, r in (ratings or {}).items():
        if lv == levels[-1]:
            if r not in (0, 0.0):
                raise FulcrumError(f"'{lv}' is taken as death, which is 0 on the scale; it was rated {r}.",
                                   key=f"conversation.ratings.{lv}", hint="Leave death at 0.")
            continue
        _check_levels(levels, [lv], "rated")
        if isinstance(r, bool) or not isinstance(r, (int, float)) or not math.isfinite(r) or not -100 <= r <= 100:
            raise FulcrumError(f"the rating of '{lv}' should be a number from -100 to 100, found {r!r}.",
                               key=f"conversation.ratings.{lv}",
                               hint="0 is as bad as death, 100 the best state; below 0 is worse than death.")
        out[lv] = float(r)
    return out


def weights_from_answers(levels: Sequence[str], acceptable: Sequence[str], worse_than_death: Sequence[str],
                         ranking: Sequence[str] | None = None, ratings: Mapping[str, float] | None = None
                         ) -> dict[str, float]:
    """State weights from the conversation's answers (levels best first, the last level death).

    Rules: death weighs 0. Each living state falls in one group: acceptable, worse than death, or neither
    (not acceptable but not worse than death). The groups keep their order whatever the ranking; within a
    group the states follow `ranking` (default: the levels' order). With k states in a group, the i-th
    (i = 0 first) weighs: acceptable 1 - 0.5 i / k (the best acceptable state is 1); neither
    0.2 (k - i) / (k + 1) (between 0 and 0.2, near death); worse than death -0.5 (i + 1) / (k + 1) (between
    0 and -0.5). A state given a rating (-100 to 100: death 0, the best state 100, worse than death below 0)
    weighs rating / 100 instead; its sign must agree with its group.
    """
    levels = tuple(levels)
    if len(levels) < 2:
        raise FulcrumError("the outcome needs at least two states, the last being death.", key="values.outcome",
                           hint="Choose an ordinal outcome whose last level is death.")
    acc = set(_check_levels(levels, acceptable, "acceptable"))
    worse = set(_check_levels(levels, worse_than_death, "worse than death"))
    both = [lv for lv in levels if lv in acc and lv in worse]
    if both:
        raise FulcrumError(f"'{both[0]}' is marked both acceptable and worse than death.",
                           key="conversation.worse_than_death", hint="Mark each state as one or the other.")
    order = full_ranking(levels, ranking)
    rated = _ratings(levels, ratings)
    groups = {"acceptable": [lv for lv in order if lv in acc], "worse": [lv for lv in order if lv in worse],
              "neither": [lv for lv in order if lv not in acc and lv not in worse]}
    weights = {levels[-1]: 0.0}
    for name, states in groups.items():
        k = len(states)
        for i, lv in enumerate(states):
            weights[lv] = {"acceptable": 1.0 - ACCEPTABLE_SPAN * i / k,
                           "neither": NOT_ACCEPTABLE_TOP * (k - i) / (k + 1),
                           "worse": -WORSE_DEPTH * (i + 1) / (k + 1)}[name]
    for lv, r in rated.items():
        ok = r > 0 if lv in acc else r < 0 if lv in worse else r >= 0
        if not ok:
            need = ("above 0 (it was called acceptable)" if lv in acc else "below 0 (it was called worse than death)"
                    if lv in worse else "0 or above (it was not called worse than death)")
            raise FulcrumError(f"'{lv}' is rated {r:g}; its rating should be {need}.", key=f"conversation.ratings.{lv}",
                               hint="Change the rating, or change the answer about this state.")
        weights[lv] = r / 100.0
    return {lv: round(weights[lv], 6) for lv in levels}


def conversation_notes(levels: Sequence[str], acceptable: Sequence[str], ranking: Sequence[str] | None,
                       weights: Mapping[str, float]) -> list[str]:
    """Plain notes where the weights do not follow the ranking (ratings can reorder states) or nothing was
    acceptable (so no state weighs 1)."""
    notes = []
    if not acceptable:
        notes.append("No state was called acceptable, so no state has the top weight of 1.")
    order = full_ranking(levels, ranking)
    for hi, lo in zip(order, order[1:]):
        if weights[lo] > weights[hi]:
            notes.append(f"{_words(lo).capitalize()} has a higher weight than {_words(hi)}, although it was put "
                         "lower in the order.")
    return notes


# ------------------------------------------------------------------------------------------
# The record: whose values, when, by whom, from what
# ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Answers:
    """What was said in the conversation, as given (levels best first, the last one death)."""

    levels: tuple[str, ...]
    acceptable: tuple[str, ...]
    worse_than_death: tuple[str, ...]
    ranking: tuple[str, ...]
    ratings: dict[str, float] | None = None

    @property
    def neither(self) -> tuple[str, ...]:
        """States neither acceptable nor worse than death, in ranked order."""
        return tuple(lv for lv in self.ranking if lv not in self.acceptable and lv not in self.worse_than_death)


@dataclass(frozen=True)
class ValuesRecord:
    """The weights in use and their provenance: whose values (patient, proxy or team), when and by whom they
    were recorded, the conversation's answers, and the source ("conversation", a preset's name, "edited",
    or "spec" for weights stated in the analysis spec)."""

    whose: str
    weights: dict[str, float]
    source: str
    when: str | None = None
    answers: Answers | None = None
    recorded_by: str | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)

    def to_json(self) -> dict:
        doc = dataclasses.asdict(self)
        doc["notes"] = list(self.notes)
        if self.answers is not None:
            doc["answers"] = {k: (list(v) if isinstance(v, tuple) else v) for k, v in doc["answers"].items()}
        return doc

    @classmethod
    def from_json(cls, doc: Mapping[str, Any]) -> ValuesRecord:
        a = doc.get("answers")
        answers = None if a is None else Answers(
            tuple(a["levels"]), tuple(a["acceptable"]), tuple(a["worse_than_death"]), tuple(a["ranking"]),
            dict(a["ratings"]) if a.get("ratings") else None)
        return cls(doc["whose"], dict(doc["weights"]), doc["source"], doc.get("when"), answers,
                   doc.get("recorded_by"), tuple(doc.get("notes") or ()))

    def sentences(self) -> list[str]:
        """The record in plain words, for the patient summary."""
        out = [f"These are {WHO.get(self.whose, self.whose)}."]
        when = when_words(self.when)
        by = f" by {self.recorded_by}" if self.recorded_by else ""
        if when or by:
            out.append(f"They were recorded{' ' + when if when else ''}{by}.")
        out.append(source_words(self.source, self.answers is not None))
        a = self.answers
        if a is not None:
            out.append("Acceptable: " + list_words(a.acceptable) + ".")
            out.append("Not acceptable, but not worse than death: " + list_words(a.neither) + ".")
            out.append("Worse than death: " + list_words(a.worse_than_death) + ".")
            out.append("Order, best first: " + ", ".join(_words(lv) for lv in a.ranking) + ".")
            if a.ratings:
                out.append("Ratings (0 = as bad as death, 100 = the best state): "
                           + ", ".join(f"{_words(lv)} {r:g}" for lv, r in a.ratings.items()) + ".")
        out.extend(self.notes)
        return out


def list_words(levels: Sequence[str]) -> str:
    return ", ".join(_words(lv) for lv in levels) if levels else "none"


def source_words(source: str, had_answers: bool) -> str:
    """Where the weights came from, in a sentence."""
    if source == "conversation":
        return "The weights come from the answers below."
    if source == "edited":
        return ("The weights were changed by hand after the answers below." if had_answers
                else "The weights were set by hand.")
    if source == "spec":
        return "The weights are those stated in the analysis settings."
    label = PRESETS[source].label if source in PRESETS else source
    return f"The weights come from the preset '{label}'" + (", chosen after the answers below." if had_answers else ".")


def when_words(when: str | None) -> str:
    """'on 3 March 2026 at 14:05' from an ISO date-time (or date)."""
    if not when:
        return ""
    try:
        t = datetime.fromisoformat(when)
    except ValueError:
        return f"on {when}"
    day = f"on {t.day} {t.strftime('%B %Y')}"
    return day if len(when) <= 10 else f"{day} at {t.strftime('%H:%M')}"


def stamp(when: datetime | str | None = None) -> str:
    """An ISO date-time to the minute (now when not given)."""
    if isinstance(when, str):
        try:
            return datetime.fromisoformat(when).isoformat(timespec="minutes")
        except ValueError:
            raise FulcrumError(f"'{when}' is not a date and time.", key="conversation.when",
                               hint="Give it as YYYY-MM-DD HH:MM.") from None
    return (when or datetime.now()).replace(second=0, microsecond=0).isoformat(timespec="minutes")


def check_whose(whose: str) -> str:
    if whose not in WHOSE:
        raise FulcrumError(f"'{whose}' is not one of whose values these can be.", key="values.whose",
                           hint=f"Choose one of: {', '.join(WHOSE)}.")
    return whose


def record_conversation(levels: Sequence[str], acceptable: Sequence[str], worse_than_death: Sequence[str],
                        ranking: Sequence[str] | None = None, ratings: Mapping[str, float] | None = None, *,
                        whose: str, when: datetime | str | None = None, recorded_by: str | None = None
                        ) -> ValuesRecord:
    """The answers, the weights they give (weights_from_answers) and who gave them, as one record."""
    levels = tuple(levels)
    weights = weights_from_answers(levels, acceptable, worse_than_death, ranking, ratings)
    order = full_ranking(levels, ranking)
    answers = Answers(levels, tuple(lv for lv in order if lv in acceptable),
                      tuple(lv for lv in order if lv in worse_than_death), order,
                      {lv: float(r) for lv, r in ratings.items() if lv != levels[-1]} if ratings else None)
    notes = conversation_notes(levels, acceptable, ranking, weights)
    return ValuesRecord(check_whose(whose), weights, "conversation", stamp(when), answers,
                        (recorded_by or "").strip() or None, tuple(notes))


def same_weights(a: Mapping[str, float], b: Mapping[str, float]) -> bool:
    return set(a) == set(b) and all(abs(float(a[k]) - float(b[k])) <= 1e-9 for k in a)


def current_record(record: ValuesRecord | None, values: Any) -> ValuesRecord | None:
    """The record of the weights now in use (`values`: the spec's ValuesSpec): the conversation's record while
    its weights stand; after a change, the same answers marked "edited" (or the preset chosen); with no
    conversation, the spec's own weights, preset and whose."""
    if values is None:
        return None
    weights = dict(values.weights)
    if record is None:
        return ValuesRecord(values.whose, weights, values.preset or "spec")
    if same_weights(record.weights, weights) and record.whose == values.whose:
        return record
    source = record.source if same_weights(record.weights, weights) else values.preset or "edited"
    notes = record.notes if source == "conversation" else ()
    return dataclasses.replace(record, whose=values.whose, weights=weights, source=source, notes=notes)


def questions(whose: str) -> dict[str, str]:
    """The conversation's questions in plain words, asked of the patient, a proxy or the team."""
    who = {"patient": "you", "proxy": "the patient", "team": "the patient"}.get(whose, "the patient")
    verb = "Would you" if who == "you" else "Would the patient"
    return {
        "acceptable": f"Think about life after this illness. Which of these states could {who} live with?",
        "worse": f"{verb} see any of the other states as worse than death?",
        "ranking": "Now put the states in order. Pick the best one first, then the next best, and so on.",
        "ratings": ("If it helps, score each state from 0 to 100. Death is 0 and the best state is 100. "
                    "A state worse than death goes below 0."),
    }

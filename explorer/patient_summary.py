"""The patient summary for the meeting record: one plain content object (`Summary`) that the HTML template
(explorer/report/patient.html) and the PDF writer (explorer/patient_pdf.py) both draw, so they say the same."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

from .words import fmt, per_hundred, words
from .charts_common import state_colours
from .charts_common import chart_to_svg
from .charts_patient import per_hundred_chart
from .report import render_template
from .patient import Placement, Prediction, PatientView, ValueJudgement, count_of_100


def alive_at_horizon(p: Prediction) -> bool:
    """Whether the prediction is a chance of being alive at a horizon (a probability that carries one)."""
    return p.probability and p.horizon is not None


def has_states(p: Prediction) -> bool:
    """Whether the prediction gives each arm a share in every outcome state (its levels)."""
    return any(e.distribution for e in p.arms.values())


def icon_probabilities(p: Prediction) -> dict[str, dict[str, float]] | None:
    """Per arm, the state probabilities the per-100 rows show: ordinal levels, or alive / dead."""
    out = {}
    for arm, e in p.arms.items():
        if e.distribution:
            out[arm] = {lv: v[0] for lv, v in e.distribution.items()}
        elif alive_at_horizon(p):
            out[arm] = {"alive": e.estimate, "dead": 1.0 - e.estimate}
        else:
            return None
    return out


def _icon_outcomes(view: PatientView) -> list[Prediction]:
    """The survival and the function outcome the per-100 rows show: those the values combine (one horizon) when
    the spec names them, else the first of each kind."""
    along = [p for p in view.predictions if p.index == view.primary_index]
    want = set(view.combined)
    ordinal = [p for p in along if has_states(p)]
    survival = [p for p in along if alive_at_horizon(p)]
    pick = [next((p for p in group if p.outcome in want), group[0]) for group in (survival, ordinal) if group]
    return pick


def _cell(n: int | float, lo: int | float, hi: int | float, probability: bool) -> str:
    if probability:
        return f"{n} of 100 (likely {lo} to {hi})"
    return f"{fmt(n)} (likely {fmt(lo)} to {fmt(hi)})"


def outcome_table(p: Prediction, arms: Sequence[str]) -> list[list[str]]:
    """Rows of [what, first arm, second arm]: each state's count of 100 with its interval (ordinal), else the
    measure with its interval."""
    if any(e.distribution for e in p.arms.values()):
        levels = list(next(e.distribution for e in p.arms.values() if e.distribution))
        return [[words(lv)] + [_cell(p.arms[a].distribution_per_100[lv], count_of_100(p.arms[a].distribution[lv][1]),
                                     count_of_100(p.arms[a].distribution[lv][2]), True) for a in arms] for lv in levels]
    return [[p.measure] + [_cell(*((p.arms[a].per_100, p.arms[a].per_100_lower, p.arms[a].per_100_upper)
                                   if p.probability else (p.arms[a].estimate, p.arms[a].lower, p.arms[a].upper)),
                                 p.probability) for a in arms]]


@dataclass
class IconArray:
    """One outcome's per-100 rows: per arm the state probabilities and counts of 100, with state colours."""

    title: str
    levels: list[str]
    colours: dict[str, str]
    probabilities: dict[str, dict[str, float]]
    counts: dict[str, dict[str, int]]


@dataclass
class Summary:
    """What the printable summary says, in order; the HTML template and the PDF writer both draw this."""

    arms: tuple[str, str]
    cautions: list[str]
    identifiers: dict[str, str]
    position: str
    placements: list[Placement]
    arrays: list[IconArray]
    outcomes: list[dict]
    values: list[str]
    weights: dict[str, float] | None
    judgements: list[ValueJudgement]
    limits: list[str]


def summary_content(view: PatientView, cautions: Sequence[str], *, identifiers: Mapping[str, Any] | None = None
                    ) -> Summary:
    """The summary's content along the primary index."""

    arrays = []
    for p in _icon_outcomes(view):
        probs = icon_probabilities(p)
        if probs:
            levels = list(next(iter(probs.values())))
            arrays.append(IconArray(p.title, levels, state_colours(levels), probs,
                                    {arm: per_hundred(probs[arm]) for arm in view.arms}))
    along = [p for p in view.predictions if p.index == view.primary_index]
    outcomes = [{"title": p.title, "rows": outcome_table(p, view.arms),
                 "sentences": [p.sentence, p.uncertainty] + ([p.level_sentence] if p.level_sentence else [])}
                for p in along]
    judgements = [j for j in view.judgements if j.index == view.primary_index]
    record = view.record
    weights = record.weights if record else next((j.weights for j in judgements if j.weights), None)
    values = record.sentences() if record else []
    limits = list(view.limits) + ([view.timing] if view.timing else [])
    return Summary(view.arms, list(cautions), {str(k): str(v) for k, v in (identifiers or {}).items()},
                   view.place_sentence(), list(view.placements.values()), arrays, outcomes, values, weights,
                   judgements, limits)


def summary_html(view: PatientView, cautions: Sequence[str], *, identifiers: Mapping[str, Any] | None = None) -> str:
    """A printable HTML summary: position, limits, the per-100 rows for both arms (inline SVG), each arm's outcomes with
    intervals, the values used and whose they are, the favoured arm and how firmly, and the cautions."""
    from markupsafe import Markup


    s = summary_content(view, cautions, identifiers=identifiers)
    svgs = [Markup(chart_to_svg(per_hundred_chart(a.probabilities, "", a.colours, width=560, key=False, subtitle=None)))
            for a in s.arrays]
    return render_template("patient.html", s=s, svgs=svgs, fmt=fmt, words=words)

"""The per-100 display: for each arm, one row of 100 marks (one per person like this patient), sorted by outcome
state from best to worst, each state's run labelled beside it with its count and name.

Per-100 counts are a published way to show risk (natural frequencies: Galesic, Garcia-Retamero & Gigerenzer,
Health Psychology 2009). The look is Fulcrum's own (docs/look.md): plain bars, never figures of people; the
states light (best) to dark (worst) from explorer/look.py; the arms one above the other so the runs line up;
a gap after every ten marks so they can be counted. One pure layout function places everything in pixels,
so the app's chart (Altair) and the printed PDF (reportlab, patient_pdf.py) draw the same picture.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import altair as alt
import pandas as pd

from .charts_common import FONT, base_chart, finish_chart, quick_chart, sized_chart, state_colours
from .words import per_hundred, words
from .look import ARM_COLOURS, ARM_INKS, INK, MUTED, PAPER, RULE

GAP = 0.6          # extra space after every ten marks, in mark widths
FILL = 0.78        # share of a mark's slot that is ink (the rest is white space between people)
MARK_H = 30        # mark height, pixels
ARM_LINE = 24      # room for the arm's name above its row
TIER = 19          # one line of run labels
LEADER = 7         # the leader's length from the marks to the first line of labels
BLOCK_GAP = 18     # space between one arm's block and the next
CHAR_PX = 7.6      # rough width of one label character at LABEL_SIZE, for placing labels without overlap
LABEL_SIZE = 14


@dataclass
class Layout:
    """Everything the per-100 display draws, in pixels from the top left (y grows downwards)."""
    width: float
    height: float = 0.0
    marks: list[dict] = field(default_factory=list)    # arm, state, person (1..100), x0, x1, y0, y1, colour
    labels: list[dict] = field(default_factory=list)   # arm, state, n, text, x, y (baseline), leader_y0, leader_y1
    arms: list[dict] = field(default_factory=list)     # arm, text, x, y (baseline), colour
    counts: dict[str, dict[str, int]] = field(default_factory=dict)


def slot_x(i: int, width: float) -> tuple[float, float]:
    """The left and right edges of person i (0..99) in a row `width` pixels wide."""
    unit = width / (100 + 9 * GAP)
    x0 = (i + GAP * (i // 10)) * unit
    return x0, x0 + FILL * unit


def label_tiers(starts: Sequence[float], widths: Sequence[float], space: float = 10.0) -> list[int]:
    """Lines for left-aligned labels hung from leaders at their starts: each label takes the first line where
    it clears the label before it on that line and its leader crosses no label above it; when no line allows
    that, the first line it clears (its leader then passes behind a label, which is drawn with a white halo)."""
    placed: list[tuple[int, float, float]] = []
    tiers = []
    for x, w in zip(starts, widths):
        def clear(t: int, x: float = x) -> bool:
            return all(x >= e + space for tt, _, e in placed if tt == t)

        def uncrossed(t: int, x: float = x) -> bool:
            return not any(tt < t and s - 3 <= x <= e + 3 for tt, s, e in placed)

        t = 0
        while not (clear(t) and uncrossed(t)) and t <= len(placed):
            t += 1
        if t > len(placed):
            t = 0
            while not clear(t):
                t += 1
        placed.append((t, x, x + w))
        tiers.append(t)
    return tiers


def run_text(n: int, state: str) -> str:
    return f"{n} {words(state)}"


def layout(probabilities: Mapping[str, Mapping[str, float]], colours: Mapping[str, str] | None = None, *,
           width: float = 600, char_px: float = CHAR_PX) -> Layout:
    """Place the marks, run labels and arm names for each arm's probabilities over the same ordered states."""
    arms = list(probabilities)
    counts = {arm: per_hundred(probabilities[arm]) for arm in arms}
    states = list(next(iter(counts.values())))
    colours = dict(colours or state_colours(states))
    out = Layout(width=width, counts=counts)
    top = 0.0
    for k, arm in enumerate(arms):
        ink = ARM_INKS[k] if k < len(ARM_INKS) else INK
        out.arms.append({"arm": arm, "text": f"With {arm}", "x": 0.0, "y": top + ARM_LINE - 7, "colour": ink,
                         "bar": ARM_COLOURS[k] if k < len(ARM_COLOURS) else INK})
        y0, y1 = top + ARM_LINE, top + ARM_LINE + MARK_H
        i = 0
        runs = []
        for state in states:
            n = counts[arm][state]
            if not n:
                continue
            first = i
            for _ in range(n):
                x0, x1 = slot_x(i, width)
                out.marks.append({"arm": arm, "state": state, "person": i + 1, "x0": x0, "x1": x1, "y0": y0,
                                  "y1": y1, "colour": colours[state]})
                i += 1
            runs.append((state, n, slot_x(first, width)[0]))
        texts = [run_text(n, s) for s, n, _ in runs]
        tiers = label_tiers([x for _, _, x in runs], [char_px * len(t) for t in texts])
        for (state, n, x), text, t in zip(runs, texts, tiers):
            base = y1 + LEADER + TIER * (t + 1) - 5
            out.labels.append({"arm": arm, "state": state, "n": n, "text": text, "x": x, "y": base,
                               "leader_y0": y1 + 1, "leader_y1": base - LABEL_SIZE + 2})
        top = y1 + LEADER + TIER * (max(tiers, default=0) + 1) + BLOCK_GAP
    out.height = top - BLOCK_GAP + 4
    return out


def per_hundred_words(counts: Mapping[str, Mapping[str, int]]) -> str:
    """The display in words: each arm's counts out of 100, every state named (zeros too)."""
    return " ".join(f"With {arm}: " + ", ".join(f"{n} {words(s)}" for s, n in c.items()) + " (of 100)."
                    for arm, c in counts.items())


@quick_chart
def per_hundred_chart(probabilities: Mapping[str, Mapping[str, float]], title: str,
                      colours: Mapping[str, str] | None = None, *, width: int = 600, key: bool = True,
                      subtitle: str | None = "each mark is one person in 100; a gap after every ten",
                      style: bool = True) -> alt.TopLevelMixin:
    """Per arm, a row of 100 marks sorted by state (best first), each run labelled with its count and state.

    probabilities: {arm: {state: probability}} with the states in the same order (best first) for every arm.
    key: a colour key beneath (state names beside filled swatches) for readers who want the code in one place.
    """
    lay = layout(probabilities, colours, width=width)
    states = list(next(iter(lay.counts.values())))
    colours = dict(colours or state_colours(states))
    marks = pd.DataFrame(lay.marks)
    marks["state words"] = marks["state"].map(words)
    marks["of 100"] = [lay.counts[a][s] for a, s in zip(marks["arm"], marks["state"])]
    fill = alt.Fill("state words:N", scale=alt.Scale(domain=[words(s) for s in states],
                                                     range=[colours[s] for s in states]),
                    legend=alt.Legend(title="states, best (light) to worst (dark)", orient="bottom",
                                      direction="horizontal", symbolType="square", symbolSize=220,
                                      symbolStrokeColor=RULE, symbolStrokeWidth=1, symbolOpacity=1,
                                      columns=3) if key else None)
    px = alt.Scale(domain=[0, width], nice=False, zero=False)  # stretches with the chart; labels only gain room
    py = alt.Scale(domain=[0, lay.height], range=[0, lay.height])
    layers = [base_chart(marks).mark_rect(opacity=1, stroke=RULE, strokeWidth=0.4).encode(
        x=alt.X("x0:Q", scale=px, axis=None), x2=alt.X2("x1"), y=alt.Y("y0:Q", scale=py, axis=None),
        y2=alt.Y2("y1"), fill=fill,
        tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("state words:N", title="state"),
                 alt.Tooltip("of 100:Q", title="people of 100")])]
    labels = pd.DataFrame(lay.labels)
    if len(labels):
        layers.append(base_chart(labels).mark_rule(color=MUTED, strokeWidth=1).encode(
            x=alt.X("x:Q", scale=px), y=alt.Y("leader_y0:Q", scale=py), y2=alt.Y2("leader_y1")))
        for halo in (True, False):  # a white halo first, so a leader passing behind a label never cuts its words
            look = {"stroke": PAPER, "strokeWidth": 5, "strokeJoin": "round", "color": PAPER} if halo else {"color": INK}
            layers.append(base_chart(labels).mark_text(align="left", baseline="alphabetic", dx=-1, fontSize=LABEL_SIZE,
                                                   **look).encode(
                x=alt.X("x:Q", scale=px), y=alt.Y("y:Q", scale=py), text=alt.Text("text:N")))
    heads = pd.DataFrame(lay.arms)
    for _, h in heads.iterrows():
        one = pd.DataFrame([h.to_dict()])
        layers.append(base_chart(one).mark_text(align="left", baseline="alphabetic", fontSize=FONT["text"] + 1,
                                            fontWeight="bold", color=h["colour"], dx=14).encode(
            x=alt.X("x:Q", scale=px), y=alt.Y("y:Q", scale=py), text=alt.Text("text:N")))
        layers.append(base_chart(one).mark_rect(color=h["bar"]).encode(
            x=alt.X("x:Q", scale=px), x2=alt.value(9), y=alt.Y("y:Q", scale=py),
            y2=alt.value(float(h["y"]) - 13)))
    chart = sized_chart(alt.layer(*layers), width, lay.height)
    desc = f"{title or 'Out of 100 people like this patient'}: {per_hundred_words(lay.counts)}"
    return finish_chart(chart, title, subtitle, desc, style)


def counts_of(spec: Mapping[str, Any]) -> dict[str, dict[str, int]]:
    """Read back, from a built chart's Vega-Lite spec, how many marks each arm has in each state (for checks)."""
    out: dict[str, dict[str, int]] = {}
    for table in (spec.get("datasets") or {}).values():
        for r in table:
            if "person" in r and "state" in r:
                out.setdefault(r["arm"], {}).setdefault(r["state"], 0)
                out[r["arm"]][r["state"]] += 1
    return out

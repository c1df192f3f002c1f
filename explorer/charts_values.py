"""The values displays: how firmly the first arm is preferred when the weights are uncertain, and how far the
weights in use can move before the answer changes. Fulcrum's own look (docs/look.md).

- preference_chart: one quantity, the chance the first arm is preferred, drawn as a line that splits the height
  of the chart between the two arms (the share below it in the first arm's colour, above it the second's), so
  the reader sees both "how often" and "for whom" without a second curve or a reference line.
- leeway / leeway_chart: anchored on the weights in use. One row per state: the whole weight scale from -1 to 1,
  coloured by the arm favoured at each weight (others held), the weight in use marked, the point where the
  answer changes marked, and the room between them in words. leeway() also gives the smallest move of all the
  weights together (each by at most t) that changes the answer, which the one-at-a-time rows cannot show.
"""
from __future__ import annotations

from typing import Any, Iterable, Mapping, Sequence

import altair as alt
import numpy as np
import pandas as pd

from .charts_common import FONT, WIDTH, base_chart, finish_chart, quick_chart, sized_chart
from .look import arm_colours
from .words import fmt, words
from .look import INK, MUTED, NEUTRAL, PAPER

TRACK_PX = 420      # the weight scale's length in the leeway chart
ROW_PX = 54         # one state's row


# ------------------------------------------------------------------------------------------
# Chance the first arm is preferred
# ------------------------------------------------------------------------------------------
def percent(p: float) -> str:
    """A share as a whole percentage, never rounded to a certainty it is not: "<1%", ">99%"."""
    if 0 < p < 0.005:
        return "<1%"
    if 0.995 < p < 1:
        return ">99%"
    return f"{100 * p:.0f}%"


def chance_words(points: Sequence[Mapping[str, Any]], arms: Sequence[str], index_title: str) -> str:
    """The chart in words: where the first arm is preferred in at least 9 draws in 10, where in at most 1."""
    xs = np.array([float(p["x"]) for p in points])
    ps = np.array([float(p["first"]) for p in points])
    parts = [f"Chance that {arms[0]} is preferred along {index_title}: from {percent(ps.min())} to "
             f"{percent(ps.max())}"]
    for test, who in ((ps >= 0.9, f"{arms[0]} is preferred in at least 9 of 10 draws"),
                      (ps <= 0.1, f"{arms[1]} is preferred in at least 9 of 10 draws")):
        if test.any():
            parts.append(f"{who} at {fmt(xs[test].min())} to {fmt(xs[test].max())}")
    return "; ".join(parts) + "."


@quick_chart
def preference_chart(points: pd.DataFrame | Iterable[Mapping[str, Any]], arms: Sequence[str], *,
                     index_title: str = "index", title: str | None = None, spread: float | None = None,
                     ranges: Mapping[str, Any] | None = None, discrete: bool = False,
                     style: bool = True) -> alt.TopLevelMixin:
    """The chance the first arm is preferred along the index, over weight draws and model uncertainty.

    points: values.acceptability output (x, first; `second` is 1 - first and is not drawn).
    spread, ranges: how the weights were drawn (the values settings), for the subtitle's words.
    """
    recs = (points.to_dict("records") if isinstance(points, pd.DataFrame) else [dict(p) for p in points])
    df = pd.DataFrame([{"x": float(p["x"]), "p": float(p["first"]), "top": 1.0, "bottom": 0.0} for p in recs])
    c = arm_colours(arms)
    axis = alt.Axis(grid=False, tickMinStep=1, format="d") if discrete else alt.Axis(grid=False)
    x = alt.X("x:Q", title=index_title, scale=alt.Scale(zero=False, nice=False), axis=axis)
    y = alt.Y("p:Q", title=f"chance {arms[0]} is preferred", scale=alt.Scale(domain=[0, 1]),
              axis=alt.Axis(format="%", values=[0, 0.1, 0.25, 0.5, 0.75, 0.9, 1], grid=False))
    tip = [alt.Tooltip("x:Q", format=".3~g", title=index_title),
           alt.Tooltip("p:Q", format=".0%", title=f"chance {arms[0]} is preferred")]
    layers = [
        base_chart(df).mark_area(color=c[arms[0]], opacity=0.28).encode(x=x, y=alt.Y("bottom:Q"), y2=alt.Y2("p")),
        base_chart(df).mark_area(color=c[arms[1]], opacity=0.28).encode(x=x, y=y, y2=alt.Y2("top")),
        base_chart(df).mark_line(color=INK, strokeWidth=3.5).encode(x=x, y=y, tooltip=tip),
    ]
    # each arm's share named inside it, where that share is widest
    i_hi, i_lo = int(df["p"].idxmax()), int(df["p"].idxmin())
    names = []
    if df["p"][i_hi] >= 0.2:
        names.append({"x": df["x"][i_hi], "y": df["p"][i_hi] / 2, "text": f"{arms[0]} preferred"})
    if df["p"][i_lo] <= 0.8:
        names.append({"x": df["x"][i_lo], "y": (1 + df["p"][i_lo]) / 2, "text": f"{arms[1]} preferred"})
    lo, hi = float(df["x"].min()), float(df["x"].max())
    for n in names:
        n["align"] = "left" if n["x"] <= lo + 0.5 * (hi - lo) else "right"
    for align, part in pd.DataFrame(names).groupby("align") if names else []:
        layers.append(base_chart(part).mark_text(align=align, dx=8 if align == "left" else -8, fontSize=FONT["text"],
                                             color=INK, fontWeight="bold").encode(
            x=alt.X("x:Q"), y=alt.Y("y:Q"), text=alt.Text("text:N")))
    chart = sized_chart(alt.layer(*layers), WIDTH, 320)
    title = title or f"Chance that {arms[0]} is preferred"
    if spread:
        moved = f"each weight drawn within ±{fmt(spread)} of its value" + (" or its stated range" if ranges else "")
    elif ranges:
        moved = "the weights with ranges drawn within them, the others as stated"
    else:
        moved = "the weights as stated, so only the models' uncertainty varies"
    subtitle = (f"{_cap_first(moved)}. The line splits the draws: below it they prefer {arms[0]}, above it "
                f"{arms[1]}")
    return finish_chart(chart, title, subtitle, chance_words(recs, arms, index_title), style)


# ------------------------------------------------------------------------------------------
# How far the weights can move before the answer changes
# ------------------------------------------------------------------------------------------
def _joint_room(d: float, deltas: np.ndarray, weights: np.ndarray) -> float | None:
    """Smallest t such that moving every weight by at most t (inside [-1, 1]) makes the difference d change sign.

    The difference is linear in the weights: moving weight k against the answer by s lowers |d| by |delta_k| s,
    and weight k can move at most r_k before it meets -1 or 1. So the most |d| can drop with every move at most
    t is f(t) = sum_k |delta_k| min(t, r_k), piecewise linear and increasing; solve f(t) = |d|.
    None when even the largest moves inside [-1, 1] leave the answer as it is.
    """
    if d == 0:
        return 0.0
    down = np.sign(d) * deltas > 0               # these weights work against the answer by going down
    room = np.where(down, weights + 1.0, 1.0 - weights)
    slope = np.abs(deltas)
    need = abs(d)
    order = np.argsort(room)
    t_prev, used = 0.0, 0.0
    active = slope.sum()
    for k in order:
        step = (room[k] - t_prev) * active
        if used + step >= need:
            return t_prev + (need - used) / active if active > 0 else None
        used += step
        t_prev = room[k]
        active -= slope[k]
    return None


def leeway(th: Mapping[str, Any], anchor: str | None = None) -> dict:
    """From a threshold record (results composite[].thresholds): per state, which way and how far its weight can
    move (the others held) before the favoured arm changes; and the smallest move of all the weights together.

    anchor: a state whose weight is held in the joint move too (default: the last state, death, the scale's 0).
    """
    levels = [s["level"] for s in th["states"]]
    anchor = levels[-1] if anchor is None else anchor
    d = float(th["difference"]) - float(th.get("margin") or 0.0)
    rows = []
    for s in th["states"]:
        w, flip = float(s["weight"]), s.get("flip_weight")
        row = {"level": s["level"], "weight": w, "changes_at": flip, "favours_now": th.get("favours")}
        if flip is None:
            row.update(direction=None, room=None,
                       words=f"the answer holds for any weight of {words(s['level'])} from -1 to 1")
        else:
            up = flip > w
            row.update(direction="up" if up else "down", room=abs(flip - w),
                       favours_beyond=s.get("favours_above") if up else s.get("favours_below"),
                       words=(f"the answer changes if the weight of {words(s['level'])} "
                              f"{'rises' if up else 'falls'} by {fmt(abs(flip - w))}, to {fmt(flip)}"))
        rows.append(row)
    movers = [k for k, lv in enumerate(levels) if lv != anchor]
    deltas = np.array([float(th["states"][k]["effect_per_unit"]) for k in movers])
    ws = np.array([float(th["states"][k]["weight"]) for k in movers])
    joint = _joint_room(d, deltas, ws)
    if joint is None:
        together = (f"no move of all the weights together inside -1 to 1 changes the answer ({words(anchor)} held "
                    f"at {fmt(float(th['states'][levels.index(anchor)]['weight']))})")
    else:
        together = (f"all the weights together ({words(anchor)} held) can each move {fmt(joint)} before the answer "
                    f"changes, if every move goes against it")
    return {"x": th.get("x"), "favours": th.get("favours"), "states": rows, "together": joint,
            "together_words": together, "anchor": anchor}


def leeway_table(lw: Mapping[str, Any]) -> pd.DataFrame:
    """One row per state: the weight in use, where the answer changes, and the room in words."""
    return pd.DataFrame([{"state": words(r["level"]), "weight in use": fmt(r["weight"]),
                          "answer changes at": "nowhere in -1 to 1" if r["changes_at"] is None else fmt(r["changes_at"]),
                          "room": ("the whole scale" if r["room"] is None else
                                   f"{'up' if r['direction'] == 'up' else 'down'} by {fmt(r['room'])}")}
                         for r in lw["states"]], columns=["state", "weight in use", "answer changes at", "room"])


@quick_chart
def leeway_chart(lw: Mapping[str, Any], arms: Sequence[str], *, where: str = "", style: bool = True
                 ) -> alt.TopLevelMixin:
    """One row per state: the weight scale coloured by the favoured arm, the weight in use and the change point.

    lw: leeway() output; where: words for the index value, e.g. "Clinical Frailty Scale 5".
    """
    c = arm_colours(arms)
    other = {arms[0]: arms[1], arms[1]: arms[0]}
    segs, marks, notes = [], [], []
    order = [r["level"] for r in lw["states"]]
    for r in lw["states"]:
        lv, w, flip, now = r["level"], r["weight"], r["changes_at"], r["favours_now"]
        if flip is None:
            segs.append({"state": words(lv), "from": -1.0, "to": 1.0, "favours": now})
        else:
            beyond = r.get("favours_beyond") or (other.get(now) if now else None)
            here = now or other.get(beyond)
            lo_arm, hi_arm = (here, beyond) if r["direction"] == "up" else (beyond, here)
            segs += [{"state": words(lv), "from": -1.0, "to": float(flip), "favours": lo_arm},
                     {"state": words(lv), "from": float(flip), "to": 1.0, "favours": hi_arm}]
            marks.append({"state": words(lv), "x": float(flip), "kind": "change", "text": f"changes at {fmt(flip)}"})
        marks.append({"state": words(lv), "x": w, "kind": "in use", "text": f"in use {fmt(w)}"})
        notes.append({"state": words(lv), "text": "holds across the scale" if r["room"] is None else
                      f"room: {'up' if r['direction'] == 'up' else 'down'} {fmt(r['room'])}"})
    sdf = pd.DataFrame(segs)
    sdf["fill"] = [c.get(a, NEUTRAL) if a else NEUTRAL for a in sdf["favours"]]
    sdf["favoured"] = [a or "neither" for a in sdf["favours"]]
    mdf, ndf = pd.DataFrame(marks), pd.DataFrame(notes)
    state_names = [words(lv) for lv in order]
    x = alt.X("from:Q", title="weight (death 0, best state 1)",
              scale=alt.Scale(domain=[-1, 1], range=[0, TRACK_PX], nice=False),
              axis=alt.Axis(values=[-1, -0.5, 0, 0.5, 1], grid=False))
    y = alt.Y("state:N", sort=state_names, title=None, axis=alt.Axis(labelFontSize=FONT["axis_label"], ticks=False,
                                                                      domain=False, labelPadding=8, labelLimit=280),
              scale=alt.Scale(paddingInner=0.3))
    layers = [
        base_chart(sdf).mark_bar(height=14, stroke=PAPER, strokeWidth=1).encode(
            x=x, x2=alt.X2("to"), y=y, fill=alt.Fill("fill:N", scale=None),
            tooltip=[alt.Tooltip("state:N"), alt.Tooltip("favoured:N", title="favoured at these weights"),
                     alt.Tooltip("from:Q", format=".2f"), alt.Tooltip("to:Q", format=".2f")]),
    ]
    use = mdf[mdf["kind"] == "in use"]
    change = mdf[mdf["kind"] == "change"]
    layers.append(base_chart(use).mark_tick(color=INK, thickness=4, size=30, opacity=1).encode(
        x=alt.X("x:Q"), y=alt.Y("state:N", sort=state_names),
        tooltip=[alt.Tooltip("state:N"), alt.Tooltip("text:N", title="weight")]))
    layers.append(base_chart(use).mark_text(fontSize=FONT["text"] - 2, color=INK, dy=-21, fontWeight="bold").encode(
        x=alt.X("x:Q"), y=alt.Y("state:N", sort=state_names), text=alt.Text("text:N")))
    if len(change):
        layers.append(base_chart(change).mark_tick(color=INK, thickness=2, size=26, opacity=1).encode(
            x=alt.X("x:Q"), y=alt.Y("state:N", sort=state_names)))
        layers.append(base_chart(change).mark_text(fontSize=FONT["text"] - 3, color=MUTED, dy=20).encode(
            x=alt.X("x:Q"), y=alt.Y("state:N", sort=state_names), text=alt.Text("text:N")))
    layers.append(base_chart(ndf).mark_text(align="left", fontSize=FONT["text"] - 1, color=INK).encode(
        x=alt.value(TRACK_PX + 16), y=alt.Y("state:N", sort=state_names), text=alt.Text("text:N")))
    chart = sized_chart(alt.layer(*layers), TRACK_PX + 190, ROW_PX * len(order))
    fav = lw.get("favours")
    head = f"at {where}: " if where else ""
    now = f"the weights in use favour {fav}" if fav else "the weights in use sit exactly on the line between the arms"
    subtitle = (f"{head}{now}. Each row moves one weight, the others held; the bar's colour is the arm favoured "
                f"at that weight ({arms[0]} blue, {arms[1]} orange). {_cap_first(lw['together_words'])}.")
    desc = (f"{_cap_first(head + now)}. " + _cap_first("; ".join(r["words"] for r in lw["states"])) + ". "
            + _cap_first(lw["together_words"]) + ".")
    return finish_chart(chart, "How far can the weights move before the answer changes?", subtitle, desc, style)


def _cap_first(text: str) -> str:
    return text[:1].upper() + text[1:]

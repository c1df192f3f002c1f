"""Randomised against chosen patients and pairwise comparisons: the selection effect along the index, the
break-even by the patients used, net benefit in windows, and where the randomised patients are (coverage)."""
from __future__ import annotations

from typing import Any, Mapping, Sequence

import altair as alt
import numpy as np
import pandas as pd

from .charts_common import (ARM_LEGEND, AXIS_CHARS, FONT, HEIGHT, WIDTH, arm_scale, base_chart, finish_chart, quick_chart, sized_chart,
                            thinned)
from .charts_curves import patient_layers
from .look import ARM_COLOURS, INK, arm_colours
from .words import fmt, interval_span, row_bounds, wrap


ALLOCATION_OPACITY = {"randomised": 1.0, "chosen": 0.35}
SELECTION_SETS = (("randomised_break_even", "randomised patients only"), ("all_break_even", "all patients"),
                  ("adjusted_break_even", "chosen patients, weighted"))


def selection_estimates(row: Mapping[str, Any]) -> list[dict]:
    """Every break-even point of the randomised-only, all-patient and weighted fits, with intervals."""
    out = []
    for key, what in SELECTION_SETS:
        for b in row.get(key) or []:
            lo, hi = (b.get("ci") or [None, None])
            out.append({"estimate": what, "x": b["x"], "lo": lo, "hi": hi, "shape": b.get("interval_shape")})
    return out


def interval_pieces(x: float, lo: float | None, hi: float | None, shape: str | None, span: tuple[float, float]
                    ) -> list[tuple[float, float, bool, bool]]:
    """An interval as the pieces drawn inside the index's span: (from, to, open at the left, open at the right).

    Two rays (everything below lo and above hi, as a Fieller interval can be) are two pieces running out of the
    span; an interval that does not hold its own estimate is such a pair; unbounded sides run to the edge."""
    a, b = span
    lo = None if lo is None or not np.isfinite(lo) else float(lo)
    hi = None if hi is None or not np.isfinite(hi) else float(hi)
    if shape == "finite" and lo is not None and hi is not None and not lo <= x <= hi:
        shape = "two_rays"
    if shape == "two_rays" and lo is not None and hi is not None:
        pieces = [(a, min(lo, b), True, False), (max(hi, a), b, False, True)]
    elif shape == "unbounded_below" or (lo is None and hi is not None):
        pieces = [(a, hi if hi is not None else b, True, False)]
    elif shape == "unbounded_above" or (hi is None and lo is not None):
        pieces = [(lo, b, False, True)]
    elif lo is None and hi is None:
        pieces = [(a, b, True, True)]
    else:
        pieces = [(lo, hi, lo < a, hi > b)]
    return [(max(p, a), min(q, b), ol or p < a, orr or q > b) for p, q, ol, orr in pieces if min(q, b) >= max(p, a)]


@quick_chart
def selection_chart(row: Mapping[str, Any] | Sequence[Mapping[str, Any]], arms: Sequence[str] | None = None, *,
                    index_title: str | None = None, style: bool = True,
                    patient: Mapping[str, Any] | None = None) -> alt.TopLevelMixin:
    """The selection effect (chosen minus randomised, same arm, same index value) along the index, with its band.

    row: one selection row, or the rows of one outcome x index (one per arm, drawn in the arm colours).
    Where one arm has few randomised patients its line is dashed; zero means no selection effect.
    """
    rows = [row] if isinstance(row, Mapping) else list(row)
    recs = []
    for r in rows:
        for p in thinned(r.get("curve") or []):
            lo, hi = p.get("ci") or [None, None]
            recs.append({"x": p["x"], "effect": p["effect"], "lower": lo, "upper": hi, "arm": str(r.get("arm", "")),
                         "randomised": "few" if p.get("randomised_sparse") else "enough"})
    df = pd.DataFrame(recs, columns=["x", "effect", "lower", "upper", "arm", "randomised"])
    domain = list(arms) if arms else sorted(set(df["arm"]))
    colours = arm_colours(arms) if arms else {a: INK for a in domain}
    colour = alt.Color("arm:N", scale=alt.Scale(domain=domain, range=[colours[a] for a in domain]), legend=ARM_LEGEND)
    first = rows[0] if rows else {}
    xt = index_title or str(first.get("index", "index"))
    x = alt.X("x:Q", title=xt, scale=alt.Scale(zero=False, nice=False))
    layers: list[alt.Chart] = [base_chart(pd.DataFrame([{"y": 0.0}])).mark_rule(color=INK, strokeWidth=2)
                               .encode(y=alt.Y("y:Q"))]
    if len(df):
        layers.append(base_chart(df).mark_area(opacity=0.2).encode(
            x=x, y=alt.Y("lower:Q", title="chosen minus randomised"), y2=alt.Y2("upper"), color=colour))
        layers.append(base_chart(df).mark_line(strokeWidth=3.5).encode(
            x=x, y=alt.Y("effect:Q"), color=colour, detail=alt.Detail("arm:N"),
            strokeDash=alt.StrokeDash("randomised:N", scale=alt.Scale(domain=["enough", "few"], range=[[1, 0], [6, 4]]),
                                      legend=alt.Legend(title="randomised patients here")),
            tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("x:Q", format=".3~g", title="index"),
                     alt.Tooltip("effect:Q", format=".3~g"), alt.Tooltip("lower:Q", format=".3~g"),
                     alt.Tooltip("upper:Q", format=".3~g")]))
    layers += patient_layers(patient)  # patient: {"x", "label"} as for outcome_chart
    chart = sized_chart(alt.layer(*layers), WIDTH, HEIGHT * 0.8)
    who = " and ".join(str(r.get("arm")) for r in rows)
    title = f"Selection effect ({who}): {first.get('measure', first.get('outcome'))} along {xt}"
    sub = "chosen minus randomised patients in the same arm at the same index value; zero means none"
    return finish_chart(chart, title, sub, " ".join(describe_selection(r) for r in rows), style)


@quick_chart
def selection_break_even_chart(row: Mapping[str, Any], *, index_title: str | None = None,
                               style: bool = True) -> alt.TopLevelMixin:
    """Break-even points from randomised patients only, from all patients, and from weighted chosen patients."""
    est = selection_estimates(row)
    df = pd.DataFrame(est, columns=["estimate", "x", "lo", "hi", "shape"]).astype({"x": float, "lo": float, "hi": float})
    order = [w for _, w in SELECTION_SETS]
    shapes = ["triangle-up", "circle", "diamond"]
    y = alt.Y("estimate:N", sort=order, title=None, scale=alt.Scale(domain=order))
    xt = index_title or str(row.get("index", "index"))
    xs = [p["x"] for p in row.get("curve") or []] or list(df["x"])
    span = (float(min(xs)), float(max(xs))) if xs else (0.0, 1.0)  # the axis never runs beyond the index
    pieces = pd.DataFrame([{"estimate": e["estimate"], "from": p, "to": q, "open": ol or orr,
                            "edge": (p if ol else q) if (ol or orr) else None}
                           for e in est for p, q, ol, orr in interval_pieces(e["x"], e["lo"], e["hi"], e["shape"], span)],
                          columns=["estimate", "from", "to", "open", "edge"])
    scale = alt.Scale(domain=list(span), nice=False, zero=False, clamp=True)
    layers = [base_chart(pieces).mark_rule(strokeWidth=4, color=INK).encode(
                  x=alt.X("from:Q", title=f"break-even on {xt}", scale=scale), x2=alt.X2("to"), y=y),
              base_chart(pieces[pieces["open"]]).mark_text(text="…", fontSize=22, color=INK, dy=-8).encode(
                  x=alt.X("edge:Q", scale=scale), y=y),
              base_chart(df[(df["x"] >= span[0]) & (df["x"] <= span[1])]).mark_point(
                  filled=True, size=260, color=INK, opacity=1).encode(
                  x=alt.X("x:Q", scale=scale), y=y,
                  shape=alt.Shape("estimate:N", legend=None, scale=alt.Scale(domain=order, range=shapes)),
                  tooltip=[alt.Tooltip("estimate:N"), alt.Tooltip("x:Q", format=".3~g"), alt.Tooltip("lo:Q", format=".3~g"),
                           alt.Tooltip("hi:Q", format=".3~g")])]
    chart = sized_chart(alt.layer(*layers), WIDTH, 70 * len(order))
    parts = [f"{e['estimate']}: {fmt(e['x'])}" + (f" (interval {_shape_words(e, row_bounds(row))})"
                                                   if pd.notna(e["lo"]) or pd.notna(e["hi"]) else " (interval open)")
             for e in df.to_dict("records")]
    desc = (f"Break-even points of {row.get('measure', row.get('outcome'))} along {xt} by the patients used: "
            + ("; ".join(parts) if parts else "none in the searched range") + ".")
    title = f"Break-even by the patients used: {row.get('label') or row.get('measure') or row.get('outcome')} along {xt}"
    return finish_chart(chart, title, None, desc, style)


def _shape_words(e: Mapping[str, Any], bounds: Any = None) -> str:
    lo, hi, x = e.get("lo"), e.get("hi"), e.get("x")
    lo, hi = (None if pd.isna(lo) else float(lo)), (None if pd.isna(hi) else float(hi))
    inside = x is None or pd.isna(x) or lo is None or hi is None or lo <= float(x) <= hi
    two = e.get("shape") == "two_rays" or not inside
    return interval_span({"ci": [lo, hi], "interval_shape": "two_rays" if two else "finite"}, bounds)


PAIRWISE_INTERVALS = {"u-statistic": "large-sample U-statistic variances", "bootstrap-percentile": "percentile bootstrap"}


def pairwise_interval_words(rows: Sequence[Mapping[str, Any]]) -> str | None:
    """How the pairwise rows' intervals were made, in words (None when they have none)."""
    row = next((r for r in rows if r.get("interval")), None)
    if row is None:
        return None
    how = PAIRWISE_INTERVALS.get(row["interval"], str(row["interval"]))
    if row["interval"] == "bootstrap-percentile":
        how += f", {row.get('replicates')} replicates resampling patients within arm"
    return f"{fmt(100 * row.get('level', 0.95))}% intervals by {how}"


@quick_chart
def pairwise_chart(rows: Sequence[Mapping[str, Any]], arms: Sequence[str], *, index_title: str | None = None,
                   style: bool = True) -> alt.TopLevelMixin:
    """Net benefit (wins minus losses over all pairs) in windows along the index, with the whole-cohort value."""
    windows = [r for r in rows if r.get("window") and r.get("net_benefit") is not None]
    overall = next((r for r in rows if not r.get("window") and r.get("net_benefit") is not None), None)
    df = pd.DataFrame([{"x": r["window"]["median"], "from": r["window"]["from"], "to": r["window"]["to"],
                        "net_benefit": r["net_benefit"], "lo": (r.get("net_benefit_ci") or [None, None])[0],
                        "hi": (r.get("net_benefit_ci") or [None, None])[1]} for r in windows],
                      columns=["x", "from", "to", "net_benefit", "lo", "hi"]).astype(float)
    xt = index_title or str((rows[0] if rows else {}).get("index") or "index")
    x = alt.X("x:Q", title=f"{xt} (window median)", scale=alt.Scale(zero=False))
    layers: list[alt.Chart] = [base_chart(pd.DataFrame([{"y": 0.0}])).mark_rule(color=INK, strokeWidth=2)
                               .encode(y=alt.Y("y:Q"))]
    if overall is not None:
        layers.append(base_chart(pd.DataFrame([{"y": overall["net_benefit"], "what": "whole cohort"}]))
                      .mark_rule(color=INK, strokeDash=[6, 4]).encode(y=alt.Y("y:Q"), tooltip=[alt.Tooltip("what:N")]))
    if len(df):
        ci = df.dropna(subset=["lo", "hi"])
        if len(ci):
            layers.append(base_chart(ci).mark_rule(strokeWidth=3, color=INK).encode(
                x=x, y=alt.Y("lo:Q", title=wrap(f"net benefit ({arms[0]} minus {arms[1]})", AXIS_CHARS)), y2=alt.Y2("hi")))
        layers.append(base_chart(df).mark_point(filled=True, size=120, color=ARM_COLOURS[0], opacity=1).encode(
            x=x, y=alt.Y("net_benefit:Q", title=wrap(f"net benefit ({arms[0]} minus {arms[1]})", AXIS_CHARS)),
            tooltip=[alt.Tooltip("from:Q", format=".3~g"), alt.Tooltip("to:Q", format=".3~g"),
                     alt.Tooltip("net_benefit:Q", format=".3~g"), alt.Tooltip("lo:Q", format=".3~g"),
                     alt.Tooltip("hi:Q", format=".3~g")]))
    chart = sized_chart(alt.layer(*layers), WIDTH, HEIGHT * 0.8)
    desc = (f"Net benefit of {arms[0]} over {arms[1]} by pairwise comparison in {len(df)} windows along {xt}"
            + (f"; whole cohort {fmt(overall['net_benefit'])}" if overall is not None else "") + ": "
            + "; ".join(f"{fmt(r['from'])} to {fmt(r['to'])}: {fmt(r['net_benefit'])}" for r in df.to_dict("records"))
            + ".")
    how = pairwise_interval_words(windows)
    bars = f"; bars: {how}" if how and len(df.dropna(subset=["lo", "hi"])) else ""
    return finish_chart(chart, f"Pairwise comparison along {xt}",
                   "above zero favours " + arms[0] + "; dashed: whole cohort" + bars, desc + (f" {how}." if bars else ""),
                   style)


def _runs(df: pd.DataFrame, flag: str) -> list[tuple[float, float]]:
    """Stretches of x where a boolean column holds, as (from, to)."""
    out, start, prev = [], None, None
    for x, on in zip(df["x"], df[flag]):
        if on and start is None:
            start = x
        if not on and start is not None:
            out.append((start, prev))
            start = None
        prev = x
    if start is not None:
        out.append((start, prev))
    return out


def _difference(v: float | None, probability: bool) -> str:
    """A chosen-minus-randomised difference in words: percentage points for a probability, the measure's own
    units otherwise; 'higher' or 'lower' instead of a sign."""
    if v is None:
        return "open"
    size = fmt(abs(100 * v) if probability else abs(v)) + (" percentage points" if probability else "")
    return "no different" if v == 0 else f"{size} {'higher' if v > 0 else 'lower'}"


def describe_selection(row: Mapping[str, Any]) -> str:
    """A selection row in words: the averaged selection effect (in percentage points where the measure is a
    probability, never a bare signed number) and how the break-even point moves."""
    arm, measure = row.get("arm"), row.get("measure", row.get("outcome"))
    probability = bool(row.get("probability"))
    parts = []
    if row.get("effect") is not None:
        lo, hi = row.get("ci") or [None, None]
        p = row.get("p_value")
        span = (f"interval from {_difference(lo, probability)} to {_difference(hi, probability)}"
                if lo is not None and hi is not None else "interval open")
        parts.append(f"In {arm}, chosen patients' {measure} is {_difference(row['effect'], probability)} than "
                     f"randomised patients' at the same index value, on average over "
                     f"{row.get('effect_over', 'the index')} ({span}" + (f"; p = {fmt(p)}" if p is not None else "")
                     + ").")
    else:
        parts.append(f"In {arm}, the selection effect could not be estimated.")
    est = selection_estimates(row)
    if est:
        parts.append("Break-even points: " + "; ".join(f"{e['estimate']} {fmt(e['x'])}" for e in est) + ".")
    if row.get("shift") is not None:
        lo, hi = row.get("shift_ci") or [None, None]
        ci = (f" (interval from {fmt(lo)} to {fmt(hi)}; a negative value moves it lower)"
              if lo is not None and hi is not None else "")
        way = "higher" if row["shift"] > 0 else "lower"
        parts.append(f"Using all patients instead of the randomised ones moves the break-even point "
                     f"{fmt(abs(row['shift']))} {way} along the index{ci}.")
    return " ".join(parts)


def coverage_frame(coverage: Sequence[Mapping[str, Any]], arms: Sequence[str]) -> pd.DataFrame:
    """Patients per window of the index by arm and allocation, with the windows short of randomised patients."""
    recs = [{"from": c["from"], "to": c["to"],
             **{f"{a} randomised": c["n"][a]["randomised"] for a in arms},
             **{f"{a} chosen": c["n"][a]["chosen"] for a in arms},
             "few randomised": "yes" if c["sparse"] else ""} for c in coverage]
    return pd.DataFrame(recs, columns=["from", "to", *(f"{a} randomised" for a in arms),
                                       *(f"{a} chosen" for a in arms), "few randomised"])


def _window_label(c: Mapping[str, Any]) -> str:
    return f"{fmt(c['from'])} to {fmt(c['to'])}"


@quick_chart
def coverage_chart(coverage: Sequence[Mapping[str, Any]], arms: Sequence[str], *, index_label: str = "index",
                   style: bool = True) -> alt.TopLevelMixin:
    """Patients per window of the index, side by side per arm, randomised (solid) stacked under chosen (pale);
    windows short of randomised patients are marked."""
    order = [_window_label(c) for c in coverage]
    df = pd.DataFrame([{"window": _window_label(c), "arm": a, "allocation": alloc, "n": c["n"][a][alloc],
                        "sort": 0 if alloc == "randomised" else 1}
                       for c in coverage for a in arms for alloc in ("randomised", "chosen")],
                      columns=["window", "arm", "allocation", "n", "sort"])
    x = alt.X("window:N", sort=order, title=f"{index_label} (windows)", axis=alt.Axis(labelAngle=-40))
    bars = base_chart(df).mark_bar().encode(
        x=x, xOffset=alt.XOffset("arm:N", sort=list(arms)),
        y=alt.Y("n:Q", title="patients", stack="zero"),
        color=alt.Color("arm:N", scale=arm_scale(arms), legend=alt.Legend(title="arm")),
        opacity=alt.Opacity("allocation:N", scale=alt.Scale(domain=list(ALLOCATION_OPACITY),
                                                            range=list(ALLOCATION_OPACITY.values())),
                            legend=alt.Legend(title="patients (solid: randomised)")),
        order=alt.Order("sort:Q"),
        tooltip=[alt.Tooltip("window:N"), alt.Tooltip("arm:N"), alt.Tooltip("allocation:N"),
                 alt.Tooltip("n:Q", title="patients")])
    layers: list[alt.Chart] = [bars]
    few = pd.DataFrame([{"window": _window_label(c), "text": "few randomised"} for c in coverage if c["sparse"]],
                       columns=["window", "text"])
    if len(few):
        layers.append(base_chart(few).mark_text(angle=270, align="right", dy=0, fontSize=FONT["text"] - 3, color=INK)
                      .encode(x=alt.X("window:N", sort=order), y=alt.value(6), text=alt.Text("text:N")))
    chart = sized_chart(alt.layer(*layers), WIDTH, HEIGHT * 0.8)
    return finish_chart(chart, f"Where the randomised patients are along {index_label}",
                   "per window: each arm's randomised patients (solid) under its chosen patients (pale)",
                   describe_coverage(coverage, arms, index_label), style)


def describe_coverage(coverage: Sequence[Mapping[str, Any]], arms: Sequence[str], index_label: str = "index") -> str:
    """Randomised and chosen totals per arm over the windows, and the windows short of randomised patients."""
    if not coverage:
        return f"No randomised patients can be told apart along {index_label}."
    totals = "; ".join(f"{a}: {sum(c['n'][a]['randomised'] for c in coverage)} randomised and "
                       f"{sum(c['n'][a]['chosen'] for c in coverage)} chosen" for a in arms)
    text = (f"Along {index_label}, {len(coverage)} windows from {fmt(coverage[0]['from'])} to "
            f"{fmt(coverage[-1]['to'])} hold {totals}. ")
    sparse = [c for c in coverage if c["sparse"]]
    if sparse:
        text += ("Few randomised patients in " + "; ".join(
            f"{_window_label(c)} (" + ", ".join(f"{a} {c['n'][a]['randomised']}" for a in arms) + ")" for c in sparse)
            + ": there the comparison rests mostly on chosen patients.")
    else:
        text += "Every window holds enough randomised patients of both arms."
    return text

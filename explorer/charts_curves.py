"""Each arm's curve along the index and the difference, with the strip of clear differences and break-even points
beneath each, their sentences and tables, the cohort's spread along an index and the patients drawn beneath."""
from __future__ import annotations

import math
from typing import Any, Mapping, Sequence

import altair as alt
import numpy as np
import pandas as pd

from .charts_common import (ALLOCATION_SHAPES, ALLOCATION_SIZES, ARM_LEGEND, AXIS_CHARS, FONT, HEIGHT, WIDTH, arm_scale,
                            base_chart, finish_chart, quick_chart, sized_chart, index_label_of, thinned, is_discrete, is_probability, measure_title,
                            outcome_title, x_title)
from .look import INK, MUTED, NEUTRAL, OKABE_ITO, PAPER, arm_colours, text_on
from .margins import side_words
from .words import cap, fmt, interval_words, level_span, levels_within, row_bounds, words, wrap


def curve_frame(row: Mapping[str, Any], arms: Sequence[str]) -> pd.DataFrame:
    """Long table of each arm's curve with its band: x, arm, estimate, lower, upper."""
    recs = []
    for p in thinned(row["curve"]):
        for key, arm in (("first", arms[0]), ("second", arms[1])):
            ci = p.get(f"{key}_ci") or [None, None]
            recs.append({"x": p["x"], "arm": arm, "estimate": p[key], "lower": ci[0], "upper": ci[1]})
    return pd.DataFrame(recs, columns=["x", "arm", "estimate", "lower", "upper"])


def difference_frame(row: Mapping[str, Any]) -> pd.DataFrame:
    recs = [{"x": p["x"], "difference": p["difference"], "lower": p["difference_ci"][0],
             "upper": p["difference_ci"][1]} for p in thinned(row["curve"])]
    return pd.DataFrame(recs, columns=["x", "difference", "lower", "upper"])


def _domain(row: Mapping[str, Any]) -> tuple[float, float]:
    """The x extent: the observed range widened to hold every finite break-even point and interval end."""
    lo, hi = (float(v) for v in row["range"])
    xs = [b["x"] for b in row["break_even"]]
    xs += [c for b in row["break_even"] for c in b["ci"] if c is not None]
    span = hi - lo if hi > lo else 1.0
    reach = 0.15 * span
    xs = [x for x in xs if lo - reach <= x <= hi + reach]
    return min([lo] + xs), max([hi] + xs)


def clear_regions(row: Mapping[str, Any]) -> list[dict]:
    """The row's clear-difference regions cut to the observed index range (the search grid runs a little past it)."""
    lo, hi = (float(v) for v in row["range"])
    out = []
    for r in row.get("clear_difference") or []:
        a, z = max(float(r["from"]), lo), min(float(r["to"]), hi)
        if z >= a:
            out.append({"from": a, "to": z, "favours": r["favours"]})
    return out


def _interval_segments(b: Mapping[str, Any], lo_edge: float, hi_edge: float) -> list[dict]:
    """The drawn pieces of a break-even interval; ends that are open or past the chart edge say so there."""
    lo, hi = b["ci"]
    shape = b.get("interval_shape", "finite")
    if shape == "two_rays":
        pieces = [(None, lo), (hi, None)]
    elif shape == "unbounded" or (lo is None and hi is None):
        pieces = [(None, None)]
    else:
        pieces = [(lo, hi)]
    out = []
    for a, z in pieces:
        left = "open" if a is None else (f"from {fmt(a)}" if a < lo_edge else "")
        right = "open" if z is None else (f"to {fmt(z)}" if z > hi_edge else "")
        a = lo_edge if a is None else max(float(a), lo_edge)
        z = hi_edge if z is None else min(float(z), hi_edge)
        if z >= a:
            out.append({"from": a, "to": z, "left": left, "right": right})
    return out


# The strip beneath the plot: where the difference is clear (coloured by the arm it favours, neutral elsewhere
# within the observed range), then each break-even point as a diamond on its interval. The x axis sits under it.


# The strip beneath the plot: where the difference is clear (coloured by the arm it favours, neutral elsewhere
# within the observed range), then each break-even point as a diamond on its interval. The x axis sits under it.
STRIP_BAND = (8, 30)      # pixels below the plot: the regions band
STRIP_ROW = 52            # pixels below the plot: the first break-even row; further rows STRIP_ROW_STEP lower
STRIP_ROW_STEP = 20
CHAR_PX = 8.2             # a rough width of one character at FONT["text"], for deciding whether words fit


def strip_height(row: Mapping[str, Any]) -> int:
    """The strip's height in pixels (the x axis is offset by this much)."""
    n = len(row.get("break_even") or [])
    return STRIP_ROW + STRIP_ROW_STEP * max(n - 1, 0) + (14 if n else -8)


def strip_segments(row: Mapping[str, Any]) -> list[dict]:
    """The regions band: the observed range cut into clear-difference runs (favouring an arm) and the rest."""
    lo, hi = (float(v) for v in row["range"])
    out, at = [], lo
    for r in sorted(clear_regions(row), key=lambda r: r["from"]):
        if r["from"] > at:
            out.append({"from": at, "to": r["from"], "favours": None})
        out.append({"from": r["from"], "to": r["to"], "favours": r["favours"]})
        at = max(at, r["to"])
    if hi > at:
        out.append({"from": at, "to": hi, "favours": None})
    return out


def _strip_layers(row: Mapping[str, Any], arms: Sequence[str], domain: tuple[float, float]) -> list[alt.Chart]:
    segs = strip_segments(row)
    margin = float(row.get("margin") or 0.0)
    colours = arm_colours(arms)
    px = WIDTH / max(domain[1] - domain[0], 1e-12)
    recs = []
    for s in segs:
        fill = colours[s["favours"]] if s["favours"] else NEUTRAL
        words_ = ("no clear difference" if not s["favours"] else side_words(s["favours"], arms, margin) if margin
                  else f"favours {s['favours']}")
        fits = (s["to"] - s["from"]) * px > CHAR_PX * len(words_) + 8
        recs.append({"from": s["from"], "to": s["to"], "mid": (s["from"] + s["to"]) / 2, "fill": fill,
                     "ink": text_on(fill), "region": words_, "words": words_ if fits else ""})
    df = pd.DataFrame(recs)
    y0, y1 = HEIGHT + STRIP_BAND[0], HEIGHT + STRIP_BAND[1]
    layers = [base_chart(df).mark_rect(stroke=PAPER, strokeWidth=1).encode(
        x=alt.X("from:Q"), x2=alt.X2("to"), y=alt.value(y0), y2=alt.value(y1),
        fill=alt.Fill("fill:N", scale=None),
        tooltip=[alt.Tooltip("region:N", title="difference"), alt.Tooltip("from:Q", format=".3~g"),
                 alt.Tooltip("to:Q", format=".3~g")])]
    for ink, part in df[df["words"] != ""].groupby("ink"):
        layers.append(base_chart(part).mark_text(fontSize=FONT["text"] - 1, color=ink, baseline="middle").encode(
            x=alt.X("mid:Q"), y=alt.value((y0 + y1) / 2), text=alt.Text("words:N")))
    return layers + _break_even_layers(row, domain)


def _break_even_layers(row: Mapping[str, Any], domain: tuple[float, float]) -> list[alt.Chart]:
    """A hairline through the plot at each break-even point; on the strip, the point, its interval and words."""
    bes = row.get("break_even") or []
    if not bes:
        return []
    dash = alt.StrokeDash("line:N", scale=alt.Scale(domain=["within the observed range", "extrapolated"],
                                                    range=[[1, 0], [7, 5]]),
                          legend=alt.Legend(title="break-even", symbolStrokeWidth=3, symbolStrokeColor=INK))
    marks, segs, arrows = [], [], []
    for k, b in enumerate(bes):
        line = "extrapolated" if b.get("extrapolated") else "within the observed range"
        label = f"break-even {fmt(b['x'])}" + (" (extrapolated)" if b.get("extrapolated") else "")
        y = HEIGHT + STRIP_ROW + STRIP_ROW_STEP * k
        marks.append({"x": b["x"], "line": line, "label": label, "interval": interval_words(b, row_bounds(row)), "y": y})
        for s in _interval_segments(b, *domain):
            s.update(y=y, line=line)
            segs.append(s)
            if s["left"]:
                arrows.append({"x": s["from"], "shape": "triangle-left", "text": s["left"], "y": y, "align": "left"})
            if s["right"]:
                arrows.append({"x": s["to"], "shape": "triangle-right", "text": s["right"], "y": y,
                               "align": "right"})
    mdf, sdf = pd.DataFrame(marks), pd.DataFrame(segs)
    tip = [alt.Tooltip("label:N", title="break-even"), alt.Tooltip("interval:N", title="interval")]
    layers = [
        base_chart(mdf).mark_rule(color=INK, strokeWidth=1.5, opacity=0.8).encode(
            x=alt.X("x:Q"), y=alt.value(0), y2=alt.value(HEIGHT + STRIP_BAND[1]), strokeDash=dash, tooltip=tip),
    ]
    if len(sdf):
        layers.append(base_chart(sdf).mark_rule(color=INK, strokeWidth=3).encode(
            x=alt.X("from:Q"), x2=alt.X2("to"), y=alt.Y("y:Q", scale=None), strokeDash=dash))
        ends = pd.concat([sdf.assign(end=sdf["from"])[sdf["left"] == ""], sdf.assign(end=sdf["to"])[sdf["right"] == ""]])
        if len(ends):
            layers.append(base_chart(ends).mark_tick(color=INK, thickness=2, size=12, orient="vertical").encode(
                x=alt.X("end:Q"), y=alt.Y("y:Q", scale=None)))
    layers.append(base_chart(mdf).mark_point(shape="diamond", filled=True, size=170, color=INK, opacity=1,
                                         stroke=PAPER, strokeWidth=1.5).encode(
        x=alt.X("x:Q"), y=alt.Y("y:Q", scale=None), tooltip=tip))
    mdf["side"] = ["right" if x > domain[0] + 0.6 * (domain[1] - domain[0]) else "left" for x in mdf["x"]]
    for side, part in mdf.groupby("side"):  # words on the roomier side of the diamond
        layers.append(base_chart(part).mark_text(align=side, dx=-9 if side == "right" else 9, dy=-7,
                                             fontSize=FONT["text"] - 1, color=INK, baseline="bottom",
                                             fontWeight="bold").encode(
            x=alt.X("x:Q"), y=alt.Y("y:Q", scale=None), text=alt.Text("label:N")))
    if arrows:
        adf = pd.DataFrame(arrows)
        layers.append(base_chart(adf).mark_point(filled=True, size=110, color=INK, opacity=1).encode(
            x=alt.X("x:Q"), y=alt.Y("y:Q", scale=None), shape=alt.Shape("shape:N", scale=None)))
        for side, dx in (("left", 6), ("right", -6)):
            part = adf[adf["align"] == side]
            if len(part):
                layers.append(base_chart(part).mark_text(fontSize=FONT["text"] - 3, color=MUTED, dy=12, dx=dx,
                                                        align=side).encode(
                    x=alt.X("x:Q"), y=alt.Y("y:Q", scale=None), text=alt.Text("text:N")))
    return layers


def patient_layers(patient: Mapping[str, Any] | None) -> list[alt.Chart]:
    if not patient:
        return []
    x = patient.get("x", patient.get("value"))
    if x is None:
        return []
    label = str(patient.get("label") or f"this patient ({fmt(x)})")
    df = pd.DataFrame([{"x": float(x), "label": label}])
    return [base_chart(df).mark_rule(color=OKABE_ITO["black"], strokeWidth=3, strokeDash=[2, 3]).encode(
                x=alt.X("x:Q"), tooltip=[alt.Tooltip("label:N", title="patient")]),
            base_chart(df).mark_text(align="left", dx=6, fontSize=FONT["text"], fontWeight="bold", color="#000000")
            .encode(x=alt.X("x:Q"), y=alt.value(40), text=alt.Text("label:N"))]


def _points_layers(points: pd.DataFrame | None, arms: Sequence[str]) -> list[alt.Chart]:
    """Patients beneath the curves: colour by arm, randomised as triangles and chosen as small circles."""
    if points is None or len(points) == 0:
        return []
    df = points.loc[:, [c for c in ("x", "y", "arm", "allocation") if c in points.columns]].copy()
    if "allocation" not in df.columns:  # allocation unknown: plain small dots, no randomised/chosen legend
        return [base_chart(df).mark_point(filled=True, opacity=0.35, strokeWidth=0, size=ALLOCATION_SIZES["chosen"])
                .encode(x=alt.X("x:Q"), y=alt.Y("y:Q"),
                        color=alt.Color("arm:N", scale=arm_scale(arms), legend=ARM_LEGEND))]
    domain = list(ALLOCATION_SHAPES)
    shape = alt.Shape("allocation:N", scale=alt.Scale(domain=domain, range=[ALLOCATION_SHAPES[d] for d in domain]),
                      legend=alt.Legend(title="patients", symbolFillColor="#666666", symbolStrokeColor="#666666",
                                        symbolOpacity=0.9))
    out = []
    for allocation in domain:
        part = df[df["allocation"] == allocation]
        if len(part):
            out.append(base_chart(part).mark_point(filled=True, opacity=0.35, strokeWidth=0,
                                               size=ALLOCATION_SIZES[allocation]).encode(
                x=alt.X("x:Q"), y=alt.Y("y:Q"), color=alt.Color("arm:N", scale=arm_scale(arms), legend=ARM_LEGEND),
                shape=shape))
    return out


@quick_chart
def outcome_chart(row: Mapping[str, Any], arms: Sequence[str], points: pd.DataFrame | None = None,
                  patient: Mapping[str, Any] | None = None, *, index_label: str | None = None,
                  style: bool = True) -> alt.TopLevelMixin:
    """Each arm's curve with its band along the index, patients beneath, break-even markers on top.

    points: columns x, y, arm and (optionally) allocation ("randomised" | "chosen").
    patient: {"x": value, "label": optional words} draws a rule at the patient's index value.
    """
    domain = _domain(row)
    cf = curve_frame(row, arms)
    yscale = alt.Scale(domain=[0, 1]) if is_probability(row) else alt.Scale(zero=False)
    ytitle = measure_title(row)
    colour = alt.Color("arm:N", scale=arm_scale(arms), legend=ARM_LEGEND)
    layers: list[alt.Chart] = []
    layers += _points_layers(points, arms)
    if cf["lower"].notna().any():
        layers.append(base_chart(cf).mark_area(opacity=0.2).encode(
            x=_x_axis(row, index_label), y=alt.Y("lower:Q", scale=yscale, title=wrap(ytitle, AXIS_CHARS)), y2=alt.Y2("upper"), color=colour))
    layers.append(base_chart(cf).mark_line(strokeWidth=3.5).encode(
        x=_x_axis(row, index_label),
        y=alt.Y("estimate:Q", scale=yscale, title=wrap(ytitle, AXIS_CHARS)), color=colour,
        tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("x:Q", format=".3~g", title="index"),
                 alt.Tooltip("estimate:Q", format=".3~g"), alt.Tooltip("lower:Q", format=".3~g"),
                 alt.Tooltip("upper:Q", format=".3~g")]))
    layers += _strip_layers(row, arms, domain)
    layers += patient_layers(patient)
    chart = sized_chart(alt.layer(*layers), WIDTH, HEIGHT)
    title = f"{cap(outcome_title(row))} along {index_label_of(row, index_label)}"
    subtitle = (f"{arms[0]} (blue) and {arms[1]} (orange), each with its interval as a band; the strip beneath "
                "shows where the difference is clear and the break-even point on its interval")
    return finish_chart(chart, title, subtitle, describe_row(row, arms, index_label), style)


def _x_axis(row: Mapping[str, Any], override: str | None = None) -> alt.X:
    offset = strip_height(row)
    axis = alt.Axis(tickMinStep=1, format="d", offset=offset) if is_discrete(row) else alt.Axis(offset=offset)
    return alt.X("x:Q", scale=alt.Scale(domain=list(_domain(row)), nice=False, zero=False),
                 title=x_title(row, override), axis=axis)


@quick_chart
def difference_chart(row: Mapping[str, Any], arms: Sequence[str], *, margin: float = 0.0,
                     index_label: str | None = None, style: bool = True) -> alt.TopLevelMixin:
    """The difference (first minus second, oriented so above zero favours the first arm) with its band; the row's
    own margin (results rows carry it) wins over the `margin` passed."""
    margin = float(row["margin"]) if row.get("margin") is not None else margin
    domain = _domain(row)
    df = difference_frame(row)
    ytitle = f"{arms[0]} minus {arms[1]}"
    if not row.get("higher_is_better", True):
        ytitle += " (sign flipped: lower is better)"
    layers: list[alt.Chart] = []
    layers.append(base_chart(df).mark_area(opacity=0.25, color=INK).encode(
        x=_x_axis(row, index_label), y=alt.Y("lower:Q", title=wrap(ytitle, AXIS_CHARS)), y2=alt.Y2("upper")))
    refs = pd.DataFrame([{"y": 0.0, "label": "no difference", "dash": False}]
                        + ([{"y": float(margin), "label": f"margin {fmt(margin)}", "dash": True}] if margin else []))
    for dashed, part in refs.groupby("dash"):
        rule = base_chart(part).mark_rule(color=INK, strokeWidth=2, strokeDash=[6, 4] if dashed else [1, 0])
        layers.append(rule.encode(y=alt.Y("y:Q")))
        layers.append(base_chart(part).mark_text(align="right", dy=-8, fontSize=FONT["text"], color=INK).encode(
            y=alt.Y("y:Q"), x=alt.value(WIDTH - 4), text=alt.Text("label:N")))
    layers.append(base_chart(df).mark_line(strokeWidth=3.5, color=OKABE_ITO["black"]).encode(
        x=alt.X("x:Q"), y=alt.Y("difference:Q"),
        tooltip=[alt.Tooltip("x:Q", format=".3~g", title="index"), alt.Tooltip("difference:Q", format=".3~g"),
                 alt.Tooltip("lower:Q", format=".3~g"), alt.Tooltip("upper:Q", format=".3~g")]))
    layers += _strip_layers(row, arms, domain)
    chart = sized_chart(alt.layer(*layers), WIDTH, HEIGHT)
    band = row.get("regions_band", "pointwise")
    title = f"Difference in {outcome_title(row)} along {index_label_of(row, index_label)}"
    subtitle = (f"above zero favours {arms[0]}, below favours {arms[1]}; grey band: {band} interval; the strip "
                "beneath shows where the difference is clear")
    return finish_chart(chart, title, subtitle, describe_row(row, arms, index_label, margin=margin), style)


@quick_chart
def composite_chart(row: Mapping[str, Any], arms: Sequence[str], points: pd.DataFrame | None = None,
                    patient: Mapping[str, Any] | None = None, *, index_label: str | None = None,
                    style: bool = True) -> alt.TopLevelMixin:
    """The expected value of the stated weights under each arm, drawn like an outcome."""
    chart = outcome_chart(row, arms, points, patient, index_label=index_label, style=False)
    weights = row.get("weights") or {}
    who = row.get("whose")
    sub = "weights: " + ", ".join(f"{words(k)} {fmt(v)}" for k, v in weights.items()) if weights else None
    if who:
        sub = f"{sub} ({who}'s values)" if sub else f"{who}'s values"
    what = row.get("label") or f"Value of outcomes ({words(row.get('kind', 'composite'))})"
    title = f"{what} along {index_label_of(row, index_label)}"
    return finish_chart(chart, title, [sub] if sub else None, describe_row(row, arms, index_label), style)


def _break_even_words(b: Mapping[str, Any], discrete: bool, margin: float, arms: Sequence[str] = (),
                      bounds: Any = None) -> str:
    x = float(b["x"])
    meet = "break even" if not margin else "differ by the margin"
    lo_w, hi_w = (side_words(b["favours_below"], arms, margin), side_words(b.get("favours_above"), arms, margin))
    fav = "" if margin else " is favoured"
    if discrete:
        below, above = math.floor(x), math.ceil(x)
        if below == above:
            place = f"the arms {meet} at level {below}"
            sides = f"below it {lo_w}{fav}, above it {hi_w}"
        else:
            place = f"the arms {meet} between levels {below} and {above} (at {fmt(x)})"
            sides = f"at levels up to {below} {lo_w}{fav}, from level {above} {hi_w}"
    else:
        place = f"the arms {meet} at {fmt(x)}"
        sides = f"below it {lo_w}{fav}, above it {hi_w}"
    extra = "; this lies beyond the observed range, an extrapolation" if b.get("extrapolated") else ""
    return f"{place} (interval {interval_words(b, bounds)}){extra}; {sides}"


def _region_words(r: Mapping[str, Any], discrete: bool, arms: Sequence[str] = (), margin: float = 0.0) -> str:
    who = f"favouring {r['favours']}" if not margin else f"where {side_words(r['favours'], arms, margin)}"
    if discrete:
        levels = levels_within(float(r["from"]), float(r["to"]))
        if levels is None:
            return f"between {fmt(r['from'])} and {fmt(r['to'])}, at no whole level, {who}"
        return f"at {level_span(*levels)}, {who}"
    return f"from {fmt(r['from'])} to {fmt(r['to'])}, {who}"


def describe_row(row: Mapping[str, Any], arms: Sequence[str], index_label: str | None = None, *,
                 margin: float = 0.0) -> str:
    """The chart in words: where the arms break even, the interval, who is favoured where, where it is clear.
    The row's own margin (results rows carry it) wins over the `margin` passed."""
    margin = float(row["margin"]) if row.get("margin") is not None else margin
    label = index_label_of(row, index_label)
    discrete = is_discrete(row)
    lo, hi = row["range"]
    named = "" if outcome_title(row) == row.get("measure") else f" ({outcome_title(row)})"
    head = f"{measure_title(row)}{named} along {label}, {arms[0]} against {arms[1]}: "
    bes = row.get("break_even") or []
    if bes:
        body = "; and ".join(_break_even_words(b, discrete, margin, arms, row_bounds(row)) for b in bes) + "."
    else:
        fav = side_words(row.get("favours_throughout"), arms, margin)
        span = level_span(*levels_within(lo, hi)) if discrete and levels_within(lo, hi) else \
            f"{fmt(lo)} to {fmt(hi)}"
        body = (f"{fav}{'' if margin else ' is favoured'} throughout the observed range ({span}); the arms do not "
                f"{'break even' if not margin else 'differ by the margin'} there.")
    none = "no difference" if not margin else "the margin"
    regions = clear_regions(row)
    if regions:
        clear = (" The difference is clear " + "; and ".join(_region_words(r, discrete, arms, margin) for r in regions)
                 + f"; elsewhere its interval includes {none}.")
    else:
        clear = f" Nowhere in the observed range is the difference clear: its interval includes {none} throughout."
    about = (row.get("index_info") or {}).get("about")
    return head + body + clear + (f" {about}" if about else "")


def _row_interval(b: Mapping[str, Any], bounds: Any = None) -> str:
    text = interval_words(b, bounds)
    if b.get("coverage") is not None:
        n = f" of {b['coverage_n']:,} patients" if b.get("coverage_n") else ""
        text += f" (covered the truth in {100 * b['coverage']:.1f}% of simulated cohorts{n})"
    if b.get("no_root_share"):
        text += f", {fmt(100 * b['no_root_share'])}% of replicates without a root"
    return text


def breakeven_table(doc: Mapping[str, Any]) -> pd.DataFrame:
    """One row per outcome x index (and composite): break-even, interval, favoured sides, clear regions."""
    recs = []
    for row in list(doc.get("results", [])) + list(doc.get("composite", [])):
        name = outcome_title(row) + (" (composite)" if "weights" in row else "")
        arms, m = doc.get("arms") or (), float(row.get("margin") or 0.0)
        bes = row.get("break_even") or []
        if bes:
            be_txt = "; ".join(fmt(b["x"]) + (" (extrapolated)" if b.get("extrapolated") else "") for b in bes)
            interval = "; ".join(_row_interval(b, row_bounds(row)) for b in bes)
            below = "; ".join(side_words(b["favours_below"], arms, m) for b in bes)
            above = "; ".join(side_words(b.get("favours_above", ""), arms, m) for b in bes)
        else:
            be_txt, interval = "none in range", ""
            below = above = f"{side_words(row.get('favours_throughout'), arms, m)} throughout"
        clear = "; ".join(_region_words(r, is_discrete(row), arms, m) for r in clear_regions(row)) or "none"
        recs.append({"outcome": name, "index": index_label_of(row), "break-even": be_txt, "interval": interval,
                     "favoured below": below, "favoured above": above, "clear difference": clear,
                     "measure": row["measure"]})
    return pd.DataFrame(recs, columns=["outcome", "index", "break-even", "interval", "favoured below",
                                       "favoured above", "clear difference", "measure"])


def curve_table(row: Mapping[str, Any], arms: Sequence[str], every: int = 1) -> pd.DataFrame:
    """The numbers behind an outcome chart: each arm's estimate and interval and the difference."""
    recs = []
    for p in row["curve"][::max(1, every)]:
        fc, sc = p.get("first_ci") or [None, None], p.get("second_ci") or [None, None]
        recs.append({"index": p["x"], f"{arms[0]}": p["first"], f"{arms[0]} lower": fc[0],
                     f"{arms[0]} upper": fc[1], f"{arms[1]}": p["second"], f"{arms[1]} lower": sc[0],
                     f"{arms[1]} upper": sc[1], "difference": p["difference"],
                     "difference lower": p["difference_ci"][0], "difference upper": p["difference_ci"][1]})
    return pd.DataFrame(recs)


@quick_chart
def index_distribution_chart(data: pd.DataFrame | Sequence[float] | np.ndarray, *, arms: Sequence[str] | None = None,
                             label: str = "index", discrete: bool | None = None, patient_x: float | None = None,
                             style: bool = True) -> alt.TopLevelMixin:
    """How the cohort spreads along an index, stacked by arm when the arm is known.

    data: values, or a frame with column x (or value) and optionally arm.
    """
    if isinstance(data, pd.DataFrame):
        df = data.rename(columns={"value": "x"}).copy()
    else:
        df = pd.DataFrame({"x": np.asarray(data, float)})
    df = df[np.isfinite(df["x"].astype(float))]
    if discrete is None:
        discrete = bool(len(df)) and bool(np.all(np.equal(np.mod(df["x"], 1), 0))) and df["x"].nunique() <= 15
    has_arm = "arm" in df.columns and arms is not None
    n = len(df)
    # counted here, not in the browser: a chart of a large cohort carries a few hundred rows, never one per patient
    if not discrete and n:
        lo, hi = float(df["x"].min()), float(df["x"].max())
        step = (hi - lo) / 1000 or 1.0
        df = df.assign(x=lo + np.round((df["x"].astype(float) - lo) / step) * step)
    counts = df.groupby(["x", "arm"] if has_arm else ["x"], observed=True).size().rename("patients").reset_index()
    colour = (alt.Color("arm:N", scale=arm_scale(arms), legend=alt.Legend(title="arm")) if has_arm
              else alt.value(INK))
    xenc = (alt.X("x:O", title=label) if discrete else alt.X("x:Q", bin=alt.Bin(maxbins=30), title=label))
    base = base_chart(counts).mark_bar(opacity=0.85).encode(
        x=xenc, y=alt.Y("sum(patients):Q", title="patients", stack=True), color=colour,
        tooltip=[alt.Tooltip("sum(patients):Q", title="patients")] + ([alt.Tooltip("arm:N")] if has_arm else []))
    layers: list[alt.Chart] = [base]
    if patient_x is not None:
        pdf = pd.DataFrame([{"x": float(patient_x), "label": f"this patient ({fmt(patient_x)})"}])
        xr = alt.X("x:O") if discrete else alt.X("x:Q")
        layers.append(base_chart(pdf).mark_rule(color="#000000", strokeWidth=3, strokeDash=[2, 3]).encode(x=xr))
    chart = sized_chart(alt.layer(*layers), WIDTH, HEIGHT * 0.7)
    desc = (f"Histogram of {label} over {n} patients"
            + (f", from {fmt(df['x'].min())} to {fmt(df['x'].max())}" if n else "") + ".")
    return finish_chart(chart, f"{label}: how the cohort is spread", f"{n} patients", desc, style)

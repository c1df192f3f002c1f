"""Altair chart builders shared by the app and the report, all drawn from results-JSON rows.

One colour per arm everywhere (Okabe & Ito 2008, never green against red), outcome states in the
remaining Okabe-Ito colours, randomised and chosen patients told apart by marker shape, and every
chart titled, described for screen readers and sized for a projector.
"""
from __future__ import annotations

import math
import re
import textwrap
import threading
from functools import lru_cache, wraps
from typing import Any, Callable, Iterable, Mapping, Sequence

import altair as alt
import numpy as np
import pandas as pd
from altair.utils import schemapi

# Okabe M, Ito K (2008). Color Universal Design: how to make figures and presentations friendly to colorblind people.
OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9", "bluish_green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00", "reddish_purple": "#CC79A7",
}
ARM_COLOURS = (OKABE_ITO["blue"], OKABE_ITO["orange"])
STATE_COLOURS = (OKABE_ITO["bluish_green"], OKABE_ITO["sky_blue"], OKABE_ITO["yellow"], OKABE_ITO["reddish_purple"],
                 OKABE_ITO["vermillion"])
DEATH_COLOUR = OKABE_ITO["black"]
INK = "#333333"
ALLOCATION_SHAPES = {"randomised": "triangle-up", "chosen": "circle"}
ALLOCATION_SIZES = {"randomised": 70, "chosen": 22}
# A person: round head over a body with shoulders, in Vega's [-1, 1] symbol box.
PERSON = ("M -0.32,-0.68 a 0.32,0.32 0 1,0 0.64,0 a 0.32,0.32 0 1,0 -0.64,0 Z "
          "M -0.55,-0.22 L 0.55,-0.22 L 0.55,0.45 L 0.3,0.45 L 0.3,1 L -0.3,1 L -0.3,0.45 L -0.55,0.45 Z")
WIDTH, HEIGHT = 640, 360
TITLE_CHARS, AXIS_CHARS = 58, 38
FONT = {"title": 22, "subtitle": 16, "axis_title": 18, "axis_label": 16, "legend_title": 16, "legend_label": 15,
        "text": 15}
ARM_LEGEND = alt.Legend(title="arm", symbolType="stroke", symbolStrokeWidth=5, symbolOpacity=1)
DEATH_WORDS = ("dead", "death", "died", "deceased")
METHOD_WORDS = {"fieller": "Fieller", "delta": "delta method", "bootstrap-percentile": "bootstrap percentile"}


# ------------------------------------------------------------------------------------------
# Colours, numbers and small helpers
# ------------------------------------------------------------------------------------------
def arm_colours(arms: Sequence[str]) -> dict[str, str]:
    """The first arm blue, the second orange (Okabe-Ito), the same in every chart and export."""
    if len(arms) != 2 or arms[0] == arms[1]:
        raise ValueError("arm_colours needs exactly two different arm labels")
    return {arms[0]: ARM_COLOURS[0], arms[1]: ARM_COLOURS[1]}


def state_colours(levels: Sequence[str]) -> dict[str, str]:
    """Outcome-state colours from the Okabe-Ito colours the arms do not use; death in black."""
    out: dict[str, str] = {}
    k = 0
    for level in levels:
        if str(level).lower() in DEATH_WORDS:
            out[level] = DEATH_COLOUR
        else:
            out[level] = STATE_COLOURS[k % len(STATE_COLOURS)]
            k += 1
    return out


def fmt(v: float | None) -> str:
    """A number as people read it: three significant figures, no exponent, no trailing zeros."""
    if v is None or not np.isfinite(v):
        return "open"
    v = float(v)
    if v == 0:
        return "0"
    decimals = min(6, max(0, 2 - int(math.floor(math.log10(abs(v))))))
    s = f"{v:.{decimals}f}"
    if "." in s:
        s = s.rstrip("0").rstrip(".")
    return "0" if s in ("-0", "") else s


def wrap(text: str, width: int) -> str | list[str]:
    """Long titles as lines (Vega-Lite draws a list of strings as a multi-line title)."""
    lines = textwrap.wrap(text, width)
    return text if len(lines) <= 1 else lines


def words(name: str) -> str:
    """A level or column name as plain words (underscores to spaces)."""
    return str(name).replace("_", " ")


def index_label_of(row: Mapping[str, Any], override: str | None = None) -> str:
    """The index's readable name: the caller's override, its label, or its name."""
    info = row.get("index_info") or {}
    return override or info.get("label") or row["index"]


def is_discrete(row: Mapping[str, Any]) -> bool:
    return bool((row.get("index_info") or {}).get("discrete"))


def is_probability(row: Mapping[str, Any]) -> bool:
    """Whether the row's measure is a probability (so its axis runs from 0 to 1)."""
    if "weights" in row:
        return False
    return str(row.get("measure", "")).startswith("probability")


def _x_title(row: Mapping[str, Any], override: str | None = None) -> str:
    info = row.get("index_info") or {}
    units = info.get("units")
    label = index_label_of(row, override)
    return f"{label} ({units})" if units else label


def _domain(row: Mapping[str, Any]) -> tuple[float, float]:
    """The x extent: the observed range widened to hold every finite break-even point and interval end."""
    lo, hi = (float(v) for v in row["range"])
    xs = [b["x"] for b in row["break_even"]]
    xs += [c for b in row["break_even"] for c in b["ci"] if c is not None]
    span = hi - lo if hi > lo else 1.0
    reach = 0.15 * span
    xs = [x for x in xs if lo - reach <= x <= hi + reach]
    return min([lo] + xs), max([hi] + xs)


def projector_config() -> alt.Config:
    """Projector-sized fonts and a plain look."""
    return alt.Config(
        axis=alt.AxisConfig(labelFontSize=FONT["axis_label"], titleFontSize=FONT["axis_title"], grid=True,
                            gridOpacity=0.4),
        legend=alt.LegendConfig(labelFontSize=FONT["legend_label"], titleFontSize=FONT["legend_title"],
                                orient="bottom", direction="vertical", labelLimit=420, titleLimit=420,
                                symbolSize=160),
        title=alt.TitleConfig(fontSize=FONT["title"], subtitleFontSize=FONT["subtitle"], anchor="start",
                              subtitleColor=INK),
        view=alt.ViewConfig(stroke=None))


def styled(chart: alt.TopLevelMixin) -> alt.TopLevelMixin:
    """Apply the projector look; once, at the top level (a styled chart cannot be layered or concatenated)."""
    chart.config = projector_config()
    return chart


def _finish(chart: alt.TopLevelMixin, title: str, subtitle: str | list[str] | None, description: str,
            style: bool) -> alt.TopLevelMixin:
    """Title, accessible description and (optionally) the projector look, set in place on a fresh chart."""
    if title:
        if isinstance(subtitle, str):
            subtitle = wrap(subtitle, TITLE_CHARS + 20)
        chart.title = (alt.TitleParams(wrap(title, TITLE_CHARS), subtitle=subtitle) if subtitle
                       else alt.TitleParams(wrap(title, TITLE_CHARS)))
    chart.description = description
    return styled(chart) if style else chart


_QUIET = threading.Lock()
_quiet_depth = 0
_saved_debug = True


def _quick(fn: Callable) -> Callable:
    """Build without Altair's per-object validation (specs are validated whole by to_dict when wanted).

    Altair keeps the switch in a module global; a counter under a lock restores it only when the last of
    several concurrent builds (app sessions run in threads) has finished.
    """
    @wraps(fn)
    def run(*args: Any, **kwargs: Any) -> Any:
        global _quiet_depth, _saved_debug
        with _QUIET:
            if _quiet_depth == 0:
                _saved_debug = schemapi.DEBUG_MODE
                schemapi.DEBUG_MODE = False
            _quiet_depth += 1
        try:
            return fn(*args, **kwargs)
        finally:
            with _QUIET:
                _quiet_depth -= 1
                if _quiet_depth == 0:
                    schemapi.DEBUG_MODE = _saved_debug
    return run


def _chart(data: pd.DataFrame) -> alt.Chart:
    """A chart over inline records (much faster to build and serialise than Altair's frame handling)."""
    recs = [{k: (None if isinstance(v, float) and not math.isfinite(v) else _native(v)) for k, v in r.items()}
            for r in data.to_dict("records")]
    return alt.Chart(alt.InlineData(values=recs))


def _native(v: Any) -> Any:
    return v.item() if isinstance(v, np.generic) else v


def _sized(chart: alt.TopLevelMixin, width: float, height: float) -> alt.TopLevelMixin:
    chart.width, chart.height = width, height
    return chart


def _arm_scale(arms: Sequence[str]) -> alt.Scale:
    c = arm_colours(arms)
    return alt.Scale(domain=list(arms), range=[c[a] for a in arms])


# ------------------------------------------------------------------------------------------
# Curves, break-even markers, shading
# ------------------------------------------------------------------------------------------
def curve_frame(row: Mapping[str, Any], arms: Sequence[str]) -> pd.DataFrame:
    """Long table of each arm's curve with its band: x, arm, estimate, lower, upper."""
    recs = []
    for p in row["curve"]:
        for key, arm in (("first", arms[0]), ("second", arms[1])):
            ci = p.get(f"{key}_ci") or [None, None]
            recs.append({"x": p["x"], "arm": arm, "estimate": p[key], "lower": ci[0], "upper": ci[1]})
    return pd.DataFrame(recs, columns=["x", "arm", "estimate", "lower", "upper"])


def difference_frame(row: Mapping[str, Any]) -> pd.DataFrame:
    recs = [{"x": p["x"], "difference": p["difference"], "lower": p["difference_ci"][0],
             "upper": p["difference_ci"][1]} for p in row["curve"]]
    return pd.DataFrame(recs, columns=["x", "difference", "lower", "upper"])


def _region_label(arm: str) -> str:
    return f"clear difference, favours {arm}"


def clear_regions(row: Mapping[str, Any]) -> list[dict]:
    """The row's clear-difference regions cut to the observed index range (the search grid runs a little past it)."""
    lo, hi = (float(v) for v in row["range"])
    out = []
    for r in row.get("clear_difference") or []:
        a, z = max(float(r["from"]), lo), min(float(r["to"]), hi)
        if z >= a:
            out.append({"from": a, "to": z, "favours": r["favours"]})
    return out


def _shading(row: Mapping[str, Any], arms: Sequence[str]) -> alt.Chart | None:
    regions = clear_regions(row)
    if not regions:
        return None
    c = arm_colours(arms)
    df = pd.DataFrame([{"from": r["from"], "to": r["to"], "region": _region_label(r["favours"])} for r in regions])
    labels = [_region_label(a) for a in arms]
    return _chart(df).mark_rect(opacity=0.13).encode(
        x=alt.X("from:Q"), x2=alt.X2("to"),
        fill=alt.Fill("region:N", scale=alt.Scale(domain=labels, range=[c[a] for a in arms]),
                      legend=alt.Legend(title="shaded", symbolOpacity=0.35)),
        tooltip=[alt.Tooltip("region:N", title="region"), alt.Tooltip("from:Q", format=".3~g"),
                 alt.Tooltip("to:Q", format=".3~g")])


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


def _break_even_layers(row: Mapping[str, Any], domain: tuple[float, float]) -> list[alt.Chart]:
    bes = row.get("break_even") or []
    if not bes:
        return []
    dash = alt.StrokeDash("line:N", scale=alt.Scale(domain=["within the observed range", "extrapolated"],
                                                    range=[[1, 0], [7, 5]]),
                          legend=alt.Legend(title="break-even", symbolStrokeWidth=3))
    marks, segs, arrows = [], [], []
    for k, b in enumerate(bes):
        line = "extrapolated" if b.get("extrapolated") else "within the observed range"
        label = f"break-even {fmt(b['x'])}" + (" (extrapolated)" if b.get("extrapolated") else "")
        marks.append({"x": b["x"], "line": line, "label": label, "interval": _interval_words(b), "row": k})
        for s in _interval_segments(b, *domain):
            s.update(row=k, line=line)
            segs.append(s)
            if s["left"]:
                arrows.append({"x": s["from"], "shape": "triangle-left", "text": s["left"], "row": k, "align": "left"})
            if s["right"]:
                arrows.append({"x": s["to"], "shape": "triangle-right", "text": s["right"], "row": k,
                               "align": "right"})
    mdf, sdf = pd.DataFrame(marks), pd.DataFrame(segs)
    layers = [
        _chart(mdf).mark_rule(color=INK, strokeWidth=2).encode(
            x=alt.X("x:Q"), strokeDash=dash,
            tooltip=[alt.Tooltip("label:N", title="break-even"), alt.Tooltip("interval:N", title="interval")]),
        _chart(mdf).mark_text(align="left", dx=5, dy=-4, fontSize=FONT["text"], color=INK, baseline="bottom")
        .encode(x=alt.X("x:Q"), y=alt.value(HEIGHT - 4), text=alt.Text("label:N")),
    ]
    if len(sdf):
        sdf["y"] = 10 + 12 * sdf["row"]
        layers.append(_chart(sdf).mark_rule(color=INK, strokeWidth=4).encode(
            x=alt.X("from:Q"), x2=alt.X2("to"), y=alt.Y("y:Q", scale=None), strokeDash=dash))
    if arrows:
        adf = pd.DataFrame(arrows)
        adf["y"] = 10 + 12 * adf["row"]
        layers.append(_chart(adf).mark_point(filled=True, size=120, color=INK, opacity=1).encode(
            x=alt.X("x:Q"), y=alt.Y("y:Q", scale=None), shape=alt.Shape("shape:N", scale=None)))
        for side, dx in (("left", 4), ("right", -4)):
            part = adf[adf["align"] == side]
            if len(part):
                layers.append(_chart(part).mark_text(fontSize=FONT["text"] - 2, color=INK, dy=14, dx=dx,
                                                        align=side).encode(
                    x=alt.X("x:Q"), y=alt.Y("y:Q", scale=None), text=alt.Text("text:N")))
    return layers


def _patient_layers(patient: Mapping[str, Any] | None) -> list[alt.Chart]:
    if not patient:
        return []
    x = patient.get("x", patient.get("value"))
    if x is None:
        return []
    label = str(patient.get("label") or f"this patient ({fmt(x)})")
    df = pd.DataFrame([{"x": float(x), "label": label}])
    return [_chart(df).mark_rule(color=OKABE_ITO["black"], strokeWidth=3, strokeDash=[2, 3]).encode(
                x=alt.X("x:Q"), tooltip=[alt.Tooltip("label:N", title="patient")]),
            _chart(df).mark_text(align="left", dx=6, fontSize=FONT["text"], fontWeight="bold", color="#000000")
            .encode(x=alt.X("x:Q"), y=alt.value(40), text=alt.Text("label:N"))]


def _points_layers(points: pd.DataFrame | None, arms: Sequence[str]) -> list[alt.Chart]:
    """Patients beneath the curves: colour by arm, randomised as triangles and chosen as small circles."""
    if points is None or len(points) == 0:
        return []
    df = points.loc[:, [c for c in ("x", "y", "arm", "allocation") if c in points.columns]].copy()
    if "allocation" not in df.columns:
        df["allocation"] = "randomised"
    domain = list(ALLOCATION_SHAPES)
    shape = alt.Shape("allocation:N", scale=alt.Scale(domain=domain, range=[ALLOCATION_SHAPES[d] for d in domain]),
                      legend=alt.Legend(title="patients", symbolFillColor="#666666", symbolStrokeColor="#666666",
                                        symbolOpacity=0.9))
    out = []
    for allocation in domain:
        part = df[df["allocation"] == allocation]
        if len(part):
            out.append(_chart(part).mark_point(filled=True, opacity=0.35, strokeWidth=0,
                                               size=ALLOCATION_SIZES[allocation]).encode(
                x=alt.X("x:Q"), y=alt.Y("y:Q"), color=alt.Color("arm:N", scale=_arm_scale(arms), legend=ARM_LEGEND),
                shape=shape))
    return out


@_quick
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
    ytitle = _measure_title(row)
    colour = alt.Color("arm:N", scale=_arm_scale(arms), legend=ARM_LEGEND)
    layers: list[alt.Chart] = []
    layers += _points_layers(points, arms)
    shade = _shading(row, arms)
    if shade is not None:
        layers.append(shade)
    if cf["lower"].notna().any():
        layers.append(_chart(cf).mark_area(opacity=0.2).encode(
            x=_x_axis(row, index_label), y=alt.Y("lower:Q", scale=yscale, title=wrap(ytitle, AXIS_CHARS)), y2=alt.Y2("upper"), color=colour))
    layers.append(_chart(cf).mark_line(strokeWidth=3.5).encode(
        x=_x_axis(row, index_label),
        y=alt.Y("estimate:Q", scale=yscale, title=wrap(ytitle, AXIS_CHARS)), color=colour,
        tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("x:Q", format=".3~g", title="index"),
                 alt.Tooltip("estimate:Q", format=".3~g"), alt.Tooltip("lower:Q", format=".3~g"),
                 alt.Tooltip("upper:Q", format=".3~g")]))
    layers += _break_even_layers(row, domain)
    layers += _patient_layers(patient)
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT)
    title = f"{_cap(_outcome_title(row))} along {index_label_of(row, index_label)}"
    subtitle = f"{arms[0]} (blue) and {arms[1]} (orange); shaded bands are each arm's interval"
    return _finish(chart, title, subtitle, describe_row(row, arms, index_label), style)


def _outcome_title(row: Mapping[str, Any]) -> str:
    """The outcome's label when the row carries one, else its measure in words."""
    return str(row.get("label") or row.get("measure") or row["outcome"])


def _cap(text: str) -> str:
    return text[:1].upper() + text[1:]


def _measure_title(row: Mapping[str, Any]) -> str:
    return _cap(str(row.get("measure", "")))


def _x_axis(row: Mapping[str, Any], override: str | None = None) -> alt.X:
    axis = alt.Axis(tickMinStep=1, format="d") if is_discrete(row) else alt.Axis()
    return alt.X("x:Q", scale=alt.Scale(domain=list(_domain(row)), nice=False, zero=False),
                 title=_x_title(row, override), axis=axis)


@_quick
def difference_chart(row: Mapping[str, Any], arms: Sequence[str], *, margin: float = 0.0,
                     index_label: str | None = None, style: bool = True) -> alt.TopLevelMixin:
    """The difference (first minus second, oriented so above zero favours the first arm) with its band."""
    domain = _domain(row)
    df = difference_frame(row)
    ytitle = f"{arms[0]} minus {arms[1]}"
    if not row.get("higher_is_better", True):
        ytitle += " (sign flipped: lower is better)"
    layers: list[alt.Chart] = []
    shade = _shading(row, arms)
    if shade is not None:
        layers.append(shade)
    layers.append(_chart(df).mark_area(opacity=0.25, color=INK).encode(
        x=_x_axis(row, index_label), y=alt.Y("lower:Q", title=wrap(ytitle, AXIS_CHARS)), y2=alt.Y2("upper")))
    refs = pd.DataFrame([{"y": 0.0, "label": "no difference", "dash": False}]
                        + ([{"y": float(margin), "label": f"margin {fmt(margin)}", "dash": True}] if margin else []))
    for dashed, part in refs.groupby("dash"):
        rule = _chart(part).mark_rule(color=INK, strokeWidth=2, strokeDash=[6, 4] if dashed else [1, 0])
        layers.append(rule.encode(y=alt.Y("y:Q")))
        layers.append(_chart(part).mark_text(align="right", dy=-8, fontSize=FONT["text"], color=INK).encode(
            y=alt.Y("y:Q"), x=alt.value(WIDTH - 4), text=alt.Text("label:N")))
    layers.append(_chart(df).mark_line(strokeWidth=3.5, color=OKABE_ITO["black"]).encode(
        x=alt.X("x:Q"), y=alt.Y("difference:Q"),
        tooltip=[alt.Tooltip("x:Q", format=".3~g", title="index"), alt.Tooltip("difference:Q", format=".3~g"),
                 alt.Tooltip("lower:Q", format=".3~g"), alt.Tooltip("upper:Q", format=".3~g")]))
    layers += _break_even_layers(row, domain)
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT)
    band = row.get("regions_band", "pointwise")
    title = f"Difference in {_outcome_title(row)} along {index_label_of(row, index_label)}"
    subtitle = f"above zero favours {arms[0]}, below favours {arms[1]}; grey band: {band} interval"
    return _finish(chart, title, subtitle, describe_row(row, arms, index_label, margin=margin), style)


@_quick
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
    title = f"Value of outcomes ({words(row.get('kind', 'composite'))}) along {index_label_of(row, index_label)}"
    return _finish(chart, title, [sub] if sub else None, describe_row(row, arms, index_label), style)


# ------------------------------------------------------------------------------------------
# Sentences and tables
# ------------------------------------------------------------------------------------------
def _interval_words(b: Mapping[str, Any]) -> str:
    lo, hi = b["ci"]
    shape = b.get("interval_shape", "finite")
    if shape == "two_rays":
        core = f"in two parts, up to {fmt(lo)} and from {fmt(hi)}"
    elif shape == "unbounded" or (lo is None and hi is None):
        core = "unbounded: the data cannot place it"
    elif lo is None:
        core = f"open below, up to {fmt(hi)}"
    elif hi is None:
        core = f"from {fmt(lo)}, open above"
    else:
        core = f"{fmt(lo)} to {fmt(hi)}"
    method = METHOD_WORDS.get(b.get("interval", ""), b.get("interval", ""))
    if b.get("approximate"):
        method += ", approximate"
    return f"{core}, {method}"


def _levels_within(lo: float, hi: float) -> tuple[int, int] | None:
    a, z = math.ceil(lo - 1e-9), math.floor(hi + 1e-9)
    return (a, z) if a <= z else None


def _level_span(a: int, z: int) -> str:
    return f"level {a}" if a == z else f"levels {a} to {z}"


def _break_even_words(b: Mapping[str, Any], discrete: bool, margin: float) -> str:
    x = float(b["x"])
    meet = "break even" if not margin else "differ by the margin"
    if discrete:
        below, above = math.floor(x), math.ceil(x)
        if below == above:
            place = f"the arms {meet} at level {below}"
            sides = (f"below it {b['favours_below']} is favoured, above it {b['favours_above']}")
        else:
            place = f"the arms {meet} between levels {below} and {above} (at {fmt(x)})"
            sides = (f"at levels up to {below} {b['favours_below']} is favoured, "
                     f"from level {above} {b['favours_above']}")
    else:
        place = f"the arms {meet} at {fmt(x)}"
        sides = f"below it {b['favours_below']} is favoured, above it {b['favours_above']}"
    extra = "; this lies beyond the observed range, an extrapolation" if b.get("extrapolated") else ""
    return f"{place} (interval {_interval_words(b)}){extra}; {sides}"


def _region_words(r: Mapping[str, Any], discrete: bool) -> str:
    if discrete:
        levels = _levels_within(float(r["from"]), float(r["to"]))
        if levels is None:
            return f"between {fmt(r['from'])} and {fmt(r['to'])}, at no whole level, favouring {r['favours']}"
        return f"at {_level_span(*levels)}, favouring {r['favours']}"
    return f"from {fmt(r['from'])} to {fmt(r['to'])}, favouring {r['favours']}"


def describe_row(row: Mapping[str, Any], arms: Sequence[str], index_label: str | None = None, *,
                 margin: float = 0.0) -> str:
    """The chart in words: where the arms break even, the interval, who is favoured where, where it is clear."""
    label = index_label_of(row, index_label)
    discrete = is_discrete(row)
    lo, hi = row["range"]
    named = "" if _outcome_title(row) == row.get("measure") else f" ({_outcome_title(row)})"
    head = f"{_measure_title(row)}{named} along {label}, {arms[0]} against {arms[1]}: "
    bes = row.get("break_even") or []
    if bes:
        body = "; and ".join(_break_even_words(b, discrete, margin) for b in bes) + "."
    else:
        fav = row.get("favours_throughout") or "neither arm"
        span = _level_span(*_levels_within(lo, hi)) if discrete and _levels_within(lo, hi) else \
            f"{fmt(lo)} to {fmt(hi)}"
        body = f"{fav} is favoured throughout the observed range ({span}); the arms do not break even there."
    none = "no difference" if not margin else "the margin"
    regions = clear_regions(row)
    if regions:
        clear = (" The difference is clear " + "; and ".join(_region_words(r, discrete) for r in regions)
                 + f"; elsewhere its interval includes {none}.")
    else:
        clear = f" Nowhere in the observed range is the difference clear: its interval includes {none} throughout."
    return head + body + clear


def _row_interval(b: Mapping[str, Any]) -> str:
    text = _interval_words(b)
    if b.get("coverage") is not None:
        text += f", measured coverage {fmt(b['coverage'])}"
    if b.get("no_root_share"):
        text += f", {fmt(100 * b['no_root_share'])}% of replicates without a root"
    return text


def breakeven_table(doc: Mapping[str, Any]) -> pd.DataFrame:
    """One row per outcome x index (and composite): break-even, interval, favoured sides, clear regions."""
    recs = []
    for row in list(doc.get("results", [])) + list(doc.get("composite", [])):
        name = _outcome_title(row) + (" (composite)" if "weights" in row else "")
        bes = row.get("break_even") or []
        if bes:
            be_txt = "; ".join(fmt(b["x"]) + (" (extrapolated)" if b.get("extrapolated") else "") for b in bes)
            interval = "; ".join(_row_interval(b) for b in bes)
            below = "; ".join(b["favours_below"] for b in bes)
            above = "; ".join(b.get("favours_above", "") for b in bes)
        else:
            be_txt, interval = "none in range", ""
            below = above = f"{row.get('favours_throughout')} throughout"
        clear = "; ".join(_region_words(r, is_discrete(row)) for r in clear_regions(row)) or "none"
        recs.append({"outcome": name, "index": index_label_of(row), "measure": row["measure"], "break-even": be_txt,
                     "interval": interval, "favoured below": below, "favoured above": above,
                     "clear difference": clear})
    return pd.DataFrame(recs, columns=["outcome", "index", "measure", "break-even", "interval", "favoured below",
                                       "favoured above", "clear difference"])


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


# ------------------------------------------------------------------------------------------
# Cohort, icon arrays, values, selection
# ------------------------------------------------------------------------------------------
@_quick
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
    colour = (alt.Color("arm:N", scale=_arm_scale(arms), legend=alt.Legend(title="arm")) if has_arm
              else alt.value(INK))
    xenc = (alt.X("x:O", title=label) if discrete else alt.X("x:Q", bin=alt.Bin(maxbins=30), title=label))
    base = _chart(df).mark_bar(opacity=0.85).encode(
        x=xenc, y=alt.Y("count():Q", title="patients", stack=True), color=colour,
        tooltip=[alt.Tooltip("count():Q", title="patients")] + ([alt.Tooltip("arm:N")] if has_arm else []))
    layers: list[alt.Chart] = [base]
    if patient_x is not None:
        pdf = pd.DataFrame([{"x": float(patient_x), "label": f"this patient ({fmt(patient_x)})"}])
        xr = alt.X("x:O") if discrete else alt.X("x:Q")
        layers.append(_chart(pdf).mark_rule(color="#000000", strokeWidth=3, strokeDash=[2, 3]).encode(x=xr))
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT * 0.7)
    n = len(df)
    desc = (f"Histogram of {label} over {n} patients"
            + (f", from {fmt(df['x'].min())} to {fmt(df['x'].max())}" if n else "") + ".")
    return _finish(chart, f"{label}: how the cohort is spread", f"{n} patients", desc, style)


def per_hundred(probabilities: Mapping[str, float]) -> dict[str, int]:
    """Whole counts out of 100 that add to 100 (largest remainders), for icon arrays and sentences."""
    keys = list(probabilities)
    p = np.clip(np.array([float(probabilities[k]) for k in keys]), 0, None)
    if p.sum() <= 0:
        raise ValueError("probabilities must not all be zero")
    raw = 100 * p / p.sum()
    base = np.floor(raw).astype(int)
    order = np.argsort(-(raw - base), kind="stable")
    for i in order[: 100 - int(base.sum())]:
        base[i] += 1
    return {k: int(v) for k, v in zip(keys, base)}


@_quick
def icon_array_chart(probabilities: Mapping[str, float], title: str, colours: Mapping[str, str] | None = None, *,
                     side: int = 300, legend: str | None = "bottom", style: bool = True) -> alt.TopLevelMixin:
    """100 people in a 10 x 10 grid, coloured by outcome state (best state first), with counts in the legend.

    side: the grid's width and height in pixels; legend: "bottom", "right", or None when the page draws its own
    (an empty title likewise leaves the title to the page).
    """
    counts = per_hundred(probabilities)
    colours = dict(colours or state_colours(list(counts)))
    legend_labels = {k: f"{words(k)}: {n} of 100" for k, n in counts.items()}
    recs, i = [], 0
    for state, n in counts.items():
        for _ in range(n):
            recs.append({"col": i % 10, "row": i // 10, "state": legend_labels[state]})
            i += 1
    df = pd.DataFrame(recs)
    domain = [legend_labels[k] for k in counts]
    chart = _chart(df).mark_point(filled=True, size=420 * (side / 300) ** 2, opacity=1, shape=PERSON,
                                  strokeWidth=0.6, stroke=INK).encode(
        x=alt.X("col:O", axis=None), y=alt.Y("row:O", axis=None),
        color=alt.Color("state:N", scale=alt.Scale(domain=domain, range=[colours[k] for k in counts]),
                        legend=None if legend is None else alt.Legend(
                            title="out of 100 people", symbolType=PERSON, symbolSize=260, symbolStrokeColor=INK,
                            orient=legend)),
        tooltip=[alt.Tooltip("state:N", title="state")])
    chart = _sized(chart, side, side)
    desc = f"{title or 'Out of 100 people'}: " + "; ".join(f"{n} of 100 {words(k)}" for k, n in counts.items()) + "."
    return _finish(chart, title, None, desc, style)


@_quick
def threshold_map_chart(cells: pd.DataFrame | Iterable[Mapping[str, Any]], arms: Sequence[str] | None = None, *,
                        title: str = "Which arm the weights favour", style: bool = True) -> alt.TopLevelMixin:
    """The favoured arm over a grid of two states' weights (values.threshold_map cells), other weights fixed.

    cells: weight_a, weight_b, favours (an arm or None), and state_a / state_b naming the two states.
    """
    df = pd.DataFrame(list(cells)) if not isinstance(cells, pd.DataFrame) else cells.copy()
    state_a = str(df["state_a"].iloc[0]) if "state_a" in df else "first state"
    state_b = str(df["state_b"].iloc[0]) if "state_b" in df else "second state"
    if arms is None:
        arms = [a for a in pd.unique(df["favours"]) if isinstance(a, str)][:2]
    df["favoured"] = df["favours"].where(df["favours"].notna(), "neither")
    domain = list(arms) + (["neither"] if (df["favoured"] == "neither").any() else [])
    colours = arm_colours(arms) if len(arms) == 2 else {a: ARM_COLOURS[i] for i, a in enumerate(arms)}
    scale = alt.Scale(domain=domain, range=[colours[a] for a in arms] + ["#DDDDDD"] * (len(domain) - len(arms)))
    step = float(np.min(np.diff(np.unique(df["weight_a"])))) if df["weight_a"].nunique() > 1 else 0.1
    df["a2"], df["b2"] = df["weight_a"] + step, df["weight_b"] + step
    chart = _chart(df).mark_rect().encode(
        x=alt.X("weight_a:Q", title=f"weight of {words(state_a)}", scale=alt.Scale(domain=[-1, 1 + step], nice=False)),
        x2=alt.X2("a2"),
        y=alt.Y("weight_b:Q", title=f"weight of {words(state_b)}", scale=alt.Scale(domain=[-1, 1 + step], nice=False)),
        y2=alt.Y2("b2"),
        color=alt.Color("favoured:N", scale=scale, legend=alt.Legend(title="favoured arm")),
        tooltip=[alt.Tooltip("weight_a:Q", format=".2f", title=f"weight of {words(state_a)}"),
                 alt.Tooltip("weight_b:Q", format=".2f", title=f"weight of {words(state_b)}"),
                 alt.Tooltip("favoured:N")])
    chart = _sized(chart, HEIGHT, HEIGHT)
    share = df["favoured"].value_counts(normalize=True)
    desc = (f"{title}, as the weights of {words(state_a)} and {words(state_b)} each run from -1 to 1: "
            + "; ".join(f"{k} in {fmt(100 * v)}% of the grid" for k, v in share.items()) + ".")
    return _finish(chart, title, "other weights held at their stated values", desc, style)


@_quick
def acceptability_chart(points: pd.DataFrame | Iterable[Mapping[str, Any]], arms: Sequence[str], *,
                        index_title: str = "index",
                        title: str = "How often each arm comes out ahead as the weights vary",
                        style: bool = True) -> alt.TopLevelMixin:
    """Share of weight draws under which each arm has the higher value, along the index.

    points: values.acceptability output, rows of x, first, second (shares for the first and second arm).
    """
    df = pd.DataFrame(list(points)) if not isinstance(points, pd.DataFrame) else points.copy()
    df = df.rename(columns={"first": arms[0], "second": arms[1]})
    df = df.melt(id_vars=["x"], value_vars=list(arms), var_name="arm", value_name="share")
    colour = alt.Color("arm:N", scale=_arm_scale(arms), legend=ARM_LEGEND)
    half = _chart(pd.DataFrame([{"y": 0.5}])).mark_rule(color=INK, strokeDash=[4, 4]).encode(y=alt.Y("y:Q"))
    lines = _chart(df).mark_line(strokeWidth=3.5).encode(
        x=alt.X("x:Q", title=index_title, scale=alt.Scale(zero=False, nice=False)),
        y=alt.Y("share:Q", title="share of weight draws", scale=alt.Scale(domain=[0, 1])), color=colour,
        tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("x:Q", format=".3~g", title="index"),
                 alt.Tooltip("share:Q", format=".2f")])
    chart = _sized(alt.layer(half, lines), WIDTH, HEIGHT)
    desc = title + ": " + "; ".join(
        f"{a} ahead in {fmt(100 * g['share'].min())}% to {fmt(100 * g['share'].max())}% of draws"
        for a, g in df.groupby("arm", sort=False)) + "."
    return _finish(chart, title, "dashed line: half of the draws", desc, style)


SELECTION_SETS = (("randomised_break_even", "randomised patients only"), ("all_break_even", "all patients"),
                  ("adjusted_break_even", "chosen patients, weighted"))


def _selection_estimates(row: Mapping[str, Any]) -> list[dict]:
    """Every break-even point of the randomised-only, all-patient and weighted fits, with intervals."""
    out = []
    for key, what in SELECTION_SETS:
        for b in row.get(key) or []:
            lo, hi = (b.get("ci") or [None, None])
            out.append({"estimate": what, "x": b["x"], "lo": lo, "hi": hi})
    return out


@_quick
def selection_chart(row: Mapping[str, Any] | Sequence[Mapping[str, Any]], arms: Sequence[str] | None = None, *,
                    index_title: str | None = None, style: bool = True) -> alt.TopLevelMixin:
    """The selection effect (chosen minus randomised, same arm, same index value) along the index, with its band.

    row: one selection row, or the rows of one outcome x index (one per arm, drawn in the arm colours).
    Where one arm has few randomised patients its line is dashed; zero means no selection effect.
    """
    rows = [row] if isinstance(row, Mapping) else list(row)
    recs = []
    for r in rows:
        for p in r.get("curve") or []:
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
    layers: list[alt.Chart] = [_chart(pd.DataFrame([{"y": 0.0}])).mark_rule(color=INK, strokeWidth=2)
                               .encode(y=alt.Y("y:Q"))]
    if len(df):
        layers.append(_chart(df).mark_area(opacity=0.2).encode(
            x=x, y=alt.Y("lower:Q", title="chosen minus randomised"), y2=alt.Y2("upper"), color=colour))
        layers.append(_chart(df).mark_line(strokeWidth=3.5).encode(
            x=x, y=alt.Y("effect:Q"), color=colour, detail=alt.Detail("arm:N"),
            strokeDash=alt.StrokeDash("randomised:N", scale=alt.Scale(domain=["enough", "few"], range=[[1, 0], [6, 4]]),
                                      legend=alt.Legend(title="randomised patients here")),
            tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("x:Q", format=".3~g", title="index"),
                     alt.Tooltip("effect:Q", format=".3~g"), alt.Tooltip("lower:Q", format=".3~g"),
                     alt.Tooltip("upper:Q", format=".3~g")]))
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT * 0.8)
    who = " and ".join(str(r.get("arm")) for r in rows)
    title = f"Selection effect ({who}): {first.get('measure', first.get('outcome'))} along {xt}"
    sub = "chosen minus randomised patients in the same arm at the same index value; zero means none"
    return _finish(chart, title, sub, " ".join(describe_selection(r) for r in rows), style)


@_quick
def selection_break_even_chart(row: Mapping[str, Any], *, index_title: str | None = None,
                               style: bool = True) -> alt.TopLevelMixin:
    """Break-even points from randomised patients only, from all patients, and from weighted chosen patients."""
    df = pd.DataFrame(_selection_estimates(row), columns=["estimate", "x", "lo", "hi"]).astype(
        {"x": float, "lo": float, "hi": float})
    order = [w for _, w in SELECTION_SETS]
    shapes = ["triangle-up", "circle", "diamond"]
    y = alt.Y("estimate:N", sort=order, title=None, scale=alt.Scale(domain=order))
    xt = index_title or str(row.get("index", "index"))
    layers = [_chart(df.dropna(subset=["lo", "hi"])).mark_rule(strokeWidth=4, color=INK).encode(
                  x=alt.X("lo:Q", title=f"break-even on {xt}", scale=alt.Scale(zero=False)), x2=alt.X2("hi"), y=y),
              _chart(df).mark_point(filled=True, size=260, color=INK, opacity=1).encode(
                  x=alt.X("x:Q"), y=y, shape=alt.Shape("estimate:N", legend=None, scale=alt.Scale(domain=order, range=shapes)),
                  tooltip=[alt.Tooltip("estimate:N"), alt.Tooltip("x:Q", format=".3~g"), alt.Tooltip("lo:Q", format=".3~g"),
                           alt.Tooltip("hi:Q", format=".3~g")])]
    chart = _sized(alt.layer(*layers), WIDTH, 70 * len(order))
    parts = [f"{e['estimate']}: {fmt(e['x'])}" + (f" (interval {fmt(e['lo'])} to {fmt(e['hi'])})"
                                                   if pd.notna(e["lo"]) and pd.notna(e["hi"]) else "")
             for e in df.to_dict("records")]
    desc = (f"Break-even points of {row.get('measure', row.get('outcome'))} along {xt} by the patients used: "
            + ("; ".join(parts) if parts else "none in the searched range") + ".")
    title = f"Break-even by the patients used: {row.get('outcome')} along {xt}"
    return _finish(chart, title, None, desc, style)


@_quick
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
    layers: list[alt.Chart] = [_chart(pd.DataFrame([{"y": 0.0}])).mark_rule(color=INK, strokeWidth=2)
                               .encode(y=alt.Y("y:Q"))]
    if overall is not None:
        layers.append(_chart(pd.DataFrame([{"y": overall["net_benefit"], "what": "whole cohort"}]))
                      .mark_rule(color=INK, strokeDash=[6, 4]).encode(y=alt.Y("y:Q"), tooltip=[alt.Tooltip("what:N")]))
    if len(df):
        ci = df.dropna(subset=["lo", "hi"])
        if len(ci):
            layers.append(_chart(ci).mark_rule(strokeWidth=3, color=INK).encode(
                x=x, y=alt.Y("lo:Q", title=wrap(f"net benefit ({arms[0]} minus {arms[1]})", AXIS_CHARS)), y2=alt.Y2("hi")))
        layers.append(_chart(df).mark_point(filled=True, size=120, color=ARM_COLOURS[0], opacity=1).encode(
            x=x, y=alt.Y("net_benefit:Q", title=wrap(f"net benefit ({arms[0]} minus {arms[1]})", AXIS_CHARS)),
            tooltip=[alt.Tooltip("from:Q", format=".3~g"), alt.Tooltip("to:Q", format=".3~g"),
                     alt.Tooltip("net_benefit:Q", format=".3~g"), alt.Tooltip("lo:Q", format=".3~g"),
                     alt.Tooltip("hi:Q", format=".3~g")]))
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT * 0.8)
    desc = (f"Net benefit of {arms[0]} over {arms[1]} by pairwise comparison in {len(df)} windows along {xt}"
            + (f"; whole cohort {fmt(overall['net_benefit'])}" if overall is not None else "") + ": "
            + "; ".join(f"{fmt(r['from'])} to {fmt(r['to'])}: {fmt(r['net_benefit'])}" for r in df.to_dict("records"))
            + ".")
    return _finish(chart, f"Pairwise comparison along {xt}", "above zero favours " + arms[0] + "; dashed: whole cohort",
                   desc, style)


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


def describe_selection(row: Mapping[str, Any]) -> str:
    """A selection row in words: the averaged selection effect and how the break-even point moves."""
    arm, measure = row.get("arm"), row.get("measure", row.get("outcome"))
    parts = []
    if row.get("effect") is not None:
        lo, hi = row.get("ci") or [None, None]
        p = row.get("p_value")
        parts.append(f"In {arm}, chosen patients' {measure} differs from randomised patients' by {fmt(row['effect'])} "
                     f"on average over {row.get('effect_over', 'the index')} (interval {fmt(lo)} to {fmt(hi)}"
                     + (f", p = {fmt(p)}" if p is not None else "") + ").")
    else:
        parts.append(f"In {arm}, the selection effect could not be estimated.")
    est = _selection_estimates(row)
    if est:
        parts.append("Break-even points: " + "; ".join(f"{e['estimate']} {fmt(e['x'])}" for e in est) + ".")
    if row.get("shift") is not None:
        lo, hi = row.get("shift_ci") or [None, None]
        ci = f" (interval {fmt(lo)} to {fmt(hi)})" if lo is not None and hi is not None else ""
        parts.append(f"Using all patients moves the break-even point by {fmt(row['shift'])}{ci}.")
    return " ".join(parts)


# ------------------------------------------------------------------------------------------
# Patients beneath the curves, and conversion
# ------------------------------------------------------------------------------------------
def cohort_points(fs: Any, outcome: str, index: str, *, max_points: int = 1500, seed: int = 0) -> pd.DataFrame:
    """Each patient's index value and outcome on the measure's scale (x, y, arm, allocation), no identifiers.

    Survival: 1 alive at the horizon, 0 died before it (censored earlier left out; RMST: time capped at the
    horizon). Ordinal: 1 in a favourable level. 0/1 outcomes are jittered a little so they can be seen.
    """
    spec = fs.spec
    pf = fs.pair(outcome, index)
    o = pf.outcome
    frame = fs.cohort.frame
    recs = []
    for arm, rows in pf.rows.items():
        d = pf.data[arm]
        x = np.asarray(d.x, float)
        if o.kind == "survival":
            t, e = np.asarray(d.time, float), np.asarray(d.event, float)
            if o.measure == "rmst":
                keep, y = (t >= o.horizon) | (e == 1), np.minimum(t, o.horizon)
            else:
                keep, y = (t >= o.horizon) | (e == 1), (t >= o.horizon).astype(float)
        elif o.kind == "ordinal":
            fav = [o.levels.index(lv) for lv in o.favourable]
            keep, y = np.ones(len(x), bool), np.isin(np.asarray(d.y), fav).astype(float)
        else:
            keep, y = np.ones(len(x), bool), np.asarray(d.y, float)
        randomised = getattr(fs.cohort, "randomised", None)
        if randomised is not None:
            alloc = np.where(np.asarray(randomised, bool)[rows], "randomised", "chosen")
        elif spec.cohort.allocation:
            alloc = np.where(frame[spec.cohort.allocation].astype(str).to_numpy()[rows] == str(spec.cohort.randomised),
                             "randomised", "chosen")
        else:
            alloc = np.full(len(x), "randomised")
        recs.append(pd.DataFrame({"x": x[keep], "y": y[keep], "arm": arm, "allocation": alloc[keep]}))
    df = pd.concat(recs, ignore_index=True)
    rng = np.random.default_rng(seed)
    if len(df) > max_points:
        df = df.iloc[np.sort(rng.choice(len(df), max_points, replace=False))].reset_index(drop=True)
    binary = o.kind in ("binary", "ordinal") or (o.kind == "survival" and o.measure != "rmst")
    if binary:
        df["y"] = df["y"] + np.where(df["y"] > 0.5, -1, 1) * rng.uniform(0, 0.04, len(df))
    ix = fs.indices[index]
    if bool((ix.info or {}).get("discrete")):
        df["x"] = df["x"] + rng.uniform(-0.2, 0.2, len(df))
    return df


@_quick
def km_chart(fs: Any, outcome: str, *, index: str | None = None, between: tuple[float, float] | None = None,
             style: bool = True) -> alt.TopLevelMixin:
    """Kaplan-Meier curves per arm (lifelines), optionally for patients whose index lies in `between`."""
    from lifelines import KaplanMeierFitter

    o = fs.spec.outcome(outcome)
    if o.kind != "survival":
        raise ValueError(f"outcome '{outcome}' is not a survival outcome")
    pf = next(p for (name, _), p in fs.pairs.items() if name == outcome and (index is None or p.index == index))
    arms = list(pf.fits)
    recs, counts = [], {}
    for arm in arms:
        d = pf.data[arm]
        keep = np.ones(len(d.x), bool) if between is None else (d.x >= between[0]) & (d.x <= between[1])
        counts[arm] = int(keep.sum())
        if not keep.any():
            continue
        km = KaplanMeierFitter().fit(np.asarray(d.time)[keep], np.asarray(d.event)[keep])
        sf = km.survival_function_.iloc[:, 0]
        ci = km.confidence_interval_survival_function_
        for t, v, lo, hi in zip(sf.index, sf.to_numpy(), ci.iloc[:, 0].to_numpy(), ci.iloc[:, 1].to_numpy()):
            recs.append({"time": float(t), "survival": float(v), "lower": float(lo), "upper": float(hi), "arm": arm})
    df = pd.DataFrame(recs, columns=["time", "survival", "lower", "upper", "arm"])
    colour = alt.Color("arm:N", scale=_arm_scale(arms), legend=ARM_LEGEND)
    unit = f" ({o.units})" if o.units else ""
    x = alt.X("time:Q", title=f"time{unit}")
    layers = [_chart(df).mark_area(opacity=0.18, interpolate="step-after").encode(
                  x=x, y=alt.Y("lower:Q", title="probability alive", scale=alt.Scale(domain=[0, 1])),
                  y2=alt.Y2("upper"), color=colour),
              _chart(df).mark_line(strokeWidth=3, interpolate="step-after").encode(
                  x=x, y=alt.Y("survival:Q"), color=colour,
                  tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("time:Q", format=".4~g"),
                           alt.Tooltip("survival:Q", format=".3f")])]
    if o.horizon:
        layers.append(_chart(pd.DataFrame([{"t": float(o.horizon)}])).mark_rule(color=INK, strokeDash=[5, 4])
                      .encode(x=alt.X("t:Q")))
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT)
    where = "" if between is None else f", {pf.index} {fmt(between[0])} to {fmt(between[1])}"
    at = []
    for arm in arms:
        part = df[(df["arm"] == arm) & (df["time"] <= (o.horizon or np.inf))]
        if len(part):
            at.append(f"{arm} {fmt(part['survival'].iloc[-1])} ({counts[arm]} patients)")
    desc = (f"Kaplan-Meier survival by arm for {o.title}{where}"
            + (f"; at {o.horizon:g}{unit}: " + ", ".join(at) if at else "") + ".")
    return _finish(chart, f"{o.title}: Kaplan-Meier by arm{where}", "dashed line: the horizon", desc, style)


def chart_spec(chart: alt.TopLevelMixin) -> dict:
    """The Vega-Lite spec as a dict, without the external schema address."""
    spec = chart.to_dict(validate=False)
    spec.pop("$schema", None)
    return spec


def vega_lite_version() -> str:
    """The Vega-Lite version Altair writes, as vl-convert names it (e.g. '6.4')."""
    m = re.match(r"v?(\d+)\.(\d+)", alt.SCHEMA_VERSION)
    return f"{m.group(1)}.{m.group(2)}" if m else ""


@lru_cache(maxsize=1)
def _vl_version() -> str | None:
    import vl_convert as vlc

    want = vega_lite_version()
    return want if want in vlc.get_vegalite_versions() else None


def chart_to_svg(chart: alt.TopLevelMixin) -> str:
    import vl_convert as vlc

    return vlc.vegalite_to_svg(chart_spec(chart), vl_version=_vl_version())


def chart_to_png(chart: alt.TopLevelMixin, scale: float = 2.0) -> bytes:
    import vl_convert as vlc

    return vlc.vegalite_to_png(chart_spec(chart), vl_version=_vl_version(), scale=scale)


# ------------------------------------------------------------------------------------------
# Two-index decision map
# ------------------------------------------------------------------------------------------
def _tint(colour: str, share: float) -> str:
    """The colour mixed with white (share 0 keeps it, 1 gives white)."""
    rgb = [int(colour[i:i + 2], 16) for i in (1, 3, 5)]
    return "#" + "".join(f"{round(c + (255 - c) * share):02X}" for c in rgb)


def _map_axis_title(row: Mapping[str, Any], k: int) -> str:
    info = (row.get("index_info") or [{}, {}])[k] or {}
    label = info.get("label") or row["indices"][k]
    return f"{label} ({info['units']})" if info.get("units") else label


def _map_cells(row: Mapping[str, Any], arms: Sequence[str]) -> tuple[pd.DataFrame, list[str], list[str]]:
    """One rectangle per mapped grid point, centred on it (overlapping a little, so no seams show), labelled by
    the arm favoured and whether clearly."""
    xs, ys = np.asarray(row["grid"]["x"], float), np.asarray(row["grid"]["y"], float)
    dx = float(np.diff(xs).min()) if len(xs) > 1 else 1.0
    dy = float(np.diff(ys).min()) if len(ys) > 1 else 1.0
    c = arm_colours(arms)
    labels, colours = [], []
    for arm in arms:
        labels += [f"{arm}, clearly", f"{arm}, not clearly"]
        colours += [c[arm], _tint(c[arm], 0.6)]
    recs = []
    for r, y in enumerate(ys):
        for k, x in enumerate(xs):
            fav = row["favoured"][r][k]
            if fav is None:
                continue
            clear = row["clear"][r][k] == fav
            recs.append({"x": x - 0.51 * dx, "x2": x + 0.51 * dx, "y": y - 0.51 * dy, "y2": y + 0.51 * dy,
                         "at_x": x, "at_y": y, "difference": row["difference"][r][k],
                         "region": f"{fav}, {'clearly' if clear else 'not clearly'}"})
    return pd.DataFrame(recs, columns=["x", "x2", "y", "y2", "at_x", "at_y", "difference", "region"]), labels, colours


@_quick
def decision_map_chart(map_row: Mapping[str, Any], arms: Sequence[str], patient: Mapping[str, Any] | None = None, *,
                       style: bool = True) -> alt.TopLevelMixin:
    """The arm favoured over two indices (a maps row): solid where the interval excludes no difference, pale where
    it does not, blank where patients are too few; the break-even contour in black; the patient's point.

    patient: {"x", "y", "label"} (defaults to the row's own "patient" entry).
    """
    from .maps import describe_map

    xs, ys = map_row["grid"]["x"], map_row["grid"]["y"]
    xt, yt = _map_axis_title(map_row, 0), _map_axis_title(map_row, 1)
    cells, labels, colours = _map_cells(map_row, arms)
    dx = (xs[-1] - xs[0]) / max(len(xs) - 1, 1) / 2
    dy = (ys[-1] - ys[0]) / max(len(ys) - 1, 1) / 2
    xscale = alt.Scale(domain=[xs[0] - dx, xs[-1] + dx], nice=False, zero=False)
    yscale = alt.Scale(domain=[ys[0] - dy, ys[-1] + dy], nice=False, zero=False)
    layers: list[alt.Chart] = []
    if len(cells):
        layers.append(_chart(cells).mark_rect(strokeWidth=0).encode(
            x=alt.X("x:Q", scale=xscale, title=wrap(xt, AXIS_CHARS)), x2=alt.X2("x2"),
            y=alt.Y("y:Q", scale=yscale, title=wrap(yt, AXIS_CHARS)), y2=alt.Y2("y2"),
            color=alt.Color("region:N", scale=alt.Scale(domain=labels, range=colours),
                            legend=alt.Legend(title="favoured arm")),
            tooltip=[alt.Tooltip("at_x:Q", format=".3~g", title=xt), alt.Tooltip("at_y:Q", format=".3~g", title=yt),
                     alt.Tooltip("difference:Q", format=".3~g"), alt.Tooltip("region:N", title="favoured")]))
    lines = pd.DataFrame([{"x": p["x"], "y": p["y"], "line": k, "order": j}
                          for k, line in enumerate(map_row.get("contour") or []) for j, p in enumerate(line)],
                         columns=["x", "y", "line", "order"])
    if len(lines):
        layers.append(_chart(lines).mark_line(color=INK, strokeWidth=3).encode(
            x=alt.X("x:Q", scale=xscale, title=wrap(xt, AXIS_CHARS)),
            y=alt.Y("y:Q", scale=yscale, title=wrap(yt, AXIS_CHARS)),
            detail="line:N", order="order:Q"))
    point = patient if patient is not None else map_row.get("patient")
    if point and point.get("x") is not None and point.get("y") is not None:
        label = str(point.get("label") or f"this patient ({fmt(point['x'])}, {fmt(point['y'])})")
        pdf = pd.DataFrame([{"x": float(point["x"]), "y": float(point["y"]), "label": label}])
        layers.append(_chart(pdf).mark_point(shape="diamond", size=320, filled=True, color="#000000", opacity=1,
                                             stroke="#FFFFFF", strokeWidth=2).encode(
            x=alt.X("x:Q", scale=xscale), y=alt.Y("y:Q", scale=yscale),
            tooltip=[alt.Tooltip("label:N", title="patient")]))
        layers.append(_chart(pdf).mark_text(align="left", dx=10, dy=-10, fontSize=FONT["text"], fontWeight="bold",
                                            color="#000000").encode(
            x=alt.X("x:Q", scale=xscale), y=alt.Y("y:Q", scale=yscale), text=alt.Text("label:N")))
    if not layers:
        layers.append(_chart(pd.DataFrame([{"x": xs[0], "y": ys[0]}])).mark_point(opacity=0).encode(
            x=alt.X("x:Q", scale=xscale, title=xt), y=alt.Y("y:Q", scale=yscale, title=yt)))
    chart = _sized(alt.layer(*layers), WIDTH, round(WIDTH * 0.75))
    target = "the composite" if map_row["target"] == "composite" else map_row.get("measure") or map_row["target"]
    title = f"Which arm is favoured on {target}, over {xt.split(' (')[0]} and {yt.split(' (')[0]}"
    none = "the margin" if map_row.get("margin") else "no difference"
    subtitle = (f"solid: clearly favoured (interval excludes {none}); pale: not clearly; black line: "
                "break-even; blank: too few patients")
    desc_row = dict(map_row, patient=point) if point is not map_row.get("patient") else map_row
    return _finish(chart, title, subtitle, describe_map(desc_row, arms), style)

"""Altair chart builders shared by the app and the report, all drawn from results-JSON rows.

One colour per arm everywhere (Okabe & Ito 2008, never green against red), outcome states in the
remaining Okabe-Ito colours from light (best) to dark, randomised and chosen patients told apart by marker
shape, clear differences and break-even points on a strip beneath the plot, and every chart titled,
described for screen readers and sized for a projector. The palette lives in explorer/look.py and the
rules in docs/look.md; the per-100 and values displays are in charts_patient.py and charts_values.py.
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

from .look import ARM_COLOURS, DEATH_COLOUR, INK, MUTED, NEUTRAL, OKABE_ITO, PAPER, RULE, STATE_COLOURS  # noqa: F401
from .look import state_colours as _state_colours
from .look import text_on
from .margins import side_words

ALLOCATION_SHAPES = {"randomised": "triangle-up", "chosen": "circle"}
ALLOCATION_SIZES = {"randomised": 70, "chosen": 22}
WIDTH, HEIGHT = 640, 360
TITLE_CHARS, AXIS_CHARS = 58, 38
FONT = {"title": 22, "subtitle": 16, "axis_title": 18, "axis_label": 16, "legend_title": 16, "legend_label": 15,
        "text": 15}
ARM_LEGEND = alt.Legend(title="arm", symbolType="stroke", symbolStrokeWidth=5, symbolOpacity=1)
TYPEFACE = "\"Source Sans\", \"Source Sans 3\", \"Source Sans Pro\", \"Segoe UI\", \"Helvetica Neue\", Arial, sans-serif"
DEATH_WORDS = ("dead", "death", "died", "deceased")
METHOD_WORDS = {"fieller": "Fieller", "delta": "delta method", "test-inversion": "test inversion",
                "bootstrap-percentile": "bootstrap percentile"}


# ------------------------------------------------------------------------------------------
# Colours, numbers and small helpers
# ------------------------------------------------------------------------------------------
def arm_colours(arms: Sequence[str]) -> dict[str, str]:
    """The first arm blue, the second orange (Okabe-Ito), the same in every chart and export."""
    if len(arms) != 2 or arms[0] == arms[1]:
        raise ValueError("arm_colours needs exactly two different arm labels")
    return {arms[0]: ARM_COLOURS[0], arms[1]: ARM_COLOURS[1]}


def state_colours(levels: Sequence[str]) -> dict[str, str]:
    """Outcome-state colours, best state lightest, darker down the order; the death state dark neutral."""
    return _state_colours(levels, [str(lv).lower() in DEATH_WORDS for lv in levels])


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
    """A level or column name as plain words (underscores to spaces); a numbered level reads "level 3"."""
    text = str(name).strip()
    if re.fullmatch(r"-?\d+(\.\d+)?", text):
        return f"level {text}"
    return text.replace("_", " ")


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
        font=TYPEFACE,
        axis=alt.AxisConfig(labelFontSize=FONT["axis_label"], titleFontSize=FONT["axis_title"], grid=True,
                            gridColor=RULE, gridOpacity=0.35, labelColor=INK, titleColor=INK, domainColor=MUTED,
                            tickColor=MUTED, titleFontWeight="normal"),
        legend=alt.LegendConfig(labelFontSize=FONT["legend_label"], titleFontSize=FONT["legend_title"],
                                orient="bottom", direction="vertical", labelLimit=420, titleLimit=420,
                                symbolSize=160, labelColor=INK, titleColor=INK),
        title=alt.TitleConfig(fontSize=FONT["title"], subtitleFontSize=FONT["subtitle"], anchor="start",
                              color=INK, subtitleColor=MUTED),
        text=alt.MarkConfig(font=TYPEFACE),
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
    return alt.Chart(alt.InlineData(values=_records(data)))


def _records(data: pd.DataFrame) -> tuple[dict, ...]:
    """A frame as JSON-ready records, non-finite numbers as null. A tuple, because Altair copies lists record
    by record each time charts are layered, concatenated or serialised but keeps a tuple as it is (and
    writes it out as a list)."""
    return tuple({k: (None if isinstance(v, float) and not math.isfinite(v) else _native(v)) for k, v in r.items()}
                 for r in data.to_dict("records"))


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
    layers = [_chart(df).mark_rect(stroke=PAPER, strokeWidth=1).encode(
        x=alt.X("from:Q"), x2=alt.X2("to"), y=alt.value(y0), y2=alt.value(y1),
        fill=alt.Fill("fill:N", scale=None),
        tooltip=[alt.Tooltip("region:N", title="difference"), alt.Tooltip("from:Q", format=".3~g"),
                 alt.Tooltip("to:Q", format=".3~g")])]
    for ink, part in df[df["words"] != ""].groupby("ink"):
        layers.append(_chart(part).mark_text(fontSize=FONT["text"] - 1, color=ink, baseline="middle").encode(
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
        marks.append({"x": b["x"], "line": line, "label": label, "interval": _interval_words(b), "y": y})
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
        _chart(mdf).mark_rule(color=INK, strokeWidth=1.5, opacity=0.8).encode(
            x=alt.X("x:Q"), y=alt.value(0), y2=alt.value(HEIGHT + STRIP_BAND[1]), strokeDash=dash, tooltip=tip),
    ]
    if len(sdf):
        layers.append(_chart(sdf).mark_rule(color=INK, strokeWidth=3).encode(
            x=alt.X("from:Q"), x2=alt.X2("to"), y=alt.Y("y:Q", scale=None), strokeDash=dash))
        ends = pd.concat([sdf.assign(end=sdf["from"])[sdf["left"] == ""], sdf.assign(end=sdf["to"])[sdf["right"] == ""]])
        if len(ends):
            layers.append(_chart(ends).mark_tick(color=INK, thickness=2, size=12, orient="vertical").encode(
                x=alt.X("end:Q"), y=alt.Y("y:Q", scale=None)))
    layers.append(_chart(mdf).mark_point(shape="diamond", filled=True, size=170, color=INK, opacity=1,
                                         stroke=PAPER, strokeWidth=1.5).encode(
        x=alt.X("x:Q"), y=alt.Y("y:Q", scale=None), tooltip=tip))
    mdf["side"] = ["right" if x > domain[0] + 0.6 * (domain[1] - domain[0]) else "left" for x in mdf["x"]]
    for side, part in mdf.groupby("side"):  # words on the roomier side of the diamond
        layers.append(_chart(part).mark_text(align=side, dx=-9 if side == "right" else 9, dy=-7,
                                             fontSize=FONT["text"] - 1, color=INK, baseline="bottom",
                                             fontWeight="bold").encode(
            x=alt.X("x:Q"), y=alt.Y("y:Q", scale=None), text=alt.Text("label:N")))
    if arrows:
        adf = pd.DataFrame(arrows)
        layers.append(_chart(adf).mark_point(filled=True, size=110, color=INK, opacity=1).encode(
            x=alt.X("x:Q"), y=alt.Y("y:Q", scale=None), shape=alt.Shape("shape:N", scale=None)))
        for side, dx in (("left", 6), ("right", -6)):
            part = adf[adf["align"] == side]
            if len(part):
                layers.append(_chart(part).mark_text(fontSize=FONT["text"] - 3, color=MUTED, dy=12, dx=dx,
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
    if "allocation" not in df.columns:  # allocation unknown: plain small dots, no randomised/chosen legend
        return [_chart(df).mark_point(filled=True, opacity=0.35, strokeWidth=0, size=ALLOCATION_SIZES["chosen"])
                .encode(x=alt.X("x:Q"), y=alt.Y("y:Q"),
                        color=alt.Color("arm:N", scale=_arm_scale(arms), legend=ARM_LEGEND))]
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
    if cf["lower"].notna().any():
        layers.append(_chart(cf).mark_area(opacity=0.2).encode(
            x=_x_axis(row, index_label), y=alt.Y("lower:Q", scale=yscale, title=wrap(ytitle, AXIS_CHARS)), y2=alt.Y2("upper"), color=colour))
    layers.append(_chart(cf).mark_line(strokeWidth=3.5).encode(
        x=_x_axis(row, index_label),
        y=alt.Y("estimate:Q", scale=yscale, title=wrap(ytitle, AXIS_CHARS)), color=colour,
        tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("x:Q", format=".3~g", title="index"),
                 alt.Tooltip("estimate:Q", format=".3~g"), alt.Tooltip("lower:Q", format=".3~g"),
                 alt.Tooltip("upper:Q", format=".3~g")]))
    layers += _strip_layers(row, arms, domain)
    layers += _patient_layers(patient)
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT)
    title = f"{_cap(_outcome_title(row))} along {index_label_of(row, index_label)}"
    subtitle = (f"{arms[0]} (blue) and {arms[1]} (orange), each with its interval as a band; the strip beneath "
                "shows where the difference is clear and the break-even point on its interval")
    return _finish(chart, title, subtitle, describe_row(row, arms, index_label), style)


def _outcome_title(row: Mapping[str, Any]) -> str:
    """The outcome's label when the row carries one, else its measure in words."""
    return str(row.get("label") or row.get("measure") or row["outcome"])


def _cap(text: str) -> str:
    return text[:1].upper() + text[1:]


def _measure_title(row: Mapping[str, Any]) -> str:
    return _cap(str(row.get("measure", "")))


def _x_axis(row: Mapping[str, Any], override: str | None = None) -> alt.X:
    offset = strip_height(row)
    axis = alt.Axis(tickMinStep=1, format="d", offset=offset) if is_discrete(row) else alt.Axis(offset=offset)
    return alt.X("x:Q", scale=alt.Scale(domain=list(_domain(row)), nice=False, zero=False),
                 title=_x_title(row, override), axis=axis)


@_quick
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
    layers += _strip_layers(row, arms, domain)
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT)
    band = row.get("regions_band", "pointwise")
    title = f"Difference in {_outcome_title(row)} along {index_label_of(row, index_label)}"
    subtitle = (f"above zero favours {arms[0]}, below favours {arms[1]}; grey band: {band} interval; the strip "
                "beneath shows where the difference is clear")
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
    what = row.get("label") or f"Value of outcomes ({words(row.get('kind', 'composite'))})"
    title = f"{what} along {index_label_of(row, index_label)}"
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


def _break_even_words(b: Mapping[str, Any], discrete: bool, margin: float, arms: Sequence[str] = ()) -> str:
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
    return f"{place} (interval {_interval_words(b)}){extra}; {sides}"


def _region_words(r: Mapping[str, Any], discrete: bool, arms: Sequence[str] = (), margin: float = 0.0) -> str:
    who = f"favouring {r['favours']}" if not margin else f"where {side_words(r['favours'], arms, margin)}"
    if discrete:
        levels = _levels_within(float(r["from"]), float(r["to"]))
        if levels is None:
            return f"between {fmt(r['from'])} and {fmt(r['to'])}, at no whole level, {who}"
        return f"at {_level_span(*levels)}, {who}"
    return f"from {fmt(r['from'])} to {fmt(r['to'])}, {who}"


def describe_row(row: Mapping[str, Any], arms: Sequence[str], index_label: str | None = None, *,
                 margin: float = 0.0) -> str:
    """The chart in words: where the arms break even, the interval, who is favoured where, where it is clear.
    The row's own margin (results rows carry it) wins over the `margin` passed."""
    margin = float(row["margin"]) if row.get("margin") is not None else margin
    label = index_label_of(row, index_label)
    discrete = is_discrete(row)
    lo, hi = row["range"]
    named = "" if _outcome_title(row) == row.get("measure") else f" ({_outcome_title(row)})"
    head = f"{_measure_title(row)}{named} along {label}, {arms[0]} against {arms[1]}: "
    bes = row.get("break_even") or []
    if bes:
        body = "; and ".join(_break_even_words(b, discrete, margin, arms) for b in bes) + "."
    else:
        fav = side_words(row.get("favours_throughout"), arms, margin)
        span = _level_span(*_levels_within(lo, hi)) if discrete and _levels_within(lo, hi) else \
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


def _row_interval(b: Mapping[str, Any]) -> str:
    text = _interval_words(b)
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
        name = _outcome_title(row) + (" (composite)" if "weights" in row else "")
        arms, m = doc.get("arms") or (), float(row.get("margin") or 0.0)
        bes = row.get("break_even") or []
        if bes:
            be_txt = "; ".join(fmt(b["x"]) + (" (extrapolated)" if b.get("extrapolated") else "") for b in bes)
            interval = "; ".join(_row_interval(b) for b in bes)
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


# ------------------------------------------------------------------------------------------
# Cohort, per-100 counts, selection
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
    n = len(df)
    # counted here, not in the browser: a chart of a large cohort carries a few hundred rows, never one per patient
    if not discrete and n:
        lo, hi = float(df["x"].min()), float(df["x"].max())
        step = (hi - lo) / 1000 or 1.0
        df = df.assign(x=lo + np.round((df["x"].astype(float) - lo) / step) * step)
    counts = df.groupby(["x", "arm"] if has_arm else ["x"], observed=True).size().rename("patients").reset_index()
    colour = (alt.Color("arm:N", scale=_arm_scale(arms), legend=alt.Legend(title="arm")) if has_arm
              else alt.value(INK))
    xenc = (alt.X("x:O", title=label) if discrete else alt.X("x:Q", bin=alt.Bin(maxbins=30), title=label))
    base = _chart(counts).mark_bar(opacity=0.85).encode(
        x=xenc, y=alt.Y("sum(patients):Q", title="patients", stack=True), color=colour,
        tooltip=[alt.Tooltip("sum(patients):Q", title="patients")] + ([alt.Tooltip("arm:N")] if has_arm else []))
    layers: list[alt.Chart] = [base]
    if patient_x is not None:
        pdf = pd.DataFrame([{"x": float(patient_x), "label": f"this patient ({fmt(patient_x)})"}])
        xr = alt.X("x:O") if discrete else alt.X("x:Q")
        layers.append(_chart(pdf).mark_rule(color="#000000", strokeWidth=3, strokeDash=[2, 3]).encode(x=xr))
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT * 0.7)
    desc = (f"Histogram of {label} over {n} patients"
            + (f", from {fmt(df['x'].min())} to {fmt(df['x'].max())}" if n else "") + ".")
    return _finish(chart, f"{label}: how the cohort is spread", f"{n} patients", desc, style)


def per_hundred(probabilities: Mapping[str, float]) -> dict[str, int]:
    """Whole counts out of 100 that add to 100 (largest remainders), for the per-100 display and sentences."""
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


SELECTION_SETS = (("randomised_break_even", "randomised patients only"), ("all_break_even", "all patients"),
                  ("adjusted_break_even", "chosen patients, weighted"))


def _selection_estimates(row: Mapping[str, Any]) -> list[dict]:
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


@_quick
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
    layers += _patient_layers(patient)  # patient: {"x", "label"} as for outcome_chart
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT * 0.8)
    who = " and ".join(str(r.get("arm")) for r in rows)
    title = f"Selection effect ({who}): {first.get('measure', first.get('outcome'))} along {xt}"
    sub = "chosen minus randomised patients in the same arm at the same index value; zero means none"
    return _finish(chart, title, sub, " ".join(describe_selection(r) for r in rows), style)


@_quick
def selection_break_even_chart(row: Mapping[str, Any], *, index_title: str | None = None,
                               style: bool = True) -> alt.TopLevelMixin:
    """Break-even points from randomised patients only, from all patients, and from weighted chosen patients."""
    est = _selection_estimates(row)
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
    layers = [_chart(pieces).mark_rule(strokeWidth=4, color=INK).encode(
                  x=alt.X("from:Q", title=f"break-even on {xt}", scale=scale), x2=alt.X2("to"), y=y),
              _chart(pieces[pieces["open"]]).mark_text(text="…", fontSize=22, color=INK, dy=-8).encode(
                  x=alt.X("edge:Q", scale=scale), y=y),
              _chart(df[(df["x"] >= span[0]) & (df["x"] <= span[1])]).mark_point(
                  filled=True, size=260, color=INK, opacity=1).encode(
                  x=alt.X("x:Q", scale=scale), y=y,
                  shape=alt.Shape("estimate:N", legend=None, scale=alt.Scale(domain=order, range=shapes)),
                  tooltip=[alt.Tooltip("estimate:N"), alt.Tooltip("x:Q", format=".3~g"), alt.Tooltip("lo:Q", format=".3~g"),
                           alt.Tooltip("hi:Q", format=".3~g")])]
    chart = _sized(alt.layer(*layers), WIDTH, 70 * len(order))
    parts = [f"{e['estimate']}: {fmt(e['x'])}" + (f" (interval {_shape_words(e)})"
                                                   if pd.notna(e["lo"]) or pd.notna(e["hi"]) else " (interval open)")
             for e in df.to_dict("records")]
    desc = (f"Break-even points of {row.get('measure', row.get('outcome'))} along {xt} by the patients used: "
            + ("; ".join(parts) if parts else "none in the searched range") + ".")
    title = f"Break-even by the patients used: {row.get('label') or row.get('measure') or row.get('outcome')} along {xt}"
    return _finish(chart, title, None, desc, style)


def _shape_words(e: Mapping[str, Any]) -> str:
    lo, hi, x = e.get("lo"), e.get("hi"), e.get("x")
    two = e.get("shape") == "two_rays" or (pd.notna(lo) and pd.notna(hi) and not lo <= x <= hi)
    if two:
        return f"below {fmt(lo)} or above {fmt(hi)}, running beyond the index"
    if pd.isna(lo):
        return f"anywhere up to {fmt(hi)}"
    if pd.isna(hi):
        return f"anywhere from {fmt(lo)}"
    return f"{fmt(lo)} to {fmt(hi)}"


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
    how = pairwise_interval_words(windows)
    bars = f"; bars: {how}" if how and len(df.dropna(subset=["lo", "hi"])) else ""
    return _finish(chart, f"Pairwise comparison along {xt}",
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
    Above `max_points` patients a seeded sample is drawn, each arm keeping its share (sampling.plot_sample),
    and attrs["sample_note"] holds the sentence to show beside the chart; the models use every patient.
    """
    from .sampling import plot_sample, sample_note

    spec = fs.spec
    pf = fs.pair(outcome, index)
    o = pf.outcome
    frame = fs.cohort.frame
    arms = list(pf.rows)
    xs, ys, codes, positions = [], [], [], []
    for k, (arm, rows) in enumerate(pf.rows.items()):
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
        xs.append(x[keep])
        ys.append(y[keep])
        codes.append(np.full(int(keep.sum()), k))
        positions.append(np.asarray(rows)[keep])
    every = pd.DataFrame({"x": np.concatenate(xs), "y": np.concatenate(ys),
                          "arm": pd.Categorical.from_codes(np.concatenate(codes), categories=arms),
                          "row": np.concatenate(positions)})
    df = plot_sample(every, max_points, seed=seed, by="arm").reset_index(drop=True)
    rows = df.pop("row").to_numpy()
    df["arm"] = df["arm"].astype(str).astype(object)
    randomised = getattr(fs.cohort, "randomised", None)
    if randomised is not None:
        df["allocation"] = np.where(np.asarray(randomised, bool)[rows], "randomised", "chosen")
    elif spec.cohort.allocation:
        df["allocation"] = np.where(frame[spec.cohort.allocation].iloc[rows].astype(str).to_numpy()
                                    == str(spec.cohort.randomised), "randomised", "chosen")
    rng = np.random.default_rng(seed)  # without an allocation column nobody is drawn as randomised
    binary = o.kind in ("binary", "ordinal") or (o.kind == "survival" and o.measure != "rmst")
    if binary:
        df["y"] = df["y"] + np.where(df["y"] > 0.5, -1, 1) * rng.uniform(0, 0.04, len(df))
    ix = fs.indices[index]
    if bool((ix.info or {}).get("discrete")):
        df["x"] = df["x"] + rng.uniform(-0.2, 0.2, len(df))
    df.attrs["sample_note"] = sample_note(len(every), len(df), seed)
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
    layers = _km_steps(_chart(df), x, colour, 3)
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


# ------------------------------------------------------------------------------------------
# Can the curves be trusted? Charts, tables and sentences from the JSON `checks` rows
# ------------------------------------------------------------------------------------------
WINDOW_COLOUR = OKABE_ITO["reddish_purple"]
FEW_AT_RISK_COLOUR = "#AAAAAA"
AT_RISK_ROW = 24
PANEL = (300, 190)
ALLOCATION_OPACITY = {"randomised": 1.0, "chosen": 0.35}


def _ordinal(n: float) -> str:
    """A whole number with its English suffix (1st, 2nd, 3rd, 11th, 22nd)."""
    k = int(round(n))
    suffix = "th" if 10 <= k % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(k % 10, "th")
    return f"{k}{suffix}"


def percentile_words(b: Mapping[str, Any]) -> str:
    """'the 96th percentile of the cohort' for a break-even carrying x_percentile, else ''."""
    p = b.get("x_percentile")
    return "" if p is None else f"the {_ordinal(p)} percentile of the cohort"


def describe_percentiles(row: Mapping[str, Any], index_label: str | None = None) -> str:
    """Each break-even point in the index's own units and as a cohort percentile, in words."""
    label = index_label_of(row, index_label)
    units = (row.get("index_info") or {}).get("units")
    unit = f" {units}" if units else ""
    parts = [f"{fmt(b['x'])}{unit} lies at {percentile_words(b)} on {label} ({fmt(b['x_percentile'])}% of "
             "patients have a lower value, ties counted half)" for b in row.get("break_even") or []
             if b.get("x_percentile") is not None]
    return ("The break-even point " + "; ".join(parts) + ".") if parts else ""


def describe_effect_modification(em: Mapping[str, Any] | None) -> str:
    """The effect-modification test in words (the engine's sentence), with its method."""
    if not em:
        return "The test of effect modification was not run."
    return f"{em['sentence']} Method: {em.get('method', 'likelihood ratio')}."


def effect_modification_words(em: Mapping[str, Any] | None) -> str:
    """A short table cell: p-value and whether the evidence of a changing effect is weak."""
    if not em or em.get("p_value") is None:
        return ""
    verdict = "weak evidence of a change" if em.get("weak_evidence") else "effect changes"
    return f"p = {fmt(em['p_value'])} ({verdict})"


def check_for(checks: Iterable[Mapping[str, Any]] | None, outcome: str, index: str) -> Mapping[str, Any] | None:
    """The checks row of one outcome x index, or None."""
    return next((c for c in checks or [] if c.get("outcome") == outcome and c.get("index") == index), None)


def breakeven_summary_table(doc: Mapping[str, Any]) -> pd.DataFrame:
    """breakeven_table with the effect-modification test before the break-even and each break-even's cohort
    percentile after it (one row per outcome x index, composites last)."""
    table = breakeven_table(doc)
    rows = list(doc.get("results", [])) + list(doc.get("composite", []))
    checks = doc.get("checks") or []
    tests, pcts = [], []
    for row in rows:
        c = None if "weights" in row else check_for(checks, row["outcome"], row["index"])
        tests.append(effect_modification_words((c or {}).get("effect_modification")))
        pcts.append("; ".join(_ordinal(b["x_percentile"]) for b in row.get("break_even") or []
                              if b.get("x_percentile") is not None))
    table.insert(table.columns.get_loc("break-even"), "effect changes along the index?", tests)
    table.insert(table.columns.get_loc("break-even") + 1, "cohort percentile", pcts)
    return table


def _check_x_title(check: Mapping[str, Any], row: Mapping[str, Any] | None, index_label: str | None) -> str:
    if row is not None:
        return _x_title(row, index_label)
    return index_label or str(check.get("index", "index"))


def _spread(xs: Sequence[float], width: float) -> list[float]:
    """Offsets that set apart points sharing an x value (e.g. windows on a whole-level index)."""
    groups: dict[float, list[int]] = {}
    for i, x in enumerate(xs):
        groups.setdefault(x, []).append(i)
    out = [0.0] * len(xs)
    for members in groups.values():
        m = len(members)
        for k, i in enumerate(members):
            out[i] = (k - (m - 1) / 2) * (width / max(m, 2))
    return out


def _span(values: Iterable[float]) -> float:
    v = [float(x) for x in values if x is not None]
    return (max(v) - min(v)) if len(v) > 1 and max(v) > min(v) else 1.0


def observed_frame(check: Mapping[str, Any], arms: Sequence[str]) -> pd.DataFrame:
    """Observed band values with their intervals beside the band's mean fitted value, per arm."""
    recs = []
    for r in check.get("observed_vs_fitted") or []:
        lo, hi = r.get("observed_ci") or [None, None]
        recs.append({"arm": r["arm"], "from": r["band_from"], "to": r["band_to"], "n": r["n"],
                     "x": (float(r["band_from"]) + float(r["band_to"])) / 2, "observed": r["observed"],
                     "lower": lo, "upper": hi, "fitted": r["fitted"],
                     "band": fmt(r["band_from"]) if r["band_from"] == r["band_to"]
                     else f"{fmt(r['band_from'])} to {fmt(r['band_to'])}"})
    df = pd.DataFrame(recs, columns=["arm", "from", "to", "n", "x", "observed", "lower", "upper", "fitted", "band"])
    if len(df):
        step = _span(df["x"]) * 0.012
        df["x"] = df["x"] + df["arm"].map({arms[0]: -step, arms[1]: step}).fillna(0.0)
    return df


@_quick
def observed_fitted_chart(check: Mapping[str, Any], arms: Sequence[str], row: Mapping[str, Any] | None = None, *,
                          index_label: str | None = None, style: bool = True) -> alt.TopLevelMixin:
    """Observed values in bands of the index (points with intervals) over each arm's fitted curve; open
    diamonds mark the band's mean fitted value (each patient's own covariates)."""
    df = observed_frame(check, arms)
    colour = alt.Color("arm:N", scale=_arm_scale(arms), legend=ARM_LEGEND)
    probability = str(check.get("measure", "")).startswith("probability")
    yscale = alt.Scale(domain=[0, 1]) if probability else alt.Scale(zero=False)
    ytitle = wrap(_cap(str(check.get("measure", ""))), AXIS_CHARS)
    x = alt.X("x:Q", title=_check_x_title(check, row, index_label), scale=alt.Scale(zero=False, nice=False))
    what = alt.Shape("what:N", scale=alt.Scale(domain=["observed, with interval", "fitted, band average"],
                                              range=["circle", "diamond"]), legend=alt.Legend(title="in each band"))
    layers: list[alt.Chart] = []
    if row is not None:
        layers.append(_chart(curve_frame(row, arms)).mark_line(strokeWidth=3).encode(
            x=x, y=alt.Y("estimate:Q", scale=yscale, title=ytitle), color=colour))
    if len(df):
        ci = df.dropna(subset=["lower", "upper"])
        layers.append(_chart(ci).mark_rule(strokeWidth=2.5).encode(
            x=x, y=alt.Y("lower:Q", scale=yscale, title=ytitle), y2=alt.Y2("upper"), color=colour))
        tips = [alt.Tooltip("arm:N"), alt.Tooltip("band:N", title="band"), alt.Tooltip("n:Q", title="patients"),
                alt.Tooltip("observed:Q", format=".3~g"), alt.Tooltip("lower:Q", format=".3~g"),
                alt.Tooltip("upper:Q", format=".3~g"), alt.Tooltip("fitted:Q", format=".3~g")]
        obs = df.dropna(subset=["observed"]).assign(what="observed, with interval")
        layers.append(_chart(obs).mark_point(filled=True, size=110, opacity=1).encode(
            x=x, y=alt.Y("observed:Q", scale=yscale, title=ytitle), color=colour, shape=what, tooltip=tips))
        fit = df.dropna(subset=["fitted"]).assign(what="fitted, band average")
        layers.append(_chart(fit).mark_point(filled=False, size=110, strokeWidth=2, opacity=1).encode(
            x=x, y=alt.Y("fitted:Q", scale=yscale, title=ytitle), color=colour, shape=what, tooltip=tips))
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT)
    label = index_label or (index_label_of(row) if row is not None else check.get("index"))
    title = f"Observed against fitted: {check.get('measure', check.get('outcome'))} along {label}"
    sub = "points: observed in bands of the index with intervals; lines: each arm's fitted curve"
    return _finish(chart, title, sub, describe_observed_fitted(check, label), style)


def describe_observed_fitted(check: Mapping[str, Any], index_label: str | None = None) -> str:
    """Per arm: how many bands, the largest gap between observed and fitted, and how often the fitted value
    falls outside the observed interval."""
    label = index_label or check.get("index")
    bands = check.get("observed_vs_fitted") or []
    parts = []
    for arm in dict.fromkeys(r["arm"] for r in bands):
        rows = [r for r in bands if r["arm"] == arm and r["observed"] is not None and r["fitted"] is not None]
        if not rows:
            parts.append(f"{arm}: no band has an observed value")
            continue
        worst = max(rows, key=lambda r: abs(r["observed"] - r["fitted"]))
        outside = [r for r in rows if None not in r["observed_ci"]
                   and not r["observed_ci"][0] <= r["fitted"] <= r["observed_ci"][1]]
        parts.append(f"{arm}: in {len(rows)} bands the largest gap is at {fmt(worst['band_from'])} to "
                     f"{fmt(worst['band_to'])} (observed {fmt(worst['observed'])}, interval "
                     f"{fmt(worst['observed_ci'][0])} to {fmt(worst['observed_ci'][1])}; fitted "
                     f"{fmt(worst['fitted'])}); the fitted value lies outside the observed interval in "
                     f"{len(outside)} of {len(rows)} bands")
    return (f"Observed against fitted {check.get('measure', check.get('outcome'))} along {label}. "
            + "; ".join(parts) + ".")


def calibration_table(check: Mapping[str, Any]) -> pd.DataFrame:
    """The calibration summary per arm: slope and intercept of observed on fitted band values, band chi-square."""
    recs = [{"arm": c["arm"], "bands": c.get("bands"), "calibration slope": c.get("slope"),
             "intercept": c.get("intercept"), "band chi-square": c.get("chi2"), "df": c.get("df"),
             "p-value": c.get("p_value"), "largest |z| of a band": c.get("max_abs_z")}
            for c in check.get("calibration") or []]
    return pd.DataFrame(recs, columns=["arm", "bands", "calibration slope", "intercept", "band chi-square", "df",
                                       "p-value", "largest |z| of a band"])


def describe_calibration(check: Mapping[str, Any]) -> str:
    """The calibration summary in words, saying where the band chi-square signals a misfit (p < 0.05)."""
    parts = []
    for c in check.get("calibration") or []:
        text = f"{c['arm']}: "
        if c.get("slope") is not None:
            text += f"calibration slope {fmt(c['slope'])}, intercept {fmt(c['intercept'])} over {c['bands']} bands"
        else:
            text += f"too few bands ({c.get('bands', 0)}) for a calibration slope"
        if c.get("chi2") is not None:
            verdict = ("the observed values depart from the fitted curve" if c["p_value"] < 0.05
                       else "no sign of misfit by band")
            text += f"; band chi-square {fmt(c['chi2'])} on {c['df']} df, p = {fmt(c['p_value'])}: {verdict}"
        parts.append(text)
    return ("Calibration (a slope of 1 and an intercept of 0 mean the bands agree with the model). "
            + "; ".join(parts) + ".") if parts else "No calibration summary."


def windows_frame(check: Mapping[str, Any], discrete: bool = False) -> pd.DataFrame:
    """Sliding windows: their span, median, counts, the difference without a model and the model's."""
    recs = [{"from": w["from"], "to": w["to"], "median": w["median"], "n_first": w["n_first"],
             "n_second": w["n_second"], "difference": w["difference"], "lower": w["ci"][0], "upper": w["ci"][1],
             "model": w["model_difference"]} for w in check.get("sliding_window") or []]
    df = pd.DataFrame(recs, columns=["from", "to", "median", "n_first", "n_second", "difference", "lower",
                                     "upper", "model"])
    df["x"] = df["median"].astype(float) + (_spread(list(df["median"]), 0.6) if discrete and len(df) else 0.0)
    return df


@_quick
def sliding_window_chart(check: Mapping[str, Any], arms: Sequence[str], row: Mapping[str, Any] | None = None, *,
                         index_label: str | None = None, style: bool = True) -> alt.TopLevelMixin:
    """The difference without a model in overlapping windows of patients (points with intervals, at each
    window's median index) beside the model's difference (line; with its band when the results row is given)."""
    df = windows_frame(check, discrete=is_discrete(row) if row is not None else False)
    x = alt.X("x:Q", title=_check_x_title(check, row, index_label), scale=alt.Scale(zero=False, nice=False))
    ytitle = wrap(f"{arms[0]} minus {arms[1]}", AXIS_CHARS)
    domain = ["sliding window (no model)", "model"]
    colour = alt.Color("what:N", scale=alt.Scale(domain=domain, range=[WINDOW_COLOUR, INK]),
                       legend=alt.Legend(title="difference"))
    layers: list[alt.Chart] = [_chart(pd.DataFrame([{"y": 0.0}])).mark_rule(color=INK, strokeWidth=1.5)
                               .encode(y=alt.Y("y:Q"))]
    if row is not None:
        mf = difference_frame(row).assign(what="model")
        layers.append(_chart(mf).mark_area(opacity=0.18, color=INK).encode(
            x=alt.X("x:Q"), y=alt.Y("lower:Q", title=ytitle), y2=alt.Y2("upper")))
        layers.append(_chart(mf).mark_line(strokeWidth=3).encode(x=alt.X("x:Q"), y=alt.Y("difference:Q"),
                                                                 color=colour))
    elif len(df):
        layers.append(_chart(df.sort_values("median").assign(what="model")).mark_line(strokeWidth=3).encode(
            x=alt.X("median:Q"), y=alt.Y("model:Q", title=ytitle), color=colour))
    est = df.dropna(subset=["difference"]).assign(what="sliding window (no model)")
    if len(est):
        tips = [alt.Tooltip("from:Q", format=".3~g"), alt.Tooltip("to:Q", format=".3~g"),
                alt.Tooltip("n_first:Q", title=f"{arms[0]} patients"),
                alt.Tooltip("n_second:Q", title=f"{arms[1]} patients"),
                alt.Tooltip("difference:Q", format=".3~g"), alt.Tooltip("lower:Q", format=".3~g"),
                alt.Tooltip("upper:Q", format=".3~g"), alt.Tooltip("model:Q", format=".3~g", title="model")]
        layers.append(_chart(est).mark_rule(strokeWidth=2, opacity=0.8).encode(
            x=x, y=alt.Y("lower:Q", title=ytitle), y2=alt.Y2("upper"), color=colour))
        layers.append(_chart(est).mark_point(filled=True, size=70, opacity=1).encode(
            x=x, y=alt.Y("difference:Q", title=ytitle), color=colour, tooltip=tips))
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT)
    label = index_label or (index_label_of(row) if row is not None else check.get("index"))
    win = check.get("window") or {}
    title = f"Sliding windows: {check.get('measure', check.get('outcome'))} along {label}"
    sub = (f"windows of {win.get('patients', '?')} patients ordered on the index, moving by {win.get('step', '?')}; "
           f"above zero favours {arms[0]}")
    return _finish(chart, title, sub, describe_sliding_window(check, arms, label), style)


def describe_sliding_window(check: Mapping[str, Any], arms: Sequence[str], index_label: str | None = None) -> str:
    """How many windows, the range of the difference without a model, and where the model leaves its interval."""
    label = index_label or check.get("index")
    wins = check.get("sliding_window") or []
    est = [w for w in wins if w["difference"] is not None]
    win = check.get("window") or {}
    head = (f"Sliding windows along {label}: {len(wins)} windows of about {win.get('patients', '?')} patients. ")
    if not est:
        return head + "No window holds enough patients of both arms for a difference without a model."
    low, high = min(est, key=lambda w: w["difference"]), max(est, key=lambda w: w["difference"])
    off = [w for w in est if None not in w["ci"] and not w["ci"][0] <= w["model_difference"] <= w["ci"][1]]
    text = (head + f"Without a model, {arms[0]} minus {arms[1]} runs from {fmt(low['difference'])} (window "
            f"{fmt(low['from'])} to {fmt(low['to'])}) to {fmt(high['difference'])} (window {fmt(high['from'])} to "
            f"{fmt(high['to'])}). The model's difference lies outside the window's interval in {len(off)} of "
            f"{len(est)} windows")
    if off:
        text += f", first in the window {fmt(off[0]['from'])} to {fmt(off[0]['to'])}"
    return text + "."


def horizon_frame(check: Mapping[str, Any], low: float | None = None, high: float | None = None) -> pd.DataFrame:
    """Break-even by horizon; open interval ends are drawn to `low` / `high` (the chart's edges)."""
    recs = []
    for h in check.get("horizon_curve") or []:
        lo, hi = h["ci"]
        recs.append({"horizon": h["horizon"], "break_even": h["break_even"], "lower": lo, "upper": hi,
                     "lower_drawn": low if lo is None else lo, "upper_drawn": high if hi is None else hi,
                     "at_risk_first": h["at_risk_first"], "at_risk_second": h["at_risk_second"],
                     "follow_up": "few patients at risk" if h["beyond_follow_up"] else "enough patients at risk",
                     "spec_horizon": h["spec_horizon"]})
    return pd.DataFrame(recs, columns=["horizon", "break_even", "lower", "upper", "lower_drawn", "upper_drawn",
                                       "at_risk_first", "at_risk_second", "follow_up", "spec_horizon"])


@_quick
def horizon_chart(check: Mapping[str, Any], arms: Sequence[str], row: Mapping[str, Any] | None = None, *,
                  index_label: str | None = None, units: str | None = None,
                  style: bool = True) -> alt.TopLevelMixin:
    """The break-even point (with its interval) as a function of the horizon; horizons where few patients
    remain at risk are greyed, the spec's horizon is marked."""
    first = horizon_frame(check)
    ends = [v for c in ("break_even", "lower", "upper") for v in first[c] if v is not None and pd.notna(v)]
    found_any = first.dropna(subset=["break_even"])
    open_end = bool(found_any["lower"].isna().any() or found_any["upper"].isna().any())
    if row is not None and (open_end or not ends):
        ends += [float(v) for v in row["range"]]
    low, high = (min(ends), max(ends)) if ends else (0.0, 1.0)
    df = horizon_frame(check, low, high)
    unit = f" ({units})" if units else ""
    label = index_label or (index_label_of(row) if row is not None else check.get("index"))
    x = alt.X("horizon:Q", title=f"horizon{unit}", scale=alt.Scale(zero=False))
    y = alt.Y("break_even:Q", title=wrap(f"break-even on {label}", AXIS_CHARS),
              scale=alt.Scale(domain=[low, high], zero=False))
    colour = alt.Color("follow_up:N", scale=alt.Scale(domain=["enough patients at risk", "few patients at risk"],
                                                     range=[INK, FEW_AT_RISK_COLOUR]),
                       legend=alt.Legend(title="follow-up"))
    found = df.dropna(subset=["break_even"])
    layers: list[alt.Chart] = []
    spec_h = df[df["spec_horizon"]]
    if len(spec_h):
        layers.append(_chart(spec_h[["horizon"]].assign(what="the spec's horizon")).mark_rule(
            color=INK, strokeDash=[5, 4]).encode(x=alt.X("horizon:Q"), tooltip=[alt.Tooltip("what:N")]))
    if len(found):
        tips = [alt.Tooltip("horizon:Q", format=".4~g"), alt.Tooltip("break_even:Q", format=".3~g"),
                alt.Tooltip("lower:Q", format=".3~g"), alt.Tooltip("upper:Q", format=".3~g"),
                alt.Tooltip("at_risk_first:Q", title=f"{arms[0]} at risk"),
                alt.Tooltip("at_risk_second:Q", title=f"{arms[1]} at risk")]
        layers.append(_chart(found).mark_line(strokeWidth=2, color=INK, opacity=0.5).encode(x=x, y=y))
        layers.append(_chart(found).mark_rule(strokeWidth=3).encode(
            x=x, y=alt.Y("lower_drawn:Q", scale=alt.Scale(domain=[low, high], zero=False)), y2=alt.Y2("upper_drawn"),
            color=colour))
        layers.append(_chart(found).mark_point(filled=True, size=110, opacity=1).encode(x=x, y=y, color=colour,
                                                                                         tooltip=tips))
    if not layers:
        layers.append(_chart(pd.DataFrame([{"y": 0.0}])).mark_rule(opacity=0).encode(y=alt.Y("y:Q")))
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT * 0.85)
    title = f"Break-even on {label} by horizon: {_outcome_title(row) if row is not None else check.get('outcome')}"
    sub = "bars: intervals; grey: few patients left at risk; dashed: the spec's horizon"
    return _finish(chart, title, sub, describe_horizon(check, label, units), style)


def describe_horizon(check: Mapping[str, Any], index_label: str | None = None, units: str | None = None) -> str:
    """The break-even point at the spec's horizon, its range across horizons with enough follow-up, and where
    follow-up runs thin or no break-even exists."""
    label = index_label or check.get("index")
    unit = f" {units}" if units else ""
    rows = check.get("horizon_curve") or []
    if not rows:
        return f"No horizon curve for {check.get('outcome')} along {label}."
    parts = [f"Break-even on {label} at {len(rows)} horizons from {fmt(rows[0]['horizon'])} to "
             f"{fmt(rows[-1]['horizon'])}{unit}"]
    at = next((h for h in rows if h["spec_horizon"]), None)
    if at is not None:
        if at["break_even"] is None:
            parts.append(f"at the spec's horizon {fmt(at['horizon'])}{unit} there is none in range")
        else:
            parts.append(f"at the spec's horizon {fmt(at['horizon'])}{unit} it is {fmt(at['break_even'])} "
                         f"(interval {fmt(at['ci'][0])} to {fmt(at['ci'][1])})")
    good = [h["break_even"] for h in rows if h["break_even"] is not None and not h["beyond_follow_up"]]
    if good:
        parts.append(f"where enough patients remain at risk it runs from {fmt(min(good))} to {fmt(max(good))}")
    none = [h["horizon"] for h in rows if h["break_even"] is None]
    if none:
        parts.append("no break-even at " + ", ".join(fmt(h) for h in none) + unit)
    thin = [h["horizon"] for h in rows if h["beyond_follow_up"]]
    if thin:
        parts.append(f"from {fmt(min(thin))}{unit} on few patients remain at risk (greyed)")
    return "; ".join(parts) + "."


KM_DRAW_TOLERANCE = 0.004


def drawn_steps(steps: Sequence[Mapping[str, Any]], tolerance: float = KM_DRAW_TOLERANCE) -> list[Mapping[str, Any]]:
    """The Kaplan-Meier steps worth drawing: a step is kept once the curve or an interval end has moved by
    `tolerance` since the last kept one, so the drawn curve stays within it of the estimate with far fewer points."""
    if len(steps) <= 2:
        return list(steps)
    kept = [steps[0]]
    for s in steps[1:-1]:
        last = kept[-1]
        if any(abs((s[k] or 0.0) - (last[k] or 0.0)) >= tolerance for k in ("survival", "lower", "upper")):
            kept.append(s)
    kept.append(steps[-1])
    return kept


def _km_rows(curves: Iterable[Mapping[str, Any]], band: str | None) -> list[Mapping[str, Any]]:
    return [c for c in curves if (c.get("band") or {}).get("label") == band]


def _km_steps(steps: alt.Chart, x: alt.X, colour: alt.Color, width: float,
              y_scale: alt.Scale | None = None) -> list[alt.Chart]:
    """Kaplan-Meier steps per arm (a chart over time, survival, lower, upper, arm): the interval band and the curve."""
    y_scale = y_scale or alt.Scale(domain=[0, 1])
    axis = alt.Axis(values=[0, 0.2, 0.4, 0.6, 0.8, 1.0])
    return [steps.mark_area(opacity=0.18, interpolate="step-after").encode(
                x=x, y=alt.Y("lower:Q", title="probability alive", scale=y_scale, axis=axis),
                y2=alt.Y2("upper"), color=colour),
            steps.mark_line(strokeWidth=width, interpolate="step-after").encode(
                x=x, y=alt.Y("survival:Q", scale=y_scale, axis=axis), color=colour,
                tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("time:Q", format=".4~g"),
                         alt.Tooltip("survival:Q", format=".3f"), alt.Tooltip("lower:Q", format=".3f"),
                         alt.Tooltip("upper:Q", format=".3f")])]


AT_RISK_STEP = 0.12  # rows of numbers at risk sit beneath the curves, this far apart on the survival scale


def km_records(curves: Sequence[Mapping[str, Any]], arms: Sequence[str], horizon: float | None = None
               ) -> tuple[dict, ...]:
    """One table for a Kaplan-Meier chart: the drawn steps, the numbers at risk (with the row they sit in
    beneath the curves), and each panel's horizon and baseline; `band` names the panel."""
    recs: list[dict] = []
    for c in curves:
        band = (c.get("band") or {}).get("label") or "all patients"
        recs += [{"kind": "step", "band": band, "arm": c["arm"], **s} for s in drawn_steps(c["steps"])]
        row = -AT_RISK_STEP * (list(arms).index(c["arm"]) + 1)
        recs += [{"kind": "risk", "band": band, "arm": c["arm"], "time": a["time"], "n": a["n"], "y": row}
                 for a in c["at_risk"]]
    for band in dict.fromkeys(r["band"] for r in recs):
        recs.append({"kind": "base", "band": band, "time": 0.0, "y": 0.0})
        if horizon:
            recs.append({"kind": "horizon", "band": band, "time": float(horizon)})
    return tuple(recs)


def _km_layer(recs: Sequence[Mapping[str, Any]], arms: Sequence[str], *, units: str | None,
              size: tuple[float, float]) -> alt.LayerChart:
    """Kaplan-Meier steps with their bands, the numbers at risk in rows beneath the curves (arm colours, first
    arm on top) and the horizon, as layers over one table (km_records), so panels can be faceted."""
    times = [float(r["time"]) for r in recs] + [1.0]
    top = max(times)
    xs = alt.Scale(domain=[-0.05 * top, 1.02 * top], nice=False, zero=False)
    ys = alt.Scale(domain=[-AT_RISK_STEP * (len(arms) + 0.6), 1.0], nice=False, zero=False)
    x = alt.X("time:Q", scale=xs, title=f"time ({units})" if units else "time")
    colour = alt.Color("arm:N", scale=_arm_scale(arms), legend=ARM_LEGEND)
    base = alt.Chart()
    of = lambda kind: base.transform_filter(alt.datum.kind == kind)  # noqa: E731
    layers = _km_steps(of("step"), x, colour, 2.5, ys)
    layers += [of("base").mark_rule(color=INK, strokeWidth=1).encode(y=alt.Y("y:Q", scale=ys)),
               of("risk").mark_text(fontSize=FONT["text"] - 3).encode(
                   x=x, y=alt.Y("y:Q", scale=ys), text=alt.Text("n:Q"), color=colour,
                   tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("time:Q", format=".4~g"),
                            alt.Tooltip("n:Q", title="at risk")]),
               of("horizon").mark_rule(color=INK, strokeDash=[5, 4]).encode(x=x)]
    return _sized(alt.layer(*layers), *size)


@_quick
def kaplan_meier_chart(curves: Sequence[Mapping[str, Any]], arms: Sequence[str], *, band: str | None = None,
                       units: str | None = None, horizon: float | None = None, label: str | None = None,
                       style: bool = True) -> alt.TopLevelMixin:
    """Kaplan-Meier curves per arm (checks.km_curves rows; all patients, or one band of the index by its
    label) with numbers at risk beneath."""
    rows = _km_rows(curves, band)
    recs = km_records(rows, arms, horizon)
    chart = _km_layer(recs, arms, units=units, size=(WIDTH, HEIGHT))
    chart.data = alt.InlineData(values=recs)
    outcome = label or (rows[0]["outcome"] if rows else "")
    where = "all patients" if band is None else f"index band {band}"
    return _finish(chart, f"{outcome}: Kaplan-Meier by arm, {where}",
                   "numbers at risk beneath the curves; dashed line: the horizon" if horizon
                   else "numbers at risk beneath the curves", describe_km(rows, units=units, horizon=horizon), style)


@_quick
def kaplan_meier_bands_chart(curves: Sequence[Mapping[str, Any]], arms: Sequence[str], *, index_label: str = "index",
                             units: str | None = None, horizon: float | None = None, columns: int = 2,
                             label: str | None = None, style: bool = True) -> alt.TopLevelMixin:
    """Kaplan-Meier curves per arm in each band of the index, one small panel per band with its numbers at risk."""
    banded = [c for c in curves if c.get("band")]
    bands = list(dict.fromkeys(c["band"]["label"] for c in banded))
    recs = km_records(banded, arms, horizon)
    chart = _km_layer(recs, arms, units=units, size=PANEL).facet(
        facet=alt.Facet("band:N", sort=bands, title=index_label, header=alt.Header(labelFontSize=FONT["text"], titleFontSize=FONT["axis_title"])),
        columns=columns, data=alt.InlineData(values=recs), spacing=20)
    outcome = label or (curves[0]["outcome"] if curves else "")
    desc = " ".join(f"{index_label} {b}: " + describe_km(_km_rows(curves, b), units=units, horizon=horizon)
                    for b in bands)
    return _finish(chart, f"{outcome}: Kaplan-Meier by arm in bands of {index_label}",
                   "numbers at risk beneath the curves in each panel", desc or "No bands.", style)


def describe_km(rows: Sequence[Mapping[str, Any]], *, units: str | None = None, horizon: float | None = None) -> str:
    """Per arm: patients, events, survival at the horizon (with interval), median, and the last number at risk."""
    unit = f" {units}" if units else ""
    parts = []
    for c in rows:
        text = f"{c['arm']}: {c['n']} patients, {c['events']} events"
        if horizon is not None:
            before = [s for s in c["steps"] if s["time"] <= horizon]
            s = before[-1]
            text += (f", alive at {fmt(horizon)}{unit} {fmt(s['survival'])} (interval {fmt(s['lower'])} to "
                     f"{fmt(s['upper'])})")
        med = c.get("median") or {}
        text += (f", median {fmt(med['time'])}{unit}" if med.get("time") is not None else ", median not reached")
        if c.get("at_risk"):
            last = c["at_risk"][-1]
            text += f", {last['n']} still at risk at {fmt(last['time'])}{unit}"
        parts.append(text)
    return "Kaplan-Meier: " + "; ".join(parts) + "." if parts else "No Kaplan-Meier curves."


def _smd_cell(s: Mapping[str, Any]) -> str:
    if s.get("smd") is None:
        return ""
    return f"{s['smd']:.2f}" + (" (above 0.1)" if s.get("imbalanced") else "")


def baseline_frame(table: Sequence[Mapping[str, Any]]) -> pd.DataFrame:
    """The baseline table: per covariate, mean (SD) or share in each arm by allocation, then each
    standardised mean difference (flagged above 0.1)."""
    recs = []
    for r in table:
        rec: dict[str, Any] = {"characteristic": words(r["covariate"])}
        for g in r["groups"]:
            rec[f"{g['allocation']}: {g['arm']}"] = g["text"] + (f", {g['missing']} missing" if g["missing"] else "")
        for s in r["smd"]:
            rec[f"SMD {s['compare']} ({s['among']})"] = _smd_cell(s)
        recs.append(rec)
    return pd.DataFrame(recs)


@_quick
def smd_chart(table: Sequence[Mapping[str, Any]], *, style: bool = True) -> alt.TopLevelMixin:
    """Standardised mean differences of every baseline covariate in every comparison, with the 0.1 lines."""
    df = pd.DataFrame([{"covariate": words(r["covariate"]), "comparison": f"{s['compare']} ({s['among']})",
                        "smd": s["smd"], "flag": "above 0.1" if s["imbalanced"] else "within 0.1"}
                       for r in table for s in r["smd"] if s["smd"] is not None],
                      columns=["covariate", "comparison", "smd", "flag"])
    comparisons = list(dict.fromkeys(df["comparison"]))
    palette = [OKABE_ITO[k] for k in ("black", "sky_blue", "bluish_green", "reddish_purple", "vermillion",
                                      "yellow")]
    shapes = ["circle", "square", "triangle-up", "diamond", "cross", "triangle-down"]
    limit = max([0.25] + [abs(float(v)) * 1.1 for v in df["smd"]])
    refs = pd.DataFrame([{"x": v} for v in (-0.1, 0.1)])
    layers = [_chart(pd.DataFrame([{"x": 0.0}])).mark_rule(color=INK).encode(x=alt.X("x:Q")),
              _chart(refs).mark_rule(color=INK, strokeDash=[5, 4]).encode(x=alt.X("x:Q")),
              _chart(df).mark_point(filled=True, size=110, opacity=0.9).encode(
                  x=alt.X("smd:Q", title="standardised mean difference", scale=alt.Scale(domain=[-limit, limit])),
                  y=alt.Y("covariate:N", title=None, sort=list(dict.fromkeys(df["covariate"]))),
                  color=alt.Color("comparison:N", scale=alt.Scale(domain=comparisons,
                                                                  range=palette[:len(comparisons)]),
                                  legend=alt.Legend(title="comparison")),
                  shape=alt.Shape("comparison:N", scale=alt.Scale(domain=comparisons, range=shapes[:len(comparisons)])),
                  tooltip=[alt.Tooltip("covariate:N"), alt.Tooltip("comparison:N"),
                           alt.Tooltip("smd:Q", format=".3f"), alt.Tooltip("flag:N")])]
    chart = _sized(alt.layer(*layers), WIDTH, max(120, 34 * df["covariate"].nunique()))
    return _finish(chart, "Balance of baseline characteristics", "dashed lines: standardised mean difference 0.1",
                   describe_baseline(table), style)


def describe_baseline(table: Sequence[Mapping[str, Any]]) -> str:
    """How many comparisons exceed |SMD| 0.1, naming each, and the largest."""
    entries = [(r["covariate"], s) for r in table for s in r["smd"] if s["smd"] is not None]
    if not entries:
        return "No baseline characteristics to compare."
    flagged = [(c, s) for c, s in entries if s["imbalanced"]]
    name, big = max(entries, key=lambda e: abs(e[1]["smd"]))
    text = (f"Baseline characteristics: {len(table)} compared in {len(entries)} comparisons; the largest "
            f"standardised mean difference is {big['smd']:.2f} ({words(name)}, {big['compare']}, {big['among']}). ")
    if flagged:
        text += (f"{len(flagged)} exceed 0.1: " + "; ".join(f"{words(c)} {s['smd']:.2f} ({s['compare']}, "
                                                             f"{s['among']})" for c, s in flagged) + ".")
    else:
        text += "None exceeds 0.1."
    return text


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


@_quick
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
    bars = _chart(df).mark_bar().encode(
        x=x, xOffset=alt.XOffset("arm:N", sort=list(arms)),
        y=alt.Y("n:Q", title="patients", stack="zero"),
        color=alt.Color("arm:N", scale=_arm_scale(arms), legend=alt.Legend(title="arm")),
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
        layers.append(_chart(few).mark_text(angle=270, align="right", dy=0, fontSize=FONT["text"] - 3, color=INK)
                      .encode(x=alt.X("window:N", sort=order), y=alt.value(6), text=alt.Text("text:N")))
    chart = _sized(alt.layer(*layers), WIDTH, HEIGHT * 0.8)
    return _finish(chart, f"Where the randomised patients are along {index_label}",
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


def imputation_frame(rows: Sequence[Mapping[str, Any]], index_labels: Mapping[str, str] | None = None) -> pd.DataFrame:
    """Complete-case and multiply imputed break-even points side by side, per outcome x index."""
    labels = index_labels or {}

    def points(bes: Sequence[Mapping[str, Any]] | None) -> str:
        return "; ".join(f"{fmt(b['x'])} ({_interval_words(b)})" for b in bes or []) or "none in range"

    recs = [{"outcome": r["outcome"], "index": labels.get(r["index"], r["index"]),
             "complete cases": points(r["complete_case"]["break_even"]),
             "patients (complete cases)": ", ".join(f"{a} {n}" for a, n in r["complete_case"]["n"].items()),
             "imputed": points(r["imputed"]["break_even"]) if r.get("imputed") else "nothing to impute",
             "values imputed": ", ".join(f"{k} {v}" for k, v in (r.get("imputed_values") or {}).items())}
            for r in rows]
    return pd.DataFrame(recs, columns=["outcome", "index", "complete cases", "patients (complete cases)", "imputed",
                                       "values imputed"])


def describe_clustering(info: Mapping[str, Any] | None) -> str:
    """Which clustered intervals were used and over how many clusters."""
    if not info:
        return "Patients are treated as independent: no cluster column is named."
    per_arm = ", ".join(f"{a} {k}" for a, k in (info.get("clusters_per_arm") or {}).items())
    return (f"Clustered by '{info['column']}': {info['clusters']} clusters ({per_arm}); intervals use "
            f"{info['method']}.")

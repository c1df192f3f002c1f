"""Chart plumbing shared by every chart module: the projector look (fonts, sizes), fast inline data, titles and
accessible descriptions, the row facts charts and sentences read, and image export (SVG, PNG).

One colour per arm everywhere (Okabe & Ito 2008, never green against red; the palette lives in explorer/look.py
and the rules in docs/look.md), randomised and chosen patients told apart by marker shape, and every chart
titled, described for screen readers and sized for a projector.
"""
from __future__ import annotations

import hashlib
import math
import pickle
import re
import threading
from collections import OrderedDict
from functools import lru_cache, wraps
from typing import Any, Callable, Iterable, Mapping, Sequence

import altair as alt
import numpy as np
import pandas as pd
from altair.utils import schemapi

from .look import INK, MUTED, RULE, arm_colours
from .look import state_colours as _state_colours
from .words import cap, wrap


ALLOCATION_SHAPES = {"randomised": "triangle-up", "chosen": "circle"}
ALLOCATION_SIZES = {"randomised": 70, "chosen": 22}
WIDTH, HEIGHT = 640, 360
TITLE_CHARS, AXIS_CHARS = 58, 38
FONT = {"title": 22, "subtitle": 16, "axis_title": 18, "axis_label": 16, "legend_title": 16, "legend_label": 15,
        "text": 15}
ARM_LEGEND = alt.Legend(title="arm", symbolType="stroke", symbolStrokeWidth=5, symbolOpacity=1)
TYPEFACE = "\"Source Sans\", \"Source Sans 3\", \"Source Sans Pro\", \"Segoe UI\", \"Helvetica Neue\", Arial, sans-serif"
DEATH_WORDS = ("dead", "death", "died", "deceased")


def state_colours(levels: Sequence[str]) -> dict[str, str]:
    """Outcome-state colours, best state lightest, darker down the order; the death state dark neutral."""
    return _state_colours(levels, [str(lv).lower() in DEATH_WORDS for lv in levels])


def index_label_of(row: Mapping[str, Any], override: str | None = None) -> str:
    """The index's readable name: the caller's override, its label, or its name."""
    info = row.get("index_info") or {}
    return override or info.get("label") or row["index"]


def is_discrete(row: Mapping[str, Any]) -> bool:
    return bool((row.get("index_info") or {}).get("discrete"))


def is_probability(row: Mapping[str, Any]) -> bool:
    """Whether the row's measure is a probability (so its axis runs from 0 to 1): the results and checks rows
    say so (composite rows, values in the weights' units, never are)."""
    return bool(row.get("probability"))


def x_title(row: Mapping[str, Any], override: str | None = None) -> str:
    info = row.get("index_info") or {}
    units = info.get("units")
    label = index_label_of(row, override)
    return f"{label} ({units})" if units else label


def outcome_title(row: Mapping[str, Any]) -> str:
    """The outcome's label when the row carries one, else its measure in words."""
    return str(row.get("label") or row.get("measure") or row["outcome"])


def measure_title(row: Mapping[str, Any]) -> str:
    return cap(str(row.get("measure", "")))


def check_for(checks: Iterable[Mapping[str, Any]] | None, outcome: str, index: str) -> Mapping[str, Any] | None:
    """The checks row of one outcome x index, or None."""
    return next((c for c in checks or [] if c.get("outcome") == outcome and c.get("index") == index), None)


DISPLAY_POINTS = 60  # a curve is drawn through at most about this many of its grid points (one every ~11 pixels)


def thinned(points: Sequence[Any], most: int = DISPLAY_POINTS) -> list[Any]:
    """Every k-th grid point of a curve, first and last kept, so at most about `most` are drawn: the analysis keeps
    its fine grid, a 640-pixel chart needs no more."""
    points = list(points)
    if len(points) <= most:
        return points
    step = math.ceil(len(points) / most)
    kept = points[::step]
    return kept if kept[-1] is points[-1] else kept + [points[-1]]


def projector_config() -> alt.Config:
    """Projector-sized fonts and a plain look."""
    return alt.Config(
        font=TYPEFACE,
        axis=alt.AxisConfig(labelFontSize=FONT["axis_label"], titleFontSize=FONT["axis_title"], grid=True,
                            gridColor=RULE, gridOpacity=0.35, labelColor=INK, titleColor=INK, domainColor=MUTED,
                            tickColor=MUTED, titleFontWeight="normal", labelLimit=360),  # Vega-Lite cuts at 180 px
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


def finish_chart(chart: alt.TopLevelMixin, title: str, subtitle: str | list[str] | None, description: str,
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


BUILT_KEPT = 128  # charts kept for reuse (a page shows up to about twenty; a session revisits its pages)
_built: OrderedDict[bytes, Any] = OrderedDict()


def _build_key(fn: Callable, args: tuple, kwargs: dict) -> bytes | None:
    """A digest of a chart builder's name and arguments (rows, frames, arms, the patient marker), or None when
    an argument cannot be pickled (such a chart is simply built each time)."""
    try:
        blob = pickle.dumps((fn.__module__, fn.__qualname__, args, sorted(kwargs.items())), protocol=5)
    except Exception:
        return None
    return hashlib.blake2b(blob, digest_size=20).digest()


def quick_chart(fn: Callable) -> Callable:
    """Build without Altair's per-object validation (specs are validated whole by to_dict when wanted), and
    give back the chart already built when the same builder is called with equal arguments: a page rerun (a
    page switch, a control elsewhere) redraws the same charts, and building them took most of its time. The
    builders are pure functions of their arguments and callers copy a chart before changing it.

    Altair keeps the validation switch in a module global; a counter under a lock restores it only when the
    last of several concurrent builds (app sessions run in threads) has finished.
    """
    @wraps(fn)
    def run(*args: Any, **kwargs: Any) -> Any:
        global _quiet_depth, _saved_debug
        key = _build_key(fn, args, kwargs)
        with _QUIET:
            if key is not None and key in _built:
                _built.move_to_end(key)
                return _built[key]
            if _quiet_depth == 0:
                _saved_debug = schemapi.DEBUG_MODE
                schemapi.DEBUG_MODE = False
            _quiet_depth += 1
        try:
            chart = fn(*args, **kwargs)
        finally:
            with _QUIET:
                _quiet_depth -= 1
                if _quiet_depth == 0:
                    schemapi.DEBUG_MODE = _saved_debug
        if key is not None:
            with _QUIET:
                _built[key] = chart
                while len(_built) > BUILT_KEPT:
                    _built.popitem(last=False)
        return chart
    return run


def base_chart(data: pd.DataFrame) -> alt.Chart:
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


def sized_chart(chart: alt.TopLevelMixin, width: float, height: float) -> alt.TopLevelMixin:
    chart.width, chart.height = width, height
    return chart


def arm_scale(arms: Sequence[str]) -> alt.Scale:
    c = arm_colours(arms)
    return alt.Scale(domain=list(arms), range=[c[a] for a in arms])


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
def converter_version() -> str | None:
    import vl_convert as vlc

    want = vega_lite_version()
    return want if want in vlc.get_vegalite_versions() else None


def chart_to_svg(chart: alt.TopLevelMixin) -> str:
    import vl_convert as vlc

    return vlc.vegalite_to_svg(chart_spec(chart), vl_version=converter_version())


def chart_to_png(chart: alt.TopLevelMixin, scale: float = 2.0) -> bytes:
    import vl_convert as vlc

    return vlc.vegalite_to_png(chart_spec(chart), vl_version=converter_version(), scale=scale)

"""Numbers and words as people read them: the formatting the engine's sentences and every display share.

The lowest layer of the presentation: nothing here knows a chart, a model or an outcome kind.
"""
from __future__ import annotations

import math
import re
import textwrap
from typing import Any, Mapping

import numpy as np


METHOD_WORDS = {"fieller": "Fieller", "delta": "delta method", "test-inversion": "test inversion",
                "bootstrap-percentile": "bootstrap percentile"}


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


def cap(text: str) -> str:
    return text[:1].upper() + text[1:]


def ordinal(n: float) -> str:
    """A whole number with its English suffix (1st, 2nd, 3rd, 11th, 22nd)."""
    k = int(round(n))
    suffix = "th" if 10 <= k % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(k % 10, "th")
    return f"{k}{suffix}"


def percentile_words(b: Mapping[str, Any]) -> str:
    """'the 96th percentile of the cohort' for a break-even carrying x_percentile, else ''."""
    p = b.get("x_percentile")
    return "" if p is None else f"the {ordinal(p)} percentile of the cohort"


def _span_piece(a: float | None, z: float | None, bounds: tuple[float, float] | None) -> str | None:
    """One connected piece of an interval (None: open), cut to the declared bounds; None when it lies wholly
    outside them."""
    if bounds is not None:
        low, high = float(bounds[0]), float(bounds[1])
        if (a is not None and a > high) or (z is not None and z < low):
            return None
        from_low, to_high = a is None or a <= low, z is None or z >= high
        if from_low and to_high:
            return f"anywhere from {fmt(low)} to {fmt(high)}, the whole possible range"
        if from_low:
            return f"from {fmt(low)}, the lowest possible value, to {fmt(z)}"
        if to_high:
            return f"from {fmt(a)} to {fmt(high)}, the highest possible value"
        return f"{fmt(a)} to {fmt(z)}"
    if a is None and z is None:
        return "unbounded"
    if a is None:
        return f"open below, up to {fmt(z)}"
    if z is None:
        return f"from {fmt(a)}, open above"
    return f"{fmt(a)} to {fmt(z)}"


def interval_span(b: Mapping[str, Any], bounds: Any = None) -> str:
    """Where a break-even's interval lies, in words: a two-part interval as two parts, an open end as open, and
    ends past the index's declared bounds (e.g. [1, 9] for a 1-9 scale) as the lowest or highest possible value,
    never as an impossible number such as -21.5 on a 1-9 scale. The one home of these words: every table,
    sentence and summary that states a break-even interval uses it."""
    lo, hi = (b.get("ci") or [None, None])[:2]
    lo = None if lo is None or not np.isfinite(lo) else float(lo)
    hi = None if hi is None or not np.isfinite(hi) else float(hi)
    scale = (float(bounds[0]), float(bounds[1])) if bounds else None
    two = b.get("interval_shape") == "two_rays" and lo is not None and hi is not None
    pieces = [p for p in ([_span_piece(None, lo, scale), _span_piece(hi, None, scale)] if two
                          else [_span_piece(lo, hi, scale)]) if p is not None]
    if not pieces:
        return "outside the possible range: the data cannot place it"
    if len(pieces) == 2:
        return f"in two parts: {pieces[0]}, and {pieces[1]}"
    text = pieces[0]
    if text == "unbounded" or text.endswith("the whole possible range"):
        return f"{text}: the data cannot place it"
    return text


def interval_words(b: Mapping[str, Any], bounds: Any = None) -> str:
    """interval_span with the method that made the interval (e.g. 'Fieller', 'bootstrap percentile')."""
    method = METHOD_WORDS.get(b.get("interval", ""), b.get("interval", ""))
    if b.get("approximate"):
        method += ", approximate"
    return f"{interval_span(b, bounds)}, {method}"


def row_bounds(row: Mapping[str, Any]) -> Any:
    """The declared bounds of a results row's index ([low, high]), or None."""
    return (row.get("index_info") or {}).get("bounds")


def levels_within(lo: float, hi: float) -> tuple[int, int] | None:
    a, z = math.ceil(lo - 1e-9), math.floor(hi + 1e-9)
    return (a, z) if a <= z else None


def level_span(a: int, z: int) -> str:
    return f"level {a}" if a == z else f"levels {a} to {z}"


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

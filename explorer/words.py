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


def interval_words(b: Mapping[str, Any]) -> str:
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

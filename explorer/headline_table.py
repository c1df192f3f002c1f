"""The headline table a meeting reads first: per outcome and index, where the arms break even (with its
interval), which arm does better below and above, which patients the estimate rests on, and whether the
difference between the arms changes along the index at all, in words. Labels only, never internal names."""
from __future__ import annotations

from typing import Any, Iterable, Mapping

import pandas as pd

from .charts_common import check_for, index_label_of
from .words import fmt, interval_span, row_bounds

COLUMNS = ("outcome", "index", "arms break even at", "better below", "better above", "estimated from",
           "does the difference change along the index?")


def change_words(em: Mapping[str, Any] | None) -> str:
    """The effect-modification test in words (its p-value in brackets, for those who want it)."""
    if not em or em.get("p_value") is None:
        return "not tested"
    p = float(em["p_value"])
    if em.get("weak_evidence"):
        return f"not clearly: the break-even rests on weak evidence (p = {fmt(p)})"
    return f"yes, clearly (p = {fmt(p)})"


def _population(row: Mapping[str, Any]) -> str:
    if row.get("population"):
        return str(row["population"])
    n = row.get("n") or {}
    return ", ".join(f"{v:,} {k}" for k, v in n.items()) if n else ""


def headline_table(rows: Iterable[Mapping[str, Any]], checks: Iterable[Mapping[str, Any]] | None,
                   outcome_titles: Mapping[str, str]) -> pd.DataFrame:
    """One row per outcome x index of the `results` rows, in the order given."""
    checks = list(checks or [])
    recs = []
    for row in rows:
        name = outcome_titles.get(row["outcome"], row.get("label") or row["outcome"])
        units = (row.get("index_info") or {}).get("units")
        bes = [b for b in row.get("break_even") or [] if b.get("x") is not None]
        if bes:
            at = "; ".join(f"{fmt(b['x'])}{' ' + units if units else ''} ({interval_span(b, row_bounds(row))})"
                           + (", beyond the data" if b.get("extrapolated") else "") for b in bes)
            below, above = bes[0].get("favours_below") or "", bes[-1].get("favours_above") or ""
        else:
            fav = row.get("favours_throughout")
            at = "nowhere in the cohort's range"
            below = above = f"{fav} throughout" if fav else "neither clearly"
        em = (check_for(checks, row["outcome"], row["index"]) or {}).get("effect_modification")
        recs.append({"outcome": name, "index": index_label_of(row), "arms break even at": at, "better below": below,
                     "better above": above, "estimated from": _population(row),
                     "does the difference change along the index?": change_words(em)})
    return pd.DataFrame(recs, columns=list(COLUMNS))

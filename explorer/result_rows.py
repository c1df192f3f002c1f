"""One `results` row per fitted pair (outcome x index): the curve, its bands, break-even points placed as cohort
percentiles, clear-difference regions cut to the observed range, and the index's info. The analysis, the
composites (values) and the app's re-summaries all build their rows here."""
from __future__ import annotations

import dataclasses

import numpy as np

from .breakeven import CurveSummary
from .fitting import PairFit, in_range
from .indices import percentile_of
from .models import describe
from .models.words import measure_words
from .numeric import jsonable, r6, r6_list


def curve_row(pair: PairFit, summary: CurveSummary, index_info: dict, n_points: int | None = None) -> dict:
    keep = in_range(pair, summary.grid)
    fb, sb = summary.first_band, summary.second_band
    x, first, second, diff, lo, hi = (r6_list(np.asarray(a)[keep]) for a in (
        summary.grid, summary.first, summary.second, summary.difference, summary.lower, summary.upper))
    pts = [{"x": x[i], "first": first[i], "second": second[i], "difference": diff[i],
            "difference_ci": [lo[i], hi[i]]} for i in range(len(x))]
    if fb is not None:
        f0, f1, s0, s1 = (r6_list(np.asarray(a)[keep]) for a in (fb[0], fb[1], sb[0], sb[1]))
        for i, p in enumerate(pts):
            p["first_ci"] = [f0[i], f1[i]]
            p["second_ci"] = [s0[i], s1[i]]
    arms = list(pair.fits)
    ref = {}
    for arm in arms[:1]:
        f = pair.fits[arm]
        if getattr(f, "z_names", ()):
            ref = {n: r6(v) for n, v in zip(f.z_names, f.z_ref)}
    return {
        "outcome": pair.outcome.name,
        "label": pair.outcome.title,
        "index": pair.index,
        "population": getattr(pair, "population", "all"),
        "measure": measure_words(pair.outcome),
        "probability": describe(pair.outcome).probability,
        "kind": pair.outcome.kind,
        "higher_is_better": pair.outcome.higher_is_better,
        "among_survivors": pair.outcome.among_survivors,
        "range": [r6(pair.x_range[0]), r6(pair.x_range[1])],
        "n": {arm: int(pair.fits[arm].n_) for arm in arms},
        "events": {arm: (None if pair.fits[arm].n_events_ is None else int(pair.fits[arm].n_events_)) for arm in arms},
        "break_even": [with_percentile(b.to_json(), getattr(index_info, "cohort_values", None))
                       for b in summary.break_even],
        "favours_throughout": summary.favours_throughout,
        "margin": r6(summary.margin),
        "curve": pts,
        "clear_difference": [r.to_json() for r in clip_regions(summary.clear_difference, pair.x_range)],
        "regions_band": summary.band,
        "index_info": index_info,
        "reference": ref,
        "methods": {arm: getattr(pair.fits[arm], "method_", "") for arm in arms},
        "warnings": list(dict.fromkeys(pair.warnings + summary.warnings)),
    }


class IndexInfo(dict):
    """An index's JSON info that also carries the cohort's index values (not serialised), so curve_row
    can place each break-even point as a cohort percentile."""

    cohort_values: np.ndarray | None = None


def clip_regions(regions: list, x_range: tuple[float, float]) -> list:
    """Clear-difference regions cut to the observed index range (the search grid reaches 10% beyond it)."""
    lo, hi = x_range
    out = []
    for r in regions:
        start, stop = max(r.start, lo), min(r.stop, hi)
        if start <= stop:
            out.append(dataclasses.replace(r, start=start, stop=stop))
    return out


def index_info_json(iv) -> IndexInfo:
    info = dict(iv.info)
    out = IndexInfo({"kind": info.get("kind"), "label": info.get("label"), "units": info.get("units"),
                     "discrete": bool(info.get("discrete", False)),
                     "bounds": [r6(v) for v in info["bounds"]] if info.get("bounds") else None,
                     "percentiles": {str(k): r6(v) for k, v in (info.get("percentiles") or {}).items()}})
    if "prognostic" in info:
        out["prognostic"] = jsonable(info["prognostic"])
    out.cohort_values = np.asarray(iv.values, float)
    return out


def with_percentile(b: dict, cohort_values: np.ndarray | None) -> dict:
    """The break-even JSON with `x_percentile`: the cohort percentile of its index value (ties count half)."""
    if cohort_values is not None and b.get("x") is not None and np.isfinite(cohort_values).any():
        b["x_percentile"] = r6(percentile_of(cohort_values, b["x"]))
    return b

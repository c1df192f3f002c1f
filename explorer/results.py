"""Results JSON v1: built from the fitted set and its summaries, validated against explorer/schema."""
from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from . import CAUTIONS, __version__
from .breakeven import CurveSummary
from .margins import on_probability_scale
from .spec import Spec, canonical_sha256, spec_to_dict, to_toml

SCHEMA_VERSION = 1


def r6(v: Any) -> Any:
    """Floats to ten significant digits for JSON (stable, and small scales keep their values); non-finite -> null."""
    if v is None:
        return None
    if isinstance(v, (float, np.floating)):
        return float(f"{float(v):.10g}") if np.isfinite(v) else None
    if isinstance(v, (int, np.integer)) and not isinstance(v, bool):
        return int(v)
    return v


def r6_list(values: np.ndarray) -> list:
    """r6 over a float array at once (the same numbers, without a Python call per value)."""
    return [float(f"{v:.10g}") if math.isfinite(v) else None for v in np.asarray(values, float).tolist()]


def measure_words(outcome) -> str:
    if outcome.kind == "survival":
        unit = f" {outcome.units}" if outcome.units else ""
        h = f"{outcome.horizon:g}{unit}"
        return f"probability alive at {h}" if outcome.measure == "survival" else f"restricted mean survival to {h}"
    if outcome.kind == "ordinal":
        return "probability of " + " or ".join(outcome.favourable)
    if outcome.kind == "binary":
        return f"probability of {outcome.title}" + ("" if outcome.higher_is_better else " (lower is better)")
    return f"mean {outcome.title}" + ("" if outcome.higher_is_better else " (lower is better)")


def curve_row(pair, summary: CurveSummary, index_info: dict, n_points: int | None = None) -> dict:
    from .analysis import in_range

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
        "probability": on_probability_scale(pair.outcome),
        "kind": pair.outcome.kind,
        "higher_is_better": pair.outcome.higher_is_better,
        "among_survivors": pair.outcome.among_survivors,
        "range": [r6(pair.x_range[0]), r6(pair.x_range[1])],
        "n": {arm: int(pair.fits[arm].n_) for arm in arms},
        "events": {arm: (None if pair.fits[arm].n_events_ is None else int(pair.fits[arm].n_events_)) for arm in arms},
        "break_even": [_with_percentile(b.to_json(), getattr(index_info, "cohort_values", None))
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
    import dataclasses

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
                     "percentiles": {str(k): r6(v) for k, v in (info.get("percentiles") or {}).items()}})
    if "prognostic" in info:
        out["prognostic"] = _jsonable(info["prognostic"])
    out.cohort_values = np.asarray(iv.values, float)
    return out


def _with_percentile(b: dict, cohort_values: np.ndarray | None) -> dict:
    """The break-even JSON with `x_percentile`: the cohort percentile of its index value (ties count half)."""
    if cohort_values is not None and b.get("x") is not None and np.isfinite(cohort_values).any():
        from .indices import percentile_of

        b["x_percentile"] = r6(percentile_of(cohort_values, b["x"]))
    return b


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [_jsonable(v) for v in obj.tolist()]
    return r6(obj) if isinstance(obj, (float, int, np.floating, np.integer)) else obj


def document(spec: Spec, *, data_sha256: str, spec_bytes: bytes | None, rows: list[dict], composite: list[dict],
             selection: list[dict], warnings: list[str], extra: dict | None = None,
             source: dict | None = None) -> dict:
    from . import coverage

    if spec_bytes is None:
        spec_bytes = to_toml(spec).encode()
    coverage.label_results(rows, spec)
    coverage.label_composites(composite, spec)
    warnings = [*warnings, *coverage.notes(rows), *coverage.notes(composite)]
    doc = {
        "schema_version": SCHEMA_VERSION,
        "tool": {"name": "fulcrum", "version": __version__,
                 "generated_at": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")},
        "inputs": {"spec_sha256": hashlib.sha256(spec_bytes).hexdigest(), "data_sha256": data_sha256,
                   "spec_canonical_sha256": canonical_sha256(spec), "seed": spec.analysis.seed,
                   "interval": spec.analysis.interval, "level": spec.analysis.level,
                   "margin": spec.analysis.margin, **({"source": source} if source else {})},
        "arms": list(spec.cohort.arms),
        "spec": spec_to_dict(spec),
        "results": rows,
        "composite": composite,
        "selection": selection,
        "warnings": list(dict.fromkeys(warnings)),
        "cautions": list(CAUTIONS),
    }
    if extra:
        doc.update(extra)
    return doc


def dumps(doc: dict) -> str:
    return json.dumps(doc, indent=1, ensure_ascii=False, allow_nan=False)


def schema() -> dict:
    return json.loads(resources.files("explorer.schema").joinpath("results.schema.json").read_text())


def validate(doc: dict) -> None:
    """Raise jsonschema.ValidationError when the document does not follow the schema."""
    import jsonschema

    jsonschema.validate(doc, schema())


def write(doc: dict, path: str | Path) -> None:
    """Write the document whole (a temporary file renamed into place: never a half-written file)."""
    from .outputs import write_atomic

    write_atomic(path, dumps(doc) + "\n")

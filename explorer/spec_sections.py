"""The optional [target] (local patients) and [policy] (threshold rules) sections of the spec.

Kept beside spec.py so that module stays small; spec.py folds SECTION_SCHEMA into its SCHEMA table and calls
`target_and_policy` from parse_spec.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import FulcrumError
from .spec_readers import Reader, known, range_check


@dataclass(frozen=True)
class TargetSpec:
    """Local patients without outcomes, to standardise rule consequences over (paths relative to the spec)."""

    path: Path
    label: str | None = None
    sheet: str | None = None


@dataclass(frozen=True)
class PolicySpec:
    """Rule consequences: threshold rules along the indices, per 100 patients of the target population."""

    indices: tuple[str, ...] = ()
    tolerance: float = 1.0
    thresholds: int = 101


@dataclass(frozen=True)
class EvidenceSpec:
    """Value of information along each index (its presence turns the section on)."""

    threshold: float = 1.0  # per 100 patients, for probabilities and composites
    thresholds: dict[str, float] = field(default_factory=dict)  # per outcome, in its own units per 100 patients
    sizes: tuple[int, ...] = (100, 250, 500, 1000, 2000)
    simulations: int = 200


SECTION_SCHEMA: dict[str, dict[str, tuple[str, str]]] = {
    "target": {
        "path": ("path", "A file of local patients (.csv, .tsv, .xlsx, .parquet) with the index and covariate "
                         "columns and no outcomes, relative to the spec file; rule consequences are standardised "
                         "over these patients."),
        "label": ("str", "A name for the local patients in sentences and the report (default: the file name)."),
        "sheet": ("str", "Excel only: the sheet to read when the workbook has several."),
    },
    "policy": {
        "indices": ("list[str]", "Indices along which threshold rules are examined (default: every index)."),
        "tolerance": ("float", "Per 100 patients: thresholds whose composite (or outcome) lies within this much of "
                               "the best form the flat range reported beside the best threshold (default 1)."),
        "thresholds": ("int", "Candidate thresholds along a continuous index (default 101; a whole-level index "
                              "uses the midpoints between its levels)."),
    },
    "evidence": {
        "threshold": ("float", "Value of information worth acting on, per 100 patients (default 1): patients in 100 "
                               "for probabilities, value points for composites; for other bounded measures (days at "
                               "home, restricted mean survival) the same share of the measure's range. The index "
                               "values above it are reported."),
        "thresholds": ("table[float]", "Per outcome name, a threshold in that outcome's own units per 100 patients "
                                       "(e.g. { days_home = 300 } days per 100 patients), overriding `threshold`."),
        "sizes": ("list[int]", "Study planner: numbers of new patients to try (default 100, 250, 500, 1000, 2000)."),
        "simulations": ("int", "Study planner: simulated studies per strategy and size (default 200)."),
    },
}


def target_and_policy(data: dict[str, Any], base_dir: Path, indices: tuple, source: str | None) -> dict[str, Any]:
    """{"target": TargetSpec | None, "policy": PolicySpec | None}; a [target] alone turns the rules on."""
    target = None
    if "target" in data:
        t = Reader(data["target"], "target", source, SECTION_SCHEMA["target"])
        if t.get("path") is None:
            raise FulcrumError("[target] is missing the required key 'path' (the file of local patients).",
                               file=source, key="target.path", hint='Add path = "local_patients.csv" to [target].')
        raw = Path(t.get("path"))
        target = TargetSpec(path=raw if raw.is_absolute() else base_dir / raw, label=t.get("label"),
                            sheet=t.get("sheet"))
    policy = None
    if "policy" in data or target is not None:
        p = Reader(data.get("policy", {}), "policy", source, SECTION_SCHEMA["policy"])
        names = p.get("indices", ())
        for n in names:
            known(n, {x.name: x for x in indices}, "policy.indices", source)
        policy = PolicySpec(indices=names, tolerance=p.get("tolerance", 1.0), thresholds=p.get("thresholds", 101))
        range_check(policy.tolerance, 0.0, 100.0, "policy.tolerance", source)
        range_check(policy.thresholds, 11, 2001, "policy.thresholds", source)
    return {"target": target, "policy": policy}


def evidence_section(data: dict[str, Any], outcomes: dict, source: str | None) -> EvidenceSpec | None:
    """The [evidence] section, or None when the spec has none."""
    if "evidence" not in data:
        return None
    r = Reader(data["evidence"], "evidence", source, SECTION_SCHEMA["evidence"])
    ev = EvidenceSpec(threshold=r.get("threshold", 1.0), thresholds=r.get("thresholds", {}),
                      sizes=tuple(r.get("sizes", EvidenceSpec.sizes)), simulations=r.get("simulations", 200))
    range_check(ev.threshold, 0.0, 1e9, "evidence.threshold", source)
    range_check(ev.simulations, 20, 100_000, "evidence.simulations", source)
    for name, v in ev.thresholds.items():
        known(name, outcomes, "evidence.thresholds", source)
        range_check(v, 0.0, 1e12, f"evidence.thresholds.{name}", source)
    if not ev.sizes or any(n < 10 or n > 10_000_000 for n in ev.sizes):
        raise FulcrumError(f"'evidence.sizes' should list numbers of new patients from 10 to 10,000,000, found "
                           f"{list(ev.sizes)}.", file=source, key="evidence.sizes",
                           hint="For example [200, 500, 1000].")
    return ev


def carried_rule_sections(base: Any, old: dict[str, Any], index_names: set[str]) -> dict[str, Any]:
    """[policy] and [target] of a spec rebuilt from the app's choices (old = the base spec as TOML-shaped data),
    kept while every index the rules name is still there; the target file by its full path, since it need not sit
    beside the cohort."""
    if "policy" not in old or not set(old["policy"].get("indices", [])) <= index_names:
        return {}
    out = {"policy": old["policy"]}
    if base.target is not None:
        out["target"] = {**old["target"], "path": str(Path(base.target.path).resolve())}
    return out


def reachable_target(spec: Any) -> tuple[Any, list[str]]:
    """An uploaded spec whose [target] file is not where this machine can read it loses the section, with a note
    (the app has only the files uploaded to it); the rules then apply to the cohort until local patients are
    uploaded on the Rules page."""
    t = spec.target
    if t is None or Path(t.path).is_file():
        return spec, []
    return dataclasses.replace(spec, target=None), [
        f"The spec names a file of local patients, '{Path(t.path).name}', which was not uploaded; the rules per 100 "
        "patients use the cohort until you upload that file on the Rules per 100 patients page."]

"""Local patients without outcomes (the spec's [target]): read with the cohort readers, index values for each
patient, and an overlap check against the cohort's support.

Rule consequences (policy.py) are standardised over these patients: each patient's predicted outcome under
each arm, averaged (the parametric g-formula).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from . import cohort as ch
from .readers import read_columns
from .errors import FulcrumError, format_rows
from .spec import Spec


@dataclass
class Target:
    """A population to standardise over: its name, its patients' index values and what was noticed."""

    name: str
    n: int
    index: dict[str, np.ndarray]          # index name -> values (NaN where an input is missing)
    source: str                            # "cohort" | "file"
    warnings: list[str] = field(default_factory=list)
    sha256: str | None = None

    def values(self, index: str) -> np.ndarray:
        v = np.asarray(self.index[index], float)
        return v[np.isfinite(v)]


def target_columns(spec: Spec, indices: dict, names: list[str]) -> dict[str, list[tuple[str, str]]]:
    """The columns a target file must hold: the named indices' inputs (a column, a formula's or a prognostic
    model's covariates), as column -> [(role, spec key)] like cohort.column_roles."""
    roles: dict[str, list[tuple[str, str]]] = {}
    for name in names:
        ix, iv = spec.index(name), indices[name]
        cols = iv.model.columns if iv.model is not None else (ix.column,)
        for c in cols:
            if c:
                roles.setdefault(c, []).append(("covariate", f"indices '{name}'"))
    return roles


def cohort_target(spec: Spec, indices: dict) -> Target:
    """The cohort itself as the population (every patient with an index value)."""
    n = len(next(iter(indices.values())).values)
    return Target(name="the cohort", n=n, index={k: np.asarray(v.values, float)
                                                                  for k, v in indices.items()}, source="cohort")


def load_target(spec: Spec, indices: dict, names: list[str] | None = None, *, data: bytes | None = None,
                filename: str | None = None) -> Target:
    """Read the [target] file (or uploaded bytes), check its columns with the cohort readers, compute the named
    indices (default: every index).

    Only the inputs of those indices are needed; outcome and other columns are not read. Missing inputs leave that
    patient out of that index, counted.
    """
    names = names or [ix.name for ix in spec.indices]
    t = spec.target
    if t is None and data is None:
        raise FulcrumError("the spec has no [target] section.", key="target",
                           hint="Add [target] with path = \"local_patients.csv\".")
    path = None if data is not None else Path(t.path)
    name = filename or path.name
    shown = str(path) if path is not None else name
    if path is not None:
        if not path.is_file():
            raise FulcrumError("the target file does not exist." if not path.exists() else
                               "the target path is a folder, not a file.", file=shown, key="target.path",
                               hint="Check target.path in the spec; it is read relative to the spec file's folder.")
        data = path.read_bytes()
    roles = target_columns(spec, indices, names)
    notes: list[str] = []
    header, raw = read_columns(data, name, shown, t.sheet if t is not None else None, roles, set(roles), notes)
    raw = {h: raw[h] for h in header if h in roles}
    chk = ch.ColumnChecker(spec, raw, roles, shown)
    frame = pd.DataFrame({c: chk.column(c) for c in raw}, copy=False)
    warnings = list(chk.warnings) + notes
    values: dict[str, np.ndarray] = {}
    for name in names:
        ix, iv = spec.index(name), indices[name]
        v = np.asarray(iv.model.compute(frame) if iv.model is not None else frame[ix.column].to_numpy(float), float)
        missing = ~np.isfinite(v)
        if missing.all():
            raise FulcrumError(f"no patient in the target file has a value for index '{ix.title}'.", file=shown,
                               key="target.path", hint="Fill in the columns this index reads: "
                               + ", ".join(sorted(c for c, rs in roles.items()
                                                  if any(f"'{name}'" in k for _, k in rs))) + ".")
        if missing.any():
            warnings.append(f"{shown}: {int(missing.sum())} of {len(v)} local patients have no value for "
                            f"{ix.title} ({format_rows(np.flatnonzero(missing) + 1, int(missing.sum()))}) and "
                            "are left out of the rules along it.")
        values[name] = v
    label = (t.label if t is not None and t.label else None) or Path(name).stem
    import hashlib

    return Target(name=label, n=len(frame), index=values, source="file", warnings=warnings,
                  sha256=hashlib.sha256(data).hexdigest())


def overlap(target: Target, index: str, index_title: str, support: dict[str, tuple[float, float]],
            units: str | None = None) -> dict:
    """How many target patients fall outside the cohort's support on this index, and where.

    support: arm -> (lowest, highest) index value among that arm's patients; a rule needs both arms' predictions
    for every patient, so the support is where the arms' ranges overlap.
    """
    x = target.values(index)
    lo = max(s[0] for s in support.values())
    hi = min(s[1] for s in support.values())
    below, above = int((x < lo).sum()), int((x > hi).sum())
    out = {"index": index, "n": int(len(x)), "support": [float(lo), float(hi)], "below": below, "above": above,
           "outside": below + above, "warning": None}
    if below + above:
        unit = f" {units}" if units else ""
        where = []
        if below:
            where.append(f"{below} below {lo:.3g}{unit}")
        if above:
            where.append(f"{above} above {hi:.3g}{unit}")
        out["warning"] = (f"{below + above} of {len(x)} patients of {target.name} ({(below + above) / len(x):.0%}) "
                          f"lie outside the range of {index_title} where both arms have cohort patients "
                          f"({lo:.3g} to {hi:.3g}{unit}): {' and '.join(where)}. Their predictions extrapolate the "
                          "models, so the rule consequences lean on them.")
    return out

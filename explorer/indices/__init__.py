"""Index kinds: a cohort column, a formula over columns, or a cross-fitted prognostic index.

`compute_index` turns one [[indices]] entry into values aligned to the cohort rows (NaN where an
input is missing, counted in warnings) plus what the report needs: units, label, whether the index
takes whole levels, cohort percentiles and, for a prognostic index, its model and its report.
Every `IndexValues.model` offers `.columns` and `.compute(frame_or_mapping)` for new patients.
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
import pandas as pd

from ..errors import FulcrumError, format_rows
from ..spec import IndexSpec, Spec
from .columns import as_float, describe_missing
from .formula import Formula, formula_columns, parse_formula
from .prognostic import PrognosticModel, cross_fitted_index

PERCENTILES = (5, 25, 50, 75, 95)
MAX_DISCRETE_LEVELS = 12
FAR_OUT = 3.0  # Tukey's "far out" fences: beyond the quartiles by 3 interquartile ranges (Tukey 1977, EDA, ch. 2)

__all__ = ["IndexValues", "ColumnIndex", "Formula", "PrognosticModel", "compute_index", "percentile_of",
           "needed_columns", "parse_formula", "formula_columns"]


class IndexModel(Protocol):
    columns: tuple[str, ...]

    def compute(self, data: pd.DataFrame | Mapping[str, Any]) -> np.ndarray: ...


@dataclass(frozen=True)
class ColumnIndex:
    """An index that is a cohort column as it stands."""

    column: str
    key: str | None = None

    @property
    def columns(self) -> tuple[str, ...]:
        return (self.column,)

    def compute(self, data: pd.DataFrame | Mapping[str, Any]) -> np.ndarray:
        if self.column not in data:
            raise FulcrumError(f"the index reads column '{self.column}', which is not in the data.", key=self.key,
                               column=self.column, hint="Add the column or choose another index.")
        return as_float(data[self.column], self.column, self.key)


@dataclass
class IndexValues:
    """One index over the cohort: values per row (NaN = missing input), info for the report, the model."""

    name: str
    values: np.ndarray
    info: dict
    warnings: list[str] = field(default_factory=list)
    model: IndexModel | None = None

    @property
    def finite(self) -> np.ndarray:
        return self.values[np.isfinite(self.values)]


def compute_index(spec_index: IndexSpec, frame: pd.DataFrame, *, spec: Spec, seed: int | None = None,
                  level: float | None = None, groups: np.ndarray | None = None) -> IndexValues:
    """Values of one index for every cohort row.

    seed and level default to the spec's analysis settings (they drive the cross-fitting folds and
    the intervals of a prognostic index); groups (e.g. patient ids of a bootstrap sample drawn as
    duplicated rows) keeps copies of one patient in one cross-fitting fold.
    """
    key = index_key(spec, spec_index)
    seed = spec.analysis.seed if seed is None else seed
    level = spec.analysis.level if level is None else level
    warnings: list[str] = []
    info: dict[str, Any] = {"kind": spec_index.kind, "label": spec_index.title, "units": spec_index.units,
                            "bounds": list(spec_index.bounds) if spec_index.bounds is not None else None}
    if spec_index.column:
        model: IndexModel = ColumnIndex(str(spec_index.column), key=f"{key}.column")
        values = model.compute(frame)
        info["column"] = spec_index.column
        missing = describe_missing({spec_index.column: values})
    elif spec_index.formula:
        model = parse_formula(str(spec_index.formula), [str(c) for c in frame.columns], key=f"{key}.formula")
        values = model.compute(frame)
        info.update(formula=spec_index.formula, columns=list(model.columns))
        missing = describe_missing({c: as_float(frame[c], c, f"{key}.formula") for c in model.columns})
    else:
        values, model, warnings = cross_fitted_index(spec_index, frame, spec, key=key, seed=seed, level=level,
                                                     groups=groups)
        info["prognostic"] = model.report
        info["units"] = spec_index.units or _prognostic_units(spec, model)
        missing = ""
    _check_bounds(spec_index, values, spec, key, model)
    if spec_index.bounds is None:
        far = far_out_rows(values)
        if len(far):
            info["far_out_rows"] = [int(r) for r in far]
            warnings.append(f"Index '{spec_index.title}': {_rows_words(far)} far outside the bulk of the cohort "
                            f"({', '.join(f'{v:.6g}' for v in values[far][:5])}; Tukey's far-out fences, quartiles "
                            f"+/- {FAR_OUT:g} interquartile ranges: {_fences(values)}). A typing slip there can move "
                            "the break-even; each result says what it is without them. Declare bounds = [low, high] "
                            "for this index to refuse impossible values.")
    if missing:
        warnings.insert(0, f"Index '{spec_index.title}': {int(np.isnan(values).sum())} of {len(values)} patients "
                           f"have no value (missing: {missing}).")
    info.update(_describe(spec_index, values, key))
    return IndexValues(spec_index.name, values, info, warnings, model)


def far_out_rows(values: np.ndarray) -> np.ndarray:
    """Row positions whose value lies beyond Tukey's far-out fences (Q1 - 3 IQR, Q3 + 3 IQR); none when the
    interquartile range is zero (a scale with one dominant value has no bulk to measure distance from)."""
    v = np.asarray(values, float)
    finite = v[np.isfinite(v)]
    if len(finite) < 4:
        return np.zeros(0, int)
    q1, q3 = np.percentile(finite, [25, 75])
    iqr = q3 - q1
    if iqr <= 0:
        return np.zeros(0, int)
    with np.errstate(invalid="ignore"):
        return np.flatnonzero((v < q1 - FAR_OUT * iqr) | (v > q3 + FAR_OUT * iqr))


def _fences(values: np.ndarray) -> str:
    q1, q3 = np.nanpercentile(values, [25, 75])
    return f"{q1 - FAR_OUT * (q3 - q1):.4g} to {q3 + FAR_OUT * (q3 - q1):.4g}"


def _rows_words(positions: np.ndarray) -> str:
    n = len(positions)
    return f"{n} patient{'s' if n != 1 else ''} ({format_rows([int(p) + 1 for p in positions], n)}) lie" + \
        ("s" if n == 1 else "")


def _check_bounds(spec_index: IndexSpec, values: np.ndarray, spec: Spec, key: str, model: Any) -> None:
    """Refuse index values outside the declared bounds, naming the file, column(s) and rows."""
    if spec_index.bounds is None:
        return
    lo, hi = spec_index.bounds
    with np.errstate(invalid="ignore"):
        bad = np.flatnonzero((values < lo) | (values > hi))
    if len(bad):
        cols = getattr(model, "columns", ()) or (spec_index.column,)
        shown = ", ".join(f"{v:.6g}" for v in values[bad][:5])
        raise FulcrumError(f"index '{spec_index.title}' has {len(bad)} value{'s' if len(bad) != 1 else ''} outside "
                           f"its bounds {lo:g} to {hi:g} ({shown}).", file=spec.cohort.path.name,
                           column=", ".join(str(c) for c in cols), rows=[int(r) + 1 for r in bad[:5]],
                           n_rows=len(bad), key=f"{key}.bounds",
                           hint="Correct these entries in the cohort file (or mark them missing), or widen the "
                                "index's bounds if such values are possible.")


def percentile_of(index_values: IndexValues | np.ndarray, value: float | np.ndarray) -> float | np.ndarray:
    """Cohort percentile (0-100) of a value: the share of cohort values below it, ties counted half."""
    cohort = index_values.values if isinstance(index_values, IndexValues) else np.asarray(index_values, float)
    cohort = np.sort(cohort[np.isfinite(cohort)])
    if len(cohort) == 0:
        raise FulcrumError("no patient has a value of this index, so percentiles are not defined.",
                           hint="Check the index columns for missing values.")
    v = np.asarray(value, float)
    below = np.searchsorted(cohort, v, side="left")
    upto = np.searchsorted(cohort, v, side="right")
    pct = 100.0 * (below + upto) / (2.0 * len(cohort))
    pct = np.where(np.isfinite(v), pct, np.nan)
    return float(pct) if pct.ndim == 0 else pct


def needed_columns(spec: Spec) -> list[str]:
    """Every numeric column the indices read: index columns, formula columns, prognostic covariates.

    The arm and the outcomes a prognostic index uses are not listed: the cohort loads them in their own roles.
    """
    out: list[str] = []
    for ix in spec.indices:
        key = index_key(spec, ix)
        if ix.column:
            out.append(ix.column)
        elif ix.formula:
            out.extend(formula_columns(ix.formula, None, key=f"{key}.formula"))
        elif ix.prognostic:
            out.extend(ix.prognostic.covariates)
    return list(dict.fromkeys(out))


def index_key(spec: Spec, spec_index: IndexSpec) -> str:
    """The spec key path of an index as the spec parser and the cohort loader write it: indices 'name'."""
    return f"indices '{spec_index.name}'"


def _describe(spec_index: IndexSpec, values: np.ndarray, key: str) -> dict[str, Any]:
    finite = values[np.isfinite(values)]
    if len(finite) == 0:
        raise FulcrumError(f"index '{spec_index.title}' has no value for any patient.", key=key,
                           hint="Check its columns for missing values.")
    distinct = np.unique(finite)
    if len(distinct) < 2:
        raise FulcrumError(f"index '{spec_index.title}' does not vary: every patient with a value has "
                           f"{distinct[0]:g}, so nothing can be compared along it.", key=key,
                           hint="Choose a column or formula that differs between patients.")
    guessed = bool(np.all(distinct == np.round(distinct)) and len(distinct) <= MAX_DISCRETE_LEVELS)
    return {
        "discrete": spec_index.discrete if spec_index.discrete is not None else guessed,
        "discrete_guessed": spec_index.discrete is None,
        "levels": [float(v) for v in distinct] if len(distinct) <= MAX_DISCRETE_LEVELS else None,
        "percentiles": {p: float(v) for p, v in zip(PERCENTILES, np.percentile(finite, PERCENTILES))},
        "range": [float(distinct[0]), float(distinct[-1])],
        "n": int(len(finite)),
        "n_missing": int(len(values) - len(finite)),
    }


def _prognostic_units(spec: Spec, model: PrognosticModel) -> str:
    outcome = spec.outcome(model.outcome)
    flipped = model.sign < 0
    return {"survival": "log hazard (relative)",
            "ordinal": f"log odds of a worse level of {outcome.title}",
            "binary": f"log odds of {'not ' if flipped else ''}{outcome.title}",
            "continuous": f"{'minus ' if flipped else ''}predicted {outcome.title}"
                          + (f" ({outcome.units})" if outcome.units else "")}[outcome.kind]

"""Reading cohort columns as numbers for indices: text is refused with rows, missing stays NaN."""
from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from ..errors import FulcrumError

MAX_ERROR_ROWS = 100


def as_float(values: Any, column: str, key: str | None) -> np.ndarray:
    """A column as floats; non-finite values become NaN (missing), text is refused naming rows."""
    series = values if isinstance(values, pd.Series) else pd.Series(np.atleast_1d(np.asarray(values, dtype=object)))
    if isinstance(series.dtype, pd.CategoricalDtype):
        series = series.astype(object)
    if pd.api.types.is_bool_dtype(series.dtype):
        series = series.astype(float)
    converted = pd.to_numeric(series, errors="coerce")
    bad = np.flatnonzero(converted.isna().to_numpy() & series.notna().to_numpy())
    if len(bad):
        raise FulcrumError(f"column '{column}' must hold numbers here, but holds text such as "
                           f"'{series.iloc[bad[0]]}'.", key=key, column=column,
                           rows=(bad[:MAX_ERROR_ROWS] + 1).tolist(), n_rows=len(bad),
                           hint="Use a numeric column, or recode it in the cohort file.")
    out = converted.to_numpy(dtype=float, na_value=np.nan)
    return np.where(np.isfinite(out), out, np.nan)


def describe_missing(columns: dict[str, np.ndarray]) -> str:
    """'age 3, cfs 1': how many values each column lacks (columns with none left out)."""
    return ", ".join(f"{c} {int(np.isnan(v).sum())}" for c, v in columns.items() if np.isnan(v).any())

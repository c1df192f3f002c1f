"""Numerical warnings (overflow, divide by zero, convergence) caught and turned into result warnings, so they
never reach the terminal as bare library messages and always reach the results; numbers rounded for JSON (r6,
r6_list, jsonable) and the quadratic forms of weight vectors (quad)."""
from __future__ import annotations

import math
import warnings
from collections import Counter
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np

NUMERIC = ("RuntimeWarning", "ConvergenceWarning", "IntegrationWarning", "HessianInversionWarning",
           "ApproximationFallback", "OptimizeWarning", "LinAlgWarning")


def is_numeric(category: type) -> bool:
    return any(c.__name__ in NUMERIC for c in category.__mro__)


@contextmanager
def captured(into: list[str], during: str) -> Iterator[None]:
    """Run the block with numerical warnings caught; each distinct one is appended to `into` as a sentence.
    Other warnings are passed on unchanged."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        yield
    counts: Counter[str] = Counter()
    for w in caught:
        if is_numeric(w.category):
            counts[str(w.message).strip().rstrip(".")] += 1
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    for text, n in counts.items():
        times = "" if n == 1 else f" ({n} times)"
        into.append(f"Numerical warning while {during}: {text}{times}. Results that rest on it may be unreliable; "
                    "check the index and outcome columns for extreme or mistyped values.")


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


def jsonable(obj: Any) -> Any:
    """Plain JSON data out of nested dicts, lists, tuples and arrays, numbers through r6."""
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [jsonable(v) for v in obj.tolist()]
    return r6(obj) if isinstance(obj, (float, int, np.floating, np.integer)) else obj


def quad(C: np.ndarray, w: np.ndarray) -> np.ndarray:
    """w' C[g] w for every grid point g: the variance of a weighted sum from its (grid x k x k) covariances."""
    return np.einsum("gij,i,j->g", C, w, w)

"""Numerical warnings (overflow, divide by zero, convergence) caught and turned into result warnings, so they
never reach the terminal as bare library messages and always reach the results."""
from __future__ import annotations

import warnings
from collections import Counter
from collections.abc import Iterator
from contextlib import contextmanager

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

"""What an outcome's curves measure, in words (a fact about the outcome's kind, so it lives with the models)."""
from __future__ import annotations


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

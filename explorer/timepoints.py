"""When an outcome is measured, in days: a survival outcome's horizon in its units, else the time point its label,
column or name states ("at six months", "function_6m", "within 180 days"). A composite that combines outcomes
measured at different times gets a warning from `mismatch` (values.prepare_composite adds it to the row)."""
from __future__ import annotations

import re
from collections.abc import Sequence

from .spec import OutcomeSpec

DAYS = {"d": 1.0, "day": 1.0, "days": 1.0, "w": 7.0, "wk": 7.0, "wks": 7.0, "week": 7.0, "weeks": 7.0,
        "m": 30.4375, "mo": 30.4375, "mos": 30.4375, "month": 30.4375, "months": 30.4375,
        "y": 365.25, "yr": 365.25, "yrs": 365.25, "year": 365.25, "years": 365.25}
NUMBERS = {"one": 1, "two": 2, "three": 3, "four": 4, "five": 5, "six": 6, "seven": 7, "eight": 8, "nine": 9,
           "ten": 10, "eleven": 11, "twelve": 12, "eighteen": 18, "thirty": 30, "ninety": 90}
POINT = re.compile(r"(?<![a-z0-9.])(\d+(?:\.\d+)?|" + "|".join(NUMBERS) + r")[\s_-]*("
                   + "|".join(sorted(DAYS, key=len, reverse=True)) + r")(?![a-z])")
SAME = 0.10  # time points within 10% of each other count as one (182 days and six months)


def stated_days(text: str | None) -> float | None:
    """The first time point a text states, in days ("Alive at one year" -> 365.25), or None."""
    found = POINT.search(str(text or "").lower())
    if found is None:
        return None
    amount, unit = found.groups()
    return float(NUMBERS.get(amount) or amount) * DAYS[unit]


def horizon_days(outcome: OutcomeSpec) -> float | None:
    """When the outcome is measured, in days: a survival horizon in its stated units, else a time point stated in
    its label, column or name; None when nothing says."""
    units = (outcome.units or "").strip().lower()
    if outcome.horizon is not None and units in DAYS:
        return float(outcome.horizon) * DAYS[units]
    for text in (outcome.label, outcome.column, outcome.name):
        days = stated_days(text)
        if days is not None:
            return days
    return None


def _words(days: float) -> str:
    for unit, size in (("years", 365.25), ("months", 30.4375), ("weeks", 7.0)):
        if days >= 0.95 * size and abs(days / size - round(days / size)) < 0.05:
            n = round(days / size)
            return f"{n} {unit[:-1] if n == 1 else unit}"
    return f"{days:.0f} days"


def mismatch(outcomes: Sequence[OutcomeSpec]) -> list[str]:
    """A warning when the outcomes combined into one composite are measured at different times ([] otherwise, and
    when some outcome states no time point)."""
    stated = [(o, horizon_days(o)) for o in outcomes]
    known = [(o, d) for o, d in stated if d is not None]
    if len(known) < 2 or len(known) < len(stated):
        return []
    days = [d for _, d in known]
    if max(days) <= min(days) * (1 + SAME):
        return []
    said = ", ".join(f"'{o.title}' at {_words(d)}" for o, d in known)
    warning = (f"This composite combines outcomes measured at different times ({said}); the combination assumes one "
               "time point, so read it with care, or combine outcomes measured at the same time (for example a "
               "survival outcome whose horizon matches the other outcome's).")
    return [warning]

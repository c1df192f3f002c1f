"""Role guesses for a received file: which columns are the arm, the allocation, outcomes (survival time and event,
ordinal levels, binary, continuous) and indices, from column names and values. Used by the app's Cohort page
(through appstate) to start a fresh spec; every guess stays editable."""
from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

NAME_HINTS: dict[str, tuple[str, ...]] = {
    "arm": ("arm", "group", "treatment", "treat", "trt", "strategy", "management"),
    "id": ("id", "pid", "patient_id", "patientid", "subject", "subject_id", "record", "study_id", "mrn"),
    "allocation": ("allocation", "allocated", "assignment", "assigned", "randomised", "randomized", "route"),
    "cluster": ("hospital", "site", "centre", "center", "cluster", "unit", "trust"),
    "time": ("time", "days", "followed", "follow", "futime", "fu", "survival", "months", "years", "duration"),
    "event": ("event", "died", "dead", "death", "status", "fustat", "deceased", "cens", "relapse", "failure"),
    "index": ("cfs", "frail", "frailty", "age", "score", "index", "risk", "asa", "lactate", "albumin", "karno",
              "karnofsky", "ecog", "performance", "apache", "sofa", "charlson", "bmi"),
}
# Words that mark a column as something measured after treatment (an outcome), not a baseline covariate.
OUTCOME_WORDS = ("alive", "dead", "death", "died", "mortality", "survived", "outcome", "response", "recovered",
                 "recovery", "complication", "complications", "readmitted", "readmission", "discharged",
                 "discharge", "home", "function", "rankin", "mrs", "gos", "qol", "eq5d", "utility", "los", "stay",
                 "success", "cure", "cured", "improved", "result", "rating", "adl", "barthel", "pain", "disability")
TIMEPOINT = re.compile(r"(^|[^a-z0-9])\d+\s*(d|w|m|y|day|days|wk|week|weeks|mo|month|months|yr|year|years)"
                       r"($|[^a-z])")
YES_NO = ({"yes", "no"}, {"y", "n"}, {"true", "false"}, {"alive", "dead"}, {"present", "absent"})
DEATH_WORDS = ("dead", "death", "died", "deceased")
RANDOM_WORDS = ("random", "rct", "trial")
MAX_LEVELS = 12


# ------------------------------------------------------------------------------------------
# Guessing column roles
# ------------------------------------------------------------------------------------------
@dataclass
class Guess:
    """The app's first guess at each column's role; the user confirms or changes every one."""

    arm: str | None = None
    arms: tuple[str, ...] = ()
    id: str | None = None
    allocation: str | None = None
    randomised: str | None = None
    cluster: str | None = None
    time: str | None = None
    event: str | None = None
    horizon: float | None = None
    ordinal: dict[str, tuple[str, ...]] = field(default_factory=dict)
    binary: tuple[str, ...] = ()
    continuous: tuple[str, ...] = ()
    indices: tuple[str, ...] = ()
    covariates: tuple[str, ...] = ()
    continuous_outcomes: tuple[str, ...] = ()


def _words(name: str) -> set[str]:
    low = str(name).lower()
    return {low, *re.split(r"[^a-z0-9]+", low)} - {""}


def _hint(name: str, role: str) -> int:
    """3 when the column's name is a role word, 2 when one of its words is, 1 when it contains a long one."""
    hints = NAME_HINTS[role]
    low = str(name).lower()
    if low in hints:
        return 3
    if _words(name) & set(hints):
        return 2
    return 1 if any(len(h) >= 4 and h in low for h in hints) else 0


def distinct_values(s: pd.Series) -> list[str]:
    return [str(v) for v in pd.unique(s.dropna())]


def _is_numeric(s: pd.Series) -> bool:
    if pd.api.types.is_bool_dtype(s):
        return False
    if pd.api.types.is_numeric_dtype(s):
        return True
    return bool(s.notna().any()) and bool(pd.to_numeric(s.dropna(), errors="coerce").notna().all())


def _numbers(s: pd.Series) -> pd.Series:
    return pd.to_numeric(s, errors="coerce")


def _is_binary01(s: pd.Series) -> bool:
    if not _is_numeric(s):
        return False
    v = set(_numbers(s).dropna().unique().tolist())
    return bool(v) and v <= {0, 1} and len(v) == 2


def _best(frame: pd.DataFrame, role: str, ok: Callable[[pd.Series], bool], taken: set[str]) -> str | None:
    """The column with the strongest name hint for the role among those that pass `ok`."""
    ranked = [(_hint(c, role), -i, c) for i, c in enumerate(frame.columns)
              if c not in taken and _hint(c, role) and ok(frame[c])]
    return max(ranked)[2] if ranked else None


def guess_roles(frame: pd.DataFrame) -> Guess:
    """Guess arm, id, allocation, cluster, survival time and event, outcomes and index candidates."""
    g = Guess()
    taken: set[str] = set()
    n = len(frame)
    frame = frame.apply(lambda s: s.where(s.astype(str).str.strip() != "", None) if s.dtype == object else s)

    def two_values(s: pd.Series) -> bool:
        return len(distinct_values(s)) == 2

    def randomish(s: pd.Series) -> bool:
        return two_values(s) and any(any(w in v.lower() for w in RANDOM_WORDS) for v in distinct_values(s))

    g.allocation = _best(frame, "allocation", randomish, taken) or next(
        (c for c in frame.columns if randomish(frame[c])), None)
    if g.allocation:
        taken.add(g.allocation)
        g.randomised = next(v for v in distinct_values(frame[g.allocation]) if any(w in v.lower() for w in RANDOM_WORDS))
    g.event = _best(frame, "event", _is_binary01, taken)
    if g.event:
        taken.add(g.event)
        g.time = _best(frame, "time", lambda s: _is_numeric(s) and bool((_numbers(s).dropna() > 0).all()), taken)
        if g.time:
            taken.add(g.time)
            g.horizon = nice_horizon(_numbers(frame[g.time]).dropna().to_numpy(float))
    g.arm = _best(frame, "arm", two_values, taken) or next(
        (c for c in frame.columns if c not in taken and two_values(frame[c]) and not _is_numeric(frame[c])), None) \
        or next((c for c in frame.columns if c not in taken and two_values(frame[c])), None)
    if g.arm:
        taken.add(g.arm)
        g.arms = tuple(sorted(distinct_values(frame[g.arm]), key=lambda v: -int((frame[g.arm].astype(str) == v).sum())))
    g.id = _best(frame, "id", lambda s: bool(s.notna().all()) and bool(s.is_unique), taken)
    if g.id:
        taken.add(g.id)
    g.cluster = _best(frame, "cluster", lambda s: not _is_numeric(s) and 2 <= len(distinct_values(s)) <= max(2, n // 5),
                      taken)
    if g.cluster:
        taken.add(g.cluster)
    rest = [c for c in frame.columns if c not in taken]
    outcome_named = {c for c in rest if is_outcome_name(c)}
    g.ordinal = {c: guess_levels(frame[c]) for c in rest
                 if 3 <= len(distinct_values(frame[c])) <= MAX_LEVELS and _hint(c, "cluster") == 0
                 and (not _is_numeric(frame[c]) or (c in outcome_named and _is_whole(frame[c])))}
    two = [c for c in rest if c not in g.ordinal and (_is_binary01(frame[c]) or _is_yes_no(frame[c]))]
    g.binary = tuple(c for c in two if c in outcome_named)
    numeric = [c for c in rest if _is_numeric(frame[c]) and c not in two and c not in g.ordinal]
    hinted = sorted((c for c in numeric if _hint(c, "index") and c not in outcome_named),
                    key=lambda c: -_hint(c, "index"))
    g.indices = tuple(hinted)
    g.continuous = tuple(c for c in numeric if c not in hinted)
    g.continuous_outcomes = tuple(c for c in g.continuous if c in outcome_named)
    g.covariates = tuple(c for c in rest if c not in outcome_named and c not in g.ordinal
                         and (c in numeric or len(distinct_values(frame[c])) == 2))
    return g


def is_outcome_name(name: str) -> bool:
    """Whether a column's name reads as an outcome: an outcome word, or a time point such as `_6m` or `30d`."""
    low = str(name).lower()
    return bool(_words(name) & set(OUTCOME_WORDS)) or bool(TIMEPOINT.search(low))


def _is_whole(s: pd.Series) -> bool:
    x = _numbers(s).dropna()
    return bool(len(x)) and bool(np.all(np.mod(x, 1) == 0))


def _is_yes_no(s: pd.Series) -> bool:
    values = {v.strip().lower() for v in distinct_values(s)}
    return len(values) == 2 and any(values == pair for pair in YES_NO)


def guess_levels(s: pd.Series) -> tuple[str, ...]:
    """Level order guess, best first: an ordered categorical's order, else by frequency, death last."""
    if isinstance(s.dtype, pd.CategoricalDtype) and s.dtype.ordered:
        levels = [str(v) for v in s.dtype.categories]
    elif _is_numeric(s):  # numbered levels (a 1-5 rating, a 0-6 scale) keep their numeric order
        nums = _numbers(s).dropna()
        levels = [str(v) for _, v in sorted({float(n): str(o) for n, o in zip(nums, s.dropna())}.items())]
    else:
        counts = s.dropna().astype(str).value_counts()
        levels = list(counts.index)
    dead = [v for v in levels if v.lower() in DEATH_WORDS]
    return tuple([v for v in levels if v not in dead] + dead)


def nice_horizon(times: np.ndarray) -> float | None:
    """A horizon most patients reach: the end of follow-up when at least 10% share it (administrative
    censoring), else the median time to two significant figures."""
    times = times[np.isfinite(times)]
    if not len(times) or np.max(times) <= 0:
        return None
    top = float(np.max(times))
    if np.mean(times == top) >= 0.10:
        return top
    med = float(np.median(times))
    return float(f"{med:.2g}") if med > 0 else None

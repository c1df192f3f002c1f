"""The analysis settings' limits, checked in one place wherever a setting is set: the spec file, the command line
(`--replicates`) and the app all end in `check_analysis`, so a value refused in one is refused in all, in the
same words. `cap_workers` keeps the bootstrap's processes within the machine's cores.
"""
from __future__ import annotations

import os
from typing import Any

from .errors import FulcrumError

# name -> (lowest, highest, why / what to do)
LIMITS: dict[str, tuple[float, float, str]] = {
    "level": (0.5, 0.999, "For example 0.95."),
    "knots": (3, 5, "Use 3, 4 or 5 knots."),
    # fewer than 20 replicates leave a percentile interval with nothing between its ends (at 1 replicate the
    # interval has zero width and every difference looks clear), common practice
    "replicates": (20, 100_000, "Use at least 20 (1000 or more for reported intervals)."),
    "workers": (-1, 256, "Use 1 (no parallel work), a number of processes, or -1 for one per core."),
    "grid": (20, 5000, "For example 200."),
    "seed": (0, 2**63 - 1, "Use a whole number from 0 upwards, e.g. 1."),
}
ADVISED_REPLICATES = 200  # below this the ends of a 95% percentile interval rest on a handful of replicates


def _name(key: str, flags: dict[str, str]) -> str:
    return flags.get(key, f"'analysis.{key}'")


def check_setting(key: str, value: Any, *, source: str | None = None, flags: dict[str, str] | None = None) -> None:
    """Refuse a value outside its limits; the message names the spec key or the command-line flag that set it."""
    flags = flags or {}
    lo, hi, hint = LIMITS[key]
    name = _name(key, flags)
    via_flag = key in flags
    if key == "workers" and value == 0:
        raise FulcrumError(f"{name} is 0; no work could be done.", file=None if via_flag else source,
                           key=None if via_flag else f"analysis.{key}", hint=hint)
    if value < lo and hi > 2**62:
        raise FulcrumError(f"{name} is {value}; it must be {lo} or more.", file=None if via_flag else source,
                           key=None if via_flag else f"analysis.{key}", hint=hint)
    if not lo <= value <= hi:
        lo_s, hi_s = (f"{v:,}" if isinstance(v, int) and abs(v) < 1e9 else f"{v:g}" for v in (lo, hi))
        raise FulcrumError(f"{name} is {value}, outside {lo_s} to {hi_s}.", file=None if via_flag else source,
                           key=None if via_flag else f"analysis.{key}", hint=hint)


def check_analysis(analysis: Any, *, source: str | None = None, flags: dict[str, str] | None = None) -> None:
    """Every limit of an [analysis] table (an AnalysisSpec); `flags` maps settings given on the command line to
    their flag, so the message names the flag the user typed."""
    for key in LIMITS:
        check_setting(key, getattr(analysis, key), source=source, flags=flags)
    imputations = analysis.imputations
    if imputations != 0 and not 2 <= imputations <= 100:
        raise FulcrumError(f"'analysis.imputations' is {imputations}; use 0 (complete cases only) or 2 to 100 "
                           "imputations.", file=source, key="analysis.imputations", hint="For example 5 or 20.")
    scheduler = analysis.scheduler
    if scheduler is not None and not (isinstance(scheduler, str) and scheduler.startswith("tcp://")
                                      and len(scheduler) > len("tcp://")):
        raise FulcrumError(f"--scheduler should look like tcp://host:port, found '{scheduler}'.",
                           hint="Give the address of a running Dask scheduler, e.g. tcp://10.0.0.5:8786.")


def cores() -> int:
    """The cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def cap_workers(workers: int) -> tuple[int, str | None]:
    """(workers to start, warning or None): never more processes than cores; -1 means one per core."""
    n = cores()
    if workers == -1:
        return n, None
    if workers > n:
        return n, (f"analysis.workers asks for {workers} parallel workers but this machine has {n} core(s); "
                   f"{n} are used (more would only add memory and slow each other down).")
    return workers, None


def advice(analysis: Any) -> list[str]:
    """Warnings about settings that are allowed but weak (printed by the command line, shown by the app)."""
    out = []
    _, warn = cap_workers(analysis.workers)
    if warn:
        out.append(warn)
    if analysis.interval == "bootstrap" and analysis.replicates < ADVISED_REPLICATES:
        out.append(f"only {analysis.replicates} bootstrap replicates: the ends of each interval rest on very few "
                   f"of them, so the intervals are rough; use 1000 or more for results you report.")
    return out

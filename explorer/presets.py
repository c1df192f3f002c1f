"""Value weights below the analysis: the check of a weight vector, the default equal steps, and the named presets
(with their sources for the report). The spec reads a preset's weights from here; values builds composites on them."""
from __future__ import annotations

import math
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from .errors import FulcrumError


def default_weights(levels: tuple[str, ...]) -> dict[str, float]:
    """Equal steps from 1 (best) down to 0 (the last level, death)."""
    k = len(levels) - 1
    return {lv: round(1.0 - i / k, 6) for i, lv in enumerate(levels)}


def check_weights(weights: dict[str, float] | Sequence[float], levels: Sequence[str],
                  key: str = "values.weights") -> np.ndarray:
    """One finite weight per level, each in [-1, 1], returned in level order."""
    levels = tuple(levels)
    if not isinstance(weights, dict):
        vals = list(weights)
        if len(vals) != len(levels):
            raise FulcrumError(f"{len(vals)} weights were given for {len(levels)} levels.", key=key,
                               hint=f"Give one weight per level: {', '.join(levels)}.")
        weights = dict(zip(levels, vals))
    for lv in weights:
        if lv not in levels:
            raise FulcrumError(f"a weight is given for '{lv}', which is not a level.", key=f"{key}.{lv}",
                               hint=f"Levels: {', '.join(levels)}.")
    out = np.empty(len(levels))
    for i, lv in enumerate(levels):
        if lv not in weights:
            raise FulcrumError(f"no weight is given for '{lv}'.", key=f"{key}.{lv}",
                               hint="Give every level a weight, or start from a preset.")
        w = weights[lv]
        if isinstance(w, bool) or not isinstance(w, (int, float, np.floating, np.integer)) or not math.isfinite(w):
            raise FulcrumError(f"the weight of '{lv}' should be a finite number, found {w!r}.", key=f"{key}.{lv}",
                               hint="Give each weight as a number from -1 to 1.")
        if not -1.0 <= float(w) <= 1.0:
            raise FulcrumError(f"the weight of '{lv}' is {w}, outside -1 to 1.", key=f"{key}.{lv}",
                               hint="Weights run from -1 (worst) through 0 (death) to 1 (best state).")
        out[i] = float(w)
    return out


_MRS = re.compile(r"^\s*(?:m?rs|rankin|modified rankin(?: scale)?)?\s*[-_ ]?\s*(\d)\s*$", re.IGNORECASE)


def is_mrs(levels: Sequence[str]) -> bool:
    """True when the levels read as the modified Rankin Scale 0..6, best first (e.g. '0'..'6' or 'mRS 0'..)."""
    if len(levels) != 7:
        return False
    digits = [_MRS.match(str(lv)) for lv in levels]
    return all(m is not None and int(m.group(1)) == i for i, m in enumerate(digits))


# Utility-weighted mRS 0-6 (Chaisinanunkul et al., Stroke 2015;46:2238).
UW_MRS = (1.0, 0.91, 0.76, 0.65, 0.33, 0.0, 0.0)
# Disability weights for mRS 0-6 (Hong & Saver, Stroke 2009); utility = 1 - weight.
HONG_SAVER_DISABILITY = (0.0, 0.046, 0.212, 0.331, 0.652, 0.944, 1.0)
# Pooled utilities for mRS 0-6 with mRS 5 judged worse than death (Wang et al., Stroke 2020;51:2411).
WANG_POOLED = (0.96, 0.83, 0.72, 0.54, 0.22, -0.18, 0.0)


@dataclass(frozen=True)
class Preset:
    """A named starting point for the weights, with its source for the report."""

    name: str
    label: str
    source: str
    applies: Callable[[Sequence[str]], bool]
    build: Callable[[Sequence[str], Sequence[str]], dict[str, float]]


def _survival_only(levels: Sequence[str], acceptable: Sequence[str] = ()) -> dict[str, float]:
    return {lv: (0.0 if i == len(levels) - 1 else 1.0) for i, lv in enumerate(levels)}


def _acceptable_only(levels: Sequence[str], acceptable: Sequence[str] = ()) -> dict[str, float]:
    if not acceptable:
        raise FulcrumError("the 'acceptable only' preset needs the levels the patient would accept.",
                           key="values.acceptable", hint=f"Choose one or more of: {', '.join(levels)}.")
    for lv in acceptable:
        if lv not in levels:
            raise FulcrumError(f"'{lv}' is not a level.", key="values.acceptable", hint=f"Levels: {', '.join(levels)}.")
    return {lv: (1.0 if lv in acceptable else 0.0) for lv in levels}


def _fixed(values: tuple[float, ...]) -> Callable[[Sequence[str], Sequence[str]], dict[str, float]]:
    return lambda levels, acceptable=(): {lv: float(v) for lv, v in zip(levels, values)}


PRESETS: dict[str, Preset] = {p.name: p for p in (
    Preset("equal_steps", "Equal steps", "Fulcrum default: equal steps from the best level (1) to death (0).",
           lambda levels: len(levels) >= 2, lambda levels, acceptable=(): default_weights(tuple(levels))),
    Preset("survival_only", "Only survival counts",
           "Fulcrum: every living level 1, death (the last level) 0, so the composite is the chance of being alive.",
           lambda levels: len(levels) >= 2, _survival_only),
    Preset("acceptable_only", "Only the levels the patient would accept",
           "Fulcrum: 1 for each level the patient would accept, 0 otherwise.",
           lambda levels: len(levels) >= 2, _acceptable_only),
    Preset("uw_mrs", "Utility-weighted modified Rankin Scale",
           "Chaisinanunkul et al., Stroke 2015;46:2238 (utility-weighted mRS 0-6).", is_mrs, _fixed(UW_MRS)),
    Preset("hong_saver", "Utilities from disability weights (modified Rankin Scale)",
           "Hong & Saver, Stroke 2009 (disability weights for mRS 0-6; utility = 1 - weight).", is_mrs,
           _fixed(tuple(round(1.0 - d, 6) for d in HONG_SAVER_DISABILITY))),
    Preset("wang_pooled", "Pooled utilities with mRS 5 worse than death (modified Rankin Scale)",
           "Wang et al., Stroke 2020;51:2411 (pooled utilities for mRS 0-6).", is_mrs, _fixed(WANG_POOLED)),
)}


def available_presets(levels: Sequence[str]) -> list[Preset]:
    """The presets that apply to these levels, in display order."""
    return [p for p in PRESETS.values() if p.applies(levels)]


def preset_weights(name: str, levels: Sequence[str], acceptable: Sequence[str] = ()) -> dict[str, float]:
    """The full weight dict of a preset for these levels (checked to lie in [-1, 1])."""
    if name not in PRESETS:
        raise FulcrumError(f"there is no preset called '{name}'.", key="values.preset",
                           hint=f"Presets: {', '.join(PRESETS)}.")
    p = PRESETS[name]
    if not p.applies(levels):
        raise FulcrumError(f"the preset '{p.label}' does not apply to the levels {list(levels)}.",
                           key="values.preset", hint="It needs the modified Rankin Scale 0-6 (seven levels, "
                           "best first); choose another preset.")
    weights = p.build(tuple(levels), tuple(acceptable))
    check_weights(weights, levels)
    return weights

"""The patients the headline answers rest on: all, randomised only, all adjusted, or all weighted.

`analysis.population` chooses; without it the default is the least biased estimate the data support
(docs/methods.md, "Which patients the headline rests on"): when the cohort holds chosen patients and each arm
has at least MIN_RANDOMISED randomised patients, the randomised patients alone (randomisation balances measured
and unmeasured prognosis; adjustment and weighting balance only what was measured); else all patients weighted
by the selection covariates when they are named; else all patients, with a warning.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np

from .cohort import Cohort
from .errors import FulcrumError
from .indices import formula_columns
from .spec import OutcomeSpec, Spec
from .weighting import covariate_design, propensity_weights

MIN_RANDOMISED = 50  # randomised patients per arm before they carry the headline by default (common practice)
WORDS = {"all": "all patients", "randomised": "randomised patients only",
         "all_adjusted": "all patients, adjusted for the selection covariates",
         "all_weighted": "all patients, weighted by the propensity of their arm"}


@dataclass
class Population:
    """Which rows enter the headline fits, with what weights and extra adjustment covariates, and why."""

    name: str
    chosen_by: str  # "spec" | "default"
    reason: str
    keep: np.ndarray | None = None  # cohort rows that enter (None: all)
    weights: np.ndarray | None = None  # per cohort row (all_weighted)
    adjust: tuple[str, ...] = ()  # covariates added to every outcome's adjustment (all_adjusted)
    warnings: list[str] = field(default_factory=list)

    @property
    def words(self) -> str:
        return WORDS[self.name]

    def outcome(self, outcome: OutcomeSpec) -> OutcomeSpec:
        """The outcome as the headline fits it (extra adjustment covariates for all_adjusted)."""
        extra = tuple(c for c in self.adjust if c not in outcome.adjust)
        return dataclasses.replace(outcome, adjust=outcome.adjust + extra) if extra else outcome

    def to_json(self) -> dict:
        return {"population": self.name, "words": self.words, "chosen_by": self.chosen_by, "reason": self.reason,
                "adjust": list(self.adjust)}


def _index_columns(spec: Spec) -> set[str]:
    """Columns an index is built from: adjusting for them as well would make the fit collinear."""
    out: set[str] = set()
    for ix in spec.indices:
        if ix.column:
            out.add(ix.column)
        elif ix.prognostic:
            out.update(ix.prognostic.covariates)
        elif ix.formula:
            out.update(formula_columns(ix.formula, None))
    return out


def resolve(spec: Spec, cohort: Cohort) -> Population:
    """The headline population for this spec and cohort (see the module notes)."""
    asked = spec.analysis.population
    rand = None if cohort.randomised is None else cohort.randomised.to_numpy(bool)
    covs = tuple(spec.selection.covariates) if spec.selection else ()
    if asked is None:
        if rand is None or rand.all():
            why = ("every patient was randomised" if rand is not None else
                   "the cohort names no allocation column, so randomised and chosen patients cannot be told apart")
            return Population("all", "default", why)
        arm = cohort.frame[spec.cohort.arm].to_numpy()
        counts = {a: int((rand & (arm == a)).sum()) for a in spec.cohort.arms}
        if min(counts.values()) >= MIN_RANDOMISED:
            each = ", ".join(f"{n} {a}" for a, n in counts.items())
            return Population("randomised", "default", "the cohort holds chosen patients and each arm has at least "
                              f"{MIN_RANDOMISED} randomised patients ({each}); randomisation balances unmeasured "
                              "prognosis, which adjustment and weighting cannot", keep=rand)
        few = (f"too few randomised patients for the headline ({', '.join(f'{n} {a}' for a, n in counts.items())}; "
               f"at least {MIN_RANDOMISED} per arm are needed)")
        if covs:
            asked, chosen_by, why = "all_weighted", "default", few
        else:
            return Population("all", "default", few, warnings=[
                f"The headline rows pool randomised and chosen patients without adjustment ({few}); chosen patients "
                "may differ in ways that bias them. Name [selection] covariates to weight them, and read the "
                "selection section."])
    else:
        chosen_by, why = "spec", "set by analysis.population"
    if asked == "all":
        return Population("all", chosen_by, why)
    if asked == "randomised":
        if rand is None:
            raise FulcrumError("analysis.population = \"randomised\" needs the allocation column.",
                               key="analysis.population", hint="Set cohort.allocation, or population = \"all\".")
        arms = cohort.frame[spec.cohort.arm].to_numpy()
        thin = {a: int((rand & (arms == a)).sum()) for a in spec.cohort.arms}
        each = ", ".join(f"{n} {a}" for a, n in thin.items())
        note = [f"The headline rests on few randomised patients ({each}; fewer than {MIN_RANDOMISED} in an arm): "
                "expect wide intervals."] if min(thin.values()) < MIN_RANDOMISED else []
        return Population("randomised", chosen_by, why, keep=rand, warnings=note)
    frame = cohort.frame
    if asked == "all_adjusted":
        used = _index_columns(spec)
        adjust = tuple(c for c in covs if c not in used)
        text = [c for c in adjust if not np.issubdtype(np.asarray(frame[c]).dtype, np.number)
                and frame[c].dtype != bool]
        if text:
            raise FulcrumError(f"analysis.population = \"all_adjusted\" adjusts for numeric covariates only; "
                               f"{', '.join(text)} hold text.", column=text[0], key="selection.covariates",
                               hint="Code them as 0/1 columns, or use population = \"all_weighted\".")
        left = [c for c in covs if c in used]
        note = [f"The adjusted headline leaves out {', '.join(left)}: the index is built from them."] if left else []
        return Population("all_adjusted", chosen_by, why, adjust=adjust, warnings=note)
    arm = frame[spec.cohort.arm].to_numpy()
    complete = covariate_design(frame, covs).notna().all(axis=1).to_numpy() & np.isin(arm, spec.cohort.arms)
    rows = np.flatnonzero(complete)
    wt = propensity_weights(frame.iloc[rows].reset_index(drop=True), covs, arm[rows] == spec.cohort.arms[0],
                            spec.selection.truncate if spec.selection else (1.0, 99.0))
    weights = np.zeros(len(frame))
    weights[rows] = wt.weights
    left = int((~complete & np.isin(arm, spec.cohort.arms)).sum())
    notes = [f"Weighted headline: {w}" for w in wt.warnings]
    if left:
        notes.append(f"Weighted headline: {left} patients with missing selection covariates are left out.")
    notes.append("Weighting balances only the measured covariates (" + ", ".join(covs) + "); it cannot remove "
                 "differences in anything unmeasured. Bootstrap intervals hold the weights fixed rather than refit "
                 "the propensity model in each replicate, which tends to make them wider than needed (Lunceford & "
                 "Davidian, Stat Med 2004).")
    return Population("all_weighted", chosen_by, why, keep=complete, weights=weights, warnings=notes)

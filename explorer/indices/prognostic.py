"""Cross-fitted prognostic index (Abadie, Chingos & West, Rev Econ Stat 2018).

A model of the chosen outcome on the chosen covariates is fitted on the second arm
(fit_on = "second") or on everyone without an arm term (fit_on = "all"), by K-fold
cross-fitting: each patient in the fitting set gets the linear predictor of the fold model that
did not see them; everyone else in the cohort (the first arm, patients without the outcome) gets
the value of one fold model assigned at random (folds used equally), so both arms' index values
carry the same kind of estimation noise; a new patient gets the mean of the K fold models. Every
fold model shares the whole fitting set's intercept, so folds differ only in their slopes. An
index fitted in-sample would carry each fitting patient's own noise and fake effect modification
along the index; giving the other arm the smoother mean of the fold models would fake a little
too (their index would be less attenuated), and so would fold-specific intercepts (a fold's
intercept comes from the other folds' outcomes, so it moves against that fold's own mean).

Orientation: higher = worse prognosis. Cox: log hazard. Proportional odds: log odds of a worse
level. Logistic: log odds of the outcome, negated when higher_is_better (so log odds of 0).
Linear: the predicted outcome, negated when higher_is_better.
"""
from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import FulcrumError
from ..spec import IndexSpec, OutcomeSpec, Spec
from .concordance import harrell_c
from .columns import MAX_ERROR_ROWS, as_float, describe_missing
from ..models import describe
from .lp_models import FAMILIES, Family, LinearPredictor, Target, fit_linear_predictor

MIN_PER_FOLD = 5
EVENTS_PER_COVARIATE = 10  # common practice


@dataclass
class PrognosticModel:
    """The K fold models of a cross-fitted index; `compute` gives a new patient the mean of them.

    fold_of: per cohort row, the fold whose model left that row out (-1: not in the fitting set).
    value_fold: per cohort row, the fold model whose value the row takes (fold_of in the fitting set,
    assigned at random outside it; -1: no index value). fold_models[k] was fitted without fold k.
    """

    outcome: str
    kind: str
    covariates: tuple[str, ...]
    center: np.ndarray
    sign: float
    fold_models: list[LinearPredictor]
    full: LinearPredictor
    fold_of: np.ndarray
    value_fold: np.ndarray | None = None
    key: str | None = None
    report: dict = field(default_factory=dict)

    @property
    def columns(self) -> tuple[str, ...]:
        return self.covariates

    def fold_values(self, X: np.ndarray) -> np.ndarray:
        """Oriented index of each fold model, (K, n), from raw covariate rows X."""
        Xc = np.asarray(X, float).reshape(-1, len(self.covariates)) - self.center
        return self.sign * np.vstack([m(Xc) for m in self.fold_models])

    def compute(self, data: pd.DataFrame | Mapping[str, Any]) -> np.ndarray:
        """The index for new patients (mean of the K fold models); every covariate must be given."""
        X = _covariates(data, self.covariates, self.key)
        bad = np.flatnonzero(~np.all(np.isfinite(X), axis=1))
        if len(bad):
            missing = [c for j, c in enumerate(self.covariates) if not np.isfinite(X[bad[0], j])]
            raise FulcrumError(f"the prognostic index needs {', '.join(self.covariates)}; "
                               f"{', '.join(missing)} is missing.", key=self.key,
                               rows=(bad[:MAX_ERROR_ROWS] + 1).tolist(), n_rows=len(bad),
                               hint="Give a value for every covariate of the prognostic model.")
        return self.fold_values(X).mean(axis=0)

    def refitter(self, frame: pd.DataFrame, spec: Spec) -> Refitter:
        """What a bootstrap replicate needs to refit this index, rebuilt from the cohort frame it was fitted on
        (built on request, so an analysis that holds the index fixed keeps no second copy of the covariates)."""
        key = self.key or "indices"
        outcome, X, target, has_outcome, complete, in_arm = _inputs(spec, frame, self.outcome, self.covariates,
                                                                    self.report["fit_on"], key)
        fit_mask = complete & has_outcome & in_arm
        Xc = np.where(complete[:, None], X - self.center, 0.0)
        horizon = describe(outcome).horizon
        offset = anchor(self.full, Xc[fit_mask], target.take(np.flatnonzero(fit_mask)), horizon)
        return Refitter(Xc, complete, fit_mask, target, self.report["folds"], self.report["seed"], self.sign, horizon,
                        offset, self.full.coef)

    def replicate_compute(self, data: pd.DataFrame | Mapping[str, Any], record: Mapping[str, Any]) -> np.ndarray:
        """A new patient's index in one bootstrap replicate that refitted the index (the replicate's `@index`
        record): the mean of that replicate's fold models, on the common scale (see Refitter)."""
        X = _covariates(data, self.covariates, self.key)
        Xc = np.asarray(X, float).reshape(-1, len(self.covariates)) - self.center
        lp = float(record["intercept"]) + Xc @ np.asarray(record["fold_coef"], float).T
        return self.sign * lp.mean(axis=1) + float(record["shift"])


def cross_fitted_index(index: IndexSpec, frame: pd.DataFrame, spec: Spec, *, key: str, seed: int,
                       level: float, groups: np.ndarray | None = None
                       ) -> tuple[np.ndarray, PrognosticModel, list[str]]:
    """Out-of-fold index values for every cohort row (NaN where covariates are missing) and the model."""
    p = index.prognostic
    assert p is not None
    outcome, X, target, has_outcome, complete, in_arm = _inputs(spec, frame, p.outcome, p.covariates, p.fit_on, key)
    fit = np.flatnonzero(complete & has_outcome & in_arm)
    _check_size(fit, target, p.folds, len(p.covariates), outcome, p.fit_on, spec, key)
    center = X[fit].mean(axis=0)
    Xc = np.where(complete[:, None], X - center, 0.0)
    _check_rank(Xc[fit], p.covariates, f"{key}.prognostic.covariates")
    sign = -1.0 if _family(outcome).flips and outcome.higher_is_better else 1.0
    full, models, fold_of, value_fold, lp = cross_fit(Xc, target, fit, complete, p.folds, seed, groups)
    model = PrognosticModel(outcome.name, outcome.kind, tuple(p.covariates), center, sign, models, full, fold_of,
                            value_fold, key=key)
    model.report = _report(index, outcome, model, Xc[fit], lp[fit], target.take(fit), seed, level)
    missing = describe_missing(dict(zip(p.covariates, X.T)))
    warnings = _warnings(index, outcome, complete, has_outcome, in_arm, model, missing)
    return sign * lp, model, warnings


def cross_fit(Xc: np.ndarray, target: Target, fit: np.ndarray, complete: np.ndarray, folds: int, seed: int,
              groups: np.ndarray | None, start: np.ndarray | None = None):
    """K-fold cross-fitting on rows `fit` of (Xc, target): (full model, fold models, fold_of, value_fold,
    linear predictor per row, NaN where a covariate is missing). start: warm start for every fit."""
    full = fit_linear_predictor(Xc[fit], target.take(fit), start)
    fold_of = np.full(len(Xc), -1)
    models = []
    for k, (train, held) in enumerate(_folds(fit, folds, seed, groups)):
        m = fit_linear_predictor(Xc[train], target.take(train), full.coef)
        m.intercept = full.intercept
        models.append(m)
        fold_of[held] = k
    value_fold = fold_of.copy()
    others = np.flatnonzero(complete & (fold_of < 0))
    value_fold[others] = _assign_folds(others, len(models), seed, groups)
    lp = np.full(len(Xc), np.nan)
    for k, m in enumerate(models):
        rows = np.flatnonzero(value_fold == k)
        lp[rows] = m(Xc[rows])
    return full, models, fold_of, value_fold, lp


def anchor(full: LinearPredictor, Xc: np.ndarray, target: Target, horizon: float | None) -> float:
    """What turns the (relative) linear predictor into the model's absolute prediction: lp + anchor is the
    log cumulative hazard at the horizon (Cox, Breslow baseline at the centre), the log odds of a level worse
    than the best (proportional odds), and the linear predictor itself (logistic, linear: intercept included)."""
    if target.time is not None:  # a time-to-event target: the log cumulative hazard at the horizon
        time, event = np.asarray(target.time, float), np.asarray(target.event, float)
        if horizon is None:
            horizon = float(np.median(time[event > 0])) if (event > 0).any() else float(np.median(time))
        order = np.argsort(time, kind="stable")
        t = time[order]
        risk = np.cumsum(np.exp(full(Xc[order]))[::-1])[::-1]
        at_risk = risk[np.searchsorted(t, t, side="left")]
        hit = (event[order] > 0) & (t <= horizon)
        h0 = float(np.sum(1.0 / at_risk[hit]))
        return math.log(max(h0, 1e-300))
    if "cuts" in full.extra:  # proportional odds: the log odds of a level worse than the best
        return -float(full.extra["cuts"][0])
    return 0.0


@dataclass
class Refitter:
    """The cohort arrays of a cross-fitted index, kept so a bootstrap replicate can refit it from rows.

    `values(drawn)` refits the index on the drawn rows (duplicates kept as rows; copies of one patient share a
    fold) by the same folds rule and seed, and returns each drawn row's value on the common scale: the
    replicate's oriented index shifted so that equal values mean equal absolute predictions (see `anchor`),
    which puts every replicate's break-even on the original index's scale.
    """

    Xc: np.ndarray
    complete: np.ndarray
    fit_mask: np.ndarray
    target: Target
    folds: int
    seed: int
    sign: float
    horizon: float | None
    offset: float
    start: np.ndarray

    def values(self, drawn: np.ndarray) -> tuple[np.ndarray, dict]:
        """Cohort-length index values (NaN outside the draw) and the replicate's model (coef, fold coefs,
        intercept, shift)."""
        drawn = np.asarray(drawn)
        Xc, target = self.Xc[drawn], self.target.take(drawn)
        fit = np.flatnonzero(self.fit_mask[drawn])
        full, models, _, _, lp = cross_fit(Xc, target, fit, self.complete[drawn], self.folds, self.seed, drawn,
                                           self.start)
        if not (full.converged and all(m.converged for m in models)):
            raise FloatingPointError("the prognostic model did not converge in this replicate")
        shift = self.sign * (anchor(full, Xc[fit], target.take(fit), self.horizon) - self.offset)
        x = np.full(len(self.Xc), np.nan)
        x[drawn] = self.sign * lp + shift
        return x, {"coef": full.coef, "fold_coef": np.vstack([m.coef for m in models]),
                   "intercept": full.intercept, "shift": shift}


def _inputs(spec: Spec, frame: pd.DataFrame, outcome_name: str, covariates: tuple[str, ...], fit_on: str, key: str):
    """(outcome spec, covariates X, target, has outcome, complete covariates, in the fitting arm) per cohort row."""
    outcome = _outcome(spec, outcome_name, key)
    X = _covariates(frame, covariates, f"{key}.prognostic.covariates")
    target, has_outcome = outcome_target(outcome, frame, f"{key}.prognostic.outcome")
    complete = np.all(np.isfinite(X), axis=1)
    in_arm = _arm_mask(frame, spec, spec.second) if fit_on == "second" else np.ones(len(frame), bool)
    return outcome, X, target, has_outcome, complete, in_arm


def outcome_target(outcome: OutcomeSpec, frame: pd.DataFrame, key: str) -> tuple[Target, np.ndarray]:
    """The outcome's arrays (NaN where missing) and the mask of rows that have it."""
    facts = describe(outcome)
    family = _family_name(outcome, facts.prognostic)
    if facts.values == "time_event":
        time = as_float(_column(frame, outcome.time, key), outcome.time, key)
        event = as_float(_column(frame, outcome.event, key), outcome.event, key)
        has = np.isfinite(time) & np.isfinite(event)
        _refuse_rows(has & (time <= 0), outcome.time, key, "follow-up times must be positive")
        _refuse_rows(has & ~np.isin(event, (0.0, 1.0)), outcome.event, key, "the event column must hold 0 or 1")
        return Target(family, time=time, event=event), has
    raw = _column(frame, outcome.column, key)
    if facts.values == "level":
        y = _ordinal_codes(raw, outcome, key)
    else:
        y = as_float(raw, outcome.column, key)
    has = np.isfinite(y)
    if facts.values == "zero_one":
        _refuse_rows(has & ~np.isin(y, (0.0, 1.0)), outcome.column, key, "a binary outcome must hold 0 or 1")
    return Target(family, y=y), has


def _family_name(outcome: OutcomeSpec, name: str | None) -> str:
    if name not in FAMILIES:
        raise FulcrumError(f"outcome '{outcome.name}' ({outcome.kind}) offers no model for a prognostic index.",
                           key=f"outcomes '{outcome.name}'", hint="Fit the prognostic index to another outcome.")
    return str(name)


def _family(outcome: OutcomeSpec) -> Family:
    """The multi-covariate model family that fits a prognostic index to this outcome (its kind's facts say)."""
    return FAMILIES[_family_name(outcome, describe(outcome).prognostic)]


def _ordinal_codes(raw: pd.Series, outcome: OutcomeSpec, key: str) -> np.ndarray:
    levels = {str(level): i for i, level in enumerate(outcome.levels)}
    values = raw.astype(object)
    text = values.map(lambda v: None if pd.isna(v) else (str(int(v)) if isinstance(v, float) and v.is_integer()
                                                         else str(v)))
    codes = text.map(lambda v: np.nan if v is None else levels.get(v, -1.0)).to_numpy(float)
    _refuse_rows(codes == -1.0, outcome.column, key, f"values that are not levels of '{outcome.name}' "
                 f"({', '.join(outcome.levels)})")
    return codes


def _refuse_rows(bad: np.ndarray, column: str | None, key: str, what: str) -> None:
    rows = np.flatnonzero(bad)
    if len(rows):
        raise FulcrumError(f"column '{column}': {what}.", key=key, column=column,
                           rows=(rows[:MAX_ERROR_ROWS] + 1).tolist(), n_rows=len(rows),
                           hint="Fix these rows in the cohort file.")


def _outcome(spec: Spec, name: str, key: str) -> OutcomeSpec:
    try:
        return spec.outcome(name)
    except KeyError:
        raise FulcrumError(f"the prognostic index names outcome '{name}', which the spec does not define.",
                           key=f"{key}.prognostic.outcome",
                           hint=f"Outcomes: {', '.join(o.name for o in spec.outcomes)}.") from None


def _column(frame: pd.DataFrame, column: str | None, key: str) -> pd.Series:
    if column is None or column not in frame.columns:
        raise FulcrumError(f"column '{column}' is not in the cohort.", key=key, column=column,
                           hint="Check the column name, or load it as an extra column.")
    return frame[column]


def _covariates(data: pd.DataFrame | Mapping[str, Any], names: tuple[str, ...], key: str | None) -> np.ndarray:
    cols = []
    for c in names:
        if c not in data:
            raise FulcrumError(f"covariate '{c}' of the prognostic index is not in the data.", key=key, column=c,
                               hint="Check the covariate names against the cohort columns.")
        cols.append(as_float(data[c], c, key))
    return np.column_stack(cols) if cols else np.zeros((len(data), 0))


def _arm_mask(frame: pd.DataFrame, spec: Spec, arm: str) -> np.ndarray:
    values = _column(frame, spec.cohort.arm, "cohort.arm")
    mask = values.astype(str).str.strip().to_numpy() == arm
    if not mask.any() and pd.api.types.is_numeric_dtype(values):
        try:
            mask = values.to_numpy(float) == float(arm)
        except ValueError:
            pass
    return mask


def _split(n: int, k: int, seed: int):
    """Shuffled K-fold test sets of 0..n-1: a RandomState(seed) shuffle cut into k runs, the first n % k one
    longer (the rule of scikit-learn's KFold(shuffle=True), whose folds these equal; written out so a bootstrap
    replicate does not pay for scikit-learn's checks)."""
    order = np.arange(n)
    np.random.RandomState(seed).shuffle(order)
    return np.array_split(order, k)


def _folds(fit: np.ndarray, k: int, seed: int, groups: np.ndarray | None):
    """(train rows, held-out rows) per fold; copies of one patient (same group) share a fold."""
    if groups is None:
        for held in _split(len(fit), k, seed):
            mask = np.zeros(len(fit), bool)
            mask[held] = True
            yield fit[~mask], fit[held]
        return
    unique, member = np.unique(np.asarray(groups)[fit], return_inverse=True)
    fold = np.empty(len(unique), np.int64)
    for j, held_groups in enumerate(_split(len(unique), k, seed)):
        fold[held_groups] = j
    of_row = fold[member.reshape(-1)]
    for j in range(k):
        yield fit[of_row != j], fit[of_row == j]


def _assign_folds(rows: np.ndarray, k: int, seed: int, groups: np.ndarray | None) -> np.ndarray:
    """A fold model for each row outside the fitting set: a seeded random permutation of 0..k-1 repeated, so
    every fold model is used about equally; copies of one patient (same group) share it."""
    rng = np.random.default_rng([seed, 1])
    if groups is None:
        return rng.permutation(np.arange(len(rows)) % k)
    unique, member = np.unique(np.asarray(groups)[rows], return_inverse=True)
    return rng.permutation(np.arange(len(unique)) % k)[member.reshape(-1)]


def _check_size(fit: np.ndarray, target: Target, folds: int, p: int, outcome: OutcomeSpec, fit_on: str,
                spec: Spec, key: str) -> None:
    where = f"the {spec.second} arm" if fit_on == "second" else "the cohort"
    need = max(folds * MIN_PER_FOLD, -(-(p + 2) * folds // (folds - 1)))
    if len(fit) < need:
        raise FulcrumError(f"only {len(fit)} patients in {where} have '{outcome.name}' and every covariate; "
                           f"{folds}-fold cross-fitting of {p} covariate(s) needs at least {need}.",
                           key=f"{key}.prognostic", hint="Use fewer covariates or folds, or fit_on = \"all\".")
    if describe(outcome).values != "number":
        values = target.event if target.time is not None else target.y
        distinct = np.unique(values[fit])
        if len(distinct) < 2:
            raise FulcrumError(f"every patient in {where} has the same value of '{outcome.name}' "
                               f"({distinct[0]:g}), so a prognostic model cannot be fitted.",
                               key=f"{key}.prognostic.outcome", hint="Choose an outcome that varies.")


def _check_rank(X: np.ndarray, names: tuple[str, ...], key: str) -> None:
    for j in range(X.shape[1]):
        if np.linalg.matrix_rank(np.column_stack([np.ones(len(X)), X[:, :j + 1]])) < j + 2:
            raise FulcrumError(f"covariate '{names[j]}' is constant or fully determined by the covariates before "
                               "it, so the prognostic model cannot estimate its effect.", key=key, column=names[j],
                               hint="Remove it from the covariates.")


def _report(index: IndexSpec, outcome: OutcomeSpec, model: PrognosticModel, X: np.ndarray, oof: np.ndarray,
            target: Target, seed: int, level: float) -> dict:
    p = index.prognostic
    assert p is not None
    z = float(stats.norm.ppf(0.5 + level / 2))
    full = model.full
    coefficients = [{"name": n, "estimate": float(b), "se": float(s), "ci": [float(b - z * s), float(b + z * s)]}
                    for n, b, s in zip(model.covariates, full.coef, full.se)]
    calibration = fit_linear_predictor(oof[:, None], target)
    family = FAMILIES[target.family]
    slope, slope_se = float(calibration.coef[0]), float(calibration.se[0])
    return {
        "outcome": outcome.name,
        "model": family.name,
        "scale": family.scale,
        "fit_on": p.fit_on,
        "folds": p.folds,
        "seed": seed,
        "n_fit": int(len(oof)),
        "n_events": _events(target),
        "coefficients": coefficients,
        "intercept": float(full.intercept) if family.intercept else None,
        "centre": {n: float(c) for n, c in zip(model.covariates, model.center)},
        "orientation": orientation(outcome),
        "c_index": _discrimination(outcome, target, model.sign * oof, level).as_dict(),
        "calibration_slope": {"estimate": slope, "se": slope_se, "ci": [slope - z * slope_se, slope + z * slope_se],
                              "level": level, "method": f"{family.name} regression of the outcome "
                              "on the out-of-fold linear predictor in the fitting set (1 = well calibrated)"},
        "converged": bool(full.converged and all(m.converged for m in model.fold_models)),
        "anchor": anchor(full, X, target, describe(outcome).horizon),
        "sign": model.sign,
        "predicted": _predicted_words(outcome),
        "method": (f"{family.name} model of {outcome.title} on {', '.join(model.covariates)}, "
                   f"fitted on {'the second arm' if p.fit_on == 'second' else 'all patients without an arm term'} "
                   f"by {p.folds}-fold cross-fitting (seed {seed}): patients in the fitting set take the value of "
                   "the fold model that did not see them, everyone else in the cohort the value of a fold model "
                   "assigned at random (each used equally), and a new patient the mean of the "
                   f"{p.folds} fold models; every fold model keeps the whole fitting set's intercept. "
                   "Coefficients are from the fit on the whole fitting set, covariates centred at its means."),
    }


def _events(target: Target) -> int | None:
    """Events (survival) or patients with the outcome coded 1 (binary); None for other families."""
    counted = {"event": target.event, "ones": target.y}.get(FAMILIES[target.family].events)
    return None if counted is None else int(np.sum(counted))


def about_index(label: str, report: Mapping[str, Any], interval: str, refit: bool, spec: Spec | None = None) -> str:
    """One plain sentence for every break-even along a fitted index: what the score is fitted from, and whether
    the intervals include the uncertainty of fitting it (spec: to name the outcome by its label)."""
    names = [c["name"] for c in report.get("coefficients") or []]
    named = names[0] if len(names) < 2 else ", ".join(names[:-1]) + f" and {names[-1]}"
    outcome = str(report.get("outcome"))
    if spec is not None and any(o.name == outcome for o in spec.outcomes):
        outcome = f"'{spec.outcome(outcome).title}'"
    head = (f"'{label}' is a score fitted from {named} ({report.get('model')} model of "
            f"{outcome}, {report.get('folds')}-fold cross-fitting), not a measurement; ")
    if interval == "bootstrap" and refit:
        return head + "its intervals include the uncertainty of fitting it (the bootstrap refits the score in every " \
                      "replicate and compares replicates on the score's predicted-outcome scale)."
    if interval == "bootstrap":
        return head + "its intervals do not include the uncertainty of fitting it (the bootstrap held the score " \
                      "fixed; bootstrap intervals with refit_index = true include it)."
    return head + "its intervals do not include the uncertainty of fitting it (analytic intervals treat the score " \
                  "as known; only bootstrap intervals with refit_index = true include it)."


def about_index_plain(label: str, report: Mapping[str, Any], interval: str, refit: bool) -> str:
    """The same for a family: what the score is worked out from, and whether the likely ranges allow for it."""
    names = [c["name"] for c in report.get("coefficients") or []]
    named = names[0] if len(names) < 2 else ", ".join(names[:-1]) + f" and {names[-1]}"
    allow = "allow" if interval == "bootstrap" and refit else "do not allow"
    return (f"{label} is a score worked out from {named}. It is an estimate, not a measurement. "
            f"The likely ranges here {allow} for that.")


def _predicted_words(outcome: OutcomeSpec) -> str:
    """What `predicted` turns an index value into, in words."""
    horizon = describe(outcome).horizon
    by = "" if horizon is None else f"{horizon:g}" + (f" {outcome.units}" if outcome.units else "")
    return _family(outcome).predicted.format(title=outcome.title, by=by)


def predicted(report: Mapping[str, Any], x: float | None) -> float | None:
    """An index value as the model's absolute prediction (see `_predicted_words`), from its report's anchor and
    sign; None for None (an unbounded interval end) or a report without them."""
    if x is None or report.get("anchor") is None:
        return None
    a, sign = float(report["anchor"]), float(report.get("sign", 1.0))
    model = report.get("model")
    if model == "Cox":
        return float(-math.expm1(-math.exp(min(x + a, 700.0))))
    if model == "logistic":
        return float(1.0 / (1.0 + math.exp(-max(min(sign * x, 700.0), -700.0))))
    if model == "proportional odds":
        return float(1.0 / (1.0 + math.exp(-max(min(x + a, 700.0), -700.0))))
    return float(sign * x)


def orientation(outcome: OutcomeSpec) -> str:
    """One sentence saying what a higher index means."""
    family = _family(outcome)
    flipped = family.flips and outcome.higher_is_better
    what = family.orientation.format(title=outcome.title, direction="lower" if flipped else "higher")
    return f"Higher index = worse prognosis: {what}."


def _discrimination(outcome: OutcomeSpec, target: Target, index: np.ndarray, level: float):
    if target.time is not None:
        return harrell_c(target.time, target.event, index, level)
    badness = np.asarray(target.y, float)
    if FAMILIES[target.family].flips and outcome.higher_is_better:
        badness = -badness
    return harrell_c(-badness, np.ones(len(badness)), index, level)


def _warnings(index: IndexSpec, outcome: OutcomeSpec, complete: np.ndarray, has_outcome: np.ndarray,
              in_arm: np.ndarray, model: PrognosticModel, missing: str) -> list[str]:
    p = index.prognostic
    assert p is not None
    out = []
    name = index.title
    if (~complete).any():
        out.append(f"Index '{name}': {int((~complete).sum())} of {len(complete)} patients lack a covariate of the "
                   f"prognostic model (missing: {missing}) and have no index value.")
    valued = complete & (model.fold_of < 0)
    no_outcome = valued & in_arm & ~has_outcome
    if no_outcome.any():
        out.append(f"Index '{name}': {int(no_outcome.sum())} patients without '{outcome.name}' were left out of "
                   f"the fitting and take the value of a fold model assigned at random.")
    events = model.report["n_events"]
    if _family(outcome).events == "ones":  # the rarer of the two outcome groups
        events = min(events, model.report["n_fit"] - events)
    if events is not None and events < EVENTS_PER_COVARIATE * len(model.covariates):
        out.append(f"Index '{name}': {events} events for {len(model.covariates)} covariates (fewer than "
                   f"{EVENTS_PER_COVARIATE} per covariate); the prognostic model may be overfitted.")
    if not model.report["converged"]:
        out.append(f"Index '{name}': the prognostic model did not settle (a covariate may predict the outcome "
                   "perfectly); its coefficients are unreliable.")
    return out


"""Where more evidence would change the answer: the expected value of perfect information along an index.

For one patient at index value x the choice is between two arms whose difference D(x) (first minus second,
oriented so higher is better, less the margin) is uncertain. Choosing by today's estimate loses, on average,

    EVPI(x) = E[max(D(x), 0)] - max(E[D(x)], 0)

against choosing with the truth known (Raiffa and Schlaifer 1961; Claxton 1999). With bootstrap replicates the
expectation is over the replicates' curves. Otherwise D(x) is taken as normal with the fitted models' delta-method
variance, for which the expectation has a closed form, the unit normal loss integral:

    EVPI(x) = s * L(|m| / s),  L(k) = phi(k) - k (1 - Phi(k)),

so no Monte Carlo draws (and no Monte Carlo error) are needed. For a population whose patients are each treated by
their own index value, the loss adds up patient by patient: the population's EVPI is the mean of EVPI(x) over its
patients' index values (Felli and Hazen 1998 discuss such per-patient expected values of information).

Values are per patient in the outcome's measure; per 100 patients they read as "about 3 in 100 patients would do
better if we knew the answer" for probabilities, and as value points or the outcome's units otherwise.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from . import fitting as ft
from .margins import margin_for, measure_span
from .models import describe
from .numeric import quad, r6, r6_list
from .policy import policy_indices
from .target import Target, cohort_target, load_target
from .values import weights_for

SQRT2PI = float(np.sqrt(2.0 * np.pi))


def unit_normal_loss(k: np.ndarray) -> np.ndarray:
    """L(k) = phi(k) - k (1 - Phi(k)), the expected shortfall of a standard normal beyond k."""
    k = np.asarray(k, float)
    return np.exp(-0.5 * k * k) / SQRT2PI - k * special.ndtr(-k)


def evpi_normal(mean: np.ndarray, sd: np.ndarray) -> np.ndarray:
    """EVPI of a two-way choice whose net benefit is normal(mean, sd^2): sd * L(|mean| / sd); 0 where sd is 0."""
    mean, sd = np.asarray(mean, float), np.asarray(sd, float)
    safe = np.where(sd > 0, sd, 1.0)
    return np.where(sd > 0, safe * unit_normal_loss(np.abs(mean) / safe), 0.0)


def evpi_draws(draws: np.ndarray) -> np.ndarray:
    """EVPI from draws of the net benefit, (draws, points): mean of max(D, 0) less max(mean D, 0), per point."""
    D = np.asarray(draws, float)
    return np.maximum(D, 0.0).mean(axis=0) - np.maximum(D.mean(axis=0), 0.0)


@dataclass
class Uncertainty:
    """The net benefit of the first arm along a grid: its estimate and either its sd or replicate draws."""

    grid: np.ndarray
    estimate: np.ndarray
    sd: np.ndarray | None = None
    draws: np.ndarray | None = None

    @property
    def method(self) -> str:
        return "bootstrap" if self.draws is not None else "normal"

    def evpi(self) -> np.ndarray:
        return evpi_draws(self.draws) if self.draws is not None else evpi_normal(self.estimate, self.sd)


def populations(fs: ft.FitSet, target: Target | None = None) -> list[Target]:
    """Whose decisions the population value sums over, first choice first: the given target or the spec's [target]
    patients (along the indices their file gives), then the loaded cohort (along every index)."""
    if target is None and fs.spec.target is not None:
        target = load_target(fs.spec, fs.indices, policy_indices(fs.spec))
    return ([target] if target is not None else []) + [cohort_target(fs.spec, fs.indices)]


def _for_index(pops: list[Target], index: str) -> Target:
    return next(p for p in pops if index in p.index)


def pair_uncertainty(pf: ft.PairFit, margin: float, grid: np.ndarray, replicates: list[dict] | None = None
                     ) -> Uncertainty:
    """Net benefit (oriented difference less the margin) of one outcome along its index; `grid` must be the
    analysis grid when replicates are given (their curves lie on it)."""
    first, second = (pf.fits[a] for a in pf.fits)
    est = pf.sign * (first.measure(grid) - second.measure(grid)) - margin
    if replicates is not None:
        diffs, _, _ = ft.pair_curves(pf, replicates)
        ok = [d for d in diffs if d is not None]
        if ok:
            return Uncertainty(grid, est, draws=np.asarray(ok, float) - margin)
    sd = np.sqrt(np.maximum(first.measure_var(grid) + second.measure_var(grid), 0.0))
    return Uncertainty(grid, est, sd=sd)


def composite_uncertainty(cm, weights: np.ndarray, margin: float) -> Uncertainty:
    """The same for a composite: its delta-method sd, or its replicates' curves when attached."""
    est = (cm.L[0] - cm.L[1]) @ weights - margin
    if cm.boot is not None:
        B0, B1 = cm.fitted_replicates()
        return Uncertainty(cm.grid, est, draws=(B0 - B1) @ weights - margin)
    sd = np.sqrt(np.maximum(quad(cm.C[0], weights) + quad(cm.C[1], weights), 0.0))
    return Uncertainty(cm.grid, est, sd=sd)


def _stretches(grid: np.ndarray, above: np.ndarray) -> list[dict]:
    """Runs of the grid where `above` holds, as from/to pairs."""
    out, start = [], None
    for i, a in enumerate(above):
        if a and start is None:
            start = i
        if start is not None and (not a or i == len(above) - 1):
            end = i if a else i - 1
            out.append({"from": r6(grid[start]), "to": r6(grid[end])})
            start = None
    return out


def outcome_threshold(outcome, ev) -> float | None:
    """The value of information worth acting on for this outcome, per 100 patients in its own units: stated for it,
    else the general threshold (patients in 100), scaled to the measure's range when that is not [0, 1]; None for
    an unbounded measure with no stated threshold."""
    threshold = ev.threshold if ev else 1.0
    if ev and outcome.name in ev.thresholds:
        return ev.thresholds[outcome.name]
    span = measure_span(outcome)
    return None if span is None else threshold * span


def evidence_row(u: Uncertainty, *, outcome: str, index: str, measure: str, probability: bool, units: str,
                 index_label: str, threshold: float | None, population: Target, x_range: tuple[float, float],
                 kind: str | None = None) -> dict:
    """One `evidence` row: EVPI along the index, the stretch above the threshold and the population's value."""
    keep = (u.grid >= x_range[0] - 1e-9) & (u.grid <= x_range[1] + 1e-9)
    grid, ev = u.grid[keep], np.maximum(u.evpi()[keep], 0.0)
    per100 = 100.0 * ev
    xs = population.values(index) if index in population.index else np.zeros(0)
    pop_ev = float(np.mean(np.interp(xs, grid, ev))) if len(xs) else None
    peak = int(np.argmax(per100)) if len(per100) else None
    per_unit = "in 100 patients" if probability else (f"{units} per 100 patients" if units else "per 100 patients")
    row = {
        "outcome": outcome, "index": index, "measure": measure, "kind": kind,
        "method": "bootstrap replicates" if u.method == "bootstrap" else "normal approximation (closed form)",
        "units": per_unit, "threshold": r6(threshold),
        "curve": [{"x": x, "evpi": e, "per_100": p} for x, e, p in zip(r6_list(grid), r6_list(ev), r6_list(per100))],
        "above_threshold": [] if threshold is None else _stretches(grid, per100 > threshold),
        "peak": None if peak is None else {"x": r6(grid[peak]), "per_100": r6(per100[peak])},
        "population": {"name": population.name, "n": int(len(xs)),
                       "evpi": r6(pop_ev), "per_100": r6(None if pop_ev is None else 100.0 * pop_ev)},
    }
    row["sentence"] = sentence(row, index_label, probability)
    return row


def _num(v: float) -> str:
    return f"{v:.1f}" if abs(v) < 10 else f"{v:.0f}"


def sentence(row: dict, index_label: str, probability: bool) -> str:
    """One plain sentence about where knowing the answer would matter."""
    peak, pop = row["peak"], row["population"]
    if peak is None or peak["per_100"] is None:
        return "No value of information could be computed."
    if peak["per_100"] < 0.05:
        return (f"Knowing the answer for certain would change almost nothing along {index_label}: the arms are "
                "far enough apart, or the estimates firm enough, that more evidence is unlikely to change this choice.")
    gain = (f"about {_num(peak['per_100'])} in 100 patients like this would do better if the answer were known"
            if probability else
            f"knowing the answer would gain about {_num(peak['per_100'])} {row['units']}")
    text = f"Uncertainty matters most at {index_label} {peak['x']:.3g}: {gain}."
    if row["threshold"] is None:
        text += " No threshold is stated for this measure ([evidence] thresholds)."
    elif row["above_threshold"]:
        spans = ", ".join(f"{s['from']:.3g} to {s['to']:.3g}" for s in row["above_threshold"])
        text += f" It exceeds the threshold of {row['threshold']:g} {row['units']} from {spans}."
    else:
        text += (f" It stays below the threshold of {row['threshold']:g} {row['units']} along the whole index: more "
                 "evidence is unlikely to change this choice.")
    if pop["per_100"] is not None:
        text += f" Over {pop['name']} ({pop['n']} patients) it averages {_num(pop['per_100'])} {row['units']}."
    return text


def evidence_rows(fs: ft.FitSet, composite: dict | None = None, replicates: list[dict] | None = None,
                  population: Target | None = None) -> list[dict]:
    """`evidence` rows for every outcome x index and every composite of an analysis."""
    spec = fs.spec
    ev = spec.evidence
    pops = populations(fs, population)
    rows = []
    for (oname, iname), pf in fs.pairs.items():
        o = pf.outcome
        if o.among_survivors:
            continue  # its difference compares different groups of survivors: not a choice between arms
        u = pair_uncertainty(pf, margin_for(spec, o), ft.grid_for(pf, spec.analysis.grid), replicates)
        rows.append(evidence_row(u, outcome=oname, index=iname, measure=o.title, probability=describe(o).probability,
                                 units=o.units or "", index_label=_index_label(fs, iname),
                                 threshold=outcome_threshold(o, ev), population=_for_index(pops, iname),
                                 x_range=pf.x_range))
    for (kind, iname), (_, info) in (composite or {}).items():
        cm = info.model
        if cm is None:
            continue
        w = weights_for(cm, info.weights)
        u = composite_uncertainty(cm, w, spec.analysis.margin)  # the analysis margin is the composites' margin
        if cm.weighted:  # expected value weights: on the [0, 1] scale of the weights
            units, threshold = "value points", (ev.threshold if ev else 1.0)
        else:  # utility x survival time: quality-adjusted time to the anchor outcome's horizon
            anchor = cm.pair.outcome
            units = f"quality-adjusted {anchor.units or 'time units'}"
            threshold = (ev.threshold if ev else 1.0) * float(anchor.horizon)
        rows.append(evidence_row(u, outcome="composite", index=iname, measure=info.measure, probability=False,
                                 units=units, index_label=_index_label(fs, iname), threshold=threshold,
                                 population=_for_index(pops, iname), x_range=cm.x_range, kind=kind))
    return rows


def _index_label(fs: ft.FitSet, name: str) -> str:
    return fs.indices[name].info.get("label") or name


__all__ = ["unit_normal_loss", "evpi_normal", "evpi_draws", "Uncertainty", "populations",
           "pair_uncertainty", "composite_uncertainty", "evidence_rows"]

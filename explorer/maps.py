"""Two-index decision maps: each arm's model in two indices, the difference over their plane, where it breaks even.

Per arm, the outcome (or the models behind the composite) is fitted with the first index, the second index
and optionally their product as linear terms, adjustment covariates held at their pooled means. The
difference (first minus second, higher is better, minus the margin) is evaluated on a grid over the observed
ranges, left blank outside the patients' convex hull or where an arm has no patient near, and the
break-even contour is traced by marching squares with linear interpolation along grid edges.
"""
from __future__ import annotations

import copy
import dataclasses
import threading
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy.spatial import ConvexHull, QhullError, cKDTree

from . import breakeven as be
from . import fitting as ft
from . import values as vl
from .errors import FulcrumError
from .models import describe, fit_model
from .models.base import Basis
from .models.words import measure_words
from .numeric import r6
from .result_rows import index_info_json
from .spec import MapSpec, OutcomeSpec, Spec
from .words import fmt as _fmt

GRID = 60
NEAR = 0.1  # blank where an arm has nobody within a tenth of the ranges (distance in range-scaled units)
SLACK = 0.02  # the hull widened by 2% of the ranges, so grid edges at the extreme patients stay mapped
COMPOSITE = "composite"
# ------------------------------------------------------------------------------------------
# Fitting in the plane
# ------------------------------------------------------------------------------------------
@dataclass
class Plane:
    """Where plane fits are evaluated along the second index: one value, or one per point evaluated."""

    y: Any = 0.0


def on_plane(fit: Any, plane: Plane, interaction: bool) -> Any:
    """A copy of a fit whose design rows are [a, b, (a b), covariates at reference] with b taken from `plane`,
    so every measure, variance and distribution of the model protocol works over the plane."""
    held = copy.copy(fit)
    rest = np.asarray(fit.z_ref, float)[2 if interaction else 1:]

    def rows(x: np.ndarray) -> np.ndarray:
        x = np.asarray(x, float).reshape(-1)
        y = np.broadcast_to(np.asarray(plane.y, float), x.shape)
        cols = [x, y] + ([x * y] if interaction else [])
        return np.column_stack(cols + [np.tile(rest, (len(x), 1))])

    held.rows = rows
    return held


def _used_rows(fs: ft.FitSet, outcome: OutcomeSpec, a: np.ndarray, b: np.ndarray, names: tuple[str, str]
               ) -> tuple[dict[str, np.ndarray], list[str]]:
    spec = fs.spec
    arm_col = fs.cohort.frame[spec.cohort.arm].to_numpy()
    ok = fs.cohort.complete(outcome) & np.isfinite(a) & np.isfinite(b)
    keep = True if fs.population is None or fs.population.keep is None else fs.population.keep  # headline's patients
    rows = {arm: np.flatnonzero(ok & keep & (arm_col == arm)) for arm in spec.cohort.arms}
    dropped = {arm: int(((arm_col == arm) & keep & ~ok).sum()) for arm in spec.cohort.arms}
    warnings = []
    if any(dropped.values()):
        warnings.append(f"{outcome.title} over {names[0]} and {names[1]}: "
                        + ", ".join(f"{n} {arm} patients" for arm, n in dropped.items() if n)
                        + " left out for missing values (complete cases).")
    return rows, warnings


def fit_plane_pair(fs: ft.FitSet, outcome: OutcomeSpec, indices: tuple[str, str], interaction: bool,
                   plane: Plane) -> ft.PairFit:
    """Both arms' models of one outcome in two indices, as a PairFit whose fits evaluate over `plane`."""
    spec = fs.spec
    ia, ib = (fs.indices[n] for n in indices)
    a, b = np.asarray(ia.values, float), np.asarray(ib.values, float)
    rows, warnings = _used_rows(fs, outcome, a, b, indices)
    every = np.concatenate([rows[arm] for arm in spec.cohort.arms])
    if not len(every):
        raise FulcrumError(f"no patient has '{outcome.name}', '{indices[0]}' and '{indices[1]}' all recorded.",
                           hint="Check the outcome and index columns.")
    adjust_ref = fs.cohort.frame[list(outcome.adjust)].to_numpy(float)[every].mean(axis=0) if outcome.adjust else None
    terms = [b] + ([a * b] if interaction else [])
    names = (indices[1],) + ((f"{indices[0]} x {indices[1]}",) if interaction else ())
    ref = np.array([t[every].mean() for t in terms])
    fits, data = {}, {}
    for arm in spec.cohort.arms:
        r = rows[arm]
        d = ft.outcome_data(spec, fs.cohort, outcome, a, r, adjust_ref)
        if len(d) == 0:
            raise FulcrumError(f"no {arm} patients have complete data for '{outcome.name}' and both indices.",
                               column=outcome.column or outcome.time, hint="Check these columns for this arm.")
        extra = np.column_stack([t[r] for t in terms])
        d.z = extra if d.z is None else np.column_stack([extra, d.z])
        d.z_names = names + tuple(d.z_names)
        d.z_ref = ref if adjust_ref is None else np.r_[ref, adjust_ref]
        fit = fit_model(outcome, arm, Basis("linear"), d, robust=ft.robust_for(spec, outcome))
        fit.param_names_ = tuple(indices[0] if n == "index" else n for n in fit.param_names_)
        warnings.extend(f"{arm}, {outcome.title}: {w}" for w in fit.warnings_)
        fits[arm], data[arm] = on_plane(fit, plane, interaction), d
    return ft.PairFit(outcome, indices[0], Basis("linear"), fits, data, rows,
                      (float(a[every].min()), float(a[every].max())), warnings)


class _PlanePairs(dict):
    """Plane fits made on first use, keyed (outcome, first index) as FitSet.pairs, so a composite fits
    exactly the outcomes it reads."""

    def __init__(self, make: Callable[[str], ft.PairFit]) -> None:
        super().__init__()
        self.make = make

    def __missing__(self, key: tuple[str, str]) -> ft.PairFit:
        self[key] = pf = self.make(key[0])
        return pf


# ------------------------------------------------------------------------------------------
# Where the plane is covered by patients
# ------------------------------------------------------------------------------------------
@dataclass
class Coverage:
    """The convex hull of the patients' index pairs and each arm's patients, in range-scaled units."""

    lo: np.ndarray
    span: np.ndarray
    hull: np.ndarray  # facet equations: inside when A p + c <= 0
    trees: list[cKDTree]

    @classmethod
    def of(cls, points: Sequence[np.ndarray], names: tuple[str, str]) -> Coverage:
        pooled = np.vstack(points)
        lo, hi = pooled.min(axis=0), pooled.max(axis=0)
        span = np.where(hi > lo, hi - lo, 1.0)
        scaled = [(p - lo) / span for p in points]
        unique = np.unique(np.vstack(scaled), axis=0)
        try:
            eq = ConvexHull(unique).equations
        except (QhullError, ValueError):
            raise FulcrumError(f"the patients' values of '{names[0]}' and '{names[1]}' lie on one line (or there "
                               "are too few of them), so there is no plane to map.",
                               hint="Choose two indices that vary separately.") from None
        return cls(lo, span, eq, [cKDTree(s) for s in scaled])

    def covers(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """True where a point is inside the (slightly widened) hull and every arm has a patient within NEAR."""
        p = (np.column_stack([np.ravel(x), np.ravel(y)]) - self.lo) / self.span
        inside = np.all(p @ self.hull[:, :2].T + self.hull[:, 2] <= SLACK, axis=1)
        for tree in self.trees:
            inside &= np.isfinite(tree.query(p, distance_upper_bound=NEAR)[0])
        return inside.reshape(np.shape(x))


# ------------------------------------------------------------------------------------------
# The model behind one map
# ------------------------------------------------------------------------------------------
@dataclass
class PlaneModel:
    """One map's fitted models (weight-free): evaluate the difference anywhere in the plane."""

    spec: Spec
    map: MapSpec
    kind: str
    measure: str
    arms: tuple[str, str]
    pairs: dict[tuple[str, str], ft.PairFit]
    plane: Plane
    coverage: Coverage
    ranges: tuple[tuple[float, float], tuple[float, float]]
    n: dict[str, int]
    index_info: list[dict]
    composite: vl.CompositeModel | None = None
    notes: list[str] = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock, repr=False, compare=False)

    @property
    def anchor(self) -> ft.PairFit:
        """The outcome the map is drawn on (a composite's first part), whose patients cover the plane."""
        return next(iter(self.pairs.values()))

    def _weights(self, weights: Mapping[str, float] | Sequence[float] | None) -> np.ndarray:
        cm = self.composite
        if not cm.weighted:
            return np.ones(1)
        return vl.check_weights(weights if weights is not None else self.spec.values.weights, cm.levels)

    def evaluate(self, x: np.ndarray, y: np.ndarray, *, weights: Mapping[str, float] | Sequence[float] | None = None,
                 margin: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        """(difference, variance) at the points (x, y): first minus second, higher is better, minus the margin;
        the variance is the delta method's, the arms' models being independent."""
        x, y = np.broadcast_arrays(np.asarray(x, float), np.asarray(y, float))
        shape = x.shape
        x, y = x.reshape(-1), y.reshape(-1)
        margin = self.spec.analysis.margin if margin is None else float(margin)
        with self.lock:
            diff, var = self._at(x, y, weights)
        return (diff - margin).reshape(shape), np.maximum(var, 0.0).reshape(shape)

    def _at(self, x: np.ndarray, y: np.ndarray, weights) -> tuple[np.ndarray, np.ndarray]:
        """Difference and variance with the plane fits held at these second-index values (one caller at a time)."""
        keep = self.plane.y
        self.plane.y = y
        try:
            if self.composite is not None:
                w = self._weights(weights)
                L, C = self.composite.at(x, True)
                diff = (L[0] - L[1]) @ w
                var = np.einsum("gij,i,j->g", C[0] + C[1], w, w)
            else:
                pf = self.anchor
                f1, f2 = (pf.fits[a] for a in self.arms)
                diff = pf.sign * (f1.measure(x) - f2.measure(x))
                var = f1.measure_var(x) + f2.measure_var(x)
        finally:
            self.plane.y = keep
        return diff, var

    def methods(self) -> str:
        """The methods sentence: which models, which terms, which intervals."""
        a, b = (i["label"] or n for i, n in zip(self.index_info, self.map.indices))
        models = list(dict.fromkeys(_model_words(pf.outcome) for pf in self.pairs.values()))
        adjusted = sorted({c for pf in self.pairs.values() for c in pf.outcome.adjust})
        return (f"Per arm, {' and '.join(models)}{', each' if len(models) > 1 else ''} with {a} and {b} as linear "
                "terms" + (" and their product" if self.map.interaction else "")
                + (f", adjusted for {', '.join(adjusted)} (each held at its pooled mean)" if adjusted else "")
                + ". Pointwise delta-method intervals, the two arms' models being independent.")


def _model_words(outcome: OutcomeSpec) -> str:
    return describe(outcome).model


def _indices_checked(fs: ft.FitSet, map_spec: MapSpec) -> tuple[str, str]:
    names = tuple(map_spec.indices)
    if len(names) != 2 or names[0] == names[1]:
        raise FulcrumError("a map needs two different indices.", key="maps.indices",
                           hint='For example indices = ["cfs", "physiology"].')
    for n in names:
        if n not in fs.indices:
            raise FulcrumError(f"there is no index called '{n}'.", key="maps.indices",
                               hint=f"Indices: {', '.join(fs.indices)}.")
    return names[0], names[1]


def prepare_map(fs: ft.FitSet, map_spec: MapSpec, *, kind: str = "ordinal") -> PlaneModel:
    """Fit the models one map needs (both arms, two indices); kind names the composite when the target is one."""
    spec = fs.spec
    indices = _indices_checked(fs, map_spec)
    plane = Plane(float(np.nanmedian(fs.indices[indices[1]].values)))

    def make(outcome: str) -> ft.PairFit:
        return fit_plane_pair(fs, spec.outcome(outcome), indices, map_spec.interaction, plane)

    composite = None
    if map_spec.target == COMPOSITE:
        if spec.values is None:
            raise FulcrumError("the map targets the composite but the spec has no [values].", key="maps.target",
                               hint="Add [values] or target an outcome.")
        lazy = _PlanePairs(make)
        composite = vl.prepare_composite(dataclasses.replace(fs, pairs=lazy), kind, indices[0])
        v = spec.values
        used = [composite.pair.outcome.name] + {"survival_function": [v.survival_outcome],
                                                  "quality_adjusted": [v.utility_outcome]}.get(kind, [])
        measure, what, pairs = composite.measure, kind, {(o, indices[0]): lazy[(o, indices[0])] for o in used}
    else:
        try:
            outcome = spec.outcome(map_spec.target)
        except KeyError:
            raise FulcrumError(f"there is no outcome called '{map_spec.target}'.", key="maps.target",
                               hint=f"Outcomes: {', '.join(o.name for o in spec.outcomes)}, or composite.") from None
        measure, what, pairs = measure_words(outcome), outcome.kind, {(outcome.name, indices[0]): make(outcome.name)}
    anchor = next(iter(pairs.values()))
    points = []
    for arm in spec.cohort.arms:
        r = anchor.rows[arm]
        points.append(np.column_stack([fs.indices[indices[0]].values[r], fs.indices[indices[1]].values[r]]))
    pooled = np.vstack(points)
    ranges = tuple((float(pooled[:, j].min()), float(pooled[:, j].max())) for j in (0, 1))
    notes = [w for pf in pairs.values() for w in pf.warnings]
    if spec.analysis.interval == "bootstrap":
        notes.append("The map's intervals use the delta method, not the bootstrap.")
    return PlaneModel(spec, map_spec, what, measure, tuple(spec.cohort.arms), pairs, plane,
                      Coverage.of(points, indices), ranges, {arm: int(len(anchor.rows[arm])) for arm in anchor.rows},
                      [index_info_json(fs.indices[n]) for n in indices], composite, list(dict.fromkeys(notes)))


# ------------------------------------------------------------------------------------------
# The break-even contour
# ------------------------------------------------------------------------------------------
def contour_lines(x: np.ndarray, y: np.ndarray, Z: np.ndarray) -> list[list[tuple[float, float]]]:
    """Polylines where Z (rows along y, columns along x) crosses zero, by marching squares.

    Crossings are placed by linear interpolation along grid edges; cells with a blank (NaN) corner are
    skipped; a saddle cell is split by the mean of its corners.
    """
    Z = np.asarray(Z, float)
    up = Z >= 0
    links: dict[tuple, list[tuple]] = {}

    def point(e: tuple) -> tuple[float, float]:
        side, r, c = e
        if side == "h":
            z0, z1 = Z[r, c], Z[r, c + 1]
            return float(x[c] + (x[c + 1] - x[c]) * z0 / (z0 - z1)), float(y[r])
        z0, z1 = Z[r, c], Z[r + 1, c]
        return float(x[c]), float(y[r] + (y[r + 1] - y[r]) * z0 / (z0 - z1))

    def link(e1: tuple, e2: tuple) -> None:
        links.setdefault(e1, []).append(e2)
        links.setdefault(e2, []).append(e1)

    finite = np.isfinite(Z)
    ok = finite[:-1, :-1] & finite[1:, :-1] & finite[:-1, 1:] & finite[1:, 1:]
    mixed = ok & ~((up[:-1, :-1] == up[1:, :-1]) & (up[:-1, :-1] == up[:-1, 1:]) & (up[:-1, :-1] == up[1:, 1:]))
    for r, c in zip(*np.nonzero(mixed)):
        bottom, top, left, right = ("h", r, c), ("h", r + 1, c), ("v", r, c), ("v", r, c + 1)
        b, t = up[r, c] != up[r, c + 1], up[r + 1, c] != up[r + 1, c + 1]
        lft, rgt = up[r, c] != up[r + 1, c], up[r, c + 1] != up[r + 1, c + 1]
        if b and t and lft and rgt:
            centre_up = Z[r:r + 2, c:c + 2].mean() >= 0
            if centre_up == up[r, c]:
                link(bottom, right)
                link(top, left)
            else:
                link(bottom, left)
                link(top, right)
            continue
        crossed = [e for e, on in ((bottom, b), (top, t), (left, lft), (right, rgt)) if on]
        link(*crossed)
    lines, seen = [], set()
    starts = [e for e, n in links.items() if len(n) == 1] + list(links)
    for start in starts:
        if start in seen:
            continue
        line, prev, cur = [start], None, start
        seen.add(start)
        while True:
            nxt = [e for e in links[cur] if e != prev and e not in seen]
            if not nxt:
                if len(links[cur]) == 2 and start in links[cur] and len(line) > 2:
                    line.append(start)
                break
            prev, cur = cur, nxt[0]
            seen.add(cur)
            line.append(cur)
        lines.append([point(e) for e in line])
    return lines


# ------------------------------------------------------------------------------------------
# The JSON row
# ------------------------------------------------------------------------------------------
def _arm_grid(values: np.ndarray, arms: tuple[str, str], where: np.ndarray) -> list[list[str | None]]:
    out = np.full(values.shape, None, dtype=object)
    out[where & (values > 0)] = arms[0]
    out[where & (values < 0)] = arms[1]
    return out.tolist()


def _coefficients(pf: ft.PairFit) -> dict[str, list[dict]]:
    return {arm: [{"term": n, "estimate": r6(b), "se": r6(s)} for n, b, s in f.summary()]
            for arm, f in pf.fits.items()}


def _point(model: PlaneModel, x: float, y: float, z: float, weights, margin) -> dict:
    d, v = model.evaluate(np.array([x]), np.array([y]), weights=weights, margin=margin)
    lo, hi = d[0] - z * np.sqrt(v[0]), d[0] + z * np.sqrt(v[0])
    arms = model.arms
    covered = bool(model.coverage.covers(np.array([x]), np.array([y]))[0])
    return {"x": r6(x), "y": r6(y), "difference": r6(d[0]), "ci": [r6(lo), r6(hi)],
            "favours": arms[0] if d[0] > 0 else arms[1] if d[0] < 0 else None,
            "clear": arms[0] if lo > 0 else arms[1] if hi < 0 else None, "covered": covered}


def _composite_notes(model: PlaneModel, weights) -> list[str]:
    """The composite's own caveats (e.g. the survival x function one), death's weight filled in."""
    cm = model.composite
    if cm is None:
        return []
    death = f"{model._weights(weights)[-1]:g}" if cm.weighted else "0"
    return [n.replace("{death}", death) for n in cm.notes]


def map_row(model: PlaneModel, *, weights: Mapping[str, float] | Sequence[float] | None = None,
            margin: float | None = None, level: float | None = None, n: int = GRID,
            patient: tuple[float, float] | None = None) -> dict:
    """The JSON `maps` row: grid, difference (rows along y, columns along x), favoured and clear arms, contour.

    patient: (first index value, second index value) adds the difference and verdict at that point.
    """
    if n < 3:
        raise FulcrumError(f"a map grid needs at least 3 points a side, not {n}.", hint="Use n = 60.")
    spec = model.spec
    margin = spec.analysis.margin if margin is None else float(margin)
    level = spec.analysis.level if level is None else float(level)
    z = be.critical_value(level)
    xs, ys = (np.linspace(lo, hi, n) for lo, hi in model.ranges)
    X, Y = np.meshgrid(xs, ys)
    D, V = model.evaluate(X, Y, weights=weights, margin=margin)
    covered = model.coverage.covers(X, Y)
    D = np.where(covered, D, np.nan)
    se = np.sqrt(V)
    lower, upper = D - z * se, D + z * se
    arms = model.arms
    warnings = list(model.notes)
    blank = 1.0 - covered.mean()
    if blank > 0:
        warnings.append(f"{blank:.0%} of the grid is left blank: points outside the convex hull of the patients' "
                        f"index pairs (widened by {SLACK:.0%} of each range), or with no patient of one arm within "
                        f"{NEAR:g} of the ranges (distance with each index scaled to its range).")
    row = {
        "indices": list(model.map.indices), "target": model.map.target, "interaction": bool(model.map.interaction),
        "kind": model.kind, "measure": model.measure, "margin": r6(margin), "level": r6(level), "band": "pointwise",
        "index_info": model.index_info,
        "grid": {"x": [r6(v) for v in xs], "y": [r6(v) for v in ys]},
        "difference": [[r6(v) for v in r] for r in D],
        "favoured": _arm_grid(D, arms, covered),
        "clear": _arm_grid(np.where(lower > 0, 1.0, np.where(upper < 0, -1.0, 0.0)), arms, covered),
        "contour": [[{"x": r6(px), "y": r6(py)} for px, py in line] for line in contour_lines(xs, ys, D)],
        "n": dict(model.n),
        "weights": None if model.composite is None or not model.composite.weighted else
        dict(zip(model.composite.levels, map(float, model._weights(weights)))),
        "coefficients": {pf.outcome.name: _coefficients(pf) for pf in model.pairs.values()},
        "methods": model.methods(),
        "notes": _composite_notes(model, weights),
        "warnings": list(dict.fromkeys(warnings)),
    }
    if patient is not None:
        row["patient"] = _point(model, float(patient[0]), float(patient[1]), z, weights, margin)
    return row


def decision_map(fs: ft.FitSet, map_spec: MapSpec, *, weights: Mapping[str, float] | Sequence[float] | None = None,
                 n: int = GRID, kind: str = "ordinal", patient: tuple[float, float] | None = None) -> dict:
    """One map's JSON row from the fitted set (its two-index models are fitted here)."""
    return map_row(prepare_map(fs, map_spec, kind=kind), weights=weights, n=n, patient=patient)


def decision_maps(fs: ft.FitSet, maps: Sequence[MapSpec] | None = None, *,
                  weights: Mapping[str, float] | Sequence[float] | None = None, n: int = GRID) -> list[dict]:
    """The JSON `maps` rows for the spec's [[maps]] (or `maps`)."""
    maps = fs.spec.maps if maps is None else maps
    return [decision_map(fs, m, weights=weights, n=n) for m in maps]


def default_map(spec: Spec) -> MapSpec | None:
    """The map to show first: the spec's first [[maps]], else a column index against a formula index (two ways
    of seeing a patient), else the first two indices; the composite when there are values."""
    if spec.maps:
        return spec.maps[0]
    if len(spec.indices) < 2:
        return None
    columns = [i.name for i in spec.indices if i.column]
    formulas = [i.name for i in spec.indices if i.formula and not i.column]
    pair = (columns[0], formulas[0]) if columns and formulas else (spec.indices[0].name, spec.indices[1].name)
    return MapSpec(indices=pair, target=COMPOSITE if spec.values else spec.outcomes[0].name)


# ------------------------------------------------------------------------------------------
# In words
# ------------------------------------------------------------------------------------------
def map_labels(row: Mapping[str, Any]) -> tuple[str, str]:
    info = row.get("index_info") or [{}, {}]
    return tuple((i or {}).get("label") or n for i, n in zip(info, row["indices"]))


def _share(grid: list[list[Any]], arm: str, mapped: int) -> float:
    return sum(v == arm for r in grid for v in r) / mapped if mapped else 0.0


def describe_map(row: Mapping[str, Any], arms: Sequence[str]) -> str:
    """The map in words: where each arm is favoured and clearly so, the break-even line, the patient's point."""
    a, b = map_labels(row)
    mapped = sum(v is not None for r in row["difference"] for v in r)
    target = "the composite" if row["target"] == COMPOSITE else row.get("measure") or row["target"]
    if not mapped:
        return f"No part of the plane of {a} and {b} is covered by patients of both arms, so nothing is mapped."
    fav = {arm: _share(row["favoured"], arm, mapped) for arm in arms}
    clear = {arm: _share(row["clear"], arm, mapped) for arm in arms}
    none = "the margin" if row.get("margin") else "no difference"
    text = (f"On {target}, over the mapped part of the plane of {a} and {b}, "
            + " and ".join(f"{arm} is favoured in {_fmt(100 * fav[arm])}% (clearly, with the interval excluding "
                           f"{none}, in {_fmt(100 * clear[arm])}%)" for arm in arms) + ".")
    lines = row.get("contour") or []
    if lines:
        pts = [p for line in lines for p in line]
        xs, ys = [p["x"] for p in pts], [p["y"] for p in pts]
        text += (f" The break-even line runs within {a} {_fmt(min(xs))} to {_fmt(max(xs))} and {b} {_fmt(min(ys))} "
                 f"to {_fmt(max(ys))}.")
    else:
        text += " The arms do not break even anywhere in the mapped part."
    p = row.get("patient")
    if p:
        where = f"This patient ({a} {_fmt(p['x'])}, {b} {_fmt(p['y'])})"
        if "covered" not in p:
            text += f" {where} is marked on the map."
        elif not p["covered"]:
            text += f" {where} lies where the map is blank: few or no patients like them, so the model extrapolates."
        elif p.get("favours"):
            m = row.get("margin") or 0.0
            ci = f"{_fmt(p['ci'][0] + m)} to {_fmt(p['ci'][1] + m)}"
            firm = (f"clearly (the difference's interval {ci} excludes {none})" if p.get("clear")
                    else f"but not clearly (the difference's interval {ci} includes {none})")
            text += f" {where} sits where {p['favours']} is favoured, {firm}."
        else:
            text += f" {where} sits on the break-even line."
    return text


def coefficient_table(row: Mapping[str, Any]) -> pd.DataFrame:
    """Every fitted coefficient behind a map: outcome, arm, term, estimate, standard error."""
    return pd.DataFrame([{"outcome": o, "arm": arm, "term": c["term"], "estimate": c["estimate"],
                          "standard error": c["se"]}
                         for o, by_arm in (row.get("coefficients") or {}).items()
                         for arm, cs in by_arm.items() for c in cs],
                        columns=["outcome", "arm", "term", "estimate", "standard error"])

"""Break-even points of two curves along an index, their intervals, and clear-difference regions.

Everything here works on curves and small coefficient vectors; nothing knows the outcome kind.
Conventions: the difference is first arm minus second arm, oriented so higher is better; a
break-even point is a root of (difference - margin).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy import optimize, stats

EXTEND = 0.10  # roots this far (share of the range) beyond the observed index are reported as extrapolated


@dataclass
class BreakEven:
    x: float
    ci: tuple[float | None, float | None]
    interval: str
    interval_shape: str
    extrapolated: bool
    favours_below: str
    favours_above: str
    no_root_share: float | None = None
    coverage: float | None = None
    approximate: bool = False
    slope: float = math.nan

    def to_json(self) -> dict:
        return {"x": _r(self.x), "ci": [_r(self.ci[0]), _r(self.ci[1])], "interval": self.interval,
                "interval_shape": self.interval_shape, "extrapolated": self.extrapolated,
                "favours_below": self.favours_below, "favours_above": self.favours_above,
                "no_root_share": None if self.no_root_share is None else _r(self.no_root_share),
                "coverage": self.coverage, "approximate": self.approximate}


@dataclass
class Region:
    start: float
    stop: float
    favours: str

    def to_json(self) -> dict:
        return {"from": _r(self.start), "to": _r(self.stop), "favours": self.favours}


@dataclass
class CurveSummary:
    """A difference curve on a grid with its band, roots and regions."""

    grid: np.ndarray
    first: np.ndarray
    second: np.ndarray
    difference: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    break_even: list[BreakEven] = field(default_factory=list)
    favours_throughout: str | None = None
    clear_difference: list[Region] = field(default_factory=list)
    band: str = "pointwise"
    first_band: tuple[np.ndarray, np.ndarray] | None = None
    second_band: tuple[np.ndarray, np.ndarray] | None = None
    warnings: list[str] = field(default_factory=list)
    margin: float = 0.0


def _r(v: float | None) -> float | None:
    """Ten significant digits (stable JSON without flattening small-scale indices); non-finite -> None."""
    if v is None or not np.isfinite(v):
        return None
    return float(f"{float(v):.10g}")


def critical_value(level: float) -> float:
    return float(stats.norm.ppf(0.5 + level / 2))


def find_roots(f: Callable[[np.ndarray], np.ndarray], lo: float, hi: float, n: int = 801) -> list[float]:
    """Every sign change of f on a fine grid over [lo, hi], refined by Brent's method."""
    if not hi > lo:
        return []
    xs = np.linspace(lo, hi, n)
    ys = np.asarray(f(xs), float)
    a, b = ys[:-1], ys[1:]
    finite = np.isfinite(a) & np.isfinite(b)
    # a run of exact zeros (identical arms) counts once, at its start
    starts = finite & (a == 0.0) & np.r_[True, ys[:-2] != 0.0]
    crosses = finite & (a != 0.0) & (a * b < 0)
    g = lambda t: float(np.asarray(f(np.array([t])), float)[0])  # noqa: E731
    roots: list[float] = []
    for i in np.flatnonzero(starts | crosses):
        roots.append(float(xs[i]) if starts[i] else
                     float(optimize.brentq(g, xs[i], xs[i + 1], xtol=1e-10, rtol=1e-12)))
    if ys[-1] == 0.0 and ys[-2] != 0.0:
        roots.append(float(xs[-1]))
    return roots


def fieller_set(a: float, b: float, cov: np.ndarray, crit: float) -> tuple[float | None, float | None, str]:
    """Fieller's confidence set for the root of a + b x = 0, where (a, b) has covariance `cov`.

    The set is {x : (a + b x)^2 <= crit^2 var(a + b x)}: exactly where the difference is not
    clearly non-zero, so it may be a finite interval, one ray, two rays or the whole line.
    Returns (low, high, shape); for two rays, the inner ends (-inf, low] U [high, inf).
    """
    c2 = crit * crit
    qa = b * b - c2 * cov[1, 1]
    qb = 2.0 * (a * b - c2 * cov[0, 1])
    qc = a * a - c2 * cov[0, 0]
    disc = qb * qb - 4.0 * qa * qc
    scale = max(abs(qa), abs(qb), abs(qc), 1e-300)
    if abs(qa) <= 1e-14 * scale:
        if abs(qb) <= 1e-300:
            return (None, None, "unbounded")
        x0 = -qc / qb
        return (x0, None, "unbounded_above") if qb < 0 else (None, x0, "unbounded_below")
    if qa > 0:
        disc = max(disc, 0.0)
        s = math.sqrt(disc)
        lo, hi = sorted(((-qb - s) / (2 * qa), (-qb + s) / (2 * qa)))
        return (lo, hi, "finite")
    if disc <= 0:
        return (None, None, "unbounded")
    s = math.sqrt(disc)
    lo, hi = sorted(((-qb - s) / (2 * qa), (-qb + s) / (2 * qa)))
    return (lo, hi, "two_rays")


def delta_root_interval(x0: float, var_at_root: float, slope: float, crit: float
                        ) -> tuple[float | None, float | None, str]:
    """Delta-method interval for a root: se(x*) = se(d(x*)) / |d'(x*)|."""
    if not np.isfinite(var_at_root) or not np.isfinite(slope) or slope == 0:
        return (None, None, "unbounded")
    se = math.sqrt(max(var_at_root, 0.0)) / abs(slope)
    return (x0 - crit * se, x0 + crit * se, "finite")


def inverted_test_interval(g: Callable[[np.ndarray], np.ndarray], x0: float, grid: np.ndarray,
                           on_grid: np.ndarray | None = None) -> tuple[float | None, float | None, str]:
    """Test-inversion interval for a root x0: the stretch around x0 where g(x) = (d(x) - margin)^2 -
    crit^2 var(d(x)) <= 0, i.e. where the pointwise test of difference = margin does not reject. Fieller's set
    is this for a linear difference; for a curved one it follows the band instead of a tangent line. The
    stretch is found on `grid` (with x0 in it) and its ends refined by subdividing their brackets; a side reaching the
    end of the grid is open. on_grid: g already evaluated on the grid, when the caller has it."""
    grid = np.asarray(grid, float)
    values = np.asarray(g(grid) if on_grid is None else on_grid, float)
    i = int(np.searchsorted(grid, x0))
    xs = np.insert(grid, i, x0)
    inside = np.insert(values <= 0, i, True)  # at the root the statistic is 0
    a, b = i, i
    while a > 0 and inside[a - 1]:
        a -= 1
    while b < len(xs) - 1 and inside[b + 1]:
        b += 1
    left = None if a == 0 else _refine(g, xs[a - 1], xs[a])
    right = None if b == len(xs) - 1 else _refine(g, xs[b], xs[b + 1])
    return left, right, shape_of(left, right)


def _refine(g: Callable[[np.ndarray], np.ndarray], a: float, b: float, points: int = 16, rounds: int = 7) -> float:
    """The sign change of g in [a, b], narrowed by evaluating g at `points` points per round (one vectorised call
    each: g is costly per call, cheap per point), then placed by linear interpolation."""
    for _ in range(rounds):
        xs = np.linspace(a, b, points)
        gs = np.asarray(g(xs), float)
        flips = np.flatnonzero(np.sign(gs[:-1]) != np.sign(gs[1:]))
        if not len(flips) or not np.all(np.isfinite(gs)):
            break
        j = int(flips[0])
        a, b, ga, gb = xs[j], xs[j + 1], gs[j], gs[j + 1]
    else:
        return float(a - ga * (b - a) / (gb - ga)) if gb != ga else float(a)
    return float((a + b) / 2)


# ---- bounded scales: bands built where the estimate is close to normal, then mapped back -----------------
_EDGE = 1e-12


def to_link(m: np.ndarray, link: str, span: float | None) -> tuple[np.ndarray, np.ndarray]:
    """(g(m), g'(m)) for a measure m on [0, span]: logit of m / span, or log(-log m) for a survival probability
    (log cumulative hazard, the scale of the Cox and Weibull models); identity otherwise."""
    m = np.asarray(m, float)
    if link == "identity" or span is None:
        return m, np.ones_like(m)
    u = np.clip(m / span, _EDGE, 1 - _EDGE)
    if link == "cloglog":
        lu = np.log(u)
        return np.log(-lu), 1.0 / (span * u * lu)
    return np.log(u) - np.log1p(-u), 1.0 / (span * u * (1 - u))


def from_link(v: np.ndarray, link: str, span: float | None) -> np.ndarray:
    v = np.asarray(v, float)
    if link == "identity" or span is None:
        return v
    with np.errstate(over="ignore"):
        return span * (np.exp(-np.exp(v)) if link == "cloglog" else 1.0 / (1.0 + np.exp(-v)))


def link_band(m: np.ndarray, var: np.ndarray, crit: float, link: str, span: float | None
              ) -> tuple[np.ndarray, np.ndarray]:
    """One arm's band built on its link scale (delta-method SE there) and transformed back, so a probability's
    band stays inside [0, 1] (and RMST's inside [0, horizon]). Ordered low, high whatever the link's direction."""
    g, dg = to_link(m, link, span)
    se = np.sqrt(np.maximum(var, 0.0)) * np.abs(dg)
    a, b = from_link(g - crit * se, link, span), from_link(g + crit * se, link, span)
    return np.minimum(a, b), np.maximum(a, b)


def diff_scale(d: np.ndarray, span: float | None) -> tuple[np.ndarray, np.ndarray]:
    """(T(d), T'(d)) for a difference of two measures on [0, span]: T = atanh(d / span), which maps [-span, span]
    onto the line (Fisher's transform of a bounded difference); identity when unbounded."""
    d = np.asarray(d, float)
    if span is None:
        return d, np.ones_like(d)
    u = np.clip(d / span, -1 + _EDGE, 1 - _EDGE)
    return np.arctanh(u), 1.0 / (span * (1 - u * u))


def diff_band(d: np.ndarray, var: np.ndarray, crit: float, span: float | None) -> tuple[np.ndarray, np.ndarray]:
    """The band of a difference built on diff_scale and mapped back: inside [-span, span]."""
    t, dt = diff_scale(d, span)
    se = np.sqrt(np.maximum(var, 0.0)) * dt
    if span is None:
        return t - crit * se, t + crit * se
    return span * np.tanh(t - crit * se), span * np.tanh(t + crit * se)


def inversion_statistic(diff: Callable[[np.ndarray], np.ndarray], var: Callable[[np.ndarray], np.ndarray],
                        margin: float, crit: float, span: float | None) -> Callable[[np.ndarray], np.ndarray]:
    """g(x) = (T(d(x)) - T(margin))^2 - crit^2 var(T(d(x))): <= 0 exactly where diff_band holds the margin, so
    inverted_test_interval(g, ...) is the set of index values the band cannot tell from the break-even."""
    tm = float(diff_scale(np.array([margin]), span)[0][0])

    def g(x: np.ndarray) -> np.ndarray:
        x = np.atleast_1d(np.asarray(x, float))
        t, dt = diff_scale(diff(x), span)
        return (t - tm) ** 2 - crit * crit * np.maximum(np.asarray(var(x), float), 0.0) * dt * dt
    return g


def regions(grid: np.ndarray, lower: np.ndarray, upper: np.ndarray, margin: float,
            first: str, second: str) -> list[Region]:
    """Stretches of the grid where the band for (difference - margin) excludes zero."""
    state = np.where(lower > margin, 1, np.where(upper < margin, -1, 0))
    out: list[Region] = []
    i = 0
    n = len(grid)
    while i < n:
        if state[i] == 0:
            i += 1
            continue
        j = i
        while j + 1 < n and state[j + 1] == state[i]:
            j += 1
        out.append(Region(float(grid[i]), float(grid[j]), first if state[i] > 0 else second))
        i = j + 1
    return out


def regions_from_linear(grid: np.ndarray, a: float, b: float, cov: np.ndarray, crit: float, sign: float,
                        first: str, second: str) -> list[Region]:
    """Johnson-Neyman regions on the linear-predictor scale: the exact complement of Fieller's set."""
    d = a + b * grid
    se = np.sqrt(np.maximum(cov[0, 0] + 2 * grid * cov[0, 1] + grid * grid * cov[1, 1], 0.0))
    oriented = sign * d
    return regions(grid, oriented - crit * se, oriented + crit * se, 0.0, first, second)


def favoured_side(diff_fn: Callable[[np.ndarray], np.ndarray], x: float, margin: float, step: float,
                  first: str, second: str) -> tuple[str, str]:
    below = float(np.asarray(diff_fn(np.array([x - step])))[0]) - margin
    above = float(np.asarray(diff_fn(np.array([x + step])))[0]) - margin
    return (first if below > 0 else second, first if above > 0 else second)


def search_range(lo: float, hi: float) -> tuple[float, float]:
    pad = EXTEND * (hi - lo)
    return lo - pad, hi + pad


def percentile_interval(values: np.ndarray, level: float) -> tuple[float | None, float | None]:
    """Percentile interval that keeps infinite draws (no root on one side) as unbounded ends."""
    v = np.asarray(values, float)
    v = v[~np.isnan(v)]
    if len(v) == 0:
        return (None, None)
    lo, hi = np.quantile(v, [0.5 - level / 2, 0.5 + level / 2], method="linear") if np.all(np.isfinite(v)) else \
        _quantile_with_inf(v, level)
    return (float(lo) if np.isfinite(lo) else None, float(hi) if np.isfinite(hi) else None)


def _quantile_with_inf(v: np.ndarray, level: float) -> tuple[float, float]:
    s = np.sort(v)
    n = len(s)
    lo_i = int(math.floor((0.5 - level / 2) * (n - 1)))
    hi_i = int(math.ceil((0.5 + level / 2) * (n - 1)))
    return s[lo_i], s[hi_i]


def contains(ci: tuple[float | None, float | None], shape: str, value: float) -> bool:
    """Whether an interval of any shape holds value; two rays are (-inf, ci[0]] U [ci[1], inf)."""
    lo, hi = ci
    if shape == "two_rays":
        return value <= lo or value >= hi
    return (lo is None or lo <= value) and (hi is None or value <= hi)


def shape_of(lo: float | None, hi: float | None) -> str:
    if lo is None and hi is None:
        return "unbounded"
    if lo is None:
        return "unbounded_below"
    if hi is None:
        return "unbounded_above"
    return "finite"

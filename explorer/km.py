"""Kaplan-Meier (product-limit) survival with Greenwood variances, log-log intervals, medians and RMST.

Used to show what the data say without a model: observed survival beside the fitted curves, numbers
at risk, and nonparametric differences in windows of the index. Weights, when given, multiply every
count (integer weights act as duplicated rows). Events come before censorings at a tied time.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import stats

from .errors import FulcrumError
from .numeric import r6


@dataclass(frozen=True)
class KaplanMeier:
    """A product-limit estimate on the distinct observed times.

    at_risk: (weighted) number still followed just before each time; survival: S just after it;
    greenwood: the running sum of d / (n (n - d)), the Greenwood variance of log S.
    """

    time: np.ndarray
    at_risk: np.ndarray
    events: np.ndarray
    censored: np.ndarray
    survival: np.ndarray
    greenwood: np.ndarray
    level: float = 0.95

    @property
    def n(self) -> float:
        return float(self.at_risk[0]) if len(self.at_risk) else 0.0

    def _index(self, t: np.ndarray) -> np.ndarray:
        """Position of the last stored time <= t (-1 before the first)."""
        return np.searchsorted(self.time, np.asarray(t, float), side="right") - 1

    def at(self, t: np.ndarray | float) -> np.ndarray:
        """S(t), right-continuous (1 before the first event)."""
        i = self._index(np.atleast_1d(t))
        return np.where(i >= 0, self.survival[np.maximum(i, 0)], 1.0)

    def log_variance_at(self, t: np.ndarray | float) -> np.ndarray:
        i = self._index(np.atleast_1d(t))
        return np.where(i >= 0, self.greenwood[np.maximum(i, 0)], 0.0)

    def variance_at(self, t: np.ndarray | float) -> np.ndarray:
        """Greenwood's variance of S(t): S^2 sum d / (n (n - d))."""
        return self.at(t) ** 2 * self.log_variance_at(t)

    def interval_at(self, t: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
        """Log(-log) interval for S(t) (the 'log-log' intervals of R's survfit; lifelines' default)."""
        return loglog_interval(self.at(t), self.log_variance_at(t), self.level)

    def interval(self) -> tuple[np.ndarray, np.ndarray]:
        return loglog_interval(self.survival, self.greenwood, self.level)

    def at_risk_at(self, t: np.ndarray | float) -> np.ndarray:
        """(Weighted) number with follow-up time >= t."""
        j = np.searchsorted(self.time, np.atleast_1d(np.asarray(t, float)), side="left")
        return np.where(j < len(self.time), self.at_risk[np.minimum(j, len(self.time) - 1)], 0.0)

    def last_time(self) -> float:
        return float(self.time[-1]) if len(self.time) else 0.0

    def quantile_time(self, q: float = 0.5) -> tuple[float | None, float | None, float | None]:
        """The first time S(t) <= q, with Brookmeyer-Crowley limits read off the log-log band (the
        first times its lower and its upper edge reach q); None = not reached.

        An estimate reached on a flat stretch where S equals q exactly takes the start of the stretch
        (as lifelines does; R's survfit takes its midpoint).
        """
        lo_band, hi_band = self.interval()
        return (_first_at_or_below(self.time, self.survival, q), _first_at_or_below(self.time, lo_band, q),
                _first_at_or_below(self.time, hi_band, q))

    def median(self) -> tuple[float | None, float | None, float | None]:
        return self.quantile_time(0.5)

    def rmst(self, tau: float) -> tuple[float, float]:
        """Area under S to tau and its variance sum_j A_j^2 d_j / (n_j (n_j - d_j)), A_j = area from t_j to tau
        (Klein & Moeschberger, Survival Analysis, 2nd ed., section 4.5)."""
        keep = self.time <= tau
        t = self.time[keep]
        edges = np.r_[0.0, t, tau]
        s = np.r_[1.0, self.survival[keep]]
        area = s * np.diff(edges)
        est = float(area.sum())
        tail = np.cumsum(area[::-1])[::-1][1:]
        inc = _greenwood_terms(self.at_risk[keep], self.events[keep])
        return est, float(tail ** 2 @ inc)


def _first_at_or_below(time: np.ndarray, s: np.ndarray, q: float) -> float | None:
    hit = np.flatnonzero(s <= q + 1e-12)
    return float(time[hit[0]]) if len(hit) else None


def _greenwood_terms(n: np.ndarray, d: np.ndarray) -> np.ndarray:
    """d / (n (n - d)), 0 where every patient at risk has the event (as lifelines does)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        v = d / (n * (n - d))
    return np.where(np.isfinite(v), v, 0.0)


@lru_cache(maxsize=64)
def normal_quantile(level: float) -> float:
    """Two-sided normal critical value for an interval of this level."""
    return float(stats.norm.ppf(0.5 + level / 2))


def loglog_interval(s: np.ndarray, var_log: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray]:
    """exp(-exp(log(-log S) -/+ z sqrt(var log S) / |log S|)); [1, 1] where S = 1 and [0, 0] where S = 0."""
    s = np.asarray(s, float)
    z = normal_quantile(level)
    with np.errstate(divide="ignore", invalid="ignore"):
        v = np.log(s)
        shift = z * np.sqrt(np.asarray(var_log, float)) / -v
        upper = np.exp(-np.exp(np.log(-v) - shift))
        lower = np.exp(-np.exp(np.log(-v) + shift))
    upper = np.where(s >= 1.0, 1.0, np.where(s <= 0.0, 0.0, upper))
    lower = np.where(s >= 1.0, 1.0, np.where(s <= 0.0, 0.0, lower))
    return lower, upper


def _checked(time: np.ndarray, event: np.ndarray, weights: np.ndarray | None) -> tuple[np.ndarray, ...]:
    t = np.asarray(time, float).reshape(-1)
    e = np.asarray(event, float).reshape(-1)
    w = np.ones(len(t)) if weights is None else np.asarray(weights, float).reshape(-1)
    if not (len(t) == len(e) == len(w)):
        raise FulcrumError(f"Kaplan-Meier needs one time, event and weight per patient; got {len(t)}, {len(e)} "
                           f"and {len(w)}.", hint="Pass arrays of equal length.")
    bad = np.flatnonzero(~np.isfinite(t) | (t < 0) | ~np.isin(e, (0.0, 1.0)) | ~np.isfinite(w) | (w < 0))
    if len(bad):
        raise FulcrumError("Kaplan-Meier needs non-negative times, events coded 0/1 and non-negative weights.",
                           rows=bad + 1, hint="Drop or fix these rows (complete cases only).")
    return t, e, w


def kaplan_meier(time: np.ndarray, event: np.ndarray, weights: np.ndarray | None = None,
                 level: float = 0.95) -> KaplanMeier:
    """Product-limit estimate of S(t) with Greenwood's variance (Kaplan & Meier, JASA 1958)."""
    t, e, w = _checked(time, event, weights)
    keep = w > 0
    t, e, w = t[keep], e[keep], w[keep]
    times, inv = np.unique(t, return_inverse=True)
    d = np.bincount(inv, weights=w * e, minlength=len(times))
    c = np.bincount(inv, weights=w * (1 - e), minlength=len(times))
    n = np.cumsum((d + c)[::-1])[::-1]
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = np.where(n > 0, 1.0 - d / n, 1.0)
    s = np.cumprod(factor)
    g = np.cumsum(_greenwood_terms(n, d))
    return KaplanMeier(times, n, d, c, s, g, level)


def nelson_aalen_at(time: np.ndarray, event: np.ndarray) -> np.ndarray:
    """The Nelson-Aalen cumulative hazard sum d/n evaluated at each patient's own time (ties: d/n at once).

    White & Royston (Stat Med 2009) recommend it, with the event indicator, to carry a survival
    outcome in an imputation model.
    """
    km = kaplan_meier(time, event)
    with np.errstate(divide="ignore", invalid="ignore"):
        inc = np.where(km.at_risk > 0, km.events / km.at_risk, 0.0)
    cum = np.cumsum(inc)
    return cum[np.searchsorted(km.time, np.asarray(time, float), side="left")]


def nice_ticks(top: float, count: int = 6) -> np.ndarray:
    """Round tick marks from 0 to at most `top` (steps 1, 2, 2.5 or 5 times a power of ten)."""
    if not top > 0:
        return np.array([0.0])
    raw = top / max(count - 1, 1)
    power = 10.0 ** np.floor(np.log10(raw))
    step = next(m * power for m in (1, 2, 2.5, 5, 10) if m * power >= raw)
    return np.arange(0.0, top + 1e-9 * top, step)


def km_json(km: KaplanMeier, ticks: np.ndarray | None = None) -> dict:
    """Steps (time, survival, interval), numbers at risk at the ticks, and the median with its interval."""
    lo, hi = km.interval()
    if ticks is None:
        ticks = nice_ticks(km.last_time())
    med = km.median()
    return {
        "n": _count(km.n), "events": _count(km.events.sum()),
        "steps": [{"time": r6(0.0), "survival": 1.0, "lower": 1.0, "upper": 1.0}]
        + [{"time": r6(t), "survival": r6(s), "lower": r6(a), "upper": r6(b)}
           for t, s, a, b in zip(km.time, km.survival, lo, hi)],
        "at_risk": [{"time": r6(t), "n": _count(n)} for t, n in zip(ticks, km.at_risk_at(ticks))],
        "median": {"time": r6(med[0]), "ci": [r6(med[1]), r6(med[2])]},
    }


def _count(v: float) -> int | float | None:
    """Whole counts as integers (unweighted), weighted counts rounded."""
    return int(v) if float(v).is_integer() else r6(v)

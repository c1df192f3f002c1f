"""Hierarchical pairwise comparison (generalized pairwise comparisons, Buyse 2010) along an index.

Every first-arm patient meets every second-arm patient; outcomes are tried in priority order and the
first one that separates the two decides the pair. Win ratio (Pocock 2012), win odds (Dong 2020) and
net benefit (Buyse 2010) come with intervals, overall and in overlapping windows: large-sample U-statistic
intervals (Hoeffding 1948; DeLong et al. 1988; Bebu & Lachin 2016) or percentile bootstrap intervals.

The win and loss proportions are two-sample U-statistics, so their variances follow from each patient's
share of pairs won and lost (row and column sums of the decision matrix), without resampling.

A pair's verdict depends on the two patients only, so a bootstrap replicate (resampling within arm)
is the decision matrix weighted by how often each patient was drawn: the verdicts are computed once
and each replicate costs a matrix product, not a new comparison.
"""
from __future__ import annotations

import functools
import hashlib
import math
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np
import pandas as pd

from .breakeven import critical_value, percentile_interval
from .errors import FulcrumError, format_rows
from .models import describe
from .models.common import one_blas_thread
from .numeric import r6
from .resampling import Progress, run_blocks, run_replicates
from .spec import OutcomeSpec, Spec

# How a rule of each built-in outcome kind compares two patients (see models.kinds.OutcomeFacts.pairwise), for rules
# made by hand; rule_for takes it from the outcome's own facts, so an outcome kind added in models needs no entry.
RULE_KINDS = {"survival": "follow_up", "ordinal": "rank", "continuous": "value", "binary": "value"}
BLOCK_ELEMENTS = 1 << 20
MAX_PAIRS = 50_000_000
MAX_WINDOWS = 100
STEP_FRACTION = 0.5
FEW = 10
COUNTS_KEPT = 8
KEEP_PAIRS = 1_000_000
INTERVALS = ("analytic", "bootstrap")
METHOD = {"analytic": "u-statistic", "bootstrap": "bootstrap-percentile"}
_COUNTS: dict[tuple, tuple[np.ndarray, np.ndarray]] = {}
_SHARES: dict[tuple, tuple[np.ndarray, np.ndarray]] = {}


def _keep(cache: dict, key: tuple, value: Any) -> None:
    """Store a large group's counts, forgetting the oldest beyond COUNTS_KEPT."""
    while len(cache) >= COUNTS_KEPT:
        cache.pop(next(iter(cache)))
    cache[key] = value


@dataclass(frozen=True)
class Rule:
    """One priority level: which outcome, how it separates two patients, and when it cannot."""

    name: str
    kind: str
    higher_is_better: bool = True
    threshold: float = 0.0
    horizon: float | None = None
    label: str | None = None
    among_survivors: bool = False
    compare: str | None = None  # "follow_up" | "rank" | "value"; None: from RULE_KINDS

    def __post_init__(self) -> None:
        object.__setattr__(self, "compare", self.compare or RULE_KINDS.get(self.kind))
        if self.compare not in ("follow_up", "rank", "value"):
            raise FulcrumError(f"pairwise rule '{self.name}' has kind '{self.kind}'.", key="pairwise.priority",
                               hint=f"Use one of {', '.join(RULE_KINDS)}.")
        if not self.threshold >= 0:
            raise FulcrumError(f"pairwise rule '{self.name}' has threshold {self.threshold}.",
                               key="pairwise.priority", hint="Use a threshold of 0 or more.")

    @property
    def title(self) -> str:
        return self.label or self.name

    def describe(self) -> str:
        if self.compare == "follow_up":
            within = f" within {self.horizon:g}" if self.horizon is not None else ""
            return f"observed death{within} while the other patient is known to have lived longer"
        if self.compare == "rank":
            return f"better {self.title} level"
        side = "higher" if self.higher_is_better else "lower"
        by = f" by more than {self.threshold:g}" if self.threshold > 0 else ""
        return f"{side} {self.title}{by}"


@dataclass(frozen=True)
class PatientTable:
    """One arm's outcome values per rule name: survival (n, 2) time and event, otherwise (n,) with NaN missing."""

    columns: dict[str, np.ndarray]

    def __len__(self) -> int:
        return len(next(iter(self.columns.values()))) if self.columns else 0

    def take(self, rows: np.ndarray) -> PatientTable:
        return PatientTable({k: v[rows] for k, v in self.columns.items()})


@dataclass(frozen=True)
class PairwiseResult:
    """Counts for the first arm: wins and losses decided at each priority level, over all pairs."""

    priority: tuple[Rule, ...]
    wins_by_level: tuple[int, ...]
    losses_by_level: tuple[int, ...]
    pairs: int

    @property
    def wins(self) -> int:
        return int(sum(self.wins_by_level))

    @property
    def losses(self) -> int:
        return int(sum(self.losses_by_level))

    @property
    def ties(self) -> int:
        return self.pairs - self.wins - self.losses

    @property
    def win_ratio(self) -> float:
        return float(statistics(self.wins, self.losses, self.pairs)["win_ratio"])

    @property
    def win_odds(self) -> float:
        return float(statistics(self.wins, self.losses, self.pairs)["win_odds"])

    @property
    def net_benefit(self) -> float:
        return float(statistics(self.wins, self.losses, self.pairs)["net_benefit"])


def statistics(wins: Any, losses: Any, pairs: Any) -> dict[str, np.ndarray]:
    """Win ratio, win odds and net benefit (inf where the denominator is 0 and the numerator is not)."""
    w, lo, p = (np.asarray(v, float) for v in (wins, losses, pairs))
    t = p - w - lo
    with np.errstate(divide="ignore", invalid="ignore"):
        return {"win_ratio": w / lo, "win_odds": (w + 0.5 * t) / (lo + 0.5 * t), "net_benefit": (w - lo) / p}


# ------------------------------------------------------------------------------------------
# Pair verdicts
# ------------------------------------------------------------------------------------------
def _separate(rule: Rule, a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Boolean (len(a), len(b)) matrices: first patient better, first patient worse, at this level."""
    if rule.compare == "follow_up":
        ti, di = a[:, 0:1], a[:, 1:2]
        tj, dj = b[None, :, 0], b[None, :, 1]
        horizon = math.inf if rule.horizon is None else rule.horizon
        win = (dj == 1) & (tj <= horizon) & (ti > tj)
        loss = (di == 1) & (ti <= horizon) & (tj > ti)
        return win, loss
    diff = a[:, None] - b[None, :]
    if rule.compare == "rank" or not rule.higher_is_better:
        diff = -diff
    return diff > rule.threshold, diff < -rule.threshold


def decisions(first: PatientTable, second: PatientTable, priority: Sequence[Rule]) -> np.ndarray:
    """int8 (n_first, n_second): +k where the first patient wins at level k (1-based), -k where it loses, 0 tied."""
    if len(priority) > 127:
        raise FulcrumError(f"{len(priority)} pairwise priority levels is more than 127.", key="pairwise.priority",
                           hint="Name fewer outcomes.")
    n1, n2 = len(first), len(second)
    out = np.zeros((n1, n2), np.int8)
    rows = max(1, BLOCK_ELEMENTS // max(n2, 1))
    for s in range(0, n1, rows):
        block = out[s:s + rows]
        for k, rule in enumerate(priority, 1):
            win, loss = _separate(rule, first.columns[rule.name][s:s + rows], second.columns[rule.name])
            verdict = win.astype(np.int8) - loss.astype(np.int8)
            block[...] = np.where(block != 0, block, verdict * np.int8(k))
    return out


def count_decisions(d: np.ndarray, levels: int) -> tuple[np.ndarray, np.ndarray]:
    """Wins and losses per level from a decision matrix."""
    wins = np.array([np.count_nonzero(d == k) for k in range(1, levels + 1)], np.int64)
    losses = np.array([np.count_nonzero(d == -k) for k in range(1, levels + 1)], np.int64)
    return wins, losses


def pairwise_compare(first: PatientTable, second: PatientTable, priority: Sequence[Rule]) -> PairwiseResult:
    """Compare every first-arm patient with every second-arm patient in the given priority order."""
    d = decisions(first, second, priority)
    wins, losses = count_decisions(d, len(priority))
    return PairwiseResult(tuple(priority), tuple(int(v) for v in wins), tuple(int(v) for v in losses),
                          len(first) * len(second))


# ------------------------------------------------------------------------------------------
# Large-sample U-statistic intervals
# ------------------------------------------------------------------------------------------
def patient_counts(d: np.ndarray, levels: int) -> tuple[np.ndarray, np.ndarray]:
    """Pairs each patient wins and loses at each level: first arm over its row (n1, 2, levels), second arm
    over its column (n2, 2, levels); [:, 0] counts the first arm's wins, [:, 1] its losses."""
    rows = np.zeros((d.shape[0], 2, levels), np.int64)
    cols = np.zeros((d.shape[1], 2, levels), np.int64)
    for k in range(1, levels + 1):
        for side, code in enumerate((k, -k)):
            hit = (d == code).view(np.uint8)
            rows[:, side, k - 1] = hit.sum(axis=1, dtype=np.int32)
            cols[:, side, k - 1] = hit.sum(axis=0, dtype=np.int32)
    return rows, cols


def u_covariance(rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """Covariance of two-sample U-statistics (pair means of m kernels) from per-patient kernel sums.

    rows (n1, m) sums each first-arm patient's kernel over the n2 second-arm patients, cols (n2, m) the
    reverse; Hoeffding's decomposition with DeLong et al.'s (Biometrics 1988) n - 1 denominators:
    S10 / n1 + S01 / n2, S the covariance of the structural components rows / n2 and cols / n1.
    """
    n1, n2 = len(rows), len(cols)
    s10 = np.atleast_2d(np.cov(rows / n2, rowvar=False))
    s01 = np.atleast_2d(np.cov(cols / n1, rowvar=False))
    return s10 / n1 + s01 / n2


@dataclass(frozen=True)
class UStatistics:
    """Win and loss proportions, their covariance, and each level's net benefit variance (large sample)."""

    p_win: float
    p_loss: float
    cov: np.ndarray
    level_net: np.ndarray
    level_var: np.ndarray

    @property
    def net_benefit_se(self) -> float:
        return math.sqrt(max(self.cov[0, 0] + self.cov[1, 1] - 2 * self.cov[0, 1], 0.0))

    @property
    def log_win_ratio_se(self) -> float:
        """Delta method on log(p_win) - log(p_loss) (Bebu & Lachin 2016; Dong et al. 2016); NaN without wins
        or losses."""
        w, lo = self.p_win, self.p_loss
        if w <= 0 or lo <= 0:
            return math.nan
        v = self.cov[0, 0] / w ** 2 + self.cov[1, 1] / lo ** 2 - 2 * self.cov[0, 1] / (w * lo)
        return math.sqrt(max(v, 0.0))

    @property
    def log_win_odds_se(self) -> float:
        """Delta method on the logit of h = p_win + p_tie / 2 = (1 + net benefit) / 2; NaN at h = 0 or 1."""
        h = (1 + self.p_win - self.p_loss) / 2
        if not 0 < h < 1:
            return math.nan
        return self.net_benefit_se / (2 * h * (1 - h))

    def intervals(self, level: float) -> dict[str, Any]:
        """Net benefit (normal, kept within -1 to 1), win ratio and win odds (normal on the log scale), and
        each level's net benefit; a bound that cannot be computed is None."""
        z = critical_value(level)
        w, lo = self.p_win, self.p_loss
        nb = w - lo
        out: dict[str, Any] = {"net_benefit": _clipped(nb, z * self.net_benefit_se)}
        for key, point, se in (("win_ratio", w / lo if lo > 0 else math.nan, self.log_win_ratio_se),
                               ("win_odds", (1 + nb) / (1 - nb) if nb < 1 else math.nan, self.log_win_odds_se)):
            ok = point > 0 and np.isfinite(point) and np.isfinite(se)
            out[key] = [r6(point * math.exp(s * z * se)) for s in (-1, 1)] if ok else [None, None]
        out["by_level"] = [_clipped(m, z * math.sqrt(max(v, 0.0))) for m, v in zip(self.level_net, self.level_var)]
        return out


def _clipped(point: float, half: float) -> list[float | None]:
    if not np.isfinite(half):
        return [None, None]
    return [r6(max(point - half, -1.0)), r6(min(point + half, 1.0))]


def u_statistics(rows: np.ndarray, cols: np.ndarray) -> UStatistics:
    """The large-sample summary from patient_counts: kernels win, loss and each level's win minus loss."""
    n1, n2 = len(rows), len(cols)
    pairs = n1 * n2
    kr = np.column_stack([rows[:, 0].sum(axis=1), rows[:, 1].sum(axis=1), rows[:, 0] - rows[:, 1]])
    kc = np.column_stack([cols[:, 0].sum(axis=1), cols[:, 1].sum(axis=1), cols[:, 0] - cols[:, 1]])
    wins, losses = rows[:, 0].sum(axis=0), rows[:, 1].sum(axis=0)
    cov = u_covariance(kr, kc) if n1 > 1 and n2 > 1 else np.full((kr.shape[1],) * 2, np.nan)
    return UStatistics(float(wins.sum() / pairs), float(losses.sum() / pairs), cov[:2, :2], (wins - losses) / pairs,
                       np.diag(cov)[2:].copy())


# ------------------------------------------------------------------------------------------
# Bootstrap by case weights
# ------------------------------------------------------------------------------------------
def resample_counts(rng: np.random.Generator, sizes: Sequence[tuple[int, int]]) -> list[tuple[np.ndarray, ...]]:
    """One replicate: for each group, how often each first- and second-arm patient is drawn (within arm)."""
    return [tuple(np.bincount(rng.integers(0, n, n), minlength=n).astype(np.uint16) for n in pair)
            for pair in sizes]


@one_blas_thread
def weighted_counts(d: np.ndarray, levels: int, a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Wins and losses per level (R, levels) when patients carry draw counts a (R, n1) and b (R, n2).

    Each verdict mask is built once per block of rows and meets every replicate in one product (BLAS on one
    thread: more only spin on a busy machine); the counts are whole numbers far below 2**24, so the float32
    products are exact.
    """
    r = a.shape[0]
    wins, losses = np.zeros((r, levels)), np.zeros((r, levels))
    a32, b32 = a.astype(np.float32), b.astype(np.float32)
    rows = max(1, BLOCK_ELEMENTS // max(d.shape[1], 1))
    for s in range(0, d.shape[0], rows):
        block, wa = d[s:s + rows], a32[:, s:s + rows]
        for k in range(1, levels + 1):
            for code, out in ((k, wins), (-k, losses)):
                hit = block == code
                if hit.any():
                    out[:, k - 1] += ((wa @ hit.astype(np.float32)) * b32).sum(axis=1, dtype=np.float64)
    return wins, losses


def bootstrap(groups: Sequence[np.ndarray], levels: int, replicates: int, seed: int,
              progress: Progress | None = None, workers: int = 1,
              scheduler: str | None = None) -> list[tuple[np.ndarray, np.ndarray]]:
    """Per group (a decision matrix), replicate wins and losses by level, resampling patients within arm.

    Each replicate draws from its own seed (explorer.resampling) and the counts are exact, so the answer does
    not depend on chunking, workers or backend; with workers (or a Dask scheduler) blocks of replicates run in
    parallel. Counts are kept for the last few groups, so the whole-cohort group, the same along every index,
    is counted once (groups of at least KEEP_PAIRS pairs are kept).
    """
    sizes = [g.shape for g in groups]
    # a group's draws depend on the seed, its place in each replicate's stream and the sizes before it
    keys = [(hashlib.sha1(d.tobytes()).hexdigest(), d.shape, levels, replicates, seed, tuple(sizes[:g]))
            if d.size >= KEEP_PAIRS else None for g, d in enumerate(groups)]
    out: dict[int, tuple[np.ndarray, np.ndarray]] = {g: _COUNTS[k] for g, k in enumerate(keys) if k in _COUNTS}
    todo = [g for g in range(len(groups)) if g not in out]
    if workers == 1 and not scheduler:
        draws = run_replicates(functools.partial(resample_counts, sizes=sizes), replicates, seed)
        total, done = max(1, sum(groups[g].size for g in todo)), 0
        for g in todo:
            out[g] = _count_group(groups[g], g, levels, draws)
            done += groups[g].size
            if progress:
                progress(replicates * done // total, replicates)
    elif todo:
        task = functools.partial(_count_block, groups=[groups[g] for g in todo], places=todo, sizes=sizes,
                                 levels=levels)
        per_rep = run_blocks(task, replicates, seed, workers=workers, scheduler=scheduler, progress=progress,
                             blocks_per_worker=2, blocks=8 if scheduler else None)
        for j, g in enumerate(todo):
            out[g] = tuple(np.stack([rep[j][side] for rep in per_rep]) for side in (0, 1))
    for g in todo:
        if keys[g] is not None:
            _keep(_COUNTS, keys[g], out[g])
    return [tuple(v.copy() for v in out[g]) for g in range(len(groups))]


def _count_group(d: np.ndarray, g: int, levels: int, draws: list) -> tuple[np.ndarray, np.ndarray]:
    a = np.stack([rep[g][0] for rep in draws])
    b = np.stack([rep[g][1] for rep in draws])
    return weighted_counts(d, levels, a, b)


def _count_block(seeds: Sequence[np.random.SeedSequence], groups: list[np.ndarray], places: list[int],
                 sizes: list[tuple[int, int]], levels: int) -> list[list[tuple[np.ndarray, np.ndarray]]]:
    """One block of replicates: per replicate, per group, (wins, losses) by level."""
    draws = [resample_counts(np.random.default_rng(s), sizes) for s in seeds]
    counts = [_count_group(d, g, levels, draws) for d, g in zip(groups, places)]
    return [[(w[r], lo[r]) for w, lo in counts] for r in range(len(seeds))]


# ------------------------------------------------------------------------------------------
# From the spec and the cohort
# ------------------------------------------------------------------------------------------
def default_priority(spec: Spec) -> tuple[str, ...]:
    """Survival, then the ordinal function outcome, then quality of life among survivors (when present).

    The [values] outcomes are preferred where named; with none of these kinds, every outcome in spec order.
    """
    v = spec.values
    facts = {o.name: describe(o) for o in spec.outcomes}
    timed = [o for o in spec.outcomes if facts[o.name].follow_up]
    ranked = [o for o in spec.outcomes if facts[o.name].levels]
    survival = (v.survival_outcome if v and v.survival_outcome else timed[0].name if timed else None)
    ordinal = (v.outcome if v and facts[v.outcome].levels else ranked[0].name if ranked else None)
    qol = v.utility_outcome if v and v.utility_outcome else next(
        (o.name for o in spec.outcomes if facts[o.name].observed_by == "mean" and o.among_survivors), None)
    names = tuple(n for n in (survival, ordinal, qol) if n)
    return names or tuple(o.name for o in spec.outcomes)


def rule_for(outcome: OutcomeSpec, threshold: float = 0.0) -> Rule:
    facts = describe(outcome)
    return Rule(outcome.name, outcome.kind, higher_is_better=outcome.higher_is_better, threshold=threshold,
                horizon=facts.horizon, label=outcome.label, among_survivors=outcome.among_survivors,
                compare=facts.pairwise)


def rules_for(spec: Spec, priority: Sequence[str] | None = None) -> list[Rule]:
    """The priority levels: the given names, else [pairwise].priority, else the default order."""
    names = tuple(priority or (spec.pairwise.priority if spec.pairwise else ()) or default_priority(spec))
    known = {o.name: o for o in spec.outcomes}
    for n in names:
        if n not in known:
            raise FulcrumError(f"'pairwise.priority' names '{n}', which is not an outcome of the spec.",
                               key="pairwise.priority", hint=f"Known outcomes: {', '.join(known)}.")
    if len(set(names)) != len(names):
        raise FulcrumError("'pairwise.priority' names an outcome twice.", key="pairwise.priority",
                           hint="Name each outcome once, most important first.")
    return [rule_for(known[n]) for n in names]


def _column(frame: pd.DataFrame, name: str | None, outcome: OutcomeSpec) -> pd.Series:
    if name not in frame.columns:
        raise FulcrumError(f"the cohort has no column '{name}' for outcome '{outcome.name}'.", column=name,
                           hint="Check the column name in the spec.")
    return frame[name]


def _ordinal_codes(series: pd.Series, outcome: OutcomeSpec) -> np.ndarray:
    levels = [str(x) for x in outcome.levels]
    if isinstance(series.dtype, pd.CategoricalDtype) and [str(c) for c in series.cat.categories] == levels:
        codes = series.cat.codes.to_numpy()
    else:
        text = series.astype(object).to_numpy()
        present = series.notna().to_numpy()
        codes = np.array([levels.index(str(t)) if str(t) in levels else -2 if ok else -1
                          for t, ok in zip(text, present)], int)
        bad = np.flatnonzero(codes == -2)
        if len(bad):
            raise FulcrumError(f"'{outcome.column}' holds values that are not levels of '{outcome.name}' "
                               f"(for example '{text[bad[0]]}').", column=outcome.column, rows=bad + 1,
                               hint=f"Use only these levels: {', '.join(levels)}.")
    return np.where(codes < 0, np.nan, codes.astype(float))


def patient_table(spec: Spec, frame: pd.DataFrame, rules: Sequence[Rule], rows: np.ndarray) -> PatientTable:
    """The arrays each rule compares, for the given cohort row positions."""
    cols = {}
    for rule in rules:
        o = spec.outcome(rule.name)
        facts = describe(o)
        if facts.follow_up:
            t = pd.to_numeric(_column(frame, o.time, o), errors="coerce").to_numpy(float)
            e = pd.to_numeric(_column(frame, o.event, o), errors="coerce").to_numpy(float)
            cols[rule.name] = np.column_stack([t, e])[rows]
        elif facts.levels:
            cols[rule.name] = _ordinal_codes(_column(frame, o.column, o), o)[rows]
        else:
            cols[rule.name] = pd.to_numeric(_column(frame, o.column, o), errors="coerce").to_numpy(float)[rows]
    return PatientTable(cols)


def missing_counts(table: PatientTable) -> dict[str, int]:
    return {name: int(np.isnan(v).any(axis=1).sum() if v.ndim == 2 else np.isnan(v).sum())
            for name, v in table.columns.items()}


def index_windows(x: np.ndarray, size: int, *, step_fraction: float = STEP_FRACTION,
                  max_windows: int = MAX_WINDOWS) -> list[np.ndarray]:
    """Row positions of overlapping windows of `size` patients along x, sliding by step_fraction * size.

    Patients without an index value are left out; ties in x keep row order. The last window ends at the
    top of the index, and the windows are spread evenly when there would be more than max_windows.
    """
    if size < 2:
        raise FulcrumError(f"a pairwise window of {size} patients is too small.", key="pairwise.window",
                           hint="Use at least 2 (a few hundred is usual).")
    x = np.asarray(x, float)
    finite = np.flatnonzero(np.isfinite(x))
    order = finite[np.argsort(x[finite], kind="stable")]
    n = len(order)
    if n == 0:
        return []
    if n <= size:
        return [order]
    step = max(1, int(round(size * step_fraction)))
    starts = list(range(0, n - size + 1, step))
    if starts[-1] != n - size:
        starts.append(n - size)
    if len(starts) > max_windows:
        starts = sorted(set(np.round(np.linspace(0, n - size, max_windows)).astype(int).tolist()))
    return [order[s:s + size] for s in starts]


# ------------------------------------------------------------------------------------------
# JSON rows
# ------------------------------------------------------------------------------------------
@dataclass
class _Group:
    window: dict | None
    first: PatientTable
    second: PatientTable
    warnings: list[str]
    d: np.ndarray | None = None
    shares: tuple[np.ndarray, np.ndarray] | None = None
    boot: tuple[np.ndarray, np.ndarray] | None = None


def _subsample(group: _Group, seed: int, where: str) -> None:
    n1, n2 = len(group.first), len(group.second)
    if n1 * n2 <= MAX_PAIRS:
        return
    f = math.sqrt(MAX_PAIRS / (n1 * n2))
    rng = np.random.default_rng(seed)
    m1, m2 = max(1, int(n1 * f)), max(1, int(n2 * f))
    group.first = group.first.take(np.sort(rng.choice(n1, m1, replace=False)))
    group.second = group.second.take(np.sort(rng.choice(n2, m2, replace=False)))
    group.warnings.append(f"{where}: {n1:,} x {n2:,} pairs is more than {MAX_PAIRS:,}; the comparison uses a "
                          f"random {m1:,} x {m2:,} subsample of patients (seed {seed}).")


def _interval(values: np.ndarray, level: float) -> list[float | None]:
    lo, hi = percentile_interval(values, level)
    return [r6(lo), r6(hi)]


def _bootstrap_intervals(boot: tuple[np.ndarray, np.ndarray], pairs: int, level: float, replicates: int,
                         warnings: list[str]) -> dict[str, Any]:
    """Percentile intervals from replicate wins and losses by level (R, levels)."""
    draws = statistics(boot[0].sum(axis=1), boot[1].sum(axis=1), pairs)
    out: dict[str, Any] = {key: _interval(v, level) for key, v in draws.items()}
    out["by_level"] = [_interval((boot[0][:, k] - boot[1][:, k]) / pairs, level) for k in range(boot[0].shape[1])]
    if np.isnan(draws["win_ratio"]).any():
        k = int(np.isnan(draws["win_ratio"]).sum())
        warnings.append(f"{k} of {replicates} bootstrap replicates had neither wins nor losses; the win "
                        f"ratio interval leaves them out.")
    return out


def _analytic_intervals(shares: tuple[np.ndarray, np.ndarray], level: float, arms: tuple[str, str],
                        warnings: list[str]) -> dict[str, Any]:
    """Large-sample U-statistic intervals, with a warning where the sample is too small for them."""
    rows, cols = shares
    few = [f"{len(v)} {a}" for a, v in zip(arms, shares) if len(v) < 2]
    if few:
        warnings.append(f"only {' and '.join(few)} patient here; the analytic intervals need at least 2 patients "
                        f"per arm.")
    out = u_statistics(rows, cols).intervals(level)
    if not few and rows[:, 0].sum() == 0 and rows[:, 1].sum() > 0:
        warnings.append(f"{arms[0]} wins no pair here, so the win ratio has no interval on the log scale.")
    return out


def _row(group: _Group, rules: Sequence[Rule], arms: tuple[str, str], index_name: str | None, level: float,
         replicates: int) -> dict:
    n1, n2 = len(group.first), len(group.second)
    method = METHOD["analytic"] if group.shares is not None else METHOD["bootstrap"] if group.boot else None
    row: dict[str, Any] = {"index": index_name, "window": group.window, "n_first": n1, "n_second": n2,
                           "priority": [r.name for r in rules], "interval": method,
                           "replicates": replicates if group.boot else 0, "level": level, "warnings": group.warnings}
    if group.d is None and group.shares is None:
        empty = [a for a, n in zip(arms, (n1, n2)) if n == 0]
        group.warnings.append(f"no {' or '.join(empty)} patients here; nothing to compare.")
        row.update({k: None for k in ("wins", "losses", "ties", "pairs", "win_ratio", "win_odds", "net_benefit",
                                      "favours")})
        row.update({f"{k}_ci": [None, None] for k in ("win_ratio", "win_odds", "net_benefit")})
        row["by_level"] = []
        return row
    if group.shares is not None:
        w, lo = group.shares[0][:, 0].sum(axis=0), group.shares[0][:, 1].sum(axis=0)
    else:
        w, lo = count_decisions(group.d, len(rules))
    pairs = n1 * n2
    res = PairwiseResult(tuple(rules), tuple(int(v) for v in w), tuple(int(v) for v in lo), pairs)
    point = statistics(res.wins, res.losses, pairs)
    row.update({"wins": res.wins, "losses": res.losses, "ties": res.ties, "pairs": pairs})
    if res.losses == 0:
        group.warnings.append(f"{arms[0]} loses no pair here, so the win ratio is unbounded.")
    ci = (_analytic_intervals(group.shares, level, arms, group.warnings) if group.shares is not None else
          _bootstrap_intervals(group.boot, pairs, level, replicates, group.warnings) if group.boot else None)
    for key, value in point.items():
        row[key] = r6(float(value))
        row[f"{key}_ci"] = ci[key] if ci else [None, None]
    nb_ci = row["net_benefit_ci"]
    row["favours"] = (arms[0] if nb_ci[0] is not None and nb_ci[0] > 0 else
                      arms[1] if nb_ci[1] is not None and nb_ci[1] < 0 else None)
    row["by_level"] = [{"outcome": rule.name, "kind": rule.kind, "rule": rule.describe(), "wins": int(w[k]),
                        "losses": int(lo[k]), "net_benefit": r6((w[k] - lo[k]) / pairs),
                        "net_benefit_ci": ci["by_level"][k] if ci else [None, None],
                        "conditional_on_survival": rule.among_survivors} for k, rule in enumerate(rules)]
    return row


def _missing_warnings(rules: Sequence[Rule], arms: tuple[str, str], tables: Sequence[PatientTable]) -> list[str]:
    out = []
    counts = [missing_counts(t) for t in tables]
    for rule in rules:
        parts = [f"{c[rule.name]} {arm}" for arm, c in zip(arms, counts) if c[rule.name]]
        if parts:
            out.append(f"{rule.title}: {' and '.join(parts)} patients have no value; their pairs go on to the "
                       f"next priority (or end tied).")
        if rule.among_survivors:
            out.append(f"{rule.title} is measured only in survivors (conditional on survival, truncation by death);"
                       f" it decides only pairs that earlier levels left undecided.")
    return out


def pairwise_rows(spec: Spec, cohort: Any, index_name: str | None = None, index_values: Any = None, *,
                  replicates: int = 200, seed: int | None = None, level: float | None = None,
                  window: int | None = None, priority: Sequence[str] | None = None,
                  progress: Progress | None = None, interval: str = "bootstrap") -> list[dict]:
    """JSON rows of the pairwise comparison: the whole cohort first, then each window along the index.

    `index_values` is aligned with `cohort.frame` rows (an array or an object with `.values`); without
    it only the overall row is made. Patients without an index value are left out of the windows only.
    `interval` "bootstrap" resamples `replicates` times (0: no intervals); "analytic" uses U-statistic variances.
    """
    frame: pd.DataFrame = cohort.frame
    arms = (spec.first, spec.second)
    rules = rules_for(spec, priority)
    seed = spec.analysis.seed if seed is None else seed
    level = spec.analysis.level if level is None else level
    size = window or (spec.pairwise.window if spec.pairwise else 300)
    if interval not in INTERVALS:
        raise FulcrumError(f"pairwise interval '{interval}' is not known.", key="analysis.interval",
                           hint=f"Use one of {', '.join(INTERVALS)}.")
    if replicates < 0:
        raise FulcrumError(f"{replicates} bootstrap replicates asked for.", key="analysis.replicates",
                           hint="Use 0 (no intervals) or more.")
    arm_col = frame[spec.cohort.arm].astype(str).to_numpy()
    arm_rows = {a: np.flatnonzero(arm_col == a) for a in arms}
    for a, r in arm_rows.items():
        if len(r) == 0:
            raise FulcrumError(f"no patients in arm '{a}', so there are no pairs to compare.",
                               column=spec.cohort.arm, hint=f"Check the arm labels in [cohort] arms: {arms}.")
    tables = {a: patient_table(spec, frame, rules, r) for a, r in arm_rows.items()}
    overall = _Group(None, tables[arms[0]], tables[arms[1]], _missing_warnings(rules, arms, list(tables.values())))
    _subsample(overall, seed, "the whole cohort")
    groups = [overall]
    if index_values is not None:
        x = np.asarray(getattr(index_values, "values", index_values), float)
        if len(x) != len(frame):
            raise FulcrumError(f"the index '{index_name}' has {len(x)} values for {len(frame)} patients.",
                               key=f"indices.{index_name}", hint="Compute the index on the same cohort.")
        groups.extend(_window_groups(x, size, arm_col, arms, tables, arm_rows, overall, seed, index_name))
    ready = [g for g in groups if len(g.first) and len(g.second)]
    if interval == "analytic":
        for g in ready:
            g.shares = _shares(g, rules)
        return [_row(g, rules, arms, index_name, level, 0) for g in groups]
    for g in ready:
        g.d = decisions(g.first, g.second, rules)
    boots = (bootstrap([g.d for g in ready], len(rules), replicates, seed, progress, workers=spec.analysis.workers,
                       scheduler=spec.analysis.scheduler) if replicates else None)
    for g, b in zip(ready, boots or ()):
        g.boot = b
    return [_row(g, rules, arms, index_name, level, replicates) for g in groups]


def _shares(group: _Group, rules: Sequence[Rule]) -> tuple[np.ndarray, np.ndarray]:
    """patient_counts for a group; kept for large groups, so the whole cohort, the same along every index,
    is compared once."""
    n = len(group.first) * len(group.second)
    key = None
    if n >= KEEP_PAIRS:
        h = hashlib.sha1(repr(tuple(rules)).encode())
        for table in (group.first, group.second):
            for name in sorted(table.columns):
                h.update(name.encode() + np.ascontiguousarray(table.columns[name]).tobytes())
        key = (h.hexdigest(), len(group.first), len(group.second))
        if key in _SHARES:
            return _SHARES[key]
    out = patient_counts(decisions(group.first, group.second, rules), len(rules))
    if key is not None:
        _keep(_SHARES, key, out)
    return out


def _window_groups(x: np.ndarray, size: int, arm_col: np.ndarray, arms: tuple[str, str],
                   tables: dict[str, PatientTable], arm_rows: dict[str, np.ndarray], overall: _Group, seed: int,
                   index_name: str | None) -> list[_Group]:
    where = {a: np.full(len(x), -1) for a in arms}
    for a in arms:
        where[a][arm_rows[a]] = np.arange(len(arm_rows[a]))
    no_index = np.flatnonzero(~np.isfinite(x))
    if len(no_index):
        overall.warnings.append(f"{len(no_index)} patients have no {index_name} value ({format_rows(no_index + 1)})"
                                f"; they count in the whole-cohort comparison but in no window.")
    windows = index_windows(x, size)
    if windows and len(windows[0]) < size:
        overall.warnings.append(f"only {len(windows[0])} patients have a {index_name} value, fewer than the window of "
                                f"{size}; the one window holds them all.")
    out = []
    for rows in windows:
        xs = x[rows]
        sub = {a: where[a][rows[arm_col[rows] == a]] for a in arms}
        info = {"from": r6(float(xs.min())), "to": r6(float(xs.max())), "median": r6(float(np.median(xs))),
                "n_first": len(sub[arms[0]]), "n_second": len(sub[arms[1]])}
        g = _Group(info, tables[arms[0]].take(sub[arms[0]]), tables[arms[1]].take(sub[arms[1]]), [])
        few = [f"{len(sub[a])} {a}" for a in arms if 0 < len(sub[a]) < FEW]
        if few:
            g.warnings.append(f"only {' and '.join(few)} patients in this window; its interval is wide and rough.")
        _subsample(g, seed, f"the window {info['from']:g} to {info['to']:g}")
        out.append(g)
    return out

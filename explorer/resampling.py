"""Replicates with one seed each, run serially, with joblib, or on an existing Dask cluster.

A replicate's result depends only on its own seed (spawned from the analysis seed), so the
answer is identical whatever the backend or the number of workers.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import Any, Callable, Sequence

import numpy as np

from .errors import FulcrumError
from .models import fit_model
from .models.base import Basis, Fitted, OutcomeData
from .settings import cap_workers
from .spec import OutcomeSpec

Progress = Callable[[int, int], None]


@dataclass
class ArmArrays:
    """One arm's complete-case arrays of one outcome, and where each cohort row sits in them (-1: absent).

    Built once from a full-data fit, so a replicate refits from array slices, not from the data frame.
    """

    data: OutcomeData
    where: np.ndarray

    @classmethod
    def of(cls, data: OutcomeData, rows: np.ndarray, n_cohort: int) -> ArmArrays:
        where = np.full(n_cohort, -1, dtype=np.int64)
        where[rows] = np.arange(len(rows))
        return cls(OutcomeData(data.x, data.y, data.time, data.event, data.z, data.z_names, weights=data.weights),
                   where)

    def positions(self, drawn: np.ndarray) -> np.ndarray:
        """Positions of the drawn cohort rows that are complete cases here, duplicates and order kept."""
        p = self.where[drawn]
        return p[p >= 0]

    def rows(self, drawn: np.ndarray) -> np.ndarray:
        """The drawn cohort rows that are complete cases here, in the order of `positions`."""
        return drawn[self.where[drawn] >= 0]


def refit_arms(outcome: OutcomeSpec, basis: Basis, arrays: dict[str, ArmArrays], drawn: dict[str, np.ndarray],
               starts: dict[str, np.ndarray], x: np.ndarray | None = None) -> dict[str, Fitted]:
    """Refit each arm on the drawn cohort rows, as fit_pair would (complete cases, z held at the pooled mean
    of the drawn rows), without diagnostics or sandwich variances, which a replicate's curves do not use.
    x: the replicate's own index value per cohort row (an index refitted on the draw), else the fit's."""
    pos = {arm: a.positions(drawn[arm]) for arm, a in arrays.items()}
    z_ref = None
    if outcome.adjust:
        z_ref = np.concatenate([arrays[arm].data.z[p] for arm, p in pos.items()]).mean(axis=0)
    fits = {}
    for arm, a in arrays.items():
        if len(pos[arm]) == 0:
            raise FulcrumError(f"no {arm} patients were drawn for outcome '{outcome.name}'.")
        d = a.data
        sub = OutcomeData(*(None if v is None else v[pos[arm]] for v in (d.x, d.y, d.time, d.event, d.z)),
                          z_names=d.z_names, z_ref=z_ref,
                          weights=None if d.weights is None else d.weights[pos[arm]])  # fixed weights (headline)
        if x is not None:
            sub.x = x[a.rows(drawn[arm])]
        fits[arm] = fit_model(outcome, arm, basis, sub, start=starts.get(arm), robust=False, checks=False)
    return fits


def replicate_seeds(seed: int, n: int) -> list[np.random.SeedSequence]:
    return np.random.SeedSequence(seed).spawn(n)


def _run_block(task: Callable[[np.random.Generator], Any], seeds: Sequence[np.random.SeedSequence]) -> list[Any]:
    return [task(np.random.default_rng(s)) for s in seeds]


BlockTask = Callable[[Sequence[np.random.SeedSequence]], list[Any]]


def run_replicates(task: Callable[[np.random.Generator], Any], n: int, seed: int, *, workers: int = 1,
                   scheduler: str | None = None, progress: Progress | None = None,
                   blocks_per_worker: int = 8) -> list[Any]:
    """Run `task(rng)` for n replicates and return the results in replicate order.

    `task` must be picklable (a module-level function or a functools.partial of one) when
    workers != 1 or a scheduler is given.
    """
    return run_blocks(functools.partial(_run_block, task), n, seed, workers=workers, scheduler=scheduler,
                      progress=progress, blocks_per_worker=blocks_per_worker)


def run_blocks(block_task: BlockTask, n: int, seed: int, *, workers: int = 1, scheduler: str | None = None,
               progress: Progress | None = None, blocks_per_worker: int = 8, blocks: int | None = None) -> list[Any]:
    """Run `block_task(seeds)` (one result per seed, in order) over blocks of the n replicate seeds.

    For tasks that share work across the replicates of a block; the answer must not depend on how the
    replicates are blocked. blocks: how many (default: 50 when serial, workers x blocks_per_worker).
    """
    seeds = replicate_seeds(seed, n)
    if n == 0:
        return []
    if scheduler:
        return _run_dask(block_task, seeds, scheduler, progress, min(n, blocks or 64))
    from joblib import Parallel, delayed, effective_n_jobs

    workers = cap_workers(workers)[0]  # never more processes than cores (the callers print the warning)
    n_workers = 1 if workers == 1 else effective_n_jobs(workers)
    n_blocks = min(n, blocks or (50 if n_workers == 1 else n_workers * blocks_per_worker))
    parts = [[seeds[i] for i in b] for b in np.array_split(np.arange(n), n_blocks)]
    if n_workers == 1:
        results = (block_task(p) for p in parts)
    else:
        results = Parallel(n_jobs=workers, return_as="generator")(delayed(block_task)(p) for p in parts)
    out: list[Any] = []
    for block_result in results:
        out.extend(block_result)
        if progress:
            progress(len(out), n)
    return out


def _run_dask(block_task: BlockTask, seeds, scheduler: str, progress: Progress | None, n_blocks: int) -> list[Any]:
    try:
        from dask.distributed import Client, as_completed
    except ImportError:
        raise FulcrumError("a Dask scheduler was given but dask.distributed is not installed.",
                           key="analysis.scheduler",
                           hint="Install the cluster extra: pip install 'fulcrum-explorer[cluster]'.") from None
    try:
        client = Client(scheduler, timeout="10s", set_as_default=False)
    except (OSError, TimeoutError) as exc:
        raise FulcrumError(f"could not reach the Dask scheduler at {scheduler} ({exc}).", key="analysis.scheduler",
                           hint="Check the address and that the scheduler is running.") from None
    try:
        n = len(seeds)
        blocks = [list(b) for b in np.array_split(np.arange(n), n_blocks)]
        shared = client.scatter(block_task, broadcast=True, hash=False)
        futures = [client.submit(_call, shared, [seeds[i] for i in b], pure=False) for b in blocks]
        order = {f.key: k for k, f in enumerate(futures)}
        results: list[list[Any] | None] = [None] * len(blocks)
        done = 0
        for fut in as_completed(futures, loop=client.loop):
            k = order[fut.key]
            results[k] = fut.result()
            done += len(blocks[k])
            if progress:
                progress(done, n)
        return [r for block in results for r in block]  # type: ignore[union-attr]
    finally:
        client.close()


def _call(block_task: BlockTask, seeds: Sequence[np.random.SeedSequence]) -> list[Any]:
    return block_task(seeds)

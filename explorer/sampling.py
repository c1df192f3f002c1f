"""Points to draw for large cohorts: a seeded sample for charts, while every model uses every row.

Charts with hundreds of thousands of marks are slow to draw and no easier to read, so above `max_points`
the app and the report plot a random sample (proportional within groups such as arm, so each keeps its
share) and say so with `sample_note`.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

MAX_POINTS = 5000


def plot_sample(frame: pd.DataFrame, max_points: int = MAX_POINTS, seed: int = 1,
                by: str | None = None) -> pd.DataFrame:
    """At most `max_points` rows of frame, drawn at random without replacement (seeded), in their original
    order; all rows when there are no more than that. With `by`, each group keeps its share of the rows
    (largest remainders), so a small arm is not lost."""
    n = len(frame)
    if max_points < 1:
        raise ValueError("max_points must be at least 1")
    if n <= max_points:
        return frame
    rng = np.random.default_rng(seed)
    if by is None:
        return frame.iloc[np.sort(rng.choice(n, max_points, replace=False))]
    codes, _ = pd.factorize(frame[by], use_na_sentinel=False)
    sizes = np.bincount(codes)
    quota = sizes * max_points / n
    take = np.floor(quota).astype(int)
    extra = max_points - take.sum()
    take[np.argsort(-(quota - take), kind="stable")[:extra]] += 1
    picked = [rng.choice(np.flatnonzero(codes == g), k, replace=False) for g, k in enumerate(take) if k]
    return frame.iloc[np.sort(np.concatenate(picked))]


def sample_note(total: int, shown: int, seed: int = 1) -> str | None:
    """The sentence shown beside a sampled chart, or None when every patient is drawn."""
    if shown >= total:
        return None
    return (f"The chart shows {shown:,} of {total:,} patients, chosen at random (seed {seed}) to keep it readable; "
            "every estimate uses all patients.")

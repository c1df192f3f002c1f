"""Each patient's observed outcome on the measure's scale, for the points drawn beneath the curves: computed in
the engine from the fitted set, so the report and the app only draw it (a seeded sample of large cohorts)."""
from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from .models import describe
from .sampling import plot_sample, sample_note


def cohort_points(fs: Any, outcome: str, index: str, *, max_points: int = 1500, seed: int = 0) -> pd.DataFrame:
    """Each patient's index value and outcome on the measure's scale (x, y, arm, allocation), no identifiers.

    Survival: 1 alive at the horizon, 0 died before it (censored earlier left out; RMST: time capped at the
    horizon). Ordinal: 1 in a favourable level. 0/1 outcomes are jittered a little so they can be seen.
    Above `max_points` patients a seeded sample is drawn, each arm keeping its share (sampling.plot_sample),
    and attrs["sample_note"] holds the sentence to show beside the chart; the models use every patient.
    """

    spec = fs.spec
    pf = fs.pair(outcome, index)
    o = pf.outcome
    frame = fs.cohort.frame
    arms = list(pf.rows)
    xs, ys, codes, positions = [], [], [], []
    facts = describe(o)
    for k, (arm, rows) in enumerate(pf.rows.items()):
        d = pf.data[arm]
        x = np.asarray(d.x, float)
        if facts.follow_up:
            t, e = np.asarray(d.time, float), np.asarray(d.event, float)
            if not facts.probability:  # restricted mean survival
                keep, y = (t >= o.horizon) | (e == 1), np.minimum(t, o.horizon)
            else:
                keep, y = (t >= o.horizon) | (e == 1), (t >= o.horizon).astype(float)
        elif facts.levels:
            fav = [facts.levels.index(lv) for lv in facts.favourable]
            keep, y = np.ones(len(x), bool), np.isin(np.asarray(d.y), fav).astype(float)
        else:
            keep, y = np.ones(len(x), bool), np.asarray(d.y, float)
        xs.append(x[keep])
        ys.append(y[keep])
        codes.append(np.full(int(keep.sum()), k))
        positions.append(np.asarray(rows)[keep])
    every = pd.DataFrame({"x": np.concatenate(xs), "y": np.concatenate(ys),
                          "arm": pd.Categorical.from_codes(np.concatenate(codes), categories=arms),
                          "row": np.concatenate(positions)})
    df = plot_sample(every, max_points, seed=seed, by="arm").reset_index(drop=True)
    rows = df.pop("row").to_numpy()
    df["arm"] = df["arm"].astype(str).astype(object)
    randomised = getattr(fs.cohort, "randomised", None)
    if randomised is not None:
        df["allocation"] = np.where(np.asarray(randomised, bool)[rows], "randomised", "chosen")
    elif spec.cohort.allocation:
        df["allocation"] = np.where(frame[spec.cohort.allocation].iloc[rows].astype(str).to_numpy()
                                    == str(spec.cohort.randomised), "randomised", "chosen")
    rng = np.random.default_rng(seed)  # without an allocation column nobody is drawn as randomised
    if facts.probability:  # 0/1 values: jittered off the edges so overlapping patients show
        df["y"] = df["y"] + np.where(df["y"] > 0.5, -1, 1) * rng.uniform(0, 0.04, len(df))
    ix = fs.indices[index]
    if bool((ix.info or {}).get("discrete")):
        df["x"] = df["x"] + rng.uniform(-0.2, 0.2, len(df))
    df.attrs["sample_note"] = sample_note(len(every), len(df), seed)
    return df

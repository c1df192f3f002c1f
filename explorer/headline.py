"""What each headline row rests on, said on the row itself: its population, whether chosen patients differ
from randomised ones for that outcome (with the other population's break-even beside it), and how far the
break-even moves without index values far outside the bulk of the cohort."""
from __future__ import annotations

import numpy as np

from . import fitting as ft
from .errors import FulcrumError

FIT_ERRORS = (FulcrumError, np.linalg.LinAlgError, ValueError, FloatingPointError)


def population_json(fs: ft.FitSet) -> dict:
    """The document's `population`: which patients the headline rows rest on and why."""
    if fs.population is None:
        return {"population": "all", "words": "all patients", "chosen_by": "default", "reason": "", "adjust": []}
    return fs.population.to_json()


def _words(bes: list[dict] | None) -> str:
    if not bes:
        return "no break-even point in the searched range"

    def one(b: dict) -> str:
        lo, hi = b["ci"]
        if b.get("interval_shape") == "two_rays":
            return f"{b['x']:.3g} (interval: below {lo:.3g} or above {hi:.3g})"
        ends = f"{'-inf' if lo is None else f'{lo:.3g}'} to {'+inf' if hi is None else f'{hi:.3g}'}"
        return f"{b['x']:.3g} (interval {ends})"
    return ", ".join(one(b) for b in bes)


def chosen_differ(sel_rows: list[dict], alpha: float) -> list[str]:
    """Reasons the selection analysis gives for chosen patients differing (any arm), empty when none: a selection
    effect, or one changing along the index, at the analysis level (both analytic, so the app and the command
    line agree whatever the shift's interval)."""
    out = []
    for r in sel_rows:
        if r.get("p_value") is not None and r["p_value"] < alpha:
            out.append(f"in {r['arm']} chosen patients did {'better' if r['effect'] > 0 else 'worse'} than randomised "
                       f"ones at the same index value (p = {r['p_value']:.2g})")
        if r.get("varies_with_index_p") is not None and r["varies_with_index_p"] < alpha:
            out.append(f"in {r['arm']} the selection effect changes along the index (p = "
                       f"{r['varies_with_index_p']:.2g})")
    return list(dict.fromkeys(out))


def annotate(fs: ft.FitSet, rows: list[dict], selection: list[dict]) -> None:
    """Add to each headline row the selection warning (with the other population's break-even beside it) and
    the far-out comparison. Rows are changed in place."""
    alpha = 1.0 - fs.spec.analysis.level
    for row in rows:
        sel = [r for r in selection if r["outcome"] == row["outcome"] and r["index"] == row["index"]]
        why = chosen_differ(sel, alpha)
        pop = row.get("population", "all")
        where = (f"{fs.spec.outcome(row['outcome']).title} along "
                 f"{fs.indices[row['index']].info.get('label', row['index'])}")
        if sel and why:
            if pop == "randomised":
                row["warnings"].append(
                    f"{where}: chosen patients differ from randomised ones ({'; '.join(why)}). The headline "
                    "rests on randomised patients only; all patients pooled would give "
                    f"{_words(sel[0]['all_break_even'])}, which chosen patients' differences may bias.")
            else:
                row["randomised_break_even"] = sel[0]["randomised_break_even"]
                row["warnings"].append(
                    f"{where}: chosen patients differ from randomised ones ({'; '.join(why)}), and this "
                    f"headline rests on {_population_words(fs)}. Randomised patients only give "
                    f"{_words(sel[0]['randomised_break_even'])}; read the two together.")
        far = fs.indices[row["index"]].info.get("far_out_rows")
        if far:
            row["warnings"].append(_without(fs, row, np.asarray(far, int)))


def _population_words(fs: ft.FitSet) -> str:
    return "all patients" if fs.population is None else fs.population.words


def _without(fs: ft.FitSet, row: dict, far: np.ndarray) -> str:
    """The break-even with and without the far-out rows of the row's index."""
    pf = fs.pair(row["outcome"], row["index"])
    title = f"{pf.outcome.title} along {fs.indices[pf.index].info.get('label', pf.index)}"
    rows = {arm: np.setdiff1d(r, far) for arm, r in pf.rows.items()}
    n_out = sum(len(r) - len(rows[a]) for a, r in pf.rows.items())
    if n_out == 0:
        return f"{title}: the far-out index values belong to patients not used here."
    try:
        sub = ft.fit_pair(fs.spec, fs.cohort, pf.outcome, fs.indices[pf.index], pf.basis, rows=rows, checks=False,
                          population=fs.population)
        without = [b.to_json() for b in ft.analytic_summary(sub, fs.spec).break_even]
        said = _words(without)
    except FIT_ERRORS as exc:
        said = f"no fit ({exc})"
    return (f"{title}: break-even with the {n_out} far-out patient{'s' if n_out != 1 else ''} "
            f"{_words(row['break_even'])}; without them {said}.")

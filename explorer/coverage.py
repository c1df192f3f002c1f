"""Measured coverage of each interval method, read from the simulation results that ship with the tool.

explorer/validation_results.json holds the coverage rows of docs/validation.json (made by
`python -m explorer.coverage_study_cli`). A break-even interval is labelled with the coverage measured for its
outcome kind and method at the simulated size nearest its cohort, and called approximate when that
coverage lies outside 93.5-96.5%.
"""
from __future__ import annotations

import functools
import json
import math
from importlib import resources

from .indices.prognostic import about_index, predicted
from .models import describe, kind_of
from .spec import AnalysisSpec, OutcomeSpec, Spec

TARGET = (0.935, 0.965)
CURVED = ("binary spline", "survival spline", "binary margin", "survival margin", "survival adjusted")
RESULTS = "validation_results.json"
METHOD_NAMES = {"fieller": "Fieller", "delta": "delta-method", "test-inversion": "test-inversion",
                "bootstrap-percentile": "bootstrap percentile"}


@functools.lru_cache(maxsize=1)
def _rows() -> tuple[dict, ...]:
    text = resources.files("explorer").joinpath(RESULTS).read_text(encoding="utf-8")
    return tuple(r for r in json.loads(text) if r.get("coverage") is not None)


def measured(scenario: str, method: str, n: int) -> dict | None:
    """The simulation row for this scenario scenario and interval method at the simulated size nearest n (on the
    log scale), or None when that pair was never simulated. scenario: continuous, binary, ordinal, survival,
    composite or one of CURVED; method: fieller, delta, test-inversion or bootstrap-percentile (where several
    resample counts were run, the largest, closest to the tool's own default)."""
    rows = [r for r in _rows() if r["scenario"] == scenario and r["method"] == method]
    if not rows or not n or n <= 0:
        return None
    return dict(min(rows, key=lambda r: (abs(math.log(r["n"] / n)), -r["n"], -(r.get("bootstrap_resamples") or 0),
                                         -r["replicates"])))


def default_method(scenario: str) -> str:
    """The method the tool should use by default for this scenario: the one marked default in the simulations
    (the analytic method unless it misses 93.5-96.5% at n >= 1,000); 'analytic' for kinds never simulated."""
    for r in _rows():
        if r["scenario"] == scenario and r.get("default"):
            return r["method"]
    return "analytic"


def default_interval(scenario: str) -> str:
    """The spec's `interval` setting ("analytic" | "bootstrap") that gives default_method(scenario)."""
    return "bootstrap" if default_method(scenario) == "bootstrap-percentile" else "analytic"


FITTED_KINDS = ("survival", "binary")
# The outcome kinds the coverage study simulated along a straight line with no margin, and their scenario names
# (explorer/coverage_study.py); an outcome kind added later has no scenario until the study simulates it.
SIMULATED = {"continuous": "continuous", "binary": "binary", "ordinal": "ordinal", "survival": "survival"}


def fitted_scenario(scenario: str, refitted: bool = False) -> str:
    """The name of the simulated scenario of an outcome scenario along a fitted (cross-fitted prognostic) index,
    holding the index fixed or (refitted) refitting it in every bootstrap replicate (explorer.coverage_study_fitted)."""
    return f"{scenario}, fitted index" + (", refitted" if refitted else "")


def scenario_for(outcome: OutcomeSpec, analysis: AnalysisSpec, composite_kind: str | None = None,
                 clustered: bool = False, margin: float | None = None, fitted_index: bool = False) -> str | None:
    """The simulated scenario that matches this analysis, or None when none does. margin: the outcome's own
    (Spec.margin_for; default analysis.margin). Simulated beyond the straight-line, zero-margin kinds: a spline
    shape, a non-zero margin (simulated at 0.05 on a probability) and adjustment covariates, for binary outcomes
    and Cox survival probabilities as explorer/coverage_study_curved.py lists them, one departure at a time. Not
    simulated: another level, RMST or Weibull, a bounded outcome or clusters (robust variances), a composite
    other than the ordinal one, or two departures together. For a composite row pass the [values] outcome and
    the row's kind. fitted_index: the row's index is a cross-fitted prognostic index (simulated for straight-line,
    zero-margin survival and binary outcomes only)."""
    scenario = _scenario_for(outcome, analysis, composite_kind, clustered, margin)
    if not fitted_index or scenario is None:
        return scenario
    if scenario not in FITTED_KINDS:
        return None
    return fitted_scenario(scenario, analysis.interval == "bootstrap" and analysis.refit_index)


def _scenario_for(outcome: OutcomeSpec, analysis: AnalysisSpec, composite_kind: str | None, clustered: bool,
                  margin: float | None) -> str | None:
    margin = analysis.margin if margin is None else margin
    if abs(analysis.level - 0.95) > 1e-12 or clustered or kind_of(outcome).robust(outcome):
        return None
    facts = describe(outcome)
    departures = [d for d, on in (("spline", analysis.shape != "linear"), ("margin", margin != 0.0),
                                  ("adjusted", bool(outcome.adjust))) if on]
    if composite_kind is not None:
        return "composite" if composite_kind == "ordinal" and facts.levels and not departures else None
    if facts.follow_up and ((outcome.model or "cox") != "cox" or not facts.probability):
        return None  # simulated: Cox survival probabilities only
    scenario = SIMULATED.get(outcome.kind)
    if scenario is None or len(departures) > 1:
        return None
    if not departures:
        return scenario
    name = f"{scenario} {departures[0]}"
    return name if name in CURVED else None


def label(break_even_json: dict, kind: str | None, n: int) -> dict:
    """Fill `coverage` (measured, a proportion, or None) and `approximate` in one break-even JSON dict, in place
    and returned; also `coverage_n`, the simulated size the coverage comes from."""
    row = measured(kind, break_even_json.get("interval", ""), n) if kind else None
    break_even_json["coverage"] = None if row is None else row["coverage"]
    break_even_json["coverage_n"] = None if row is None else row["n"]
    break_even_json["approximate"] = row is not None and not TARGET[0] <= row["coverage"] <= TARGET[1]
    return break_even_json


def label_row(row: dict, kind: str | None) -> dict:
    """Label every break-even of a results (or composite) row; n is the row's patients in both arms."""
    n = sum(v for v in (row.get("n") or {}).values() if v)
    for b in row.get("break_even", []):
        label(b, kind, n)
    return row


def note(break_even_json: dict) -> str | None:
    """A sentence for warnings and cautions when a labelled interval is approximate, else None."""
    if not break_even_json.get("approximate"):
        return None
    n = break_even_json.get("coverage_n")
    method = METHOD_NAMES.get(break_even_json["interval"], break_even_json["interval"])
    return (f"The {method} interval of the break-even point {break_even_json.get('x', 0):.3g} "
            f"is approximate: in simulations like this analysis (n = {n:,}) it covered the true point in "
            f"{100 * break_even_json['coverage']:.1f}% of studies, against a target of 93.5-96.5%.")


def label_results(rows: list[dict], spec: Spec) -> list[dict]:
    """Label the break-evens of `results` rows (outcome x index) for this spec's analysis settings."""
    for row in rows:
        try:
            outcome = spec.outcome(row["outcome"])
        except KeyError:
            continue
        fitted = _fitted(row)
        scenario = scenario_for(outcome, spec.analysis, clustered=bool(spec.cohort.cluster),
                                margin=spec.margin_for(outcome), fitted_index=fitted)
        if fitted and row["index_info"]["prognostic"].get("fit_on") != "second":
            scenario = None  # only an index fitted on the second arm was simulated
        label_row(row, scenario)
        if fitted:
            report = row["index_info"]["prognostic"]
            about = about_index(row["index_info"].get("label") or row.get("index", ""),
                                report, spec.analysis.interval, spec.analysis.refit_index, spec)
            row["index_info"]["about"] = " ".join([about, *_predicted_sentences(row, report), *dict.fromkeys(
                fitted_reason(b) for b in row.get("break_even", []) if b.get("approximate"))])
    return rows


def _predicted_sentences(row: dict, report: dict) -> list[str]:
    """Each break-even along a fitted index as the model's predicted quantity (PATH: absolute risk), set on the
    break-even as `predicted` and `predicted_ci`, and said in one sentence."""
    out = []
    for b in row.get("break_even", []):
        p = predicted(report, b.get("x"))
        ends = [predicted(report, v) for v in (b.get("ci") or [None, None])]
        if p is None:
            continue
        if report.get("sign", 1.0) < 0 and report.get("model") in ("logistic", "linear"):
            ends = ends[::-1]
        b["predicted"], b["predicted_ci"] = p, ends
        pct = report.get("model") != "linear"
        words = (lambda v: "open" if v is None else f"{100 * v:.0f}%") if pct else \
            (lambda v: "open" if v is None else f"{v:.3g}")
        interval = "" if b.get("interval_shape") == "two_rays" or ends == [None, None] else \
            f" (interval {words(ends[0])} to {words(ends[1])})"
        out.append(f"The break-even at {b['x']:.3g} on this score is a {report.get('predicted', 'prediction')} of "
                   f"{words(p)}{interval}.")
    return out


def fitted_reason(b: dict) -> str:
    """Why an interval along a fitted index is approximate, from its measured coverage and method."""
    pct = f"{100 * b['coverage']:.1f}%"
    if b.get("interval") == "bootstrap-percentile":
        return (f"In simulations of such a score this bootstrap interval covered the true point in {pct} of studies "
                "(target 93.5-96.5%): its width matched the estimate's spread, but it was measured with fewer "
                "resamples per study than an analysis uses, which narrows percentile intervals a little, and a "
                "percentile interval does not correct the break-even estimate's small bias.")
    if b["coverage"] > TARGET[1]:
        return (f"In simulations of such a score this interval covered the true point in {pct} of studies, more "
                "than the 95% it aims at: it treats the score as known, yet the score and the curve of the arm it was "
                "fitted on come from the same patients, so on the predicted-risk scale their errors partly cancel "
                "and the interval is wider than it needs to be.")
    return (f"In simulations of such a score this interval covered the true point in {pct} of studies, less than "
            "the 95% it aims at, because it treats the fitted score as known.")


def _fitted(row: dict) -> bool:
    info = row.get("index_info")
    return isinstance(info, dict) and info.get("kind") == "prognostic" and isinstance(info.get("prognostic"), dict)


def label_composites(rows: list[dict], spec: Spec) -> list[dict]:
    """Label the break-evens of `composite` rows; only the ordinal composite was simulated."""
    for row in rows:
        try:
            outcome = spec.outcome(row.get("values_outcome") or (spec.values.outcome if spec.values else ""))
        except KeyError:
            outcome = None
        label_row(row, None if outcome is None or _fitted(row) else scenario_for(outcome, spec.analysis,
                                                                                  row.get("kind"),
                                                                                  bool(spec.cohort.cluster)))
        if _fitted(row):
            row["index_info"]["about"] = about_index(row["index_info"].get("label") or row.get("index", ""),
                                                     row["index_info"]["prognostic"], spec.analysis.interval,
                                                     spec.analysis.refit_index, spec)
    return rows


def notes(rows: list[dict]) -> list[str]:
    """One sentence per approximate interval among these rows, naming the outcome and index."""
    out = []
    for row in rows:
        for b in row.get("break_even", []):
            text = note(b)
            if text:
                out.append(f"{row.get('label') or row.get('outcome')} along {row.get('index')}: {text}")
    return out

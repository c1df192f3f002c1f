"""The one orchestrator: Spec + Cohort -> fitted models (explorer.fitting) -> curves, break-evens, composites and
every feature's rows -> Results (the fits for re-use, the summaries and the JSON document).

Fitting (`fitting.fit_all`) and summarising (`fitting.summarise`) are separate so the app can re-weight the
composite, move the margin or place a patient without refitting anything.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from . import breakeven as be
from . import trust as ck
from . import evidence as ev
from . import headline as hl
from . import imputation as im
from . import maps as mp
from . import pairwise as pw
from . import policy as po
from . import results as res
from . import selection as sel
from . import values as vl
from .cohort import Cohort
from .fitting import FitSet, fit_all, run_bootstrap, summarise
from .numeric import captured
from .resampling import Progress
from .result_rows import curve_row, index_info_json
from .spec import Spec


@dataclass
class Results:
    """Everything one analysis produced: fits (for re-use), curve summaries and the JSON document."""

    fitset: FitSet
    summaries: dict[tuple[str, str], be.CurveSummary]
    document: dict
    replicates: list[dict] | None = None
    composite: dict = field(default_factory=dict)
    selection: Any = None

    @property
    def spec(self) -> Spec:
        return self.fitset.spec


def analyse(spec: Spec, cohort: Cohort | None = None, *, spec_bytes: bytes | None = None,
            progress: Progress | None = None, fitset: FitSet | None = None,
            replicates: list[dict] | None = None, selection: Any = None) -> Results:
    """Run the analysis the spec describes; `progress(done, total)` reports resampling steps.

    `fitset`, `replicates` and `selection` let a caller (the app) pass fits, bootstrap replicates and the
    randomised-vs-chosen analysis (selection.analyse_selection on these fits and this spec) it already has.
    Numerical warnings (overflow and the like) become result warnings instead of reaching the terminal.
    """
    fs = fitset or fit_all(spec, cohort)
    numeric: list[str] = []
    with captured(numeric, "summarising the fits"):
        out = _analyse(spec, fs, spec_bytes, progress, replicates, selection)
    out.document["warnings"] = list(dict.fromkeys(out.document["warnings"] + numeric))
    return out


def _analyse(spec: Spec, fs: FitSet, spec_bytes: bytes | None, progress: Progress | None,
             replicates: list[dict] | None, selection: Any = None) -> Results:
    reps = replicates
    if reps is None and spec.analysis.interval == "bootstrap":
        keep = (spec.values.outcome,) if spec.values else ()
        reps = run_bootstrap(fs, progress=progress, keep_distribution=keep)
    summaries = summarise(fs, reps)
    rows = [curve_row(fs.pairs[key], s, index_info_json(fs.indices[key[1]])) for key, s in summaries.items()]
    composite = vl.composite_summaries(fs, replicates=reps) if spec.values else {}
    if selection is None and spec.cohort.allocation and fs.cohort.randomised is not None:
        selection = sel.analyse_selection(fs, replicates=0 if spec.analysis.interval == "analytic" else None,
                                          progress=progress)
    pairwise = []
    if spec.pairwise is not None:
        for ix in spec.indices:
            pairwise += pw.pairwise_rows(spec, fs.cohort, ix.name, fs.indices[ix.name].values,
                                         seed=spec.analysis.seed, progress=progress, interval=spec.analysis.interval)
    hl.annotate(fs, rows, selection.rows if selection else [])
    warnings = list(fs.cohort.warnings) + fs.notes
    for iv in fs.indices.values():
        warnings.extend(iv.warnings)
    if reps is not None and any(ix.prognostic for ix in spec.indices) and not spec.analysis.refit_index:
        warnings.append("The bootstrap held each cross-fitted prognostic index fixed at its out-of-fold values; "
                        "its intervals do not include the uncertainty of fitting the index (refit_index = true "
                        "refits it in every replicate).")
    extra: dict[str, Any] = {"population": hl.population_json(fs), "pairwise": pairwise,
                             "checks": ck.checks_rows(fs) if spec.analysis.checks else [],
                             "baseline": ck.baseline_table(fs.cohort) if spec.cohort.covariates else []}
    extra["kaplan_meier"] = ck.km_rows(fs, bands=ck.BANDS if spec.analysis.checks else 0)
    extra["randomised_windows"] = [{"index": ix, "windows": w} for ix, w in selection.coverage.items()] if selection else []
    clusters = ck.clustering(fs)
    if clusters:
        extra["clustering"] = clusters
        warnings += clusters["warnings"]
    extra["maps"] = mp.decision_maps(fs)
    extra["imputation"] = im.imputed_break_evens(fs, m=spec.analysis.imputations) if spec.analysis.imputations else []
    if spec.policy is not None:
        extra["policy"], policy_warnings = po.analysis_rows(fs, replicates=reps)
        warnings += policy_warnings
    if spec.evidence is not None:
        extra["evidence"] = ev.evidence_rows(fs, composite, reps)
    doc = res.document(spec, data_sha256=fs.cohort.sha256, spec_bytes=spec_bytes, rows=rows,
                       composite=vl.composite_rows(fs, composite) if composite else [],
                       selection=selection.rows if selection else [], warnings=warnings, extra=extra,
                       source=fs.cohort.source)
    return Results(fs, summaries, doc, reps, composite, selection)

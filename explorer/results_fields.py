"""Every field of the results document in words, by path: the descriptions docs_gen writes into
docs/spec-reference.md (tests/test_docs.py checks every field the schema allows is described here)."""
from __future__ import annotations

from .policy_fields import POLICY_SECTION

# --------------------------------------------------------------------------------------------------
# The results document: every field, by path. "[]" marks a list's items; "<arm>", "<level>" and the
# like mark tables keyed by the analysis's own names. Paths listed in ALIASES share the description of
# the path they map to (a composite row is shaped like a results row; break-evens look alike everywhere).
# --------------------------------------------------------------------------------------------------
RESULT_SECTIONS: list[tuple[str, str, list[tuple[str, str]]]] = [
    ("top", "The document", [
        ("schema_version", "Version of this document's layout (1). Fields may be added, never renamed."),
        ("tool", "Which program wrote the document."),
        ("tool.name", "Always \"fulcrum\"."),
        ("tool.version", "Fulcrum's version."),
        ("tool.generated_at", "When the document was written (UTC, ISO 8601). The only field that differs "
                              "between two runs of the same spec on the same data."),
        ("inputs", "What went in, so a reader can check they hold the same inputs."),
        ("inputs.spec_sha256", "SHA-256 of the spec file's bytes (or of the spec as written back to TOML when "
                               "it came from the app)."),
        ("inputs.data_sha256", "SHA-256 of the cohort file's bytes; for a database cohort, of the values read "
                               "(as inputs.source.data_sha256)."),
        ("inputs.source", "Only for a cohort read from a database: where it came from, so a report can be traced to "
                          "the exact extract."),
        ("inputs.source.kind", "duckdb, sqlite or postgresql."),
        ("inputs.source.url", "The database URL without credentials (a file's path made absolute)."),
        ("inputs.source.table", "The table or view read (absent when a query was read)."),
        ("inputs.source.query", "The SELECT statement read (absent when a table was read)."),
        ("inputs.source.rows", "Number of rows read."),
        ("inputs.source.columns", "The columns read: only those the spec needs."),
        ("inputs.source.data_sha256", "SHA-256 of the values read (per column: its name, which cells are empty, "
                                      "and the values as float64 or UTF-8 text), the same whichever database "
                                      "held them."),
        ("inputs.spec_canonical_sha256", "SHA-256 of the parsed spec as sorted JSON, defaults filled in: a spec "
                                         "saved by the app and the same spec typed by hand hash the same."),
        ("inputs.seed", "The seed every random step starts from ([analysis] seed)."),
        ("inputs.interval", "analytic or bootstrap ([analysis] interval)."),
        ("inputs.level", "The interval level, e.g. 0.95."),
        ("inputs.margin", "The analysis-level margin ([analysis] margin): the default for outcomes measured as a "
                          "probability and for composites; each row's own margin is results[].margin."),
        ("arms", "The two arm labels, first then second; every difference is first minus second."),
        ("spec", "The spec as parsed, defaults filled in, as TOML-shaped data (see the spec reference above)."),
        ("results", "One row per outcome x index (see Results rows)."),
        ("composite", "One row per composite x index, shaped like a results row with a few more fields "
                      "(see Composite rows). Empty without [values]."),
        ("selection", "One row per outcome x index x arm comparing randomised and chosen patients (see Selection "
                      "rows). Empty without an allocation column."),
        ("pairwise", "Hierarchical pairwise comparison rows (see Pairwise rows). Empty without [pairwise]."),
        ("checks", "One row of trust checks per outcome x index (see Checks rows). Empty when [analysis] "
                   "checks = false."),
        ("maps", "Two-index map rows, one per [[maps]] entry (see Map rows). Empty without [[maps]]."),
        ("evidence", "Value of information along each index, one row per outcome x index and per composite x index "
                     "(see Evidence rows). Present only with [evidence]."),
        ("baseline", "Baseline table of the cohort covariates (see Baseline rows). Empty without cohort.covariates."),
        ("kaplan_meier", "Kaplan-Meier curves per arm for every survival outcome: over all patients (index null) and, "
                         "when [analysis] checks is on, in five bands of each index (see Kaplan-Meier rows). Empty "
                         "without a survival outcome."),
        ("randomised_windows", "Where the randomised patients are: per index, patients per window by arm and allocation "
                     "(see Coverage rows). Empty without an allocation column."),
        ("clustering", "Present only with cohort.cluster: which clustered intervals were used and over how many "
                       "clusters."),
        ("clustering.column", "The cluster column."),
        ("clustering.clusters", "Number of clusters."),
        ("clustering.clusters_per_arm", "Clusters per arm, by arm label."),
        ("clustering.method", "Cluster-robust (sandwich) variances with analytic intervals; whole clusters "
                              "resampled with the bootstrap."),
        ("clustering.warnings", "Sentences: the checks ignore the clusters; fewer than 20 clusters make clustered "
                                "intervals too narrow."),
        ("imputation", "Multiple-imputation rows (see Imputation rows). Empty when [analysis] imputations = 0."),
        ("population", "The patients the headline rows rest on (see docs/methods.md, section 6)."),
        ("population.population", "all, randomised, all_adjusted or all_weighted."),
        ("population.words", "The same in words."),
        ("population.chosen_by", "spec (analysis.population) or default (chosen from the data)."),
        ("population.reason", "Why this population carries the headline."),
        ("population.adjust", "all_adjusted: the covariates added to each outcome model."),
        ("warnings", "Sentences about the cohort and the indices (missing values, rows left out, index notes)."),
        ("cautions", "The cautions, shown with every estimate: a research and discussion aid, not a medical "
                     "device."),
    ]),
    ("row", "Results rows (one outcome along one index)", [
        ("results[].outcome", "The outcome's name in the spec."),
        ("results[].label", "The outcome's readable label (the spec's label, else its name)."),
        ("results[].index", "The index's name in the spec."),
        ("results[].population", "The patients the row rests on: all, randomised, all_adjusted or all_weighted "
                                 "(analysis.population; see the top-level population)."),
        ("results[].randomised_break_even", "Only where the headline is not randomised-only and chosen patients "
                                            "differ for this outcome: the randomised-only break-even points."),
        ("results[].measure", "The measure compared, in words (e.g. probability alive at 365 days)."),
        ("results[].probability", "Whether the measure is a probability, so its scale runs from 0 to 1 (false for "
                                  "composites)."),
        ("results[].kind", "The outcome kind: survival, ordinal, binary or continuous (for composites: ordinal, "
                           "survival_function or quality_adjusted)."),
        ("results[].higher_is_better", "Whether a higher measure is better; differences are oriented so that "
                                       "above zero favours the first arm."),
        ("results[].among_survivors", "True when the outcome is measured only in survivors."),
        ("results[].range", "The observed index range [low, high] of the patients with this outcome."),
        ("results[].n", "Patients fitted per arm (complete cases), by arm label."),
        ("results[].events", "Events per arm for survival outcomes (null otherwise), by arm label."),
        ("results[].break_even", "Every break-even point found (see Break-even points); empty when the arms "
                                 "do not break even in the searched range."),
        ("results[].favours_throughout", "With no break-even point, the arm favoured over the whole range; else "
                                         "null. With a margin it compares the difference with the margin: the "
                                         "first arm where it is better by more than the margin, else the second "
                                         "(the first is not better by more than the margin)."),
        ("results[].margin", "The margin this row uses, in the outcome's own units ([[outcomes]] margin, else "
                             "[analysis] margin for a probability or composite, else 0). With a non-zero margin "
                             "an arm named in favours_* fields means: the first arm better by more than the "
                             "margin (first arm named) or not (second arm named)."),
        ("results[].curve", "The curves on the grid within the observed range (see Curve points)."),
        ("results[].clear_difference", "Clear-difference regions (see Regions); the search grid runs 10% past "
                                       "the observed range, so a region may start or end there."),
        ("results[].regions_band", "pointwise or simultaneous: which band the regions (and difference_ci) use."),
        ("results[].index_info", "About the index (see Index information)."),
        ("results[].reference", "Values at which adjustment covariates are held in the curves, by covariate "
                                "(empty without adjust)."),
        ("results[].methods", "One sentence per arm naming the model fitted, by arm label."),
        ("results[].warnings", "Sentences about this outcome along this index (patients left out, thin data, "
                               "model doubts, extrapolation)."),
    ]),
    ("composite", "Composite rows (the extra fields; the rest as in results rows, outcome = \"composite\")", [
        ("composite[].values_outcome", "The ordinal outcome whose states are weighted."),
        ("composite[].weights", "The weight of each state, by level name."),
        ("composite[].preset", "The preset the weights started from, or null for the user's own weights."),
        ("composite[].preset_source", "Where the preset's weights come from, or null."),
        ("composite[].whose", "Whose values the weights are: patient, proxy or team."),
        ("composite[].notes", "Sentences: how the composite is built and its caveats (e.g. conditional on "
                              "survival)."),
        ("composite[].thresholds", "Threshold analysis at one index value (null when not computed)."),
        ("composite[].thresholds.x", "The index value analysed (default: the median of the patients)."),
        ("composite[].thresholds.difference", "The composite difference (first minus second) there."),
        ("composite[].thresholds.margin", "The margin used."),
        ("composite[].thresholds.favours", "The arm the current weights favour there."),
        ("composite[].thresholds.states", "One entry per state."),
        ("composite[].thresholds.states[].level", "The state."),
        ("composite[].thresholds.states[].weight", "Its current weight."),
        ("composite[].thresholds.states[].flip_weight", "The weight at which the favoured arm changes, others "
                                                        "held fixed; null when no weight in [-1, 1] changes it."),
        ("composite[].thresholds.states[].effect_per_unit", "How much the difference moves per unit of this "
                                                            "weight."),
        ("composite[].thresholds.states[].favours_above", "The arm favoured when the weight is above flip_weight."),
        ("composite[].thresholds.states[].favours_below", "The arm favoured when the weight is below flip_weight."),
        ("composite[].thresholds.states[].message", "The same in one sentence."),
        ("composite[].acceptability", "Along the index, the share of weight draws (combined with model "
                                      "uncertainty) under which each arm comes out ahead (null when not "
                                      "computed)."),
        ("composite[].acceptability[].x", "Index value."),
        ("composite[].acceptability[].first", "Share of draws favouring the first arm."),
        ("composite[].acceptability[].second", "Share of draws favouring the second arm."),
    ]),
    ("break_even", "Break-even points (the same fields wherever a break-even appears)", [
        ("results[].break_even[].x", "The index value where first minus second equals the margin."),
        ("results[].break_even[].predicted", "Along a cross-fitted prognostic index only: x as the model's "
         "absolute prediction (e.g. predicted risk of the event by the horizon; see index_info.prognostic.predicted)."),
        ("results[].break_even[].predicted_ci", "The interval's ends as that prediction (null where open)."),
        ("results[].break_even[].x_percentile", "The cohort percentile of x (the share of the cohort's index "
                                                "values below it, ties counted half)."),
        ("results[].break_even[].ci", "Its interval [low, high]; null ends are unbounded. For two_rays the set "
                                      "is everything up to low and everything from high."),
        ("results[].break_even[].interval", "The method: fieller (a straight line on the model's scale, zero "
                                            "margin), test-inversion (every other analytic case: the stretch where "
                                            "the pointwise band holds the margin), delta (only when [analysis] "
                                            "curved_interval = \"delta\") or bootstrap-percentile (rubin-fieller "
                                            "or rubin-test-inversion in imputation rows)."),
        ("results[].break_even[].interval_shape", "finite, unbounded_below, unbounded_above, unbounded or "
                                                  "two_rays."),
        ("results[].break_even[].extrapolated", "True when the point lies outside the observed index range."),
        ("results[].break_even[].favours_below", "The arm favoured just below the point."),
        ("results[].break_even[].favours_above", "The arm favoured just above the point."),
        ("results[].break_even[].no_root_share", "Bootstrap only: share of replicates with no break-even near "
                                                 "this one (counted as beyond the searched range); else null."),
        ("results[].break_even[].coverage", "Coverage of this interval method measured by simulation, a "
                                            "proportion, or null when not measured."),
        ("results[].break_even[].coverage_n", "The simulated cohort size that coverage comes from."),
        ("results[].break_even[].approximate", "True when the measured coverage lies outside 93.5-96.5%."),
        ("results[].break_even[].df", "Imputation rows: degrees of freedom from Rubin's rules."),
        ("results[].break_even[].missing_information", "Imputation rows: share of the variance due to missing "
                                                       "data."),
        ("results[].break_even[].per_imputation", "Imputation rows: the break-even point in each imputed "
                                                  "cohort."),
    ]),
    ("curve", "Curve points", [
        ("results[].curve[].x", "Index value."),
        ("results[].curve[].first", "The first arm's measure (as the outcome defines it, not flipped)."),
        ("results[].curve[].second", "The second arm's measure."),
        ("results[].curve[].difference", "First minus second, oriented so that higher is better."),
        ("results[].curve[].difference_ci", "Interval of the difference (the band named by regions_band)."),
        ("results[].curve[].first_ci", "Pointwise interval of the first arm's measure."),
        ("results[].curve[].second_ci", "Pointwise interval of the second arm's measure."),
        ("results[].curve[].randomised_sparse", "True where randomised patients are few."),
    ]),
    ("region", "Regions", [
        ("results[].clear_difference[].from", "Where the region starts on the index."),
        ("results[].clear_difference[].to", "Where it ends."),
        ("results[].clear_difference[].favours", "The arm the difference clearly favours there."),
    ]),
    ("index_info", "Index information", [
        ("results[].index_info.kind", "column, formula or prognostic."),
        ("results[].index_info.label", "The index's readable name."),
        ("results[].index_info.units", "Its units, or null."),
        ("results[].index_info.discrete", "True when the index takes whole levels only (e.g. a frailty scale)."),
        ("results[].index_info.bounds", "The values the index can take, [low, high], as the spec declares them (e.g. "
         "[1, 9] for a 1-9 scale), or null; interval words cut a break-even interval to them."),
        ("results[].index_info.percentiles", "Cohort percentiles of the index, by percentile (5, 25, 50, 75, 95)."),
        ("results[].index_info.prognostic", "Prognostic indices only: the cross-fitted model behind the index."),
        ("results[].index_info.about", "Prognostic indices only: one sentence saying the index is a score fitted from "
         "named measurements and whether the intervals include the uncertainty of fitting it (only bootstrap "
         "intervals with refit_index = true do)."),
        ("results[].index_info.prognostic.outcome", "The outcome it predicts."),
        ("results[].index_info.prognostic.model", "The model (Cox, proportional odds, logistic or linear)."),
        ("results[].index_info.prognostic.scale", "The scale of the index (e.g. log hazard)."),
        ("results[].index_info.prognostic.fit_on", "second (fitted on the second arm) or all."),
        ("results[].index_info.prognostic.folds", "Number of cross-fitting folds."),
        ("results[].index_info.prognostic.seed", "Seed of the fold assignment."),
        ("results[].index_info.prognostic.n_fit", "Patients in the fitting set."),
        ("results[].index_info.prognostic.n_events", "Events in the fitting set (survival), or null."),
        ("results[].index_info.prognostic.coefficients", "The model's coefficients."),
        ("results[].index_info.prognostic.coefficients[].name", "Covariate."),
        ("results[].index_info.prognostic.coefficients[].estimate", "Coefficient."),
        ("results[].index_info.prognostic.coefficients[].se", "Its standard error."),
        ("results[].index_info.prognostic.coefficients[].ci", "Its interval."),
        ("results[].index_info.prognostic.intercept", "The intercept, or null (Cox)."),
        ("results[].index_info.prognostic.centre", "The covariate values the model is centred at, by covariate."),
        ("results[].index_info.prognostic.orientation", "One sentence saying what a higher index means (higher = "
                                                        "worse prognosis)."),
        ("results[].index_info.prognostic.c_index", "Harrell's concordance of the out-of-fold index."),
        ("results[].index_info.prognostic.c_index.estimate", "C."),
        ("results[].index_info.prognostic.c_index.se", "Its standard error."),
        ("results[].index_info.prognostic.c_index.ci", "Its interval."),
        ("results[].index_info.prognostic.c_index.level", "The interval level."),
        ("results[].index_info.prognostic.c_index.comparable_pairs", "Number of comparable pairs."),
        ("results[].index_info.prognostic.c_index.method", "How it was computed."),
        ("results[].index_info.prognostic.calibration_slope", "Calibration slope of the out-of-fold index."),
        ("results[].index_info.prognostic.calibration_slope.estimate", "Slope (1 = well calibrated)."),
        ("results[].index_info.prognostic.calibration_slope.se", "Its standard error."),
        ("results[].index_info.prognostic.calibration_slope.ci", "Its interval."),
        ("results[].index_info.prognostic.calibration_slope.level", "The interval level."),
        ("results[].index_info.prognostic.calibration_slope.method", "How it was computed."),
        ("results[].index_info.prognostic.converged", "Whether every fold model converged."),
        ("results[].index_info.prognostic.method", "The model in one sentence."),
        ("results[].index_info.prognostic.anchor", "What turns the index into the model's absolute prediction: the "
         "index plus this is the log cumulative hazard at the horizon (Cox) or the log odds of a level worse than "
         "the best (proportional odds); 0 where the index already holds its intercept (logistic, linear)."),
        ("results[].index_info.prognostic.sign", "-1 where the index is the model's predictor negated (so that "
         "higher = worse), else 1."),
        ("results[].index_info.prognostic.predicted", "What break_even[].predicted is, in words."),
    ]),
    ("selection", "Selection rows (randomised versus chosen patients, one arm)", [
        ("selection[].outcome", "The outcome's name."),
        ("selection[].index", "The index's name."),
        ("selection[].arm", "The arm compared within."),
        ("selection[].measure", "The measure in words."),
        ("selection[].probability", "True when the measure is a probability (effects are then differences in "
         "probability, said in percentage points)."),
        ("selection[].index_info", "About the index, as results[].index_info (see Index information)."),
        ("selection[].effect", "Selection effect: chosen minus randomised measure in this arm, averaged over the "
                               "index values of this arm's randomised patients."),
        ("selection[].ci", "Its interval."),
        ("selection[].p_value", "Wald test that it is zero."),
        ("selection[].effect_interval", "delta, or bound (assumes perfectly correlated errors along the index, "
                                        "so errs wide)."),
        ("selection[].effect_over", "Which index values the effect is averaged over, in words."),
        ("selection[].varies_with_index_p", "Likelihood-ratio test that the selection effect changes along the "
                                            "index."),
        ("selection[].varies_with_index", "That test's statistic and degrees of freedom."),
        ("selection[].varies_with_index.statistic", "Likelihood-ratio statistic."),
        ("selection[].varies_with_index.df", "Degrees of freedom."),
        ("selection[].randomised_break_even", "Break-even points from randomised patients only."),
        ("selection[].all_break_even", "Break-even points from all patients (the main analysis)."),
        ("selection[].adjusted_break_even", "Break-even points from chosen patients weighted by the propensity "
                                            "model (target: chosen patients)."),
        ("selection[].shift", "All-patient minus randomised-only break-even point."),
        ("selection[].shift_ci", "Its interval."),
        ("selection[].shift_interval", "delta or bootstrap-percentile (null when there is no interval)."),
        ("selection[].shift_replicates", "Bootstrap replicates behind shift_ci, or null."),
        ("selection[].shift_no_root_share", "Share of replicates where a curve had no break-even, or null."),
        ("selection[].n_randomised", "Randomised patients in this arm."),
        ("selection[].n_chosen", "Chosen patients in this arm."),
        ("selection[].balance", "Covariate balance of the chosen patients before and after weighting."),
        ("selection[].balance[].covariate", "Covariate (text covariates as indicator columns)."),
        ("selection[].balance[].smd_before", "Standardised mean difference between the arms before weighting."),
        ("selection[].balance[].smd_after", "The same after weighting."),
        ("selection[].balance[].flag_before", "True when |SMD| > 0.1 before weighting."),
        ("selection[].balance[].flag_after", "True when |SMD| > 0.1 after weighting."),
        ("selection[].adjusted", "The weighting behind adjusted_break_even."),
        ("selection[].adjusted.target", "The population the weights stand for (chosen patients)."),
        ("selection[].adjusted.method", "The weighting in one sentence."),
        ("selection[].adjusted.covariates", "Covariates of the propensity model."),
        ("selection[].adjusted.propensity", "The propensity model of receiving the first arm."),
        ("selection[].adjusted.propensity.intercept", "Its intercept."),
        ("selection[].adjusted.propensity.coefficients", "Its coefficients, by design column."),
        ("selection[].adjusted.truncated_at", "The weights at the truncation percentiles [low, high]."),
        ("selection[].adjusted.n_truncated", "Patients whose weight was truncated."),
        ("selection[].adjusted.n", "Chosen patients weighted, by arm."),
        ("selection[].adjusted.effective_n", "Effective sample size after weighting, by arm."),
        ("selection[].adjusted.note", "What weighting can and cannot fix, in words."),
        ("selection[].e_value", "E-value of the weighted comparison (null when it does not apply, e.g. RMST)."),
        ("selection[].e_value.comparison", "What is compared."),
        ("selection[].e_value.scale", "The scale of the estimate (risk ratio, or standardised difference)."),
        ("selection[].e_value.estimate", "The weighted estimate on that scale, averaged over the chosen patients."),
        ("selection[].e_value.ci", "Its interval."),
        ("selection[].e_value.interval", "delta or bound."),
        ("selection[].e_value.kind", "The conversion to a risk ratio (rr, or_common, hr_common, smd, ...)."),
        ("selection[].e_value.rr", "The estimate as a risk ratio."),
        ("selection[].e_value.rr_ci", "Its interval."),
        ("selection[].e_value.e_value", "The E-value of the estimate."),
        ("selection[].e_value.e_value_ci", "The E-value of the interval limit closest to 1 (1 when the interval "
                                           "includes 1)."),
        ("selection[].e_value.at", "The same at the quartiles of the chosen patients' index values."),
        ("selection[].e_value.at[].x", "Index value."),
        ("selection[].e_value.at[].quantile", "Its quantile (0.25, 0.5, 0.75)."),
        ("selection[].e_value.at[].estimate", "Estimate there."),
        ("selection[].e_value.at[].ci", "Its interval."),
        ("selection[].e_value.at[].kind", "Conversion to a risk ratio."),
        ("selection[].e_value.at[].rr", "As a risk ratio."),
        ("selection[].e_value.at[].rr_ci", "Its interval."),
        ("selection[].e_value.at[].e_value", "E-value of the estimate."),
        ("selection[].e_value.at[].e_value_ci", "E-value of the limit closest to 1."),
        ("selection[].e_value.note", "What an E-value means, in one sentence."),
        ("selection[].curve", "The selection effect along the index."),
        ("selection[].curve[].x", "Index value."),
        ("selection[].curve[].effect", "Chosen minus randomised measure there."),
        ("selection[].curve[].ci", "Its pointwise interval."),
        ("selection[].curve[].randomised_sparse", "True where this arm has fewer randomised patients than "
                                                  "[selection] min_per_window."),
        ("selection[].warnings", "Sentences about this comparison."),
    ]),
    ("pairwise", "Pairwise rows (the whole cohort first, then windows along the index)", [
        ("pairwise[].index", "The index the windows run along."),
        ("pairwise[].window", "null for the whole cohort; else the window."),
        ("pairwise[].window.from", "Lowest index value in the window."),
        ("pairwise[].window.to", "Highest index value in the window."),
        ("pairwise[].window.median", "Median index value in the window."),
        ("pairwise[].window.n_first", "First-arm patients in the window."),
        ("pairwise[].window.n_second", "Second-arm patients in the window."),
        ("pairwise[].n_first", "First-arm patients compared."),
        ("pairwise[].n_second", "Second-arm patients compared."),
        ("pairwise[].priority", "Outcome names in priority order."),
        ("pairwise[].interval", "How the intervals were made: u-statistic (large-sample U-statistic variances, "
                                "when [analysis] interval = \"analytic\"), bootstrap-percentile (patients resampled "
                                "within arm), or null (no intervals)."),
        ("pairwise[].replicates", "Bootstrap replicates (0 for u-statistic intervals)."),
        ("pairwise[].level", "Interval level."),
        ("pairwise[].wins", "Pairs the first-arm patient wins."),
        ("pairwise[].losses", "Pairs the first-arm patient loses."),
        ("pairwise[].ties", "Pairs no outcome separates."),
        ("pairwise[].pairs", "All pairs (first-arm patients x second-arm patients)."),
        ("pairwise[].win_ratio", "Wins / losses."),
        ("pairwise[].win_ratio_ci", "Its interval (u-statistic: delta method on the log scale; null without "
                                    "wins or losses)."),
        ("pairwise[].win_odds", "(Wins + ties / 2) / (losses + ties / 2)."),
        ("pairwise[].win_odds_ci", "Its interval (u-statistic: delta method on the log scale)."),
        ("pairwise[].net_benefit", "(Wins - losses) / pairs."),
        ("pairwise[].net_benefit_ci", "Its interval (u-statistic: normal, kept within -1 to 1)."),
        ("pairwise[].favours", "The arm the net benefit's interval clearly favours, or null."),
        ("pairwise[].by_level", "Wins and losses decided at each priority level."),
        ("pairwise[].by_level[].outcome", "The outcome at this level."),
        ("pairwise[].by_level[].kind", "Its kind."),
        ("pairwise[].by_level[].rule", "How it separates two patients, in words."),
        ("pairwise[].by_level[].wins", "Pairs won at this level."),
        ("pairwise[].by_level[].losses", "Pairs lost at this level."),
        ("pairwise[].by_level[].net_benefit", "Net benefit contributed by this level."),
        ("pairwise[].by_level[].net_benefit_ci", "Its interval."),
        ("pairwise[].by_level[].conditional_on_survival", "True when the outcome is compared only between "
                                                          "survivors."),
        ("pairwise[].warnings", "Sentences (missing values, windows without a difference)."),
    ]),
    ("kaplan_meier", "Kaplan-Meier rows", [
        ("kaplan_meier[].outcome", "The survival outcome's name."),
        ("kaplan_meier[].index", "The index whose bands the curve belongs to; null for all patients."),
        ("kaplan_meier[].arm", "Arm."),
        ("kaplan_meier[].band", "The band of the index (from, to, label); null for all patients."),
        ("kaplan_meier[].band.from", "Band start on the index."),
        ("kaplan_meier[].band.to", "Band end."),
        ("kaplan_meier[].band.label", "The band in words."),
        ("kaplan_meier[].n", "Patients."),
        ("kaplan_meier[].events", "Events."),
        ("kaplan_meier[].steps", "The curve: one step per event time, from time 0."),
        ("kaplan_meier[].steps[].time", "Time."),
        ("kaplan_meier[].steps[].survival", "Kaplan-Meier survival."),
        ("kaplan_meier[].steps[].lower", "Interval low (log-log, Greenwood)."),
        ("kaplan_meier[].steps[].upper", "Interval high."),
        ("kaplan_meier[].at_risk", "Numbers at risk at ticks shared by every curve of the outcome."),
        ("kaplan_meier[].at_risk[].time", "Tick."),
        ("kaplan_meier[].at_risk[].n", "Patients at risk."),
        ("kaplan_meier[].median", "Median survival time and its interval (null where not reached)."),
        ("kaplan_meier[].median.time", "Median time."),
        ("kaplan_meier[].median.ci", "Its interval."),
    ]),
    ("randomised_windows", "Randomised windows (where the randomised patients are)", [
        ("randomised_windows[].index", "The index's name."),
        ("randomised_windows[].windows", "Quantile windows of the index, lowest first."),
        ("randomised_windows[].windows[].from", "Window start on the index."),
        ("randomised_windows[].windows[].to", "Window end."),
        ("randomised_windows[].windows[].n", "Patients per arm and allocation: {arm: {randomised, chosen}}."),
        ("randomised_windows[].windows[].sparse", "Whether either arm has fewer randomised patients than [selection] "
                                        "min_per_window here."),
    ]),
    ("checks", "Checks rows (can the curves be trusted?)", [
        ("checks[].outcome", "The outcome's name."),
        ("checks[].index", "The index's name."),
        ("checks[].kind", "The outcome kind."),
        ("checks[].probability", "Whether the measure is a probability (its scale runs from 0 to 1)."),
        ("checks[].measure", "The measure in words."),
        ("checks[].observed_vs_fitted", "Per arm and band of the index: the observed measure beside the mean "
                                        "fitted value."),
        ("checks[].observed_vs_fitted[].arm", "Arm."),
        ("checks[].observed_vs_fitted[].band_from", "Band start on the index."),
        ("checks[].observed_vs_fitted[].band_to", "Band end."),
        ("checks[].observed_vs_fitted[].n", "Patients in the band."),
        ("checks[].observed_vs_fitted[].observed", "Observed measure (Kaplan-Meier at the horizon, a proportion "
                                                   "or a mean)."),
        ("checks[].observed_vs_fitted[].observed_ci", "Its interval."),
        ("checks[].observed_vs_fitted[].fitted", "Mean fitted value of the same patients."),
        ("checks[].observed_vs_fitted[].levels", "Ordinal outcomes: every level's observed and fitted share."),
        ("checks[].observed_vs_fitted[].levels[].level", "Level."),
        ("checks[].observed_vs_fitted[].levels[].observed", "Observed share."),
        ("checks[].observed_vs_fitted[].levels[].fitted", "Fitted share."),
        ("checks[].calibration", "Per arm: observed band values regressed on fitted ones, and a band chi-square."),
        ("checks[].calibration[].arm", "Arm."),
        ("checks[].calibration[].bands", "Number of bands."),
        ("checks[].calibration[].slope", "Calibration slope (1 ideal)."),
        ("checks[].calibration[].intercept", "Calibration intercept (0 ideal)."),
        ("checks[].calibration[].chi2", "Band chi-square of observed against fitted."),
        ("checks[].calibration[].df", "Its degrees of freedom."),
        ("checks[].calibration[].p_value", "Its p-value."),
        ("checks[].calibration[].max_abs_z", "Largest standardised band residual."),
        ("checks[].calibration[].method", "How it was computed."),
        ("checks[].sliding_window", "Model-free first-minus-second differences in overlapping windows of patients."),
        ("checks[].sliding_window[].from", "Window start on the index."),
        ("checks[].sliding_window[].to", "Window end."),
        ("checks[].sliding_window[].median", "Median index value in the window."),
        ("checks[].sliding_window[].n_first", "First-arm patients in the window."),
        ("checks[].sliding_window[].n_second", "Second-arm patients in the window."),
        ("checks[].sliding_window[].difference", "Observed difference (oriented)."),
        ("checks[].sliding_window[].ci", "Its interval."),
        ("checks[].sliding_window[].model_average", "The model's difference averaged over the window's patients."),
        ("checks[].sliding_window[].model_difference", "The model's difference at the window's median."),
        ("checks[].window", "Window settings."),
        ("checks[].window.patients", "Patients per window."),
        ("checks[].window.step", "Patients the window moves by."),
        ("checks[].effect_modification", "Likelihood-ratio test that the index terms differ between the arms."),
        ("checks[].effect_modification.statistic", "Likelihood-ratio statistic."),
        ("checks[].effect_modification.df", "Degrees of freedom."),
        ("checks[].effect_modification.p_value", "p-value."),
        ("checks[].effect_modification.weak_evidence", "True when the evidence that the difference changes along "
                                                       "the index is weak."),
        ("checks[].effect_modification.sentence", "The result in words."),
        ("checks[].effect_modification.method", "How it was computed."),
        ("checks[].effect_modification.converged", "Whether the restricted model converged."),
        ("checks[].horizon_curve", "Survival outcomes: the break-even point at a grid of horizons."),
        ("checks[].horizon_curve[].horizon", "Horizon."),
        ("checks[].horizon_curve[].break_even", "The break-even point there (the first, if several), or null."),
        ("checks[].horizon_curve[].ci", "Its interval."),
        ("checks[].horizon_curve[].interval", "Its method."),
        ("checks[].horizon_curve[].break_evens", "Every break-even point there."),
        ("checks[].horizon_curve[].favours_throughout", "With no break-even, the arm favoured throughout."),
        ("checks[].horizon_curve[].at_risk_first", "First-arm patients still followed at the horizon."),
        ("checks[].horizon_curve[].at_risk_second", "Second-arm patients still followed at the horizon."),
        ("checks[].horizon_curve[].beyond_follow_up", "True where fewer than 10% of an arm (or fewer than 20 "
                                                      "patients) remain at risk."),
        ("checks[].horizon_curve[].spec_horizon", "True at the spec's own horizon."),
        ("checks[].warnings", "Sentences (poor fit in a band, doubtful model assumptions)."),
    ]),
    ("baseline", "Baseline rows (one per cohort covariate)", [
        ("baseline[].covariate", "Covariate."),
        ("baseline[].binary", "True for a two-valued covariate (shown as a share)."),
        ("baseline[].groups", "Summaries by arm and allocation."),
        ("baseline[].groups[].arm", "Arm."),
        ("baseline[].groups[].allocation", "all patients, randomised or chosen."),
        ("baseline[].groups[].n", "Patients with a value."),
        ("baseline[].groups[].missing", "Patients without a value."),
        ("baseline[].groups[].mean", "Mean (or share)."),
        ("baseline[].groups[].sd", "Standard deviation."),
        ("baseline[].groups[].text", "The summary as shown, e.g. 75 (SD 6.5)."),
        ("baseline[].smd", "Standardised mean differences."),
        ("baseline[].smd[].compare", "What is compared (arm against arm, or chosen against randomised)."),
        ("baseline[].smd[].among", "Among which patients."),
        ("baseline[].smd[].smd", "The standardised mean difference."),
        ("baseline[].smd[].imbalanced", "True when |SMD| > 0.1."),
    ]),
    ("maps", "Map rows (one outcome or composite over the plane of two indices)", [
        ("maps[].indices", "The two index names: across (x), then up (y)."),
        ("maps[].target", "The outcome's name, or \"composite\"."),
        ("maps[].interaction", "True when each arm's model has the product of the two indices."),
        ("maps[].kind", "The outcome kind, or the composite's kind."),
        ("maps[].measure", "The measure in words."),
        ("maps[].margin", "The margin used."),
        ("maps[].level", "The interval level."),
        ("maps[].band", "pointwise."),
        ("maps[].index_info", "About each of the two indices (fields as in Index information)."),
        ("maps[].grid", "The grid: x values (first index) and y values (second index)."),
        ("maps[].grid.x", "Grid values of the first index."),
        ("maps[].grid.y", "Grid values of the second index."),
        ("maps[].difference", "First minus second minus the margin at each grid point, rows along y, columns "
                              "along x; null where the map is blank (outside the patients' hull, or no patient of "
                              "one arm near)."),
        ("maps[].favoured", "The favoured arm at each grid point (null where blank)."),
        ("maps[].clear", "The arm clearly favoured at each grid point (null where not clear or blank)."),
        ("maps[].contour", "The break-even line(s) as lists of points."),
        ("maps[].contour[][].x", "First index value."),
        ("maps[].contour[][].y", "Second index value."),
        ("maps[].n", "Patients per arm."),
        ("maps[].weights", "The composite's weights by level, or null."),
        ("maps[].coefficients", "Each arm's model terms (term, estimate, se), by outcome and arm."),
        ("maps[].methods", "The models and intervals in one sentence."),
        ("maps[].notes", "The composite's caveats."),
        ("maps[].patient", "The patient's point, when one is placed."),
        ("maps[].patient.x", "The patient's first index value."),
        ("maps[].patient.y", "The patient's second index value."),
        ("maps[].patient.difference", "The difference there."),
        ("maps[].patient.ci", "Its interval."),
        ("maps[].patient.favours", "The arm favoured there, or null."),
        ("maps[].patient.clear", "The arm clearly favoured there, or null."),
        ("maps[].patient.covered", "False where the map is blank at the patient's point."),
        ("maps[].warnings", "Sentences (the share of the grid left blank, model notes)."),
    ]),
    ("imputation", "Imputation rows (complete cases beside multiple imputation)", [
        ("imputation[].outcome", "The outcome's name."),
        ("imputation[].index", "The index's name."),
        ("imputation[].m", "Number of imputations."),
        ("imputation[].seed", "Seed of the imputations."),
        ("imputation[].imputed_values", "Values filled in, by column."),
        ("imputation[].complete_case", "The complete-case analysis."),
        ("imputation[].complete_case.n", "Patients per arm."),
        ("imputation[].complete_case.break_even", "Its break-even points."),
        ("imputation[].imputed", "The pooled multiply imputed analysis, or null when nothing was missing."),
        ("imputation[].imputed.n", "Patients per arm."),
        ("imputation[].imputed.break_even", "Pooled break-even points (Rubin's rules)."),
        ("imputation[].imputed.curve", "Pooled curves (curve-point fields)."),
        ("imputation[].note", "The missing-at-random assumption, in words."),
        ("imputation[].method", "How the imputations were made and pooled."),
        ("imputation[].warnings", "Sentences."),
    ]),
    ("evidence", "Evidence rows (where more evidence would change the answer)", [
        ("evidence[].outcome", "The outcome's name, or \"composite\"."),
        ("evidence[].index", "The index's name."),
        ("evidence[].measure", "The measure in words."),
        ("evidence[].kind", "The composite's kind; null for an outcome."),
        ("evidence[].method", "Where the uncertainty comes from: the bootstrap replicates' curves, or the fitted "
                              "models' normal approximation, for which the expected loss has a closed form (the unit "
                              "normal loss integral)."),
        ("evidence[].units", "What per_100 counts: in 100 patients for probabilities, value points or the outcome's "
                             "units per 100 patients otherwise."),
        ("evidence[].threshold", "The value of information worth acting on, per 100 patients in `units` ([evidence] "
                                 "threshold or thresholds); null for an unbounded measure with none stated."),
        ("evidence[].curve", "Along the observed index range: the expected value of perfect information per patient "
                             "(evpi, in the measure's units, margin subtracted) and per 100 patients (per_100)."),
        ("evidence[].curve[].x", "Index value."),
        ("evidence[].curve[].evpi", "Expected loss per patient from choosing by today's estimates instead of the "
                                    "truth: E[max(D, 0)] - max(E[D], 0), D the first-minus-second difference less "
                                    "the margin."),
        ("evidence[].curve[].per_100", "The same per 100 patients."),
        ("evidence[].above_threshold", "Stretches of the index where per_100 exceeds the threshold (from, to)."),
        ("evidence[].above_threshold[].from", "Where the stretch starts."),
        ("evidence[].above_threshold[].to", "Where it ends."),
        ("evidence[].peak", "The index value where the value of information is largest, with its per_100."),
        ("evidence[].peak.x", "Index value."),
        ("evidence[].peak.per_100", "Value of information there, per 100 patients."),
        ("evidence[].population", "The value over a population, each patient treated by their own index value: the "
                                  "mean of the per-patient values over its patients."),
        ("evidence[].population.name", "Which patients: the [target] file's local patients (along the indices it "
                                       "gives), else the cohort."),
        ("evidence[].population.n", "How many patients with a value of this index."),
        ("evidence[].population.evpi", "Mean per-patient value of information."),
        ("evidence[].population.per_100", "The same per 100 patients."),
        ("evidence[].sentence", "One plain sentence: where uncertainty matters most and how much."),
    ]),
]
RESULT_SECTIONS.append(POLICY_SECTION)
RESULT_SECTIONS.append(("reference_check", "Reference check (only with `fulcrum analyse SPEC --check-reference`)", [
    ("reference_check", "Every per-arm model refitted with lifelines (Cox, Weibull) or statsmodels (logistic, linear, "
                        "ordinal) on the same rows, design and weights (explorer/reference_check.py)."),
    ("reference_check.agrees", "true when every model agrees with its reference within the tolerance."),
    ("reference_check.tolerance", "The tolerance of DESIGN.md 2b: |ours - reference| <= absolute + relative x "
                                  "|reference|."),
    ("reference_check.tolerance.absolute", "1e-5."),
    ("reference_check.tolerance.relative", "1e-5."),
    ("reference_check.largest", "The largest differences over every model."),
    ("reference_check.largest.coefficients", "Largest absolute difference of a coefficient."),
    ("reference_check.largest.standard_errors", "Largest absolute difference of a standard error."),
    ("reference_check.largest.predictions", "Largest absolute difference of the outcome's measure along the index."),
    ("reference_check.models", "One row per outcome x index x arm."),
    ("reference_check.models[].outcome", "The outcome."),
    ("reference_check.models[].index", "The index."),
    ("reference_check.models[].arm", "The arm."),
    ("reference_check.models[].model", "cox, weibull, logistic, linear or ordinal."),
    ("reference_check.models[].reference", "The reference fitter, in words."),
    ("reference_check.models[].measure", "The measure compared along the index (survival, rmst, probability, mean...)."),
    ("reference_check.models[].n", "Patients in the fit (positive weight)."),
    ("reference_check.models[].coefficients", "Largest absolute difference of the coefficients (null: not compared)."),
    ("reference_check.models[].standard_errors", "Largest absolute difference of the standard errors (null: not "
                                                 "compared; see note)."),
    ("reference_check.models[].predictions", "Largest absolute difference of the measure at 41 index values over "
                                             "the observed range, covariates held where the model holds them."),
    ("reference_check.models[].tolerance", "The tolerance this model was held to."),
    ("reference_check.models[].tolerance.absolute", "Absolute part."),
    ("reference_check.models[].tolerance.relative", "Relative part."),
    ("reference_check.models[].agrees", "true when every compared number is within the tolerance."),
    ("reference_check.models[].checked", "false when nothing could be compared (a weighted ordinal fit: "
                                         "statsmodels' OrderedModel takes no weights); the note says why."),
    ("reference_check.models[].worst", "Which comparison came closest to (or went past) its tolerance."),
    ("reference_check.models[].note", "Why a comparison was left out or shown without being judged, if one was."),
]))

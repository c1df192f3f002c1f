"""Descriptions of the results document's `policy` rows (rule consequences), read by docs_gen."""
from __future__ import annotations

POLICY_SECTION: tuple[str, str, list[tuple[str, str]]] = (
    "policy", "Policy rows (rule consequences per 100 patients of the target population)", [
        ("policy", "Rule-consequence rows: one per outcome or composite x index x direction (see Policy rows). "
                   "Present with [policy] or [target]; outcomes measured only among survivors are left out."),
        ("policy[].outcome", "The outcome's name, or \"composite\"."),
        ("policy[].composite", "The composite's kind (ordinal, survival_function, quality_adjusted), or null."),
        ("policy[].title", "The outcome's or composite's label."),
        ("policy[].index", "The index the thresholds lie on."),
        ("policy[].direction", "first_below: the first arm when the index is below the threshold, else the second; "
                               "second_below: the reverse."),
        ("policy[].rule", "The rule in words, with t for the threshold."),
        ("policy[].per", "Always 100: values are per 100 patients of the target population."),
        ("policy[].counts_patients", "True when the measure is a probability, so values count patients out of 100 "
                                     "(100 minus the value is the count without the outcome, e.g. deaths by the "
                                     "horizon); otherwise values are totals over 100 patients (e.g. days at home)."),
        ("policy[].units", "Units of a total (e.g. days), or null."),
        ("policy[].higher_is_better", "Whether a higher value is better; the best threshold follows it."),
        ("policy[].interval", "delta (the delta method over the per-arm models, covariance across patients kept), "
                              "bound (perfectly correlated errors along the index assumed: errs wide) or "
                              "bootstrap-percentile (the analysis's bootstrap replicates)."),
        ("policy[].target", "The population the rule is applied to."),
        ("policy[].target.name", "Its name ([target] label, the file name, or \"the cohort\")."),
        ("policy[].target.n", "Its number of patients."),
        ("policy[].target.source", "cohort (the analysed cohort) or file (the [target] file)."),
        ("policy[].curve", "One point per candidate threshold: the first puts nobody below, the last everybody, "
                           "so the ends are the blanket rules."),
        ("policy[].curve[].threshold", "The threshold t (below t means strictly below)."),
        ("policy[].curve[].first_share", "Patients per 100 given the first arm by the rule."),
        ("policy[].curve[].value", "Expected value per 100 patients under the rule: 100 x the mean over the target "
                                   "patients of each one's prediction under the arm the rule gives."),
        ("policy[].curve[].ci", "Its interval."),
        ("policy[].all_first", "Everyone given the first arm: value per 100 and interval."),
        ("policy[].all_first.value", "Value per 100."),
        ("policy[].all_first.ci", "Its interval."),
        ("policy[].all_second", "Everyone given the second arm: value per 100 and interval."),
        ("policy[].all_second.value", "Value per 100."),
        ("policy[].all_second.ci", "Its interval."),
        ("policy[].best", "The best threshold in this direction under the stated values."),
        ("policy[].best.threshold", "The threshold with the best value (the lowest of ties)."),
        ("policy[].best.ci", "Interval for the best threshold: percentiles of the best threshold over curves drawn "
                             "from the delta-method normal approximation, or over the bootstrap replicates."),
        ("policy[].best.value", "The best rule's value per 100."),
        ("policy[].best.value_ci", "Its interval."),
        ("policy[].best.first_share", "Patients per 100 given the first arm by the best rule."),
        ("policy[].best.blanket", "True when the best rule gives everyone the same arm."),
        ("policy[].best.gain_over_all_first", "Best rule minus everyone-first, with interval."),
        ("policy[].best.gain_over_all_first.value", "The difference per 100."),
        ("policy[].best.gain_over_all_first.ci", "Its interval."),
        ("policy[].best.gain_over_all_second", "Best rule minus everyone-second, with interval."),
        ("policy[].best.gain_over_all_second.value", "The difference per 100."),
        ("policy[].best.gain_over_all_second.ci", "Its interval."),
        ("policy[].flat_range", "How flat the curve is around the best: the run of thresholds holding the best whose "
                                "value lies within the tolerance of it."),
        ("policy[].flat_range.from", "Lowest threshold of the run."),
        ("policy[].flat_range.to", "Highest threshold of the run."),
        ("policy[].flat_range.tolerance", "The tolerance per 100 ([policy] tolerance)."),
        ("policy[].current_practice", "The allocation the cohort's chosen patients received against the best rule "
                                      "for the same patients; null without an allocation column."),
        ("policy[].current_practice.population", "Who: the chosen patients of the cohort, as treated."),
        ("policy[].current_practice.n", "Their number (with an index value)."),
        ("policy[].current_practice.value", "Expected value per 100 under the allocation they received."),
        ("policy[].current_practice.ci", "Its interval."),
        ("policy[].current_practice.best_rule_threshold", "The best threshold for these patients in this direction."),
        ("policy[].current_practice.best_rule_value", "Its value per 100."),
        ("policy[].current_practice.regret", "Best rule minus current practice, oriented so positive favours the "
                                             "rule (the regret of current practice)."),
        ("policy[].current_practice.regret_ci", "Its interval."),
        ("policy[].current_practice.all_first", "Everyone first, for these patients."),
        ("policy[].current_practice.all_second", "Everyone second, for these patients."),
        ("policy[].current_practice.first_share", "Patients per 100 who received the first arm."),
        ("policy[].current_practice.changed", "Chosen patients per 100 whose arm the best rule would change."),
        ("policy[].current_practice.note", "How to read the regret, including its optimism."),
        ("policy[].break_evens", "Where the arms break even along the index for this outcome or composite (roots of "
                                 "the oriented difference on a fine grid; intervals are in the results and composite "
                                 "rows), with how many of the target population lie below each."),
        ("policy[].break_evens[].x", "The break-even point."),
        ("policy[].break_evens[].target_below", "Target patients per 100 with an index value below it."),
        ("policy[].break_evens[].favours_below", "The arm favoured below it."),
        ("policy[].overlap", "The overlap check of the target population against the cohort along the index."),
        ("policy[].overlap.index", "The index."),
        ("policy[].overlap.n", "Target patients with an index value."),
        ("policy[].overlap.support", "Where both arms have cohort patients: [lowest, highest]."),
        ("policy[].overlap.below", "Target patients below that range."),
        ("policy[].overlap.above", "Target patients above it."),
        ("policy[].overlap.outside", "Below plus above."),
        ("policy[].overlap.warning", "The warning in words, or null."),
        ("policy[].warnings", "Sentences: overlap, missing index inputs, bound intervals, held covariates."),
        ("policy[].levels", "For an outcome with levels: each level's count per 100 under the same rules."),
        ("policy[].levels[].level", "The level."),
        ("policy[].levels[].values", "Its count per 100 at each threshold of the curve."),
        ("policy[].levels[].all_first", "Everyone first: count and interval."),
        ("policy[].levels[].all_first.value", "Count per 100."),
        ("policy[].levels[].all_first.ci", "Its interval."),
        ("policy[].levels[].all_second", "Everyone second: count and interval."),
        ("policy[].levels[].all_second.value", "Count per 100."),
        ("policy[].levels[].all_second.ci", "Its interval."),
        ("policy[].levels[].at_best", "At the best threshold of the row: count and interval."),
        ("policy[].levels[].at_best.value", "Count per 100."),
        ("policy[].levels[].at_best.ci", "Its interval."),
    ])

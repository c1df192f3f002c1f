"""Composites that combine outcomes measured at different times carry a warning (issue 17, item 4).

The time points are those the invented demo spec states itself (a survival horizon of 365 or 182 days, "at six
months" in the function outcome's label and `_6m` in its column); days per month and year are common practice
(30.4375 and 365.25 days).
"""
from __future__ import annotations

import dataclasses

import pytest

from explorer import timepoints as tp
from explorer import values as vl
from explorer.analysis import fit_all


def test_time_points_read_from_horizons_labels_and_columns(demo_spec):
    outcomes = {o.name: o for o in demo_spec.outcomes}
    assert tp.horizon_days(outcomes["alive"]) == 365  # horizon = 365, units = "days" (demo spec)
    assert tp.horizon_days(outcomes["alive_6m"]) == 182
    assert tp.horizon_days(outcomes["function"]) == pytest.approx(6 * 30.4375)  # "Living at home at six months"
    assert tp.stated_days("function_6m") == pytest.approx(6 * 30.4375)
    assert tp.stated_days("Days alive and at home within 180 days") == 180
    assert tp.stated_days("Alive at one year") == 365.25
    assert tp.stated_days("90-day mortality") == 90
    for silent in ("Clinical Frailty Scale", "lactate 2.5 mmol", "days_home", None):
        assert tp.stated_days(silent) is None, silent


def test_mismatch_warns_only_for_different_known_times(demo_spec):
    o = {x.name: x for x in demo_spec.outcomes}
    assert tp.mismatch([o["function"], o["alive_6m"]]) == []  # 182 days and six months: one time point
    warned = tp.mismatch([o["function"], o["alive"]])
    assert len(warned) == 1 and "'Alive at one year' at 1 year" in warned[0] and "6 months" in warned[0]
    unknown = dataclasses.replace(o["function"], label="Function", column="function", name="function")
    assert tp.mismatch([unknown, o["alive"]]) == []  # nothing says when function was measured: no claim made


def test_composite_rows_carry_the_warning_when_horizons_differ(write_case, small_cohort_text):
    same = write_case(small_cohort_text)
    other = write_case(small_cohort_text, edit=(('survival_outcome = "alive_6m"', 'survival_outcome = "alive"'),))
    rows = {}
    for name, spec in (("same", same), ("other", other)):
        spec = dataclasses.replace(spec, indices=spec.indices[:1])
        fs = fit_all(spec)
        summaries = vl.composite_summaries(fs, kinds=["survival_function"])
        rows[name] = vl.composite_rows(fs, summaries)
    assert not any("different times" in w for r in rows["same"] for w in r["warnings"])
    assert all(any("different times" in w for w in r["warnings"]) for r in rows["other"])


@pytest.fixture(scope="module")
def small_cohort_text() -> bytes:
    from explorer import demo

    frame, _ = demo.generate(n=400, seed=3)
    return demo.to_csv_bytes(frame)

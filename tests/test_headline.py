"""Typo-proof indices and the population each headline answer rests on (issue 16, items 4 and 5)."""
from __future__ import annotations

import dataclasses
import json
import warnings

import numpy as np
import pytest
from scipy.optimize import brentq
from spec_texts import column_index, spec_text

from explorer import analysis as an
from explorer import fitting as ft
from explorer import demo
from explorer.errors import FulcrumError

SPEC = spec_text(demo.ARMS, cohort={"id": "pid", "allocation": "allocation"},
                 outcomes=[{"name": "alive", "kind": "survival", "time": "days_followed", "event": "died",
                            "horizon": 365}],
                 indices=[column_index("cfs", bounds=[1, 9])])


def _typo(small_text, row: int = 5, value: str = "99999"):
    frame = small_text.copy()
    frame.loc[row - 1, "cfs"] = value
    return frame


def test_a_value_outside_the_index_bounds_is_refused_with_file_column_and_row(small_text, write_case):
    spec = write_case(_typo(small_text), SPEC)
    with pytest.raises(FulcrumError) as err:
        ft.fit_all(spec)
    e = err.value
    assert e.file == "cohort.csv" and e.column == "cfs" and e.rows == [5] and e.key.endswith(".bounds")
    assert "99999" in e.what and "Correct" in e.hint


def test_bounds_must_be_low_then_high(small_text, write_case):
    with pytest.raises(FulcrumError, match="low below high"):
        write_case(small_text, SPEC.replace("bounds = [1, 9]", "bounds = [9, 1]"))


def _lifelines_break_even(frame, arms, horizon=365.0):
    """Break-even of per-arm Cox survival at the horizon, from lifelines (reference library) refits."""
    from lifelines import CoxPHFitter

    fits = {}
    for arm in arms:
        d = frame[frame["arm"] == arm][["days_followed", "died", "cfs"]].astype(float)
        fits[arm] = CoxPHFitter().fit(d, "days_followed", "died")

    def diff(x: float) -> float:
        s = [float(fits[a].predict_survival_function(
            __import__("pandas").DataFrame({"cfs": [x]}), times=[horizon]).iloc[0, 0]) for a in arms]
        return s[0] - s[1]
    return brentq(diff, 1.0, 9.0, xtol=1e-8)


def test_without_bounds_a_far_out_value_is_named_with_the_break_even_without_it(small_text, write_case, capfd):
    spec = write_case(_typo(small_text), SPEC.replace("bounds = [1, 9]\n", ""))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = an.analyse(spec)
    # numerical warnings (overflow from the typo) never reach the terminal or the warnings machinery
    assert not [w for w in caught if issubclass(w.category, RuntimeWarning)]
    assert "RuntimeWarning" not in capfd.readouterr().err
    doc = res.document
    assert any(w.startswith("Numerical warning") and "overflow" in w for w in doc["warnings"])  # caught, reported
    assert any("row 5" in w and "far outside the bulk" in w and "Tukey" in w for w in doc["warnings"])
    row = doc["results"][0]
    said = [w for w in row["warnings"] if "without them" in w]
    assert len(said) == 1
    # the break-even without the far-out patient matches lifelines refits on the cohort without that row
    # (reference library: lifelines CoxPHFitter, Breslow baseline)
    clean = small_text.drop(index=4)
    clean = clean.assign(cfs=clean["cfs"].astype(float), days_followed=clean["days_followed"].astype(float),
                         died=clean["died"].astype(float))
    x_ref = _lifelines_break_even(clean, ["laparotomy", "non-operative"])
    assert f"without them {x_ref:.3g}" in said[0]


def test_default_population_falls_back_to_all_with_a_warning_when_randomised_patients_are_few(small_text,
                                                                                              write_case):
    spec = write_case(small_text, SPEC)
    fs = ft.fit_all(spec)
    n_rand = small_text[small_text["allocation"] == "randomised"].groupby("arm").size()
    assert n_rand.min() < 50  # the 400-patient cohort holds too few for the randomised default
    assert fs.population.name == "all" and fs.population.chosen_by == "default"
    assert any("pool randomised and chosen patients" in w for w in fs.notes)


def test_population_randomised_fits_only_randomised_patients_and_names_them(small_text, write_case):
    spec = write_case(small_text, SPEC + '\n[analysis]\npopulation = "randomised"\n')
    res = an.analyse(spec)
    row = res.document["results"][0]
    assert row["population"] == "randomised"
    expected = small_text[small_text["allocation"] == "randomised"].groupby("arm").size().to_dict()
    assert row["n"] == {a: expected[a] for a in spec.cohort.arms}
    assert res.document["population"]["population"] == "randomised"
    assert any("few randomised patients" in w for w in res.document["warnings"])  # under 50 in an arm
    # the same break-even as the selection analysis's randomised-only fit of the same patients
    sel = next(r for r in res.document["selection"] if r["outcome"] == "alive")
    assert [b["x"] for b in row["break_even"]] == [b["x"] for b in sel["randomised_break_even"]]


def test_population_needs_what_it_rests_on(small_text, write_case):
    with pytest.raises(FulcrumError, match="selection.covariates"):
        write_case(small_text, SPEC + '\n[analysis]\npopulation = "all_weighted"\n')
    with pytest.raises(FulcrumError, match="not an option"):
        write_case(small_text, SPEC + '\n[analysis]\npopulation = "everyone"\n')


def _covers(b: dict, truth: float) -> bool:
    lo, hi = b["ci"]
    if b["interval_shape"] == "two_rays":
        return truth <= lo or truth >= hi
    return (lo is None or lo <= truth) and (hi is None or truth <= hi)


def _demo_subset(demo_spec, population=None):
    spec = dataclasses.replace(
        demo_spec, outcomes=tuple(o for o in demo_spec.outcomes if o.name in ("alive", "function")),
        indices=tuple(ix for ix in demo_spec.indices if ix.name == "cfs"), values=None, pairwise=None, maps=(),
        analysis=dataclasses.replace(demo_spec.analysis, checks=False, population=population))
    return spec


def test_demo_default_headline_intervals_cover_the_generating_break_evens(demo_spec, demo_dir):
    truth = json.loads((demo_dir / "truth.json").read_text())["break_even"]
    fs = ft.fit_all(_demo_subset(demo_spec))
    assert fs.population.name == "randomised"
    for outcome, key in (("alive", "survival_365"), ("function", "favourable_function_6m")):
        s = ft.analytic_summary(fs.pair(outcome, "cfs"), fs.spec)
        assert len(s.break_even) == 1
        b = s.break_even[0].to_json()
        assert _covers(b, truth[key]), (outcome, b, truth[key])
    # the pooled all-patient interval for one-year survival misses it (the defect the default avoids)
    everyone = ft.analytic_summary(fs.everyone("alive", "cfs"), fs.spec).break_even[0].to_json()
    assert not _covers(everyone, truth["survival_365"])


def test_a_pooled_headline_carries_the_randomised_break_even_where_chosen_patients_differ(demo_spec):
    res = an.analyse(_demo_subset(demo_spec, population="all"))
    row = next(r for r in res.document["results"] if r["outcome"] == "function")
    assert row["population"] == "all"
    sel = next(r for r in res.document["selection"] if r["outcome"] == "function")
    assert sel["varies_with_index_p"] < 0.05 or sel["p_value"] < 0.05
    assert row["randomised_break_even"] == sel["randomised_break_even"]
    assert any("chosen patients differ" in w and "Randomised patients only give" in w for w in row["warnings"])


BINARY = """\
[cohort]
path = "cohort.csv"
arm = "arm"
arms = ["laparotomy", "non-operative"]
allocation = "allocation"

[[outcomes]]
name = "died"
kind = "binary"
column = "died"

[[indices]]
name = "cfs"
column = "cfs"

[selection]
covariates = ["age", "albumin"]

[analysis]
population = "{population}"
"""


def _numbers(small_text):
    return small_text.assign(**{c: small_text[c].astype(float) for c in ("cfs", "age", "albumin", "died")})


def test_all_weighted_fits_match_statsmodels_weighted_glm_with_sandwich(small_text, write_case):
    import statsmodels.api as sm

    from explorer.selection import propensity_weights

    spec = write_case(small_text, BINARY.format(population="all_weighted"))
    fs = ft.fit_all(spec)
    pf = fs.pair("died", "cfs")
    assert pf.population == "all_weighted"
    d = _numbers(small_text)
    wt = propensity_weights(d[["age", "albumin"]], ("age", "albumin"), (d["arm"] == "laparotomy").to_numpy())
    for arm in spec.cohort.arms:
        m = (d["arm"] == arm).to_numpy()
        # Reference: statsmodels GLM Binomial with the same stabilised weights as var_weights, HC0 sandwich
        ref = sm.GLM(d.loc[m, "died"], sm.add_constant(d.loc[m, "cfs"]), family=sm.families.Binomial(),
                     var_weights=wt.weights[m]).fit(cov_type="HC0", tol=1e-12)
        assert pf.fits[arm].params_ == pytest.approx(ref.params.to_numpy(), abs=1e-5, rel=1e-5)
        assert np.sqrt(np.diag(pf.fits[arm].cov_)) == pytest.approx(ref.bse.to_numpy(), rel=1e-4)


def test_all_adjusted_fits_match_statsmodels_logit_with_the_covariates(small_text, write_case):
    import statsmodels.api as sm

    spec = write_case(small_text, BINARY.format(population="all_adjusted"))
    fs = ft.fit_all(spec)
    pf = fs.pair("died", "cfs")
    assert pf.population == "all_adjusted" and pf.outcome.adjust == ("age", "albumin")
    d = _numbers(small_text)
    for arm in spec.cohort.arms:
        m = (d["arm"] == arm).to_numpy()
        # Reference: statsmodels Logit of died on cfs, age and albumin in the arm
        ref = sm.Logit(d.loc[m, "died"], sm.add_constant(d.loc[m, ["cfs", "age", "albumin"]])).fit(disp=0, tol=1e-12)
        assert pf.fits[arm].params_ == pytest.approx(ref.params.to_numpy(), abs=1e-5, rel=1e-5)

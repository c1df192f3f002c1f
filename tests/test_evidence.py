"""Value of information along the index (explorer/evidence.py) and the study planner (explorer/planner.py).

Outside checks: the unit normal loss integral against its published table values and scipy's numerical
integration (Raiffa and Schlaifer 1961); Monte Carlo against the closed form; the planner's predicted interval width
against the width realised on cohorts simulated from a closed-form truth.
"""
from __future__ import annotations

import json

import jsonschema
import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats
from scipy.special import expit
from spec_texts import binary, spec_text

from explorer import analysis as an
from explorer import cli
from explorer import evidence as ev
from explorer import fitting as ft
from explorer import planner as pl
from explorer import results as res
from explorer.errors import FulcrumError
from explorer.spec import parse_spec_text


# ---- the closed form ---------------------------------------------------------------------------------
@pytest.mark.parametrize("k, table", [(0.0, 0.3989), (0.5, 0.1978), (1.0, 0.0833), (1.5, 0.0293), (2.0, 0.0085)])
def test_unit_normal_loss_matches_published_table(k, table):
    # unit normal loss integral L(k) = phi(k) - k (1 - Phi(k)), tabulated in Raiffa & Schlaifer (1961), Applied
    # Statistical Decision Theory, and in most decision-analysis texts (values to 4 places: memory), and checked
    # here against scipy's numerical integration of E[max(Z - k, 0)]
    assert ev.unit_normal_loss(np.array([k]))[0] == pytest.approx(table, abs=6e-5)
    numeric, _ = integrate.quad(lambda z: (z - k) * stats.norm.pdf(z), k, np.inf)
    assert ev.unit_normal_loss(np.array([k]))[0] == pytest.approx(numeric, abs=1e-10)


@pytest.mark.parametrize("mean, sd", [(0.0, 1.0), (0.3, 0.2), (-0.05, 0.1), (2.0, 0.5)])
def test_evpi_of_a_normal_net_benefit_is_the_expected_gain_from_knowing(mean, sd):
    # EVPI = E[max(D, 0)] - max(E D, 0) for a two-way choice (Raiffa & Schlaifer 1961), by scipy integration
    numeric, _ = integrate.quad(lambda d: max(d, 0.0) * stats.norm.pdf(d, mean, sd), mean - 12 * sd, mean + 12 * sd,
                                points=[0.0])
    assert ev.evpi_normal(np.array([mean]), np.array([sd]))[0] == pytest.approx(numeric - max(mean, 0.0), abs=1e-9)


def test_draws_agree_with_the_closed_form_and_vanish_when_one_arm_always_wins():
    rng = np.random.default_rng(3)
    mean, sd = np.array([0.0, 0.1, -0.2]), np.array([0.1, 0.1, 0.3])
    draws = mean + sd * rng.standard_normal((200_000, 3))
    # Monte Carlo error of the mean of max(D, 0) is below sd / sqrt(n) ~ 7e-4
    assert ev.evpi_draws(draws) == pytest.approx(ev.evpi_normal(mean, sd), abs=2e-3)
    # one arm better in every draw: knowing the truth cannot change the choice (common practice)
    assert np.all(ev.evpi_draws(np.abs(draws) + 0.01) == 0.0)
    assert np.all(ev.evpi_draws(-np.abs(draws) - 0.01) == 0.0)
    assert ev.evpi_normal(np.array([0.5]), np.array([0.0]))[0] == 0.0


# ---- on an analysis ----------------------------------------------------------------------------------


def _spec(**analysis) -> str:
    """A binary outcome y along a column index x, arms alpha and beta, with [evidence] at threshold 0.5."""
    return spec_text(("alpha", "beta"), outcomes=[binary("y")], indices=["x"],
                     analysis={"seed": 5, "workers": 1, **analysis}, evidence={"threshold": 0.5})


# first arm logit -2 + 0.4x, second 2 - 0.4x: equal at x = 5 (closed form)
LINES = {"alpha": (-2.0, 0.4), "beta": (2.0, -0.4)}


def _cohort(rng, n):
    rows = []
    for arm, (a, b) in LINES.items():
        x = rng.uniform(0.0, 10.0, n // 2)
        rows.append(pd.DataFrame({"arm": arm, "x": x, "y": (rng.random(len(x)) < expit(a + b * x)).astype(int)}))
    return pd.concat(rows, ignore_index=True)


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    f = tmp_path_factory.mktemp("evidence")
    _cohort(np.random.default_rng(17), 1200).to_csv(f / "cohort.csv", index=False)
    return f


def test_evidence_rows_in_the_document_follow_the_schema_and_the_closed_form(folder):
    spec = parse_spec_text(_spec(), base_dir=folder)
    result = an.analyse(spec)
    doc = result.document
    jsonschema.validate(json.loads(res.dumps(doc)), res.schema())
    (row,) = doc["evidence"]
    assert row["method"].startswith("normal") and row["units"] == "in 100 patients"
    pf = result.fitset.pair("y", "x")
    xs = np.array([p["x"] for p in row["curve"]])
    first, second = pf.fits["alpha"], pf.fits["beta"]
    d = first.measure(xs) - second.measure(xs)
    sd = np.sqrt(first.measure_var(xs) + second.measure_var(xs))
    # the same closed form, from the fitted models directly (unit normal loss integral)
    assert np.allclose([p["evpi"] for p in row["curve"]], sd * ev.unit_normal_loss(np.abs(d) / sd), rtol=1e-6,
                       atol=1e-9)
    # largest where the arms are hardest to tell apart: near the break-even
    assert abs(row["peak"]["x"] - doc["results"][0]["break_even"][0]["x"]) < 0.5
    # the population's value is the mean of its patients' values (each treated by their own index value)
    x_cohort = np.asarray(result.fitset.indices["x"].values, float)
    expected = np.mean(np.interp(x_cohort, xs, [p["evpi"] for p in row["curve"]]))
    assert row["population"]["evpi"] == pytest.approx(expected, rel=1e-6)
    assert row["population"]["n"] == 1200
    assert all(p["per_100"] > 0.5 for p in row["curve"] if row["above_threshold"][0]["from"] <= p["x"]
               <= row["above_threshold"][0]["to"])
    assert "in 100 patients" in row["sentence"]
    text = cli.summary_table(doc)
    assert "Where more evidence would change the answer" in text


def test_evidence_uses_bootstrap_replicates_when_the_analysis_does(folder):
    spec = parse_spec_text(_spec(interval="bootstrap", replicates=60), base_dir=folder)
    result = an.analyse(spec)
    (row,) = result.document["evidence"]
    assert row["method"] == "bootstrap replicates"
    diffs, _, _ = ft.pair_curves(result.fitset.pair("y", "x"), result.replicates)
    D = np.array(diffs)
    expected = np.maximum(D, 0).mean(axis=0) - np.maximum(D.mean(axis=0), 0)
    grid = ft.grid_for(result.fitset.pair("y", "x"), spec.analysis.grid)
    keep = ft.in_range(result.fitset.pair("y", "x"), grid)
    assert np.allclose([p["evpi"] for p in row["curve"]], np.maximum(expected[keep], 0), atol=1e-7)


# ---- the planner -------------------------------------------------------------------------------------
def _width_of(frame, tmp_path):
    frame.to_csv(tmp_path / "cohort.csv", index=False)
    spec = parse_spec_text(_spec(), base_dir=tmp_path)
    return pl._interval(ft.fit_all(spec).pair("y", "x"), spec, 5.0, None)[0]


@pytest.mark.slow
def test_planner_predicts_the_width_realised_at_that_size(folder, tmp_path):
    """The median width the planner predicts for 1,200 + 1,200 patients agrees within 10% with the median width
    realised on cohorts of 2,400 simulated from the closed-form truth (invented data, truth exact)."""
    spec = parse_spec_text(_spec(), base_dir=folder)
    fs = ft.fit_all(spec)
    doc = pl.plan_study(fs, "y", "x", pl.Target(width=1.0), sizes=(1200,), simulations=40,
                        strategies=("whole_range",))
    predicted = doc["rows"][0]["width"]
    rng = np.random.default_rng(99)
    realised = np.median([_width_of(_cohort(rng, 2400), tmp_path) for _ in range(40)])
    assert predicted == pytest.approx(realised, rel=0.10), (predicted, realised)
    # more patients never widen the median interval, and the document says what it assumed
    assert doc["today"]["width"] > predicted
    assert doc["cautions"] and "randomised 1:1" in doc["method"]


def test_planner_strategies_and_refusals(folder):
    spec = parse_spec_text(_spec(), base_dir=folder)
    fs = ft.fit_all(spec)
    doc = pl.plan_study(fs, "y", "x", pl.Target(chance=0.8, at=8.0), sizes=(100, 400), simulations=20)
    assert [r["strategy"] for r in doc["rows"]] == [s for s in pl.STRATEGIES for _ in (100, 400)]
    assert all(0 <= r["chance"] <= 1 and r["simulations"] == 20 for r in doc["rows"])
    # recruiting around the break-even draws patients near it (weights on the quarter of the cohort nearest)
    x = np.concatenate([fs.pair("y", "x").data[a].x for a in ("alpha", "beta")])
    w = pl.strategy_weights(x, None, 5.0)
    assert all(abs(v.sum() - 1) < 1e-9 for v in w.values())
    assert np.all(np.abs(x[w["around_break_even"] > 0] - 5.0) <= np.quantile(np.abs(x - 5.0), 0.25) + 1e-12)
    with pytest.raises(FulcrumError, match="one target"):
        pl.plan_study(fs, "y", "x", pl.Target(), sizes=(100,), simulations=20)
    with pytest.raises(FulcrumError, match="no outcome"):
        pl.plan_study(fs, "z", "x", pl.Target(width=1.0), sizes=(100,), simulations=20)


def test_plan_command_writes_its_document(folder, tmp_path, capsys):
    out = tmp_path / "plan.json"
    (folder / "spec.toml").write_text(_spec())
    code = cli.main(["plan", str(folder / "spec.toml"), "--target-width", "1.5", "--sizes", "200",
                     "--simulations", "20", "--json", str(out), "--quiet"])
    assert code == 0
    doc = json.loads(out.read_text())
    jsonschema.validate(doc, pl.plan_schema())
    assert doc["cautions"] and doc["rows"][0]["new_patients"] == 200
    assert cli.main(["plan", str(folder / "spec.toml"), "--target-chance", "1.5", "--at", "x=5"]) == 2
    assert cli.main(["plan", str(folder / "spec.toml"), "--target-chance", "0.8", "--at", "nope"]) == 2
    assert "fulcrum:" in capsys.readouterr().err


# ---- the app page ------------------------------------------------------------------------------------
@pytest.mark.slow
def test_more_evidence_page_shows_the_engine_sentence_and_plans(monkeypatch):
    # Reference: the engine's own evidence rows for the app's analysis (explorer.evidence.evidence_rows)
    from pathlib import Path

    from streamlit.testing.v1 import AppTest

    app = Path(__file__).resolve().parents[1] / "pages" / "app.py"
    at = AppTest.from_file(str(app), default_timeout=300)
    at.run()
    at.switch_page("page_evidence.py").run()
    assert not at.exception, [e.value for e in at.exception]
    assert not at.error, [e.value for e in at.error]
    ws = at.session_state["workspace"]
    result = ws.result(True)
    rows = result.document.get("evidence") or ev.evidence_rows(result.fitset, result.composite, result.replicates)
    first = [r for r in rows if r["index"] == ws.spec.indices[0].name][0]
    shown = "\n".join(str(m.value) for m in at.markdown)
    assert first["sentence"].split(":")[0] in shown
    at.select_slider[0].set_value(20).run()
    at.button[0].click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert len(at.dataframe) >= 2  # the evidence table and the plan table


def test_the_population_value_is_taken_over_the_target_patients_when_the_spec_names_them(folder):
    # local patients concentrated near the break-even: their mean value of information is the mean of the curve at
    # their own index values (standardisation over the target file; Hernan & Robins, What If, ch. 13)
    local = pd.DataFrame({"x": np.linspace(4.0, 6.0, 41)})
    local.to_csv(folder / "local.csv", index=False)
    text = _spec() + '\n[target]\npath = "local.csv"\nlabel = "our patients"\n'
    spec = parse_spec_text(text, base_dir=folder)
    (row,) = an.analyse(spec).document["evidence"]
    xs = np.array([p["x"] for p in row["curve"]])
    expected = np.mean(np.interp(local["x"], xs, [p["evpi"] for p in row["curve"]]))
    assert row["population"]["name"] == "our patients" and row["population"]["n"] == 41
    assert row["population"]["evpi"] == pytest.approx(expected, rel=1e-6)
    assert "our patients (41 patients)" in row["sentence"]

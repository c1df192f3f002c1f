"""Two-index decision maps checked against statsmodels fits, closed-form truths and the one-index analysis."""
from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from spec_texts import binary, spec_text
from statsmodels.miscmodels.ordinal_model import OrderedModel

from explorer import analysis as an
from explorer import fitting as ft
from explorer import charts_maps
from explorer import maps
from explorer.errors import FulcrumError
from explorer.spec import MapSpec, load_spec

ARMS = ("alpha", "beta")
LEVELS = ("well", "some_help", "much_help", "dead")
WEIGHTS = {"well": 1.0, "some_help": 0.7, "much_help": 0.3, "dead": 0.0}
SPEC = spec_text(ARMS, outcomes=[binary("event"), {"name": "state", "kind": "ordinal", "column": "state",
                                                   "levels": list(LEVELS)}],
                 indices=["a", "b"], values={"outcome": "state", "weights": WEIGHTS},
                 maps=[{"indices": ["a", "b"], "target": "event"}])


def _fitset(tmp_path: Path, frame: pd.DataFrame) -> ft.FitSet:
    frame.to_csv(tmp_path / "cohort.csv", index=False)
    (tmp_path / "spec.toml").write_text(SPEC, encoding="utf-8")
    return ft.fit_all(load_spec(tmp_path / "spec.toml"))


def _ordinal(rng: np.random.Generator, eta: np.ndarray, cuts: tuple[float, ...]) -> np.ndarray:
    """Proportional odds draws, P(Y <= k) = expit(cut_k - eta), levels best first."""
    cum = 1 / (1 + np.exp(-(np.asarray(cuts)[None, :] - eta[:, None])))
    return (rng.random(len(eta))[:, None] > cum).sum(axis=1)


def _logit_cohort(rng: np.random.Generator, n: int, coef: dict[str, tuple[float, ...]],
                  b_of: Callable[[np.ndarray], np.ndarray] | None = None) -> pd.DataFrame:
    """Per arm: a, b uniform on [0, 10], event ~ Bernoulli(expit(c0 + c1 a + c2 b + c3 a b)), an ordinal state."""
    parts = []
    for arm in ARMS:
        a = rng.uniform(0, 10, n)
        b = rng.uniform(0, 10, n) if b_of is None else b_of(a)
        c = coef[arm] + (0.0,) * (4 - len(coef[arm]))
        eta = c[0] + c[1] * a + c[2] * b + c[3] * a * b
        event = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(int)
        state = _ordinal(rng, 0.3 * a - 0.2 * b + (0.4 if arm == "alpha" else 0.0), (-0.5, 0.8, 2.0))
        parts.append(pd.DataFrame({"arm": arm, "a": a, "b": b, "event": event,
                                   "state": np.asarray(LEVELS)[state]}))
    return pd.concat(parts, ignore_index=True)


def _distance_to_line(points: list[dict], c0: float, ca: float, cb: float) -> np.ndarray:
    return np.array([abs(c0 + ca * p["x"] + cb * p["y"]) / math.hypot(ca, cb) for p in points])


# ------------------------------------------------------------------------------------------
# Against the one-index analysis, statsmodels and closed-form truths
# ------------------------------------------------------------------------------------------
def test_second_index_without_effect_gives_a_vertical_contour_at_the_one_index_break_even(tmp_path):
    # Each patient appears twice, with b = +u and b = -u: the likelihood is symmetric in b's coefficient, so
    # its maximum is exactly 0 and the two-index model is the one-index model (no interaction fitted).
    # References: the break-even point explorer.fitting finds along a alone, and the closed-form root
    # -(c0_alpha - c0_beta) / (c1_alpha - c1_beta) of statsmodels Logit fits along a alone.
    rng = np.random.default_rng(7)
    base = _logit_cohort(rng, 1500, {"alpha": (1.0, -0.3), "beta": (-0.5, -0.05)})
    u = rng.uniform(0, 1, len(base))
    frame = pd.concat([base.assign(b=u), base.assign(b=-u)], ignore_index=True)
    fs = _fitset(tmp_path, frame)
    one = ft.analytic_summary(fs.pair("event", "a"), fs.spec)
    assert len(one.break_even) == 1
    x0 = one.break_even[0].x
    sm_fit = {arm: sm.Logit(g["event"].to_numpy(float), sm.add_constant(g["a"].to_numpy())).fit(
        disp=0, method="newton", tol=1e-12).params for arm, g in base.groupby("arm")}
    root = -(sm_fit["alpha"][0] - sm_fit["beta"][0]) / (sm_fit["alpha"][1] - sm_fit["beta"][1])
    assert x0 == pytest.approx(root, abs=1e-5, rel=1e-5)

    model = maps.prepare_map(fs, MapSpec(("a", "b"), "event"))
    for fit in model.anchor.fits.values():
        assert abs(fit.params_[2]) < 1e-8  # b's coefficient
    row = maps.map_row(model)
    step = row["grid"]["x"][1] - row["grid"]["x"][0]
    assert len(row["contour"]) == 1
    line = row["contour"][0]
    xs, ys = [p["x"] for p in line], [p["y"] for p in line]
    assert max(abs(x - x0) for x in xs) < 0.25 * step
    assert min(ys) == pytest.approx(min(row["grid"]["y"]), abs=0.05) and max(ys) == pytest.approx(
        max(row["grid"]["y"]), abs=0.05)
    favoured = np.array(row["favoured"], dtype=object)
    gx = np.array(row["grid"]["x"])
    assert set(favoured[:, gx < x0 - step].ravel()) - {None} == {"alpha"}
    assert set(favoured[:, gx > x0 + step].ravel()) - {None} == {"beta"}


def test_additive_logistic_contour_lies_near_the_true_line(tmp_path):
    # Closed-form truth: per-arm logits c0 + c1 a + c2 b, so the arms break even on the line
    # (0.25 + 0.25) + (-0.25 + 0.05) a + (0.15 - 0.05) b = 0, i.e. a = 2.5 + 0.5 b.
    rng = np.random.default_rng(11)
    coef = {"alpha": (0.25, -0.25, 0.15), "beta": (-0.25, -0.05, 0.05)}
    fs = _fitset(tmp_path, _logit_cohort(rng, 20000, coef))
    model = maps.prepare_map(fs, MapSpec(("a", "b"), "event"))
    row = maps.map_row(model)
    pts = [p for line in row["contour"] for p in line]
    assert len(pts) > 30
    c0, ca, cb = 0.5, -0.2, 0.1
    dist = _distance_to_line(pts, c0, ca, cb)
    assert dist.max() < 1.0 and dist.mean() < 0.3
    # on the probability scale: the true difference at each contour point is within 4 of the map's own
    # standard errors of zero
    x, y = np.array([p["x"] for p in pts]), np.array([p["y"] for p in pts])
    _, var = model.evaluate(x, y)
    expit = lambda v: 1 / (1 + np.exp(-v))  # noqa: E731
    truth = expit(coef["alpha"][0] + coef["alpha"][1] * x + coef["alpha"][2] * y) - expit(
        coef["beta"][0] + coef["beta"][1] * x + coef["beta"][2] * y)
    assert np.all(np.abs(truth) < 4 * np.sqrt(var))
    assert min(y) < 1.0 and max(y) > 9.0


def test_two_index_logistic_fit_equals_statsmodels_logit_with_the_same_design(tmp_path):
    # Reference: statsmodels Logit on [1, a, b, a*b] per arm (Newton, tight tolerance): coefficients and
    # covariance within 1e-5 (DESIGN 2b); the map's difference and pointwise variance at grid points equal
    # statsmodels' predicted probabilities and their delta-method standard errors (get_prediction).
    rng = np.random.default_rng(3)
    coef = {"alpha": (0.5, -0.2, 0.1, 0.01), "beta": (-0.3, 0.05, -0.05, 0.0)}
    frame = _logit_cohort(rng, 800, coef)
    fs = _fitset(tmp_path, frame)
    model = maps.prepare_map(fs, MapSpec(("a", "b"), "event", interaction=True))
    refs = {}
    for arm, g in frame.groupby("arm"):
        X = np.column_stack([np.ones(len(g)), g["a"], g["b"], g["a"] * g["b"]])
        refs[arm] = sm.Logit(g["event"].to_numpy(float), X).fit(disp=0, method="newton", tol=1e-12)
        fit = model.anchor.fits[arm]
        np.testing.assert_allclose(fit.params_, refs[arm].params, atol=1e-5, rtol=1e-5)
        np.testing.assert_allclose(fit.cov_, refs[arm].cov_params(), atol=1e-5, rtol=1e-5)
        assert fit.param_names_ == ("intercept", "a", "b", "a x b")
    row = maps.map_row(model, n=9, margin=0.02)
    gx, gy = np.meshgrid(row["grid"]["x"], row["grid"]["y"])
    E = np.column_stack([np.ones(gx.size), gx.ravel(), gy.ravel(), (gx * gy).ravel()])
    p = {arm: refs[arm].get_prediction(E) for arm in ARMS}
    want = (p["alpha"].predicted - p["beta"].predicted - 0.02).reshape(gx.shape)
    got = np.array([[np.nan if v is None else v for v in r] for r in row["difference"]], float)
    shown = np.isfinite(got)
    assert shown.mean() > 0.8
    np.testing.assert_allclose(got[shown], want[shown], atol=2e-6)
    _, var = model.evaluate(gx, gy)
    np.testing.assert_allclose(var.ravel(), p["alpha"].se ** 2 + p["beta"].se ** 2, rtol=1e-5, atol=1e-10)


def test_composite_map_equals_the_weighted_statsmodels_ordered_model_probabilities(tmp_path):
    # Reference: statsmodels OrderedModel (logit, Newton to 1e-12) per arm on [a, b]; the composite difference at
    # each grid point is (P_alpha - P_beta) @ weights with the spec's [values] weights.
    rng = np.random.default_rng(5)
    frame = _logit_cohort(rng, 700, {"alpha": (0.0, 0.0), "beta": (0.0, 0.0)})
    fs = _fitset(tmp_path, frame)
    row = maps.decision_map(fs, MapSpec(("a", "b"), "composite"), n=7)
    gx, gy = np.meshgrid(row["grid"]["x"], row["grid"]["y"])
    w = np.array([WEIGHTS[lv] for lv in LEVELS])
    P = {}
    for arm, g in frame.groupby("arm"):
        y = g["state"].astype(pd.CategoricalDtype(LEVELS, ordered=True))
        res = OrderedModel(y, g[["a", "b"]].to_numpy(), distr="logit").fit(method="newton", disp=0, maxiter=200,
                                                                               tol=1e-12)
        P[arm] = res.model.predict(res.params, exog=np.column_stack([gx.ravel(), gy.ravel()]))
    want = ((P["alpha"] - P["beta"]) @ w).reshape(gx.shape)
    got = np.array([[np.nan if v is None else v for v in r] for r in row["difference"]], float)
    shown = np.isfinite(got)
    assert shown.mean() > 0.8
    np.testing.assert_allclose(got[shown], want[shown], atol=1e-5)
    assert row["weights"] == WEIGHTS and row["kind"] == "ordinal"


# ------------------------------------------------------------------------------------------
# The grid: blanks, contour tracing, the JSON row
# ------------------------------------------------------------------------------------------
def test_points_outside_the_patients_convex_hull_are_left_blank(tmp_path):
    # Geometry: patients only in the triangle a >= 0, b >= 0, a + b <= 10, so the hull is that triangle;
    # grid points beyond it by more than the 2% slack (a + b > 10 + 0.2 sqrt 2) must be blank, and points
    # well inside must be mapped.
    rng = np.random.default_rng(2)
    frame = _logit_cohort(rng, 3000, {"alpha": (0.2, -0.1), "beta": (-0.2, 0.0)},
                          b_of=lambda a: rng.uniform(0, 1, len(a)) * (10 - a))
    fs = _fitset(tmp_path, frame)
    row = maps.decision_map(fs, MapSpec(("a", "b"), "event"), n=30)
    gx, gy = np.meshgrid(row["grid"]["x"], row["grid"]["y"])
    blank = np.array([[v is None for v in r] for r in row["difference"]])
    assert blank[gx + gy > 10.3].all()
    assert not blank[(gx + gy < 8.5) & (gx > 1) & (gy > 1)].any()
    assert any("left blank" in w for w in row["warnings"])
    assert np.array([[v is None for v in r] for r in row["favoured"]])[blank].all()


def test_marching_squares_traces_a_circle_and_splits_saddles_by_the_centre():
    # Closed form: Z = x^2 + y^2 - 4 crosses zero on the circle of radius 2 (one closed line); a saddle cell
    # whose centre is positive joins the positive corners (common practice in marching squares).
    g = np.linspace(-3, 3, 61)
    X, Y = np.meshgrid(g, g)
    lines = maps.contour_lines(g, g, X ** 2 + Y ** 2 - 4)
    assert len(lines) == 1
    pts = np.array(lines[0])
    assert np.allclose(pts[0], pts[-1])
    np.testing.assert_allclose(np.hypot(pts[:, 0], pts[:, 1]), 2.0, atol=0.01)
    saddle = np.array([[1.0, -1.0], [-1.0, 3.0]])
    segs = maps.contour_lines(np.array([0.0, 1.0]), np.array([0.0, 1.0]), saddle)
    assert len(segs) == 2
    ends = sorted(tuple(sorted(s)) for s in segs)
    assert ends == [((0.0, 0.5), (0.25, 1.0)), ((0.5, 0.0), (1.0, 0.25))]
    blank = np.array([[1.0, -1.0], [np.nan, 1.0]])
    assert maps.contour_lines(np.array([0.0, 1.0]), np.array([0.0, 1.0]), blank) == []


def test_spec_maps_give_json_rows_with_the_patient_verdict_and_no_nan(tmp_path):
    # The JSON contract of DESIGN 2a (`maps`): rows serialise with allow_nan=False; the patient's verdict
    # agrees with the map's own evaluation at that point.
    rng = np.random.default_rng(9)
    fs = _fitset(tmp_path, _logit_cohort(rng, 600, {"alpha": (0.25, -0.25, 0.15), "beta": (-0.25, -0.05, 0.05)}))
    rows = maps.decision_maps(fs, n=20)
    assert len(rows) == 1 and rows[0]["indices"] == ["a", "b"] and rows[0]["target"] == "event"
    json.dumps(rows, allow_nan=False)
    for key in ("grid", "difference", "favoured", "clear", "contour", "n", "warnings", "interaction"):
        assert key in rows[0]
    assert len(rows[0]["difference"]) == 20 and len(rows[0]["difference"][0]) == 20
    assert rows[0]["n"] == {"alpha": 600, "beta": 600}
    row = maps.decision_map(fs, fs.spec.maps[0], n=20, patient=(2.0, 8.0))
    d, v = maps.prepare_map(fs, fs.spec.maps[0]).evaluate(np.array([2.0]), np.array([8.0]))
    assert row["patient"]["difference"] == pytest.approx(d[0], abs=1e-6)
    assert row["patient"]["favours"] == ("alpha" if d[0] > 0 else "beta")
    text = maps.describe_map(row, ARMS)
    assert "This patient" in text and row["patient"]["favours"] in text


@pytest.mark.parametrize("map_spec,what", [
    (MapSpec(("a", "a"), "event"), "two different indices"),
    (MapSpec(("a", "zz"), "event"), "no index called 'zz'"),
    (MapSpec(("a", "b"), "nothing"), "no outcome called 'nothing'"),
])
def test_bad_maps_are_refused_with_what_to_do(tmp_path, map_spec, what):
    rng = np.random.default_rng(1)
    fs = _fitset(tmp_path, _logit_cohort(rng, 200, {"alpha": (0.0, 0.1), "beta": (0.0, -0.1)}))
    with pytest.raises(FulcrumError, match=what) as err:
        maps.decision_map(fs, map_spec)
    assert err.value.hint


def test_indices_on_one_line_are_refused(tmp_path):
    rng = np.random.default_rng(4)
    frame = _logit_cohort(rng, 300, {"alpha": (0.0, 0.1), "beta": (0.0, -0.1)}, b_of=lambda a: 2 * a + 1)
    fs = _fitset(tmp_path, frame)
    with pytest.raises(FulcrumError, match="determined by the other terms|lie on one line"):
        maps.decision_map(fs, MapSpec(("a", "b"), "event"))


def test_report_sections_carry_the_map_chart_sentence_and_coefficients(tmp_path, monkeypatch):
    # Reference: the report's own escaping (markupsafe, as Jinja autoescapes) of the map's sentence, and the
    # coefficients of the fitted two-index models. The inlined Vega scripts are left out (slow to build, and
    # tested with the report).
    from markupsafe import escape

    from explorer import report
    from explorer.report import render_report

    # patch the packed bundle itself: it is cached per process, so patching what it packs would leave an empty
    # bundle cached for every later report in this worker
    monkeypatch.setattr(report, "packed_bundle", lambda: report.packed(""))

    rng = np.random.default_rng(6)
    _fitset(tmp_path, _logit_cohort(rng, 300, {"alpha": (0.25, -0.25, 0.15), "beta": (-0.25, -0.05, 0.05)}))
    spec = load_spec(tmp_path / "spec.toml")
    spec = dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, checks=False))
    result = an.analyse(spec)
    result.document["maps"] = maps.decision_maps(result.fitset, n=25)
    sections = charts_maps.map_sections(result.document)
    assert len(sections) == 1
    html = render_report(result, extra_sections=sections, points=0)
    assert str(escape(sections[0]["title"])) in html
    assert str(escape(maps.describe_map(result.document["maps"][0], ARMS))) in html
    fit = maps.prepare_map(result.fitset, spec.maps[0]).anchor.fits["alpha"]
    # the table holds the coefficients as the results JSON rounds them (explorer.numeric.r6)
    from explorer.numeric import r6

    assert set(sections[0]["table"]["estimate"]) >= {r6(float(v)) for v in fit.params_}


# ------------------------------------------------------------------------------------------
# The app page, driven by Streamlit's AppTest on the invented demo
# ------------------------------------------------------------------------------------------
def test_two_indices_page_runs_on_the_demo_and_shows_the_patient_placed_on_the_patient_page():
    # Reference: the engine's own map for the same choice (explorer.maps.decision_map on the app's fits).
    from streamlit.testing.v1 import AppTest

    app = Path(__file__).resolve().parents[1] / "pages" / "app.py"
    at = AppTest.from_file(str(app), default_timeout=240)
    at.run()
    at.switch_page("page_maps.py").run()
    assert not at.exception, [e.value for e in at.exception]
    assert not at.error, [e.value for e in at.error]
    ws = at.session_state["workspace"]
    assert [s.value for s in at.selectbox[:3]] == ["cfs", "physiology", "composite"]
    shown = "\n".join(str(m.value) for m in at.markdown)
    row = maps.decision_map(ws.fitset(), MapSpec(("cfs", "physiology"), "composite"),
                            weights=ws.spec.values.weights)
    assert maps.describe_map(row, ws.spec.cohort.arms) in shown
    at.switch_page("page_patient.py").run()
    at.radio[0].set_value("Pick a patient from the cohort").run()
    at.switch_page("page_maps.py").run()
    assert not at.exception, [e.value for e in at.exception]
    assert "This patient" in "\n".join(str(m.value) for m in at.markdown)
    at.checkbox[0].check().run()
    assert not at.exception, [e.value for e in at.exception]
    assert "This patient" in "\n".join(str(m.value) for m in at.markdown)

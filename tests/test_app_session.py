"""What the app hands out and keeps, driven by Streamlit's AppTest on an invented 400-patient cohort.

Determinism (issue 10 item 6): the results JSON downloaded from the Report page equals `fulcrum analyse` on the spec
downloaded beside it, apart from tool.generated_at, with analytic and then with bootstrap intervals.
Nothing lost (item 7): a spec saved after changing the margin and a weight reloads in a fresh session; failed
uploads and bad edits leave the cohort, the settings and the break-even table as they were.
"""
from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest
import streamlit.testing.v1.app_test as app_test
from streamlit.runtime.memory_media_file_storage import MemoryMediaFileStorage
from streamlit.testing.v1 import AppTest

from explorer import appstate as aps
from explorer import cli, demo
from explorer.spec import canonical_sha256

APP = Path(__file__).resolve().parents[1] / "pages" / "app.py"
TIMEOUT = 600
WARD = "ward.csv"


class KeptMedia(MemoryMediaFileStorage):
    """AppTest's in-memory media store, remembered so a download button's bytes can be read after a run."""

    made: list[MemoryMediaFileStorage] = []

    def __init__(self, endpoint: str) -> None:
        super().__init__(endpoint)
        KeptMedia.made.append(self)


@pytest.fixture(autouse=True)
def kept_media(monkeypatch: pytest.MonkeyPatch) -> None:
    KeptMedia.made.clear()
    monkeypatch.setattr(app_test, "MemoryMediaFileStorage", KeptMedia)


@pytest.fixture(scope="module")
def ward(tmp_path_factory: pytest.TempPathFactory) -> tuple[bytes, bytes]:
    """An invented 400-patient cohort (the demo generator) and the demo spec for it: (CSV bytes, TOML bytes)."""
    spec = demo.write_demo(tmp_path_factory.mktemp("ward"), n=400, seed=11)
    return (spec.parent / "demo_cohort.csv").read_bytes(), spec.read_bytes()


# ------------------------------------------------------------------------------------------
# Driving the app
# ------------------------------------------------------------------------------------------
def ok(at: AppTest) -> AppTest:
    assert not at.exception, [e.value for e in at.exception]
    assert not at.error, [e.value for e in at.error]
    return at


def refused(at: AppTest, *words: str) -> str:
    """The run shows an error (no exception) naming every word, and says what was kept."""
    assert not at.exception, [e.value for e in at.exception]
    message = " ".join(e.value for e in at.error).replace("\\", "")  # markdown escapes dropped
    assert message and "kept" in message, message
    for word in words:
        assert word in message, (word, message)
    return message


def visit(at: AppTest, page: str) -> AppTest:
    return at.switch_page(page).run()


def workspace(at: AppTest):
    return at.session_state["workspace"]


def open_ward(ward: tuple[bytes, bytes], spec: bytes | None = None) -> AppTest:
    """A fresh session: upload the cohort, confirm the guessed roles, then reload a spec on the Cohort page."""
    data, demo_spec = ward
    at = ok(AppTest.from_file(str(APP), default_timeout=TIMEOUT).run())
    ok(at.file_uploader[0].set_value((WARD, data, "text/csv")).run())
    ok(next(b for b in at.button if b.label == "Check and use").click().run())
    assert workspace(at).filename == WARD and not workspace(at).is_demo
    ok(at.file_uploader[1].set_value(("saved.toml", spec or demo_spec, "application/toml")).run())
    return at


def downloaded(at: AppTest, label: str) -> bytes:
    """The bytes a download button on the last page run would hand to the browser."""
    button = next(b for b in at.get("download_button") if b.label.startswith(label))
    return KeptMedia.made[-1].get_file(button.proto.url.rsplit("/", 1)[1]).content


def break_even_table(at: AppTest) -> pd.DataFrame:
    visit(at, "page_outcomes.py")
    ok(at)
    return next(d.value for d in at.dataframe if "break-even" in d.value.columns)


def change_margin_and_a_weight(at: AppTest, margin: float, weights: dict[str, float]) -> None:
    visit(at, "page_outcomes.py")
    ok(next(n for n in at.number_input if n.label.startswith("Margin")).set_value(margin).run())
    visit(at, "page_values.py")
    for level, w in weights.items():
        ok(next(s for s in at.slider if s.label == level.replace("_", " ")).set_value(w).run())
    v = workspace(at).spec
    assert v.analysis.margin == margin and all(v.values.weights[k] == w for k, w in weights.items())


def fulcrum_analyse(spec_text: bytes, data: bytes, folder: Path) -> dict:
    """`fulcrum analyse` (the command's own entry point) on the saved spec beside the same cohort file."""
    folder.mkdir()
    (folder / WARD).write_bytes(data)
    (folder / "saved.toml").write_bytes(spec_text)
    out = folder / "cli.json"
    assert cli.main(["analyse", str(folder / "saved.toml"), "--json", str(out), "--quiet"]) == 0
    return json.loads(out.read_text(encoding="utf-8"))


def without_clock(doc: dict) -> dict:
    assert doc["tool"].pop("generated_at")
    return doc


# ------------------------------------------------------------------------------------------
# Item 6: the app's results are the command line's
# ------------------------------------------------------------------------------------------
@pytest.mark.slow  # over 10 s on two cores
def test_changed_settings_save_reload_and_reproduce_with_fulcrum_analyse(ward, tmp_path: Path) -> None:
    at = open_ward(ward)
    weights = {"bedbound": -0.3, "care_home": 0.2}
    change_margin_and_a_weight(at, 0.04, weights)
    table = break_even_table(at)
    before = workspace(at).spec
    ok(visit(at, "page_report.py"))
    app_doc = json.loads(downloaded(at, "Results"))
    saved = downloaded(at, "Spec with")

    # the JSON is the command line's, whole, apart from the clock (issue 10 item 6)
    doc = fulcrum_analyse(saved, ward[0], tmp_path / "analytic")
    assert {b["interval"] for r in app_doc["results"] for b in r["break_even"]} <= {"fieller", "test-inversion"}
    assert app_doc["spec"]["analysis"]["margin"] == 0.04 and app_doc["composite"]
    assert without_clock(app_doc) == without_clock(doc)

    # the saved spec reloads the margin, weights and indices in a fresh session (item 7)
    fresh = open_ward(ward, saved)
    again = workspace(fresh).spec
    assert again.analysis.margin == 0.04 and all(again.values.weights[k] == w for k, w in weights.items())
    assert [ix.name for ix in again.indices] == [ix.name for ix in before.indices]
    assert canonical_sha256(again) == canonical_sha256(before)
    assert break_even_table(fresh).equals(table)
    assert next(n for n in fresh.number_input if n.label.startswith("Margin")).value == 0.04
    visit(fresh, "page_values.py")
    assert next(s for s in fresh.slider if s.label == "bedbound").value == -0.3

    # once the bootstrap has run, the JSON holds its intervals and the saved spec still reproduces it
    visit(at, "page_outcomes.py")
    ok(next(n for n in at.number_input if n.label == "Replicates").set_value(20).run())
    ok(next(b for b in at.button if b.label.startswith("Run the bootstrap")).click().run())
    assert workspace(at).has_bootstrap()
    ok(visit(at, "page_report.py"))
    boot_doc = json.loads(downloaded(at, "Results"))
    assert {b["interval"] for r in boot_doc["results"] for b in r["break_even"]} == {"bootstrap-percentile"}
    doc = fulcrum_analyse(downloaded(at, "Spec with"), ward[0], tmp_path / "bootstrap")
    assert without_clock(boot_doc) == without_clock(doc)


# ------------------------------------------------------------------------------------------
# Item 7: nothing lost when an upload or an edit fails
# ------------------------------------------------------------------------------------------
def spec_with(text: bytes, old: str, new: str) -> bytes:
    s = text.decode()
    assert old in s, old
    return s.replace(old, new, 1).encode()


@pytest.mark.slow  # over 10 s on two cores
def test_failed_uploads_and_bad_edits_keep_the_cohort_settings_and_break_even_table(ward) -> None:
    at = open_ward(ward)
    change_margin_and_a_weight(at, 0.03, {"bedbound": -0.2})
    table = break_even_table(at)
    ws = workspace(at)
    good = aps.spec_text(ws.spec).encode()  # the settings as the app saves them, then edited by hand

    def still_the_same() -> None:
        now = workspace(at)
        assert now is ws or (now.data_sha256 == ws.data_sha256 and now.spec == ws.spec)
        assert now.filename == WARD and now.cohort.n == 400 and not now.is_demo

    visit(at, "page_cohort.py")
    failures = [
        # a cohort file that is not one: empty, and binary
        (0, ("empty.csv", b"", "text/csv"), ("empty.csv",)),
        (0, ("junk.csv", b"pid,arm\n\x00\x01\x02\x03", "text/csv"), ("junk.csv",)),
        # specs: an unknown key, a weight outside -1 to 1, a weight for a level that does not exist,
        # a formula index that does not parse, and one that reads a column the cohort does not have
        (1, ("typo.toml", spec_with(good, "margin = 0.03", "margn = 0.03"), "application/toml"), ("margn",)),
        (1, ("weight.toml", spec_with(good, "bedbound = -0.2", "bedbound = 1.5"), "application/toml"),
         ("bedbound",)),
        (1, ("level.toml", spec_with(good, "bedbound = -0.2", "bedbound = -0.2, sofa_bound = 0.2"),
             "application/toml"), ("sofa_bound",)),
        (1, ("formula.toml", spec_with(good, 'formula = "lactate - albumin / 10"',
                                       'formula = "lactate - albumin /"'), "application/toml"), ("formula",)),
        (1, ("column.toml", spec_with(good, 'formula = "lactate - albumin / 10"',
                                      'formula = "lactate - sodium / 10"'), "application/toml"), ("sodium",)),
    ]
    for which, upload, words in failures:
        refused(at.file_uploader[which].set_value(upload).run(), *words)
        still_the_same()

    # a bad edit of the column roles: an identifier column that is not unique
    next(s for s in at.selectbox if s.label.startswith("Patient identifier")).set_value("arm").run()
    refused(next(b for b in at.button if b.label == "Check and use").click().run(), "identifier")
    still_the_same()

    # the pages still show the same break-even table and the changed settings
    assert break_even_table(at).equals(table)
    assert next(n for n in at.number_input if n.label.startswith("Margin")).value == 0.03
    visit(at, "page_values.py")
    assert next(s for s in at.slider if s.label == "bedbound").value == -0.2

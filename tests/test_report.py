"""The offline report: one self-contained file with no external addresses, cautions at the top and bottom,
every user-supplied string escaped (also inside embedded JSON), and embedded JSON that parses back."""
from __future__ import annotations

import dataclasses
import json
import re
from html.parser import HTMLParser
from pathlib import Path

import altair as alt
import pandas as pd
import pytest

from explorer import CAUTIONS, demo
from explorer.analysis import analyse
from explorer.report import Section, chart_payload, embedded_results, render_report, unpacked, write_report
from explorer.spec import load_spec

ATTR_URL = re.compile(r"""\b(?:src|href|action|xlink:href)\s*=\s*["']?\s*(?:https?:)?//""", re.I)
ATTACK = "<script>alert(1)</script>"


@pytest.fixture(scope="module")
def result(_demo_master):
    spec = load_spec(_demo_master / "demo.toml")
    keep = tuple(ix for ix in spec.indices if ix.name in ("cfs", "age"))
    return analyse(dataclasses.replace(spec, indices=keep, pairwise=None, maps=()))


@pytest.fixture(scope="module")
def report_path(result, tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("report")
    path = write_report(result, folder / "report.html")
    assert [p.name for p in folder.iterdir()] == ["report.html"]
    return path


@pytest.fixture(scope="module")
def html(report_path) -> str:
    return report_path.read_text(encoding="utf-8")


class _Scripts(HTMLParser):
    """Collect <script> contents and every tag's attributes with Python's own HTML parser."""

    def __init__(self) -> None:
        super().__init__()
        self.scripts: list[tuple[dict, str]] = []
        self.attrs: list[tuple[str, str, str]] = []
        self._open: dict | None = None

    def handle_starttag(self, tag, attrs):
        self.attrs.extend((tag, k, v or "") for k, v in attrs)
        if tag == "script":
            self._open = dict(attrs)
            self.scripts.append((self._open, ""))

    def handle_data(self, data):
        if self._open is not None:
            attrs, text = self.scripts[-1]
            self.scripts[-1] = (attrs, text + data)

    def handle_endtag(self, tag):
        if tag == "script":
            self._open = None


def _parsed(html: str) -> _Scripts:
    p = _Scripts()
    p.feed(html)
    return p


def test_report_is_self_contained(html):
    parsed = _parsed(html)
    assert not ATTR_URL.search(html)
    for tag, key, value in parsed.attrs:
        if key in ("src", "href"):
            assert not re.match(r"\s*(https?:)?//", value), (tag, key, value)
    assert "<link" not in html and "@import" not in html
    packed = {attrs.get("id"): text for attrs, text in parsed.scripts if attrs.get("type") == "application/octet-stream"}
    assert set(packed) >= {"fulcrum-results", "fulcrum-charts", "fulcrum-vega"}
    assert not any("<" in text for text in packed.values())  # base85 without '<': nothing can close <script>
    bundle = unpacked(packed["fulcrum-vega"])
    assert "vegaEmbed" in bundle and len(bundle) > 100_000


def test_cautions_top_and_bottom(html):
    first_chart = html.index('class="chart"')
    last_chart = html.rindex('class="chart"')
    for caution in CAUTIONS:
        assert html.index(caution) < first_chart
        assert html.rindex(caution) > last_chart


def test_embedded_json_parses_back(result, html):
    doc = embedded_results(html)
    assert doc == json.loads(json.dumps(result.document))  # the whole results document, as the JSON file has it
    assert [r["outcome"] for r in doc["results"]] == [r["outcome"] for r in result.document["results"]]
    assert doc["results"][0]["break_even"] == result.document["results"][0]["break_even"]
    charts = chart_payload(html)["charts"]
    ids = re.findall(r'<div id="(chart-\d+)" role="img"', html)
    assert [c["id"] for c in charts] == ids and len(ids) >= len(result.document["results"])
    for c in charts[:3]:
        alt.Chart.from_dict(c["spec"]) if "mark" in c["spec"] else alt.LayerChart.from_dict(c["spec"])
    for c in charts:  # every chart's data is there, kept to four significant figures
        for rows in c["spec"]["datasets"].values():
            for r in rows:
                assert all(v == float(f"{v:.4g}") for v in r.values() if isinstance(v, float)), r


def test_provenance_spec_and_versions(result, html):
    doc = result.document
    for text in (doc["inputs"]["data_sha256"], doc["inputs"]["spec_sha256"], "[cohort]", "[[outcomes]]",
                 "numpy", "pandas", "lifelines", "scikit-learn", "python", "Fieller"):
        assert text in html, text
    assert re.search(r"<dt>seed</dt><dd>1</dd>", html)
    assert "Break-even points" in html and "Value of outcomes" in html and "Randomised and chosen" in html
    for row in doc["results"]:
        for text in row["methods"].values():
            assert text.replace("'", "&#39;") in html


def test_packed_blocks_round_trip_and_hold_no_angle_bracket():
    """Whatever the text (script tags, comment openers, line separators, non-Latin letters), a packed block never
    holds '<' and unpacks to the same text; by_columns and by_rows are exact inverses on a results-shaped document."""
    from explorer.report import by_columns, by_rows, packed

    text = "</script><!-- & \u2028 " + "é漢" * 50 + ATTACK * 30
    block = str(packed(text))
    assert "<" not in block and unpacked(block) == text
    doc = {"rows": [{"x": float(i), "ci": [i, None], "who": ATTACK} for i in range(7)], "few": [{"a": 1}], "n": 3}
    assert by_rows(json.loads(json.dumps(by_columns(doc)))) == doc


def test_extra_sections_are_escaped(result):
    frame = pd.DataFrame({"column <b>": [ATTACK]})
    html = render_report(result, points=0, extra_sections=[
        Section(title=ATTACK, text=ATTACK, table=frame, notes=[ATTACK]),
        {"title": "second", "text": "plain words"}])
    assert "<script>alert" not in html
    assert html.count("&lt;script&gt;alert(1)&lt;/script&gt;") >= 4
    assert "column &lt;b&gt;" in html and "plain words" in html


def _hostile_case(folder: Path) -> Path:
    """A small invented cohort whose arm label, ordinal level, outcome label and index label hold a script tag."""
    frame, _ = demo.generate(n=400, seed=11)
    frame["arm"] = frame["arm"].replace({"laparotomy": ATTACK})
    frame["function_6m"] = frame["function_6m"].replace({"bedbound": "<script>alert(2)</script>"})
    frame.to_csv(folder / "cohort.csv", index=False)
    spec = f"""
[cohort]
path = "cohort.csv"
id = "pid"
arm = "arm"
arms = [{json.dumps(ATTACK)}, "non-operative"]
allocation = "allocation"

[[outcomes]]
name = "alive"
kind = "survival"
time = "days_followed"
event = "died"
horizon = 365
label = "<script>alert(3)</script>"

[[outcomes]]
name = "function"
kind = "ordinal"
column = "function_6m"
levels = ["independent", "home_with_help", "care_home", "<script>alert(2)</script>", "dead"]

[[indices]]
name = "cfs"
column = "cfs"
label = "<script>alert(4)</script>"

[values]
outcome = "function"
weights = {{ independent = 1.0, home_with_help = 0.8, care_home = 0.45, "<script>alert(2)</script>" = 0.1, dead = 0.0 }}
"""
    path = folder / "spec.toml"
    path.write_text(spec, encoding="utf-8")
    return path


def test_script_tags_in_labels_levels_and_names_are_escaped(tmp_path):
    result = analyse(load_spec(_hostile_case(tmp_path)))
    html = render_report(result, points=50)
    assert "<script>alert" not in html
    for k in (1, 2, 3, 4):
        assert f"&lt;script&gt;alert({k})&lt;/script&gt;" in html, k
    doc = embedded_results(html)
    assert doc["arms"][0] == ATTACK
    charts = chart_payload(html)
    assert any(ATTACK in json.dumps(c["spec"]) for c in charts["charts"])


@pytest.mark.browser
def test_every_chart_draws_offline_in_chromium(report_path, html):
    """Debian's Chromium opens the file with every network request refused; each chart must draw an SVG."""
    from playwright.sync_api import sync_playwright

    expected = len(re.findall(r'<div id="chart-\d+" role="img"', html))
    refused, problems = [], []
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path="/usr/bin/chromium", args=["--no-sandbox", "--disable-gpu"])
        try:
            page = browser.new_page()
            page.route(re.compile(r"^(?!file:).*"), lambda route: (refused.append(route.request.url), route.abort()))
            page.on("pageerror", lambda e: problems.append(str(e)))
            page.on("console", lambda m: problems.append(m.text) if m.type == "error" else None)
            page.goto(report_path.as_uri())
            page.wait_for_function(f"document.querySelectorAll('figure.chart svg').length >= {expected}",
                                   timeout=120_000)
            drawn = page.locator("figure.chart svg").count()
        finally:
            browser.close()
    assert drawn == expected
    assert not refused and not problems, (refused, problems)


def test_sampled_points_are_said_beside_each_outcome_chart(result):
    """Above the point cap the report draws a seeded sample per arm and says so in the chart's sentence
    (explorer.sampling.sample_note); the curves still come from every patient."""
    from explorer.report import outcome_sections

    rows = result.document["results"]
    sections = outcome_sections(result, result.document, points=200)
    assert len(sections) == len(rows)
    for section, row in zip(sections, rows):
        found = re.search(r"The chart shows 200 of ([\d,]+) patients", section["sentence"])
        # every patient with a value to draw (survival: those censored before the horizon have none)
        assert found and 200 < int(found.group(1).replace(",", "")) <= sum(row["n"].values())
    every = outcome_sections(result, result.document, points=10_000)
    assert not any("The chart shows" in s["sentence"] for s in every)


REPORT_LIMIT = 2_000_000  # issue 17 item 5: the demo's offline report is at most 2 MB (benchmarks/app_speed.py)


@pytest.mark.slow  # over 10 s on two cores
def test_demo_report_is_at_most_two_megabytes(demo_results, tmp_path):
    """The whole demo analysis (every outcome, index, map, rule and evidence section) makes a report of at most
    2 MB that still holds the full results document and a chart for every chart slot."""
    result = demo_results  # the demo analysed once per worker (tests/conftest.py)
    path = write_report(result, tmp_path / "demo.html")
    html = path.read_text(encoding="utf-8")
    assert path.stat().st_size <= REPORT_LIMIT, path.stat().st_size
    assert embedded_results(html) == json.loads(json.dumps(result.document))
    ids = re.findall(r'<div id="(chart-\d+)" role="img"', html)
    assert [c["id"] for c in chart_payload(html)["charts"]] == ids and len(ids) > 100


def test_kaplan_meier_and_coverage_come_from_the_results(result, html):
    """The report draws Kaplan-Meier curves and randomised coverage from the results document (it fits nothing):
    the results' all-patient curve agrees with lifelines' KaplanMeierFitter at the horizon, every index has its
    bands, and the coverage windows count every randomised and chosen patient of the cohort."""
    from lifelines import KaplanMeierFitter

    doc = result.document
    spec, fs = result.spec, result.fitset
    o = next(o for o in spec.outcomes if o.kind == "survival")
    frame = fs.cohort.frame
    for arm in spec.cohort.arms:
        row = next(c for c in doc["kaplan_meier"] if c["outcome"] == o.name and c["index"] is None and c["arm"] == arm)
        ok = (frame[spec.cohort.arm] == arm).to_numpy() & fs.cohort.complete(o)
        ref = KaplanMeierFitter().fit(frame[o.time][ok], frame[o.event][ok])  # lifelines, the reference library
        step = [s for s in row["steps"] if s["time"] <= o.horizon][-1]
        assert step["survival"] == pytest.approx(float(ref.predict(o.horizon)), abs=1e-6)
        assert row["n"] == int(ok.sum())
    for ix in fs.indices:
        assert {c["band"]["label"] for c in doc["kaplan_meier"] if c["index"] == ix and c["outcome"] == o.name}
    randomised = fs.cohort.randomised.to_numpy(bool)
    for entry in doc["randomised_windows"]:
        counted = sum(w["n"][a]["randomised"] for w in entry["windows"] for a in doc["arms"])
        x = fs.indices[entry["index"]].values
        assert counted == int((randomised & pd.notna(x)).sum())
    assert "Kaplan-Meier curves in bands of" in html and "Where the randomised patients are" in html

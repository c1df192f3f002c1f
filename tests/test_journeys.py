"""Three people's journeys through the app in Debian's Chromium (Playwright) against `fulcrum app`:
a researcher with their own file, a clinician chairing a meeting, and a family conference."""
from __future__ import annotations

import re
from pathlib import Path

import pytest

from explorer import CAUTIONS, demo

from browser_helpers import CHROMIUM, CHROMIUM_ARGS, VIEWPORT, app_server, main_text, settle

pytestmark = [pytest.mark.browser, pytest.mark.slow]


@pytest.fixture(scope="module")
def app(tmp_path_factory: pytest.TempPathFactory):
    """One app server and one Chromium for the three journeys (each journey is its own browser session)."""
    if not Path(CHROMIUM).exists():
        pytest.fail(f"Debian's chromium is not at {CHROMIUM}; `python3 dev.py test` installs it with apt.")
    from playwright.sync_api import sync_playwright

    work = tmp_path_factory.mktemp("journeys")
    with app_server(work) as url, sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
        try:
            yield url, browser, work
        finally:
            browser.close()


def open_app(app):
    url, browser, _ = app
    page = browser.new_context(viewport=VIEWPORT, accept_downloads=True).new_page()
    errors: list[str] = []
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    page.goto(url)
    page.get_by_text("2,400 patients").first.wait_for(timeout=120_000)
    settle(page)
    return page, errors


def go(page, name: str) -> str:
    page.locator('[data-testid="stSidebarNav"]').get_by_role("link", name=name, exact=True).click()
    page.wait_for_timeout(300)
    settle(page)
    text = main_text(page)
    assert "Traceback" not in text, name
    return text


def set_number(page, label: str, value: str) -> None:
    box = page.get_by_role("spinbutton", name=label, exact=True)
    box.fill(value)
    box.press("Enter")
    settle(page)


def sidebar(page) -> str:
    return page.locator('[data-testid="stSidebar"]').inner_text()


def test_a_researcher_uploads_their_own_file_with_the_demo_open_and_takes_the_report(app) -> None:
    page, errors = open_app(app)
    work = app[2]
    other, _ = demo.generate(n=300, seed=3)
    other = other.drop(columns=["age", "allocation", "lactate", "albumin", "qol_6m", "days_home_180"])
    path = work / "ward.csv"
    path.write_bytes(demo.to_csv_bytes(other.rename(columns={"cfs": "frailty"})))
    page.locator('input[type="file"]').first.set_input_files(str(path))
    page.get_by_text("New file:").first.wait_for(timeout=60_000)
    settle(page)
    assert "Baseline covariates" in main_text(page)
    page.get_by_role("button", name="Check and use").click()
    page.get_by_text("ward.csv").first.wait_for(timeout=60_000)
    settle(page)
    text = main_text(page)
    assert "300 patients" in sidebar(page) and "no column 'age'" not in text
    go(page, "Report")
    with page.expect_download(timeout=180_000) as download:
        page.get_by_role("button", name=re.compile("Offline report")).click()
    html = Path(download.value.path()).read_text()
    assert CAUTIONS[0] in html and "frailty" in html
    assert not errors, errors


def test_a_clinician_keeps_a_patient_on_every_page_prints_the_meeting_view_then_a_family_sets_values(app) -> None:
    page, errors = open_app(app)
    go(page, "Patient")
    set_number(page, "Clinical Frailty Scale", "7")
    set_number(page, "Age", "82")
    assert "Clinical Frailty Scale 7, Age 82" in sidebar(page)
    for name in ("Outcomes by index", "Values", "Randomised vs chosen", "Two indices", "Report", "Cohort", "Patient"):
        text = go(page, name)
        assert "Clinical Frailty Scale 7, Age 82" in sidebar(page), name
        assert "Clinical Frailty Scale 7, Age 82" in text, name  # the header of every page names the patient
        if name in ("Outcomes by index", "Values", "Randomised vs chosen"):  # where they sit, marked on the charts
            assert "Patient in hand: Clinical Frailty Scale 7 (cohort percentile 80)" in text, name
        if name == "Report":  # the Report page offers the patient's own summary beside the cohort's report
            assert "Patient summary (.pdf)" in text
    assert page.get_by_role("spinbutton", name="Clinical Frailty Scale", exact=True).input_value() == "7.00"
    text = go(page, "Meeting view")
    assert "80th" in text and "Per 100 patients like this one" in text and CAUTIONS[0] in text
    height = page.evaluate("() => document.querySelector('[data-testid=\"stMain\"]').scrollHeight")
    assert height <= VIEWPORT["height"], height  # one screen at 1400 x 900, no scrolling
    with page.expect_download(timeout=60_000) as download:
        page.get_by_role("button", name=re.compile("Print")).click()
    pdf = Path(download.value.path()).read_bytes()
    assert pdf.startswith(b"%PDF") and len(re.findall(rb"/Type /Page\b(?!s)", pdf)) == 1
    page.get_by_role("button", name="Reset the patient").click()
    settle(page)
    assert "Clinical Frailty Scale 7, Age 82" not in sidebar(page)
    assert not errors, errors
    family_conference(page, errors)  # the same session: the demo is fitted once for both journeys


def family_conference(page, errors: list[str]) -> None:
    """A family conference: the values conversation sets the weights; the patient view and summary follow."""
    go(page, "Patient")
    set_number(page, "Clinical Frailty Scale", "6")
    page.get_by_role("button", name="Use these values").click()
    settle(page)
    assert "the patient's own" in sidebar(page)
    text = main_text(page)
    assert "by the patient's values" in text
    with page.expect_download(timeout=60_000) as download:
        page.get_by_role("button", name=re.compile("Printable summary")).click()
    summary = Path(download.value.path()).read_text()
    assert "patient" in summary.lower() and "independent" in summary
    text = go(page, "Meeting view")
    assert "the patient's own values" in text and "Clinical Frailty Scale 6" in text
    assert not errors, errors

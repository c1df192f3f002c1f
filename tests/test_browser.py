"""The app in a real browser: Debian's Chromium, driven by Playwright, against `fulcrum app` on localhost."""
from __future__ import annotations

import re
from pathlib import Path

import pytest

from explorer import CAUTIONS

from browser_helpers import CHROMIUM, CHROMIUM_ARGS, VIEWPORT, app_server, main_text, screenshot, settle

pytestmark = pytest.mark.browser
ROOT = Path(__file__).resolve().parents[1]
SHOTS = ROOT / "test-artefacts" / "screenshots"
PAGES = ("Outcomes by index", "Values", "Randomised vs chosen", "Patient", "Report")  # the Report last


@pytest.fixture(scope="module")
def browser_context(tmp_path_factory: pytest.TempPathFactory):
    if not Path(CHROMIUM).exists():
        pytest.fail(f"Debian's chromium is not at {CHROMIUM}; `python3 dev.py test` installs it with apt.")
    from playwright.sync_api import sync_playwright

    profile = tmp_path_factory.mktemp("chromium-profile")
    with sync_playwright() as p:
        ctx = p.chromium.launch_persistent_context(str(profile), executable_path=CHROMIUM, args=CHROMIUM_ARGS,
                                                   headless=True, viewport=VIEWPORT, accept_downloads=True)
        try:
            yield ctx
        finally:
            ctx.close()


def go(page, name: str) -> None:
    page.locator('[data-testid="stSidebarNav"]').get_by_role("link", name=name, exact=True).click()
    page.get_by_role("heading", name=name, exact=True).first.wait_for(timeout=60_000)
    settle(page)


def change_a_weight(page) -> None:
    """Move one state's weight with the keyboard; the composite's sentence must change with it."""
    sentence = re.compile(r"Expected weight of .*")
    before = sentence.findall(main_text(page))
    thumb = page.get_by_role("slider", name="bedbound")
    thumb.focus()
    thumb.press("Home")
    settle(page)
    after = sentence.findall(main_text(page))
    assert before and after and before != after


def test_the_app_in_chromium_from_demo_to_an_offline_report(browser_context, tmp_path: Path) -> None:
    errors: list[str] = []
    with app_server(tmp_path) as url:
        page = browser_context.new_page()
        page.on("pageerror", lambda exc: errors.append(str(exc)))
        page.goto(url)
        page.get_by_text("2,400 patients").first.wait_for(timeout=120_000)
        settle(page)
        assert "invented" in main_text(page).lower()
        screenshot(page, SHOTS / "cohort.png")

        for name in PAGES:
            go(page, name)
            text = main_text(page)
            assert "Traceback" not in text and CAUTIONS[0] in text, name
            if name == "Outcomes by index":
                assert page.locator('[data-testid="stVegaLiteChart"]').count() >= 4
                assert re.search(r"break even", text)
            screenshot(page, SHOTS / f"{name.lower().replace(' ', '_')}.png")
            if name == "Values":
                change_a_weight(page)
                screenshot(page, SHOTS / "values_after_weight_change.png")

        with page.expect_download(timeout=300_000) as download:
            page.get_by_role("button", name=re.compile("Offline report")).click()
        report = tmp_path / "report.html"
        download.value.save_as(report)
        with page.expect_download(timeout=60_000) as spec_download:
            page.get_by_role("button", name=re.compile("Spec with the current weights")).click()
        assert "bedbound = -1.0" in Path(spec_download.value.path()).read_text()
        assert not errors, errors

    offline = browser_context.new_page()
    asked: list[str] = []
    offline.route(re.compile(r"^(?!file:|data:|blob:|about:).*"),
                  lambda route: (asked.append(route.request.url), route.abort()))
    offline.goto(report.as_uri(), timeout=180_000)
    # charts on screen are drawn first and the rest while the browser is idle: wait for every chart's drawing
    every = """() => { const n = document.querySelectorAll('div[id^="chart-"]:not([id$="-caption"])').length;
                      return n > 0 && document.querySelectorAll('div[id^="chart-"]:not([id$="-caption"]) svg').length >= n; }"""
    offline.wait_for_function("() => document.querySelectorAll('.vega-embed svg').length > 0", timeout=60_000)
    offline.evaluate("() => window.fulcrumDrawAll()")  # what printing does: draw the rest at once
    offline.wait_for_function(every, timeout=120_000)
    assert "could not be drawn" not in offline.locator("body").inner_text()
    assert CAUTIONS[0] in offline.locator("body").inner_text()
    screenshot(offline, SHOTS / "report_offline.png")
    assert not asked, asked

"""Benchmark (h): the speed a user feels, measured in Debian's Chromium (Playwright) against `fulcrum app` on the
demo: the first page ready, page switches and a control change (medians), the Report page after a 1,000-replicate
bootstrap run from the Outcomes page under its progress bar, and the offline HTML report of the demo (its size and how
long Chromium takes to draw every chart). Never `playwright install`: /usr/bin/chromium.
"""
from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(ROOT / "tests")]

from browser_helpers import CHROMIUM, CHROMIUM_ARGS, VIEWPORT, app_server, settle  # noqa: E402

PAGES = ("Outcomes by index", "Values", "Patient", "Meeting view", "Randomised vs chosen", "Cohort")
EVERY_CHART = """() => { const n = document.querySelectorAll('div[id^="chart-"]:not([id$="-caption"])').length;
                         return n > 0 && document.querySelectorAll('div[id^="chart-"]:not([id$="-caption"]) svg').length >= n; }"""
TARGETS = {"first_page_s": ("<=", 3.0), "page_switch_median_s": ("<=", 1.0), "control_change_median_s": ("<=", 1.0),
           "report_page_after_bootstrap_s": ("<=", 10.0), "report_mb": ("<=", 2.0), "report_open_s": ("<=", 3.0)}
REPLICATES = 1000
PROGRESS = '[data-testid="stProgress"]'



def _switch(page, name: str) -> float:
    t = time.perf_counter()
    page.locator('[data-testid="stSidebarNav"]').get_by_role("link", name=name, exact=True).click()
    page.wait_for_timeout(100)
    settle(page)
    return time.perf_counter() - t


def app_case(work: Path, rounds: int = 2) -> dict[str, Any]:
    """Times in seconds. Switches are timed after the first visit of each page (the fit happens once per
    session, on the first page that needs it, and is reported apart as first_fit_s). settle() waits for the
    page to stay unchanged for a second, so each switch time includes that second; it is subtracted."""
    from playwright.sync_api import sync_playwright

    out: dict[str, Any] = {}
    with app_server(work) as url, sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
        page = browser.new_page(viewport=VIEWPORT)
        t = time.perf_counter()
        page.goto(url)
        page.get_by_text("2,400 patients").first.wait_for(timeout=120_000)
        out["first_page_s"] = time.perf_counter() - t
        settle(page)
        out["first_fit_s"] = _switch(page, "Outcomes by index") - 1.0
        for name in PAGES:  # first visits (caches fill)
            _switch(page, name)
        switches = [_switch(page, name) - 1.0 for _ in range(rounds) for name in PAGES]
        out["page_switch_median_s"] = statistics.median(switches)
        out["page_switches"] = len(switches)
        _switch(page, "Patient")
        changes = []
        for value in ("6", "7", "5", "8"):
            box = page.get_by_role("spinbutton", name="Clinical Frailty Scale", exact=True)
            t = time.perf_counter()
            box.fill(value)
            box.press("Enter")
            settle(page)
            changes.append(time.perf_counter() - t - 1.0)
        out["control_change_median_s"] = statistics.median(changes)
        out.update(bootstrap_then_report(page))
        browser.close()
    return out


def bootstrap_then_report(page) -> dict[str, Any]:
    """Run a 1,000-replicate bootstrap from the Outcomes page (its progress bar must show), then open the Report
    page: the time until the Report page has settled with its downloads, on the bootstrap's intervals."""
    _switch(page, "Outcomes by index")
    page.get_by_text("Settings: the margin, the interval level and bootstrap intervals").click()
    box = page.get_by_role("spinbutton", name="Replicates", exact=True)
    box.fill(str(REPLICATES))
    box.press("Enter")
    settle(page)
    t = time.perf_counter()
    page.get_by_role("button", name=f"Run the bootstrap ({REPLICATES} replicates)").click()
    page.locator(PROGRESS).first.wait_for(timeout=120_000)  # the progress bar shows while the replicates run
    shown = page.locator(PROGRESS).first.inner_text()
    page.get_by_text(f"Use the bootstrap intervals ({REPLICATES} replicates)").first.wait_for(timeout=3_600_000)
    settle(page)
    boot = time.perf_counter() - t
    t = time.perf_counter()
    page.locator('[data-testid="stSidebarNav"]').get_by_role("link", name="Report", exact=True).click()
    page.get_by_role("button", name="Offline report (.html, opens with no network)").wait_for(timeout=600_000)
    ready = time.perf_counter() - t
    settle(page)
    bootstrap_words = "bootstrap intervals" in page.locator('[data-testid="stMain"]').inner_text()
    return {"bootstrap_s": boot, "report_page_after_bootstrap_s": ready, "progress_bar_text": shown,
            "report_on_bootstrap": bootstrap_words}


def report_case(work: Path) -> dict[str, Any]:
    """The demo's offline report: its size, and the time Chromium takes to open it and draw every chart."""
    from playwright.sync_api import sync_playwright

    from explorer import demo
    from explorer.analysis import analyse
    from explorer.report import write_report
    from explorer.spec import load_spec

    res = analyse(load_spec(demo.write_demo(work / "report_demo")))
    t = time.perf_counter()
    path = write_report(res, work / "report.html")
    build = time.perf_counter() - t
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
        page = browser.new_page(viewport=VIEWPORT)
        t = time.perf_counter()
        page.goto(path.as_uri())
        page.wait_for_function("() => document.querySelectorAll('.vega-embed svg').length > 0", timeout=120_000)
        opened = time.perf_counter() - t  # readable: the page laid out and the charts on screen drawn
        page.wait_for_function(EVERY_CHART, timeout=300_000)
        every = time.perf_counter() - t
        browser.close()
    return {"report_mb": path.stat().st_size / 1e6, "report_open_s": opened, "report_all_charts_s": every,
            "report_build_s": build}


def lines(r: dict[str, Any]) -> list[str]:
    def mark(key: str) -> str:
        op, goal = TARGETS[key]
        ok = r[key] <= goal if op == "<=" else r[key] >= goal
        return f" [target {op} {goal:g}: {'met' if ok else 'NOT MET'}]"

    return [f"  first page ready {r['first_page_s']:.1f} s{mark('first_page_s')}; first fit {r['first_fit_s']:.1f} s",
            f"  page switch median {r['page_switch_median_s']:.2f} s over {r['page_switches']}"
            f"{mark('page_switch_median_s')}",
            f"  control change (a patient's index value) median {r['control_change_median_s']:.2f} s"
            f"{mark('control_change_median_s')}",
            f"  offline report {r['report_mb']:.1f} MB{mark('report_mb')}, opens and draws in "
            f"{r['report_open_s']:.1f} s{mark('report_open_s')}, every chart drawn after {r['report_all_charts_s']:.1f} s "
            f"(built in {r['report_build_s']:.0f} s)",
            f"  Report page ready {r['report_page_after_bootstrap_s']:.1f} s after a {REPLICATES:,}-replicate bootstrap"
            f"{mark('report_page_after_bootstrap_s')} (the bootstrap itself {r['bootstrap_s']:.0f} s under a progress "
            f"bar: {r['progress_bar_text']!r}; report on its intervals: {r['report_on_bootstrap']})"]

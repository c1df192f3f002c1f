"""Retake the guides' screenshots (docs/images) in headless Chromium at 1400 x 900, cropped by the pages' own
headings rather than fixed pixel boxes, so a layout change moves the crops with it.

    .venv/bin/python tests/retake_screenshots.py            # from the repository root; writes docs/images/*.png

It walks the demo the way the clinician's guide does: Cohort, Outcomes by index, Values (then the bedbound weight
moved to -1 with the keyboard), Randomised vs chosen, Patient (with those weights), Report and the offline report.
Not a test (no test_ prefix); the browser test checks the same walk.
"""
from __future__ import annotations

import json
import re
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from browser_helpers import CHROMIUM, CHROMIUM_ARGS, VIEWPORT, app_server, settle  # noqa: E402

ROOT = HERE.parent
IMAGES = ROOT / "docs" / "images"
MAIN_X = (352, 1400)  # the main column at 1400 px wide, beside the sidebar
WIDTH = 940

# name -> (page shot, heading the crop starts at, heading it stops before (None: the page's end), whole width)
CROPS: dict[str, tuple[str, str | None, str | None, bool]] = {
    "cohort-load.png": ("cohort", None, r"^2\. ", True),
    "cohort-checks.png": ("cohort", r"^3\. ", r"^How each index is spread", False),
    "cohort-spread.png": ("cohort", r"^How each index is spread", None, False),
    "outcomes-top.png": ("outcomes", r"^Outcomes by index$", r"^Outcomes along ", False),
    "outcomes-survival.png": ("outcomes", r"^Alive at one year$", r"^Alive at six months$", False),
    "outcomes-function.png": ("outcomes", r"^Living at home at six months$", r"^Quality of life", False),
    "values-weights.png": ("values", r"^Weights for ", r"^Value of outcomes along", False),
    "values-composite.png": ("values", r"^Expected value of the weights", r"How far can these weights", False),
    "values-leeway.png": ("values", r"How far can these weights", r"^Chance that ", False),
    "values-acceptability.png": ("values", r"^Chance that ", r"^Survival combined with function$", False),
    "values-bedbound-below-zero.png": ("values_moved", r"^Weights for ", r"How far can these weights", False),
    "selection-coverage.png": ("selection", r"^Where the randomised patients are", r"^Randomised and chosen patients",
                               False),
    "selection-effect.png": ("selection", r"^Randomised and chosen patients", r"^Alive at six months$", False),
    "patient-conversation.png": ("patient", r"^What matters to the patient$", r"^Where this patient sits$", False),
    "patient-where.png": ("patient", r"^Where this patient sits$", r"^Predictions for people like this", False),
    "patient-icons.png": ("patient", r"^Predictions for people like this", r"^Alive at six months$", False),
    "patient-function.png": ("patient", r"^Living at home at six months$", r"^Quality of life", False),
    "report-page.png": ("report", r"^Report$", r"^Charts as pictures", False),
}
MAX_HEIGHT = 1500  # a crop longer than this is cut (the guides show the top of a long section)


def headings(page) -> list[tuple[str, float]]:
    """Every heading, expander and chart title in the main block with its top in page pixels (the window is as
    tall as the content). Expanders' text may start with an icon's name, so patterns for them are unanchored."""
    sel = ", ".join(f'[data-testid="stMain"] {t}' for t in ("h1", "h2", "h3", "summary", ".role-title-text text"))
    return page.evaluate(f"""() => [...document.querySelectorAll('{sel}')].map(h => [h.textContent.trim(),
        h.getBoundingClientRect().top + window.scrollY])""")


def full_page(page, path: Path) -> list[tuple[str, float]]:
    height = page.evaluate("""() => { const m = document.querySelector('[data-testid="stMain"]');
                                       return m ? m.scrollHeight : document.body.scrollHeight; }""")
    page.set_viewport_size({"width": VIEWPORT["width"], "height": int(min(max(VIEWPORT["height"], height), 9000))})
    page.wait_for_timeout(900)
    found = headings(page)
    page.screenshot(path=str(path))
    page.set_viewport_size(VIEWPORT)
    return found


def box(found: list[tuple[str, float]], start: str | None, stop: str | None, height: int) -> tuple[int, int]:
    def first(pattern: str, after: float = -1) -> float | None:
        return next((y for t, y in found if y > after and re.search(pattern, t)), None)

    top = 0.0 if start is None else first(start)
    if top is None:
        raise LookupError(f"no heading matches {start!r}: {[t for t, _ in found]}")
    top = max(0.0, top - 16)
    end = None if stop is None else first(stop, top + 20)
    bottom = height if end is None else end - 12
    return int(top), int(min(bottom, top + MAX_HEIGHT))


def crop(shots: Path, found: dict[str, list], name: str) -> Path:
    from PIL import Image

    shot, start, stop, whole = CROPS[name]
    with Image.open(shots / f"{shot}.png") as im:
        top, bottom = box(found[shot], start, stop, im.height)
        left, right = (0, im.width) if whole else MAIN_X
        part = im.convert("RGB").crop((left, top, right, bottom))
    if part.width > WIDTH:
        part = part.resize((WIDTH, round(part.height * WIDTH / part.width)), Image.LANCZOS)
    IMAGES.mkdir(parents=True, exist_ok=True)
    part.quantize(colors=256, method=Image.Quantize.MAXCOVERAGE, dither=Image.Dither.NONE).save(IMAGES / name,
                                                                                          optimize=True)
    return IMAGES / name


def offline_shot(browser, report: Path) -> Path:
    """The top of the offline report, opened from the file with the network refused, into docs/images."""
    from PIL import Image

    offline = browser.new_page(viewport={"width": VIEWPORT["width"], "height": 1700})
    offline.route(re.compile(r"^(?!file:|data:|blob:|about:).*"), lambda route: route.abort())
    offline.goto(report.as_uri(), timeout=300_000)
    offline.wait_for_function("() => document.querySelectorAll('.vega-embed svg').length > 0", timeout=300_000)
    offline.wait_for_timeout(1500)
    raw = report.with_suffix(".png")
    offline.screenshot(path=str(raw), clip={"x": 120, "y": 0, "width": 1160, "height": 1700}, timeout=120_000)
    offline.close()
    with Image.open(raw) as im:
        part = im.convert("RGB").resize((WIDTH, round(im.height * WIDTH / im.width)), Image.LANCZOS)
    part.quantize(colors=256, method=Image.Quantize.MAXCOVERAGE, dither=Image.Dither.NONE).save(
        IMAGES / "report-offline.png", optimize=True)
    return IMAGES / "report-offline.png"


def go(page, name: str) -> None:
    page.locator('[data-testid="stSidebarNav"]').get_by_role("link", name=name, exact=True).click()
    page.get_by_role("heading", name=name, exact=True).first.wait_for(timeout=180_000)
    settle(page)


def main(argv: list[str]) -> int:
    """No argument: walk the app and crop. A folder from an earlier walk: crop again. --offline REPORT: only the
    offline report's picture, from a saved report."""
    from playwright.sync_api import sync_playwright

    if len(argv) == 2 and argv[0] == "--offline":
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
            print("wrote", offline_shot(browser, Path(argv[1]).resolve()))
            browser.close()
        return 0
    if argv:
        shots = Path(argv[0])
        found = json.loads((shots / "headings.json").read_text())
    else:
        work = Path(tempfile.mkdtemp(prefix="fulcrum-shots-"))
        shots = work / "pages"
        shots.mkdir()
        found = browse(work, shots)
        print("page shots and headings in", shots)
    for name in CROPS:
        print("wrote", crop(shots, found, name))
    return 0


def browse(work: Path, shots: Path) -> dict[str, list]:
    """Walk the demo; full-page shots and their headings into `shots`, the offline report's top into docs/images."""
    from playwright.sync_api import sync_playwright

    found: dict[str, list] = {}
    with app_server(work, timeout=180) as url, sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        page = browser.new_page(viewport=VIEWPORT)
        page.goto(url)
        page.get_by_text("2,400 patients").first.wait_for(timeout=180_000)
        settle(page)
        found["cohort"] = full_page(page, shots / "cohort.png")
        go(page, "Outcomes by index")
        found["outcomes"] = full_page(page, shots / "outcomes.png")
        go(page, "Values")
        page.get_by_text("How far can these weights move before the answer changes?").first.click()
        settle(page)
        found["values"] = full_page(page, shots / "values.png")
        thumb = page.get_by_role("slider", name="bedbound")
        thumb.focus()
        thumb.press("Home")  # bedbound to -1, as the guide describes, with the keyboard
        settle(page)
        found["values_moved"] = full_page(page, shots / "values_moved.png")
        for name, shot in (("Randomised vs chosen", "selection"), ("Patient", "patient"), ("Report", "report")):
            go(page, name)
            found[shot] = full_page(page, shots / f"{shot}.png")
        (shots / "headings.json").write_text(json.dumps(found))
        with page.expect_download(timeout=180_000) as download:
            page.get_by_role("button", name=re.compile("Offline report")).click()
        report = work / "report.html"
        download.value.save_as(report)
        offline_shot(browser, report)
        browser.close()
    return found


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))

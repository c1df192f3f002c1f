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
MAIN_X = (400, 1340)  # the main column at 1400 px wide, beside the sidebar
WIDTH = 940

# name -> (page shot, heading the crop starts at, heading it stops before (None: the page's end), whole width)
CROPS: dict[str, tuple[str, str | None, str | None, bool]] = {
    "cohort-load.png": ("cohort", None, r"^2\. ", True),
    "cohort-checks.png": ("cohort", r"^3\. ", r"^4\. ", False),
    "cohort-spread.png": ("cohort", r"^4\. ", None, False),
    "outcomes-top.png": ("outcomes", r"^Outcomes by index$", r"^Alive at one year$", False),
    "outcomes-survival.png": ("outcomes", r"^Alive at one year$", r"^Alive at six months$", False),
    "outcomes-function.png": ("outcomes", r"^Living at home at six months$", r"^Quality of life", False),
    "values-weights.png": ("values", r"^Weights for ", r"^Value of outcomes along", False),
    "values-composite.png": ("values", r"^Expected value of the weights", r"^Chance that ", False),
    "values-acceptability.png": ("values", r"^Chance that ", r"^Survival combined with function$", False),
    "values-bedbound-below-zero.png": ("values_moved", r"^Weights for ", r"^Chance that ", False),
    "selection-coverage.png": ("selection", r"^Randomised vs chosen$", r"^Selection effect", False),
    "selection-effect.png": ("selection", r"^Selection effect", None, False),
    "patient-conversation.png": ("patient", r"^What matters to the patient$", r"^Where this patient sits$", False),
    "patient-where.png": ("patient", r"^Where this patient sits$", r"^Predictions for people like this", False),
    "patient-icons.png": ("patient", r"^Predictions for people like this", r"^Alive at six months$", False),
    "patient-function.png": ("patient", r"^Living at home at six months$", r"^Quality of life", False),
    "report-page.png": ("report", r"^Report$", None, False),
}
MAX_HEIGHT = 1500  # a crop longer than this is cut (the guides show the top of a long section)


def headings(page) -> list[tuple[str, float]]:
    """Every heading in the main block with its top in page pixels (the window is as tall as the content)."""
    sel = ", ".join(f'[data-testid="stMain"] {t}' for t in ("h1", "h2", "h3", "summary"))
    return page.evaluate(f"""() => [...document.querySelectorAll('{sel}')].map(h => [h.innerText.trim(),
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
    part.quantize(colors=128, method=Image.Quantize.MEDIANCUT, dither=Image.Dither.NONE).save(IMAGES / name,
                                                                                          optimize=True)
    return IMAGES / name


def go(page, name: str) -> None:
    page.locator('[data-testid="stSidebarNav"]').get_by_role("link", name=name, exact=True).click()
    page.get_by_role("heading", name=name, exact=True).first.wait_for(timeout=180_000)
    settle(page)


def main(argv: list[str]) -> int:
    """With a folder from an earlier run as the argument, crop again without browsing."""
    if argv:
        shots = Path(argv[0])
        found = json.loads((shots / "headings.json").read_text())
        for name in CROPS:
            print("wrote", crop(shots, found, name))
        return 0
    work = Path(tempfile.mkdtemp(prefix="fulcrum-shots-"))
    shots = work / "pages"
    shots.mkdir()
    found = browse(work, shots)
    (shots / "headings.json").write_text(json.dumps(found))
    print("page shots and headings in", shots)
    for name in CROPS:
        print("wrote", crop(shots, found, name))
    return 0


def browse(work: Path, shots: Path) -> dict[str, list]:
    """Walk the demo; full-page shots into `shots`, the offline report's top into docs/images; the headings."""
    from PIL import Image
    from playwright.sync_api import sync_playwright

    found: dict[str, list] = {}
    with app_server(work, timeout=180) as url, sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        page = browser.new_page(viewport=VIEWPORT)
        page.goto(url)
        page.get_by_text("2,400 patients").first.wait_for(timeout=180_000)
        settle(page)
        found["cohort"] = full_page(page, shots / "cohort.png")
        for name, shot in (("Outcomes by index", "outcomes"), ("Values", "values")):
            go(page, name)
            found[shot] = full_page(page, shots / f"{shot}.png")
        thumb = page.get_by_role("slider", name="bedbound")
        thumb.focus()
        thumb.press("Home")  # bedbound to -1, as the guide describes, with the keyboard
        settle(page)
        found["values_moved"] = full_page(page, shots / "values_moved.png")
        for name, shot in (("Randomised vs chosen", "selection"), ("Patient", "patient"), ("Report", "report")):
            go(page, name)
            found[shot] = full_page(page, shots / f"{shot}.png")
        with page.expect_download(timeout=180_000) as download:
            page.get_by_role("button", name=re.compile("Offline report")).click()
        report = work / "report.html"
        download.value.save_as(report)
        offline = browser.new_page(viewport=VIEWPORT)
        offline.goto(report.as_uri())
        offline.wait_for_function("() => document.querySelectorAll('.vega-embed svg').length > 0", timeout=60_000)
        offline.wait_for_timeout(1500)
        offline.screenshot(path=str(IMAGES / "report-offline-full.png"), clip={"x": 120, "y": 0, "width": 1160,
                                                                               "height": 1700}, full_page=True)
        browser.close()
    with Image.open(IMAGES / "report-offline-full.png") as im:
        part = im.convert("RGB").resize((WIDTH, round(im.height * WIDTH / im.width)), Image.LANCZOS)
    part.quantize(colors=128, method=Image.Quantize.MEDIANCUT, dither=Image.Dither.NONE).save(
        IMAGES / "report-offline.png", optimize=True)
    (IMAGES / "report-offline-full.png").unlink()
    return found


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))

"""The look: the contrast formula against W3C's definition, every text pair the app, charts and printed summary use
at 4.5:1 or better, the app's theme using the same colours, and the header escaping what the user typed."""
from __future__ import annotations

import sys
import tomllib
from pathlib import Path

import pytest

from explorer import look

ROOT = Path(__file__).resolve().parents[1]


def test_contrast_ratio_follows_the_wcag_formula():
    # WCAG 2.x "contrast ratio" and "relative luminance" definitions (W3C): black on white is 21:1, a colour on
    # itself 1:1, and the order of the pair does not matter.
    assert look.contrast("#000000", "#FFFFFF") == pytest.approx(21.0)
    assert look.contrast("#0072B2", "#0072B2") == pytest.approx(1.0)
    assert look.contrast("#E69F00", "#FFFFFF") == pytest.approx(look.contrast("#FFFFFF", "#E69F00"))
    # #767676 is the lightest grey that reaches 4.5:1 on white; #777777 just misses it (common practice: 4.54 and
    # 4.48, (memory)).
    assert look.contrast("#767676", "#FFFFFF") == pytest.approx(4.54, abs=0.01)
    assert look.contrast("#777777", "#FFFFFF") == pytest.approx(4.48, abs=0.01)
    # sRGB linearisation: mid grey #808080 has relative luminance 0.2158 (W3C formula, (memory)).
    assert look.luminance("#808080") == pytest.approx(0.2158, abs=1e-4)


@pytest.mark.parametrize("fg,bg,where", look.TEXT_PAIRS)
def test_every_text_pair_reaches_four_and_a_half_to_one(fg, bg, where):
    assert look.contrast(fg, bg) >= look.MIN_TEXT_CONTRAST, where


def test_the_okabe_ito_orange_is_never_used_for_words():
    # the published orange on white is about 2.1:1, too pale for text; the second arm's words use a darker ink
    assert look.contrast(look.ARM_COLOURS[1], look.PAPER) < look.MIN_TEXT_CONTRAST
    assert look.ARM_INKS[1] != look.ARM_COLOURS[1]
    for fill in (*look.ARM_COLOURS, look.NEUTRAL, *look.STATE_COLOURS, look.DEATH_COLOUR):
        assert look.contrast(look.text_on(fill), fill) >= look.MIN_TEXT_CONTRAST, fill


def test_states_run_light_to_dark_and_death_is_neither_black_nor_an_arm_colour():
    levels = ["independent", "home_with_help", "care_home", "bedbound", "dead"]
    colours = look.state_colours(levels, [False] * 4 + [True])
    lum = [look.luminance(colours[lv]) for lv in levels]
    assert lum == sorted(lum, reverse=True)
    assert colours["dead"] not in ("#000000", *look.ARM_COLOURS)
    assert len(set(colours.values())) == len(levels)


def test_the_app_theme_uses_the_palette():
    theme = tomllib.loads((ROOT / "explorer" / "app_settings" / "config.toml").read_text())["theme"]
    assert theme["primaryColor"] == look.FOCUS
    assert theme["textColor"] == look.INK and theme["backgroundColor"] == look.PAPER
    assert theme["secondaryBackgroundColor"] == look.PANEL
    assert look.contrast(theme["textColor"], theme["backgroundColor"]) >= look.MIN_TEXT_CONTRAST
    assert look.contrast(look.PAPER, theme["primaryColor"]) >= look.MIN_TEXT_CONTRAST  # button text


def test_header_names_the_cohort_arms_and_patient_and_escapes_them(monkeypatch):
    monkeypatch.syspath_prepend(str(ROOT / "pages"))
    sys.modules.pop("ui_theme", None)
    import ui_theme

    html = ui_theme.header_html("<b>trial</b>.csv", 2400, ["lap<arotomy", "non-operative"], "cohort row 7", False)
    assert "&lt;b&gt;trial&lt;/b&gt;.csv" in html and "2,400 patients" in html and "lap&lt;arotomy" in html
    assert "cohort row 7" in html and "<b>trial" not in html
    assert "none chosen yet" in ui_theme.header_html("demo.csv", 10, ["a", "b"], None, True)
    assert ":focus-visible" in ui_theme.CSS and look.FOCUS in ui_theme.CSS

"""Fulcrum's look in one place: the palette, the ink and paper, and the contrast rule they must pass.

docs/look.md explains the choices; the chart builders, the printed summary and the app's theme all read
these constants, so a colour changes once, here. No plotting library is imported: this is a leaf module.
"""
from __future__ import annotations

from typing import Sequence

# Okabe M, Ito K (2008). Color Universal Design: how to make figures and presentations friendly to colorblind people.
OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9", "bluish_green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00", "reddish_purple": "#CC79A7",
}
ARM_COLOURS = (OKABE_ITO["blue"], OKABE_ITO["orange"])
# Words written in an arm's colour use these darker inks (the orange itself is too pale for text on paper).
ARM_INKS = (OKABE_ITO["blue"], "#8A5A00")
# Outcome states, best first, run from light to dark so the order reads without the key: the Okabe-Ito colours
# the arms do not use, sorted by relative luminance (yellow 0.75, sky blue 0.40, reddish purple 0.31, bluish
# green 0.26, vermillion 0.23). Death is a dark neutral, not black: the end of the scale, not a second code.
STATE_COLOURS = (OKABE_ITO["yellow"], OKABE_ITO["sky_blue"], OKABE_ITO["reddish_purple"], OKABE_ITO["bluish_green"],
                 OKABE_ITO["vermillion"])
DEATH_COLOUR = "#4A4A4A"
INK = "#1F2933"        # text and marks that carry numbers
MUTED = "#52606D"      # secondary text (captions, subtitles)
RULE = "#9AA5B1"       # hairlines, tracks and grid
NEUTRAL = "#E4E7EB"    # "no clear difference": neither arm
PAPER = "#FFFFFF"      # chart and page background
PANEL = "#F5F7FA"      # the app's secondary background (header, sidebar)
FOCUS = OKABE_ITO["blue"]
FONT_STACK = '"Source Sans", "Source Sans 3", "Source Sans Pro", "Segoe UI", "Helvetica Neue", Arial, sans-serif'
# Text pairs the app, the charts and the printed summary use: (foreground, background, where).
TEXT_PAIRS: tuple[tuple[str, str, str], ...] = (
    (INK, PAPER, "body text and chart labels"),
    (MUTED, PAPER, "captions and chart subtitles"),
    (INK, PANEL, "header and sidebar text"),
    (MUTED, PANEL, "header's secondary line"),
    (ARM_INKS[0], PAPER, "first arm's name in its colour"),
    (ARM_INKS[1], PAPER, "second arm's name in its colour"),
    (PAPER, ARM_COLOURS[0], "words inside a first-arm strip segment; buttons"),
    (INK, ARM_COLOURS[1], "words inside a second-arm strip segment"),
    (INK, NEUTRAL, "words inside a no-clear-difference segment"),
    (PAPER, FOCUS, "primary button text"),
)
MIN_TEXT_CONTRAST = 4.5  # WCAG 2.x success criterion 1.4.3 (AA) for normal-size text


def _channel(c: float) -> float:
    c /= 255.0
    return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4


def luminance(colour: str) -> float:
    """Relative luminance of an sRGB colour "#RRGGBB" (WCAG 2.x definition)."""
    h = colour.lstrip("#")
    if len(h) != 6:
        raise ValueError(f"expected #RRGGBB, got {colour!r}")
    r, g, b = (_channel(int(h[i:i + 2], 16)) for i in (0, 2, 4))
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def contrast(a: str, b: str) -> float:
    """WCAG 2.x contrast ratio (L_lighter + 0.05) / (L_darker + 0.05), from 1 to 21."""
    la, lb = luminance(a), luminance(b)
    hi, lo = max(la, lb), min(la, lb)
    return (hi + 0.05) / (lo + 0.05)


def text_on(background: str) -> str:
    """The text colour with the higher contrast on a background: ink or paper, or pure black when neither reaches
    the 4.5:1 rule (mid-tone fills such as the bluish green)."""
    best = INK if contrast(INK, background) >= contrast(PAPER, background) else PAPER
    return best if contrast(best, background) >= MIN_TEXT_CONTRAST else OKABE_ITO["black"]


def arm_colours(arms: Sequence[str]) -> dict[str, str]:
    """The first arm blue, the second orange (Okabe-Ito), the same in every chart and export."""
    if len(arms) != 2 or arms[0] == arms[1]:
        raise ValueError("arm_colours needs exactly two different arm labels")
    return {arms[0]: ARM_COLOURS[0], arms[1]: ARM_COLOURS[1]}


def state_colours(levels: Sequence[str], death: Sequence[bool]) -> dict[str, str]:
    """Colours for outcome states in their order (best first): light to dark, the death state dark neutral.

    death: per level, whether it is the death state (the caller knows; this module knows no outcome words).
    With K living states, the first K of STATE_COLOURS (so the best state is always the lightest).
    """
    out: dict[str, str] = {}
    k = 0
    for level, dead in zip(levels, death):
        if dead:
            out[level] = DEATH_COLOUR
        else:
            out[level] = STATE_COLOURS[k % len(STATE_COLOURS)]
            k += 1
    return out

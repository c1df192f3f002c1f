"""Fulcrum's look in the app: one stylesheet (type, grid, colours, a visible keyboard focus) and the header
that says, on every page, which tool this is, which cohort is loaded and which patient is in hand.

The colours come from explorer/look.py (docs/look.md explains them; tests check every text pair reaches 4.5:1).
Pages call nothing here; the app's entry script calls header() once per run.
"""
from __future__ import annotations

from html import escape
from typing import Any

import streamlit as st

from explorer import look


# A lever on its fulcrum: the beam carries the two arms' colours at its ends. Drawn here, owned by no one else.
MARK = (f'<svg class="fulcrum-mark" viewBox="0 0 44 28" width="44" height="28" aria-hidden="true" focusable="false">'
        f'<rect x="2" y="9" width="40" height="3" rx="1" fill="{look.INK}"/>'
        f'<rect x="2" y="3" width="8" height="6" fill="{look.ARM_COLOURS[0]}"/>'
        f'<rect x="34" y="3" width="8" height="6" fill="{look.ARM_COLOURS[1]}"/>'
        f'<path d="M22 12 L30 26 L14 26 Z" fill="{look.INK}"/></svg>')

CSS = f"""
<style>
:root {{
  --f-ink: {look.INK}; --f-muted: {look.MUTED}; --f-rule: {look.RULE}; --f-panel: {look.PANEL};
  --f-paper: {look.PAPER}; --f-focus: {look.FOCUS}; --f-first: {look.ARM_COLOURS[0]}; --f-second: {look.ARM_COLOURS[1]};
  --f-unit: 8px;
}}
html, body, [data-testid="stAppViewContainer"] {{ font-size: 19px; color: var(--f-ink); }}
/* one grid: content in a measured column, spacing in multiples of one unit */
[data-testid="stMainBlockContainer"], .block-container {{ max-width: 1180px; padding-top: calc(3 * var(--f-unit));
  padding-left: calc(4 * var(--f-unit)); padding-right: calc(4 * var(--f-unit)); }}
[data-testid="stVerticalBlock"] {{ gap: calc(2 * var(--f-unit)); }}
[data-testid="stMarkdownContainer"] p, [data-testid="stMarkdownContainer"] li {{ font-size: 1.05rem; line-height: 1.5;
  max-width: 46em; }}
h1 {{ font-weight: 700; letter-spacing: -0.01em; border-bottom: 3px solid var(--f-ink);
  padding-bottom: var(--f-unit) !important; }}
h2 {{ font-weight: 700; border-top: 1px solid var(--f-rule); padding-top: calc(2 * var(--f-unit)) !important;
  margin-top: calc(2 * var(--f-unit)) !important; }}
h3 {{ font-weight: 600; }}
[data-testid="stCaptionContainer"], [data-testid="stCaptionContainer"] * {{ color: var(--f-muted) !important;
  opacity: 1 !important; }}
[data-testid="stSidebar"] [data-testid="stCaptionContainer"] * {{ color: var(--f-ink) !important; }}
[data-testid="stSidebarNav"] a span {{ font-size: 1.1rem; }}
.fulcrum-sentence {{ font-size: 1.1rem; line-height: 1.55; }}
/* keyboard: every focusable control shows where the focus is, never by colour alone */
a:focus-visible, button:focus-visible, input:focus-visible, textarea:focus-visible, select:focus-visible,
[role="radio"]:focus-visible, [role="checkbox"]:focus-visible, [role="slider"]:focus-visible, [role="tab"]:focus-visible,
[role="button"]:focus-visible, [tabindex]:focus-visible, summary:focus-visible {{
  outline: 3px solid var(--f-focus) !important; outline-offset: 2px !important; box-shadow: 0 0 0 5px var(--f-paper); }}
/* the header */
.fulcrum-head {{ display: grid; grid-template-columns: auto minmax(0, 1fr); align-items: center;
  gap: calc(3 * var(--f-unit)); background: var(--f-panel); border-bottom: 3px solid var(--f-ink);
  border-radius: 2px; padding: var(--f-unit) calc(2 * var(--f-unit)); margin-bottom: var(--f-unit); }}
.fulcrum-name {{ display: flex; align-items: center; gap: var(--f-unit); font-weight: 700; font-size: 1.35rem;
  letter-spacing: 0.01em; color: var(--f-ink); }}
.fulcrum-head dl {{ display: flex; flex-wrap: wrap; gap: 0 calc(3 * var(--f-unit)); margin: 0; }}
.fulcrum-head dl div {{ display: flex; gap: calc(var(--f-unit) / 2); align-items: baseline; }}
.fulcrum-head dt {{ color: var(--f-muted); font-size: 0.85rem; text-transform: uppercase; letter-spacing: 0.05em; }}
.fulcrum-head dd {{ margin: 0; font-weight: 600; color: var(--f-ink); white-space: nowrap; }}
.fulcrum-head .first {{ color: {look.ARM_INKS[0]}; }}
.fulcrum-head .second {{ color: {look.ARM_INKS[1]}; }}
.fulcrum-head dd.patient {{ white-space: normal; }}
/* the patient in hand: a row of its own under the name, cohort and arms, so a long line wraps at full width */
.fulcrum-head dl.who {{ grid-column: 1 / -1; }}
.fulcrum-head dl.who div {{ min-width: 0; }}
.fulcrum-head .demo {{ color: var(--f-muted); font-weight: 400; font-style: italic; }}
@media (max-width: 900px) {{ .fulcrum-head {{ grid-template-columns: 1fr; }} }}
</style>
"""


def header_html(cohort: str, n: int, arms: tuple[str, str] | list[str], patient: str | None, demo: bool) -> str:
    """The header's HTML: the name and mark, the cohort with its arms, the patient in hand (all user text escaped)."""
    who = escape(patient) if patient else '<span class="demo">none chosen yet (Patient page)</span>'
    note = ' <span class="demo">(invented)</span>' if demo else ""
    return (f'<header class="fulcrum-head" role="banner" aria-label="Fulcrum: cohort and patient in hand">'
            f'<div class="fulcrum-name">{MARK}<span>Fulcrum</span></div>'
            f'<dl><div><dt>Cohort</dt><dd>{escape(cohort)} · {n:,} patients{note}</dd></div>'
            f'<div><dt>Arms</dt><dd><span class="first">{escape(arms[0])}</span> or '
            f'<span class="second">{escape(arms[1])}</span></dd></div></dl>'
            f'<dl class="who"><div><dt>Patient</dt><dd class="patient">{who}</dd></div></dl></header>')


def header(ws: Any, patient: str | None) -> None:
    """The stylesheet and the header, at the top of every page (call once per run, before the page). patient: the
    session's one patient in a line (appstate.PatientChoice.describe), as the sidebar says it."""
    st.markdown(CSS, unsafe_allow_html=True)
    st.markdown(header_html(ws.filename, ws.cohort.n, ws.spec.cohort.arms, patient, bool(ws.is_demo)),
                unsafe_allow_html=True)

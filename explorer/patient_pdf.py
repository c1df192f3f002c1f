"""The patient summary as a PDF, drawn with reportlab (pure Python from PyPI; no browser, no system library).

It draws the same `patient.Summary` the HTML page shows: cautions, position, the per-100 rows (the same layout
as the app's, from charts_patient.layout),
each arm's outcomes with intervals, the values and whose they are, what they favour, and the limits.
"""
from __future__ import annotations

import io
from typing import Any, Mapping, Sequence
from xml.sax.saxutils import escape

from reportlab.graphics.shapes import Drawing, Line, Rect, String
from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.platypus import (KeepTogether, ListFlowable, ListItem, Paragraph, SimpleDocTemplate, Spacer, Table,
                                TableStyle)

from . import __version__
from .words import fmt, words
from .charts_patient import LABEL_SIZE, layout
from .look import INK, MUTED, PAPER, RULE
from .patient import PatientView
from .patient_summary import IconArray, Summary, summary_content

FONT, BOLD = "Helvetica", "Helvetica-Bold"
BODY = ParagraphStyle("body", fontName=FONT, fontSize=9, leading=11.5, alignment=TA_LEFT, spaceAfter=1.5)
SMALL = ParagraphStyle("small", parent=BODY, fontSize=8, leading=10, textColor=colors.HexColor("#444444"))
CELL = ParagraphStyle("cell", parent=BODY, fontSize=8.5, leading=10.5, spaceAfter=0)
CELL_BOLD = ParagraphStyle("cellb", parent=CELL, fontName=BOLD)
H1 = ParagraphStyle("h1", parent=BODY, fontName=BOLD, fontSize=15, leading=18, spaceAfter=3)
H2 = ParagraphStyle("h2", parent=BODY, fontName=BOLD, fontSize=11, leading=14, spaceBefore=5, spaceAfter=2,
                    textColor=colors.black)
H3 = ParagraphStyle("h3", parent=BODY, fontName=BOLD, fontSize=9.5, leading=12, spaceBefore=3, spaceAfter=1)
GRID = TableStyle([("GRID", (0, 0), (-1, -1), 0.5, colors.HexColor("#aaaaaa")),
                   ("BACKGROUND", (0, 0), (-1, 0), colors.HexColor("#eeeeee")),
                   ("VALIGN", (0, 0), (-1, -1), "TOP"),
                   ("LEFTPADDING", (0, 0), (-1, -1), 3), ("RIGHTPADDING", (0, 0), (-1, -1), 3),
                   ("TOPPADDING", (0, 0), (-1, -1), 1.5), ("BOTTOMPADDING", (0, 0), (-1, -1), 1.5)])
ROW_WIDTH = 118 * mm  # the per-100 rows' width on the page


def _p(text: str, style: ParagraphStyle = BODY) -> Paragraph:
    """A paragraph of plain text: the user's strings are escaped, never read as markup."""
    return Paragraph(escape(str(text)), style)


def _table(rows: Sequence[Sequence[str]], widths: Sequence[float] | None = None, header: bool = True) -> Table:
    cells = [[_p(c, CELL_BOLD if (header and i == 0) or j == 0 else CELL) for j, c in enumerate(r)]
             for i, r in enumerate(rows)]
    t = Table(cells, colWidths=widths, hAlign="LEFT", repeatRows=1 if header else 0)
    style = TableStyle(GRID.getCommands())
    if not header:
        style.add("BACKGROUND", (0, 0), (-1, 0), colors.white)
        style.add("BACKGROUND", (0, 0), (0, -1), colors.HexColor("#eeeeee"))
    t.setStyle(style)
    return t


def per_hundred_rows(a: IconArray, width: float = ROW_WIDTH) -> Drawing:
    """Both arms' rows of 100 marks with their run labels, laid out by charts_patient.layout (pixels scaled to
    the page; reportlab's y runs upwards, so every y is flipped)."""
    char = 0.5 * LABEL_SIZE * 1.08  # Helvetica's average character at the layout's label size, in layout pixels
    lay = layout(a.probabilities, a.colours, width=600, char_px=char)
    k = width / lay.width
    d = Drawing(width, lay.height * k)
    top = lay.height * k

    def y(v: float) -> float:
        return top - v * k

    for m in lay.marks:
        d.add(Rect(m["x0"] * k, y(m["y1"]), (m["x1"] - m["x0"]) * k, (m["y1"] - m["y0"]) * k,
                   fillColor=colors.HexColor(m["colour"]), strokeColor=colors.HexColor(RULE), strokeWidth=0.2))
    for lab in lay.labels:
        d.add(Line(lab["x"] * k, y(lab["leader_y0"]), lab["x"] * k, y(lab["leader_y1"]),
                   strokeColor=colors.HexColor(MUTED), strokeWidth=0.4))
    for lab in lay.labels:  # a paper box behind the words, so a leader passing behind never cuts them
        w = len(lab["text"]) * char * k
        d.add(Rect(lab["x"] * k - 0.5, y(lab["y"]) - 1.5, w + 1, LABEL_SIZE * k, fillColor=colors.HexColor(PAPER),
                   strokeColor=None))
        d.add(String(lab["x"] * k, y(lab["y"]), lab["text"], fontName=FONT, fontSize=LABEL_SIZE * k,
                     fillColor=colors.HexColor(INK)))
    for h in lay.arms:
        d.add(Rect(0, y(h["y"]), 9 * k, 13 * k, fillColor=colors.HexColor(h["bar"]), strokeColor=None))
        d.add(String(14 * k, y(h["y"]), h["text"], fontName=BOLD, fontSize=(LABEL_SIZE + 2) * k,
                     fillColor=colors.HexColor(h["colour"])))
    return d


def _swatch(colour: str) -> Drawing:
    d = Drawing(3 * mm, 3 * mm)
    d.add(Rect(0, 0, 3 * mm, 3 * mm, fillColor=colors.HexColor(colour), strokeColor=colors.HexColor(INK),
               strokeWidth=0.4))
    return d


def _arrays(a: IconArray, arms: Sequence[str]) -> KeepTogether:
    counts = [[_p("out of 100", CELL_BOLD), _p("", CELL)] + [_p(arm, CELL_BOLD) for arm in arms]]
    for lv in a.levels:
        counts.append([_p(words(lv), CELL), _swatch(a.colours[lv])] + [_p(str(a.counts[arm][lv]), CELL)
                                                                      for arm in arms])
    table = Table(counts, hAlign="LEFT", colWidths=[24 * mm, 5 * mm] + [15 * mm] * len(arms))
    table.setStyle(GRID)
    row = Table([[per_hundred_rows(a), table]], hAlign="LEFT", colWidths=[ROW_WIDTH + 4 * mm, None])
    row.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"), ("LEFTPADDING", (0, 0), (-1, -1), 0)]))
    return KeepTogether([_p(a.title, H3), row])


def _bullets(items: Sequence[str]) -> ListFlowable:
    return ListFlowable([ListItem(_p(t), leftIndent=10, value="circle") for t in items], bulletType="bullet",
                        start="\u2022", leftIndent=10, bulletFontSize=8)


def _story(s: Summary) -> list:
    arms = s.arms
    story: list = [_p(f"One patient, two options: {arms[0]} or {arms[1]}", H1)]
    box = Table([[[_p(c, SMALL) for c in s.cautions]]], colWidths=[186 * mm])
    box.setStyle(TableStyle([("BOX", (0, 0), (-1, -1), 1.2, colors.HexColor("#333333")),
                             ("BACKGROUND", (0, 0), (-1, -1), colors.HexColor("#f4f4f4"))]))
    story += [box]
    if s.identifiers:
        story += [_p("Patient", H2), _table([[k, v] for k, v in s.identifiers.items()], [40 * mm, 80 * mm], False)]
    story += [_p("Where this patient sits", H2), _p(s.position)]
    rows = [["index", "value", "cohort percentile", "cohort range", "from"]]
    for pl in s.placements:
        rows.append([pl.label, fmt(pl.value) + (f" {pl.units}" if pl.units else ""), fmt(pl.percentile),
                     f"{fmt(pl.cohort_range[0])} to {fmt(pl.cohort_range[1])}" + (" (outside)" if pl.outside else ""),
                     pl.source])
    story.append(_table(rows, [62 * mm, 22 * mm, 24 * mm, 34 * mm, 44 * mm]))
    story.append(_p("Limits of what the cohort can say", H2))
    story.append(_bullets(s.limits) if s.limits else _p("No limits found for this patient's values."))
    if s.arrays:
        story.append(_p("Out of 100 people like this", H2))
        story += [_arrays(a, arms) for a in s.arrays]
    story.append(_p("Each option's outcomes for people like this", H2))
    for o in s.outcomes:
        table = _table([[""] + list(arms)] + o["rows"], [50 * mm, 68 * mm, 68 * mm])
        story.append(KeepTogether([_p(o["title"], H3), table, Spacer(1, 1.5)] + [_p(t) for t in o["sentences"]]))
    story.append(_p("The values used, and whose they are", H2))
    story += [_p(t) for t in s.values]
    if s.weights:
        story.append(_table([["state", "weight (death 0, best state 1)"]]
                            + [[words(k), fmt(v)] for k, v in s.weights.items()], [50 * mm, 50 * mm]))
    else:
        story.append(_p("No state weights are set."))
    if s.judgements:
        story.append(_p("Which option these values favour, and how firmly", H2))
        for j in s.judgements:
            story.append(KeepTogether([_p(j.sentence)] + ([_p(j.level_sentence)] if j.level_sentence else [])
                                      + [_p(j.detail, SMALL)]))
    return story


def summary_pdf(s: Summary) -> bytes:
    """The summary as PDF bytes (A4), with the cautions and page numbers at the foot of every page."""
    buf = io.BytesIO()
    footer = " ".join(s.cautions)

    def foot(canvas, doc) -> None:
        canvas.saveState()
        canvas.setFont(FONT, 7)
        canvas.setFillColor(colors.HexColor("#444444"))
        text = canvas.beginText(12 * mm, 9 * mm)
        for line in _wrap(footer, 150):
            text.textLine(line)
        canvas.drawText(text)
        canvas.drawRightString(A4[0] - 12 * mm, 5 * mm, f"page {doc.page}")
        canvas.restoreState()

    doc = SimpleDocTemplate(buf, pagesize=A4, leftMargin=12 * mm, rightMargin=12 * mm, topMargin=12 * mm,
                            bottomMargin=18 * mm, title=f"One patient: {s.arms[0]} or {s.arms[1]}",
                            author="", subject="Fulcrum patient summary", creator=f"Fulcrum {__version__}",
                            invariant=1)
    doc.build(_story(s), onFirstPage=foot, onLaterPages=foot)
    return buf.getvalue()


def view_pdf(view: PatientView, cautions: Sequence[str], *, identifiers: Mapping[str, Any] | None = None) -> bytes:
    """One patient's printable summary as a PDF (drawn with reportlab, offline): the content the HTML shows."""
    return summary_pdf(summary_content(view, cautions, identifiers=identifiers))


def _wrap(text: str, width: int) -> list[str]:
    import textwrap

    return textwrap.wrap(text, width)

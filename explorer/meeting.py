"""The meeting view: everything a team needs about the patient in hand on one screen and one A4 page.

Where the patient sits on each index (value and cohort percentile); per 100 patients like them in each arm,
how many are dead, in each state of function and in the favourable states, with intervals; what the values
in use favour and whose values they are; the nearest break-even points; which patients the numbers rest on;
and the cautions. Everything comes from a `patient.PatientView` and the `results` rows: nothing is estimated
here, only chosen and put into words.
"""
from __future__ import annotations

import io
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence
from xml.sax.saxutils import escape

from .patient_summary import alive_at_horizon, has_states
from .words import fmt, interval_span, row_bounds, words
from .patient import PatientView, Prediction, count_of_100


@dataclass
class Meeting:
    """What the meeting view says, in order; the screen (HTML) and the one-page PDF both draw this."""

    arms: tuple[str, str]
    patient: str
    whose: str | None
    index_title: str
    placements: list[list[str]]  # [index, value, percentile, note]
    per_100: list[list[str]]  # [what, first arm, second arm]
    per_100_note: str
    verdicts: list[str]
    break_evens: list[str]
    rests_on: list[str]
    cautions: list[str]
    limits: list[str] = field(default_factory=list)


def _count(n: int, lo: int, hi: int) -> str:
    return f"{n} ({lo}-{hi})"


def _rows(p: Prediction, arms: Sequence[str]) -> list[list[str]]:
    """Per-100 rows of one prediction: dead by the horizon for survival, each state and the favourable states
    for an ordinal outcome, the mean with its interval otherwise."""
    title = p.title
    if alive_at_horizon(p):
        dead = [_count(100 - e.per_100, 100 - e.per_100_upper, 100 - e.per_100_lower)
                for e in (p.arms[a] for a in arms)]
        return [[f"Dead ({title.lower().replace('alive ', '')})"] + dead]
    out = []
    if any(e.distribution for e in p.arms.values()):
        levels = list(next(e.distribution for e in p.arms.values() if e.distribution))[:-1]  # death: row above
        out.append([title, "", ""])
        for lv in levels:
            out.append([f"   {words(lv)}"] + [
                _count(p.arms[a].distribution_per_100[lv], count_of_100(p.arms[a].distribution[lv][1]),
                       count_of_100(p.arms[a].distribution[lv][2])) for a in arms])
    if p.probability:
        what = p.measure.replace("probability of ", "").replace("probability ", "").replace("_", " ")
        out.append([f"   {what}" if out else f"{title} ({what})"]
                   + [_count(p.arms[a].per_100, p.arms[a].per_100_lower, p.arms[a].per_100_upper) for a in arms])
    else:
        unit = f" {p.units}" if p.units else ""
        out.append([f"{title} (average)"]
                   + [f"{fmt(p.arms[a].estimate)}{unit} ({fmt(p.arms[a].lower)}-{fmt(p.arms[a].upper)})"
                      for a in arms])
    return out


def _nearest_break_evens(rows: Sequence[Mapping[str, Any]], index: str, x: float, titles: Mapping[str, str],
                         index_title: str) -> list[str]:
    out = []
    for r in rows:
        if r.get("index") != index:
            continue
        name = titles.get(r["outcome"], r.get("label") or r["outcome"])
        points = [b for b in r.get("break_even") or [] if b.get("x") is not None]
        if not points:
            fav = r.get("favours_throughout")
            out.append(f"{name}: no break-even within the cohort's range"
                       + (f" ({fav} ahead throughout)" if fav else "") + ".")
            continue
        b = min(points, key=lambda b: abs(float(b["x"]) - x))
        side = "below" if x < float(b["x"]) else "above"
        fav = b.get("favours_below") if side == "below" else b.get("favours_above")
        span = interval_span(b, row_bounds(r))  # two parts as two, open ends as open, within the bounds
        out.append(f"{name}: {fmt(b['x'])} (interval {span}); patient {side}"
                   + (f": {fav} better." if fav else "."))
    return out


def _rests_on(coverage: Sequence[Mapping[str, Any]], x: float, arms: Sequence[str], index_title: str,
              rows: Sequence[Mapping[str, Any]], index: str) -> list[str]:
    out = []
    window = next((c for c in coverage if c["from"] <= x <= c["to"]), None)
    if window is not None:
        n = window["n"]
        parts = [f"{arm}: {n[arm]['randomised'] + n[arm]['chosen']} ({n[arm]['randomised']} randomised)"
                 for arm in arms]
        out.append(f"Patients with {index_title} {fmt(window['from'])} to {fmt(window['to'])}: " + "; ".join(parts)
                   + "." + (" Few were randomised here." if window.get("sparse") else ""))
    populations = {str(r["population"]) for r in rows if r.get("index") == index and r.get("population")}
    for pop in sorted(populations):
        out.append(f"Estimated from {pop}.")
    if not out:
        total = next((r["n"] for r in rows if r.get("index") == index and r.get("n")), None)
        if total:
            out.append("Estimated from all " + ", ".join(f"{v:,} {k}" for k, v in total.items()) + " patients.")
    return out


def _model_scale(units: str | None) -> bool:
    """Whether an index is on a model's scale (a log hazard, log odds) that no one reads directly."""
    return bool(units) and any(w in units.lower() for w in ("log", "logit", "linear predictor"))


def meeting_content(view: PatientView, rows: Sequence[Mapping[str, Any]], cautions: Sequence[str], *,
                    patient: str, whose: str | None, titles: Mapping[str, str],
                    coverage: Sequence[Mapping[str, Any]] | None = None) -> Meeting:
    """The meeting view along the view's primary index. rows: the `results` rows; titles: outcome labels;
    coverage: patients per window of the primary index by arm and allocation (when the cohort has them)."""
    index = view.primary_index
    pl = view.placements[index]
    placements = [[p.label, fmt(p.value) + (f" {p.units}" if p.units else ""), f"{p.percentile:.0f}th",
                   "; ".join(t for t in ("outside the cohort's range" if p.outside else "",
                                         "a model-scale value: read its percentile" if _model_scale(p.units) else "")
                             if t)] for p in view.placements.values()]
    along = [p for p in view.predictions if p.index == index]
    per_100: list[list[str]] = []
    for p in sorted(along, key=lambda p: (not alive_at_horizon(p), not has_states(p))):
        per_100.extend(_rows(p, view.arms))
    verdicts = []
    for j in (j for j in view.judgements if j.index == index):
        verdicts.append(j.sentence)
    if not verdicts:
        verdicts.append("No values are set, so no arm is favoured on balance; see each outcome above.")
    return Meeting(view.arms, patient, whose, pl.label, placements, per_100,
                   f"Per 100 patients like this one ({pl.label} {fmt(pl.value)}), with the likely range "
                   f"({view.level:.0%} interval).",
                   verdicts, _nearest_break_evens(rows, index, pl.value, titles, pl.label),
                   _rests_on(coverage or [], pl.value, view.arms, pl.label, rows, index), list(cautions),
                   list(view.limits[:2]))


# ------------------------------------------------------------------------------------------
# On screen: one HTML block (escaped; the user's strings never become markup)
# ------------------------------------------------------------------------------------------
CSS = """
<style>
.fm { font-size: 12px; line-height: 1.2; }
.fm table { border-collapse: collapse; margin: 0 0 6px 0; width: 100%; }
.fm th, .fm td { border: 1px solid #bbb; padding: 1px 6px; text-align: left; vertical-align: top; }
.fm th { background: #eee; }
.fm h4 { font-size: 14px; margin: 4px 0 2px 0; padding: 0; }
.fm p, .fm li { margin: 0 0 1px 0; font-size: 12px; line-height: 1.2; }
.fm td, .fm th { font-size: 12px; line-height: 1.15; }
.fm ul { margin: 0 0 4px 18px; padding: 0; }
.fm .verdict { border-left: 4px solid #0072B2; padding: 3px 8px; background: #f2f7fb; margin-bottom: 4px; }
.fm .small { font-size: 12px; color: #444; }
.fm-grid { display: grid; grid-template-columns: 1fr 1.1fr; gap: 12px; }
</style>
"""


def _table_html(head: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    h = "".join(f"<th>{escape(c)}</th>" for c in head)
    body = "".join("<tr>" + "".join(f"<td>{escape(str(c))}</td>" for c in r) + "</tr>" for r in rows)
    return f"<table><tr>{h}</tr>{body}</table>"


def meeting_html(m: Meeting) -> str:
    """The meeting view as one HTML block for the screen."""
    left = ("<h4>Where this patient sits</h4>"
            + _table_html(["Index", "Value", "Cohort percentile", ""], m.placements)
            + f"<h4>Nearest break-even points along {escape(m.index_title)}</h4><ul>" + "".join(f"<li>{escape(t)}</li>" for t in m.break_evens)
            + "</ul><h4>What the numbers rest on</h4><ul>" + "".join(f"<li>{escape(t)}</li>" for t in m.rests_on)
            + "".join(f"<li>{escape(t)}</li>" for t in m.limits) + "</ul>")
    right = ("<h4>Per 100 patients like this one</h4>"
             + _table_html(["", *m.arms], m.per_100) + f"<p class='small'>{escape(m.per_100_note)}</p>"
             + "<h4>What the values favour" + (f" ({escape(m.whose)} values)" if m.whose else "") + "</h4>"
             + "".join(f"<div class='verdict'>{escape(v)}</div>" for v in m.verdicts))
    return (CSS + "<div class='fm'>"
            + f"<p><b>Patient:</b> {escape(m.patient)}. <b>Arms:</b> {escape(m.arms[0])} and {escape(m.arms[1])}.</p>"
            + f"<div class='fm-grid'><div>{left}</div><div>{right}</div></div>"
            + f"<p class='small'>{escape(' '.join(m.cautions))}</p></div>")


# ------------------------------------------------------------------------------------------
# On paper: one A4 page (reportlab, offline)
# ------------------------------------------------------------------------------------------
def meeting_pdf(m: Meeting) -> bytes:
    """The meeting view on one A4 page; the type shrinks until it fits (it never runs onto a second page)."""
    from reportlab.lib.pagesizes import A4
    from reportlab.lib.units import mm
    from reportlab.platypus import SimpleDocTemplate

    for size in (9.0, 8.5, 8.0, 7.5, 7.0, 6.5, 6.0):
        buf = io.BytesIO()
        pages = []
        doc = SimpleDocTemplate(buf, pagesize=A4, leftMargin=14 * mm, rightMargin=14 * mm, topMargin=12 * mm,
                                bottomMargin=12 * mm, title="Fulcrum meeting view", author="Fulcrum")
        doc.build(_story(m, size, doc.width), onLaterPages=lambda c, d: pages.append(d.page))  # noqa: B023 (built here)
        if not pages:
            return buf.getvalue()
    return buf.getvalue()


def _story(m: Meeting, size: float, width: float) -> list:
    from reportlab.lib import colors
    from reportlab.lib.styles import ParagraphStyle
    from reportlab.platypus import Paragraph, Spacer, Table, TableStyle

    body = ParagraphStyle("b", fontName="Helvetica", fontSize=size, leading=size * 1.25, spaceAfter=1)
    bold = ParagraphStyle("bb", parent=body, fontName="Helvetica-Bold")
    h = ParagraphStyle("h", parent=body, fontName="Helvetica-Bold", fontSize=size + 2, leading=(size + 2) * 1.3,
                       spaceBefore=4, spaceAfter=2)
    title = ParagraphStyle("t", parent=h, fontSize=size + 5, leading=(size + 5) * 1.25)
    small = ParagraphStyle("s", parent=body, fontSize=size - 1, leading=(size - 1) * 1.25,
                           textColor=colors.HexColor("#444444"))
    grid = TableStyle([("GRID", (0, 0), (-1, -1), 0.5, colors.HexColor("#aaaaaa")),
                       ("BACKGROUND", (0, 0), (-1, 0), colors.HexColor("#eeeeee")), ("VALIGN", (0, 0), (-1, -1), "TOP"),
                       ("TOPPADDING", (0, 0), (-1, -1), 1), ("BOTTOMPADDING", (0, 0), (-1, -1), 1)])

    def p(text: str, style=body) -> Paragraph:
        return Paragraph(escape(str(text)), style)

    def table(head: Sequence[str], rows: Sequence[Sequence[str]], widths: Sequence[float]) -> Table:
        t = Table([[p(c, bold) for c in head]] + [[p(c) for c in r] for r in rows], colWidths=widths, hAlign="LEFT")
        t.setStyle(grid)
        return t

    story = [p("Meeting view", title), p(f"Patient: {m.patient}. Arms: {m.arms[0]} and {m.arms[1]}."),
             p(" ".join(m.cautions), small),
             p("Where this patient sits", h),
             table(["Index", "Value", "Cohort percentile", ""], m.placements,
                   [width * 0.4, width * 0.2, width * 0.15, width * 0.25]),
             p("Per 100 patients like this one", h),
             table(["", *m.arms], m.per_100, [width * 0.46, width * 0.27, width * 0.27]), p(m.per_100_note, small),
             p("What the values favour" + (f" ({m.whose} values)" if m.whose else ""), h),
             *[p(v) for v in m.verdicts],
             p("Nearest break-even points", h), *[p("- " + t) for t in m.break_evens],
             p("What the numbers rest on", h), *[p("- " + t) for t in [*m.rests_on, *m.limits]],
             Spacer(1, 4), p("Made with Fulcrum, a research and discussion aid.", small)]
    return story


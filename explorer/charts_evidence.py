"""Charts, tables and report sections for value of information (`evidence` rows) and study plans (`plan` documents).

Presentation only: every number comes from the results document or the plan document.
"""
from __future__ import annotations

from typing import Any, Mapping, Sequence

import altair as alt
import pandas as pd

from . import charts_common as cc
from . import look
from . import words as wd

EVIDENCE_COLOUR = look.OKABE_ITO["reddish_purple"]
STRATEGY_COLOURS = (look.OKABE_ITO["blue"], look.OKABE_ITO["vermillion"], look.OKABE_ITO["bluish_green"])
STRATEGY_WORDS = {"whole_range": "whole range", "around_break_even": "around the break-even",
                  "fill_thin": "where randomised patients are thin"}


def evidence_title(row: Mapping[str, Any]) -> str:
    what = row["measure"] if row["outcome"] != "composite" else f"composite: {row['measure']}"
    return wd.words(what)


def evidence_chart(row: Mapping[str, Any], index_label: str, *, width: int = 620, height: int = 240,
                   style: bool = True) -> alt.TopLevelMixin:
    """Value of information per 100 patients along the index: an area under a line, the threshold as a thin rule,
    and the stretches above it as a band of ticks beneath the axis."""
    df = pd.DataFrame(cc.thinned(row["curve"]), columns=["x", "per_100"])  # the evpi column is not drawn
    base = alt.Chart(df)
    y = alt.Y("per_100:Q", title=wd.wrap(f"{row['units']}", 40), scale=alt.Scale(zero=True))
    x = alt.X("x:Q", title=index_label, scale=alt.Scale(zero=False, nice=False))
    layers: list[alt.Chart] = [
        base.mark_area(color=EVIDENCE_COLOUR, opacity=0.18).encode(x=x, y=y),
        base.mark_line(color=EVIDENCE_COLOUR, strokeWidth=3).encode(
            x=x, y=y, tooltip=[alt.Tooltip("x:Q", title=index_label, format=".3g"),
                               alt.Tooltip("per_100:Q", title=row["units"], format=".3g")]),
    ]
    if row.get("threshold") is not None:
        layers.append(alt.Chart(pd.DataFrame({"t": [row["threshold"]]})).mark_rule(
            color=look.INK, strokeDash=[2, 3], strokeWidth=1.5).encode(y="t:Q"))
    spans = pd.DataFrame(row.get("above_threshold") or [])
    if len(spans):
        layers.append(alt.Chart(spans).mark_rect(color=EVIDENCE_COLOUR, opacity=0.9, height=8).encode(
            x="from:Q", x2="to:Q", y=alt.value(height - 5)))
    chart = alt.layer(*layers).properties(width=width, height=height)
    subtitle = ("Expected loss from choosing by today's estimates instead of the truth; dotted line: the threshold; "
                "bar along the foot: where it is exceeded")
    return cc.finish_chart(chart, evidence_title(row), subtitle, row["sentence"], style)


def evidence_table(row: Mapping[str, Any], every: int = 20) -> pd.DataFrame:
    pts = row["curve"][::every]
    return pd.DataFrame({"index value": [wd.fmt(p["x"]) for p in pts],
                         row["units"]: [wd.fmt(p["per_100"]) for p in pts]})


def evidence_sections(doc: Mapping[str, Any]) -> list[dict]:
    """Report sections for the document's `evidence` rows (extra_sections shape), busiest first."""
    labels = {r["index"]: cc.index_label_of(r) for r in doc.get("results", [])}
    rows = sorted(doc.get("evidence") or [], key=lambda r: -(r["peak"] or {}).get("per_100", 0.0)
                  / max(r["threshold"] or 1.0, 1e-12))
    out = []
    for row in rows:
        label = labels.get(row["index"], row["index"])
        out.append({"title": f"Where more evidence would matter: {evidence_title(row)} along {label}",
                    "text": row["sentence"], "chart": evidence_chart(row, label),
                    "table": evidence_table(row),
                    "notes": [f"Uncertainty from the {row['method']}. Value of information is the expected value of "
                              "perfect information (Raiffa and Schlaifer 1961; Claxton 1999): what choosing each "
                              "patient's arm with the truth known would gain over choosing by today's estimates."]})
    return out


def plan_chart(doc: Mapping[str, Any], *, width: int = 560, height: int = 260, style: bool = True
               ) -> alt.TopLevelMixin:
    """Chance of reaching the target against the number of new patients, one line per recruitment strategy, with
    its simulation error as a vertical bar."""
    df = pd.DataFrame(doc["rows"])
    df["strategy words"] = df["strategy"].map(STRATEGY_WORDS)
    df["lo"] = (df["chance"] - 2 * df["chance_se"]).clip(lower=0)
    df["hi"] = (df["chance"] + 2 * df["chance_se"]).clip(upper=1)
    names = [STRATEGY_WORDS[s["name"]] for s in doc["strategies"]]
    colour = alt.Color("strategy words:N", title="recruit", legend=alt.Legend(symbolStrokeWidth=4, orient="bottom"),
                       scale=alt.Scale(domain=names, range=list(STRATEGY_COLOURS[:len(names)])))
    sizes = [int(n) for n in doc["sizes"]]
    x = alt.X("new_patients:Q", title="new randomised patients (1:1)",
              scale=alt.Scale(type="log", domain=[min(sizes), max(sizes)]), axis=alt.Axis(values=sizes))
    y = alt.Y("chance:Q", title="share of simulated studies reaching the target", axis=alt.Axis(format="%"),
              scale=alt.Scale(domain=[0, 1]))
    base = alt.Chart(df)
    chart = alt.layer(
        base.mark_rule(strokeWidth=2).encode(x=x, y="lo:Q", y2="hi:Q", color=colour),
        base.mark_line(strokeWidth=3).encode(x=x, y=y, color=colour),
        base.mark_point(filled=True, size=90, shape="diamond").encode(
            x=x, y=y, color=colour, tooltip=["strategy words:N", "new_patients:Q",
                                             alt.Tooltip("chance:Q", format=".0%"), alt.Tooltip("width:Q", format=".3g")]),
    ).properties(width=width, height=height)
    return cc.finish_chart(chart, "How many more patients, recruited where?", doc["target"]["words"],
                      " ".join(doc["summary"]), style)


def plan_table(doc: Mapping[str, Any]) -> pd.DataFrame:
    return pd.DataFrame([{"recruit": STRATEGY_WORDS[r["strategy"]], "new patients": r["new_patients"],
                          "median interval width": wd.fmt(r["width"]),
                          "reaches the target": "" if r["chance"] is None else
                          f"{100 * r['chance']:.0f}% (+/- {100 * r['chance_se']:.0f})",
                          "finite intervals": "" if r["finite_share"] is None else f"{100 * r['finite_share']:.0f}%"}
                         for r in doc["rows"]])


__all__: Sequence[str] = ("evidence_chart", "evidence_table", "evidence_sections", "plan_chart", "plan_table")

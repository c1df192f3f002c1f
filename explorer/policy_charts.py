"""Charts, tables and report sections for the rule consequences (the results' `policy` rows).

Two charts: the rule curve (per-100 value against the threshold, with its band, the two blanket rules and the
chosen threshold) and a simple per-100 display of the outcome's levels under three rules (everyone first arm,
the rule at the chosen threshold, everyone second arm). The per-100 display is deliberately plain and sits behind
`frequency_chart` so a shared frequency display can replace it without touching the page or the report.
"""
from __future__ import annotations

from typing import Any, Mapping, Sequence

import altair as alt
import pandas as pd

from . import charts_common as cc
from . import look
from .policy import fmt, sentence


def _at(row: Mapping[str, Any], t: float | None) -> int:
    """Position of the curve point at or just below threshold t (the best threshold when t is None)."""
    pts = row["curve"]
    if t is None:
        t = row["best"]["threshold"]
    j = 0
    for i, p in enumerate(pts):
        if p["threshold"] <= t + 1e-12:
            j = i
    return j


def unit_words(row: Mapping[str, Any]) -> str:
    return "patients per 100" if row["counts_patients"] else f"{row['units'] or 'total'} per 100 patients"


@cc.quick_chart
def rule_curve_chart(row: Mapping[str, Any], arms: Sequence[str], threshold: float | None = None, *,
                     index_title: str | None = None, style: bool = True) -> alt.TopLevelMixin:
    """Per-100 value of the rule at every threshold, its band, the blanket rules and the chosen threshold."""
    colours = look.arm_colours(arms)
    df = pd.DataFrame([{"threshold": p["threshold"], "value": p["value"], "lo": p["ci"][0], "hi": p["ci"][1],
                        "first": p["first_share"]} for p in row["curve"]])
    x = alt.X("threshold:Q", title=f"threshold t on {index_title or row['index']}", scale=alt.Scale(zero=False))
    y_title = f"{row['title']}: {unit_words(row)}"
    band = cc.base_chart(df).mark_area(opacity=0.25, color=look.INK).encode(x=x, y=alt.Y("lo:Q", title=y_title,
                                                                                    scale=alt.Scale(zero=False)),
                                                                       y2="hi:Q")
    line = cc.base_chart(df).mark_line(color=look.INK, strokeWidth=3, interpolate="step-after").encode(
        x=x, y="value:Q", tooltip=[alt.Tooltip("threshold:Q", format=".3g"), alt.Tooltip("value:Q", format=".3g"),
                                   alt.Tooltip("first:Q", title=f"given {arms[0]} per 100", format=".0f")])
    blankets = pd.DataFrame([{"rule": f"everyone {arms[0]}", "value": row["all_first"]["value"], "arm": arms[0]},
                             {"rule": f"everyone {arms[1]}", "value": row["all_second"]["value"], "arm": arms[1]}])
    rules = cc.base_chart(blankets).mark_rule(strokeDash=[8, 5], strokeWidth=3).encode(
        y="value:Q", color=alt.Color("arm:N", scale=alt.Scale(domain=list(arms), range=[colours[a] for a in arms]),
                                     legend=alt.Legend(title="dashed: everyone given")),
        tooltip=[alt.Tooltip("rule:N"), alt.Tooltip("value:Q", format=".3g")])
    b = row["best"]
    layers = [band, line, rules]
    if b["ci"][0] is not None and b["ci"][1] is not None:
        span = pd.DataFrame([{"from": b["ci"][0], "to": b["ci"][1]}])
        layers.insert(0, cc.base_chart(span).mark_rect(opacity=0.12, color=look.OKABE_ITO["bluish_green"]).encode(
            x="from:Q", x2="to:Q"))
    j = _at(row, threshold)
    here = pd.DataFrame([{"threshold": row["curve"][j]["threshold"], "value": row["curve"][j]["value"]}])
    layers.append(cc.base_chart(here).mark_rule(strokeWidth=2, color=look.INK).encode(x="threshold:Q"))
    layers.append(cc.base_chart(here).mark_point(size=160, filled=True, color=look.INK, shape="diamond").encode(
        x="threshold:Q", y="value:Q"))
    chart = cc.sized_chart(alt.layer(*layers), cc.WIDTH, cc.HEIGHT)
    lo_arm = arms[0] if row["direction"] == "first_below" else arms[1]
    return cc.finish_chart(chart, f"{row['title']}: {lo_arm} below t, per 100 of {row['target']['name']}",
                      "line: the rule at each threshold (shaded: interval); dashed: everyone given one arm; "
                      "pale green: interval of the best threshold; diamond: the threshold shown",
                      describe_rule(row, arms, threshold), style)


def describe_rule(row: Mapping[str, Any], arms: Sequence[str], threshold: float | None = None) -> str:
    """The chart in words: the rule at the threshold shown, then the best threshold (policy.sentence)."""
    p = row["curve"][_at(row, threshold)]
    lo_arm = arms[0] if row["direction"] == "first_below" else arms[1]
    return (f"At threshold {p['threshold']:.3g} ({lo_arm} below it; {fmt(p['first_share'])} of 100 given "
            f"{arms[0]}): {fmt(p['value'])} {unit_words(row)} (interval {fmt(p['ci'][0])} to {fmt(p['ci'][1])}). "
            + sentence(row, arms))


def level_counts(row: Mapping[str, Any], arms: Sequence[str], threshold: float | None = None) -> pd.DataFrame:
    """Per 100 patients, each level under everyone-first, the rule at the threshold, and everyone-second."""
    j = _at(row, threshold)
    t = row["curve"][j]["threshold"]
    lo_arm = arms[0] if row["direction"] == "first_below" else arms[1]
    rule = f"{lo_arm} below {t:.3g}"
    out = []
    for lv in row.get("levels") or []:
        out.append({"level": lv["level"], f"everyone {arms[0]}": lv["all_first"]["value"], rule: lv["values"][j],
                    f"everyone {arms[1]}": lv["all_second"]["value"]})
    return pd.DataFrame(out)


@cc.quick_chart
def per_hundred_bars(row: Mapping[str, Any], arms: Sequence[str], threshold: float | None = None, *,
                     style: bool = True) -> alt.TopLevelMixin | None:
    """A plain per-100 display: one bar of 100 patients per rule, split by level (best level first)."""
    table = level_counts(row, arms, threshold)
    if table.empty:
        return None
    levels = list(table["level"])
    colours = cc.state_colours(levels)
    rules = [c for c in table.columns if c != "level"]
    long = table.melt(id_vars="level", var_name="rule", value_name="per100")
    long["order"] = long["level"].map({lv: i for i, lv in enumerate(levels)})
    long["label"] = long["per100"].map(lambda v: f"{v:.0f}")
    bars = cc.base_chart(long).mark_bar(stroke="white", strokeWidth=1).encode(
        y=alt.Y("rule:N", sort=rules, title=None),
        x=alt.X("per100:Q", title="patients out of 100", scale=alt.Scale(domain=[0, 100])),
        color=alt.Color("level:N", sort=levels, scale=alt.Scale(domain=levels, range=[colours[lv] for lv in levels]),
                        legend=alt.Legend(title="state", orient="bottom")),
        order=alt.Order("order:Q"),
        tooltip=[alt.Tooltip("rule:N"), alt.Tooltip("level:N"), alt.Tooltip("per100:Q", format=".1f")])
    text = cc.base_chart(long[long["per100"] >= 5]).mark_text(fontSize=cc.FONT["text"] - 2).encode(
        color=alt.condition(alt.datum.level == levels[-1], alt.value("white"), alt.value("black")),
        y=alt.Y("rule:N", sort=rules), x=alt.X("per100:Q", stack="zero", bandPosition=0.5),
        detail="level:N", order=alt.Order("order:Q"), text="label:N")
    chart = cc.sized_chart(alt.layer(bars, text), cc.WIDTH, 60 * len(rules) + 40)
    return cc.finish_chart(chart, f"{row['title']}: out of 100 of {row['target']['name']}", None,
                      per_hundred_words(row, arms, threshold), style)


# The page and the report draw the per-100 display through this name, so a shared display can replace it.
frequency_chart = per_hundred_bars


def rule_table(row: Mapping[str, Any], arms: Sequence[str]) -> pd.DataFrame:
    """The curve as a table: threshold, given the first arm per 100, value and interval."""
    return pd.DataFrame([{"threshold t": fmt(p["threshold"], False), f"given {arms[0]} per 100": fmt(p["first_share"]),
                          unit_words(row): fmt(p["value"]), "interval": f"{fmt(p['ci'][0])} to {fmt(p['ci'][1])}"}
                         for p in row["curve"]])


def index_titles(doc: Mapping[str, Any]) -> dict[str, str]:
    """Index name -> its label, from the results rows."""
    return {r["index"]: cc.index_label_of(r) for r in doc.get("results") or []}


def report_sections(doc: Mapping[str, Any]) -> list[dict]:
    """Report sections (explorer.report's extra_sections shape): one per composite (else outcome) x index, in the
    direction whose best rule is better, with the consequences of every outcome at that rule in the notes."""
    arms = doc["arms"]
    rows = doc.get("policy") or []
    if not rows:
        return []
    out = []
    titles = index_titles(doc)
    for index in dict.fromkeys(r["index"] for r in rows):
        title = titles.get(index, index)
        here = [r for r in rows if r["index"] == index]
        main = [r for r in here if r["outcome"] == "composite"] or here
        keys = list(dict.fromkeys((r["outcome"], r["composite"]) for r in main))
        for key in keys:
            pair = [r for r in main if (r["outcome"], r["composite"]) == key]
            row = max(pair, key=lambda r: (1 if r["higher_is_better"] else -1) * (r["best"]["value"] or 0))
            notes = [sentence(r, arms) for r in here if r is not row and r["direction"] == row["direction"]]
            cp = row.get("current_practice")
            if cp:
                notes.append(cp["note"])
            out.append({"title": f"Rules along {title}: {row['title']}", "text": describe_rule(row, arms),
                        "chart": rule_curve_chart(row, arms, index_title=title), "table": rule_table(row, arms),
                        "notes": [*notes, *row.get("warnings", [])]})
        first = [r for r in main if (r["outcome"], r["composite"]) == keys[0]]
        lead = max(first, key=lambda r: (1 if r["higher_is_better"] else -1) * (r["best"]["value"] or 0))
        for r in here:
            if r.get("levels") and r["direction"] == lead["direction"]:
                t = lead["best"]["threshold"]
                table = level_counts(r, arms, t)
                out.append({"title": f"Rules along {title}: {r['title']} out of 100, at {lead['title']}'s best "
                                     f"threshold", "text": per_hundred_words(r, arms, t),
                            "chart": frequency_chart(r, arms, t), "table": table.round(1), "notes": []})
    return out


def per_hundred_words(row: Mapping[str, Any], arms: Sequence[str], threshold: float | None = None) -> str:
    table = level_counts(row, arms, threshold)
    rules = [c for c in table.columns if c != "level"]
    return (f"Out of 100 of {row['target']['name']}: " + "; ".join(
        f"{r}: " + ", ".join(f"{fmt(v)} {lv}" for lv, v in zip(table["level"], table[r])) for r in rules) + ".")

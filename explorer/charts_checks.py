"""Can the curves be trusted? Charts, tables and sentences from the results' `checks` rows: observed against
fitted, calibration, sliding windows, the break-even by horizon, Kaplan-Meier curves, the baseline table and
the clustering note."""
from __future__ import annotations

from typing import Any, Iterable, Mapping, Sequence

import altair as alt
import pandas as pd

from .charts_common import (ARM_LEGEND, AXIS_CHARS, FONT, HEIGHT, WIDTH, arm_scale, base_chart, finish_chart, quick_chart, sized_chart,
                            check_for, index_label_of, is_discrete, is_probability, outcome_title, x_title)
from .charts_curves import breakeven_table, curve_frame, difference_frame
from .look import INK, OKABE_ITO
from .words import cap, fmt, interval_words, ordinal, percentile_words, words, wrap


WINDOW_COLOUR = OKABE_ITO["reddish_purple"]
FEW_AT_RISK_COLOUR = "#AAAAAA"
AT_RISK_ROW = 24
PANEL = (300, 190)


def describe_percentiles(row: Mapping[str, Any], index_label: str | None = None) -> str:
    """Each break-even point in the index's own units and as a cohort percentile, in words."""
    label = index_label_of(row, index_label)
    units = (row.get("index_info") or {}).get("units")
    unit = f" {units}" if units else ""
    parts = [f"{fmt(b['x'])}{unit} lies at {percentile_words(b)} on {label} ({fmt(b['x_percentile'])}% of "
             "patients have a lower value, ties counted half)" for b in row.get("break_even") or []
             if b.get("x_percentile") is not None]
    return ("The break-even point " + "; ".join(parts) + ".") if parts else ""


def describe_effect_modification(em: Mapping[str, Any] | None) -> str:
    """The effect-modification test in words (the engine's sentence), with its method."""
    if not em:
        return "The test of effect modification was not run."
    return f"{em['sentence']} Method: {em.get('method', 'likelihood ratio')}."


def effect_modification_words(em: Mapping[str, Any] | None) -> str:
    """A short table cell: p-value and whether the evidence of a changing effect is weak."""
    if not em or em.get("p_value") is None:
        return ""
    verdict = "weak evidence of a change" if em.get("weak_evidence") else "effect changes"
    return f"p = {fmt(em['p_value'])} ({verdict})"


def breakeven_summary_table(doc: Mapping[str, Any]) -> pd.DataFrame:
    """breakeven_table with the effect-modification test before the break-even and each break-even's cohort
    percentile after it (one row per outcome x index, composites last)."""
    table = breakeven_table(doc)
    rows = list(doc.get("results", [])) + list(doc.get("composite", []))
    checks = doc.get("checks") or []
    tests, pcts = [], []
    for row in rows:
        c = None if "weights" in row else check_for(checks, row["outcome"], row["index"])
        tests.append(effect_modification_words((c or {}).get("effect_modification")))
        pcts.append("; ".join(ordinal(b["x_percentile"]) for b in row.get("break_even") or []
                              if b.get("x_percentile") is not None))
    table.insert(table.columns.get_loc("break-even"), "effect changes along the index?", tests)
    table.insert(table.columns.get_loc("break-even") + 1, "cohort percentile", pcts)
    return table


def _check_x_title(check: Mapping[str, Any], row: Mapping[str, Any] | None, index_label: str | None) -> str:
    if row is not None:
        return x_title(row, index_label)
    return index_label or str(check.get("index", "index"))


def observed_frame(check: Mapping[str, Any], arms: Sequence[str]) -> pd.DataFrame:
    """Observed band values with their intervals beside the band's mean fitted value, per arm."""
    recs = []
    for r in check.get("observed_vs_fitted") or []:
        lo, hi = r.get("observed_ci") or [None, None]
        recs.append({"arm": r["arm"], "from": r["band_from"], "to": r["band_to"], "n": r["n"],
                     "x": (float(r["band_from"]) + float(r["band_to"])) / 2, "observed": r["observed"],
                     "lower": lo, "upper": hi, "fitted": r["fitted"],
                     "band": fmt(r["band_from"]) if r["band_from"] == r["band_to"]
                     else f"{fmt(r['band_from'])} to {fmt(r['band_to'])}"})
    df = pd.DataFrame(recs, columns=["arm", "from", "to", "n", "x", "observed", "lower", "upper", "fitted", "band"])
    if len(df):
        step = _span(df["x"]) * 0.012
        df["x"] = df["x"] + df["arm"].map({arms[0]: -step, arms[1]: step}).fillna(0.0)
    return df


@quick_chart
def observed_fitted_chart(check: Mapping[str, Any], arms: Sequence[str], row: Mapping[str, Any] | None = None, *,
                          index_label: str | None = None, style: bool = True) -> alt.TopLevelMixin:
    """Observed values in bands of the index (points with intervals) over each arm's fitted curve; open
    diamonds mark the band's mean fitted value (each patient's own covariates)."""
    df = observed_frame(check, arms)
    colour = alt.Color("arm:N", scale=arm_scale(arms), legend=ARM_LEGEND)
    yscale = alt.Scale(domain=[0, 1]) if is_probability(check) else alt.Scale(zero=False)
    ytitle = wrap(cap(str(check.get("measure", ""))), AXIS_CHARS)
    x = alt.X("x:Q", title=_check_x_title(check, row, index_label), scale=alt.Scale(zero=False, nice=False))
    what = alt.Shape("what:N", scale=alt.Scale(domain=["observed, with interval", "fitted, band average"],
                                              range=["circle", "diamond"]), legend=alt.Legend(title="in each band"))
    layers: list[alt.Chart] = []
    if row is not None:
        layers.append(base_chart(curve_frame(row, arms)).mark_line(strokeWidth=3).encode(
            x=x, y=alt.Y("estimate:Q", scale=yscale, title=ytitle), color=colour))
    if len(df):
        # one table for the bars and both kinds of point (a report keeps it once); filters pick the rows
        every = base_chart(df)
        ci = every.transform_filter("isValid(datum.lower) && isValid(datum.upper)")
        layers.append(ci.mark_rule(strokeWidth=2.5).encode(
            x=x, y=alt.Y("lower:Q", scale=yscale, title=ytitle), y2=alt.Y2("upper"), color=colour))
        tips = [alt.Tooltip("arm:N"), alt.Tooltip("band:N", title="band"), alt.Tooltip("n:Q", title="patients"),
                alt.Tooltip("observed:Q", format=".3~g"), alt.Tooltip("lower:Q", format=".3~g"),
                alt.Tooltip("upper:Q", format=".3~g"), alt.Tooltip("fitted:Q", format=".3~g")]
        obs = every.transform_filter("isValid(datum.observed)").transform_calculate(what="'observed, with interval'")
        layers.append(obs.mark_point(filled=True, size=110, opacity=1).encode(
            x=x, y=alt.Y("observed:Q", scale=yscale, title=ytitle), color=colour, shape=what, tooltip=tips))
        fit = every.transform_filter("isValid(datum.fitted)").transform_calculate(what="'fitted, band average'")
        layers.append(fit.mark_point(filled=False, size=110, strokeWidth=2, opacity=1).encode(
            x=x, y=alt.Y("fitted:Q", scale=yscale, title=ytitle), color=colour, shape=what, tooltip=tips))
    chart = sized_chart(alt.layer(*layers), WIDTH, HEIGHT)
    label = index_label or (index_label_of(row) if row is not None else check.get("index"))
    title = f"Observed against fitted: {check.get('measure', check.get('outcome'))} along {label}"
    sub = "points: observed in bands of the index with intervals; lines: each arm's fitted curve"
    return finish_chart(chart, title, sub, describe_observed_fitted(check, label), style)


def describe_observed_fitted(check: Mapping[str, Any], index_label: str | None = None) -> str:
    """Per arm: how many bands, the largest gap between observed and fitted, and how often the fitted value
    falls outside the observed interval."""
    label = index_label or check.get("index")
    bands = check.get("observed_vs_fitted") or []
    parts = []
    for arm in dict.fromkeys(r["arm"] for r in bands):
        rows = [r for r in bands if r["arm"] == arm and r["observed"] is not None and r["fitted"] is not None]
        if not rows:
            parts.append(f"{arm}: no band has an observed value")
            continue
        worst = max(rows, key=lambda r: abs(r["observed"] - r["fitted"]))
        outside = [r for r in rows if None not in r["observed_ci"]
                   and not r["observed_ci"][0] <= r["fitted"] <= r["observed_ci"][1]]
        parts.append(f"{arm}: in {len(rows)} bands the largest gap is at {fmt(worst['band_from'])} to "
                     f"{fmt(worst['band_to'])} (observed {fmt(worst['observed'])}, interval "
                     f"{fmt(worst['observed_ci'][0])} to {fmt(worst['observed_ci'][1])}; fitted "
                     f"{fmt(worst['fitted'])}); the fitted value lies outside the observed interval in "
                     f"{len(outside)} of {len(rows)} bands")
    return (f"Observed against fitted {check.get('measure', check.get('outcome'))} along {label}. "
            + "; ".join(parts) + ".")


def calibration_table(check: Mapping[str, Any]) -> pd.DataFrame:
    """The calibration summary per arm: slope and intercept of observed on fitted band values, band chi-square."""
    recs = [{"arm": c["arm"], "bands": c.get("bands"), "calibration slope": c.get("slope"),
             "intercept": c.get("intercept"), "band chi-square": c.get("chi2"), "df": c.get("df"),
             "p-value": c.get("p_value"), "largest |z| of a band": c.get("max_abs_z")}
            for c in check.get("calibration") or []]
    return pd.DataFrame(recs, columns=["arm", "bands", "calibration slope", "intercept", "band chi-square", "df",
                                       "p-value", "largest |z| of a band"])


def describe_calibration(check: Mapping[str, Any]) -> str:
    """The calibration summary in words, saying where the band chi-square signals a misfit (p < 0.05)."""
    parts = []
    for c in check.get("calibration") or []:
        text = f"{c['arm']}: "
        if c.get("slope") is not None:
            text += f"calibration slope {fmt(c['slope'])}, intercept {fmt(c['intercept'])} over {c['bands']} bands"
        else:
            text += f"too few bands ({c.get('bands', 0)}) for a calibration slope"
        if c.get("chi2") is not None:
            verdict = ("the observed values depart from the fitted curve" if c["p_value"] < 0.05
                       else "no sign of misfit by band")
            text += f"; band chi-square {fmt(c['chi2'])} on {c['df']} df, p = {fmt(c['p_value'])}: {verdict}"
        parts.append(text)
    return ("Calibration (a slope of 1 and an intercept of 0 mean the bands agree with the model). "
            + "; ".join(parts) + ".") if parts else "No calibration summary."


def windows_frame(check: Mapping[str, Any], discrete: bool = False) -> pd.DataFrame:
    """Sliding windows: their span, median, counts, the difference without a model and the model's."""
    recs = [{"from": w["from"], "to": w["to"], "median": w["median"], "n_first": w["n_first"],
             "n_second": w["n_second"], "difference": w["difference"], "lower": w["ci"][0], "upper": w["ci"][1],
             "model": w["model_difference"]} for w in check.get("sliding_window") or []]
    df = pd.DataFrame(recs, columns=["from", "to", "median", "n_first", "n_second", "difference", "lower",
                                     "upper", "model"])
    df["x"] = df["median"].astype(float) + (_spread(list(df["median"]), 0.6) if discrete and len(df) else 0.0)
    return df


@quick_chart
def sliding_window_chart(check: Mapping[str, Any], arms: Sequence[str], row: Mapping[str, Any] | None = None, *,
                         index_label: str | None = None, style: bool = True) -> alt.TopLevelMixin:
    """The difference without a model in overlapping windows of patients (points with intervals, at each
    window's median index) beside the model's difference (line; with its band when the results row is given)."""
    df = windows_frame(check, discrete=is_discrete(row) if row is not None else False)
    x = alt.X("x:Q", title=_check_x_title(check, row, index_label), scale=alt.Scale(zero=False, nice=False))
    ytitle = wrap(f"{arms[0]} minus {arms[1]}", AXIS_CHARS)
    domain = ["sliding window (no model)", "model"]
    colour = alt.Color("what:N", scale=alt.Scale(domain=domain, range=[WINDOW_COLOUR, INK]),
                       legend=alt.Legend(title="difference"))
    layers: list[alt.Chart] = [base_chart(pd.DataFrame([{"y": 0.0}])).mark_rule(color=INK, strokeWidth=1.5)
                               .encode(y=alt.Y("y:Q"))]
    if row is not None:
        mf = difference_frame(row)  # the difference chart's own table (shared with it in the report)
        layers.append(base_chart(mf).mark_area(opacity=0.18, color=INK).encode(
            x=alt.X("x:Q"), y=alt.Y("lower:Q", title=ytitle), y2=alt.Y2("upper")))
        layers.append(base_chart(mf).transform_calculate(what="'model'").mark_line(strokeWidth=3).encode(
            x=alt.X("x:Q"), y=alt.Y("difference:Q"), color=colour))
    elif len(df):
        layers.append(base_chart(df.sort_values("median").assign(what="model")).mark_line(strokeWidth=3).encode(
            x=alt.X("median:Q"), y=alt.Y("model:Q", title=ytitle), color=colour))
    est = df.dropna(subset=["difference"]).assign(what="sliding window (no model)")
    if len(est):
        tips = [alt.Tooltip("from:Q", format=".3~g"), alt.Tooltip("to:Q", format=".3~g"),
                alt.Tooltip("n_first:Q", title=f"{arms[0]} patients"),
                alt.Tooltip("n_second:Q", title=f"{arms[1]} patients"),
                alt.Tooltip("difference:Q", format=".3~g"), alt.Tooltip("lower:Q", format=".3~g"),
                alt.Tooltip("upper:Q", format=".3~g"), alt.Tooltip("model:Q", format=".3~g", title="model")]
        layers.append(base_chart(est).mark_rule(strokeWidth=2, opacity=0.8).encode(
            x=x, y=alt.Y("lower:Q", title=ytitle), y2=alt.Y2("upper"), color=colour))
        layers.append(base_chart(est).mark_point(filled=True, size=70, opacity=1).encode(
            x=x, y=alt.Y("difference:Q", title=ytitle), color=colour, tooltip=tips))
    chart = sized_chart(alt.layer(*layers), WIDTH, HEIGHT)
    label = index_label or (index_label_of(row) if row is not None else check.get("index"))
    win = check.get("window") or {}
    title = f"Sliding windows: {check.get('measure', check.get('outcome'))} along {label}"
    sub = (f"windows of {win.get('patients', '?')} patients ordered on the index, moving by {win.get('step', '?')}; "
           f"above zero favours {arms[0]}")
    return finish_chart(chart, title, sub, describe_sliding_window(check, arms, label), style)


def describe_sliding_window(check: Mapping[str, Any], arms: Sequence[str], index_label: str | None = None) -> str:
    """How many windows, the range of the difference without a model, and where the model leaves its interval."""
    label = index_label or check.get("index")
    wins = check.get("sliding_window") or []
    est = [w for w in wins if w["difference"] is not None]
    win = check.get("window") or {}
    head = (f"Sliding windows along {label}: {len(wins)} windows of about {win.get('patients', '?')} patients. ")
    if not est:
        return head + "No window holds enough patients of both arms for a difference without a model."
    low, high = min(est, key=lambda w: w["difference"]), max(est, key=lambda w: w["difference"])
    off = [w for w in est if None not in w["ci"] and not w["ci"][0] <= w["model_difference"] <= w["ci"][1]]
    text = (head + f"Without a model, {arms[0]} minus {arms[1]} runs from {fmt(low['difference'])} (window "
            f"{fmt(low['from'])} to {fmt(low['to'])}) to {fmt(high['difference'])} (window {fmt(high['from'])} to "
            f"{fmt(high['to'])}). The model's difference lies outside the window's interval in {len(off)} of "
            f"{len(est)} windows")
    if off:
        text += f", first in the window {fmt(off[0]['from'])} to {fmt(off[0]['to'])}"
    return text + "."


def horizon_frame(check: Mapping[str, Any], low: float | None = None, high: float | None = None) -> pd.DataFrame:
    """Break-even by horizon; open interval ends are drawn to `low` / `high` (the chart's edges)."""
    recs = []
    for h in check.get("horizon_curve") or []:
        lo, hi = h["ci"]
        recs.append({"horizon": h["horizon"], "break_even": h["break_even"], "lower": lo, "upper": hi,
                     "lower_drawn": low if lo is None else lo, "upper_drawn": high if hi is None else hi,
                     "at_risk_first": h["at_risk_first"], "at_risk_second": h["at_risk_second"],
                     "follow_up": "few patients at risk" if h["beyond_follow_up"] else "enough patients at risk",
                     "spec_horizon": h["spec_horizon"]})
    return pd.DataFrame(recs, columns=["horizon", "break_even", "lower", "upper", "lower_drawn", "upper_drawn",
                                       "at_risk_first", "at_risk_second", "follow_up", "spec_horizon"])


@quick_chart
def horizon_chart(check: Mapping[str, Any], arms: Sequence[str], row: Mapping[str, Any] | None = None, *,
                  index_label: str | None = None, units: str | None = None,
                  style: bool = True) -> alt.TopLevelMixin:
    """The break-even point (with its interval) as a function of the horizon; horizons where few patients
    remain at risk are greyed, the spec's horizon is marked."""
    first = horizon_frame(check)
    ends = [v for c in ("break_even", "lower", "upper") for v in first[c] if v is not None and pd.notna(v)]
    found_any = first.dropna(subset=["break_even"])
    open_end = bool(found_any["lower"].isna().any() or found_any["upper"].isna().any())
    if row is not None and (open_end or not ends):
        ends += [float(v) for v in row["range"]]
    low, high = (min(ends), max(ends)) if ends else (0.0, 1.0)
    df = horizon_frame(check, low, high)
    unit = f" ({units})" if units else ""
    label = index_label or (index_label_of(row) if row is not None else check.get("index"))
    x = alt.X("horizon:Q", title=f"horizon{unit}", scale=alt.Scale(zero=False))
    y = alt.Y("break_even:Q", title=wrap(f"break-even on {label}", AXIS_CHARS),
              scale=alt.Scale(domain=[low, high], zero=False))
    colour = alt.Color("follow_up:N", scale=alt.Scale(domain=["enough patients at risk", "few patients at risk"],
                                                     range=[INK, FEW_AT_RISK_COLOUR]),
                       legend=alt.Legend(title="follow-up"))
    found = df.dropna(subset=["break_even"])
    layers: list[alt.Chart] = []
    spec_h = df[df["spec_horizon"]]
    if len(spec_h):
        layers.append(base_chart(spec_h[["horizon"]].assign(what="the spec's horizon")).mark_rule(
            color=INK, strokeDash=[5, 4]).encode(x=alt.X("horizon:Q"), tooltip=[alt.Tooltip("what:N")]))
    if len(found):
        tips = [alt.Tooltip("horizon:Q", format=".4~g"), alt.Tooltip("break_even:Q", format=".3~g"),
                alt.Tooltip("lower:Q", format=".3~g"), alt.Tooltip("upper:Q", format=".3~g"),
                alt.Tooltip("at_risk_first:Q", title=f"{arms[0]} at risk"),
                alt.Tooltip("at_risk_second:Q", title=f"{arms[1]} at risk")]
        layers.append(base_chart(found).mark_line(strokeWidth=2, color=INK, opacity=0.5).encode(x=x, y=y))
        layers.append(base_chart(found).mark_rule(strokeWidth=3).encode(
            x=x, y=alt.Y("lower_drawn:Q", scale=alt.Scale(domain=[low, high], zero=False)), y2=alt.Y2("upper_drawn"),
            color=colour))
        layers.append(base_chart(found).mark_point(filled=True, size=110, opacity=1).encode(x=x, y=y, color=colour,
                                                                                         tooltip=tips))
    if not layers:
        layers.append(base_chart(pd.DataFrame([{"y": 0.0}])).mark_rule(opacity=0).encode(y=alt.Y("y:Q")))
    chart = sized_chart(alt.layer(*layers), WIDTH, HEIGHT * 0.85)
    title = f"Break-even on {label} by horizon: {outcome_title(row) if row is not None else check.get('outcome')}"
    sub = "bars: intervals; grey: few patients left at risk; dashed: the spec's horizon"
    return finish_chart(chart, title, sub, describe_horizon(check, label, units), style)


def describe_horizon(check: Mapping[str, Any], index_label: str | None = None, units: str | None = None) -> str:
    """The break-even point at the spec's horizon, its range across horizons with enough follow-up, and where
    follow-up runs thin or no break-even exists."""
    label = index_label or check.get("index")
    unit = f" {units}" if units else ""
    rows = check.get("horizon_curve") or []
    if not rows:
        return f"No horizon curve for {check.get('outcome')} along {label}."
    parts = [f"Break-even on {label} at {len(rows)} horizons from {fmt(rows[0]['horizon'])} to "
             f"{fmt(rows[-1]['horizon'])}{unit}"]
    at = next((h for h in rows if h["spec_horizon"]), None)
    if at is not None:
        if at["break_even"] is None:
            parts.append(f"at the spec's horizon {fmt(at['horizon'])}{unit} there is none in range")
        else:
            parts.append(f"at the spec's horizon {fmt(at['horizon'])}{unit} it is {fmt(at['break_even'])} "
                         f"(interval {fmt(at['ci'][0])} to {fmt(at['ci'][1])})")
    good = [h["break_even"] for h in rows if h["break_even"] is not None and not h["beyond_follow_up"]]
    if good:
        parts.append(f"where enough patients remain at risk it runs from {fmt(min(good))} to {fmt(max(good))}")
    none = [h["horizon"] for h in rows if h["break_even"] is None]
    if none:
        parts.append("no break-even at " + ", ".join(fmt(h) for h in none) + unit)
    thin = [h["horizon"] for h in rows if h["beyond_follow_up"]]
    if thin:
        parts.append(f"from {fmt(min(thin))}{unit} on few patients remain at risk (greyed)")
    return "; ".join(parts) + "."
KM_DRAW_TOLERANCE = 0.004


def drawn_steps(steps: Sequence[Mapping[str, Any]], tolerance: float = KM_DRAW_TOLERANCE) -> list[Mapping[str, Any]]:
    """The Kaplan-Meier steps worth drawing: a step is kept once the curve or an interval end has moved by
    `tolerance` since the last kept one, so the drawn curve stays within it of the estimate with far fewer points."""
    if len(steps) <= 2:
        return list(steps)
    kept = [steps[0]]
    for s in steps[1:-1]:
        last = kept[-1]
        if any(abs((s[k] or 0.0) - (last[k] or 0.0)) >= tolerance for k in ("survival", "lower", "upper")):
            kept.append(s)
    kept.append(steps[-1])
    return kept


def _km_rows(curves: Iterable[Mapping[str, Any]], band: str | None) -> list[Mapping[str, Any]]:
    return [c for c in curves if (c.get("band") or {}).get("label") == band]


def _km_steps(steps: alt.Chart, x: alt.X, colour: alt.Color, width: float,
              y_scale: alt.Scale | None = None) -> list[alt.Chart]:
    """Kaplan-Meier steps per arm (a chart over time, survival, lower, upper, arm): the interval band and the curve."""
    y_scale = y_scale or alt.Scale(domain=[0, 1])
    axis = alt.Axis(values=[0, 0.2, 0.4, 0.6, 0.8, 1.0])
    return [steps.mark_area(opacity=0.18, interpolate="step-after").encode(
                x=x, y=alt.Y("lower:Q", title="probability alive", scale=y_scale, axis=axis),
                y2=alt.Y2("upper"), color=colour),
            steps.mark_line(strokeWidth=width, interpolate="step-after").encode(
                x=x, y=alt.Y("survival:Q", scale=y_scale, axis=axis), color=colour,
                tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("time:Q", format=".4~g"),
                         alt.Tooltip("survival:Q", format=".3f"), alt.Tooltip("lower:Q", format=".3f"),
                         alt.Tooltip("upper:Q", format=".3f")])]
AT_RISK_STEP = 0.12  # rows of numbers at risk sit beneath the curves, this far apart on the survival scale


def km_records(curves: Sequence[Mapping[str, Any]], arms: Sequence[str]) -> tuple[dict, ...]:
    """One table for a Kaplan-Meier chart: the drawn steps, the numbers at risk (with the row they sit in
    beneath the curves), and each panel's baseline; `band` names the panel. It holds nothing of the outcome's
    horizon, so outcomes read from the same time and event columns share it."""
    recs: list[dict] = []
    for c in curves:
        band = (c.get("band") or {}).get("label") or "all patients"
        recs += [{"part": "step", "band": band, "arm": c["arm"], **s} for s in drawn_steps(c["steps"])]
        row = -AT_RISK_STEP * (list(arms).index(c["arm"]) + 1)
        recs += [{"part": "risk", "band": band, "arm": c["arm"], "time": a["time"], "n": a["n"], "y": row}
                 for a in c["at_risk"]]
    for band in dict.fromkeys(r["band"] for r in recs):
        recs.append({"part": "base", "band": band, "time": 0.0, "y": 0.0})
    return tuple(recs)


def _km_layer(recs: Sequence[Mapping[str, Any]], arms: Sequence[str], *, units: str | None,
              size: tuple[float, float], horizon: float | None = None) -> alt.LayerChart:
    """Kaplan-Meier steps with their bands, the numbers at risk in rows beneath the curves (arm colours, first
    arm on top) and the horizon, as layers over one table (km_records), so panels can be faceted."""
    times = [float(r["time"]) for r in recs] + [1.0] + ([float(horizon)] if horizon else [])
    top = max(times)
    xs = alt.Scale(domain=[-0.05 * top, 1.02 * top], nice=False, zero=False)
    ys = alt.Scale(domain=[-AT_RISK_STEP * (len(arms) + 0.6), 1.0], nice=False, zero=False)
    x = alt.X("time:Q", scale=xs, title=f"time ({units})" if units else "time")
    colour = alt.Color("arm:N", scale=arm_scale(arms), legend=ARM_LEGEND)
    base = alt.Chart()
    of = lambda part: base.transform_filter(alt.datum.part == part)  # noqa: E731
    layers = _km_steps(of("step"), x, colour, 2.5, ys)
    layers += [of("base").mark_rule(color=INK, strokeWidth=1).encode(y=alt.Y("y:Q", scale=ys)),
               of("risk").mark_text(fontSize=FONT["text"] - 3).encode(
                   x=x, y=alt.Y("y:Q", scale=ys), text=alt.Text("n:Q"), color=colour,
                   tooltip=[alt.Tooltip("arm:N"), alt.Tooltip("time:Q", format=".4~g"),
                            alt.Tooltip("n:Q", title="at risk")])]
    if horizon:  # one rule per panel, at a constant
        layers.append(of("base").mark_rule(color=INK, strokeDash=[5, 4]).encode(
            x=alt.XDatum(float(horizon), type="quantitative", scale=xs)))
    return sized_chart(alt.layer(*layers), *size)


@quick_chart
def kaplan_meier_chart(curves: Sequence[Mapping[str, Any]], arms: Sequence[str], *, band: str | None = None,
                       units: str | None = None, horizon: float | None = None, label: str | None = None,
                       style: bool = True) -> alt.TopLevelMixin:
    """Kaplan-Meier curves per arm (checks.km_curves rows; all patients, or one band of the index by its
    label) with numbers at risk beneath."""
    rows = _km_rows(curves, band)
    recs = km_records(rows, arms)
    chart = _km_layer(recs, arms, units=units, size=(WIDTH, HEIGHT), horizon=horizon)
    chart.data = alt.InlineData(values=recs)
    outcome = label or (rows[0]["outcome"] if rows else "")
    where = "all patients" if band is None else f"index band {band}"
    return finish_chart(chart, f"{outcome}: Kaplan-Meier by arm, {where}",
                   "numbers at risk beneath the curves; dashed line: the horizon" if horizon
                   else "numbers at risk beneath the curves", describe_km(rows, units=units, horizon=horizon), style)


@quick_chart
def kaplan_meier_bands_chart(curves: Sequence[Mapping[str, Any]], arms: Sequence[str], *, index_label: str = "index",
                             units: str | None = None, horizon: float | None = None, columns: int = 2,
                             label: str | None = None, style: bool = True) -> alt.TopLevelMixin:
    """Kaplan-Meier curves per arm in each band of the index, one small panel per band with its numbers at risk."""
    banded = [c for c in curves if c.get("band")]
    bands = list(dict.fromkeys(c["band"]["label"] for c in banded))
    recs = km_records(banded, arms)
    chart = _km_layer(recs, arms, units=units, size=PANEL, horizon=horizon).facet(
        facet=alt.Facet("band:N", sort=bands, title=index_label, header=alt.Header(labelFontSize=FONT["text"], titleFontSize=FONT["axis_title"])),
        columns=columns, data=alt.InlineData(values=recs), spacing=20)
    outcome = label or (curves[0]["outcome"] if curves else "")
    desc = " ".join(f"{index_label} {b}: " + describe_km(_km_rows(curves, b), units=units, horizon=horizon)
                    for b in bands)
    return finish_chart(chart, f"{outcome}: Kaplan-Meier by arm in bands of {index_label}",
                   "numbers at risk beneath the curves in each panel", desc or "No bands.", style)


def describe_km(rows: Sequence[Mapping[str, Any]], *, units: str | None = None, horizon: float | None = None) -> str:
    """Per arm: patients, events, survival at the horizon (with interval), median, and the last number at risk."""
    unit = f" {units}" if units else ""
    parts = []
    for c in rows:
        text = f"{c['arm']}: {c['n']} patients, {c['events']} events"
        if horizon is not None:
            before = [s for s in c["steps"] if s["time"] <= horizon]
            s = before[-1]
            text += (f", alive at {fmt(horizon)}{unit} {fmt(s['survival'])} (interval {fmt(s['lower'])} to "
                     f"{fmt(s['upper'])})")
        med = c.get("median") or {}
        text += (f", median {fmt(med['time'])}{unit}" if med.get("time") is not None else ", median not reached")
        if c.get("at_risk"):
            last = c["at_risk"][-1]
            text += f", {last['n']} still at risk at {fmt(last['time'])}{unit}"
        parts.append(text)
    return "Kaplan-Meier: " + "; ".join(parts) + "." if parts else "No Kaplan-Meier curves."


def _smd_cell(s: Mapping[str, Any]) -> str:
    if s.get("smd") is None:
        return ""
    return f"{s['smd']:.2f}" + (" (above 0.1)" if s.get("imbalanced") else "")


def baseline_frame(table: Sequence[Mapping[str, Any]]) -> pd.DataFrame:
    """The baseline table: per covariate, mean (SD) or share in each arm by allocation, then each
    standardised mean difference (flagged above 0.1)."""
    recs = []
    for r in table:
        rec: dict[str, Any] = {"characteristic": words(r["covariate"])}
        for g in r["groups"]:
            rec[f"{g['allocation']}: {g['arm']}"] = g["text"] + (f", {g['missing']} missing" if g["missing"] else "")
        for s in r["smd"]:
            rec[f"SMD {s['compare']} ({s['among']})"] = _smd_cell(s)
        recs.append(rec)
    return pd.DataFrame(recs)


@quick_chart
def smd_chart(table: Sequence[Mapping[str, Any]], *, style: bool = True) -> alt.TopLevelMixin:
    """Standardised mean differences of every baseline covariate in every comparison, with the 0.1 lines."""
    df = pd.DataFrame([{"covariate": words(r["covariate"]), "comparison": f"{s['compare']} ({s['among']})",
                        "smd": s["smd"], "flag": "above 0.1" if s["imbalanced"] else "within 0.1"}
                       for r in table for s in r["smd"] if s["smd"] is not None],
                      columns=["covariate", "comparison", "smd", "flag"])
    comparisons = list(dict.fromkeys(df["comparison"]))
    palette = [OKABE_ITO[k] for k in ("black", "sky_blue", "bluish_green", "reddish_purple", "vermillion",
                                      "yellow")]
    shapes = ["circle", "square", "triangle-up", "diamond", "cross", "triangle-down"]
    limit = max([0.25] + [abs(float(v)) * 1.1 for v in df["smd"]])
    refs = pd.DataFrame([{"x": v} for v in (-0.1, 0.1)])
    layers = [base_chart(pd.DataFrame([{"x": 0.0}])).mark_rule(color=INK).encode(x=alt.X("x:Q")),
              base_chart(refs).mark_rule(color=INK, strokeDash=[5, 4]).encode(x=alt.X("x:Q")),
              base_chart(df).mark_point(filled=True, size=110, opacity=0.9).encode(
                  x=alt.X("smd:Q", title="standardised mean difference", scale=alt.Scale(domain=[-limit, limit])),
                  y=alt.Y("covariate:N", title=None, sort=list(dict.fromkeys(df["covariate"]))),
                  color=alt.Color("comparison:N", scale=alt.Scale(domain=comparisons,
                                                                  range=palette[:len(comparisons)]),
                                  legend=alt.Legend(title="comparison")),
                  shape=alt.Shape("comparison:N", scale=alt.Scale(domain=comparisons, range=shapes[:len(comparisons)])),
                  tooltip=[alt.Tooltip("covariate:N"), alt.Tooltip("comparison:N"),
                           alt.Tooltip("smd:Q", format=".3f"), alt.Tooltip("flag:N")])]
    chart = sized_chart(alt.layer(*layers), WIDTH, max(120, 34 * df["covariate"].nunique()))
    return finish_chart(chart, "Balance of baseline characteristics", "dashed lines: standardised mean difference 0.1",
                   describe_baseline(table), style)


def describe_baseline(table: Sequence[Mapping[str, Any]]) -> str:
    """How many comparisons exceed |SMD| 0.1, naming each, and the largest."""
    entries = [(r["covariate"], s) for r in table for s in r["smd"] if s["smd"] is not None]
    if not entries:
        return "No baseline characteristics to compare."
    flagged = [(c, s) for c, s in entries if s["imbalanced"]]
    name, big = max(entries, key=lambda e: abs(e[1]["smd"]))
    text = (f"Baseline characteristics: {len(table)} compared in {len(entries)} comparisons; the largest "
            f"standardised mean difference is {big['smd']:.2f} ({words(name)}, {big['compare']}, {big['among']}). ")
    if flagged:
        text += (f"{len(flagged)} exceed 0.1: " + "; ".join(f"{words(c)} {s['smd']:.2f} ({s['compare']}, "
                                                             f"{s['among']})" for c, s in flagged) + ".")
    else:
        text += "None exceeds 0.1."
    return text


def imputation_frame(rows: Sequence[Mapping[str, Any]], index_labels: Mapping[str, str] | None = None) -> pd.DataFrame:
    """Complete-case and multiply imputed break-even points side by side, per outcome x index."""
    labels = index_labels or {}

    def points(bes: Sequence[Mapping[str, Any]] | None) -> str:
        return "; ".join(f"{fmt(b['x'])} ({interval_words(b)})" for b in bes or []) or "none in range"

    recs = [{"outcome": r["outcome"], "index": labels.get(r["index"], r["index"]),
             "complete cases": points(r["complete_case"]["break_even"]),
             "patients (complete cases)": ", ".join(f"{a} {n}" for a, n in r["complete_case"]["n"].items()),
             "imputed": points(r["imputed"]["break_even"]) if r.get("imputed") else "nothing to impute",
             "values imputed": ", ".join(f"{k} {v}" for k, v in (r.get("imputed_values") or {}).items())}
            for r in rows]
    return pd.DataFrame(recs, columns=["outcome", "index", "complete cases", "patients (complete cases)", "imputed",
                                       "values imputed"])


def describe_clustering(info: Mapping[str, Any] | None) -> str:
    """Which clustered intervals were used and over how many clusters."""
    if not info:
        return "Patients are treated as independent: no cluster column is named."
    per_arm = ", ".join(f"{a} {k}" for a, k in (info.get("clusters_per_arm") or {}).items())
    return (f"Clustered by '{info['column']}': {info['clusters']} clusters ({per_arm}); intervals use "
            f"{info['method']}.")



def _spread(xs: Sequence[float], width: float) -> list[float]:
    """Offsets that set apart points sharing an x value (e.g. windows on a whole-level index)."""
    groups: dict[float, list[int]] = {}
    for i, x in enumerate(xs):
        groups.setdefault(x, []).append(i)
    out = [0.0] * len(xs)
    for members in groups.values():
        m = len(members)
        for k, i in enumerate(members):
            out[i] = (k - (m - 1) / 2) * (width / max(m, 2))
    return out


def _span(values: Iterable[float]) -> float:
    v = [float(x) for x in values if x is not None]
    return (max(v) - min(v)) if len(v) > 1 and max(v) > min(v) else 1.0

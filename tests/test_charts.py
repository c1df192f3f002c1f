"""Chart builders: every row of a real demo analysis builds a chart that passes the Vega-Lite schema, colours are
the published Okabe-Ito ones, markers are words-labelled shapes (not squares), and the sentences say the row."""
from __future__ import annotations

import dataclasses
import math
import re
from typing import Any

import altair as alt
import numpy as np
import pandas as pd
import pytest

from explorer import charts_checks as ck
from explorer import charts_common as cc
from explorer import charts_curves as cu
from explorer import charts_selection as cs
from explorer import charts_patient as cp
from explorer import observed
from explorer import charts_values as cv
from explorer import look
from explorer import words as wd
from explorer import values as vl
from explorer.analysis import analyse
from explorer.fitting import fit_all
from explorer.spec import load_spec

# Okabe & Ito (2008) palette as reproduced by Wong, Nature Methods 8:441 (2011), Figure 2 (memory).
PUBLISHED_OKABE_ITO = {"#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
GREENISH_OR_RED = {"#009E73", "#D55E00"}
NUMBER = re.compile(r"-?\d+(?:\.\d+)?")


@pytest.fixture(scope="module")
def result(demo_results):
    return demo_results  # the shared demo analysis (conftest): read only


@pytest.fixture(scope="module")
def doc(result):
    return result.document


def _validated(chart: alt.TopLevelMixin) -> dict:
    """Altair validates the whole spec against the Vega-Lite JSON schema in to_dict()."""
    spec = chart.to_dict()
    assert spec["description"]
    assert spec.get("title")
    config = spec["config"]
    assert min(config["axis"]["labelFontSize"], config["legend"]["labelFontSize"]) >= 14
    assert config["title"]["fontSize"] >= 20
    return spec


def _walk(obj):
    if isinstance(obj, dict):
        yield obj
        for v in obj.values():
            yield from _walk(v)
    elif isinstance(obj, list):
        for v in obj:
            yield from _walk(v)


def _records(spec: dict) -> list[list[dict]]:
    """Every inline data table of a spec (Altair moves them into the top-level datasets)."""
    out = list((spec.get("datasets") or {}).values())
    out += [d["values"] for d in _walk(spec) if isinstance(d.get("values"), list)]
    return [r for r in out if r and isinstance(r[0], dict)]


def _scales(spec: dict, channel: str) -> list[dict]:
    return [enc[channel]["scale"] for d in _walk(spec) if isinstance(enc := d.get("encoding"), dict)
            and isinstance(enc.get(channel), dict) and isinstance(enc[channel].get("scale"), dict)]


def test_every_results_row_builds_outcome_and_difference_charts(result, doc):
    arms = doc["arms"]
    assert len(doc["results"]) == len(result.spec.outcomes) * len(result.spec.indices)
    for row in doc["results"]:
        points = observed.cohort_points(result.fitset, row["outcome"], row["index"], max_points=300)
        assert set(points.columns) == {"x", "y", "arm", "allocation"}
        assert set(points["allocation"]) <= {"randomised", "chosen"}
        _validated(cu.outcome_chart(row, arms, points, patient={"x": row["range"][0]}))
        _validated(cu.difference_chart(row, arms, margin=0.05))


def test_every_composite_and_selection_row_builds(result, doc):
    arms = doc["arms"]
    assert doc["composite"] and doc["selection"]
    for row in doc["composite"]:
        _validated(cu.composite_chart(row, arms))
        if row.get("acceptability"):
            _validated(cv.preference_chart(row["acceptability"], arms, index_title=row["index"]))
        if row.get("thresholds"):
            _validated(cv.leeway_chart(cv.leeway(row["thresholds"]), arms, where="CFS 5"))
    for row in doc["selection"]:
        _validated(cs.selection_chart(row, arms))
        _validated(cs.selection_break_even_chart(row))


def test_per_hundred_rows_count_to_100_label_every_run_and_decode(result, doc):
    levels = result.spec.outcome("function").levels
    arms = doc["arms"]
    probs = {arms[0]: dict(zip(levels, (0.305, 0.2, 0.15, 0.02, 0.325))),
             arms[1]: dict(zip(levels, (0.12, 0.18, 0.2, 0.1, 0.4)))}
    spec = _validated(cp.per_hundred_chart(probs, "Function at six months"))
    drawn = cp.counts_of(spec)
    for arm in arms:
        assert sum(drawn[arm].values()) == 100
        assert drawn[arm] == {k: v for k, v in wd.per_hundred(probs[arm]).items() if v}
    marks = next(r for r in _records(spec) if "person" in r[0])
    for arm in arms:  # one row per arm, people 1..100 left to right, sorted by state in the levels' order
        row = sorted((m for m in marks if m["arm"] == arm), key=lambda m: m["person"])
        assert [m["person"] for m in row] == list(range(1, 101))
        assert all(a["x1"] < b["x0"] for a, b in zip(row, row[1:]))
        assert [levels.index(m["state"]) for m in row] == sorted(levels.index(m["state"]) for m in row)
        assert len({m["y0"] for m in row}) == 1
    labels = [r for r in _records(spec) if "leader_y0" in r[0]][0]
    for lab in labels:  # each run is named beside it: its count and state, starting where the run starts
        first = min((m for m in marks if m["arm"] == lab["arm"] and m["state"] == lab["state"]),
                    key=lambda m: m["person"])
        assert lab["x"] == first["x0"] and lab["text"] == f"{lab['n']} {wd.words(lab['state'])}"
    assert len(labels) == sum(1 for a in arms for v in wd.per_hundred(probs[a]).values() if v)
    # the key decodes: its swatches are the states' own colours, in order, not a dark figure
    fill = next(e["fill"] for e in _walk(spec) if isinstance(e.get("fill"), dict) and "legend" in e["fill"])
    colours = cc.state_colours(levels)
    assert fill["scale"]["domain"] == [wd.words(lv) for lv in levels]
    assert fill["scale"]["range"] == [colours[lv] for lv in levels]
    assert fill["legend"]["symbolType"] == "square" and "symbolFillColor" not in fill["legend"]
    assert not any(isinstance(e.get("shape"), str) and e["shape"].lstrip().startswith("M") for e in _walk(spec))
    # states run light (best) to dark (worst); the best is not green and death is not black
    lum = [look.luminance(colours[lv]) for lv in levels]
    assert lum == sorted(lum, reverse=True)
    assert colours[levels[0]] != "#009E73" and colours["dead"] != "#000000"
    assert set(colours[lv] for lv in levels[:-1]) <= PUBLISHED_OKABE_ITO
    assert not set(colours.values()) & set(look.ARM_COLOURS)
    for arm in arms:
        assert f"With {arm}: " + ", ".join(f"{n} {wd.words(k)}" for k, n in wd.per_hundred(probs[arm]).items()) \
            in spec["description"]
    frame = pd.DataFrame({"x": result.fitset.indices["cfs"].values,
                          "arm": result.fitset.cohort.frame[result.spec.cohort.arm].to_numpy()})
    _validated(cu.index_distribution_chart(frame, arms=doc["arms"], label="Clinical Frailty Scale", patient_x=6))


def test_strip_beneath_the_plot_carries_the_clear_regions_and_the_break_even(doc):
    arms = doc["arms"]
    row = next(r for r in doc["results"] if r["break_even"] and len(r.get("clear_difference") or []) >= 2)
    spec = _validated(cu.outcome_chart(row, arms))
    lo, hi = row["range"]
    band = sorted({(r["from"], r["to"]): r for t in _records(spec) for r in t if "fill" in r and "region" in r}.values(),
                  key=lambda r: r["from"])
    # the band covers the observed range end to end, without gaps or overlaps
    assert band[0]["from"] == pytest.approx(lo) and band[-1]["to"] == pytest.approx(hi)
    assert all(a["to"] == pytest.approx(b["from"]) for a, b in zip(band, band[1:]))
    colours = look.arm_colours(arms)
    clear = [(r["from"], r["to"], colours[r["favours"]]) for r in cu.clear_regions(row)]
    assert [(b["from"], b["to"], b["fill"]) for b in band if b["fill"] != look.NEUTRAL] == clear
    assert {b["region"] for b in band if b["fill"] == look.NEUTRAL} == {"no clear difference"}
    for b in band:  # words inside a segment read at 4.5:1 or better on its colour
        assert look.contrast(b["ink"], b["fill"]) >= look.MIN_TEXT_CONTRAST
    # nothing shades the plot itself: every rect sits below the plot (the strip)
    for e in _walk(spec):
        if e.get("mark") in ("rect", {"type": "rect"}) or (isinstance(e.get("mark"), dict)
                                                          and e["mark"].get("type") == "rect"):
            assert e["encoding"]["y"]["value"] > cc.HEIGHT
    # each break-even point sits on the strip as a diamond, its interval drawn on the same row
    diamonds = list({r["x"]: r for t in _records(spec) for r in t if "interval" in r and "label" in r}.values())
    assert sorted(d["x"] for d in diamonds) == sorted(b["x"] for b in row["break_even"])
    assert all(d["y"] > cc.HEIGHT + cu.STRIP_BAND[1] for d in diamonds)
    segs = [r for t in _records(spec) for r in t if {"from", "to", "left", "right"} <= set(r)]
    for b in row["break_even"]:
        lo_ci, hi_ci = b["ci"]
        ends = {(s["from"], s["to"]) for s in segs}
        assert any((lo_ci is None or s[0] == pytest.approx(max(lo_ci, s[0]))) and s[0] <= b["x"] <= s[1] for s in ends)
    axis = next(e["axis"] for e in _walk(spec) if isinstance(e.get("axis"), dict) and "offset" in e["axis"])
    assert axis["offset"] == cu.strip_height(row)


def test_preference_chart_draws_one_quantity_without_a_half_line(doc):
    arms = doc["arms"]
    row = next(r for r in doc["composite"] if r.get("acceptability"))
    spec = _validated(cv.preference_chart(row["acceptability"], arms, index_title="CFS", spread=0.1))
    lines = [e for e in _walk(spec) if e.get("mark") == "line" or (isinstance(e.get("mark"), dict)
                                                                  and e["mark"].get("type") == "line")]
    assert len(lines) == 1
    assert not [e for e in _walk(spec) if isinstance(e.get("mark"), (str, dict)) and "rule" in str(e["mark"])]
    data = next(t for t in _records(spec) if "p" in t[0])
    assert [d["p"] for d in data] == [p["first"] for p in row["acceptability"]]
    assert f"chance {arms[0]} is preferred" in str(spec)
    lo, hi = min(d["p"] for d in data), max(d["p"] for d in data)
    assert f"from {cv.percent(lo)} to {cv.percent(hi)}" in spec["description"]
    assert [cv.percent(p) for p in (0.0, 0.004, 0.5, 0.996, 1.0)] == ["0%", "<1%", "50%", ">99%", "100%"]


def test_leeway_is_exact_one_weight_at_a_time_and_all_together(result, doc):
    """Brute force against the model: the composite difference is delta @ w - margin (values.level_differences)."""
    from itertools import product

    info = next(iter(result.composite.values()))[1]
    cm = info.model
    w = np.array([result.spec.values.weights[lv] for lv in cm.levels])
    for x in (2.0, 5.0, 7.0):
        th = vl.thresholds(cm, dict(zip(cm.levels, w)), x, margin=0.02)
        lw = cv.leeway(th)
        delta = vl.level_differences(cm, x)
        diff = lambda v: float(delta @ v) - 0.02  # noqa: E731
        sign = np.sign(diff(w))
        for k, r in enumerate(lw["states"]):
            grid = np.linspace(-1, 1, 2001)
            flips = [g for g in grid if np.sign(diff(np.where(np.arange(len(w)) == k, g, w))) != sign]
            if r["changes_at"] is None:
                assert not flips
            else:
                nearest = min(flips, key=lambda g: abs(g - w[k]))
                assert nearest == pytest.approx(r["changes_at"], abs=1.01e-3)
                assert r["room"] == pytest.approx(abs(r["changes_at"] - w[k]))
        t = lw["together"]
        movers = np.arange(len(w) - 1)  # death (the last state) is held

        def worst(step: float) -> float:  # the box's corners are where a linear difference is most extreme
            best = sign * diff(w)
            for signs in product((-1.0, 1.0), repeat=len(movers)):
                v = w.copy()
                v[movers] = np.clip(w[movers] + step * np.array(signs), -1, 1)
                best = min(best, sign * diff(v))
            return best

        if t is None:
            assert worst(2.0) > 0
        else:
            assert worst(t * (1 - 1e-6)) > 0 and worst(t * (1 + 1e-6) + 1e-9) <= 0
    table = cv.leeway_table(lw)
    assert list(table["state"]) == [wd.words(lv) for lv in cm.levels]
    assert "flip" not in str(table).lower()


def km_chart(fs: Any, outcome: str, *, index: str | None = None, between: tuple[float, float] | None = None,
             style: bool = True) -> alt.TopLevelMixin:
    """A test-only chart: Kaplan-Meier curves per arm fitted here by lifelines, optionally for the patients whose
    index lies in `between`."""
    from lifelines import KaplanMeierFitter

    o = fs.spec.outcome(outcome)
    if o.kind != "survival":
        raise ValueError(f"outcome '{outcome}' is not a survival outcome")
    pf = next(p for (name, _), p in fs.pairs.items() if name == outcome and (index is None or p.index == index))
    arms = list(pf.fits)
    recs, counts = [], {}
    for arm in arms:
        d = pf.data[arm]
        keep = np.ones(len(d.x), bool) if between is None else (d.x >= between[0]) & (d.x <= between[1])
        counts[arm] = int(keep.sum())
        if not keep.any():
            continue
        km = KaplanMeierFitter().fit(np.asarray(d.time)[keep], np.asarray(d.event)[keep])
        sf = km.survival_function_.iloc[:, 0]
        ci = km.confidence_interval_survival_function_
        for t, v, lo, hi in zip(sf.index, sf.to_numpy(), ci.iloc[:, 0].to_numpy(), ci.iloc[:, 1].to_numpy()):
            recs.append({"time": float(t), "survival": float(v), "lower": float(lo), "upper": float(hi), "arm": arm})
    df = pd.DataFrame(recs, columns=["time", "survival", "lower", "upper", "arm"])
    colour = alt.Color("arm:N", scale=cc.arm_scale(arms), legend=cc.ARM_LEGEND)
    unit = f" ({o.units})" if o.units else ""
    x = alt.X("time:Q", title=f"time{unit}")
    layers = ck._km_steps(cc.base_chart(df), x, colour, 3)
    if o.horizon:
        layers.append(cc.base_chart(pd.DataFrame([{"t": float(o.horizon)}])).mark_rule(color=look.INK, strokeDash=[5, 4])
                      .encode(x=alt.X("t:Q")))
    chart = cc.sized_chart(alt.layer(*layers), cc.WIDTH, cc.HEIGHT)
    where = "" if between is None else f", {pf.index} {wd.fmt(between[0])} to {wd.fmt(between[1])}"
    at = []
    for arm in arms:
        part = df[(df["arm"] == arm) & (df["time"] <= (o.horizon or np.inf))]
        if len(part):
            at.append(f"{arm} {wd.fmt(part['survival'].iloc[-1])} ({counts[arm]} patients)")
    desc = (f"Kaplan-Meier survival by arm for {o.title}{where}"
            + (f"; at {o.horizon:g}{unit}: " + ", ".join(at) if at else "") + ".")
    return cc.finish_chart(chart, f"{o.title}: Kaplan-Meier by arm{where}", "dashed line: the horizon", desc, style)


def test_kaplan_meier_chart_agrees_with_lifelines(result):
    from lifelines import KaplanMeierFitter

    spec = _validated(km_chart(result.fitset, "alive", index="cfs", between=(6, 9)))
    pf = result.fitset.pair("alive", "cfs")
    arm = result.spec.cohort.arms[0]
    d = pf.data[arm]
    keep = (d.x >= 6) & (d.x <= 9)
    km = KaplanMeierFitter().fit(d.time[keep], d.event[keep])
    ref = float(km.predict(365.0))
    assert f"{arm} {wd.fmt(ref)}" in spec["description"]


def test_pairwise_chart_builds(result, doc):
    from explorer import pairwise as pw

    spec = result.spec
    rows = pw.pairwise_rows(spec, result.fitset.cohort, "cfs", result.fitset.indices["cfs"].values, replicates=20,
                            seed=1)
    _validated(cs.pairwise_chart(rows, doc["arms"], index_title="Clinical Frailty Scale"))


def test_arm_colours_are_okabe_ito_distinct_and_not_green_against_red(doc):
    arms = doc["arms"]
    colours = look.arm_colours(arms)
    assert set(colours.values()) <= PUBLISHED_OKABE_ITO
    assert len(set(colours.values())) == 2
    assert not set(colours.values()) & GREENISH_OR_RED
    spec = cu.outcome_chart(doc["results"][0], arms).to_dict()
    colour_scales = [s for s in _scales(spec, "color") if s.get("domain") == list(arms)]
    assert colour_scales and all(s["range"] == [colours[a] for a in arms] for s in colour_scales)
    with pytest.raises(ValueError):
        look.arm_colours([arms[0], arms[0]])


def test_randomised_and_chosen_differ_by_shape_named_in_words(_demo_master):
    # all patients, so both allocations lie beneath the curve (the demo's default headline is randomised only)
    spec = load_spec(_demo_master / "demo.toml")
    spec = dataclasses.replace(spec, pairwise=None, policy=None, evidence=None, maps=(), selection=None,
                               analysis=dataclasses.replace(spec.analysis, population="all", checks=False))
    fs = fit_all(spec)
    row = analyse(spec, fitset=fs).document["results"][0]
    doc = {"arms": list(spec.cohort.arms)}
    points = observed.cohort_points(fs, row["outcome"], row["index"])
    assert {"randomised", "chosen"} <= set(points["allocation"])
    spec = cu.outcome_chart(row, doc["arms"], points).to_dict()
    shape_scales = [s for s in _scales(spec, "shape") if s.get("domain") == ["randomised", "chosen"]]
    assert shape_scales
    for s in shape_scales:
        assert len(set(s["range"])) == 2
        assert not any("square" in str(r) for r in s["range"])


def _row_numbers(row: dict) -> set[str]:
    """Every number the row holds (and, for whole-level indices, the levels either side), as the sentence prints."""
    nums: list[float] = []
    texts: list[str] = []
    for d in _walk(row):
        for k, v in d.items():
            if k == "curve":
                continue
            if isinstance(v, (int, float)) and not isinstance(v, bool):
                nums.append(float(v))
            elif isinstance(v, list):
                nums.extend(float(x) for x in v if isinstance(x, (int, float)) and not isinstance(x, bool))
            elif isinstance(v, str):
                texts.append(v)
    out = {wd.fmt(v) for v in nums}
    lo, hi = row["range"]
    out |= {wd.fmt(min(max(v, lo), hi)) for v in nums}
    if cc.is_discrete(row):
        out |= {str(f(v)) for v in nums for f in (math.floor, math.ceil)}
    for t in texts:
        out |= set(NUMBER.findall(t))
    return out


def test_describe_row_says_only_numbers_of_the_row(doc):
    arms = doc["arms"]
    for row in doc["results"] + doc["composite"]:
        sentence = cu.describe_row(row, arms)
        allowed = _row_numbers(row)
        found = NUMBER.findall(sentence)
        assert found, sentence
        assert set(found) <= allowed, (sentence, set(found) - allowed)
        for b in row["break_even"]:
            if cc.is_discrete(row):
                assert str(math.floor(b["x"])) in found
            else:
                assert wd.fmt(b["x"]) in found
            bounds = (row.get("index_info") or {}).get("bounds")
            for end in b["ci"]:
                if end is None:
                    continue
                if bounds and not bounds[0] <= end <= bounds[1]:
                    # an end past the declared bounds (the demo's 1-9 frailty scale) is said as the scale's end
                    assert wd.fmt(end) not in found and (wd.fmt(bounds[0]) in found or wd.fmt(bounds[1]) in found)
                else:
                    assert wd.fmt(end) in found
        for arm in {b["favours_below"] for b in row["break_even"]} | {r["favours"] for r in cu.clear_regions(row)}:
            assert arm in sentence


def _hand_row(shape: str, ci: list, discrete: bool = False) -> dict:
    """A minimal row (first 0.8 - 0.1 x, second 0.5 - 0.05 x: they cross at x = 6) with a given interval shape."""
    xs = np.linspace(1.0, 9.0, 9)
    f, s = 0.8 - 0.1 * xs, 0.5 - 0.05 * xs
    curve = [{"x": float(x), "first": float(a), "second": float(b), "difference": float(a - b),
              "difference_ci": [float(a - b - 0.05), float(a - b + 0.05)]} for x, a, b in zip(xs, f, s)]
    return {"outcome": "alive", "index": "cfs", "measure": "probability alive at 365 days", "range": [1.0, 9.0],
            "break_even": [{"x": 6.0, "ci": ci, "interval": "fieller", "interval_shape": shape, "extrapolated": False,
                            "favours_below": "A", "favours_above": "B", "approximate": True}],
            "favours_throughout": None, "curve": curve,
            "clear_difference": [{"from": 0.2, "to": 4.5, "favours": "A"}],
            "index_info": {"label": "frailty", "discrete": discrete}, "warnings": []}


@pytest.mark.parametrize("shape,ci,words", [
    ("finite", [5.1, 7.2], "5.1 to 7.2"),
    ("unbounded_above", [5.1, None], "open above"),
    ("unbounded_below", [None, 7.2], "open below"),
    ("two_rays", [4.0, 8.0], "in two parts: open below, up to 4, and from 8, open above"),
    ("unbounded", [None, None], "unbounded"),
])
def test_interval_shapes_are_said_and_drawn(shape, ci, words):
    row = _hand_row(shape, ci)
    sentence = cu.describe_row(row, ["A", "B"])
    assert words in sentence and "approximate" in sentence and "Fieller" in sentence
    # the region runs from 0.2 on the search grid, but the sentence speaks of the observed range only
    assert "from 1 to 4.5" in sentence
    spec = _validated(cu.outcome_chart(row, ["A", "B"]))
    texts = {v.get("text") for r in _records(spec) for v in r}
    if ci[0] is None or ci[1] is None or shape == "two_rays":
        assert "open" in texts


def test_discrete_index_is_spoken_by_whole_levels():
    row = _hand_row("finite", [5.1, 7.2], discrete=True)
    row["break_even"][0]["x"] = 6.4
    sentence = cu.describe_row(row, ["A", "B"])
    assert "between levels 6 and 7 (at 6.4)" in sentence
    assert "at levels up to 6 A is favoured, from level 7 B" in sentence
    assert "at levels 1 to 4, favouring A" in sentence


def test_no_break_even_says_who_is_favoured_throughout():
    row = _hand_row("finite", [5.1, 7.2])
    row["break_even"], row["favours_throughout"], row["clear_difference"] = [], "B", []
    sentence = cu.describe_row(row, ["A", "B"])
    assert "B is favoured throughout the observed range (1 to 9)" in sentence
    assert "Nowhere" in sentence


def test_breakeven_table_has_one_row_per_outcome_index_and_composite(doc):
    table = cu.breakeven_table(doc)
    assert len(table) == len(doc["results"]) + len(doc["composite"])
    assert list(table.columns) == ["outcome", "index", "break-even", "interval", "favoured below",
                                   "favoured above", "clear difference", "measure"]
    for (_, t), row in zip(table.iterrows(), doc["results"] + doc["composite"]):
        if row["break_even"]:
            assert t["break-even"].split(";")[0].split(" ")[0] == wd.fmt(row["break_even"][0]["x"])
            assert row["break_even"][0]["favours_below"] in t["favoured below"]
        else:
            assert t["favoured below"] == f"{row['favours_throughout']} throughout"


def test_per_hundred_adds_to_100_by_largest_remainders():
    # Hamilton's largest-remainder apportionment (common practice): 33.3/33.3/33.4 -> 33/33/34.
    assert wd.per_hundred({"a": 1 / 3, "b": 1 / 3, "c": 1 / 3 + 1e-9}) == {"a": 33, "b": 33, "c": 34}
    rng = np.random.default_rng(4)
    for _ in range(50):
        p = rng.dirichlet(np.ones(5))
        counts = wd.per_hundred(dict(zip("abcde", p)))
        assert sum(counts.values()) == 100
        assert all(abs(counts[k] - 100 * v) < 1 for k, v in zip("abcde", p))


def test_fmt_reads_as_three_significant_figures():
    # Python's own 3-significant-figure formatting is the reference.
    for v in (0.123456, 12.345, 123.456, -4.5678, 0.000123456, 9.996):
        assert float(wd.fmt(v)) == pytest.approx(float(f"{v:.3g}"))
    assert wd.fmt(None) == "open" and wd.fmt(0.0) == "0" and wd.fmt(1234.5) == "1234"


def test_png_and_svg_export(doc):
    chart = cu.difference_chart(doc["results"][0], doc["arms"])
    png = cc.chart_to_png(chart, scale=1)
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    svg = cc.chart_to_svg(chart)
    assert svg.lstrip().startswith("<svg") and "</svg>" in svg


def test_cohort_points_sample_large_cohorts_by_arm_and_say_so(result):
    fs = result.fitset
    pf = fs.pair("function", "age")
    # every patient with the outcome is a point; the arm shares come from pandas on the cohort itself
    frame = fs.cohort.frame
    rows = np.concatenate(list(pf.rows.values()))
    share = frame[fs.spec.cohort.arm].iloc[rows].value_counts(normalize=True)
    whole = observed.cohort_points(fs, "function", "age", max_points=len(rows) + 1)
    assert len(whole) == len(rows) and whole.attrs["sample_note"] is None
    shown = observed.cohort_points(fs, "function", "age", max_points=200, seed=4)
    assert len(shown) == 200
    counts = shown["arm"].value_counts()
    for arm, p in share.items():
        assert abs(counts[arm] - 200 * p) < 1  # largest remainders: each arm within one point of its share
    assert f"200 of {len(rows):,} patients" in shown.attrs["sample_note"]
    assert "seed 4" in shown.attrs["sample_note"]
    # the sampled points are patients of the cohort: their (unjittered, continuous) ages are cohort ages
    assert set(shown["x"]) <= set(frame["age"].iloc[rows])
    assert shown.equals(observed.cohort_points(fs, "function", "age", max_points=200, seed=4))

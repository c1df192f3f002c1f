"""The two-index decision map: the arm favoured over two indices, the break-even contour, the patient's point."""
from __future__ import annotations

from typing import Any, Mapping, Sequence

import altair as alt
import numpy as np
import pandas as pd

from .charts_common import AXIS_CHARS, FONT, WIDTH, base_chart, finish_chart, quick_chart, sized_chart
from .look import INK, arm_colours
from .maps import COMPOSITE, map_labels, coefficient_table, describe_map
from .words import fmt, wrap


def _tint(colour: str, share: float) -> str:
    """The colour mixed with white (share 0 keeps it, 1 gives white)."""
    rgb = [int(colour[i:i + 2], 16) for i in (1, 3, 5)]
    return "#" + "".join(f"{round(c + (255 - c) * share):02X}" for c in rgb)


def _map_axis_title(row: Mapping[str, Any], k: int) -> str:
    info = (row.get("index_info") or [{}, {}])[k] or {}
    label = info.get("label") or row["indices"][k]
    return f"{label} ({info['units']})" if info.get("units") else label


def _map_cells(row: Mapping[str, Any], arms: Sequence[str]) -> tuple[pd.DataFrame, list[str], list[str]]:
    """One rectangle per mapped grid point (its centre at_x, at_y; the chart widens it to the cell, see _half_cell),
    labelled by the arm favoured and whether clearly."""
    xs, ys = np.asarray(row["grid"]["x"], float), np.asarray(row["grid"]["y"], float)
    c = arm_colours(arms)
    labels, colours = [], []
    for arm in arms:
        labels += [f"{arm}, clearly", f"{arm}, not clearly"]
        colours += [c[arm], _tint(c[arm], 0.6)]
    recs = []
    for r, y in enumerate(ys):
        for k, x in enumerate(xs):
            fav = row["favoured"][r][k]
            if fav is None:
                continue
            clear = row["clear"][r][k] == fav
            recs.append({"at_x": x, "at_y": y, "difference": row["difference"][r][k],
                         "region": f"{fav}, {'clearly' if clear else 'not clearly'}"})
    return pd.DataFrame(recs, columns=["at_x", "at_y", "difference", "region"]), labels, colours


def _half_cell(row: Mapping[str, Any]) -> tuple[float, float]:
    """Half a cell's width and height, a little over (0.51 of the grid step), so neighbouring cells leave no seams."""
    xs, ys = np.asarray(row["grid"]["x"], float), np.asarray(row["grid"]["y"], float)
    dx = float(np.diff(xs).min()) if len(xs) > 1 else 1.0
    dy = float(np.diff(ys).min()) if len(ys) > 1 else 1.0
    return 0.51 * dx, 0.51 * dy


@quick_chart
def decision_map_chart(map_row: Mapping[str, Any], arms: Sequence[str], patient: Mapping[str, Any] | None = None, *,
                       style: bool = True) -> alt.TopLevelMixin:
    """The arm favoured over two indices (a maps row): solid where the interval excludes no difference, pale where
    it does not, blank where patients are too few; the break-even contour in black; the patient's point.

    patient: {"x", "y", "label"} (defaults to the row's own "patient" entry).
    """
    xs, ys = map_row["grid"]["x"], map_row["grid"]["y"]
    xt, yt = _map_axis_title(map_row, 0), _map_axis_title(map_row, 1)
    cells, labels, colours = _map_cells(map_row, arms)
    dx = (xs[-1] - xs[0]) / max(len(xs) - 1, 1) / 2
    dy = (ys[-1] - ys[0]) / max(len(ys) - 1, 1) / 2
    xscale = alt.Scale(domain=[xs[0] - dx, xs[-1] + dx], nice=False, zero=False)
    yscale = alt.Scale(domain=[ys[0] - dy, ys[-1] + dy], nice=False, zero=False)
    layers: list[alt.Chart] = []
    if len(cells):
        hx, hy = _half_cell(map_row)
        layers.append(base_chart(cells).transform_calculate(
            x=f"datum.at_x - {hx!r}", x2=f"datum.at_x + {hx!r}", y=f"datum.at_y - {hy!r}", y2=f"datum.at_y + {hy!r}"
        ).mark_rect(strokeWidth=0).encode(
            x=alt.X("x:Q", scale=xscale, title=wrap(xt, AXIS_CHARS)), x2=alt.X2("x2"),
            y=alt.Y("y:Q", scale=yscale, title=wrap(yt, AXIS_CHARS)), y2=alt.Y2("y2"),
            color=alt.Color("region:N", scale=alt.Scale(domain=labels, range=colours),
                            legend=alt.Legend(title="favoured arm")),
            tooltip=[alt.Tooltip("at_x:Q", format=".3~g", title=xt), alt.Tooltip("at_y:Q", format=".3~g", title=yt),
                     alt.Tooltip("difference:Q", format=".3~g"), alt.Tooltip("region:N", title="favoured")]))
    lines = pd.DataFrame([{"x": p["x"], "y": p["y"], "line": k, "order": j}
                          for k, line in enumerate(map_row.get("contour") or []) for j, p in enumerate(line)],
                         columns=["x", "y", "line", "order"])
    if len(lines):
        layers.append(base_chart(lines).mark_line(color=INK, strokeWidth=3).encode(
            x=alt.X("x:Q", scale=xscale, title=wrap(xt, AXIS_CHARS)),
            y=alt.Y("y:Q", scale=yscale, title=wrap(yt, AXIS_CHARS)),
            detail="line:N", order="order:Q"))
    point = patient if patient is not None else map_row.get("patient")
    if point and point.get("x") is not None and point.get("y") is not None:
        label = str(point.get("label") or f"this patient ({fmt(point['x'])}, {fmt(point['y'])})")
        pdf = pd.DataFrame([{"x": float(point["x"]), "y": float(point["y"]), "label": label}])
        layers.append(base_chart(pdf).mark_point(shape="diamond", size=320, filled=True, color="#000000", opacity=1,
                                             stroke="#FFFFFF", strokeWidth=2).encode(
            x=alt.X("x:Q", scale=xscale), y=alt.Y("y:Q", scale=yscale),
            tooltip=[alt.Tooltip("label:N", title="patient")]))
        layers.append(base_chart(pdf).mark_text(align="left", dx=10, dy=-10, fontSize=FONT["text"], fontWeight="bold",
                                            color="#000000").encode(
            x=alt.X("x:Q", scale=xscale), y=alt.Y("y:Q", scale=yscale), text=alt.Text("label:N")))
    if not layers:
        layers.append(base_chart(pd.DataFrame([{"x": xs[0], "y": ys[0]}])).mark_point(opacity=0).encode(
            x=alt.X("x:Q", scale=xscale, title=xt), y=alt.Y("y:Q", scale=yscale, title=yt)))
    chart = sized_chart(alt.layer(*layers), WIDTH, round(WIDTH * 0.75))
    target = "the composite" if map_row["target"] == "composite" else map_row.get("measure") or map_row["target"]
    title = f"Which arm is favoured on {target}, over {xt.split(' (')[0]} and {yt.split(' (')[0]}"
    none = "the margin" if map_row.get("margin") else "no difference"
    subtitle = (f"solid: clearly favoured (interval excludes {none}); pale: not clearly; black line: "
                "break-even; blank: too few patients")
    desc_row = dict(map_row, patient=point) if point is not map_row.get("patient") else map_row
    return finish_chart(chart, title, subtitle, describe_map(desc_row, arms), style)


def map_sections(doc: Mapping[str, Any]) -> list[dict]:
    """Report sections for the document's `maps` rows, in the shape explorer.report's extra_sections take."""
    arms = doc["arms"]
    out = []
    for row in doc.get("maps") or []:
        a, b = map_labels(row)
        target = "Composite" if row["target"] == COMPOSITE else row.get("measure") or row["target"]
        out.append({"title": f"Two indices: {target} over {a} and {b}",
                    "text": describe_map(row, arms), "chart": decision_map_chart(row, arms),
                    "table": coefficient_table(row),
                    "notes": [row.get("methods") or "", *(row.get("notes") or []), *(row.get("warnings") or [])]})
    return out

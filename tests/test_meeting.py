"""The meeting view: the patient in hand on one screen and one printed A4 page, said from the engine's numbers."""
from __future__ import annotations

import re
from pathlib import Path

import pytest

from explorer import CAUTIONS, demo
from explorer import appstate as aps
from explorer.meeting import meeting_content, meeting_html, meeting_pdf
from explorer.patient import place_patient, text_codings
from explorer.spec import load_spec


@pytest.fixture(scope="module")
def small_ws(tmp_path_factory: pytest.TempPathFactory) -> aps.Workspace:
    spec = load_spec(demo.write_demo(tmp_path_factory.mktemp("meeting"), n=600))
    return aps.Workspace.open(Path(spec.cohort.path).read_bytes(), "demo_cohort.csv", spec, is_demo=True)


def test_the_meeting_view_says_the_views_numbers_and_prints_on_one_a4_page(small_ws: aps.Workspace) -> None:
    ws = small_ws
    fs = ws.fitset()
    view = place_patient(fs, {"cfs": 7, "age": 82, "lactate": 1.8, "albumin": 34, "sex": "F"},
                         weights=ws.spec.values.weights, index="cfs")
    rows = ws.curve_rows(False)
    m = meeting_content(view, rows, CAUTIONS, patient="Clinical Frailty Scale 7, Age 82", whose="the team's",
                        titles={o.name: o.title for o in ws.spec.outcomes}, coverage=ws.coverage("cfs"))
    alive = view.prediction("alive", "cfs")
    first = ws.spec.cohort.arms[0]
    # dead per 100 is 100 minus alive per 100, its interval the alive interval turned round
    dead = next(r for r in m.per_100 if r[0].startswith("Dead (at one year"))
    e = alive.arms[first]
    assert dead[1] == f"{100 - e.per_100} ({100 - e.per_100_upper}-{100 - e.per_100_lower})"
    assert any("break" not in b and "Alive at one year" in b for b in m.break_evens)
    assert m.rests_on and re.search(r"\d+ randomised", m.rests_on[0])
    risk = next(r for r in m.placements if "log hazard" in r[1])  # the demo's prognostic index
    assert "model-scale value" in risk[3]
    assert CAUTIONS[0] in meeting_html(m) and "<script" not in meeting_html(m)
    pdf = meeting_pdf(m)
    assert pdf.startswith(b"%PDF") and len(re.findall(rb"/Type /Page\b(?!s)", pdf)) == 1


def test_the_patient_in_hand_survives_a_new_cohort_and_asks_coded_text_by_its_labels(small_ws: aps.Workspace
                                                                                   ) -> None:
    ws = small_ws
    codings = text_codings(type("F", (), {"cohort": ws.cohort})())
    fields = aps.patient_fields(ws.spec, ws.index_values(), ws.cohort.frame, codings)
    sex = next(f for f in fields if f["key"] == "sex")
    assert not sex["numeric"] and set(sex["options"]) == {"F", "M"}  # the demo file's own labels
    # a formula's columns are asked by the spec's [cohort] labels, never by the bare column name
    assert {f["key"]: f["label"] for f in fields}["lactate"] == "Lactate (mmol/L)" and sex["label"] == "Sex"
    choice = aps.PatientChoice(values={"cfs": 7.0, "age": 82.0, "sex": "M", "gone": 3.0}, row=10_000)
    fitted = choice.fitted_to(fields, ws.cohort.n)
    assert fitted.values["cfs"] == 7.0 and fitted.values["sex"] == "M" and "gone" not in fitted.values
    assert fitted.row == 0 and fitted.inputs() == (fitted.values, None)
    assert "Clinical Frailty Scale 7" in fitted.describe(fields, "the patient's own")


def test_the_headline_table_reads_the_results_rows_in_words(small_ws: aps.Workspace) -> None:
    from explorer.headline_table import headline_table

    rows = [r for r in small_ws.curve_rows(False) if r["index"] == "cfs"]
    table = headline_table(rows, small_ws.checks(), {o.name: o.title for o in small_ws.spec.outcomes})
    assert list(table["outcome"]) == [small_ws.spec.outcome(r["outcome"]).title for r in rows]  # labels, not names
    for (_, t), r in zip(table.iterrows(), rows):
        bes = r["break_even"]
        if bes:
            assert t["better below"] == bes[0]["favours_below"] and t["arms break even at"].startswith(
                f"{float(bes[0]['x']):.3g}".rstrip("0").rstrip(".")[:3])
        assert t["does the difference change along the index?"].split(",")[0].split(":")[0] in {
            "yes", "not clearly", "not tested"}


def test_a_two_ray_break_even_interval_is_drawn_as_two_rays_within_the_index() -> None:
    # A Fieller interval for a ratio is the union of two rays when the denominator is not clearly non-zero
    # (Fieller 1954; common practice). An "interval" of -18.7 to 5.94 around 7.86 is such a pair.
    from explorer.charts_common import chart_spec
    from explorer.charts_selection import interval_pieces, selection_break_even_chart

    assert interval_pieces(7.86, -18.7, 5.94, "finite", (1.0, 9.0)) == [(5.94, 9.0, False, True)]
    assert interval_pieces(5.0, 2.0, 8.0, "two_rays", (1.0, 9.0)) == [(1.0, 2.0, True, False), (8.0, 9.0, False, True)]
    assert interval_pieces(5.0, 3.0, 7.0, "finite", (1.0, 9.0)) == [(3.0, 7.0, False, False)]
    row = {"index": "cfs", "outcome": "alive", "curve": [{"x": 1.0}, {"x": 9.0}],
           "randomised_break_even": [{"x": 7.86, "ci": [-18.7, 5.94], "interval_shape": "finite"}],
           "all_break_even": [{"x": 6.0, "ci": [5.0, 7.0], "interval_shape": "finite"}]}
    chart = selection_break_even_chart(row, index_title="Clinical Frailty Scale")
    spec = chart_spec(chart)
    domains = [ly["encoding"]["x"]["scale"]["domain"] for ly in spec["layer"] if "scale" in ly["encoding"]["x"]]
    assert domains and all(d == [1.0, 9.0] for d in domains)  # no axis stretched beyond the index
    assert "in two parts: open below, up to -18.7, and from 5.94, open above" in spec["description"]
    # With the index's declared bounds the words stay on the scale: nothing below 1 on a 1-9 scale.
    spec = chart_spec(selection_break_even_chart({**row, "index_info": {"bounds": [1, 9]}}, index_title="Clinical Frailty Scale"))
    assert "from 5.94 to 9, the highest possible value" in spec["description"] and "-18.7" not in spec["description"]


def test_numbered_levels_read_as_levels_and_named_ones_as_words() -> None:
    from explorer.words import words

    # a 0-6 scale such as the modified Rankin Scale has numbered levels (common practice)
    assert [words(v) for v in ("0", "6", "home_with_help")] == ["level 0", "level 6", "home with help"]


def test_the_meeting_view_says_a_two_part_break_even_interval_as_two_parts() -> None:
    # Fieller 1954 (common practice): a two-ray set is not the span between its ends, which here would exclude 7.86.
    from explorer.meeting import _nearest_break_evens

    rows = [{"index": "cfs", "outcome": "alive", "break_even": [
                {"x": 7.86, "ci": [-18.7, 5.94], "interval_shape": "two_rays", "favours_below": "laparotomy"}]},
            {"index": "cfs", "outcome": "home", "break_even": [
                {"x": 4.36, "ci": [1.74, 5.68], "interval_shape": "finite", "favours_above": "non-operative"}]},
            {"index": "cfs", "outcome": "qol", "break_even": [
                {"x": 2.64, "ci": [None, 4.43], "interval_shape": "unbounded_below"}]}]
    said = _nearest_break_evens(rows, "cfs", 7.0, {"alive": "Alive", "home": "At home", "qol": "QoL"}, "CFS")
    assert said[0] == ("Alive: 7.86 (interval in two parts: open below, up to -18.7, and from 5.94, open above); "
                       "patient below: laparotomy better.")
    assert said[1].startswith("At home: 4.36 (interval 1.74 to 5.68); patient above")
    assert said[2].startswith("QoL: 2.64 (interval open below, up to 4.43)")


def test_interval_ends_past_the_index_bounds_are_said_as_the_scale_ends() -> None:
    # The demo's own intervals along the Clinical Frailty Scale (1-9, Rockwood 2005; bounds declared in the spec):
    # a Fieller set reaching -21.5 or a two-ray set (-inf, -18.7] U [5.94, inf) is, on the scale, [1, 4.43] or
    # [5.94, 9]; the words say so instead of printing an impossible frailty of -21.5.
    from explorer.headline_table import headline_table
    from explorer.meeting import _nearest_break_evens

    info = {"label": "Clinical Frailty Scale", "bounds": [1, 9]}
    rows = [{"index": "cfs", "outcome": "alive", "index_info": info, "break_even": [
                {"x": 7.86, "ci": [-18.7, 5.94], "interval_shape": "two_rays", "favours_below": "laparotomy",
                 "favours_above": "non-operative"}]},
            {"index": "cfs", "outcome": "qol", "index_info": info, "break_even": [
                {"x": 2.64, "ci": [-21.5, 4.43], "interval_shape": "finite", "favours_below": "laparotomy",
                 "favours_above": "non-operative"}]},
            {"index": "cfs", "outcome": "days", "index_info": info, "break_even": [
                {"x": 5.0, "ci": [None, None], "interval_shape": "unbounded", "favours_below": "laparotomy",
                 "favours_above": "non-operative"}]}]
    titles = {"alive": "Alive", "qol": "QoL", "days": "Days at home"}
    said = _nearest_break_evens(rows, "cfs", 7.0, titles, "CFS")
    assert said[0].startswith("Alive: 7.86 (interval from 5.94 to 9, the highest possible value)")
    assert said[1].startswith("QoL: 2.64 (interval from 1, the lowest possible value, to 4.43)")
    assert "anywhere from 1 to 9, the whole possible range: the data cannot place it" in said[2]
    table = headline_table(rows, [], titles)
    cells = " ".join(table["arms break even at"])
    assert "-18.7" not in cells and "-21.5" not in cells
    assert "2.64 (from 1, the lowest possible value, to 4.43)" in cells

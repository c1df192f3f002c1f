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
    view = place_patient(fs, {"cfs": 7, "age": 82}, weights=ws.spec.values.weights, index="cfs")
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
    choice = aps.PatientChoice(values={"cfs": 7.0, "age": 82.0, "sex": "M", "gone": 3.0}, row=10_000)
    fitted = choice.fitted_to(fields, ws.cohort.n)
    assert fitted.values["cfs"] == 7.0 and fitted.values["sex"] == "M" and "gone" not in fitted.values
    assert fitted.row == 0 and fitted.inputs() == (fitted.values, None)
    assert "Clinical Frailty Scale 7" in fitted.describe(fields, "the patient's own")

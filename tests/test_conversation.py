"""The values conversation: answers become weights by the rules weights_from_answers documents (checked by hand
computation and as properties over every possible answer), the record says whose values they are and where
the weights came from, and the patient page runs the conversation (Streamlit's AppTest)."""
from __future__ import annotations

import json
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from explorer.conversation import (ValuesRecord, current_record, record_conversation, weights_from_answers,
                                   when_words)
from explorer.errors import FulcrumError
from explorer.spec import ValuesSpec
from explorer.values import check_weights

LEVELS = ("independent", "home_with_help", "care_home", "bedbound", "dead")  # the demo's function levels


def test_the_documented_rules_by_hand():
    # Hand computation from the rules in weights_from_answers' docstring: two acceptable states 1 and
    # 1 - 0.5 * 1/2; one 'neither' state 0.2 * 1/2; one worse-than-death state -0.5 * 1/2; death 0.
    w = weights_from_answers(LEVELS, ["independent", "home_with_help"], ["bedbound"])
    assert w == {"independent": 1.0, "home_with_help": 0.75, "care_home": 0.1, "bedbound": -0.25, "dead": 0.0}
    # one acceptable state; three 'neither' states ranked care home, bedbound, home with help:
    # 0.2 * 3/4, 0.2 * 2/4, 0.2 * 1/4
    w = weights_from_answers(LEVELS, ["independent"], [], ranking=["independent", "care_home", "bedbound"])
    assert w == {"independent": 1.0, "care_home": 0.15, "bedbound": 0.1, "home_with_help": 0.05, "dead": 0.0}
    # ratings replace the rule for the states they name: rating / 100
    w = weights_from_answers(LEVELS, ["independent", "home_with_help"], ["bedbound"],
                             ratings={"home_with_help": 85, "bedbound": -40})
    assert w["home_with_help"] == 0.85 and w["bedbound"] == -0.4 and w["care_home"] == 0.1


answers = st.permutations(LEVELS[:-1]).flatmap(lambda order: st.tuples(
    st.just(list(order)), st.lists(st.sampled_from(LEVELS[:-1]), unique=True),
    st.lists(st.sampled_from(LEVELS[:-1]), unique=True)))


@settings(max_examples=300, deadline=None)
@given(answers)
def test_groups_keep_their_order_and_rank_orders_within_them(a):
    order, acceptable, worse = a
    worse = [lv for lv in worse if lv not in acceptable]
    w = weights_from_answers(LEVELS, acceptable, worse, ranking=order)
    check_weights(w, LEVELS)  # within -1 to 1, one per level (explorer.values)
    assert w["dead"] == 0.0
    neither = [lv for lv in LEVELS[:-1] if lv not in acceptable and lv not in worse]
    assert all(w[a] > w[n] for a in acceptable for n in neither)
    assert all(0 < w[n] < 0.2 + 1e-12 for n in neither)
    assert all(w[x] < 0 for x in worse) and all(w[x] >= 0.5 for x in acceptable)
    if acceptable:
        assert max(w.values()) == 1.0 and w[next(lv for lv in order if lv in acceptable)] == 1.0
    for group in (acceptable, worse, neither):
        ranked = [lv for lv in order if lv in group]
        assert all(w[a] > w[b] for a, b in zip(ranked, ranked[1:]))


@pytest.mark.parametrize("kwargs, key", [
    ({"acceptable": ["dead"], "worse_than_death": []}, "conversation.acceptable"),
    ({"acceptable": ["home"], "worse_than_death": []}, "conversation.acceptable"),
    ({"acceptable": ["bedbound"], "worse_than_death": ["bedbound"]}, "conversation.worse_than_death"),
    ({"acceptable": [], "worse_than_death": ["bedbound"], "ratings": {"bedbound": 20}}, "conversation.ratings.bedbound"),
    ({"acceptable": ["independent"], "worse_than_death": [], "ratings": {"independent": 140}},
     "conversation.ratings.independent"),
    ({"acceptable": [], "worse_than_death": [], "ranking": ["care_home", "care_home"]}, "conversation.ranked"),
])
def test_contradictory_or_unknown_answers_say_what_to_do(kwargs, key):
    with pytest.raises(FulcrumError) as err:
        weights_from_answers(LEVELS, **kwargs)
    assert err.value.key == key and err.value.hint


def test_the_record_says_whose_when_and_from_what():
    rec = record_conversation(LEVELS, ["independent"], ["bedbound"], whose="proxy", when="2026-03-03T14:05",
                              recorded_by="  the ward registrar ")
    assert rec.source == "conversation" and rec.recorded_by == "the ward registrar"
    assert rec.answers.neither == ("home_with_help", "care_home")
    said = " ".join(rec.sentences())
    assert "values a proxy gave on the patient's behalf" in said
    assert "recorded on 3 March 2026 at 14:05 by the ward registrar" in said
    assert "Worse than death: bedbound." in said
    again = ValuesRecord.from_json(json.loads(json.dumps(rec.to_json())))
    assert again == rec
    assert when_words("2026-03-03") == "on 3 March 2026"
    with pytest.raises(FulcrumError):
        record_conversation(LEVELS, [], [], whose="family")


def test_the_record_follows_the_weights_in_use():
    rec = record_conversation(LEVELS, ["independent", "home_with_help"], [], whose="patient")
    spec_values = ValuesSpec("function", dict(rec.weights), whose="patient")
    assert current_record(rec, spec_values) is rec
    edited = current_record(rec, ValuesSpec("function", dict(rec.weights, care_home=0.3), whose="patient"))
    assert edited.source == "edited" and edited.answers == rec.answers and edited.weights["care_home"] == 0.3
    assert "changed by hand after the answers" in " ".join(edited.sentences())
    preset = current_record(rec, ValuesSpec("function", {lv: 1.0 for lv in LEVELS[:-1]} | {"dead": 0.0},
                                            preset="survival_only", whose="team"))
    assert preset.source == "survival_only" and preset.whose == "team"
    assert "Only survival counts" in " ".join(preset.sentences())
    plain = current_record(None, ValuesSpec("function", dict(rec.weights), whose="team"))
    assert plain.source == "spec" and plain.answers is None and plain.when is None


# ------------------------------------------------------------------------------------------
# The conversation on the patient page
# ------------------------------------------------------------------------------------------
APP = Path(__file__).resolve().parents[1] / "pages" / "app.py"


def test_the_patient_page_turns_answers_into_weights_that_stay_editable():
    from streamlit.testing.v1 import AppTest

    at = AppTest.from_file(str(APP), default_timeout=240)
    at.run()
    at.switch_page("page_patient.py").run()
    assert not at.exception, [e.value for e in at.exception]
    ws = at.session_state["workspace"]
    fits, levels = ws.n_fits, ws.spec.outcome(ws.spec.values.outcome).levels
    next(r for r in at.radio if r.label == "Whose values are these?").set_value("proxy")
    next(m for m in at.multiselect if m.label == "Acceptable states").set_value(["independent"])
    next(m for m in at.multiselect if m.label == "Worse than death").set_value(["bedbound", "care_home"])
    next(t for t in at.text_input if t.label.startswith("Recorded by")).set_value("ward registrar")
    at.run()
    assert ws.spec.values.weights != weights_from_answers(levels, ["independent"], ["bedbound", "care_home"])
    next(b for b in at.button if b.label == "Use these values").click().run()
    assert not at.exception and not at.error, [e.value for e in at.exception] + [e.value for e in at.error]
    ws = at.session_state["workspace"]
    expected = weights_from_answers(levels, ["independent"], ["bedbound", "care_home"])
    assert ws.spec.values.weights == expected and ws.spec.values.whose == "proxy" and ws.n_fits == fits
    shown = " ".join(str(e.value) for kind in ("markdown", "info") for e in getattr(at, kind))
    assert "values a proxy gave on the patient" in shown and "ward registrar" in shown
    assert "by the proxy's values" in shown
    assert any(b.label.startswith("Summary as PDF (no identifiers)") for b in at.get("download_button"))

    next(n for n in at.number_input if n.label == "home with help").set_value(0.5).run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    ws = at.session_state["workspace"]
    assert ws.spec.values.weights == dict(expected, home_with_help=0.5) and ws.n_fits == fits
    shown = " ".join(str(e.value) for e in at.markdown)
    assert "changed by hand after the answers" in shown

    at.switch_page("page_values.py").run()
    at.switch_page("page_patient.py").run()
    assert not at.exception and not at.error
    assert at.session_state["workspace"].spec.values.weights == dict(expected, home_with_help=0.5)

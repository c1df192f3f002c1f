"""Golden results: the demo and two test cohorts give the same results document as when the golden files
were made (tests/golden/make_golden.py says what each case covers and when to regenerate).

The reference here is the project's own earlier output, made at commit 2904666 before the redesign and kept in
tests/golden/*.json.gz: a refactoring must leave every number of it in place. The redesign left it identical; the
demo and invented files were then regenerated once for an intended change of words only (composite titles in words
instead of kind names, quality-adjusted measures with their units), every number unchanged; the demo's again when
its spec gained column labels (only the two spec hashes changed); and selection rows' index_bounds was then
taken out of the demo and invented files by a script that touched nothing else (the same fact now lives in
selection[].index_info.bounds, as in results[].index_info). Every golden field must be present and equal (numbers
within 1e-9 relative + 1e-12 absolute), except tool.generated_at and tool.version; fields added since are allowed.
"""
from __future__ import annotations

import copy
import importlib.util
from pathlib import Path

import pytest

_SPEC = importlib.util.spec_from_file_location("make_golden", Path(__file__).parent / "golden" / "make_golden.py")
golden = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(golden)


def _check(name: str, doc: dict) -> None:
    diffs = golden.differences(golden.read_golden(name), golden.jsonable(doc))
    assert not diffs, f"{name}: the results differ from tests/golden/{name}.json.gz:\n" + "\n".join(diffs)


def test_the_demo_gives_its_golden_results(demo_results) -> None:
    _check("demo", demo_results.document)


@pytest.mark.parametrize("name", ["invented", "pbc"])
def test_a_test_cohort_gives_its_golden_results(name: str, tmp_path: Path) -> None:
    _check(name, golden.CASES[name](tmp_path))


def test_the_comparison_catches_a_changed_number_a_lost_field_and_a_changed_word() -> None:
    doc = golden.read_golden("pbc")
    assert golden.differences(doc, copy.deepcopy(doc)) == []
    changed = copy.deepcopy(doc)
    be = next(r for r in changed["results"] if r["break_even"])["break_even"][0]
    be["x"] *= 1 + 1e-8
    changed["warnings"][0] += "."
    del changed["cautions"]
    changed["tool"]["generated_at"] = "another day"  # ignored
    changed["new_field"] = 1  # added fields are allowed
    found = golden.differences(doc, changed)
    assert len(found) == 3, found
    assert any(".break_even[0].x: golden" in d for d in found) and "cautions: missing" in found
    assert any(d.startswith("warnings[0]: golden") for d in found)
    # within the tolerance: a change in the tenth significant digit passes
    close = copy.deepcopy(doc)
    next(r for r in close["results"] if r["break_even"])["break_even"][0]["x"] *= 1 + 5e-10
    assert golden.differences(doc, close) == []

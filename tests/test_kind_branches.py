"""One home for each fact about an outcome: outside explorer/models (and the spec and cohort readers, which parse
kinds), no code branches on an outcome's kind or on a model class. It asks models.describe(outcome) for the facts
(probability, range, horizon, levels, ...) or the fit itself (likelihood, horizon view, ...).

The scan follows the project's house metric (common practice for this repository: the structure figures script
the maintainers run): a comparison or `match` involving a name or attribute called `kind`, or an isinstance check
against a class defined in explorer/models, counts as a branch.
"""
from __future__ import annotations

import ast
import collections
import pathlib

ROOT = pathlib.Path(__file__).resolve().parents[1]

# Modules allowed to know outcome kinds: the models themselves, and the readers that parse them.
ALLOWED = ("explorer/models/", "explorer/spec.py", "explorer/cohort.py")

# Files allowed to keep some branches while they wait to be cleaned, with how many each may keep. Empty since the
# redesign landed; keep it so (shrink-only: never raise a number or add a file).
WAITING: dict[str, int] = {}


def _model_classes() -> set[str]:
    return {n.name for p in (ROOT / "explorer" / "models").rglob("*.py")
            for n in ast.walk(ast.parse(p.read_text(encoding="utf-8"))) if isinstance(n, ast.ClassDef)}


def _names_kind(node: ast.AST) -> bool:
    return any((isinstance(n, ast.Name) and n.id == "kind") or (isinstance(n, ast.Attribute) and n.attr == "kind")
               for n in ast.walk(node))


def branches(tree: ast.AST, classes: set[str]) -> list[int]:
    """Line numbers of the branches on a kind or a model class in one module."""
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Compare) and _names_kind(node) or isinstance(node, ast.Match) and _names_kind(node.subject) or (isinstance(node, ast.Call) and getattr(node.func, "id", "") == "isinstance" and len(node.args) == 2
              and {n.id if isinstance(n, ast.Name) else n.attr for n in ast.walk(node.args[1])
                   if isinstance(n, (ast.Name, ast.Attribute))} & classes):
            out.append(node.lineno)
    return out


def scan() -> dict[str, list[int]]:
    classes = _model_classes()
    found = collections.defaultdict(list)
    files = list((ROOT / "explorer").rglob("*.py")) + list((ROOT / "pages").rglob("*.py"))
    for p in files:
        rel = p.relative_to(ROOT).as_posix()
        if rel.startswith(ALLOWED):
            continue
        lines = branches(ast.parse(p.read_text(encoding="utf-8")), classes)
        if lines:
            found[rel] = sorted(lines)
    return dict(found)


def test_the_scan_catches_each_form_of_branch():
    code = ("if o.kind == 'survival': pass\n"
            "match outcome.kind:\n    case 'binary': pass\n"
            "isinstance(fit, CoxFit)\n"
            "x = describe(o).probability\n")
    assert sorted(branches(ast.parse(code), {"CoxFit"})) == [1, 2, 4]


def test_no_new_branches_on_an_outcome_kind():
    found = scan()
    new = {f: lines for f, lines in found.items() if f not in WAITING}
    assert not new, (f"code outside explorer/models branches on an outcome kind or a model class: {new}; ask "
                     "models.describe(outcome) or the fit (see DEVELOPERS.md, 'The model protocol').")
    grown = {f: (len(found[f]), WAITING[f]) for f in found if f in WAITING and len(found[f]) > WAITING[f]}
    assert not grown, f"files waiting to be cleaned gained branches (found, allowed): {grown}"


def test_the_waiting_list_only_shrinks():
    found = scan()
    stale = {f: (len(found.get(f, [])), n) for f, n in WAITING.items() if len(found.get(f, [])) < n}
    assert not stale, f"these files have fewer branches than WAITING allows (found, allowed); lower it: {stale}"
    assert not WAITING  # emptied when the redesign landed: new code asks the models


def test_outcome_data_reads_each_kind_through_its_arrays(demo_spec):
    # fitting.outcome_data asks each kind for its arrays; for the demo's outcomes (survival, ordinal, continuous)
    # they are the cohort's own columns: time and event as numbers, levels as codes best first, numbers.
    import numpy as np

    from explorer import fitting, models
    from explorer.cohort import load_cohort

    cohort = load_cohort(demo_spec)
    f = cohort.frame
    rows = np.arange(0, len(f), 3)
    x = np.zeros(len(f))
    kinds = set()
    for o in demo_spec.outcomes:
        got = fitting.outcome_data(demo_spec, cohort, o, x, rows, None)
        facts = models.describe(o)
        kinds.add(facts.values)
        if facts.follow_up:
            np.testing.assert_array_equal(got.time, f[o.time].to_numpy(float)[rows])
            np.testing.assert_array_equal(got.event, f[o.event].to_numpy(float)[rows])
            assert got.y is None
        elif facts.levels:
            # a missing level is coded -1, as pandas codes a missing category (complete cases drop it later)
            codes = np.array([facts.levels.index(v) if v in facts.levels else -1
                              for v in f[o.column].astype(object)], float)[rows]
            np.testing.assert_array_equal(got.y, codes)
        else:
            np.testing.assert_array_equal(got.y, f[o.column].to_numpy(float)[rows])
    assert kinds == {"time_event", "level", "number"}

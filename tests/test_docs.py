"""The guides stay true to the code: the generated reference, every results field, the glossary, links, examples."""
from __future__ import annotations

import argparse

import dataclasses
import re
import shlex
from pathlib import Path

import pytest

from explorer import cli, docs_gen, maps
from explorer.analysis import analyse
from explorer.demo import write_demo
from explorer.spec import SCHEMA, MapSpec, load_spec, parse_spec_text

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"
GUIDES = ("clinician-guide.md", "researcher-guide.md", "glossary.md", "methods.md", "spec-reference.md")
# The words the app, charts and report show that a reader must be able to look up (pages/*.py, explorer/charts_*.py).
APP_TERMS = (
    "break-even point", "index", "prognostic index", "cross-fitted", "margin", "clear-difference region",
    "interval", "pointwise", "simultaneous band", "Fieller", "delta method", "bootstrap percentile", "two rays",
    "extrapolated", "randomised", "chosen", "selection effect", "shift", "value weights", "preset", "whose values",
    "composite", "acceptability", "threshold analysis", "win ratio", "win odds", "net benefit", "RMST",
    "Kaplan-Meier", "E-value", "SMD", "propensity", "effective sample size", "calibration", "effect modification",
    "Clinical Frailty Scale", "out of 100 people like this", "percentile", "proportional odds", "Cox model", "Weibull",
    "restricted cubic spline", "complete cases", "multiple imputation", "Rubin's rules", "cluster", "horizon",
    "among survivors", "days alive and at home", "quality-adjusted survival", "sliding window", "spec", "seed",
    "sha256", "coverage", "approximate",
)
# Never in the README or the guides: outside datasets (tests only) and words the project does not use.
BANNED = ("veteran", "wine", "gbsg", "rossi", "gehan", "ncctg", "lung cancer", "breast cancer", "null point",
          "zone of equipoise", "spectrum of indication", "index of indication", "head injury", "aneurysm",
          "sciatica", "preterm")


def fenced(text: str) -> list[tuple[str, str]]:
    """The fenced code blocks of a markdown text as (language, body), fences paired in order."""
    blocks, lang, body = [], None, []
    for line in text.splitlines():
        mark = line.strip()
        if mark.startswith("```"):
            if lang is None:
                lang, body = mark[3:].strip(), []
            else:
                blocks.append((lang, "\n".join(body)))
                lang = None
        elif lang is not None:
            body.append(line)
    return blocks


def guide_texts() -> dict[str, str]:
    paths = [ROOT / "README.md"] + [DOCS / g for g in GUIDES]
    return {p.name: p.read_text(encoding="utf-8") for p in paths}


def test_spec_reference_is_the_generated_text() -> None:
    # the committed file against the generator (explorer/spec.py SCHEMA and docs_gen.RESULT_FIELDS)
    on_disk = (DOCS / "spec-reference.md").read_text(encoding="utf-8")
    assert on_disk == docs_gen.reference_markdown(), "run: python -m explorer.docs_gen"


def test_every_spec_key_is_in_the_reference() -> None:
    text = docs_gen.spec_markdown()
    for section, keys in SCHEMA.items():
        part = text.split(docs_gen.SECTION_HEADS[section][0], 1)[1].split("\n### ", 1)[0]
        for key in keys:
            assert f"| `{key}` |" in part, f"{section}.{key}"


def test_every_schema_property_is_described() -> None:
    # explorer/schema/results.schema.json, every declared property with $refs followed
    declared = docs_gen.schema_paths()
    assert "results[].break_even[].interval_shape" in declared
    missing = sorted(p for p in declared if not docs_gen.described(p))
    assert not missing, f"describe these in explorer/results_fields.py RESULT_SECTIONS: {missing}"


def test_every_field_of_a_real_document_is_described(tmp_path: Path) -> None:
    # a real analysis of the invented demo, with the optional parts on (clusters, imputation, selection, checks)
    spec = load_spec(write_demo(tmp_path, n=300))
    spec = dataclasses.replace(
        spec, cohort=dataclasses.replace(spec.cohort, cluster="hospital"),
        indices=tuple(ix for ix in spec.indices if ix.name in ("cfs", "risk")),
        maps=(MapSpec(indices=("cfs", "risk"), target="composite"),),
        analysis=dataclasses.replace(spec.analysis, imputations=2, replicates=20))
    result = analyse(spec)
    doc = dict(result.document)
    assert doc["maps"], "analyse() wrote no map row for [[maps]]"
    # the Two indices page also writes a map row with the patient's point (explorer.maps.map_row)
    doc["maps"] = doc["maps"] + [maps.decision_map(result.fitset, spec.maps[0], weights=spec.values.weights,
                                                   patient=(5.0, 0.0))]
    paths = docs_gen.document_paths(doc)
    for part in ("clustering.clusters", "imputation[].imputed.break_even[].df", "selection[].e_value.e_value",
                 "checks[].horizon_curve[].break_evens[].x", "pairwise[].by_level[].rule", "maps[].contour[][].x",
                 "maps[].patient.covered"):
        assert part in paths, part
    missing = sorted(p for p in paths if not docs_gen.described(p))
    assert not missing, f"describe these in explorer/results_fields.py RESULT_SECTIONS: {missing}"


def test_a_described_field_that_no_document_has_is_caught() -> None:
    assert docs_gen.described("composite[].break_even[].favours_below")  # composite break-evens read as results'
    assert not docs_gen.described("results[].break_even[].no_such_field")


@pytest.mark.parametrize("term", APP_TERMS)
def test_the_glossary_explains_every_app_term(term: str) -> None:
    glossary = (DOCS / "glossary.md").read_text(encoding="utf-8")
    headings = [h.strip().lower() for h in re.findall(r"^\*\*(.+?)\*\*", glossary, flags=re.M)]
    assert any(term.lower() in h for h in headings), f"no glossary entry names '{term}'"


def test_links_and_images_resolve_and_images_are_small() -> None:
    for name, text in guide_texts().items():
        base = ROOT if name == "README.md" else DOCS
        for target in re.findall(r"\]\(([^)#\s]+)(?:#[^)]*)?\)", text):
            if re.match(r"[a-z]+:", target):
                continue
            assert (base / target).exists(), f"{name} links to {target}, which does not exist"
    images = list((DOCS / "images").glob("*.png"))
    assert images
    for image in images:
        assert image.stat().st_size < 300_000, image.name
    used = "".join(guide_texts().values())
    assert all(f"images/{i.name}" in used for i in images), "an image in docs/images is used by no guide"


def test_no_outside_datasets_or_unused_words() -> None:
    for name, text in guide_texts().items():
        low = text.lower()
        for word in BANNED:
            assert word not in low, f"{name} says '{word}'"


def test_every_toml_example_is_a_valid_spec() -> None:
    blocks = [(name, b) for name, text in guide_texts().items() for lang, b in fenced(text) if lang == "toml"]
    assert blocks
    for name, block in blocks:
        parse_spec_text(block, source=name)


def test_every_command_shown_parses() -> None:
    # the commands in the guides against the CLI's own parser (explorer/cli.py build_parser)
    commands = []
    for name, text in guide_texts().items():
        blocks = "\n".join(b for lang, b in fenced(text) if lang in ("", "bash", "sh"))
        for line in re.findall(r"`([^`\n]+)`", text) + re.findall(r"^\s*(\S*fulcrum .+)$", blocks, re.M):
            words = shlex.split(line.split(" #")[0])
            if words and words[0].endswith("fulcrum") and len(words) > 1:
                commands.append((name, words[1:]))
    assert len(commands) >= 5
    parser = cli.build_parser()
    (sub,) = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
    subcommands = set(sub.choices)
    assert {"analyse", "validate", "demo", "app", "check-methods", "plan", "patient"} <= subcommands
    for name, args in commands:
        if not args[0].startswith("-"):
            assert args[0] in subcommands, f"{name}: 'fulcrum {args[0]}' is no subcommand"
        if len(args) == 1 and args[0] in subcommands:
            continue  # a subcommand named in passing
        try:
            parser.parse_args(args)
        except SystemExit as exc:
            if exc.code:
                pytest.fail(f"{name}: 'fulcrum {' '.join(args)}' does not parse")


def test_docs_gen_check_reports_drift(tmp_path: Path) -> None:
    stale = tmp_path / "ref.md"
    stale.write_text("old\n", encoding="utf-8")
    assert docs_gen.main(["--check", "--out", str(stale)]) == 1
    assert docs_gen.main(["--out", str(stale)]) == 0
    assert docs_gen.main(["--check", "--out", str(stale)]) == 0

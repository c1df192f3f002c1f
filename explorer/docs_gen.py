"""Generate docs/spec-reference.md from the spec's own definitions and the results document's fields.

    python -m explorer.docs_gen            # write docs/spec-reference.md
    python -m explorer.docs_gen --check    # exit 1 when the committed file differs from the generated text
    python -m explorer.docs_gen --images test-artefacts/screenshots   # crop the browser test's screenshots

The spec part reads `explorer.spec.SCHEMA`, `REQUIRED` and the dataclass defaults; the results part walks
`explorer/schema/results.schema.json` and describes every field from `RESULT_FIELDS` (the descriptions live in explorer/results_fields.py), so neither
can drift.
"""
from __future__ import annotations

import argparse
import dataclasses
import sys
from pathlib import Path
from typing import Any, Iterable

from . import results as res
from . import spec as sp
from .results_fields import RESULT_SECTIONS

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"
REFERENCE = DOCS / "spec-reference.md"

SECTION_CLASSES = {"cohort": sp.CohortSpec, "outcomes": sp.OutcomeSpec, "indices": sp.IndexSpec,
                   "prognostic": sp.PrognosticSpec, "values": sp.ValuesSpec, "analysis": sp.AnalysisSpec,
                   "selection": sp.SelectionSpec, "pairwise": sp.PairwiseSpec, "maps": sp.MapSpec,
                   "target": sp.TargetSpec, "policy": sp.PolicySpec, "evidence": sp.EvidenceSpec}
SECTION_HEADS = {
    "cohort": ("[cohort]", "The cohort file and which columns hold the arm, the allocation and the patient."),
    "outcomes": ("[[outcomes]]", "One table per outcome; each is fitted in each arm along every index."),
    "indices": ("[[indices]]", "One table per index; give exactly one of column, formula or prognostic."),
    "prognostic": ("prognostic = { ... } inside [[indices]]", "A cross-fitted prognostic index."),
    "values": ("[values]", "Value weights for the states of an ordinal outcome, and the composites built from them."),
    "analysis": ("[analysis]", "Margin, interval level and method, seed, curve shape and resampling."),
    "selection": ("[selection]", "Randomised versus chosen patients (needs cohort.allocation)."),
    "pairwise": ("[pairwise]", "The hierarchical pairwise comparison (win ratio, win odds, net benefit)."),
    "maps": ("[[maps]]", "Two-index maps: the arm favoured over the plane of two indices, each one row of `maps` "
                         "in the results. The app's Two indices page opens on the first one."),
    "target": ("[target]", "Local patients without outcomes (index and covariate columns): rule consequences are "
                           "standardised over them, with an overlap check against the cohort. Turns the rules on."),
    "policy": ("[policy]", "Threshold rules along the indices: consequences per 100 patients, the best threshold "
                           "and the flat range around it (the `policy` rows of the results)."),
    "evidence": ("[evidence]", "Where more evidence would change the answer: value of information along each index "
                               "(the `evidence` rows of the results) and the defaults of `fulcrum plan`."),
}
TYPE_WORDS = {"str": "text", "path": "file path", "float": "number", "int": "whole number", "bool": "true / false",
              "list[str]": "list of texts", "list[float]": "list of numbers", "list[int]": "list of whole numbers",
              "table[float]": "table of numbers",
              "table[range]": "table of [low, high]", "table[str]": "table of texts", "table": "inline table"}

RESULT_FIELDS: dict[str, str] = {path: text for _, _, rows in RESULT_SECTIONS for path, text in rows}
BREAK_EVEN_LISTS = ("composite[].break_even[]", "selection[].randomised_break_even[]",
                    "selection[].all_break_even[]", "selection[].adjusted_break_even[]",
                    "checks[].horizon_curve[].break_evens[]", "imputation[].complete_case.break_even[]",
                    "imputation[].imputed.break_even[]", "results[].randomised_break_even[]",
                    "composite[].randomised_break_even[]")
ALIASES: dict[str, str] = {**{p: "results[].break_even[]" for p in BREAK_EVEN_LISTS},
                           "imputation[].imputed.curve[]": "results[].curve[]",
                           "maps[].index_info[]": "results[].index_info",
                           "selection[].index_info": "results[].index_info"}
KEYED = {"results[].n", "results[].events", "results[].methods", "results[].reference",
         "results[].index_info.percentiles", "results[].index_info.prognostic.centre", "composite[].weights",
         "selection[].adjusted.propensity.coefficients", "selection[].adjusted.n", "selection[].adjusted.effective_n",
         "clustering.clusters_per_arm", "imputation[].imputed_values", "imputation[].complete_case.n",
         "imputation[].imputed.n", "maps[].n", "maps[].weights", "maps[].coefficients", "randomised_windows[].windows[].n",
         "spec"}


def canonical(path: str) -> str:
    """The path whose description covers this one: composite rows read as results rows, break-evens alike."""
    for prefix in sorted(ALIASES, key=len, reverse=True):
        if path.startswith(prefix):
            return ALIASES[prefix] + path[len(prefix):]
    if path.startswith("composite[].") and path not in RESULT_FIELDS:
        return "results[]." + path[len("composite[]."):]
    return path


def described(path: str) -> bool:
    return canonical(path) in RESULT_FIELDS


def document_paths(doc: Any, path: str = "") -> set[str]:
    """Every field path in a results document (list items as '[]', tables keyed by names not descended)."""
    out: set[str] = set()
    if isinstance(doc, dict):
        for k, v in doc.items():
            p = f"{path}.{k}" if path else k
            out.add(p)
            if canonical(p) not in KEYED:
                out |= document_paths(v, p)
    elif isinstance(doc, list):
        for v in doc:
            out |= document_paths(v, path + "[]")
    return out


def schema_paths(schema: dict | None = None) -> dict[str, dict]:
    """Every property path the results schema declares, with its definition ($refs followed)."""
    schema = schema or res.schema()
    defs = schema.get("$defs", {})
    out: dict[str, dict] = {}

    def resolve(node: dict) -> dict:
        while "$ref" in node:
            node = defs[node["$ref"].split("/")[-1]]
        return node

    def walk(node: dict, path: str) -> None:
        node = resolve(node)
        for name, sub in node.get("properties", {}).items():
            p = f"{path}.{name}" if path else name
            out[p] = {"required": name in node.get("required", ()), "node": resolve(sub)}
            walk(sub, p)
        if isinstance(node.get("items"), dict):
            walk(node["items"], path + "[]")

    walk(schema, "")
    return out


def _schema_type(node: dict) -> str:
    if "const" in node:
        return f"always {node['const']!r}".replace("'", '"')
    if "enum" in node:
        return " | ".join("null" if v is None else str(v) for v in node["enum"])
    t = node.get("type")
    if isinstance(t, list):
        return " or ".join(t)
    if t == "array":
        return "list"
    if node.get("pattern") == "^[0-9a-f]{64}$":
        return "64 hex digits"
    return t or ""


# --------------------------------------------------------------------------------------------------
# Markdown
# --------------------------------------------------------------------------------------------------
def _cell(text: Any) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def _default(section: str, key: str) -> str:
    cls = SECTION_CLASSES.get(section)
    fields = {f.name: f for f in dataclasses.fields(cls)} if cls else {}
    f = fields.get(key)
    if f is None or key in sp.REQUIRED.get(section, ()):
        return ""
    if f.default is not dataclasses.MISSING:
        value = f.default
    elif f.default_factory is not dataclasses.MISSING:
        value = f.default_factory()
    else:
        return ""
    if value in (None, (), {}):
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, tuple):
        return "[" + ", ".join(f"{v:g}" if isinstance(v, float) else str(v) for v in value) + "]"
    if isinstance(value, float):
        return f"{value:g}"
    return f'"{value}"' if isinstance(value, str) else str(value)


def spec_markdown() -> str:
    """The spec reference, section by section, from explorer.spec.SCHEMA."""
    lines = ["## Part 1: the spec (TOML)", "",
             "A spec is a TOML file. Paths inside it are relative to the spec file. Unknown keys are refused with "
             "a suggestion; every error names the key and says what to do. Sections: "
             + ", ".join(f"`{s}`" for s in sp.TOP_LEVEL) + ". `cohort`, `outcomes` and `indices` are required.", ""]
    for section in list(sp.TOP_LEVEL[:3]) + ["prognostic"] + list(sp.TOP_LEVEL[3:]):
        head, intro = SECTION_HEADS[section]
        lines += [f"### {head}", "", intro, "", "| key | type | required | default | meaning |",
                  "|---|---|---|---|---|"]
        for key, (kind, text) in sp.SCHEMA[section].items():
            required = "yes" if key in sp.REQUIRED.get(section, ()) else ""
            lines.append(f"| `{key}` | {TYPE_WORDS.get(kind, kind)} | {required} | {_cell(_default(section, key))} "
                         f"| {_cell(text)} |")
        lines.append("")
    lines += ["### Choices", "", "| key | options |", "|---|---|",
              f"| outcomes `kind` | {', '.join(sp.OUTCOME_KINDS)} |",
              f"| survival `measure` | {', '.join(sp.SURVIVAL_MEASURES)} |",
              f"| survival `model` | {', '.join(sp.SURVIVAL_MODELS)} |",
              f"| prognostic `fit_on` | {', '.join(sp.FIT_ON)} |",
              f"| values `whose` | {', '.join(sp.WHOSE)} |",
              f"| analysis `interval` | {', '.join(sp.INTERVALS)} |",
              f"| analysis `shape` | {', '.join(sp.SHAPES)} |",
              f"| analysis `bands` | {', '.join(sp.BANDS)} |", ""]
    return "\n".join(lines)


def results_markdown() -> str:
    """Every field of the results document, from RESULT_FIELDS, marked with what the schema says of it."""
    declared = schema_paths()
    lines = ["## Part 2: the results document (JSON)", "",
             "`fulcrum analyse SPEC --json OUT` and the app's Report page write this document; "
             "`explorer/schema/results.schema.json` is its JSON Schema. `[]` marks the items of a list; "
             "a table keyed by arm, level or covariate names is described once. Numbers are rounded to six "
             "decimals; a missing or unbounded value is `null`. The schema column says `required` or `optional` "
             "for fields the schema declares (with their allowed values) and is empty for fields it leaves open.",
             ""]
    for _, title, rows in RESULT_SECTIONS:
        lines += [f"### {title}", "", "| field | schema | meaning |", "|---|---|---|"]
        for path, text in rows:
            info = declared.get(path)
            mark = ""
            if info is not None:
                mark = "required" if info["required"] else "optional"
                type_name = _schema_type(info["node"])
                mark += f" ({_cell(type_name)})" if type_name and type_name not in ("object", "list") else ""
            lines.append(f"| `{path}` | {mark} | {_cell(text)} |")
        lines.append("")
    return "\n".join(lines)


def reference_markdown() -> str:
    """The whole of docs/spec-reference.md."""
    return "\n".join([
        "# Fulcrum spec and results reference", "",
        "<!-- Generated by `python -m explorer.docs_gen` from explorer/spec.py (SCHEMA) and "
        "explorer/docs_gen.py (RESULT_FIELDS). Do not edit by hand: tests/test_docs.py checks it. -->", "",
        "This page is generated from the code's own definitions, so it always matches the version it ships with. "
        "For a walk-through see [the researcher's guide](researcher-guide.md).", "",
        spec_markdown(), results_markdown()]).rstrip() + "\n"


# --------------------------------------------------------------------------------------------------
# Screenshots for the clinician's guide
# --------------------------------------------------------------------------------------------------
# name -> (screenshot written by tests/test_browser.py, crop box left, top, right, bottom in its pixels)
SHOTS: dict[str, tuple[str, int, int, int, int]] = {
    "cohort-load.png": ("cohort.png", 0, 0, 1400, 1240),
    "cohort-checks.png": ("cohort.png", 400, 2150, 1340, 3360),
    "cohort-spread.png": ("cohort.png", 400, 4090, 1340, 5380),
    "outcomes-top.png": ("outcomes_by_index.png", 400, 140, 1340, 1660),
    "outcomes-survival.png": ("outcomes_by_index.png", 400, 1655, 1340, 2820),
    "outcomes-function.png": ("outcomes_by_index.png", 400, 3940, 1340, 5260),
    "values-weights.png": ("values.png", 400, 480, 1340, 1180),
    "values-composite.png": ("values.png", 400, 1330, 1340, 2060),
    "values-acceptability.png": ("values.png", 400, 2200, 1340, 2880),
    "values-bedbound-below-zero.png": ("values_after_weight_change.png", 400, 480, 1340, 2060),
    "selection-coverage.png": ("randomised_vs_chosen.png", 400, 640, 1340, 2130),
    "selection-effect.png": ("randomised_vs_chosen.png", 400, 2150, 1340, 2780),
    "patient-conversation.png": ("patient.png", 400, 900, 1340, 2210),
    "patient-where.png": ("patient.png", 400, 2230, 1340, 3560),
    "patient-icons.png": ("patient.png", 400, 3980, 1340, 5040),
    "patient-function.png": ("patient.png", 400, 5940, 1340, 7000),
    "report-page.png": ("report.png", 400, 140, 1340, 1320),
    "report-offline.png": ("report_offline.png", 120, 0, 1280, 1700),
}
SHOT_WIDTH = 940


def write_images(source: Path, target: Path = DOCS / "images") -> list[Path]:
    """Crop the browser test's full-page screenshots into small palette PNGs for the guides."""
    from PIL import Image

    target.mkdir(parents=True, exist_ok=True)
    written = []
    for name, (src, left, top, right, bottom) in SHOTS.items():
        with Image.open(source / src) as im:
            part = im.convert("RGB").crop((left, top, min(right, im.width), min(bottom, im.height)))
        if part.width > SHOT_WIDTH:
            part = part.resize((SHOT_WIDTH, round(part.height * SHOT_WIDTH / part.width)), Image.LANCZOS)
        part.quantize(colors=128, method=Image.Quantize.MEDIANCUT, dither=Image.Dither.NONE).save(
            target / name, optimize=True)
        written.append(target / name)
    return written


def main(argv: Iterable[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m explorer.docs_gen", description=__doc__.splitlines()[0])
    p.add_argument("--check", action="store_true", help="exit 1 when the reference on disk is out of date")
    p.add_argument("--out", type=Path, default=REFERENCE, help="where the reference goes")
    p.add_argument("--images", type=Path, metavar="SCREENSHOTS", help="crop these screenshots into docs/images")
    args = p.parse_args(list(argv) if argv is not None else None)
    if args.images:
        for path in write_images(args.images):
            print(f"wrote {path}")
        return 0
    text = reference_markdown()
    if args.check:
        same = args.out.exists() and args.out.read_text(encoding="utf-8") == text
        print(f"{args.out} is " + ("up to date." if same else "out of date: run python -m explorer.docs_gen."))
        return 0 if same else 1
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(text, encoding="utf-8")
    print(f"wrote {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

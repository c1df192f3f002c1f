"""Results JSON v1: the document around the rows (explorer.result_rows), validated against explorer/schema."""
from __future__ import annotations

import datetime as _dt
import hashlib
import json
from importlib import resources
from pathlib import Path

from . import CAUTIONS, __version__, coverage
from .outputs import write_atomic
from .spec import Spec, canonical_sha256, spec_to_dict, to_toml

SCHEMA_VERSION = 1


def document(spec: Spec, *, data_sha256: str, spec_bytes: bytes | None, rows: list[dict], composite: list[dict],
             selection: list[dict], warnings: list[str], extra: dict | None = None,
             source: dict | None = None) -> dict:
    if spec_bytes is None:
        spec_bytes = to_toml(spec).encode()
    coverage.label_results(rows, spec)
    coverage.label_composites(composite, spec)
    warnings = [*warnings, *coverage.notes(rows), *coverage.notes(composite)]
    doc = {
        "schema_version": SCHEMA_VERSION,
        "tool": {"name": "fulcrum", "version": __version__,
                 "generated_at": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")},
        "inputs": {"spec_sha256": hashlib.sha256(spec_bytes).hexdigest(), "data_sha256": data_sha256,
                   "spec_canonical_sha256": canonical_sha256(spec), "seed": spec.analysis.seed,
                   "interval": spec.analysis.interval, "level": spec.analysis.level,
                   "margin": spec.analysis.margin, **({"source": source} if source else {})},
        "arms": list(spec.cohort.arms),
        "spec": spec_to_dict(spec),
        "results": rows,
        "composite": composite,
        "selection": selection,
        "warnings": list(dict.fromkeys(warnings)),
        "cautions": list(CAUTIONS),
    }
    if extra:
        doc.update(extra)
    return doc


def dumps(doc: dict) -> str:
    return json.dumps(doc, indent=1, ensure_ascii=False, allow_nan=False)


def schema() -> dict:
    return json.loads(resources.files("explorer.schema").joinpath("results.schema.json").read_text())


def validate(doc: dict) -> None:
    """Raise jsonschema.ValidationError when the document does not follow the schema."""
    import jsonschema  # optional: installed with the test extra only, so imported when asked for

    jsonschema.validate(doc, schema())


def write(doc: dict, path: str | Path) -> None:
    """Write the document whole (a temporary file renamed into place: never a half-written file)."""
    write_atomic(path, dumps(doc) + "\n")

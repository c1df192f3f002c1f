"""The coverage study's command line (`fulcrum check-methods`, or `python -m explorer.coverage_study_cli`): runs the
parts of explorer.coverage_study and, with `--parts ... fitted`, the fitted-index part (explorer.coverage_study_fitted),
or merges earlier runs, and writes docs/validation.* (and, with --packaged, explorer/validation_results.json)."""
from __future__ import annotations

import argparse
import datetime as _dt
import json
from pathlib import Path

from . import coverage_study as cs
from .coverage_study_fitted import run as run_fitted
from .progress import ProgressBar


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="fulcrum check-methods", description=cs.__doc__.splitlines()[0])
    p.add_argument("--replicates", type=int, default=500, help="studies per scenario and size")
    p.add_argument("--boot-replicates", type=int, default=None, help="studies with a bootstrap (default: all)")
    p.add_argument("--sizes", type=int, nargs="+", default=[300, 1000, 3000])
    p.add_argument("--boot", type=int, default=200, help="bootstrap resamples per study (0: analytic only)")
    p.add_argument("--workers", type=int, default=-1)
    p.add_argument("--seed", type=int, default=20261201)
    p.add_argument("--scenarios", nargs="*", default=None)
    p.add_argument("--parts", nargs="*", default=["analytic", "bootstrap", "null", "selection"],
                   help="also 'fitted': the scenarios along a fitted index (explorer.coverage_study_fitted)")
    p.add_argument("--out", default="docs")
    p.add_argument("--rows", help="write the raw rows and settings here as well (JSON), to merge runs later")
    p.add_argument("--merge", nargs="+", help="write the outputs from these --rows files instead of running")
    p.add_argument("--notes", help="a Markdown file whose text goes under the header of validation.md")
    p.add_argument("--records", help="append every study's record to this JSON-lines file while running")
    p.add_argument("--from-records", nargs="+", default=[],
                   help="with --merge: coverage rows pooled from these record files (they win over --rows rows)")
    p.add_argument("--packaged", help="also write the coverage rows the tool reads (explorer/validation_results.json)")
    a = p.parse_args(argv)
    notes = Path(a.notes).read_text() if a.notes else ""
    if a.merge:
        runs = [json.loads(Path(f).read_text()) for f in a.merge]
        if a.from_records:
            runs.append({"settings": {"date": _dt.date.today().isoformat(), "records": a.from_records},
                         "rows": cs.rows_from_records(a.from_records)})
        rows, settings = cs.merge_runs(runs)
        cs.write_outputs(rows, Path(a.out), settings, Path(a.packaged) if a.packaged else None, notes)
        print((Path(a.out) / "validation.md").read_text())
        return 0
    rows = cs.run(a.replicates, tuple(a.sizes), a.boot, a.workers, a.seed,
                  tuple(a.scenarios) if a.scenarios else None, a.boot_replicates, tuple(a.parts),
                  progress=ProgressBar("studies"), log=lambda s: print(s, flush=True), records=a.records)
    if "fitted" in a.parts:
        rows += run_fitted(1000, a.boot_replicates or 500, a.boot, seed=a.seed + 1)
        cs.mark_defaults(rows)
    settings = {"date": _dt.date.today().isoformat(), "replicates": a.replicates,
                "bootstrap_studies": a.boot_replicates or a.replicates, "sizes": a.sizes,
                "bootstrap_resamples": a.boot, "seed": a.seed, "level": 0.95, "workers": a.workers}
    if a.rows:
        Path(a.rows).write_text(json.dumps({"settings": settings, "rows": rows}, indent=1) + "\n")
    cs.write_outputs(rows, Path(a.out), settings, Path(a.packaged) if a.packaged else None, notes)
    print((Path(a.out) / "validation.md").read_text())
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

"""Determinism: the same spec, data and seed give the same results JSON, apart from tool.generated_at, from two
separate CLI processes, from analyse() and the CLI, and with the bootstrap on one or two joblib workers.

The comparison is of the parsed JSON documents (Python's json module), whole. The app's own run is compared
in the app's tests.
"""
from __future__ import annotations

import copy
import dataclasses
import json
import subprocess
import sys
from pathlib import Path

import pytest

from explorer import demo, results
from explorer.analysis import analyse
from explorer.spec import load_spec


@pytest.fixture(scope="module")
def demo_spec_path(tmp_path_factory) -> Path:
    """The invented demo, 400 patients: every part of the analysis (prognostic index, values, selection, pairwise)."""
    return demo.write_demo(tmp_path_factory.mktemp("determinism"), n=400, seed=11)


def without_clock(doc: dict) -> dict:
    doc = copy.deepcopy(doc)
    assert doc["tool"].pop("generated_at")
    return doc


def cli_document(spec_path: Path, out: Path) -> dict:
    run = subprocess.run([sys.executable, "-m", "explorer.cli", "analyse", str(spec_path), "--json", str(out),
                          "--quiet"], capture_output=True, text=True, timeout=600)
    assert run.returncode == 0, run.stderr
    return json.loads(out.read_text(encoding="utf-8"))


@pytest.mark.slow  # two fresh CLI processes analyse the demo: about 30 s of CPU (measured 2026-12-02)
def test_two_cli_processes_and_analyse_give_the_same_document(demo_spec_path, tmp_path) -> None:
    first = cli_document(demo_spec_path, tmp_path / "one.json")
    second = cli_document(demo_spec_path, tmp_path / "two.json")
    assert first["results"] and first["composite"] and first["selection"] and first["pairwise"]
    assert without_clock(second) == without_clock(first)
    spec = load_spec(demo_spec_path)
    in_process = json.loads(results.dumps(analyse(spec, spec_bytes=demo_spec_path.read_bytes()).document))
    assert without_clock(in_process) == without_clock(first)


def _bootstrap(spec_path: Path, workers: int, seed: int = 1) -> dict:
    """The demo along the Clinical Frailty Scale with a 20-replicate bootstrap on `workers` joblib workers
    (pairwise left out: it runs serially; maps left out: they need two indices); the document as JSON gives it."""
    spec = load_spec(spec_path)
    analysis = dataclasses.replace(spec.analysis, interval="bootstrap", replicates=20, workers=workers, seed=seed)
    spec = dataclasses.replace(spec, indices=(spec.index("cfs"),), maps=(), pairwise=None, analysis=analysis)
    return json.loads(results.dumps(analyse(spec).document))


@pytest.fixture(scope="module")
def one_worker(demo_spec_path) -> dict:
    return _bootstrap(demo_spec_path, workers=1)


def test_bootstrap_is_the_same_on_one_or_two_joblib_workers(demo_spec_path, one_worker) -> None:
    one, two = copy.deepcopy(one_worker), _bootstrap(demo_spec_path, workers=2)
    assert {b["interval"] for r in one["results"] for b in r["break_even"]} == {"bootstrap-percentile"}
    assert one["composite"] and one["selection"]
    # the worker count is part of the spec, so the spec, its hashes and the clock are all that may differ
    assert (one["spec"]["analysis"]["workers"], two["spec"]["analysis"]["workers"]) == (1, 2)
    for doc in (one, two):
        del doc["tool"]["generated_at"], doc["spec"]["analysis"]["workers"]
        del doc["inputs"]["spec_sha256"], doc["inputs"]["spec_canonical_sha256"]
    assert two == one


def test_another_seed_gives_other_bootstrap_intervals(demo_spec_path, one_worker) -> None:
    """A control for the test above: the documents compared there do depend on the replicates drawn."""
    other = _bootstrap(demo_spec_path, workers=1, seed=2)
    assert [[b["ci"] for b in r["break_even"]] for r in one_worker["results"]] != \
        [[b["ci"] for b in r["break_even"]] for r in other["results"]]
    assert [[b["x"] for b in r["break_even"]] for r in one_worker["results"]] == \
        [[b["x"] for b in r["break_even"]] for r in other["results"]]

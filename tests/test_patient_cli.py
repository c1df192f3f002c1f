"""`fulcrum patient` (issue 16, items 7 to 9): the app's patient numbers on the command line, one declared
source for death, disagreeing indices said, and check warnings reaching every output."""
from __future__ import annotations

import dataclasses
import json
from importlib import resources

import jsonschema
import numpy as np
import pytest
from scipy.special import expit
from spec_texts import binary, spec_text

from explorer import CAUTIONS, cli
from explorer import analysis as an
from explorer import trust as ck
from explorer import fitting as ft
from explorer.patient import place_patient


@pytest.fixture(scope="module")
def demo_small(tmp_path_factory):
    from explorer import demo
    from explorer.spec import load_spec

    spec = load_spec(demo.write_demo(tmp_path_factory.mktemp("pt"), n=600))
    return dataclasses.replace(spec, indices=tuple(ix for ix in spec.indices if ix.name in ("cfs", "age")),
                               pairwise=None, maps=())


def test_patient_command_prints_and_writes_the_app_numbers(demo_small, tmp_path, capsys, monkeypatch):
    monkeypatch.setattr("explorer.cli.load_spec", lambda path: demo_small)
    out = tmp_path / "patient.json"
    assert cli.main(["patient", "ignored.toml", "--at", "cfs=6", "--at", "age=82", "--json", str(out)]) == 0
    doc = json.loads(out.read_text())
    schema = json.loads(resources.files("explorer.schema").joinpath("patient.schema.json").read_text())
    jsonschema.validate(doc, schema)
    # the engine function the patient page calls, on the same fits
    view = place_patient(ft.fit_all(demo_small), {"cfs": 6, "age": 82})
    assert doc["cautions"] == list(CAUTIONS)
    assert len(doc["predictions"]) == len(view.predictions)
    for got, want in zip(doc["predictions"], view.predictions):  # the JSON keeps 10 significant digits
        assert (got["outcome"], got["index"]) == (want.outcome, want.index)
        for arm, e in want.arms.items():
            assert got["arms"][arm]["estimate"] == pytest.approx(e.estimate, rel=1e-9)
            assert got["arms"][arm]["lower"] == pytest.approx(e.lower, rel=1e-9)
            assert got["arms"][arm]["per_100"] == e.per_100
        assert got["clear"] == want.clear and got["favours"] == want.favours
        assert got["population"] == doc["population"]["population"] and all(got["models"].values())
    printed = capsys.readouterr().out
    assert "Caution:" in printed and "rests on" in printed and "model, " in printed


def test_a_patient_value_outside_the_index_bounds_is_refused(demo_small, capsys, monkeypatch):
    monkeypatch.setattr("explorer.cli.load_spec", lambda path: demo_small)
    assert cli.main(["patient", "ignored.toml", "--at", "cfs=99"]) == 2
    err = capsys.readouterr().err
    assert "outside the index's bounds 1 to 9" in err and "bounds" in err


def test_two_death_figures_are_explained_and_disagreeing_indices_are_shown(demo_small):
    view = place_patient(ft.fit_all(demo_small), {"cfs": 6, "age": 82})
    deaths = [s for s in view.limits if s.startswith("Two models give deaths by")]
    assert deaths and all("Use the first for death" in s and "it can differ" in s for s in deaths)
    by_outcome = {}
    for p in view.predictions:
        by_outcome.setdefault(p.outcome, set()).add((p.clear, p.favours if p.clear else None))
    differ = [o for o, said in by_outcome.items() if len(said) > 1]
    titles = {o.name: o.title for o in demo_small.outcomes}
    for o in differ:
        assert any(f"The indices disagree for this patient on {titles[o]}" in s for s in view.limits)
    assert all(any(titles[o] in s for s in view.limits) for o in differ)


def test_a_calibration_misfit_reaches_check_warnings_and_cli_lines(write_case):
    # Simulation with a known truth: P(y = 1) is U-shaped in x (closed form), so a fit linear in x misfits.
    rng = np.random.default_rng(4)
    n = 1600
    import pandas as pd

    x = rng.uniform(-3, 3, n)
    arm = np.where(rng.random(n) < 0.5, "a", "b")
    y = (rng.random(n) < expit(-1.5 + 0.9 * x ** 2)).astype(int)
    spec = write_case(pd.DataFrame({"arm": arm, "x": x, "y": y}), spec_text(["a", "b"], outcomes=[binary("y")], indices=["x"]))
    res = an.analyse(spec)
    check = res.document["checks"][0]
    misfit = [w for w in check["warnings"] if "misses the observed band values" in w]
    assert len(misfit) == 2  # both arms
    p = [c["p_value"] for c in check["calibration"]]
    assert max(p) < 0.05
    lines = cli.warning_lines(res.document)
    assert sum("misses the observed band values" in line and line.startswith("check: ") for line in lines) == 2
    assert ck.misfit_words(spec.outcomes[0], "a", "x", {"p_value": 0.5}, 0.95) == []

"""The command line: demo -> validate -> analyse, exit codes, messages and the results document."""
from __future__ import annotations

import hashlib
import json
import subprocess
import sys

import pytest

from explorer import CAUTIONS, results
from explorer.breakeven import contains
from explorer.cli import main


@pytest.fixture(scope="module")
def analysed(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    assert main(["demo", str(folder / "demo")]) == 0
    spec = folder / "demo" / "demo.toml"
    out = folder / "results.json"
    assert main(["analyse", str(spec), "--json", str(out), "--quiet"]) == 0
    return spec, json.loads(out.read_text())


def test_results_document_follows_the_schema_and_hashes_the_inputs(analysed):
    spec, doc = analysed
    results.validate(doc)  # JSON Schema in explorer/schema/results.schema.json (jsonschema library)
    cohort = spec.parent / "demo_cohort.csv"
    assert doc["inputs"]["data_sha256"] == hashlib.sha256(cohort.read_bytes()).hexdigest()
    assert doc["inputs"]["spec_sha256"] == hashlib.sha256(spec.read_bytes()).hexdigest()
    assert doc["cautions"] == list(CAUTIONS)
    assert doc["arms"] == ["laparotomy", "non-operative"]
    n_out, n_ix = len(doc["spec"]["outcomes"]), len(doc["spec"]["indices"])
    assert len(doc["results"]) == n_out * n_ix
    assert doc["composite"] and doc["selection"]
    # every break-even point says which arm does better on each side, and lies inside its own interval
    for row in doc["results"] + doc["composite"]:
        for b in row["break_even"]:
            assert {b["favours_below"], b["favours_above"]} <= set(doc["arms"])
            lo, hi = b["ci"]
            if b["interval_shape"] == "finite":
                assert lo <= b["x"] <= hi


def test_demo_survival_break_even_brackets_the_truth_in_randomised_patients(analysed):
    # truth from the generator's closed form (demo_data/truth.json); randomised patients carry no selection
    spec, doc = analysed
    truth = json.loads((spec.parent / "truth.json").read_text())["break_even"]["survival_365"]
    rows = [r for r in doc["selection"] if r["outcome"] == "alive" and r["index"] == "cfs"]
    (be,) = rows[0]["randomised_break_even"]
    # with 318 randomised patients the Fieller set may be two rays; any shape must hold the truth
    assert contains(be["ci"], be["interval_shape"], truth), be


def test_summary_table_printed_with_cautions(tmp_path, capsys):
    main(["demo", str(tmp_path / "d"), "--n", "800"])
    capsys.readouterr()
    assert main(["analyse", str(tmp_path / "d" / "demo.toml")]) == 0
    out = capsys.readouterr().out
    assert "break-even [interval]" in out and "favoured below / above" in out
    assert "alive" in out and "Clinical Frailty Scale" not in out.splitlines()[0]
    assert "not a medical device" in out


def test_validate_prints_counts_and_passes(tmp_path, capsys):
    main(["demo", str(tmp_path / "d")])
    capsys.readouterr()
    assert main(["validate", str(tmp_path / "d" / "demo.toml")]) == 0
    out = capsys.readouterr().out
    assert "2400 patients" in out and "laparotomy" in out and "passed every check" in out


def test_bad_input_exits_2_with_one_message_and_no_traceback(tmp_path):
    spec = tmp_path / "s.toml"
    spec.write_text('[cohort]\npath = "missing.csv"\narm = "a"\narms = ["x", "y"]\n\n[[outcomes]]\nname = "o"\n'
                    'kind = "binary"\ncolumn = "o"\n\n[[indices]]\nname = "i"\ncolumn = "i"\n')
    run = subprocess.run([sys.executable, "-m", "explorer.cli", "validate", str(spec)], capture_output=True, text=True)
    assert run.returncode == 2
    assert "Traceback" not in run.stderr
    assert "missing.csv" in run.stderr and "What to do" in run.stderr
    debug = subprocess.run([sys.executable, "-m", "explorer.cli", "--debug", "validate", str(spec)],
                           capture_output=True, text=True)
    assert debug.returncode != 0 and "Traceback" in debug.stderr


def test_unknown_spec_key_is_refused_with_a_suggestion(tmp_path, capsys):
    main(["demo", str(tmp_path / "d"), "--n", "800"])
    spec = tmp_path / "d" / "demo.toml"
    spec.write_text(spec.read_text().replace("seed = 1", "sead = 1"))
    capsys.readouterr()
    assert main(["analyse", str(spec)]) == 2
    err = capsys.readouterr().err
    assert "unknown key 'sead'" in err and "Did you mean 'seed'" in err


def test_app_becomes_streamlit_with_the_projects_settings_and_two_malloc_arenas(monkeypatch):
    """`fulcrum app` replaces itself with Streamlit (stopping it stops the server); the environment turns off
    Streamlit's usage statistics and caps glibc's per-thread memory arenas (common practice for threaded Python
    servers, whose memory otherwise creeps up with every session) unless the user set the cap."""
    import os

    seen = {}

    def fake_execve(path, argv, env):
        seen.update(path=path, argv=argv, env=env)
        raise SystemExit(0)

    monkeypatch.setattr(os, "execve", fake_execve)
    monkeypatch.delenv("MALLOC_ARENA_MAX", raising=False)
    with pytest.raises(SystemExit):
        main(["app", "--port", "8599"])
    # `streamlit run` on the packaged app script, from a launcher that imports the engine while the server starts
    assert seen["argv"][1] == "-c" and "runpy.run_module('streamlit'" in seen["argv"][2]
    assert seen["argv"][3].endswith("app.py") and "--server.port=8599" in seen["argv"]
    assert seen["env"]["MALLOC_ARENA_MAX"] == "2" and seen["env"]["STREAMLIT_BROWSER_GATHER_USAGE_STATS"] == "false"
    monkeypatch.setenv("MALLOC_ARENA_MAX", "4")
    with pytest.raises(SystemExit):
        main(["app"])
    assert seen["env"]["MALLOC_ARENA_MAX"] == "4"


def test_app_upload_limit_is_the_users_within_its_bounds(monkeypatch, capsys):
    """`fulcrum app --max-upload-mb` reaches Streamlit; a limit outside 1-4096 MB is refused before anything starts."""
    import os

    seen = {}

    def fake_execve(path, argv, env):
        seen.update(argv=argv)
        raise SystemExit(0)

    monkeypatch.setattr(os, "execve", fake_execve)
    with pytest.raises(SystemExit):
        main(["app", "--max-upload-mb", "500"])
    assert seen["argv"][-1] == "--server.maxUploadSize=500"
    seen.clear()
    for bad in ("0", "-5", "100000"):
        assert main(["app", "--max-upload-mb", bad]) == 2
        err = capsys.readouterr().err
        assert f"--max-upload-mb is {bad}" in err and "Traceback" not in err and "Parquet" in err
    assert not seen  # no server was started

"""The spec parser: keys, types, suggestions, paths, and the TOML round trip."""
from __future__ import annotations

import pytest

from explorer.errors import FulcrumError
from explorer.spec import canonical_sha256, load_spec, parse_spec_text, to_toml

BASE = """
[cohort]
path = "data/cohort.csv"
arm = "group"
arms = ["op", "no-op"]
allocation = "allocation"

[[outcomes]]
name = "alive"
kind = "survival"
time = "t"
event = "dead"
horizon = 365

[[outcomes]]
name = "function"
kind = "ordinal"
column = "f"
levels = ["well", "help", "bed", "dead"]

[[indices]]
name = "cfs"
column = "cfs"

[values]
outcome = "function"
weights = { well = 1.0, help = 0.7 }
"""


def parse(text: str, tmp_path=None):
    return parse_spec_text(text, base_dir=tmp_path or ".", source="spec.toml")


def test_defaults_and_types(tmp_path):
    spec = parse(BASE, tmp_path)
    assert spec.cohort.arms == ("op", "no-op")
    assert spec.cohort.path == tmp_path / "data" / "cohort.csv"
    assert spec.cohort.randomised == "randomised"
    alive = spec.outcome("alive")
    assert alive.measure == "survival" and alive.model == "cox" and alive.horizon == 365.0
    fn = spec.outcome("function")
    assert fn.favourable == ("well", "help", "bed")  # default: all but the last level
    assert spec.values.weights == {"well": 1.0, "help": 0.7, "bed": pytest.approx(1 / 3, abs=1e-6),
                                   "dead": 0.0}
    assert spec.analysis.interval == "analytic" and spec.analysis.level == 0.95


def test_paths_resolve_relative_to_spec_file(tmp_path):
    (tmp_path / "sub").mkdir()
    f = tmp_path / "sub" / "a.toml"
    f.write_text(BASE)
    spec = load_spec(f)
    assert spec.cohort.path == tmp_path / "sub" / "data" / "cohort.csv"


@pytest.mark.parametrize("bad,key,words", [
    (BASE.replace('arm = "group"', 'arm = "group"\narmz = 1'), "cohort.armz", "Did you mean 'arm'"),
    (BASE.replace("horizon = 365", "horizon = 365\nhorizn = 2"), "horizn", "Did you mean 'horizon'"),
    (BASE + "\n[analysys]\nseed = 2\n", "analysys", "Did you mean 'analysis'"),
    (BASE.replace("horizon = 365", 'horizon = "a year"'), "horizon", "should be a finite number"),
    (BASE.replace('arms = ["op", "no-op"]', 'arms = ["op"]'), "cohort.arms", "exactly two different labels"),
    (BASE.replace('kind = "ordinal"', 'kind = "ordnal"'), "kind", "Did you mean 'ordinal'"),
    (BASE.replace("help = 0.7", "hlep = 0.7"), "values.weights.hlep", "Did you mean 'help'"),
    (BASE.replace("help = 0.7", "help = 1.7"), "values.weights.help", "outside -1 to 1"),
    (BASE.replace('time = "t"\n', ""), "time", "needs 'time'"),
    (BASE + '\n[analysis]\ninterval = "bootstrp"\n', "analysis.interval", "Did you mean 'bootstrap'"),
    (BASE.replace('outcome = "function"', 'outcome = "alive"'), "values.outcome", "must be an ordinal outcome"),
    (BASE + '\n[[maps]]\nindices = ["cfs", "age"]\ntarget = "alive"\n', "maps[1].indices", "'age'"),
    (BASE.replace('column = "cfs"', 'column = "cfs"\nformula = "cfs*2"'), "indices", "exactly one of"),
    ("[cohort\n", None, "not valid TOML"),
    (BASE.replace('arm = "group"', 'arm = "group"\nlabels = { cfs = 7 }'), "cohort.labels.cfs", "should be a text"),
    (BASE.replace('arm = "group"', 'arm = "group"\nlabels = ["cfs"]'), "cohort.labels", "a table of texts"),
])
def test_errors_name_the_key_and_what_to_do(bad, key, words):
    with pytest.raises(FulcrumError) as e:
        parse(bad)
    msg = str(e.value)
    assert words in msg
    assert "spec.toml" in msg
    if key:
        assert key in (e.value.key or "")


def test_toml_round_trip_and_canonical_hash(tmp_path):
    spec = parse(BASE, tmp_path)
    text = to_toml(spec, relative_to=tmp_path)
    again = parse(text, tmp_path)
    assert again == spec
    assert canonical_sha256(again) == canonical_sha256(spec)
    # the same analysis typed differently (key order, spacing, explicit defaults) hashes the same
    reordered = BASE.replace('arm = "group"\narms = ["op", "no-op"]', 'arms = [ "op" , "no-op" ]\narm = "group"')
    reordered += "\n[analysis]\nmargin = 0.0\nlevel = 0.95\n"
    assert canonical_sha256(parse(reordered, tmp_path)) == canonical_sha256(spec)
    # column labels are written back as the table they were read as
    labelled = parse(BASE.replace('arm = "group"', 'arm = "group"\nlabels = { cfs = "Frailty (CFS)" }'), tmp_path)
    assert labelled.column_title("cfs") == "Frailty (CFS)" and labelled.column_title("t") == "t"
    assert parse(to_toml(labelled, relative_to=tmp_path), tmp_path) == labelled


def test_missing_spec_file_message(tmp_path):
    with pytest.raises(FulcrumError, match="does not exist.*fulcrum demo"):
        load_spec(tmp_path / "nope.toml")


def test_a_preset_without_weights_gives_the_preset(tmp_path):
    # 'survival only': every living level 1, death 0 (explorer.values presets)
    spec = parse(BASE.replace("weights = { well = 1.0, help = 0.7 }", 'preset = "survival_only"'), tmp_path)
    assert spec.values.weights == {"well": 1.0, "help": 1.0, "bed": 1.0, "dead": 0.0}
    assert spec.values.preset == "survival_only"
    with pytest.raises(FulcrumError, match="no preset called 'nope'") as e:
        parse(BASE.replace("weights = { well = 1.0, help = 0.7 }", 'preset = "nope"'), tmp_path)
    assert e.value.key == "values.preset"

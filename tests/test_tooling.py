"""The project's own tools: ruff finds nothing, and mypy finds no more type errors in explorer/ than the
recorded baseline (tests/mypy_baseline.txt). Both are configured in pyproject.toml and installed by the test
extra; each runs from the interpreter running the tests, so the checks use the versions the project pins."""
from __future__ import annotations

import re
import subprocess
import sys
from collections import Counter
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
BASELINE = ROOT / "tests" / "mypy_baseline.txt"
LINTED = ["explorer", "pages", "tests", "benchmarks", "dev.py"]


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", *args], cwd=ROOT, capture_output=True, text=True)


def test_ruff_finds_nothing() -> None:
    out = _run("ruff", "check", "--no-cache", "--output-format", "concise", *LINTED)
    assert out.returncode == 0, f"ruff check {' '.join(LINTED)} found:\n{out.stdout}{out.stderr}"


def test_ruff_would_report_a_planted_finding(tmp_path) -> None:
    """The lint run above can fail: the same configuration flags an unused import and a bare comparison."""
    bad = tmp_path / "planted.py"
    bad.write_text("import os\n\n\ndef f(x):\n    return None == x\n")
    out = _run("ruff", "check", "--no-cache", "--config", str(ROOT / "pyproject.toml"), "--output-format", "concise",
               str(bad))
    assert out.returncode == 1
    assert "F401" in out.stdout and "E711" in out.stdout


def read_baseline(text: str) -> tuple[int, dict[str, int]]:
    """(total, per-module counts) from the baseline file: 'total N' then 'path N' lines; '#' starts a comment."""
    total, per_module = None, {}
    for line in text.splitlines():
        line = line.split("#", 1)[0].strip()
        if not line:
            continue
        name, count = line.rsplit(None, 1)
        if name == "total":
            total = int(count)
        else:
            per_module[name] = int(count)
    assert total is not None, f"{BASELINE} has no 'total N' line"
    return total, per_module


def mypy_errors(output: str) -> Counter:
    """Errors per module in mypy's output (notes are not errors)."""
    return Counter(m.group(1) for m in re.finditer(r"^([\w/.]+\.py):\d+: error:", output, re.MULTILINE))


@pytest.mark.slow
def test_mypy_no_worse_than_the_baseline() -> None:
    total, per_module = read_baseline(BASELINE.read_text())
    out = _run("mypy")  # files and settings from [tool.mypy]; the cache in .mypy_cache makes later runs quick
    assert out.returncode in (0, 1), f"mypy itself failed:\n{out.stdout}{out.stderr}"
    found = mypy_errors(out.stdout)
    now = sum(found.values())
    assert re.search(r"^(Success|Found \d+ error)", out.stdout, re.MULTILINE), out.stdout[-2000:]
    worse = {m: (per_module.get(m, 0), n) for m, n in found.items() if n > per_module.get(m, 0)}
    assert now <= total, (f"mypy finds {now} errors in explorer/, more than the {total} recorded in {BASELINE.name}; "
                          f"modules with more than before (before, now): {worse}\n{out.stdout[-4000:]}")


def test_mypy_error_count_is_read_from_its_output() -> None:
    """The parser the baseline test relies on counts errors per module and skips notes."""
    sample = ("explorer/a.py:3: error: Bad  [arg-type]\nexplorer/a.py:9: note: See here\n"
              "explorer/models/b.py:1: error: Worse  [index]\nexplorer/a.py:5: error: Again  [misc]\n"
              "Found 3 errors in 2 files (checked 2 source files)\n")
    assert mypy_errors(sample) == Counter({"explorer/a.py": 2, "explorer/models/b.py": 1})
    assert read_baseline("# c\ntotal 3  # today\nexplorer/a.py 2\n") == (3, {"explorer/a.py": 2})


# the import name of each declared distribution, where the two differ
IMPORT_NAMES = {"scikit-learn": "sklearn", "vl-convert-python": "vl_convert", "pillow": "PIL", "tomli": "tomli",
                "psycopg[binary]": "psycopg", "dask[distributed]": "dask", "pandas-stubs": None}
# imported directly but installed by the declared dependency named beside it
CARRIED = {"markupsafe": "jinja2"}


def _declared() -> tuple[set[str], dict[str, set[str]]]:
    """Import names of the runtime dependencies, and of each optional extra's."""
    import tomllib

    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]

    def names(reqs: list[str]) -> set[str]:
        out = set()
        for r in reqs:
            dist = re.split(r"[<>=!~;\s]", r, maxsplit=1)[0].lower()
            name = IMPORT_NAMES.get(dist, dist.replace("-", "_"))
            if name:
                out.add(name)
        return out

    return names(project["dependencies"]), {k: names(v) for k, v in project["optional-dependencies"].items()}


def _imports(folders: list[str]) -> dict[str, set[str]]:
    """Top-level module -> the files that import it, over every .py file in the folders (AST, so comments and
    strings do not count)."""
    import ast

    found: dict[str, set[str]] = {}
    for folder in folders:
        for path in (ROOT / folder).rglob("*.py"):
            for node in ast.walk(ast.parse(path.read_text(), str(path))):
                if isinstance(node, ast.Import):
                    mods = [a.name for a in node.names]
                elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                    mods = [node.module]
                else:
                    continue
                for m in mods:
                    found.setdefault(m.split(".")[0], set()).add(str(path.relative_to(ROOT)))
    return found


def test_runtime_dependencies_are_declared_and_used() -> None:
    """Every runtime dependency in pyproject.toml is imported by explorer/ or pages/, and everything those import
    is the standard library, the project, or declared (at run time, or in the extra that needs it)."""
    runtime, extras = _declared()
    used = _imports(["explorer", "pages"])
    unused = sorted(runtime - set(used) - {"tomli"})  # tomli: only Python 3.10 imports it
    assert not unused, f"declared in [project] dependencies but imported nowhere in explorer/ or pages/: {unused}"
    own = {"explorer", "pages"} | {p.stem for p in (ROOT / "pages").glob("*.py")}
    known = runtime | set().union(*extras.values()) | set(sys.stdlib_module_names) | own
    missing = {m: sorted(files) for m, files in used.items()
               if m not in known and not (m in CARRIED and CARRIED[m] in runtime)}
    assert not missing, f"imported but not declared in pyproject.toml: {missing}"

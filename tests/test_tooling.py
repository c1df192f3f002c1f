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

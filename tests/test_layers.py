"""The engine keeps its layers (DEVELOPERS.md, "Layers"): import-linter checks the `layers` contract in pyproject.toml
(a module imports only from the layers below it, or its own layer where siblings are joined by ":"), and every
engine module sits in some layer, so a new module cannot slip past the contract unplaced."""
from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import tomllib

ROOT = Path(__file__).resolve().parents[1]
CONFIG = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["importlinter"]


def _layers() -> list[str]:
    (contract,) = [c for c in CONFIG["contracts"] if c["type"] == "layers"]
    return contract["layers"]


def test_the_layers_contract_holds():
    lint = Path(sys.executable).with_name("lint-imports")  # installed with the test extra (import-linter)
    done = subprocess.run([str(lint), "--no-cache"], cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stdout + done.stderr
    assert " 0 broken" in done.stdout, done.stdout


def test_every_engine_module_sits_in_a_layer():
    named = {m.strip("() ") for layer in _layers() for m in re.split(r"[:|]", layer)}
    modules = {p.stem for p in (ROOT / "explorer").glob("*.py") if p.stem != "__init__"}
    packages = {p.parent.name for p in (ROOT / "explorer").glob("*/__init__.py")}
    assert sorted((modules | packages) - named) == []


# The one function-level import of the project's own modules that stays, with its reason: the command line loads
# the report (altair and the Vega converter, about 2 s) only when --html asks for it.
LAZY = {("explorer/cli.py", "report")}


def lazy_own_imports(tree) -> list[str]:
    """The project's own modules imported inside functions (or classes) of one parsed module."""
    import ast

    top = {id(n) for n in tree.body}
    return [(node.module or "").rsplit(".", 1)[-1] for node in ast.walk(tree)
            if isinstance(node, ast.ImportFrom) and (node.level > 0 or (node.module or "").startswith("explorer"))
            and id(node) not in top]


def test_no_function_level_import_hides_a_layer():
    # An import inside a function is how a cycle hides from a reader (import-linter sees it; a person does not);
    # only the listed, commented ones may stay.
    import ast

    found = {(p.relative_to(ROOT).as_posix(), m) for p in (ROOT / "explorer").rglob("*.py")
             for m in lazy_own_imports(ast.parse(p.read_text(encoding="utf-8")))}
    assert found <= LAZY, sorted(found - LAZY)


def test_the_scan_sees_an_import_inside_a_function():
    import ast

    code = "from .words import fmt\nimport numpy\ndef f():\n    from .fitting import fit_all\n    import json\n"
    assert lazy_own_imports(ast.parse(code)) == ["fitting"]

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

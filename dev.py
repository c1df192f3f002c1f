#!/usr/bin/env python3
"""Set-up and run Fulcrum from a fresh clone with nothing but python3.

    python3 dev.py app     # make .venv, install, write the demo cohort, start the app on it
    python3 dev.py test    # make .venv, install with test extras (and Debian's chromium), run every test

Each command creates (or reuses) .venv beside this file; nothing is installed system-wide
except Debian's chromium for the browser tests, installed with apt when it is missing.
"""
from __future__ import annotations

import hashlib
import os
import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent
VENV = ROOT / ".venv"
PY = VENV / "bin" / "python"
STAMP = VENV / ".fulcrum-installed"


def run(cmd: list[str], **kw) -> None:
    print("+", " ".join(str(c) for c in cmd), flush=True)
    subprocess.run(cmd, check=True, **kw)


def ensure_venv(extras: str) -> None:
    if not PY.exists():
        run([sys.executable, "-m", "venv", str(VENV)])
    key = hashlib.sha256((ROOT / "pyproject.toml").read_bytes() + extras.encode()).hexdigest()
    if STAMP.exists() and STAMP.read_text() == key:
        return
    run([str(PY), "-m", "pip", "install", "--quiet", "--upgrade", "pip"])
    target = f".[{extras}]" if extras else "."
    run([str(PY), "-m", "pip", "install", "--quiet", "-e", target], cwd=ROOT)
    STAMP.write_text(key)


def ensure_chromium() -> None:
    """Browser tests drive Debian's chromium; install it with apt when missing (root only)."""
    if shutil.which("chromium") or Path("/usr/bin/chromium").exists():
        return
    if os.geteuid() != 0 or not shutil.which("apt-get"):
        print("chromium is missing and cannot be installed here; browser tests will fail.", flush=True)
        return
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    run(["apt-get", "update", "-q"], env=env)
    run(["apt-get", "install", "-y", "-q", "--no-install-recommends", "chromium", "fonts-dejavu-core"], env=env)


def cmd_app(args: list[str]) -> int:
    ensure_venv("")
    return subprocess.call([str(VENV / "bin" / "fulcrum"), "app", *args], cwd=ROOT)


def cmd_test(args: list[str]) -> int:
    ensure_venv("test,cluster")
    ensure_chromium()
    workers = ["-n", "2"] if not any(a.startswith("-n") for a in args) else []
    code = subprocess.call([str(PY), "-m", "pytest", *workers, *args], cwd=ROOT)
    if code == 5:
        print("pytest collected no tests: that is a failure here.", flush=True)
        return 1
    return code


def main(argv: list[str]) -> int:
    if not argv or argv[0] not in {"app", "test"}:
        print(__doc__)
        return 2
    return {"app": cmd_app, "test": cmd_test}[argv[0]](argv[1:])


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

#!/usr/bin/env python3
"""Set-up and run Fulcrum from a fresh clone with nothing but python3.

    python3 dev.py app     # make .venv, install, write the demo cohort, start the app on it
    python3 dev.py test    # make .venv, install with test extras (and Debian's chromium and postgresql), run every test

Each command creates (or reuses) .venv beside this file; nothing is installed system-wide except
Debian's chromium for the browser tests and Debian's postgresql for the database tests (which start
their own server, as the unprivileged postgres account), installed with apt when missing.
"""
from __future__ import annotations

import glob
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


def ensure_debian(packages: list[str], present: bool, what: str) -> None:
    """Install Debian packages with apt when they are missing (root only); say which tests will fail if not."""
    if present:
        return
    if os.geteuid() != 0 or not shutil.which("apt-get"):
        print(f"{packages[0]} is missing and cannot be installed here; {what} tests will fail.", flush=True)
        return
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    run(["apt-get", "update", "-q"], env=env)
    run(["apt-get", "install", "-y", "-q", "--no-install-recommends", *packages], env=env)


def ensure_chromium() -> None:
    """Browser tests drive Debian's chromium."""
    present = bool(shutil.which("chromium")) or Path("/usr/bin/chromium").exists()
    ensure_debian(["chromium", "fonts-dejavu-core"], present, "browser")


def ensure_postgresql() -> None:
    """Database tests start Debian's PostgreSQL server themselves (initdb in a temporary folder, as the
    postgres account the package creates, when run as root)."""
    present = bool(glob.glob("/usr/lib/postgresql/*/bin/initdb")) or bool(shutil.which("initdb"))
    if os.geteuid() == 0 and present:
        present = subprocess.run(["id", "postgres"], capture_output=True).returncode == 0
    ensure_debian(["postgresql"], present, "database")


def cmd_app(args: list[str]) -> int:
    ensure_venv("")
    return subprocess.call([str(VENV / "bin" / "fulcrum"), "app", *args], cwd=ROOT)


def cmd_test(args: list[str]) -> int:
    ensure_venv("test,cluster")
    ensure_chromium()
    ensure_postgresql()
    # one pytest worker more than cores: the browser tests spend much of their time waiting on pages, and with one
    # worker a core a third of the machine's time was idle
    workers = ["-n", str((os.cpu_count() or 2) + 1)] if not any(a.startswith("-n") for a in args) else []
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

"""`fulcrum app` works from a normal (non-editable) install: pages and settings travel as package data."""
from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def installed(tmp_path_factory) -> Path:
    """Build the wheel and install it (without dependencies, which the test venv has) into a folder."""
    wheels = tmp_path_factory.mktemp("wheels")
    target = tmp_path_factory.mktemp("site")
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(wheels), str(ROOT)],
                   check=True, capture_output=True)
    (wheel,) = wheels.glob("fulcrum_explorer-*.whl")
    subprocess.run([sys.executable, "-m", "pip", "install", "--no-deps", "-q", "--target", str(target), str(wheel)],
                   check=True, capture_output=True)
    return target


def test_wheel_carries_pages_settings_schema_and_report(installed):
    pkg = installed / "explorer"
    assert (pkg / "app_pages" / "app.py").exists()
    assert (pkg / "app_settings" / "config.toml").exists()
    assert (pkg / "schema" / "results.schema.json").exists()
    assert list((pkg / "report").glob("*.html"))
    assert not (installed / "pages").exists()  # pages live inside the package, not as a stray top-level folder


def test_app_starts_from_the_installed_wheel_in_another_folder(installed, tmp_path):
    port = _free_port()
    env = dict(os.environ, PYTHONPATH=str(installed))
    probe = subprocess.run([sys.executable, "-c", "import explorer; print(explorer.__file__)"], env=env, cwd=tmp_path,
                           capture_output=True, text=True, check=True)
    assert probe.stdout.strip().startswith(str(installed))
    log = tmp_path / "app.log"
    proc = subprocess.Popen([sys.executable, "-m", "explorer.cli", "app", "--port", str(port)], env=env, cwd=tmp_path,
                            stdout=log.open("w"), stderr=subprocess.STDOUT, text=True, start_new_session=True)
    try:
        deadline = time.monotonic() + 90
        ok = False
        while time.monotonic() < deadline and proc.poll() is None:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/_stcore/health", timeout=2) as r:
                    ok = r.read().decode().strip() == "ok"
                    break
            except OSError:
                time.sleep(0.5)
        assert ok, log.read_text()
        # the project's settings hold from a folder without .streamlit/: bound to loopback, usage stats off
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/", timeout=5) as r:
            assert r.status == 200
    finally:
        os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    out = log.read_text()
    assert "Traceback" not in out
    assert "0.0.0.0" not in out  # default address is 127.0.0.1 (explorer/app_settings/config.toml)


def test_settings_become_flags_with_defaults_and_overrides():
    from explorer.cli import streamlit_flags

    flags = streamlit_flags(None, None)
    assert "--browser.gatherUsageStats=false" in flags
    assert "--server.address=127.0.0.1" in flags
    assert "--server.enableXsrfProtection=true" in flags
    assert any(f.startswith("--server.maxUploadSize=") for f in flags)
    # closed tabs' cohorts leave memory after 30 s (Streamlit's own default keeps them 120 s); no file watching
    assert "--server.disconnectedSessionTTL=30" in flags and "--server.fileWatcherType=none" in flags
    over = streamlit_flags("0.0.0.0", 8600)
    assert over[-2:] == ["--server.address=0.0.0.0", "--server.port=8600"]
    # `fulcrum app --max-upload-mb` comes after the project's default, so Streamlit takes the user's value
    bigger = streamlit_flags(None, None, 500)
    assert bigger[-1] == "--server.maxUploadSize=500" and "--server.maxUploadSize=200" in bigger

"""A live app server and Debian's Chromium for the browser tests (never a downloaded browser build)."""
from __future__ import annotations

import contextlib
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from collections.abc import Iterator
from pathlib import Path

CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync"]
VIEWPORT = {"width": 1400, "height": 900}
IDLE = """() => { const app = document.querySelector('[data-testid="stApp"]');
                  return app && app.getAttribute('data-test-script-state') === 'notRunning'
                         && !document.querySelector('[data-testid="stSpinner"], [data-testid="stSkeleton"]'); }"""


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@contextlib.contextmanager
def app_server(workdir: Path, timeout: float = 90.0) -> Iterator[str]:
    """`fulcrum app --port N` from an unrelated folder; yields the base URL once /_stcore/health answers."""
    port = free_port()
    log = open(workdir / "server.log", "wb")  # noqa: SIM115 (closed in the finally below, after the server stops)
    proc = subprocess.Popen([sys.executable, "-m", "explorer.cli", "app", "--port", str(port)], cwd=workdir,
                            stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + timeout
        while True:
            if proc.poll() is not None:
                raise RuntimeError(f"the app server stopped: {(workdir / 'server.log').read_text()[-2000:]}")
            with contextlib.suppress(OSError):
                with urllib.request.urlopen(f"{url}/_stcore/health", timeout=2) as r:
                    if r.read().strip() == b"ok":
                        break
            if time.monotonic() > deadline:
                raise TimeoutError("the app server did not answer its health check")
            time.sleep(0.3)
        yield url
    finally:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
        log.close()


def settle(page, timeout: float = 180.0) -> None:
    """Wait until Streamlit has finished running the script: nothing busy and the page unchanged for a second."""
    deadline = time.monotonic() + timeout
    last = None
    while time.monotonic() < deadline:
        page.wait_for_function(IDLE, timeout=timeout * 1000)
        now = (main_text(page), page.locator('[data-testid="stVegaLiteChart"]').count())
        if now == last:
            return
        last = now
        page.wait_for_timeout(1000)
    raise TimeoutError("the app did not settle")


def screenshot(page, path: Path) -> None:
    """The whole page (Streamlit scrolls inside its main block, so the window is made as tall as the content)."""
    height = page.evaluate("""() => { const m = document.querySelector('[data-testid="stMain"]');
                                       return m ? m.scrollHeight : document.body.scrollHeight; }""")
    page.set_viewport_size({"width": VIEWPORT["width"], "height": int(min(max(VIEWPORT["height"], height), 7000))})
    page.wait_for_timeout(700)
    path.parent.mkdir(parents=True, exist_ok=True)
    page.screenshot(path=str(path))
    page.set_viewport_size(VIEWPORT)


def main_text(page) -> str:
    return page.locator('[data-testid="stMain"]').inner_text()

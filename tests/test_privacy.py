"""Privacy: nothing leaves the machine, and patient identifiers stay in the cohort file.

The whole suite runs under pytest-socket (pyproject addopts: --disable-socket --allow-unix-socket
--allow-hosts=127.0.0.1,localhost,::1), so any outbound connection fails a test. Here: that the guard is on,
that analyses, bootstraps on joblib workers and the report run with no network sockets at all, that no
identifier reaches logs (every logger at DEBUG), terminal output, the results JSON, the report or a patient
summary made without asking for identifiers, and that the offline report asks the browser for nothing
beyond the file itself (Debian's Chromium, every request recorded by Playwright).
"""
from __future__ import annotations

import contextlib
import dataclasses
import io
import json
import logging
import re
import socket
from pathlib import Path

import pandas as pd
import pytest
from pytest_socket import SocketBlockedError, SocketConnectBlockedError

from explorer import CAUTIONS, demo, results
from explorer.analysis import analyse
from explorer.cli import main
from explorer.cohort import load_cohort
from explorer.patient import place_patient
from explorer.patient_summary import summary_html
from explorer.spec import load_spec

ID = re.compile(r"ZQ\d{5}X")


def leaked(text: str) -> list[str]:
    return ID.findall(text)


@pytest.fixture(scope="module")
def cohort_with_ids(tmp_path_factory) -> Path:
    """The invented demo (400 patients) whose identifiers have a shape no other text has: ZQ00000X..."""
    folder = tmp_path_factory.mktemp("private")
    spec_path = demo.write_demo(folder, n=400, seed=11)
    frame = pd.read_csv(folder / "demo_cohort.csv", dtype=str, keep_default_na=False)
    frame["pid"] = [f"ZQ{k:05d}X" for k in range(len(frame))]
    frame.to_csv(folder / "demo_cohort.csv", index=False)
    return spec_path


@pytest.fixture(scope="module")
def result(cohort_with_ids):
    return analyse(load_spec(cohort_with_ids))


def test_the_identifiers_are_really_in_the_data(cohort_with_ids) -> None:
    """Controls for the checks below: the cohort carries the identifiers, and the search finds one."""
    cohort = load_cohort(load_spec(cohort_with_ids))
    assert leaked(" ".join(cohort.frame["pid"])) == [f"ZQ{k:05d}X" for k in range(400)]
    assert leaked(json.dumps({"row": "ZQ00003X"})) == ["ZQ00003X"]


def test_outbound_connections_are_refused_in_the_suite(pytestconfig) -> None:
    assert pytestconfig.getoption("--disable-socket") and pytestconfig.getoption("--allow-unix-socket")
    assert set(pytestconfig.getoption("--allow-hosts").split(",")) == {"127.0.0.1", "localhost", "::1"}
    with pytest.raises(SocketConnectBlockedError):
        socket.create_connection(("192.0.2.1", 9), timeout=1)  # TEST-NET-1, RFC 5737: documentation only
    with socket.socket() as server:  # loopback stays open, for the app server the browser tests start
        server.bind(("127.0.0.1", 0))
        server.listen(1)
        with socket.create_connection(server.getsockname(), timeout=5):
            pass


def test_analysis_and_bootstrap_on_joblib_workers_need_no_network(socket_disabled, cohort_with_ids) -> None:
    with pytest.raises(SocketBlockedError):
        socket.socket(socket.AF_INET, socket.SOCK_STREAM)  # no network socket can even be made here
    spec = load_spec(cohort_with_ids)
    spec = dataclasses.replace(spec, pairwise=None, selection=None, analysis=dataclasses.replace(
        spec.analysis, interval="bootstrap", replicates=20, workers=2))
    res = analyse(spec)
    assert res.document["results"] and res.document["inputs"]["interval"] == "bootstrap"
    assert res.document["composite"] and all(len(r["curve"]) > 0 for r in res.document["results"])


@pytest.fixture(scope="module")
def cli_run(cohort_with_ids, tmp_path_factory) -> dict[str, str]:
    """`fulcrum validate` and `fulcrum analyse --json --html` with every logger recorded at DEBUG."""
    folder = tmp_path_factory.mktemp("cli")
    records = io.StringIO()
    handler = logging.StreamHandler(records)
    handler.setLevel(logging.DEBUG)
    root = logging.getLogger()
    level = root.level
    root.addHandler(handler)
    root.setLevel(logging.DEBUG)
    out, err = io.StringIO(), io.StringIO()
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            assert main(["validate", str(cohort_with_ids)]) == 0
            assert main(["analyse", str(cohort_with_ids), "--json", str(folder / "results.json"),
                         "--html", str(folder / "report.html")]) == 0
    finally:
        root.removeHandler(handler)
        root.setLevel(level)
    return {"stdout": out.getvalue(), "stderr": err.getvalue(), "logs": records.getvalue(),
            "results JSON": (folder / "results.json").read_text(encoding="utf-8"),
            "report": (folder / "report.html").read_text(encoding="utf-8"), "report path": str(folder / "report.html")}


@pytest.mark.slow  # over 10 s on two cores
def test_no_identifier_in_logs_output_results_or_report(cli_run) -> None:
    assert "passed every check" in cli_run["stdout"] and "break-even" in cli_run["stdout"]
    for where in ("stdout", "stderr", "logs", "results JSON", "report"):
        assert not leaked(cli_run[where]), where
    assert json.loads(cli_run["results JSON"])["spec"]["cohort"]["id"] == "pid"  # the column name, not its values


def test_no_identifier_in_the_results_document_or_logs_in_process(cohort_with_ids, caplog) -> None:
    caplog.set_level(logging.DEBUG)
    res = analyse(load_spec(cohort_with_ids))
    assert not leaked(results.dumps(res.document))
    assert not leaked(caplog.text)


def test_patient_views_carry_no_identifiers_unless_asked(result) -> None:
    for row in (0, 17, 399):
        pid = f"ZQ{row:05d}X"
        view = place_patient(result.fitset, row=row)
        assert not leaked(json.dumps(view.to_json(), default=str))
        assert not leaked(summary_html(view, CAUTIONS))
        assert leaked(summary_html(view, CAUTIONS, identifiers={"record": pid})) == [pid]


@pytest.mark.browser
def test_opening_the_report_asks_for_nothing_beyond_the_file(cli_run) -> None:
    from browser_helpers import CHROMIUM, CHROMIUM_ARGS
    from playwright.sync_api import sync_playwright

    if not Path(CHROMIUM).exists():
        pytest.fail(f"Debian's chromium is not at {CHROMIUM}; `python3 dev.py test` installs it with apt.")
    path = Path(cli_run["report path"])
    requests: list[str] = []
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page()
            page.on("request", lambda r: requests.append(r.url))
            page.goto(path.resolve().as_uri())
            # the charts draw after the page unpacks its data; allow for a loaded machine (this test is about
            # requests, not speed: benchmarks/app_speed.py times the opening)
            page.wait_for_function("document.querySelectorAll('.vega-embed svg').length > 3", timeout=180_000)
            page.wait_for_timeout(1000)
        finally:
            browser.close()
    assert requests and requests[0].startswith("file:")
    assert [u for u in requests if not u.startswith(("file:", "data:", "blob:", "about:"))] == []

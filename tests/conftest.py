"""Shared fixtures: the invented demo in a temporary folder and analysed once per worker, and a helper that writes
small test cases. Spec text for small cases is built with tests/spec_texts.py (`from spec_texts import spec_text`).

Every browser test (marker `browser`) is also marked `slow`, so `pytest -m "not slow"` leaves out Chromium."""
from __future__ import annotations

import io
import shutil
from collections.abc import Callable
from pathlib import Path

import pandas as pd
import pytest

from explorer import demo
from explorer.spec import Spec, load_spec


LONGEST = ("test_load.py", "test_browser.py", "test_journeys.py", "test_app_session.py")  # minutes each


def pytest_collection_modifyitems(items: list[pytest.Item]) -> None:
    """Browser journeys and the load test drive Chromium for minutes: they count as slow wherever they are.

    The longest tests run first (the load test, then the other browser walks, then the rest of the slow ones):
    pytest-xdist hands tests out in this order, so no worker is left with a minutes-long test at the end while
    the others wait (longest-first scheduling; the suite's wall time fell by about a tenth)."""
    for item in items:
        if item.get_closest_marker("browser") and not item.get_closest_marker("slow"):
            item.add_marker(pytest.mark.slow)

    def rank(item: pytest.Item) -> int:
        name = item.path.name
        if name in LONGEST:
            return LONGEST.index(name)
        return len(LONGEST) + (0 if item.get_closest_marker("slow") else 1)

    items.sort(key=rank)  # stable: within a rank the collection order stays


@pytest.fixture(scope="session")
def _demo_master(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return demo.write_demo(tmp_path_factory.mktemp("demo_master")).parent


@pytest.fixture(scope="session")
def demo_results(_demo_master: Path):
    """The demo analysed once per pytest worker, exactly as `fulcrum analyse demo.toml` does: an
    explorer.analysis.Results (its .fitset, .summaries and .document). Shared: never modify it; copy first
    (copy.deepcopy) or build your own when a test changes the spec or the fits."""
    from explorer.analysis import analyse

    spec_path = _demo_master / "demo.toml"
    return analyse(load_spec(spec_path), spec_bytes=spec_path.read_bytes())


@pytest.fixture
def demo_dir(_demo_master: Path, tmp_path: Path) -> Path:
    """A fresh copy of the demo folder: demo.toml, demo_cohort.csv, DICTIONARY.md, truth.json."""
    return Path(shutil.copytree(_demo_master, tmp_path / "demo"))


@pytest.fixture
def demo_spec(demo_dir: Path) -> Spec:
    """The demo spec, loaded, pointing at the demo cohort in demo_dir."""
    return load_spec(demo_dir / "demo.toml")


@pytest.fixture(scope="session")
def small_text() -> pd.DataFrame:
    """A 400-patient invented cohort as the literal text cells of its CSV (copy before editing)."""
    frame, _ = demo.generate(n=400, seed=11)
    return pd.read_csv(io.BytesIO(demo.to_csv_bytes(frame)), dtype=str, keep_default_na=False)


def _write_table(frame: pd.DataFrame, path: Path, sheet: str = "cohort") -> None:
    """Write a frame in the format its extension names (CSV, TSV, XLSX, Parquet)."""
    ext = path.suffix.lower()
    if ext == ".csv":
        frame.to_csv(path, index=False)
    elif ext == ".tsv":
        frame.to_csv(path, index=False, sep="\t")
    elif ext == ".xlsx":
        frame.to_excel(path, index=False, sheet_name=sheet)
    elif ext == ".parquet":
        frame.to_parquet(path, index=False)
    else:
        raise ValueError(ext)


@pytest.fixture(scope="session")
def write_table() -> Callable[..., None]:
    """write_table(frame, path, sheet="cohort"): write a frame in the format its extension names."""
    return _write_table


@pytest.fixture
def write_case(tmp_path: Path) -> Callable[..., Spec]:
    """write_case(cohort, spec_text=None, name="cohort.csv", edit=()) -> Spec.

    cohort: a DataFrame (written by extension), text or bytes. spec_text: TOML whose [cohort] path
    is replaced by `name` (default: the demo spec). edit: (old, new) pairs, each replacing the first match.
    """

    def write(cohort: pd.DataFrame | str | bytes, spec_text: str | None = None, name: str = "cohort.csv",
              edit: tuple[tuple[str, str], ...] = ()) -> Spec:
        path = tmp_path / name
        if isinstance(cohort, pd.DataFrame):
            _write_table(cohort, path)
        elif isinstance(cohort, str):
            path.write_text(cohort, encoding="utf-8")
        else:
            path.write_bytes(cohort)
        text = (spec_text or demo.SPEC_TOML.format(n=0, seed=0)).replace(
            'path = "demo_cohort.csv"', f'path = "{name}"')
        for old, new in edit:
            assert old in text, old
            text = text.replace(old, new, 1)
        spec_path = tmp_path / "spec.toml"
        spec_path.write_text(text, encoding="utf-8")
        return load_spec(spec_path)

    return write

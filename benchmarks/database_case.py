"""(i) a survival analysis end to end on a DuckDB file of 10,000,000 patients x 20 columns.

The file is generated here (invented data, seeded, written in chunks of a million rows); the same rows are
written to Parquet, and the same survival spec is run on both through `fulcrum analyse` in a fresh process,
so the ratio DuckDB / Parquet is measured in the same run. Only the columns the spec needs are read.
"""
from __future__ import annotations

from pathlib import Path
from typing import Callable

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from explorer import demo

CHUNK = 1_000_000
EXTRA_COLUMNS = ("heart_rate", "systolic_bp", "creatinine", "crp", "wcc", "urea")

SPEC = """[cohort]
{source}
arm = "arm"
arms = ["{first}", "{second}"]

[[outcomes]]
name = "alive"
kind = "survival"
time = "days_followed"
event = "died"
horizon = 365

[[indices]]
name = "cfs"
column = "cfs"

[analysis]
interval = "analytic"
"""


def chunk(rng: np.random.Generator, start: int, n: int) -> pa.Table:
    """n invented patients: surgery lowers the one-year death hazard among the fitter and raises it among the
    frail (log hazard ratio -0.5 + 0.1 x (CFS - 1)), with administrative censoring between 180 and 400 days."""
    lap = rng.random(n) < 0.5
    cfs = rng.integers(1, 10, n)
    age = np.round(rng.normal(78, 7, n)).clip(65, 95)
    log_hr = np.where(lap, -0.5 + 0.1 * (cfs - 1), 0.0)
    rate = 0.0006 * np.exp(0.22 * (cfs - 1) + 0.02 * (age - 78) + log_hr)
    death = rng.exponential(1 / rate)
    censor = rng.uniform(180, 400, n)
    died = death <= censor
    days = np.ceil(np.minimum(death, censor)).clip(1, None)
    level = np.where(died & (death < 182), 4, rng.integers(0, 4, n))
    cols = {
        "pid": pa.array(np.arange(start, start + n, dtype=np.int64)),
        "hospital": pa.array(np.array([f"H{i}" for i in range(1, 7)])[rng.integers(0, 6, n)]),
        "allocation": pa.array(np.where(rng.random(n) < 0.125, "randomised", "chosen")),
        "arm": pa.array(np.where(lap, demo.ARMS[0], demo.ARMS[1])),
        "age": pa.array(age),
        "sex": pa.array(np.where(rng.random(n) < 0.5, "F", "M")),
        "cfs": pa.array(cfs.astype(np.int32)),
        "lactate": pa.array(np.round(rng.gamma(2.0, 1.0, n), 1)),
        "albumin": pa.array(np.round(rng.normal(35, 5, n))),
        "days_followed": pa.array(days.astype(np.int32)),
        "died": pa.array(died),
        "function_6m": pa.array(np.array(demo.LEVELS)[level]),
        "qol_6m": pa.array(np.where(died, np.nan, np.round(rng.uniform(0, 1, n), 3)), from_pandas=True),
        "days_home_180": pa.array(np.round(rng.uniform(0, 180, n))),
    }
    for name in EXTRA_COLUMNS:
        cols[name] = pa.array(np.round(rng.normal(50, 10, n), 1))
    return pa.table(cols)


def write_files(folder: Path, n: int, seed: int) -> tuple[Path, Path]:
    """The same n rows x 20 columns as a DuckDB file (table clinic.cohort) and as a Parquet file."""
    import duckdb

    duck, parquet = folder / "registry.duckdb", folder / "registry.parquet"
    for p in (duck, parquet):
        p.unlink(missing_ok=True)
    rng = np.random.default_rng(seed)
    con = duckdb.connect(str(duck))
    con.execute("CREATE SCHEMA clinic")
    writer = None
    for start in range(0, n, CHUNK):
        part = chunk(rng, start, min(CHUNK, n - start))
        if writer is None:
            writer = pq.ParquetWriter(parquet, part.schema)
            con.execute("CREATE TABLE clinic.cohort AS SELECT * FROM part")
        else:
            con.execute("INSERT INTO clinic.cohort SELECT * FROM part")
        writer.write_table(part)
    writer.close()
    con.execute("CHECKPOINT")
    con.close()
    return duck, parquet


def database_case(folder: Path, n: int, seed: int, cli_run: Callable[[Path, Path], dict]) -> dict:
    """Time `fulcrum analyse` on the DuckDB file and, as the reference, on the same rows in Parquet."""
    import time

    folder.mkdir(parents=True, exist_ok=True)
    t = time.perf_counter()
    stamp, made = folder / "made.txt", f"{n} {seed} {CHUNK}"
    if not (stamp.exists() and stamp.read_text() == made):  # a kept --workdir reuses the files it made
        stamp.unlink(missing_ok=True)
        write_files(folder, n, seed)
        stamp.write_text(made)
    written = time.perf_counter() - t
    specs = {}
    for name, source in (("duckdb", 'database = "duckdb:///registry.duckdb"\ntable = "clinic.cohort"'),
                         ("parquet", 'path = "registry.parquet"')):
        specs[name] = folder / f"{name}.toml"
        specs[name].write_text(SPEC.format(source=source, first=demo.ARMS[0], second=demo.ARMS[1]))
    out = {"patients": n, "columns": 20, "write_s": written,
           "file_mb": (folder / "registry.duckdb").stat().st_size / 2**20}
    for name, spec in specs.items():
        out[name] = cli_run(spec, folder / f"{name}.json")
    import json

    doc = json.loads((folder / "duckdb.json").read_text())
    out["columns_read"] = doc["inputs"]["source"]["columns"]
    out["rows_read"] = doc["inputs"]["source"]["rows"]
    reference = json.loads((folder / "parquet.json").read_text())
    same = [r["break_even"] for r in doc["results"]] == [r["break_even"] for r in reference["results"]]
    out["same_results_as_parquet"] = same
    out["ratio_seconds"] = out["duckdb"]["seconds"] / out["parquet"]["seconds"]
    out["ratio_peak"] = out["duckdb"]["peak_rss_mb"] / out["parquet"]["peak_rss_mb"]
    return out

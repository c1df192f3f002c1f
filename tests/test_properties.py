"""Property tests (hypothesis): whatever bytes, table text, spec text or formula a user brings, the loader,
the spec parser and the formula evaluator either succeed or raise FulcrumError, never another exception.

1,000 examples per property (derandomised, so every run tries the same ones; 2,000 took a sixth of the suite's
time for examples that had found nothing new since the first thousand). tests/test_formula.py already fuzzes ASCII text, formula-like token strings and
well-formed expression trees; the formula properties here add what it lacks: any Unicode (backticks,
look-alike characters, control characters) against columns with odd names, and formulas evaluated over
extreme column values (the largest doubles, zero, tiny numbers, missing values).
"""
from __future__ import annotations

import copy
import tomllib

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from explorer import demo
from explorer.cohort import load_cohort
from explorer.errors import FulcrumError
from explorer.indices import parse_formula
from explorer.spec import SCHEMA, TOP_LEVEL, parse_spec, parse_spec_text

EXAMPLES = settings(max_examples=1000, deadline=None, derandomize=True, database=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                           HealthCheck.filter_too_much])

SPEC = parse_spec_text("""
[cohort]
path = "c.csv"
id = "id"
arm = "arm"
arms = ["a", "b"]
allocation = "alloc"

[[outcomes]]
name = "alive"
kind = "survival"
time = "t"
event = "e"
horizon = 2

[[outcomes]]
name = "f"
kind = "ordinal"
column = "f"
levels = ["x", "y", "z"]

[[outcomes]]
name = "y"
kind = "binary"
column = "y"

[[indices]]
name = "s"
column = "s"
""")
HEADER = ["id", "arm", "alloc", "t", "e", "f", "y", "s"]
NAMES = ["c.csv", "c.tsv", "c.xlsx", "c.parquet", "c.txt", "c"]


def loads_or_refuses(data: bytes, filename: str) -> None:
    try:
        cohort = load_cohort(SPEC, data=data, filename=filename)
    except FulcrumError:
        return
    assert cohort.n > 0 and set(cohort.frame.columns) <= set(HEADER)


# ------------------------------------------------------------------------------------------ the loader
@EXAMPLES
@given(st.binary(max_size=400), st.sampled_from(NAMES))
def test_loader_random_bytes(data: bytes, filename: str) -> None:
    loads_or_refuses(data, filename)


@EXAMPLES
@given(st.sampled_from([b"PK\x03\x04", b"PAR1", b"\xef\xbb\xbf", b"\xff\xfe", b"%PDF", b"\xd0\xcf\x11\xe0"]),
       st.binary(max_size=300), st.sampled_from(NAMES))
def test_loader_random_bytes_behind_real_signatures(magic: bytes, tail: bytes, filename: str) -> None:
    loads_or_refuses(magic + tail, filename)


CELLS = st.sampled_from(["", "a", "b", "x", "y", "z", "0", "1", "2", "-1", "0.5", "1e309", "1e300", "nan", "NA",
                         "yes", "randomised", '"', '""', "=1+1", "@SUM(A1)", "\t", " ", ",", ";", "\r", "\n", "\u00e9",
                         "\x00", "\ufeff", "1,5", "\u2212" + "3", "٣"]) | st.text(max_size=3)


@st.composite
def table_text(draw) -> tuple[bytes, str]:
    """CSV-like text: a header (usually the right one), rows of odd cells, any delimiter, line end and encoding."""
    header = HEADER if draw(st.booleans()) else draw(st.lists(st.sampled_from(HEADER + ["", " id", "other"]),
                                                              max_size=9))
    sep = draw(st.sampled_from([",", ",", "\t", ";"]))
    width = len(header)
    rows = draw(st.lists(st.lists(CELLS, min_size=max(0, width - 1), max_size=width + 1), max_size=8))
    newline = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    text = newline.join(sep.join(r) for r in [header, *rows]) + draw(st.sampled_from(["", newline]))
    encoding = draw(st.sampled_from(["utf-8", "utf-8", "utf-8-sig", "latin-1", "utf-16"]))
    name = draw(st.sampled_from(["c.csv", "c.csv", "c.tsv", "c.parquet"]))
    return text.encode(encoding, errors="replace"), name


@pytest.mark.slow  # 1,000 examples: 5-15 s of CPU (2,000 took 10-30 s, measured 2026-12-02)
@EXAMPLES
@given(table_text())
def test_loader_csv_like_text(case: tuple[bytes, str]) -> None:
    loads_or_refuses(*case)


def test_a_well_formed_table_of_that_shape_loads() -> None:
    """The properties above can pass through to a loaded cohort: a well-formed table of the same shape loads."""
    rows = [[f"p{k}", "ab"[k % 2], "randomised" if k % 4 == 0 else "chosen", str(1 + k % 5), str(int(k % 3 == 0)),
             "xyz"[k % 3], str(k // 2 % 2), str(k % 7)] for k in range(40)]
    cohort = load_cohort(SPEC, data="\n".join(",".join(r) for r in [HEADER, *rows]).encode(), filename="c.csv")
    assert cohort.n == 40 and cohort.frame["s"].tolist() == [float(k % 7) for k in range(40)]


# ------------------------------------------------------------------------------------------ the spec parser
BASE = tomllib.loads(demo.SPEC_TOML.format(n=0, seed=0))
KEYS = sorted({k for table in SCHEMA.values() for k in table} | set(TOP_LEVEL))
TOML_VALUES = st.sampled_from(['"cfs"', '"alive"', '"function"', "365", "-1", "0", "0.5", "1e400", "nan", "inf",
                               "true", '""', '["a", "b"]', "[]", '["laparotomy", "non-operative"]', "{}",
                               '{ outcome = "alive", covariates = ["age"] }', '{ independent = 2.0 }', '"survival"',
                               '"ordinal"', '"x.csv"', '"bootstrap"', "[1, 99]", "1979-05-27", '"""a"""'])


@st.composite
def toml_text(draw) -> str:
    """TOML-ish text: sections and array tables of the schema, schema keys with plausible or wrong values,
    now and then a broken line."""
    lines = []
    for _ in range(draw(st.integers(0, 14))):
        kind = draw(st.integers(0, 9))
        if kind == 0:
            lines.append(f"[{draw(st.sampled_from(list(TOP_LEVEL) + ['cohort.x', 'analysys']))}]")
        elif kind == 1:
            lines.append(f"[[{draw(st.sampled_from(['outcomes', 'indices', 'maps', 'cohort']))}]]")
        elif kind == 2:
            lines.append(draw(st.text(max_size=12)))
        else:
            lines.append(f"{draw(st.sampled_from(KEYS))} = {draw(TOML_VALUES)}")
    return "\n".join(lines)


@pytest.mark.slow  # 1,000 examples: 5-15 s of CPU (2,000 took 10-30 s, measured 2026-12-02)
@EXAMPLES
@given(toml_text())
def test_spec_parser_toml_like_text(text: str) -> None:
    try:
        parse_spec_text(text, source="spec.toml")
    except FulcrumError:
        pass


SCALARS = st.booleans() | st.integers(-10**20, 10**20) | st.floats() | st.text(max_size=6) | st.sampled_from(KEYS)
VALUES = SCALARS | st.lists(SCALARS, max_size=3) | st.dictionaries(st.sampled_from(KEYS) | st.text(max_size=4),
                                                                   SCALARS | st.lists(SCALARS, max_size=2), max_size=3)


def _paths(obj, prefix=()):
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield prefix + (k,)
            yield from _paths(v, prefix + (k,))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield prefix + (i,)
            yield from _paths(v, prefix + (i,))


PATHS = list(_paths(BASE))


@pytest.mark.slow  # 1,000 examples: 5-15 s of CPU (2,000 took 10-30 s, measured 2026-12-02)
@EXAMPLES
@given(st.lists(st.tuples(st.sampled_from(PATHS), st.sampled_from(["delete", "replace", "add"]), VALUES,
                          st.sampled_from(KEYS) | st.text(max_size=5)), min_size=1, max_size=4))
def test_spec_parser_mutated_structures(edits) -> None:
    """The demo spec as parsed TOML, with keys deleted, values replaced by any type, keys added anywhere."""
    data = copy.deepcopy(BASE)
    for path, op, value, key in edits:
        parent = data
        try:
            for step in path[:-1]:
                parent = parent[step]
            if op == "delete":
                del parent[path[-1]]
            elif op == "replace":
                parent[path[-1]] = value
            elif isinstance(parent[path[-1]], dict):
                parent[path[-1]][key] = value
            elif isinstance(parent[path[-1]], list):
                parent[path[-1]].append(value)
        except (KeyError, IndexError, TypeError):
            continue
    try:
        parse_spec(data, source="spec.toml")
    except FulcrumError:
        pass


@pytest.mark.slow  # 1,000 examples: 5-15 s of CPU (2,000 took 10-30 s, measured 2026-12-02)
@EXAMPLES
@given(st.dictionaries(st.sampled_from(list(TOP_LEVEL) + ["x"]), VALUES, max_size=5))
def test_spec_parser_random_structures(data: dict) -> None:
    try:
        parse_spec(data, source="spec.toml")
    except FulcrumError:
        pass


# ------------------------------------------------------------------------------------------ the formula evaluator
ODD_COLUMNS = ["age", "lactate (mmol/L)", "CFS score", "âge", "ｘ", "a`b", "__class__", "log"]
EXTREME = np.array([1.7976931348623157e308, -1.7976931348623157e308, 0.0, 5e-324, -0.0, np.nan, 1.0, -3.5])


def evaluate_or_refuse(text: str) -> None:
    data = pd.DataFrame({c: np.roll(EXTREME, k) for k, c in enumerate(ODD_COLUMNS)})
    try:
        out = parse_formula(text, ODD_COLUMNS, key="indices[0].formula").evaluate(data)
    except FulcrumError:
        return
    assert out.shape == (len(data),) and not np.isinf(out).any()


@EXAMPLES
@given(st.text(max_size=40))
def test_formula_any_unicode_text(text: str) -> None:
    evaluate_or_refuse(text)


TOKENS = ["`lactate (mmol/L)`", "`CFS score`", "`âge`", "age", "ｘ", "`a`b`", "`log`", "log", "exp", "sqrt", "abs",
          "min", "max", "clip", "(", ")", ",", "+", "-", "*", "/", "**", "<", ">=", "==", " ", "0", "2", "0.5", "1e308",
          "10", "-10", "`", "``", "__class__", "ａｇｅ", "\u00a0", "\t"]


@pytest.mark.slow  # 1,000 examples: 5-15 s of CPU (2,000 took 10-30 s, measured 2026-12-02)
@EXAMPLES
@given(st.lists(st.sampled_from(TOKENS), min_size=1, max_size=14).map("".join))
def test_formula_tokens_over_extreme_values(text: str) -> None:
    evaluate_or_refuse(text)

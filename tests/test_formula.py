"""The formula evaluator: refusals with pointed messages, numpy-exact results, and fuzzing."""
from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from explorer.errors import FulcrumError
from explorer.indices.formula import MAX_CHARS, formula_columns, parse_formula

COLUMNS = ["age", "cfs", "lactate", "albumin", "lactate (mmol/L)", "class"]
KEY = "indices[2].formula"


def data(n: int = 40, seed: int = 3) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    return {"age": rng.uniform(65, 95, n), "cfs": rng.integers(1, 10, n).astype(float),
            "lactate": rng.uniform(0.5, 8, n), "albumin": rng.uniform(20, 45, n),
            "lactate (mmol/L)": rng.uniform(0.5, 8, n), "class": rng.integers(0, 3, n).astype(float)}


def refusal(text: str) -> FulcrumError:
    with pytest.raises(FulcrumError) as info:
        parse_formula(text, COLUMNS, key=KEY)
    assert info.value.key == KEY
    return info.value


# (expression, words the message must contain): the part quoted and its 1-based character position.
HOSTILE = [
    ("1 + os.system('rm -rf /')", "'os.system' at character 5: attribute access is not allowed"),
    ("age.__class__", "'age.__class__' at character 1: attribute access is not allowed"),
    ("__import__('os')", "'__import__' at character 1: names with double underscores are not allowed"),
    ("__builtins__", "'__builtins__' at character 1: names with double underscores are not allowed"),
    ("().__class__.__bases__[0]", "at character 1: indexing with [ ] is not allowed"),
    ("eval('1+1')", "'eval' at character 1: 'eval' is not an allowed function"),
    ("open('/etc/passwd')", "'open' at character 1: 'open' is not an allowed function"),
    ("getattr(age, 'real')", "'getattr' at character 1: 'getattr' is not an allowed function"),
    ("lambda: 1", "'lambda: 1' at character 1: lambda functions are not allowed"),
    ("(lambda x: x)(age)", "'lambda x: x' at character 2: lambda functions are not allowed"),
    ("[a for a in age]", "'[a for a in age]' at character 1: comprehensions are not allowed"),
    ("max(a for a in age)", "comprehensions are not allowed"),
    ("age[0]", "'age[0]' at character 1: indexing with [ ] is not allowed"),
    ("9**9**9**9", "'9**9**9' at character 4: nested powers are not allowed"),
    ("age ** 11", "'11' at character 8: exponents are limited to -10 to 10"),
    ("age ** cfs", "'cfs' at character 8: an exponent must be a plain number"),
    ("(age ** 2) ** 3", "'age ** 2' at character 2: nested powers are not allowed"),
    ("agee / 10", "'agee' at character 1: 'agee' is not a column of the cohort"),
    ("", "the formula is empty"),
    ("   \n\t ", "the formula is empty"),
    ("'age'", "''age'' at character 1: text in quotes is not allowed"),
    ("b'age'", "bytes are not allowed"),
    ("f'{age}'", "f-strings are not allowed"),
    ("min(*age, 1)", "'*age' at character 5: starred arguments (*x) are not allowed"),
    ("log(x=age)", "'x=age' at character 5: keyword arguments are not allowed in log()"),
    ("(n := 5)", "'n := 5' at character 2: assignment (:=) is not allowed"),
    ("age > 80 and cfs > 5", "'and' is not allowed"),
    ("age > 80 or cfs > 5", "'or' is not allowed"),
    ("not age", "'not age' at character 1: 'not' is not allowed"),
    ("age if cfs > 5 else 0", "conditional expressions (a if c else b) are not allowed"),
    ("age // 10", "operator '//' is not allowed"),
    ("age % 10", "operator '%' is not allowed"),
    ("~age", "operator '~' is not allowed"),
    ("age is 80", "'is' is not allowed"),
    ("age in cfs", "'in' is not allowed"),
    ("True + age", "'True' at character 1: 'True' is not allowed"),
    ("1j * age", "complex numbers are not allowed"),
    ("1e999 * age", "'1e999' at character 1: the number is too large"),
    ("age, cfs", "a comma is only allowed between a function's arguments"),
    ("{1: age}", "dictionaries are not allowed"),
    ("log", "'log' is a function and needs brackets"),
    ("max(age)", "max() takes at least 2 arguments, found 1"),
    ("clip(age, 1)", "clip() takes exactly 3 arguments, found 2"),
    ("log(age)(2)", "'log(age)' at character 1: only the listed functions can be called"),
    ("(age", "'(' was never closed"),
    ("age +", "not a valid expression"),
    ("age\x00", "not a valid expression"),
    ("`age", "the backtick at character 1 is never closed"),
    ("``", "empty backticks at character 1"),
    ("age + " * 100 + "1", f"601 characters long; the limit is {MAX_CHARS}"),
    ("+".join(["1"] * 220), "parts; the limit is 200"),
]


@pytest.mark.parametrize(("text", "words"), HOSTILE, ids=[f"h{i}" for i in range(len(HOSTILE))])
def test_refuses_hostile_and_malformed_expressions(text: str, words: str) -> None:
    assert words in refusal(text).what


def test_refusal_count_meets_the_brief() -> None:
    assert len(HOSTILE) >= 25


def test_unknown_column_suggests_close_names() -> None:
    assert refusal("agee + 1").hint == "Did you mean 'age'?"
    assert refusal("Lactate * 2").hint.startswith("Did you mean 'lactate'")
    assert "`lactate (mmol/L)`" in refusal("zzz").hint


def test_huge_power_is_refused_before_anything_runs() -> None:
    err = refusal("9**9**9**9")
    assert err.rows is None


@pytest.mark.parametrize("text, at, near", [("lactate - albumin /", 19, "'/'"), ("lactate >=", 9, "'>='"),
                                             ("lactate **", 9, "'**'"), ("log(lactate,", 12, "','")])
def test_a_dangling_operator_is_pointed_at_not_the_start(text: str, at: int, near: str) -> None:
    """Python's parser reports a trailing operator at the start of the expression; the message must point at the
    operator itself (1-based characters)."""
    with pytest.raises(FulcrumError, match=re.escape(f"near character {at} ({near}): it ends with {near}")):
        parse_formula(text, ["lactate", "albumin"])


def test_position_counts_characters_not_bytes() -> None:
    with pytest.raises(FulcrumError, match="'os.path' at character 7: attribute access"):
        parse_formula("\u00e9\u00e9\u00e9 + os.path", ["\u00e9\u00e9\u00e9"])


def test_matches_numpy_computed_directly() -> None:
    d = data()
    age, cfs, lac, alb = d["age"], d["cfs"], d["lactate"], d["albumin"]
    with np.errstate(all="raise"):
        cases = {
            "age / 10 + cfs": age / 10 + cfs,
            "log(lactate) - 0.5 * sqrt(albumin)": np.log(lac) - 0.5 * np.sqrt(alb),
            "exp(-age / 50) * abs(cfs - 5) ** 2": np.exp(-age / 50) * np.abs(cfs - 5) ** 2,
            "clip(age, 70, 85)": np.clip(age, 70, 85),
            "max(age / 10, cfs, 8.5)": np.maximum(np.maximum(age / 10, cfs), 8.5),
            "min(lactate, 2)": np.minimum(lac, 2),
            "(age > 80) * 2 + (cfs >= 5) - (cfs == 3) + (cfs != 4) + (age <= 70) + (age < 66)":
                (age > 80) * 2.0 + (cfs >= 5) - (cfs == 3) + (cfs != 4) + (age <= 70) + (age < 66),
            "1 < cfs <= 5": ((cfs > 1) & (cfs <= 5)).astype(float),
            "age ** -1 + lactate ** 0.5": age ** -1.0 + lac ** 0.5,
            "-age + +cfs": -age + cfs,
            "`lactate (mmol/L)` * 2 + `class`": d["lactate (mmol/L)"] * 2 + d["class"],
            "3": np.full(len(age), 3.0),
        }
    for text, expected in cases.items():
        got = parse_formula(text, COLUMNS).evaluate(d)
        np.testing.assert_allclose(got, expected, rtol=1e-13, atol=0, err_msg=text)  # numpy is the reference


def test_reads_a_data_frame_and_lists_columns_in_order() -> None:
    frame = pd.DataFrame(data())
    f = parse_formula("cfs + age / 10 + cfs", COLUMNS)
    assert f.columns == ("cfs", "age") and f.text == "cfs + age / 10 + cfs"
    assert formula_columns("`lactate (mmol/L)` / albumin", COLUMNS) == ["lactate (mmol/L)", "albumin"]
    np.testing.assert_allclose(f.evaluate(frame), 2 * frame["cfs"] + frame["age"] / 10)  # pandas reference


def test_missing_inputs_stay_missing_even_through_comparisons_and_zero_powers() -> None:
    d = {"age": np.array([70.0, np.nan, 90.0]), "cfs": np.array([3.0, 4.0, np.nan])}
    cols = ["age", "cfs"]
    assert np.isnan(parse_formula("age > 80", cols).evaluate(d)).tolist() == [False, True, False]
    assert np.isnan(parse_formula("age ** 0 + cfs * 0", cols).evaluate(d)).tolist() == [False, True, True]
    assert np.isnan(parse_formula("max(age, cfs)", cols).evaluate(d)).sum() == 2


@pytest.mark.parametrize(("text", "rows", "words"), [
    ("1 / (age - 70)", [1], "'1 / (age - 70)' at character 1: gives no finite value (division by zero)"),
    ("log(age - 80) + 1", [1, 2], "'log(age - 80)' at character 1: gives no finite value (log of zero"),
    ("cfs + sqrt(80 - age)", [3], "'sqrt(80 - age)' at character 7: gives no finite value (square root"),
    ("exp(age * 100)", [1, 2, 3], "exp of a value too large"),
    ("(cfs - 3.5) ** 0.5", [1], "a power that is not defined"),
])
def test_non_finite_results_name_rows_and_the_sub_expression(text: str, rows: list[int], words: str) -> None:
    d = {"age": np.array([70.0, 80.0, 90.0]), "cfs": np.array([3.0, 4.0, 5.0])}
    with pytest.raises(FulcrumError) as info:
        parse_formula(text, ["age", "cfs"], key=KEY).evaluate(d)
    assert info.value.rows == rows and words in info.value.what and info.value.key == KEY


def test_text_in_a_numeric_column_is_named() -> None:
    frame = pd.DataFrame({"age": ["70", "eighty", "90"]})
    with pytest.raises(FulcrumError) as info:
        parse_formula("age / 10", ["age"]).evaluate(frame)
    assert info.value.column == "age" and info.value.rows == [2]


def _evaluate_any(text: str) -> None:
    d = {"age": np.array([70.0, 0.0, np.nan, -3.0]), "cfs": np.array([0.0, 1.0, 2.0, np.nan])}
    try:
        parse_formula(text, ["age", "cfs"]).evaluate(d)
    except FulcrumError:
        pass


@settings(max_examples=2000, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.text(alphabet=st.characters(min_codepoint=0, max_codepoint=127), max_size=60))
def test_random_ascii_text_raises_only_fulcrum_errors(text: str) -> None:
    _evaluate_any(text)


FORMULA_ALPHABET = list("agecfs()+-*/<>=!.,0123456789 _`'[]{}:;~%&|^@#\"\\\n") + [
    "log", "exp", "sqrt", "abs", "min", "max", "clip", "**", "lambda", " if ", " else ", " and ", " not ",
    "__", "os", "1e308", "9**9**9", "import", " for ", " in ", "yield", ":=", "*",
]


@settings(max_examples=1000, deadline=None)
@given(st.lists(st.sampled_from(FORMULA_ALPHABET), max_size=25).map("".join))
def test_formula_like_text_raises_only_fulcrum_errors(text: str) -> None:
    _evaluate_any(text)


def _number(value: float) -> tuple[str, object]:
    return repr(value), lambda env: np.full(len(env["age"]), value)


LEAVES = st.one_of(
    st.sampled_from(["age", "cfs", "lactate"]).map(lambda c: (c, lambda env, c=c: env[c])),
    st.floats(0, 1e6, allow_nan=False, allow_infinity=False).map(_number),
)

BINARY = {"+": np.add, "-": np.subtract, "*": np.multiply, "/": np.divide,
          "<": np.less, "<=": np.less_equal, ">": np.greater, ">=": np.greater_equal, "==": np.equal,
          "!=": np.not_equal}
UNARY = {"log": np.log, "exp": np.exp, "sqrt": np.sqrt, "abs": np.abs}


def _extend(children: st.SearchStrategy) -> st.SearchStrategy:
    def binary(op, a, b):
        return f"({a[0]}) {op} ({b[0]})", lambda env: _track(env, BINARY[op](a[1](env), b[1](env)))

    def unary(name, a):
        return f"{name}({a[0]})", lambda env: _track(env, UNARY[name](a[1](env)))

    def minmax(name, parts):
        fn = np.minimum if name == "min" else np.maximum

        def ref(env):
            out = parts[0][1](env)
            for p in parts[1:]:
                out = _track(env, fn(out, p[1](env)))
            return out
        return f"{name}({', '.join(p[0] for p in parts)})", ref

    def clip(a, lo, hi):
        return (f"clip({a[0]}, {lo[0]}, {hi[0]})",
                lambda env: _track(env, np.minimum(np.maximum(a[1](env), lo[1](env)), hi[1](env))))

    def power(column, p):
        return f"({column}) ** {p!r}", lambda env: _track(env, np.power(env[column], p))

    return st.one_of(
        st.builds(binary, st.sampled_from(list(BINARY)), children, children),
        st.builds(unary, st.sampled_from(list(UNARY)), children),
        st.builds(lambda a: (f"-({a[0]})", lambda env: -a[1](env)), children),
        st.builds(minmax, st.sampled_from(["min", "max"]), st.lists(children, min_size=2, max_size=3)),
        st.builds(clip, children, children, children),
        st.builds(power, st.sampled_from(["age", "cfs", "lactate"]), st.floats(-10, 10).map(lambda p: round(p, 2))),
    )


def _track(env: dict, out: np.ndarray) -> np.ndarray:
    out = np.asarray(out, float)
    if not np.all(np.isfinite(out)):
        env["_bad"] = True
    return out


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.recursive(LEAVES, _extend, max_leaves=25))
def test_well_formed_trees_match_numpy_or_refuse_non_finite_values(tree: tuple[str, object]) -> None:
    text, reference = tree
    env = {"age": np.array([65.0, 80.0, 94.5]), "cfs": np.array([1.0, 5.0, 9.0]),
           "lactate": np.array([0.6, 2.0, 7.9])}
    ref_env = dict(env)
    with np.errstate(all="ignore"):
        expected = np.broadcast_to(reference(ref_env), (3,))
    if len(text) > MAX_CHARS:
        with pytest.raises(FulcrumError, match="characters long"):
            parse_formula(text, env)
        return
    formula = parse_formula(text, env)
    if ref_env.get("_bad") or not np.all(np.isfinite(expected)):
        with pytest.raises(FulcrumError, match="gives no finite value"):
            formula.evaluate(env)
    else:
        np.testing.assert_array_equal(formula.evaluate(env), expected)  # numpy, same operations, is the reference

"""A small, safe formula language for indices: arithmetic over cohort columns, nothing else.

The text is parsed with `ast.parse(mode="eval")` and every node is checked against a whitelist
before anything runs; evaluation walks the checked tree over numpy arrays (no eval/exec).
Columns whose names are not Python identifiers are written in backticks: `lactate (mmol/L)`.
"""
from __future__ import annotations

import ast
import difflib
import unicodedata
import warnings
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np
import pandas as pd

from ..errors import FulcrumError
from .columns import MAX_ERROR_ROWS, as_float

MAX_CHARS = 500
MAX_NODES = 200
MAX_EXPONENT = 10.0

# name -> (fewest arguments, most arguments or None, numpy function, what goes wrong when not finite)
FUNCTIONS: dict[str, tuple[int, int | None, Callable[..., np.ndarray], str]] = {
    "log": (1, 1, np.log, "log of zero or of a negative value"),
    "exp": (1, 1, np.exp, "exp of a value too large (overflow)"),
    "sqrt": (1, 1, np.sqrt, "square root of a negative value"),
    "abs": (1, 1, np.abs, "a value too large"),
    "min": (2, None, lambda *a: _reduce(np.minimum, a), "a value too large"),
    "max": (2, None, lambda *a: _reduce(np.maximum, a), "a value too large"),
    "clip": (3, 3, lambda x, lo, hi: np.minimum(np.maximum(x, lo), hi), "a value too large"),
}
ALLOWED_FUNCTIONS = ", ".join(FUNCTIONS)

BINARY: dict[type, tuple[str, Callable[[np.ndarray, np.ndarray], np.ndarray], str]] = {
    ast.Add: ("+", np.add, "a sum too large (overflow)"),
    ast.Sub: ("-", np.subtract, "a difference too large (overflow)"),
    ast.Mult: ("*", np.multiply, "a product too large (overflow)"),
    ast.Div: ("/", np.divide, "division by zero"),
    ast.Pow: ("**", np.power, "a power that is not defined (a negative number to a fractional power, "
              "zero to a negative power) or too large"),
}
REFUSED_BINARY = {ast.FloorDiv: "//", ast.Mod: "%", ast.MatMult: "@", ast.BitAnd: "&", ast.BitOr: "|",
                  ast.BitXor: "^", ast.LShift: "<<", ast.RShift: ">>"}
COMPARE: dict[type, Callable[[np.ndarray, np.ndarray], np.ndarray]] = {
    ast.Lt: np.less, ast.LtE: np.less_equal, ast.Gt: np.greater, ast.GtE: np.greater_equal,
    ast.Eq: np.equal, ast.NotEq: np.not_equal,
}
REFUSED_NODES: dict[type, str] = {
    ast.Attribute: "attribute access is not allowed",
    ast.Subscript: "indexing with [ ] is not allowed",
    ast.Lambda: "lambda functions are not allowed",
    ast.ListComp: "comprehensions are not allowed",
    ast.SetComp: "comprehensions are not allowed",
    ast.DictComp: "comprehensions are not allowed",
    ast.GeneratorExp: "comprehensions are not allowed",
    ast.List: "lists are not allowed",
    ast.Set: "sets are not allowed",
    ast.Dict: "dictionaries are not allowed",
    ast.Tuple: "a comma is only allowed between a function's arguments",
    ast.Starred: "starred arguments (*x) are not allowed",
    ast.NamedExpr: "assignment (:=) is not allowed",
    ast.JoinedStr: "f-strings are not allowed",
    ast.FormattedValue: "f-strings are not allowed",
    ast.IfExp: "conditional expressions (a if c else b) are not allowed",
    ast.Await: "await is not allowed",
    ast.Yield: "yield is not allowed",
    ast.YieldFrom: "yield is not allowed",
    ast.Slice: "slices are not allowed",
}
HINTS: dict[str, str] = {
    "conditional expressions (a if c else b) are not allowed":
        "Use comparisons, which give 1 or 0: (c) * a + (1 - (c)) * b.",
    "boolean": "Comparisons give 1 or 0: write (a > 1) * (b > 2) for 'and', max(a > 1, b > 2) for 'or', "
               "1 - (a > 1) for 'not'.",
}
WHITESPACE = str.maketrans({"\n": " ", "\r": " ", "\t": " ", "\f": " ", "\v": " "})


def _reduce(fn: Callable[[np.ndarray, np.ndarray], np.ndarray], args: tuple[np.ndarray, ...]) -> np.ndarray:
    out = args[0]
    for a in args[1:]:
        out = fn(out, a)
    return out


@dataclass(frozen=True)
class Formula:
    """A checked formula: `.columns` it reads, `.evaluate(frame_or_mapping)` gives one float per row."""

    text: str
    columns: tuple[str, ...]
    key: str | None = None
    _tree: ast.expr = field(repr=False, compare=False, default=None)  # type: ignore[assignment]
    _source: str = field(repr=False, compare=False, default="")
    _offset: int = field(repr=False, compare=False, default=0)
    _names: dict[str, str] = field(repr=False, compare=False, default_factory=dict)
    _resolved: dict[str, str] = field(repr=False, compare=False, default_factory=dict)

    def evaluate(self, data: pd.DataFrame | Mapping[str, Any]) -> np.ndarray:
        """Values of the formula per row; rows with a missing input are NaN (count them with np.isnan)."""
        env, n = _columns_of(data, self.columns, self.key)
        with np.errstate(all="ignore"):
            out = _Evaluator(self, env, n).run(self._tree)
        return np.broadcast_to(out, (n,)).astype(float, copy=True)

    def compute(self, data: pd.DataFrame | Mapping[str, Any]) -> np.ndarray:
        """Same as evaluate: the index-model interface shared by every index kind."""
        return self.evaluate(data)

    def where(self, node: ast.AST) -> tuple[str, int]:
        """The user's own text of a node and its 1-based character position."""
        start, end = _char_span(self._source, node)
        return self.text[self._offset + start:self._offset + end], self._offset + start + 1

    def refuse(self, node: ast.AST | None, reason: str, hint: str | None = None,
               rows: list[int] | None = None, n_rows: int | None = None) -> FulcrumError:
        short = self.text if len(self.text) <= 80 else self.text[:77] + "..."
        if node is None:
            what = f"in formula '{short}': {reason}."
        else:
            segment, at = self.where(node)
            segment = segment if len(segment) <= 60 else segment[:57] + "..."
            what = f"in formula '{short}': '{segment}' at character {at}: {reason}."
        return FulcrumError(what, key=self.key, rows=rows, n_rows=n_rows,
                            hint=hint or f"Formulas may use numbers, column names, + - * / **, comparisons "
                                         f"and the functions {ALLOWED_FUNCTIONS}.")


def parse_formula(text: str, columns: Iterable[str] | None, *, key: str | None = None) -> Formula:
    """Check a formula against the whitelist and the known column names; refuse with FulcrumError.

    columns=None accepts any plain name as a column (to list what a formula reads before loading data).
    """
    if not isinstance(text, str):
        raise FulcrumError(f"a formula must be text, found {type(text).__name__}.", key=key,
                           hint='Write it in quotes, e.g. formula = "age / 10 + cfs".')
    known = columns is not None
    columns = [str(c) for c in columns] if columns is not None else []
    bare = Formula(text=text, columns=(), key=key)
    if not text.strip():
        raise bare.refuse(None, "the formula is empty", 'Write an expression such as "age / 10 + cfs".')
    if len(text) > MAX_CHARS:
        raise bare.refuse(None, f"the formula is {len(text)} characters long; the limit is {MAX_CHARS}",
                          "Shorten it, or compute the index in the cohort file and name that column.")
    flat = text.translate(WHITESPACE)
    offset = len(flat) - len(flat.lstrip(" "))
    source, names = _unquote(flat[offset:], columns, bare, offset)
    tree = _parse(source, bare, offset)
    n_nodes = sum(isinstance(n, ast.expr) for n in ast.walk(tree))
    if n_nodes > MAX_NODES:
        raise bare.refuse(None, f"the formula has {n_nodes} parts; the limit is {MAX_NODES}",
                          "Shorten it, or compute the index in the cohort file and name that column.")
    formula = Formula(text=text, columns=(), key=key, _tree=tree.body, _source=source, _offset=offset,
                      _names=names)
    resolved: dict[str, str] = {}
    _Checker(formula, _lookup(columns) if known else None, columns, resolved).check(tree.body)
    return Formula(text=text, columns=tuple(dict.fromkeys(resolved.values())), key=key, _tree=tree.body,
                   _source=source, _offset=offset, _names=names, _resolved=resolved)


def formula_columns(text: str, columns: Iterable[str] | None = None, *, key: str | None = None) -> list[str]:
    """The column names a formula reads, in order of first use (the formula is checked too)."""
    return list(parse_formula(text, columns, key=key).columns)


def _parse(source: str, bare: Formula, offset: int) -> ast.Expression:
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return ast.parse(source, mode="eval")
    except SyntaxError as e:
        detail = e.msg or "invalid syntax"
        if "null bytes" in detail or e.offset is None:
            raise bare.refuse(None, f"the formula is not a valid expression ({detail})") from None
        at = min(max(int(e.offset), 1), len(source) + 1)
        tail = source.rstrip()
        if tail and tail[-1] in "+-*/%<>=!,(":  # Python places a dangling operator's error at the start
            at = len(tail)
            while at > 1 and tail[at - 2] in "+-*/%<>=!" and tail[-1] not in ",(":
                at -= 1
            detail = f"it ends with '{tail[at - 1:]}', so something is missing after it"
        near = bare.text[offset + at - 1:offset + at + 9].strip() or "the end"
        raise bare.refuse(None, f"the formula is not a valid expression near character {at + offset} "
                                f"('{near}'): {detail}",
                          "Check brackets and operators; columns with spaces go in backticks.") from None
    except (ValueError, RecursionError, MemoryError) as e:
        raise bare.refuse(None, f"the formula is not a valid expression ({type(e).__name__})") from None


def _unquote(source: str, columns: list[str], bare: Formula, offset: int) -> tuple[str, dict[str, str]]:
    """Replace each `quoted column` by a stand-in identifier of the same length (keeps positions)."""
    if "`" not in source:
        return source, {}
    names: dict[str, str] = {}
    out, i, code = [], 0, 0
    taken = set(columns) | set(FUNCTIONS)
    while i < len(source):
        if source[i] != "`":
            out.append(source[i])
            i += 1
            continue
        j = source.find("`", i + 1)
        if j < 0:
            raise bare.refuse(None, f"the backtick at character {i + 1 + offset} is never closed",
                              "Put column names in a pair of backticks: `lactate (mmol/L)`.")
        name = source[i + 1:j]
        if not name.strip():
            raise bare.refuse(None, f"empty backticks at character {i + 1 + offset}",
                              "Put a column name between the backticks.")
        stand_in = next(s for s in (_stand_in(code + k, j + 1 - i) for k in range(10_000)) if s not in taken)
        code += 1
        taken.add(stand_in)
        names[stand_in] = name
        out.append(stand_in)
        i = j + 1
    return "".join(out), names


def _stand_in(code: int, width: int) -> str:
    letters = "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ"
    digits = ""
    while True:
        digits += letters[code % 52]
        code //= 52
        if not code:
            break
    return ("_" + digits).ljust(width, "_")[:width] if len(digits) < width else "_" + digits


def _lookup(columns: list[str]) -> dict[str, str]:
    return {unicodedata.normalize("NFKC", c): c for c in columns}


def _char_span(source: str, node: ast.AST) -> tuple[int, int]:
    raw = source.encode("utf-8")
    start = len(raw[:node.col_offset].decode("utf-8", errors="ignore"))  # type: ignore[attr-defined]
    end_b = getattr(node, "end_col_offset", None)
    end = len(raw[:end_b].decode("utf-8", errors="ignore")) if end_b is not None else start + 1
    return start, max(end, start + 1)


def _bool_op_name(node: ast.AST) -> str:
    if isinstance(node, ast.UnaryOp):
        return "'not'"
    return "'and'" if isinstance(node.op, ast.And) else "'or'"  # type: ignore[attr-defined]


class _Checker:
    """Walks a parsed formula and refuses anything outside the whitelist, naming the offending part."""

    def __init__(self, formula: Formula, lookup: dict[str, str] | None, columns: list[str],
                 resolved: dict[str, str]):
        self.f, self.lookup, self.columns, self.resolved = formula, lookup, columns, resolved

    def check(self, node: ast.AST) -> None:
        f = self.f
        for kind, reason in REFUSED_NODES.items():
            if isinstance(node, kind):
                raise f.refuse(node, reason, HINTS.get(reason))
        if isinstance(node, ast.Constant):
            number(f, node)
        elif isinstance(node, ast.Name):
            self.name(node)
        elif isinstance(node, ast.BoolOp) or (isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.Not)):
            raise f.refuse(node, f"{_bool_op_name(node)} is not allowed", HINTS["boolean"])
        elif isinstance(node, ast.UnaryOp):
            if not isinstance(node.op, (ast.USub, ast.UAdd)):
                raise f.refuse(node, "operator '~' is not allowed", "Use - for a negative value.")
            self.check(node.operand)
        elif isinstance(node, ast.BinOp):
            self.binary(node)
        elif isinstance(node, ast.Compare):
            for op in node.ops:
                if type(op) not in COMPARE:
                    word = {ast.In: "in", ast.NotIn: "not in", ast.Is: "is", ast.IsNot: "is not"}[type(op)]
                    raise f.refuse(node, f"'{word}' is not allowed", "Compare with < <= > >= == or !=.")
            for part in [node.left, *node.comparators]:
                self.check(part)
        elif isinstance(node, ast.Call):
            self.call(node)
        else:
            raise f.refuse(node, f"this kind of expression ({type(node).__name__}) is not allowed")

    def name(self, node: ast.Name) -> None:
        f = self.f
        ident = node.id
        if ident in f._names:
            ident = f._names[ident]
        elif ident.startswith("__") or ident.endswith("__"):
            raise f.refuse(node, "names with double underscores are not allowed",
                           "Use column names and the listed functions only.")
        if self.lookup is None:
            column = None if ident in FUNCTIONS and ident == node.id else ident
        else:
            column = self.lookup.get(unicodedata.normalize("NFKC", ident))
        if column is None and ident in FUNCTIONS:
            raise f.refuse(node, f"'{ident}' is a function and needs brackets", f"Write {ident}(x).")
        if column is None:
            raise f.refuse(node, f"'{ident}' is not a column of the cohort", self.suggest(ident))
        self.resolved[node.id] = column

    def suggest(self, ident: str) -> str:
        lower = {c.lower(): c for c in self.columns}
        close = [lower[ident.lower()]] if ident.lower() in lower else []
        close += [c for c in difflib.get_close_matches(ident, self.columns, n=3, cutoff=0.6) if c not in close]
        if close:
            return "Did you mean " + " or ".join(f"'{_quoted(c)}'" for c in close) + "?"
        shown = ", ".join(_quoted(c) for c in self.columns[:12])
        more = f" and {len(self.columns) - 12} more" if len(self.columns) > 12 else ""
        return f"Columns: {shown}{more}." if self.columns else "The cohort has no columns to use."

    def binary(self, node: ast.BinOp) -> None:
        f = self.f
        if type(node.op) in REFUSED_BINARY:
            raise f.refuse(node, f"operator '{REFUSED_BINARY[type(node.op)]}' is not allowed",
                           "Use + - * / or ** with a number as the exponent.")
        if isinstance(node.op, ast.Pow):
            for side in (node.left, node.right):
                inner = next((n for n in ast.walk(side) if isinstance(n, ast.BinOp) and isinstance(n.op, ast.Pow)),
                             None)
                if inner is not None:
                    raise f.refuse(inner, "nested powers are not allowed",
                                   "Write a single power, e.g. x ** 6 instead of (x ** 2) ** 3.")
            p = constant_exponent(node.right)
            if p is None:
                raise f.refuse(node.right, "an exponent must be a plain number",
                               f"Use a number between -{MAX_EXPONENT:g} and {MAX_EXPONENT:g}, e.g. x ** 2 "
                               "or x ** 0.5.")
            if abs(p) > MAX_EXPONENT:
                raise f.refuse(node.right, f"exponents are limited to -{MAX_EXPONENT:g} to {MAX_EXPONENT:g}",
                               "Use a smaller exponent, or exp() and log().")
        self.check(node.left)
        self.check(node.right)

    def call(self, node: ast.Call) -> None:
        f = self.f
        if not isinstance(node.func, ast.Name):
            self.check(node.func)
            raise f.refuse(node.func, "only the listed functions can be called")
        ident = node.func.id
        if ident in f._names:  # a `quoted column` followed by brackets
            raise f.refuse(node.func, f"'{f._names[ident]}' is a column, not a function",
                           "Put an operator between a column and a bracket, e.g. `days followed` * (2).")
        if ident.startswith("__") or ident.endswith("__"):
            raise f.refuse(node.func, "names with double underscores are not allowed",
                           "Use column names and the listed functions only.")
        if ident not in FUNCTIONS:
            raise f.refuse(node.func, f"'{ident}' is not an allowed function",
                           f"Allowed functions: {ALLOWED_FUNCTIONS}.")
        if node.keywords:
            raise f.refuse(node.keywords[0], f"keyword arguments are not allowed in {ident}()",
                           "Give the arguments by position only.")
        for arg in node.args:
            self.check(arg)
        lo, hi, _, _ = FUNCTIONS[ident]
        count = len(node.args)
        if count < lo or (hi is not None and count > hi):
            need = f"exactly {lo}" if lo == hi else f"at least {lo}"
            raise f.refuse(node, f"{ident}() takes {need} argument{'s' if lo != 1 else ''}, found {count}",
                           "clip(x, lo, hi); min and max take two or more values; log, exp, sqrt, abs take one.")


def _quoted(column: str) -> str:
    return column if column.isidentifier() else f"`{column}`"


def number(f: Formula, node: ast.Constant) -> float:
    """A numeric literal as a finite float; anything else is refused."""
    v = node.value
    if isinstance(v, bool) or v is None or v is Ellipsis:
        raise f.refuse(node, f"'{v}' is not allowed", "Use the numbers 1 and 0.")
    if isinstance(v, str):
        raise f.refuse(node, "text in quotes is not allowed",
                       "Write column names without quotes; names with spaces go in backticks.")
    if isinstance(v, bytes):
        raise f.refuse(node, "bytes are not allowed")
    if isinstance(v, complex):
        raise f.refuse(node, "complex numbers are not allowed")
    try:
        value = float(v)
    except (OverflowError, ValueError, TypeError):
        value = float("inf")
    if not np.isfinite(value):
        raise f.refuse(node, "the number is too large", "Use numbers below 1e308.")
    return value


def constant_exponent(node: ast.AST) -> float | None:
    """The exponent when it is a plain (signed) number, else None."""
    sign = 1.0
    while isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        sign = -sign if isinstance(node.op, ast.USub) else sign
        node = node.operand
    if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)) and not isinstance(node.value, bool):
        try:
            return sign * float(node.value)
        except OverflowError:
            return float("inf")
    return None


class _Evaluator:
    """Evaluates a checked tree; a new non-finite value is an error naming rows and sub-expression."""

    def __init__(self, formula: Formula, env: dict[str, np.ndarray], n: int):
        self.f, self.env, self.n = formula, env, n

    def run(self, node: ast.AST) -> np.ndarray:
        f = self.f
        if isinstance(node, ast.Constant):
            return np.full(self.n, number(f, node))
        if isinstance(node, ast.Name):
            return self.env[f._resolved[node.id]]
        if isinstance(node, ast.UnaryOp):
            value = self.run(node.operand)
            return -value if isinstance(node.op, ast.USub) else value
        if isinstance(node, ast.BinOp):
            _, fn, why = BINARY[type(node.op)]
            args = [self.run(node.left), self.run(node.right)]
            return self.finite(node, fn(*args), args, why)
        if isinstance(node, ast.Compare):
            parts = [self.run(p) for p in [node.left, *node.comparators]]
            out = np.ones(self.n)
            for op, a, b in zip(node.ops, parts[:-1], parts[1:]):
                out = out * COMPARE[type(op)](a, b)
            return self.finite(node, out, parts, "a comparison")
        if isinstance(node, ast.Call):
            _, _, fn, why = FUNCTIONS[node.func.id]  # type: ignore[attr-defined]
            args = [self.run(a) for a in node.args]
            return self.finite(node, np.asarray(fn(*args), float), args, why)
        raise f.refuse(node, "this expression is not allowed")

    def finite(self, node: ast.AST, out: np.ndarray, args: list[np.ndarray], why: str) -> np.ndarray:
        missing = np.zeros(self.n, bool)
        for a in args:
            missing |= ~np.isfinite(a)
        out = np.where(missing, np.nan, out)
        bad = np.flatnonzero(~missing & ~np.isfinite(out))
        if len(bad):
            rows = (bad[:MAX_ERROR_ROWS] + 1).tolist()
            raise self.f.refuse(node, f"gives no finite value ({why})",
                                "Check those rows, or change the formula (e.g. clip(x, 0.001, 1000) "
                                "before log or division).", rows=rows, n_rows=len(bad))
        return out


def _columns_of(data: pd.DataFrame | Mapping[str, Any], columns: tuple[str, ...],
                key: str | None) -> tuple[dict[str, np.ndarray], int]:
    env: dict[str, np.ndarray] = {}
    n: int | None = len(data) if isinstance(data, pd.DataFrame) else None
    for c in columns:
        if c not in data:
            raise FulcrumError(f"the formula reads column '{c}', which is not in the data.", key=key, column=c,
                               hint="Add the column to the cohort file or change the formula.")
        values = as_float(data[c], c, key)
        if n is not None and len(values) != n:
            raise FulcrumError(f"column '{c}' has {len(values)} values where {n} were expected.", key=key,
                               column=c, hint="Give every column the same number of rows.")
        n = len(values)
        env[c] = values
    if n is None:
        n = next((len(np.atleast_1d(v)) for v in data.values()), 1) if isinstance(data, Mapping) else 1
    return env, n

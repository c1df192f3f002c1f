"""Read a cohort file (CSV, TSV, Excel, Parquet) and check it against the spec.

Values are read as the literal text in the file, so an arm or level called "NA" stays a label; only
empty cells are missing. Every problem is a FulcrumError naming file, column, rows and what to do.
"""
from __future__ import annotations

import difflib
import hashlib
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from . import database
from .errors import FulcrumError
from .indices.formula import formula_columns
from .intake import nfc_series, number_hint, read_file
from .readers import SHOWN, arrow_column, cell_text, check_header, cut, floats, read_columns
from .spec import OutcomeSpec, Spec

MIN_PATIENTS = 20
MIN_EVENTS = 10
REFUSE_EVENTS = 5
ONE_WORDS = {"1": 1.0, "true": 1.0, "yes": 1.0, "0": 0.0, "false": 0.0, "no": 0.0}
MISSING_WORDS = ("na", "n/a", "nan", "null", "none")
TEXT_ROLES = ("arm", "id", "allocation", "cluster", "ordinal")
MAX_MAGNITUDE = 1e12

Raw = dict[str, pd.Series]


@dataclass
class Cohort:
    """A checked cohort: only the columns the spec reads, typed, with what was noticed on the way."""

    spec: Spec
    frame: pd.DataFrame
    path: Path | None
    name: str
    sha256: str
    warnings: list[str]
    randomised: pd.Series | None
    notes: list[str]
    missing: dict[str, int] = field(default_factory=dict)
    source: dict | None = None  # a database cohort's provenance (URL without credentials, table or query, ...)

    @property
    def n(self) -> int:
        return len(self.frame)

    def complete(self, outcome: OutcomeSpec, extra: Sequence[str] = ()) -> np.ndarray:
        """Rows with every column of this outcome (and of `extra`, e.g. index columns) present."""
        cols = list(dict.fromkeys([*outcome.columns, *extra]))
        absent = [c for c in cols if c not in self.frame.columns]
        if absent:
            raise KeyError(f"columns {absent} were not loaded; pass them to load_cohort(extra_columns=...)")
        ok = np.ones(len(self.frame), bool)
        for c in cols:
            ok &= self.frame[c].notna().to_numpy()
        return ok

    def counts(self) -> pd.DataFrame:
        """Patients by arm (rows, in the spec's order) and allocation (randomised, chosen, total)."""
        arm = pd.Categorical(self.frame[self.spec.cohort.arm], categories=list(self.spec.cohort.arms))
        if self.randomised is None:
            out = pd.crosstab(arm, np.full(self.n, "total"), dropna=False)
        else:
            group = np.where(self.randomised.to_numpy(), "randomised", "chosen")
            out = pd.crosstab(arm, pd.Categorical(group, categories=["randomised", "chosen"]), dropna=False)
            out["total"] = out.sum(axis=1)
        out.index.name, out.columns.name = "arm", None
        return out


# ---------------------------------------------------------------------------------------------
# Which columns the spec reads, and in what role
# ---------------------------------------------------------------------------------------------
def column_roles(spec: Spec, extra_columns: Sequence[str] = ()) -> dict[str, list[tuple[str, str]]]:
    """Every column the spec reads -> [(role, spec key that names it), ...] in spec order."""
    roles: dict[str, list[tuple[str, str]]] = {}

    def add(column: str | None, role: str, key: str) -> None:
        if column:
            roles.setdefault(column, []).append((role, key))

    c = spec.cohort
    add(c.arm, "arm", "cohort.arm")
    add(c.id, "id", "cohort.id")
    add(c.allocation, "allocation", "cohort.allocation")
    add(c.cluster, "cluster", "cohort.cluster")
    for col in c.covariates:
        add(col, "covariate", "cohort.covariates")
    for o in spec.outcomes:
        where = f"outcomes '{o.name}'"
        if o.kind == "survival":
            add(o.time, "time", f"{where}.time")
            add(o.event, "event", f"{where}.event")
        else:
            add(o.column, {"ordinal": "ordinal", "binary": "binary"}.get(o.kind, "continuous"), f"{where}.column")
        for col in o.adjust:
            add(col, "covariate", f"{where}.adjust")
    for x in spec.indices:
        add(x.column, "index", f"indices '{x.name}'.column")
        if x.formula:
            for col in formula_columns(x.formula, key=f"indices '{x.name}'.formula"):
                add(col, "covariate", f"indices '{x.name}'.formula")
        if x.prognostic:
            for col in x.prognostic.covariates:
                add(col, "covariate", f"indices '{x.name}'.prognostic.covariates")
    if spec.selection:
        for col in spec.selection.covariates:
            add(col, "covariate", "selection.covariates")
    for col in extra_columns:
        add(col, "covariate", "extra_columns")
    return roles


# ---------------------------------------------------------------------------------------------
# Loading
# ---------------------------------------------------------------------------------------------
def load_cohort(spec: Spec, *, data: bytes | None = None, filename: str | None = None,
                extra_columns: Sequence[str] = (), allow_connect: bool = False) -> Cohort:
    """Read the cohort named by the spec (or uploaded bytes) and check it; the file is only read.
    A database server is contacted only with allow_connect."""
    if spec.cohort.database and data is None:
        return _load_database(spec, extra_columns, allow_connect)
    path = None if data is not None else Path(spec.cohort.path)
    name = filename or (path.name if path else Path(spec.cohort.path).name)
    shown = str(path) if path else name
    if path is not None:
        data = read_file(path, shown, "cohort.path")
    assert data is not None
    roles = column_roles(spec, extra_columns)
    numeric = {col for col, rs in roles.items() if not {r for r, _ in rs} & set(TEXT_ROLES)}
    notes: list[str] = []
    sheet = spec.cohort.sheet
    odd = [] if sheet is None or name.lower().endswith(".xlsx") else \
        [f"cohort.sheet = '{cut(sheet)}' was ignored: a {Path(name).suffix or 'text'} file has no sheets."]
    header, raw = read_columns(data, name, shown, sheet, roles, numeric, notes)
    raw = {h: raw[h] for h in header if h in roles}
    return _build(spec, raw, roles, path, name, shown, hashlib.sha256(data).hexdigest(), notes, odd)


def _load_database(spec: Spec, extra_columns: Sequence[str], allow_connect: bool) -> Cohort:
    """The needed columns of a database table or query, typed as the Parquet reader types them."""
    roles = column_roles(spec, extra_columns)
    numeric = {col for col, rs in roles.items() if not {r for r, _ in rs} & set(TEXT_ROLES)}
    extract = database.read(spec.cohort, list(roles), allow_connect=allow_connect,
                            check_header=lambda header, shown: check_header(header, roles, shown))
    raw = {name: arrow_column(col, name in numeric) for name, col in extract.columns.items()}
    with database.guard(database.password(spec.cohort.password_env)):
        cohort = _build(spec, raw, roles, None, extract.shown, extract.shown, extract.provenance["data_sha256"])
    cohort.source = extract.provenance
    return cohort


def read_table(data: bytes, filename: str, sheet: str | None = None) -> pd.DataFrame:
    """Every column of a cohort file as its literal text (None = empty cell), e.g. for a preview."""
    header, raw = read_columns(data, filename, filename, sheet, {}, set(), [])
    return pd.DataFrame({h: raw[h] for h in header if h in raw})


# ---------------------------------------------------------------------------------------------
# Checking and typing the columns
# ---------------------------------------------------------------------------------------------
class ColumnChecker:
    """Types each column by its role; collects warnings and notes; raises on the first real problem."""

    def __init__(self, spec: Spec, raw: Raw, roles: dict[str, list[tuple[str, str]]], file: str) -> None:
        self.spec, self.raw, self.roles, self.file = spec, raw, roles, file
        self.warnings: list[str] = []
        self.notes: list[str] = []

    def fail(self, what: str, column: str, mask: np.ndarray | None = None, hint: str | None = None) -> FulcrumError:
        rows = np.flatnonzero(mask) + 1 if mask is not None else None
        keys = [k for r, k in self.roles[column] if r == "index"] or [k for _, k in self.roles[column]]
        return FulcrumError(what, file=self.file, column=column, key=keys[0],
                            rows=None if rows is None else rows[:SHOWN],
                            n_rows=None if rows is None else len(rows), hint=hint)

    def text(self, col: str) -> pd.Series:
        """A text-role column: every reader returns these as stripped strings, None for empty cells; labels are
        put in one Unicode form (NFC), as the spec's are, so labels that look the same are the same."""
        s, changed = nfc_series(self.raw[col])
        if changed:
            self.notes.append(f"column '{col}': {changed} cell(s) were written in a decomposed Unicode form "
                              "(e.g. e + accent) and were read as the composed form, matching the spec.")
        return s

    def required(self, s: pd.Series, col: str, what: str) -> None:
        empty = s.isna().to_numpy()
        if empty.any():
            raise self.fail(f"{empty.sum()} empty cell(s); every patient needs {what}.", col, empty,
                            hint="Fill in the empty cells, or remove those patients from the file.")

    def column(self, col: str) -> pd.Series:
        kinds = {r for r, _ in self.roles[col]}
        text_roles = kinds.intersection(TEXT_ROLES)
        if text_roles and kinds - set(TEXT_ROLES):
            keys = ", ".join(k for _, k in self.roles[col])
            raise self.fail(f"the column is used both as text and as numbers ({keys}).", col,
                            hint="Use a separate column for each role.")
        if "ordinal" in kinds:
            return self.ordinal(col)
        if kinds & {"arm", "id", "allocation", "cluster"}:
            return self.text(col)
        if kinds & {"event", "binary"}:
            return self.zero_one(col, "event" in kinds)
        if "time" in kinds:
            return self.sized(col, self.time(col))
        return self.sized(col, self.number(col, coding="covariate" in kinds and "index" not in kinds))

    def sized(self, col: str, s: pd.Series) -> pd.Series:
        """Refuse numbers too large for the models to fit reliably, naming the rows."""
        v = s.to_numpy(dtype=float) if s.dtype == float else s.to_numpy(dtype=float, na_value=np.nan)
        if not len(v) or max(np.fmax.reduce(v), -np.fmin.reduce(v)) <= MAX_MAGNITUDE or np.isnan(v).all():
            return s
        size = np.abs(v)
        big = size > MAX_MAGNITUDE
        if big.any():
            raise self.fail(f"{big.sum()} value(s) are larger than {MAX_MAGNITUDE:g} in size (the largest is "
                            f"{np.nanmax(size):.3g}); numbers this large cannot be fitted reliably.", col, big,
                            hint="Correct the entries, or rescale the column (for example thousands instead of units).")
        return s

    def number(self, col: str, coding: bool = False) -> pd.Series:
        s = self.raw[col]
        if s.dtype != object:
            s = s.astype(float, copy=False)
            inf = np.isinf(s.to_numpy())
            if inf.any():
                raise self.fail(f"{inf.sum()} entries are infinite.", col, inf, hint="Enter finite numbers only.")
            return s
        values, bad = floats(s)
        present = s.notna().to_numpy()
        bad &= present
        if not bad.any():
            return pd.Series(values)
        marked = [v for v in pd.unique(s[bad]) if v.lower() in MISSING_WORDS]
        words = s.isin(marked).to_numpy() & bad
        if words.any():
            found = ", ".join(sorted(set(s[words])))
            self.warnings.append(f"column '{col}': {words.sum()} cell(s) reading {found} were taken as missing "
                                 "values.")
            s = s.where(~words, None)
            bad &= ~words
            present &= ~words
        if not bad.any():
            return pd.Series(values)
        if coding and not (present & ~bad).any():
            return self.code(col, s)
        offenders = ", ".join(f"'{cut(v)}'" for v in dict.fromkeys(s[bad].head(5)))
        raise self.fail(f"{bad.sum()} entr{'y is' if bad.sum() == 1 else 'ies are'} not numbers: {offenders}"
                        + (" (an index must be numbers)." if self.is_index(col) else "."), col, bad,
                        hint=number_hint(s[bad], self.is_index(col)))

    def is_index(self, col: str) -> bool:
        return any(r == "index" for r, _ in self.roles[col])

    def code(self, col: str, s: pd.Series) -> pd.Series:
        counts = s.value_counts()
        if len(counts) != 2:
            listed = ", ".join(f"'{cut(v)}' ({k})" for v, k in counts.head(8).items())
            raise self.fail(f"a covariate holds text with {len(counts)} different value(s): {listed}.", col,
                            hint="Code it as numbers (for example one 0/1 column per category) and name those "
                                 "columns in the spec.")
        zero, one = sorted(counts.index)
        self.notes.append(f"covariate '{col}' is text with two values: coded '{cut(one)}' = 1, "
                          f"'{cut(zero)}' = 0.")
        return s.map({zero: 0.0, one: 1.0}).astype(float)

    def zero_one(self, col: str, event: bool) -> pd.Series:
        s = self.raw[col]
        meaning = "1 = event (death), 0 = censored" if event else "1 = yes, 0 = no"
        if s.dtype != object:
            out = s.astype(float)
            bad = out.notna().to_numpy() & ~out.isin([0.0, 1.0]).to_numpy()
            found = out[bad].map(cell_text)  # as written in the file: 2, not 2.0
        else:
            low = s.str.lower()
            out = low.map(ONE_WORDS).astype(float)
            num = pd.to_numeric(s, errors="coerce")
            out = out.fillna(num.where(num.isin([0, 1])))
            bad = s.notna().to_numpy() & out.isna().to_numpy()
            found = s[bad]
            words = low.isin(["true", "false", "yes", "no"])
            if words.any() and not bad.any():
                self.notes.append(f"column '{col}': read true/yes as 1 and false/no as 0 ({meaning}).")
        if bad.any():
            counts = found.value_counts()
            listed = ", ".join(f"'{cut(v)}' ({k})" for v, k in counts.head(6).items())
            raise self.fail(f"values must be 0 or 1 ({meaning}); found {listed}.", col, bad,
                            hint="Use 0 and 1 (true/false and yes/no are also read).")
        return out

    def time(self, col: str) -> pd.Series:
        t = self.number(col)
        empty = t.isna().to_numpy()
        if empty.any():
            raise self.fail(f"{empty.sum()} patient(s) have no follow-up time.", col, empty,
                            hint="Fill in the time from the start of follow-up to the event or censoring.")
        low = (t <= 0).to_numpy()
        if low.any():
            shown = ", ".join(cell_text(float(v)) or "" for v in t[low].head(5))
            raise self.fail(f"follow-up times must be positive; found {shown}.", col, low,
                            hint="A patient who died or left on day 0 can be given a small positive time "
                                 "(e.g. 0.5 days).")
        return t

    def ordinal(self, col: str) -> pd.Series:
        levels = [lv for o in self.spec.outcomes if o.column == col and o.kind == "ordinal" for lv in o.levels]
        levels = list(dict.fromkeys(levels))
        s = self.text(col)
        bad = s.notna().to_numpy() & ~s.isin(levels).to_numpy()
        if bad.any():
            counts = s[bad].value_counts()
            first = s[bad].drop_duplicates().head(6)
            listed = ", ".join(f"'{cut(v)}' (row {i + 1}"
                               f"{', ' + str(counts[v]) + ' rows in all' if counts[v] > 1 else ''})"
                               for i, v in first.items())
            close = difflib.get_close_matches(str(first.iloc[0]), levels, n=1, cutoff=0.5)
            raise self.fail(f"{bad.sum()} value(s) are not among the declared levels {levels}: {listed}.", col, bad,
                            hint=(f"Did you mean '{close[0]}'? " if close else "") +
                            "Make every cell one of the levels exactly as written in the spec, or add the level "
                            "to 'levels'.")
        return pd.Series(pd.Categorical(s, categories=levels, ordered=True))

    def arm(self, s: pd.Series) -> None:
        col, arms = self.spec.cohort.arm, self.spec.cohort.arms
        bad = ~s.isin(arms).to_numpy()
        if bad.any():
            counts = s.fillna("(empty)").value_counts()
            listed = ", ".join(f"'{cut(v)}' ({k})" for v, k in counts.head(SHOWN).items()) + (
                f" and {len(counts) - SHOWN} other values" if len(counts) > SHOWN else "")
            odd = str(s[bad].fillna("(empty)").iloc[0])
            close = difflib.get_close_matches(odd, list(arms), n=1, cutoff=0.5)
            raise self.fail(f"arm values must be '{arms[0]}' or '{arms[1]}'; the column holds {listed}.", col, bad,
                            hint=(f"'{cut(odd)}' looks like '{close[0]}'. " if close else "") +
                            "Make every cell one of the two arms, or change cohort.arms to the labels in the file.")
        for a in arms:
            if not (s == a).any():
                raise self.fail(f"no patient is in arm '{a}'; every patient is in '{s.iloc[0]}'.", col,
                                hint="A comparison needs patients in both arms: check the file and cohort.arms.")

    def ids(self, s: pd.Series) -> None:
        if s.is_unique:
            return
        dup = s.duplicated(keep=False).to_numpy()
        if dup.any():
            shown = ", ".join(f"'{cut(v)}'" for v in dict.fromkeys(s[dup].head(10)))
            raise self.fail(f"{s[dup].nunique()} identifier(s) appear more than once: {shown}.",
                            self.spec.cohort.id, dup, hint="Give every patient one row with a unique identifier.")

    def allocation(self, s: pd.Series) -> pd.Series:
        col, marker = self.spec.cohort.allocation, self.spec.cohort.randomised
        is_rand = (s == marker)
        counts = s.value_counts()
        self.notes.append(f"allocation column '{col}': "
                          + ", ".join(f"'{cut(v)}' {k}" for v, k in counts.head(SHOWN).items())
                          + (f" and {len(counts) - SHOWN} other values" if len(counts) > SHOWN else "")
                          + f"; '{marker}' marks randomised patients, every other value chosen.")
        if not is_rand.any():
            close = [v for v in counts.index if str(v).strip().lower() == marker.lower()]
            if close:
                raise self.fail(f"no cell reads '{marker}' exactly, but {counts[close[0]]} read "
                                f"'{cut(close[0])}'.", col,
                                hint=f'Set randomised = "{cut(close[0])}" in [cohort], or correct the file.')
            self.warnings.append(f"no patient is marked '{marker}' in column '{col}', so every patient counts as "
                                 "chosen and randomised-only analyses are not possible.")
        return is_rand


def _build(spec: Spec, raw: Raw, roles: dict[str, list[tuple[str, str]]], path: Path | None, name: str,
           file: str, sha: str, notes: Sequence[str] = (), warnings: Sequence[str] = ()) -> Cohort:
    chk = ColumnChecker(spec, raw, roles, file)
    chk.notes.extend(notes)
    chk.warnings.extend(warnings)
    c = spec.cohort
    frame = pd.DataFrame({col: chk.column(col) for col in raw}, copy=False)  # the columns are new: no copy
    missing = {col: int(frame[col].isna().sum()) for col in frame.columns}
    for col, what in ((c.arm, "an arm"), (c.id, "an identifier"), (c.allocation, "an allocation"),
                      (c.cluster, "a cluster")):
        if col and missing[col]:
            chk.required(frame[col], col, what)
    chk.arm(frame[c.arm])
    if c.id:
        chk.ids(frame[c.id])
    randomised = chk.allocation(frame[c.allocation]) if c.allocation else None
    for o in spec.outcomes:
        if o.bounds:
            out = ((frame[o.column] < o.bounds[0]) | (frame[o.column] > o.bounds[1])).to_numpy()
            if out.any():
                shown = ", ".join(cell_text(float(v)) or "" for v in frame[o.column][out].head(5))
                raise chk.fail(f"{out.sum()} value(s) lie outside the declared bounds {list(o.bounds)}: {shown}.",
                               o.column, out, hint=f"Correct the values, or the bounds of outcome '{o.name}'.")
    for col, k in missing.items():
        needed = [key for _, key in roles[col] if key != "cohort.covariates"]
        if k and k == len(frame) and needed:
            raise FulcrumError(f"every cell of the column is empty, so no patient has a value for {needed[0]}.",
                               file=file, column=col, key=needed[0],
                               hint="Fill in the column, or name the column that holds these values in the spec.")
    empties = [f"{col} {k}" for col, k in missing.items() if k]
    if empties:
        chk.notes.append("empty cells per column: " + ", ".join(empties) + ".")
    cohort = Cohort(spec=spec, frame=frame, path=path, name=name, sha256=sha, warnings=chk.warnings,
                    randomised=randomised, notes=chk.notes, missing=missing)
    index_cols = [col for col, rs in roles.items()
                  if any(r == "index" or k == "extra_columns" or k.endswith(".formula") for r, k in rs)]
    in_arm = {a: (frame[c.arm] == a).to_numpy() for a in c.arms}
    dead = _died(cohort)
    for outcome in spec.outcomes:
        _outcome_checks(cohort, outcome, index_cols, in_arm, dead, file)
    return cohort


def _outcome_checks(cohort: Cohort, outcome: OutcomeSpec, index_cols: list[str], in_arm: dict[str, np.ndarray],
                    dead: np.ndarray | None, file: str) -> None:
    """Count patients left out for missing values, then apply the minimum-data rules per arm."""
    spec, frame = cohort.spec, cohort.frame
    used = list(dict.fromkeys([*outcome.columns, *index_cols]))
    ok = cohort.complete(outcome, index_cols)
    if not ok.all():
        why = ", ".join(f"{c} {int(frame[c].isna().sum())}" for c in used if frame[c].isna().any())
        per_arm = ", ".join(f"{a} {int(((~ok) & in_arm[a]).sum())}" for a in spec.cohort.arms)
        text = (f"outcome '{outcome.name}': {int((~ok).sum())} of {len(ok)} patients are left out for missing "
                f"values ({why}): {per_arm}.")
        if outcome.among_survivors and dead is not None:
            expected = (~ok) & dead & frame[outcome.column].isna().to_numpy()
            cohort.notes.append(f"outcome '{outcome.name}' is measured among survivors: {int(expected.sum())} "
                                "patients who died have no value, as expected.")
            others = (~ok) & ~expected
            if others.any():
                per_arm = ", ".join(f"{a} {int((others & in_arm[a]).sum())}" for a in spec.cohort.arms)
                cohort.warnings.append(f"outcome '{outcome.name}': besides those who died, {int(others.sum())} "
                                       f"patients are left out for missing values ({why}): {per_arm}.")
        else:
            cohort.warnings.append(text)
    for a in spec.cohort.arms:
        rows = ok & in_arm[a]
        n, events, word = _events(frame, outcome, rows)
        label = f"outcome '{outcome.name}' in arm '{a}'"
        if outcome.kind == "ordinal" and _ordinal_checks(cohort, outcome, frame[outcome.column][rows], label, file):
            continue
        if events < REFUSE_EVENTS:
            raise FulcrumError(f"{label} has only {events} {word} among {n} patients with data; at least "
                               f"{REFUSE_EVENTS} are needed, so this analysis is refused.", file=file,
                               column=outcome.columns[0], key=f"outcomes '{outcome.name}'",
                               hint="Remove this outcome from the spec, combine levels, or use a larger cohort.")
        if n < MIN_PATIENTS:
            cohort.warnings.append(f"{label} has only {n} patients with data (fewer than {MIN_PATIENTS}); its "
                                   "curve will be very uncertain.")
        elif events < MIN_EVENTS and word != "patients":
            cohort.warnings.append(f"{label} has only {events} {word} (fewer than {MIN_EVENTS}); its curve will "
                                   "be very uncertain.")


def _ordinal_checks(cohort: Cohort, outcome: OutcomeSpec, y: pd.Series, label: str, file: str) -> bool:
    """Ordinal outcomes: the proportional-odds model is fitted whenever its levels support it (at least
    REFUSE_EVENTS patients outside the most common level); only P(favourable) is refused, when one side of the
    favourable split is empty, and a thin side is a warning. Every refusal names the key that fixes it."""
    n = len(y)
    counts = y.value_counts()
    key = f"outcomes '{outcome.name}'"
    if n - (int(counts.max()) if len(counts) else 0) < REFUSE_EVENTS:
        raise FulcrumError(f"{label}: only {n - (int(counts.max()) if len(counts) else 0)} of {n} patients are "
                           f"outside the most common level, too few for the proportional-odds model (at least "
                           f"{REFUSE_EVENTS} are needed).", file=file, column=outcome.column, key=f"{key}.levels",
                           hint="Combine rare levels in `levels` (and the data), or use a larger cohort.")
    fav = int(y.isin(outcome.favourable).sum())
    side = min(fav, n - fav)
    if side == 0:
        best = _suggest_split(outcome, y)
        raise FulcrumError(f"{label}: every patient is on the {'favourable' if fav else 'unfavourable'} side of "
                           f"the favourable split, so P({' or '.join(outcome.favourable)}) cannot be estimated.",
                           file=file, column=outcome.column, key=f"{key}.favourable",
                           hint="Set `favourable` to a split with patients on both sides"
                                + (f", e.g. favourable = {list(best)}." if best else "."))
    if side < MIN_EVENTS:
        cohort.warnings.append(f"{label} has only {side} patients on the {'un' if fav > n - fav else ''}favourable "
                               f"side of the favourable split; the proportional-odds model uses every level, but "
                               "P(favourable) there is very uncertain. `favourable` moves the split.")
    elif n < MIN_PATIENTS:
        cohort.warnings.append(f"{label} has only {n} patients with data (fewer than {MIN_PATIENTS}); its "
                               "curve will be very uncertain.")
    return True


def _suggest_split(outcome: OutcomeSpec, y: pd.Series) -> tuple[str, ...]:
    """The best-first run of levels that leaves the most patients on the smaller side (empty when none does)."""
    best, most = (), 0
    for k in range(1, len(outcome.levels)):
        head = outcome.levels[:k]
        inside = int(y.isin(head).sum())
        if min(inside, len(y) - inside) > most:
            best, most = head, min(inside, len(y) - inside)
    return best


def _events(frame: pd.DataFrame, outcome: OutcomeSpec, rows: np.ndarray) -> tuple[int, int, str]:
    """(patients, events, what the events are) for the minimum-data rules."""
    n = int(rows.sum())
    if outcome.kind == "survival":
        return n, int(frame[outcome.event].to_numpy()[rows].sum()), "deaths (events)"
    if outcome.kind == "binary":
        ones = int(frame[outcome.column].to_numpy()[rows].sum())
        return n, min(ones, n - ones), "patients in the rarer outcome group"
    if outcome.kind == "ordinal":
        fav = int(frame[outcome.column][rows].isin(outcome.favourable).sum())
        return n, min(fav, n - fav), "patients in the smaller of the favourable and unfavourable groups"
    return n, n, "patients"


def _died(cohort: Cohort) -> np.ndarray | None:
    """Who died during follow-up, from the first survival outcome; None without one."""
    for o in cohort.spec.outcomes:
        if o.kind == "survival":
            return (cohort.frame[o.event] == 1).to_numpy()
    return None

"""The bad-input catalogue: every hostile, broken or odd input ends in a FulcrumError that names what and
where, or in results that carry a warning; never a silent NaN in the results JSON, never another exception.

`pytest.raises(FulcrumError)` lets any other exception type through, so it fails the test. Expected row
numbers, line numbers, byte offsets and counts are recomputed from the raw cells or bytes with pandas,
Python's csv module or bytes.index (reference tools), never typed in. The cohorts are the project's
invented demo data (conftest.small_text), edited case by case.
"""
from __future__ import annotations

import csv
import io
import json
import os
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from explorer import results
from explorer.analysis import analyse
from explorer.cli import main
from explorer.cohort import load_cohort
from explorer.errors import FulcrumError
from explorer.spec import load_spec

pytestmark = pytest.mark.bad_input

OUTCOMES = {
    "alive": '[[outcomes]]\nname = "alive"\nkind = "survival"\ntime = "days_followed"\nevent = "died"\n'
             'horizon = 365\n',
    "function": '[[outcomes]]\nname = "function"\nkind = "ordinal"\ncolumn = "function_6m"\n'
                'levels = ["independent", "home_with_help", "care_home", "bedbound", "dead"]\n'
                'favourable = ["independent", "home_with_help"]\n',
    "home": '[[outcomes]]\nname = "home"\nkind = "binary"\ncolumn = "home"\n',
    "qol": '[[outcomes]]\nname = "qol"\nkind = "continuous"\ncolumn = "qol_6m"\n',
}
COHORT = ('[cohort]\npath = "demo_cohort.csv"\nid = "pid"\narm = "arm"\narms = ["laparotomy", "non-operative"]\n\n')
CFS = '[[indices]]\nname = "cfs"\ncolumn = "cfs"\n'
ARMS = ("laparotomy", "non-operative")


def spec_text(*outcomes: str, index: str = CFS, extra: str = "") -> str:
    """A small spec over the demo columns: the named outcomes (all four by default) along one index."""
    blocks = [OUTCOMES[o] for o in (outcomes or OUTCOMES)]
    return COHORT + "\n".join(blocks) + "\n" + index + extra


@pytest.fixture
def text(small_text: pd.DataFrame) -> pd.DataFrame:
    """The 400-patient invented cohort as text cells, plus a 0/1 'home' column for a binary outcome."""
    t = small_text.copy()
    t["home"] = np.where(t["function_6m"].isin(["independent", "home_with_help"]), "1", "0")
    return t


def refused(fn, *args, **kw) -> FulcrumError:
    """The FulcrumError that fn raises (any other exception type fails the test)."""
    with pytest.raises(FulcrumError) as info:
        fn(*args, **kw)
    assert str(info.value).strip()
    return info.value


def analysed(spec) -> tuple[dict, list[str]]:
    """analyse() end to end; the JSON has no NaN or infinity and no silent gaps; returns (doc, all warnings)."""
    doc = json.loads(results.dumps(analyse(spec).document))  # allow_nan=False raises on NaN / inf
    results.validate(doc)
    for row in doc["results"]:
        for p in row["curve"]:
            assert None not in (p["x"], p["first"], p["second"], p["difference"], *p["difference_ci"]), row["outcome"]
        assert all(b["x"] is not None for b in row["break_even"])
    warnings = doc["warnings"] + [w for row in doc["results"] for w in row["warnings"]]
    return doc, warnings


def cli_refuses(spec_path, capsys) -> str:
    """`fulcrum analyse SPEC` exits 2 with one message on stderr and no traceback; returns the message."""
    capsys.readouterr()
    assert main(["analyse", str(spec_path), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("fulcrum: ") and "Traceback" not in err and "What to do" in err
    return err


def rows_where(mask: pd.Series) -> list[int]:
    """1-based data rows where a pandas mask holds (the reference for err.rows)."""
    return (np.flatnonzero(mask.to_numpy()) + 1).tolist()


# ============================================================================================ files
def test_empty_upload_names_the_upload(write_case, text):
    spec = write_case(text, spec_text("alive"))
    err = refused(load_cohort, spec, data=b"", filename="ward_export.csv")
    assert err.file == "ward_export.csv" and "empty (0 bytes)" in str(err)


def test_pdf_saved_as_csv_is_named_as_a_pdf(write_case, text):
    spec = write_case(b"%PDF-1.7\n%\xe2\xe3\xcf\xd3\n1 0 obj\n<< /Type /Catalog >>\nendobj\n", spec_text("alive"))
    err = refused(analyse, spec)
    assert "this is a PDF document, not a text table" in str(err) and "cohort.csv" in str(err)


def test_random_binary_junk_names_the_first_zero_byte(write_case):
    junk = np.random.default_rng(7).bytes(4096)
    assert not junk.startswith((b"\xff\xfe", b"\xfe\xff", b"PK", b"PAR1", b"%PDF", b"\xd0\xcf"))
    zero = junk.index(b"\x00")  # bytes.index: the reference offset
    err = refused(analyse, write_case(junk, spec_text("alive")))
    assert f"a zero byte at byte {zero}" in str(err)


def test_semicolon_file_through_the_cli_exits_2(write_case, text, tmp_path, capsys):
    write_case(text.to_csv(index=False, sep=";"), spec_text("alive"))
    err = cli_refuses(tmp_path / "spec.toml", capsys)
    assert "wrong delimiter" in err and "semicolons" in err and "cohort.csv" in err


def test_windows_1252_text_names_the_byte_and_line(write_case, text):
    text.loc[6, "hospital"] = "St Mary\u2019s"
    data = text.to_csv(index=False).encode("cp1252")
    spec = write_case(data, spec_text("alive"))
    offset = data.index(b"\x92")  # the cp1252 apostrophe, found by bytes.index (reference)
    line = data[:offset].count(b"\n") + 1
    err = refused(load_cohort, spec)
    assert f"byte {offset} (line {line}) is 0x92" in str(err)
    assert "UTF-8" in err.hint


def test_byte_order_mark_and_crlf_give_the_same_results(write_case, text, tmp_path):
    plain, _ = analysed(write_case(text.to_csv(index=False), spec_text(), name="plain.csv"))
    marked = b"\xef\xbb\xbf" + text.to_csv(index=False, lineterminator="\r\n").encode("utf-8")
    bom, _ = analysed(write_case(marked, spec_text(), name="bom.csv"))
    for doc in (plain, bom):
        doc["tool"].pop("generated_at")
        doc["inputs"].pop("data_sha256")
        doc["inputs"].pop("spec_sha256")
        doc["inputs"].pop("spec_canonical_sha256")
        doc.pop("spec")
    assert bom == plain


def test_old_mac_line_endings_load_like_unix_ones(write_case, text):
    unix = load_cohort(write_case(text.to_csv(index=False), spec_text(), name="unix.csv"))
    mac = load_cohort(write_case(text.to_csv(index=False, lineterminator="\r"), spec_text(), name="mac.csv"))
    pd.testing.assert_frame_equal(mac.frame, unix.frame)


def test_one_enormous_line_gives_a_short_message(write_case):
    line = ",".join(f"c{i}" for i in range(200_000))  # 1.3 MB, one line, no newline
    err = refused(analyse, write_case(line, spec_text("alive")))
    assert "the file has no column 'arm'" in str(err) and "no column 'pid'" in str(err)
    assert "Columns in the file: c0, c1," in err.hint and "c29 ..." in err.hint and "c30," not in err.hint
    assert len(str(err)) < 2000


def test_enormous_cell_in_a_used_column_is_cut_in_the_message(write_case, text):
    text.loc[2, "arm"] = "x" * 200_000
    err = refused(analyse, write_case(text, spec_text("alive")))
    assert err.column == "arm" and err.rows == [3] and "'xxxxxxxx" in str(err) and "...'" in str(err)
    assert len(str(err)) < 2000


def test_enormous_cell_in_an_unused_column_still_loads(write_case, text):
    plain = load_cohort(write_case(text, spec_text(), name="plain.csv"))
    text.loc[4, "hospital"] = "h" * 3_000_000  # longer than Arrow's 1 MB read block
    big = load_cohort(write_case(text, spec_text(), name="big.csv"))
    pd.testing.assert_frame_equal(big.frame, plain.frame)


def test_enormous_extra_value_names_its_line(write_case, text):
    lines = text.to_csv(index=False).splitlines()
    lines[4] += "," + "y" * 200_000
    err = refused(analyse, write_case("\n".join(lines) + "\n", spec_text("alive")))
    assert f"line 5 holds a value longer than {csv.field_size_limit():,} characters" in str(err)


def test_unclosed_quote_names_the_line_where_the_record_starts(write_case, text):
    lines = text.to_csv(index=False).splitlines()
    lines[9] = '"' + lines[9]
    err = refused(analyse, write_case("\n".join(lines) + "\n", spec_text("alive")))
    assert f"line 10 has 1 values but the header names {len(text.columns)} columns" in str(err)
    assert f"runs on to line {len(lines)}: a quote is probably never closed" in str(err) and err.rows == [9]


def test_duplicate_headers_after_trimming_spaces(write_case, text):
    data = text.to_csv(index=False).replace("lactate,", " cfs ,", 1)
    err = refused(analyse, write_case(data, spec_text("alive")))
    assert "the header repeats column names: 'cfs'" in str(err) and err.column == "cfs"


def test_formula_cells_in_a_numeric_column_are_text_and_refused(write_case, text):
    cells = {3: "=1+1", 8: "@SUM(A1:A2)", 11: "+1+1", 20: "=cmd|' /C calc'!A0"}
    for i, v in cells.items():
        text.loc[i, "cfs"] = v
    err = refused(analyse, write_case(text, spec_text("alive")))
    assert "4 entries are not numbers: '=1+1', '@SUM(A1:A2)', '+1+1', '=cmd|' /C calc'!A0'" in str(err)
    assert err.column == "cfs" and err.rows == [i + 1 for i in cells]


def test_a_signed_number_is_a_number(write_case, text):
    text.loc[5, "cfs"] = "+" + text.loc[5, "cfs"]
    cohort = load_cohort(write_case(text, spec_text("alive")))
    assert cohort.frame["cfs"].iloc[5] == float(text.loc[5, "cfs"])  # Python's float() reads '+7' as 7 (reference)


def test_formula_looking_labels_and_ids_are_read_literally(write_case, text):
    first, second = "=cmd|' /C calc'!A0", "@SUM(1+1)"
    text["arm"] = text["arm"].map({"laparotomy": first, "non-operative": second})
    text.loc[0, "pid"] = '=HYPERLINK("http://example.invalid","x")'
    spec = write_case(text, spec_text("alive").replace('arms = ["laparotomy", "non-operative"]',
                                                       'arms = ["=cmd|\' /C calc\'!A0", "@SUM(1+1)"]'))
    doc, _ = analysed(spec)
    assert doc["arms"] == [first, second]
    assert {b["favours_below"] for r in doc["results"] for b in r["break_even"]} <= {first, second}
    assert load_cohort(spec).frame["pid"].iloc[0] == text.loc[0, "pid"]


def test_formula_looking_ordinal_value_is_listed_literally(write_case, text):
    text.loc[12, "function_6m"] = "=1+1"
    err = refused(analyse, write_case(text, spec_text("function")))
    assert "'=1+1' (row 13)" in str(err) and err.column == "function_6m"


def test_xlsx_formula_cells_are_never_evaluated(write_case, text, tmp_path):
    book = openpyxl.Workbook()
    ws = book.active
    ws.append(list(text.columns))
    for row in text.itertuples(index=False):
        ws.append(list(row))
    col = list(text.columns).index("cfs") + 1
    for r in (3, 7):  # sheet rows 3 and 7 = data rows 2 and 6
        ws.cell(row=r, column=col, value="=2+3")
    path = tmp_path / "book.xlsx"
    book.save(path)
    assert openpyxl.load_workbook(path)["Sheet"].cell(row=3, column=col).data_type == "f"  # openpyxl: a formula
    cohort = load_cohort(write_case(path.read_bytes(), spec_text("alive"), name="book.xlsx"))
    assert cohort.frame["cfs"].iloc[[1, 5]].isna().all()
    assert any("left out for missing values (cfs 2)" in w for w in cohort.warnings)


def test_xlsx_without_a_header_row(write_case, text, tmp_path):
    book = openpyxl.Workbook()
    ws = book.active
    ws.append([None] * 3)
    ws.append(list(text.columns))
    path = tmp_path / "book.xlsx"
    book.save(path)
    err = refused(analyse, write_case(path.read_bytes(), spec_text("alive"), name="book.xlsx"))
    assert "its first row has no column names" in str(err)


def test_xlsx_with_several_sheets_through_the_cli(write_case, text, tmp_path, capsys):
    path = tmp_path / "book.xlsx"
    with pd.ExcelWriter(path) as xw:
        text.to_excel(xw, sheet_name="Ward A", index=False)
        text.to_excel(xw, sheet_name="Ward B", index=False)
    write_case(path.read_bytes(), spec_text("alive"), name="book.xlsx")
    err = cli_refuses(tmp_path / "spec.toml", capsys)
    assert "the workbook has 2 sheets: 'Ward A', 'Ward B'" in err and 'sheet = "Ward A"' in err


def test_ragged_tsv_row(write_case, text):
    lines = text.to_csv(index=False, sep="\t").splitlines()
    lines[30] += "\textra"
    err = refused(analyse, write_case("\n".join(lines) + "\n", spec_text("alive"), name="c.tsv"))
    assert f"line 31 has {len(text.columns) + 1} values but the header names {len(text.columns)}" in str(err)
    assert err.rows == [30]


def test_header_only_tsv(write_case, text):
    err = refused(analyse, write_case("\t".join(text.columns) + "\n", spec_text("alive"), name="c.tsv"))
    assert "column names but no data rows" in str(err) and "c.tsv" in str(err)


def test_parquet_that_is_really_csv_through_the_cli(write_case, text, tmp_path, capsys):
    write_case(text.to_csv(index=False), spec_text("alive"), name="cohort.parquet")
    err = cli_refuses(tmp_path / "spec.toml", capsys)
    assert "this is not a Parquet file" in err and "cohort.parquet" in err


def test_zero_byte_after_the_header(write_case, text):
    data = text.to_csv(index=False).encode()
    data = data[:300] + b"\x00" + data[300:]
    err = refused(analyse, write_case(data, spec_text("alive")))
    assert f"a zero byte at byte {data.index(bytes(1))}" in str(err)


def test_cohort_path_that_is_a_folder(write_case, text):
    err = refused(analyse, write_case(text, spec_text("alive").replace('"demo_cohort.csv"', '"."')))
    assert "the cohort path is a folder, not a file" in str(err) and err.key == "cohort.path"


def test_infinite_and_overflowing_numbers_are_refused(write_case, text):
    for i, v in ((2, "inf"), (9, "1e999"), (15, "-Infinity")):
        text.loc[i, "cfs"] = v
    err = refused(analyse, write_case(text, spec_text("alive")))
    assert "3 entries are not numbers: 'inf', '1e999', '-Infinity'" in str(err) and err.rows == [3, 10, 16]


def test_numbers_beyond_1e12_are_refused(write_case, text):
    text.loc[[4, 40], "cfs"] = ["3e300", "-2e13"]
    err = refused(analyse, write_case(text, spec_text("alive")))
    assert "2 value(s) are larger than 1e+12 in size (the largest is 3e+300)" in str(err)
    assert err.column == "cfs" and err.rows == [5, 41] and "rescale" in err.hint


# ============================================================================================ specs
def test_spec_without_a_cohort_section(write_case, text):
    err = refused(write_case, text, spec_text("alive").replace(COHORT, ""))
    assert "the spec has no [cohort] section" in str(err) and "spec.toml" in str(err) and err.key == "cohort"


def test_spec_missing_a_required_key(write_case, text):
    err = refused(write_case, text, spec_text("alive").replace('arm = "arm"\n', ""))
    assert "[cohort] is missing the required key 'arm'" in str(err) and err.key == "cohort.arm"


@pytest.mark.parametrize("old,new,key,words", [
    ('arms = ["laparotomy", "non-operative"]', 'arms = "laparotomy, non-operative"', "cohort.arms",
     "should be a list of texts"),
    ('column = "cfs"', 'column = "cfs"\ndiscrete = "yes"', "indices[1].discrete", "should be true or false"),
    ('column = "cfs"', 'column = "cfs"\n\n[analysis]\nreplicates = 200.5', "analysis.replicates",
     "should be a whole number"),
    ('column = "cfs"', 'column = "cfs"\n\n[analysis]\nmargin = "0.1"', "analysis.margin", "should be a finite number"),
    ('column = "cfs"', 'column = "cfs"\n\n[analysis]\nlevel = 1.5', "analysis.level", "is 1.5, outside 0.5 to 0.999"),
    ('horizon = 365', 'horizon = 365\nmargin = 1.2', "outcomes 'alive'.margin",
     "the difference of probabilities cannot reach 1"),
])
def test_spec_values_of_the_wrong_type_or_range(write_case, text, old, new, key, words):
    err = refused(write_case, text, spec_text("alive").replace(old, new, 1))
    assert words in str(err) and err.key == key and "spec.toml" in str(err)


def test_unknown_key_in_an_index_suggests_the_right_one(write_case, text):
    err = refused(write_case, text, spec_text("alive").replace('column = "cfs"', 'colum = "cfs"'))
    assert "unknown key 'colum' in [indices[1]]" in str(err) and "Did you mean 'column'?" in err.hint


def test_values_name_an_unknown_outcome(write_case, text):
    extra = '\n[values]\noutcome = "functon"\n'
    err = refused(write_case, text, spec_text("alive", "function", extra=extra))
    assert "'values.outcome' names 'functon', which the spec does not define" in str(err)
    assert "Did you mean 'function'?" in err.hint


def test_prognostic_index_names_an_unknown_outcome(write_case, text):
    index = '[[indices]]\nname = "risk"\nprognostic = { outcome = "survival", covariates = ["age", "cfs"] }\n'
    err = refused(write_case, text, spec_text("alive", index=index))
    assert "names 'survival', which the spec does not define" in str(err) and "prognostic.outcome" in err.key


def test_pairwise_priority_names_an_unknown_outcome(write_case, text):
    err = refused(write_case, text, spec_text("alive", extra='\n[pairwise]\npriority = ["alive", "qol"]\n'))
    assert "'pairwise.priority' names 'qol'" in str(err) and "Known names: alive" in err.hint


def test_index_column_missing_from_the_file(write_case, text):
    spec = write_case(text, spec_text("alive", index=CFS.replace('column = "cfs"', 'column = "frailty"')))
    err = refused(analyse, spec)
    assert "no column 'frailty' (named by indices 'cfs'.column)" in str(err) and err.column == "frailty"


@pytest.mark.parametrize("values,key,words", [
    ("weights = { independent = 1.0, bedridden = 0.1 }", "values.weights.bedridden",
     "a weight is given for 'bedridden', which is not a level of 'function'"),
    ("ranges = { independant = [0.9, 1.0] }", "values.ranges.independant",
     "a range is given for 'independant', which is not a level of 'function'"),
    ('acceptable = ["home"]', "values.acceptable", "'values.acceptable' names 'home', which is not a level"),
])
def test_values_for_levels_that_do_not_exist(write_case, text, values, key, words):
    extra = f'\n[values]\noutcome = "function"\n{values}\n'
    err = refused(write_case, text, spec_text("alive", "function", extra=extra))
    assert words in str(err) and err.key == key


def test_horizon_beyond_follow_up_warns(write_case, text):
    doc, warnings = analysed(write_case(text, spec_text("alive").replace("horizon = 365", "horizon = 730")))
    last = text.assign(t=text["days_followed"].astype(float)).groupby("arm")["t"].max()  # pandas reference
    for arm in ARMS:
        assert (f"The horizon 730 lies beyond the last follow-up time in arm '{arm}' ({last[arm]:g}); its survival "
                "curve is carried flat from there.") in " ".join(warnings)


def test_few_patients_followed_to_the_horizon_warns(write_case, text):
    alive = text["died"] == "0"
    kept = text[alive].groupby("arm").head(6).index
    text.loc[alive & ~text.index.isin(kept), "days_followed"] = "100"  # most survivors censored early
    doc, warnings = analysed(write_case(text, spec_text("alive")))
    t = text["days_followed"].astype(float)
    for arm in ARMS:
        n = int(((t >= 365) & (text["arm"] == arm)).sum())  # pandas reference count
        assert n < 10
        assert (f"Only {n} patients are still followed at the horizon 365 in arm '{arm}' (fewer than 10)"
                in " ".join(warnings))


@pytest.mark.parametrize("formula,words", [
    ("lactate - (albumin / 10", "'(' was never closed"),
    ("lactate ^ 2", "operator '^' is not allowed"),
    ("max(lactate)", "max() takes at least 2 arguments, found 1"),
    ("lactate if cfs > 4 else 0", "conditional expressions (a if c else b) are not allowed"),
])
def test_index_formula_errors_name_the_formula_and_key(write_case, text, formula, words):
    index = f'[[indices]]\nname = "phys"\nformula = "{formula}"\n'
    err = refused(analyse, write_case(text, spec_text("alive", index=index)))
    assert words in str(err) and f"in formula '{formula}'" in str(err) and "formula" in err.key


def test_formula_with_an_unknown_column_names_the_index(write_case, text):
    index = '[[indices]]\nname = "phys"\nformula = "lactat - albumin / 10"\n'
    err = refused(analyse, write_case(text, spec_text("alive", index=index)))
    assert "no column 'lactat' (named by indices 'phys'.formula) - did you mean 'lactate'?" in str(err)


def test_formula_code_is_refused_before_anything_runs(write_case, text, tmp_path):
    marker = tmp_path / "ran"
    index = f'[[indices]]\nname = "phys"\nformula = "__import__(\'os\').system(\'touch {marker}\')"\n'
    err = refused(analyse, write_case(text, spec_text("alive", index=index)))
    assert "attribute access is not allowed" in str(err) and not marker.exists()


def test_formula_division_by_zero_names_the_rows(write_case, text):
    index = '[[indices]]\nname = "phys"\nformula = "age / (cfs - 5)"\n'
    err = refused(analyse, write_case(text, spec_text("alive", index=index)))
    zero = rows_where(text["cfs"].astype(float) == 5)  # pandas reference
    assert "gives no finite value (division by zero)" in str(err)
    assert err.rows == zero[:len(err.rows)] and err.n_rows == len(zero)


def test_formula_with_values_too_large_to_fit(write_case, text):
    index = '[[indices]]\nname = "phys"\nformula = "exp(age)"\n'
    err = refused(analyse, write_case(text, spec_text("alive", index=index)))
    assert "the index reaches" in str(err) and "values beyond 1e+12 in size cannot be fitted reliably" in str(err)


def test_toml_syntax_error_names_the_line(write_case, text):
    broken = spec_text("alive").replace("horizon = 365", "horizon = 365 days")
    line = broken.splitlines().index("horizon = 365 days") + 1
    err = refused(write_case, text, broken)
    assert "the spec is not valid TOML" in str(err) and f"line {line}" in str(err)


def test_deeply_nested_toml(write_case, text):
    err = refused(write_case, text, spec_text("alive") + "\n[analysis]\nseed = " + "[" * 5000 + "]" * 5000 + "\n")
    assert "nests lists or tables too deeply" in str(err)


def test_spec_path_that_is_a_folder(tmp_path):
    err = refused(load_spec, tmp_path)
    assert "the spec path is a folder, not a file" in str(err)


def test_spec_that_is_not_utf8(tmp_path):
    data = spec_text("alive").replace('"arm"', '"bras\u00e9"').encode("latin-1")
    (tmp_path / "spec.toml").write_bytes(data)
    offset = data.index("\u00e9".encode("latin-1"))
    err = refused(load_spec, tmp_path / "spec.toml")
    assert f"the spec is not UTF-8 text (byte {offset})" in str(err)


# ============================================================================================ statistics
def test_one_arm_only(write_case, text):
    err = refused(analyse, write_case(text[text["arm"] == "laparotomy"], spec_text()))
    assert "no patient is in arm 'non-operative'; every patient is in 'laparotomy'" in str(err)


def test_no_events_in_one_arm(write_case, text):
    text.loc[text["arm"] == "non-operative", "died"] = "0"
    err = refused(analyse, write_case(text, spec_text("alive")))
    n = int((text["arm"] == "non-operative").sum())
    assert f"outcome 'alive' in arm 'non-operative' has only 0 deaths (events) among {n} patients" in str(err)


def test_every_patient_censored(write_case, text):
    text["died"] = "0"
    err = refused(analyse, write_case(text, spec_text("alive")))
    assert "has only 0 deaths (events)" in str(err) and err.column == "days_followed"


def test_every_patient_in_one_ordinal_level(write_case, text):
    text["function_6m"] = "care_home"
    err = refused(analyse, write_case(text, spec_text("function")))
    assert "outcome 'function' in arm 'laparotomy': only 0 of" in str(err) and "`levels`" in err.hint


def test_an_ordinal_level_nobody_reached_warns(write_case, text):
    lap = text["arm"] == "laparotomy"
    text.loc[lap, "function_6m"] = text.loc[lap, "function_6m"].replace({"care_home": "bedbound"})
    _, warnings = analysed(write_case(text, spec_text("function")))
    assert ("No patient in arm 'laparotomy' is in level(s) care_home; the model uses the levels seen in this arm "
            "and gives the others probability 0.") in " ".join(warnings)


def test_perfect_separation_in_one_arm_warns(write_case, text):
    lap = text["arm"] == "laparotomy"
    text.loc[lap, "home"] = np.where(text.loc[lap, "cfs"].astype(float) <= 5, "1", "0")
    _, warnings = analysed(write_case(text, spec_text("home")))
    assert ("Logistic regression in arm 'laparotomy' shows separation: some index values predict the outcome "
            "perfectly") in " ".join(warnings)


def test_constant_index(write_case, text):
    text["cfs"] = "4"
    err = refused(analyse, write_case(text, spec_text("alive")))
    assert "index 'cfs' does not vary: every patient with a value has 4" in str(err)


def test_arms_that_do_not_overlap_along_the_index_warn(write_case, text):
    cfs = text["cfs"].astype(int)
    text["cfs"] = np.where(text["arm"] == "laparotomy", cfs % 3 + 1, cfs % 3 + 6).astype(str)
    _, warnings = analysed(write_case(text, spec_text("alive")))
    joined = " ".join(warnings)
    assert "non-operative has 0 of" in joined and "laparotomy has 0 of" in joined
    assert "the curves there rest on the model" in joined


def test_fewer_than_20_patients_in_an_arm_warns(write_case, text):
    small = pd.concat([text[text["arm"] == arm].head(15) for arm in ARMS])
    n = {arm: int(((small["arm"] == arm) & (small["qol_6m"] != "")).sum()) for arm in ARMS}  # pandas reference
    _, warnings = analysed(write_case(small, spec_text("qol")))
    for arm in ARMS:
        assert (f"outcome 'qol' in arm '{arm}' has only {n[arm]} patients with data (fewer than 20)"
                in " ".join(warnings))


def test_a_handful_of_patients_is_refused(write_case, text):
    tiny = pd.concat([text[(text["arm"] == arm) & (text["qol_6m"] != "")].head(3) for arm in ARMS])
    err = refused(analyse, write_case(tiny, spec_text("qol")))
    assert "outcome 'qol' in arm 'laparotomy' has only 3 patients among 3 patients with data" in str(err)


def test_an_outcome_empty_in_one_arm(write_case, text):
    text.loc[text["arm"] == "laparotomy", "qol_6m"] = ""
    err = refused(analyse, write_case(text, spec_text("qol")))
    assert "outcome 'qol' in arm 'laparotomy' has only 0 patients among 0 patients with data" in str(err)


def test_an_adjustment_covariate_constant_in_one_arm(write_case, text):
    text.loc[text["arm"] == "laparotomy", "sex"] = "F"
    spec = spec_text("alive").replace("horizon = 365", 'horizon = 365\nadjust = ["sex"]')
    err = refused(analyse, write_case(text, spec))
    assert "arm 'laparotomy': the model term 'sex' is constant" in str(err) and err.column == "sex"


def test_huge_outcome_values_are_refused(write_case, text):
    present = text["qol_6m"] != ""
    text.loc[present, "qol_6m"] = (text.loc[present, "qol_6m"].astype(float) * 1e200).map(repr)
    err = refused(analyse, write_case(text, spec_text("qol")))
    assert f"{int(present.sum())} value(s) are larger than 1e+12 in size" in str(err) and err.column == "qol_6m"


def test_a_negative_index_moves_the_break_even_with_it(write_case, text):
    plain, _ = analysed(write_case(text, spec_text(), name="plain.csv"))
    text["cfs"] = (text["cfs"].astype(float) - 10).map(repr)
    shifted, _ = analysed(write_case(text, spec_text(), name="shifted.csv"))
    for a, b in zip(plain["results"], shifted["results"]):
        assert [p["x"] for p in a["break_even"]] == pytest.approx([p["x"] + 10 for p in b["break_even"]], abs=1e-4)
        assert len(a["break_even"]) >= 1


def test_missing_index_values_are_counted_not_dropped_silently(write_case, text):
    text.loc[[3, 5, 7], "cfs"] = ""
    doc, warnings = analysed(write_case(text, spec_text("alive")))
    per_arm = text.loc[[3, 5, 7], "arm"].value_counts()  # pandas reference
    assert "Index 'cfs': 3 of 400 patients have no value (missing: cfs 3)." in warnings
    assert (f"outcome 'alive': 3 of 400 patients are left out for missing values (cfs 3): laparotomy "
            f"{per_arm.get('laparotomy', 0)}, non-operative {per_arm.get('non-operative', 0)}.") in warnings
    assert sum(doc["results"][0]["n"].values()) == 397


def test_bootstrap_with_few_events_in_an_arm_warns_and_stays_finite(write_case, text):
    lap = text[text["arm"] == "laparotomy"]
    keep = pd.concat([lap[lap["home"] == "1"].head(5), lap[lap["home"] == "0"].head(40),
                      text[text["arm"] == "non-operative"]])
    extra = '\n[analysis]\ninterval = "bootstrap"\nreplicates = 40\nseed = 3\n'
    doc, warnings = analysed(write_case(keep, spec_text("home", extra=extra)))
    assert ("outcome 'home' in arm 'laparotomy' has only 5 patients in the rarer outcome group (fewer than 10)"
            in " ".join(warnings))
    assert "has only 5 patients in the rarer outcome group for 1 model terms (fewer than 10 per term)" in " ".join(
        warnings)
    assert doc["inputs"]["interval"] == "bootstrap"


# ================================================================= outputs never destroy inputs (issue 19)
SMALL = spec_text("alive") + '\n[analysis]\nchecks = false\n'


@pytest.fixture
def case(write_case, text, tmp_path):
    """(spec path, cohort path, their bytes) of a one-outcome case, for the command line."""
    write_case(text, SMALL)
    spec, cohort = tmp_path / "spec.toml", tmp_path / "cohort.csv"
    return spec, cohort, {spec: spec.read_bytes(), cohort: cohort.read_bytes()}


def no_analysis(monkeypatch):
    """Make any analysis fail the test: refusals of outputs must come before the long work."""
    import explorer.cli

    def boom(*a, **k):
        raise AssertionError("the analysis ran before the outputs were checked")

    monkeypatch.setattr(explorer.cli, "analyse", boom)


def cli(argv, capsys) -> tuple[int, str, str]:
    capsys.readouterr()
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    assert "Traceback" not in err
    return code, out, err


@pytest.mark.parametrize("flag,target", [("--json", "cohort"), ("--html", "spec"), ("--json", "link"),
                                         ("--html", "hardlink")])
def test_an_output_naming_an_input_is_refused_before_analysing(case, capsys, monkeypatch, tmp_path, flag, target):
    spec, cohort, before = case
    path = {"cohort": cohort, "spec": spec, "link": tmp_path / "link.csv", "hardlink": tmp_path / "same.toml"}[target]
    if target == "link":
        path.symlink_to(cohort)
    if target == "hardlink":
        os.link(spec, path)
    no_analysis(monkeypatch)
    code, _, err = cli(["analyse", spec, flag, path, "--quiet"], capsys)
    assert code == 2 and "one of the input files" in err and flag in err
    assert {p: p.read_bytes() for p in before} == before  # the inputs are untouched


def test_two_outputs_naming_one_file_are_refused(case, capsys, monkeypatch, tmp_path):
    spec, _, _ = case
    no_analysis(monkeypatch)
    code, _, err = cli(["analyse", spec, "--json", tmp_path / "out", "--html", tmp_path / "x" / ".." / "out"], capsys)
    assert code == 2 and "--html and --json name the same file" in err
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("kind,words", [("missing folder", "does not exist"), ("folder", "is a folder"),
                                        ("fifo", "named pipe (FIFO)"), ("device", "a device"),
                                        ("file as folder", "not a folder")])
def test_outputs_that_cannot_take_a_file_are_refused_before_analysing(case, capsys, monkeypatch, tmp_path, kind,
                                                                       words):
    spec, _, _ = case
    target = {"missing folder": tmp_path / "nowhere" / "r.json", "folder": tmp_path,
              "fifo": tmp_path / "pipe", "device": tmp_path / "dev", "file as folder": spec / "r.json"}[kind]
    if kind == "fifo":
        os.mkfifo(target)
    if kind == "device":
        target.symlink_to(os.devnull)
    no_analysis(monkeypatch)
    code, _, err = cli(["analyse", spec, "--json", target], capsys)
    assert code == 2 and words in err and err.startswith("fulcrum: ") and "What to do" in err


def test_an_unwritable_folder_is_refused_before_analysing(case, capsys, monkeypatch, tmp_path):
    spec, _, _ = case
    locked = tmp_path / "locked"
    locked.mkdir(mode=0o500)
    if os.geteuid() == 0:  # root writes into any mode-0500 folder; sysfs refuses new files even to root
        locked = Path("/sys")
    no_analysis(monkeypatch)
    code, _, err = cli(["analyse", spec, "--json", locked / "r.json"], capsys)
    assert code == 2 and "permission denied" in err


def _no_temporary_files(folder) -> None:
    assert not [p.name for p in folder.iterdir() if p.name.endswith((".part", ".check"))]


def test_a_full_disk_leaves_the_old_file_whole_and_names_the_file(tmp_path, monkeypatch):
    import errno

    from explorer import outputs

    target = tmp_path / "results.json"
    target.write_text('{"old": true}\n')

    def full(fd):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(outputs.os, "fsync", full)
    err = refused(outputs.write_atomic, target, "x" * 10_000, "--json")
    assert "the disk is full" in str(err) and err.file == str(target) and "--json" in str(err)
    assert target.read_text() == '{"old": true}\n'
    _no_temporary_files(tmp_path)


def test_an_interrupted_write_leaves_no_partial_file(tmp_path, monkeypatch):
    from explorer import outputs

    target = tmp_path / "report.html"

    def stopped(src, dst):
        raise KeyboardInterrupt

    monkeypatch.setattr(outputs.os, "replace", stopped)
    with pytest.raises(KeyboardInterrupt):
        outputs.write_atomic(target, "<html>" * 1000)
    assert not target.exists()
    _no_temporary_files(tmp_path)


def test_a_failure_after_the_first_output_says_what_was_written(case, capsys, monkeypatch, tmp_path):
    import errno

    from explorer import outputs

    spec, _, _ = case
    real = outputs.write_atomic

    def html_fails(path, data, flag=None):
        if str(path).endswith(".html"):
            raise outputs.os_error(OSError(errno.ENOSPC, "full"), path, "write the file", flag)
        return real(path, data, flag)

    monkeypatch.setattr(outputs, "write_atomic", html_fails)
    import explorer.report

    monkeypatch.setattr(explorer.report, "render_report", lambda result: "<html>the report</html>")  # speed only
    code, _, err = cli(["analyse", spec, "--json", tmp_path / "r.json", "--html", tmp_path / "r.html", "--quiet"],
                       capsys)
    assert code == 2 and "the disk is full" in err and f"Written: {tmp_path / 'r.json'}" in err
    json.loads((tmp_path / "r.json").read_text())  # the file written is whole
    assert not (tmp_path / "r.html").exists()


def test_a_run_stopped_during_the_analysis_says_nothing_was_written(case, capsys, monkeypatch, tmp_path):
    import explorer.cli

    spec, _, _ = case

    def stopped(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(explorer.cli, "analyse", stopped)
    code, _, err = cli(["analyse", spec, "--json", tmp_path / "r.json"], capsys)
    assert code == 130 and "stopped. Nothing was written." in err and not (tmp_path / "r.json").exists()


def test_a_spec_path_that_is_a_fifo_is_named_and_not_read(tmp_path, capsys):
    os.mkfifo(tmp_path / "spec.toml")
    code, _, err = cli(["validate", tmp_path / "spec.toml"], capsys)  # returns at once: nothing waits on the pipe
    assert code == 2 and "the spec path is a named pipe (FIFO)" in err


def test_a_closed_pipe_ends_quietly(case, capsys, monkeypatch):
    """`fulcrum validate spec.toml | head -1`: the reader goes away; no traceback, no complaint."""
    import sys

    spec, _, _ = case
    read_end, write_end = os.pipe()
    os.close(read_end)
    saved = os.dup(1)
    pipe = os.fdopen(write_end, "w", buffering=1)
    monkeypatch.setattr(sys, "stdout", pipe)
    try:
        code = main(["validate", str(spec)])
    finally:
        os.dup2(saved, 1)
        os.close(saved)
    assert code == 0
    assert "Traceback" not in capsys.readouterr().err


# ============================================================ every setting checked once (issue 19)
@pytest.mark.parametrize("value", ["1", "-3", "0", "19", "100001"])
def test_replicates_on_the_command_line_meet_the_spec_limits(case, capsys, monkeypatch, value):
    spec, _, _ = case
    no_analysis(monkeypatch)
    code, _, err = cli(["analyse", spec, "--replicates", value], capsys)
    assert code == 2 and f"--replicates is {value}, outside 20 to 100,000" in err


def test_replicates_in_the_spec_and_in_the_app_give_the_same_words(write_case, text):
    from explorer import appstate as aps

    err = refused(write_case, text, SMALL.replace("checks = false", "checks = false\nreplicates = 1"))
    assert "'analysis.replicates' is 1, outside 20 to 100,000" in str(err) and err.key == "analysis.replicates"
    spec = write_case(text, SMALL)
    err = refused(aps.with_settings, spec, replicates=1)
    assert "'analysis.replicates' is 1, outside 20 to 100,000" in str(err)


@pytest.mark.parametrize("line,words", [("seed = -1", "'analysis.seed' is -1; it must be 0 or more"),
                                        ("workers = 0", "'analysis.workers' is 0"),
                                        ("workers = -2", "'analysis.workers' is -2")])
def test_negative_seeds_and_impossible_workers_fail_validate(write_case, text, tmp_path, capsys, line, words):
    write_case(text, SMALL)
    spec = tmp_path / "spec.toml"
    spec.write_text(spec.read_text().replace("checks = false", "checks = false\n" + line))
    code, _, err = cli(["validate", spec], capsys)
    assert code == 2 and words in err


def test_workers_beyond_the_cores_are_capped_with_a_warning(write_case, text, tmp_path, capsys, monkeypatch):
    from explorer import resampling, settings

    monkeypatch.setattr(settings, "cores", lambda: 1)
    write_case(text, SMALL.replace("checks = false", "checks = false\nworkers = 256"))
    code, out, _ = cli(["validate", tmp_path / "spec.toml"], capsys)
    assert code == 0 and "asks for 256 parallel workers but this machine has 1 core(s); 1 are used" in out
    seen = []  # with one core the replicates run in this process, where the list is visible

    def task(rng):
        seen.append(1)
        return rng.random()

    assert len(resampling.run_replicates(task, 5, 1, workers=256)) == 5 and len(seen) == 5


@pytest.mark.parametrize("argv,words", [(["--n", "5"], "--n is 5"), (["--seed", "-4"], "--seed is -4")])
def test_demo_settings_are_checked(tmp_path, capsys, argv, words):
    code, _, err = cli(["demo", tmp_path / "d", *argv], capsys)
    assert code == 2 and words in err and not (tmp_path / "d").exists()


@pytest.mark.parametrize("port", ["0", "-1", "70000"])
def test_an_impossible_app_port_is_refused_before_starting(capsys, port):
    code, _, err = cli(["app", "--port", port], capsys)
    assert code == 2 and f"--port is {port}" in err


def test_demo_into_a_file_is_refused(tmp_path, capsys):
    (tmp_path / "taken").write_text("mine")
    code, _, err = cli(["demo", tmp_path / "taken", "--n", "40"], capsys)
    assert code == 2 and "taken by a file" in err and (tmp_path / "taken").read_text() == "mine"


# ====================================================================== bounded resources (issue 19)
def _workbook_with_long_texts(text_frame, path) -> None:
    frame = text_frame.copy()
    frame["hospital"] = [f"{i:05d}" + "x" * 30_000 if i < 50 else "H1" for i in range(len(frame))]  # packs small
    frame.to_excel(path, index=False)


@pytest.mark.parametrize("where", ["command line", "app"])
def test_a_workbook_that_unpacks_beyond_the_limit_is_refused_unread(write_case, text, tmp_path, monkeypatch, where):
    import zipfile

    from explorer import appstate as aps

    monkeypatch.setenv("FULCRUM_MAX_UNPACKED_MB", "1")
    write_case(text.iloc[:5], SMALL.replace('path = "demo_cohort.csv"', 'path = "cohort.xlsx"'), name="cohort.xlsx")
    path = tmp_path / "cohort.xlsx"
    _workbook_with_long_texts(text, path)
    total = sum(i.file_size for i in zipfile.ZipFile(path).infolist())  # zipfile: the reference sizes
    assert path.stat().st_size < 300_000 and total > 1_000_000
    fn = (lambda: load_cohort(load_spec(tmp_path / "spec.toml"))) if where == "command line" else \
        (lambda: aps.preview(path.read_bytes(), "cohort.xlsx"))
    err = refused(fn)
    assert f"would unpack to {total / 1e6:,.0f} MB" in str(err) and "limit of 1 MB" in str(err)
    assert "FULCRUM_MAX_UNPACKED_MB" in err.hint
    if where == "app":
        monkeypatch.setenv("FULCRUM_MAX_UNPACKED_MB", "50")  # raised: the same workbook is read
        assert len(aps.preview(path.read_bytes(), "cohort.xlsx")) == len(text)


@pytest.mark.parametrize("kind,words", [("fifo", "named pipe (FIFO)"), ("device", "a device"),
                                        ("folder", "a folder")])
def test_a_cohort_path_that_is_no_ordinary_file_is_named_as_such(write_case, text, tmp_path, kind, words):
    spec = write_case(text, SMALL)
    path = tmp_path / "cohort.csv"
    path.unlink()
    {"fifo": lambda: os.mkfifo(path), "device": lambda: path.symlink_to(os.devnull),
     "folder": lambda: path.mkdir()}[kind]()
    err = refused(load_cohort, spec)  # returns at once: nothing is read from a pipe
    assert words in str(err) and err.key == "cohort.path" and err.file == str(path)


def test_an_unreadable_cohort_file_gets_a_located_message(write_case, text, monkeypatch):
    from pathlib import Path

    spec = write_case(text, SMALL)
    real = Path.read_bytes

    def denied(self):
        if self.name == "cohort.csv":
            raise PermissionError(13, "Permission denied")
        return real(self)

    monkeypatch.setattr(Path, "read_bytes", denied)
    err = refused(load_cohort, spec)
    assert "could not be read (Permission denied)" in str(err) and err.key == "cohort.path"


# ======================================================= no network from a received file (issue 19)
def test_a_spec_naming_a_scheduler_is_refused_before_any_connection(write_case, text, tmp_path, capsys):
    write_case(text, SMALL)
    spec = tmp_path / "spec.toml"
    spec.write_text(spec.read_text() + 'scheduler = "tcp://203.0.113.9:8786"\n')
    for command in ("validate", "analyse"):
        code, _, err = cli([command, spec], capsys)
        assert code == 2 and "may not name a Dask scheduler" in err and "--scheduler" in err


# ================================================================ messages that lead to the fix (issue 19)
def test_a_thousands_separator_is_not_called_a_decimal_comma(write_case, text):
    text.loc[3, "days_followed"] = "1,095"
    err = refused(load_cohort, write_case(text, SMALL))
    assert "thousands separator" in err.hint and "(1095)" in err.hint and err.rows == [4]
    text.loc[3, "days_followed"] = "2,5"
    assert "decimal mark" in refused(load_cohort, write_case(text, SMALL)).hint


def test_text_in_an_index_column_is_called_an_index_not_a_covariate(write_case, text):
    text.loc[[2, 9], "cfs"] = ["frail", "fit"]
    err = refused(load_cohort, write_case(text, SMALL))
    assert "an index must be numbers" in str(err) and "covariate" not in str(err)
    assert err.key == "indices 'cfs'.column" and err.rows == rows_where(text["cfs"].isin(["frail", "fit"]))


def test_an_all_empty_index_column_is_blamed_on_the_index(write_case, text):
    text["cfs"] = ""
    err = refused(load_cohort, write_case(text, SMALL))
    assert err.column == "cfs" and err.key == "indices 'cfs'.column" and "every cell of the column is empty" in str(err)


def test_labels_differing_only_in_unicode_form_are_one_label(write_case, text):
    import unicodedata

    composed = "op\u00e9ration"
    decomposed = unicodedata.normalize("NFD", composed)
    assert composed != decomposed
    text["arm"] = text["arm"].replace({"laparotomy": decomposed})
    cohort = load_cohort(write_case(text, SMALL.replace('"laparotomy"', f'"{composed}"')))
    assert cohort.counts().loc[composed].sum() == (text["arm"] == decomposed).sum()
    assert any("decomposed Unicode form" in n for n in cohort.notes)


def test_row_numbers_say_they_count_data_rows(write_case, text):
    text.loc[6, "died"] = "2"
    err = refused(load_cohort, write_case(text, SMALL))
    assert "data row 7 (counted below the header: spreadsheet row = data row + 1)" in str(err)
    assert "found '2' (1)" in str(err)  # echoed as written in the file, not '2.0'


def test_formula_messages_name_the_column_and_the_index_as_the_spec_does(write_case, text):
    text = text.rename(columns={"lactate": "lactate mmol"})
    index = '[[indices]]\nname = "phys"\nformula = "`lactate mmol`(2) + 1"\n'
    err = refused(load_cohort, write_case(text, spec_text("alive", index=index)))
    assert "'lactate mmol' is a column, not a function" in str(err) and err.key == "indices 'phys'.formula"
    assert "double underscore" not in str(err)


# ========================================================================== odd files (issue 19)
def test_trailing_empty_rows_are_not_patients(write_case, text, tmp_path):
    data = text.to_csv(index=False) + ("," * (len(text.columns) - 1) + "\n") * 3
    cohort = load_cohort(write_case(data, SMALL))
    assert cohort.n == len(text)
    assert any(f"3 empty row(s) at the end of the file (data rows {len(text) + 1} to {len(text) + 3})" in n
               for n in cohort.notes)


def test_hidden_spreadsheet_rows_are_noted(write_case, text, tmp_path):
    spec = write_case(text, SMALL.replace('path = "demo_cohort.csv"', 'path = "cohort.xlsx"'), name="cohort.xlsx")
    book = openpyxl.load_workbook(tmp_path / "cohort.xlsx")
    for r in (5, 9):
        book.active.row_dimensions[r].hidden = True
    book.save(tmp_path / "cohort.xlsx")
    cohort = load_cohort(spec)
    assert cohort.n == len(text)
    assert any("2 row(s) of the sheet are hidden" in n and "spreadsheet rows 5, 9" in n for n in cohort.notes)


def test_a_sheet_named_for_a_csv_is_warned_about(write_case, text):
    cohort = load_cohort(write_case(text, SMALL.replace('arm = "arm"', 'arm = "arm"\nsheet = "cohort"')))
    assert any("cohort.sheet = 'cohort' was ignored: a .csv file has no sheets" in w for w in cohort.warnings)


def test_csv_exports_keep_semicolon_cells_whole(text):
    from explorer.exports import to_csv_safe

    payload = "lap;=cmd|' /C calc'!A0"
    frame = pd.DataFrame({"arm": [payload, "non-operative"], "difference": [0.1, -0.2]})
    data = to_csv_safe(frame).decode("utf-8-sig")
    for sep in (",", ";"):  # a spreadsheet in a semicolon locale splits on ';' (Python's csv module, reference)
        cells = [c for row in csv.reader(io.StringIO(data, newline=""), delimiter=sep) for c in row]
        assert not any(c.lstrip().startswith(("=", "+", "@")) for c in cells), (sep, cells)
    assert next(csv.reader(io.StringIO(data.splitlines()[1]), delimiter=";"))[0].startswith("lap;=cmd")


# ========================================================= property: command-line flags end cleanly (issue 19)
HOSTILE_TOKENS = ["", " ", "--", "-x", "--jso", "--replicates=abc", "--replicates", "\x00", "caf\u00e9", "--quiet=1",
                  "--scheduler=", "--html"]
PLACES = ["new", "other", "spec", "cohort", "folder", "missing", "fifo", "device", "empty", "link", "nested"]


@pytest.fixture(scope="module")
def flag_case(tmp_path_factory, small_text):
    """A folder with a one-outcome spec and its cohort, a FIFO, a link to a device and a link to the cohort, and
    the real results of the spec (so each example is quick: the property is about the flags, not the fit)."""
    folder = tmp_path_factory.mktemp("flags")
    t = small_text.copy()
    t.to_csv(folder / "cohort.csv", index=False)
    (folder / "spec.toml").write_text(SMALL.replace('path = "demo_cohort.csv"', 'path = "cohort.csv"'))
    os.mkfifo(folder / "fifo")
    (folder / "device").symlink_to(os.devnull)
    (folder / "link").symlink_to(folder / "cohort.csv")
    (folder / "folder").mkdir()
    return folder, analyse(load_spec(folder / "spec.toml"))


def _place(folder, name: str) -> str:
    return {"new": folder / "out.json", "other": folder / "out.html", "spec": folder / "spec.toml",
            "cohort": folder / "cohort.csv", "folder": folder / "folder", "missing": folder / "no" / "r.json",
            "fifo": folder / "fifo", "device": folder / "device", "empty": "", "link": folder / "link",
            "nested": folder / "folder" / ".." / "out.json"}[name].__str__()


@pytest.mark.slow
@settings(max_examples=35, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(command=st.sampled_from(["analyse", "analyse", "validate"]),
       json_to=st.none() | st.sampled_from(PLACES), html_to=st.none() | st.sampled_from(PLACES),
       replicates=st.none() | st.integers(-10**12, 10**12) | st.sampled_from(["0", "1", "20", "1e3", "x"]),
       scheduler=st.none() | st.sampled_from(["", "tcp://", "udp://h:1", "tcp://127.0.0.1:9", "http://x"]),
       quiet=st.booleans(), junk=st.lists(st.sampled_from(HOSTILE_TOKENS), max_size=2))
def test_command_line_flags_only_end_cleanly(flag_case, monkeypatch, capsys, command, json_to, html_to, replicates,
                                             scheduler, quiet, junk):
    """Any mix of flags ends in exit 0, or exit 2 with a message; never a traceback, never a changed input."""
    import explorer.cli
    import explorer.report

    folder, result = flag_case
    monkeypatch.setattr(explorer.cli, "analyse", lambda spec, *cohort, **kw: result)  # no connection is ever made
    monkeypatch.setattr(explorer.report, "render_report", lambda r: "<html>the report</html>")
    inputs = {p: p.read_bytes() for p in (folder / "spec.toml", folder / "cohort.csv")}
    argv = [command, str(folder / "spec.toml")]
    if command == "analyse":
        for flag, value in (("--json", json_to), ("--html", html_to)):
            if value is not None:
                argv += [flag, _place(folder, value)]
        if replicates is not None:
            argv += ["--replicates", str(replicates)]
        if scheduler is not None:
            argv += ["--scheduler", scheduler]
        argv += ["--quiet"] * quiet
    argv += junk
    capsys.readouterr()
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse's own refusals (a usage line and exit 2) or --help (exit 0)
        code = exc.code
    err = capsys.readouterr().err
    assert code in (0, 2), (argv, code, err)
    assert "Traceback" not in err, argv
    if code == 2:
        assert err.startswith(("fulcrum: ", "usage: ")) and err.strip(), (argv, err)
    assert {p: p.read_bytes() for p in inputs} == inputs, argv
    assert (folder / "fifo").is_fifo() and (folder / "device").is_symlink()

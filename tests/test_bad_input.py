"""The bad-input catalogue: every hostile, broken or odd input ends in a FulcrumError that names what and
where, or in results that carry a warning; never a silent NaN in the results JSON, never another exception.

`pytest.raises(FulcrumError)` lets any other exception type through, so it fails the test. Expected row
numbers, line numbers, byte offsets and counts are recomputed from the raw cells or bytes with pandas,
Python's csv module or bytes.index (reference tools), never typed in. The cohorts are the project's
invented demo data (conftest.small_text), edited case by case.
"""
from __future__ import annotations

import csv
import json

import numpy as np
import openpyxl
import pandas as pd
import pytest

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

"""Cohort loading and validation: every bad-input case names file, column, rows and what to do.

Reference for the expected contents: the raw file read independently with Python's csv module or
pandas (reference libraries); counts are recomputed from those raw cells, never typed in.
"""
from __future__ import annotations

import csv
import hashlib
import os

import numpy as np
import pandas as pd
import pytest

from explorer import demo
from explorer.cohort import Cohort, column_roles, load_cohort, read_table
from explorer.errors import FulcrumError

pytestmark = pytest.mark.bad_input


def _raise(spec, **kw) -> FulcrumError:
    with pytest.raises(FulcrumError) as info:
        load_cohort(spec, **kw)
    return info.value


def _raw_cells(path) -> list[dict[str, str]]:
    """The file's cells as the csv module reads them (stdlib reference reader)."""
    with open(path, newline="", encoding="utf-8-sig") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture
def text(small_text: pd.DataFrame) -> pd.DataFrame:
    return small_text.copy()


# ------------------------------------------------------------------------------------------- happy paths
def test_demo_cohort_types_hash_and_counts(demo_spec, demo_dir):
    cohort = load_cohort(demo_spec, extra_columns=["lactate", "albumin"])
    raw = _raw_cells(demo_dir / "demo_cohort.csv")
    assert isinstance(cohort, Cohort) and cohort.n == len(raw)
    # sha256 of the file's bytes, by hashlib directly (reference)
    assert cohort.sha256 == hashlib.sha256((demo_dir / "demo_cohort.csv").read_bytes()).hexdigest()
    f = cohort.frame
    assert f["arm"].tolist() == [r["arm"] for r in raw]
    assert f["pid"].tolist() == [r["pid"] for r in raw]
    assert list(f["function_6m"].cat.categories) == list(demo.LEVELS) and f["function_6m"].cat.ordered
    for col in ("age", "cfs", "lactate", "albumin", "days_followed", "died", "qol_6m", "days_home_180", "sex"):
        assert f[col].dtype == float, col
    assert f["lactate"].tolist() == [float(r["lactate"]) for r in raw]
    assert f["sex"].tolist() == [1.0 if r["sex"] == "M" else 0.0 for r in raw]
    assert any("'sex'" in n and "'M' = 1" in n for n in cohort.notes)
    # counts by arm x allocation equal a crosstab of the raw cells
    ref = pd.crosstab(pd.Series([r["arm"] for r in raw]), pd.Series([r["allocation"] for r in raw]))
    got = cohort.counts()
    for arm in demo.ARMS:
        assert got.loc[arm, "randomised"] == ref.loc[arm, "randomised"]
        assert got.loc[arm, "chosen"] == ref.loc[arm, "chosen"]
        assert got.loc[arm, "total"] == ref.loc[arm].sum()
    assert cohort.randomised.tolist() == [r["allocation"] == "randomised" for r in raw]


def test_demo_missing_values_are_counted_per_outcome_and_arm(demo_spec, demo_dir):
    cohort = load_cohort(demo_spec)
    raw = _raw_cells(demo_dir / "demo_cohort.csv")
    for outcome, col in (("function", "function_6m"), ("days_home", "days_home_180")):
        per_arm = {a: sum(1 for r in raw if r["arm"] == a and r[col] == "") for a in demo.ARMS}
        total = sum(per_arm.values())
        expected = (f"outcome '{outcome}': {total} of {len(raw)} patients are left out for missing values "
                    f"({col} {total}): laparotomy {per_arm['laparotomy']}, non-operative {per_arm['non-operative']}.")
        assert expected in cohort.warnings
        mask = cohort.complete(demo_spec.outcome(outcome))
        assert int((~mask).sum()) == total
    # qol is measured among survivors: the dead are a note, only the others a warning
    dead_missing = sum(1 for r in raw if r["qol_6m"] == "" and r["died"] == "1")
    others = sum(1 for r in raw if r["qol_6m"] == "" and r["died"] == "0")
    assert any(f"{dead_missing} patients who died have no value, as expected" in n for n in cohort.notes)
    assert any(f"besides those who died, {others} patients" in w for w in cohort.warnings)
    assert cohort.missing["qol_6m"] == dead_missing + others


def test_complete_with_extra_columns(write_case, text):
    text.loc[[3, 8], "lactate"] = ""
    spec = write_case(text)
    cohort = load_cohort(spec, extra_columns=["lactate"])
    alive = spec.outcome("alive")
    assert cohort.complete(alive).all()
    mask = cohort.complete(alive, extra=["lactate"])
    assert np.flatnonzero(~mask).tolist() == [3, 8]
    with pytest.raises(KeyError, match="extra_columns"):
        cohort.complete(alive, extra=["not_loaded"])


def test_only_needed_columns_are_read(write_case, text):
    text["notes"] = "free text, with commas"
    spec = write_case(text)
    cohort = load_cohort(spec)
    assert "notes" not in cohort.frame.columns
    assert set(cohort.frame.columns) == set(column_roles(spec))


def test_same_cohort_from_csv_tsv_xlsx_parquet(write_case, tmp_path):
    frame, _ = demo.generate(n=150, seed=3)
    loaded = {}
    for ext in (".csv", ".tsv", ".xlsx", ".parquet"):
        spec = write_case(frame, name=f"cohort{ext}")
        loaded[ext] = load_cohort(spec, extra_columns=["lactate", "albumin"])
    ref = loaded[".csv"]
    for ext, cohort in loaded.items():
        pd.testing.assert_frame_equal(cohort.frame, ref.frame, check_exact=True, obj=ext)
        assert cohort.warnings == ref.warnings and cohort.randomised.equals(ref.randomised)
        assert cohort.name == f"cohort{ext}"


def test_the_file_is_never_modified(demo_dir, demo_spec):
    path = demo_dir / "demo_cohort.csv"
    before, stat = path.read_bytes(), os.stat(path)
    load_cohort(demo_spec)
    assert path.read_bytes() == before and os.stat(path).st_mtime_ns == stat.st_mtime_ns


def test_uploaded_bytes_load_like_the_file(demo_spec, demo_dir):
    data = (demo_dir / "demo_cohort.csv").read_bytes()
    up = load_cohort(demo_spec, data=data, filename="upload.csv")
    disk = load_cohort(demo_spec)
    pd.testing.assert_frame_equal(up.frame, disk.frame)
    assert up.name == "upload.csv" and up.path is None and up.sha256 == disk.sha256
    err = _raise(demo_spec, data=b"\x00\x01", filename="upload.csv")
    assert "upload.csv" in str(err)


def test_bom_and_whitespace_are_ignored(write_case, text):
    plain = load_cohort(write_case(text.to_csv(index=False), name="a.csv"))
    padded = text.copy()
    padded["arm"] = "  " + padded["arm"] + " "
    padded.columns = [f" {c} " for c in padded.columns]
    spec = write_case(b"\xef\xbb\xbf" + padded.to_csv(index=False).encode("utf-8"), name="b.csv")
    pd.testing.assert_frame_equal(load_cohort(spec).frame, plain.frame)


def test_literal_na_none_null_are_labels_not_missing(write_case, text):
    """Declared labels such as "NA" and "None" are read as written; only empty cells are missing."""
    text["arm"] = np.where(text["arm"] == "laparotomy", "NA", "None")
    text["function_6m"] = text["function_6m"].replace({"care_home": "null", "bedbound": "None"})
    text["allocation"] = np.where(text["allocation"] == "randomised", "NA", "chosen")
    spec = write_case(text, edit=(('arms = ["laparotomy", "non-operative"]', 'arms = ["NA", "None"]'),
                                  ('"care_home", "bedbound"', '"null", "None"'),
                                  ('randomised = "randomised"', 'randomised = "NA"'),
                                  ("care_home = 0.45, bedbound = 0.1", "null = 0.45, None = 0.1")))
    cohort = load_cohort(spec)
    f = cohort.frame
    assert f["arm"].tolist() == text["arm"].tolist()
    assert (f["function_6m"].astype(object).fillna("") == text["function_6m"]).all()
    assert int((f["function_6m"] == "None").sum()) == int((text["function_6m"] == "None").sum()) > 0
    assert int(f["function_6m"].isna().sum()) == int((text["function_6m"] == "").sum())
    assert cohort.randomised.tolist() == (text["allocation"] == "NA").tolist()
    assert cohort.counts().loc["NA", "total"] == (text["arm"] == "NA").sum()


def test_two_valued_text_covariate_is_coded(write_case, text):
    text["sex"] = text["sex"].map({"F": "female", "M": "male"})
    cohort = load_cohort(write_case(text))
    assert cohort.frame["sex"].tolist() == (text["sex"] == "male").astype(float).tolist()
    assert "covariate 'sex' is text with two values: coded 'male' = 1, 'female' = 0." in cohort.notes


def test_na_words_in_numeric_columns_are_missing_with_a_warning(write_case, text):
    text.loc[[2, 6], "qol_6m"] = ["NA", "null"]
    cohort = load_cohort(write_case(text))
    assert cohort.frame["qol_6m"].iloc[[2, 6]].isna().all()
    assert any("column 'qol_6m': 2 cell(s) reading NA, null were taken as missing" in w for w in cohort.warnings)


def test_event_words_are_read_with_a_note(write_case, text):
    text["died"] = text["died"].map({"1": "Yes", "0": "no"})
    cohort = load_cohort(write_case(text))
    assert cohort.frame["died"].tolist() == (text["died"] == "Yes").astype(float).tolist()
    assert any("column 'died': read true/yes as 1 and false/no as 0" in n for n in cohort.notes)
    text["died"] = text["died"].map({"Yes": "TRUE", "no": "False"})
    assert load_cohort(write_case(text)).frame["died"].sum() == (text["died"] == "TRUE").sum()


# ------------------------------------------------------------------------------------------- file problems
def test_missing_file(write_case, text, tmp_path):
    spec = write_case(text)
    (tmp_path / "cohort.csv").unlink()
    err = _raise(spec)
    assert "does not exist" in str(err) and "cohort.csv" in str(err)
    assert err.key == "cohort.path" and "relative to the spec file" in err.hint


@pytest.mark.parametrize("name,words", [("cohort.xls", "Save it as .xlsx"), ("cohort.json", "Save it as CSV"),
                                        ("cohort", "no extension")])
def test_unsupported_extension(write_case, name, words):
    err = _raise(write_case("a,b\n1,2\n", name=name))
    assert "not supported" in str(err) and words in str(err) and ".parquet" in str(err)


def test_empty_and_header_only_files(write_case, text):
    assert "empty (0 bytes)" in str(_raise(write_case(b"")))
    assert "blank space" in str(_raise(write_case(" \n\n ")))
    err = _raise(write_case(",".join(text.columns) + "\n"))
    assert "no data rows" in str(err) and "cohort.csv" in str(err)


def test_binary_junk_and_misnamed_files(write_case, text, tmp_path, write_table):
    err = _raise(write_case(bytes(range(256)) * 4))
    assert "binary data" in str(err) and "byte 0" in str(err)
    write_table(text, tmp_path / "real.xlsx")
    err = _raise(write_case((tmp_path / "real.xlsx").read_bytes()))
    assert "Excel .xlsx workbook" in str(err) and "extension" in err.hint
    err = _raise(write_case("pid,arm\n1,a\n", name="cohort.xlsx"))
    assert "not an Excel .xlsx workbook" in str(err)
    err = _raise(write_case("pid,arm\n1,a\n", name="cohort.parquet"))
    assert "not a Parquet file" in str(err)
    err = _raise(write_case("\ufeffpid".encode("utf-16")))
    assert "UTF-16" in str(err) and "UTF-8" in err.hint


def test_non_utf8_names_the_byte(write_case, text):
    text.loc[4, "hospital"] = "Hôpital"
    data = text.to_csv(index=False).encode("latin-1")
    err = _raise(write_case(data))
    offset = data.index(b"\xf4")  # the latin-1 byte, found by bytes.index (reference)
    assert f"byte {offset} (line 6)" in str(err) and "0xF4" in str(err)
    assert "not UTF-8" in str(err) and "Save the file as UTF-8" in err.hint


@pytest.mark.parametrize("sep,word,name", [(";", "semicolons", "cohort.csv"), ("\t", "tabs", "cohort.csv"),
                                           (",", "commas", "cohort.tsv")])
def test_wrong_delimiter(write_case, text, sep, word, name):
    err = _raise(write_case(text.to_csv(index=False, sep=sep), name=name))
    assert "wrong delimiter" in str(err) and word in str(err)
    assert ".tsv" in err.hint and ".csv" in err.hint


def test_duplicate_headers_are_named(write_case, text):
    data = text.to_csv(index=False).replace("lactate,albumin", "age,albumin", 1)
    err = _raise(write_case(data))
    assert "repeats column names: 'age'" in str(err) and err.column == "age"


def test_missing_column_suggests_close_names(write_case, text):
    err = _raise(write_case(text.rename(columns={"days_followed": "days_follow", "cfs": "CFS"})))
    msg = str(err)
    assert "no column 'days_followed' (named by outcomes 'alive'.time) - did you mean 'days_follow'?" in msg
    assert "no column 'cfs'" in msg and "'CFS'" in msg
    assert "Columns in the file:" in err.hint


def test_ragged_row(write_case, text):
    lines = text.to_csv(index=False).splitlines()
    lines[5] += ",extra"
    err = _raise(write_case("\n".join(lines) + "\n"))
    assert "line 6 has 15 values but the header names 14 columns" in str(err) and err.rows == [5]
    lines[5] = lines[5].rsplit(",", 3)[0]
    err = _raise(write_case("\n".join(lines) + "\n"))
    assert "line 6 has 12 values but the header names 14 columns" in str(err) and "Add the missing" in err.hint


def test_xlsx_with_several_sheets(write_case, text, tmp_path):
    path = tmp_path / "book.xlsx"
    with pd.ExcelWriter(path) as xw:
        pd.DataFrame({"readme": ["invented"]}).to_excel(xw, sheet_name="About", index=False)
        text.to_excel(xw, sheet_name="Patients", index=False)
    spec = write_case(path.read_bytes(), name="book.xlsx")
    err = _raise(spec)
    assert "2 sheets: 'About', 'Patients'" in str(err) and err.key == "cohort.sheet"
    spec = write_case(path.read_bytes(), name="book.xlsx", edit=(('id = "pid"', 'id = "pid"\nsheet = "Patient"'),))
    assert "Did you mean 'Patients'?" in str(_raise(spec))
    spec = write_case(path.read_bytes(), name="book.xlsx", edit=(('id = "pid"', 'id = "pid"\nsheet = "Patients"'),))
    assert load_cohort(spec).frame["pid"].tolist() == text["pid"].tolist()


def test_parquet_integer_ids_and_labels_read_as_text(write_case):
    frame, _ = demo.generate(n=120, seed=5)
    frame["pid"] = np.arange(1001, 1001 + len(frame))
    cohort = load_cohort(write_case(frame, name="c.parquet"))
    assert cohort.frame["pid"].tolist() == [str(i) for i in frame["pid"]]


# ------------------------------------------------------------------------------------------- value problems
def test_duplicate_id(write_case, text):
    text.loc[6, "pid"] = text.loc[1, "pid"]
    err = _raise(write_case(text))
    assert f"1 identifier(s) appear more than once: '{text.loc[1, 'pid']}'" in str(err)
    assert err.rows == [2, 7] and err.column == "pid" and "unique identifier" in err.hint


def test_arm_values_other_than_declared(write_case, text):
    text.loc[[3, 10, 11], "arm"] = "surgery"
    text.loc[20, "arm"] = "Laparotomy"
    err = _raise(write_case(text))
    counts = text["arm"].value_counts()  # pandas reference count of the raw cells
    msg = str(err)
    assert "arm values must be 'laparotomy' or 'non-operative'" in msg
    for value in ("surgery", "Laparotomy", "laparotomy", "non-operative"):
        assert f"'{value}' ({counts[value]})" in msg
    assert err.rows == [4, 11, 12, 21] and err.column == "arm" and err.key == "cohort.arm"
    assert "change cohort.arms" in err.hint


def test_arm_empty_and_arm_without_patients(write_case, text):
    text.loc[7, "arm"] = " "
    err = _raise(write_case(text))
    assert "1 empty cell(s); every patient needs an arm" in str(err) and err.rows == [8]
    text["arm"] = "laparotomy"
    err = _raise(write_case(text))
    assert "no patient is in arm 'non-operative'" in str(err)


def test_allocation_problems(write_case, text):
    broken = text.copy()
    broken.loc[[0, 9], "allocation"] = ""
    err = _raise(write_case(broken))
    assert "2 empty cell(s); every patient needs an allocation" in str(err) and err.rows == [1, 10]
    assert err.column == "allocation"
    cased = text.copy()
    cased["allocation"] = cased["allocation"].str.capitalize()
    err = _raise(write_case(cased))
    n = int((cased["allocation"] == "Randomised").sum())
    assert f"no cell reads 'randomised' exactly, but {n} read 'Randomised'" in str(err)
    assert 'randomised = "Randomised"' in err.hint
    none = text.copy()
    none["allocation"] = "observational"
    cohort = load_cohort(write_case(none))
    assert any("no patient is marked 'randomised'" in w for w in cohort.warnings)
    assert not cohort.randomised.any()


def test_survival_time_missing_non_numeric_not_positive(write_case, text):
    for value, words in (("", "have no follow-up time"), ("ten", "not numbers: 'ten'"),
                         ("0", "must be positive; found 0"), ("-3", "must be positive; found -3")):
        case = text.copy()
        case.loc[[4, 12], "days_followed"] = value
        err = _raise(write_case(case))
        assert words in str(err), value
        assert err.rows == [5, 13] and err.column == "days_followed" and err.key == "outcomes 'alive'.time"


def test_event_not_zero_one(write_case, text):
    text.loc[[1, 2, 30], "died"] = ["2", "dead", "2"]
    err = _raise(write_case(text))
    assert "values must be 0 or 1 (1 = event (death), 0 = censored); found '2' (2), 'dead' (1)" in str(err)
    assert err.rows == [2, 3, 31]


def test_binary_outcome_must_be_zero_one(write_case, text):
    text["home"] = np.where(text["function_6m"].isin(["independent", "home_with_help"]), "yes", "no")
    text.loc[5, "home"] = "maybe"
    spec_add = '\n[[outcomes]]\nname = "at_home"\nkind = "binary"\ncolumn = "home"\n'
    err = _raise(write_case(text, edit=(("[[indices]]", spec_add + "\n[[indices]]"),)))
    assert "values must be 0 or 1 (1 = yes, 0 = no); found 'maybe' (1)" in str(err) and err.rows == [6]


def test_ordinal_level_not_declared(write_case, text):
    text.loc[[2, 5], "function_6m"] = "Independent"
    text.loc[9, "function_6m"] = "nursing home"
    err = _raise(write_case(text))
    msg = str(err)
    assert "3 value(s) are not among the declared levels" in msg
    assert "'Independent' (row 3, 2 rows in all)" in msg and "'nursing home' (row 10)" in msg
    assert "Did you mean 'independent'?" in err.hint and err.rows == [3, 6, 10]


def test_non_numeric_entries_in_numeric_columns(write_case, text):
    text.loc[[0, 14], "age"] = ["eighty", "<70"]
    err = _raise(write_case(text))
    assert "2 entries are not numbers: 'eighty', '<70'" in str(err) and err.rows == [1, 15]
    assert err.column == "age" and "leave a cell empty" in err.hint
    text.loc[[0, 14], "age"] = "80"
    text.loc[3, "qol_6m"] = "0,75"
    err = _raise(write_case(text))
    assert err.column == "qol_6m" and "decimal mark" in err.hint


def test_text_covariate_with_many_values_must_be_coded(write_case, text):
    text["hospital2"] = text["hospital"]
    spec = write_case(text, edit=(('covariates = ["age", "sex", "cfs", "lactate", "albumin"]\nlabels',
                                   'covariates = ["age", "sex", "cfs", "lactate", "albumin", "hospital2"]\nlabels'),))
    err = _raise(spec)
    k = text["hospital2"].nunique()
    assert f"a covariate holds text with {k} different value(s)" in str(err) and "Code it as numbers" in err.hint


def test_column_used_as_text_and_number(write_case, text):
    err = _raise(write_case(text, edit=(('randomised = "randomised"\n', 'randomised = "randomised"\ncluster = "sex"\n'),)))
    assert "used both as text and as numbers" in str(err) and "cohort.cluster" in str(err)


def test_values_outside_bounds(write_case, text):
    text.loc[8, "days_home_180"] = "181"
    err = _raise(write_case(text))
    assert "outside the declared bounds [0.0, 180.0]: 181" in str(err) and err.rows == [9]


# ------------------------------------------------------------------------------------------- minimum data
def test_few_patients_and_few_events_warn(write_case, text):
    keep = text[(text["arm"] == "laparotomy") | (text.index.isin(text.index[text["arm"] == "non-operative"][:15]))]
    cohort = load_cohort(write_case(keep.reset_index(drop=True)))
    assert any("outcome 'alive' in arm 'non-operative' has only 15 patients with data (fewer than 20)" in w
               for w in cohort.warnings)
    few = text.copy()
    non = few.index[few["arm"] == "non-operative"]
    deaths = non[few.loc[non, "died"] == "1"]
    few.loc[deaths[7:], "days_followed"] = "365"
    few.loc[deaths[7:], "died"] = "0"
    cohort = load_cohort(write_case(few))
    assert any("outcome 'alive' in arm 'non-operative' has only 7 deaths (events) (fewer than 10)" in w
               for w in cohort.warnings)


def test_fewer_than_five_events_is_refused(write_case, text):
    lap = text.index[(text["arm"] == "laparotomy") & (text["died"] == "1")]
    text.loc[lap[4:], "died"] = "0"
    err = _raise(write_case(text))
    assert ("outcome 'alive' in arm 'laparotomy' has only 4 deaths (events) among "
            f"{int((text['arm'] == 'laparotomy').sum())} patients with data") in str(err)
    assert "refused" in str(err) and "Remove this outcome" in err.hint


def test_a_thin_favourable_side_warns_and_an_empty_one_refuses_naming_favourable(write_case, text):
    # The proportional-odds model uses every level, so three favourable patients are a warning, not a refusal;
    # only an empty side makes P(favourable) inestimable, and the refusal names the key that fixes it.
    lap = text.index[text["arm"] == "laparotomy"]
    fav = lap[text.loc[lap, "function_6m"].isin(["independent", "home_with_help"])]
    text.loc[fav[3:], "function_6m"] = "care_home"
    cohort = load_cohort(write_case(text))
    assert any("outcome 'function' in arm 'laparotomy' has only 3 patients on the favourable side" in w
               and "`favourable`" in w for w in cohort.warnings)
    text.loc[fav, "function_6m"] = "care_home"
    err = _raise(write_case(text))
    assert "cannot be estimated" in err.what and err.key.endswith(".favourable") and "`favourable`" in err.hint



def test_read_table_gives_every_column_as_text(small_text):
    data = small_text.to_csv(index=False).encode()
    table = read_table(data, "upload.csv")
    assert list(table.columns) == list(small_text.columns)
    assert (table.fillna("") == small_text).all().all()
    with pytest.raises(FulcrumError, match="repeats column names: 'age'"):
        read_table(data.replace(b"lactate,albumin", b"age,albumin", 1), "upload.csv")

"""Open a received cohort file (CSV, TSV, Excel, Parquet) as literal text columns: the readers behind cohort.py.

Values are read as the text in the file, so an arm or level called "NA" stays a label; only empty cells are
missing. Only the columns the spec's roles name are read; problems are FulcrumErrors naming file, column and row.
"""
from __future__ import annotations

import csv
import difflib
import io
from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from .errors import FulcrumError, nfc, printable
from .intake import check_archive, check_parquet, drop_trailing_empty, hidden_rows

Raw = dict[str, pd.Series]
Opener = Callable[[set[str], set[str]], Raw]
FORMATS = (".csv", ".tsv", ".xlsx", ".parquet")
SHOWN = 20
PROBE = 10_000  # cells read to judge whether a text column has few distinct values


def read_columns(data: bytes, name: str, shown: str, sheet: str | None, roles: dict[str, list[tuple[str, str]]],
          numeric: set[str], notes: list[str]) -> tuple[list[str], Raw]:
    """Check the format, open the file, check the header, read the wanted columns (all when roles is empty).
    What was noticed on the way (rows left out, a setting that does not apply) is added to notes."""
    ext = Path(name).suffix.lower()
    if ext not in FORMATS:
        hint = "Save it as .xlsx (Excel 2007 or later) or .csv." if ext == ".xls" else \
            "Save it as CSV (comma-separated), TSV (tab-separated), Excel .xlsx or Parquet."
        raise FulcrumError(f"'{ext or 'no extension'}' files are not supported; Fulcrum reads "
                           f"{', '.join(FORMATS)}.", file=shown, hint=hint)
    if not data:
        raise FulcrumError("the file is empty (0 bytes).", file=shown, hint="Check that the file was saved or "
                           "uploaded completely.")
    header, read = _open(data, ext, shown, sheet, notes)
    check_header(header, roles, shown)
    raw = drop_trailing_empty(read(set(roles) or {h for h in header if h}, numeric), notes)
    if not raw or not len(next(iter(raw.values()))):
        raise FulcrumError("the file has column names but no data rows.", file=shown,
                           hint="Add one row per patient under the header.")
    return header, raw


def _open(data: bytes, ext: str, file: str, sheet: str | None, notes: list[str]) -> tuple[list[str], Opener]:
    if ext == ".xlsx":
        return _open_xlsx(data, file, sheet, notes)
    if ext == ".parquet":
        return _open_parquet(data, file)
    return _open_text(data, "\t" if ext == ".tsv" else ",", file)


def _wrong_kind(data: bytes, file: str) -> None:
    """Refuse a binary file saved under a text extension, naming what it probably is."""
    kinds = {b"PK\x03\x04": "an Excel .xlsx workbook (or another zip file)", b"PAR1": "a Parquet file",
             b"\xd0\xcf\x11\xe0": "an old Excel .xls workbook", b"%PDF": "a PDF document"}
    for magic, what in kinds.items():
        if data.startswith(magic):
            raise FulcrumError(f"this is {what}, not a text table.", file=file,
                               hint="Give it the right extension, or save it as CSV UTF-8 from the program that "
                                    "made it.")
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        raise FulcrumError("the file is saved as UTF-16 text.", file=file,
                           hint="Save it as UTF-8 (in Excel: Save As > 'CSV UTF-8').")
    nul = data.find(b"\x00")
    if nul >= 0:
        raise FulcrumError(f"the file holds binary data (a zero byte at byte {nul}), so it is not a text table.",
                           file=file, hint="Export the data as CSV UTF-8 and try again.")


def _open_text(data: bytes, sep: str, file: str) -> tuple[list[str], Opener]:
    _wrong_kind(data, file)
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise FulcrumError(f"the file is not UTF-8 text: byte {exc.start} (line {line}) is "
                           f"0x{data[exc.start]:02X}.", file=file,
                           hint="Save the file as UTF-8 (in Excel: Save As > 'CSV UTF-8'), then load it again.") from None
    if not text or text.isspace() or text == "\ufeff":
        raise FulcrumError("the file holds no text, only blank space.", file=file,
                           hint="Check that the file was saved or uploaded completely.")
    end = text.find("\n", 1 << 16)
    records = _records(text[:end] if end > 0 else text, sep, file)
    raw_header = next((r for _, _, r in records if any(x.strip() for x in r)), [])
    if raw_header:
        raw_header[0] = raw_header[0].removeprefix("\ufeff")
    header = [nfc(h.strip()) for h in raw_header]
    if len(header) == 1:
        found = {";": "semicolons", "\t": "tabs", ",": "commas"}
        for other, word in found.items():
            if other != sep and other in header[0]:
                expected = "tabs" if sep == "\t" else "commas"
                raise FulcrumError(f"wrong delimiter: the first line has one column, '{cut(header[0], 60)}', "
                                   f"which looks like values separated by {word}, but a {file.rsplit('.', 1)[-1]} "
                                   f"file is read with {expected}.", file=file,
                                   hint="Save the file with commas as .csv, or with tabs as .tsv.")

    def read(wanted: set[str], numeric: set[str]) -> Raw:
        import pyarrow.csv as pacsv

        names = [r for r, h in zip(raw_header, header) if h in wanted]

        def parse(block: int | None) -> pa.Table:
            return pacsv.read_csv(
                io.BytesIO(data), read_options=pacsv.ReadOptions(block_size=block) if block else None,
                parse_options=pacsv.ParseOptions(delimiter=sep, newlines_in_values=True),
                convert_options=pacsv.ConvertOptions(include_columns=names, strings_can_be_null=False,
                                                     column_types={n: pa.string() for n in names}))

        try:
            try:
                table = parse(None)
            except pa.ArrowInvalid as exc:
                if "straddl" not in str(exc):
                    raise
                table = parse(len(data) + 1)  # a record longer than Arrow's block: read the file as one block
        except pa.ArrowInvalid as exc:
            raise _ragged(text, sep, len(raw_header), file, exc) from None
        named = dict(zip(raw_header, header))
        return {named[h]: _arrow_text(col, named[h] in numeric) for h, col in zip(table.column_names, table.columns)}

    return header, read


def _records(text: str, sep: str, file: str) -> Iterator[tuple[int, int, list[str]]]:
    """(first line, last line, values) of each CSV record, any line ending; csv's refusals become FulcrumErrors."""
    records = csv.reader(io.StringIO(text, newline=""), delimiter=sep)
    last = 0
    while True:
        try:
            values = next(records)
        except StopIteration:
            return
        except csv.Error as exc:
            long = "field limit" in str(exc)
            raise FulcrumError(f"line {last + 1} holds a value longer than {csv.field_size_limit():,} characters."
                               if long else f"line {last + 1} could not be read ({exc}).", file=file,
                               hint="Look for a quote that is opened but never closed, or a cell pasted by mistake."
                               ) from None
        yield last + 1, records.line_num, values
        last = records.line_num


def _ragged(text: str, sep: str, width: int, file: str, exc: Exception) -> FulcrumError:
    """Find the first row whose number of values differs from the header's (slow path, errors only)."""
    row = -1
    for line, end, values in _records(text.removeprefix("\ufeff"), sep, file):
        if not values:
            continue
        row += 1
        if len(values) != width:
            more = len(values) > width
            span = f" (the record runs on to line {end}: a quote is probably never closed)" if end > line else ""
            return FulcrumError(f"line {line} has {len(values)} values but the header names {width} "
                                f"columns{span}.", file=file, rows=[row],
                                hint="A value probably contains the delimiter: put quotes around it, or remove the "
                                     "extra value." if more else "Add the missing values (empty cells are fine).")
    return FulcrumError(f"the table could not be read ({exc}).", file=file,
                        hint="Check quotes and delimiters around the place named.")


def _arrow_text(col: pa.ChunkedArray, numeric: bool) -> pd.Series:
    """Strip spaces, empty cells missing; a column wanted as numbers comes back as floats when it parses."""
    col = pc.utf8_trim_whitespace(col)
    col = pc.if_else(pc.equal(col, ""), pa.scalar(None, pa.string()), col)
    if numeric:
        try:
            values = pc.cast(col, pa.float64()).to_numpy(zero_copy_only=False)
        except pa.ArrowInvalid:
            pass
        else:
            if not np.isinf(values).any() and np.isnan(values).sum() == col.null_count:
                return pd.Series(values)
    return pd.Series(_text_values(col), dtype=object)


def _text_values(col: pa.ChunkedArray | pa.Array) -> np.ndarray:
    """The cells as an object array of str (None when empty). A long column with few distinct values (an
    arm, an allocation) points at one str per value instead of making a str per cell, which at a million
    rows saves most of the time and memory of reading it."""
    head = col.slice(0, PROBE)
    if len(col) <= PROBE or pc.count_distinct(head).as_py() > PROBE // 10:
        return col.to_numpy(zero_copy_only=False)
    distinct = pc.drop_null(pc.unique(col))
    codes = pc.fill_null(pc.index_in(col, value_set=distinct), -1).to_numpy(zero_copy_only=False)
    return np.array(distinct.to_pylist() + [None], dtype=object)[codes]



def cut(value: object, width: int = 40) -> str:
    """A cell as shown in a message (errors.printable: control characters spelled out, cut to width)."""
    return printable(value, width)


NUMBER = r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$"


def floats(s: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Numbers from text cells (None = missing): values (NaN where missing or bad) and the mask of entries
    that are not finite numbers. Arrow parses, as for CSV columns, so every file format agrees."""
    cells = pa.array(s.to_numpy(dtype=object), type=pa.string())
    ok = pc.fill_null(pc.match_substring_regex(cells, NUMBER), True)
    values = pc.cast(pc.if_else(ok, cells, pa.scalar(None, pa.string())), pa.float64()).to_numpy(zero_copy_only=False)
    bad = ~ok.to_numpy(zero_copy_only=False) | np.isinf(values)
    return np.where(bad, np.nan, values), bad


def _open_xlsx(data: bytes, file: str, sheet: str | None, notes: list[str]) -> tuple[list[str], Opener]:
    if not data.startswith(b"PK\x03\x04"):
        old = data.startswith(b"\xd0\xcf\x11\xe0")
        raise FulcrumError("this is an old Excel .xls workbook." if old else "this is not an Excel .xlsx workbook.",
                           file=file, hint="Open it in Excel and save it as .xlsx, or export CSV UTF-8.")
    import openpyxl

    archive = check_archive(data, file)  # before anything is unpacked
    try:
        book = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises many types for damaged workbooks
        raise FulcrumError(f"the workbook could not be opened ({type(exc).__name__}: {exc}).", file=file,
                           hint="Open it in Excel, save it again as .xlsx, or export CSV UTF-8.") from None
    names = book.sheetnames
    if sheet is None and len(names) > 1:
        raise FulcrumError(f"the workbook has {len(names)} sheets: {', '.join(repr(n) for n in names)}.", file=file,
                           key="cohort.sheet", hint=f'Add sheet = "{names[0]}" (or another) to [cohort] in the spec.')
    if sheet is not None and sheet not in names:
        close = difflib.get_close_matches(sheet, names, n=1, cutoff=0.4)
        raise FulcrumError(f"the workbook has no sheet '{sheet}'; its sheets are {', '.join(map(repr, names))}.",
                           file=file, key="cohort.sheet",
                           hint=f"Did you mean '{cut(close[0])}'?" if close else "Name one of the sheets listed.")
    ws = book[sheet or names[0]]
    rows = ws.iter_rows(values_only=True)
    first = next(rows, None)
    if first is None or all(v is None for v in first):
        raise FulcrumError("the sheet is empty or its first row has no column names.", file=file,
                           hint="Put the column names in the first row.")
    header = [nfc(cell_text(v) or "") for v in first]
    hidden = hidden_rows(archive, getattr(ws, "_worksheet_path", ""))
    if hidden:
        notes.append(f"{len(hidden)} row(s) of the sheet are hidden in the workbook (spreadsheet rows "
                     f"{', '.join(map(str, hidden[:10]))}{' ...' if len(hidden) > 10 else ''}); they are read "
                     "and analysed like every other row. Delete them from the file if they are not patients.")

    def read(wanted: set[str], numeric: set[str]) -> Raw:
        keep = [i for i, h in enumerate(header) if h in wanted]
        cols: dict[str, list] = {header[i]: [] for i in keep}
        for row in rows:  # empty rows stay (row numbers keep matching the sheet); trailing ones are dropped later
            for i in keep:
                cols[header[i]].append(cell_text(row[i]) if i < len(row) else None)
        book.close()
        return {h: pd.Series(v, dtype=object) for h, v in cols.items()}

    return header, read


def cell_text(v: object) -> str | None:
    """A spreadsheet or Parquet value as the text a person would type; None when empty."""
    if v is None:
        return None
    if isinstance(v, (bool, np.bool_)):
        return "true" if v else "false"
    if isinstance(v, float):
        if not np.isfinite(v):
            return None if np.isnan(v) else str(v)
        return str(int(v)) if v.is_integer() and abs(v) < 1e15 else repr(v)
    if hasattr(v, "isoformat"):
        return v.isoformat()
    text = str(v).strip()
    return text or None


def _open_parquet(data: bytes, file: str) -> tuple[list[str], Opener]:
    if not data.startswith(b"PAR1"):
        raise FulcrumError("this is not a Parquet file.", file=file,
                           hint="Give the file the extension of its real format (.csv, .tsv, .xlsx).")
    import pyarrow.parquet as pq

    try:
        pf = pq.ParquetFile(pa.BufferReader(data))  # reads the bytes in place
    except Exception as exc:  # pyarrow raises ArrowInvalid, OSError... for damaged files
        raise FulcrumError(f"the Parquet file could not be read ({exc}).", file=file,
                           hint="Write the file again, or export CSV UTF-8.") from None
    names = list(pf.schema_arrow.names)

    def read(wanted: set[str], numeric: set[str]) -> Raw:
        check_parquet(pf, file, {n for n in names if nfc(n.strip()) in wanted})  # before any column is read
        # one column at a time, so only one column's Arrow buffers are held beside the converted ones
        return {nfc(name.strip()): arrow_column(pf.read(columns=[name]).column(0), nfc(name.strip()) in numeric)
                for name in names if nfc(name.strip()) in wanted}

    return [nfc(n.strip()) for n in names], read


def arrow_column(col: pa.ChunkedArray, numeric: bool) -> pd.Series:
    """A typed Parquet column: numbers stay numbers where numbers are wanted, the rest becomes text."""
    t = col.type
    if pa.types.is_dictionary(t):
        col, t = col.cast(t.value_type), t.value_type
    plain = pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_boolean(t)
    if plain and numeric:
        return pd.Series(pc.cast(col, pa.float64()).to_numpy(zero_copy_only=False))
    if plain or pa.types.is_string(t) or pa.types.is_large_string(t):
        return _arrow_text(pc.cast(col, pa.string()), numeric)
    return pd.Series([cell_text(v) for v in col.to_pylist()], dtype=object)


def check_header(header: list[str], roles: dict[str, list[tuple[str, str]]], file: str) -> None:
    seen: dict[str, int] = {}
    for h in header:
        if h:
            seen[h] = seen.get(h, 0) + 1
    dups = [h for h, k in seen.items() if k > 1]
    if dups:
        raise FulcrumError(f"the header repeats column names: {', '.join(repr(d) for d in dups)}.", file=file,
                           column=dups[0], hint="Give every column its own name, then load the file again.")
    absent = [c for c in roles if c not in seen]
    if absent:
        parts = []
        for c in absent:
            close = [h for h in seen if h.lower() == c.lower()] or difflib.get_close_matches(c, list(seen), n=2,
                                                                                            cutoff=0.6)
            parts.append(f"'{c}' (named by {roles[c][0][1]})" +
                         (f" - did you mean {' or '.join(repr(x) for x in close)}?" if close else ""))
        listed = ", ".join(cut(h) for h in list(seen)[:30]) + (" ..." if len(seen) > 30 else "")
        raise FulcrumError(f"the file has no column {'; no column '.join(parts)}.", file=file, column=absent[0],
                           key=roles[absent[0]][0][1],
                           hint=f"Correct the name in the spec or in the file. Columns in the file: {listed}.")

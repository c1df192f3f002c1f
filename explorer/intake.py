"""Checks on a received file before and while it is read: the path is an ordinary readable file, a workbook or a
Parquet file does not unpack to more than a set size (a small .xlsx can hold gigabytes of text; a Parquet file's
metadata states each column's uncompressed size), hidden spreadsheet rows are found, and labels are compared in one
Unicode form.

The unpacked-size limit is `MAX_UNPACKED_MB` megabytes (default 500), set by the environment variable
FULCRUM_MAX_UNPACKED_MB for both the command line and the app.
"""
from __future__ import annotations

import contextlib
import io
import os
import re
import stat
import unicodedata
import zipfile
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import FulcrumError, printable

MAX_UNPACKED_MB = 500
MAX_ENTRIES = 10_000
ENV_LIMIT = "FULCRUM_MAX_UNPACKED_MB"


def read_file(path: Path, shown: str, key: str | None, what: str = "cohort") -> bytes:
    """The bytes of an input file; a missing file, a folder, a FIFO or device, or a read error is a located
    FulcrumError (nothing is read from a pipe or device, which could block or never end). key: the spec key
    that names the file (None for the spec itself)."""
    hint = f"Check {key} in the spec; it is read relative to the spec file's folder." if key else \
        "Check the path, or write a demo spec with 'fulcrum demo DIR'."
    try:
        st = path.stat()
    except FileNotFoundError:
        raise FulcrumError(f"the {what} file does not exist.", file=shown, key=key, hint=hint) from None
    except OSError as exc:
        raise FulcrumError(f"the {what} file could not be opened ({exc.strerror or exc}).", file=shown, key=key,
                           hint="Check that the file and its folders are readable by you.") from None
    if stat.S_ISDIR(st.st_mode):
        raise FulcrumError(f"the {what} path is a folder, not a file.", file=shown, key=key, hint=hint)
    if not stat.S_ISREG(st.st_mode):
        kind = "a named pipe (FIFO)" if stat.S_ISFIFO(st.st_mode) else \
            "a device" if stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode) else "not a regular file"
        raise FulcrumError(f"the {what} path is {kind}, not a regular file, so it is not read.", file=shown,
                           key=key, hint="Save the data to an ordinary file and name that file.")
    try:
        return path.read_bytes()
    except OSError as exc:
        raise FulcrumError(f"the {what} file could not be read ({exc.strerror or exc}).", file=shown, key=key,
                           hint="Check that the file is readable by you (permissions, a disk that is "
                                "still attached).") from None


def unpacked_limit() -> int:
    """The largest total unpacked size of a workbook, in bytes (FULCRUM_MAX_UNPACKED_MB, default 500)."""
    raw = os.environ.get(ENV_LIMIT, "").strip()
    if not raw:
        return MAX_UNPACKED_MB * 1_000_000
    try:
        mb = float(raw)
    except ValueError:
        mb = -1.0
    if not mb > 0:
        raise FulcrumError(f"the environment variable {ENV_LIMIT} is '{raw}', not a positive number of "
                           "megabytes.", hint=f"Unset it (default {MAX_UNPACKED_MB}) or set it to e.g. 2000.")
    return int(mb * 1_000_000)


def check_archive(data: bytes, file: str) -> zipfile.ZipFile:
    """Open a workbook's zip and refuse it when its parts would unpack to more than the limit, before any part
    is unpacked (the sizes come from the zip's directory, which also caps what the reader can unpack)."""
    try:
        archive = zipfile.ZipFile(io.BytesIO(data))
    except (zipfile.BadZipFile, OSError, ValueError) as exc:
        raise FulcrumError(f"the workbook could not be opened ({exc}).", file=file,
                           hint="Open it in Excel, save it again as .xlsx, or export CSV UTF-8.") from None
    parts = archive.infolist()
    limit = unpacked_limit()
    total = sum(p.file_size for p in parts)
    if len(parts) > MAX_ENTRIES or total > limit:
        big = max(parts, key=lambda p: p.file_size)
        raise FulcrumError(f"the workbook ({len(data) / 1e6:.1f} MB) would unpack to {total / 1e6:,.0f} MB "
                           f"({big.filename} alone {big.file_size / 1e6:,.0f} MB), more than the limit of "
                           f"{limit / 1e6:,.0f} MB." if total > limit else
                           f"the workbook holds {len(parts):,} parts, more than {MAX_ENTRIES:,}.", file=file,
                           hint="Export the sheet as CSV UTF-8 (read without this limit), or, if the workbook is "
                                f"genuine, raise the limit with the environment variable {ENV_LIMIT}.")
    return archive


def check_parquet(pf, file: str, columns: set[str]) -> None:
    """Refuse a Parquet file whose columns to be read would unpack to more than the limit, before any is read: the
    file's metadata gives each column chunk's uncompressed size per row group (pf: a pyarrow ParquetFile)."""
    meta = pf.metadata
    total, by_column = 0, dict[str, int]()
    for g in range(meta.num_row_groups):
        group = meta.row_group(g)
        for c in range(group.num_columns):
            chunk = group.column(c)
            name = chunk.path_in_schema.split(".")[0]
            if name in columns:
                total += chunk.total_uncompressed_size
                by_column[name] = by_column.get(name, 0) + chunk.total_uncompressed_size
    limit = unpacked_limit()
    if total > limit:
        big = max(by_column, key=lambda c: by_column[c])
        raise FulcrumError(f"the Parquet file's columns to be read would unpack to {total / 1e6:,.0f} MB ('{big}' "
                           f"alone {by_column[big] / 1e6:,.0f} MB), more than the limit of {limit / 1e6:,.0f} MB.",
                           file=file, column=big,
                           hint="Keep only the columns the analysis needs in the file, or, if the file is genuine, "
                                f"raise the limit with the environment variable {ENV_LIMIT}.")


ROW_TAG = re.compile(rb"<(?:\w+:)?row\b[^>]*>")
HIDDEN = re.compile(rb"""\bhidden\s*=\s*["'](?:1|true)["']""")
ROW_NUMBER = re.compile(rb"""\br\s*=\s*["'](\d+)["']""")


def hidden_rows(archive: zipfile.ZipFile, sheet_path: str) -> list[int]:
    """Spreadsheet row numbers marked hidden in one worksheet, read as a stream (never the whole sheet)."""
    found: list[int] = []
    try:
        stream = archive.open(sheet_path.lstrip("/"))
    except (KeyError, zipfile.BadZipFile, OSError):
        return found
    carry = b""
    with stream:
        while True:
            chunk = stream.read(1 << 20)
            if not chunk:
                break
            buf = carry + chunk
            cut = buf.rfind(b"<")
            body, carry = (buf[:cut], buf[cut:]) if cut > 0 else (buf, b"")
            for tag in ROW_TAG.finditer(body):
                if HIDDEN.search(tag.group()):
                    number = ROW_NUMBER.search(tag.group())
                    if number:
                        found.append(int(number.group(1)))
    return found


def nfc_series(s: pd.Series) -> tuple[pd.Series, int]:
    """Text cells in NFC (each distinct value normalised once); returns (cells, how many changed)."""
    values = [v for v in pd.unique(s.dropna()) if isinstance(v, str) and not v.isascii()]
    changed = {v: unicodedata.normalize("NFC", v) for v in values if not unicodedata.is_normalized("NFC", v)}
    if not changed:
        return s, 0
    n = int(s.isin(list(changed)).sum())
    return s.map(lambda v: changed.get(v, v) if isinstance(v, str) else v).astype(object), n


def release_memory() -> None:
    """Hand the memory a large upload's reading left behind back to the system: Python's cycles, Arrow's pool
    and glibc's free lists (the server otherwise keeps its peak size for every later session)."""
    import ctypes
    import gc

    gc.collect()
    try:
        import pyarrow as pa

        pa.default_memory_pool().release_unused()
    except (ImportError, AttributeError):
        pass
    try:
        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except (OSError, AttributeError):  # not glibc (macOS, Windows, musl): nothing to trim
        pass


@contextlib.contextmanager
def releasing_memory() -> Iterator[None]:
    """Run a large read, then release what it left behind, whether it succeeded or was refused."""
    try:
        yield
    finally:
        release_memory()


def drop_trailing_empty(raw: dict[str, pd.Series], notes: list[str]) -> dict[str, pd.Series]:
    """Rows at the end with every read cell empty (',,,,' lines, formatted but empty spreadsheet rows) are not
    patients: they are left out with a note. Empty rows among the patients stay, so row numbers keep counting."""
    if not raw:
        return raw
    n = len(next(iter(raw.values())))
    filled = np.zeros(n, bool)
    for s in raw.values():
        filled |= s.notna().to_numpy()
    last = int(np.flatnonzero(filled)[-1]) + 1 if filled.any() else 0
    if last == n:
        return raw
    notes.append(f"{n - last} empty row(s) at the end of the file (data rows {last + 1} to {n}) are not patients "
                 "and were left out.")
    return {h: s.iloc[:last].reset_index(drop=True) for h, s in raw.items()}


def number_hint(bad: pd.Series, index: bool) -> str:
    """What to do about cells that are not numbers: thousands separators, decimal commas, text in an index."""
    grouped = bad.str.fullmatch(r"[+-]?\d{1,3}(,\d{3})+(\.\d+)?")
    if grouped.any():
        example = printable(bad[grouped].iloc[0], 40)
        return (f"'{example}' looks like a number with a thousands separator: write it without one "
                f"({example.replace(',', '')}). Only if the comma is a decimal mark, use a point instead.")
    if bad.str.fullmatch(r"[+-]?\d+,\d+").any():
        return "Use a point as the decimal mark (2.5, not 2,5)."
    if index:
        return ("An index orders patients by a number (a score, an age): enter numbers only (code categories as "
                "numbers), leave a cell empty when the value is missing, or name a numeric column as the index.")
    return "Enter numbers only; leave a cell empty when the value is missing."

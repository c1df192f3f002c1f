"""CSV and Excel exports that a spreadsheet cannot turn into formulas (CSV injection, OWASP guidance).

A text cell whose first character is =, +, -, @, a tab or a carriage return (also after leading spaces) gets a
single quote in front, so spreadsheet programs show it as text and never run it; CSV text cells are quoted, so no
separator inside a cell (comma, semicolon, tab) can split it into a new cell. Numbers stay numbers, and text
that is only a plain number (such as "-3.5") is left as it is, since a spreadsheet reads it as that number.
"""
from __future__ import annotations

import csv
import io
import math
import re
from typing import Any

import numpy as np
import pandas as pd

TRIGGERS = ("=", "+", "-", "@", "\t", "\r")
PLAIN_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")
XLSX_ILLEGAL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f]")


def neutralise(text: str) -> str:
    """The text with a leading single quote when a spreadsheet could read it as a formula."""
    stripped = text.lstrip(" ")
    if not stripped or PLAIN_NUMBER.fullmatch(stripped.strip()):
        return text
    if text.startswith(TRIGGERS) or stripped.startswith(TRIGGERS):
        return "'" + text
    return text


def safe_cell(value: Any) -> Any:
    """A cell ready for export: numbers and booleans as they are, missing as None, anything else as safe text."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else (None if math.isnan(value) else str(float(value)))
    if isinstance(value, (pd.Timestamp, np.datetime64)):
        return pd.Timestamp(value).isoformat()
    return neutralise(str(value))


def safe_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy with every header and text cell neutralised; numeric columns are untouched."""
    out = pd.DataFrame({i: (col if _numeric(col) else col.astype(object).map(safe_cell).astype(object))
                        for i, (_, col) in enumerate(frame.items())})
    out.columns = [safe_cell(c) if not isinstance(c, str) else neutralise(c) for c in frame.columns]
    return out


def to_csv_safe(frame: pd.DataFrame) -> bytes:
    """UTF-8 CSV (with a byte-order mark, so Excel reads the accents) of a neutralised frame, no row index.

    Every text cell is in quotes, so a spreadsheet that splits on semicolons or tabs (as in many European
    locales) keeps a cell such as 'lap;=cmd|...' whole instead of making '=cmd|...' a cell of its own."""
    return safe_frame(frame).to_csv(index=False, lineterminator="\r\n",
                                    quoting=csv.QUOTE_NONNUMERIC).encode("utf-8-sig")


def to_xlsx_safe(frame: pd.DataFrame, sheet: str = "results") -> bytes:
    """An .xlsx workbook of a neutralised frame: text cells are written as text, never as formulas."""
    from openpyxl import Workbook
    from openpyxl.cell import WriteOnlyCell

    book = Workbook(write_only=True)
    ws = book.create_sheet(_sheet_name(sheet))

    def cell(value: Any) -> WriteOnlyCell:
        value = safe_cell(value)
        if isinstance(value, str):
            value = XLSX_ILLEGAL.sub("\ufffd", value)
        c = WriteOnlyCell(ws, value=value)
        if isinstance(value, str):
            c.data_type = "s"
        return c

    ws.append([cell(c) for c in frame.columns])
    for row in frame.itertuples(index=False, name=None):
        ws.append([cell(v) for v in row])
    buffer = io.BytesIO()
    book.save(buffer)
    return buffer.getvalue()


def _numeric(col: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(col.dtype) and not pd.api.types.is_bool_dtype(col.dtype) \
        and np.isfinite(col.to_numpy(dtype=float, na_value=np.nan)[col.notna().to_numpy()]).all()


def _sheet_name(name: str) -> str:
    """Excel sheet names: at most 31 characters, none of []:*?/\\."""
    return re.sub(r"[\[\]:*?/\\]", "_", name)[:31] or "results"

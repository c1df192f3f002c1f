"""The one error type users see: it says what is wrong, where, and what to do."""
from __future__ import annotations

from collections.abc import Sequence


class FulcrumError(Exception):
    """A problem with the user's input or request, worded for the user.

    `file`, `column`, `rows` (1-based data rows, header excluded), `key` (a spec key path)
    and `hint` (what to do) are kept as attributes so the app can lay them out, and are
    joined into the message so a terminal shows them too.
    """

    def __init__(
        self,
        what: str,
        *,
        file: str | None = None,
        column: str | None = None,
        rows: Sequence[int] | None = None,
        key: str | None = None,
        hint: str | None = None,
        n_rows: int | None = None,
    ) -> None:
        self.what = what
        self.file = file
        self.column = column
        self.rows = [int(r) for r in rows] if rows is not None else None
        self.key = key
        self.hint = hint
        self.n_rows = n_rows if n_rows is not None else (len(self.rows) if self.rows is not None else None)
        super().__init__(self.message)

    @property
    def where(self) -> str:
        parts = []
        if self.file:
            parts.append(str(self.file))
        if self.key:
            parts.append(f"key '{self.key}'")
        if self.column:
            parts.append(f"column '{self.column}'")
        if self.rows:
            parts.append(format_rows(self.rows, self.n_rows))
        return ", ".join(parts)

    @property
    def message(self) -> str:
        text = f"{self.where}: {self.what}" if self.where else self.what
        if self.hint:
            text += f" What to do: {self.hint}"
        return text

    def __str__(self) -> str:
        return self.message


def format_rows(rows: Sequence[int], total: int | None = None, first: int = 5) -> str:
    """'data row 4' or 'data rows 4, 9, 12 and 30 more', saying how to find them in a spreadsheet (rows are
    1-based data rows: the header is not counted, so spreadsheet row = data row + 1)."""
    rows = list(rows)
    total = len(rows) if total is None else total
    shown = ", ".join(str(r) for r in rows[:first])
    word = "row" if total == 1 else "rows"
    more = total - min(first, len(rows))
    return f"data {word} {shown}" + (f" and {more} more" if more > 0 else "") + \
        " (counted below the header: spreadsheet row = data row + 1)"


def printable(text: object, width: int | None = None) -> str:
    """Text safe to show: control and format characters (terminal escapes, bidi overrides) spelled out,
    long text cut, so a hostile cell or label can neither drive a terminal nor flood a message."""
    import unicodedata

    out = "".join(f"\\u{ord(c):04x}" if unicodedata.category(c) in ("Cc", "Cf") else c for c in str(text))
    return out if width is None or len(out) <= width else out[:width - 3] + "..."


def nfc(text: str) -> str:
    """A label in Unicode's composed form (NFC), so 'é' typed as one character or as e + accent is one label
    (labels are normalised on reading, in the spec and in the cohort file alike)."""
    import unicodedata

    return text if text.isascii() else unicodedata.normalize("NFC", text)

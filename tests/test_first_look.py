"""The Cohort page keeps a bounded first look at a received file (issue 19, item 3: memory after a large upload):
the first rows only, while the role guesses and each column's values still come from every row. The reference
is the full table as the loader reads it (appstate.preview) and the guesses made on it."""
from __future__ import annotations

from explorer import appstate as aps
from explorer import demo, roles


def test_first_look_is_bounded_but_made_from_every_row():
    frame, _ = demo.generate(n=1200, seed=4)
    frame = frame.sort_values("arm", kind="stable")  # the second arm appears only after the first 200 rows
    data = demo.to_csv_bytes(frame)
    full = aps.preview(data, "c.csv")
    look = aps.first_look(data, "c.csv")
    assert len(look.head) == aps.PREVIEW_ROWS and look.n_rows == len(full) == 1200
    assert look.head.equals(full.head(aps.PREVIEW_ROWS)) and look.columns == tuple(full.columns)
    assert look.guess == roles.guess_roles(full)
    assert set(look.values["arm"]) == set(full["arm"]) == {"laparotomy", "non-operative"}
    assert set(full["arm"].head(aps.PREVIEW_ROWS)) == {"laparotomy"}  # the head alone would miss an arm
    assert all(len(v) <= aps.MAX_VALUES for v in look.values.values())

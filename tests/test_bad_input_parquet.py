"""Bounded resources (issue 19, item 3) for Parquet: a file whose columns would unpack beyond
FULCRUM_MAX_UNPACKED_MB is refused before any column is read, on the command line and in the app. The
uncompressed sizes are pyarrow's own (the file's metadata), the reference the check is set against."""
from __future__ import annotations

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from explorer import appstate as aps
from explorer.cohort import load_cohort
from explorer.errors import FulcrumError

pytestmark = pytest.mark.bad_input


def _long_text_parquet(small_text, path, column: str) -> int:
    """The invented cohort with one text column made long and very compressible (zstd over repeated text); returns
    the uncompressed size of every column, from the file's metadata."""
    frame = small_text.copy()
    frame[column] = [v + "x" * 20_000 for v in frame.get(column, frame["arm"]).astype(str)]
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), path, compression="zstd",
                   use_dictionary=False)
    meta = pq.ParquetFile(path).metadata
    return sum(meta.row_group(g).column(c).total_uncompressed_size
               for g in range(meta.num_row_groups) for c in range(meta.num_columns))


@pytest.mark.parametrize("where", ["command line", "app"])
def test_a_parquet_file_that_unpacks_beyond_the_limit_is_refused_unread(write_case, small_text, tmp_path, monkeypatch,
                                                                        where):
    spec = write_case(small_text.iloc[:5], name="cohort.parquet")
    path = tmp_path / "cohort.parquet"
    total = _long_text_parquet(small_text, path, "sex")  # a covariate of the demo spec: read on both paths
    assert path.stat().st_size < 1_000_000 < total  # small on disk, 8 MB unpacked
    monkeypatch.setenv("FULCRUM_MAX_UNPACKED_MB", "2")
    read = (lambda: load_cohort(spec)) if where == "command line" else \
        (lambda: aps.preview(path.read_bytes(), "cohort.parquet"))
    with pytest.raises(FulcrumError) as info:
        read()
    err = info.value
    assert "limit of 2 MB" in str(err) and err.column == "sex" and "FULCRUM_MAX_UNPACKED_MB" in err.hint
    if where == "app":  # the preview reads every column, so all are counted
        assert f"would unpack to {total / 1e6:,.0f} MB" in str(err)
    monkeypatch.setenv("FULCRUM_MAX_UNPACKED_MB", "50")  # raised: the same file is read
    assert len(aps.preview(path.read_bytes(), "cohort.parquet")) == len(small_text)


def test_columns_the_spec_does_not_read_are_not_counted(write_case, small_text, tmp_path, monkeypatch):
    spec = write_case(small_text.iloc[:5], name="cohort.parquet")
    path = tmp_path / "cohort.parquet"
    assert _long_text_parquet(small_text, path, "note") > 4_000_000
    monkeypatch.setenv("FULCRUM_MAX_UNPACKED_MB", "2")
    assert load_cohort(spec).n == len(small_text)  # 'note' is never read (column pruning), so it is not refused

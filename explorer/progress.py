"""Progress shown on a terminal: a one-line bar on stderr (the command line and the coverage study use it)."""
from __future__ import annotations

import sys
import time


class ProgressBar:
    """A one-line text progress bar on stderr."""

    def __init__(self, label: str, stream=sys.stderr) -> None:
        self.label, self.stream, self.start = label, stream, time.monotonic()

    def __call__(self, done: int, total: int) -> None:
        width = 30
        filled = int(width * done / max(total, 1))
        secs = time.monotonic() - self.start
        self.stream.write(f"\r{self.label} [{'#' * filled}{'.' * (width - filled)}] {done}/{total} {secs:5.1f}s")
        if done >= total:
            self.stream.write("\n")
        self.stream.flush()

"""Rewrite the invented demo cohort, spec, dictionary and truth in this folder (the same bytes every time)."""
from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from explorer.demo import write_demo  # noqa: E402

if __name__ == "__main__":
    print(f"wrote {write_demo(HERE)} and its cohort, dictionary and truth")

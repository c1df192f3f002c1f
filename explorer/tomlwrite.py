"""Plain data out of the spec's dataclasses, and TOML values written back (so the app can save a spec)."""
from __future__ import annotations

import dataclasses
import json
from pathlib import Path
from typing import Any


def plain(obj: Any, relative_to: Path | None = None) -> Any:
    """Dataclasses as dicts (empty optional fields and `source` left out), paths relative to `relative_to`
    (else their file name), tuples as lists."""
    if dataclasses.is_dataclass(obj):
        return {f.name: plain(getattr(obj, f.name), relative_to) for f in dataclasses.fields(obj)
                if getattr(obj, f.name) not in (None, (), {}) and f.name != "source"}
    if isinstance(obj, Path):
        if relative_to is not None:
            try:
                return obj.resolve().relative_to(relative_to.resolve()).as_posix()
            except ValueError:
                return obj.resolve().as_posix()
        return obj.name
    if isinstance(obj, (list, tuple)):
        return [plain(v, relative_to) for v in obj]
    if isinstance(obj, dict):
        return {str(k): plain(v, relative_to) for k, v in obj.items()}
    return obj


def toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{toml_key(k)} = {toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(type(v))


def toml_key(k: str) -> str:
    return k if k.replace("_", "").replace("-", "").isalnum() and k.isascii() else json.dumps(k)

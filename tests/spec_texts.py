"""Spec text for tests, built instead of written out again in every file (`from spec_texts import spec_text`).

    spec_text(["alpha", "beta"], outcomes=[binary("y")], indices=["x"], analysis={"seed": 5})

gives the TOML of a spec whose [cohort] reads cohort.csv with arm column "arm"; `demo_spec_text` cuts the demo
spec (explorer.demo.SPEC_TOML) down to the outcomes and indices named. Keys keep the order they are given in,
so the text reads like a hand-written spec and `str.replace` edits of it work.
"""
from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import tomllib

from explorer import demo
from explorer.tomlwrite import toml_key, toml_value

Table = Mapping[str, Any]


def table(header: str, keys: Table) -> str:
    """`[header]` (or `[[header]]` when given with double brackets) and its keys, one a line."""
    head = header if header.startswith("[") else f"[{header}]"
    return "\n".join([head, *(f"{toml_key(k)} = {toml_value(v)}" for k, v in keys.items())]) + "\n"


def binary(name: str, column: str | None = None, **keys: Any) -> dict:
    """A binary outcome table: name, kind, column (default: the name), then any other keys."""
    return {"name": name, "kind": "binary", "column": column or name, **keys}


def column_index(name: str, column: str | None = None, **keys: Any) -> dict:
    """An index read from a column (default: the column of that name)."""
    return {"name": name, "column": column or name, **keys}


def spec_text(arms: Sequence[str], *, outcomes: Iterable[Table] = (), indices: Iterable[Table | str] = (),
              path: str = "cohort.csv", cohort: Table | None = None, **sections: Table | Iterable[Table]) -> str:
    """A whole spec: [cohort] (path, arm = "arm", arms, then the `cohort` keys; an `id` key goes first, before
    arm, as specs usually put it), the outcomes and indices (a bare string is a column index of that name), then
    each further section in the order given: a table for [name], a list of tables for [[name]]."""
    extra = dict(cohort or {})
    head = {"path": path, **({"id": extra.pop("id")} if "id" in extra else {}), "arm": "arm", "arms": list(arms)}
    parts = [table("cohort", {**head, **extra})]
    parts += [table("[[outcomes]]", o) for o in outcomes]
    parts += [table("[[indices]]", column_index(i) if isinstance(i, str) else i) for i in indices]
    for name, body in sections.items():
        parts += [table(name, body)] if isinstance(body, Mapping) else [table(f"[[{name}]]", t) for t in body]
    return "\n".join(parts)


def demo_spec_text(outcomes: Iterable[str], indices: Iterable[str], *, cohort_keys: Iterable[str] = ("id",),
                   path: str = "cohort.csv", **sections: Table | Iterable[Table]) -> str:
    """The demo spec cut to the outcomes and indices named (as the demo writes them), with the [cohort] keys
    named from the demo's, for a cohort file at `path`; further sections as in spec_text."""
    full = tomllib.loads(demo.SPEC_TOML.format(n=0, seed=0))
    by_name = {t["name"]: t for t in full["outcomes"] + full["indices"]}
    return spec_text(full["cohort"]["arms"], outcomes=[by_name[o] for o in outcomes],
                     indices=[by_name[i] for i in indices], path=path,
                     cohort={k: full["cohort"][k] for k in cohort_keys}, **sections)

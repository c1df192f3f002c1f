"""The app's plain-Python side: column-role guesses, specs built from the user's choices, cache keys,
saved specs, and a per-session workspace that keeps the last good cohort when an edit fails.

Nothing here imports streamlit, so every rule the pages follow is tested directly.
"""
from __future__ import annotations

import dataclasses
import hashlib
import io
import math
import re
from collections import OrderedDict
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np
import openpyxl
import pandas as pd

from . import result_rows as res
from .analysis import analyse
from .charts_checks import breakeven_summary_table
from .trust import baseline_table, checks_rows, clustering, km_curves
from .cohort import load_cohort, read_table
from .coverage import label_results
from .errors import FulcrumError
from .models import describe
from .fitting import FitSet, compute_indices, fit_all, run_bootstrap, summarise
from .headline import annotate
from .indices import needed_columns
from .intake import release_memory, releasing_memory
from .pairwise import pairwise_rows
from .selection import analyse_selection, randomised_coverage
from .spec import Spec, canonical_sha256, parse_spec, parse_spec_text, spec_to_dict, to_toml
from .roles import Guess, distinct_values, guess_roles
from .spec_sections import carried_rule_sections, reachable_target
from .values import prepare_composites

APP_SOURCE = "the app's settings"
# ------------------------------------------------------------------------------------------
# From the user's choices to a Spec (always through the one parser, so every check applies)
# ------------------------------------------------------------------------------------------
OUTCOME_COLUMNS = ("name", "kind", "column", "time", "event", "horizon", "levels", "label")
INDEX_COLUMNS = ("name", "column", "formula", "label")
_KIND_KEYS = {
    "survival": {"measure", "model", "adjust", "label", "units"},
    "ordinal": {"favourable", "measure", "adjust", "label", "among_survivors"},
    "continuous": {"higher_is_better", "bounds", "adjust", "units", "label", "among_survivors", "measure"},
    "binary": {"higher_is_better", "adjust", "label", "among_survivors", "measure"},
}


def _blank(v: Any) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v)) or (isinstance(v, str) and not v.strip()) \
        or v is pd.NA


def outcome_rows(spec: Spec | None, guess: Guess | None = None) -> list[dict]:
    """One editable row per outcome (from the spec, else from the guesses), for a table editor."""
    rows = []
    if spec is not None:
        for o in spec.outcomes:
            rows.append({"name": o.name, "kind": o.kind, "column": o.column or "", "time": o.time or "",
                         "event": o.event or "", "horizon": o.horizon, "levels": ", ".join(o.levels),
                         "label": o.label or ""})
        return rows
    g = guess or Guess()
    if g.time and g.event:
        rows.append({"name": "alive", "kind": "survival", "column": "", "time": g.time, "event": g.event,
                     "horizon": g.horizon, "levels": "", "label": ""})
    for col, levels in g.ordinal.items():
        rows.append({"name": _name(col), "kind": "ordinal", "column": col, "time": "", "event": "",
                     "horizon": None, "levels": ", ".join(levels), "label": ""})
    for col in g.binary:
        rows.append({"name": _name(col), "kind": "binary", "column": col, "time": "", "event": "",
                     "horizon": None, "levels": "", "label": ""})
    for col in g.continuous_outcomes:
        rows.append({"name": _name(col), "kind": "continuous", "column": col, "time": "", "event": "",
                     "horizon": None, "levels": "", "label": ""})
    return rows


def index_rows(spec: Spec | None, guess: Guess | None = None) -> list[dict]:
    """One editable row per column or formula index; prognostic indices are kept from the spec."""
    if spec is not None:
        return [{"name": i.name, "column": i.column or "", "formula": i.formula or "", "label": i.label or ""}
                for i in spec.indices if i.prognostic is None]
    g = guess or Guess()
    return [{"name": _name(c), "column": c, "formula": "", "label": ""} for c in g.indices[:3]]


def _name(column: str) -> str:
    name = re.sub(r"[^A-Za-z0-9_]+", "_", str(column)).strip("_").lower()
    return name or "outcome"


def outcomes_from_rows(rows: list[dict], base: Spec | None = None) -> list[dict]:
    """TOML-shaped [[outcomes]] tables from edited rows; keys the table does not show are kept from base."""
    known = {o.name: spec_to_dict_single(o) for o in base.outcomes} if base else {}
    out = []
    for i, row in enumerate(rows):
        if all(_blank(row.get(k)) for k in OUTCOME_COLUMNS):
            continue
        name = str(row.get("name") or "").strip()
        if not name:
            raise FulcrumError(f"outcome row {i + 1} has no name.", key=f"outcomes[{i + 1}].name",
                               hint="Give each outcome a short name, or clear the row.")
        kind_name = str(row.get("kind") or "").strip()
        table: dict[str, Any] = {"name": name, "kind": kind_name}
        old = known.get(name, {})
        if old.get("kind") == kind_name:
            table.update({k: v for k, v in old.items() if k in _KIND_KEYS.get(kind_name, set())})
        for key in _ROW_CELLS.get(kind_name, ("column", "label")):
            v = row.get(key)
            if not _blank(v):
                table[key] = str(v).strip()
            elif key == "label":
                table.pop("label", None)
        for key, read in _ROW_EXTRA.get(kind_name, {}).items():
            if not _blank(row.get(key)):
                read(table, row[key])
        out.append(table)
    return out


def _horizon_cell(table: dict, v: Any) -> None:
    try:
        table["horizon"] = float(v)
    except (TypeError, ValueError):
        raise FulcrumError(f"the horizon of outcome '{table['name']}' is not a number: {v!r}.",
                           key=f"outcomes '{table['name']}'.horizon", hint="Give the horizon as a number.") from None


def _levels_cell(table: dict, v: Any) -> None:
    table["levels"] = [s.strip() for s in str(v).split(",") if s.strip()]
    if "favourable" in table and not set(table["favourable"]) <= set(table["levels"]):
        del table["favourable"]


# The outcome table's cells, per kind as the spec names them (the spec's own keys, like _KIND_KEYS above):
# which text cells a row reads (default: column and label) and which cells need reading.
_ROW_CELLS = {"survival": ("time", "event", "label")}
_ROW_EXTRA = {"survival": {"horizon": _horizon_cell}, "ordinal": {"levels": _levels_cell}}


def spec_to_dict_single(obj) -> dict:
    """One spec dataclass as TOML-shaped data (lists for tuples, no empty keys)."""
    def clean(v: Any) -> Any:
        if isinstance(v, tuple):
            return [clean(x) for x in v]
        if dataclasses.is_dataclass(v):
            return spec_to_dict_single(v)
        if isinstance(v, dict):
            return {str(k): clean(x) for k, x in v.items()}
        return v

    return {f.name: clean(getattr(obj, f.name)) for f in dataclasses.fields(obj)
            if getattr(obj, f.name) not in (None, (), {})}


def indices_from_rows(rows: list[dict], base: Spec | None = None, keep_prognostic: tuple[str, ...] = ()
                      ) -> list[dict]:
    """TOML-shaped [[indices]] tables from edited rows, plus the base spec's prognostic indices kept."""
    known = {i.name: spec_to_dict_single(i) for i in base.indices} if base else {}
    out = []
    for i, row in enumerate(rows):
        if all(_blank(row.get(k)) for k in INDEX_COLUMNS):
            continue
        name = str(row.get("name") or "").strip() or _name(str(row.get("column") or ""))
        if not name or name == "outcome":
            raise FulcrumError(f"index row {i + 1} has no name.", key=f"indices[{i + 1}].name",
                               hint="Give each index a short name, or clear the row.")
        table: dict[str, Any] = {"name": name}
        old = known.get(name, {})
        for key in ("column", "formula", "label"):
            if not _blank(row.get(key)):
                table[key] = str(row[key]).strip()
        source = "column" if "column" in table else "formula" if "formula" in table else None
        if old.get(source) == table.get(source):
            for key in ("units", "discrete", "bounds"):  # keys the table does not show
                if key in old:
                    table[key] = old[key]
        out.append(table)
    for name in keep_prognostic:
        if name in known and "prognostic" in known[name]:
            out.append(known[name])
    return out


def build_spec(cohort: dict[str, Any], outcomes: list[dict], indices: list[dict], base: Spec | None = None,
               base_dir: Path | None = None) -> Spec:
    """A checked Spec from the Cohort page's choices (TOML-shaped tables; blank entries dropped), with the
    analysis, values and selection settings carried over from base where they still fit."""
    table = {k: v for k, v in cohort.items() if not _blank(v)}
    if not table.get("allocation"):
        table.pop("randomised", None)
    if base is not None and base.cohort.covariates and "covariates" not in table:
        table["covariates"] = list(base.cohort.covariates)
    if base is not None and base.cohort.labels and "labels" not in table:
        table["labels"] = dict(base.cohort.labels)
    data: dict[str, Any] = {"cohort": table, "outcomes": outcomes, "indices": indices}
    if base is not None:
        old = spec_to_dict(base)
        data["analysis"] = old.get("analysis", {})
        names = {o["name"]: o for o in outcomes}
        values = old.get("values")
        if values and names.get(values["outcome"], {}).get("kind") == "ordinal":
            levels = names[values["outcome"]].get("levels", [])
            if set(values.get("weights", {})) <= set(levels):
                for key in ("survival_outcome", "utility_outcome"):
                    if key in values and values[key] not in names:
                        del values[key]
                data["values"] = values
        if "selection" in old and table.get("allocation"):
            data["selection"] = old["selection"]
        pairwise = old.get("pairwise")
        if pairwise and set(pairwise.get("priority", [])) <= set(names):
            data["pairwise"] = pairwise
        index_names = {i["name"] for i in indices}
        maps = [m for m in old.get("maps", []) if set(m["indices"]) <= index_names
                and (m["target"] in names or (m["target"] == "composite" and "values" in data))]
        if maps:
            data["maps"] = maps
        data.update(carried_rule_sections(base, old, index_names))
        if "evidence" in old:  # kept while every outcome it names a threshold for is still there
            ev = dict(old["evidence"])
            ev["thresholds"] = {k: v for k, v in ev.get("thresholds", {}).items() if k in names}
            data["evidence"] = {k: v for k, v in ev.items() if v != {}}
    return parse_spec(data, base_dir=base_dir or Path("."), source=APP_SOURCE)



# ------------------------------------------------------------------------------------------
# Settings that never refit: margin, level, bands, weights
# ------------------------------------------------------------------------------------------
def edit_spec(spec: Spec, changes: dict[str, dict[str, Any]]) -> Spec:
    """Apply TOML-shaped changes section by section (None drops a key or a section) and re-check the whole
    spec through the parser."""
    base_dir = spec.cohort.path.parent
    data = spec_to_dict(spec, relative_to=base_dir)
    for section, table in changes.items():
        if table is None:
            data.pop(section, None)
        else:
            merged = {**data.get(section, {}), **table}
            data[section] = {k: v for k, v in merged.items() if v is not None}
    return parse_spec(data, base_dir=base_dir, source=spec.source or APP_SOURCE)


def with_settings(spec: Spec, *, margin: float | None = None, level: float | None = None,
                  bands: str | None = None, replicates: int | None = None, weights: dict[str, float] | None = None,
                  preset: str | None = None, whose: str | None = None, spread: float | None = None) -> Spec:
    """The spec with new analysis or value settings; None leaves a setting as it is."""
    analysis = {k: v for k, v in (("margin", margin), ("level", level), ("bands", bands),
                                  ("replicates", replicates)) if v is not None}
    values = {k: v for k, v in (("weights", weights), ("preset", preset), ("whose", whose), ("spread", spread))
              if v is not None}
    changes: dict[str, dict[str, Any]] = {}
    if analysis:
        changes["analysis"] = analysis
    if values:
        if spec.values is None:
            raise FulcrumError("the spec has no [values] section, so there are no weights to set.",
                               key="values", hint="Choose the ordinal outcome whose states you want to weigh.")
        changes["values"] = values
    return edit_spec(spec, changes) if changes else spec


def add_values(spec: Spec, outcome: str) -> Spec:
    """Start a [values] section on an ordinal outcome with equal-step weights."""
    changes: dict[str, Any] = {"outcome": outcome}
    survival = [o.name for o in spec.outcomes if describe(o).follow_up]
    if survival:
        changes["survival_outcome"] = survival[0]
    return edit_spec(spec, {"values": changes})


# ------------------------------------------------------------------------------------------
# Cache keys, saved specs, error text
# ------------------------------------------------------------------------------------------
def data_sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def fit_spec(spec: Spec) -> Spec:
    """The spec with every setting that fitting does not read set to its default."""
    a = spec.analysis
    neutral = dataclasses.replace(a, margin=0.0, interval="analytic", bands="pointwise", replicates=1000,
                                  workers=1, scheduler=None)
    return dataclasses.replace(spec, analysis=neutral, values=None, pairwise=None, maps=(), source=None,
                               outcomes=tuple(dataclasses.replace(o, margin=None) for o in spec.outcomes))


def fit_key(data_hash: str, spec: Spec) -> tuple[str, str]:
    """(data sha256, canonical hash of what fitting reads): equal keys give equal fits."""
    return data_hash, canonical_sha256(fit_spec(spec))


def result_key(data_hash: str, spec: Spec, bootstrap: bool = False) -> tuple[str, str, bool]:
    """(data sha256, canonical spec hash, whether bootstrap intervals are in it)."""
    return data_hash, canonical_sha256(spec), bootstrap


def spec_text(spec: Spec) -> str:
    """The spec as TOML with the cohort path written as the file's name, so it reloads beside the file."""
    head = ("# Fulcrum spec saved by the app. Put it beside the cohort file and run: fulcrum analyse <this file>\n"
            "# Research and discussion aid, not a medical device.\n\n")
    return head + to_toml(spec, relative_to=spec.cohort.path.parent)


def read_spec(text: str | bytes, current: Spec, source: str = "the uploaded spec") -> tuple[Spec, list[str]]:
    """Parse an uploaded spec for the cohort already loaded; notes say what was adjusted to fit it."""
    if isinstance(text, bytes):
        try:
            text = text.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise FulcrumError(f"the spec is not UTF-8 text (byte {exc.start}).", file=source,
                               hint="Upload the .toml file the app saved.") from None
    spec = parse_spec_text(text, base_dir=current.cohort.path.parent, source=source)
    notes = []
    if spec.cohort.path is None or spec.cohort.path.name != current.cohort.path.name:
        notes.append(f"The spec names the cohort {spec.cohort.database or spec.cohort.path.name!r}; it was applied to "
                     f"the loaded file '{current.cohort.path.name}'.")
        spec = dataclasses.replace(spec, cohort=dataclasses.replace(spec.cohort, path=current.cohort.path, database=None,
                                                                     table=None, query=None, password_env=None))
    spec, more = reachable_target(spec)
    return spec, notes + more


def error_parts(exc: BaseException) -> dict[str, str]:
    """The pieces of an error for display: what, where and what to do."""
    if isinstance(exc, FulcrumError):
        out = {"what": exc.what[:1].upper() + exc.what[1:]}
        if exc.where:
            out["where"] = exc.where
        if exc.hint:
            out["hint"] = exc.hint
        return out
    return {"what": f"Something went wrong that Fulcrum did not expect ({type(exc).__name__}: {exc}).",
            "hint": "Your cohort and settings are kept. Please report this with the steps that led to it."}


_MD = re.compile(r"([\\`*_\[\]<>#|~$:])")
_MD_LINE = re.compile(r"^(\s*)(\d+)([.)])|^(\s*)([-+=])", re.MULTILINE)


def md_escape(text: Any) -> str:
    """Text safe to place inside Streamlit markdown: user strings never become markup, links, emoji or lists."""
    out = _MD.sub(r"\\\1", str(text))
    return _MD_LINE.sub(lambda m: f"{m.group(1)}{m.group(2)}\\{m.group(3)}" if m.group(2) else
                        f"{m.group(4)}\\{m.group(5)}", out)


# ------------------------------------------------------------------------------------------
# The workspace: one session's cohort, spec, fits and results
# ------------------------------------------------------------------------------------------
class LRU(OrderedDict):
    """A small dictionary that forgets its oldest entries beyond `size`."""

    def __init__(self, size: int) -> None:
        super().__init__()
        self.size = size

    def put(self, key: Any, value: Any) -> Any:
        self[key] = value
        self.move_to_end(key)
        while len(self) > self.size:
            self.popitem(last=False)
        return value

    def take(self, key: Any) -> Any:
        if key in self:
            self.move_to_end(key)
            return self[key]
        return None


@dataclass
class Workspace:
    """One session's loaded cohort (bytes kept in memory only), its spec, and caches of what was computed.

    Every change builds a new Workspace or raises FulcrumError, so the page keeps the last good one.
    Models are fitted once per (data hash, fit-relevant spec); margin, level bands and weights only
    re-summarise. The caches are plain attributes of this object, which lives in one session's state.
    """

    data: bytes
    filename: str
    spec: Spec
    cohort: Any
    is_demo: bool = False
    notes: list[str] = field(default_factory=list)
    source: dict | None = None  # a database extract's provenance, carried into the results' inputs.source
    fits: LRU = field(default_factory=lambda: LRU(10))
    results: LRU = field(default_factory=lambda: LRU(12))
    replicates: LRU = field(default_factory=lambda: LRU(2))
    n_fits: int = 0
    trust: LRU = field(default_factory=lambda: LRU(32))

    @property
    def data_sha256(self) -> str:
        return self.cohort.sha256

    @classmethod
    def open(cls, data: bytes, filename: str, spec: Spec, *, is_demo: bool = False,
             source: dict | None = None) -> Workspace:
        """Load and check the cohort for this spec; raises FulcrumError and changes nothing on failure.
        source: the provenance of a cohort read from a database (explorer.database), kept on the cohort."""
        cohort = load_for(spec, data, filename)
        if source is not None:
            cohort.source = source
        return cls(data=data, filename=filename, spec=spec, cohort=cohort, is_demo=is_demo, source=source)

    def with_spec(self, spec: Spec) -> Workspace:
        """The same cohort under a new spec: reloaded and re-checked when the fit-relevant parts changed."""
        if fit_key("", spec) == fit_key("", self.spec):
            return dataclasses.replace(self, spec=spec, notes=[])
        new = Workspace.open(self.data, self.filename, spec, is_demo=self.is_demo, source=self.source)
        new.fits, new.results, new.replicates, new.n_fits = self.fits, self.results, self.replicates, self.n_fits
        new.trust = self.trust
        return new

    def _key(self, *parts: Any) -> tuple:
        return (*parts, *fit_key(self.data_sha256, self.spec))

    def index_values(self) -> dict:
        """Each index over the cohort (computed once per cohort and spec; the fits reuse them)."""
        key = self._key("indices")
        return self.fits.take(key) or self.fits.put(key, compute_indices(self.spec, self.cohort))

    def is_fitted(self) -> bool:
        return self._key("fits") in self.fits

    def fitset(self, progress: Callable[[int, int], None] | None = None):
        """The fitted models for this cohort and spec, fitted once and reused (never for weights or margin)."""
        key = self._key("fits")
        fs = self.fits.take(key)
        if fs is None:
            fs = self.fits.put(key, fit_all(self.spec, self.cohort, indices=self.index_values(), progress=progress))
            self.n_fits += 1
        return dataclasses.replace(fs, spec=self.spec)

    # -- bootstrap, on request ---------------------------------------------------------------
    def boot_key(self) -> tuple:
        a = self.spec.analysis
        return self._key("boot", a.replicates, a.seed)

    def has_bootstrap(self) -> bool:
        return self.boot_key() in self.replicates

    def run_bootstrap(self, progress: Callable[[int, int], None] | None = None) -> None:
        """Bootstrap replicates for the current fits, kept for every later re-summary (margin, weights); with
        chosen patients in the cohort, the bootstrap of the break-even shift too (selection.analyse_selection
        exactly as analyse() runs it), so the report that follows runs no bootstrap of its own."""
        fs = self.fitset()
        keep = (self.spec.values.outcome,) if self.spec.values else ()
        self.replicates.put(self.boot_key(), run_bootstrap(fs, progress=progress, keep_distribution=keep))
        if self.spec.cohort.allocation and fs.cohort.randomised is not None:
            spec = _interval(self.spec, "bootstrap")
            self.results.put(self._boot_selection_key(), analyse_selection(
                dataclasses.replace(fs, spec=spec), replicates=None, progress=progress))

    def _boot_selection_key(self) -> tuple:
        spec = _interval(dataclasses.replace(self.spec, values=None), "bootstrap")
        return ("boot-selection", *result_key(self.data_sha256, spec, True))

    def _reps(self, bootstrap: bool) -> list[dict] | None:
        return self.replicates.take(self.boot_key()) if bootstrap else None

    def _cached(self, key: tuple, make: Callable[[], Any], store: LRU | None = None) -> Any:
        store = self.results if store is None else store
        found = store.take(key)
        return found if found is not None else store.put(key, make())

    # -- what the pages show -----------------------------------------------------------------
    def curve_rows(self, bootstrap: bool = True) -> list[dict]:
        """The `results` rows (outcome x index) for the current margin, level and bands."""
        boot = bootstrap and self.has_bootstrap()

        def make() -> list[dict]:
            fs = self.fitset()
            if boot:
                fs = dataclasses.replace(fs, spec=_interval(self.spec, "bootstrap"))
            summaries = summarise(fs, self._reps(boot))
            rows = [res.curve_row(fs.pairs[k], s, res.index_info_json(fs.indices[k[1]])) for k, s in summaries.items()]
            chosen = self.spec.cohort.allocation and fs.cohort.randomised is not None
            annotate(fs, rows, self.selection().rows if chosen else [])  # as analyse(): selection, far-out values
            return label_results(rows, fs.spec)

        return self._cached(("rows", *result_key(self.data_sha256, self.spec, boot)), make)

    def composites(self, bootstrap: bool = True) -> dict:
        """Prepared composites (level probabilities on the grid) for fast re-weighting."""
        if self.spec.values is None:
            return {}
        boot = bootstrap and self.has_bootstrap()
        v = self.spec.values
        key = self._key("composites", boot, v.outcome, v.survival_outcome, v.utility_outcome,
                        self.spec.analysis.replicates if boot else 0)
        return self.fits.take(key) or self.fits.put(key, prepare_composites(self.fitset(), replicates=self._reps(boot)))

    def selection(self, replicates: int | None = 0, progress: Callable[[int, int], None] | None = None):
        """The randomised-vs-chosen analysis for the current margin and level; replicates=0 skips the
        bootstrap of the break-even shift, None uses the engine's default number."""
        spec = dataclasses.replace(self.spec, values=None)
        key = ("selection", replicates, self.data_sha256, canonical_sha256(spec))
        return self._cached(key, lambda: analyse_selection(self.fitset(), replicates=replicates, progress=progress))

    def has_selection(self, replicates: int | None) -> bool:
        spec = dataclasses.replace(self.spec, values=None)
        return ("selection", replicates, self.data_sha256, canonical_sha256(spec)) in self.results

    def pairwise(self, index: str | None, progress: Callable[[int, int], None] | None = None) -> list[dict]:
        """The hierarchical pairwise comparison, overall and in windows along the index."""
        spec = dataclasses.replace(self.spec, values=None)
        key = ("pairwise", index, self.data_sha256, canonical_sha256(spec))
        ivs = self.index_values()
        return self._cached(key, lambda: pairwise_rows(
            self.spec, self.cohort, index, ivs.get(index) if index else None,
            replicates=min(self.spec.analysis.replicates, 200), progress=progress))

    def results_spec(self, bootstrap: bool = True) -> Spec:
        """The spec the results are made with: its interval says whether the bootstrap's intervals are in them,
        so the saved spec reproduces the results with `fulcrum analyse`."""
        return _interval(self.spec, "bootstrap" if bootstrap and self.has_bootstrap() else "analytic")

    def result(self, bootstrap: bool = True, progress: Callable[[int, int], None] | None = None):
        """The whole analysis as the engine's orchestrator makes it (for the report and the JSON)."""
        boot = bootstrap and self.has_bootstrap()
        key = ("result", *result_key(self.data_sha256, self.spec, boot))

        def make():
            spec = self.results_spec(bootstrap)
            fs = dataclasses.replace(self.fitset(), spec=spec)
            extra: dict[str, Any] = {"spec_bytes": spec_text(spec).encode()}
            if boot:  # the replicates already run: the report needs no new bootstrap
                extra["replicates"] = self._reps(True)
                extra["selection"] = self.results.take(self._boot_selection_key())
            return analyse(spec, fitset=fs, **extra)

        return self._cached(key, make)

    # -- can the curves be trusted? ------------------------------------------------------------
    def checks(self) -> list[dict]:
        """The JSON `checks` rows (observed vs fitted, calibration, sliding windows, effect modification,
        break-even by horizon) for the current fits, margin and level; [] when the spec switches them off."""
        if not self.spec.analysis.checks:
            return []
        a = self.spec.analysis
        key = self._key("checks", a.margin, a.level)
        return self._cached(key, lambda: checks_rows(self.fitset()), self.trust)

    def _unfitted(self):
        """The cohort and its indices as a FitSet without fits, for what needs no model."""
        return FitSet(self.spec, self.cohort, self.index_values(), {})

    def km_curves(self, outcome: str, index: str | None = None, bands: int = 5) -> list[dict]:
        """Kaplan-Meier curves per arm, overall and (with an index) per band of it, with numbers at risk."""
        key = self._key("km", outcome, index, bands, self.spec.analysis.level)
        ivs = self.index_values()
        return self._cached(key, lambda: km_curves(self.cohort, outcome, ivs[index] if index else None,
                                                   bands=bands if index else None, level=self.spec.analysis.level),
                            self.trust)

    def baseline(self) -> list[dict]:
        """The baseline table by arm and allocation with standardised mean differences ([] without covariates)."""
        if not self.spec.cohort.covariates:
            return []
        key = self._key("baseline")
        return self._cached(key, lambda: baseline_table(self.cohort), self.trust)

    def coverage(self, index: str) -> list[dict]:
        """Patients per window of the index by arm and allocation ([] without an allocation column)."""
        key = self._key("coverage", index)
        return self._cached(key, lambda: randomised_coverage(self._unfitted(), index), self.trust)

    def clustering(self) -> dict | None:
        """Which clustered intervals the analysis uses and over how many clusters (None without a cluster column)."""
        return clustering(self._unfitted())


def _interval(spec: Spec, interval: str) -> Spec:
    return dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, interval=interval))


def load_for(spec: Spec, data: bytes, filename: str):
    """Read and check the cohort bytes against the spec (the engine's loader, nothing of our own)."""
    with releasing_memory():
        return load_cohort(spec, data=data, filename=filename, extra_columns=needed_columns(spec))


# ------------------------------------------------------------------------------------------
# A first look at an uploaded file, for the role guesses
# ------------------------------------------------------------------------------------------
def preview(data: bytes, filename: str, sheet: str | None = None) -> pd.DataFrame:
    """Every column of the file as text (the loader's own reader), so roles can be guessed before checking."""
    with releasing_memory():
        frame = read_table(data, filename, sheet)
    if frame.empty:
        raise FulcrumError("the file has column names but no data rows.", file=filename,
                           hint="Add one row per patient under the header.")
    return frame


PREVIEW_ROWS = 200  # rows of a received file kept for the Cohort page to show (never the whole table)
MAX_VALUES = 50  # distinct values kept per column, for the arm, allocation and level choices


@dataclass(frozen=True)
class FirstLook:
    """What the Cohort page needs of a received file, and nothing more: its columns and row count, the role
    guesses and each column's first distinct values (made from every row), and the first PREVIEW_ROWS rows.
    The whole text table is dropped once this is made, so a large upload is not held twice in the session."""

    columns: tuple[str, ...]
    n_rows: int
    guess: Guess
    values: dict[str, tuple[str, ...]]
    head: pd.DataFrame


def first_look(data: bytes, filename: str, sheet: str | None = None) -> FirstLook:
    """Read the file once (preview), keep the bounded summary the page uses, release the rest."""
    frame = preview(data, filename, sheet)
    try:
        look = FirstLook(columns=tuple(frame.columns), n_rows=len(frame), guess=guess_roles(frame),
                         values={c: tuple(distinct_values(frame[c])[:MAX_VALUES]) for c in frame.columns},
                         head=frame.head(PREVIEW_ROWS).copy())
    finally:
        del frame
        release_memory()
    return look


def sheet_names(data: bytes) -> list[str]:
    """The sheets of an .xlsx workbook (empty when it cannot be opened)."""
    try:
        book = openpyxl.load_workbook(io.BytesIO(data), read_only=True)
    except Exception:
        return []
    names = list(book.sheetnames)
    book.close()
    return names


def chart_catalogue(doc: dict, index_titles: dict[str, str], outcome_titles: dict[str, str]) -> list[dict]:
    """Every chart the results hold: a label, a safe file name, the row, and whether it is a composite."""
    out = []
    for composite, rows in ((False, doc.get("results", [])), (True, doc.get("composite", []))):
        for row in rows:
            ix = index_titles.get(row["index"], row["index"])
            what = (row.get("label") or f"Value of outcomes ({row.get('kind', 'composite').replace('_', ' ')})"
                    if composite
                    else outcome_titles.get(row["outcome"], row["outcome"]))
            name = f"{'composite_' + row.get('kind', '') if composite else row['outcome']}_by_{row['index']}"
            out.append({"label": f"{what} along {ix}", "file": re.sub(r"[^A-Za-z0-9_.-]+", "_", name),
                        "row": row, "composite": composite, "index_label": ix})
    return out


def patient_fields(spec: Spec, index_values: dict, frame: pd.DataFrame,
                   codings: dict[str, dict[str, float]] | None = None) -> list[dict]:
    """What the Patient page asks for: each column index's value, and the columns a formula or prognostic
    index reads; each with a default (the cohort median, or the commonest value of a text column). A text
    column the cohort coded 0/1 (codings, from patient.text_codings) is asked by the file's own labels."""
    fields: dict[str, dict] = {}
    codings = codings or {}
    for ix in spec.indices:
        iv = index_values[ix.name]
        if ix.column:
            x = iv.finite
            discrete = bool(iv.info.get("discrete"))
            fields[ix.name] = {"key": ix.name, "label": ix.title, "numeric": True, "discrete": discrete,
                               "default": float(np.round(np.median(x)) if discrete else np.median(x)),
                               "min": float(np.min(x)), "max": float(np.max(x))}
            continue
        for col in getattr(iv.model, "columns", ()) or ():
            if col in fields or col not in frame:
                continue
            s = frame[col].dropna()
            nums = pd.to_numeric(s, errors="coerce")
            if codings.get(col):
                by_code = {v: k for k, v in codings[col].items()}
                counts = nums.value_counts()
                options = [by_code[c] for c in counts.index if c in by_code] or list(codings[col])
                fields[col] = {"key": col, "label": spec.column_title(col), "numeric": False, "options": options,
                               "default": options[0]}
            elif len(s) and nums.notna().all():
                whole = bool(np.all(np.mod(nums, 1) == 0))
                fields[col] = {"key": col, "label": spec.column_title(col), "numeric": True, "discrete": whole,
                               "default": float(np.median(nums)), "min": float(nums.min()), "max": float(nums.max())}
            else:
                options = [str(v) for v in s.astype(str).value_counts().index]
                fields[col] = {"key": col, "label": spec.column_title(col), "numeric": False, "options": options,
                               "default": options[0] if options else ""}
    return list(fields.values())


@dataclass
class PatientChoice:
    """The one patient in hand for the whole session: entered values, or a cohort row, and the values record
    (whose values the weights are). Every page reads it; only the user's own edits or a reset change it."""
    how: str = "entered"  # "entered" | "row"
    values: dict[str, Any] = field(default_factory=dict)
    row: int | None = None
    record: Any = None  # conversation.ValuesRecord from the values conversation, when one was held

    def fitted_to(self, fields: list[dict], n_rows: int) -> PatientChoice:
        """The same patient for a (possibly new) cohort: entered values kept where the field still exists and
        its value is still allowed, every other field at the cohort's default; a row beyond the cohort dropped."""
        values = {}
        for f in fields:
            v = self.values.get(f["key"])
            ok = v is not None and (f["numeric"] and isinstance(v, (int, float)) and math.isfinite(v)
                                    or not f["numeric"] and v in f["options"])
            values[f["key"]] = v if ok else f["default"]
        row = self.row if self.row is not None and 0 <= self.row < n_rows else 0
        return dataclasses.replace(self, how="row" if self.how == "row" else "entered", values=values, row=row)

    def inputs(self) -> tuple[dict[str, Any], int | None]:
        """(values, row) as patient.place_patient takes them."""
        return ({}, int(self.row or 0)) if self.how == "row" else (dict(self.values), None)

    def describe(self, fields: list[dict], whose: str | None = None) -> str:
        """One line for the sidebar and the printouts: who the patient is and whose values are in use."""
        if self.how == "row":
            text = f"cohort row {int(self.row or 0) + 1:,}"
        else:
            labels = {f["key"]: f["label"] for f in fields}
            text = ", ".join(f"{labels.get(k, k)} {_short(v)}" for k, v in self.values.items()) or "no values"
        return text + (f"; values: {whose}" if whose else "")


def _short(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:.0f}" if float(v).is_integer() else f"{v:.3g}"
    return str(v)


def breakeven_table(doc: dict) -> pd.DataFrame:
    """The table of every break-even point (results and composites) for spreadsheet downloads."""
    return breakeven_summary_table(doc)

"""The analysis spec: TOML in, frozen typed dataclasses out, every key checked.

One module holds the whole schema (`SCHEMA` tables below), so the parser, the unknown-key
suggestions, the TOML writer and the generated spec reference all read the same definitions.
"""
from __future__ import annotations

import difflib
import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10: the same parser, published as tomli
    import tomli as tomllib

from . import margins
from .database import KEYS as DATABASE_KEYS
from .database import cohort_source
from .errors import FulcrumError
from .intake import read_file
from .presets import default_weights, preset_weights
from .settings import check_analysis
from .spec_readers import Reader, known, range_check
from .spec_sections import SECTION_SCHEMA, EvidenceSpec, PolicySpec, TargetSpec, evidence_section, target_and_policy
from .tomlwrite import plain
from .tomlwrite import toml_value as _toml_value

OUTCOME_KINDS = ("continuous", "binary", "ordinal", "survival")
INTERVALS = ("analytic", "bootstrap")
CURVED_INTERVALS = ("test-inversion", "delta")
SHAPES = ("linear", "spline")
BANDS = ("pointwise", "simultaneous")
SURVIVAL_MEASURES = ("survival", "rmst")
SURVIVAL_MODELS = ("cox", "weibull")
FIT_ON = ("second", "all")
WHOSE = ("patient", "proxy", "team")
POPULATIONS = ("all", "randomised", "all_adjusted", "all_weighted")


@dataclass(frozen=True)
class CohortSpec:
    path: Path | None  # None when the cohort is read from a database
    arm: str
    arms: tuple[str, str]
    id: str | None = None
    allocation: str | None = None
    randomised: str = "randomised"
    cluster: str | None = None
    sheet: str | None = None
    covariates: tuple[str, ...] = ()
    labels: tuple[tuple[str, str], ...] = ()  # (column, the label a person reads); a tuple keeps the spec hashable
    database: str | None = None
    table: str | None = None
    query: str | None = None
    password_env: str | None = None


@dataclass(frozen=True)
class OutcomeSpec:
    name: str
    kind: str
    column: str | None = None
    time: str | None = None
    event: str | None = None
    horizon: float | None = None
    measure: str | None = None
    levels: tuple[str, ...] = ()
    favourable: tuple[str, ...] = ()
    higher_is_better: bool = True
    model: str | None = None
    adjust: tuple[str, ...] = ()
    label: str | None = None
    units: str | None = None
    among_survivors: bool = False
    bounds: tuple[float, float] | None = None
    margin: float | None = None

    @property
    def title(self) -> str:
        return self.label or self.name

    @property
    def columns(self) -> tuple[str, ...]:
        """Every cohort column this outcome reads (adjustment covariates included)."""
        own = (self.time, self.event) if self.kind == "survival" else (self.column,)
        return tuple(c for c in own if c) + self.adjust


@dataclass(frozen=True)
class PrognosticSpec:
    outcome: str
    covariates: tuple[str, ...]
    fit_on: str = "second"
    folds: int = 5


@dataclass(frozen=True)
class IndexSpec:
    name: str
    column: str | None = None
    formula: str | None = None
    prognostic: PrognosticSpec | None = None
    label: str | None = None
    units: str | None = None
    discrete: bool | None = None
    bounds: tuple[float, float] | None = None

    @property
    def kind(self) -> str:
        return "column" if self.column else "formula" if self.formula else "prognostic"

    @property
    def title(self) -> str:
        return self.label or self.name


@dataclass(frozen=True)
class ValuesSpec:
    outcome: str
    weights: dict[str, float] = field(default_factory=dict)
    preset: str | None = None
    ranges: dict[str, tuple[float, float]] = field(default_factory=dict)
    acceptable: tuple[str, ...] = ()
    survival_outcome: str | None = None
    utility_outcome: str | None = None
    whose: str = "team"
    spread: float = 0.0
    draws: int = 500


@dataclass(frozen=True)
class AnalysisSpec:
    margin: float = 0.0
    level: float = 0.95
    interval: str = "analytic"
    replicates: int = 1000
    seed: int = 1
    shape: str = "linear"
    knots: int = 4
    bands: str = "pointwise"
    workers: int = 1
    scheduler: str | None = None
    refit_index: bool = False
    grid: int = 200
    checks: bool = True
    imputations: int = 0
    curved_interval: str = "test-inversion"
    population: str | None = None  # None: chosen from the data (analysis.headline_population)


@dataclass(frozen=True)
class SelectionSpec:
    covariates: tuple[str, ...] = ()
    truncate: tuple[float, float] = (1.0, 99.0)
    min_per_window: int = 10


@dataclass(frozen=True)
class PairwiseSpec:
    priority: tuple[str, ...] = ()
    window: int = 300


@dataclass(frozen=True)
class MapSpec:
    indices: tuple[str, str]
    target: str
    interaction: bool = False


@dataclass(frozen=True)
class Spec:
    cohort: CohortSpec
    outcomes: tuple[OutcomeSpec, ...]
    indices: tuple[IndexSpec, ...]
    analysis: AnalysisSpec = AnalysisSpec()
    values: ValuesSpec | None = None
    selection: SelectionSpec | None = None
    pairwise: PairwiseSpec | None = None
    maps: tuple[MapSpec, ...] = ()
    source: str | None = None
    target: TargetSpec | None = None
    policy: PolicySpec | None = None
    evidence: EvidenceSpec | None = None

    def margin_for(self, outcome: OutcomeSpec) -> float:
        return margins.margin_for(self, outcome)

    def outcome(self, name: str) -> OutcomeSpec:
        for o in self.outcomes:
            if o.name == name:
                return o
        raise KeyError(name)

    def column_title(self, column: str) -> str:
        """The label a person reads for a cohort column: the spec's own ([cohort] labels), else its name."""
        return dict(self.cohort.labels).get(column) or column

    def index(self, name: str) -> IndexSpec:
        for i in self.indices:
            if i.name == name:
                return i
        raise KeyError(name)

    @property
    def first(self) -> str:
        return self.cohort.arms[0]

    @property
    def second(self) -> str:
        return self.cohort.arms[1]


# --------------------------------------------------------------------------------------
# Schema: key -> (type words, description). Type words: str, float, int, bool, list[str],
# list[float], table[float], table[range], path, table (a sub-table parsed separately).
# --------------------------------------------------------------------------------------
SCHEMA: dict[str, dict[str, tuple[str, str]]] = {
    "cohort": {
        "path": ("path", "The cohort file (.csv, .tsv, .xlsx, .parquet), relative to the spec file."),
        "id": ("str", "Optional column of unique patient identifiers."),
        "arm": ("str", "Column holding each patient's treatment arm."),
        "arms": ("list[str]", "Exactly two arm labels as written in the file; differences are first minus second."),
        "allocation": ("str", "Optional column saying how the arm was assigned (randomised or chosen)."),
        "randomised": ("str", "The allocation value that marks randomised patients; any other value means chosen."),
        "cluster": ("str", "Optional column of clusters (e.g. hospital) for cluster-robust intervals."),
        "sheet": ("str", "Excel only: the sheet to read when the workbook has several."),
        "covariates": ("list[str]", "Baseline covariates to describe by arm and allocation."),
        "labels": ("table[str]", "Optional readable labels for columns, shown wherever a person reads a column "
                   "(e.g. the patient's values): { lactate = \"Lactate (mmol/L)\" }. Unlabelled columns are shown "
                   "by their name."),
        **DATABASE_KEYS,
    },
    "outcomes": {
        "name": ("str", "A short unique name for the outcome."),
        "kind": ("str", "continuous | binary | ordinal | survival."),
        "column": ("str", "The outcome column (continuous, binary, ordinal)."),
        "time": ("str", "Survival: follow-up time column (positive numbers)."),
        "event": ("str", "Survival: event column, 1 = event (death), 0 = censored."),
        "horizon": ("float", "Survival: the time at which survival or RMST is compared."),
        "measure": ("str", "Survival: survival (probability alive at the horizon) | rmst."),
        "levels": ("list[str]", "Ordinal: every level, best first; the last is usually death."),
        "favourable": ("list[str]", "Ordinal: levels counted as favourable (default: all but the last)."),
        "higher_is_better": ("bool", "Continuous and binary: whether a higher value is better (default true)."),
        "model": ("str", "Survival: cox (default) | weibull."),
        "adjust": ("list[str]", "Covariates adjusted for, held at stated reference values in the curves."),
        "label": ("str", "A readable name for charts and sentences."),
        "units": ("str", "Units of the outcome (e.g. days, years)."),
        "among_survivors": ("bool", "The outcome is measured only in survivors (conditional on survival)."),
        "bounds": ("list[float]", "Continuous: the outcome's possible range, e.g. [0, 180] days."),
        "margin": ("float", "Smallest difference worth having, in the outcome's own units (probability, RMST time, "
                            "mean); default analysis.margin for probabilities, else 0."),
    },
    "indices": {
        "name": ("str", "A short unique name for the index."),
        "column": ("str", "Use a cohort column as the index."),
        "formula": ("str", "Compute the index from columns, e.g. 'age / 10 + cfs'."),
        "prognostic": ("table", "Fit a cross-fitted prognostic index: outcome, covariates, fit_on, folds."),
        "label": ("str", "A readable name for charts and sentences."),
        "units": ("str", "Units of the index."),
        "discrete": ("bool", "Whether the index takes whole levels only (default: guessed from the data)."),
        "bounds": ("list[float]", "[low, high]: the values the index can take (e.g. [1, 9] for a 1-9 scale); a "
                                  "value outside is refused with its rows."),
    },
    "prognostic": {
        "outcome": ("str", "The outcome the prognostic model predicts."),
        "covariates": ("list[str]", "Covariates of the prognostic model."),
        "fit_on": ("str", "second (fit on the second arm) | all (all patients, no arm term)."),
        "folds": ("int", "Number of cross-fitting folds (default 5)."),
    },
    "values": {
        "outcome": ("str", "The ordinal outcome whose states are weighted."),
        "weights": ("table[float]", "One weight per level in [-1, 1]: best 1, death 0, below 0 worse than death."),
        "preset": ("str", "The preset the weights started from (recorded for the report)."),
        "ranges": ("table[range]", "Per level, [low, high] for the weight-uncertainty analysis."),
        "acceptable": ("list[str]", "Levels the patient would find acceptable."),
        "survival_outcome": ("str", "A survival outcome to combine with the function outcome."),
        "utility_outcome": ("str", "A continuous utility outcome among survivors, for quality-adjusted survival."),
        "whose": ("str", "Whose values these are: patient | proxy | team."),
        "spread": ("float", "Spread (+/-) around each stated weight when no ranges are given."),
        "draws": ("int", "Monte Carlo draws for the weight-uncertainty analysis."),
    },
    "analysis": {
        "margin": ("float", "Default margin (-1 to 1) for probability outcomes and composites (default 0)."),
        "curved_interval": ("str", "test-inversion | delta: break-even interval off a straight line (see methods)."),
        "level": ("float", "Interval level (default 0.95)."),
        "interval": ("str", "analytic | bootstrap."),
        "replicates": ("int", "Bootstrap replicates, 20 to 100,000 (default 1000; 1000 or more for reported "
                              "intervals)."),
        "seed": ("int", "Seed for every random step, a whole number from 0 (default 1)."),
        "shape": ("str", "linear | spline (restricted cubic spline in the index)."),
        "knots": ("int", "Spline knots, 3 to 5 (default 4)."),
        "bands": ("str", "pointwise | simultaneous: which band the clear-difference regions use."),
        "workers": ("int", "Parallel workers for the bootstrap (default 1; -1 = one per core); never more than the "
                           "machine's cores, with a warning. A Dask cluster is named on the command line only "
                           "(--scheduler)."),
        "refit_index": ("bool", "With interval = \"bootstrap\": refit each cross-fitted prognostic index in every "
                                "replicate (same folds rule and seed), so the intervals include the index's own "
                                "estimation (default false: the index is held fixed and the results say so)."),
        "grid": ("int", "Points along the index for curves (default 200)."),
        "checks": ("bool", "Compute the trust checks: observed vs fitted, effect-modification test, horizon curve "
                           "(default true)."),
        "imputations": ("int", "Multiple imputations beside the complete-case analysis (0 = none, else 2-100)."),
        "population": ("str", "The patients the headline rows rest on: all | randomised | all_adjusted (all, "
                              "adjusted for the selection covariates) | all_weighted (all, propensity weights). "
                              "Default: randomised when each arm has enough randomised patients, see docs/methods.md."),
    },
    "selection": {
        "covariates": ("list[str]", "Covariates of the propensity model for chosen patients."),
        "truncate": ("list[float]", "Weight truncation percentiles, e.g. [1, 99]."),
        "min_per_window": ("int", "Fewest randomised patients per window before a stretch is called sparse."),
    },
    "pairwise": {
        "priority": ("list[str]", "Outcome names in priority order for the pairwise comparison."),
        "window": ("int", "Patients per window along the index."),
    },
    "maps": {
        "indices": ("list[str]", "Two index names."),
        "target": ("str", "An outcome name or 'composite'."),
        "interaction": ("bool", "Include the interaction of the two indices (default false)."),
    },
    **SECTION_SCHEMA,
}
TOP_LEVEL = ("cohort", "outcomes", "indices", "values", "analysis", "selection", "pairwise", "maps", *SECTION_SCHEMA)
REQUIRED = {
    "cohort": ("arm", "arms"),
    "outcomes": ("name", "kind"),
    "indices": ("name",),
    "values": ("outcome",),
    "prognostic": ("outcome", "covariates"),
    "maps": ("indices", "target"),
}


def _reader(table: Any, section: str, where: str, source: str | None) -> Reader:
    """A reader of one table of the spec, checked against its SCHEMA and REQUIRED keys."""
    return Reader(table, where, source, SCHEMA[section], REQUIRED.get(section, ()))


def _choice(value: str | None, options: tuple[str, ...], path: str, source: str | None) -> None:
    if value is not None and value not in options:
        close = difflib.get_close_matches(value, list(options), n=1, cutoff=0.4)
        hint = (f"Did you mean '{close[0]}'? " if close else "") + f"Choose one of: {', '.join(options)}."
        raise FulcrumError(f"'{path}' is '{value}', which is not an option.", file=source, key=path, hint=hint)


def _unique(names: list[str], what: str, source: str | None) -> None:
    seen = set()
    for n in names:
        if n in seen:
            raise FulcrumError(f"two {what} are named '{n}'.", file=source, key=what,
                               hint=f"Give each of the {what} its own name.")
        seen.add(n)


def load_spec(path: str | Path) -> Spec:
    """Read and check a spec file; paths inside it resolve relative to its folder."""
    path = Path(path)
    try:
        text = read_file(path, str(path), None, what="spec").decode("utf-8")
    except UnicodeDecodeError as exc:
        raise FulcrumError(f"the spec is not UTF-8 text (byte {exc.start}).", file=str(path),
                           hint="Save the spec as UTF-8 text.") from None
    return parse_spec_text(text, base_dir=path.resolve().parent, source=str(path))


def parse_spec_text(text: str, base_dir: str | Path = ".", source: str | None = None) -> Spec:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise FulcrumError(f"the spec is not valid TOML: {exc}.", file=source,
                           hint="Fix the line named; text values need quotes, lists need [ ].") from None
    except RecursionError:
        raise FulcrumError("the spec nests lists or tables too deeply to read.", file=source,
                           hint="A spec needs at most three levels: look for runaway [ or { brackets.") from None
    return parse_spec(data, base_dir=base_dir, source=source)


def parse_spec(data: dict[str, Any], base_dir: str | Path = ".", source: str | None = None) -> Spec:
    """Turn a parsed TOML mapping into a checked Spec. Every error names the key."""
    base_dir = Path(base_dir)
    for key in data:
        if key not in TOP_LEVEL:
            close = difflib.get_close_matches(key, list(TOP_LEVEL), n=1, cutoff=0.5)
            raise FulcrumError(f"unknown section '{key}'.", file=source, key=key,
                               hint=f"Did you mean '{close[0]}'?" if close else f"Sections: {', '.join(TOP_LEVEL)}.")
    for key in ("cohort", "outcomes", "indices"):
        if key not in data:
            raise FulcrumError(f"the spec has no [{key}] section.", file=source, key=key,
                               hint="See the spec reference in docs/ or start from 'fulcrum demo DIR'.")

    c = _reader(data["cohort"], "cohort", "cohort", source)
    arms = c.get("arms")
    if len(arms) != 2 or arms[0] == arms[1]:
        raise FulcrumError(f"'cohort.arms' needs exactly two different labels, found {list(arms)!r}.",
                           file=source, key="cohort.arms", hint='Write arms = ["first", "second"] as in the file.')
    cohort = CohortSpec(
        **cohort_source(c, base_dir, source), arm=c.get("arm"), arms=(arms[0], arms[1]), id=c.get("id"),
        allocation=c.get("allocation"), randomised=c.get("randomised", "randomised"), cluster=c.get("cluster"),
        sheet=c.get("sheet"), covariates=c.get("covariates", ()), labels=tuple(c.get("labels", {}).items()),
    )

    outcomes = tuple(margins.check_outcome(_outcome(o, i, source), source)
                     for i, o in enumerate(_array(data["outcomes"], "outcomes", source)))
    if not outcomes:
        raise FulcrumError("the spec lists no outcomes.", file=source, key="outcomes",
                           hint="Add at least one [[outcomes]] table.")
    _unique([o.name for o in outcomes], "outcomes", source)
    by_name = {o.name: o for o in outcomes}

    indices = tuple(_index(x, i, by_name, source) for i, x in enumerate(_array(data["indices"], "indices", source)))
    if not indices:
        raise FulcrumError("the spec lists no indices.", file=source, key="indices",
                           hint="Add at least one [[indices]] table, e.g. name = \"cfs\", column = \"cfs\".")
    _unique([x.name for x in indices], "indices", source)

    if isinstance(data.get("analysis"), dict) and "scheduler" in data["analysis"]:  # DESIGN.md 2a
        raise FulcrumError("a spec may not name a Dask scheduler: a file received from someone else must never "
                           "make Fulcrum connect anywhere.", file=source, key="analysis.scheduler",
                           hint="Remove the key; to use a cluster, run fulcrum analyse SPEC --scheduler "
                                "tcp://host:port.")
    a = _reader(data.get("analysis", {}), "analysis", "analysis", source)
    analysis = AnalysisSpec(
        margin=a.get("margin", 0.0), level=a.get("level", 0.95), interval=a.get("interval", "analytic"),
        replicates=a.get("replicates", 1000), seed=a.get("seed", 1), shape=a.get("shape", "linear"),
        knots=a.get("knots", 4), bands=a.get("bands", "pointwise"), workers=a.get("workers", 1),
        refit_index=a.get("refit_index", False), grid=a.get("grid", 200),
        checks=a.get("checks", True), imputations=a.get("imputations", 0),
        curved_interval=a.get("curved_interval", "test-inversion"), population=a.get("population"),
    )
    for key, options in (("interval", INTERVALS), ("shape", SHAPES), ("bands", BANDS), ("population", POPULATIONS),
                         ("curved_interval", CURVED_INTERVALS)):
        _choice(getattr(analysis, key), options, f"analysis.{key}", source)
    margins.check(analysis.margin, 1.0, "analysis.margin", "probabilities or composites", source)
    check_analysis(analysis, source=source)

    values = _values(data["values"], by_name, source) if "values" in data else None
    _population_needs(analysis, cohort, data.get("selection", {}), source)

    selection = None
    if "selection" in data:
        s = _reader(data["selection"], "selection", "selection", source)
        truncate = s.get("truncate", (1.0, 99.0))
        if len(truncate) != 2 or not (0 <= truncate[0] < truncate[1] <= 100):
            raise FulcrumError(f"'selection.truncate' should be two percentiles, low < high, found {list(truncate)}.",
                               file=source, key="selection.truncate", hint="For example truncate = [1, 99].")
        selection = SelectionSpec(covariates=s.get("covariates", ()), truncate=(truncate[0], truncate[1]),
                                  min_per_window=s.get("min_per_window", 10))
        if cohort.allocation is None:
            raise FulcrumError("[selection] needs cohort.allocation, the column saying who was randomised.",
                               file=source, key="selection", hint="Add allocation = \"column\" to [cohort].")

    pairwise = None
    if "pairwise" in data:
        p = _reader(data["pairwise"], "pairwise", "pairwise", source)
        priority = p.get("priority", ())
        for name in priority:
            known(name, by_name, "pairwise.priority", source)
        pairwise = PairwiseSpec(priority=priority, window=p.get("window", 300))

    maps = []
    for i, m in enumerate(_array(data.get("maps", []), "maps", source)):
        r = _reader(m, "maps", f"maps[{i + 1}]", source)
        names = r.get("indices")
        if len(names) != 2 or names[0] == names[1]:
            raise FulcrumError(f"'maps[{i + 1}].indices' needs two different index names.", file=source,
                               key=f"maps[{i + 1}].indices", hint='For example indices = ["cfs", "age"].')
        for n in names:
            known(n, {x.name: x for x in indices}, f"maps[{i + 1}].indices", source)
        target = r.get("target")
        if target != "composite":
            known(target, by_name, f"maps[{i + 1}].target", source)
        elif values is None:
            raise FulcrumError("a map targets the composite but the spec has no [values].", file=source,
                               key=f"maps[{i + 1}].target", hint="Add [values] or target an outcome.")
        maps.append(MapSpec(indices=(names[0], names[1]), target=target, interaction=r.get("interaction", False)))

    return Spec(cohort=cohort, outcomes=outcomes, indices=indices, analysis=analysis, values=values,
                selection=selection, pairwise=pairwise, maps=tuple(maps), source=source,
                **target_and_policy(data, base_dir, indices, source),
                evidence=evidence_section(data, by_name, source))


def _array(value: Any, name: str, source: str | None) -> list:
    if not isinstance(value, list):
        raise FulcrumError(f"'{name}' should be an array of tables, written [[{name}]].", file=source, key=name,
                           hint=f"Start each entry with a line [[{name}]].")
    return value


def _outcome(raw: Any, i: int, source: str | None) -> OutcomeSpec:
    where = f"outcomes[{i + 1}]"
    r = _reader(raw, "outcomes", where, source)
    name, kind = r.get("name"), r.get("kind")
    where = f"outcomes '{name}'"
    _choice(kind, OUTCOME_KINDS, f"{where}.kind", source)

    def need(key: str, why: str) -> Any:
        if key not in raw:
            raise FulcrumError(f"{kind} outcome '{name}' needs '{key}' ({why}).", file=source,
                               key=f"{where}.{key}", hint=f"Add {key} = ... to this [[outcomes]] table.")
        return r.get(key)

    def refuse(keys: tuple[str, ...]) -> None:
        for key in keys:
            if key in raw:
                raise FulcrumError(f"'{key}' does not apply to a {kind} outcome.", file=source,
                                   key=f"{where}.{key}", hint=f"Remove '{key}' from outcome '{name}'.")

    common = dict(name=name, kind=kind, label=r.get("label"), units=r.get("units"), adjust=r.get("adjust", ()),
                  among_survivors=r.get("among_survivors", False), margin=r.get("margin"))
    if kind == "survival":
        refuse(("column", "levels", "favourable", "bounds"))
        horizon = need("horizon", "the time at which survival is compared")
        if horizon <= 0:
            raise FulcrumError(f"'{where}.horizon' must be positive, found {horizon}.", file=source,
                               key=f"{where}.horizon", hint="Give the horizon in the units of the time column.")
        measure = r.get("measure", "survival")
        _choice(measure, SURVIVAL_MEASURES, f"{where}.measure", source)
        model = r.get("model", "cox")
        _choice(model, SURVIVAL_MODELS, f"{where}.model", source)
        return OutcomeSpec(time=need("time", "the follow-up time column"), event=need("event", "the event column"),
                           horizon=horizon, measure=measure, model=model, **common)
    refuse(("time", "event", "horizon", "model"))
    column = need("column", "the outcome column")
    if kind == "ordinal":
        refuse(("bounds",))
        levels = need("levels", "every level, best first")
        if len(levels) < 2 or len(set(levels)) != len(levels):
            raise FulcrumError(f"'{where}.levels' needs at least two different levels, found {list(levels)}.",
                               file=source, key=f"{where}.levels", hint="List every level once, best first.")
        favourable = r.get("favourable", levels[:-1])
        for lv in favourable:
            if lv not in levels:
                close = difflib.get_close_matches(lv, list(levels), n=1, cutoff=0.4)
                raise FulcrumError(f"favourable level '{lv}' is not one of the levels {list(levels)}.", file=source,
                                   key=f"{where}.favourable", hint=f"Did you mean '{close[0]}'?" if close else
                                   "Use the level names exactly as listed in levels.")
        if not favourable or len(favourable) == len(levels):
            raise FulcrumError("'favourable' must name some levels but not all.", file=source,
                               key=f"{where}.favourable", hint="Leave it out to count every level but the last.")
        measure = r.get("measure", "favourable")
        _choice(measure, ("favourable",), f"{where}.measure", source)
        return OutcomeSpec(column=column, levels=levels, favourable=favourable, measure=measure,
                           higher_is_better=True, **common)
    refuse(("levels", "favourable"))
    measure = r.get("measure", "mean" if kind == "continuous" else "probability")
    _choice(measure, ("mean",) if kind == "continuous" else ("probability",), f"{where}.measure", source)
    bounds = r.get("bounds")
    if bounds is not None:
        if kind != "continuous" or len(bounds) != 2 or bounds[0] >= bounds[1]:
            raise FulcrumError(f"'{where}.bounds' should be [low, high] for a continuous outcome.", file=source,
                               key=f"{where}.bounds", hint="For example bounds = [0, 180].")
        bounds = (bounds[0], bounds[1])
    return OutcomeSpec(column=column, measure=measure, higher_is_better=r.get("higher_is_better", True),
                       bounds=bounds, **common)


def _index(raw: Any, i: int, outcomes: dict[str, OutcomeSpec], source: str | None) -> IndexSpec:
    r = _reader(raw, "indices", f"indices[{i + 1}]", source)
    name = r.get("name")
    where = f"indices '{name}'"
    given = [k for k in ("column", "formula", "prognostic") if k in raw]
    if len(given) != 1:
        raise FulcrumError(f"index '{name}' needs exactly one of column, formula or prognostic; found "
                           f"{', '.join(given) or 'none'}.", file=source, key=where,
                           hint='For example column = "cfs", or formula = "age / 10 + cfs".')
    prognostic = None
    if "prognostic" in raw:
        p = _reader(raw["prognostic"], "prognostic", f"{where}.prognostic", source)
        outcome = p.get("outcome")
        known(outcome, outcomes, f"{where}.prognostic.outcome", source)
        fit_on = p.get("fit_on", "second")
        _choice(fit_on, FIT_ON, f"{where}.prognostic.fit_on", source)
        folds = p.get("folds", 5)
        range_check(folds, 2, 20, f"{where}.prognostic.folds", source)
        covariates = p.get("covariates")
        if not covariates:
            raise FulcrumError("a prognostic index needs at least one covariate.", file=source,
                               key=f"{where}.prognostic.covariates", hint='For example covariates = ["age", "cfs"].')
        prognostic = PrognosticSpec(outcome=outcome, covariates=covariates, fit_on=fit_on, folds=folds)
    bounds = r.get("bounds")
    if bounds is not None and (len(bounds) != 2 or not bounds[0] < bounds[1]):
        raise FulcrumError(f"'{where}.bounds' should be [low, high] with low below high, found {list(bounds)}.",
                           file=source, key=f"{where}.bounds", hint="For example bounds = [1, 9] for a 1-9 scale.")
    return IndexSpec(name=name, column=r.get("column"), formula=r.get("formula"), prognostic=prognostic,
                     label=r.get("label"), units=r.get("units"), discrete=r.get("discrete"),
                     bounds=None if bounds is None else (float(bounds[0]), float(bounds[1])))


def _population_needs(a: AnalysisSpec, cohort: CohortSpec, selection: Any, source: str | None) -> None:
    """A headline population other than all needs the allocation column or the selection covariates."""
    need = {"randomised": cohort.allocation, "all_adjusted": isinstance(selection, dict) and selection.get(
        "covariates"), "all_weighted": isinstance(selection, dict) and selection.get("covariates")}
    if a.population in need and not need[a.population]:
        what = "cohort.allocation" if a.population == "randomised" else "selection.covariates"
        raise FulcrumError(f"'analysis.population = \"{a.population}\"' needs {what}.", file=source,
                           key="analysis.population", hint=f"Set {what}, or population = \"all\".")


def _values(raw: Any, outcomes: dict[str, OutcomeSpec], source: str | None) -> ValuesSpec:
    r = _reader(raw, "values", "values", source)
    name = r.get("outcome")
    known(name, outcomes, "values.outcome", source)
    outcome = outcomes[name]
    if outcome.kind != "ordinal":
        raise FulcrumError(f"'values.outcome' must be an ordinal outcome; '{name}' is {outcome.kind}.", file=source,
                           key="values.outcome", hint="Name the ordinal function outcome whose states are weighted.")
    levels = outcome.levels
    weights = r.get("weights", {})
    for level, w in weights.items():
        if level not in levels:
            close = difflib.get_close_matches(level, list(levels), n=1, cutoff=0.4)
            raise FulcrumError(f"a weight is given for '{level}', which is not a level of '{name}'.", file=source,
                               key=f"values.weights.{level}", hint=(f"Did you mean '{close[0]}'? " if close else "")
                               + f"Levels: {', '.join(levels)}.")
        if not -1.0 <= w <= 1.0:
            raise FulcrumError(f"the weight of '{level}' is {w}, outside -1 to 1.", file=source,
                               key=f"values.weights.{level}", hint="Weights run from -1 (worst) through 0 (death) "
                               "to 1 (best state).")
    acceptable_early = r.get("acceptable", ())
    preset = r.get("preset")
    if preset is not None and not weights:
        try:
            full = preset_weights(preset, levels, acceptable_early)
        except FulcrumError as exc:
            raise FulcrumError(exc.what, file=source, key="values.preset", hint=exc.hint) from None
    else:
        full = default_weights(levels)
    full.update(weights)
    ranges = r.get("ranges", {})
    for level in ranges:
        if level not in levels:
            raise FulcrumError(f"a range is given for '{level}', which is not a level of '{name}'.", file=source,
                               key=f"values.ranges.{level}", hint=f"Levels: {', '.join(levels)}.")
    acceptable = r.get("acceptable", ())
    for level in acceptable:
        if level not in levels:
            raise FulcrumError(f"'values.acceptable' names '{level}', which is not a level of '{name}'.",
                               file=source, key="values.acceptable", hint=f"Levels: {', '.join(levels)}.")
    whose = r.get("whose", "team")
    _choice(whose, WHOSE, "values.whose", source)
    for key, kind in (("survival_outcome", "survival"), ("utility_outcome", "continuous")):
        other = r.get(key)
        if other is not None:
            known(other, outcomes, f"values.{key}", source)
            if outcomes[other].kind != kind:
                raise FulcrumError(f"'values.{key}' must be a {kind} outcome; '{other}' is "
                                   f"{outcomes[other].kind}.", file=source, key=f"values.{key}",
                                   hint=f"Name a {kind} outcome.")
    spread = r.get("spread", 0.0)
    range_check(spread, 0.0, 1.0, "values.spread", source)
    draws = r.get("draws", 500)
    range_check(draws, 10, 100_000, "values.draws", source)
    return ValuesSpec(outcome=name, weights=full, preset=r.get("preset"), ranges=ranges, acceptable=acceptable,
                      survival_outcome=r.get("survival_outcome"), utility_outcome=r.get("utility_outcome"),
                      whose=whose, spread=spread, draws=draws)


# --------------------------------------------------------------------------------------
# Spec -> plain data (for hashing and the results JSON) and -> TOML (so the app can save)
# --------------------------------------------------------------------------------------
def spec_to_dict(spec: Spec, relative_to: Path | None = None) -> dict[str, Any]:
    """The spec as TOML-shaped data, defaults filled in, empty optional keys left out."""

    out = plain(spec, relative_to)
    out.get("analysis", {}).pop("scheduler", None)  # set on the command line only, never written to a spec
    if "labels" in out["cohort"]:  # held as pairs so the spec stays hashable; written as the table it was read as
        out["cohort"]["labels"] = dict(out["cohort"]["labels"])
    for key in ("outcomes", "indices", "maps"):
        out.setdefault(key, [])
    if not out["maps"]:
        del out["maps"]
    return out


EXECUTION_ONLY = ("workers", "scheduler")  # how the work is spread, not what is computed


def canonical_sha256(spec: Spec) -> str:
    """Hash of the parsed spec as sorted JSON: the same analysis typed differently, or run on other workers,
    hashes the same."""
    data = spec_to_dict(spec)
    for key in EXECUTION_ONLY:
        data.get("analysis", {}).pop(key, None)
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def to_toml(spec: Spec, relative_to: Path | None = None) -> str:
    """Write the spec back as TOML that `load_spec` reads to the same Spec."""
    data = spec_to_dict(spec, relative_to)
    lines: list[str] = []
    for section in TOP_LEVEL:
        if section not in data:
            continue
        value = data[section]
        if isinstance(value, list):
            for item in value:
                lines.append(f"[[{section}]]")
                lines.extend(f"{k} = {_toml_value(v)}" for k, v in item.items())
                lines.append("")
        else:
            lines.append(f"[{section}]")
            lines.extend(f"{k} = {_toml_value(v)}" for k, v in value.items())
            lines.append("")
    return "\n".join(lines)

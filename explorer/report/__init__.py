"""The offline HTML report: one self-contained file (Vega scripts inlined) that opens with no network.

Every chart sits beside the sentence and the table that say the same thing; every user-supplied
string is escaped by Jinja's autoescaping. The report computes nothing: every number comes from the results
document (only the patients drawn beneath the curves are sampled from the cohort). To stay small (issue 17: the
demo's report at most 2 MB) the results document (stored by columns), the charts (each table kept once however
many charts draw it, rounded to CHART_DIGITS figures), the tables folded in <details> and the Vega bundle travel
gzipped in base85 blocks that the page unpacks with the browser's DecompressionStream.
"""
from __future__ import annotations

import base64
import dataclasses
import gzip
import hashlib
import json
import math
import platform
import re
from functools import lru_cache
from importlib import metadata, resources
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import jinja2
import numpy as np
import pandas as pd
from markupsafe import Markup

from .. import CAUTIONS, __version__
from .. import charts_checks as ck
from .. import charts_common as cc
from .. import charts_curves as cu
from .. import charts_selection as cs
from .. import charts_values as cv
from .. import look, observed
from .. import words as wd
from ..spec import to_toml
from ..charts_evidence import evidence_sections
from ..charts_maps import map_sections
from ..policy_charts import report_sections as policy_sections
from ..outputs import write_atomic

CURVE_TABLE_ROWS = 21
REPORT_POINTS = 400
PACKAGES = (("numpy", "numpy"), ("pandas", "pandas"), ("scipy", "scipy"), ("lifelines", "lifelines"),
            ("scikit-learn", "scikit-learn"), ("statsmodels", "statsmodels"), ("altair", "altair"),
            ("vl-convert-python", "vl-convert-python"))


@dataclasses.dataclass
class Section:
    """A block of the report: a heading, a sentence, an optional chart and an optional table."""

    title: str
    text: str = ""
    chart: Any = None
    table: pd.DataFrame | None = None
    notes: Sequence[str] = ()
    html: Markup | None = None
    level: int = 3


# ------------------------------------------------------------------------------------------
# Safe embedding
# ------------------------------------------------------------------------------------------
def _plain(obj: Any) -> Any:
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    return str(obj)


def _clean_nan(obj: Any) -> Any:
    """Replace non-finite floats by None so the JSON stays standard."""
    if isinstance(obj, float):
        return obj if np.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _clean_nan(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_clean_nan(v) for v in obj]
    return obj


@lru_cache(maxsize=1)
def javascript_bundle() -> str:
    """Vega, Vega-Lite and vega-embed in one script (from vl-convert), safe to inline in <script>."""
    import vl_convert as vlc

    js = vlc.javascript_bundle(vl_version=cc.converter_version())
    return js.replace("</script", "<\\/script").replace("<!--", "<\\!--")


def packed(text: str) -> Markup:
    """Text gzipped and written in base85 (RFC 1924 letters, with '.' standing for '<' so nothing can close the
    <script type="application/octet-stream"> element it sits in); the page unpacks it with the browser's own
    DecompressionStream. Base85 spends 5 letters on 4 bytes where base64 spends 4 on 3."""
    letters = base64.b85encode(gzip.compress(text.encode("utf-8"), 9, mtime=0), pad=False).decode("ascii")
    return Markup(letters.replace("<", "."))


@lru_cache(maxsize=1)
def packed_bundle() -> Markup:
    """The Vega bundle, packed (about a third of its size)."""
    return packed(javascript_bundle())


def unpacked(text: str) -> str:
    """The inverse of `packed` (for tests and tools reading a report)."""
    return gzip.decompress(base64.b85decode(text.replace(".", "<"))).decode("utf-8")


CHART_DIGITS = 4  # significant figures kept in chart data: more than a chart can show or a tooltip says


def _rounded(obj: Any) -> Any:
    if isinstance(obj, float):
        return float(f"{obj:.{CHART_DIGITS}g}") if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _rounded(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_rounded(v) for v in obj]
    return obj


class ChartStore:
    """Chart specs for the page with their data shared: every table a chart draws becomes a named dataset kept once
    (rounded to CHART_DIGITS figures) however many charts draw it, and the common look (config) is kept once."""

    def __init__(self) -> None:
        self.datasets: dict[str, list] = {}
        self.configs: dict[str, dict] = {}
        self.charts: list[dict] = []

    def _name(self, values: Any) -> str:
        rows = _rounded(values)
        name = "d" + hashlib.sha256(json.dumps(rows, separators=(",", ":"), default=_plain).encode()).hexdigest()[:12]
        self.datasets.setdefault(name, rows)
        return name

    def _hoist(self, obj: Any) -> Any:
        if isinstance(obj, dict):
            if isinstance(obj.get("data"), dict) and "values" in obj["data"] and len(obj["data"]) == 1:
                obj = dict(obj, data={"name": self._name(obj["data"]["values"])})
            return {k: self._hoist(v) for k, v in obj.items()}
        if isinstance(obj, list):
            return [self._hoist(v) for v in obj]
        return obj

    def add(self, cid: str, spec: dict) -> None:
        spec = dict(spec)
        renamed = {k: self._name(v) for k, v in (spec.pop("datasets", None) or {}).items()}
        spec = self._hoist(_renamed(spec, renamed))
        spec.pop("description", None)  # the page's caption holds it; the script puts it back
        config = spec.pop("config", None)
        if config is not None:
            key = "c" + hashlib.sha256(json.dumps(config, sort_keys=True).encode()).hexdigest()[:8]
            self.configs.setdefault(key, config)
            spec["usermeta"] = {"config": key}
        self.charts.append({"id": cid, "spec": spec})

    def payload(self) -> dict:
        return {"datasets": self.datasets, "configs": self.configs, "charts": self.charts}


def _renamed(obj: Any, names: Mapping[str, str]) -> Any:
    """A spec with its data references renamed (Altair's dataset names to the store's)."""
    if isinstance(obj, dict):
        if set(obj) == {"name"} and obj["name"] in names:
            return {"name": names[obj["name"]]}
        return {k: _renamed(v, names) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_renamed(v, names) for v in obj]
    return obj


def _packed_block(html: str, name: str) -> str:
    found = re.search(rf'<script type="application/octet-stream" id="{name}"[^>]*>([^<]*)</script>', html)
    if found is None:
        raise ValueError(f"the report holds no {name} block")
    return unpacked(found.group(1))


def chart_payload(html: str) -> dict:
    """The charts a report embeds, each with its own datasets and config again (for tests and tools)."""
    store = json.loads(_packed_block(html, "fulcrum-charts"))
    out = []
    for c in store["charts"]:
        spec = dict(c["spec"])
        used = sorted(set(re.findall(r'"name": ?"(d[0-9a-f]{12})"', json.dumps(spec))))
        spec["datasets"] = {n: store["datasets"][n] for n in used}
        key = (spec.pop("usermeta", None) or {}).get("config")
        if key:
            spec["config"] = store["configs"][key]
        out.append({"id": c["id"], "spec": spec})
    return {"charts": out, "datasets": store["datasets"]}


def embedded_results(html: str) -> dict:
    """The results document a report embeds (what `fulcrum analyse --json` writes)."""
    return by_rows(json.loads(_packed_block(html, "fulcrum-results")))


COLUMNS = "__columns__"


def by_columns(obj: Any) -> Any:
    """A document with every list of like objects (same keys in the same order, more than three) turned into one
    list per key, which gzip packs far tighter; by_rows (and the page's script) turn it back exactly."""
    if isinstance(obj, list):
        if len(obj) > 3 and all(isinstance(v, dict) for v in obj):
            keys = list(obj[0])
            if keys and all(list(v) == keys for v in obj):
                return {COLUMNS: keys, "values": [by_columns([v[k] for v in obj]) for k in keys]}
        return [by_columns(v) for v in obj]
    if isinstance(obj, dict):
        return {k: by_columns(v) for k, v in obj.items()}
    return obj


def by_rows(obj: Any) -> Any:
    """The inverse of by_columns."""
    if isinstance(obj, dict):
        if COLUMNS in obj:
            columns = [by_rows(v) for v in obj["values"]]
            return [dict(zip(obj[COLUMNS], row)) for row in zip(*columns)]
        return {k: by_rows(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [by_rows(v) for v in obj]
    return obj


TABLES_SLOT = "@@FULCRUM_TABLES@@"
_DETAIL_TABLE = re.compile(r"(<details><summary>[^<]*</summary>)\s*(<table>.*?</table>)\s*(</details>)", re.S)


def _pack_detail_tables(page: str) -> tuple[str, dict[str, str]]:
    """The tables folded inside <details> moved out of the page into a packed store (the page's script puts each
    back as soon as the page opens; the sentences beside every chart stay in the page itself)."""
    tables: dict[str, str] = {}

    def move(m: re.Match) -> str:
        key = f"t{len(tables) + 1}"
        tables[key] = m.group(2)
        return f'{m.group(1)}<div class="packed-table" data-table="{key}">(the table opens with the page\'s script)</div>{m.group(3)}'

    return _DETAIL_TABLE.sub(move, page), tables


# ------------------------------------------------------------------------------------------
# Pieces of the report
# ------------------------------------------------------------------------------------------
def versions() -> dict[str, str]:
    out = {"fulcrum": __version__, "python": platform.python_version()}
    for label, dist in PACKAGES:
        try:
            out[label] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[label] = "not installed"
    return out


def table_of(df: pd.DataFrame) -> dict:
    """A frame as header and rows of readable strings (numbers to three significant figures)."""
    def cell(v: Any) -> str:
        if v is None or (isinstance(v, float) and not np.isfinite(v)):
            return ""
        if isinstance(v, (float, np.floating)):
            return wd.fmt(float(v))
        return str(v)

    return {"columns": [str(c) for c in df.columns], "rows": [[cell(v) for v in r] for r in df.itertuples(False)]}


def _labelled(row: Mapping[str, Any], spec_doc: Mapping[str, Any]) -> dict:
    """A copy of a row carrying its outcome's readable label, when the spec gives one."""
    out = dict(row)
    if "label" not in out:
        for o in spec_doc.get("outcomes", []):
            if o.get("name") == row.get("outcome") and o.get("label"):
                out["label"] = o["label"]
    return out


def _every(row: Mapping[str, Any]) -> int:
    return max(1, len(row.get("curve") or []) // (CURVE_TABLE_ROWS - 1))


def _points(result: Any, row: Mapping[str, Any], n: int) -> pd.DataFrame | None:
    if n <= 0 or getattr(result, "fitset", None) is None:
        return None
    try:
        return observed.cohort_points(result.fitset, row["outcome"], row["index"], max_points=n)
    except KeyError:
        return None


def outcome_sections(result: Any, doc: Mapping[str, Any], points: int) -> list[dict]:
    """Per outcome x index: the effect-modification test first, then the break-even in words (and as a cohort
    percentile), the charts and numbers, and the checks of whether the curves can be trusted."""
    arms, margin = doc["arms"], float(doc.get("inputs", {}).get("margin") or 0.0)
    out = []
    for raw in doc.get("results", []):
        row = _labelled(raw, doc.get("spec", {}))
        pts = _points(result, row, points)
        check = cc.check_for(doc.get("checks"), row["outcome"], row["index"])
        em = (check or {}).get("effect_modification")
        out.append({
            "title": f"{wd.cap(cc.outcome_title(row))} along {cc.index_label_of(row)}",
            "effect_modification": ck.describe_effect_modification(em) if em else "",
            "weak_evidence": bool(em and em.get("weak_evidence")),
            "sentence": " ".join(t for t in (cu.describe_row(row, arms, margin=margin),
                                             None if pts is None else pts.attrs.get("sample_note")) if t),
            "percentiles": ck.describe_percentiles(row),
            "charts": [cu.outcome_chart(row, arms, pts), cu.difference_chart(row, arms, margin=margin)],
            "table": table_of(cu.curve_table(row, arms, every=_every(row))),
            "counts": _counts(row, arms),
            "methods": row.get("methods") or {},
            "checks": check_blocks(doc, row, check) if check else [],
            "warnings": row.get("warnings") or [],
        })
    return out


def check_blocks(doc: Mapping[str, Any], row: Mapping[str, Any], check: Mapping[str, Any]) -> list[dict]:
    """The checks of one outcome x index as blocks (title, sentence, charts, table): observed against fitted,
    calibration, sliding windows and, for survival, Kaplan-Meier curves by index band and the horizon curve."""
    arms, label = doc["arms"], cc.index_label_of(row)
    ovf = ck.observed_frame(check, arms).drop(columns=["x", "from", "to"])
    blocks = [
        {"title": "Observed against fitted", "sentence": ck.describe_observed_fitted(check, label),
         "charts": [ck.observed_fitted_chart(check, arms, row)], "table": table_of(ovf)},
        {"title": "Calibration", "sentence": ck.describe_calibration(check), "charts": [],
         "table": table_of(ck.calibration_table(check)), "open": True},
        {"title": "Sliding windows", "sentence": ck.describe_sliding_window(check, arms, label),
         "charts": [ck.sliding_window_chart(check, arms, row)],
         "table": table_of(ck.windows_frame(check).drop(columns=["x"]).rename(
             columns={"n_first": f"{arms[0]} patients", "n_second": f"{arms[1]} patients",
                      "model": "model difference"}))},
    ]
    outcome = _spec_outcome(doc, row["outcome"])
    curves = [c for c in doc.get("kaplan_meier") or []
              if c["outcome"] == row["outcome"] and c.get("index") == row["index"] and c.get("band")]
    if curves:
        chart = ck.kaplan_meier_bands_chart(curves, arms, index_label=label, units=outcome.get("units"),
                                            horizon=outcome.get("horizon"), label=cc.outcome_title(row))
        blocks.append({"title": f"Kaplan-Meier curves in bands of {label}", "sentence": chart.description,
                       "charts": [chart], "table": None})
    if check.get("horizon_curve"):
        hz = ck.horizon_frame(check).drop(columns=["lower_drawn", "upper_drawn"]).rename(
            columns={"at_risk_first": f"{arms[0]} at risk", "at_risk_second": f"{arms[1]} at risk",
                     "follow_up": "follow-up", "spec_horizon": "the spec's horizon"}).replace(
            {"the spec's horizon": {True: "yes", False: ""}})
        blocks.append({"title": "The break-even point by horizon",
                       "sentence": ck.describe_horizon(check, label, outcome.get("units")),
                       "charts": [ck.horizon_chart(check, arms, row, units=outcome.get("units"))],
                       "table": table_of(hz)})
    return blocks


def _spec_outcome(doc: Mapping[str, Any], name: str) -> dict:
    return next((o for o in doc.get("spec", {}).get("outcomes", []) if o.get("name") == name), {})


def baseline_section(doc: Mapping[str, Any]) -> list[dict]:
    """The baseline table by arm and allocation with standardised mean differences (none without covariates)."""
    table = doc.get("baseline") or []
    if not table:
        return []
    return [{"title": "Baseline characteristics by arm and allocation", "sentence": ck.describe_baseline(table),
             "charts": [ck.smd_chart(table)], "table": table_of(ck.baseline_frame(table))}]


def coverage_sections(doc: Mapping[str, Any]) -> list[dict]:
    """Per index: patients per window by arm and allocation, so readers see where the evidence is randomised."""
    arms, labels = doc["arms"], _index_labels(doc)
    out = []
    for entry in doc.get("randomised_windows") or []:
        coverage, label = entry["windows"], labels.get(entry["index"], entry["index"])
        out.append({"title": label, "sentence": cs.describe_coverage(coverage, arms, label),
                    "charts": [cs.coverage_chart(coverage, arms, index_label=label)],
                    "table": table_of(cs.coverage_frame(coverage, arms))})
    return out


def survival_sections(doc: Mapping[str, Any]) -> list[dict]:
    """Kaplan-Meier curves per arm, all patients, with numbers at risk: one per survival outcome."""
    arms, out = doc["arms"], []
    for o in doc.get("spec", {}).get("outcomes", []):
        curves = [c for c in doc.get("kaplan_meier") or [] if c["outcome"] == o.get("name") and c.get("index") is None]
        if not curves:
            continue
        title, units, horizon = o.get("label") or o["name"], o.get("units"), o.get("horizon")
        out.append({"title": title, "sentence": ck.describe_km(curves, units=units, horizon=horizon),
                    "charts": [ck.kaplan_meier_chart(curves, arms, units=units, horizon=horizon, label=title)]})
    return out


def missing_data(doc: Mapping[str, Any]) -> dict:
    """The clustering note and, when multiple imputation was asked for, the side-by-side break-evens."""
    clusters = doc.get("clustering")
    rows = doc.get("imputation") or []
    return {"clustering": ck.describe_clustering(clusters), "clustering_warnings": (clusters or {}).get("warnings", []),
            "imputation": table_of(ck.imputation_frame(rows, _index_labels(doc))) if rows else None,
            "imputation_notes": list(dict.fromkeys([r["note"] for r in rows] + [r["method"] for r in rows])),
            "imputation_warnings": list(dict.fromkeys(w for r in rows for w in r.get("warnings") or []))}


def _counts(row: Mapping[str, Any], arms: Sequence[str]) -> str:
    n, ev = row.get("n") or {}, row.get("events") or {}
    parts = []
    for a in arms:
        if a in n:
            parts.append(f"{a}: {n[a]} patients" + (f", {ev[a]} events" if ev.get(a) is not None else ""))
    return "; ".join(parts)


def composite_sections(doc: Mapping[str, Any]) -> list[dict]:
    arms, margin = doc["arms"], float(doc.get("inputs", {}).get("margin") or 0.0)
    out = []
    for row in doc.get("composite", []):
        charts = [cu.composite_chart(row, arms)]
        extra_tables = []
        acc = row.get("acceptability")
        if acc:
            charts.append(cv.preference_chart(acc, arms, index_title=cc.x_title(row),
                                              spread=(doc.get("spec", {}).get("values") or {}).get("spread"),
                                              ranges=(doc.get("spec", {}).get("values") or {}).get("ranges"),
                                              discrete=cc.is_discrete(row)))
            step = max(1, len(acc) // (CURVE_TABLE_ROWS - 1))
            extra_tables.append((f"Chance that {arms[0]} is preferred when the weights are uncertain",
                                 table_of(pd.DataFrame([{"index": p["x"], f"chance {arms[0]} is preferred": p["first"]}
                                                        for p in acc[::step]]))))
        th = row.get("thresholds")
        if th and th.get("states"):
            lw = cv.leeway(th)
            charts.append(cv.leeway_chart(lw, arms, where=f"index value {wd.fmt(th.get('x'))}"))
            extra_tables.append((f"How far the weights can move before the answer changes, at index value "
                                 f"{wd.fmt(th.get('x'))}", table_of(cv.leeway_table(lw))))
        weights = row.get("weights") or {}
        out.append({
            "title": f"{wd.cap(cc.outcome_title(row))} along {cc.index_label_of(row)}",
            "sentence": cu.describe_row(row, arms, margin=margin),
            "charts": charts,
            "table": table_of(cu.curve_table(row, arms, every=_every(row))),
            "weights": [(wd.words(k), wd.fmt(v)) for k, v in weights.items()],
            "whose": row.get("whose"),
            "notes": row.get("notes") or [],
            "extra_tables": extra_tables,
            "warnings": row.get("warnings") or [],
        })
    return out


def selection_sections(doc: Mapping[str, Any]) -> list[dict]:
    """One section per outcome x index: both arms' selection effects, the break-even points, the facts."""
    arms = doc["arms"]
    labels = _index_labels(doc)
    groups: dict[tuple[str, str], list[dict]] = {}
    for row in doc.get("selection", []):
        groups.setdefault((row.get("outcome"), row.get("index")), []).append(row)
    out = []
    for (outcome, index), rows in groups.items():
        xt = labels.get(index, index)
        est = pd.DataFrame(cs.selection_estimates(rows[0]), columns=["estimate", "x", "lo", "hi"])
        est.columns = ["patients used", "break-even", "interval low", "interval high"]
        facts = pd.DataFrame([{"arm": r.get("arm"), "selection effect (chosen minus randomised)": r.get("effect"),
                               "interval": _pair(r.get("ci")), "p-value": r.get("p_value"),
                               "varies with the index (p)": r.get("varies_with_index_p"),
                               "randomised patients": r.get("n_randomised"), "chosen patients": r.get("n_chosen")}
                              for r in rows])
        curve = pd.DataFrame([{"arm": r.get("arm"), "index": c["x"], "chosen minus randomised": c["effect"],
                               "interval low": (c.get("ci") or [None, None])[0],
                               "interval high": (c.get("ci") or [None, None])[1],
                               "few randomised patients": "yes" if c.get("randomised_sparse") else ""}
                              for r in rows for c in (r.get("curve") or [])[::_every(r)]])
        shift = rows[0].get("shift")
        out.append({"title": f"{rows[0].get('measure', outcome)} along {xt}",
                    "sentence": " ".join(cs.describe_selection(r) for r in rows),
                    "charts": [cs.selection_chart(rows, arms, index_title=xt)],
                    "table": table_of(facts), "break_even": table_of(est), "curve": table_of(curve),
                    "shift": None if shift is None else f"{wd.fmt(shift)} ({_pair(rows[0].get('shift_ci'))})",
                    "warnings": list(dict.fromkeys(w for r in rows for w in r.get("warnings") or []))})
    return out


def pairwise_sections(doc: Mapping[str, Any]) -> list[dict]:
    """One section per index: net benefit in windows (chart) and every window's counts (table)."""
    arms = doc["arms"]
    labels = _index_labels(doc)
    groups: dict[Any, list[dict]] = {}
    for row in doc.get("pairwise") or []:
        groups.setdefault(row.get("index"), []).append(row)
    out = []
    for index, rows in groups.items():
        xt = labels.get(index, index) if index else "the whole cohort"
        table = pd.DataFrame([{"window": (f"{wd.fmt(r['window']['from'])} to {wd.fmt(r['window']['to'])}"
                                          if r.get("window") else "whole cohort"),
                               f"{arms[0]} patients": r.get("n_first"), f"{arms[1]} patients": r.get("n_second"),
                               "wins": r.get("wins"), "losses": r.get("losses"), "ties": r.get("ties"),
                               "win ratio": r.get("win_ratio"), "its interval": _pair(r.get("win_ratio_ci")),
                               "net benefit": r.get("net_benefit"), "its interval ": _pair(r.get("net_benefit_ci")),
                               "favours": r.get("favours") or ""} for r in rows])
        priority = ", ".join(rows[0].get("priority") or [])
        out.append({"title": f"Pairwise comparison along {xt}",
                    "sentence": f"Outcomes in priority order: {priority}. Each {arms[0]} patient meets each "
                                f"{arms[1]} patient in the same window; the first outcome that separates them "
                                "decides the pair." + _pairwise_intervals(rows),
                    "charts": [cs.pairwise_chart(rows, arms, index_title=xt)] if index else [],
                    "table": table_of(table),
                    "warnings": list(dict.fromkeys(w for r in rows for w in r.get("warnings") or []))})
    return out


def _pairwise_intervals(rows: list[dict]) -> str:
    how = cs.pairwise_interval_words(rows)
    return f" {how[0].upper()}{how[1:]}." if how else " No intervals were computed."


def _fact(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, (int, float)) and not isinstance(v, bool):
        return wd.fmt(v)
    return str(v)


def _index_labels(doc: Mapping[str, Any]) -> dict[str, str]:
    return {row["index"]: cc.index_label_of(row) for row in doc.get("results", [])}


def _pair(v: Any) -> str:
    if not v or v[0] is None or v[1] is None:
        return ""
    return f"{wd.fmt(v[0])} to {wd.fmt(v[1])}"


def methods_by_outcome(doc: Mapping[str, Any]) -> list[tuple[str, list[tuple[str, str]]]]:
    """Each outcome's model descriptions per arm, once each (they repeat across indices)."""
    out: dict[str, dict[tuple[str, str], None]] = {}
    labels = {o.get("name"): o.get("label") or o.get("name") for o in doc.get("spec", {}).get("outcomes", [])}
    for row in doc.get("results", []):
        seen = out.setdefault(labels.get(row["outcome"], row["outcome"]), {})
        for arm, text in (row.get("methods") or {}).items():
            if text:
                seen[(arm, text)] = None
    return [(name, list(items)) for name, items in out.items()]


def index_rows(doc: Mapping[str, Any]) -> list[dict]:
    seen: dict[str, dict] = {}
    for row in doc.get("results", []):
        info = row.get("index_info") or {}
        if row["index"] in seen:
            continue
        pct = info.get("percentiles") or {}
        seen[row["index"]] = {"name": row["index"], "label": info.get("label") or row["index"],
                              "kind": info.get("kind") or "", "units": info.get("units") or "",
                              "discrete": "whole levels" if info.get("discrete") else "continuous",
                              "percentiles": ", ".join(f"{k}th {wd.fmt(v)}" for k, v in pct.items()),
                              "prognostic": _flat(info.get("prognostic"))}
    return list(seen.values())


def _flat(obj: Any, prefix: str = "") -> list[tuple[str, str]]:
    """A nested report (e.g. a prognostic model's) as (key, value) lines."""
    if obj is None:
        return []
    if isinstance(obj, Mapping):
        out = []
        for k, v in obj.items():
            out.extend(_flat(v, f"{prefix}{k}." if isinstance(v, Mapping) else f"{prefix}{k}"))
        return out
    if isinstance(obj, list):
        return [(prefix.rstrip("."), ", ".join(wd.fmt(v) if isinstance(v, float) else str(v) for v in obj))]
    return [(prefix.rstrip("."), wd.fmt(obj) if isinstance(obj, float) else str(obj))]


def _extra(sections: Iterable[Section | Mapping[str, Any]] | None) -> list[dict]:
    out = []
    for s in sections or []:
        s = s if isinstance(s, Section) else Section(**dict(s))
        out.append({"title": s.title, "sentence": s.text, "charts": [s.chart] if s.chart is not None else [],
                    "table": table_of(s.table) if s.table is not None else None, "notes": list(s.notes),
                    "html": s.html})
    return out


# ------------------------------------------------------------------------------------------
# Rendering
# ------------------------------------------------------------------------------------------
@lru_cache(maxsize=1)
def _environment() -> jinja2.Environment:
    loader = jinja2.FunctionLoader(lambda name: resources.files("explorer.report").joinpath(name).read_text(
        encoding="utf-8"))
    env = jinja2.Environment(loader=loader, autoescape=True, undefined=jinja2.StrictUndefined, trim_blocks=True,
                             lstrip_blocks=True)
    env.filters["fmt"] = wd.fmt
    env.filters["words"] = wd.words
    return env


def render_template(name: str, **context: Any) -> str:
    """Render one of the package's templates (autoescaped)."""
    return _environment().get_template(name).render(**context)


def _number_charts(sections: list[list[dict]], store: ChartStore | None = None) -> ChartStore:
    """Give every chart an id and put its spec in the store, in document order (a section's checks after its own
    charts); return the store to embed."""
    store = ChartStore() if store is None else store
    for group in sections:
        for sec in group:
            sec["chart_ids"] = []
            for chart in sec.get("charts", []):
                cid = f"chart-{len(store.charts) + 1}"
                spec = _clean_nan(cc.chart_spec(chart))
                store.add(cid, spec)
                desc = spec.get("description", "")
                said = bool(desc) and desc in (sec.get("sentence") or "")  # then the sentence names the chart
                if said:
                    sec.setdefault("sentence_id", f"{cid}-said")
                sec["chart_ids"].append((cid, desc, sec["sentence_id"] if said else None))
            _number_charts([sec.get("checks") or []], store)
    return store


def render_report(result: Any, *, extra_sections: Iterable[Section | Mapping[str, Any]] | None = None,
                  points: int = REPORT_POINTS) -> str:
    """The whole report as one HTML string; `points` caps the patients drawn beneath each outcome chart."""

    doc = result.document
    arms = doc["arms"]
    inputs = doc.get("inputs", {})
    baseline = baseline_section(doc)
    coverage = coverage_sections(doc)
    outcomes = outcome_sections(result, doc, points)
    survival = survival_sections(doc)
    composites = composite_sections(doc)
    selection = selection_sections(doc)
    pairwise = pairwise_sections(doc)

    extras = _extra([*map_sections(doc), *policy_sections(doc), *evidence_sections(doc), *(extra_sections or [])])
    store = _number_charts([baseline, coverage, outcomes, survival, composites, selection, pairwise, extras])
    spec_obj = getattr(result, "spec", None)
    context = {
        "title": f"Fulcrum report: {arms[0]} versus {arms[1]}",
        "arms": arms,
        "colours": look.arm_colours(arms),
        "doc": doc,
        "inputs": inputs,
        "cautions": list(doc.get("cautions") or CAUTIONS),
        "generated_at": doc.get("tool", {}).get("generated_at", ""),
        "versions": versions(),
        "spec_toml": to_toml(spec_obj) if spec_obj is not None else json.dumps(doc.get("spec", {}), indent=1),
        "breakeven": table_of(ck.breakeven_summary_table(doc)),
        "baseline": baseline,
        "coverage": coverage,
        "outcomes": outcomes,
        "survival": survival,
        "missing": missing_data(doc),
        "composites": composites,
        "selection": selection,
        "pairwise": pairwise,
        "extras": extras,
        "methods": methods_by_outcome(doc),
        "indices": index_rows(doc),
        "warnings": list(doc.get("warnings") or []),
        "results_packed": packed(json.dumps(by_columns(_clean_nan(doc)), ensure_ascii=False, allow_nan=False,
                                            separators=(",", ":"))),
        "charts_packed": packed(json.dumps(store.payload(), ensure_ascii=False, allow_nan=False, separators=(",", ":"),
                                           default=_plain)),
        "javascript_packed": packed_bundle(),
        "points": points,
    }
    page = render_template("report.html", **context)
    page, tables = _pack_detail_tables(page)
    head, _, tail = page.rpartition(TABLES_SLOT)  # the last one: the script block after every user-written string
    return head + str(packed(json.dumps(tables, ensure_ascii=False, separators=(",", ":")))) + tail


def write_report(result: Any, path: str | Path, **kwargs: Any) -> Path:
    """Write the report to `path` (UTF-8) and return the path."""

    return write_atomic(Path(path), render_report(result, **kwargs))

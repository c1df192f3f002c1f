"""Streamlit plumbing the pages share: the session's workspace, errors shown plainly, cautions, large type.

Pages import this as a sibling module (Streamlit puts the entry script's folder on the path).
Everything statistical is in explorer/; this file only moves things between session state and the screen.
"""
from __future__ import annotations

import logging
import sys
import tempfile
import threading
import traceback
from collections import OrderedDict
from pathlib import Path
from types import SimpleNamespace
from typing import Any, Callable

import streamlit as st

from explorer import CAUTIONS
from explorer import appstate as aps
from explorer import conversation
from explorer import patient as patient_mod
from explorer.demo import write_demo
from explorer.errors import FulcrumError
from explorer.intake import read_file
from explorer.spec import load_spec

log = logging.getLogger("fulcrum.app")

STYLE = """
<style>
html, body, [data-testid="stAppViewContainer"] { font-size: 19px; }
[data-testid="stMarkdownContainer"] p, [data-testid="stMarkdownContainer"] li { font-size: 1.05rem; line-height: 1.5; }
[data-testid="stSidebarNav"] a span { font-size: 1.1rem; }
.fulcrum-sentence { font-size: 1.1rem; line-height: 1.55; }
</style>
"""
WS = "workspace"
GEN = "generation"
PATIENT = "patient"  # the one patient in hand (appstate.PatientChoice), kept across pages and cohorts
PATIENT_VERSION = "patient_version"  # bumped by a reset, so the patient's widgets start again
WHOSE_WORDS = {"patient": "the patient's own", "proxy": "a proxy's, for the patient", "team": "the treating team's"}


def setup() -> None:
    st.set_page_config(page_title="Fulcrum", layout="wide", initial_sidebar_state="expanded")
    st.markdown(STYLE, unsafe_allow_html=True)


# ------------------------------------------------------------------------------------------
# Errors: never a traceback on screen
# ------------------------------------------------------------------------------------------
def show_error(exc: BaseException, keeping: str | None = "Your loaded cohort and settings are kept.") -> None:
    parts = aps.error_parts(exc)
    if not isinstance(exc, FulcrumError):
        log.error("unexpected %s in the app:\n%s", type(exc).__name__, "".join(traceback.format_tb(exc.__traceback__)))
    lines = [aps.md_escape(parts["what"])]
    if "where" in parts:
        lines.append(f"**Where:** {aps.md_escape(parts['where'])}")
    if "hint" in parts:
        lines.append(f"**What to do:** {aps.md_escape(parts['hint'])}")
    if keeping:
        lines.append(f"_{keeping}_")
    st.error("  \n".join(lines))


def attempt(fn: Callable[..., Any], *args: Any, keeping: str | None = "Your loaded cohort and settings are kept.",
            **kwargs: Any) -> Any:
    """Run fn; on any error show it plainly and return None (the caller keeps its last good state)."""
    try:
        return fn(*args, **kwargs)
    except Exception as exc:
        show_error(exc, keeping)
        return None


# ------------------------------------------------------------------------------------------
# The session's workspace
# ------------------------------------------------------------------------------------------
@st.cache_resource(show_spinner=False)
def demo_spec_path() -> str:
    """The invented demo cohort, written once per server process into its own temporary folder."""
    folder = Path(tempfile.mkdtemp(prefix="fulcrum-demo-"))
    return str(write_demo(folder))


def open_spec_file(path: str | Path, is_demo: bool) -> aps.Workspace:
    spec = load_spec(path)
    if spec.cohort.database:
        raise FulcrumError("the spec reads its cohort from a database, which the app opens from the Cohort page.",
                           file=str(path), key="cohort.database", hint="Open the Cohort page and read the table "
                           "there (a server only when you tick the box), or run fulcrum analyse on the spec.")
    data = read_file(Path(spec.cohort.path), str(spec.cohort.path), "cohort.path")  # located errors, no FIFO
    return aps.Workspace.open(data, Path(spec.cohort.path).name, spec, is_demo=is_demo)


def open_demo() -> aps.Workspace:
    return open_spec_file(demo_spec_path(), is_demo=True)


def startup_spec() -> str | None:
    """`fulcrum app --spec FILE` passes `--spec FILE` after the script's name."""
    argv = sys.argv
    if "--spec" in argv and argv.index("--spec") + 1 < len(argv):
        return argv[argv.index("--spec") + 1]
    return None


def workspace() -> aps.Workspace:
    """This session's workspace; the first visit opens the demo cohort (or the spec given at start)."""
    ws = st.session_state.get(WS)
    if ws is None:
        start = startup_spec()
        with st.spinner("Opening the " + ("cohort" if start else "invented demo cohort") + "..."):
            ws = attempt(open_spec_file, start, False) if start else None
            if ws is None:
                ws = attempt(open_demo, keeping=None)
        if ws is None:
            st.stop()
        set_workspace(ws)
    return ws


def set_workspace(ws: aps.Workspace) -> None:
    """Keep the new workspace; widgets keyed by generation start again from its spec."""
    st.session_state[WS] = ws
    st.session_state[GEN] = st.session_state.get(GEN, 0) + 1


def key(name: str) -> str:
    """A widget key that resets whenever a new cohort or spec is loaded."""
    return f"{name}@{st.session_state.get(GEN, 0)}"


def seed(name: str, value: Any) -> str:
    """A widget key whose first value comes from the workspace (so settings survive page changes)."""
    k = key(name)
    if k not in st.session_state:
        st.session_state[k] = value
    return k


def update_spec(change: Callable[[Any], Any]) -> bool:
    """Apply change(spec) -> spec; on failure show why and keep the last good spec."""
    ws = workspace()
    spec = attempt(change, ws.spec)
    if spec is None or spec == ws.spec:
        return False
    new = attempt(ws.with_spec, spec)
    if new is None:
        return False
    st.session_state[WS] = new
    return True


def with_progress(label: str, fn: Callable[..., Any], *args: Any) -> Any:
    """Run fn(*args, progress=...) under a progress bar; errors shown plainly, None returned."""
    bar = st.progress(0.0, text=label)

    def progress(done: int, total: int) -> None:
        bar.progress(min(done / max(total, 1), 1.0), text=f"{label} {done} of {total}")

    try:
        return attempt(fn, *args, progress=progress)
    finally:
        bar.empty()


def fitted(ws: aps.Workspace):
    """The fitted models, with a progress bar the first time this cohort and spec are fitted."""
    if ws.is_fitted():
        return attempt(ws.fitset)
    return with_progress("Fitting the models (once for this cohort and spec):", ws.fitset)


def curve_rows(ws: aps.Workspace, bootstrap: bool = True) -> list[dict] | None:
    """The outcome x index rows for the current settings (re-summarised, never refitted)."""
    if fitted(ws) is None:
        return None
    return attempt(ws.curve_rows, bootstrap)


def result(ws: aps.Workspace, bootstrap: bool = True):
    """The whole analysis (report, JSON), made by the engine's orchestrator from the cached fits."""
    if fitted(ws) is None:
        return None
    with st.spinner("Putting the whole analysis together..."):
        return attempt(ws.result, bootstrap)


# ------------------------------------------------------------------------------------------
# The patient in hand: one object for every page
# ------------------------------------------------------------------------------------------
def patient_fields(ws: aps.Workspace) -> list[dict]:
    """The patient's inputs; text covariates the cohort coded 0/1 are asked by the file's own labels."""
    codings = patient_mod.text_codings(SimpleNamespace(cohort=ws.cohort))
    return aps.patient_fields(ws.spec, ws.index_values(), ws.cohort.frame, codings)


def patient(ws: aps.Workspace) -> aps.PatientChoice:
    """The session's patient, fitted to the loaded cohort (values kept where they still apply)."""
    current = st.session_state.get(PATIENT) or aps.PatientChoice()
    fitted_ = current.fitted_to(patient_fields(ws), ws.cohort.n)
    if fitted_ != current:
        st.session_state[PATIENT] = fitted_
    return fitted_


def set_patient(choice: aps.PatientChoice) -> None:
    st.session_state[PATIENT] = choice


def reset_patient() -> None:
    """Forget the patient (on request only): the cohort's typical values again, no values record."""
    st.session_state.pop(PATIENT, None)
    st.session_state[PATIENT_VERSION] = st.session_state.get(PATIENT_VERSION, 0) + 1


def pkey(name: str, value: Any) -> str:
    """A widget key for the patient's inputs, seeded from the patient object; new after a reset or a new cohort."""
    k = f"{name}@{st.session_state.get(GEN, 0)}#{st.session_state.get(PATIENT_VERSION, 0)}"
    if k not in st.session_state:
        st.session_state[k] = value
    return k


def whose_words(ws: aps.Workspace, choice: aps.PatientChoice | None = None) -> str | None:
    """Whose values the weights in use are: the values record's, else the spec's."""
    who = ws.spec.values.whose if ws.spec.values else None
    return WHOSE_WORDS.get(who, who) if who else None


def _place(ws: aps.Workspace, fs: Any, index: str | None):
    choice = patient(ws)
    values, row = choice.inputs()
    record = current_record(ws, choice)
    weights = record.weights if record is not None else None
    return patient_mod.place_patient(fs, values, row=row, weights=weights, index=index, record=record)


def patient_view(ws: aps.Workspace, fs: Any, index: str | None = None, keeping: str | None = None):
    """The engine's view of the session's patient (nothing computed here), or None with the reason shown."""
    return attempt(_place, ws, fs, index, keeping=keeping)


def patient_marker(ws: aps.Workspace, fs: Any, index: str) -> dict | None:
    """Where the session's patient sits on one index, for a chart's patient rule and a caption: {"x", "label",
    "sentence"}; None (with a quiet note) when the patient cannot be placed on it."""
    try:
        view = _place(ws, fs, index)
    except FulcrumError as exc:
        st.caption("The patient in hand is not marked here: " + aps.md_escape(exc.what))
        return None
    pl = view.placements.get(index)
    if pl is None:
        return None
    return {"x": pl.value, "label": f"this patient ({pl.value:.3g})",
            "sentence": f"{pl.label} {pl.value:.3g} (cohort percentile {pl.percentile:.0f}"
                        + ("; outside the cohort's range)." if pl.outside else ").")}


def patient_caption(marker: dict | None) -> None:
    """One line saying where the patient in hand sits (the patient is changed on the Patient page)."""
    if marker is not None:
        st.caption("**Patient in hand:** " + aps.md_escape(marker["sentence"]) + " The dotted line marks them on "
                   "each chart; change the patient on the Patient page.")


def current_record(ws: aps.Workspace, choice: aps.PatientChoice):
    """The values record of the weights now in use (the conversation's while its weights stand)."""
    return conversation.current_record(choice.record, ws.spec.values)


# ------------------------------------------------------------------------------------------
# Small pieces of screen
# ------------------------------------------------------------------------------------------
def patient_line(ws: aps.Workspace) -> str | None:
    """The patient in hand in one line (the header's and the sidebar's), or None when it cannot be placed."""
    choice = attempt(patient, ws, keeping=None)
    if choice is None:
        return None
    fields = attempt(patient_fields, ws, keeping=None) or []
    return choice.describe(fields, whose_words(ws, choice))


def sidebar(ws: aps.Workspace) -> None:
    with st.sidebar:
        name = aps.md_escape(ws.filename)
        st.markdown(f"**Cohort:** {name}  \n{ws.cohort.n:,} patients"
                    + ("  \n_Invented demo data: no real patient._" if ws.is_demo else ""))
        arms = ws.spec.cohort.arms
        st.markdown(f"**Arms:** {aps.md_escape(arms[0])} (first) and {aps.md_escape(arms[1])} (second)")
        line = patient_line(ws)
        if line is not None:
            st.markdown("**Patient in hand:** " + aps.md_escape(line))
            st.button("Reset the patient", on_click=reset_patient, key="reset_patient",
                      help="Back to the cohort's typical values; forgets the values conversation.")
        st.caption(" ".join(CAUTIONS))


def page_head(title: str, intro: str) -> aps.Workspace:
    """Title, a plain-words introduction and the cautions; returns the session's workspace."""
    ws = workspace()
    st.title(title)
    st.markdown(intro)
    cautions()
    return ws


def cautions() -> None:
    """The cautions, on every page that shows estimates."""
    st.info("**Please note.** " + " ".join(CAUTIONS))


def sentence(text: str) -> None:
    st.markdown(aps.md_escape(text))


def description(chart: Any) -> str | None:
    """The sentence a chart builder wrote into the chart (its Vega-Lite description)."""
    text = getattr(chart, "description", None)
    return text if isinstance(text, str) else None


_SPECS: OrderedDict[int, tuple[Any, dict, str]] = OrderedDict()  # id(chart) -> (chart, its spec, its width)
_SPECS_LOCK = threading.Lock()


def vega_spec(chart: Any) -> tuple[dict, str]:
    """The chart's Vega-Lite spec, made once per chart object (the builders give back the same object for the
    same arguments, so a rerun reuses it), without Altair's whole-spec schema validation: that took about 0.2 s
    a chart, two seconds of every visit to the Outcomes page; tests/test_charts.py validates every builder's.
    With it, the width to show it at: panels keep their own size (fit-x would squeeze them to 0)."""
    import altair as alt

    with _SPECS_LOCK:
        hit = _SPECS.get(id(chart))
        if hit is not None and hit[0] is chart:
            _SPECS.move_to_end(id(chart))
            return hit[1], hit[2]
    view, width = chart, "content"
    if not isinstance(chart, (alt.FacetChart, alt.ConcatChart, alt.HConcatChart, alt.VConcatChart)):
        view, width = chart.copy(deep=False), "stretch"
        view.autosize = alt.AutoSizeParams(type="fit-x", contains="padding")
    spec = view.to_dict(validate=False)
    with _SPECS_LOCK:
        _SPECS[id(chart)] = (chart, spec, width)
        while len(_SPECS) > 128:
            _SPECS.popitem(last=False)
    return spec, width


def show_chart(chart: Any) -> None:
    """A chart as wide as its column, keeping its own plot height (titles and legends are added around it)."""
    spec, width = vega_spec(chart)
    st.vega_lite_chart(spec=dict(spec), width=width)


def altair(chart: Any, text: str | None = None) -> None:
    """A chart with the sentence that says the same thing beside it."""
    if text is None:
        show_chart(chart)
        return
    left, right = st.columns([2, 1], vertical_alignment="center")
    with left:
        show_chart(chart)
    with right:
        sentence(text)

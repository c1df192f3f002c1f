"""Cohort: load a file or the demo, say which column is which, declare outcomes and indices, see the checks."""
from pathlib import Path

import pandas as pd
import streamlit as st

import fulcrum_ui as ui
from explorer import appstate as aps
from explorer import charts_checks, charts_curves, charts_selection, database, words
from explorer.errors import FulcrumError
from explorer.spec import OUTCOME_KINDS

NONE = "(none)"
STAGED = "staged_upload"
PREVIEWS = "previews"
ws = ui.workspace()

st.title("Cohort")
st.markdown("Load a cohort, tell Fulcrum which column holds what, and check the data before anything is "
            "estimated. The app opens on an **invented** demo cohort: older adults with an acute abdominal "
            "emergency, emergency laparotomy or non-operative care.")


# ------------------------------------------------------------------------------------------
# 1. Load
# ------------------------------------------------------------------------------------------
def stage(data: bytes, filename: str, sheet: str | None = None) -> dict:
    """Read a first look at an upload; an error is kept to show, the loaded cohort is untouched."""
    out = {"sha": aps.data_sha256(data), "data": data, "filename": filename, "sheet": sheet, "look": None,
           "error": None, "sheets": []}
    try:
        out["look"] = aps.first_look(data, filename, sheet)  # bounded: the whole table is not kept
    except FulcrumError as exc:
        out["error"] = exc
        if exc.key == "cohort.sheet":
            out["sheets"] = aps.sheet_names(data)
    return out


def use_demo() -> None:
    new = ui.attempt(ui.open_demo)
    if new is not None:
        st.session_state.pop(STAGED, None)
        ui.set_workspace(new)


st.header("1. Load a cohort")
left, right = st.columns(2)
with left:
    upload = st.file_uploader("Your cohort file: CSV, TSV, Excel (.xlsx) or Parquet, one row per patient",
                              type=["csv", "tsv", "xlsx", "parquet"], key=ui.key("cohort_file"))
    st.caption(f"Files up to {st.get_option('server.maxUploadSize')} MB (a larger file shows a red mark and is not "
               "read). For a larger cohort: save it as Parquet, which is often a tenth of the size; read it from a "
               "database below; start the app with `fulcrum app --max-upload-mb 500`; or run `fulcrum analyse` "
               "on the command line.")
with right:
    st.button("Use the invented demo cohort", on_click=use_demo, disabled=ws.is_demo)
    spec_upload = st.file_uploader("Reload a spec saved by Fulcrum (.toml): weights, indices, margin",
                                   type=["toml"], key=ui.key("spec_file"))

if upload is None:
    if not (st.session_state.get(STAGED) or {}).get("database"):  # an extract read from a database stays
        st.session_state.pop(STAGED, None)
else:
    data = upload.getvalue()
    staged = st.session_state.get(STAGED)
    if staged is None or staged["sha"] != aps.data_sha256(data) or staged["filename"] != upload.name:
        staged = st.session_state[STAGED] = stage(data, upload.name)
        staged["data"] = None  # the uploader holds the bytes: a second copy is not kept in the session
    if staged["sheets"]:
        sheet = st.selectbox("The workbook has several sheets; which holds the cohort?", staged["sheets"],
                             key=ui.key("sheet"))
        if sheet != staged["sheet"]:
            staged = st.session_state[STAGED] = stage(data, staged["filename"], sheet)
            staged["data"] = None
    if staged["error"] is not None and not (staged["sheets"] and staged["look"] is not None):
        ui.show_error(staged["error"], f"The cohort already loaded ({ws.filename}) is kept.")



def database_choice() -> None:
    """Read a cohort from a database into the staging area, as an upload would be. The password comes only from
    the environment the app's server was started with; a server is contacted only when the box is ticked."""
    with st.expander("Or read the cohort from a database (DuckDB or SQLite file, PostgreSQL server)"):
        url = st.text_input("Database URL", key=ui.key("db_url"),
                            placeholder="duckdb:///registry.duckdb  or  postgresql://user@host:5432/dbname")
        table = st.text_input("Table or view, e.g. registry.cohort", key=ui.key("db_table"))
        query = st.text_area("Or one SELECT statement instead of a table", key=ui.key("db_query"))
        env = st.text_input("Environment variable holding the password (its name begins FULCRUM_; set it before "
                            "starting the app; leave empty for a file)", key=ui.key("db_env"))
        allow = st.checkbox("Allow Fulcrum to connect to this database server", key=ui.key("db_allow"))
        st.caption("Fulcrum reads every column of the table or query once, read-only, so you can say which column "
                   "is which; the data stay in this session.")
        if st.button("Read from the database"):
            got = ui.attempt(database.snapshot, url.strip(), table.strip() or None, query.strip() or None,
                             env.strip() or None, allow, keeping=f"The cohort already loaded ({ws.filename}) is kept.")
            if got is not None:
                staged = stage(got[0], got[1])
                staged["database"] = got[2]
                st.session_state[STAGED] = staged
        source = (st.session_state.get(STAGED) or {}).get("database")
        if source:
            what = f"table {source['table']}" if "table" in source else "the query"
            st.caption(aps.md_escape(f"Read {source['rows']:,} rows of {what} from {source['url']} (data sha256 "
                                     f"{source['data_sha256'][:12]}...)."))


database_choice()

if spec_upload is not None:
    spec, notes = ui.attempt(aps.read_spec, spec_upload.getvalue(), ws.spec) or (None, [])
    if spec is not None:
        new = ui.attempt(ws.with_spec, spec)
        if new is not None:
            new.notes = notes
            ui.set_workspace(new)
            st.rerun()

for note in ws.notes:
    st.info(aps.md_escape(note))

staged = st.session_state.get(STAGED)
fresh = staged is not None and staged["look"] is not None

# ------------------------------------------------------------------------------------------
# 2. Columns, outcomes and indices
# ------------------------------------------------------------------------------------------
st.header("2. Columns, outcomes and indices")
if fresh:
    source = staged
    look = staged["look"]
    st.markdown(f"**New file:** {aps.md_escape(staged['filename'])}, {look.n_rows:,} rows. Fulcrum has "
                "guessed each column's role; check every choice, then press **Check and use**.")
    base_rows = None
else:
    source = {"sha": ws.data_sha256, "data": ws.data, "filename": ws.filename, "sheet": ws.spec.cohort.sheet,
              "database": ws.source}
    previews = st.session_state.setdefault(PREVIEWS, {})
    look = previews.get(ws.data_sha256)
    if look is None:
        look = ui.attempt(aps.first_look, ws.data, ws.filename, ws.spec.cohort.sheet)
        previews.clear()  # one file's first look at a time
        if look is not None:
            previews[ws.data_sha256] = look
    base_rows = ws.spec
    st.markdown(f"**Loaded:** {aps.md_escape(ws.filename)}. Change any role below and press **Check and use**; "
                "if the check fails, the cohort stays as it is.")

if look is not None:
    tag = source["sha"][:10]
    guess = look.guess
    cols = list(look.columns)
    with st.expander(f"The file's first {len(look.head):,} rows, as read (of {look.n_rows:,})"):
        st.dataframe(look.head, hide_index=True)
    current = ws.spec.cohort if not fresh else None

    def choose(label: str, name: str, options: list[str], default: str | None, help: str | None = None) -> str:
        k = ui.seed(f"{name}:{tag}", default if default in options else options[0])
        return st.selectbox(label, options, key=k, help=help)

    def values_of(col: str) -> list[str]:
        return list(look.values.get(col, ()))

    a, b, c = st.columns(3)
    with a:
        arm = choose("Treatment arm column", "arm", cols, current.arm if current else guess.arm)
        arm_values = values_of(arm) or ["?"]
        defaults = list(current.arms) if current else list(guess.arms)
        first = choose("First arm (differences are first minus second)", f"first:{arm}", arm_values,
                       defaults[0] if defaults else None)
        rest = [v for v in arm_values if v != first] or arm_values
        second = choose("Second arm", f"second:{arm}", rest, defaults[1] if len(defaults) > 1 else None)
    with b:
        pid = choose("Patient identifier (kept out of every export)", "id", [NONE] + cols,
                     (current.id if current else guess.id) or NONE)
        cluster = choose("Hospital or other cluster", "cluster", [NONE] + cols,
                         (current.cluster if current else guess.cluster) or NONE)
    with c:
        alloc = choose("Allocation column (randomised or chosen)", "allocation", [NONE] + cols,
                       (current.allocation if current else guess.allocation) or NONE)
        randomised = "randomised"
        if alloc != NONE:
            randomised = choose("Its value for randomised patients", f"randomised:{alloc}", values_of(alloc) or ["?"],
                                current.randomised if current else guess.randomised)
        else:
            st.caption("No allocation column: every patient counts as chosen-or-unknown, and the randomised vs "
                       "chosen page stays empty.")
    numeric_or_two = [c for c in cols if c not in {arm, pid, cluster, alloc}]
    cov_default = list(current.covariates) if current else list(guess.covariates)
    cov_key = ui.seed(f"covariates:{tag}", [c for c in cov_default if c in numeric_or_two])
    covariates = st.multiselect("Baseline covariates (described by arm and allocation; numbers or two-valued "
                                "text)", numeric_or_two, key=cov_key)

    st.subheader("Outcomes")
    st.caption("Kinds: survival (time and event columns, a horizon), ordinal (levels best first, separated by "
               "commas; the last is usually death), binary (0/1) or continuous. Add or remove rows freely.")
    out_df = pd.DataFrame(aps.outcome_rows(base_rows, guess), columns=list(aps.OUTCOME_COLUMNS))
    col_choice = st.column_config.SelectboxColumn
    outcomes = st.data_editor(
        out_df, num_rows="dynamic", hide_index=True, key=ui.key(f"outcomes:{tag}"), width="stretch",
        column_config={"kind": col_choice("kind", options=list(OUTCOME_KINDS)),
                       "column": col_choice("column", options=cols), "time": col_choice("time", options=cols),
                       "event": col_choice("event", options=cols),
                       "horizon": st.column_config.NumberColumn("horizon", help="In the time column's units"),
                       "levels": st.column_config.TextColumn("levels (best first)")})

    st.subheader("Indices")
    st.caption("An index orders patients, e.g. a frailty scale or age. Give a column, or a formula over columns "
               "such as `lactate - albumin / 10`.")
    ix_df = pd.DataFrame(aps.index_rows(base_rows, guess), columns=list(aps.INDEX_COLUMNS))
    indices = st.data_editor(ix_df, num_rows="dynamic", hide_index=True, key=ui.key(f"indices:{tag}"),
                             width="stretch",
                             column_config={"column": col_choice("column", options=cols)})
    prognostic = [i.name for i in ws.spec.indices if i.prognostic is not None] if not fresh else []
    keep = tuple(n for n in prognostic
                 if st.checkbox(f"Keep the prognostic index '{n}' (defined in the spec)", value=True,
                                key=ui.key(f"keep:{n}")))

    def apply() -> aps.Workspace:
        cohort = {"path": source["filename"], "arm": arm, "arms": [first, second], "id": pid, "cluster": cluster,
                  "allocation": alloc, "randomised": randomised, "sheet": source.get("sheet")}
        base = None if fresh else ws.spec  # a new file starts from a fresh spec: nothing of the old one carries over
        table = {k: (None if v == NONE else v) for k, v in cohort.items()}
        table["covariates"] = [c for c in covariates if c not in {arm, pid, cluster, alloc}]
        spec = aps.build_spec(table, aps.outcomes_from_rows(outcomes.to_dict("records"), base),
                              aps.indices_from_rows(indices.to_dict("records"), base, keep),
                              base=base, base_dir=Path(".") if fresh else ws.spec.cohort.path.parent)
        if fresh:
            data = source["data"] if source["data"] is not None else upload.getvalue()  # the upload's bytes, once
            return aps.Workspace.open(data, source["filename"], spec, source=source.get("database"))
        return ws.with_spec(spec)

    if st.button("Check and use", type="primary"):
        with st.spinner("Checking the cohort against these settings..."):
            new = ui.attempt(apply, keeping=f"The cohort already loaded ({ws.filename}) and its settings are kept.")
        if new is not None:
            st.session_state.pop(STAGED, None)
            ui.set_workspace(new)
            st.rerun()

# ------------------------------------------------------------------------------------------
# 3. Checks, counts and how each index is spread
# ------------------------------------------------------------------------------------------
st.header("3. Checks and counts")
cohort = ws.cohort
if cohort.warnings:
    st.warning(f"{cohort.n:,} patients loaded, with {len(cohort.warnings)} warning(s):")
    for w in cohort.warnings:
        st.markdown("- " + aps.md_escape(w))
else:
    st.success(f"{cohort.n:,} patients loaded; the cohort passed every check.")
for note in cohort.notes:
    st.caption(aps.md_escape(note))

st.subheader("Patients by arm and allocation")
st.table(cohort.counts())
arms = list(ws.spec.cohort.arms)

st.subheader("Baseline characteristics by arm and allocation")
baseline = ui.attempt(ws.baseline)
if baseline:
    st.caption("Mean (SD), or share for yes/no characteristics, in each arm among all, randomised and chosen "
               "patients; standardised mean differences (SMD) above 0.1 are flagged.")
    st.dataframe(charts_checks.baseline_frame(baseline), hide_index=True, width="stretch")
    ui.altair(charts_checks.smd_chart(baseline), charts_checks.describe_baseline(baseline))
elif baseline is not None:
    st.caption("Name baseline covariates in the spec ([cohort] covariates = [...]) to compare the arms on them here.")
clusters = ui.attempt(ws.clustering)
st.caption(aps.md_escape(charts_checks.describe_clustering(clusters)))
for w in (clusters or {}).get("warnings", []):
    st.caption("Note: " + aps.md_escape(w))

st.subheader("How each index is spread, by arm" + (", and where the randomised patients are" if ws.cohort.randomised is not None else ""))
index_values = ui.attempt(ws.index_values)
if index_values is not None:
    arm_col = cohort.frame[ws.spec.cohort.arm].astype(str).to_numpy()
    for ix in ws.spec.indices:
        iv = index_values[ix.name]
        st.markdown(f"**{aps.md_escape(ix.title)}**")
        df = pd.DataFrame({"x": iv.values, "arm": arm_col})
        chart = charts_curves.index_distribution_chart(df, arms=arms, label=ix.title, discrete=iv.info.get("discrete"))
        pct = iv.info.get("percentiles") or {}
        units = iv.info.get("units")
        text = (f"{ix.title}" + (f", in {units}" if units else "") + ": "
                + ", ".join(f"{k}th percentile {words.fmt(v)}" for k, v in pct.items()) + "."
                if pct else ix.title)
        ui.altair(chart, text)
        for w in iv.warnings:
            st.caption(aps.md_escape(w))
        coverage = ui.attempt(ws.coverage, ix.name)
        if coverage:
            ui.altair(charts_selection.coverage_chart(coverage, arms, index_label=ix.title),
                      charts_selection.describe_coverage(coverage, arms, ix.title))
            with st.expander(f"Patients per window of {ix.title}"):
                st.dataframe(charts_selection.coverage_frame(coverage, arms), hide_index=True, width="stretch")

"""Cohorts read from DuckDB and SQLite files and from a real PostgreSQL server started here.

The server is Debian's PostgreSQL (installed by `python3 dev.py test`), started by the tests in a temporary
folder, as the unprivileged `postgres` account when the tests run as root, on a free port on 127.0.0.1. It
is seeded with an invented demo cohort; PostgreSQL, DuckDB, SQLite and CSV must give identical results.
A server that cannot start fails these tests: they are never skipped.
"""
from __future__ import annotations

import glob
import json
import os
import shutil
import socket
import sqlite3
import subprocess
import tempfile
from pathlib import Path

import duckdb
import pandas as pd
import psycopg
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from explorer import cli, database
from explorer import results as res
from explorer.analysis import analyse
from explorer.cohort import load_cohort
from explorer.demo import generate, to_csv_bytes
from explorer.errors import FulcrumError
from explorer.indices import needed_columns
from explorer.spec import load_spec, parse_spec, parse_spec_text

LEVELS = ["independent", "home_with_help", "care_home", "bedbound", "dead"]
SECRET = "Tr0ub4dor-and-3"  # the reader's password: must never appear in any output
ADMIN_SECRET = "adm1n-only-setup"
PASSWORD_VAR = "FULCRUM_TEST_PG_PASSWORD"

SPEC = """
[cohort]
{source}
id = "pid"
arm = "arm"
arms = ["laparotomy", "non-operative"]
allocation = "allocation"

[[outcomes]]
name = "alive"
kind = "survival"
time = "days_followed"
event = "died"
horizon = 365

[[outcomes]]
name = "function"
kind = "ordinal"
column = "function_6m"
levels = ["independent", "home_with_help", "care_home", "bedbound", "dead"]
favourable = ["independent", "home_with_help"]

[[indices]]
name = "cfs"
column = "cfs"

[[indices]]
name = "risk"
prognostic = {{ outcome = "alive", covariates = ["age", "sex", "lactate"], folds = 3 }}

[selection]
covariates = ["age", "sex", "cfs"]

[analysis]
checks = false
grid = 40
"""


# ---------------------------------------------------------------------------------------------
# The cohort, as a CSV file and as DuckDB and SQLite files with their own types
# ---------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """demo CSV, DuckDB (BOOLEAN event, ENUM levels) and SQLite files of one invented 400-patient cohort."""
    d = tmp_path_factory.mktemp("databases")
    frame, _ = generate(n=400, seed=23)
    (d / "cohort.csv").write_bytes(to_csv_bytes(frame))
    df = typed(d)
    con = duckdb.connect(str(d / "cohort.duckdb"))
    con.register("df", df)
    con.execute(f"CREATE TYPE level AS ENUM ({', '.join(repr(v) for v in LEVELS)})")
    con.execute("CREATE SCHEMA registry")
    con.execute("CREATE TABLE registry.cohort AS SELECT * REPLACE (function_6m::level AS function_6m, "
                "died::BOOLEAN AS died), 'unused' AS notes FROM df")
    con.close()
    with sqlite3.connect(d / "cohort.sqlite") as s:
        df.to_sql("cohort", s, index=False)
    s.close()
    return d


def typed(d: Path) -> pd.DataFrame:
    return pd.read_csv(d / "cohort.csv")


def spec_for(d: Path, source: str, name: str):
    path = d / f"{name}.toml"
    path.write_text(SPEC.format(source=source))
    return load_spec(path)


def comparable(doc: dict) -> dict:
    """The results without the fields that name the input (hashes, the spec's cohort source, the time)."""
    return {k: v for k, v in doc.items() if k not in ("tool", "inputs", "spec")}


# ---------------------------------------------------------------------------------------------
# A real PostgreSQL server, started and stopped here
# ---------------------------------------------------------------------------------------------
def _pg_bin() -> Path:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"), key=lambda p: int(p.split("/")[4]))
    if found:
        return Path(found[-1]).parent
    if shutil.which("initdb"):
        return Path(shutil.which("initdb")).parent
    pytest.fail("PostgreSQL's initdb was not found: `python3 dev.py test` installs Debian's postgresql package "
                "(apt-get install postgresql) when it runs as root.")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def server(folder: Path):
    """A PostgreSQL server on 127.0.0.1 (never as root), seeded with the cohort; yields its URL parts."""
    bindir = _pg_bin()
    root = Path(tempfile.mkdtemp(prefix="fulcrum-pg-"))
    as_user: list[str] = []
    if os.geteuid() == 0:  # the server refuses to run as root: run it as Debian's postgres account
        as_user = ["runuser", "-u", "postgres", "--"]
        shutil.chown(root, "postgres")
    (root / "pw").write_text(ADMIN_SECRET)
    if as_user:
        shutil.chown(root / "pw", "postgres")
    port = _free_port()

    def run(*cmd: str) -> None:
        done = subprocess.run([*as_user, *cmd], capture_output=True, text=True, timeout=120)
        if done.returncode:
            log = (root / "log").read_text() if (root / "log").exists() else ""
            pytest.fail(f"PostgreSQL could not start ({' '.join(cmd[:1])}): {done.stdout}{done.stderr}{log}")

    run(str(bindir / "initdb"), "-D", str(root / "data"), "-U", "admin", f"--pwfile={root / 'pw'}",
        "--auth-local=scram-sha-256", "--auth-host=scram-sha-256", "-E", "UTF8", "--no-sync")
    run(str(bindir / "pg_ctl"), "-D", str(root / "data"), "-l", str(root / "log"), "-w", "-t", "60", "-o",
        f"-c listen_addresses=127.0.0.1 -p {port} -k {root} -c fsync=off -c full_page_writes=off", "start")
    try:
        admin = psycopg.connect(host="127.0.0.1", port=port, user="admin", password=ADMIN_SECRET, dbname="postgres",
                                autocommit=True)
        with admin:
            admin.execute("CREATE DATABASE registry")
        with psycopg.connect(host="127.0.0.1", port=port, user="admin", password=ADMIN_SECRET,
                             dbname="registry") as con:
            seed(con, typed(folder))
            con.execute(f"CREATE ROLE reader LOGIN PASSWORD '{SECRET}'")
            con.execute("GRANT USAGE ON SCHEMA clinic TO reader")
            con.execute("GRANT SELECT ON ALL TABLES IN SCHEMA clinic TO reader")
        yield {"host": "127.0.0.1", "port": port, "url": f"postgresql://reader@127.0.0.1:{port}/registry"}
    finally:
        subprocess.run([*as_user, str(bindir / "pg_ctl"), "-D", str(root / "data"), "-m", "immediate", "-w",
                        "stop"], capture_output=True, timeout=60)
        shutil.rmtree(root, ignore_errors=True)


def seed(con: psycopg.Connection, df: pd.DataFrame) -> None:
    """The cohort with PostgreSQL's own types: NUMERIC lactate, BOOLEAN event, an ENUM of levels."""
    con.execute("CREATE SCHEMA clinic")
    con.execute(f"CREATE TYPE clinic.level AS ENUM ({', '.join(repr(v) for v in LEVELS)})")
    con.execute("CREATE TABLE clinic.cohort (pid text, hospital text, allocation text, arm text, age integer, "
                "sex text, cfs integer, lactate numeric(6, 2), albumin integer, days_followed integer, "
                "died boolean, function_6m clinic.level, qol_6m double precision, days_home_180 double precision)")
    with con.cursor().copy("COPY clinic.cohort FROM STDIN") as copy:
        for row in df.itertuples(index=False):
            values = [None if pd.isna(v) else v for v in row]
            values[10] = bool(values[10])
            copy.write_row(values)
    con.execute("CREATE TABLE clinic.secrets (note text)")


@pytest.fixture
def password(monkeypatch: pytest.MonkeyPatch) -> str:
    monkeypatch.setenv(PASSWORD_VAR, SECRET)
    return SECRET


# ---------------------------------------------------------------------------------------------
# The same results from every source
# ---------------------------------------------------------------------------------------------
@pytest.mark.slow
def test_postgresql_duckdb_sqlite_and_csv_give_identical_results(folder: Path, server: dict, password: str) -> None:
    specs = {
        "csv": spec_for(folder, 'path = "cohort.csv"', "csv"),
        "duckdb": spec_for(folder, 'database = "duckdb:///cohort.duckdb"\ntable = "registry.cohort"', "duck"),
        "sqlite": spec_for(folder, 'database = "sqlite:///cohort.sqlite"\nquery = "SELECT * FROM cohort '
                                   'WHERE age > 0"', "lite"),
        "postgresql": spec_for(folder, f'database = "{server["url"]}"\ntable = "clinic.cohort"\n'
                                       f'password_env = "{PASSWORD_VAR}"', "pg"),
    }
    docs, cohorts = {}, {}
    for name, spec in specs.items():
        cohorts[name] = load_cohort(spec, extra_columns=needed_columns(spec), allow_connect=True)
        docs[name] = analyse(spec, cohorts[name]).document
        res.validate(docs[name])  # the provenance follows explorer/schema/results.schema.json
    # the same typed frame from every source: booleans, ENUM levels, NUMERIC and empty cells mapped alike
    for name in ("duckdb", "sqlite", "postgresql"):
        pd.testing.assert_frame_equal(cohorts[name].frame[list(cohorts["csv"].frame.columns)], cohorts["csv"].frame,
                                      check_dtype=False, check_exact=True)
        assert cohorts[name].warnings == cohorts["csv"].warnings
        assert comparable(docs[name]) == comparable(docs["csv"]), name
    # provenance: URL without credentials, table or query, rows, only the needed columns, one hash of the values
    source = docs["postgresql"]["inputs"]["source"]
    assert source["url"] == server["url"] and source["table"] == "clinic.cohort" and source["rows"] == 400
    assert set(source["columns"]) == {"arm", "pid", "allocation", "age", "sex", "cfs", "lactate", "days_followed",
                                      "died", "function_6m"}  # what the spec names, nothing else
    assert docs["duckdb"]["inputs"]["source"]["columns"] == [c for c in typed(folder).columns if c in source["columns"]]
    assert docs["sqlite"]["inputs"]["source"]["query"] == "SELECT * FROM cohort WHERE age > 0"
    hashes = {docs[n]["inputs"]["source"]["data_sha256"] for n in ("duckdb", "sqlite", "postgresql")}
    assert len(hashes) == 1 and docs["postgresql"]["inputs"]["data_sha256"] in hashes
    assert "source" not in docs["csv"]["inputs"]
    assert SECRET not in json.dumps(docs["postgresql"])


def test_the_password_never_appears_in_outputs_logs_or_messages(folder: Path, server: dict, password: str,
                                                                tmp_path: Path, capsys, caplog) -> None:
    caplog.set_level("DEBUG")
    pg = f'database = "{server["url"]}"\ntable = "clinic.cohort"\npassword_env = "{PASSWORD_VAR}"'
    spec_path = tmp_path / "pg.toml"
    spec_path.write_text(SPEC.format(source=pg))
    assert cli.main(["validate", str(spec_path), "--allow-connect"]) == 0
    assert cli.main(["analyse", str(spec_path), "--allow-connect", "--json", str(tmp_path / "r.json")]) == 0
    out = capsys.readouterr()
    assert "400 patients" in out.out
    assert SECRET not in out.out + out.err + caplog.text + (tmp_path / "r.json").read_text()
    # a wrong password, and a bad column, are reported without the password (here the env holds a wrong one)
    os.environ[PASSWORD_VAR] = SECRET + "-wrong"
    assert cli.main(["validate", str(spec_path), "--allow-connect"]) == 2
    err = capsys.readouterr().err
    assert "password authentication failed" in err and SECRET not in err, err
    os.environ[PASSWORD_VAR] = SECRET
    # without password_env, libpq's own sources (PGPASSWORD, ~/.pgpass) are not used either
    no_env = parse_spec_text(SPEC.format(source=pg.replace(f'password_env = "{PASSWORD_VAR}"', "")), base_dir=tmp_path)
    os.environ["PGPASSWORD"] = SECRET
    try:
        with pytest.raises(FulcrumError, match="no password supplied"):
            load_cohort(no_env, allow_connect=True)
    finally:
        del os.environ["PGPASSWORD"]
    spec_path.write_text(SPEC.format(source=pg).replace('arm = "arm"', f'arm = "{SECRET}"'))
    assert cli.main(["validate", str(spec_path), "--allow-connect"]) == 2
    err = capsys.readouterr().err
    assert "has no column '***'" in err and SECRET not in err, err
    assert SECRET not in caplog.text


def test_a_server_is_contacted_only_when_allowed(folder: Path, monkeypatch: pytest.MonkeyPatch, password: str,
                                                 tmp_path: Path, capsys) -> None:
    def no_connection(*args, **kwargs):
        raise AssertionError("a connection was attempted")

    monkeypatch.setattr(psycopg, "connect", no_connection)
    spec = spec_for(folder, 'database = "postgresql://reader@127.0.0.1:9/registry"\ntable = "clinic.cohort"\n'
                            f'password_env = "{PASSWORD_VAR}"', "gate")
    with pytest.raises(FulcrumError, match="contacts a server only when you say so") as err:
        load_cohort(spec)
    assert "--allow-connect" in err.value.hint
    assert cli.main(["validate", str(folder / "gate.toml")]) == 2
    assert "--allow-connect" in capsys.readouterr().err


def test_the_connections_are_read_only(folder: Path, server: dict, password: str) -> None:
    """Below the query check, each connection itself refuses to write."""
    admin = f"postgresql://admin@127.0.0.1:{server['port']}/registry"  # may write, but not through Fulcrum
    os.environ["FULCRUM_TEST_ADMIN"] = ADMIN_SECRET
    try:
        for url, sql, why in (("duckdb:///cohort.duckdb", "CREATE TABLE x (a INTEGER)", "read-only"),
                              ("sqlite:///cohort.sqlite", "CREATE TABLE x (a INTEGER)", "not authorized"),
                              ("sqlite:///cohort.sqlite", "ATTACH DATABASE 'other.db' AS o", "not authorized"),
                              ("duckdb:///cohort.duckdb", f"SELECT * FROM read_csv('{folder}/cohort.csv')",
                               "disabled"),
                              (admin, "CREATE TABLE clinic.x (a integer)", "read-only transaction"),
                              (admin, "DELETE FROM clinic.cohort", "read-only transaction")):
            source = database.parse_url(url, folder)
            with pytest.raises(FulcrumError, match="the database refused the read") as err:
                with database._connection(source, "FULCRUM_TEST_ADMIN" if source.server else None, True, url) as run:
                    run(sql)
            assert why in err.value.what and ADMIN_SECRET not in err.value.message, err.value.what
    finally:
        del os.environ["FULCRUM_TEST_ADMIN"]
    with psycopg.connect(host="127.0.0.1", port=server["port"], user="reader", password=SECRET,
                         dbname="registry") as con:
        assert con.execute("SELECT count(*) FROM clinic.cohort").fetchone()[0] == 400  # nothing was deleted


# ---------------------------------------------------------------------------------------------
# Refusals before anything is sent
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("sql, words", [
    ("DROP TABLE cohort", "not a SELECT"),
    ("DELETE FROM cohort", "not a SELECT"),
    ("INSERT INTO cohort VALUES (1)", "not a SELECT"),
    ("UPDATE cohort SET age = 1", "not a SELECT"),
    ("CREATE TABLE x AS SELECT * FROM cohort", "not a SELECT"),
    ("SELECT * FROM cohort; DROP TABLE cohort", "2 statements"),
    ("SELECT * FROM cohort; SELECT 1", "2 statements"),
    ("SELECT * INTO copy_of FROM cohort", "INTO"),
    ("SELECT * FROM cohort FOR UPDATE", "FOR UPDATE"),
    ("SELECT * FROM read_csv('/etc/passwd')", "not a table or view"),
    ("SELECT * FROM read_parquet('https://example.org/x.parquet')", "not a table or view"),
    ("SELECT * FROM 'cohort.csv'", "not a table or view"),
    ("SELECT * FROM \"/data/cohort.parquet\"", "not a table or view"),
    ("SELECT pg_read_file('/etc/passwd') AS arm FROM cohort", "pg_read_file"),
    ("SELECT * FROM dblink('host=elsewhere', 'SELECT 1') AS t(a int)", "not a table or view"),
    ("SELECT getenv('FULCRUM_TEST_PG_PASSWORD') AS arm FROM cohort", "getenv"),
    ("SELECT lo_import('/etc/passwd')", "lo_import"),
    ("COPY cohort TO '/tmp/out.csv'", "not a SELECT"),
    ("ATTACH 'other.duckdb' AS o", "not a SELECT"),
    ("PRAGMA table_info('cohort')", "not a SELECT"),
    ("SELECT * FROM (SELECT * FROM read_json('x.json')) AS q", "not a table or view"),
    ("SELEC * FROM cohort", "could not be read as SQL"),
])
def test_queries_that_do_more_than_read_are_refused(folder: Path, sql: str, words: str) -> None:
    text = SPEC.format(source=f'database = "duckdb:///cohort.duckdb"\nquery = {json.dumps(sql)}')
    with pytest.raises(FulcrumError) as err:
        parse_spec_text(text, base_dir=folder, source="q.toml")
    assert err.value.key == "cohort.query" and err.value.file == "q.toml"
    assert words.lower() in err.value.message.lower(), err.value.message


def test_a_query_that_only_reads_is_accepted_and_its_columns_pushed_in(folder: Path) -> None:
    sql = "WITH r AS (SELECT * FROM registry.cohort WHERE age >= 65) SELECT r.*, lower(sex) AS s FROM r ORDER BY pid"
    spec = spec_for(folder, f'database = "duckdb:///cohort.duckdb"\nquery = {json.dumps(sql)}', "cte")
    cohort = load_cohort(spec, extra_columns=needed_columns(spec))
    assert cohort.n == int((typed(folder)["age"] >= 65).sum())
    built = database.select_sql(database.parse_url(spec.cohort.database), None, sql, ["arm", 'odd "name'])
    assert built.startswith('SELECT "arm", "odd ""name" FROM (WITH r AS')  # identifiers quoted by sqlglot


@pytest.mark.parametrize("source, key, words", [
    ('database = "postgresql://reader:' + SECRET + '@127.0.0.1:5432/registry"\ntable = "t"', "cohort.database",
     "holds a password"),
    ('database = "postgresql://reader@127.0.0.1:5432/registry"\ntable = "t"\npassword_env = "PGPASSWORD"',
     "cohort.password_env", "must begin FULCRUM_"),
    ('database = "duckdb:///cohort.duckdb"\ntable = "t"\npassword_env = "FULCRUM_X"', "cohort.password_env",
     "no password"),
    ('database = "mysql://reader@host/db"\ntable = "t"', "cohort.database", "should start with"),
    ('database = "postgresql://127.0.0.1/registry"\ntable = "t"', "cohort.database", "user@host"),
    ('database = "postgresql://reader@127.0.0.1/registry?host=/tmp"\ntable = "t"', "cohort.database",
     "parameter 'host'"),
    ('database = "duckdb:///cohort.duckdb"', "cohort.table", "neither"),
    ('database = "duckdb:///cohort.duckdb"\ntable = "t"\nquery = "SELECT 1"', "cohort.table", "both"),
    ('database = "duckdb:///cohort.duckdb"\ntable = "read_csv(\'x.csv\')"', "cohort.table", "table or view"),
    ('database = "duckdb:///cohort.duckdb"\ntable = "cohort; DROP TABLE cohort"', "cohort.table", "table or view"),
    ('path = "cohort.csv"\ntable = "t"', "cohort.table", "only when"),
    ('path = "cohort.csv"\ndatabase = "duckdb:///cohort.duckdb"', "cohort.database", "both"),
    ('id = "pid"', "cohort.path", "no cohort"),
])
def test_database_keys_are_checked_in_the_spec(folder: Path, source: str, key: str, words: str) -> None:
    text = SPEC.format(source=source).replace('id = "pid"\nid = "pid"', 'id = "pid"')
    with pytest.raises(FulcrumError) as err:
        parse_spec_text(text, base_dir=folder, source="k.toml")
    assert err.value.key == key and words in err.value.message, err.value.message
    assert SECRET not in err.value.message


def test_database_cohort_messages_name_the_table_and_column(folder: Path, tmp_path: Path) -> None:
    df = typed(folder)
    df.loc[[3, 8], "arm"] = "surgery"
    con = duckdb.connect(str(tmp_path / "bad.duckdb"))
    con.register("df", df)
    con.execute("CREATE TABLE cohort AS SELECT * FROM df")
    con.close()
    spec = parse_spec_text(SPEC.format(source='database = "duckdb:///bad.duckdb"\ntable = "cohort"'),
                           base_dir=tmp_path)
    with pytest.raises(FulcrumError, match="arm values must be") as err:
        load_cohort(spec)
    assert "bad.duckdb (table cohort)" in err.value.file and err.value.column == "arm" and err.value.rows == [4, 9]
    spec = parse_spec_text(SPEC.format(source='database = "duckdb:///bad.duckdb"\ntable = "cohort"').replace(
        'column = "cfs"', 'column = "frailty"'), base_dir=tmp_path)
    with pytest.raises(FulcrumError, match="no column 'frailty'") as err:
        load_cohort(spec)
    assert "table cohort" in err.value.file
    spec = parse_spec_text(SPEC.format(source='database = "duckdb:///missing.duckdb"\ntable = "cohort"'),
                           base_dir=tmp_path)
    with pytest.raises(FulcrumError, match="database file does not exist"):
        load_cohort(spec)


def test_a_remote_server_is_reached_encrypted_unless_the_url_says_otherwise() -> None:
    assert database._default_sslmode("db.example.org") == "require"  # common practice for registry servers
    assert database._default_sslmode("10.1.2.3") == "require"
    assert database._default_sslmode("127.0.0.1") == "prefer" and database._default_sslmode("localhost") == "prefer"
    assert database.parse_url("postgresql://reader@db.example.org/registry?sslmode=verify-full").sslmode == "verify-full"


def test_a_spec_with_a_database_round_trips_through_toml(folder: Path) -> None:
    from explorer.spec import to_toml

    spec = spec_for(folder, 'database = "sqlite:///cohort.sqlite"\nquery = "SELECT * FROM cohort"', "rt")
    again = parse_spec_text(to_toml(spec), base_dir="/")
    assert again.cohort == spec.cohort and spec.cohort.database == f"sqlite:///{folder.resolve()}/cohort.sqlite"


# ---------------------------------------------------------------------------------------------
# The app's Cohort page
# ---------------------------------------------------------------------------------------------
@pytest.mark.slow
def test_the_cohort_page_reads_a_database_and_asks_before_contacting_a_server(folder: Path,
                                                                             monkeypatch: pytest.MonkeyPatch) -> None:
    from streamlit.testing.v1 import AppTest

    def no_connection(*args, **kwargs):
        raise AssertionError("a connection was attempted")

    monkeypatch.setattr(psycopg, "connect", no_connection)
    at = AppTest.from_file(str(Path(__file__).resolve().parents[1] / "pages" / "app.py"), default_timeout=240)
    at.run()

    def fill(url: str, table: str, allow: bool = False) -> None:
        next(t for t in at.text_input if t.label == "Database URL").set_value(url)
        next(t for t in at.text_input if t.label.startswith("Table or view")).set_value(table)
        next(c for c in at.checkbox if c.label.startswith("Allow Fulcrum to connect")).set_value(allow)
        next(b for b in at.button if b.label == "Read from the database").click().run()

    fill("postgresql://reader@127.0.0.1:9/registry", "clinic.cohort")
    assert any("contacts a server only when you say so" in e.value for e in at.error)
    fill(f"duckdb:////{folder.resolve().as_posix().lstrip('/')}/cohort.duckdb", "registry.cohort")
    assert not at.exception and not [e.value for e in at.error]
    shown = "\n".join(str(c.value) for c in at.caption)
    assert "Read 400 rows of table registry.cohort from duckdb" in shown and "cohort.duckdb" in shown
    next(b for b in at.button if b.label == "Check and use").click().run()
    assert not at.exception and not [e.value for e in at.error]
    ws = at.session_state["workspace"]
    assert ws.cohort.n == 400 and ws.filename == "database-extract.parquet" and not ws.is_demo
    # the app's results carry the extract's provenance as the command line's do (inputs.source)
    source = ws.result(False).document["inputs"]["source"]
    assert source["table"] == "registry.cohort" and source["rows"] == 400 and "cohort.duckdb" in source["url"]


# ---------------------------------------------------------------------------------------------
# Property: whatever the database keys hold, only FulcrumError comes out of the spec parser
# ---------------------------------------------------------------------------------------------
_TEXT = st.text(min_size=1, max_size=40)


@settings(max_examples=600, deadline=None)  # the spec parser's own property tests run 2,000
@given(url=st.one_of(_TEXT, st.builds(str.__add__, st.sampled_from(["duckdb:///", "sqlite://", "postgresql://u@",
                                                                    "postgres://"]), _TEXT)),
       table=st.one_of(st.none(), _TEXT), query=st.one_of(st.none(), _TEXT, st.builds("SELECT {}".format, _TEXT)),
       password_env=st.one_of(st.none(), _TEXT))
def test_any_database_keys_give_a_located_message_or_a_spec(url, table, query, password_env) -> None:
    cohort = {"arm": "a", "arms": ["x", "y"], "database": url}
    cohort.update({k: v for k, v in (("table", table), ("query", query), ("password_env", password_env)) if v})
    data = {"cohort": cohort, "outcomes": [{"name": "o", "kind": "binary", "column": "c"}],
            "indices": [{"name": "i", "column": "k"}]}
    try:
        parse_spec(data, base_dir="/nonexistent")
    except FulcrumError as exc:
        assert exc.key and exc.key.startswith("cohort.")


def test_a_database_spec_uploaded_in_the_app_applies_to_the_loaded_cohort(demo_spec) -> None:
    from explorer import appstate as aps

    text = aps.spec_text(demo_spec).replace('path = "demo_cohort.csv"',
                                            'database = "postgresql://reader@127.0.0.1:9/registry"\ntable = "t"')
    spec, notes = aps.read_spec(text, demo_spec)
    assert spec.cohort == demo_spec.cohort and "postgresql://reader@127.0.0.1:9/registry" in notes[0]

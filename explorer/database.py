"""Cohorts read where registries keep them: DuckDB or SQLite files, or a PostgreSQL server.

Reading is the only thing allowed. A query must be one SELECT (checked with sqlglot before anything is
sent), the columns the spec needs are pushed into the SQL by sqlglot's builder (no hand-written quoting),
and the connection itself is read-only: DuckDB `read_only` without access to other files or the network,
SQLite `mode=ro` with an authorizer that allows reading only, PostgreSQL a read-only transaction. A server
is contacted only when the caller says so (`--allow-connect`, or the box in the app). A password comes only
from the environment variable the spec names, and never appears in a message.
"""
from __future__ import annotations

import hashlib
import os
import re
import sqlite3
import urllib.parse
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .errors import FulcrumError, printable

if TYPE_CHECKING:  # numpy and pyarrow are imported where data are read, so reading a spec stays light
    import pyarrow as pa

KEYS = {
    "database": ("str", "Read the cohort from a database instead of a file: duckdb:///file.duckdb or "
                        "sqlite:///file.sqlite (relative to the spec; four slashes for an absolute path), or "
                        "postgresql://user@host:port/dbname (contacted only with --allow-connect; encrypted unless "
                        "the server is on this machine or ?sslmode= says otherwise)."),
    "table": ("str", "With database: the table or view to read, e.g. registry.cohort."),
    "query": ("str", "With database, instead of table: one SELECT statement whose result is the cohort."),
    "password_env": ("str", "With a PostgreSQL database: the environment variable (its name must begin "
                            "FULCRUM_) that holds the password; the password is never written in the spec."),
}
DIALECTS = {"duckdb": "duckdb", "sqlite": "sqlite", "postgresql": "postgres"}
FILE_KINDS = ("duckdb", "sqlite")
PASSWORD_VAR = re.compile(r"FULCRUM_[A-Z0-9_]+")
URL_PARAMETERS = ("sslmode",)  # the only connection parameter a spec may set (default: require, except on loopback)
CONNECT_TIMEOUT = 10  # seconds
# functions that read files, reach the network or other databases, run commands, or read the environment
# (common practice: the server-side file and remote-access functions of PostgreSQL, DuckDB and SQLite)
DENIED = re.compile(r"(read_|pg_read|pg_ls|pg_stat_file|lo_|dblink|postgres_|sqlite_|mysql_|load_extension|"
                    r"glob$|getenv$|current_setting$|set_config$|query$|query_table$|parquet_|iceberg_|delta_|"
                    r"http|s3|copy|import|export|install|load$|shell|system|pg_terminate|pg_cancel|pg_reload|"
                    r"pg_sleep|txid_|pg_advisory|nextval$|setval$)", re.IGNORECASE)
DENIED_NODES = ("ReadCSV", "ReadParquet", "Into", "Lock", "Copy", "Attach", "Detach", "Pragma", "Command", "Insert",
                "Update", "Delete", "Merge", "Create", "Drop", "Alter", "Set", "Use", "Transaction", "Commit",
                "Rollback", "Grant", "Revoke", "TruncateTable", "LoadData", "Install", "Describe", "Summarize")


@dataclass(frozen=True)
class Source:
    """A parsed database URL. `url` keeps a file's path absolute; `shown` is safe to print."""

    kind: str
    url: str
    path: Path | None = None
    host: str | None = None
    port: int | None = None
    user: str | None = None
    dbname: str | None = None
    sslmode: str | None = None

    @property
    def server(self) -> bool:
        return self.path is None

    @property
    def dialect(self) -> str:
        return DIALECTS[self.kind]

    @property
    def shown(self) -> str:
        return self.url


@dataclass
class Extract:
    """What was read: the columns as Arrow arrays, in the order asked for, and where they came from."""

    columns: dict[str, pa.ChunkedArray]
    provenance: dict[str, Any]
    shown: str


# ---------------------------------------------------------------------------------------------
# The spec's keys
# ---------------------------------------------------------------------------------------------
def cohort_source(reader: Any, base_dir: Path, file: str | None) -> dict[str, Any]:
    """The [cohort] keys that say where the cohort is: `path`, or `database` with `table` or `query`."""
    given = reader.table
    if ("path" in given) == ("database" in given):
        both = "path" in given
        raise FulcrumError("[cohort] names both a file (path) and a database." if both else
                           "[cohort] names no cohort: give path (a file) or database (a database).", file=file,
                           key="cohort.path" if not both else "cohort.database",
                           hint="Keep one of them." if both else 'For example path = "cohort.csv".')
    if "path" in given:
        for key in ("table", "query", "password_env"):
            if key in given:
                raise FulcrumError(f"'cohort.{key}' applies only when the cohort is read from a database.",
                                   file=file, key=f"cohort.{key}", hint=f"Remove {key}, or give database = ... "
                                   "instead of path.")
        p = Path(reader.get("path"))
        return {"path": p if p.is_absolute() else base_dir / p}
    source = parse_url(reader.get("database"), base_dir, file)
    table, query, password_env = reader.get("table"), reader.get("query"), reader.get("password_env")
    if (table is None) == (query is None):
        raise FulcrumError("a database cohort needs exactly one of table or query" +
                           (", found both." if table else ", found neither."), file=file, key="cohort.table",
                           hint='For example table = "registry.cohort", or query = "SELECT ... FROM ...".')
    if "sheet" in given:
        raise FulcrumError("'cohort.sheet' applies only to Excel files.", file=file, key="cohort.sheet",
                           hint="Remove sheet from [cohort].")
    if table is not None:
        table_expression(table, source.dialect, file)
    else:
        check_query(query, source.dialect, file)
    if password_env is not None:
        if not PASSWORD_VAR.fullmatch(password_env):
            raise FulcrumError(f"'cohort.password_env' is '{password_env}'; its name must begin FULCRUM_ and hold "
                               "only capital letters, digits and _.", file=file, key="cohort.password_env",
                               hint="For example password_env = \"FULCRUM_REGISTRY_PASSWORD\"; set that variable "
                                    "in the environment Fulcrum runs in.")
        if not source.server:
            raise FulcrumError(f"a {source.kind} file has no password.", file=file, key="cohort.password_env",
                               hint="Remove password_env.")
    return {"path": None, "database": source.url, "table": table, "query": query, "password_env": password_env}


def parse_url(url: str, base_dir: Path | str = ".", file: str | None = None) -> Source:
    """Check a database URL; a file's path is made absolute (relative ones against base_dir)."""
    try:
        return _parse_url(url, base_dir, file)
    except ValueError as exc:  # urllib and pathlib refuse some malformed URLs and paths this way
        raise FulcrumError(f"'cohort.database' could not be read as a URL ({_cut(str(exc), 60)}).", file=file,
                           key="cohort.database", hint="For example duckdb:///registry.duckdb or "
                           "postgresql://reader@host:5432/registry.") from None


def _parse_url(url: str, base_dir: Path | str, file: str | None) -> Source:
    key = "cohort.database"
    scheme, sep, rest = url.partition("://")
    scheme = {"postgres": "postgresql"}.get(scheme.lower(), scheme.lower())
    if not sep or scheme not in DIALECTS:
        raise FulcrumError(f"'{key}' should start with duckdb://, sqlite:// or postgresql://; found "
                           f"'{_cut(url.split('@')[-1])}'.", file=file, key=key,
                           hint='For example database = "duckdb:///registry.duckdb".')
    if scheme in FILE_KINDS:
        if not rest.startswith("/") or len(rest) < 2 or "?" in rest:
            raise FulcrumError(f"'{key}' should name a file as {scheme}:///relative/path or {scheme}:////absolute/"
                               f"path; found '{_cut(url)}'.", file=file, key=key,
                               hint="Use three slashes before a path relative to the spec's folder.")
        raw = Path(rest[1:])
        path = (raw if raw.is_absolute() else Path(base_dir) / raw).resolve()
        return Source(kind=scheme, url=f"{scheme}:///{path.as_posix()}", path=path)
    parts = urllib.parse.urlsplit(f"{scheme}://{rest}")
    if parts.password is not None or ":" in (parts.netloc.rpartition("@")[0]):
        safe = f"{scheme}://{parts.username or ''}@{parts.hostname or ''}"
        raise FulcrumError(f"'{key}' holds a password ({safe}:...); a password is never written in a spec.",
                           file=file, key=key, hint="Remove it from the URL, put it in an environment variable "
                           "whose name begins FULCRUM_, and name that variable in password_env.")
    try:
        port = parts.port or 5432
    except ValueError:
        port = None
    dbname = parts.path.lstrip("/")
    if not parts.username or not parts.hostname or not dbname or port is None or "/" in dbname or parts.fragment:
        raise FulcrumError(f"'{key}' should look like postgresql://user@host:port/dbname; found '{_cut(url)}'.",
                           file=file, key=key, hint="Name the user, the host, the port (default 5432) and the "
                           "database.")
    params = urllib.parse.parse_qs(parts.query, keep_blank_values=True)
    for name in params:
        if name not in URL_PARAMETERS or len(params[name]) != 1:
            raise FulcrumError(f"'{key}' sets the connection parameter '{_cut(name)}', which a spec may not set.",
                               file=file, key=key, hint=f"Only {', '.join(URL_PARAMETERS)} may follow the ?.")
    sslmode = params.get("sslmode", [None])[0]
    user, host = urllib.parse.unquote(parts.username), parts.hostname
    query = f"?sslmode={sslmode}" if sslmode else ""
    netloc = f"{urllib.parse.quote(user, safe='')}@{host if ':' not in host else f'[{host}]'}:{port}"
    return Source(kind=scheme, url=f"{scheme}://{netloc}/{dbname}{query}", host=host, port=port, user=user,
                  dbname=urllib.parse.unquote(dbname), sslmode=sslmode)


# ---------------------------------------------------------------------------------------------
# SQL: checked with a parser, built with a builder
# ---------------------------------------------------------------------------------------------
def table_expression(name: str, dialect: str, file: str | None = None):
    """`schema.table` as a sqlglot Table; anything else (a file, a function, a subquery) is refused."""
    import sqlglot
    from sqlglot import exp

    from sqlglot.tokens import TokenType

    try:  # names and dots only: nothing may follow the name (a second statement, a function call, an alias)
        tokens = sqlglot.Dialect.get_or_raise(dialect).tokenize(name)
        shape = [t.token_type in (TokenType.VAR, TokenType.IDENTIFIER) if i % 2 == 0 else t.token_type == TokenType.DOT
                 for i, t in enumerate(tokens)]
        table = exp.to_table(name, dialect=dialect) if shape and all(shape) and len(tokens) % 2 == 1 else None
    except (sqlglot.errors.SqlglotError, RecursionError, ValueError):
        table = None
    if not isinstance(table, exp.Table) or table.alias or not _plain_table(table):
        raise FulcrumError(f"'cohort.table' should name a table or view, such as registry.cohort; found "
                           f"'{_cut(name)}'.", file=file, key="cohort.table",
                           hint="Give schema.table (quote a name with odd characters), or use query = ... .")
    return table


def _plain_table(table) -> bool:
    from sqlglot import exp

    parts = [table.args.get(k) for k in ("catalog", "db", "this")]
    if not all(p is None or isinstance(p, exp.Identifier) for p in parts) or parts[2] is None:
        return False
    return not any(re.search(r"[/\\:]|\.(csv|tsv|parquet|json|xlsx?|db|duckdb|sqlite)$", p.name, re.I)
                   for p in parts if p is not None)


def check_query(sql: str, dialect: str, file: str | None = None):
    """Parse the cohort query: exactly one SELECT that only reads tables. Returns the parsed statement."""
    import sqlglot
    from sqlglot import exp

    key = "cohort.query"

    def refuse(what: str, hint: str = "Write one SELECT statement that reads tables or views.") -> FulcrumError:
        return FulcrumError(f"the cohort query {what}", file=file, key=key, hint=hint)

    try:
        statements = [s for s in sqlglot.parse(sql, read=dialect) if s is not None]
    except sqlglot.errors.ParseError as exc:
        err = (exc.errors or [{}])[0]
        where = f" at line {err.get('line')}, column {err.get('col')}" if err.get("line") else ""
        raise refuse(f"could not be read as SQL{where}: {_cut(err.get('description') or str(exc), 120)}.",
                     "Check the SQL; Fulcrum reads one SELECT statement.") from None
    except (sqlglot.errors.SqlglotError, RecursionError, ValueError) as exc:
        raise refuse(f"could not be read as SQL ({_cut(str(exc) or type(exc).__name__, 120)}).") from None
    if len(statements) != 1:
        raise refuse(f"holds {len(statements)} statements; only one SELECT is read.",
                     "Remove every statement but the SELECT (and any ; between them).")
    stmt = statements[0]
    if not isinstance(stmt, (exp.Select, exp.SetOperation)):
        raise refuse(f"is a {_statement_word(stmt)} statement, not a SELECT; Fulcrum only reads.")
    for node in stmt.walk():
        name = type(node).__name__
        if name in DENIED_NODES:
            what = {"Into": "SELECT ... INTO (which writes a table)", "Lock": "FOR UPDATE / FOR SHARE (which locks "
                    "rows)"}.get(name, _statement_word(node))
            raise refuse(f"uses {what}, which is not allowed: Fulcrum only reads.")
        if isinstance(node, exp.Table) and not _plain_table(node):
            raise refuse(f"reads from '{_cut(node.sql(dialect=dialect), 60)}', which is not a table or view "
                         "(files, addresses and table functions are not read).")
        if isinstance(node, exp.Func):
            fname = node.name if isinstance(node, exp.Anonymous) else node.sql_name()
            if DENIED.match(fname or ""):
                raise refuse(f"calls {_cut(fname, 40)}(), which can read files, reach other machines or change "
                             "the server; it is not allowed.", "Read the cohort from tables or views only.")
    return stmt


def _statement_word(node) -> str:
    return re.sub(r"(?<!^)([A-Z])", r" \1", type(node).__name__).upper()


def select_sql(source: Source, table: str | None, query: str | None, columns: Sequence[str] | None,
               limit: int | None = None) -> str:
    """SELECT the named columns (every column when None) of the table or of the query as a subquery."""
    from sqlglot import exp

    frm = table_expression(table, source.dialect) if table is not None else \
        check_query(query, source.dialect).subquery("fulcrum_query")
    cols = [exp.column(c, quoted=True) for c in columns] if columns is not None else [exp.Star()]
    stmt = exp.select(*cols).from_(frm)
    if limit is not None:
        stmt = stmt.limit(limit)
    return stmt.sql(dialect=source.dialect)


# ---------------------------------------------------------------------------------------------
# Reading
# ---------------------------------------------------------------------------------------------
def read(cohort: Any, columns: Sequence[str] | None, *, allow_connect: bool = False,
         check_header: Callable[[list[str], str], None] | None = None) -> Extract:
    """Read `columns` (None: all) of the cohort's table or query; `check_header(names, shown)` sees every column
    name first (shown names the source for messages)."""
    source = parse_url(cohort.database)
    what = f"table {cohort.table}" if cohort.table else "the cohort query"
    shown = f"{source.shown} ({what})"
    with _connection(source, cohort.password_env, allow_connect, shown) as run:
        header = list(run(select_sql(source, cohort.table, cohort.query, None, limit=0))[0])
        if check_header is not None:
            check_header(header, shown)
        wanted = set(header if columns is None else columns)  # in the table's own order, as a file's columns
        names, arrays = run(select_sql(source, cohort.table, cohort.query, [h for h in header if h in wanted]))
    out = {n: _column(a) for n, a in zip(names, arrays)}
    if not out or not len(next(iter(out.values()))):
        raise FulcrumError(f"{what} has no rows.", file=shown, key="cohort.table" if cohort.table else "cohort.query",
                           hint="Check the table or the query's conditions.")
    provenance = {"kind": source.kind, "url": source.shown, "rows": len(next(iter(out.values()))),
                  "columns": list(out), "data_sha256": data_sha256(out)}
    provenance.update({"table": cohort.table} if cohort.table else {"query": cohort.query})
    return Extract(columns=out, provenance=provenance, shown=shown)


def snapshot(url: str, table: str | None, query: str | None, password_env: str | None, allow_connect: bool,
             base_dir: Path | str = ".") -> tuple[bytes, str, dict[str, Any]]:
    """Every column of a table or query as Parquet bytes, for the app (where columns are chosen after reading),
    with its provenance. The same checks as a spec's keys apply before anything is opened."""
    import pyarrow as pa

    import io
    import types

    import pyarrow.parquet as pq

    if not url:
        raise FulcrumError("no database URL was given.", key="cohort.database",
                           hint="For example duckdb:///registry.duckdb or postgresql://reader@host:5432/registry.")
    given = {k: v for k, v in (("database", url), ("table", table), ("query", query),
                               ("password_env", password_env)) if v}
    keys = cohort_source(types.SimpleNamespace(table=given, get=given.get), Path(base_dir), "the app")
    extract = read(types.SimpleNamespace(**{k: keys[k] for k in ("database", "table", "query", "password_env")}),
                   None, allow_connect=allow_connect)
    buffer = io.BytesIO()
    pq.write_table(pa.table(extract.columns), buffer)
    return buffer.getvalue(), "database-extract.parquet", extract.provenance


def data_sha256(columns: dict[str, pa.ChunkedArray]) -> str:
    """A hash of the values read, the same whichever database held them: per column its name, which cells
    are empty, and its values as float64 (numbers, booleans) or UTF-8 text (everything else)."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    h = hashlib.sha256()
    for name in sorted(columns):
        col = columns[name]
        t = col.type.value_type if pa.types.is_dictionary(col.type) else col.type
        numeric = pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_boolean(t) or \
            pa.types.is_decimal(t)
        arr = pc.cast(col, pa.float64() if numeric else pa.large_string()).combine_chunks()
        h.update(name.encode() + b"\0" + (b"n" if numeric else b"s"))
        h.update(np.packbits(arr.is_null().to_numpy(zero_copy_only=False)).tobytes())
        if numeric:
            h.update(np.nan_to_num(arr.to_numpy(zero_copy_only=False), nan=0.0).tobytes())
        else:
            offsets = np.frombuffer(arr.buffers()[1], np.int64)[arr.offset:arr.offset + len(arr) + 1]
            h.update((offsets - offsets[0]).tobytes())
            h.update(arr.buffers()[2].to_pybytes()[offsets[0]:offsets[-1]] if arr.buffers()[2] else b"")
    return h.hexdigest()


def scrub(text: str, secret: str | None) -> str:
    return text.replace(secret, "***") if secret else text


@contextmanager
def guard(secret: str | None) -> Iterator[None]:
    """Re-raise any FulcrumError raised inside with the secret blanked out of every part of it."""
    try:
        yield
    except FulcrumError as exc:
        if not secret:
            raise
        parts = {k: scrub(v, secret) if isinstance(v, str) else v for k, v in
                 (("file", exc.file), ("column", exc.column), ("key", exc.key), ("hint", exc.hint))}
        raise FulcrumError(scrub(exc.what, secret), rows=exc.rows, n_rows=exc.n_rows, **parts) from None


def password(name: str | None) -> str | None:
    if name is None:
        return None
    value = os.environ.get(name)
    if not value:
        raise FulcrumError(f"the environment variable {name} (named by cohort.password_env) is not set or empty.",
                           key="cohort.password_env", hint=f"Set {name} in the environment Fulcrum runs in (for "
                           "the app: before starting it).")
    return value


@contextmanager
def _connection(source: Source, password_env: str | None, allow_connect: bool, shown: str):
    """Yields run(sql) -> (names, arrays) on a read-only connection; closes it afterwards."""
    if source.server and not allow_connect:
        raise FulcrumError(f"the spec asks Fulcrum to connect to the database server {source.shown}; Fulcrum "
                           "contacts a server only when you say so.", key="cohort.database",
                           hint="If you trust this spec and the server, run again with --allow-connect (in the "
                                "app: tick the box that allows connecting).")
    secret = password(password_env) if source.server else None
    opener = {"duckdb": _duckdb, "sqlite": _sqlite, "postgresql": _postgresql}[source.kind]
    with guard(secret):
        if source.path is not None and not source.path.is_file():
            raise FulcrumError("the database file does not exist." if not source.path.exists() else
                               "the database path is a folder, not a file.", file=shown, key="cohort.database",
                               hint="Check cohort.database; a path after three slashes is read relative to the "
                                    "spec file's folder.")
        try:
            con, run = opener(source, secret)
        except FulcrumError:
            raise
        except Exception as exc:  # each driver has its own error types for refused connections
            raise FulcrumError(f"could not open the database ({type(exc).__name__}: "
                               f"{_cut(scrub(str(exc), secret), 300)}).", file=shown, key="cohort.database",
                               hint="Check the URL, that the server runs and accepts you, and the password "
                                    "variable.") from None
        try:
            yield _reporting(run, secret, shown)
        finally:
            con.close()


def _reporting(run: Callable[[str], tuple[list[str], list]], secret: str | None, shown: str):
    def wrapped(sql: str) -> tuple[list[str], list]:
        try:
            return run(sql)
        except FulcrumError:
            raise
        except Exception as exc:  # the database refused the statement: say what it said
            text = _cut(scrub(str(exc).strip(), secret), 300)
            raise FulcrumError(f"the database refused the read ({type(exc).__name__}: {text}).", file=shown,
                               hint="Check the table or query and the column names in the spec.") from None
    return wrapped


def _duckdb(source: Source, secret: str | None):
    import duckdb

    con = duckdb.connect(str(source.path), read_only=True,
                         config={"enable_external_access": False, "autoinstall_known_extensions": False,
                                 "autoload_known_extensions": False, "lock_configuration": True})

    def run(sql: str) -> tuple[list[str], list]:
        table = con.sql(sql).to_arrow_table()
        return list(table.column_names), list(table.columns)

    return con, run


def _sqlite(source: Source, secret: str | None):
    with open(source.path, "rb") as fh:
        if fh.read(16) != b"SQLite format 3\x00":
            raise FulcrumError("this is not a SQLite database file.", file=source.shown, key="cohort.database",
                               hint="Check the path, or use duckdb:/// for a DuckDB file.")
    uri = f"file:{urllib.parse.quote(source.path.as_posix())}?mode=ro"
    con = sqlite3.connect(uri, uri=True)
    allowed = {sqlite3.SQLITE_SELECT, sqlite3.SQLITE_READ, sqlite3.SQLITE_FUNCTION}
    con.set_authorizer(lambda action, *_: sqlite3.SQLITE_OK if action in allowed else sqlite3.SQLITE_DENY)

    def run(sql: str) -> tuple[list[str], list]:
        cur = con.execute(sql)
        names = [d[0] for d in cur.description]
        return names, _arrays(cur.fetchall(), len(names))

    return con, run


def _postgresql(source: Source, secret: str | None):
    import psycopg

    # password "" and no password file: libpq must not fall back on PGPASSWORD or ~/.pgpass, so the password
    # comes only from the variable the spec names
    con = psycopg.connect(host=source.host, port=source.port, user=source.user, dbname=source.dbname,
                          password=secret or "", passfile=os.devnull, sslmode=source.sslmode or _default_sslmode(source.host),
                          connect_timeout=CONNECT_TIMEOUT,
                          application_name="fulcrum", options="-c default_transaction_read_only=on")
    con.read_only = True

    def run(sql: str) -> tuple[list[str], list]:
        with con.transaction(), con.cursor() as cur:
            cur.execute(sql.encode())
            names = [d.name for d in cur.description]
            return names, _arrays(cur.fetchall(), len(names))

    return con, run


def _default_sslmode(host: str) -> str:
    """Encrypted unless the server is on this machine (a URL may still say ?sslmode=...)."""
    import ipaddress

    try:
        local = ipaddress.ip_address(host).is_loopback
    except ValueError:
        local = host == "localhost"
    return "prefer" if local else "require"


def _arrays(rows: list[tuple], width: int) -> list[pa.Array]:
    """Python rows -> one Arrow array per column; a column mixing kinds (SQLite allows it) becomes text."""
    import pyarrow as pa

    out = []
    for values in (zip(*rows) if rows else [()] * width):
        values = list(values)
        try:
            arr = pa.array(values)
        except (pa.ArrowInvalid, pa.ArrowTypeError, OverflowError):
            arr = pa.array([None if v is None else str(v) for v in values], type=pa.string())
        out.append(arr)
    return out


def _column(a: pa.Array | pa.ChunkedArray) -> pa.ChunkedArray:
    """One column as read; exact decimals (NUMERIC) become the nearest float64, through their text (Arrow's
    direct cast divides by a power of ten and can miss it by one unit: 2.30 would become 2.3000000000000003)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    col = a if isinstance(a, pa.ChunkedArray) else pa.chunked_array([a])
    return pc.cast(pc.cast(col, pa.string()), pa.float64()) if pa.types.is_decimal(col.type) else col


def _cut(text: str, width: int = 80) -> str:
    return printable(text, width)

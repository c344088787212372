"""SQL artifacts run in the real engine: SQLite (standard library), DuckDB, PostgreSQL,
Spark.

The rows are loaded twice. First into a typed table (numeric features as the
engine's double type; categorical features as text, or as integers for integer
levels); then as users load a CSV, every column text (TextTable: the sqlite3
shell's `.import` makes TEXT columns with '' for an empty field; PostgreSQL's
COPY, DuckDB's and Spark's CSV readers text columns with NULL). The emitted file
is executed as it is on each, and the output columns are fetched. The typed
pass's outputs go to the comparison with the reference; the text pass must give
the same bits on every row, or the run fails naming the first row that differs.
A PostgreSQL run uses `options["dsn"]` or starts a temporary server of its own.
"""

from __future__ import annotations

import json
import math
import numbers
import struct
import tempfile
import uuid
from pathlib import Path

from ...emit.sql import OPTIONS, artifact_name, function_call, object_name, settings
from ...errors import ScorewrightError
from ..interrupts import cancel_on_interrupt, forget_cancel
from ...model import FrozenModel
from ...plan import build_plan, output_columns
from ...values import _integral, is_bool, numeric_value
from . import RunOutput
from . import outputs_from_table

INT64 = 2 ** 63


def numeric_cell(value):
    """A raw numeric value as a double column holds it (NaN and +-inf kept)."""
    if isinstance(value, float) and not math.isfinite(value):
        return value
    return numeric_value(value)


def text_cell(value):
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return None
    if isinstance(value, numbers.Integral) and not isinstance(value, bool):
        return str(int(value))
    return value if isinstance(value, str) else repr(value)


def integer_level_cell(value):
    """A raw value for an integer-level category: an int or float where it is a number
    (integral ones as ints), else its text (read as unseen, or as missing when empty)."""
    if value is None or value == "":
        return None
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, float):
        return int(value) if value.is_integer() and abs(value) < INT64 else value
    whole = _integral(value)
    if whole is not None:
        return whole if abs(whole) < INT64 else float(whole)
    number = numeric_value(value) if isinstance(value, str) else None
    if number is not None:
        return number
    return value if isinstance(value, str) else repr(value)


def as_text(value):
    """A cell of a text column that holds integer-level codes."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return None
    return value if isinstance(value, str) else repr(value) if isinstance(value, float) \
        else str(value)


class Table:
    """The input table: column names, SQL types and cell values, in row order."""

    def __init__(self, plan, s, rows, types: dict, mixed_cell=as_text):
        self.columns: list[str] = []
        self.features: list[str] = []  # the feature each column is read for
        self.kinds: list[str] = []
        converters = []
        for inp in plan.inputs:
            column = s.columns[inp.name]
            if column in self.columns:
                continue
            self.columns.append(column)
            self.features.append(inp.name)
            if inp.kind == "numeric":
                self.kinds.append("double")
                converters.append((inp.name, numeric_cell))
            elif inp.integer_levels:
                self.kinds.append("integer")
                converters.append((inp.name, integer_level_cell))
            else:
                self.kinds.append("text")
                converters.append((inp.name, text_cell))
        self.values = [[convert(row.get(name)) for name, convert in converters] for row in rows]
        for j, kind in enumerate(self.kinds):
            if kind != "integer":
                continue
            if any(isinstance(r[j], str) for r in self.values):
                # A text column holding codes: the engine stores it its own way.
                self.kinds[j] = "mixed"
                for r in self.values:
                    r[j] = mixed_cell(r[j])
            elif any(isinstance(r[j], float) for r in self.values):
                self.kinds[j] = "double"
        self.row_column = "scorewright_row"
        while self.row_column.lower() in {c.lower() for c in self.columns}:
            self.row_column += "_"
        self.types = [types[k] for k in self.kinds]

    def records(self):
        return [[i] + r for i, r in enumerate(self.values)]


def csv_text(value):
    """A raw value as a CSV written by pandas holds it: repr of a float (shortest
    round trip), the decimal text of an int, True/False, the text itself; None and
    NaN as an empty field (None here)."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return None
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, (bool, numbers.Integral)):
        return str(value) if isinstance(value, bool) else str(int(value))
    return value if isinstance(value, str) else str(value)


def _as_number(value):
    """A bool in a plain numeric column is the number 1/0 (as scikit-learn reads it), and
    a CSV of a numeric column holds numbers; its text 'True' would be no number there
    (only a feature fitted on booleans reads the words)."""
    return float(bool(value)) if is_bool(value) else value


class TextTable:
    """The typed table's rows as text columns from a CSV import: `empty` is what the
    loader makes of an empty field (None: NULL; '' for the sqlite3 shell). The long
    layout keeps its row key typed (the rows are put back in order by it)."""

    def __init__(self, plan, typed, rows, text_type: str, empty):
        self.row_column, self.columns = typed.row_column, typed.columns
        self.types = [text_type] * len(self.columns)
        if isinstance(typed, LongTable):
            records = [[r[0]] + [csv_text(v) for v in r[1:]] for r in typed.values]
        else:
            numbers_only = {inp.name for inp in plan.inputs
                            if inp.kind == "numeric" and not inp.boolean}
            records = [[i] + [csv_text(_as_number(row.get(f)) if f in numbers_only
                                       else row.get(f)) for f in typed.features]
                       for i, row in enumerate(rows)]
        self._records = [[r[0]] + [empty if c is None else c for c in r[1:]] for r in records]

    def records(self):
        return self._records


class LongTable:
    """The input table in the long layout: numbers in the value column, category
    levels as text in the level column. A missing value is left out on even rows
    and given as NULL on odd ones, so both spellings of missing are run; a row
    with nothing given keeps one NULL pair (a key with no pair is no row)."""

    def __init__(self, plan, s, rows, types: dict):
        key, feature, value, level = s.long_columns
        self.row_column, self.columns = key, [feature, value, level]
        self.types = [types["text"], types["double"], types["text"]]
        self.values = []
        named = {}
        for inp in plan.inputs:
            named.setdefault(s.columns[inp.name], inp)
        for i, row in enumerate(rows):
            for name, inp in named.items():
                raw = row.get(inp.name)
                if inp.kind == "numeric":
                    cell = numeric_cell(raw)
                    pair = [name, cell, None]
                else:
                    cell = as_text(integer_level_cell(raw)) if inp.integer_levels \
                        else text_cell(raw)
                    pair = [name, None, cell]
                if cell is not None or i % 2:
                    self.values.append([i] + pair)
            if not self.values or self.values[-1][0] != i:
                name, inp = next(iter(named.items()))
                self.values.append([i, name, None, None])

    def records(self):
        return [list(r) for r in self.values]


def run(artifact_dir: Path, model: FrozenModel, rows: list[dict], options: dict) -> RunOutput:
    plan = build_plan(model)
    s = settings(plan, {k: v for k, v in options.items() if k in OPTIONS})
    d = s.dialect
    path = Path(artifact_dir) / artifact_name(plan, s)
    if not path.is_file():
        raise ScorewrightError(f"sql: artifact {path} is missing")
    # Bytes as written: universal newlines would turn a CR inside a quoted name into LF.
    sql = path.read_bytes().decode("utf-8")
    engine = ENGINES[d.name]
    table = LongTable(plan, s, rows, engine.TYPES) if s.layout == "long" else \
        Table(plan, s, rows, engine.TYPES, engine.mixed_cell)
    if not engine.HOLDS_NUL:
        _refuse_nul(plan, table, engine.NAME)
    if s.form == "select":
        query = sql
    elif s.form == "expressions":
        query = json.loads(sql)["expressions"]  # a list: run through DataFrame.selectExpr
    elif s.form == "view":
        query = f"SELECT * FROM {d.quote(object_name(plan))}"
    else:
        query = function_call(plan, s)
    setup = [] if s.form in ("select", "expressions") else [sql]
    # The text pass (the rows again as a CSV loader makes them) is verify's; a test about
    # something else (JIT, sums) may leave it out with text_pass = False.
    tables = [table]
    if options.get("text_pass", True):
        tables.append(TextTable(plan, table, rows, engine.TYPES["text"], engine.EMPTY_FIELD))
    passes, version = engine.execute_passes(options, d, s.table, tables, setup, query)
    typed = _outputs(plan, rows, table, *passes[0])
    if len(passes) == 1:
        note = ""
    elif passes[1] is None:
        note = "; no text-column pass: the text columns do not fit one row"
    else:
        _same_bits(plan, rows, typed, _outputs(plan, rows, tables[1], *passes[1]), engine)
        note = f"; again from text columns ({engine.LOADER})"
    return outputs_from_table(plan, typed, version + note)


def _outputs(plan, rows, table, names, result) -> list[list]:
    """The output columns, in row order."""
    cols = output_columns(plan)
    missing = [c for c in cols if c not in names]
    if missing:
        raise ScorewrightError(f"sql: the query returned no column {missing[0]!r}")
    if table.row_column in names:
        order = names.index(table.row_column)
        result = sorted(result, key=lambda r: r[order])
    if len(result) != len(rows):
        raise ScorewrightError(f"sql: {len(rows)} rows in, {len(result)} rows out")
    index = [names.index(c) for c in cols]
    return [[r[i] for i in index] for r in result]


def _same_bits(plan, rows, typed, text, engine) -> None:
    """The text pass must give the typed pass's outputs bit for bit (the typed pass is
    compared with the reference, so both are)."""
    for i, (a, b) in enumerate(zip(typed, text)):
        if any(_key(x) != _key(y) for x, y in zip(a, b)):
            cells = {k: v for k, v in rows[i].items()}
            raise ScorewrightError(
                f"sql: row {i} {cells!r} scores differently when loaded as text columns "
                f"({engine.LOADER}): {b!r}, typed columns: {a!r}")


def _key(value):
    """Bits of a float (so a signed zero counts), the value itself otherwise."""
    if isinstance(value, float):
        return ("f", struct.pack("<d", value))
    return ("v", str(value))


def _refuse_nul(plan, table, engine: str) -> None:
    """A text value with NUL cannot enter an engine whose text cannot hold it."""
    for record in table.records():
        for column, value in zip([table.row_column] + table.columns, record):
            if isinstance(value, str) and "\x00" in value:
                raise ScorewrightError(f"sql: {engine} text cannot hold NUL, so row {record[0]} "
                                       f"(column {column!r} = {value!r}) cannot be loaded")


def create_table(d, name: str, table: Table) -> str:
    cols = [f"{d.quote(table.row_column)} BIGINT"]
    cols += [f"{d.quote(c)} {t}".rstrip() for c, t in zip(table.columns, table.types)]
    return f"CREATE TABLE {d.quote(name)} ({', '.join(cols)})"


def insert(d, name: str, table: Table, marker: str) -> str:
    marks = ", ".join([marker] * (len(table.columns) + 1))
    return f"INSERT INTO {d.quote(name)} VALUES ({marks})"


def _records(table):
    return table.records()


def _insert_in_blocks(con, d, name: str, table, block: int = 200) -> None:
    """Rows in multi-row INSERTs: DuckDB's executemany runs one statement per row
    (measured: 4.2 s for 5,239 rows, 0.45 s in blocks of 200)."""
    records = _records(table)
    width = len(table.columns) + 1
    one = "(" + ", ".join(["?"] * width) + ")"
    for start in range(0, len(records), block):
        chunk = records[start:start + block]
        values = ", ".join([one] * len(chunk))
        con.execute(f"INSERT INTO {d.quote(name)} VALUES {values}",
                    [cell for record in chunk for cell in record])


def _in_memory_passes(engine, connect, error, d, name: str, tables, setup, query) -> list:
    """Each table in a fresh in-memory database of an embedded engine (SQLite, DuckDB):
    create, load, run the setup and the query; Ctrl-C interrupts a running query."""
    passes = []
    for table in tables:
        con = connect(":memory:")
        cancel_on_interrupt(con.interrupt)  # Ctrl-C ends a running query at once
        try:
            con.execute(create_table(d, name, table))
            engine.load(con, d, name, table)
            for statement in setup:
                engine.run_setup(con, statement)
            cur = con.execute(query)
            passes.append(([c[0] for c in cur.description], cur.fetchall()))
        except error as exc:
            raise ScorewrightError(f"sql: {engine.NAME} failed: {exc}") from None
        finally:
            forget_cancel(con.interrupt)
            con.close()
    return passes


class Engine:
    """One pass: execute_passes with one table."""

    @classmethod
    def execute(cls, options, d, name, table, setup, query):
        passes, version = cls.execute_passes(options, d, name, [table], setup, query)
        return passes[0][0], passes[0][1], version


class SQLite(Engine):
    NAME = "SQLite"
    HOLDS_NUL = True
    # No declared type: the column keeps integers, reals and text as they are.
    TYPES = {"double": "REAL", "integer": "INTEGER", "text": "TEXT", "mixed": ""}
    mixed_cell = staticmethod(lambda v: v)
    # The sqlite3 shell's .import creates every column TEXT and stores an empty field
    # as '' (tests/test_sql_column_types.py runs the shell to hold this to it).
    EMPTY_FIELD = ""
    LOADER = "TEXT columns, '' for an empty field, as the sqlite3 shell's .import makes them"

    @classmethod
    def execute_passes(cls, options, d, name, tables, setup, query):
        import sqlite3

        passes = _in_memory_passes(cls, sqlite3.connect, sqlite3.Error, d, name, tables,
                                   setup, query)
        return passes, f"SQLite {sqlite3.sqlite_version}"

    @staticmethod
    def load(con, d, name, table):
        con.executemany(insert(d, name, table, "?"), _records(table))

    @staticmethod
    def run_setup(con, statement):
        con.executescript(statement)


class DuckDB(Engine):
    NAME = "DuckDB"
    HOLDS_NUL = True
    TYPES = {"double": "DOUBLE", "integer": "BIGINT", "text": "VARCHAR", "mixed": "VARCHAR"}
    mixed_cell = staticmethod(as_text)
    EMPTY_FIELD = None
    LOADER = "VARCHAR columns, NULL for an empty field, as read_csv(all_varchar) makes them"

    @classmethod
    def execute_passes(cls, options, d, name, tables, setup, query):
        import duckdb

        passes = _in_memory_passes(cls, duckdb.connect, duckdb.Error, d, name, tables,
                                   setup, query)
        return passes, f"DuckDB {duckdb.connect().execute('SELECT version()').fetchone()[0]}"

    load = staticmethod(_insert_in_blocks)

    @staticmethod
    def run_setup(con, statement):
        con.execute(statement)


class PostgreSQL(Engine):
    NAME = "PostgreSQL"
    HOLDS_NUL = False
    TYPES = {"double": "DOUBLE PRECISION", "integer": "BIGINT", "text": "TEXT",
             "mixed": "TEXT"}
    mixed_cell = staticmethod(as_text)
    EMPTY_FIELD = None
    LOADER = "TEXT columns, NULL for an empty field, as COPY ... (FORMAT csv) makes them"

    @classmethod
    def execute_passes(cls, options, d, name, tables, setup, query):
        params = cls.session_settings(options)
        dsn = options.get("dsn")
        if dsn:
            return cls._execute(dsn, d, name, tables, setup, query, params)
        from ..postgres import TemporaryServer

        with tempfile.TemporaryDirectory(prefix="scorewright-pg-") as tmp:
            with TemporaryServer(Path(tmp) / "pg") as server:
                return cls._execute(server.dsn, d, name, tables, setup, query, params)

    @staticmethod
    def session_settings(options) -> dict[str, str]:
        """The profile's [verify] settings (server parameters for the scoring session)."""
        given = options.get("settings") or {}
        if not isinstance(given, dict) or not all(
                isinstance(k, str) and isinstance(v, (str, int, float))
                for k, v in given.items()):
            raise ScorewrightError("sql: [verify] settings must be a table of parameter = value")
        return {k: str(v).lower() if isinstance(v, bool) else str(v)
                for k, v in given.items()}

    @staticmethod
    def _execute(dsn, d, name, tables, setup, query, params):
        import psycopg

        passes = []
        try:
            with psycopg.connect(dsn, autocommit=True) as con:
                for k, table in enumerate(tables):
                    try:
                        passes.append(PostgreSQL._one_pass(con, d, name, table, setup, query,
                                                           params))
                    except psycopg.errors.ProgramLimitExceeded:
                        # "row is too big": so many text columns do not fit a page,
                        # for a user's CSV import either; only a later pass may be left.
                        if k == 0:
                            raise
                        passes.append(None)
                version = con.execute("SHOW server_version").fetchone()[0]
            given = "".join(f", {k}={v}" for k, v in params.items())
            return passes, f"PostgreSQL {version.split()[0]}{given}"
        except psycopg.Error as exc:
            message = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise ScorewrightError(f"sql: PostgreSQL failed: {message}") from None

    @staticmethod
    def _one_pass(con, d, name, table, setup, query, params):
        schema = d.quote(f"scorewright_{uuid.uuid4().hex[:12]}")
        con.execute(f"CREATE SCHEMA {schema}")
        try:
            con.execute(f"SET search_path TO {schema}")
            con.execute(create_table(d, name, table))
            columns = ", ".join(d.quote(c) for c in [table.row_column] + table.columns)
            with con.cursor().copy(f"COPY {d.quote(name)} ({columns}) FROM STDIN") as copy:
                for record in _records(table):
                    copy.write_row(record)
            # Statistics, as autovacuum would gather: unanalyzed, the planner re-ran
            # each long-layout pivot per row (17 s instead of 1 s at 1,000 features).
            con.execute(f"ANALYZE {d.quote(name)}")
            for statement in setup:
                con.execute(statement)
            for parameter, value in params.items():
                con.execute("SELECT set_config(%s, %s, false)", (parameter, value))
            cur = con.execute(query)
            return [c.name for c in cur.description], cur.fetchall()
        finally:
            con.execute("RESET ALL")
            con.execute(f"DROP SCHEMA {schema} CASCADE")


class Spark(Engine):
    """A local Spark session (local[2]), one per process, kept for later runs;
    options["ansi"] (default true, Spark 4's default) sets spark.sql.ansi.enabled."""

    NAME = "Spark"
    HOLDS_NUL = True
    TYPES = {"double": "double", "integer": "bigint", "text": "string", "mixed": "string"}
    mixed_cell = staticmethod(as_text)
    EMPTY_FIELD = None
    LOADER = "string columns, null for an empty field, as spark.read.csv makes them"
    _session = None

    @classmethod
    def session(cls):
        if cls._session is None:
            try:
                from pyspark.sql import SparkSession
            except ImportError:
                raise ScorewrightError("sql: the spark dialect needs pyspark "
                                       "(pip install pyspark) and a Java 17 runtime") from None
            cls._session = (SparkSession.builder.master("local[2]")
                            .appName("scorewright-verify")
                            .config("spark.ui.enabled", "false")
                            # stage bars would break verify's progress lines on stderr
                            .config("spark.ui.showConsoleProgress", "false")
                            .config("spark.sql.shuffle.partitions", "2")
                            # Planning a 10,000-feature query needs more than the
                            # 1 GB default heap (measured: 2 GB ran out, 4 GB did not).
                            .config("spark.driver.memory", "4g")
                            .getOrCreate())
            cls._session.sparkContext.setLogLevel("ERROR")
        return cls._session

    @classmethod
    def execute_passes(cls, options, d, name, tables, setup, query):
        passes = []
        for table in tables:
            names, rows, version = cls._one_pass(options, d, name, table, setup, query)
            passes.append((names, rows))
        return passes, version

    @classmethod
    def _one_pass(cls, options, d, name, table, setup, query):
        spark = cls.session()  # first: without pyspark it says what to install
        from py4j.protocol import Py4JJavaError
        from pyspark.errors import PySparkException
        from pyspark.sql import types as T

        ansi = bool(options.get("ansi", True))
        spark.conf.set("spark.sql.ansi.enabled", "true" if ansi else "false")
        kinds = {"double": T.DoubleType(), "bigint": T.LongType(), "string": T.StringType()}
        fields = [T.StructField(table.row_column, T.LongType())]
        fields += [T.StructField(c, kinds[t]) for c, t in zip(table.columns, table.types)]
        records = [[r[0]] + [float(v) if t == "double" and v is not None else v
                             for v, t in zip(r[1:], table.types)] for r in table.records()]
        try:
            frame = spark.createDataFrame(records, T.StructType(fields))
            frame.createOrReplaceTempView(d.quote(name))
            for statement in setup:
                spark.sql(statement)
            result = spark.sql(query) if isinstance(query, str) else \
                frame.selectExpr("*", *query)
            names = result.columns
            rows = [list(r) for r in result.collect()]
        except PySparkException as exc:
            first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise ScorewrightError(f"sql: Spark failed: {first}") from None
        except Py4JJavaError as exc:  # a JVM error (stack overflow, heap) is no PySparkException
            raise ScorewrightError(f"sql: Spark failed: {_java_error(exc)}") from None
        mode = "ANSI on" if ansi else "ANSI off"
        return names, rows, f"Spark {spark.version} local[2], {mode}"


def _java_error(exc) -> str:
    """The innermost cause of a JVM error, as `class: message` on one line."""
    error = exc.java_exception
    while error.getCause() is not None:
        error = error.getCause()
    text = str(error.toString()).strip()
    return text.splitlines()[0] if text else "a Java error"


ENGINES = {"sqlite": SQLite, "duckdb": DuckDB, "postgres": PostgreSQL, "spark": Spark}

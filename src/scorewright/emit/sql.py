"""SQL target: one query per dialect that scores an input table in the database.

The query is a stack of subqueries (layers), innermost first, into which
sql_program renders the scoring program: each input read in its own layers (any
column type to double, sql_reading), then the program's ops, each inlined or made
a column of a layer, in the program's order. The missing-value, scaling, link and
decision rules are the program's ops; nothing here decides them. Every user string
enters as a quoted identifier or string literal; the header comment escapes it.
The dialect record (sql_dialects) says how to spell each thing; nothing here asks
which engine it is.
"""

from __future__ import annotations

import json
import textwrap
from dataclasses import dataclass

from .. import __version__
from ..errors import ScorewrightError
from ..model import FrozenModel
from ..plan import Plan, build_plan, output_columns
from . import Artifact, reject_options
from .sql_columns import input_columns, name_key
from .sql_dialects import Dialect, dialect as find_dialect, literal
from . import sql_long, sql_program, sql_reading
from .sql_inline import output_expressions
from .sql_program import Query
from .sql_reading import unreachable
from .templating import render

OPTIONS = ("dialect", "table", "keep", "columns", "form", "layout", "long_columns")
LAYOUTS = ("wide", "long")
FORMS = ("select", "view", "function", "expressions")


# ---------------------------------------------------------------- spelling

def comment_text(value: str) -> str:
    """A user string as comment text that cannot end the comment line: quoted, with
    backslashes, quotes, control characters and line separators escaped."""
    out = []
    for ch in value:
        code = ord(ch)
        if ch in '\\"':
            out.append("\\" + ch)
        elif code < 0x20 or 0x7F <= code <= 0x9F or ch in "\u2028\u2029":
            out.append(f"\\u{code:04x}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _check_text(what: str, value: str) -> None:
    if "\x00" in value:
        raise ScorewrightError(f"{what} {value!r} contains a NUL character, "
                               "which SQL text cannot hold")


# ---------------------------------------------------------------- layers

class Layers:
    """Subqueries innermost first; each layer is a list of (alias, expression) and
    what it reads from besides the layer below (a join, or for the first layer the
    FROM clause)."""

    def __init__(self):
        self.layers: list[tuple[list[tuple[str, str]], str]] = []

    @property
    def ref(self) -> str:
        return f"l{len(self.layers) - 1}"

    def add(self, columns: list[tuple[str, str]], source: str = "") -> None:
        self.layers.append((columns, source))

    def render(self, innermost_from: str, fence: str) -> list[str]:
        """The nested SELECTs as lines; a line may hold a newline inside a quoted name
        or string, so callers indent with `indent`, never by splitting on newlines."""
        lines: list[str] = []
        for i, (columns, source) in enumerate(self.layers):
            cols = _select_list(columns)
            if i == 0:
                source = source or innermost_from
                lines = ["SELECT"] + cols + ([f"FROM {source}"] if source else [])
            else:
                lines = ["SELECT"] + cols + ["FROM ("] + indent(lines) + [f") AS l{i - 1}"]
                if source:
                    lines.append(source)
            if i < len(self.layers) - 1 and fence:
                lines[-1] += fence
        return lines


    def render_with(self, name, fence: str, innermost_from: str = "") -> list[str]:
        """The layers as a flat WITH list, `name(i)` naming layer i (each read as l<i>):
        no nesting for the parser to track however many layers there are (SQLite's
        parser stack held about 40 nested subqueries)."""
        lines: list[str] = []
        for i, (columns, source) in enumerate(self.layers):
            if i == 0:
                below = [f"FROM {source or innermost_from}"] if source or innermost_from else []
            else:
                below = [f"FROM {name(i - 1)} AS l{i - 1}"] + ([source] if source else [])
            body = ["SELECT"] + _select_list(columns) + below
            if fence:
                body[-1] += fence
            lines += [("WITH " if i == 0 else ", ") + f"{name(i)} AS ("] + indent(body) + [")"]
        return lines


def _select_list(columns: list[tuple[str, str]]) -> list[str]:
    cols = [f"  {expr} AS {alias}," for alias, expr in columns]
    cols[-1] = cols[-1][:-1]
    return cols


def indent(lines: list[str], by: str = "  ") -> list[str]:
    return [by + line for line in lines]


def build_query(plan: Plan, d: Dialect, source: dict[str, str], innermost_from: str = "",
                extra: list[tuple[str, str]] = (), layers=None, rejoin=None,
                typed: bool = False) -> Query:
    """The layered scoring subquery (sql_program renders the scoring program into it).
    `source` maps each feature to the SQL expression it is read from (a column of any
    type; `typed`: already the number, as the PostgreSQL function's double parameters
    are); `extra` are (alias, expression) pairs carried to the top; `layers` collects
    the layers (default: rendered as nested SELECTs).

    A model of more than the dialect's terms_per_layer terms sums its margins over
    several layers, each adding a block of terms to the sums of the layer below: the
    same additions in the same order, so the same value, while no expression nests
    deeper than the engines accept (SQLite and DuckDB refuse depth 1000).

    With `rejoin(ref, used)`, the join clause that brings the input back beside
    layer `ref` (by a row key carried in `extra`; `ref` None: the first layer's FROM
    source), each block reads its own inputs (`used`, input indices); without it,
    the first layers read every input and later layers carry the values not yet
    summed."""
    flat = flat_sums(plan, d)
    n_terms = len(plan.terms)
    if rejoin is not None:
        per = min(d.terms_per_join or d.terms_per_layer, d.read_width or n_terms or 1)
    else:
        per = n_terms if flat else d.terms_per_layer
    return sql_program.build_query(plan, d, source, Layers() if layers is None else layers,
                                   innermost_from, extra, rejoin, typed, per, flat)


# ---------------------------------------------------------------- the artifact

@dataclass(frozen=True)
class Settings:
    dialect: Dialect
    form: str
    table: str
    keep: tuple[str, ...] | None   # None: every input column
    columns: dict                  # feature -> column (long layout: name in the table)
    layout: str = "wide"
    long_columns: tuple[str, ...] = ()


def settings(plan: Plan, options: dict) -> Settings:
    reject_options("sql", options, OPTIONS)
    d = find_dialect(options.get("dialect"))
    form = options.get("form", "select")
    if form not in FORMS:
        raise ScorewrightError(f"--form {form!r}: expected one of {', '.join(FORMS)}")
    if form == "function" and d.function_form is None:
        raise ScorewrightError(f"--form function: {d.no_function_reason}")
    if form == "expressions":
        if not d.expressions_form:
            raise ScorewrightError("--form expressions: only the spark dialect has it "
                                   "(one expression per output for DataFrame.selectExpr)")
        for option in ("table", "keep"):
            if options.get(option) is not None:
                raise ScorewrightError(f"--{option} does not apply to --form expressions: "
                                       "selectExpr('*', ...) keeps every column of the frame")
    table = options.get("table") or "input"
    layout = options.get("layout", "wide")
    if layout not in LAYOUTS:
        raise ScorewrightError(f"--layout {layout!r}: expected one of {', '.join(LAYOUTS)}")
    if layout == "wide" and options.get("long_columns") is not None:
        raise ScorewrightError("--long-columns applies only to --layout long")
    if layout == "long":
        long_columns = sql_long.check(form, options)
        mapping = _mapping(plan, options)
        s = Settings(d, form, table, None, sql_long.names(plan, d, mapping), layout,
                     long_columns)
        _check_names(plan, s)
        return s
    keep = options.get("keep")
    if keep is not None:
        keep = tuple(keep)
        if not keep or any(c == "" for c in keep):
            raise ScorewrightError("--keep: expected comma-separated column names")
    mapping = _mapping(plan, options)
    # A column named like the rowid the query joins on would shadow it.
    reserved = d.reserved_columns + ((d.rowid,) if rowid_joined(plan, d) else ())
    columns = input_columns(d, plan.feature_names, mapping, output_columns(plan) + reserved,
                            keep is None)
    s = Settings(d, form, table, keep, columns)
    _check_names(plan, s)
    return s


def _mapping(plan: Plan, options: dict) -> dict:
    mapping = dict(options.get("columns") or {})
    for feature in mapping:
        if feature not in plan.feature_names:
            raise ScorewrightError(f"--column {feature}=...: the model has no feature {feature!r}")
    return mapping


def _check_names(plan: Plan, s: Settings) -> None:
    d = s.dialect
    _check_text("the table name", s.table)
    for inp in plan.inputs:
        if inp.kind == "categorical":
            for level in inp.levels:
                if not isinstance(level, str) and abs(level) > 2 ** 53:
                    raise ScorewrightError(f"feature {inp.name!r}: the integer level {level} is "
                                           "too large to compare exactly as a double")
    for label in plan.classes or ():
        if isinstance(label, str) and "\x00" in label and d.nul_char is None:
            raise ScorewrightError(f"{d.name}: text cannot hold NUL, so the class label "
                                   f"{label!r} cannot be returned")
    outputs = {name_key(d, c) for c in output_columns(plan)}
    if s.layout == "long":
        _check_text("the table name", s.table)
        if name_key(d, s.long_columns[0]) in outputs:
            raise ScorewrightError(f"--long-columns: the key {s.long_columns[0]!r} is "
                                   "named like an output column")
    for column in s.keep or ():
        _check_text("the kept column", column)
        if name_key(d, column) in outputs:
            raise ScorewrightError(f"--keep {column!r}: the output has a column of that name")


def object_name(plan: Plan) -> str:
    return f"score_{plan.stem}"[:63]


def flat_sums(plan: Plan, d: Dialect) -> bool:
    """The margins are summed by the dialect's sum_list: a model of more terms than a
    layer holds, on an engine where a long chain of `+` is the trouble (Spark: a
    stack overflow at 1,000 terms in 250-term layers, a full heap at 10,000)."""
    return d.sum_list is not None and len(plan.terms) > d.terms_per_layer


def layered(plan: Plan, d: Dialect) -> bool:
    """The wide layout's margins are summed over more than one layer (build_query)."""
    return len(plan.terms) > d.terms_per_layer and not flat_sums(plan, d)


def rowid_joined(plan: Plan, d: Dialect) -> bool:
    """A wide model on an engine with row ids reads its inputs a block at a time,
    joining the table again by rowid (carrying thousands of values through the
    layers instead made DuckDB take minutes to plan a 1,000-feature query)."""
    return d.rowid is not None and (layered(plan, d) or (
        d.read_width is not None and len(plan.inputs) > d.read_width))


def scoring_query(plan: Plan, s: Settings) -> str:
    """The SELECT statement (no terminator) for the select and view forms."""
    d = s.dialect
    if s.layout == "long":
        return sql_long.statement(plan, s, build_query, _select_list)
    table = d.quote(s.table)
    sources = _sources(s, "t.")
    wide = rowid_joined(plan, d)
    rowid = f"t.{d.rowid}"
    rejoin = (lambda ref, used: f"{table} AS t" if ref is None else
              f"JOIN {table} AS t ON {rowid} = {ref}.rid") if wide else None
    if s.keep is not None:
        extra = [(f"k{j}", f"t.{d.quote(c)}") for j, c in enumerate(s.keep)]
        extra += [("rid", rowid)] if wide else []
        q = build_query(plan, d, sources, f"{table} AS t", extra, rejoin=rejoin)
        cols = [f"s.k{j} AS {d.quote(c)}" for j, c in enumerate(s.keep)]
        open_, close = "FROM (", ") AS s"
    elif d.passthrough == "lateral" and not wide and lateral_fits(plan, d, sources):
        q = build_query(plan, d, sources)
        cols = ["t.*"]
        open_, close = f"FROM {table} AS t CROSS JOIN LATERAL (", ") AS s"
    elif d.passthrough == "row" and not wide:
        q = build_query(plan, d, sources, f"{table} AS t", [("rw", d.row_value)])
        cols = [d.row_columns]
        open_, close = "FROM (", ") AS s"
    else:
        q = build_query(plan, d, sources, f"{table} AS t", [("rid", rowid)], rejoin=rejoin)
        cols = ["t.*"]
        open_, close = f"FROM {table} AS t JOIN (", f") AS s ON s.rid = {rowid}"
    cols += [f"s.{alias} AS {d.quote(name)}" for name, alias in q.outputs]
    lines = ["SELECT"] + [f"  {c}," for c in cols]
    lines[-1] = lines[-1][:-1]
    if d.flat_layers:
        prefix = layer_prefix(s.table)
        last = len(q.layers.layers) - 1
        with_lines = q.layers.render_with(lambda i: f"{prefix}l{i}", d.fence, f"{table} AS t")
        return "\n".join(with_lines + lines + [open_[:-1] + f"{prefix}l{last}" + close[1:]])
    return "\n".join(lines + [open_] + indent(q.body) + [close])


def lateral_fits(plan: Plan, d: Dialect, sources) -> bool:
    """The query is shallow enough for the dialect's LATERAL passthrough."""
    if d.lateral_layers is None:
        return True
    return len(build_query(plan, d, sources, layers=Layers()).layers.layers) <= d.lateral_layers


def layer_prefix(table: str) -> str:
    """A prefix for layer names no table name can shadow (a WITH name hides a table
    of that name)."""
    prefix = "sw_"
    while table.lower().startswith(prefix):
        prefix += "_"
    return prefix


def _sources(s: Settings, prefix: str) -> dict[str, str]:
    return {f: prefix + s.dialect.quote(c) for f, c in s.columns.items()}


def parameter_types(plan: Plan, d: Dialect) -> list[str]:
    """Numbers as double; categories as text (integer codes too: the body reads the
    text, so a text column of codes works as well as an integer one)."""
    return [d.double if inp.kind == "numeric" else d.text for inp in plan.inputs]


def output_types(plan: Plan, d: Dialect) -> list[str]:
    names = output_columns(plan)
    label = d.text
    if plan.classes is not None and isinstance(plan.classes[0], int):
        label = d.integer
    return [label if n == "predicted_class" else d.double for n in names]


def function_call(plan: Plan, s: Settings) -> str:
    """A query that scores the input table through the function form."""
    d = s.dialect
    args = []
    for inp, typ in zip(plan.inputs, parameter_types(plan, d)):
        arg = f"t.{d.quote(s.columns[inp.name])}"
        args.append(typed_argument(d, inp, arg, typ) if d.typed_parameters else arg)
    args = ", ".join(args)
    return d.function_call.format(name=d.quote(object_name(plan)), args=args,
                                  table=d.quote(s.table))


def typed_argument(d: Dialect, inp, arg: str, typ: str) -> str:
    """A column as the typed function's argument: numbers as they are (the function
    has an overload over text for a table of text columns), a category as text (a
    float NaN, which is missing, as NULL: its text 'NaN' would be an unseen level)."""
    if inp.kind == "numeric":
        return arg
    if inp.integer_levels:
        nan = sql_reading.category_missing(d, arg)
        return f"CASE WHEN {nan} THEN NULL ELSE CAST({arg} AS {typ}) END"
    return f"CAST({arg} AS {typ})"


def text_overload(plan: Plan, d: Dialect) -> tuple[list[str], list[str]] | None:
    """(parameters, arguments) of the function over text arguments, which reads each
    text as the select form does and calls the function over doubles: a table loaded
    from a CSV (text columns) calls this one. None: no numeric input, so the two
    would have one signature."""
    if not d.typed_parameters or not any(inp.kind == "numeric" for inp in plan.inputs):
        return None
    parameters, arguments = [], []
    for inp in plan.inputs:
        p = d.parameter.format(n=inp.index + 1, i=inp.index)
        parameters.append(d.parameter_decl.format(n=inp.index + 1, i=inp.index, type=d.text))
        arguments.append(sql_reading.number(d, p, literal, inp.boolean)
                         if inp.kind == "numeric" else p)
    return parameters, arguments


def _dollar_tag(body: str) -> str:
    tag, n = "$scorewright$", 0
    while tag in body:
        n += 1
        tag = f"$scorewright{n}$"
    return tag


def header_lines(plan: Plan, s: Settings) -> list[str]:
    d = s.dialect
    lines = [f"Model: {comment_text(plan.name)}",
             f"Model SHA-256: {plan.sha256}",
             f"Dialect: {d.name}; form: {s.form}; layout: {s.layout}"]
    if s.form == "function":
        lines.append("Arguments, in order (feature: SQL type):")
        for inp, typ in zip(plan.inputs, parameter_types(plan, d)):
            lines.append(f"  {comment_text(inp.name)}: {typ}")
        if text_overload(plan, d) is not None:
            lines.append(f"A second function of this name takes every argument as {d.text} "
                         "(a table loaded from a CSV) and reads numbers from the text.")
        lines.append("Call it on a table (here: the default table and column names):")
        lines += ["  " + line for line in function_call(plan, s).split("\n")]
    elif s.layout == "long":
        lines += sql_long.header_lines(plan, s, comment_text)
    else:
        lines.append(f"Input table: {comment_text(s.table)}")
        lines.append("Features (feature <- column; a name the engine cannot hold as a "
                     "column of its own is renamed):")
        for inp in plan.inputs:
            lines.append(f"  {comment_text(inp.name)} <- {comment_text(s.columns[inp.name])}"
                         f" ({inp.kind})")
        kept = "every input column" if s.keep is None else \
            ", ".join(comment_text(c) for c in s.keep)
        lines.append(f"Returns: {kept}, then the outputs")
    for inp in plan.inputs:
        for level in getattr(inp, "levels", ()):
            if unreachable(d, level):
                lines.append(f"Level {comment_text(level)} of {comment_text(inp.name)} holds "
                             f"NUL, which {d.name} text cannot: no value can match it")
    outputs = ", ".join(output_columns(plan))
    lines.append(f"Outputs: {outputs}")
    if plan.task == "binary" and plan.has_probabilities:
        lines.append(f"probability is that of class {comment_text(str(plan.classes[1]))}")
    elif plan.task != "regression" and not plan.has_probabilities:
        lines.append("the margins are the decision function; the model gives no probabilities")
    lines.append("Numbers may be held in any number, boolean or text column; text is read as "
                 "a decimal number.")
    lines.append("Missing: NULL, NaN and +-inf numbers and text that is no number; NULL or '' "
                 "categories.")
    if d.large_query_note and layered(plan, d):
        lines += textwrap.wrap(d.large_query_note, 86)
    return lines


def artifact_name(plan: Plan, s: Settings) -> str:
    if s.form == "expressions":
        return f"{plan.stem}.{s.dialect.name}.expressions.json"
    layout = ".long" if s.layout == "long" else ""
    return f"{plan.stem}.{s.dialect.name}{layout}.sql"


def expressions(plan: Plan, s: Settings) -> list[str]:
    """One `<expression> AS <output>` per output column, for selectExpr("*", *these)."""
    d = s.dialect
    pairs = output_expressions(plan, d, _sources(s, ""), build_query)
    return [f"{expr} AS {d.quote(name)}" for name, expr in pairs]


def expressions_file(plan: Plan, s: Settings) -> str:
    """JSON (ASCII only, so no user string can upset an editor or a loader)."""
    document = {
        "format": "scorewright selectExpr expressions",
        "scorewright_version": __version__,
        "model": plan.name,
        "model_sha256": plan.sha256,
        "dialect": s.dialect.name,
        "usage": ('df.selectExpr("*", *expressions) appends the outputs to every row. '
                  "Use all of them, in order, in one selectExpr: later ones name the margins "
                  "as lateral column aliases (Spark 3.4 or later); the frame must have no "
                  "other column named like an output."),
        "features": [{"feature": inp.name, "column": s.columns[inp.name], "kind": inp.kind}
                     for inp in plan.inputs],
        "outputs": list(output_columns(plan)),
        "expressions": expressions(plan, s),
    }
    return json.dumps(document, indent=1, ensure_ascii=True) + "\n"


def emit(model: FrozenModel, options: dict | None = None) -> list[Artifact]:
    plan = build_plan(model)
    s = settings(plan, dict(options or {}))
    d = s.dialect
    context = {"sha256": plan.sha256, "header": header_lines(plan, s),
               "name": d.quote(object_name(plan))}
    if s.form == "function":
        q = build_query(plan, d, {inp.name: d.parameter.format(n=inp.index + 1, i=inp.index)
                                  for inp in plan.inputs}, typed=d.typed_parameters)
        depth = len(q.layers.layers)
        if d.lateral_layers is not None and depth > d.lateral_layers:
            # The function is called through LATERAL, with no rowid to join by instead.
            raise ScorewrightError(f"--form function: this model's query is {depth} layers "
                                   f"deep, and {d.name} plans a LATERAL call of more than "
                                   f"{d.lateral_layers} in time that doubles with each layer; "
                                   "use --form select or view")
        context.update(
            body=q.body, outputs=q.outputs,
            parameters=[d.parameter_decl.format(n=i + 1, i=i, type=t)
                        for i, t in enumerate(parameter_types(plan, d))],
            returns=[(d.quote(n), t) for (n, _), t in zip(q.outputs, output_types(plan, d))],
            tag=_dollar_tag("\n".join(q.body)), quote=d.quote,
            text_overload=text_overload(plan, d))
        text = render(d.function_form, **context)
    elif s.form == "expressions":
        text = expressions_file(plan, s)
    else:
        query = scoring_query(plan, s)
        prefix = "" if s.form == "select" else d.view.format(name=context["name"]) + "\n"
        text = render("sql/query.sql.j2", statement=prefix + query, **context)
    return [Artifact(artifact_name(plan, s), text.encode("utf-8"))]

"""SQL target: one query per dialect that scores an input table in the database.

The query is a stack of subqueries, innermost first, one layer per stage of the
plan, so each expression is computed once and the operation order is the
plan's: read (any column type to double, sql_reading; NULL, NaN, +-inf and
text that is no number are missing; category codes) -> design values (fill, clamp, scaling, clip) -> margins (terms in plan
order, then the intercept) -> link -> probabilities and the decision. Every
user string enters as a quoted identifier or string literal; the header
comment escapes it. The dialect record (sql_dialects) says how to spell each
thing; nothing here asks which engine it is.
"""

from __future__ import annotations

import json
import math
import textwrap
from dataclasses import dataclass

from .. import __version__
from ..errors import ScorewrightError
from ..model import FrozenModel
from ..plan import Plan, build_plan, output_columns
from . import Artifact, reject_options
from .sql_columns import input_columns, name_key
from .sql_dialects import Dialect, dialect as find_dialect
from .sql_guards import product_edge, underflow_region
from . import sql_long, sql_reading, sql_sqlite_text
from .sql_inline import output_expressions
from .templating import render

OPTIONS = ("dialect", "table", "keep", "columns", "form", "layout", "long_columns")
LAYOUTS = ("wide", "long")
FORMS = ("select", "view", "function", "expressions")
DBL_MAX = 1.7976931348623157e308
OP = {"subtract": "-", "divide": "/", "multiply": "*", "add": "+"}


# ---------------------------------------------------------------- spelling

def literal(d: Dialect, x: float) -> str:
    """A double literal the engine reads back to exactly x, typed as double."""
    x = float(x)
    if d.exact_decimal_literals:
        return f"CAST('{x!r}' AS {d.double})"
    if x == 0.0:
        return "-0.0" if math.copysign(1.0, x) < 0 else "0.0"
    if x.is_integer() and abs(x) < 2.0 ** 53:
        return repr(x)
    mantissa, exponent = math.frexp(x)
    m, e = int(mantissa * 2 ** 53), exponent - 53
    while m % 2 == 0:
        m, e = m // 2, e + 1
    return f"({m} * {2.0 ** e!r})"


def label_literal(d: Dialect, label) -> str:
    if isinstance(label, int):
        return f"CAST({label} AS {d.integer})"
    return d.string(label)


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

    def carry(self, aliases) -> list[tuple[str, str]]:
        return [(a, f"{self.ref}.{a}") for a in aliases]

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


@dataclass
class Query:
    body: list[str]             # the scoring subquery's lines: output aliases, keeps, rowid
    outputs: list[tuple[str, str]]  # (output column name, alias in the body)
    layers: object = None


def build_query(plan: Plan, d: Dialect, source: dict[str, str], innermost_from: str = "",
                extra: list[tuple[str, str]] = (), layers=None, rejoin=None,
                typed: bool = False) -> Query:
    """The layered scoring subquery. `source` maps each feature to the SQL expression
    it is read from (a column of any type; `typed`: already the number, as the
    PostgreSQL function's double parameters are); `extra` are (alias, expression)
    pairs carried to the top; `layers` collects the layers (default: rendered as
    nested SELECTs).

    Each input is read (sql_reading: any column type to a double, or a category
    code) in one layer and its design value computed in the next, so the read,
    which spells the column several times, is written once per input.

    A model of more than the dialect's terms_per_layer terms sums its margins over
    several layers, each adding a block of terms to the sums of the layer below: the
    same additions in the same order, so the same value, while no expression nests
    deeper than the engines accept (SQLite and DuckDB refuse depth 1000).

    With `rejoin(ref, used)`, the join clause that brings the input back beside
    layer `ref` (by a row key carried in `extra`; `ref` None: the first layer's FROM
    source), each block reads its own inputs (`used`, input indices); without it,
    the first layers read every input and later layers carry the values not yet
    summed."""
    layers = Layers() if layers is None else layers
    carried = [alias for alias, _ in extra]
    terms = list(plan.terms)
    # Layers bound how deep a chain of `+` nests and, with `rejoin`, how many inputs
    # one layer reads; flat sums without rejoin need neither.
    flat = flat_sums(plan, d)
    if rejoin is not None:
        per = min(d.terms_per_join or d.terms_per_layer, d.read_width or len(terms) or 1)
    else:
        per = len(terms) if flat else d.terms_per_layer
    blocks = [terms[i:i + per] for i in range(0, len(terms), per)]
    ms = [f"m{k}" for k in range(plan.n_outputs)]
    zero = [("z", literal(d, 0.0))]  # a SELECT needs a column even when nothing is read
    if rejoin is not None:
        blocks = blocks or [[]]
        for b, block in enumerate(blocks):
            used = {t.input for t in block}
            below = None if b == 0 else layers.ref
            reads = _read_layers(plan, d, source, used, typed)
            kept = list(extra) if b == 0 else layers.carry(carried + ms)
            layers.add(kept + reads[0](None) or zero, rejoin(below, used))
            for columns in reads[1:]:
                layers.add(layers.carry(carried + (ms if b else [])) + columns(layers.ref)
                           or zero)
            ref = layers.ref
            values = dict(_design_values(plan, d, ref, used))
            sums = _sums(plan, d, block, lambda alias: f"({values[alias]})",
                         None if b == 0 else ref, b == len(blocks) - 1, flat)
            layers.add(layers.carry(carried) + sums)
    else:
        used = {t.input for t in terms}
        reads = _read_layers(plan, d, source, used, typed)
        layers.add(list(extra) + reads[0](None) or zero)
        for columns in reads[1:]:
            layers.add(layers.carry(carried) + columns(layers.ref) or zero)
        layers.add(layers.carry(carried) + _design_values(plan, d, layers.ref, used) or zero)
        for b, block in enumerate(blocks or [[]]):
            ref = layers.ref
            later = {t.input for rest in blocks[b + 1:] for t in rest}
            values = [_alias(inp) for inp in plan.inputs if inp.index in later]
            sums = _sums(plan, d, block, lambda alias: f"{ref}.{alias}",
                         None if b == 0 else ref, b >= len(blocks) - 1, flat)
            layers.add(layers.carry(carried + values) + sums)
    outputs = _finish(plan, d, layers, carried)
    return Query(layers.render(innermost_from, d.fence), outputs, layers)


def _alias(inp) -> str:
    return f"{'v' if inp.kind == 'numeric' else 'c'}{inp.index}"


def _read_layers(plan: Plan, d: Dialect, source: dict[str, str], used, typed: bool):
    """The layers reading each used input, innermost first, as functions of the alias
    of the layer below (None for the first): each numeric or integer-level input read
    from a column of any type to a double r<i>_n (sql_reading; NULL when missing or
    no number), with x<i> = 1 where an integer-level category is missing; each
    text-level category's code c<i>."""
    inputs = []  # (index, stages, first-layer columns carried after)
    for inp in plan.inputs:
        if inp.index not in used:
            continue
        col = source[inp.name]
        if inp.kind == "numeric":
            read = [[("n", col)]] if typed else sql_reading.stages(d, col, literal, inp.boolean)
            inputs.append((inp.index, read, []))
        elif inp.integer_levels:
            # The number and the missing test, looked up a layer later: a CASE over
            # the levels spells its operand once per level in DuckDB.
            missing = f"CASE WHEN {sql_reading.category_missing(d, col)} THEN 1 ELSE 0 END"
            inputs.append((inp.index, sql_reading.category_stages(d, col, literal),
                           [(f"x{inp.index}", missing)]))
        else:
            inputs.append((inp.index, [], [(_alias(inp), _read_code(d, inp, col))]))
    depth = max([len(read) for _, read, _ in inputs] + [1])

    def layer(t: int):
        def columns(ref):
            out = []
            for index, read, fixed in inputs:
                prefix = f"{ref}.r{index}_"
                if t < len(read):
                    # The first stage reads the column (user text); only later stages
                    # name the stage below.
                    out += [(f"r{index}_{name}",
                             expr if ref is None else expr.replace(sql_sqlite_text.P, prefix))
                            for name, expr in read[t]]
                elif read:
                    out.append((f"r{index}_n", prefix + "n"))
                out += fixed if t == 0 else [(alias, f"{ref}.{alias}") for alias, _ in fixed]
            return out
        return columns

    return [layer(t) for t in range(depth)]


def _design_values(plan: Plan, d: Dialect, ref: str, used) -> list[tuple[str, str]]:
    """(alias, expression) of each used input's design value (from layer `ref`'s
    double) or category code (carried)."""
    out = []
    for inp in plan.inputs:
        if inp.index not in used:
            continue
        if inp.kind == "numeric":
            region = underflow_region(inp, ()) if d.raises_on_underflow else None
            out.append((_alias(inp), _design_value(d, inp, region, f"{ref}.r{inp.index}_n")))
        elif inp.integer_levels:
            out.append((_alias(inp), _integer_code(d, inp, f"{ref}.r{inp.index}_n",
                                                   f"{ref}.x{inp.index} = 1")))
        else:
            out.append((_alias(inp), f"{ref}.{_alias(inp)}"))
    return out


def _sums(plan: Plan, d: Dialect, block, value, below: str | None, last: bool, flat: bool):
    """(m<k>, expression): the sums of layer `below` (none: start from the first
    term) plus the block's terms, left to right, and the intercept if `last`;
    `flat`: as the dialect's sum_list. `value(alias)` spells an input's design value
    or code."""
    out = []
    for k in range(plan.n_outputs):
        parts = [] if below is None else [f"{below}.m{k}"]
        for term in block:
            if term.kind == "numeric":
                v = value(f"v{term.input}")
                parts.append(f"{literal(d, term.weights[k])} * {_factor(d, term.weights[k], v)}")
            else:
                parts.append(_lookup(d, term.tables[k], value(f"c{term.input}")))
        if last:
            parts.append(literal(d, plan.intercepts[k]))
        if not parts:
            out.append((f"m{k}", None))
        elif flat and len(parts) > 2:
            out.append((f"m{k}", d.sum_list.format(start=parts[0], rest=", ".join(parts[1:]))))
        else:
            # `+` is left-associative in SQL: the tree of full parentheses, without
            # the parentheses SQLite's parser cannot nest 100 deep.
            out.append((f"m{k}", " + ".join(parts)))
    return out


def _factor(d: Dialect, w: float, v: str) -> str:
    """The design value as the factor of w * v; where that product would underflow
    (and PostgreSQL raise), the signed zero IEEE gives (see sql_guards)."""
    edge = product_edge(w) if d.raises_on_underflow else 0.0
    if edge == 0.0:
        return v
    return (f"CASE WHEN {v} > {literal(d, -edge)} AND {v} < {literal(d, edge)} "
            f"THEN {v} * {literal(d, 0.0)} ELSE {v} END")


def _codes(inp) -> tuple[int, int]:
    """(code of a missing value, code of an unseen one)."""
    missing = inp.fill_code if inp.fill_code is not None else (
        inp.unknown_code if inp.unknown_code is not None else -1)
    unseen = inp.unknown_code if inp.unknown_code is not None else -1
    return missing, unseen


def _integer_code(d: Dialect, inp, value: str, is_missing: str) -> str:
    """An integer-level category's code from its value as a double (sql_reading:
    2, 2.0, '2' and ' 2.0 ' all read 2.0; NULL when no number) and its missing test."""
    missing, unseen = _codes(inp)
    whens = " ".join(f"WHEN {literal(d, float(level))} THEN {code}"
                     for code, level in enumerate(inp.levels))
    return (f"CASE WHEN {is_missing} THEN {missing} "
            f"ELSE CASE {value} {whens} ELSE {unseen} END END")


def _read_code(d: Dialect, inp, col: str) -> str:
    """A text-level category's code, from the column's text."""
    missing, unseen = _codes(inp)
    value = f"CAST({col} AS {d.text}){d.text_collate}"
    is_missing = f"{col} IS NULL"
    if d.code_list is not None and not any(unreachable(d, lv) for lv in inp.levels):
        levels = ", ".join(d.string(level) for level in inp.levels)
        position = d.code_list.format(levels=levels, value=value)
        return (f"CASE WHEN {is_missing} THEN {missing} WHEN {value} = '' THEN {missing} "
                f"ELSE COALESCE(NULLIF({position}, 0) - 1, {unseen}) END")
    whens = f"WHEN '' THEN {missing} " + " ".join(
        f"WHEN {d.string(level)} THEN {code}" for code, level in enumerate(inp.levels)
        if not unreachable(d, level))
    return (f"CASE WHEN {is_missing} THEN {missing} "
            f"ELSE CASE {value} {whens} ELSE {unseen} END END")


def _design_value(d: Dialect, inp, region, col: str) -> str:
    """One CASE per numeric input. Inside [-B, B] the plan's chain runs on the value;
    a finite value beyond the bound, a missing one (NULL; NaN, which PostgreSQL and
    DuckDB order above every number; +-inf) take the chain's value on -B, B or the
    fill, computed here in IEEE double exactly as the engine would compute it.
    `col` is already the double (sql_reading)."""
    x = col
    if region is not None:
        low, high = region
        x = (f"CASE WHEN {col} > {literal(d, low)} AND {col} < {literal(d, high)} "
             f"THEN {x} * {literal(d, 0.0)} ELSE {x} END")
    v = x
    for step in inp.steps:
        v = f"({v} {OP[step.op]} {literal(d, step.value)})"
    if inp.clip is not None:
        v = d.least.format(a=d.greatest.format(a=v, b=literal(d, inp.clip[0])),
                           b=literal(d, inp.clip[1]))
    b, top = literal(d, inp.bound), literal(d, DBL_MAX)
    nb, ntop = literal(d, -inp.bound), literal(d, -DBL_MAX)
    return (f"CASE WHEN {col} >= {nb} AND {col} <= {b} THEN {v} "
            f"WHEN {col} < {nb} AND {col} >= {ntop} THEN {literal(d, chain(inp, -inp.bound))} "
            f"WHEN {col} > {b} AND {col} <= {top} THEN {literal(d, chain(inp, inp.bound))} "
            f"ELSE {literal(d, missing_value(inp))} END")


def chain(inp, v: float) -> float:
    """The plan's scaling steps and clip on a value already within the bound."""
    for step in inp.steps:
        c = step.value
        v = v - c if step.op == "subtract" else v / c if step.op == "divide" else \
            v * c if step.op == "multiply" else v + c
    if inp.clip is not None:
        v = min(max(v, inp.clip[0]), inp.clip[1])
    return v


def missing_value(inp) -> float:
    """The design value of a missing input: the chain on the (clamped) fill, or 0.0."""
    if inp.fill is None:
        return 0.0
    return chain(inp, min(max(inp.fill, -inp.bound), inp.bound))


def _lookup(d: Dialect, table, code: str) -> str:
    if d.lookup_list is not None and any(v != 0.0 for v in table):
        values = ", ".join(literal(d, v) for v in table)
        return d.lookup_list.format(values=values, code=code, zero=literal(d, 0.0))
    whens = [f"WHEN {j} THEN {literal(d, value)}" for j, value in enumerate(table)
             if not (value == 0.0 and math.copysign(1.0, value) > 0)]
    if not whens:
        return literal(d, 0.0)
    return f"CASE {code} {' '.join(whens)} ELSE {literal(d, 0.0)} END"


def _finish(plan: Plan, d: Dialect, layers: Layers, carried: list[str]):
    guard = literal(d, plan.precision.exp_guard)
    zero, one = literal(d, 0.0), literal(d, 1.0)
    k = plan.n_outputs
    ms = [f"m{j}" for j in range(k)]
    if plan.task == "binary":
        r = layers.ref
        layers.add(layers.carry(carried + ["m0"]) + [
            ("t", f"exp(-{d.least.format(a=f'abs({r}.m0)', b=guard)})")])
        r = layers.ref
        neg, pos = (label_literal(d, c) for c in plan.classes)
        layers.add(layers.carry(carried + ["m0"]) + [
            ("p", f"CASE WHEN {r}.m0 >= {zero} THEN {one} / ({one} + {r}.t) "
                  f"ELSE {r}.t / ({one} + {r}.t) END"),
            ("k", f"CASE WHEN {r}.m0 > {literal(d, plan.cut)} THEN {pos} ELSE {neg} END")])
        return list(zip(output_columns(plan), ["m0", "p", "k"]))
    if plan.task == "multiclass":
        r = layers.ref
        labels = [label_literal(d, c) for c in plan.classes]
        whens = []
        for j in range(k - 1):
            test = " AND ".join(f"{r}.m{j} >= {r}.m{i}" for i in range(j + 1, k))
            whens.append(f"WHEN {test} THEN {labels[j]}")
        argmax = f"CASE {' '.join(whens)} ELSE {labels[-1]} END"
        top = d.greatest_many.format(args=", ".join(f"{r}.{m}" for m in ms))
        layers.add(layers.carry(carried + ms) + [("top", top), ("k", argmax)])
        r = layers.ref
        exps = [(f"e{j}", "exp(" + d.greatest.format(a=f"{r}.m{j} - {r}.top", b=literal(
            d, -plan.precision.exp_guard)) + ")") for j in range(k)]
        layers.add(layers.carry(carried + ms + ["k"]) + exps)
        r = layers.ref
        total = f"{r}.e0"
        for j in range(1, k):
            total = f"({total} + {r}.e{j})"
        es = [f"e{j}" for j in range(k)]
        layers.add(layers.carry(carried + ms + es + ["k"]) + [("total", total)])
        r = layers.ref
        layers.add(layers.carry(carried + ms + ["k"]) + [
            (f"p{j}", f"{r}.e{j} / {r}.total") for j in range(k)])
        aliases = ms + [f"p{j}" for j in range(k)] + ["k"]
        return list(zip(output_columns(plan), aliases))
    r = layers.ref
    if plan.link == "log":
        lo = d.greatest.format(a=f"{r}.m0", b=literal(d, -plan.precision.exp_guard))
        value = f"exp({d.least.format(a=lo, b=literal(d, plan.precision.log_link_max))})"
    else:
        value = f"{r}.m0"
    layers.add(layers.carry(carried + ["m0"]) + [("y", value)])
    return list(zip(output_columns(plan), ["m0", "y"]))


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


def unreachable(d: Dialect, level) -> bool:
    """A text level no value in this engine can equal (it holds NUL, which the engine's
    text cannot): left out of the lookup, where it could never match."""
    return isinstance(level, str) and "\x00" in level and d.nul_char is None


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
    elif d.passthrough == "lateral" and not wide:
        q = build_query(plan, d, sources)
        cols = ["t.*"]
        open_, close = f"FROM {table} AS t CROSS JOIN LATERAL (", ") AS s"
    elif d.passthrough == "row":
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
        # (A lateral passthrough reads t from outside the layers: no flat form.)
        with_lines = q.layers.render_with(lambda i: f"{prefix}l{i}", d.fence, f"{table} AS t")
        return "\n".join(with_lines + lines + [open_[:-1] + f"{prefix}l{last}" + close[1:]])
    return "\n".join(lines + [open_] + indent(q.body) + [close])


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
    if plan.task == "binary":
        lines.append(f"probability is that of class {comment_text(str(plan.classes[1]))}")
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

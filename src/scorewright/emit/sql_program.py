"""The scoring program rendered as SQL: each op spelled from the dialect's table, then
inlined into the expression that uses it or made a column of a layer.

A layer is one SELECT over the layer below (emit/sql.py nests them or lists them in a
WITH). An op becomes a column when inlining it would repeat work or nest too deep:

- it is a read (emit/sql_reading spells how a column of any type becomes a number or
  a level code; the stages of a read are layers of their own);
- its name is spelled more than once by the ops that use it (a CASE names its
  operand in each arm), unless all its own operands are columns or constants, so
  repeating it repeats one operation;
- its expression would nest deeper than `MAX_DEPTH` (a CASE counting as the dialect's
  `select_depth` levels);
- it is a block of a long margin sum: a sum of more operands than the dialect's
  terms_per_layer is cut into partial sums, each a column adding the next block to
  the one below (the same additions in the same order), so no `+` chain nests
  deeper than the engines accept;
- an output needs it.

Each column's layer is one above the deepest column its expression reads; a column
is carried up through the layers in between. With `rejoin`, each block of the
margin sums reads its own inputs in a layer joined back to the table (sql.py).
Nothing here knows what a link, a guard or a missing value is: those are ops of
the program (program.py). The one dialect fact about values is PostgreSQL's
underflow error (sql_guards), which changes how a product is spelled, never what
it gives.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from ..errors import ScorewrightError
from ..plan import Plan
from ..program import Const, Op, lower, prune
from . import sql_guards, sql_ordinary, sql_reading, sql_sqlite_text
from .sql_dialects import DBL_MAX, Dialect, literal

# An inlined expression deeper than this becomes a column (engines parse expressions
# recursively; SQLite and DuckDB refuse depth 1,000, and a margin sum stacks on top).
MAX_DEPTH = 24


def _binary(symbol: str):
    return lambda a: f"{a[0]} {symbol} {a[1]}"


def spellings(d: Dialect) -> dict[str, Callable[[list[str]], str]]:
    """op -> its text from spelled operands: the dialect's table of primitives. An op
    missing here, or set to None in `d.ops`, is one the dialect cannot express."""
    lit = literal
    table = {
        "add": _binary("+"), "sub": _binary("-"), "mul": _binary("*"), "div": _binary("/"),
        "max": lambda a: d.greatest.format(a=a[0], b=a[1]),
        "min": lambda a: d.least.format(a=a[0], b=a[1]),
        "neg": lambda a: f"-{a[0]}",
        "abs": lambda a: f"abs({a[0]})",
        "sqrt": lambda a: f"sqrt({a[0]})",
        "or": lambda a: f"({a[0]} OR {a[1]})",
        "gt": _binary(">"), "ge": _binary(">="), "eq": _binary("="),
        "select": lambda a: f"CASE WHEN {a[0]} THEN {a[1]} ELSE {a[2]} END",
        "exp": lambda a: f"exp({a[0]})",
        # A missing real reads as NULL (or, from a number column, NaN or +-inf; every
        # engine here orders NaN above every number): never NULL itself, so a select
        # on it takes one of its arms.
        "is_missing": lambda a: f"{a[0]} IS NULL OR abs({a[0]}) > {lit(d, DBL_MAX)}",
    }
    table.update(d.ops)
    return table


def _lookup(d: Dialect, table, code: str) -> str:
    """table[code] for 0 <= code < len(table), else 0.0."""
    zero = literal(d, 0.0)
    if d.lookup_list is not None and any(v != 0.0 for v in table):
        values = ", ".join(literal(d, v) for v in table)
        return d.lookup_list.format(values=values, code=code, zero=zero)
    whens = [f"WHEN {j} THEN {literal(d, value)}" for j, value in enumerate(table)
             if not (value == 0.0 and str(value)[0] != "-")]
    if not whens:
        return zero
    return f"CASE {code} {' '.join(whens)} ELSE {zero} END"


BUCKET_FAN = 4  # WHENs of one CASE of a bucket's tree: 1,000 edges nest 5 deep


def _bucket(d: Dialect, edges, x: str) -> tuple[str, int]:
    """The number of edges at or below x, as integer-valued CASEs: each tests x against
    at most BUCKET_FAN edges, highest first, and descends into the range it found; (the
    text, its number of nested CASEs)."""
    def tree(lo: int, hi: int) -> tuple[str, int]:   # the count is in lo..hi
        if lo == hi:
            return str(lo), 0
        step = -(-(hi - lo + 1) // BUCKET_FAN)
        starts = list(range(lo, hi + 1, step))
        arms = [(f"{x} >= {literal(d, edges[b - 1])}", tree(b, min(b + step - 1, hi)))
                for b in reversed(starts[1:])]
        rest = tree(lo, starts[1] - 1)
        whens = " ".join(f"WHEN {test} THEN {text}" for test, (text, _) in arms)
        return (f"CASE {whens} ELSE {rest[0]} END",
                1 + max([depth for _, (_, depth) in arms] + [rest[1]]))
    return tree(0, len(edges))


def _bucket_depth(outcomes: int) -> int:
    """The nested CASEs of `_bucket`'s tree over that many counts (its widest range
    nests deepest), without writing the text."""
    return 0 if outcomes <= 1 else 1 + _bucket_depth(-(-outcomes // BUCKET_FAN))


# ---------------------------------------------------------------- layering

@dataclass
class Column:
    level: int
    expr: Callable[[str], str]   # the expression, given the alias of the layer below
    reads: frozenset = frozenset()  # keys of the columns it names
    alias: str = ""              # its name in the layer (default: its key)


@dataclass
class Query:
    body: list[str]                 # the scoring subquery's lines: output aliases, keeps, rowid
    outputs: list[tuple[str, str]]  # (output column name, alias in the body)
    layers: object = None


def sql_outputs(plan: Plan) -> list[tuple[str, str]]:
    """(output column of the query, the program output it shows)."""
    probs = plan.has_probabilities  # a "decision" head shows its margins and class alone
    # a calibrated head of several members: each member's decision value is a margin
    if plan.task == "binary" and plan.n_outputs == 1:
        return [("margin", "margin_0")] + [("probability", "probability_1")] * probs \
            + [("predicted_class", "class_index")]
    if plan.task == "binary":
        return ([(f"margin_{j}", f"margin_{j}") for j in range(plan.n_outputs)]
                + [("probability", "probability_1")] * probs
                + [("predicted_class", "class_index")])
    if plan.task == "multiclass":
        return ([(f"margin_{j}", f"margin_{j}") for j in range(plan.n_outputs)]
                + [(f"probability_{j}", f"probability_{j}")
                   for j in range(plan.n_probabilities)]
                + [("predicted_class", "class_index")])
    if plan.offset is not None:  # the expected count, then the rate (no offset)
        return [("margin", "margin_0"), ("predicted_value", "value"),
                ("predicted_rate", "rate")]
    return [("margin", "margin_0"), ("predicted_value", "value")]


def label_literal(d: Dialect, label) -> str:
    if isinstance(label, int):
        return f"CAST({label} AS {d.integer})"
    return d.string(label)


def _margin_sums(ops) -> list[str]:
    by_dest = {op.dest: op for op in ops}
    out = []
    for op in ops:
        if op.op == "output" and op.attr.startswith("margin_") and isinstance(op.args[0], str):
            if by_dest[op.args[0]].op == "sum":
                out.append(op.args[0])
    return out


def _cut(ops: list[Op], margins: list[str], per: int) -> tuple[list[Op], int]:
    """Each margin sum as a chain of partial sums of `per` operands (the last one also
    takes the constant last operand), each adding its block to the one before: the
    same additions in the same order. Returns the ops and the number of blocks."""
    out, blocks = [], 1
    for op in ops:
        if op.dest not in margins:
            out.append(op)
            continue
        terms, last = list(op.args[:-1]), op.args[-1]
        chunks = [terms[j:j + per] for j in range(0, len(terms), per)] or [[]]
        chunks[-1].append(last)
        blocks = max(blocks, len(chunks))
        prev = None
        for b, chunk in enumerate(chunks):
            args = ([] if prev is None else [prev]) + chunk
            dest = op.dest if b == len(chunks) - 1 else f"{op.dest}_{b}"
            out.append(Op(dest, "sum", tuple(args), op.type, ("block", b)))
            prev = dest
    return out, blocks


def _order(ops: list[Op], n_blocks: int) -> tuple[list[Op], dict[str, int]]:
    """The ops block by block (each block's operands' cones, then its partial sums),
    then the rest; and each op's block."""
    by_dest = {op.dest: op for op in ops}
    position = {op.dest: j for j, op in enumerate(ops)}
    block: dict[str, int] = {}

    def cone(name, b, acc):
        if not isinstance(name, str) or name in block:
            return
        block[name] = b
        for a in by_dest[name].args:
            cone(a, b, acc)
        acc.append(name)

    ordered = []
    for b in range(n_blocks):
        sums = [op for op in ops if op.attr == ("block", b)]
        acc: list[str] = []
        for s in sums:
            block[s.dest] = b
            for a in s.args:
                cone(a, b, acc)
        ordered += sorted(acc, key=position.get) + [s.dest for s in sums]
    done = set(ordered)
    ordered += [op.dest for op in ops if op.dest not in done]
    return [by_dest[n] for n in ordered], block


class Renderer:
    """One program as columns of layers over the input (see the module docstring)."""

    def __init__(self, plan: Plan, d: Dialect, per: int, flat: bool):
        self.plan, self.d, self.flat = plan, d, flat
        program = lower(plan)
        shown = {name for _, name in sql_outputs(plan)}
        ops = list(prune(program, shown))
        ops, self.n_blocks = _cut(ops, _margin_sums(ops), per)
        self.ops, self.block = _order(ops, self.n_blocks)
        self.table = spellings(d)
        self.risky = sql_guards.risky(self.ops) if d.raises_on_underflow else set()
        self.by_dest = {op.dest: op for op in self.ops}
        self.position = {op.dest: j for j, op in enumerate(self.ops)}
        self.general = sql_guards.intervals(self.ops)

    def _template(self, op: Op):
        d = self.d
        if op.op == "lookup":
            return lambda a: _lookup(d, op.attr, a[0])
        if op.op == "bucket":
            return lambda a: _bucket(d, op.attr, a[0])[0]
        if op.op == "sum":
            if self.flat and len(op.args) > 2 and d.sum_list is not None:
                return lambda a: d.sum_list.format(start=a[0], rest=", ".join(a[1:]))
            return lambda a: " + ".join(a)
        if op.op == "output":
            return lambda a: a[0]
        if op.dest in self.risky:
            const = [isinstance(a, Const) for a in op.args]
            return lambda a: sql_guards.guard(op, a, lambda x: literal(d, x), const)
        spell = self.table.get(op.op)
        if spell is None:
            raise ScorewrightError(f"target {d.name} cannot express op {op.op}")
        return spell

    def columns(self, reads: dict, base: Callable[[int, int], int]):
        """(alias -> Column, [(output column, alias)], top level). `reads`: read_stages;
        `base(block, level)`: the first level of a block's reads, given the level its
        previous block's sums reached."""
        templates = {op.dest: None if op.op.startswith("read_") else self._template(op)
                     for op in self.ops}
        uses: dict[str, int] = {}
        for op in self.ops:
            marks = [f"\x02{i}\x02" for i in range(len(op.args))]
            text = templates[op.dest](marks) if templates[op.dest] else ""
            for i, a in enumerate(op.args):
                if isinstance(a, str):
                    uses[a] = uses.get(a, 0) + text.count(marks[i])
        cols: dict[str, Column] = {}
        alias: dict[str, str] = {}       # materialized name -> its column
        inline: dict[str, Callable[[str], str]] = {}
        leaves: dict[str, frozenset] = {}  # inlined name -> the columns it reads
        depth: dict[str, int] = {}
        reached = {-1: -1}               # block -> highest level of its sums
        self.read_block: dict[int, set] = {}

        def operand(a, ref, known=None):
            if isinstance(a, Const):
                text = str(a.value) if isinstance(a.value, int) else literal(self.d, a.value)
                return f"({text})" if text.startswith("-") else text
            same = (known or {}).get(a)
            if isinstance(same, sql_ordinary.Same):
                return operand(same.name, ref, known)
            if a in inline:
                return f"({inline[a](ref, known or {})})"
            return f"{ref}.{alias[a]}"

        def expression(op, tmpl):
            if op.op != "select" or not isinstance(op.args[0], str):
                return lambda ref, known=None: tmpl([operand(a, ref, known) for a in op.args])
            flag, yes, no = op.args

            def select(ref, known=None):
                # Inside an arm the flag's value is known: a select on the same flag
                # there is its arm (the same name, so the same value).
                known = known or {}
                f = flag
                while isinstance(known.get(f), sql_ordinary.Same):
                    f = known[f].name
                if known.get(f) in (True, False):
                    return operand(yes if known[f] else no, ref, known)
                return tmpl([operand(flag, ref, known), operand(yes, ref, {**known, f: True}),
                             operand(no, ref, {**known, f: False})])
            return select

        for op in self.ops:
            b = self.block.get(op.dest, self.n_blocks)
            if op.op.startswith("read_"):
                start = base(b, reached.get(b - 1, -1))
                alias[op.dest] = self._read(op, reads[op.attr], start, cols)
                self.read_block.setdefault(start, set()).add(op.attr)
                continue
            if op.op == "output":
                continue
            names = [a for a in op.args if isinstance(a, str)]
            reads_ = frozenset().union(*[leaves[a] if a in inline else {alias[a]}
                                         for a in names])
            cases = (1 if op.op == "select" else
                     _bucket_depth(len(op.attr) + 1) if op.op == "bucket" else 0)
            dp = (cases * self.d.select_depth or 1) + max(
                [depth.get(a, 0) for a in names] + [0])
            # a guarded op is long: written out at each of its uses it multiplies
            # and a bucket is a tree of CASEs: one column, however many lookups read it
            atomic = not any(a in inline for a in names) and op.dest not in self.risky \
                and op.op != "bucket"
            if (op.attr and op.op == "sum") or dp > MAX_DEPTH or (
                    uses.get(op.dest, 0) > 1 and not atomic):
                level = 1 + max([cols[a].level for a in reads_] + [-1])
                alias[op.dest] = "q" + op.dest
                expr = expression(op, templates[op.dest])
                arms = self._ordinary(op, expr, inline, operand)
                if arms is None:
                    cols["q" + op.dest] = Column(level, expr, reads_)
                elif not self.d.ordinary_layer:
                    cols["q" + op.dest] = Column(level, _case(arms, expr), reads_)
                else:
                    # The ordinary arm (NULL where the test fails: no value of the
                    # program is NULL) a layer below the general one, named twice
                    # above: Spark merges a layer into the one above where each of its
                    # columns is named once (a COALESCE of the two ran 6.2x the
                    # minimal expression, as one CASE does).
                    test, quick = arms
                    cols["q" + op.dest + "_o"] = Column(
                        level, lambda ref, t=test, q=quick: f"CASE WHEN {t(ref)} THEN {q(ref)} END",
                        reads_)
                    level += 1
                    cols["q" + op.dest] = Column(
                        level, lambda ref, a="q" + op.dest + "_o", e=expr:
                        f"CASE WHEN {ref}.{a} IS NOT NULL THEN {ref}.{a} ELSE {e(ref)} END",
                        reads_ | {"q" + op.dest + "_o"})
                depth[op.dest] = 0
                if op.op == "sum" and op.attr:
                    reached[b] = max(reached.get(b, -1), level)
            else:
                inline[op.dest] = expression(op, templates[op.dest])
                leaves[op.dest] = reads_
                depth[op.dest] = dp
        return self._outputs(cols, alias, inline, leaves, operand)

    def _ordinary(self, op: Op, expr, inline, operand):
        """(test, ordinary arm) of the column, each a function of the layer's alias, or
        None where the ordinary arm would be the same expression (sql_ordinary)."""
        cone, leaves, seen = [], set(), set()
        stack = [a for a in op.args if isinstance(a, str)]
        while stack:
            a = stack.pop()
            if a in seen:
                continue
            seen.add(a)
            if a in inline:
                cone.append(self.by_dest[a])
                stack += [b for b in self.by_dest[a].args if isinstance(b, str)]
            else:
                leaves.add(a)
        reads = {a for a in leaves if self.by_dest[a].op == "read_real"}
        if not reads:
            return None
        cone.sort(key=lambda o: self.position[o.dest])
        assumed = sql_ordinary.bounds(cone, reads)
        known = sql_ordinary.facts(cone + [op], assumed, self.general)
        if not known:
            return None
        names = sorted(assumed, key=lambda a: self.by_dest[a].attr)
        d = self.d
        sum_list = d.sum_list if self.flat else None

        def quick(ref):
            same = known.get(op.dest)
            if isinstance(same, sql_ordinary.Same):
                return operand(same.name, ref, known)
            return expr(ref, known)

        def test(ref):
            return sql_ordinary.test(d, [f"abs({operand(a, ref)})" for a in names],
                                     [assumed[a] for a in names], literal, sum_list)
        if quick("l0") == expr("l0"):
            return None
        return test, quick

    def _read(self, op: Op, stages, start: int, cols) -> str:
        """The read's stages as columns from level `start`; returns its value's alias."""
        i = op.attr
        inp = self.plan.inputs[i]
        # Stages repeat names (a value passed up): each stage's columns are keyed apart.
        below: frozenset = frozenset()
        last = len(stages) - 1

        def key(name, t):
            return name if t == last or name[0] == "x" else f"{name}\x01{t}"

        for t, stage in enumerate(stages):
            for name, text in stage:
                cols[key(name, t)] = Column(start + t, _stage_expr(text, i, t), below, name)
            below = frozenset(key(name, t) for name, _ in stage)
        if op.op == "read_real":
            return f"r{i}_n"
        if not inp.integer_levels:
            return f"c{i}"
        d = self.d
        cols[f"c{i}"] = Column(start + len(stages), lambda ref: sql_reading.integer_code(
            d, inp, f"{ref}.r{i}_n", f"{ref}.x{i}"), frozenset({f"r{i}_n", f"x{i}"}))
        return f"c{i}"

    def _outputs(self, cols, alias, inline, leaves, operand):
        by_name = {op.attr: op.args[0] for op in self.ops if op.op == "output"}
        shown, pending = [], []
        for column, name in sql_outputs(self.plan):
            arg = by_name[name]
            label = name == "class_index"
            if isinstance(arg, str) and arg not in inline and not label:
                shown.append((column, alias[arg]))
                continue
            reads_ = frozenset() if not isinstance(arg, str) else (
                leaves[arg] if arg in inline else frozenset({alias[arg]}))
            pending.append((column, f"o{len(pending)}", arg, label, reads_))
        top = max([cols[a].level for _, a in shown] + [0])
        for *_, reads_ in pending:
            top = max([top] + [1 + cols[a].level for a in reads_])
        d, classes = self.d, self.plan.classes

        def value(arg, label):
            def expr(ref):
                text = operand(arg, ref)
                if not label:
                    return text
                whens = " ".join(f"WHEN {j} THEN {label_literal(d, c)}"
                                 for j, c in enumerate(classes))
                return f"CASE {text} {whens} END"
            return expr

        for column, a, arg, label, reads_ in pending:
            cols[a] = Column(top, value(arg, label), reads_)
        out = dict(shown + [(column, a) for column, a, *_ in pending])
        return cols, [(c, out[c]) for c, _ in sql_outputs(self.plan)], top


def _case(arms, expr):
    test, quick = arms
    return lambda ref: f"CASE WHEN {test(ref)} THEN {quick(ref)} ELSE {expr(ref)} END"


def _stage_expr(text: str, i: int, t: int):
    if t == 0:
        return lambda ref: text
    return lambda ref: text.replace(sql_sqlite_text.P, f"{ref}.r{i}_")


def build_query(plan: Plan, d: Dialect, source: dict[str, str], layers,
                innermost_from: str = "", extra=(), rejoin=None, typed: bool = False,
                per: int | None = None, flat: bool = False) -> Query:
    """The program as layers added to `layers`: `extra` (alias, expression) pairs
    carried to the top; `rejoin(ref, used)`: the join clause bringing the input back
    beside layer `ref` (None: the first layer's FROM source) for the inputs `used`,
    so each block of the margin sums reads its own inputs; without it every input is
    read in the first layers. `per`: operands a partial margin sum adds."""
    r = Renderer(plan, d, per or max(1, len(plan.terms)), flat)
    reads = sql_reading.read_stages(plan, d, source, typed)
    if rejoin is None:
        def base(block, reached):
            return 0
    else:
        def base(block, reached):
            return reached + 1
    cols, outputs, top = r.columns(reads, base)
    keep = [a for a, _ in extra]
    # the highest level that names each column (outputs: the top layer itself)
    needed: dict[str, int] = {}
    for col in cols.values():
        for a in col.reads:
            needed[a] = max(needed.get(a, -1), col.level)
    for _, a in outputs:
        needed[a] = max(needed.get(a, -1), top + 1)
    by_level: dict[int, list[str]] = {}
    carried: dict[int, list[str]] = {}
    for a, col in cols.items():
        by_level.setdefault(col.level, []).append(a)
        for level in range(col.level + 1, needed.get(a, -1)):
            carried.setdefault(level, []).append(col.alias or a)
    zero = [("z", literal(d, 0.0))]  # a SELECT needs a column even when nothing is read
    for level in range(top + 1):
        ref = layers.ref if level else None
        columns = list(extra) if level == 0 else [(a, f"{ref}.{a}") for a in keep]
        columns += [(a, f"{ref}.{a}") for a in carried.get(level, [])]
        columns += [(cols[a].alias or a, cols[a].expr(ref)) for a in by_level.get(level, [])]
        source = ""
        if rejoin is not None and (level == 0 or level in r.read_block):
            source = rejoin(ref, r.read_block.get(level, set()))
        layers.add(columns or zero, source)
    return Query(layers.render(innermost_from, d.fence), outputs, layers)

"""Plain-Python target: one standard-library-only .py file.

Python floats are IEEE doubles and `math.exp` is the C library's exp, so the
scorer performs the program's operations exactly as the reference evaluator does.
The scoring program is rendered one assignment per operation from `PYTHON`, the
language's spellings. Literals are `repr` (shortest round-trip); every user string
enters the file as a `repr` string literal, never inside a comment.
"""

from __future__ import annotations

from ..model import FrozenModel
from ..plan import Plan, build_plan, output_columns
from ..program import Const, Op, Program, lower, output_names
from . import Artifact, reject_options
from .statements import Rendered, Renderer, Spelling
from .templating import render


def literal(x: float) -> str:
    return repr(float(x))


PYTHON = Spelling(
    language="python",
    real=literal,
    code=str,
    assign=lambda name, _type, value: f"{name} = {value}",
    reassign=lambda name, value: f"{name} = {value}",
    ops={
        # _number gives None for a missing value; a select replaces it before any use.
        # a feature fitted on booleans also reads the words true/false. A finite float
        # (the class itself, not a subclass) is its own value: the test skips the call.
        "read_real": "(_r if (_r := {src}).__class__ is float and _r - _r == 0.0"
                     " else _number(_r, {inp.boolean}))",
        "read_code": lambda *_, src, inp, n: _read_code(src, inp),
        "is_missing": "{0} is None",
        "add": "{0} + {1}", "sub": "{0} - {1}", "mul": "{0} * {1}", "div": "{0} / {1}",
        # the program's max(a, b): a unless b > a (what builtins max does, without a call)
        "max": "({1} if {1} > {0} else {0})",
        "min": "({1} if {1} < {0} else {0})",
        "neg": "-{0}", "abs": "abs({0})", "sqrt": "math.sqrt({0})",
        "or": "({0} or {1})",
        "gt": "{0} > {1}", "ge": "{0} >= {1}", "eq": "{0} == {1}",
        "select": "({1} if {0} else {2})",
        "exp": "math.exp({0})",
        "lookup": "({table}[{0}] if {0} >= 0 else 0.0)",  # a negative code: no level
        "bucket": "_bisect_right({table}, {0})",  # the standard library's bisect
        "sum": " + ",  # left to right, as the program's ordered sum
    },
)


def _role(plan: Plan) -> str:
    """"offset" or "exposure": an exposure's input has the log step."""
    steps = plan.inputs[plan.offset].steps
    return "exposure" if steps and steps[0].op == "log" else "offset"


def _read_code(src: str, inp) -> str:
    """_code's result; a non-empty str read against text levels is looked up directly
    (what _code does with it, without the call)."""
    call = f"_code(_LEVELS_{inp.index}, {inp.integer_levels}, {{}})"
    if inp.integer_levels:
        return call.format(src)
    return (f"(_LEVELS_{inp.index}.get(_r, -2) if (_r := {src}).__class__ is str and _r"
            f" else {call.format('_r')})")


OPTIONS = ()


def emit(model: FrozenModel, options: dict | None = None) -> list[Artifact]:
    reject_options("python", options or {}, OPTIONS)
    plan = build_plan(model)
    text = render("python/scorer.py.j2", **context(plan))
    return [Artifact(f"{plan.stem}.py", text.encode("utf-8"))]


def context(plan: Plan) -> dict:
    program = lower(plan)
    sources = {inp.index: f"row.get({plan.feature_names[inp.index]!r})" for inp in plan.inputs}
    code = render_program(program, sources)
    tables = []
    for inp in plan.inputs:
        if inp.kind == "categorical":
            entries = ", ".join(f"{level!r}: {c}" for c, level in enumerate(inp.levels))
            tables.append(f"_LEVELS_{inp.index} = {{{entries}}}")
    for name, values in code.tables:
        tables.append(f"{name} = ({', '.join(literal(x) for x in values)},)")
    return {
        "sha256": plan.sha256,
        "stem": plan.stem,
        "name_literal": repr(plan.name),
        "task": plan.task,
        "features": [repr(n) for n in plan.feature_names],
        "classes": None if plan.classes is None else [repr(c) for c in plan.classes],
        "output_columns": output_columns(plan),
        "tables": tables,
        "program_lines": code.lines,
        "outputs": [(name, code.outputs[name]) for name in output_names(plan)],
        "n_outputs": plan.n_outputs,
        "has_rate": plan.offset is not None,
        "role": None if plan.offset is None else _role(plan),
        "n_classes": 0 if plan.classes is None else len(plan.classes),
        "probabilities": plan.has_probabilities,
    }


# An interpreter pays per statement, so the Python scorer is rendered with two shortcuts
# that change no value. (1) A numeric input's first five operations (read, is missing,
# fill, max with -bound, min with +bound) give the value read itself when it is a float
# inside [-bound, bound]: such a value is not missing and neither max nor min changes
# it; so that case is tested first, and every other value runs the five operations as
# rendered. (2) A value used once, by an operation whose spelling names it once, is
# written inside its user (parenthesized, at most INLINE_DEPTH deep) instead of on a
# line of its own. Both are only rendering: the operations and their order are the
# program's.
INLINE_DEPTH = 6


def render_program(program: Program, sources: dict[int, str]) -> Rendered:
    r = Renderer(program, PYTHON, sources)
    ops = list(program.ops)
    users: dict[str, list[tuple[Op, int]]] = {}
    for op in ops:
        for pos, a in enumerate(op.args):
            if isinstance(a, str):
                users.setdefault(a, []).append((op, pos))
    depth: dict[str, int] = {}
    lines: list[str] = []
    i = 0
    while i < len(ops):
        chain = _read_chain(ops, i)
        if chain:
            lines += _fast_read(r, chain, users, sources)
            i += len(chain)
            continue
        op = ops[i]
        i += 1
        if _inlinable(op, users, depth):
            args = [r.operand(a) for a in op.args]
            text = PYTHON.ops[op.op]
            r.rename[op.dest] = "(" + text.format(*args, **r._fields(op)) + ")"
            depth[op.dest] = 1 + max((depth.get(a, 0) for a in op.args
                                      if isinstance(a, str)), default=0)
            continue
        lines += r.lines([op])
    return Rendered(lines, r.table_list, r.outputs)


def _inlinable(op: Op, users, depth) -> bool:
    if op.op.startswith("read_") or op.op in ("output", "sum") or op.op not in PYTHON.ops:
        return False
    if not isinstance(PYTHON.ops[op.op], str):
        return False
    use = users.get(op.dest, [])
    if len(use) != 1:
        return False
    user, pos = use[0]
    text = PYTHON.ops.get(user.op)
    if user.op in ("output", "sum") or not isinstance(text, str):
        return user.op == "sum"
    if text.count("{%d}" % pos) != 1:
        return False
    return 1 + max((depth.get(a, 0) for a in op.args if isinstance(a, str)),
                   default=0) <= INLINE_DEPTH


def _read_chain(ops: list[Op], i: int) -> list[Op] | None:
    """read_real x; is_missing(x) f; select(f, fill, x) v; max(v, -b); min(., b)."""
    if i + 5 > len(ops):
        return None
    read, miss, sel, lo, hi = ops[i:i + 5]
    if not (read.op == "read_real" and miss.op == "is_missing" and miss.args == (read.dest,)
            and sel.op == "select" and sel.args[0] == miss.dest and sel.args[2] == read.dest
            and lo.op == "max" and lo.args[0] == sel.dest and isinstance(lo.args[1], Const)
            and hi.op == "min" and hi.args[0] == lo.dest and isinstance(hi.args[1], Const)):
        return None
    a, b = lo.args[1].value, hi.args[1].value
    if not (isinstance(a, float) and isinstance(b, float) and a == a and b == b and a <= b
            and abs(a) != float("inf") and abs(b) != float("inf")):
        return None
    return [read, miss, sel, lo, hi]


def _fast_read(r: Renderer, chain: list[Op], users, sources) -> list[str]:
    read, miss, sel, lo, hi = chain
    inside = {op.dest for op in chain}
    # a name the rest of the program reads is set on the fast branch too
    outside = [op for op in chain[:-1]
               if any(u.dest not in inside for u, _ in users.get(op.dest, []))]
    a, b = literal(lo.args[1].value), literal(hi.args[1].value)
    lines = [f"if (_r := {sources[read.attr]}).__class__ is float and {a} <= _r <= {b}:"]
    for op in outside:
        lines.append(f"    {op.dest} = {'False' if op is miss else '_r'}")
    lines.append(f"    {hi.dest} = _r")
    lines.append("else:")
    # the value is read already: the read operation is _number's on it
    boolean = r.program.plan.inputs[read.attr].boolean
    lines.append(f"    {read.dest} = _number(_r, {boolean})")
    lines += ["    " + line for line in r.lines(chain[1:])]
    return lines

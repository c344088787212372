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
from ..program import lower, output_names
from . import Artifact, reject_options
from .statements import Spelling, render as render_statements
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
        # a feature fitted on booleans also reads the words true/false
        "read_real": "_number({src}, {inp.boolean})",
        "read_code": "_code(_LEVELS_{inp.index}, {inp.integer_levels}, {src})",
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
        "sum": " + ",  # left to right, as the program's ordered sum
    },
)


OPTIONS = ()


def emit(model: FrozenModel, options: dict | None = None) -> list[Artifact]:
    reject_options("python", options or {}, OPTIONS)
    plan = build_plan(model)
    text = render("python/scorer.py.j2", **context(plan))
    return [Artifact(f"{plan.stem}.py", text.encode("utf-8"))]


def context(plan: Plan) -> dict:
    program = lower(plan)
    sources = {inp.index: f"row.get(FEATURES[{inp.index}])" for inp in plan.inputs}
    code = render_statements(program, PYTHON, sources)
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
    }

"""Plain-Python target: one standard-library-only .py file.

Python floats are IEEE doubles and `math.exp` is the C library's exp, so the
scorer performs the plan's operations exactly as the reference evaluator does.
Literals are `repr` (shortest round-trip); every user string enters the file as
a `repr` string literal, never inside a comment.
"""

from __future__ import annotations

from ..model import FrozenModel
from ..plan import Plan, build_plan, output_columns
from . import Artifact, reject_options
from .templating import render

# plan scaling op -> Python statement
STEP = {
    "subtract": "{v} = {v} - {c}",
    "divide": "{v} = {v} / {c}",
    "multiply": "{v} = {v} * {c}",
    "add": "{v} = {v} + {c}",
}


def literal(x: float) -> str:
    return repr(float(x))


def emit(model: FrozenModel, options: dict | None = None) -> list[Artifact]:
    reject_options("python", options or {}, ())
    plan = build_plan(model)
    text = render("python/scorer.py.j2", **context(plan))
    return [Artifact(f"{plan.stem}.py", text.encode("utf-8"))]


def context(plan: Plan) -> dict:
    tables, input_lines, input_vars = [], [], []
    for inp in plan.inputs:
        v = f"v{inp.index}"
        input_vars.append(v)
        get = f"row.get(FEATURES[{inp.index}])"
        if inp.kind == "numeric":
            input_lines.extend(_numeric_lines(inp, v, get))
        else:
            table = f"_LEVELS_{inp.index}"
            entries = ", ".join(f"{level!r}: {code}" for code, level in enumerate(inp.levels))
            tables.append(f"{table} = {{{entries}}}")
            input_lines.append(f"{v} = _code({table}, {inp.integer_levels}, {get})")
            missing = inp.fill_code if inp.fill_code is not None else -2
            input_lines.append(f"if {v} == -1:")
            input_lines.append(f"    {v} = {missing}")
            unseen = inp.unknown_code if inp.unknown_code is not None else -1
            input_lines.append(f"if {v} == -2:")
            input_lines.append(f"    {v} = {unseen}")
    margin_lines, margin_vars = [], []
    for k in range(plan.n_outputs):
        s = f"m{k}"
        margin_vars.append(s)
        first = True
        for term in plan.terms:
            v = f"v{term.input}"
            if term.kind == "numeric":
                t = f"{literal(term.weights[k])} * {v}"
            else:
                table = f"_TERM_{term.input}_{k}"
                values = ", ".join(literal(x) for x in term.tables[k])
                tables.append(f"{table} = ({values}, 0.0)  # code -1 (no level) -> 0.0")
                t = f"{table}[{v}]"
            margin_lines.append(f"{s} = {t}" if first else f"{s} = {s} + {t}")
            first = False
        b = literal(plan.intercepts[k])
        margin_lines.append(f"{s} = {b}" if first else f"{s} = {s} + {b}")
    return {
        "sha256": plan.sha256,
        "stem": plan.stem,
        "name_literal": repr(plan.name),
        "task": plan.task,
        "features": [repr(n) for n in plan.feature_names],
        "classes": None if plan.classes is None else [repr(c) for c in plan.classes],
        "output_columns": output_columns(plan),
        "tables": tables,
        "input_lines": input_lines,
        "input_vars": input_vars,
        "margin_lines": margin_lines,
        "margin_vars": margin_vars,
        "finish_lines": _finish_lines(plan),
    }


def _numeric_lines(inp, v: str, get: str) -> list[str]:
    lines = [f"{v} = _number({get}, True)" if inp.boolean else f"{v} = _number({get})"]
    body = [f"{v} = min(max({v}, {literal(-inp.bound)}), {literal(inp.bound)})"]
    body += [STEP[s.op].format(v=v, c=literal(s.value)) for s in inp.steps]
    if inp.clip is not None:
        body.append(f"{v} = min(max({v}, {literal(inp.clip[0])}), {literal(inp.clip[1])})")
    if inp.fill is None:
        lines.append(f"if {v} is None:")
        lines.append(f"    {v} = 0.0")
        lines.append("else:")
        lines += [f"    {b}" for b in body]
    else:
        lines.append(f"if {v} is None:")
        lines.append(f"    {v} = {literal(inp.fill)}")
        lines += body
    return lines


def _finish_lines(plan: Plan) -> list[str]:
    guard = literal(plan.precision.exp_guard)
    if plan.task == "binary":
        return [
            "m0 = m[0]",
            f"t = math.exp(-min(abs(m0), {guard}))",
            "p1 = 1.0 / (1.0 + t) if m0 >= 0.0 else t / (1.0 + t)",
            f"k = 1 if m0 > {literal(plan.cut)} else 0",
            'return {"margin": m0, "probability": p1, "predicted_class": CLASSES[k],',
            '        "class_index": k, "probabilities": [1.0 - p1, p1]}',
        ]
    if plan.task == "multiclass":
        n = plan.n_outputs
        lines = ["top = m[0]", "k = 0",
                 f"for j in range(1, {n}):",
                 "    if m[j] > top:",
                 "        top = m[j]",
                 "        k = j",
                 f"e = [math.exp(max(x - top, -{guard})) for x in m]",
                 "total = e[0]",
                 f"for j in range(1, {n}):",
                 "    total = total + e[j]",
                 "p = [x / total for x in e]",
                 'out = {"predicted_class": CLASSES[k], "class_index": k, "probabilities": p}',
                 f"for j in range({n}):",
                 '    out["margin_%d" % j] = m[j]',
                 '    out["probability_%d" % j] = p[j]',
                 "return out"]
        return lines
    if plan.link == "log":
        value = f"math.exp(min(max(m[0], -{guard}), {literal(plan.precision.log_link_max)}))"
    else:
        value = "m[0]"
    return [f'return {{"margin": m[0], "predicted_value": {value}}}']

"""The C batch scorer's margin code: numeric inputs in runs, loops over small tables.

A run is a stretch of numeric terms, consecutive in the plan and in the row, whose
inputs take the same steps. Each run is one loop over its inputs with the per-input
constants in `static const` tables, written so a compiler can vectorize it at -O2:
every choice is a select on a quiet test (`isfinite`, `islessequal`), so the loop
has no branch. (GCC's SSE2 vector code for those tests uses signalling compares: a
NaN in a batch row sets the FE_INVALID flag, which traps only if the caller enabled
FP traps. The row functions raise no flag.) The loop adds each term to the margin
as it goes, in the plan's order (the compiler keeps that order: no -ffast-math), so
the bits are the row scorer's.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..plan import CategoricalInput, NumericInput, Plan
from .c_precision import CPrecision
from .c_syntax import comment_text

# plan scaling op -> C operator
OPERATOR = {"subtract": "-", "divide": "/", "multiply": "*", "add": "+"}


def table_name(prefix: str, index: int) -> str:
    """The categorical contribution table of input `index`."""
    return f"{prefix}_term_{index}"


@dataclass
class Run:
    inputs: list[NumericInput]
    terms: list

    @property
    def column(self) -> int:
        return self.inputs[0].index


def _shape(inp: NumericInput) -> tuple:
    return (inp.fill is None, tuple(s.op for s in inp.steps), inp.clip is None)


def numeric_runs(plan: Plan) -> list[Run]:
    runs: list[Run] = []
    previous = None
    for term in plan.terms:
        if term.kind != "numeric":
            previous = None
            continue
        inp = plan.inputs[term.input]
        if previous is not None and inp.index == previous.inputs[-1].index + 1 \
                and _shape(inp) == _shape(previous.inputs[0]):
            previous.inputs.append(inp)
            previous.terms.append(term)
        else:
            previous = Run([inp], [term])
            runs.append(previous)
    return runs


def batch_code(plan: Plan, prec: CPrecision, prefix: str) -> dict:
    """Tables (declarations), locals and statements of `<prefix>_batch_margins`.

    Each margin is accumulated in s_k from -0.0: (-0.0) + t == t exactly for every t
    (round to nearest), so s = -0.0 + t_0 + t_1 + ... has the bits of the plan's
    t_0 + t_1 + ..., and a run's loop can add its terms as it computes them.
    """
    R = prec.real
    K = plan.n_outputs
    tables: list[str] = []
    lines: list[str] = []
    runs = {run.inputs[0].index: run for run in numeric_runs(plan)}
    coded = False
    n_runs = 0
    for term in plan.terms:
        if term.kind == "categorical":
            coded = True
            inp = plan.inputs[term.input]
            lines.append(f"/* input {inp.index}: {comment_text(inp.name)} */")
            lines += code_lines(inp, f"x[{inp.index}]")
            lines += [f"s{k} = s{k} + {table_name(prefix, term.input)}[{k}][c];"
                      for k in range(K)]
        elif term.input in runs:
            run = runs[term.input]
            lines += _run_lines(run, f"{prefix}_run{n_runs}", prec, K, tables)
            n_runs += 1
    lines += [f"s{k} = s{k} + {prec.literal(plan.intercepts[k])};" for k in range(K)]
    lines += [f"m[{k}] = s{k};" for k in range(K)]
    local = [f"{R} s{k} = -{prec.literal(0.0)};" for k in range(K)]
    local += ["int j;"] if runs else []
    local += ["double d;", "int c;"] if coded else []
    return {"batch_tables": tables, "batch_lines": lines, "batch_locals": local}


def _run_lines(run: Run, name: str, prec: CPrecision, K: int, tables: list[str]) -> list[str]:
    R = prec.real
    first = run.inputs[0]

    def table(suffix, ctype, values, literal):
        tables.append(f"static const {ctype} {name}_{suffix}[{len(values)}] = {{")
        for i in range(0, len(values), 3):
            tables.append("    " + ", ".join(literal(v) for v in values[i:i + 3]) + ",")
        tables.append("};")
        return f"{name}_{suffix}[j]"

    bound = table("bound", "double", [i.bound for i in run.inputs], float.hex)
    fills = [0.0 if i.fill is None else prec.clamped(i.fill, i.bound) for i in run.inputs]
    fill = table("fill", "double", fills, float.hex)
    lines = [f"/* inputs {first.index}..{run.inputs[-1].index}: "
             f"{comment_text(first.name)} ... */",
             f"for (j = 0; j < {len(run.inputs)}; j++) {{",
             f"    double xj = x[{run.column} + j];",
             f"    double beyond = copysign({bound}, xj);",
             f"    {R} v;",
             f"    beyond = isfinite(xj) ? beyond : {fill};",
             f"    xj = islessequal(fabs(xj), {bound}) ? xj : beyond;",
             f"    v = ({R})xj;"]
    for s, step in enumerate(first.steps):
        const = table(f"s{s}", R, [i.steps[s].value for i in run.inputs], prec.literal)
        lines.append(f"    v = v {OPERATOR[step.op]} {const};")
    if first.clip is not None:
        lo = table("lo", R, [i.clip[0] for i in run.inputs], prec.literal)
        hi = table("hi", R, [i.clip[1] for i in run.inputs], prec.literal)
        lines += [f"    v = ({lo} > v) ? {lo} : v;", f"    v = ({hi} < v) ? {hi} : v;"]
    if first.fill is None:
        lines.append(f"    v = isfinite(x[{run.column} + j]) ? v : {prec.literal(0.0)};")
    for k in range(K):
        w = table(f"w{k}", R, [t.weights[k] for t in run.terms], prec.literal)
        lines.append(f"    s{k} = s{k} + {w} * v;")
    lines.append("}")
    return lines


def code_lines(inp: CategoricalInput, src: str) -> list[str]:
    """A batch row's code (a double) as a resolved level code in c: NaN or -1 is
    missing; anything that is not an integral level code is unseen."""
    n = len(inp.levels)
    unseen = inp.unknown_code if inp.unknown_code is not None else n  # n: the 0.0 slot
    missing = inp.fill_code if inp.fill_code is not None else unseen
    # The NaN test comes first: ordered comparisons with NaN raise FE_INVALID.
    return [f"d = {src};",
            f"c = (d != d || d == -1.0) ? {missing}"
            f" : ((d >= 0.0 && d < {n}.0 && (double)(int)d == d) ? (int)d : {unseen});"]

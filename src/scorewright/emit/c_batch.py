"""The C batch scorer's margins: the scoring program's terms, stretches of alike inputs as
loops over small tables.

A batch row is doubles in feature order, level codes as doubles. A run is a stretch
of consecutive terms whose operations are alike but for their constants and read
consecutive columns: one loop renders them, the constants in `static const` tables,
written so a compiler can vectorize it at -O2 (every choice is a select, so the loop
has no branch; GCC's SSE2 code for `isfinite` uses signalling compares, so a NaN in
a batch row sets the FE_INVALID flag, which traps only if the caller enabled FP
traps; the row functions raise no flag). Each margin is accumulated in s_k from
-0.0: (-0.0) + t == t exactly for every t (round to nearest), so s = -0.0 + t_0 +
t_1 + ... has the bits of the program's t_0 + t_1 + ..., and a loop adds its terms
as it computes them, in the program's order (no -ffast-math), so the bits are the
row scorer's.
"""

from __future__ import annotations

import dataclasses

from ..plan import Plan
from ..program import Const, Op, Program
from .c_precision import CPrecision
from .statements import MarginSplit, Renderer, Spelling


def table_name(prefix: str, index: int, nth: int = 0) -> str:
    """The contribution table of input `index` (its `nth` lookup term after the first:
    a multiclass target encoding gives an input one per class)."""
    return f"{prefix}_term_{index}" + (f"_{nth}" if nth else "")



def batch_spelling(row: Spelling, prec: CPrecision) -> Spelling:
    """The row spellings, reading a batch row's doubles: a code is NaN or -1 when missing,
    and anything that is not an integral level code is unseen (the NaN test comes first:
    ordered comparisons with NaN raise FE_INVALID; the range test guards the cast)."""
    reads = {
        "read_real": prec.batch_read,
        "read_code": "(({src} != {src} || {src} == -1.0) ? -1 : (({src} >= 0.0 && "
                     "{src} < {n}.0 && (double)(int){src} == {src}) ? (int){src} : -2))",
    }
    return dataclasses.replace(row, ops={**row.ops, **reads})


def batch_code(program: Program, split: MarginSplit, spelling: Spelling, prec: CPrecision,
               prefix: str, tables: dict) -> dict:
    """Tables (declarations), locals and statements of `<prefix>_batch_margins`."""
    plan = program.plan
    K = plan.n_outputs
    decls: list[str] = []
    lines: list[str] = []
    groups = split.groups
    straight = Renderer(program, spelling, {i: f"x[{i}]" for i in range(len(plan.inputs))},
                        tables=tables)
    start = 0
    n_runs = 0
    while start < len(groups):
        end = _run_end(plan, groups, start)
        if end - start > 1:
            lines += _loop(program, groups[start:end], spelling, prec, f"{prefix}_run{n_runs}",
                           decls)
            n_runs += 1
        else:
            cone, terms = groups[start]
            lines += straight.lines(cone)
            lines += [f"s{k} = s{k} + {straight.operand(t)};" for k, t in terms]
        start = end
    lines += [f"s{k} = s{k} + {straight.operand(b)};" for k, b in enumerate(split.intercepts)]
    lines += [f"m[{k}] = s{k};" for k in range(K)]
    local = [f"{prec.real} s{k} = -{prec.literal(0.0)};" for k in range(K)]
    local += ["int j;"] if n_runs else []
    return {"batch_tables": decls, "batch_lines": lines, "batch_locals": local}


def _shape(cone: list[Op], terms) -> tuple | None:
    """What a term's operations are, but for their constants and the column they read;
    None for a term no loop can take (a level lookup)."""
    local = {op.dest: i for i, op in enumerate(cone)}
    shape = []
    for op in cone:
        if op.op in ("lookup", "read_code"):
            return None
        args = tuple(("const", a.type) if isinstance(a, Const) else ("name", local.get(a, a))
                     for a in op.args)
        shape.append((op.op, op.type, args))
    return tuple(shape), tuple((k, local[t]) for k, t in terms)


def _column(cone: list[Op]) -> int | None:
    reads = [op.attr for op in cone if op.op == "read_real"]
    return reads[0] if len(reads) == 1 else None


def _run_end(plan: Plan, groups, start: int) -> int:
    """One past the last group of the run that starts at `start`."""
    shape = _shape(*groups[start])
    column = _column(groups[start][0])
    end = start + 1
    if shape is None or column is None:
        return end
    while end < len(groups) and _shape(*groups[end]) == shape \
            and _column(groups[end][0]) == column + (end - start):
        end += 1
    return end


def _loop(program: Program, run, spelling: Spelling, prec: CPrecision, name: str,
          decls: list[str]) -> list[str]:
    """One loop over the run's inputs: the first term's operations with each constant that
    differs along the run read from a table of the run's constants at that place."""
    first, terms = run[0]
    rename = {}
    ops = []
    for i, op in enumerate(first):
        args = []
        for a, arg in enumerate(op.args):
            values = [cone[i].args[a].value for cone, _ in run] if isinstance(arg, Const) else []
            if values and len({repr(v) for v in values}) > 1:
                slot = f"{name}_{i}_{a}"
                decls += _table(slot, arg.type, values, prec)
                rename[slot] = f"{slot}[j]"
                args.append(slot)
            else:
                args.append(arg)
        ops.append(dataclasses.replace(op, args=tuple(args)))
    column = _column(first)
    r = Renderer(program, spelling, {column: f"x[{column} + j]"}, rename)
    body = r.lines(ops) + [f"s{k} = s{k} + {r.operand(t)};" for k, t in terms]
    return ([f"for (j = 0; j < {len(run)}; j++) {{"] + [f"    {line}" for line in body]
            + ["}"])


def _table(name: str, type_: str, values: list, prec: CPrecision) -> list[str]:
    ctype, spell = (prec.real, prec.literal) if type_ == "real" else ("int", str)
    out = [f"static const {ctype} {name}[{len(values)}] = {{"]
    for i in range(0, len(values), 3):
        out.append("    " + ", ".join(spell(v) for v in values[i:i + 3]) + ",")
    return out + ["};"]

"""C target: a dependency-free C99 scorer (`<prefix>.h`, `<prefix>.c`).

No heap, no mutable globals, `static const` tables, hex-float literals (exact),
only <math.h>, <stddef.h>, <stdint.h> and <string.h>. The plan's steps are
written out one C statement each, in the plan's order; `#pragma STDC
FP_CONTRACT OFF` (and GCC's -ffp-contract=off, which GCC needs because it
ignores the pragma) keep `s + w * v` from becoming a fused multiply-add, so on
x86-64 the double scorer's bits equal the reference evaluator's.

Precisions differ only by the record in PRECISIONS (type, literal suffix, math
function names); the plan built for that precision supplies the guards.

--portable-exp renders scorewright.portable_exp's routine into the scorer in place
of libm's exp (identical bits on every IEEE-754 platform, no libm needed);
--decision-only keeps only `<prefix>_predict` (no exp at all). --report is read
by the command line, which measures the artifact (verify/firmware_size.py).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

from ..errors import ScorewrightError
from ..model import FrozenModel
from ..plan import Plan, build_plan, lookup_terms
from ..program import Program, lower, output_names, prune
from .. import portable_exp
from . import Artifact, reject_options
from .c_batch import batch_code, batch_spelling, table_name
from .c_precision import PRECISIONS, CPrecision
from .c_syntax import check_prefix, comment_text, default_prefix, field_names, string_literal
from .statements import MarginSplit, Renderer, Spelling, split_margins
from .templating import render

OPTIONS = ("prefix", "precision", "decision_only", "portable_exp", "report")


# The outputs the link writes, in the program's order (the class index is decided apart).
LINKED = ("probability_", "value", "rate")

# Terms per function of a wide model's row scorer (see row_parts).
ROW_PART_TERMS = 64


@dataclass(frozen=True)
class Field:
    index: int
    name: str        # C member name
    comment: str     # escaped original name
    ctype: str
    kind: str
    levels: tuple = ()


def emit(model: FrozenModel, options: dict | None = None) -> list[Artifact]:
    options = dict(options or {})
    reject_options("c", options, OPTIONS)
    precision = options.get("precision", "double")
    if precision not in PRECISIONS:
        raise ScorewrightError(f"--precision {precision!r}: expected double or float")
    plan = build_plan(model, precision)
    decision_only = bool(options.get("decision_only"))
    if decision_only and plan.task == "regression":
        raise ScorewrightError("--decision-only: a regression model has no class to decide")
    prefix = check_prefix(options["prefix"]) if "prefix" in options else default_prefix(plan.stem)
    ctx = context(plan, prefix, PRECISIONS[precision],
                  portable=bool(options.get("portable_exp")), decision_only=decision_only)
    header = render("c/scorer.h.j2", **ctx)
    source = render("c/scorer.c.j2", **ctx)
    return [Artifact(f"{prefix}.h", header.encode("ascii")),
            Artifact(f"{prefix}.c", source.encode("ascii"))]


def driver_source(model: FrozenModel, prefix: str | None = None,
                  precision: str = "double", decision_only: bool = False) -> str:
    """The host driver (verify and tests): rows in, every output out as %a (a
    decision-only scorer has only its class index to give)."""
    plan = build_plan(model, precision)
    prefix = check_prefix(prefix) if prefix is not None else default_prefix(plan.stem)
    return render("c/driver.c.j2", **context(plan, prefix, PRECISIONS[precision],
                                             decision_only=decision_only))


def exp_routine(prefix: str) -> dict:
    """The portable exp's C function names, locals and statements (its selections as
    selections of bits, so a loop that calls it vectorizes)."""
    pow2 = f"{prefix}_pow2"
    return {"pow2": pow2, "name": f"{prefix}_exp", "float_name": f"{prefix}_expf",
            "locals": portable_exp.c_locals(),
            "lines": portable_exp.c_lines(pow2, pick=f"{prefix}_pick")}


def context(plan: Plan, prefix: str, prec: CPrecision, portable: bool = False,
            decision_only: bool = False) -> dict:
    names = field_names(plan.feature_names)
    fields = []
    for inp, name in zip(plan.inputs, names):
        if inp.kind == "numeric":
            fields.append(Field(inp.index, name, comment_text(inp.name), prec.real, "numeric"))
        else:
            levels = [str(level) for level in inp.levels]
            fields.append(Field(inp.index, name, comment_text(inp.name), "int", "categorical",
                                tuple((string_literal(lv), len(lv.encode("utf-8")))
                                      for lv in levels)))
    program = lower(plan)
    uses_exp = not decision_only and any(op.op == "exp" for op in program.ops)
    routine = exp_routine(prefix) if portable and uses_exp else None
    libm_exp = None
    if routine is not None:
        exp_fn = routine["float_name" if prec.real == "float" else "name"]
    elif uses_exp:
        # libm's exp behind a wrapper the compiler cannot fold (see the template)
        libm_exp = {"name": f"{prefix}_libm_{prec.exp}", "call": prec.exp}
        exp_fn = libm_exp["name"]
    else:
        exp_fn = prec.exp
    split = split_margins(program, ROW_PART_TERMS)
    spelling = c_spelling(prec, exp_fn, prefix)
    tables = _table_names(plan, prefix)
    values = _program_tables(program, prefix, tables)
    code = {**program_code(program, split, spelling, names, prefix, tables, decision_only),
            **({} if decision_only else _batch(program, spelling, prec, prefix, tables))}
    context = {
        "prefix": prefix,
        "pick": pick_name(prefix, PRECISIONS["double"]),
        "pickf": pick_name(prefix, PRECISIONS["float"]),
        "decision_only": decision_only,
        # a "decision" head's row functions give margins and the class, its batch the margins
        "probabilities": plan.has_probabilities,
        "portable_exp": routine,
        "exp_fn": exp_fn,
        "libm_exp": libm_exp,
        "sha256": plan.sha256,
        "model_name": comment_text(plan.name),
        "task": plan.task,
        "link": plan.link,
        "precision": prec,
        "fields": fields,
        "classes": None if plan.classes is None else [comment_text(c) for c in plan.classes],
        "n_features": len(plan.inputs),
        "n_outputs": plan.n_outputs,
        "n_classes": plan.n_probabilities,
        "n_margins": plan.n_margins,
        "has_rate": plan.offset is not None,
        # the batch writes a multiclass head's probabilities (a decision head's margins),
        # else the probability or value (and the rate)
        "batch_width": ((plan.n_probabilities if plan.has_probabilities else plan.n_outputs)
                        if plan.task == "multiclass" else 1 + (plan.offset is not None)),
        "tables": _tables(plan, prec, prefix, tables),
        **code,
    }
    # a table or the search that no rendered statement names would be unused (gcc -Werror)
    text = repr(code)
    context["value_tables"] = [(name, [prec.literal(x) for x in t]) for name, t in values
                               if f"{name}," in text or f"{name}[" in text]
    context["bucket"] = f"{prefix}_bucket" if f"{prefix}_bucket(" in text else None
    return context


def _batch(program: Program, spelling: Spelling, prec: CPrecision, prefix: str,
           tables: dict) -> dict:
    """The batch scorer's passes (c_batch): it writes the probabilities (the value of a
    regression, then its rate with an offset; a "decision" head's margins, its decision
    function); a binary model's batch row holds the probability of class 1 alone."""
    plan = program.plan
    outputs = [o for o in output_names(plan) if o.startswith(LINKED)]
    if not plan.has_probabilities and plan.task != "regression":
        outputs = [o for o in output_names(plan) if o.startswith("margin_")]
    if plan.task == "binary":
        outputs = outputs[-1:]
    margin_part = {op.dest for cone, _ in split_margins(program).groups for op in cone}
    margin_part |= {m for m in split_margins(program).margins if isinstance(m, str)}
    return batch_code(program, batch_spelling(spelling, prec), block_spelling(spelling, prec, prefix),
                      prec, prefix, tables, outputs, margin_part)


def pick_name(prefix: str, prec: CPrecision) -> str:
    """The selection of bits (template: `pick`) for reals of this precision."""
    return f"{prefix}_pick" + ("f" if prec.real == "float" else "")


def block_spelling(row: Spelling, prec: CPrecision, prefix: str) -> Spelling:
    """The link over a block of rows: each selection of reals (a select, a min or max) is a
    selection of bits, no branch, so the loop over the block vectorizes."""
    pick = pick_name(prefix, prec)
    return dataclasses.replace(row, ops={
        **row.ops,
        "select:real": pick + "({0}, {1}, {2})",
        "max": pick + "({1} > {0}, {1}, {0})",
        "min": pick + "({1} < {0}, {1}, {0})",
    })


def _tables(plan: Plan, prec: CPrecision, prefix: str, names: dict) -> list[dict]:
    """Categorical contribution tables: per output, one value per level code plus a
    final 0.0 for "no level". A term whose every row another term's table holds already
    (`_table_names`) has none: it would be unused, which C compilers warn of."""
    out = []
    used = {name.split("[")[0] for name in names.values()}
    for nth, term in lookup_terms(plan):
        if table_name(prefix, term.input, nth) not in used:
            continue
        rows = [[prec.literal(x) for x in table] + [prec.literal(0.0)] for table in term.lookups]
        out.append({"name": table_name(prefix, term.input, nth), "rows": rows,
                    "width": len(rows[0]),
                    "comment": comment_text(plan.inputs[term.input].name)})
    return out


def c_spelling(prec: CPrecision, exp_fn: str, prefix: str) -> Spelling:
    """C's spellings of the program's primitives in one precision."""
    types = {"real": prec.real, "code": "int", "flag": "int"}
    return Spelling(
        language="c",
        real=prec.literal,
        code=str,
        assign=lambda name, type_, value: f"{types[type_]} {name} = {value};",
        reassign=lambda name, value: f"{name} = {value};",
        # a trailing underscore: no local can meet a libm name (y0, y1, j0...)
        name=lambda name: name + "_",
        ops={
            "read_real": "{src}",
            # any int the caller passes: a level code, -1 missing, anything else unseen
            "read_code": "(({src} >= 0 && {src} < {n}) ? {src} : ({src} == -1 ? -1 : -2))",
            # isfinite is a quiet test: no FP flag on NaN; no ordered comparison ever
            # meets a NaN, because a select replaces a missing value before any use
            "is_missing": "!isfinite({0})",
            "add": "{0} + {1}", "sub": "{0} - {1}", "mul": "{0} * {1}", "div": "{0} / {1}",
            "max": "(({1} > {0}) ? {1} : {0})",
            "min": "(({1} < {0}) ? {1} : {0})",
            "neg": "-{0}", "abs": prec.fabs + "({0})",
            "sqrt": ("sqrtf" if prec.real == "float" else "sqrt") + "({0})",
            "or": "({0} || {1})",
            "gt": "({0} > {1})", "ge": "({0} >= {1})", "eq": "({0} == {1})",
            "select": "({0} ? {1} : {2})",
            "exp": exp_fn + "({0})",
            "lookup": "(({0} >= 0) ? {table}[{0}] : " + prec.literal(0.0) + ")",
            "bucket": prefix + "_bucket({table}, {n}, {0})",
            "sum": " + ",
        },
    )


def program_code(program: Program, split: MarginSplit, spelling: Spelling, names: list[str],
                 prefix: str, tables: dict, decision_only: bool) -> dict:
    """The row scorer's margins (one part, or parts of ROW_PART_TERMS terms for a wide
    model: the same statements in the same order, so the same bits, but no giant
    function: GCC takes minutes on one, and for Thumb-2 at -Os it emits conditional
    branches beyond their range), the link and the decision, all rendered from the
    scoring program."""
    plan = program.plan
    sources = {inp.index: f"in->{names[inp.index]}" for inp in plan.inputs}
    rename = {m: f"m[{k}]" for k, m in enumerate(split.margins) if isinstance(m, str)}
    r = Renderer(program, spelling, sources, rename, tables)
    parts = []
    started = [False] * plan.n_margins
    for start in range(0, max(len(split.groups), 1), ROW_PART_TERMS):
        lines = []
        for cone, terms in split.groups[start:start + ROW_PART_TERMS]:
            lines += r.lines(cone)
            lines += [_accumulate(k, r.operand(t), started) for k, t in terms]
        parts.append(lines)
    parts[-1] += [_accumulate(k, r.operand(b), started) for k, b in enumerate(split.intercepts)]
    code = {"row_parts": [{"name": f"{prefix}_row_part{i}", "lines": lines}
                          for i, lines in enumerate(parts)] if len(parts) > 1 else [],
            "row_lines": parts[0] if len(parts) == 1 else []}
    margin_part = {op.dest for cone, _ in split.groups for op in cone}
    margin_part |= set(rename)
    outputs = output_names(plan)
    linked = [o for o in outputs if o.startswith(LINKED)]
    code["link_lines"] = None
    if linked and not decision_only:
        ops = [op for op in prune(program, linked) if op.dest not in margin_part]
        lines = r.lines(ops)
        code["link_lines"] = lines + [f"out[{j}] = {r.outputs[o]};" for j, o in enumerate(linked)]
    code["decide_lines"] = None
    if plan.task != "regression":
        ops = [op for op in prune(program, ["class_index"]) if op.dest not in margin_part]
        code["decide_lines"] = r.lines(ops) + [f"return {r.outputs['class_index']};"]
    return code


def _accumulate(k: int, term: str, started: list[bool]) -> str:
    line = f"m[{k}] = m[{k}] + {term};" if started[k] else f"m[{k}] = {term};"
    started[k] = True
    return line


def _table_names(plan: Plan, prefix: str) -> dict[tuple, str]:
    """Each lookup table of the program as a row of the first categorical term's table
    that holds it (two terms of one input may have equal tables: a level's indicator and
    its encoding with equal weights)."""
    names: dict[tuple, str] = {}
    for nth, term in lookup_terms(plan):
        for k, table in enumerate(term.lookups):
            names.setdefault(table, f"{table_name(prefix, term.input, nth)}[{k}]")
    return names


def _program_tables(program: Program, prefix: str, names: dict) -> list[tuple[str, tuple]]:
    """The tables the program's other lookups and buckets read (a quantile step's
    pieces), named in `names` beside the categorical ones: (name, values) of each."""
    out = []
    for op in program.ops:
        if op.op in ("lookup", "bucket") and op.attr not in names:
            names[op.attr] = f"{prefix}_values{len(out)}"
            out.append((names[op.attr], op.attr))
    return out

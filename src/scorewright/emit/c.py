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

from dataclasses import dataclass

from ..errors import ScorewrightError
from ..model import FrozenModel
from ..plan import CategoricalInput, NumericInput, Plan, build_plan
from .. import portable_exp
from . import Artifact, reject_options
from .c_batch import batch_code, table_name
from .c_precision import PRECISIONS, CPrecision
from .c_syntax import check_prefix, comment_text, default_prefix, field_names, string_literal
from .templating import render

OPTIONS = ("prefix", "precision", "decision_only", "portable_exp", "report")


# plan scaling op -> C statement on the design value v
STEP = {
    "subtract": "v = v - {c};",
    "divide": "v = v / {c};",
    "multiply": "v = v * {c};",
    "add": "v = v + {c};",
}

# Rows scored per pass of the batch loop: independent rows give the CPU
# independent addition chains while each row keeps the plan's order.
BATCH_BLOCK = 8

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
    """The portable exp's C function names, locals and statements."""
    pow2 = f"{prefix}_pow2"
    return {"pow2": pow2, "name": f"{prefix}_exp", "float_name": f"{prefix}_expf",
            "locals": portable_exp.c_locals(), "lines": portable_exp.c_lines(pow2)}


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
    lit = prec.literal
    uses_exp = not decision_only and (plan.task != "regression" or plan.link == "log")
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
    return {
        "prefix": prefix,
        "decision_only": decision_only,
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
        "batch_width": plan.n_outputs if plan.task == "multiclass" else 1,
        "tables": _tables(plan, prec, prefix),
        "row_lines": margin_lines(plan, prec, names, prefix),
        "row_parts": row_parts(plan, prec, names, prefix),
        "row_locals": _locals(plan, prec),
        **batch_code(plan, prec, prefix),
        "guard": lit(plan.precision.exp_guard),
        "log_max": lit(plan.precision.log_link_max),
        "cut": None if plan.cut is None else lit(plan.cut),
        "one": lit(1.0),
        "zero": lit(0.0),
    }


def _tables(plan: Plan, prec: CPrecision, prefix: str) -> list[dict]:
    """Categorical contribution tables: per output, one value per level code plus a
    final 0.0 for "no level"."""
    out = []
    for term in plan.terms:
        if term.kind != "categorical":
            continue
        rows = [[prec.literal(x) for x in table] + [prec.literal(0.0)] for table in term.tables]
        out.append({"name": table_name(prefix, term.input), "rows": rows, "width": len(rows[0]),
                    "comment": comment_text(plan.inputs[term.input].name)})
    return out


def margin_lines(plan: Plan, prec: CPrecision, names: list[str], prefix: str,
                 terms: tuple | None = None, started: list | None = None,
                 intercepts: bool = True) -> list[str]:
    """The row scorer's statements: inputs from the struct `in`, margins into m[k], one
    statement per plan step, in the plan's order (`terms`: a stretch of the plan's
    terms; `started`: which margins earlier stretches have begun)."""
    lit = prec.literal
    lines: list[str] = []
    started = [False] * plan.n_outputs if started is None else started
    for term in plan.terms if terms is None else terms:
        inp = plan.inputs[term.input]
        lines.append(f"/* input {inp.index}: {comment_text(inp.name)} */")
        if term.kind == "numeric":
            lines += _numeric_lines(inp, prec, f"in->{names[inp.index]}")
        else:
            lines += _code_lines(inp, f"in->{names[inp.index]}")
        for k in range(plan.n_outputs):
            if term.kind == "numeric":
                t = f"{lit(term.weights[k])} * v"
            else:
                t = f"{table_name(prefix, term.input)}[{k}][c]"
            lines.append(f"m[{k}] = m[{k}] + {t};" if started[k] else f"m[{k}] = {t};")
            started[k] = True
    if intercepts:
        for k in range(plan.n_outputs):
            b = lit(plan.intercepts[k])
            lines.append(f"m[{k}] = m[{k}] + {b};" if started[k] else f"m[{k}] = {b};")
    return lines


def row_parts(plan: Plan, prec: CPrecision, names: list[str], prefix: str) -> list[dict]:
    """A wide model's row scorer cut into functions of ROW_PART_TERMS terms, called in
    order on the same m[]: the same statements in the same order (so the same bits),
    but no single giant function (GCC takes minutes on one, and for Thumb-2 at -Os it
    emits conditional branches beyond their range). One part: the plain row scorer."""
    terms = plan.terms
    if len(terms) <= ROW_PART_TERMS:
        return []
    started = [False] * plan.n_outputs
    parts = []
    for start in range(0, len(terms), ROW_PART_TERMS):
        chunk = terms[start:start + ROW_PART_TERMS]
        last = start + ROW_PART_TERMS >= len(terms)
        parts.append({"name": f"{prefix}_row_part{len(parts)}",
                      "locals": _locals(plan, prec, chunk),
                      "lines": margin_lines(plan, prec, names, prefix, chunk, started, last)})
    return parts


def _locals(plan: Plan, prec: CPrecision, terms: tuple | None = None) -> list[str]:
    """The local variables of the row scorer's statements."""
    terms = plan.terms if terms is None else terms
    numeric = [plan.inputs[t.input] for t in terms if t.kind == "numeric"]
    out = [f"{prec.real} v;"] if numeric else []
    if any(t.kind == "categorical" for t in terms):
        out.append("int c;")
    if any(inp.fill is None for inp in numeric):
        out.append("int ok;")
    return out


def _numeric_lines(inp: NumericInput, prec: CPrecision, src: str) -> list[str]:
    """A numeric input's design value into v.

    One quiet test (`islessequal` raises no FP flag on NaN) sends the rare values,
    missing (NaN, +-inf) or beyond the guard, off the common path. Clamping is a pure
    selection: a value beyond the guard becomes +-bound, and the fill is clamped here
    at emit time exactly as the plan would at run time. No NaN or infinity is ever
    computed with.
    """
    lit = prec.literal
    bound, zero = lit(inp.bound), lit(0.0)
    test = f"if (!islessequal({prec.fabs}(v), {bound})) {{"
    beyond = f"(v > {zero}) ? {bound} : -{bound}"
    lines = [f"v = {src};"]
    if inp.fill is not None:
        fill = lit(prec.clamped(inp.fill, inp.bound))
        lines += [test, f"    v = isfinite(v) ? ({beyond}) : {fill};", "}"]
    else:
        lines += ["ok = 1;", test, "    ok = isfinite(v);", f"    v = ok ? ({beyond}) : {zero};",
                  "}"]
    lines += [STEP[s.op].format(c=lit(s.value)) for s in inp.steps]
    if inp.clip is not None:
        lo, hi = lit(inp.clip[0]), lit(inp.clip[1])
        lines += [f"v = ({lo} > v) ? {lo} : v;", f"v = ({hi} < v) ? {hi} : v;"]
    if inp.fill is None:
        # without a fill, a missing input's design value is exactly 0.0
        lines.append(f"v = ok ? v : {zero};")
    return lines


def _code_lines(inp: CategoricalInput, src: str) -> list[str]:
    """A struct's code as a resolved level code in c (n, one past the last level, is the
    table's 0.0 slot for "no level")."""
    n = len(inp.levels)
    unseen = inp.unknown_code if inp.unknown_code is not None else n
    missing = inp.fill_code if inp.fill_code is not None else unseen
    if missing == unseen:
        return [f"c = {src};", f"c = (c >= 0 && c < {n}) ? c : {unseen};"]
    return [f"c = {src};", f"c = (c >= 0 && c < {n}) ? c : (c == -1 ? {missing} : {unseen});"]

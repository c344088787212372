"""C target: a dependency-free C99 scorer (`<prefix>.h`, `<prefix>.c`).

No heap, no mutable globals, `static const` tables, hex-float literals (exact),
only <math.h>, <stddef.h>, <stdint.h> and <string.h>. The plan's steps are
written out one C statement each, in the plan's order; `#pragma STDC
FP_CONTRACT OFF` (and GCC's -ffp-contract=off, which GCC needs because it
ignores the pragma) keep `s + w * v` from becoming a fused multiply-add, so on
x86-64 the double scorer's bits equal the reference evaluator's.

Precisions differ only by the record in PRECISIONS (type, literal suffix, math
function names); the plan built for that precision supplies the guards.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass

from ..errors import ScorewrightError
from ..model import FrozenModel
from ..plan import CategoricalInput, NumericInput, Plan, build_plan
from . import Artifact, reject_options
from .c_syntax import check_prefix, comment_text, default_prefix, field_names, string_literal
from .templating import render

OPTIONS = ("prefix", "precision", "decision_only", "portable_exp", "report")


@dataclass(frozen=True)
class CPrecision:
    name: str     # the plan precision it lowers
    real: str     # C type of every intermediate
    suffix: str   # literal suffix
    exp: str
    fabs: str

    def rounded(self, x: float) -> float:
        """`x` rounded to nearest in this precision."""
        x = float(x)
        if self.real == "float":
            try:
                x = struct.unpack("<f", struct.pack("<f", x))[0]
            except OverflowError:
                raise ScorewrightError(
                    f"constant {x!r} of the model does not fit in a C float") from None
        return x

    def literal(self, x: float) -> str:
        """The exact C literal of `x` rounded to this precision."""
        return float.hex(self.rounded(x)) + self.suffix


PRECISIONS = {
    "double": CPrecision("double", "double", "", "exp", "fabs"),
    "float": CPrecision("float", "float", "f", "expf", "fabsf"),
}

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
    if options.get("decision_only") or options.get("portable_exp") or options.get("report"):
        raise ScorewrightError("--decision-only, --portable-exp and --report are not built yet")
    precision = options.get("precision", "double")
    if precision not in PRECISIONS:
        raise ScorewrightError(f"--precision {precision!r}: expected double or float")
    plan = build_plan(model, precision)
    prefix = check_prefix(options["prefix"]) if "prefix" in options else default_prefix(plan.stem)
    ctx = context(plan, prefix, PRECISIONS[precision])
    header = render("c/scorer.h.j2", **ctx)
    source = render("c/scorer.c.j2", **ctx)
    return [Artifact(f"{prefix}.h", header.encode("ascii")),
            Artifact(f"{prefix}.c", source.encode("ascii"))]


def driver_source(model: FrozenModel, prefix: str | None = None,
                  precision: str = "double") -> str:
    """The host driver (verify and tests): rows in, every output out as %a."""
    plan = build_plan(model, precision)
    prefix = check_prefix(prefix) if prefix is not None else default_prefix(plan.stem)
    return render("c/driver.c.j2", **context(plan, prefix, PRECISIONS[precision]))


def context(plan: Plan, prefix: str, prec: CPrecision) -> dict:
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
    return {
        "prefix": prefix,
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
        "row_lines": [line for group in margin_groups(plan, prec, names, prefix, "row")
                      for line in group],
        "row_locals": _locals(plan, prec, "row"),
        "batch_lines": [line for group in margin_groups(plan, prec, names, prefix, "batch")
                        for line in group],
        "batch_locals": _locals(plan, prec, "batch"),
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
        out.append({"name": _table_name(prefix, term.input), "rows": rows, "width": len(rows[0]),
                    "comment": comment_text(plan.inputs[term.input].name)})
    return out


def margin_groups(plan: Plan, prec: CPrecision, names: list[str], prefix: str,
                  form: str) -> list[list[str]]:
    """The statements computing every margin in the plan's order, one group per term
    and a last group for the intercepts.

    form "row": inputs from the struct `in`, margins into m[k].
    form "batch": inputs from the batch row of doubles `x`, margins into m[k].
    """
    lit = prec.literal
    if form == "row":
        def source(inp):
            return f"in->{names[inp.index]}"

        def acc(k):
            return f"m[{k}]"
    else:
        def source(inp):
            return f"x[{inp.index}]"

        def acc(k):
            return f"m[{k}]"
    groups: list[list[str]] = []
    started = [False] * plan.n_outputs
    for term in plan.terms:
        inp = plan.inputs[term.input]
        lines = [f"/* input {inp.index}: {comment_text(inp.name)} */"]
        if term.kind == "numeric":
            lines += _numeric_lines(inp, prec, source(inp), form)
        else:
            lines += _code_lines(inp, source(inp), form)
        for k in range(plan.n_outputs):
            if term.kind == "numeric":
                t = f"{lit(term.weights[k])} * v"
            else:
                t = f"{_table_name(prefix, term.input)}[{k}][c]"
            lines.append(f"{acc(k)} = {acc(k)} + {t};" if started[k] else f"{acc(k)} = {t};")
            started[k] = True
        groups.append(lines)
    lines = []
    for k in range(plan.n_outputs):
        b = lit(plan.intercepts[k])
        lines.append(f"{acc(k)} = {acc(k)} + {b};" if started[k] else f"{acc(k)} = {b};")
    groups.append(lines)
    return groups


def _locals(plan: Plan, prec: CPrecision, form: str) -> list[str]:
    """The local variables the margin statements of `form` use."""
    numeric = [plan.inputs[t.input] for t in plan.terms if t.kind == "numeric"]
    coded = any(t.kind == "categorical" for t in plan.terms)
    out = []
    if numeric:
        out.append(f"{prec.real} v;")
    if form == "batch" and (coded or (numeric and prec.real != "double")):
        out.append("double d;")
    if coded:
        out.append("int c;")
    if any(inp.fill is None for inp in numeric):
        out.append("int ok;")
    return out


def _table_name(prefix: str, index: int) -> str:
    return f"{prefix}_term_{index}"


def _numeric_lines(inp: NumericInput, prec: CPrecision, src: str, form: str) -> list[str]:
    """A numeric input's design value into v.

    One quiet test (`islessequal` raises no FP flag on NaN) sends the rare values,
    missing (NaN, +-inf) or beyond the guard, off the common path; clamping is a pure
    selection, so a beyond-the-guard value becomes +-bound and the fill is clamped
    here at emit time, exactly as the plan would at run time. No NaN or infinity is
    ever computed with.
    """
    lit = prec.literal
    narrow = form == "batch" and prec.real != "double"
    # A finite double beyond float range must be clamped before it is narrowed to
    # float, or it would become an infinity and read as missing.
    x, real_bound, fabs = ("d", float.hex(inp.bound), "fabs") if narrow else \
        ("v", lit(inp.bound), prec.fabs)
    lines = [f"{x} = {src};"]
    beyond = f"({x} > 0.0) ? {real_bound} : -{real_bound}" if narrow else \
        f"({x} > {lit(0.0)}) ? {real_bound} : -{real_bound}"
    if inp.fill is not None:
        fill = _clamped(prec, inp.fill, inp.bound)
        fill = float.hex(fill) if narrow else lit(fill)
        lines += [f"if (!islessequal({fabs}({x}), {real_bound})) {{",
                  f"    {x} = isfinite({x}) ? ({beyond}) : {fill};", "}"]
    else:
        zero = "0.0" if narrow else lit(0.0)
        lines += ["ok = 1;", f"if (!islessequal({fabs}({x}), {real_bound})) {{",
                  f"    ok = isfinite({x});", f"    {x} = ok ? ({beyond}) : {zero};", "}"]
    if narrow:
        lines.append(f"v = ({prec.real})d;")
    lines += [STEP[s.op].format(c=lit(s.value)) for s in inp.steps]
    if inp.clip is not None:
        lo, hi = lit(inp.clip[0]), lit(inp.clip[1])
        lines += [f"v = ({lo} > v) ? {lo} : v;", f"v = ({hi} < v) ? {hi} : v;"]
    if inp.fill is None:
        # without a fill, a missing input's design value is exactly 0.0
        lines.append(f"v = ok ? v : {lit(0.0)};")
    return lines


def _clamped(prec: CPrecision, fill: float, bound: float) -> float:
    """min(max(fill, -bound), bound) in the target precision: a selection, no rounding."""
    b = prec.rounded(bound)
    return min(max(prec.rounded(fill), -b), b)


def _code_lines(inp: CategoricalInput, src: str, form: str) -> list[str]:
    n = len(inp.levels)
    unseen = inp.unknown_code if inp.unknown_code is not None else n  # n: the 0.0 slot
    missing = inp.fill_code if inp.fill_code is not None else unseen
    if form == "row":
        if missing == unseen:
            return [f"c = {src};", f"c = (c >= 0 && c < {n}) ? c : {unseen};"]
        return [f"c = {src};", f"c = (c >= 0 && c < {n}) ? c : (c == -1 ? {missing} : {unseen});"]
    # Batch rows carry codes as doubles: NaN or -1 is missing; anything that is not
    # an integral level code is unseen.
    # The NaN test comes first: ordered comparisons with NaN raise FE_INVALID.
    return [f"d = {src};",
            f"c = (d != d || d == -1.0) ? {missing}"
            f" : ((d >= 0.0 && d < {n}.0 && (double)(int)d == d) ? (int)d : {unseen});"]

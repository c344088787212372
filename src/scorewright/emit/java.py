"""Java target: one dependency-free .java file (Java 8 or later) holding one class.

Java doubles are IEEE binary64 and every operation rounds to nearest, so the scorer
performs the program's operations exactly as the reference evaluator does; only exp
differs: `StrictMath.exp` (the same bits on every JVM, unlike `Math.exp`, which
HotSpot replaces by a CPU-specific routine) is not glibc's, so the profile states a
tolerance for the link's outputs. The scoring program is rendered one statement per
operation from `JAVA`, the language's spellings, and its margins are cut into parts
(`split_margins`) so no method or class reaches the JVM's limits (64 KB of bytecode a
method, 65,535 constants a class): each part, level list and lookup table is a nested
class of its own.

Every user string enters the file as a string literal whose non-ASCII characters are
\\u escapes; a backslash is always doubled, so javac's \\u pre-pass can never turn user
text into code, and no user string is ever written inside a comment.
"""

from __future__ import annotations

import keyword
import math
import re
from dataclasses import replace

from .. import portable_exp
from ..errors import ScorewrightError
from ..model import FrozenModel
from ..plan import Plan, build_plan, lookup_terms, output_columns
from ..program import lower, output_names
from . import Artifact, reject_options
from .statements import Renderer, Spelling, split_margins
from .templating import render

# Terms per part of the margins: far below 64 KB of bytecode and 65,535 constants.
PART_TERMS = 64
# Operations per method of a long link (about 20 bytes of bytecode each, measured on a
# calibrated head's selections)
LINK_PART_OPS = 1000
# The most elements one array literal may hold: a class initializer spends about 8
# bytes of bytecode per element and may hold 64 KB.
MAX_ARRAY = 6000
JAVA_KEYWORDS = frozenset("""abstract assert boolean break byte case catch char class const
    continue default do double else enum extends false final finally float for goto if
    implements import instanceof int interface long native new null package private
    protected public return short static strictfp super switch synchronized this throw
    throws transient true try void volatile while var record yield sealed permits""".split())


def literal(x: float) -> str:
    """An exact double literal: Python's shortest round-trip text, which javac reads
    correctly rounded (a trailing d keeps an integral value a double)."""
    x = float(x)
    if not math.isfinite(x):
        raise ScorewrightError(f"target java: a constant {x!r} is not finite")
    return repr(x) + "d"


def string(text: str) -> str:
    """A Java string literal of any Python string (ASCII only in the file)."""
    out = []
    for ch in text:
        if ch == "\\":
            out.append("\\\\")
        elif ch == '"':
            out.append('\\"')
        elif ch == "\n":
            out.append("\\n")
        elif ch == "\r":
            out.append("\\r")
        elif " " <= ch <= "~":
            out.append(ch)
        else:  # UTF-16 code units, as Java strings hold them
            units = ch.encode("utf-16-be", "surrogatepass")
            out += [f"\\u{units[i]:02x}{units[i + 1]:02x}" for i in range(0, len(units), 2)]
    if len(text.encode("utf-8", "surrogatepass")) > 65535:
        raise ScorewrightError("target java: a name or level is longer than the 65,535 "
                               "bytes a Java string constant may hold")
    return '"' + "".join(out) + '"'


JAVA = Spelling(
    language="java",
    real=literal,
    code=str,
    assign=lambda name, type_, value: f"final {TYPES[type_]} {name} = {value};",
    reassign=lambda name, value: f"{name} = {value};",
    # a trailing underscore: no local meets a keyword, a parameter or a class name
    name=lambda name: name + "_",
    ops={
        # NaN when missing (Values.number's rules, those of values.py); a flag is 1 or 0
        "read_real": "Values.number({src}, {inp.boolean:d})",
        "read_code": "Values.code(Levels{inp.index}.LEVELS, {inp.integer_levels:d}, {src})",
        "is_missing": "!Values.finite({0})",
        "add": "{0} + {1}", "sub": "{0} - {1}", "mul": "{0} * {1}", "div": "{0} / {1}",
        # the program's max(a, b): a unless b > a (Math.max orders -0.0 and NaN itself)
        "max": "(({1} > {0}) ? {1} : {0})",
        "min": "(({1} < {0}) ? {1} : {0})",
        "neg": "-{0}", "abs": "Math.abs({0})",
        "sqrt": "Math.sqrt({0})",  # correctly rounded (the Java language's own rule)
        "or": "({0} || {1})",
        "gt": "({0} > {1})", "ge": "({0} >= {1})", "eq": "({0} == {1})",
        "select": "({0} ? {1} : {2})",
        "exp": "StrictMath.exp({0})",
        "lookup": "(({0} >= 0) ? {table}[{0}] : 0.0d)",  # a negative code: no level
        "bucket": "Values.bucket({table}, {0})",
        "sum": " + ",  # left to right, as the program's ordered sum
    },
    table_name="Lookup{n}.T",  # a table no categorical term holds (a quantile step's)
)
# the nested classes' names, which the public class must not take
NESTED = re.compile(r"Values|PortableExp|Part\d+|Levels\d+|Table\d+(?:x\d+)?_\d+|Lookup\d+")
TYPES = {"real": "double", "code": "int", "flag": "boolean"}


def class_name(plan: Plan) -> str:
    """The public class (and file) name: the model's file stem as a Java identifier."""
    name = re.sub(r"[^A-Za-z0-9_]", "_", plan.stem)
    if (not name[0].isalpha() or name in JAVA_KEYWORDS or keyword.iskeyword(name)
            or NESTED.fullmatch(name)):
        name = "Model_" + name
    return name


OPTIONS = ("portable_exp",)


def emit(model: FrozenModel, options: dict | None = None) -> list[Artifact]:
    """--portable-exp: the class carries scorewright's portable exp (`portable_exp.STEPS`,
    rendered as C renders it: the same statements are Java), so it gives the reference
    evaluator's bits on every JVM."""
    options = options or {}
    reject_options("java", options, OPTIONS)
    plan = build_plan(model, exp="portable" if options.get("portable_exp") else "libm")
    name = class_name(plan)
    text = render("java/Scorer.java.j2", **context(plan, name))
    return [Artifact(f"{name}.java", text.encode("ascii"))]


def _array(values: list[str], what: str) -> str:
    if len(values) > MAX_ARRAY:
        raise ScorewrightError(f"target java: {what} has {len(values):,} entries; a Java "
                               f"class initializer holds at most {MAX_ARRAY:,}")
    return ", ".join(values)


def spelling(plan: Plan) -> Spelling:
    """JAVA, with the portable exp in place of StrictMath.exp when the plan carries it."""
    if plan.exp_kind != "portable":
        return JAVA
    return replace(JAVA, ops={**JAVA.ops, "exp": "PortableExp.exp({0})"})


def context(plan: Plan, name: str) -> dict:
    program = lower(plan)
    split = split_margins(program, PART_TERMS)
    sources = {inp.index: f"row.get(FEATURES[{inp.index}])" for inp in plan.inputs}
    rename = {m: f"m[{k}]" for k, m in enumerate(split.margins) if isinstance(m, str)}
    tables = {}
    for nth, term in lookup_terms(plan):
        for k, table in enumerate(term.lookups):
            tables.setdefault(table, f"Table{term.input}{'x%d' % nth if nth else ''}_{k}.T")
    r = Renderer(program, spelling(plan), sources, rename, tables)
    started = [False] * plan.n_margins
    parts = []
    for start in range(0, len(split.groups), PART_TERMS):
        lines = []
        for cone, terms in split.groups[start:start + PART_TERMS]:
            lines += r.lines(cone)
            lines += [_accumulate(k, r.operand(t), started) for k, t in terms]
        parts.append(lines)
    finish = [_accumulate(k, r.operand(b), started) for k, b in enumerate(split.intercepts)]
    margin_part = {op.dest for cone, _ in split.groups for op in cone} | set(rename)
    rest_ops = [op for op in split.rest if op.dest not in margin_part]
    link_parts, slots = [], {}
    if len(rest_ops) > LINK_PART_OPS:
        link_parts, slots = _link_parts(r, rest_ops)
        rest = []
    else:
        rest = r.lines(rest_ops)
    outputs = output_names(plan)
    levels = []
    for inp in plan.inputs:
        if inp.kind == "categorical":
            spelled = [string(str(lv)) for lv in inp.levels]
            levels.append((inp.index, _array(spelled, f"feature {inp.name!r}")))
    return {
        "class_name": name,
        "sha256": plan.sha256,
        "name_literal": string(plan.name),
        "task": plan.task,
        "features": ", ".join(string(n) for n in plan.feature_names),
        "classes": None if plan.classes is None else ", ".join(
            string(str(c)) for c in plan.classes),
        "output_columns": ", ".join(string(c) for c in output_columns(plan)),
        "outputs": ", ".join(string(o) for o in outputs),
        "n_outputs": plan.n_outputs,
        "n_classes": plan.n_probabilities,
        "n_margins": plan.n_margins,
        "has_rate": plan.offset is not None,
        "n_program_outputs": len(outputs),
        "probabilities": plan.has_probabilities,
        "levels": levels,
        "tables": [(t.split(".")[0], _array([literal(x) for x in values], "a table"))
                   for t, values in r.table_list],
        "parts": parts,
        "part_terms": PART_TERMS,
        "finish": finish,
        "rest": rest,
        "link_parts": link_parts,
        "slots": slots,
        "results": [(j, r.outputs[o]) for j, o in enumerate(outputs)],
        "portable_exp": None if plan.exp_kind != "portable" else {
            "locals": portable_exp.c_locals(),
            "lines": portable_exp.c_lines("PortableExp.pow2")},
    }


def _link_parts(r: Renderer, ops) -> tuple[list[list[str]], dict[str, int]]:
    """A link too long for one method (a calibrated head of many isotonic thresholds):
    each value is a slot of an array per type (lr: reals, lc: codes, lf: flags), so the
    statements, in the program's order, can be cut into methods of LINK_PART_OPS."""
    arrays = {"real": "lr", "code": "lc", "flag": "lf"}
    count = dict.fromkeys(arrays, 0)
    slot = {}
    for op in ops:
        slot[op.dest] = f"{arrays[op.type]}[{count[op.type]}]"
        count[op.type] += 1
    base = r.spelling
    r.spelling = replace(base, assign=lambda name, type_, value: f"{name} = {value};",
                         name=lambda name: slot.get(name) or base.name(name))
    try:
        parts = [r.lines(ops[i:i + LINK_PART_OPS]) for i in range(0, len(ops),
                                                                   LINK_PART_OPS)]
    finally:
        r.spelling = base
    return parts, {arrays[t]: max(1, n) for t, n in count.items()}


def _accumulate(k: int, term: str, started: list[bool]) -> str:
    line = f"m[{k}] = m[{k}] + {term};" if started[k] else f"m[{k}] = {term};"
    started[k] = True
    return line

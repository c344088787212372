"""One renderer for statement languages: the scoring program as one assignment per
operation, spelled from a language's record.

A language is data: a `Spelling` of literals, names, the assignment forms and one text
per primitive (`{0}`, `{1}`... are the operands, already spelled; `{src}` the text a
read takes its raw value from; `{n}` a read's number of levels, or a table's length;
`{table}` the name the renderer gave a lookup table or a bucket's edges; for the ordered
sum, the text that joins its operands left to right; a key "op:type" spells the op for that result type alone, before
"op"). The walk over the program is written once here; a primitive a language has
no spelling for is one error that names both.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from ..errors import ScorewrightError
from ..program import Const, Op, Program


@dataclass(frozen=True)
class Spelling:
    language: str
    real: Callable[[float], str]       # an exact literal of a real
    code: Callable[[int], str]         # a literal of a code
    assign: Callable[[str, str, str], str]  # (name, type, value) -> declaring statement
    reassign: Callable[[str, str], str]     # (name, value) -> a statement updating it
    # primitive -> text with {0}, {1}, ... operands, or a function of (operands, fields)
    # giving that text (a language whose spelling depends on the input, e.g. its levels)
    ops: dict[str, str | Callable[..., str]]
    name: Callable[[str], str] = str   # a program name as the language's local name
    table_name: str = "_T{n}"          # lookup tables, numbered in order of first use
    # the most operands one statement of an ordered sum may hold (a compiler's parser
    # recurses per operator); a longer sum continues on its own name, left to right
    sum_chunk: int = 100


class Renderer:
    """Renders operations of one program; lookup tables are shared by every call."""

    def __init__(self, program: Program, spelling: Spelling, sources: dict[int, str],
                 rename: dict[str, str] | None = None, tables: dict | None = None):
        self.program = program
        self.spelling = spelling
        self.sources = sources          # input index -> the text holding its raw value
        self.rename = dict(rename or {})  # program name -> text (e.g. an array element)
        self.tables: dict[tuple, str] = dict(tables or {})  # values -> name (preset ones)
        self.outputs: dict[str, str] = {}

    @property
    def table_list(self) -> list[tuple[str, tuple]]:
        return [(name, values) for values, name in self.tables.items()]

    def operand(self, arg) -> str:
        if isinstance(arg, Const):
            sp = self.spelling
            return sp.code(arg.value) if isinstance(arg.value, int) else sp.real(arg.value)
        return self.rename.get(arg) or self.spelling.name(arg)

    def lines(self, ops) -> list[str]:
        out: list[str] = []
        for op in ops:
            args = [self.operand(a) for a in op.args]
            if op.op == "output":
                self.outputs[op.attr] = args[0]
                continue
            # a spelling of the op for its result type ("select:real") comes first
            text = self.spelling.ops.get(f"{op.op}:{op.type}") or self.spelling.ops.get(op.op)
            if text is None:
                raise ScorewrightError(
                    f"target {self.spelling.language} cannot express op {op.op}")
            if op.op == "sum":
                out += self._sum_lines(op, args, text)
                continue
            dest = self.spelling.name(op.dest)
            fields = self._fields(op)
            value = text(*args, **fields) if callable(text) else text.format(*args, **fields)
            out.append(self.spelling.assign(dest, op.type, value))
        return out

    def _fields(self, op: Op) -> dict:
        if op.op.startswith("read_"):
            inp = self.program.plan.inputs[op.attr]
            return {"src": self.sources[op.attr], "inp": inp,
                    "n": len(inp.levels) if inp.kind == "categorical" else 0}
        if op.op in ("lookup", "bucket"):  # a table of reals: the values, or the edges
            if op.attr not in self.tables:
                self.tables[op.attr] = self.spelling.table_name.format(n=len(self.tables))
            return {"table": self.tables[op.attr], "n": len(op.attr)}
        return {}

    def _sum_lines(self, op, args: list[str], joiner: str) -> list[str]:
        """((a + b) + c) + ...: the first chunk assigns the name, each further chunk adds
        to it, so the additions and their order are the program's."""
        sp = self.spelling
        dest = sp.name(op.dest)
        chunk = sp.sum_chunk
        lines = [sp.assign(dest, op.type, joiner.join(args[:chunk]))]
        for start in range(chunk, len(args), chunk - 1):
            lines.append(sp.reassign(dest, joiner.join([dest, *args[start:start + chunk - 1]])))
        return lines


@dataclass(frozen=True)
class Rendered:
    lines: list[str]                   # the statements, in the program's order
    tables: list[tuple[str, tuple]]    # (name, values) of every lookup table
    outputs: dict[str, str]            # output name -> the text holding it


def render(program: Program, spelling: Spelling, sources: dict[int, str]) -> Rendered:
    """The whole program, top to bottom."""
    r = Renderer(program, spelling, sources)
    lines = r.lines(program.ops)
    return Rendered(lines, r.table_list, r.outputs)


@dataclass(frozen=True)
class MarginSplit:
    """The program cut where the margins are complete: per term position, the operations
    that compute it (first needed there) and the term of each margin; then the constant
    last operand (the intercept) of each margin; then the rest (the link)."""

    groups: list[tuple[list[Op], list[tuple[int, str]]]]
    intercepts: list[Const]
    margins: list[str | Const]   # what each margin is: a sum's name, or a constant
    rest: list[Op]


def split_margins(program: Program, part_size: int | None = None) -> MarginSplit:
    """For languages that accumulate each margin term by term (m[k] = m[k] + t), so a
    wide model's terms can be cut into parts: the same additions in the same order.
    With `part_size`, the groups are cut into parts of that many terms, each rendered on
    its own (a function, a class): an operation several terms need (an input's value
    that a product and its own term share) is in the cone of its first group in every
    part that needs it, so no part reads a name another part computed."""
    n = program.plan.n_margins
    by_dest = {op.dest: op for op in program.ops}
    margin_ops = [by_dest.get(_output_arg(program, f"margin_{k}")) for k in range(n)]
    sums = [op if op is not None and op.op == "sum" else None for op in margin_ops]
    width = max((len(s.args) - 1 for s in sums if s is not None), default=0)
    position = {op.dest: i for i, op in enumerate(program.ops)}
    done: set[str] = set()
    groups = []
    first_done: set[str] = set()
    for j in range(width):
        if part_size and j % part_size == 0:
            first_done |= done
            done = set()
        cone: list[Op] = []
        terms = []
        for k, s in enumerate(sums):
            if s is not None and j < len(s.args) - 1:
                _cone(s.args[j], by_dest, done, cone)
                terms.append((k, s.args[j]))
        groups.append((sorted(cone, key=lambda op: position[op.dest]), terms))
    intercepts = [s.args[-1] if s is not None else _output_arg(program, f"margin_{k}")
                  for k, s in enumerate(sums)]
    margins = [s.dest if s is not None else intercepts[k] for k, s in enumerate(sums)]
    used = done | first_done | {s.dest for s in sums if s is not None}
    rest = [op for op in program.ops if op.dest not in used]
    return MarginSplit(groups, intercepts, margins, rest)


def _output_arg(program: Program, name: str):
    return next(op.args[0] for op in program.ops if op.op == "output" and op.attr == name)


def _cone(name, by_dest, done: set[str], out: list[Op]) -> None:
    if not isinstance(name, str) or name in done:
        return
    done.add(name)
    op = by_dest[name]
    for arg in op.args:
        _cone(arg, by_dest, done, out)
    out.append(op)

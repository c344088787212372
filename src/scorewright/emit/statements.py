"""One renderer for statement languages: the scoring program as one assignment per
operation, spelled from a language's record.

A language is data: a `Spelling` of literals, the assignment form and one text per
primitive (`{0}`, `{1}`... are the operands, already spelled; `{inp}` the plan's input
a read takes; `{table}` the name the renderer gave a lookup table; for the ordered
sum, the text that joins its operands left to right). The walk over the program
is written once here; a primitive a language has no spelling for is one error that
names both.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from ..errors import ScorewrightError
from ..program import Const, Program


@dataclass(frozen=True)
class Spelling:
    language: str
    real: Callable[[float], str]       # an exact literal of a real
    code: Callable[[int], str]         # a literal of a code
    assign: Callable[[str, str, str], str]  # (name, type, value) -> declaring statement
    reassign: Callable[[str, str], str]     # (name, value) -> a statement updating it
    ops: dict[str, str]                # primitive -> text with {0}, {1}, ... operands
    table_name: str = "_T{n}"          # lookup tables, numbered in order of first use
    # the most operands one statement of an ordered sum may hold (a compiler's parser
    # recurses per operator); a longer sum continues on its own name, left to right
    sum_chunk: int = 100


@dataclass(frozen=True)
class Rendered:
    lines: list[str]                   # the statements, in the program's order
    tables: list[tuple[str, tuple]]    # (name, values) of every lookup table
    outputs: dict[str, str]            # output name -> the name holding it


def render(program: Program, spelling: Spelling) -> Rendered:
    lines: list[str] = []
    tables: dict[tuple, str] = {}
    outputs: dict[str, str] = {}
    for op in program.ops:
        args = [_operand(a, spelling) for a in op.args]
        if op.op == "output":
            outputs[op.attr] = args[0]
            continue
        text = spelling.ops.get(op.op)
        if text is None:
            raise ScorewrightError(f"target {spelling.language} cannot express op {op.op}")
        fields = {}
        if op.op.startswith("read_"):
            fields["inp"] = program.plan.inputs[op.attr]
        if op.op == "lookup":
            if op.attr not in tables:
                tables[op.attr] = spelling.table_name.format(n=len(tables))
            fields["table"] = tables[op.attr]
        if op.op == "sum":
            lines += _sum_lines(op, args, text, spelling)
            continue
        lines.append(spelling.assign(op.dest, op.type, text.format(*args, **fields)))
    return Rendered(lines, [(name, values) for values, name in tables.items()], outputs)


def _sum_lines(op, args: list[str], joiner: str, spelling: Spelling) -> list[str]:
    """((a + b) + c) + ...: the first chunk assigns the name, each further chunk adds to it,
    so the additions and their order are the program's."""
    chunk = spelling.sum_chunk
    lines = [spelling.assign(op.dest, op.type, joiner.join(args[:chunk]))]
    for start in range(chunk, len(args), chunk - 1):
        rest = [op.dest, *args[start:start + chunk - 1]]
        lines.append(spelling.reassign(op.dest, joiner.join(rest)))
    return lines


def _operand(arg, spelling: Spelling) -> str:
    if isinstance(arg, Const):
        return spelling.code(arg.value) if isinstance(arg.value, int) else spelling.real(arg.value)
    return arg

"""The scoring query as one SQL expression per output column (`--form expressions`),
for DataFrame APIs that take expressions, not queries: `df.selectExpr("*", *exprs)`.

No subquery is allowed there, so the layered query of emit/sql.py is built as it
is and each layer's aliases are then substituted, innermost first, into the next
layer's expressions (each in parentheses, so operation order is unchanged): the
same operations in the same order as the query. A margin is written out once, as
its own output; the outputs after it name it (`margin`, `margin_0`, ...) as a
lateral column alias (Spark >= 3.4 resolves a name to an earlier alias of the
same select list), so the margins, which hold every input's chain, are computed
once per row. Writing them out everywhere instead made a 4-class, 30-feature
model 2 MB of expressions that Spark could neither parse nor compile in time.
Only the link's small steps (top, exp, total) repeat; Spark's common
sub-expression elimination may share them (bench/bench_sql_spark_expressions.py).

Layer references are written with a NUL-led token while building; no raw NUL
ever reaches emitted text (names with NUL are renamed, string literals spell NUL
as a function call), so a user string cannot look like a reference.
"""

from __future__ import annotations

import re

from ..errors import ScorewrightError
from ..plan import Plan
from .sql_dialects import Dialect

# An output whose ops read a value twice at each step of a chain (a series evaluated
# by recurrence) doubles per step when written out: refused past this size, where
# writing it would exhaust memory (a 1,000-feature margin is 1.25 MB, and runs).
MAX_CHARACTERS = 64_000_000
REF = re.compile("\x00L([0-9]+)\\.([a-z0-9_]+)")


class InlineLayers:
    """The Layers interface of emit/sql.py, keeping expressions instead of rendering."""

    def __init__(self):
        self.layers: list[dict[str, str]] = []

    @property
    def ref(self) -> str:
        return f"\x00L{len(self.layers) - 1}"

    def add(self, columns: list[tuple[str, str]], source: str = "") -> None:
        assert not source, "an expression cannot join"
        self.layers.append(dict(columns))

    def render(self, innermost_from: str, fence: str) -> list[str]:
        return []

    def resolve(self, alias: str, named: dict[str, str]) -> str:
        """The top layer's `alias` with every reference written out, except references
        to an alias in `named`, which become that name."""
        done: dict[tuple[int, str], str] = {}

        def sub(match) -> str:
            if match[2] in named:
                return named[match[2]]
            return "(" + expand(int(match[1]), match[2]) + ")"

        def expand(layer: int, name: str) -> str:
            key = (layer, name)
            if key not in done:
                done[key] = REF.sub(sub, self.layers[layer][name])
            return done[key]

        return expand(len(self.layers) - 1, alias)

    def size(self, alias: str, named: dict[str, str]) -> int:
        """The length `resolve` would give, counted without writing it out (an op read
        twice by each op of a chain doubles it at every step)."""
        done: dict[tuple[int, str], int] = {}

        def count(layer: int, name: str) -> int:
            key = (layer, name)
            if key not in done:
                text = self.layers[layer][name]
                n = len(text)
                for m in REF.finditer(text):
                    n += (len(named[m[2]]) if m[2] in named else 2 + count(int(m[1]), m[2]))
                    n -= len(m[0])
                done[key] = n
            return done[key]

        return count(len(self.layers) - 1, alias)


def output_expressions(plan: Plan, d: Dialect, source: dict[str, str], build_query):
    """[(output column, expression)] computing what the query computes; the outputs
    after the margins refer to the margins by their output names."""
    layers = InlineLayers()
    query = build_query(plan, d, source, layers=layers)
    margins = {alias: d.quote(name) for name, alias in query.outputs[:plan.n_outputs]}
    out = []
    for i, (name, alias) in enumerate(query.outputs):
        named = {} if i < plan.n_outputs else margins
        size = layers.size(alias, named)
        if size > MAX_CHARACTERS:
            raise ScorewrightError(f"--form expressions: output {name!r} would be one "
                                   f"expression of {size:,} characters; use --form select "
                                   "or view")
        out.append((name, layers.resolve(alias, named)))
    return out

"""The scoring query as one SQL expression per output column (`--form expressions`),
for DataFrame APIs that take expressions, not queries: `df.selectExpr("*", *exprs)`.

No subquery is allowed there, so the layered query of emit/sql.py is built as it
is and each layer's aliases are then substituted, innermost first, into the next
layer's expressions (each in parentheses, so operation order is unchanged): the
same operations in the same order as the query, only written out where the
query names an intermediate. Layer references are written with a NUL-led token
while building; no raw NUL ever reaches emitted text (names with NUL are
renamed, string literals spell NUL as a function call), so a user string cannot
look like a reference. Whether the engine computes a repeated sub-expression
once is the engine's business (Spark eliminates common sub-expressions within a
projection; bench/bench_sql_spark.py measures the cost).
"""

from __future__ import annotations

import re

from ..plan import Plan
from .sql_dialects import Dialect

REF = re.compile("\x00L([0-9]+)\\.([a-z0-9]+)")


class InlineLayers:
    """The Layers interface of emit/sql.py, keeping expressions instead of rendering."""

    def __init__(self):
        self.layers: list[dict[str, str]] = []

    @property
    def ref(self) -> str:
        return f"\x00L{len(self.layers) - 1}"

    def add(self, columns: list[tuple[str, str]]) -> None:
        self.layers.append(dict(columns))

    def carry(self, aliases) -> list[tuple[str, str]]:
        return [(a, f"{self.ref}.{a}") for a in aliases]

    def render(self, innermost_from: str, fence: str) -> list[str]:
        return []

    def resolve(self, alias: str) -> str:
        """The top layer's `alias` with every reference written out."""
        done: dict[tuple[int, str], str] = {}

        def expand(layer: int, name: str) -> str:
            key = (layer, name)
            if key not in done:
                text = self.layers[layer][name]
                done[key] = REF.sub(lambda m: "(" + expand(int(m[1]), m[2]) + ")", text)
            return done[key]

        return expand(len(self.layers) - 1, alias)


def output_expressions(plan: Plan, d: Dialect, source: dict[str, str], build_query):
    """[(output column, expression)] computing what the query computes."""
    layers = InlineLayers()
    query = build_query(plan, d, source, layers=layers)
    return [(name, layers.resolve(alias)) for name, alias in query.outputs]

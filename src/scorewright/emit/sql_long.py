"""The long input layout (`--layout long`): one input row per (row key, feature).

A table can hold at most 2,000 columns in SQLite and 1,600 in PostgreSQL, so a
wider model cannot be scored from a table of one column per feature there; wide
data usually lives in long form anyway. The long table has four columns (names
set by --long-columns): the row key, the feature name, `value` (double) for a
numeric feature and `level` (text) for a categorical one.

The query reads the features a block (the dialect's terms_per_join) at a time: each
block pivots its own features out of the table (one GROUP BY over the block's rows)
and is joined to the running margin sums by the key, so no layer holds more than
one block of columns and the sums keep the plan's order (emit/sql.py). A pair
that is absent, or present with NULL, is a missing value. A key with any feature
given twice gets NULL outputs (it is never scored from one of the two values); a
NULL key is left out.
"""

from __future__ import annotations

from ..errors import ScorewrightError
from .sql_dialects import Dialect

DEFAULT_COLUMNS = ("row_id", "feature", "value", "level")
FORMS = ("select", "view")


def check(form: str, options: dict) -> tuple[str, ...]:
    """The long-layout column names, after refusing what the layout cannot do."""
    if form not in FORMS:
        raise ScorewrightError(f"--layout long: --form {form} is not available "
                               f"(use {' or '.join(FORMS)})")
    if options.get("keep") is not None:
        raise ScorewrightError("--keep does not apply to --layout long: the result holds "
                               "the row key and the outputs")
    columns = tuple(options.get("long_columns") or DEFAULT_COLUMNS)
    if len(columns) != 4 or any(c == "" for c in columns):
        raise ScorewrightError("--long-columns: expected KEY,FEATURE,VALUE,LEVEL")
    for c in columns:
        if "\x00" in c:
            raise ScorewrightError(f"--long-columns: {c!r} contains a NUL character")
    if len({c.lower() for c in columns}) < 4:
        raise ScorewrightError("--long-columns: the four names must differ (even in case)")
    return columns


def names(plan, d: Dialect, mapping: dict) -> dict[str, str]:
    """The string each feature is found under in the feature column."""
    out = {f: mapping.get(f, f) for f in plan.feature_names}
    if d.nul_char is None:
        for f, name in out.items():
            if "\x00" in name:
                raise ScorewrightError(f"--layout long: {d.name} text cannot hold NUL, so "
                                       f"feature {name!r} cannot be named in the table")
    return out


def statement(plan, s, build_query, select_list) -> str:
    """The SELECT over the long table: the layers as a WITH list, then the key and the
    outputs (NULL for a key with a feature given twice)."""
    d = s.dialect
    key, feature, value, level = (d.quote(c) for c in s.long_columns)
    table = d.quote(s.table)
    by_index = {inp.index: inp for inp in plan.inputs}
    # Layer names no table name can shadow: a WITH name hides a table of that name.
    prefix = "sw_"
    while s.table.lower().startswith(prefix):
        prefix += "_"

    def pivot(used) -> str:
        picked = [by_index[i] for i in sorted(used)]
        strings = [d.string(s.columns[inp.name]) for inp in picked]
        cols = [f"{key} AS k"] + [
            f"max(CASE WHEN {feature}{d.text_collate} = {name} THEN "
            f"{value if inp.kind == 'numeric' else level} END) AS r{inp.index}"
            for inp, name in zip(picked, strings)]
        return (f"(SELECT {', '.join(cols)} FROM {table} "
                f"WHERE {feature}{d.text_collate} IN ({', '.join(strings)}) GROUP BY {key})")

    def rejoin(ref, used) -> str:
        if ref is None:
            keys = (f"(SELECT {key} AS k, count({feature}) - count(DISTINCT {feature}) AS nd "
                    f"FROM {table} WHERE {key} IS NOT NULL GROUP BY {key}) AS ks")
            return keys + (f" LEFT JOIN {pivot(used)} AS t ON t.k = ks.k" if used else "")
        return f"LEFT JOIN {pivot(used)} AS t ON t.k = {ref}.rk" if used else ""

    sources = {inp.name: f"t.r{inp.index}" for inp in plan.inputs}
    q = build_query(plan, d, sources, extra=[("rk", "ks.k"), ("nd", "ks.nd")], rejoin=rejoin)
    last = len(q.layers.layers) - 1
    cols = [(key, "s.rk")] + [(d.quote(name), f"CASE WHEN s.nd = 0 THEN s.{alias} END")
                              for name, alias in q.outputs]
    lines = q.layers.render_with(lambda i: f"{prefix}l{i}", d.fence)
    lines += ["SELECT"] + select_list(cols)
    return "\n".join(lines + [f"FROM {prefix}l{last} AS s"])


def header_lines(plan, s, comment_text) -> list[str]:
    key, feature, value, level = (comment_text(c) for c in s.long_columns)
    lines = [f"Input table: {comment_text(s.table)}, long layout: one row per ({key}, "
             f"{feature}); numeric values in {value}, category levels in {level}",
             f"A pair absent or NULL is missing; a {key} with a feature twice gets NULL "
             f"outputs; a NULL {key} is left out.",
             f"Features (feature <- name in {feature}):"]
    for inp in plan.inputs:
        lines.append(f"  {comment_text(inp.name)} <- {comment_text(s.columns[inp.name])}"
                     f" ({inp.kind})")
    lines.append(f"Returns: {key}, then the outputs")
    return lines

"""Which input column each feature is read from: one rule, used by the SQL emitter and
by the SQL runner (so the runner creates exactly the columns the artifact reads).

A feature's column is its own name whenever the engine can hold that name as a
column of its own. Otherwise it gets a derived name: the name with NUL replaced
by `_`, cut to the engine's identifier limit, plus `_` and the first hex digits
of the SHA-256 of the original name (stable across processes and hash seeds).
A name is not held as it is when:

- it contains NUL (no raw NUL is ever written into an artifact; PostgreSQL and
  SQLite's SQL text cannot hold one) or is empty;
- the engine would treat it as the same column as an earlier feature's name:
  equal up to case where the engine folds identifiers (ASCII letters in SQLite
  and DuckDB; all of unicode in Spark, e.g. `é`/`É` and `K`/KELVIN SIGN), or
  equal in the first 63 bytes where PostgreSQL truncates (a long name alone
  keeps its first 63 bytes: the column PostgreSQL itself stores);
- it is the name of an output column (margin, probability, ...), which would
  then appear twice in the result of `SELECT t.*, <outputs>`.

Names are compared through a key that is coarser than the engine's own rule
(never finer), so an unneeded rename can happen but a missed collision cannot.
Earlier features keep their names first; derived names never displace a name
kept as it is. User mappings (--column FEATURE=COLUMN) win; a user column that
collides with another is a one-line error.
"""

from __future__ import annotations

import hashlib
from functools import lru_cache

from ..errors import ScorewrightError
from .sql_dialects import Dialect

SUFFIX_DIGITS = (8, 16, 32)


@lru_cache(maxsize=4096)
def _unicode_fold(ch: str) -> str:
    """A representative of every character any case mapping links to ch (first character
    of a multi-character mapping, e.g. U+0130 -> i), so the key is never finer than
    Java's per-character or whole-string case-insensitive matches."""
    seen, todo = {ch}, [ch]
    while todo:
        c = todo.pop()
        for mapped in (c.lower(), c.upper(), c.casefold()):
            m = mapped[0]
            if m not in seen:
                seen.add(m)
                todo.append(m)
    return min(seen)


def clip(d: Dialect, name: str, limit: int | None = None) -> str:
    """The name as the engine stores it: PostgreSQL cuts at 63 bytes on a character
    boundary."""
    limit = d.identifier_max_bytes if limit is None else limit
    if limit is None:
        return name
    return name.encode("utf-8", "surrogatepass")[:limit].decode("utf-8", "ignore")


def name_key(d: Dialect, name: str) -> str:
    """Two names with one key may be one column in the engine."""
    name = clip(d, name)
    if not d.fold_identifiers:
        return name
    if not d.fold_unicode:
        return "".join(c.lower() if c < "\x80" else c for c in name)
    # U+0307 is dropped: Java lower-cases U+0130 to "i" + U+0307.
    return "".join(_unicode_fold(c) for c in name if c != "\u0307")


def holds(d: Dialect, name: str) -> bool:
    return name != "" and not any(c in name for c in d.identifier_forbidden)


def derived_name(d: Dialect, name: str, digits: int, tail: str = "") -> str:
    base = "".join("_" if c in d.identifier_forbidden else c for c in name)
    digest = hashlib.sha256(name.encode("utf-8", "surrogatepass")).hexdigest()
    suffix = "_" + digest[:digits] + tail
    limit = None if d.identifier_max_bytes is None else d.identifier_max_bytes - len(suffix)
    return clip(d, base, limit) + suffix


def input_columns(d: Dialect, features, user: dict, outputs, passthrough: bool) -> dict:
    """feature -> column for every feature, in feature order. `outputs`: the output
    columns and the names the query reserves; `passthrough`: every input column rides
    along into the result (no --keep)."""
    # key -> what holds it, in the user's words
    taken = {name_key(d, name): f"{name!r}, a name the query itself uses" for name in outputs}
    columns: dict[str, str] = {}
    for feature, column in user.items():
        if not holds(d, column):
            raise ScorewrightError(f"--column {feature}={column!r}: {d.name} cannot hold "
                                   "that column name (empty or NUL)")
        key = name_key(d, column)
        other = taken.get(key)
        # With --keep the input columns do not ride along, so an output name is free.
        if other is not None and (passthrough or key in columns_keys(columns, d)):
            raise ScorewrightError(f"--column {feature}={column!r}: {d.name} reads it as "
                                   f"the same column as {other}")
        taken[key] = f"--column {feature}={column!r}"
        columns[feature] = column
    rest = [f for f in features if f not in columns]
    for feature in rest:
        if holds(d, feature) and name_key(d, feature) not in taken:
            columns[feature] = clip(d, feature)
            taken[name_key(d, feature)] = f"feature {feature!r}"
    for feature in rest:
        if feature in columns:
            continue
        columns[feature] = _free_name(d, feature, taken)
        taken[name_key(d, columns[feature])] = f"feature {feature!r}"
    return {f: columns[f] for f in features}


def columns_keys(columns: dict, d: Dialect) -> set:
    return {name_key(d, c) for c in columns.values()}


def _free_name(d: Dialect, feature: str, taken: dict) -> str:
    for digits in SUFFIX_DIGITS:
        name = derived_name(d, feature, digits)
        if name_key(d, name) not in taken:
            return name
    n = 2
    while name_key(d, derived_name(d, feature, 8, f"_{n}")) in taken:
        n += 1
    return derived_name(d, feature, 8, f"_{n}")

"""Schema inference: which columns are numbers, which are categories, which are left out.

The rules (printed with the summary so the user can check them):
- a column whose values all read as numbers is numeric; +-inf counts as missing,
  as the scorers treat it; a column of booleans, or of the words true/false only,
  is numeric 1/0 and its feature is marked boolean;
- a column that is mostly numbers with some text in it is an error (a stray word
  in a column of readings is a data fault, not a category);
- any other column is categorical, up to `max_levels` levels;
- left out with a message: constant columns, identifier-like columns (text with
  a different value in every row, or whole numbers that count up row by row),
  and text columns with more levels than the limit;
- a column with no values at all is an error (a sensor that never reported).
Columns named in --numeric / --categorical / --features are taken as given,
except that the checks for junk text and empty columns still apply.
"""

from __future__ import annotations

import shlex
from dataclasses import dataclass, field

import numpy as np

from ..errors import ScorewrightError

MOSTLY_NUMBERS = 0.9  # share of readable numbers above which text is junk, not categories


@dataclass(frozen=True)
class Column:
    name: str
    kind: str                # "numeric" or "categorical"
    missing: int
    levels: tuple = ()       # categorical, sorted as the encoder will sort them
    infinite: int = 0        # numeric values that were +-inf (read as missing)
    boolean: bool = False    # numeric read from booleans (bool values, or the words true/false)


@dataclass
class Schema:
    label: str
    columns: list[Column] = field(default_factory=list)
    excluded: list[tuple[str, str]] = field(default_factory=list)  # (name, reason)

    @property
    def numeric(self) -> list[str]:
        return [c.name for c in self.columns if c.kind == "numeric"]

    @property
    def categorical(self) -> list[str]:
        return [c.name for c in self.columns if c.kind == "categorical"]

    def column(self, name: str) -> Column:
        return next(c for c in self.columns if c.name == name)


def _names(option: str, names, frame_columns) -> list[str]:
    names = list(names or [])
    for name in names:
        if name not in frame_columns:
            raise ScorewrightError(f"{option}: no column named {name!r} in the data")
    return names


def infer_schema(frame, label: str, features=None, drop=None, categorical=None,
                 numeric=None, max_levels: int = 30):
    """The schema and the feature frame (numeric as float64 with NaN, categorical as
    object holding text or whole numbers with NaN for missing)."""
    import pandas as pd

    cols = list(frame.columns)
    if label not in cols:
        shown = ", ".join(repr(c) for c in cols[:8]) + (", ..." if len(cols) > 8 else "")
        raise ScorewrightError(f"--label: no column named {label!r} in the data "
                               f"(columns: {shown})")
    features = _names("--features", features, cols)
    drop = set(_names("--drop", drop, cols))
    forced_cat = set(_names("--categorical", categorical, cols))
    forced_num = set(_names("--numeric", numeric, cols))
    both = forced_cat & forced_num
    if both:
        raise ScorewrightError(f"column {sorted(both)[0]!r} is given as both --numeric and "
                               "--categorical")
    if label in features or label in forced_cat or label in forced_num:
        raise ScorewrightError(f"the label column {label!r} cannot also be a feature")
    chosen = set(features)
    candidates = [c for c in (features or cols) if c != label and c not in drop]
    schema = Schema(label)
    out = {}
    for name in candidates:
        given = name in chosen or name in forced_cat or name in forced_num
        kind = "categorical" if name in forced_cat else "numeric" if name in forced_num else None
        result = _infer_column(frame[name], name, kind, given, max_levels)
        if isinstance(result, str):
            schema.excluded.append((name, result))
            continue
        column, values = result
        schema.columns.append(column)
        out[name] = values
    if not schema.columns:
        raise ScorewrightError("no usable feature columns are left "
                               + _excluded_note(schema.excluded))
    return schema, pd.DataFrame(out, index=frame.index)


def _excluded_note(excluded) -> str:
    if not excluded:
        return "(the data has only the label column)"
    return "(" + "; ".join(f"{n}: {r}" for n, r in excluded[:4]) + ")"


def _row(series, mask) -> str:
    position = int(np.flatnonzero(np.asarray(mask))[0])
    return f"data row {position + 1}"


def _infer_column(series, name, kind, given, max_levels):
    import pandas as pd

    present = ~series.isna().to_numpy()
    boolean = False
    if series.dtype == object or pd.api.types.is_string_dtype(series.dtype):
        text = series.astype(object).where(present, None)
        stripped = text.map(lambda v: v.strip() if isinstance(v, str) else v)
        present = present & stripped.map(lambda v: v not in (None, "")).to_numpy()
        numbers = pd.to_numeric(stripped.where(present, None), errors="coerce")
        numbers = numbers.to_numpy(dtype=np.float64)
        raw_text = stripped
        words = _boolean_words(stripped, present)
        if words is not None and kind != "categorical":
            numbers, raw_text, boolean = words, None, True
        readable = present & ~np.isnan(numbers)
    elif pd.api.types.is_bool_dtype(series.dtype):
        numbers = series.to_numpy(dtype=np.float64, na_value=np.nan)
        readable = present
        raw_text = None
        boolean = True
    elif pd.api.types.is_numeric_dtype(series.dtype):
        numbers = series.to_numpy(dtype=np.float64, na_value=np.nan)
        readable = present & ~np.isnan(numbers)
        raw_text = None
    else:
        raise ScorewrightError(f"column {name!r}: values of type {series.dtype} are neither "
                               "numbers nor text")
    n_present = int(present.sum())
    if n_present == 0:
        raise ScorewrightError(f"column {name!r} has no values (missing in every row); "
                               f"leave it out with --drop {shlex.quote(name)}")
    n_readable = int(readable.sum())
    junk = present & ~readable
    if kind == "numeric" or (kind is None and n_readable >= MOSTLY_NUMBERS * n_present
                             and n_readable < n_present):
        if junk.any():
            bad = raw_text[junk].iloc[0]
            raise ScorewrightError(
                f"column {name!r}: {bad!r} at {_row(series, junk)} is not a number "
                f"({n_readable} of {n_present} values are); fix the data, or pass "
                f"--categorical {shlex.quote(name)} if it holds categories")
    if kind is None:
        kind = "numeric" if n_readable == n_present else "categorical"
    if kind == "numeric":
        return _numeric(name, numbers, present, given, boolean)
    return _categorical(name, series, raw_text, numbers, present, given, max_levels)


def _boolean_words(text, present):
    """1.0/0.0 for a text column of the words true/false only (any case; how pandas
    writes a bool column to CSV), else None."""
    words = {"true": 1.0, "false": 0.0}
    cells = [("true" if v else "false") if isinstance(v, (bool, np.bool_))
             else v.lower() if isinstance(v, str) else v for v in text[present]]
    if not cells or any(c not in words for c in cells):
        return None
    out = np.full(len(present), np.nan)
    out[present] = [words[c] for c in cells]
    return out


def _numeric(name, numbers, present, given, boolean=False):
    finite = np.isfinite(numbers)
    infinite = int((present & ~finite & ~np.isnan(numbers)).sum())
    values = np.where(finite, numbers, np.nan)
    distinct = np.unique(values[finite])
    if len(distinct) == 0:
        raise ScorewrightError(f"column {name!r} has no finite values; leave it out with "
                               f"--drop {shlex.quote(name)}")
    if len(distinct) == 1:
        return f"constant (every value is {distinct[0]:g})"
    kept = values[finite]
    counting = (len(kept) == len(values) and len(kept) >= 20 and np.all(kept == np.floor(kept))
                and np.all(np.diff(kept) > 0))
    if counting and not given:
        return "identifier-like (whole numbers counting up row by row)"
    column = Column(name, "numeric", int((~finite).sum()), infinite=infinite, boolean=boolean)
    return column, values


def _categorical(name, series, raw_text, numbers, present, given, max_levels):
    import pandas as pd

    if raw_text is not None:
        values = _integer_codes(raw_text, numbers, present)
        if values is None:
            values = raw_text.where(present, None)
    else:
        whole = present & np.isfinite(numbers) & (numbers == np.floor(numbers))
        if not np.all(whole[present]):
            raise ScorewrightError(f"column {name!r}: a category must be text or a whole "
                                   "number")
        values = pd.Series([int(v) if p else None for v, p in zip(numbers, present)],
                           index=series.index, dtype=object)
    kept = values[present]
    levels = sorted(set(kept))
    if len(levels) == 1:
        return f"constant (every value is {levels[0]!r})"
    n_present = int(present.sum())
    if len(levels) == n_present and n_present > max_levels and not given:
        return "identifier-like (a different value in every row)"
    if len(levels) > max_levels:
        if given:
            raise ScorewrightError(f"column {name!r} has {len(levels)} levels, more than "
                                   f"--max-levels {max_levels}")
        return f"{len(levels)} levels, more than --max-levels {max_levels}"
    values = values.astype(object).where(present, np.nan)
    column = Column(name, "categorical", int((~present).sum()), tuple(levels))
    return column, values


def _integer_codes(raw_text, numbers, present):
    """Text cells that all spell whole numbers, one text per number, as ints; else None.

    Integer levels match integral values of any type when scored (2, 2.0, '2'), so a
    DOUBLE column or another loader's text still finds its level; text levels would
    not match 2.0. Codes spelled two ways ('7' and '07') stay text: they are two
    categories in the data."""
    import pandas as pd

    whole = present & np.isfinite(numbers) & (numbers == np.floor(numbers))
    if not np.all(whole[present]) or np.any(np.abs(numbers[present]) >= 2.0 ** 53):
        return None
    spellings = {}
    for text, number in zip(raw_text[present], numbers[present]):
        if spellings.setdefault(int(number), text) != text:
            return None
    return pd.Series([int(v) if p else None for v, p in zip(numbers, present)],
                     index=raw_text.index, dtype=object)


def summary_lines(schema: Schema, n_rows: int) -> list[str]:
    """The schema as the user should check it, one line per column."""
    width = max([len(c.name) for c in schema.columns] + [len(n) for n, _ in schema.excluded])
    width = min(width, 32)
    lines = [f"schema: {len(schema.columns)} features ({len(schema.numeric)} numeric, "
             f"{len(schema.categorical)} categorical), label {schema.label!r}"]
    for c in schema.columns:
        share = 100.0 * c.missing / n_rows if n_rows else 0.0
        what = "numeric    " if c.kind == "numeric" else "categorical"
        extra = f", {len(c.levels)} levels" if c.kind == "categorical" else ""
        if c.boolean:
            extra += ", true/false read as 1/0"
        if c.infinite:
            extra += f", {c.infinite} infinite read as missing"
        lines.append(f"  {c.name:<{width}}  {what}  missing {c.missing} ({share:.1f}%){extra}")
    for name, reason in schema.excluded:
        lines.append(f"  {name:<{width}}  left out     {reason}")
    lines.append("  (override with --numeric, --categorical, --features, --drop, --max-levels)")
    return lines

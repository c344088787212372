"""How a raw input value is read: the one definition of "missing" and "unseen".

The emitted Python scorer carries a copy of these rules (it may import nothing
but the standard library); tests hold the two to the same cases.

Numeric: int and float values are used as they are; a bool (Python's or
numpy's) is 1.0 or 0.0, as scikit-learn reads it in any numeric column; a string
is parsed with a strict decimal grammar (surrounding blanks allowed), and for a
feature fitted on a boolean column the words true/false (any case) are 1.0/0.0;
anything else (None, absent, NaN, +-inf, an unparseable string, an int beyond
double range) is missing.
Categorical, string levels: a str equal to a level; an int (not bool) is
compared by its decimal text. Integer levels: an int, a bool (1/0, as a
OneHotEncoder fitted on a bool column has categories [False, True]), an
integral float, or a string holding an integral number. None, NaN and "" are
missing; any other value is unseen.
"""

from __future__ import annotations

import math
import numbers
import re

# ASCII digits and the six ASCII blanks only, as every SQL target reads text
NUMBER = re.compile(r"\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*\Z", re.ASCII)
BOOLEAN_WORDS = {"true": 1.0, "false": 0.0}
MISSING_CODE = -1
UNSEEN_CODE = -2


def is_bool(value) -> bool:
    """A Python bool or a numpy bool scalar (numpy's is no subclass of bool)."""
    if isinstance(value, bool):
        return True
    dtype = getattr(value, "dtype", None)
    return getattr(dtype, "kind", None) == "b" and getattr(value, "ndim", 1) == 0


def numeric_value(value, boolean: bool = False) -> float | None:
    """The finite double a raw value stands for, or None when it is missing.

    `boolean`: the feature was fitted on a boolean column, so the words
    true/false also read as 1.0/0.0."""
    if value is None:
        return None
    if is_bool(value):
        return 1.0 if value else 0.0
    if isinstance(value, str):
        if boolean:
            word = BOOLEAN_WORDS.get(value.strip(" \t\n\r\f\v").lower())
            if word is not None:
                return word
        match = NUMBER.match(value)
        if match is None:
            return None
        value = float(match.group(1))
    elif isinstance(value, numbers.Integral):
        try:
            value = float(int(value))
        except OverflowError:
            return None
    elif isinstance(value, numbers.Real):
        value = float(value)
    else:
        return None
    return value if math.isfinite(value) else None


def is_na_marker(value) -> bool:
    """pandas' missing-value markers (NA, NaT), which compare as neither true nor false."""
    return type(value).__name__ in ("NAType", "NaTType")


def category_code(levels: tuple, value) -> int:
    """The level code of a raw value: 0..L-1, MISSING_CODE or UNSEEN_CODE."""
    if value is None or (isinstance(value, str) and value == "") or (
            isinstance(value, float) and math.isnan(value)) or is_na_marker(value):
        return MISSING_CODE
    if isinstance(levels[0], int):
        key = int(bool(value)) if is_bool(value) else _integral(value)
    elif is_bool(value):
        key = None
    elif isinstance(value, str):
        key = value
    elif isinstance(value, numbers.Integral):
        key = str(int(value))
    else:
        key = None
    if key is None:
        return UNSEEN_CODE
    try:
        return levels.index(key)
    except ValueError:
        return UNSEEN_CODE


def _integral(value) -> int | None:
    if isinstance(value, str):
        number = numeric_value(value)
        if number is None:
            return None
        value = number
    if isinstance(value, numbers.Integral):
        return int(value)
    if isinstance(value, numbers.Real):
        value = float(value)
        if math.isfinite(value) and value == math.floor(value):
            return int(value)
    return None

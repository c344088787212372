"""Reading the user's table (CSV or Parquet) with every defect stated in one line.

Every column is read as text first (CSV) so that schema inference, not the
reader, decides what is a number: a stray word in a column of readings is then
reported instead of silently turning the column into text.
"""

from __future__ import annotations

import csv
import hashlib
from dataclasses import dataclass
from pathlib import Path

from ..errors import ScorewrightError

PARQUET_MAGIC = b"PAR1"


@dataclass(frozen=True)
class Table:
    path: Path
    frame: object          # pandas DataFrame; CSV columns are text or NaN
    sha256: str
    file_format: str       # "csv" or "parquet"


def read_table(path: str | Path) -> Table:
    path = Path(path)
    if not path.exists():
        raise ScorewrightError(f"{path}: no such file")
    if path.is_dir():
        raise ScorewrightError(f"{path}: is a directory, not a data file")
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise ScorewrightError(f"{path}: cannot read ({exc.strerror})") from None
    if not raw.strip():
        raise ScorewrightError(f"{path}: the file is empty")
    digest = hashlib.sha256(raw).hexdigest()
    if raw[:4] == PARQUET_MAGIC or path.suffix.lower() in (".parquet", ".pq"):
        frame, fmt = _read_parquet(path), "parquet"
    else:
        frame, fmt = _read_csv(path, raw), "csv"
    if len(frame.columns) == 0:
        raise ScorewrightError(f"{path}: no columns")
    if len(frame) == 0:
        raise ScorewrightError(f"{path}: a header but no data rows")
    return Table(path, frame, digest, fmt)


def _read_csv(path: Path, raw: bytes):
    import pandas as pd

    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ScorewrightError(f"{path}: not UTF-8 text (byte {exc.start})") from None
    header = next(csv.reader(text.splitlines()[:1]), [])
    names = [h.strip() for h in header]
    _check_names(path, names)
    try:
        # Text for every column: inference decides numbers; pandas' usual
        # missing markers ("", NA, NaN, null, ...) become NaN.
        frame = pd.read_csv(path, dtype=str, encoding="utf-8-sig", skipinitialspace=True)
    except pd.errors.EmptyDataError:
        raise ScorewrightError(f"{path}: the file is empty") from None
    except pd.errors.ParserError as exc:
        raise ScorewrightError(f"{path}: not a readable CSV table "
                               f"({' '.join(str(exc).split())})") from None
    frame.columns = names
    return frame


def _read_parquet(path: Path):
    try:
        import pyarrow.parquet as pq
    except ImportError:
        raise ScorewrightError(f"{path}: reading Parquet needs the pyarrow package") from None
    try:
        table = pq.read_table(path)
    except Exception as exc:  # pyarrow raises many kinds for a damaged file
        raise ScorewrightError(f"{path}: not a readable Parquet file "
                               f"({' '.join(str(exc).split())[:200]})") from None
    _check_names(path, [str(n) for n in table.column_names])
    return table.to_pandas()


def _check_names(path: Path, names: list[str]) -> None:
    if not names or all(n == "" for n in names):
        raise ScorewrightError(f"{path}: no header row with column names")
    seen: set[str] = set()
    for i, name in enumerate(names):
        if name == "":
            raise ScorewrightError(f"{path}: column {i + 1} has no name")
        if name in seen:
            raise ScorewrightError(f"{path}: duplicate column name {name!r}")
        seen.add(name)

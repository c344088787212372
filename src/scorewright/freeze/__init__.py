"""Freezing fitted models into frozen model files."""

from __future__ import annotations

import pickle
from pathlib import Path

from ..errors import ScorewrightError
from ..model import FrozenModel
from .sklearn import freeze_estimator

PICKLE_WARNING = ("warning: loading {path} runs code stored in the file; "
                  "load only files you trust (the in-process API, scorewright.freeze(), "
                  "avoids this)")


def freeze(estimator, feature_names=None, name=None) -> FrozenModel:
    """Freeze a fitted scikit-learn estimator or pipeline (the safe, in-process path)."""
    return freeze_estimator(estimator, feature_names=feature_names, name=name)


def load_pickled_estimator(path: Path):
    """Unpickle an estimator from a pickle or joblib file. This runs code from the
    file: callers must have warned the user first."""
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ScorewrightError(f"{path}: cannot read ({exc.strerror})") from None
    if data[:2] in (b"\x1f\x8b", b"BZ", b"\xfd7") or path.suffix == ".joblib":
        try:
            import joblib
        except ImportError:
            raise ScorewrightError(f"{path}: a joblib file needs the joblib package") from None
        try:
            return joblib.load(path)
        except Exception as exc:  # unpickling can fail in any way the file chooses
            raise ScorewrightError(f"{path}: cannot load ({type(exc).__name__}: {exc})") from None
    try:
        return pickle.loads(data)
    except Exception as exc:
        raise ScorewrightError(f"{path}: not a loadable pickle ({type(exc).__name__}: "
                               f"{str(exc)[:200]})") from None

"""Freezing fitted models into frozen model files."""

from __future__ import annotations

import pickle
import warnings
from dataclasses import replace
from pathlib import Path

from ..errors import ScorewrightError
from ..model import FrozenModel, NumericFeature
from .offsets import RateSource, with_offset
from .self_check import (CheckResult, FreezeMismatch, FreezeNote, base_row, check_model,
                         feature_order)
from .sklearn import freeze_estimator
from .statsmodels import ResultsSource, freeze_results, is_statsmodels
from .torch import FLOAT32_TOLERANCE, float32_gap, is_torch_module, source_pipeline

PICKLE_WARNING = ("warning: loading {path} runs code stored in the file; "
                  "load only files you trust (the in-process API, scorewright.freeze(), "
                  "avoids this)")


def freeze(estimator, feature_names=None, name=None, check_rows=None, preprocessor=None,
           task=None, classes=None, offset=None, exposure=None) -> FrozenModel:
    """Freeze a fitted scikit-learn estimator or pipeline, fitted statsmodels results, or a
    PyTorch linear model (the safe, in-process path).

    A torch module (an nn.Linear, or nn.Sequential of one Linear and an optional Sigmoid
    or Softmax) takes `feature_names`, or the fitted scikit-learn `preprocessor` that made
    its inputs; `task` ('binary' for a Linear that outputs a logit, 'multiclass' for class
    logits) where the module has no Sigmoid or Softmax to say it; `classes` its labels.

    The frozen model is checked against the estimator on `check_rows` (a pandas
    DataFrame, or a list of dicts, holding the raw inputs as the estimator takes
    them) and on rows derived from the model; a model that scores differently is
    refused (FreezeMismatch). A numeric column of dtype bool in `check_rows` marks
    its feature boolean. What the check found worth saying comes as warnings.

    statsmodels results fitted with an `offset=` or `exposure=` array take the name of
    the column that holds it (`offset="..."`, `exposure="..."`): an input of the frozen
    model, whose artifacts then output the expected count and the rate (the value without
    the offset; statsmodels' predict with exposure 1 or offset 0). A scikit-learn log-link
    regressor fitted on rates (y / exposure, with sample_weight exposure for Poisson) takes
    `exposure="..."` (or `offset="..."`, the log of one) the same way: its prediction
    times the exposure is the expected count the artifacts output, its prediction itself
    the rate."""
    model, result = freeze_checked(estimator, feature_names=feature_names, name=name,
                                   check_rows=check_rows, preprocessor=preprocessor,
                                   task=task, classes=classes, offset=offset,
                                   exposure=exposure)
    for note in result.notes:
        warnings.warn(note, FreezeNote, stacklevel=2)
    return model


def freeze_checked(estimator, feature_names=None, name=None, check_rows=None,
                   preprocessor=None, task=None, classes=None, offset=None, exposure=None
                   ) -> tuple[FrozenModel, CheckResult]:
    """Freeze, mark boolean features from the check rows' dtypes, and self-check."""
    if is_torch_module(estimator):
        return freeze_torch_checked(estimator, feature_names, name, check_rows, preprocessor,
                                    task, classes)
    if preprocessor is not None or task is not None or classes is not None:
        raise ScorewrightError("preprocessor, task and classes apply to a torch module only")
    if is_statsmodels(estimator):
        model = freeze_results(estimator, feature_names=feature_names, name=name,
                               offset=offset, exposure=exposure)
        source = ResultsSource(estimator, model)
    else:
        model = freeze_estimator(estimator, feature_names=feature_names, name=name)
        source = estimator
        if offset is not None and exposure is not None:
            raise ScorewrightError("offset and exposure: give one (an exposure is the offset "
                                   "log(exposure))")
        for attr, column in (("offset", offset), ("exposure", exposure)):
            if column is not None:
                # a scikit-learn regressor fitted on rates (sample_weight e for Poisson):
                # the artifacts take the column and output the expected count
                if not isinstance(column, str) or not column:
                    raise ScorewrightError(f"{attr}: expected a column name, got {column!r}")
                model = with_offset(model, attr, column)
                source = RateSource(estimator, attr, column, feature_order(model))
    frame = check_frame(check_rows, feature_order(model))
    if frame is not None:
        model = mark_booleans(model, frame)
    result = check_model(source, model, frame)
    result.rules += model.provenance.get("notes", [])
    return model, result


def freeze_torch_checked(module, feature_names, name, check_rows, preprocessor, task,
                         classes) -> tuple[FrozenModel, CheckResult]:
    """A torch linear model frozen as the scikit-learn model of the same function, checked
    against it (1e-12), then against torch's own float32 forward pass (FLOAT32_TOLERANCE)."""
    import torch

    pipeline, task = source_pipeline(module, feature_names, preprocessor, task, classes)
    model = freeze_estimator(pipeline, feature_names=feature_names, name=name or "linear")
    layers = "".join(type(x).__name__ + ", " for x in getattr(module, "_modules", {}).values())
    source = (f"PyTorch {type(module).__name__}"
              + (f"({layers[:-2]})" if layers else "")
              + ("" if preprocessor is None else f" after scikit-learn "
                 f"{type(preprocessor).__name__}")
              + f", task {task}; float32 weights frozen exactly as doubles")
    prov = dict(model.provenance, source=source)
    prov["libraries"] = dict(prov.get("libraries", {}), torch=torch.__version__)
    model = replace(model, provenance=prov).sealed()
    frame = check_frame(check_rows, feature_order(model))
    if frame is not None:
        model = mark_booleans(model, frame)
    result = check_model(pipeline, model, frame)
    rows = frame if frame is not None else check_frame([base_row(model)], feature_order(model))
    gap = float32_gap(module, pipeline, task, rows)
    if not gap <= FLOAT32_TOLERANCE:
        raise FreezeMismatch(f"self-check failed: the frozen model differs from torch's "
                             f"float32 forward pass by {gap:.3g} (more than "
                             f"{FLOAT32_TOLERANCE:g}); nothing was written")
    result.rules.append(f"torch computes in float32: the frozen model (the weights as "
                        f"doubles, computed in double) meets torch's float32 forward pass "
                        f"within {gap:.2g} on {len(rows)} check row"
                        f"{'s' if len(rows) != 1 else ''} (limit {FLOAT32_TOLERANCE:g})")
    return model, result


def check_frame(rows, names):
    """The check rows as a DataFrame (None when there are none)."""
    if rows is None:
        return None
    import numpy as np
    import pandas as pd

    if isinstance(rows, pd.DataFrame):
        return rows
    if isinstance(rows, np.ndarray):
        if rows.ndim != 2 or rows.shape[1] != len(names):
            raise ScorewrightError(f"check_rows: expected {len(names)} columns, got shape "
                                   f"{rows.shape}")
        return pd.DataFrame(rows, columns=names)
    try:
        return pd.DataFrame(list(rows))
    except (TypeError, ValueError) as exc:
        raise ScorewrightError(f"check_rows: not a table of rows ({exc})") from None


def read_check_data(path: Path):
    """Check rows from a CSV file (read as pandas reads it by default: numbers,
    True/False as bool, the rest text) or a Parquet file."""
    import pandas as pd

    if not path.is_file():
        raise ScorewrightError(f"--check-data {path}: no such file")
    try:
        if path.suffix.lower() in (".parquet", ".pq") or path.read_bytes()[:4] == b"PAR1":
            frame = pd.read_parquet(path)
        else:
            frame = pd.read_csv(path)
    except Exception as exc:  # readers raise many kinds for a damaged file
        raise ScorewrightError(f"--check-data {path}: not a readable table "
                               f"({' '.join(str(exc).split())[:200]})") from None
    if len(frame) == 0:
        raise ScorewrightError(f"--check-data {path}: no data rows")
    return frame


def mark_booleans(model: FrozenModel, frame) -> FrozenModel:
    """Numeric features whose check column is bool were fitted on booleans."""
    import pandas as pd

    names = {c for c in frame.columns if pd.api.types.is_bool_dtype(frame[c].dtype)}
    return mark_boolean_features(model, names)


def mark_boolean_features(model: FrozenModel, names) -> FrozenModel:
    """The model with the named numeric features marked boolean (fitted on booleans)."""
    features = tuple(replace(f, boolean=True) if isinstance(f, NumericFeature)
                     and f.name in names and not f.boolean and f.role is None else f
                     for f in model.features)  # an offset or exposure is a number
    if features == model.features:
        return model
    return replace(model, features=features).sealed()


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

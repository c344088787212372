"""`scorewright fit`: from a data file to a validated, frozen model.

The frozen model's provenance records the data file's SHA-256 and shape, the
chosen hyperparameters, the seed, the metrics and the cautions. It holds no
timestamp, so the same data, options and libraries give the same model file.
"""

from __future__ import annotations

import math
import shlex
import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from ..errors import ScorewrightError
from ..model import FrozenModel
from . import diagnostics, metrics
from .cut import FrozenCut, parse_cut, reconcile
from .data import Table, read_table
from .labels import Label, log_link_power, read_label
from .pipeline import Spec, check_spec
from .schema import Schema, infer_schema, summary_lines
from .validation import Validation, fitted_inference, predict, validate

CAUTIONS = (
    "A fitted model is decision support, not a decision: read its errors and its "
    "uncertainty before acting on a score.",
    "Validate it on data from the sites and the period where it will be used; a model "
    "checked only on the data it was fitted from has not been validated.",
    "Scoring code that drives equipment or decides about people needs review under the "
    "applicable safety, fairness and local regulations before it is deployed.",
)


@dataclass(frozen=True)
class FitOptions:
    label: str
    positive: str | None = None
    features: list | None = None
    drop: list | None = None
    categorical: list | None = None
    numeric: list | None = None
    max_levels: int = 30
    model: str | None = None
    penalty: str | None = None  # None: l2, or none for a negative binomial model
    cv: int = 5
    class_weight: str | None = None
    cut: str | None = None
    seed: int = 0
    test_fraction: float = 0.25
    name: str | None = None
    exposure: str | None = None   # a column: fit the rate, output the expected count
    offset: str | None = None     # a column added to the margin (log scale)
    weights: str | None = None    # a column of non-negative row weights


@dataclass
class FitResult:
    model: FrozenModel
    table: Table
    schema: Schema
    label: Label
    spec: Spec
    validation: Validation
    summary: list[str]
    test: dict = field(default_factory=dict)
    test_confusion: list | None = None
    test_calibration: list | None = None
    cv_calibration: list | None = None
    test_y: np.ndarray | None = None
    test_output: np.ndarray | None = None      # probabilities (n, C) or values (n,)
    inference: object = None
    frozen_cut: FrozenCut | None = None
    reference_gap: float = 0.0                 # max |reference - scikit-learn| on test rows
    columns: dict = field(default_factory=dict)  # exposure/offset/weights values per row
    self_check: object = None                  # freeze.self_check.CheckResult
    notes: list = field(default_factory=list)


def _check_options(opts: FitOptions) -> None:
    if opts.cv < 2:
        raise ScorewrightError(f"--cv {opts.cv}: cross-validation needs at least 2 folds")
    if not 0.0 <= opts.test_fraction <= 0.5:
        raise ScorewrightError(f"--test-fraction {opts.test_fraction}: expected a share "
                               "between 0 (no test part) and 0.5")
    if opts.max_levels < 2:
        raise ScorewrightError("--max-levels must be at least 2")
    if opts.class_weight not in (None, "balanced"):
        raise ScorewrightError(f"--class-weight: expected balanced, got {opts.class_weight!r}")


def fit_file(path: str | Path, opts: FitOptions, progress: bool = True, echo=None) -> FitResult:
    return fit_table(read_table(path), opts, progress=progress, echo=echo)


def fit_table(table: Table, opts: FitOptions, progress: bool = True, echo=None) -> FitResult:
    echo = echo or (lambda line: None)
    _check_options(opts)
    frame = table.frame
    label = None
    if opts.label in frame.columns:  # label faults first: they matter more than columns
        label = read_label(frame[opts.label], opts.label, opts.model, opts.positive)
    extra = _extra_columns(frame, opts, label)
    drop = list(opts.drop or []) + [c for c in extra if c not in (opts.drop or [])]
    schema, x = infer_schema(frame, opts.label, opts.features, drop, opts.categorical,
                             opts.numeric, opts.max_levels)
    summary = summary_lines(schema, len(frame))
    if label.missing:
        summary.append(f"left out {label.missing} of {len(frame)} rows with no label "
                       f"{opts.label!r}")
    x = x[label.kept].reset_index(drop=True)
    columns, label, x, lines = _use_extra_columns(extra, label, x, frame)
    summary += lines
    for name in schema.columns:
        if x[name.name].isna().all():
            raise ScorewrightError(f"column {name.name!r} has no values in the labelled rows; "
                                   f"leave it out with --drop {shlex.quote(name.name)}")
    penalty = opts.penalty or ("none" if label.model == "negative-binomial" else "l2")
    spec = Spec(label.model, penalty, opts.class_weight, opts.seed)
    check_spec(spec)
    if opts.cut is not None and label.model != "logistic":
        raise ScorewrightError(f"--cut applies to a binary (logistic) model, not {label.model}")
    rule = parse_cut(opts.cut) if label.model == "logistic" else None
    summary.append(_task_line(label, spec))
    for line in summary:
        echo(line)
    v = validate(schema, x, label, spec, rule, opts.cv, opts.test_fraction, progress=progress,
                 columns=columns)
    result = FitResult(None, table, schema, label, spec, v, summary)
    result.columns = columns
    for attr in ("exposure", "offset"):
        if attr in columns:
            x[getattr(opts, attr)] = columns[attr]
    model = _freeze(result, x, opts)
    model = _score_and_cut(result, model, x)
    result.notes = _notes(result, x)
    result.model = _with_provenance(model, result, opts)
    return result


def _extra_columns(frame, opts: FitOptions, label: Label) -> dict:
    """{column: kind} of --exposure, --offset and --weights, checked against the data and
    the model."""
    extra = {}
    for kind in ("exposure", "offset", "weights"):
        column = getattr(opts, kind)
        if column is None:
            continue
        if column not in frame.columns:
            raise ScorewrightError(f"--{kind}: no column named {column!r} in the data")
        if column == opts.label:
            raise ScorewrightError(f"--{kind} {column!r} is the label")
        if column in extra:
            raise ScorewrightError(f"--{kind} {column!r} is already the --{extra[column]}")
        if kind == "weights" and label.model == "negative-binomial":
            raise ScorewrightError("--weights is not available for --model negative-binomial "
                                   "(statsmodels' NegativeBinomial takes no row weights)")
        if kind != "weights" and log_link_power(label.model) is None:
            raise ScorewrightError(f"--{kind} applies to a count or amount model with a log "
                                   f"link (poisson, gamma, tweedie), not --model {label.model}")
        extra[column] = kind
    if opts.exposure is not None and opts.offset is not None:
        raise ScorewrightError("--exposure and --offset: give one (an exposure is the offset "
                               "log(exposure))")
    return extra


def _use_extra_columns(extra: dict, label: Label, x, frame):
    """The values of the extra columns on the labelled rows; rows where one is unusable
    (a missing or non-positive exposure, a missing offset, a missing or negative weight)
    are left out of the fit and counted."""
    import pandas as pd

    columns, lines = {}, []
    keep = np.ones(len(label.y), dtype=bool)
    for column, kind in extra.items():
        raw = pd.Series(frame[column].to_numpy(dtype=object)[label.kept])
        values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=np.float64)
        ok = np.isfinite(values)
        if kind == "exposure":
            ok &= values > 0
        if kind == "weights":
            if np.any(ok & (values < 0)):
                raise ScorewrightError(f"--weights {column!r} has negative values")
        bad = int((~ok).sum())
        if bad:
            what = {"exposure": "no positive exposure", "offset": "no offset",
                    "weights": "no weight"}[kind]
            lines.append(f"left out {bad} labelled rows with {what} {column!r}")
        keep &= ok
        columns[kind] = values
    if not extra:
        return columns, label, x, lines
    if not keep.any():
        raise ScorewrightError("no labelled row has every --exposure/--offset/--weights value")
    columns = {k: v[keep] for k, v in columns.items()}
    kept = label.kept.copy()
    kept[np.flatnonzero(label.kept)[~keep]] = False
    label = replace(label, y=label.y[keep], kept=kept)
    x = x[keep].reset_index(drop=True)
    if "exposure" in columns or "offset" in columns:
        kind = "exposure" if "exposure" in columns else "offset"
        lines.append(f"{kind} {dict((v, k) for k, v in extra.items())[kind]!r}: the model "
                     "fits the rate and outputs the expected count (predicted_value) and "
                     "the rate (predicted_rate)")
    return columns, label, x, lines


def _task_line(label: Label, spec: Spec) -> str:
    what = {"logistic": "binary logistic", "multinomial": "multinomial logistic",
            "linear": "linear regression", "poisson": "Poisson regression (log link)",
            "gamma": "gamma regression (log link)",
            "negative-binomial": "negative binomial regression (NB2, log link)"}
    name = what.get(spec.model) or (f"Tweedie regression, power {spec.model.split(':')[1]} "
                                    "(log link)")
    line = f"model: {name}, penalty {spec.penalty}"
    if spec.model == "logistic":
        line += f", positive class {label.classes[1]!r}"
    if spec.class_weight:
        line += ", balanced class weights"
    return line + " (change with --model, --penalty)"


def _freeze(result: FitResult, x, opts: FitOptions) -> FrozenModel:
    """Freeze the refitted pipeline and prove it: the frozen model must score every
    labelled row, and rows derived from it, like the pipeline itself."""
    from ..freeze import mark_boolean_features
    from ..freeze.self_check import check_model
    from ..freeze.sklearn import freeze_estimator

    from ..freeze.offsets import RateSource, with_offset

    pipeline, label = result.validation.pipeline, result.label
    model = freeze_estimator(pipeline, name=opts.name or opts.label)
    booleans = {c.name for c in result.schema.columns if c.boolean}
    model = mark_boolean_features(model, booleans)
    source = pipeline
    for attr in ("exposure", "offset"):
        column = getattr(opts, attr)
        if column is not None:
            model = with_offset(model, attr, column)
            source = RateSource(pipeline, attr, column, [f.name for f in model.features])
    result.self_check = check_model(source, model, x)
    if label.classes is not None:
        model = replace(model, head=replace(model.head, classes=tuple(label.classes)))
    return model


def _score_and_cut(result: FitResult, model: FrozenModel, x) -> FrozenModel:
    """Score every row with the reference evaluator; fix the binary cut so that
    `margin > cut` reproduces `probability > p*` on them; evaluate the test part."""
    from ..plan import build_plan
    from ..reference import encode_rows, score_matrix

    v, spec, label = result.validation, result.spec, result.label
    rows = x.to_dict("records")
    out = score_matrix(build_plan(model), encode_rows(build_plan(model), rows))
    if spec.model == "logistic":
        fc = reconcile(v.threshold, out["margins"][:, 0], out["probabilities"][:, 1])
        result.frozen_cut = fc
        model = replace(model, head=replace(model.head, cut=fc.cut))
        out = score_matrix(build_plan(model), encode_rows(build_plan(model), rows))
    if v.oof_pred is not None and spec.model == "logistic":
        result.cv_calibration = metrics.calibration_table(v.oof_y, v.oof_pred[:, 1])
    test = v.test_index
    if len(test) == 0:
        return model
    y = label.y[test]
    result.test_y = y
    sk = v.terms.count(predict(v.pipeline, spec, x.iloc[test]), test)
    if spec.classifier:
        proba = out["probabilities"][test]
        result.test_output = proba
        predicted = out["class_index"][test]
        result.test = metrics.classification_metrics(y, proba, predicted)
        result.test_confusion = metrics.confusion(y, predicted, len(label.classes)).tolist()
        if spec.model == "logistic":
            result.test_calibration = metrics.calibration_table(y, proba[:, 1])
        result.reference_gap = float(np.max(np.abs(proba - sk)))
    else:
        value = out["value"][test]
        result.test_output = value
        result.test = metrics.regression_metrics(y, value, spec.model)
        result.reference_gap = float(np.max(np.abs(value - sk)))
    return model


def _notes(result: FitResult, x) -> list[str]:
    v, spec, label, schema = result.validation, result.spec, result.label, result.schema
    notes = list(v.notes)
    train = v.train_index
    if spec.classifier:
        notes += diagnostics.imbalance_notes(label.y, label.classes)
        notes += diagnostics.separation_notes(x.iloc[train].reset_index(drop=True), schema,
                                              label.y[train], label.classes)
    if spec.penalty == "none" and spec.model != "multinomial":
        if spec.class_weight is None and "weights" not in result.columns:
            result.inference = fitted_inference(v, schema, x, label, spec)
        elif "weights" in result.columns:
            notes.append("no standard errors or p-values: the inference table is computed "
                         "for an unweighted fit")
    if spec.model == "logistic" and spec.penalty == "none":
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            p = v.pipeline.predict_proba(x.iloc[train])[:, 1]
        note = diagnostics.fitted_extremes_note(p)
        if note:
            notes.append(note)
    if result.inference is not None and result.inference.condition > 1e12:
        notes.append(f"the information matrix is nearly singular (condition number "
                     f"{result.inference.condition:.2g}): collinear columns or "
                     "separation; standard errors are unreliable")
    if spec.penalty != "none" or spec.model == "multinomial":
        notes.append("no standard errors or p-values: they are computed for an unpenalized "
                     "fit (--penalty none) of a binary, linear or log-link model; penalized "
                     "estimates are biased toward zero by design")
    if spec.penalty == "none" and schema.categorical:
        notes.append("unpenalized fit: each categorical column has a reference level (its "
                     "most frequent); an unseen level scores as that reference level")
    fc = result.frozen_cut
    if fc is not None and not fc.agrees:
        notes.append("the frozen margin cut could not reproduce every probability decision "
                     "on the data rows")
    if result.reference_gap > 1e-12:
        notes.append(f"the frozen model's test predictions differ from scikit-learn's by up "
                     f"to {result.reference_gap:.3g}")
    return notes


def _clean(value):
    """JSON-ready: finite floats, None for NaN and infinities, plain Python types."""
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, np.ndarray):
        return _clean(value.tolist())
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _with_provenance(model: FrozenModel, r: FitResult, opts: FitOptions) -> FrozenModel:
    from ..freeze.provenance import library_versions
    import pandas

    v = r.validation
    libraries = dict(library_versions(), pandas=pandas.__version__)
    data = {
        "file": r.table.path.name, "format": r.table.file_format, "sha256": r.table.sha256,
        "rows": int(len(r.table.frame)), "columns": int(len(r.table.frame.columns)),
        "rows_without_label": r.label.missing, "rows_train": v.n_train, "rows_test": v.n_test,
        "label": r.label.name,
        "numeric": r.schema.numeric, "categorical": r.schema.categorical,
        "left_out": {name: reason for name, reason in r.schema.excluded},
    }
    created = {
        "by": "scorewright fit", "model": r.spec.model, "penalty": r.spec.penalty,
        r.spec.strength_name: v.chosen, "strength_grid": v.grid,
        "class_weight": r.spec.class_weight, "cv_folds": opts.cv,
        "test_fraction": opts.test_fraction, "seed": opts.seed,
        "exposure": opts.exposure, "offset": opts.offset, "weights": opts.weights,
        "selection": f"lowest mean cross-validated {v.loss_name}",
    }
    alpha = getattr(v.pipeline.named_steps["estimate"], "alpha_", None)
    if r.spec.model == "negative-binomial" and alpha is not None:
        created["nb2_alpha"] = alpha  # the dispersion: variance mu + alpha mu^2
    created["self_check"] = r.self_check.summary()
    if r.self_check.notes:
        created["self_check_notes"] = r.self_check.notes
    if r.frozen_cut is not None:
        created["cut"] = {"rule": opts.cut or "0.5", "probability": r.frozen_cut.threshold,
                          "margin": r.frozen_cut.cut, "moved_for_rounding": r.frozen_cut.moved,
                          "rows_checked": r.frozen_cut.rows}
    measured = {"cv": v.cv, "test": r.test or None, "test_confusion": r.test_confusion}
    if r.inference is not None:
        measured["coefficients"] = r.inference.table()
    prov = dict(model.provenance)
    prov["libraries"] = libraries
    prov["inputs"] = dict(prov.get("inputs", {}), data=data)
    prov["created"] = created
    prov["metrics"] = measured
    prov["notes"] = list(r.notes) + list(CAUTIONS)
    return replace(model, provenance=_clean(prov)).sealed()

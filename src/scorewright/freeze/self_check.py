"""The self-check: the frozen model against the estimator it was frozen from.

Verify proves that artifacts equal the frozen model; this proves that the frozen
model equals what the user fitted. Rows (the user's, plus rows derived from the
model: missing values in both spellings, unseen levels, every level, booleans,
extremes) are scored by the source estimator itself (predict_proba / predict)
and by the frozen model's reference evaluator. Any probability that differs by
more than 1e-12 (absolute), or any value by more than 1e-12 (relative, see
`_differs` for values near zero), refuses the model, naming the first differing row.
A "decision" head (a classifier without probabilities) is held to the source's
decision_function (1e-12 relative, as a value) and to its predict exactly; the one
excuse is a row whose margin (binary) or gap between the two largest margins lies
within that rounding of the boundary, where the source's matrix product, summing in
its own order, may land on the other side (counted as `boundary`).

Rows the source estimator cannot score (it raises, e.g. on an unseen level with
handle_unknown='error' or on a missing value with no imputer, or it overflows)
have no answer to compare with; they are counted, not compared.

One known difference is stated instead of failed: scikit-learn's SimpleImputer
imputes NaN but not None in an object (text) column (`_get_mask` compares with
NaN through `_object_dtype_isnan`, which None is not), so the source model reads
a None category as unseen where it imputes a NaN. The frozen model reads both as
missing; a row that differs only through that spelling is reported as a note.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from ..errors import ScorewrightError
from ..model import (DECISION, TRANSFORM_DOMAIN, CategoricalFeature, FrozenModel,
                     NumericFeature)

TOLERANCE = 1e-12
UNSEEN_TEXT = "\u2063unseen level"   # an invisible separator: no real level starts so
REFUSAL_BUDGET = 500                 # failed source calls before the rest is left unscored
DERIVED_FEATURES = 32                # features varied one at a time in derived rows
EXTREME = 100.0                      # times the feature's own scale, see _extremes


class FreezeMismatch(ScorewrightError):
    """The frozen model does not score like its source estimator."""


class FreezeNote(UserWarning):
    """Something the self-check found worth saying (scorewright.freeze warns with it)."""


@dataclass
class CheckResult:
    compared: int = 0        # rows both sides scored and compared
    derived: int = 0         # of which rows derived from the model
    unscored: int = 0        # rows the source estimator could not score
    guarded: int = 0         # rows whose log-link margin meets the frozen exp guard
    boundary: int = 0        # decision rows within rounding of a tie whose class differs
    none_rules: dict = field(default_factory=dict)  # column -> the frozen model's rule
    rules: list = field(default_factory=list)  # rules the frozen model states for what
    #                                            the source cannot score

    @property
    def notes(self) -> list[str]:
        if not self.none_rules:
            return list(self.rules)
        plural = "s" if len(self.none_rules) > 1 else ""
        cols = ", ".join(map(repr, self.none_rules))
        return [f"the source model reads None in text column{plural} {cols} differently from NaN (scikit-learn's SimpleImputer imputes NaN but "
                "not None in an object column, so None scores as an unseen level there); "
                "the frozen model reads both as missing: "
                + "; ".join(self.none_rules.values())] + list(self.rules)

    def summary(self) -> str:
        line = (f"self-check: the frozen model scores {_rows(self.compared)} "
                f"({self.derived} derived from the model) like the source estimator "
                f"(within {TOLERANCE:g})")
        if self.unscored:
            line += (f"; {_rows(self.unscored)} the source estimator cannot score "
                     f"{'were' if self.unscored > 1 else 'was'} skipped")
        if self.boundary:
            line += (f"; {_rows(self.boundary)} whose decision function is within rounding "
                     "of the class boundary gave the other class")
        if self.guarded:
            line += (f"; {_rows(self.guarded)} whose margin is beyond the frozen model's exp "
                     "guard (where it clamps by design) not compared")
        return line


def _rows(n: int) -> str:
    return f"{n} row" if n == 1 else f"{n} rows"


def feature_order(model: FrozenModel) -> list[str]:
    """The source estimator's input columns, in its order."""
    names = model.provenance.get("inputs", {}).get("feature_names")
    return list(names) if names else [f.name for f in model.features]


def check_model(estimator, model: FrozenModel, frame=None) -> CheckResult:
    """Score `frame` (a DataFrame of raw inputs, may be None) and derived rows with
    both sides; raise FreezeMismatch at the first row that differs."""
    names = feature_order(model)
    result = CheckResult()
    batches = []
    if frame is not None and len(frame):
        batches.append(("data row", _user_frame(frame, names)))
    base = _base_row(model, batches[0][1] if batches else None)
    derived = _derived_frames(model, names, base)
    batches += [("derived row", f) for f in derived]
    for what, batch in batches:
        compared = result.compared
        _check_batch(estimator, model, names, batch, what, result)
        if what == "derived row":
            result.derived += result.compared - compared
    return result


# ---------------------------------------------------------------- rows

def _user_frame(frame, names):
    missing = [n for n in names if n not in frame.columns]
    if missing:
        raise ScorewrightError(f"the check data has no column {missing[0]!r} (the model "
                               f"takes {', '.join(map(repr, names[:6]))}"
                               f"{', ...' if len(names) > 6 else ''})")
    return frame[names].reset_index(drop=True)


def _plain(value):
    """A cell as a plain Python value (pandas' NA and NaT as None)."""
    if isinstance(value, np.generic):
        value = value.item()
    if type(value).__name__ in ("NAType", "NaTType"):
        return None
    return value


def base_row(model: FrozenModel) -> dict:
    """A plain row of the model's inputs (each feature's fill, or a plain value)."""
    return _base_row(model, None)


def _base_row(model: FrozenModel, frame) -> dict:
    """The row derived rows vary one cell of: the first data row, else each feature's
    fill (or a plain value)."""
    if frame is not None:
        return {k: _plain(v) for k, v in frame.iloc[0].items()}
    row = {}
    for feat in model.features:
        if isinstance(feat, NumericFeature):
            plain = 1.0 if feat.scaling and feat.scaling[0].op in TRANSFORM_DOMAIN else 0.0
            row[feat.name] = feat.fill if feat.fill is not None else plain
            if feat.boolean:
                row[feat.name] = False
        else:
            row[feat.name] = feat.fill if feat.fill is not None else feat.levels[0]
    return row  # inputs the estimator drops stay absent (None)


def _extremes(feat: NumericFeature) -> list[float]:
    """Far readings on the feature's own scale (its scaling steps' size), both signs:
    a hundred spreads out, beyond any clip, yet inside the range where neither side
    saturates (the frozen model's guards then change nothing)."""
    size = max([abs(s.value) for s in feat.scaling if s.value is not None]
               + [abs(e) for s in feat.scaling
                  for e in (s.edges or s.knots or s.quantiles or ())] + [1.0])
    out = [EXTREME * size, -EXTREME * size]
    edges = feat.scaling[0].edges or feat.scaling[0].knots or feat.scaling[0].quantiles \
        if feat.scaling else None
    if edges is not None:  # every bin edge, spline knot or quantile, either side
        out += [x for e in edges
                for x in (e, math.nextafter(e, math.inf), math.nextafter(e, -math.inf))]
    elif feat.scaling and feat.scaling[0].op in TRANSFORM_DOMAIN:
        # a transform's domain edge and values just inside it
        edge = TRANSFORM_DOMAIN[feat.scaling[0].op][0]
        out += [edge, math.nextafter(edge, math.inf), edge + 1e-300, 5e-324]
    return out


def _derived_frames(model: FrozenModel, names, base) -> list:
    """Rows that each change one cell of the base row, missing cells first (a source
    model without an imputer refuses them, and refusals that sit together cost few
    calls to find). Numeric columns are float64 (a missing value is NaN, as pandas
    stores it); text-level columns are object, so None and NaN stay two spellings.
    Booleans come in their own frame, as a bool column (the dtype the source model
    was fitted on)."""
    missing: list[dict] = []
    others: list[dict] = []
    bool_rows: list[dict] = []
    for feat in _sampled(model.features):
        name = feat.name
        if isinstance(feat, NumericFeature) and feat.boolean:
            bool_rows += [dict(base, **{name: v}) for v in (True, False)]
        elif isinstance(feat, NumericFeature):
            missing.append(dict(base, **{name: math.nan}))
            others += [dict(base, **{name: v}) for v in _extremes(feat)]
        else:
            unseen = (max(feat.levels) + 1000 if isinstance(feat.levels[0], int)
                      else UNSEEN_TEXT)
            missing += [dict(base, **{name: v}) for v in (None, math.nan)]
            others += [dict(base, **{name: v}) for v in (unseen,) + tuple(feat.levels)]
    kinds = {f.name: f for f in model.features}
    frames = []
    if missing or others:
        frames.append(_typed_frame(missing + others, names, kinds, booleans_as_bool=False))
    if bool_rows:
        frames.append(_typed_frame(bool_rows, names, kinds, booleans_as_bool=True))
    return frames


def _sampled(features) -> list:
    """Every feature, or an evenly spread DERIVED_FEATURES of a wide model: each
    derived row is a whole row, so varying every feature of a wide model one at a
    time would cost features squared cells (the data rows still cover them all)."""
    if len(features) <= DERIVED_FEATURES:
        return list(features)
    step = len(features) / DERIVED_FEATURES
    return [features[int(i * step)] for i in range(DERIVED_FEATURES)]


def _typed_frame(rows, names, kinds, booleans_as_bool):
    """Numeric and integer-level columns as float64 (NaN for missing, as pandas holds
    a column of numbers with gaps); text-level columns as object."""
    import pandas as pd

    from ..values import numeric_value

    columns = {}
    for name in names:
        feat = kinds.get(name)
        values = [row.get(name) for row in rows]
        if feat is None:  # an input the estimator drops: any value does
            columns[name] = pd.Series(values, dtype=object)
        elif isinstance(feat, NumericFeature) and feat.boolean and booleans_as_bool:
            columns[name] = pd.Series([bool(v) for v in values], dtype=bool)
        elif isinstance(feat, NumericFeature) or isinstance(feat.levels[0], int):
            numbers = [numeric_value(v, getattr(feat, "boolean", False)) for v in values]
            columns[name] = pd.Series([math.nan if v is None else v for v in numbers],
                                      dtype=np.float64)
        else:
            columns[name] = pd.Series(values, dtype=object)
    return pd.DataFrame(columns)


# ---------------------------------------------------------------- scoring

def _records(frame) -> list[dict]:
    cols = list(frame.columns)
    return [{c: _plain(v) for c, v in zip(cols, row)}
            for row in frame.itertuples(index=False, name=None)]


def _reference(model: FrozenModel, records):
    """The reference outputs (n, outputs), each row's margin scale (n,), and which
    rows meet the log link's guard (n,): there the frozen model clamps the exp
    argument by design, where scikit-learn underflows to 0 or overflows. A model with an
    offset or exposure has two outputs, the expected count and the rate, and a row is
    guarded where either margin is."""
    from ..plan import build_plan
    from ..program import run_matrix
    from ..reference import encode_rows, margin_scale, program_of, score_matrix

    plan = build_plan(model)
    matrix = encode_rows(plan, records)
    out = score_matrix(plan, matrix)
    scale = margin_scale(plan, matrix).max(axis=1)
    if model.head.link == DECISION:  # the margins, then the class index
        return (np.column_stack([out["margins"], out["class_index"].astype(np.float64)]),
                scale, np.zeros(len(records), dtype=bool))
    if model.head.task != "regression":
        return out["probabilities"], scale, np.zeros(len(records), dtype=bool)
    guarded = _guarded(plan, out["margins"][:, 0])
    if plan.offset is None:
        return out["value"].reshape(-1, 1), scale, guarded
    rate_margin = run_matrix(program_of(plan), matrix)["margin_1"]
    guarded = guarded | _guarded(plan, rate_margin)
    return np.column_stack([out["value"], out["rate"]]), scale, guarded


def _guarded(plan, m) -> np.ndarray:
    """Rows whose regression margin meets the link's guard."""
    guarded = np.zeros(len(m), dtype=bool)
    if plan.link in ("log", "log1p"):
        guarded = (m < -plan.precision.exp_guard) | (m > plan.precision.log_link_max)
    elif plan.link == "sqrt":
        guarded = np.abs(m) > math.sqrt(plan.precision.max_value)
    elif plan.link == "inverse":
        from ..program import inverse_floor
        guarded = np.abs(m) < inverse_floor(plan)
    return guarded


def _source(estimator, frame, classifier, errors: list | None = None) -> np.ndarray:
    """The source estimator's outputs, one row per input row; NaN rows where it
    cannot score a row (found by halving a batch that raises). The first error
    of a row it refuses is appended to `errors`. `classifier`: False (predict), True
    (predict_proba) or a decision head's classes (decision_function, then the index of
    predict's class)."""
    n = len(frame)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # unseen levels: warned about, then encoded
            x = frame if getattr(estimator, "feature_names_in_", None) is not None \
                else frame.to_numpy()
            if isinstance(classifier, tuple):
                out = _decisions(estimator, x, classifier)
            else:
                out = estimator.predict_proba(x) if classifier else estimator.predict(x)
        out = np.asarray(out, dtype=np.float64)
        return out.reshape(n, -1)
    except Exception as exc:  # the estimator may refuse a row in any way it likes
        errors = [] if errors is None else errors
        if not errors:
            errors.append(f"{type(exc).__name__}: {' '.join(str(exc).split())[:160]}")
        errors.append(None)  # one more refusal: past the budget, stop looking for rows
        if n == 1 or len(errors) > REFUSAL_BUDGET:
            return np.full((n, 1), math.nan)
        half = n // 2
        first = _source(estimator, frame.iloc[:half], classifier, errors)
        second = _source(estimator, frame.iloc[half:], classifier, errors)
        width = max(first.shape[1], second.shape[1])
        return np.vstack([_widen(first, width), _widen(second, width)])


def _decisions(estimator, x, classes: tuple) -> np.ndarray:
    """decision_function's margins (n, K) beside the index in `classes` of predict's
    class (the frozen model's class_index; -1, which differs from every index, for a
    label the frozen model does not have)."""
    from .sklearn import _class_label

    margins = np.asarray(estimator.decision_function(x), dtype=np.float64)
    index = {c: i for i, c in enumerate(classes)}
    labels = [index.get(_class_label(v, "predict"), -1) for v in estimator.predict(x)]
    return np.column_stack([margins.reshape(len(labels), -1), np.asarray(labels, float)])


def _widen(block, width):
    if block.shape[1] == width:
        return block
    return np.full((block.shape[0], width), math.nan)


def _differs(model: FrozenModel, source: np.ndarray, ref: np.ndarray,
             work: np.ndarray) -> np.ndarray:
    """Rows where the two sides differ: probabilities by more than TOLERANCE, values
    by more than TOLERANCE relative. scikit-learn sums a margin as a matrix product,
    in its own order, so its rounding is relative to the margin's terms (`work`), not
    to the value: an identity-link value near zero may come from terms of size 10,
    and a log-link value carries the margin's absolute rounding as relative error."""
    gap = np.abs(source - ref)
    if model.head.link == DECISION:
        return _decision_differs(source, ref, work)
    if model.head.task != "regression":
        return np.any(gap > TOLERANCE, axis=1)
    size = np.maximum(np.abs(source), np.abs(ref))
    if model.head.link == "identity":
        size = np.maximum(size, work[:, None])
    elif model.head.link == "sqrt":  # v = m^2: an error e in m moves v by about 2|m|e
        size = np.maximum(size, 2.0 * np.sqrt(size) * work[:, None])
    elif model.head.link == "log1p":  # v = expm1(m): by about (v + 1) e
        size = np.maximum(size * np.maximum(1.0, work)[:, None], (size + 1.0) * work[:, None])
    else:
        size = size * np.maximum(1.0, work)[:, None]
    return np.any(gap > TOLERANCE * size, axis=1)


def _decision_differs(source, ref, work) -> np.ndarray:
    """A decision head's rows that differ: a margin by more than TOLERANCE relative to
    its terms' size (as an identity-link value), or the class at all."""
    gap = np.abs(source[:, :-1] - ref[:, :-1])
    size = np.maximum(np.maximum(np.abs(source[:, :-1]), np.abs(ref[:, :-1])), work[:, None])
    return np.any(gap > TOLERANCE * size, axis=1) | (source[:, -1] != ref[:, -1])


def _near_boundary(ref, work) -> np.ndarray:
    """A decision head's rows whose frozen margin (binary) or gap between its two largest
    margins lies within TOLERANCE of the terms' size: a sum in another order may take the
    other side there."""
    m = ref[:, :-1]
    if m.shape[1] == 1:
        gap = np.abs(m[:, 0])
    else:
        top = np.sort(m, axis=1)
        gap = top[:, -1] - top[:, -2]
    return gap <= TOLERANCE * work


def _check_batch(estimator, model, names, frame, what, result: CheckResult) -> None:
    classifier = model.head.task != "regression"
    if model.head.link == DECISION:
        classifier = tuple(model.head.classes)
    records = _records(frame)
    ref, work, guarded = _reference(model, records)
    errors: list = []
    source = _source(estimator, frame, classifier, errors)
    scored = np.isfinite(source).all(axis=1)
    if what == "data row" and not scored.any():
        why = errors[0] if errors else "its outputs are not finite"
        raise ScorewrightError(f"self-check: the source estimator scores none of the "
                               f"{_rows(len(frame))} given to check ({why})")
    if source.shape[1] != ref.shape[1]:
        if scored.any():
            raise FreezeMismatch(f"self-check: the source estimator gives {source.shape[1]} "
                                 f"outputs per row, the frozen model {ref.shape[1]}")
        result.unscored += len(frame)
        return
    result.unscored += int((~scored).sum())
    result.guarded += int((scored & guarded).sum())
    scored = scored & ~guarded
    result.compared += int(scored.sum())
    bad = scored & _differs(model, source, ref, work)
    if model.head.link == DECISION:  # a class flipped by rounding at a tie: counted
        margins_agree = ~_decision_differs(source, np.column_stack([ref[:, :-1],
                                                                    source[:, -1]]), work)
        excused = bad & margins_agree & _near_boundary(ref, work)
        result.boundary += int(excused.sum())
        bad = bad & ~excused
    elif classifier and not bad.any():  # a decision head's class is compared above
        _check_decisions(estimator, model, frame, records, ref, scored, what)
    for i in np.flatnonzero(bad):
        cols = _none_spelling(estimator, model, frame.iloc[[int(i)]], ref[i], work[i],
                              classifier)
        if not cols:
            raise FreezeMismatch(_mismatch_message(model, what, int(i), records[i],
                                                   source[i], ref[i]))
        for c in cols:
            result.none_rules.setdefault(c, _missing_rule(model.feature(c), model))


def _check_decisions(estimator, model, frame, records, ref, scored, what) -> None:
    """The source classifier's predict against the frozen model's class, exactly, on rows
    both sides score where neither side's two largest probabilities are within twice
    TOLERANCE of a tie (there the probabilities' agreement cannot decide the class)."""
    classes = getattr(estimator, "classes_", None)
    if classes is None or not hasattr(estimator, "predict"):
        return
    from ..plan import build_plan
    from ..reference import encode_rows, score_matrix

    rows = np.flatnonzero(scored)
    if not len(rows):
        return
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            part = frame.iloc[rows]
            x = part if getattr(estimator, "feature_names_in_", None) is not None \
                else part.to_numpy()
            predicted = list(estimator.predict(x))
    except Exception:  # a row predict refuses was scored by predict_proba: leave it
        return
    plan = build_plan(model)
    index = score_matrix(plan, encode_rows(plan, [records[i] for i in rows]))["class_index"]
    source_p = _source(estimator, frame.iloc[rows], True)
    for j, i in enumerate(rows):
        if _near_tie(ref[i]) or _near_tie(source_p[j]):
            continue
        mine = model.head.classes[int(index[j])]
        if not _same_label(mine, _plain(predicted[j])):
            shown = ", ".join(f"{k}={v!r}" for k, v in list(records[i].items())[:8])
            raise FreezeMismatch(
                "self-check failed: the frozen model does not predict the source estimator's "
                f"class at {what} {int(i) + 1} ({shown}{', ...' if len(records[i]) > 8 else ''})"
                f": source {_plain(predicted[j])!r}, frozen {mine!r}; nothing was written")


def _same_label(frozen, source) -> bool:
    """A frozen class label and the source's: numbers by value (1 and 1.0, True), text as
    text."""
    if isinstance(source, (bool, int, float)) and isinstance(frozen, (int, float)):
        return float(frozen) == float(source)
    return str(frozen) == str(source)


def _near_tie(probabilities) -> bool:
    top = np.sort(np.asarray(probabilities, dtype=np.float64))[-2:]
    return len(top) == 2 and top[1] - top[0] <= 2 * TOLERANCE


def _none_spelling(estimator, model, row_frame, ref_row, work, classifier) -> list[str]:
    """The text columns holding None in a row that differs only because the source
    model reads None there differently from NaN; [] when the difference is real."""
    known = {f.name for f in model.features}
    cols = [c for c in row_frame.columns if c in known and row_frame[c].dtype == object
            and row_frame[c].iloc[0] is None]
    if not cols:
        return []
    fixed = row_frame.copy()
    for c in cols:
        fixed[c] = np.array([math.nan], dtype=object)
    source = _source(estimator, fixed, classifier)[0]
    if not np.all(np.isfinite(source)) or _differs(model, source[None, :], ref_row[None, :],
                                                   np.array([work]))[0]:
        return []
    return cols


def _missing_rule(feat, model=None) -> str:
    if model is not None and any(c.feature == feat.name and c.encoded is not None
                                 for c in model.design):
        return (f"{feat.name!r} None is read as missing, as scikit-learn reads NaN (it "
                "reads None as an unseen level)")
    if isinstance(feat, CategoricalFeature) and feat.fill is not None:
        return f"{feat.name!r} missing takes the level {feat.fill!r}"
    return f"{feat.name!r} missing is treated as an unseen level"


def _mismatch_message(model, what, index, record, source, ref) -> str:
    shown = ", ".join(f"{k}={v!r}" for k, v in list(record.items())[:8])
    if len(record) > 8:
        shown += ", ..."
    if model.head.link == DECISION:
        k = int(np.argmax(np.abs(source[:-1] - ref[:-1])))
        outputs = (f"decision function {k}: source {float(source[k])!r}, frozen "
                   f"{float(ref[k])!r}")
        if source[-1] != ref[-1]:
            label = model.head.classes[int(source[-1])] if source[-1] >= 0 else "another"
            outputs = (f"class: source {label!r}, frozen "
                       f"{model.head.classes[int(ref[-1])]!r} ({outputs})")
    elif model.head.task == "regression":
        k = int(np.argmax(np.abs(source - ref) / np.maximum(np.abs(ref), 1e-300)))
        what_out = ("the expected count: " if k == 0 else "the rate: ") if len(ref) > 1 else ""
        outputs = f"{what_out}source {float(source[k])!r}, frozen {float(ref[k])!r}"
    else:
        k = int(np.argmax(np.abs(source - ref)))
        outputs = (f"probability of class {model.head.classes[k]!r}: source "
                   f"{float(source[k])!r}, frozen {float(ref[k])!r}")
    return (f"self-check failed: the frozen model does not score like the source estimator "
            f"at {what} {index + 1} ({shown}): {outputs}; nothing was written")

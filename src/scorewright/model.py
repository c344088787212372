"""The frozen model: the one exact, versioned file everything downstream reads.

A frozen model holds the feature schema (how each raw input becomes design
columns), the head (task, link, classes, intercepts, coefficient matrix, decision
cut), provenance, and the SHA-256 of its canonical JSON form. Loading is strict:
every defect is a `ModelFileError` whose message names the field.

Floats are written with Python's shortest round-trip repr, so coefficients
survive a write/read cycle bit for bit.
"""

from __future__ import annotations

import hashlib
import itertools
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Union

from .errors import ModelFileError
from .files import write_atomic

FORMAT = "scorewright-frozen-model"
# Version 2 adds the probit and cloglog links and the term kinds of TRANSFORM_OPS, BINS,
# missing indicators, products and encodings; version 3 adds splines (SPLINE); version 4
# adds the "decision" link (a classifier with a decision function and no probabilities), a
# numeric feature's `role` (ROLES: the offset or exposure input), quantile steps (QUANTILE),
# normalized design columns (NORMS) and calibrated heads (the "calibrated" link and the
# head's "calibration"). A model is written in the lowest version that can say it, so
# every model an older version could hold is written as before (its file and sha256
# unchanged); this scorewright reads all.
FORMAT_VERSION = 4
READS_VERSIONS = (1, 2, 3, 4)

SCALING_OPS = ("subtract", "divide", "multiply", "add")
# Transforms: a numeric feature's first step (after the missing-value fill), no value. A raw
# value outside the transform's domain (log: <= 0; log1p: <= -1; sqrt: < 0) is treated as
# missing. Format version 2.
TRANSFORM_OPS = ("log", "log1p", "sqrt")
# Power transforms (format version 3): a numeric feature's first step with a value, the
# fitted lambda, as scikit-learn's PowerTransformer applies it (scipy's yeojohnson; Box-Cox:
# log(x) when |lambda| < 1e-19, else expm1(lambda log x) / lambda). A raw value Box-Cox
# cannot take (<= 0, where scikit-learn raises) is treated as missing.
POWER_OPS = ("yeo_johnson", "box_cox")
# transform -> (edge, whether the edge itself is outside): log x <= 0, log1p x <= -1, sqrt x < 0
TRANSFORM_DOMAIN = {"log": (0.0, True), "log1p": (-1.0, True), "sqrt": (0.0, False),
                    "box_cox": (0.0, True)}
# multiclass "ovr_logit": one-vs-rest logistic, each class's sigmoid divided by their sum;
# regression "log1p": the value is expm1(margin), "sqrt": the value is margin * margin,
# "inverse": 1 / margin (statsmodels' InversePower); binary "cauchit": the Cauchy CDF;
# binary and multiclass "decision": the margins (a decision function) and the class, no
# probabilities (scikit-learn's RidgeClassifier, LinearSVC, Perceptron, SGDClassifier...);
# binary and multiclass "calibrated": the head's `calibration` (format version 4)
DECISION = "decision"
TASK_LINKS = {"binary": ("logit", "probit", "cloglog", "cauchit", "log", DECISION,
                         "calibrated"),
              "multiclass": ("softmax", "ovr_logit", DECISION, "calibrated"),
              "regression": ("identity", "log", "log1p", "sqrt", "inverse")}
# links an older file version cannot hold
LINK_VERSION = {"probit": 2, "cloglog": 2, "ovr_logit": 3, "log1p": 3, "sqrt": 3,
                "inverse": 3, "cauchit": 3, DECISION: 4, "calibrated": 4}

Level = Union[str, int]

# A numeric feature's role (format version 4): "offset", a column added to the margin as
# it is, or "exposure", added through its log; either way with coefficient 1, in one plain
# design column of its own. The scoring program outputs the expected count (the margin
# with it) and the rate (the margin without it; for an exposure, per unit of exposure).
# The rule for a value that gives nothing usable is `freeze.offsets.rule`'s: a missing
# offset counts as 0, a missing or non-positive exposure as 1 (the feature has no fill, so
# its design value is then 0.0). A file of an older version whose provenance names an
# offset column holds it as an ordinary feature: it scores as it always did (the count, no
# rate); provenance is never read for semantics.
ROLES = ("offset", "exposure")


@dataclass(frozen=True)
class ScalingStep:
    op: str
    value: float | None = None  # None for a transform (TRANSFORM_OPS), bins and splines
    edges: tuple[float, ...] | None = None  # bins: the inner edges, increasing
    # spline (format version 3): the whole knot vector t (increasing), the degree k and
    # the extrapolation rule (SPLINE_EXTRAPOLATIONS)
    knots: tuple[float, ...] | None = None
    degree: int | None = None
    extrapolation: str | None = None
    # quantile (format version 4): the fitted quantiles (non-decreasing), their references
    # (non-decreasing, in [0, 1]) and the output distribution (QUANTILE_OUTPUTS)
    quantiles: tuple[float, ...] | None = None
    references: tuple[float, ...] | None = None
    output: str | None = None

    def spline_range(self) -> tuple[float, float]:
        """A spline's base interval [t[k], t[n]] (n = len(t) - k - 1): the range of the
        data it was fitted on."""
        n = len(self.knots) - self.degree - 1
        return self.knots[self.degree], self.knots[n]

    def spline_columns(self) -> int:
        """How many basis columns a spline gives (periodic: k fewer, wrapped)."""
        n = len(self.knots) - self.degree - 1
        return n - self.degree if self.extrapolation == "periodic" else n


# Bins (format version 2): a numeric feature's first step {"op": "bins", "edges": [...]}
# maps a value to the number of inner edges at or below it (its bin, 0..len(edges)),
# as scikit-learn's KBinsDiscretizer does (searchsorted, side "right"). The bin is the
# design value (ordinal, then any scaling steps), or, when bins is the feature's only step,
# design columns may name bins as levels (one indicator per bin).
BINS = "bins"

# Splines (format version 3): a numeric feature's only step {"op": "spline", "knots": t,
# "degree": k, "extrapolation": rule} gives its B-spline basis, one value per basis index
# 0..n-1 (n = len(t) - k - 1; periodic: n - k, the last k wrapped onto the first k), as
# scikit-learn's SplineTransformer evaluates it (scipy's BSpline: the interval of x is the
# one with t[i] <= x < t[i+1], the last closed). Design columns name a basis index
# ({"feature": f, "basis": j}, optionally with affine "scaling"). Outside the base
# interval [t[k], t[n]]: "continue" extends the end polynomials, "periodic" maps x into
# the interval first, "constant" holds the boundary values, "linear" extends the
# boundary values along their slopes, and "error" (where scikit-learn raises) treats the
# value as missing. A missing value's basis values are 0.0 (scikit-learn's
# handle_missing='zeros').
SPLINE = "spline"
SPLINE_EXTRAPOLATIONS = ("error", "constant", "linear", "continue", "periodic")
SPLINE_DEGREES = (1, 2, 3)

# Quantiles (format version 4): a numeric feature's first step {"op": "quantile",
# "quantiles": q, "references": r, "output": "uniform" | "normal"}, as scikit-learn's
# QuantileTransformer applies it (its _transform_col): "uniform" gives
# 0.5 * (interp(x, q, r) - interp(-x, -q reversed, -r reversed)) with numpy's interp
# (a value at or beyond an end takes that end's reference), then exactly 0.0 for x equal
# to q[0] and 1.0 for x equal to q[-1]; "normal" takes 0.0 where x - 1e-7 < q[0] and 1.0
# where x + 1e-7 > q[-1] instead, then the inverse normal CDF, clipped to its values at
# QUANTILE_CLIP and 1 - QUANTILE_CLIP. Affine steps may follow.
QUANTILE = "quantile"
QUANTILE_OUTPUTS = ("uniform", "normal")
QUANTILE_BOUNDS = 1e-7  # scikit-learn's BOUNDS_THRESHOLD
QUANTILE_CLIP = 1e-7 - 2.0 ** -52  # BOUNDS_THRESHOLD - np.spacing(1)

# Normalized columns (format version 4): {"feature": f, "normalize": {"norm": n,
# "columns": [factor, ...], "position": j}, "scaling": [...]} is the value of columns[j]
# divided by the row's norm over all the columns (each a numeric factor, as a product's:
# the feature's value through its own scaling, 0.0 when missing without a fill), as
# scikit-learn's Normalizer computes it: "l2" the square root of the sum of squares,
# "l1" the sum of magnitudes, "max" the largest magnitude; a norm below NORM_FLOOR is
# taken as 1.0 (its _handle_zeros_in_scale). `feature` is columns[j]'s.
NORMS = ("l2", "l1", "max")
NORM_FLOOR = 10 * 2.0 ** -52


@dataclass(frozen=True)
class NumericFeature:
    """A numeric input. `fill` replaces a missing value before scaling; with no
    fill a missing value makes the feature's design column exactly 0.0.

    `boolean` says the source model was fitted on a boolean column, which it read
    as 0.0/1.0: every target then also takes true/false (a SQL BOOLEAN column, the
    text 'true'/'false') as 1.0/0.0. Written to the file only when true, so files
    without it keep their hash."""

    name: str
    fill: float | None
    scaling: tuple[ScalingStep, ...] = ()
    clip: tuple[float, float] | None = None
    boolean: bool = False
    kind: str = field(default="numeric", init=False)
    role: str | None = None  # format version 4: "offset" or "exposure" (ROLES)


@dataclass(frozen=True)
class CategoricalFeature:
    """A categorical input. `fill` is the level a missing value takes (None:
    missing is treated as an unseen level); `unknown_level` is the level an
    unseen value takes (None: all of the feature's indicators are 0)."""

    name: str
    levels: tuple[Level, ...]
    fill: Level | None = None
    unknown_level: Level | None = None
    kind: str = field(default="categorical", init=False)

    @property
    def level_type(self) -> type:
        return int if self.levels and isinstance(self.levels[0], int) else str


Feature = Union[NumericFeature, CategoricalFeature]


@dataclass(frozen=True)
class DesignColumn:
    """One column of the design matrix: a numeric feature's scaled value, the indicator
    that a categorical feature's value is one of `levels`, or (`missing`, format
    version 2) the value (present, missing) the column takes when the feature's value is
    present or missing (missing as the feature's missing policy reads it, before any
    fill): (0.0, 1.0) for a plain missing indicator, other pairs once it is scaled."""

    feature: str
    levels: tuple[Level, ...] | None = None
    missing: tuple[float, float] | None = None
    # format version 2: a product of factors (each a column as above; a numeric factor with
    # its own `scaling`), multiplied left to right, then this column's own `scaling`;
    # `feature` is the first factor's. One factor: a scaled indicator column.
    product: tuple["DesignColumn", ...] | None = None
    scaling: tuple[ScalingStep, ...] | None = None
    # format version 2: a categorical feature's levels encoded as numbers (an ordinal or
    # target encoding, after any scaling): (value per level, value when unseen, value
    # when missing)
    encoded: tuple[tuple[float, ...], float, float] | None = None
    # format version 3: the basis index of a spline feature's column (then `scaling`,
    # affine steps, () for none)
    basis: int | None = None
    # format version 4: (norm, the columns normalized together, this column's position
    # among them), then `scaling` (affine steps, () for none)
    normalized: tuple[str, tuple["DesignColumn", ...], int] | None = None


@dataclass(frozen=True)
class Calibrator:
    """How one decision value becomes a class's probability, as scikit-learn's
    CalibratedClassifierCV calibrates it: "sigmoid", expit(-(a f + b)); "isotonic",
    the piecewise-linear interpolation of `values` over the increasing `thresholds`, f
    first clipped to [thresholds[0], thresholds[-1]] (one threshold: its value)."""

    method: str
    a: float | None = None
    b: float | None = None
    thresholds: tuple[float, ...] | None = None
    values: tuple[float, ...] | None = None

    def slopes(self) -> tuple[float, ...]:
        """Each isotonic segment's slope, as numpy's interp computes it (one IEEE division;
        inf where it overflows, which Python's float division would raise on)."""
        import numpy as np

        t, v = np.asarray(self.thresholds), np.asarray(self.values)
        with np.errstate(all="ignore"):
            return tuple(map(float, (v[1:] - v[:-1]) / (t[1:] - t[:-1])))


CALIBRATION_METHODS = ("sigmoid", "isotonic")


@dataclass(frozen=True)
class Calibration:
    """A calibrated head (format version 4, link "calibrated"): `members` linear models
    over the same design, each with one decision value per class (binary: one, of the
    positive class), the head's coefficient rows member by member. Each decision value
    has its calibrator (same order); a member's probabilities are normalised (binary:
    p0 = 1 - p1; multiclass: divided by their sum, uniform when the sum is 0), the
    probabilities averaged over the members (added from 0.0 in member order, then
    divided by `members`), and the class is the one of the largest average (lowest index
    on ties)."""

    members: int
    calibrators: tuple[Calibrator, ...]


@dataclass(frozen=True)
class Head:
    task: str
    link: str
    classes: tuple[Level, ...] | None
    intercepts: tuple[float, ...]
    coefficients: tuple[tuple[float, ...], ...]
    cut: float | None  # binary only: predict the positive class when margin > cut
    calibration: Calibration | None = None  # link "calibrated" only (format version 4)


@dataclass(frozen=True)
class FrozenModel:
    name: str
    features: tuple[Feature, ...]
    design: tuple[DesignColumn, ...]
    head: Head
    provenance: dict
    sha256: str = ""

    @property
    def n_outputs(self) -> int:
        return len(self.head.classes) if self.head.task == "multiclass" else 1

    def feature(self, name: str) -> Feature:
        for feat in self.features:
            if feat.name == name:
                return feat
        raise KeyError(name)

    def to_document(self) -> dict:
        """The JSON document, sha256 included."""
        doc = _document_body(self)
        doc["sha256"] = canonical_sha256(doc)
        return doc

    def sealed(self) -> "FrozenModel":
        """This model with its sha256 filled in from its canonical form."""
        return FrozenModel(self.name, self.features, self.design, self.head,
                           self.provenance, canonical_sha256(_document_body(self)))

    def to_json(self) -> str:
        return json.dumps(self.to_document(), indent=2, ensure_ascii=True, allow_nan=False) + "\n"

    def write(self, path: str | Path, force: bool = False) -> None:
        write_atomic(Path(path), self.to_json().encode("ascii"), force=force)


# ---------------------------------------------------------------- writing

def format_version(model: FrozenModel) -> int:
    """The lowest format version that can hold the model."""
    return needs_version(model)[0]


def needs_version(model: FrozenModel) -> tuple[int, str]:
    """The lowest format version that can hold the model, and what needs it (the
    first construct of the highest version it uses)."""
    return max(_needs(model), key=lambda need: need[0], default=(1, ""))


def _needs(model: FrozenModel):
    """(version, what) for every construct of the model an older version cannot hold."""
    for feat in model.features:
        if getattr(feat, "role", None) is not None:
            yield 4, f"the {feat.role} role of feature {feat.name!r}"
    for feat in model.features:
        for step in getattr(feat, "scaling", ()):
            if step.op == QUANTILE:
                yield 4, f"the quantile step of feature {feat.name!r}"
    for col in model.design:
        if col.normalized is not None:
            yield 4, f"the normalized column of feature {col.feature!r}"
        for f in col.product or ():
            if any(s.op == QUANTILE for s in f.scaling or ()):
                yield 4, f"the quantile step of a factor of {col.feature!r}"
    for feat in model.features:
        for step in getattr(feat, "scaling", ()):
            if step.op == SPLINE or step.op in POWER_OPS:
                yield 3, f"the {step.op} step of feature {feat.name!r}"
    if model.head.calibration is not None:
        yield 4, "the calibrated head"
    if model.head.link in LINK_VERSION:
        yield LINK_VERSION[model.head.link], f"the {model.head.link} link"
    if model.head.task == "binary" and model.head.link == "log":
        yield 3, "the log link of a binary head"
    for feat in model.features:
        for step in getattr(feat, "scaling", ()):
            if step.op in TRANSFORM_OPS or step.op == BINS:
                yield 2, f"the {step.op} transform of feature {feat.name!r}"
    for col in model.design:
        if col.missing is not None:
            yield 2, f"the missing indicator of feature {col.feature!r}"
        if col.product is not None:
            yield 2, f"the product column of feature {col.feature!r}"
        if col.encoded is not None:
            yield 2, f"the encoded column of feature {col.feature!r}"


def _document_body(model: FrozenModel) -> dict:
    feats = []
    for feat in model.features:
        if isinstance(feat, NumericFeature):
            feats.append({
                "name": feat.name,
                "kind": "numeric",
                "missing": ({"policy": "zero"} if feat.fill is None
                            else {"policy": "impute", "value": feat.fill}),
                "scaling": _steps_entry(feat.scaling),
                "clip": None if feat.clip is None else list(feat.clip),
            })
            if feat.boolean:
                feats[-1]["boolean"] = True
            if feat.role is not None:
                feats[-1]["role"] = feat.role
        else:
            feats.append({
                "name": feat.name,
                "kind": "categorical",
                "levels": list(feat.levels),
                "missing": ({"policy": "unknown"} if feat.fill is None
                            else {"policy": "impute", "value": feat.fill}),
                "unknown": ({"policy": "zeros"} if feat.unknown_level is None
                            else {"policy": "level", "level": feat.unknown_level}),
            })
    design = [_column_entry(col) for col in model.design]
    head = model.head
    return {
        "format": FORMAT,
        "format_version": format_version(model),
        "name": model.name,
        "features": feats,
        "design": design,
        "head": {
            "task": head.task,
            "link": head.link,
            "classes": None if head.classes is None else list(head.classes),
            "intercepts": list(head.intercepts),
            "coefficients": [list(row) for row in head.coefficients],
            "cut": head.cut,
            **({} if head.calibration is None else
               {"calibration": _calibration_entry(head.calibration)}),
        },
        "provenance": model.provenance,
    }


def _calibration_entry(cal: Calibration) -> dict:
    return {"members": cal.members,
            "calibrators": [{"method": c.method, "a": c.a, "b": c.b} if c.method == "sigmoid"
                            else {"method": c.method, "thresholds": list(c.thresholds),
                                  "values": list(c.values)} for c in cal.calibrators]}


def _steps_entry(steps) -> list:
    return [{"op": s.op} if s.op in TRANSFORM_OPS else
            {"op": s.op, "edges": list(s.edges)} if s.op == BINS else
            {"op": s.op, "knots": list(s.knots), "degree": s.degree,
             "extrapolation": s.extrapolation} if s.op == SPLINE else
            {"op": s.op, "quantiles": list(s.quantiles), "references": list(s.references),
             "output": s.output} if s.op == QUANTILE else
            {"op": s.op, "value": s.value} for s in steps]


def _column_entry(col: DesignColumn) -> dict:
    entry: dict[str, Any] = {"feature": col.feature}
    if col.levels is not None:
        entry["levels"] = list(col.levels)
    if col.missing is not None:
        entry["missing"] = list(col.missing)
    if col.product is not None:
        entry["product"] = [_column_entry(f) for f in col.product]
    if col.scaling is not None:
        entry["scaling"] = _steps_entry(col.scaling)
    if col.encoded is not None:
        entry["encoded"] = {"values": list(col.encoded[0]), "unseen": col.encoded[1],
                            "missing": col.encoded[2]}
    if col.basis is not None:
        entry["basis"] = col.basis
    if col.normalized is not None:
        norm, columns, position = col.normalized
        entry["normalize"] = {"norm": norm, "columns": [_column_entry(f) for f in columns],
                              "position": position}
    return entry


def canonical_bytes(doc: dict) -> bytes:
    body = {k: v for k, v in doc.items() if k != "sha256"}
    return json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      allow_nan=False).encode("ascii")


def canonical_sha256(doc: dict) -> str:
    return hashlib.sha256(canonical_bytes(doc)).hexdigest()


# ---------------------------------------------------------------- reading

def _reject_duplicates(pairs):
    out = {}
    for key, value in pairs:
        if key in out:
            raise ModelFileError(f"duplicate key {key!r} in a JSON object")
        out[key] = value
    return out


def _reject_constant(name):
    raise ModelFileError(f"{name} is not a number; model files hold finite numbers only")


def load_model(path: str | Path) -> FrozenModel:
    """Read and strictly validate a frozen model file."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise ModelFileError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise ModelFileError(f"{path}: is a directory, not a model file") from None
    except OSError as exc:
        raise ModelFileError(f"{path}: cannot read ({exc.strerror})") from None
    try:
        return parse_model(raw)
    except ModelFileError as exc:
        raise ModelFileError(f"{path}: {exc}") from None


def parse_model(raw: bytes | str) -> FrozenModel:
    if isinstance(raw, bytes):
        try:
            raw = raw.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise ModelFileError(f"not UTF-8 text (byte {exc.start})") from None
    try:
        doc = json.loads(raw, object_pairs_hook=_reject_duplicates, parse_constant=_reject_constant)
    except json.JSONDecodeError as exc:
        raise ModelFileError(f"not valid JSON: {exc.msg} at line {exc.lineno} column {exc.colno}"
                             ) from None
    except RecursionError:
        raise ModelFileError("not valid JSON: nested too deeply") from None
    return model_from_document(doc)


class _Reader:
    """Type checks that name the JSON path of the offending field."""

    @staticmethod
    def obj(value, path, keys, optional=()):
        if not isinstance(value, dict):
            raise ModelFileError(f"{path}: expected an object, got {_kind(value)}")
        missing = [k for k in keys if k not in value]
        if missing:
            raise ModelFileError(f"{path}: missing key {missing[0]!r}")
        extra = [k for k in value if k not in keys and k not in optional]
        if extra:
            raise ModelFileError(f"{path}: unexpected key {extra[0]!r}")
        return value

    @staticmethod
    def string(value, path, nonempty=True):
        if not isinstance(value, str):
            raise ModelFileError(f"{path}: expected a string, got {_kind(value)}")
        if nonempty and value == "":
            raise ModelFileError(f"{path}: must not be empty")
        return value

    @staticmethod
    def number(value, path):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ModelFileError(f"{path}: expected a number, got {_kind(value)}")
        try:
            out = float(value)
        except OverflowError:
            raise ModelFileError(f"{path}: number out of double range") from None
        if not math.isfinite(out):
            raise ModelFileError(f"{path}: expected a finite number, got {value!r}")
        return out

    @staticmethod
    def array(value, path, max_len=None):
        if not isinstance(value, list):
            raise ModelFileError(f"{path}: expected an array, got {_kind(value)}")
        return value

    @staticmethod
    def level(value, path):
        if isinstance(value, bool) or not isinstance(value, (str, int)):
            raise ModelFileError(f"{path}: expected a string or integer level, got {_kind(value)}")
        if value == "":
            raise ModelFileError(f"{path}: the empty string cannot be a level "
                                 "(it is read as a missing value)")
        return value


def _kind(value) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, (int, float)):
        return f"the number {value!r}"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, list):
        return "an array"
    if isinstance(value, dict):
        return "an object"
    return type(value).__name__


def model_from_document(doc) -> FrozenModel:
    r = _Reader
    if not isinstance(doc, dict):
        raise ModelFileError(f"expected a JSON object at the top level, got {_kind(doc)}")
    fmt = doc.get("format")
    if fmt != FORMAT:
        raise ModelFileError(f"format: expected {FORMAT!r}, got {fmt!r}")
    version = doc.get("format_version")
    if version not in READS_VERSIONS or isinstance(version, bool):
        raise ModelFileError(f"format_version: this scorewright reads versions "
                             f"{' and '.join(map(str, READS_VERSIONS))}, the file says {version!r}")
    r.obj(doc, "model", ("format", "format_version", "name", "features", "design", "head",
                         "provenance", "sha256"))
    name = r.string(doc["name"], "name")
    features = tuple(_read_feature(f, f"features[{i}]")
                     for i, f in enumerate(r.array(doc["features"], "features")))
    if not features:
        raise ModelFileError("features: a model needs at least one feature")
    seen: set[str] = set()
    for i, feat in enumerate(features):
        if feat.name in seen:
            raise ModelFileError(f"features[{i}].name: duplicate feature name {feat.name!r}")
        seen.add(feat.name)
    by_name = {f.name: f for f in features}
    design = tuple(_read_design(c, f"design[{i}]", by_name)
                   for i, c in enumerate(r.array(doc["design"], "design")))
    _check_design(design, features)
    head = _read_head(doc["head"], len(design))
    _check_roles(features, design, head)
    needed, what = needs_version(FrozenModel(name, features, design, head, {}))
    if needed > version:
        raise ModelFileError(f"format_version: {what} needs format_version {needed}, the file "
                             f"says {version}")
    prov = r.obj(doc["provenance"], "provenance", ("scorewright_version", "source"),
                 optional=("libraries", "inputs", "created", "metrics", "notes"))
    r.string(prov["scorewright_version"], "provenance.scorewright_version")
    r.string(prov["source"], "provenance.source")
    sha = r.string(doc["sha256"], "sha256")
    expected = canonical_sha256(doc)
    if sha != expected:
        raise ModelFileError("sha256: does not match the file's contents (the file was edited "
                             "after it was frozen, or is damaged)")
    return FrozenModel(name, features, design, head, prov, sha)


def _read_steps(array, where: str, fill, path: str, affine_only: bool = False) -> tuple:
    """A list of steps: a transform or bins first (unless affine_only), then affine steps."""
    r = _Reader
    steps = []
    for j, step in enumerate(r.array(array, where)):
        spath = f"{where}[{j}]"
        if not affine_only and isinstance(step, dict) and step.get("op") in TRANSFORM_OPS:
            r.obj(step, spath, ("op",))
            if j != 0:
                raise ModelFileError(f"{spath}.op: a {step['op']} transform must be the "
                                     "first step")
            if fill is not None and not in_domain(step["op"], fill):
                raise ModelFileError(f"{path}.missing.value: {fill!r} is outside the "
                                     f"domain of {step['op']}")
            steps.append(ScalingStep(step["op"]))
            continue
        if not affine_only and isinstance(step, dict) and step.get("op") == SPLINE:
            steps.append(_read_spline(step, spath, j, len(array), fill, path))
            continue
        if not affine_only and isinstance(step, dict) and step.get("op") == QUANTILE:
            if j != 0:
                raise ModelFileError(f"{spath}.op: a quantile step must be the first step")
            steps.append(_read_quantile(step, spath))
            continue
        if not affine_only and isinstance(step, dict) and step.get("op") == BINS:
            r.obj(step, spath, ("op", "edges"))
            if j != 0:
                raise ModelFileError(f"{spath}.op: bins must be the first step")
            edges = tuple(r.number(e, f"{spath}.edges[{i}]")
                          for i, e in enumerate(r.array(step["edges"], f"{spath}.edges")))
            if not edges or any(not a < b for a, b in zip(edges, edges[1:])):
                raise ModelFileError(f"{spath}.edges: expected increasing numbers")
            steps.append(ScalingStep(BINS, edges=edges))
            continue
        r.obj(step, spath, ("op", "value"))
        if not affine_only and step["op"] in POWER_OPS:
            if j != 0:
                raise ModelFileError(f"{spath}.op: a {step['op']} transform must be the "
                                     "first step")
            if fill is not None and step["op"] in TRANSFORM_DOMAIN and not in_domain(
                    step["op"], fill):
                raise ModelFileError(f"{path}.missing.value: {fill!r} is outside the "
                                     f"domain of {step['op']}")
            steps.append(ScalingStep(step["op"], r.number(step["value"], f"{spath}.value")))
            continue
        if step["op"] not in SCALING_OPS:
            allowed = SCALING_OPS if affine_only else (SCALING_OPS + TRANSFORM_OPS + POWER_OPS
                                                       + (BINS, SPLINE, QUANTILE))
            raise ModelFileError(f"{spath}.op: expected one of {', '.join(allowed)}, "
                                 f"got {step['op']!r}")
        number = r.number(step["value"], f"{spath}.value")
        if step["op"] == "divide" and number == 0.0:
            raise ModelFileError(f"{spath}.value: division by zero")
        steps.append(ScalingStep(step["op"], number))
    return tuple(steps)


def _read_quantile(step, spath) -> ScalingStep:
    r = _Reader
    r.obj(step, spath, ("op", "quantiles", "references", "output"))
    if step["output"] not in QUANTILE_OUTPUTS:
        raise ModelFileError(f"{spath}.output: expected one of {', '.join(QUANTILE_OUTPUTS)}, "
                             f"got {step['output']!r}")
    lists = {}
    for key in ("quantiles", "references"):
        lists[key] = tuple(r.number(e, f"{spath}.{key}[{i}]")
                           for i, e in enumerate(r.array(step[key], f"{spath}.{key}")))
        if not lists[key] or any(not a <= b for a, b in itertools.pairwise(lists[key])):
            raise ModelFileError(f"{spath}.{key}: expected non-decreasing numbers")
    q, ref = lists["quantiles"], lists["references"]
    if len(ref) != len(q):
        raise ModelFileError(f"{spath}.references: expected one per quantile ({len(q)})")
    if not (0.0 <= ref[0] and ref[-1] <= 1.0):
        raise ModelFileError(f"{spath}.references: expected numbers from 0 to 1")
    out = ScalingStep(QUANTILE, quantiles=q, references=ref, output=step["output"])
    if not quantile_pieces_finite(out):
        raise ModelFileError(f"{spath}.quantiles: two quantiles are too close for their "
                             "references' slope to be a finite number")
    return out


def quantile_pieces(q, ref) -> list[tuple[float, float, float]]:
    """numpy's interp(x, q, ref) as pieces (q_j, ref_j, slope_j), one per j that interp can
    use for a value inside [q[0], q[-1]): j is the last index with q[j] <= x, so a run of
    equal quantiles gives its last; slope_j = (ref[j+1] - ref[j]) / (q[j+1] - q[j]), as
    numpy computes it."""
    out = []
    for j in range(len(q) - 1):
        if q[j] < q[j + 1]:
            out.append((q[j], ref[j], (ref[j + 1] - ref[j]) / (q[j + 1] - q[j])))
    return out


def quantile_pieces_finite(step) -> bool:
    """Every piece of both interpolations stays finite over the quantiles' range."""
    q, ref = step.quantiles, step.references
    span = q[-1] - q[0]
    for qs, rs in ((q, ref), (tuple(-v for v in reversed(q)), tuple(-v for v in reversed(ref)))):
        for _, r0, slope in quantile_pieces(qs, rs):
            if not (math.isfinite(slope) and math.isfinite(slope * span)
                    and abs(slope * span) < 1e300):
                return False
    return math.isfinite(span)


def _read_spline(step, spath, j, n_steps, fill, path) -> ScalingStep:
    r = _Reader
    r.obj(step, spath, ("op", "knots", "degree", "extrapolation"))
    if j != 0 or n_steps != 1:
        raise ModelFileError(f"{spath}.op: a spline must be the feature's only step")
    degree = step["degree"]
    if type(degree) is not int or degree not in SPLINE_DEGREES:
        raise ModelFileError(f"{spath}.degree: expected one of "
                             f"{', '.join(map(str, SPLINE_DEGREES))}, got {_kind(degree)}")
    rule = step["extrapolation"]
    if rule not in SPLINE_EXTRAPOLATIONS:
        raise ModelFileError(f"{spath}.extrapolation: expected one of "
                             f"{', '.join(SPLINE_EXTRAPOLATIONS)}, got {rule!r}")
    knots = tuple(r.number(e, f"{spath}.knots[{i}]")
                  for i, e in enumerate(r.array(step["knots"], f"{spath}.knots")))
    if any(not a < b for a, b in itertools.pairwise(knots)):
        raise ModelFileError(f"{spath}.knots: expected increasing numbers")
    spline = ScalingStep(SPLINE, knots=knots, degree=degree, extrapolation=rule)
    if len(knots) < 2 * degree + 2 or spline.spline_columns() < 1 or (
            rule == "periodic" and spline.spline_columns() < degree):
        raise ModelFileError(f"{spath}.knots: {len(knots)} knots are too few for degree "
                             f"{degree}")
    lo, hi = spline.spline_range()
    if fill is not None and rule == "error" and not lo <= fill <= hi:
        raise ModelFileError(f"{path}.missing.value: {fill!r} is outside the spline's "
                             f"range [{lo!r}, {hi!r}]")
    return spline


def _read_feature(value, path) -> Feature:
    r = _Reader
    if not isinstance(value, dict):
        raise ModelFileError(f"{path}: expected an object, got {_kind(value)}")
    kind = value.get("kind")
    if kind == "numeric":
        r.obj(value, path, ("name", "kind", "missing", "scaling", "clip"),
              optional=("boolean", "role"))
        name = r.string(value["name"], f"{path}.name")
        missing = r.obj(value["missing"], f"{path}.missing", ("policy",), optional=("value",))
        policy = missing["policy"]
        if policy == "impute":
            r.obj(missing, f"{path}.missing", ("policy", "value"))
            fill = r.number(missing["value"], f"{path}.missing.value")
        elif policy == "zero":
            r.obj(missing, f"{path}.missing", ("policy",))
            fill = None
        else:
            raise ModelFileError(f"{path}.missing.policy: expected 'impute' or 'zero', got {policy!r}")
        steps = _read_steps(value["scaling"], f"{path}.scaling", fill, path)
        clip = value["clip"]
        if clip is not None:
            r.array(clip, f"{path}.clip")
            if len(clip) != 2:
                raise ModelFileError(f"{path}.clip: expected [low, high]")
            lo = r.number(clip[0], f"{path}.clip[0]")
            hi = r.number(clip[1], f"{path}.clip[1]")
            if not lo <= hi:
                raise ModelFileError(f"{path}.clip: low {lo!r} is above high {hi!r}")
            clip = (lo, hi)
        boolean = value.get("boolean", False)
        if boolean is not True and "boolean" in value:
            raise ModelFileError(f"{path}.boolean: expected true (or no key), got {_kind(boolean)}")
        role = value.get("role")
        if "role" in value and role not in ROLES:
            got = repr(role) if isinstance(role, str) else _kind(role)
            raise ModelFileError(f"{path}.role: expected 'offset' or 'exposure', got {got}")
        if role is not None:
            want = (("log",) if role == "exposure" else ())
            if fill is not None or clip is not None or tuple(s.op for s in steps) != want:
                raise ModelFileError(f"{path}.role: an {role} has no fill, no clip and "
                                     + ("one step, log" if want else "no steps"))
            if boolean:
                raise ModelFileError(f"{path}.role: an {role} is not boolean")
        return NumericFeature(name, fill, steps, clip, boolean, role=role)
    if kind == "categorical":
        r.obj(value, path, ("name", "kind", "levels", "missing", "unknown"))
        name = r.string(value["name"], f"{path}.name")
        levels = tuple(r.level(v, f"{path}.levels[{j}]")
                       for j, v in enumerate(r.array(value["levels"], f"{path}.levels")))
        if not levels:
            raise ModelFileError(f"{path}.levels: a categorical feature needs at least one level")
        types = {type(v) for v in levels}
        if len(types) > 1:
            raise ModelFileError(f"{path}.levels: levels mix strings and integers")
        if len(set(levels)) != len(levels):
            dup = next(v for v in levels if levels.count(v) > 1)
            raise ModelFileError(f"{path}.levels: duplicate level {dup!r}")
        missing = r.obj(value["missing"], f"{path}.missing", ("policy",), optional=("value",))
        if missing["policy"] == "impute":
            r.obj(missing, f"{path}.missing", ("policy", "value"))
            fill = _known_level(missing["value"], levels, f"{path}.missing.value")
        elif missing["policy"] == "unknown":
            r.obj(missing, f"{path}.missing", ("policy",))
            fill = None
        else:
            raise ModelFileError(f"{path}.missing.policy: expected 'impute' or 'unknown', "
                                 f"got {missing['policy']!r}")
        unknown = r.obj(value["unknown"], f"{path}.unknown", ("policy",), optional=("level",))
        if unknown["policy"] == "zeros":
            r.obj(unknown, f"{path}.unknown", ("policy",))
            unknown_level = None
        elif unknown["policy"] == "level":
            r.obj(unknown, f"{path}.unknown", ("policy", "level"))
            unknown_level = _known_level(unknown["level"], levels, f"{path}.unknown.level")
        else:
            raise ModelFileError(f"{path}.unknown.policy: expected 'zeros' or 'level', "
                                 f"got {unknown['policy']!r}")
        return CategoricalFeature(name, levels, fill, unknown_level)
    raise ModelFileError(f"{path}.kind: expected 'numeric' or 'categorical', got {kind!r}")


def _known_level(value, levels, path):
    value = _Reader.level(value, path)
    if value not in levels or type(value) is not type(levels[0]):
        raise ModelFileError(f"{path}: {value!r} is not one of the feature's levels")
    return value


def _read_design(value, path, by_name) -> DesignColumn:
    r = _Reader
    if isinstance(value, dict) and "normalize" in value:
        return _read_normalized(value, path, by_name)
    if isinstance(value, dict) and "product" in value:
        r.obj(value, path, ("feature", "product", "scaling"))
        factors = tuple(_read_factor(f, f"{path}.product[{i}]", by_name)
                        for i, f in enumerate(r.array(value["product"], f"{path}.product")))
        if not factors:
            raise ModelFileError(f"{path}.product: a product needs a factor")
        if value["feature"] != factors[0].feature:
            raise ModelFileError(f"{path}.feature: expected the first factor's feature "
                                 f"{factors[0].feature!r}")
        return DesignColumn(factors[0].feature, product=factors,
                            scaling=_read_steps(value["scaling"], f"{path}.scaling", None, path,
                                                affine_only=True))
    r.obj(value, path, ("feature",), optional=("levels", "missing", "encoded", "basis",
                                                "scaling"))
    name = r.string(value["feature"], f"{path}.feature")
    if name not in by_name:
        raise ModelFileError(f"{path}.feature: no feature named {name!r}")
    feat = by_name[name]
    spline = spline_of(feat)
    if "basis" in value or (spline is not None and not {"levels", "missing", "encoded"}
                             & set(value)):
        return _read_basis(value, path, name, spline)
    if "scaling" in value:
        raise ModelFileError(f"{path}: unexpected key 'scaling'")
    if "encoded" in value:
        if set(value) != {"feature", "encoded"}:
            raise ModelFileError(f"{path}: an encoded column has no levels or missing")
        if not isinstance(feat, CategoricalFeature):
            raise ModelFileError(f"{path}.encoded: {name!r} is not categorical")
        enc = r.obj(value["encoded"], f"{path}.encoded", ("values", "unseen", "missing"))
        values = tuple(r.number(v, f"{path}.encoded.values[{i}]") for i, v in
                       enumerate(r.array(enc["values"], f"{path}.encoded.values")))
        if len(values) != len(feat.levels):
            raise ModelFileError(f"{path}.encoded.values: expected one value per level of "
                                 f"{name!r} ({len(feat.levels)})")
        return DesignColumn(name, encoded=(values, r.number(enc["unseen"], f"{path}.encoded"
                                                            ".unseen"),
                                           r.number(enc["missing"], f"{path}.encoded.missing")))
    if "missing" in value:
        if "levels" in value:
            raise ModelFileError(f"{path}: a column is a missing indicator or has levels, "
                                 "not both")
        pair = r.array(value["missing"], f"{path}.missing")
        if len(pair) != 2:
            raise ModelFileError(f"{path}.missing: expected [value when present, value when "
                                 "missing]")
        return DesignColumn(name, missing=(r.number(pair[0], f"{path}.missing[0]"),
                                           r.number(pair[1], f"{path}.missing[1]")))
    if isinstance(feat, NumericFeature):
        n_bins = bin_count(feat)
        if "levels" not in value:
            return DesignColumn(name)
        if n_bins is None or len(feat.scaling) != 1:
            raise ModelFileError(f"{path}.levels: numeric feature {name!r} has no levels "
                                 "(only a feature whose one step is bins has: its bins)")
        levels = r.array(value["levels"], f"{path}.levels")
        if not levels or any(type(v) is not int or not 0 <= v < n_bins for v in levels):
            raise ModelFileError(f"{path}.levels: expected bins of {name!r}, integers from 0 "
                                 f"to {n_bins - 1}")
        return DesignColumn(name, tuple(levels))
    if "levels" not in value:
        raise ModelFileError(f"{path}: missing key 'levels' for categorical feature {name!r}")
    levels = tuple(_known_level(v, feat.levels, f"{path}.levels[{j}]")
                   for j, v in enumerate(r.array(value["levels"], f"{path}.levels")))
    if not levels:
        raise ModelFileError(f"{path}.levels: an indicator column needs at least one level")
    return DesignColumn(name, levels)


def _read_normalized(value, path, by_name) -> DesignColumn:
    r = _Reader
    r.obj(value, path, ("feature", "normalize", "scaling"))
    spec = r.obj(value["normalize"], f"{path}.normalize", ("norm", "columns", "position"))
    if spec["norm"] not in NORMS:
        raise ModelFileError(f"{path}.normalize.norm: expected one of {', '.join(NORMS)}, "
                             f"got {spec['norm']!r}")
    where = f"{path}.normalize.columns"
    columns = []
    for i, f in enumerate(r.array(spec["columns"], where)):
        if not isinstance(f, dict) or "scaling" not in f:
            raise ModelFileError(f"{where}[{i}]: expected a numeric column "
                                 "({\"feature\": ..., \"scaling\": [...]})")
        col = _read_factor(f, f"{where}[{i}]", by_name)
        if any(s.op in (BINS, SPLINE) for s in col.scaling):
            raise ModelFileError(f"{where}[{i}].scaling: a normalized column takes no "
                                 f"{col.scaling[0].op} step")
        columns.append(col)
    if not columns:
        raise ModelFileError(f"{where}: a norm needs a column")
    j = spec["position"]
    if type(j) is not int or not 0 <= j < len(columns):
        raise ModelFileError(f"{path}.normalize.position: expected an index into its columns, "
                             f"an integer from 0 to {len(columns) - 1}")
    if value["feature"] != columns[j].feature:
        raise ModelFileError(f"{path}.feature: expected the feature of the column at its "
                             f"position, {columns[j].feature!r}")
    steps = _read_steps(value["scaling"], f"{path}.scaling", None, path, affine_only=True)
    return DesignColumn(columns[j].feature, normalized=(spec["norm"], tuple(columns), j),
                        scaling=steps)


def _read_basis(value, path, name, spline) -> DesignColumn:
    r = _Reader
    if spline is None:
        raise ModelFileError(f"{path}.basis: feature {name!r} has no spline")
    r.obj(value, path, ("feature", "basis", "scaling"))
    j = value["basis"]
    if type(j) is not int or not 0 <= j < spline.spline_columns():
        raise ModelFileError(f"{path}.basis: expected a basis index of {name!r}, an integer "
                             f"from 0 to {spline.spline_columns() - 1}")
    steps = _read_steps(value["scaling"], f"{path}.scaling", None, path, affine_only=True)
    return DesignColumn(name, basis=j, scaling=steps)


def spline_of(feat) -> ScalingStep | None:
    """A numeric feature's spline step (its only step), else None."""
    steps = getattr(feat, "scaling", ())
    return steps[0] if steps and steps[0].op == SPLINE else None


def _read_factor(value, path, by_name) -> DesignColumn:
    """A factor of a product: a column of its own (a numeric one with its own scaling)."""
    r = _Reader
    if isinstance(value, dict) and "product" in value:
        raise ModelFileError(f"{path}: a factor cannot itself be a product")
    if isinstance(value, dict) and "scaling" in value:
        r.obj(value, path, ("feature", "scaling"))
        col = _read_design({"feature": value["feature"]}, path, by_name)
        feat = by_name[col.feature]
        if not isinstance(feat, NumericFeature):
            raise ModelFileError(f"{path}.scaling: only a numeric factor has scaling")
        return DesignColumn(col.feature, scaling=_read_steps(value["scaling"], f"{path}.scaling",
                                                             feat.fill, path))
    col = _read_design(value, path, by_name)
    if col.levels is None and col.missing is None:
        raise ModelFileError(f"{path}: a numeric factor states its scaling")
    return col


def _check_design(design, features) -> None:
    numeric_seen: set[str] = set()
    level_seen: dict[str, set] = {}
    indicated: set[str] = set()
    bases: dict[str, set] = {}
    for i, col in enumerate(design):
        if col.basis is not None:
            seen = bases.setdefault(col.feature, set())
            if col.basis in seen:
                raise ModelFileError(f"design[{i}].basis: basis {col.basis} of "
                                     f"{col.feature!r} is in two columns")
            seen.add(col.basis)
            indicated.add(col.feature)
        elif col.product is not None:
            indicated.update(f.feature for f in col.product)
        elif col.normalized is not None:
            indicated.update(f.feature for f in col.normalized[1])
        elif col.missing is not None or col.encoded is not None:
            indicated.add(col.feature)
        elif col.levels is None:
            if col.feature in numeric_seen:
                raise ModelFileError(f"design[{i}]: feature {col.feature!r} has two columns")
            numeric_seen.add(col.feature)
        else:
            seen = level_seen.setdefault(col.feature, set())
            for level in col.levels:
                if level in seen:
                    raise ModelFileError(f"design[{i}].levels: level {level!r} of "
                                         f"{col.feature!r} is in two columns")
                seen.add(level)
    for j, feat in enumerate(features):
        if feat.name in numeric_seen and feat.name in level_seen:
            raise ModelFileError(f"features[{j}]: feature {feat.name!r} has both a value "
                                 "column and bin columns")
        if feat.name not in numeric_seen | indicated and feat.name not in level_seen:
            raise ModelFileError(f"features[{j}]: feature {feat.name!r} has no design column")


def _check_roles(features, design, head) -> None:
    """An offset or exposure: one at most, of a regression head (an exposure: the log link),
    in one plain design column of its own with coefficient 1."""
    marked = [(j, f) for j, f in enumerate(features) if getattr(f, "role", None)]
    if len(marked) > 1:
        raise ModelFileError(f"features[{marked[1][0]}].role: a model has one offset or "
                             "exposure at most")
    for j, feat in marked:
        path = f"features[{j}].role"
        if head.task != "regression":
            raise ModelFileError(f"{path}: an {feat.role} belongs to a regression head, not "
                                 f"{head.task}")
        if feat.role == "exposure" and head.link != "log":
            raise ModelFileError(f"{path}: an exposure needs the log link, the head's is "
                                 f"{head.link}")
        cols = [i for i, c in enumerate(design) if c.feature == feat.name or (
            c.product is not None and any(f.feature == feat.name for f in c.product))]
        if len(cols) != 1 or design[cols[0]] != DesignColumn(feat.name):
            raise ModelFileError(f"{path}: an {feat.role} is one plain design column of its "
                                 "own")
        if head.coefficients[0][cols[0]] != 1.0:
            raise ModelFileError(f"head.coefficients[0][{cols[0]}]: the coefficient of "
                                 f"{feat.role} {feat.name!r} is 1")


def role_feature(model: "FrozenModel"):
    """The model's offset or exposure feature (format version 4), else None."""
    return next((f for f in model.features if getattr(f, "role", None)), None)


def bin_count(feat) -> int | None:
    """The number of bins of a numeric feature whose first step is bins (else None)."""
    steps = getattr(feat, "scaling", ())
    return len(steps[0].edges) + 1 if steps and steps[0].op == BINS else None


def in_domain(op: str, x: float) -> bool:
    """x is a value the transform takes (TRANSFORM_DOMAIN)."""
    edge, closed = TRANSFORM_DOMAIN[op]
    return x > edge if closed else x >= edge


def outside_text(op: str) -> str:
    """The values outside a transform's domain, in words: '<= 0', '< 0'..."""
    edge, closed = TRANSFORM_DOMAIN[op]
    return f"{'<=' if closed else '<'} {edge:g}"


def _read_head(value, n_design) -> Head:
    r = _Reader
    r.obj(value, "head", ("task", "link", "classes", "intercepts", "coefficients", "cut"),
          optional=("calibration",))
    task = value["task"]
    if not isinstance(task, str) or task not in TASK_LINKS:
        raise ModelFileError(f"head.task: expected binary, multiclass or regression, got {task!r}")
    link = value["link"]
    if link not in TASK_LINKS[task]:
        raise ModelFileError(f"head.link: a {task} head takes link {' or '.join(TASK_LINKS[task])},"
                             f" got {link!r}")
    classes = value["classes"]
    if task == "regression":
        if classes is not None:
            raise ModelFileError("head.classes: a regression head has no classes (null)")
        n_rows = 1
    else:
        classes = tuple(r.level(c, f"head.classes[{i}]")
                        for i, c in enumerate(r.array(classes, "head.classes")))
        if len({type(c) for c in classes}) > 1:
            raise ModelFileError("head.classes: labels mix strings and integers")
        if len(set(classes)) != len(classes):
            raise ModelFileError("head.classes: duplicate class label")
        want = 2 if task == "binary" else None
        if want is not None and len(classes) != want:
            raise ModelFileError(f"head.classes: a binary head has 2 classes, got {len(classes)}")
        if task == "multiclass" and len(classes) < 3:
            raise ModelFileError("head.classes: a multiclass head has at least 3 classes")
        n_rows = 1 if task == "binary" else len(classes)
    calibration = None
    if link == "calibrated":
        if "calibration" not in value:
            raise ModelFileError("head: missing key 'calibration' for the calibrated link")
        calibration = _read_calibration(value["calibration"], n_rows)
        n_rows *= calibration.members
    elif "calibration" in value:
        raise ModelFileError("head: unexpected key 'calibration' (only the calibrated link "
                             "has one)")
    intercepts = tuple(r.number(v, f"head.intercepts[{i}]")
                       for i, v in enumerate(r.array(value["intercepts"], "head.intercepts")))
    if len(intercepts) != n_rows:
        raise ModelFileError(f"head.intercepts: expected {n_rows} value(s), got {len(intercepts)}")
    rows = r.array(value["coefficients"], "head.coefficients")
    if len(rows) != n_rows:
        raise ModelFileError(f"head.coefficients: expected {n_rows} row(s), got {len(rows)}")
    coefs = []
    for k, row in enumerate(rows):
        r.array(row, f"head.coefficients[{k}]")
        if len(row) != n_design:
            raise ModelFileError(f"head.coefficients[{k}]: expected {n_design} values (one per "
                                 f"design column), got {len(row)}")
        coefs.append(tuple(r.number(v, f"head.coefficients[{k}][{j}]") for j, v in enumerate(row)))
    cut = value["cut"]
    if task == "binary" and calibration is None:
        cut = r.number(cut, "head.cut")
    elif cut is not None:
        what = "a calibrated head" if calibration is not None else task
        raise ModelFileError(f"head.cut: only a binary head has a decision cut (null for {what})")
    return Head(task, link, classes, intercepts, tuple(coefs), cut, calibration)


def _read_calibration(value, per_member: int) -> Calibration:
    r = _Reader
    path = "head.calibration"
    r.obj(value, path, ("members", "calibrators"))
    members = value["members"]
    if type(members) is not int or members < 1:
        raise ModelFileError(f"{path}.members: expected a positive integer, got "
                             f"{_kind(members)}")
    items = r.array(value["calibrators"], f"{path}.calibrators")
    if len(items) != members * per_member:
        raise ModelFileError(f"{path}.calibrators: expected {members * per_member} (one per "
                             f"decision value of each member), got {len(items)}")
    return Calibration(members, tuple(_read_calibrator(c, f"{path}.calibrators[{i}]")
                                      for i, c in enumerate(items)))


def _read_calibrator(value, path) -> Calibrator:
    r = _Reader
    method = value.get("method") if isinstance(value, dict) else None
    if method == "sigmoid":
        r.obj(value, path, ("method", "a", "b"))
        return Calibrator(method, r.number(value["a"], f"{path}.a"),
                          r.number(value["b"], f"{path}.b"))
    if method != "isotonic":
        r.obj(value, path, ("method",), optional=("a", "b", "thresholds", "values"))
        raise ModelFileError(f"{path}.method: expected one of "
                             f"{', '.join(CALIBRATION_METHODS)}, got {method!r}")
    r.obj(value, path, ("method", "thresholds", "values"))
    xs = tuple(r.number(x, f"{path}.thresholds[{i}]")
               for i, x in enumerate(r.array(value["thresholds"], f"{path}.thresholds")))
    ys = tuple(r.number(y, f"{path}.values[{i}]")
               for i, y in enumerate(r.array(value["values"], f"{path}.values")))
    if not xs or any(not a < b for a, b in zip(xs, xs[1:])):
        raise ModelFileError(f"{path}.thresholds: expected increasing numbers")
    if len(ys) != len(xs):
        raise ModelFileError(f"{path}.values: expected one value per threshold ({len(xs)})")
    cal = Calibrator(method, thresholds=xs, values=ys)
    bad = next((j for j, s in enumerate(cal.slopes()) if not math.isfinite(s)), None)
    if bad is not None:
        raise ModelFileError(f"{path}.thresholds: thresholds {bad} and {bad + 1} are too close "
                             "for a finite slope")
    return cal


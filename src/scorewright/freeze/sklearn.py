"""Freezing a fitted scikit-learn estimator or pipeline into a frozen model.

The walk keeps scikit-learn's own operation order for every transform
(StandardScaler subtracts then divides, MinMaxScaler multiplies, adds, then
clips, ...), so the frozen scaling reproduces the source model's transformed
values bit for bit.

Each current column of the data flowing through the pipeline is tracked as a
chain: the raw feature it came from, the imputation fill, the scaling steps,
and, once one-hot encoded, the levels of each indicator column.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import ScorewrightError
from ..model import (BINS, DECISION, QUANTILE, SPLINE, SPLINE_DEGREES, TRANSFORM_DOMAIN,
                     TRANSFORM_OPS, Calibration, Calibrator,
                     CategoricalFeature, DesignColumn, FrozenModel, Head, NumericFeature,
                     ScalingStep, in_domain, outside_text, quantile_pieces_finite)
from .provenance import provenance


@dataclass
class Chain:
    """One current column: a raw feature on its way to the design matrix."""

    feature: int
    fill: object = None
    steps: list = field(default_factory=list)
    clip: tuple | None = None
    levels: tuple | None = None          # set once one-hot encoded: this indicator's levels
    categories: tuple | None = None      # all levels the encoder knew (for indicators)
    unknown_level: object = None
    encoded: bool = False
    indicator: bool = False              # the feature's missing indicator (0/1, then steps)
    binned: bool = False                 # one of KBinsDiscretizer's one-hot columns (levels)
    product: tuple | None = None         # PolynomialFeatures: the factors (DesignColumns)
    encoding: tuple | None = None        # ordinal/target encoded: (values, unseen, missing)
    constant: bool = False               # PolynomialFeatures' bias column (then steps)
    basis: int | None = None             # SplineTransformer: the basis index (steps[0]: it)
    # Normalizer: (norm, the chains normalized together, this column's position); then
    # steps are the column's own
    normalized: tuple | None = None


class Unsupported(ScorewrightError):
    pass


def freeze_estimator(estimator, feature_names=None, name=None) -> FrozenModel:
    head_est, transforms = _split(estimator)
    raw_names = _input_names(estimator, feature_names)
    chains = [Chain(i) for i in range(len(raw_names))]
    for path, step in transforms:
        chains = _apply(step, chains, path)
    head = _head(head_est, _describe_path(estimator, head_est))
    n_cols = len(head.coefficients[0])
    if n_cols != len(chains):
        raise ScorewrightError(f"the estimator has {n_cols} coefficients per output but the "
                               f"pipeline produces {len(chains)} columns")
    features, design, constants = _features_and_design(chains, raw_names)
    if constants:  # a bias column: its coefficient times its value joins the intercept
        keep = [j for j in range(n_cols) if j not in constants]
        head = Head(head.task, head.link, head.classes,
                    tuple(b + math.fsum(row[j] * v for j, v in constants.items())
                          for b, row in zip(head.intercepts, head.coefficients)),
                    tuple(tuple(row[j] for j in keep) for row in head.coefficients), head.cut)
    notes = [f"scikit-learn cannot score {f.name}'s values {outside_text(f.scaling[0].op)} "
             f"({f.scaling[0].op} has no finite value there); the frozen model treats "
             "them as missing" for f in features
             if getattr(f, "scaling", ()) and f.scaling[0].op in TRANSFORM_DOMAIN]
    notes += _spline_notes(features)
    model = FrozenModel(
        name=name or _default_name(estimator),
        features=features,
        design=design,
        head=head,
        provenance=provenance(estimator, raw_names, {"notes": notes} if notes else None),
    )
    return model.sealed()


# ---------------------------------------------------------------- structure

def _split(estimator):
    from sklearn.calibration import CalibratedClassifierCV
    from sklearn.pipeline import Pipeline

    inner = _calibrated_estimator(estimator) if type(estimator) is CalibratedClassifierCV \
        else None
    if isinstance(inner, Pipeline):  # calibrated pipeline: its transforms, then the head
        steps = [(n, s) for n, s in inner.steps if s not in (None, "passthrough")]
        transforms = [(f"the calibrated pipeline's step {n!r} (position {i})", s)
                      for i, (n, s) in enumerate(steps[:-1])]
        return estimator, transforms
    if isinstance(estimator, Pipeline):
        steps = [(n, s) for n, s in estimator.steps if s not in (None, "passthrough")]
        if not steps:
            raise ScorewrightError("the pipeline has no estimator")
        head_name, head = steps[-1]
        transforms = [(f"pipeline step {n!r} (position {i})", s)
                      for i, (n, s) in enumerate(steps[:-1])]
        return head, transforms
    return estimator, []


def _describe_path(estimator, head) -> str:
    from sklearn.pipeline import Pipeline

    if isinstance(estimator, Pipeline):
        return f"pipeline step {estimator.steps[-1][0]!r} (position {len(estimator.steps) - 1})"
    return "the estimator"


def _input_names(estimator, feature_names) -> list[str]:
    n = getattr(estimator, "n_features_in_", None)
    if n is None:
        raise ScorewrightError("the estimator is not fitted (no n_features_in_)")
    fitted = getattr(estimator, "feature_names_in_", None)
    if feature_names is not None:
        names = [str(x) for x in feature_names]
        if len(names) != n:
            raise ScorewrightError(f"{len(names)} feature names given but the model takes {n} "
                                   "inputs")
        if fitted is not None and list(map(str, fitted)) != names:
            raise ScorewrightError("the given feature names differ from the names the model "
                                   "was fitted with")
    elif fitted is not None:
        names = [str(x) for x in fitted]
    else:
        names = [f"x{i}" for i in range(n)]
    if len(set(names)) != len(names):
        raise ScorewrightError("feature names are not unique")
    if any(x == "" for x in names):
        raise ScorewrightError("a feature name is empty")
    return names


def _default_name(estimator) -> str:
    head, _ = _split(estimator)
    return type(head).__name__.lower()


# ---------------------------------------------------------------- transforms

def _apply(step, chains: list[Chain], path: str) -> list[Chain]:
    from sklearn.compose import ColumnTransformer
    from sklearn.impute import MissingIndicator, SimpleImputer
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import (FunctionTransformer, KBinsDiscretizer, MaxAbsScaler,
                                       MinMaxScaler, Normalizer, OneHotEncoder,
                                       OrdinalEncoder, PolynomialFeatures, PowerTransformer,
                                       QuantileTransformer, RobustScaler, SplineTransformer,
                                       StandardScaler, TargetEncoder)

    if step in (None, "passthrough"):
        return chains
    kind = type(step)
    if kind is Pipeline:
        for i, (n, sub) in enumerate(step.steps):
            chains = _apply(sub, chains, f"{path} > step {n!r} (position {i})")
        return chains
    if kind is ColumnTransformer:
        return _column_transformer(step, chains, path)
    if kind is SimpleImputer:
        return _imputer(step, chains, path)
    if kind is MissingIndicator:
        return _indicators(step, chains, path)
    if kind is KBinsDiscretizer:
        return _bins(step, chains, path)
    if kind is PolynomialFeatures:
        return _polynomial(step, chains, path)
    if kind is SplineTransformer:
        return _splines(step, chains, path)
    if kind is PowerTransformer:
        return _power(step, chains, path)
    if kind is QuantileTransformer:
        return _quantile(step, chains, path)
    if kind is Normalizer:
        return _normalizer(step, chains, path)
    if kind is OrdinalEncoder:
        return _ordinal(step, chains, path)
    if kind is TargetEncoder:
        return _target(step, chains, path)
    if kind is StandardScaler:
        return _scale(chains, path, "StandardScaler",
                      ("subtract", getattr(step, "mean_", None) if step.with_mean else None),
                      ("divide", step.scale_ if step.with_std else None))
    if kind is RobustScaler:
        return _scale(chains, path, "RobustScaler",
                      ("subtract", step.center_ if step.with_centering else None),
                      ("divide", step.scale_ if step.with_scaling else None))
    if kind is MaxAbsScaler:
        return _scale(chains, path, "MaxAbsScaler", ("divide", step.scale_))
    if kind is MinMaxScaler:
        out = _scale(chains, path, "MinMaxScaler", ("multiply", step.scale_), ("add", step.min_))
        if step.clip:
            lo, hi = (float(v) for v in step.feature_range)
            for c in out:
                c.clip = (lo, hi)
        return out
    if kind is OneHotEncoder:
        return _one_hot(step, chains, path)
    if kind is FunctionTransformer and step.func is None and step.inverse_func is None:
        return chains  # how a fitted ColumnTransformer spells remainder="passthrough"
    if kind is FunctionTransformer:
        return _function(step, chains, path)
    raise Unsupported(f"unsupported component {kind.__name__} at {path}")


def _column_transformer(ct, chains, path):
    from sklearn.impute import MissingIndicator

    selected = ct._transformer_to_input_indices  # fitted: name -> input column indices
    used: dict[int, str] = {}
    out: list[Chain] = []
    for name, trans, _cols in ct.transformers_:
        indices = list(selected.get(name, []))
        if trans == "drop" or not indices:
            continue
        if not isinstance(trans, MissingIndicator):  # an indicator may share its input
            for i in indices:
                if i in used:
                    raise Unsupported(f"input column {i} is used by both {used[i]!r} and "
                                      f"{name!r} at {path}; each input may feed one "
                                      "transformer (and a MissingIndicator)")
                used[i] = name
        sub = [_copy(chains[i]) for i in indices]
        out.extend(_apply(trans, sub, f"{path} > transformer {name!r}"))
    return out


def _copy(chain: Chain) -> Chain:
    return Chain(chain.feature, chain.fill, list(chain.steps), chain.clip, chain.levels,
                 chain.categories, chain.unknown_level, chain.encoded, chain.indicator,
                 chain.binned, chain.product, chain.encoding, chain.constant, chain.basis,
                 chain.normalized)


def _indicator_features(ind, path) -> list[int]:
    mv = ind.missing_values
    if not (isinstance(mv, float) and math.isnan(mv)) and mv is not None:
        raise Unsupported(f"missing indicator with missing_values={mv!r} at {path}: only "
                          "NaN/None are the frozen model's missing values")
    return [int(i) for i in ind.features_]


def _indicators(ind, chains, path) -> list[Chain]:
    """MissingIndicator: one 0/1 column per feature it learned to flag."""
    out = []
    for i in _indicator_features(ind, path):
        chain = chains[i]
        _require_raw(chain, path, "MissingIndicator")
        if chain.fill is not None or chain.steps or chain.indicator:
            raise Unsupported(f"MissingIndicator at {path} follows an imputer or a transform; "
                              "put it first")
        out.append(Chain(chain.feature, indicator=True))
    return out


def _imputer(imp, chains, path):
    indicated = []
    if imp.add_indicator:
        for i in _indicator_features(imp.indicator_, path):
            if chains[i].fill is not None or chains[i].indicator:
                raise Unsupported(f"SimpleImputer(add_indicator=True) at {path} follows an "
                                  "imputer; put it first")
            indicated.append(Chain(chains[i].feature, indicator=True))
    mv = imp.missing_values
    if not (isinstance(mv, float) and math.isnan(mv)) and mv is not None:
        raise Unsupported(f"SimpleImputer(missing_values={mv!r}) at {path}: only NaN/None "
                          "missing values map to the frozen missing policy")
    stats = imp.statistics_
    if len(stats) != len(chains):
        raise Unsupported(f"SimpleImputer at {path} dropped all-missing columns; refit with "
                          "keep_empty_features=True or remove those columns")
    for chain, value in zip(chains, stats):
        if chain.encoding is not None:  # an encoded column: its NaN encodings take the fill
            fill = float(value)
            chain.encoding = _mapped(chain.encoding, lambda v: fill if math.isnan(v) else v)
            continue
        _require_raw(chain, path, "SimpleImputer")
        if chain.fill is not None:
            continue  # an earlier imputer already filled every missing value
        if isinstance(value, (float, np.floating)) and math.isnan(value):
            raise Unsupported(f"SimpleImputer at {path} has no fill value for an all-missing "
                              "column")
        chain.fill = _plain(value)
    return chains + indicated


def _transform_of(func) -> str | None:
    """The frozen transform a FunctionTransformer's func is: numpy's own ufuncs only."""
    for name in TRANSFORM_OPS:
        if func is getattr(np, name):
            return name
    return None


def _function(step, chains, path):
    op = _transform_of(step.func)
    if op is None or step.kw_args:
        what = getattr(step.func, "__name__", repr(step.func))
        raise Unsupported(f"FunctionTransformer({what}) at {path}: only np.log, np.log1p and "
                          "np.sqrt (without kw_args) are frozen")
    for chain in chains:
        _require_raw(chain, path, f"FunctionTransformer({op})")
        if chain.steps or chain.clip is not None:
            raise Unsupported(f"FunctionTransformer(np.{op}) at {path} comes after scaling; "
                              "put it first (after any SimpleImputer)")
        if chain.fill is not None and (isinstance(chain.fill, str)
                                       or not in_domain(op, float(chain.fill))):
            raise Unsupported(f"FunctionTransformer(np.{op}) at {path}: the imputed value "
                              f"{chain.fill!r} is outside its domain")
        chain.steps.append(ScalingStep(op))
    return chains


def _bins(kb, chains, path):
    """KBinsDiscretizer: the bin (the count of inner edges at or below the value), as a
    number (ordinal) or as one indicator column per bin (onehot, onehot-dense)."""
    if kb.dtype not in (None, np.float64):
        raise Unsupported(f"KBinsDiscretizer(dtype={kb.dtype!r}) at {path}: only float64 "
                          "binning is frozen")
    out = []
    for i, chain in enumerate(chains):
        _require_raw(chain, path, "KBinsDiscretizer")
        _require_first(chain, path, "KBinsDiscretizer")
        inner = tuple(float(e) for e in np.asarray(kb.bin_edges_[i], dtype=np.float64)[1:-1])
        if not inner:
            raise Unsupported(f"KBinsDiscretizer at {path}: feature column {i} has a single "
                              "bin (a constant column); drop it")
        step = ScalingStep(BINS, edges=inner)
        if kb.encode == "ordinal":
            chain.steps.append(step)
            out.append(chain)
            continue
        for b in range(len(inner) + 1):
            out.append(Chain(chain.feature, fill=chain.fill, steps=[step], levels=(b,),
                             binned=True))
    return out


def _splines(st, chains, path):
    """SplineTransformer: per feature, its B-spline basis columns (the last dropped
    without include_bias), as the knots, degree and extrapolation of its fitted
    BSplines say."""
    if st.degree not in SPLINE_DEGREES:
        raise Unsupported(f"SplineTransformer(degree={st.degree!r}) at {path}: only degrees "
                          f"{', '.join(map(str, SPLINE_DEGREES))} are frozen")
    if st.degree == 1 and st.extrapolation == "linear" and len(chains) > 1:
        # transform() raises its local degree to 2 for the first feature and keeps it for
        # the rest, so it reads their range and boundary slopes at the wrong knots
        raise Unsupported(f"SplineTransformer(degree=1, extrapolation='linear') at {path} "
                          "over several columns: scikit-learn scores every column after the "
                          "first with degree 2's boundaries; give each column its own "
                          "SplineTransformer")
    out = []
    for i, chain in enumerate(chains):
        _require_raw(chain, path, "SplineTransformer")
        _require_first(chain, path, "SplineTransformer")
        spl = st.bsplines_[i]
        knots = tuple(float(v) for v in np.asarray(spl.t, dtype=np.float64))
        if any(not a < b for a, b in itertools.pairwise(knots)):
            raise Unsupported(f"SplineTransformer at {path}: feature column {i} has repeated "
                              "knots (too few distinct values); not frozen")
        step = ScalingStep(SPLINE, knots=knots, degree=int(spl.k),
                           extrapolation=st.extrapolation)
        lo, hi = step.spline_range()
        if chain.fill is not None and st.extrapolation == "error" and not \
                lo <= float(chain.fill) <= hi:
            raise Unsupported(f"SplineTransformer at {path}: the imputed value {chain.fill!r} "
                              "is outside its knots (extrapolation='error')")
        n_cols = step.spline_columns()
        if n_cols != np.asarray(spl.c).shape[1]:
            raise Unsupported(f"SplineTransformer at {path}: its basis is not the shape this "
                              "scikit-learn version was read for")
        for j in range(n_cols - (0 if st.include_bias else 1)):
            out.append(Chain(chain.feature, fill=chain.fill, steps=[step], basis=j))
    return out


def _power(pt, chains, path):
    """PowerTransformer: its fitted lambda per column (Yeo-Johnson or Box-Cox), then, with
    standardize=True, its StandardScaler's subtract and divide."""
    op = {"yeo-johnson": "yeo_johnson", "box-cox": "box_cox"}.get(pt.method)
    if op is None:
        raise Unsupported(f"PowerTransformer(method={pt.method!r}) at {path}: not frozen")
    scaler = getattr(pt, "_scaler", None) if pt.standardize else None
    for i, chain in enumerate(chains):
        _require_raw(chain, path, "PowerTransformer")
        _require_first(chain, path, "PowerTransformer")
        if chain.fill is not None and op in TRANSFORM_DOMAIN and not in_domain(
                op, float(chain.fill)):
            raise Unsupported(f"PowerTransformer(method='box-cox') at {path}: the imputed "
                              f"value {chain.fill!r} is not positive")
        chain.steps.append(ScalingStep(op, float(pt.lambdas_[i])))
        if scaler is not None:
            for name, values in (("subtract", scaler.mean_), ("divide", scaler.scale_)):
                if values is not None:
                    chain.steps.append(ScalingStep(name, float(np.asarray(
                        values, dtype=np.float64)[i])))
    return chains


def _quantile(qt, chains, path):
    """QuantileTransformer: per column, its fitted quantiles and references and the output
    distribution (uniform or normal)."""
    if qt.output_distribution not in ("uniform", "normal"):
        raise Unsupported(f"QuantileTransformer(output_distribution="
                          f"{qt.output_distribution!r}) at {path}: not frozen")
    quantiles = np.asarray(qt.quantiles_, dtype=np.float64)
    references = tuple(float(v) for v in np.asarray(qt.references_, dtype=np.float64))
    for i, chain in enumerate(chains):
        _require_raw(chain, path, "QuantileTransformer")
        _require_first(chain, path, "QuantileTransformer")
        step = ScalingStep(QUANTILE, quantiles=tuple(float(v) for v in quantiles[:, i]),
                           references=references, output=qt.output_distribution)
        if not quantile_pieces_finite(step):
            raise Unsupported(f"QuantileTransformer at {path}: feature column {i} has two "
                              "quantiles too close together for a finite slope; not frozen")
        chain.steps.append(step)
    return chains


def _normalizer(nz, chains, path):
    """Normalizer: each column divided by its row's norm over every column the Normalizer
    takes (numeric columns, each as it stands now)."""
    if nz.norm not in ("l2", "l1", "max"):
        raise Unsupported(f"Normalizer(norm={nz.norm!r}) at {path}: not frozen")
    members = []
    for chain in chains:
        if (chain.encoded or chain.indicator or chain.binned or chain.product is not None
                or chain.constant or chain.basis is not None or chain.encoding is not None
                or chain.normalized is not None or chain.clip is not None
                or isinstance(chain.fill, str)
                or any(s.op in (BINS, SPLINE) for s in chain.steps)):
            raise Unsupported(f"Normalizer at {path} takes a column that is not a plain "
                              "numeric value (an encoded, indicator, bin, spline, product, "
                              "clipped or already normalized column); only numeric columns "
                              "(imputed, transformed or scaled) are frozen")
        members.append(_copy(chain))
    return [Chain(c.feature, fill=c.fill, normalized=(nz.norm, tuple(members), j))
            for j, c in enumerate(members)]


def _spline_notes(features) -> list[str]:
    notes = []
    for f in features:
        steps = getattr(f, "scaling", ())
        if not steps or steps[0].op != SPLINE:
            continue
        lo, hi = steps[0].spline_range()
        if steps[0].extrapolation == "error":
            notes.append(f"scikit-learn cannot score {f.name}'s values outside its knots "
                         f"[{lo!r}, {hi!r}] (extrapolation='error' raises); the frozen model "
                         "treats them as missing")
        if f.fill is None:
            notes.append(f"a missing {f.name} (NaN, None, +-inf) gives basis values 0.0, "
                         "as scikit-learn's handle_missing='zeros' does for NaN")
    return notes


def _mapped(encoding, f):
    """An encoding (values, unseen, missing) with f applied to every number (None, where
    scikit-learn raises, stays None)."""
    values, unseen, missing = encoding
    return (tuple(f(v) for v in values), None if unseen is None else f(unseen),
            None if missing is None else f(missing))


def _stepped(encoding, step):
    chain = Chain(0, steps=[step])
    return _mapped(encoding, lambda v: _indicator_value(chain, v))


def _ordinal(enc, chains, path):
    """OrdinalEncoder: each level its index; an unseen level unknown_value (None under
    handle_unknown='error': scikit-learn raises), a missing one encoded_missing_value when
    the fit saw missing values (else it is unseen, as scikit-learn encodes it)."""
    if getattr(enc, "_infrequent_enabled", False):
        raise Unsupported(f"OrdinalEncoder at {path} groups infrequent categories; not frozen")
    # None: scikit-learn raises there (handle_unknown='error'), no later step applies
    unseen = float(enc.unknown_value) if enc.handle_unknown == "use_encoded_value" \
        and enc.unknown_value is not None else None
    out = []
    for i, chain in enumerate(chains):
        cats = _levels_of(enc.categories_[i], chain, path, "OrdinalEncoder")
        # a missing value is encoded_missing_value only if the fit saw one; else unseen
        seen = len(cats) < len(enc.categories_[i])
        missing = float(enc.encoded_missing_value) if seen else unseen
        out.append(Chain(chain.feature, categories=cats, encoded=True,
                         encoding=(tuple(float(j) for j in range(len(cats))), unseen, missing)))
    return out


def _target(enc, chains, path):
    """TargetEncoder: each level its fitted encoding (per class for a multiclass target);
    an unseen level, and a missing one unless missing was a category in the fit, the
    target mean."""
    k = len(enc.classes_) if enc.target_type_ == "multiclass" else 1
    means = np.atleast_1d(np.asarray(enc.target_mean_, dtype=np.float64))
    out = []
    for i, chain in enumerate(chains):
        raw = list(enc.categories_[i])
        cats = _levels_of(raw, chain, path, "TargetEncoder")
        nan_at = next((j for j, v in enumerate(raw) if _level(v, path) is None), None)
        for c in range(k):
            codes = np.asarray(enc.encodings_[i * k + c], dtype=np.float64)
            values = tuple(float(v) for j, v in enumerate(codes) if j != nan_at)
            mean = float(means[c] if k > 1 else means[0])
            missing = float(codes[nan_at]) if nan_at is not None else mean
            out.append(Chain(chain.feature, categories=cats, encoded=True,
                             encoding=(values, mean, missing)))
    return out


def _levels_of(categories, chain, path, what) -> tuple:
    _require_raw(chain, path, what)
    if chain.steps or chain.fill is not None:
        raise Unsupported(f"{what} at {path} follows an imputer or a scaler; put it first")
    cats = [_level(v, path) for v in categories]
    cats = tuple(c for c in cats if c is not None)
    if len({type(c) for c in cats}) > 1:
        raise Unsupported(f"{what} at {path}: a column mixes text and number categories")
    return cats


def _polynomial(poly, chains, path):
    """PolynomialFeatures: its columns in its own order and multiplication order (each
    column of degree d is a column of degree d - 1 times one input column, as its dense
    transform computes it); the bias column becomes a constant folded into the intercept."""
    if poly._min_degree > 1:
        raise Unsupported(f"PolynomialFeatures(degree={poly.degree!r}) at {path}: a minimum "
                          "degree above 1 is not frozen")
    if len(chains) != poly.n_features_in_:
        raise Unsupported(f"PolynomialFeatures at {path} sees {poly.n_features_in_} columns, "
                          f"the pipeline gives it {len(chains)}")
    factors = [_factor(c, path) for c in chains]
    # the dense transform's column order: degree 1, then each degree from the last
    columns: list[tuple[int, ...]] = [(j,) for j in range(len(chains))]
    index = list(range(len(chains))) + [len(chains)]
    for _ in range(2, poly._max_degree + 1):
        new_index = []
        end = index[-1]
        for j in range(len(chains)):
            start = index[j]
            new_index.append(len(columns))
            if poly.interaction_only:
                start += index[j + 1] - index[j]
            if start >= end:
                break
            columns += [columns[c] + (j,) for c in range(start, end)]
        new_index.append(len(columns))
        index = new_index
    powers = [tuple(int(p) for p in row) for row in poly.powers_]
    out = [Chain(chains[0].feature, constant=True)] if poly.include_bias else []
    for cols in columns:
        if len(cols) == 1:
            out.append(chains[cols[0]])
        else:
            out.append(Chain(chains[cols[0]].feature, product=tuple(factors[c] for c in cols)))
    made = [tuple(sum(1 for c in cols if c == j) for j in range(len(chains)))
            for cols in columns]
    if ([(1 if c.constant else 0) for c in out[:1]] != [int(poly.include_bias)]
            or powers != ([(0,) * len(chains)] if poly.include_bias else []) + made):
        raise Unsupported(f"PolynomialFeatures at {path}: its columns are not in the order "
                          "this scikit-learn version was read for")
    return out


def _factor(chain, path) -> DesignColumn:
    """A column as a factor of a product, as it stands now (a later scaler changes the
    column, not the factor)."""
    if chain.product is not None or chain.constant or chain.binned or chain.basis is not None \
            or chain.normalized is not None:
        raise Unsupported(f"PolynomialFeatures at {path} takes a column that is already a "
                          "product, a constant, a bin or a spline (or a Normalizer's column)")
    if chain.clip is not None:
        raise Unsupported(f"PolynomialFeatures at {path} takes a clipped column")
    if chain.indicator:
        return _named(chain, missing=(_indicator_value(chain, 0.0),
                                      _indicator_value(chain, 1.0)))
    if chain.encoded:
        return _named(chain, levels=tuple(chain.levels))
    return _named(chain, scaling=tuple(chain.steps))


def _named(chain, **fields) -> DesignColumn:
    # the feature's name is set when the design is read out (raw names are known there)
    return DesignColumn(str(chain.feature), **fields)


def _require_first(chain, path, what):
    """A transformer that must take the raw value (after any SimpleImputer's fill)."""
    if chain.steps or chain.clip is not None or isinstance(chain.fill, str):
        raise Unsupported(f"{what} at {path} comes after scaling; put it first "
                          "(after any SimpleImputer)")


def _require_raw(chain, path, what):
    if chain.normalized is not None:
        if not what.endswith("Scaler") or chain.clip is not None:
            raise Unsupported(f"{what} at {path} takes Normalizer's columns; only scalers may")
        return
    if chain.basis is not None:
        if not what.endswith("Scaler") or what == "MinMaxScaler" and chain.clip is not None:
            raise Unsupported(f"{what} at {path} takes SplineTransformer's columns; only "
                              "scalers may")
        return
    if chain.product is not None or chain.constant:
        if not what.endswith("Scaler"):
            raise Unsupported(f"{what} at {path} takes a PolynomialFeatures or scaled one-hot "
                              "column; only scalers may")
        return
    if chain.binned:
        raise Unsupported(f"{what} at {path} takes KBinsDiscretizer's one-hot columns; "
                          "nothing may follow them but the estimator")
    if chain.indicator and not what.endswith("Scaler"):
        raise Unsupported(f"{what} at {path} takes a missing indicator; only scalers may")
    if chain.encoded:
        raise Unsupported(f"{what} at {path} comes after OneHotEncoder; put it before")
    if chain.steps and what == "SimpleImputer":
        raise Unsupported(f"SimpleImputer at {path} comes after scaling; put it first")


def _scale(chains, path, what, *ops):
    for chain_index, chain in enumerate(chains):
        if chain.encoding is not None:  # scale every encoding as scikit-learn would
            for op, values in ops:
                if values is not None:
                    c = float(np.asarray(values, dtype=np.float64)[chain_index])
                    chain.encoding = _stepped(chain.encoding, ScalingStep(op, c))
            if what == "MinMaxScaler" and chain.clip is not None:
                raise Unsupported(f"{what} at {path} clips an encoded column")
            continue
        if chain.encoded and chain.product is None and not chain.binned:
            # a scaled one-hot column: the one-factor product of its indicator, then steps
            chain.product = (_factor(chain, path),)
        _require_raw(chain, path, what)
        if chain.clip is not None:
            raise Unsupported(f"{what} at {path} follows a clipping MinMaxScaler")
        for op, values in ops:
            if values is None:
                continue
            value = float(np.asarray(values, dtype=np.float64)[chain_index])
            chain.steps.append(ScalingStep(op, value))
        if isinstance(chain.fill, str) and chain.product is None:
            raise Unsupported(f"{what} at {path} scales a column imputed with text")
    return chains


def _one_hot(enc, chains, path):
    drop_idx = getattr(enc, "drop_idx_", None)
    # scikit-learn drops after grouping the infrequent levels: `_drop_idx_after_grouping`
    # indexes the grouped columns (the frequent levels in order, then the group)
    grouped_drop = getattr(enc, "_drop_idx_after_grouping", drop_idx)
    infrequent = getattr(enc, "infrequent_categories_", None) if getattr(
        enc, "_infrequent_enabled", False) else None
    out: list[Chain] = []
    for i, chain in enumerate(chains):
        _require_raw(chain, path, "OneHotEncoder")
        if chain.steps:
            raise Unsupported(f"OneHotEncoder at {path} encodes a scaled column")
        all_cats = [_level(v, path) for v in enc.categories_[i]]
        learned_missing = any(c is None for c in all_cats)
        if learned_missing and chain.fill is not None:
            raise Unsupported(f"OneHotEncoder at {path} learned a missing value as a category "
                              "together with an imputer; not frozen")
        cats = [c for c in all_cats if c is not None]
        if len({type(c) for c in cats}) > 1:
            raise Unsupported(f"OneHotEncoder at {path}: a column mixes text and number "
                              "categories")
        fill = None if chain.fill is None else _level(chain.fill, path)
        if fill is not None and fill not in cats:
            raise Unsupported(f"imputed value {fill!r} is not a category of the OneHotEncoder "
                              f"at {path}")
        dropped = None if grouped_drop is None or grouped_drop[i] is None else int(
            grouped_drop[i])
        rare = None if infrequent is None or infrequent[i] is None else [
            _level(v, path) for v in infrequent[i]]
        # OneHotEncoder.transform's columns: the frequent levels in order (a learned
        # missing value is a level, last), then the infrequent group; the dropped one goes
        groups: list[tuple] = [(c,) for c in all_cats if not rare or c not in rare]
        if rare:
            groups.append(tuple(rare))
        dropped_group = None if dropped is None else groups.pop(dropped)
        # scikit-learn >= 1.6 transforms with handle_unknown='warn' exactly as with
        # 'infrequent_if_exist' (OneHotEncoder.transform swaps it in): an unseen level
        # joins the infrequent group when the column has one (all zeros when that group is
        # the dropped one), else its indicators are 0.
        unknown = None
        if enc.handle_unknown in ("infrequent_if_exist", "warn") and rare:
            unknown = next((c for c in rare if c is not None), None)
            if unknown is None:
                raise Unsupported(f"OneHotEncoder at {path}, column {i}: the infrequent group "
                                  "holds only the missing value and unseen levels join it; "
                                  "use handle_unknown='ignore' or a lower min_frequency")
        present_only = False
        if learned_missing:
            # a missing value is the level NaN: it takes its group's column (its fill is
            # another member of the group) or, alone in its group, a missing indicator (or
            # nothing when dropped); the frozen model reads a missing value as unseen, so
            # when unseen levels join the infrequent group, that group's column is its
            # indicator times "present" (1 when present, 0 when missing)
            home = next(g for g in groups + [dropped_group] if g is not None and None in g)
            others = [c for c in home if c is not None]
            if others:
                fill = others[0]
            else:
                present_only = unknown is not None
        if learned_missing and all(g == (None,) for g in groups) and groups:
            raise Unsupported(f"OneHotEncoder at {path}, column {i}: only the missing value's "
                              "column is left after the drop; drop another category")
        # A feature whose only category was dropped yields no column: it is left out.
        for group in groups:
            if group == (None,):  # the missing value's own column
                out.append(Chain(chain.feature, indicator=True, categories=tuple(cats)))
                continue
            levels = tuple(c for c in group if c is not None)
            product = None
            if present_only and group == tuple(rare):
                product = (_named(chain, levels=levels), _named(chain, missing=(1.0, 0.0)))
            out.append(Chain(chain.feature, fill=fill, levels=levels, categories=tuple(cats),
                             unknown_level=unknown, encoded=True, product=product))
    return out


def _plain(value):
    if isinstance(value, np.generic):
        value = value.item()
    return value


def _level(value, path):
    value = _plain(value)
    if value is None:
        return None
    if isinstance(value, bool):
        return int(value)
    if isinstance(value, float):
        if math.isnan(value):
            return None
        if value != math.floor(value) or not math.isfinite(value):
            raise Unsupported(f"category {value!r} at {path} is not an integer or text")
        return int(value)
    if isinstance(value, (int, str)):
        if value == "":
            raise Unsupported(f"the empty string is a category at {path}; it cannot be told "
                              "apart from a missing value")
        return value
    raise Unsupported(f"category {value!r} at {path} is not an integer or text")


# ---------------------------------------------------------------- features and design

def _features_and_design(chains, raw_names):
    design: list[DesignColumn] = []
    numeric: dict[int, Chain] = {}
    categorical: dict[int, list[Chain]] = {}
    indicated: set[int] = set()
    binned: dict[int, Chain] = {}
    splined: dict[int, Chain] = {}
    normed: dict[int, Chain] = {}
    constants: dict[int, float] = {}
    for position, chain in enumerate(chains):
        name = raw_names[chain.feature]
        if chain.normalized is not None:
            design.append(_normalized_column(chain, raw_names, normed, (
                numeric, categorical, binned, splined)))
            continue
        if chain.basis is not None:
            if chain.clip is not None:
                raise Unsupported(f"feature {name!r}: a clipping MinMaxScaler after "
                                  "SplineTransformer is not frozen")
            if chain.feature in numeric or chain.feature in categorical or \
                    chain.feature in binned or (chain.feature in splined and
                                                splined[chain.feature].steps[0]
                                                != chain.steps[0]):
                raise Unsupported(f"feature {name!r} reaches the estimator twice")
            splined[chain.feature] = chain
            design.append(DesignColumn(name, basis=chain.basis,
                                       scaling=tuple(chain.steps[1:])))
            continue
        if chain.constant:
            constants[position] = _indicator_value(chain, 1.0)
            continue
        if chain.encoding is not None:
            categorical.setdefault(chain.feature, []).append(chain)
            values, unseen, missing = (_unscored(v) for v in (chain.encoding[0],) +
                                       chain.encoding[1:])
            design.append(DesignColumn(name, encoded=(values, unseen, missing)))
            continue
        if chain.product is not None:
            if chain.encoded:  # a scaled one-hot column: its feature is categorical
                categorical.setdefault(chain.feature, []).append(chain)
            factors = tuple(DesignColumn(raw_names[int(f.feature)], f.levels, f.missing,
                                         None, f.scaling) for f in chain.product)
            design.append(DesignColumn(factors[0].feature, product=factors,
                                       scaling=tuple(chain.steps)))
            continue
        if chain.binned:
            if chain.feature in numeric or chain.feature in categorical:
                raise Unsupported(f"feature {name!r} reaches the estimator twice")
            binned[chain.feature] = chain
            design.append(DesignColumn(name, chain.levels))
            continue
        if chain.indicator:
            indicated.add(chain.feature)
            design.append(DesignColumn(name, missing=(_indicator_value(chain, 0.0),
                                                      _indicator_value(chain, 1.0))))
            continue
        if chain.encoded:
            if chain.feature in numeric:
                raise Unsupported(f"feature {name!r} is used both as a number and as a category")
            categorical.setdefault(chain.feature, []).append(chain)
            design.append(DesignColumn(name, tuple(chain.levels)))
        else:
            if chain.feature in numeric or chain.feature in categorical or \
                    chain.feature in binned or chain.feature in splined or \
                    chain.feature in normed:
                raise Unsupported(f"feature {name!r} reaches the estimator twice")
            if isinstance(chain.fill, str):
                raise Unsupported(f"feature {name!r} is imputed with text but not encoded")
            numeric[chain.feature] = chain
            design.append(DesignColumn(name))
    features = []
    for i, name in enumerate(raw_names):
        if i in numeric:
            c = numeric[i]
            fill = None if c.fill is None else float(c.fill)
            features.append(NumericFeature(name, fill, tuple(c.steps), c.clip))
        elif i in splined:
            c = splined[i]
            fill = None if c.fill is None else float(c.fill)
            features.append(NumericFeature(name, fill, (c.steps[0],)))
        elif i in binned:
            c = binned[i]
            fill = None if c.fill is None else float(c.fill)
            features.append(NumericFeature(name, fill, tuple(c.steps)))
        elif i in normed:
            c = normed[i]
            features.append(NumericFeature(name, None if c.fill is None else float(c.fill)))
        elif i in categorical:
            c = categorical[i][0]
            features.append(CategoricalFeature(name, c.categories, c.fill, c.unknown_level))
        elif i in indicated:
            features.append(NumericFeature(name, None))  # its indicator alone
    return tuple(features), tuple(design), constants


def _normalized_column(chain, raw_names, normed, others) -> DesignColumn:
    """A Normalizer's column; each feature it normalizes is recorded in `normed` (a
    feature that also reaches the estimator another way is refused)."""
    norm, members, position = chain.normalized
    if chain.clip is not None:
        raise Unsupported(f"feature {raw_names[chain.feature]!r}: a clipping MinMaxScaler "
                          "after Normalizer is not frozen")
    for m in members:
        name = raw_names[m.feature]
        if any(m.feature in seen for seen in others) or (
                m.feature in normed and (normed[m.feature].fill, normed[m.feature].steps)
                != (m.fill, m.steps)):
            raise Unsupported(f"feature {name!r} reaches the estimator twice")
        normed[m.feature] = m
    columns = tuple(DesignColumn(raw_names[m.feature], scaling=tuple(m.steps))
                    for m in members)
    return DesignColumn(columns[position].feature, normalized=(norm, columns, position),
                        scaling=tuple(chain.steps))


def _unscored(value):
    """An encoding scikit-learn cannot score (an unseen level under handle_unknown='error',
    where it raises; NaN, which its estimator refuses): the frozen model's design value
    0.0."""
    if isinstance(value, tuple):
        return tuple(_unscored(v) for v in value)
    return 0.0 if value is None or math.isnan(value) else value


def _indicator_value(chain: Chain, flag: float) -> float:
    """The indicator's design value, its steps applied as scikit-learn applies them."""
    v = flag
    for step in chain.steps:
        v = {"subtract": v - step.value, "add": v + step.value,
             "multiply": v * step.value, "divide": v / step.value}[step.op]
    if chain.clip is not None:
        v = min(max(v, chain.clip[0]), chain.clip[1])
    return float(v)


# ---------------------------------------------------------------- heads

def _head(est, path) -> Head:
    from sklearn.calibration import CalibratedClassifierCV
    from sklearn.compose import TransformedTargetRegressor
    from sklearn.multiclass import OneVsRestClassifier

    if type(est) is TransformedTargetRegressor:
        return _transformed_target(est, path)
    if type(est) is OneVsRestClassifier:
        return _one_vs_rest_head(est, path)
    if type(est) is CalibratedClassifierCV:
        return _calibrated_head(est, path)
    return _linear_head(est, path)


def _calibrated_estimator(est):
    """The one fitted estimator a CalibratedClassifierCV calibrates (None with several:
    ensemble=True keeps one per fold)."""
    fitted = getattr(est, "calibrated_classifiers_", None)
    return fitted[0].estimator if fitted is not None and len(fitted) == 1 else None


def _calibrated_head(est, path) -> Head:
    """CalibratedClassifierCV over a linear classifier. method='sigmoid' with
    ensemble=False: per class, expit(-(a f + b)) of its decision function f = w.x + c,
    which is the sigmoid of the margin (-a w).x - (a c + b); binary: that sigmoid (the
    logit link), multiclass: the sigmoids divided by their sum (the ovr_logit link).
    method='isotonic', or ensemble=True (one fitted model and calibrators per fold): a
    calibrated head (`_calibrated_members`)."""
    from sklearn.pipeline import Pipeline

    fitted = est.calibrated_classifiers_
    cc = fitted[0]
    if len(fitted) > 1 or cc.method != "sigmoid":
        return _calibrated_members(est, path)
    inner = cc.estimator[-1] if isinstance(cc.estimator, Pipeline) else cc.estimator
    where = f"{path} > estimator"
    classes, intercepts, rows = _decision_function(inner, where)
    if tuple(_class_label(c, path) for c in est.classes_) != classes:
        raise Unsupported(f"CalibratedClassifierCV at {path}: its classes differ from its "
                          "estimator's")
    margins = []
    for (c, w), cal in zip(zip(intercepts, rows), cc.calibrators):
        a, b = float(cal.a_), float(cal.b_)
        margins.append((-(a * c + b), tuple(-a * v for v in w)))
    if len(classes) == 2:
        return Head("binary", "logit", classes, (margins[0][0],), (margins[0][1],), 0.0)
    return Head("multiclass", "ovr_logit", classes, tuple(m[0] for m in margins),
                tuple(m[1] for m in margins), None)


def _calibrated_members(est, path) -> Head:
    """The calibrated head: each fold's linear model (its decision values, one per class;
    binary: one) and calibrators (sigmoid: a, b; isotonic: its thresholds and values),
    member by member, as CalibratedClassifierCV.predict_proba averages them."""
    from sklearn.isotonic import IsotonicRegression
    from sklearn.pipeline import Pipeline

    fitted = est.calibrated_classifiers_
    classes = tuple(_class_label(c, path) for c in est.classes_)
    intercepts, rows, calibrators = [], [], []
    for m, cc in enumerate(fitted):
        where = f"{path} > calibrated classifier {m}"
        if cc.method not in ("sigmoid", "isotonic"):
            raise Unsupported(f"CalibratedClassifierCV(method={cc.method!r}) at {path}: only "
                              "method='sigmoid' and 'isotonic' are frozen")
        if isinstance(cc.estimator, Pipeline) and len(fitted) > 1:
            raise Unsupported(f"CalibratedClassifierCV(ensemble=True) at {path} calibrates a "
                              "Pipeline, whose transforms each fold fits anew; put the "
                              "transforms in a Pipeline before the CalibratedClassifierCV, or "
                              "refit it with ensemble=False")
        inner = cc.estimator[-1] if isinstance(cc.estimator, Pipeline) else cc.estimator
        own, b0, w = _decision_function(inner, f"{where} > estimator")
        if own != classes:
            raise Unsupported(f"CalibratedClassifierCV at {path}: the classes of fold {m}'s "
                              "estimator differ from the calibrated classifier's (a fold "
                              "without some class); refit with folds that hold every class")
        if len(cc.calibrators) != len(w):
            raise Unsupported(f"{where}: {len(cc.calibrators)} calibrators for {len(w)} "
                              "decision values")
        for k, cal in enumerate(cc.calibrators):
            if type(cal) is IsotonicRegression:
                calibrators.append(_isotonic(cal, f"{where} > calibrator {k}"))
            else:
                calibrators.append(Calibrator("sigmoid", float(cal.a_), float(cal.b_)))
        intercepts += b0
        rows += w
    task = "binary" if len(classes) == 2 else "multiclass"
    return Head(task, "calibrated", classes, tuple(intercepts), tuple(rows), None,
                Calibration(len(fitted), tuple(calibrators)))


def _isotonic(cal, where) -> Calibrator:
    """A fitted IsotonicRegression as CalibratedClassifierCV leaves it: out_of_bounds=
    'clip', its thresholds increasing, in double."""
    xs = np.asarray(cal.X_thresholds_)
    ys = np.asarray(cal.y_thresholds_)
    if cal.out_of_bounds != "clip" or xs.dtype != np.float64 or ys.dtype != np.float64 or \
            float(cal.X_min_) != float(xs[0]) or float(cal.X_max_) != float(xs[-1]):
        raise Unsupported(f"{where}: only an IsotonicRegression with out_of_bounds='clip' "
                          "over doubles is frozen")
    out = Calibrator("isotonic", thresholds=tuple(map(float, xs)), values=tuple(map(float, ys)))
    if not all(a < b for a, b in zip(out.thresholds, out.thresholds[1:])) or \
            not all(map(math.isfinite, out.values + out.slopes())):
        raise Unsupported(f"{where}: its thresholds are not increasing, or two are too close "
                          "for a finite slope")
    return out


def _decision_function(est, path):
    """A linear classifier's classes and its decision function's intercepts and
    coefficient rows (one row for two classes)."""
    from sklearn.discriminant_analysis import LinearDiscriminantAnalysis
    from sklearn.linear_model import (LogisticRegression, LogisticRegressionCV, Perceptron,
                                      RidgeClassifier, RidgeClassifierCV, SGDClassifier)
    from sklearn.svm import LinearSVC

    kinds = (LinearSVC, RidgeClassifier, RidgeClassifierCV, Perceptron, SGDClassifier,
             LogisticRegression, LogisticRegressionCV, LinearDiscriminantAnalysis)
    if type(est) not in kinds:
        raise Unsupported(f"unsupported estimator {type(est).__name__} at {path}: a "
                          "calibrated estimator must be a linear classifier ("
                          f"{', '.join(k.__name__ for k in kinds)})")
    coef = np.atleast_2d(np.asarray(est.coef_, dtype=np.float64))
    intercept = np.atleast_1d(np.asarray(est.intercept_, dtype=np.float64))
    classes = tuple(_class_label(c, path) for c in est.classes_)
    return (classes, tuple(map(float, intercept)),
            tuple(tuple(map(float, row)) for row in coef))


# TransformedTargetRegressor's (func, inverse_func) -> the link of the frozen head: the
# value is inverse_func of the regressor's prediction
TARGET_LINKS = (("log", "exp", "log"), ("log1p", "expm1", "log1p"), ("sqrt", "square", "sqrt"))


def _transformed_target(est, path) -> Head:
    """TransformedTargetRegressor over a linear regressor, with func and inverse_func
    numpy's log and exp (the log link), log1p and expm1, or sqrt and square."""
    link = next((link for f, inv, link in TARGET_LINKS
                 if est.func is getattr(np, f) and est.inverse_func is getattr(np, inv)), None)
    if est.transformer is not None or link is None:
        what = getattr(est.func, "__name__", repr(est.func))
        raise Unsupported(f"TransformedTargetRegressor at {path}: only func=np.log with "
                          "inverse_func=np.exp, np.log1p with np.expm1, or np.sqrt with "
                          f"np.square is frozen, not {what}")
    inner = _linear_head(est.regressor_, f"{path} > regressor")
    if inner.task != "regression" or inner.link != "identity":
        raise Unsupported(f"TransformedTargetRegressor at {path}: its regressor must be a "
                          "linear regression (identity link)")
    return Head("regression", link, None, inner.intercepts, inner.coefficients, None)


def _one_vs_rest_head(est, path) -> Head:
    """OneVsRestClassifier over binary logistic regressions: each class's sigmoid of its
    own margin, divided by their sum (predict_proba); the class of the largest margin
    (predict: lowest index on ties, as np.argmax)."""
    from sklearn.linear_model import LogisticRegression, LogisticRegressionCV

    if est.label_binarizer_.y_type_ not in ("binary", "multiclass"):
        raise Unsupported(f"OneVsRestClassifier at {path} is multilabel; only single-label "
                          "models are frozen")
    rows = []
    for k, inner in enumerate(est.estimators_):
        where = f"{path} > estimator {k}"
        if type(inner) not in (LogisticRegression, LogisticRegressionCV):
            raise Unsupported(f"OneVsRestClassifier at {path}: estimator {k} is "
                              f"{type(inner).__name__}; only LogisticRegression is frozen "
                              "(a class seen in every or no row gives a constant one)")
        head = _linear_head(inner, where)
        if head.task != "binary" or head.classes != (0, 1):
            raise Unsupported(f"{where}: not a binary 0/1 logistic regression")
        rows.append(head)
    classes = tuple(_class_label(c, path) for c in est.classes_)
    if len(rows) == 1:
        return Head("binary", "logit", classes, rows[0].intercepts, rows[0].coefficients, 0.0)
    return Head("multiclass", "ovr_logit", classes,
                tuple(h.intercepts[0] for h in rows),
                tuple(h.coefficients[0] for h in rows), None)


def _linear_head(est, path) -> Head:
    from sklearn.discriminant_analysis import LinearDiscriminantAnalysis
    from sklearn.linear_model import (ARDRegression, BayesianRidge, ElasticNet, ElasticNetCV,
                                      GammaRegressor, HuberRegressor, Lasso, LassoCV,
                                      LinearRegression, LogisticRegression,
                                      LogisticRegressionCV, PoissonRegressor,
                                      QuantileRegressor, Ridge, RidgeCV, SGDClassifier,
                                      SGDRegressor, TweedieRegressor)

    kind = type(est)
    if kind in (LogisticRegression, LogisticRegressionCV, SGDClassifier,
                LinearDiscriminantAnalysis):
        if kind is SGDClassifier and est.loss != "log_loss":
            return _decision_head(est, path)
        classes = tuple(_class_label(c, path) for c in est.classes_)
        coef = np.asarray(est.coef_, dtype=np.float64)
        intercept = np.atleast_1d(np.asarray(est.intercept_, dtype=np.float64))
        if len(classes) == 2:
            return Head("binary", "logit", classes, (float(intercept[0]),),
                        (tuple(map(float, coef[0])),), 0.0)
        if kind is SGDClassifier or (kind is not LinearDiscriminantAnalysis
                                     and _one_vs_rest(est)):
            raise Unsupported(f"{kind.__name__} at {path} is one-vs-rest; only multinomial "
                              "(softmax) multiclass models are supported")
        return Head("multiclass", "softmax", classes, tuple(map(float, intercept)),
                    tuple(tuple(map(float, row)) for row in coef), None)
    if kind in (LinearRegression, Ridge, Lasso, ElasticNet, PoissonRegressor, GammaRegressor,
                TweedieRegressor, RidgeCV, LassoCV, ElasticNetCV, BayesianRidge,
                ARDRegression, HuberRegressor, QuantileRegressor, SGDRegressor):
        coef = np.asarray(est.coef_, dtype=np.float64)
        if coef.ndim == 2:
            if coef.shape[0] != 1:
                raise Unsupported(f"{kind.__name__} at {path} has several outputs; freeze one "
                                  "output per model")
            coef = coef[0]
        intercept = float(np.ravel(np.asarray(est.intercept_, dtype=np.float64))[0]) \
            if np.ndim(est.intercept_) else float(est.intercept_)
        link = "identity"
        if kind in (PoissonRegressor, GammaRegressor):
            link = "log"
        elif kind is TweedieRegressor:
            link = "identity" if (est.link == "identity" or
                                  (est.link == "auto" and est.power <= 0)) else "log"
        return Head("regression", link, None, (intercept,), (tuple(map(float, coef)),), None)
    if kind.__name__ == "NegativeBinomialRegressor" and \
            kind.__module__ == "scorewright.fit.pipeline":
        # fit's negative binomial model: the mean is exp(intercept_ + x coef_)
        return Head("regression", "log", None, (float(est.intercept_),),
                    (tuple(map(float, est.coef_)),), None)
    if kind.__name__ in DECISION_KINDS and kind.__module__.startswith("sklearn."):
        return _decision_head(est, path)
    raise Unsupported(f"unsupported estimator {kind.__name__} at {path}")


# Linear classifiers with a decision function and no probabilities (with SGDClassifier of
# any loss but log_loss): frozen as "decision" heads, their margins and class alone.
DECISION_KINDS = ("RidgeClassifier", "RidgeClassifierCV", "LinearSVC", "Perceptron",
                  "PassiveAggressiveClassifier")


def _decision_head(est, path) -> Head:
    """A linear classifier frozen as its decision function (scikit-learn's
    LinearClassifierMixin: X coef_.T + intercept_, one column for two classes) and its
    class (predict: classes_[1] where the one margin is > 0, else the first largest
    margin, as np.argmax). SGDClassifier(loss='modified_huber') has a predict_proba too,
    (clip(margin, -1, 1) + 1) / 2 normalised across classes, which no frozen link states;
    it is frozen decision-only like the others: its predict is this rule on the margins,
    and where two margins clip to the same value predict_proba's largest probability does
    not even name predict's class."""
    binarizer = getattr(est, "_label_binarizer", None)  # RidgeClassifier's
    if str(getattr(binarizer, "y_type_", "")).startswith("multilabel"):
        raise Unsupported(f"{type(est).__name__} at {path} is multilabel; only single-label "
                          "models are frozen")
    classes = tuple(_class_label(c, path) for c in est.classes_)
    coef = np.atleast_2d(np.asarray(est.coef_, dtype=np.float64))
    intercept = np.atleast_1d(np.asarray(est.intercept_, dtype=np.float64))
    if intercept.shape == (1,) and coef.shape[0] > 1:  # fit_intercept=False gives 0.0
        intercept = np.repeat(intercept, coef.shape[0])
    rows = 1 if len(classes) == 2 else len(classes)
    if coef.shape[0] != rows or intercept.shape != (rows,):
        raise Unsupported(f"{type(est).__name__} at {path} has {coef.shape[0]} decision "
                          f"function columns for {len(classes)} classes; only single-label "
                          "models (one column for two classes, one per class otherwise) "
                          "are frozen")
    intercepts = tuple(map(float, intercept))
    coefs = tuple(tuple(map(float, row)) for row in coef)
    if rows == 1:
        return Head("binary", DECISION, classes, intercepts, coefs, 0.0)
    return Head("multiclass", DECISION, classes, intercepts, coefs, None)


def _one_vs_rest(est) -> bool:
    multi = getattr(est, "multi_class", "auto")
    if multi == "ovr":
        return True
    return multi in ("auto", "deprecated") and est.solver == "liblinear"


def _class_label(value, path):
    value = _plain(value)
    if isinstance(value, bool):
        return int(value)
    if isinstance(value, float) and math.isfinite(value) and value == math.floor(value):
        return int(value)
    if isinstance(value, (int, str)):
        return value
    raise Unsupported(f"class label {value!r} at {path} is not an integer or text")

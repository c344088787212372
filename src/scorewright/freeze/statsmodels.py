"""Freezing fitted statsmodels results (Logit, Probit, Poisson, NegativeBinomial, GLM, OLS,
WLS, GLS) into a frozen model.

A model fitted on arrays takes its features from `exog_names`, with the column
`add_constant` made (statsmodels' `const_idx`) as the intercept. A model fitted
through a formula takes its design from the formula's own design information, which
statsmodels keeps as `model.data.model_spec`: patsy's DesignInfo or formulaic's
ModelSpec, whichever engine fitted it. Each term is read from its factors and their
codings, never from the column names.

- A numerical factor that names a data column is that feature; patsy's `center(x)` and
  `standardize(x, center=, rescale=, ddof=)` and formulaic's `center(x)` and `scale(x)`
  become the scaling steps those stateful transforms apply, with the constants they
  memorized.
- A categorical factor (`C(x)`, `C(x, Treatment(reference=...))`, `C(x, Sum)`, any
  contrast, or a text column) is that feature's levels; whatever its contrast matrix,
  each level's contribution to the margin is the sum over the term's columns of the
  level's contrast entry times the coefficient, so any coding freezes the same way.
- `np.log(x)`, `np.log1p(x)` and `np.sqrt(x)` of a data column are that feature with
  the transform (a value outside its domain, where statsmodels predicts NaN, is
  treated as missing).
- `I(x ** 2)` and `I(x ** 3)` are products of the column with itself; an interaction
  (`a:b`, `a*b`) of any factors is, per combination of its categorical factors' levels,
  one product column, as the engine builds it (see `_design_of_terms`). A variable may
  appear in several terms with the same transform everywhere.
- patsy's `bs(x, ...)` and `cr(x, ...)` are spline features (format version 3; see
  `_bs_term`); `cc()`, `te()` and other transforms are refused in one line naming the
  term.

statsmodels cannot score a row with a missing value (the prediction is NaN) or an
unseen level (patsy raises). The frozen model states its rule instead: a missing
numeric value's design value is 0.0 (the term adds nothing), and a missing or unseen
level gets no contribution from its term (under treatment coding, the reference
level's). `scorewright show` and the freeze notes say so.
"""

from __future__ import annotations

import ast
import itertools
import math

import numpy as np

from ..errors import ScorewrightError
from .offsets import with_offset
from ..model import (SPLINE, SPLINE_DEGREES, TRANSFORM_OPS, CategoricalFeature, DesignColumn,
                     FrozenModel, Head, NumericFeature, ScalingStep, in_domain)

# model class -> (task, link) for the models whose link does not come from a family
DISCRETE = {"Logit": ("binary", "logit"), "Probit": ("binary", "probit"),
            "Poisson": ("regression", "log"),
            "NegativeBinomial": ("regression", "log"), "GeneralizedPoisson": ("regression", "log"),
            "OLS": ("regression", "identity"), "WLS": ("regression", "identity"),
            "GLS": ("regression", "identity")}
# GLM family -> the links frozen for it, as (task, link)
GLM_LINKS = {("Binomial", "Logit"): ("binary", "logit"),
             ("Binomial", "Probit"): ("binary", "probit"),
             ("Binomial", "CLogLog"): ("binary", "cloglog"),
             ("Binomial", "Cauchy"): ("binary", "cauchit"),
             ("Binomial", "Log"): ("binary", "log"),
             ("Gaussian", "Identity"): ("regression", "identity"),
             ("Gamma", "InversePower"): ("regression", "inverse"),
             ("Gaussian", "InversePower"): ("regression", "inverse")}
LOG_FAMILIES = ("Poisson", "Gamma", "Tweedie", "NegativeBinomial", "Gaussian", "InverseGaussian")
# statsmodels' deprecated lower-case link classes are subclasses of these
LINK_NAMES = {"probit": "Probit", "cloglog": "CLogLog", "logit": "Logit", "log": "Log",
              "identity": "Identity", "inverse_power": "InversePower", "cauchy": "Cauchy"}


class Unsupported(ScorewrightError):
    pass


def is_statsmodels(obj) -> bool:
    return (type(obj).__module__ or "").split(".")[0] == "statsmodels"


def freeze_results(results, feature_names=None, name=None, offset=None,
                   exposure=None) -> FrozenModel:
    """The frozen model of fitted statsmodels results (a results object, or its wrapper).

    A model fitted with an `offset=` or `exposure=` array needs the name of the column
    that holds it when scoring (`offset="..."`, `exposure="..."`): it becomes an input
    added to the margin with weight 1 (the exposure through its log), marked as the offset
    or exposure, so the artifacts output the expected count and the rate (without it). A
    missing offset counts as 0; a missing or non-positive exposure as 1 (the count is
    then the rate per unit of exposure)."""
    model = getattr(results, "model", None)
    if model is None or not hasattr(results, "params"):
        raise Unsupported(f"{type(results).__name__}: freeze takes fitted statsmodels results "
                          "(what .fit() returns), not a model")
    kind = type(model).__name__
    task, link = _task_and_link(model, kind)
    offsets = _offset_columns(model, kind, link, offset, exposure)
    # the exog columns (a NegativeBinomial also names its alpha among exog_names)
    names = list(model.exog_names)[:np.shape(model.exog)[1]]
    params = np.asarray(results.params, dtype=np.float64).reshape(-1)[:len(names)]
    spec = getattr(model.data, "model_spec", None)
    if spec is not None and hasattr(spec, "term_codings"):
        if feature_names is not None:
            raise ScorewrightError("feature_names: a formula model names its own features")
        features, design, coefs, intercept, inputs = _from_formula(spec, names, params)
    elif spec is not None and type(spec).__module__.split(".")[0] == "formulaic":
        if feature_names is not None:
            raise ScorewrightError("feature_names: a formula model names its own features")
        features, design, coefs, intercept, inputs = _from_formulaic(spec, names, params)
    elif spec is not None:
        raise Unsupported(f"{kind} fitted through a formula engine other than patsy or "
                          f"formulaic ({type(spec).__module__})")
    else:
        features, design, coefs, intercept, inputs = _from_arrays(model, names, params,
                                                                  feature_names)
    classes, cut = ((0, 1), half_cut(link)) if task == "binary" else (None, None)
    head = Head(task, link, classes, (intercept,), (tuple(coefs),), cut)
    source = f"statsmodels {kind}"
    family = getattr(model, "family", None)
    if family is not None:
        source += f" ({type(family).__name__}, {type(family.link).__name__} link)"
    formula = getattr(model, "formula", None)
    if formula:
        source += f": {formula}"
    transforms = [(f.name, f.scaling[0].op) for f in features
                  if getattr(f, "scaling", ()) and f.scaling[0].op in TRANSFORM_OPS]
    prov = _provenance(source, inputs, transforms)
    frozen = FrozenModel(name or kind.lower(), tuple(features), tuple(design), head,
                         prov).sealed()
    for attr, column in offsets:
        frozen = with_offset(frozen, attr, column)
    return frozen


def _provenance(source: str, inputs: list[str], transforms=()) -> dict:
    import platform

    import statsmodels

    from .. import __version__

    return {"scorewright_version": __version__, "source": source,
            "libraries": {"python": platform.python_version(), "numpy": np.__version__,
                          "statsmodels": statsmodels.__version__},
            "inputs": {"feature_names": inputs},
            "notes": ["statsmodels cannot score a missing value or an unseen level; "
                      "the frozen model gives a missing numeric value the design "
                      "value 0.0 and a missing or unseen level no contribution "
                      "from its term"] + [
                f"statsmodels cannot score {name}'s values outside the domain of "
                f"np.{op} (NaN, or at the edge an infinite margin); the frozen model "
                "treats them as missing" for name, op in transforms]}


def _task_and_link(model, kind: str) -> tuple[str, str]:
    family = getattr(model, "family", None)
    if family is None:
        if kind in DISCRETE:
            return DISCRETE[kind]
        raise Unsupported(f"statsmodels {kind} is not supported; freeze takes Logit, Probit, "
                          "Poisson, NegativeBinomial, GeneralizedPoisson, GLM, OLS, WLS and GLS "
                          "results")
    fam, lnk = type(family).__name__, type(family.link).__name__
    lnk = LINK_NAMES.get(lnk, lnk)
    if lnk == "Probit" and getattr(family.link, "dbn", None) is not _normal():
        lnk = "CDFLink"
    if (fam, lnk) in GLM_LINKS:
        return GLM_LINKS[(fam, lnk)]
    if fam in LOG_FAMILIES and lnk == "Log":
        return "regression", "log"
    raise Unsupported(f"GLM {fam} family with the {lnk} link is not supported; frozen links: "
                      "Binomial with logit, probit, cloglog, cauchit or log, Gaussian/identity, "
                      "inverse for "
                      "Gamma and Gaussian, log for Poisson, Gamma, Tweedie, NegativeBinomial, "
                      "Gaussian and InverseGaussian")


def half_cut(link: str) -> float:
    """The decision cut of "probability > 0.5". The symmetric links cut at 0.0, the sign
    of the margin (p1 is exactly 0.5 there; margins within about 1e-16 above it round to
    0.5 too). For cloglog and log: the largest margin whose positive-class probability, as
    the scoring program computes it, is at most 0.5, found near ln(ln 2) (cloglog) or
    ln(1/2) (log) a double at a time."""
    if link in ("logit", "probit", "cauchit"):
        return 0.0
    from ..program import link_probability

    cut = math.log(0.5) if link == "log" else math.log(math.log(2.0))
    while link_probability(link, cut) > 0.5:
        cut = math.nextafter(cut, -math.inf)
    while link_probability(link, math.nextafter(cut, math.inf)) <= 0.5:
        cut = math.nextafter(cut, math.inf)
    return cut


def _normal():
    from scipy import stats

    return stats.norm


def _offset_columns(model, kind: str, link: str, offset, exposure) -> list:
    """[(attr, column)] for the offset and exposure the model was fitted with."""
    out = []
    for attr, column in (("offset", offset), ("exposure", exposure)):
        fitted = getattr(model, attr, None) is not None
        if fitted and column is None:
            raise Unsupported(f"{kind} was fitted with an {attr}: name the column that holds "
                              f"it, freeze(results, {attr}='column') or --{attr} COLUMN")
        if column is not None and not fitted:
            raise ScorewrightError(f"{attr}={column!r}: {kind} was fitted without an {attr}")
        if column is not None:
            if not isinstance(column, str) or not column:
                raise ScorewrightError(f"{attr}: expected a column name, got {column!r}")
            if attr == "exposure" and link != "log":
                raise Unsupported(f"{kind} has an exposure but no log link")
            out.append((attr, column))
    return out


def _from_arrays(model, names, params, feature_names):
    const = model.data.const_idx if getattr(model.data, "k_constant", 0) else None
    if const is not None and np.ndim(const) != 0:
        raise Unsupported("the design has more than one constant column")
    kept = [j for j in range(len(names)) if j != const]
    given = list(feature_names) if feature_names is not None else [names[j] for j in kept]
    if len(given) != len(kept):
        raise ScorewrightError(f"feature_names: {len(given)} names for {len(kept)} "
                               "non-constant columns")
    features = [NumericFeature(str(n), None) for n in given]
    design = [DesignColumn(f.name) for f in features]
    intercept = float(params[const]) if const is not None else 0.0
    return features, design, [float(params[j]) for j in kept], intercept, list(given)


# ---------------------------------------------------------------- formulas (patsy)

def _from_formula(spec, names, params):
    """The terms of a patsy formula, as patsy builds them (build.py, _build_subterm): per
    subterm, each column is the product over its factors of a categorical factor's
    contrast entry for the row's level or a numerical factor's value; the left-most
    factor varies fastest over the columns."""
    if list(spec.column_names) != list(names):
        raise Unsupported("the formula's design columns are not the model's exog columns")
    terms, splines = [], []
    for term, subterms in spec.term_codings.items():
        factors = []
        if len(term.factors) == 1 and _is_bs(spec.factor_infos[term.factors[0]]):
            splines.append(_bs_term(term, spec.factor_infos[term.factors[0]],
                                    params[spec.term_slices[term]]))
            continue
        for factor in term.factors:
            info = spec.factor_infos[factor]
            if info.type == "numerical":
                if info.num_columns != 1:
                    raise Unsupported(f"term {term.name()!r}: the factor {factor.name()!r} "
                                      f"makes {info.num_columns} columns (a spline or a "
                                      "matrix); not freezable yet")
                factors.append((factor, _numeric_factor(factor, info)))
            else:
                factors.append((factor, _categorical_factor(factor, info)))
        subs = [(list(sub.factors), {f: np.asarray(sub.contrast_matrices[f].matrix,
                                                   dtype=np.float64)
                                     for f in sub.contrast_matrices}) for sub in subterms]
        terms.append((term.name(), factors, subs, params[spec.term_slices[term]]))
    return _with_splines(_design_of_terms(terms), splines)


def _with_splines(built, splines):
    """The design of the other terms, with each spline feature's basis columns added."""
    features, design, coefs, intercept, inputs = built
    by_name = {f.name: f for f in features}
    for feat, columns in splines:
        _add_feature(by_name, feat, f"a spline of {feat.name}")
        if feat.name not in inputs:
            features.append(feat)
            inputs.append(feat.name)
        for j, c in columns:
            design.append(DesignColumn(feat.name, basis=j, scaling=()))
            coefs.append(c)
    return features, design, coefs, intercept, inputs


def _is_bs(info) -> bool:
    """A patsy spline factor frozen as a spline feature: bs() or cr()."""
    state = info.state if isinstance(info.state, dict) else {}
    objs = list(state.get("transforms", {}).values())
    return info.type == "numerical" and len(objs) == 1 and type(objs[0]).__name__ in (
        "BS", "CR") and type(objs[0]).__module__.startswith("patsy.")


def _bs_term(term, info, params):
    """patsy's bs(x, ...) or cr(x, ...) as a spline feature (format version 3).

    bs: the B-spline basis on the knot vector patsy memorized (boundary knots repeated
    degree + 1 times), its first column left out without include_intercept; outside the
    boundary knots patsy raises, so the extrapolation is 'error' (treated as missing: the
    term adds nothing, the frozen model's rule for what statsmodels cannot score).
    cr: mgcv's natural cubic regression spline (with any constraints= patsy applied), a
    cubic spline on its knots that continues linearly beyond them: the extrapolation is
    'linear'. The frozen spline step takes distinct knots, so the basis is re-expressed on
    the same knots with the ends extended by the end intervals' widths, which spans the
    same piecewise polynomials on [lower, upper]: each of patsy's columns is a combination
    of the extended basis functions (least squares on 20 points per interval, patsy's own
    transform evaluating its side, checked to 1e-13), and the coefficients move through
    that map."""
    from scipy.interpolate import BSpline

    obj = next(iter(info.state["transforms"].values()))
    tree = _parse_expr(info.state["eval_code"], term.name())
    if not (isinstance(tree, ast.Call) and len(tree.args) == 1
            and isinstance(tree.args[0], ast.Name)):
        raise Unsupported(f"term {term.name()!r}: a spline of a column is frozen, not of an "
                          "expression")
    options = {k.arg: ast.literal_eval(k.value) for k in tree.keywords}
    if type(obj).__name__ == "CR":
        k, extrapolation = 3, "linear"
        cuts = [float(v) for v in obj._all_knots]
    else:
        k, extrapolation = int(obj._degree), "error"
        clamped = [float(v) for v in obj._all_knots]
        cuts = [clamped[0], *clamped[k + 1:len(clamped) - k - 1], clamped[-1]]
    return _spline_feature(term.name(), tree.args[0].id, k, cuts, extrapolation,
                           lambda x: obj.transform(x, **options), params)


def _spline_feature(term: str, column: str, k: int, cuts, extrapolation: str, evaluate,
                    params):
    """The spline feature whose basis, on distinct knots, reproduces the formula engine's
    spline columns (`evaluate`) on [cuts[0], cuts[-1]]; and its design columns."""
    from scipy.interpolate import BSpline

    if k not in SPLINE_DEGREES:
        raise Unsupported(f"term {term!r}: degree {k}; degrees "
                          f"{', '.join(map(str, SPLINE_DEGREES))} are frozen")
    if len(cuts) < 2 or any(not a < b for a, b in zip(cuts, cuts[1:])):
        raise Unsupported(f"term {term!r}: repeated knots are not frozen")
    h_lo, h_hi = cuts[1] - cuts[0], cuts[-1] - cuts[-2]
    knots = tuple([cuts[0] - h_lo * i for i in range(k, 0, -1)] + cuts
                  + [cuts[-1] + h_hi * i for i in range(1, k + 1)])
    x = np.concatenate([np.linspace(a, b, 20) for a, b in zip(cuts, cuts[1:])])
    old = np.asarray(evaluate(x), dtype=np.float64)
    new = BSpline.design_matrix(x, np.asarray(knots), k).toarray()
    m, *_ = np.linalg.lstsq(new, old, rcond=None)   # old = new @ m
    if old.shape[1] != len(params) or np.max(np.abs(new @ m - old)) > 1e-13:
        raise Unsupported(f"term {term!r}: its basis could not be re-expressed on "
                          "distinct knots to 1e-13")
    beta = [float(b) for b in params]
    columns = [(i, math.fsum(float(m[i, j]) * beta[j] for j in range(len(beta))))
               for i in range(new.shape[1])]
    step = ScalingStep(SPLINE, knots=knots, degree=k, extrapolation=extrapolation)
    return (NumericFeature(column, None, (step,)),
            [(i, c) for i, c in columns if c != 0.0])


# formulaic's bs(extrapolation=...) -> the frozen rule: 'raise' and 'na' give no score
# (the frozen model: missing, the term adds nothing), 'zero' basis values 0 (the same),
# 'clip' the boundary values, 'extend' the end polynomials
FORMULAIC_EXTRAPOLATION = {"raise": "error", "na": "error", "zero": "error",
                           "clip": "constant", "extend": "continue"}


def _formulaic_spline(spec, ets, params):
    """formulaic's bs(x, ...) (its basis_spline) as a spline feature, or None."""
    if len(ets.scoped_terms) != 1 or len(ets.scoped_terms[0].factors) != 1:
        return None
    expr = ets.scoped_terms[0].factors[0].factor.expr
    state = spec.transform_state.get(expr)
    tree = _parse_expr(expr, expr)
    if not (isinstance(state, dict) and "knots" in state and isinstance(tree, ast.Call)
            and isinstance(tree.func, ast.Name) and tree.func.id in ("bs", "basis_spline")):
        return None
    if len(tree.args) != 1 or not isinstance(tree.args[0], ast.Name):
        raise Unsupported(f"term {expr!r}: a spline of a column is frozen, not of an "
                          "expression")
    from formulaic.transforms import basis_spline

    options = {k.arg: ast.literal_eval(k.value) for k in tree.keywords}
    k = int(options.get("degree", 3))
    mode = str(getattr(options.get("extrapolation", "raise"), "value",
                       options.get("extrapolation", "raise")))
    if mode not in FORMULAIC_EXTRAPOLATION:
        raise Unsupported(f"term {expr!r}: extrapolation {mode!r} is not frozen")
    clamped = [float(v) for v in state["knots"]]
    cuts = [clamped[0], *clamped[k + 1:len(clamped) - k - 1], clamped[-1]]

    def evaluate(x):
        return np.column_stack(list(basis_spline(x, _state=dict(state), **options).values()))

    return _spline_feature(expr, tree.args[0].id, k, cuts, FORMULAIC_EXTRAPOLATION[mode],
                           evaluate, params)


def _from_formulaic(spec, names, params):
    """The terms of a formulaic formula, as formulaic builds them (its materializer's
    _get_columns_for_term: the row-wise product of the scoped factors' columns, the
    left-most factor varying fastest); a categorical factor's columns are its contrasts'
    coding matrix, full or reduced rank as the scoped factor says."""
    if list(spec.column_names) != list(names):
        raise Unsupported("the formula's design columns are not the model's exog columns")
    position = {name: j for j, name in enumerate(spec.column_names)}
    terms, splines = [], []
    for ets in spec.structure:
        start = position[ets.columns[0]] if ets.columns else 0
        beta = params[start:start + len(ets.columns)]
        name = str(ets.term)
        spline = _formulaic_spline(spec, ets, beta)
        if spline is not None:
            splines.append(spline)
            continue
        factors, subs, seen = [], [], {}
        for scoped in ets.scoped_terms:
            if scoped.scale != 1:
                raise Unsupported(f"term {name!r}: a scaled term is not freezable yet")
            matrices = {}
            for sf in scoped.factors:
                expr = sf.factor.expr
                if expr not in seen:
                    seen[expr] = True
                    factors.append((expr, _formulaic_factor(spec, sf.factor, name)))
                kind, state = spec.encoder_state.get(expr, (None, {}))
                if getattr(kind, "value", kind) == "categorical":
                    c = state["contrasts"]
                    matrices[expr] = np.asarray(c.contrasts.get_coding_matrix(
                        c.levels, reduced_rank=sf.reduced), dtype=np.float64)
            subs.append(([sf.factor.expr for sf in scoped.factors], matrices))
        if not factors:
            terms.append((name, [], [], beta))
            continue
        terms.append((name, factors, subs, beta))
    return _with_splines(_design_of_terms(terms), splines)


def _formulaic_factor(spec, factor, term: str):
    expr = factor.expr
    kind, state = spec.encoder_state.get(expr, (None, {}))
    if getattr(kind, "value", kind) == "categorical":
        tree = _parse_expr(expr, term)
        return CategoricalFeature(_categorical_column(tree, term), tuple(_level(v, term)
                                                for v in state["contrasts"].levels))
    tree = _parse_expr(expr, term)
    if (isinstance(tree, ast.Call) and isinstance(tree.func, ast.Name)
            and tree.func.id in ("center", "scale") and len(tree.args) == 1
            and isinstance(tree.args[0], ast.Name) and expr in spec.transform_state):
        st = spec.transform_state[expr]
        steps = []
        if st.get("center") is not None:
            steps.append(ScalingStep("subtract", float(np.asarray(st["center"]).reshape(-1)[0])))
        if st.get("scale") is not None:
            steps.append(ScalingStep("divide", float(np.asarray(st["scale"]).reshape(-1)[0])))
        return NumericFeature(tree.args[0].id, None, tuple(steps)), 1
    return _numeric_code(tree, term)


def _design_of_terms(terms):
    """Per term (name, [(factor, feature)], subterms, coefficients), where each subterm is
    (its factors in its order, its categorical factors' coding matrices (levels x
    columns)), the left-most factor varying fastest over its columns: the design columns.

    A column's coefficient is spread over the levels it depends on: per combination of the
    levels of the subterm's categorical factors, the contribution is the coding entries'
    product times the coefficient. Contributions with the same numerical factors and the
    same levels are summed (math.fsum) into one design column: the product of the
    numerical factors and the indicators of those levels. A column does not depend on a
    categorical factor its subterm leaves out; a missing or unseen level gets nothing from
    the columns that depend on it (formulaic scores an unseen level so too)."""
    features: dict[str, object] = {}
    parts: dict[tuple, list] = {}     # (numeric factors, (feature, level)...) -> weights
    for name, factors, subterms, params in terms:
        beta = iter(float(b) for b in params)
        if not factors:
            parts.setdefault(((), ()), []).append(float(params[0]))
            continue
        numeric, categorical = [], {}
        for factor, feat in factors:
            if isinstance(feat, tuple):       # (numeric feature, power)
                feat, power = feat
                _add_feature(features, feat, name)
                numeric.append((feat.name, feat.scaling, power))
            else:
                _add_feature(features, feat, name)
                categorical[factor] = feat.name
        for order, matrices in subterms:
            sizes = [matrices[f].shape[1] if f in matrices else 1 for f in order]
            present = [f for f in order if f in categorical]
            for reversed_combo in itertools.product(*[range(n) for n in reversed(sizes)]):
                column = dict(zip(order, reversed_combo[::-1]))
                b = next(beta)
                entries = []
                for f in present:
                    levels = features[categorical[f]].levels
                    entries.append([((categorical[f], level), float(v)) for level, v
                                    in zip(levels, matrices[f][:, column[f]]) if v != 0.0])
                for pick in (itertools.product(*entries) if entries else [()]):
                    weight = b
                    for _, v in pick:
                        weight *= v
                    key = (tuple(numeric), tuple(sorted(lv for lv, _ in pick)))
                    parts.setdefault(key, []).append(weight)
        if next(beta, None) is not None:
            raise Unsupported(f"term {name!r}: its columns are not the ones the formula "
                              "engine builds as read here")
    design, coefs, intercept = [], [], 0.0
    for (numeric, levels), weights in parts.items():
        contribution = math.fsum(weights)
        if not numeric and not levels:
            intercept = contribution
            continue
        if contribution == 0.0:
            continue
        if not numeric and len(levels) == 1:
            design.append(DesignColumn(levels[0][0], (levels[0][1],)))
        elif len(numeric) == 1 and not levels and numeric[0][2] == 1:
            design.append(DesignColumn(numeric[0][0]))
        else:
            cols = []
            for feat_name, steps, power in numeric:
                cols += [DesignColumn(feat_name, scaling=tuple(steps))] * power
            cols += [DesignColumn(feat_name, (level,)) for feat_name, level in levels]
            design.append(DesignColumn(cols[0].feature, product=tuple(cols)))
        coefs.append(contribution)
    return list(features.values()), design, coefs, intercept, list(features)


def _add_feature(features: dict, feat, term: str) -> None:
    """A variable in several terms is one feature: the same transform and levels
    everywhere it appears."""
    have = features.get(feat.name)
    if have is not None and have != feat:
        raise Unsupported(f"term {term!r}: the variable {feat.name!r} appears with "
                          "different transforms or levels in different terms; not "
                          "freezable yet")
    features[feat.name] = feat


def _numeric_factor(factor, info) -> tuple[NumericFeature, int]:
    """The feature of a patsy numerical factor, and the power it is raised to."""
    code = info.state.get("eval_code", factor.code) if isinstance(info.state, dict) \
        else factor.code
    tree = _parse_expr(code, factor.name())
    call = tree
    if (isinstance(call, ast.Call) and isinstance(call.func, ast.Attribute)
            and call.func.attr == "transform" and isinstance(call.func.value, ast.Name)
            and len(call.args) == 1 and isinstance(call.args[0], ast.Name)):
        obj = info.state["transforms"].get(call.func.value.id)
        options = {k.arg: ast.literal_eval(k.value) for k in call.keywords}
        steps = _stateful_steps(obj, options, factor)
        return NumericFeature(call.args[0].id, None, tuple(steps)), 1
    return _numeric_code(tree, factor.name())


def _numeric_code(tree, term: str) -> tuple[NumericFeature, int]:
    """A column, I(x ** k) (the column k times, k <= 3), or np.log/log1p/sqrt of one."""
    if isinstance(tree, ast.Name):
        return NumericFeature(tree.id, None), 1
    if (isinstance(tree, ast.Call) and isinstance(tree.func, ast.Name) and tree.func.id == "I"
            and len(tree.args) == 1 and not tree.keywords):
        inner = tree.args[0]
        if (isinstance(inner, ast.BinOp) and isinstance(inner.op, ast.Pow)
                and isinstance(inner.left, ast.Name) and isinstance(inner.right, ast.Constant)
                and type(inner.right.value) is int and 1 <= inner.right.value <= 3):
            return NumericFeature(inner.left.id, None), inner.right.value
    if (isinstance(tree, ast.Call) and isinstance(tree.func, ast.Attribute)
            and isinstance(tree.func.value, ast.Name) and tree.func.value.id in ("np", "numpy")
            and tree.func.attr in TRANSFORM_OPS and len(tree.args) == 1 and not tree.keywords
            and isinstance(tree.args[0], ast.Name)):
        return NumericFeature(tree.args[0].id, None, (ScalingStep(tree.func.attr),)), 1
    raise Unsupported(f"term {term!r}: only a column, np.log(x), np.log1p(x), np.sqrt(x), "
                      "I(x ** 2), I(x ** 3) and the formula engine's centering and scaling "
                      "are frozen as numeric factors")


def _stateful_steps(obj, options: dict, factor) -> list[ScalingStep]:
    """The steps patsy's Center or Standardize applies, with its memorized constants
    rounded to double as patsy's own arithmetic on a float64 column rounds them."""
    kind = type(obj).__name__
    if kind == "Center":
        mean = np.asarray(obj._sum / obj._count, dtype=np.float64).reshape(-1)
        return [ScalingStep("subtract", float(mean[0]))]
    if kind == "Standardize":
        steps = []
        if options.get("center", True):
            steps.append(ScalingStep("subtract", float(np.asarray(obj.current_mean)[0])))
        if options.get("rescale", True):
            ddof = options.get("ddof", 0)
            sd = np.sqrt(obj.current_M2 / (obj.current_n - ddof))
            steps.append(ScalingStep("divide", float(np.asarray(sd)[0])))
        return steps
    raise Unsupported(f"term {factor.name()!r}: the stateful transform {kind} is not "
                      "frozen yet")


def _categorical_factor(factor, info) -> CategoricalFeature:
    tree = _parse_expr(factor.code, factor.name())
    return CategoricalFeature(_categorical_column(tree, factor.name()),
                              tuple(_level(v, factor.name()) for v in info.categories))


def _categorical_column(tree, term: str) -> str:
    """The column of a categorical factor: C(column, ...) or the column itself."""
    if isinstance(tree, ast.Call) and isinstance(tree.func, ast.Name) and tree.func.id == "C" \
            and tree.args and isinstance(tree.args[0], ast.Name):
        return tree.args[0].id
    if isinstance(tree, ast.Name):
        return tree.id
    raise Unsupported(f"term {term!r}: a categorical term must be C(column, ...) or a text "
                      "column")


def _level(value, term: str):
    if isinstance(value, (bool, np.bool_)):
        return int(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)) and math.isfinite(value) and value == int(value):
        return int(value)  # patsy matches 3 and 3.0 alike
    if isinstance(value, str):
        return value
    raise Unsupported(f"term {term!r}: the level {value!r} is neither text nor an integer")


def _parse_expr(code: str, term: str):
    try:
        return ast.parse(code, mode="eval").body
    except SyntaxError:
        raise Unsupported(f"term {term!r}: cannot read its code") from None


# ---------------------------------------------------------------- the self-check's view

class ResultsSource:
    """The results as the self-check calls a source estimator: predict_proba for a binary
    model (both classes), predict for the rest; rows statsmodels cannot score give NaN."""

    def __init__(self, results, model: FrozenModel):
        self.results = results
        inputs = model.provenance["inputs"]
        self.offsets = {attr: inputs[attr] for attr in ("offset", "exposure") if attr in inputs}
        # a format 4 model outputs the rate beside the count (a role feature)
        self.rate = any(getattr(f, "role", None) for f in model.features)
        self.formula = getattr(results.model.data, "model_spec", None) is not None
        self.feature_names_in_ = np.array(model.provenance["inputs"]["feature_names"],
                                          dtype=object)
        self.const = (results.model.data.const_idx
                      if getattr(results.model.data, "k_constant", 0) else None)
        self.transforms = [(f.name, f.scaling[0].op) for f in model.features
                           if getattr(f, "scaling", ()) and f.scaling[0].op in TRANSFORM_OPS]
        self.log_binomial = model.head.task == "binary" and model.head.link == "log"
        self.splines = [(f.name, f.scaling[0].spline_range(), f.scaling[0].extrapolation)
                        for f in model.features
                        if getattr(f, "scaling", ()) and f.scaling[0].op == SPLINE]

    def _exog(self, frame):
        frame = frame.drop(columns=list(self.offsets.values()))
        if self.formula:
            return frame
        x = np.asarray(frame, dtype=np.float64)
        if self.const is not None:
            x = np.insert(x, self.const, 1.0, axis=1)
        return x

    def predict(self, frame):
        """The mean; with an offset or exposure, the expected count and the rate. For the
        rate, statsmodels' own rule (statsmodels 0.15 GLM.predict, generalized_linear_
        model.py: given exog, linpred = exog @ params + offset + log(exposure)) is asked
        with exposure 1 (log 1 = 0) or offset 0: the mean without them."""
        given = {attr: np.asarray(frame[column], dtype=np.float64)
                 for attr, column in self.offsets.items()}
        out = self._mean(frame, given)
        if self.rate:
            unit = {attr: np.full(len(frame), 1.0 if attr == "exposure" else 0.0)
                    for attr in self.offsets}
            out = np.column_stack([out, self._mean(frame, unit)])
        return out

    def _mean(self, frame, given):
        with np.errstate(all="ignore"):
            out = np.asarray(self.results.predict(self._exog(frame), **given),
                             dtype=np.float64)
        if len(out) != len(frame):  # a row dropped for a missing value
            raise ValueError("statsmodels dropped a row it cannot score")
        # outside a transform's domain statsmodels predicts NaN, or at the edge the limit
        # of an infinite margin (log(0) = -inf): no score either way; the frozen model
        # treats the value as missing
        for name, op in self.transforms:
            values = np.asarray(frame[name], dtype=np.float64)
            outside = ~np.isnan(values) & ~np.array([in_domain(op, v) for v in values])
            out = np.where(outside, np.nan, out)
        # outside bs()'s boundary knots patsy raises for the row alone, but in a batch that
        # also holds a missing value its bounds check sees NaN and lets splev extrapolate:
        # no score either way; the frozen model treats the value as missing
        if self.log_binomial:
            # statsmodels' exp(m) above 1 is no probability: no score; the frozen model's is 1
            out = np.where(out > 1.0, np.nan, out)
        for name, (lo, hi), extrapolation in self.splines:
            if extrapolation != "error":
                continue
            values = np.asarray(frame[name], dtype=np.float64)
            out = np.where((values < lo) | (values > hi), np.nan, out)
        return out

    def predict_proba(self, frame):
        p = self.predict(frame)
        return np.column_stack([1.0 - p, p])

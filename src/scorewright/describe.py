"""`scorewright show`: a frozen model described for a person to read."""

from __future__ import annotations

import json
import math

from .model import DECISION, TRANSFORM_DOMAIN, FrozenModel, NumericFeature, outside_text
from .plan import build_plan


def unit_slope(feat: NumericFeature) -> float:
    """d(design value)/d(raw value) of a numeric feature's scaling steps (after its
    transform, if it has one: per unit of log(x), say)."""
    slope = 1.0
    for step in feat.scaling:
        if step.op == "multiply":
            slope *= step.value
        elif step.op == "divide":
            slope /= step.value
    return slope


def _factor_name(f) -> str:
    if f.missing is not None:
        return f"{f.feature} missing"
    if f.levels is not None:
        return f"{f.feature} in {{{', '.join(map(repr, f.levels))}}}"
    return f.feature


def _odds(x: float) -> str:
    try:
        return f"{math.exp(x):.6g}"
    except OverflowError:
        return "inf"


def _calibrator_text(cal) -> str:
    if cal.method == "sigmoid":
        return f"sigmoid calibrator expit(-({cal.a!r} f + {cal.b!r}))"
    return (f"isotonic calibrator of {len(cal.thresholds)} thresholds from "
            f"{cal.thresholds[0]!r} ({cal.values[0]!r}) to {cal.thresholds[-1]!r} "
            f"({cal.values[-1]!r})")


def describe_model(model: FrozenModel) -> str:
    head = model.head
    plan = build_plan(model)
    out = [f"model     {model.name}", f"sha256    {model.sha256}",
           f"task      {head.task} (link {head.link})"]
    if head.classes is not None:
        out.append("classes   " + ", ".join(repr(c) for c in head.classes))
    if head.link == DECISION:
        each = "one margin per class" if head.task == "multiclass" else "one margin"
        out.append(f"outputs   the decision function ({each}) and the class; no probabilities")
    if head.calibration is not None:
        methods = sorted({c.method for c in head.calibration.calibrators})
        out.append(f"calibrated {head.calibration.members} fold(s), {', '.join(methods)}: each "
                   "decision value through its calibrator, each fold's probabilities "
                   "normalised, averaged over the folds; the class of the largest average")
    elif head.task == "binary" and head.link == DECISION:
        out.append(f"cut       margin > {head.cut!r} predicts {head.classes[1]!r} (a margin of "
                   f"exactly {head.cut!r} predicts {head.classes[0]!r})")
    elif head.task == "multiclass" and head.link == DECISION:
        out.append("decision  the class of the largest margin (the first on ties)")
    elif head.task == "binary":
        p = 1.0 / (1.0 + math.exp(-head.cut)) if abs(head.cut) < 700 else float(head.cut > 0)
        out.append(f"cut       margin > {head.cut!r} predicts {head.classes[1]!r} "
                   f"(probability > {p:.6g})")
    role = next((f for f in model.features if getattr(f, "role", None)), None)
    if role is not None:
        unusable = ("missing counts as 0" if role.role == "offset" else
                    "missing or not positive counts as 1")
        out.append(f"{role.role:<9} {role.name!r} (coefficient 1; {unusable}); outputs: "
                   "predicted_value, the expected count, and predicted_rate, the value "
                   f"without the {role.role}")
    inputs = model.provenance.get("inputs", {}) if isinstance(model.provenance, dict) else {}
    earlier = [k for k in ("offset", "exposure") if k in inputs]
    if role is None and earlier and head.task == "regression":
        out.append(f"{earlier[0]:<9} {inputs[earlier[0]]!r} is an ordinary feature in this file "
                   "(frozen before format version 4): the count is output, no rate; freeze "
                   "the results again for the rate")
    out.append("")
    out.append("features")
    for feat, inp in zip(model.features, plan.inputs):
        if isinstance(feat, NumericFeature):
            missing = ("missing -> design value 0.0" if feat.fill is None
                       else f"missing -> {feat.fill!r}")
            steps = " ".join(f"bins at {list(s.edges)!r}" if s.edges is not None else
                             f"spline of degree {s.degree}, extrapolation {s.extrapolation}, "
                             f"knots {list(s.knots)!r}" if s.knots is not None else
                             f"quantile ({s.output} output; {len(s.quantiles)} quantiles from "
                             f"{s.quantiles[0]!r} to {s.quantiles[-1]!r})"
                             if s.quantiles is not None else
                             s.op if s.value is None else f"{s.op} {s.value!r}"
                             for s in feat.scaling) or "none"
            if feat.scaling and feat.scaling[0].op in TRANSFORM_DOMAIN:
                op = feat.scaling[0].op
                missing += f" (so is a value {outside_text(op)}, outside {op}'s domain)"
            elif feat.scaling and feat.scaling[0].extrapolation == "error":
                lo, hi = feat.scaling[0].spline_range()
                missing += f" (so is a value outside the knots [{lo!r}, {hi!r}])"
            clip = "" if feat.clip is None else f", clip to [{feat.clip[0]!r}, {feat.clip[1]!r}]"
            kind = ("numeric, fitted on booleans (true/false read as 1/0)" if feat.boolean
                    else f"numeric, the {feat.role}" if feat.role else "numeric")
            out.append(f"  {feat.name!r}  {kind}; {missing}; scaling: {steps}{clip}; "
                       f"input guard |x| <= {inp.bound:g}")
        else:
            missing = ("missing -> as unseen" if feat.fill is None
                       else f"missing -> {feat.fill!r}")
            unknown = ("unseen -> no level (all indicators 0)" if feat.unknown_level is None
                       else f"unseen -> {feat.unknown_level!r}")
            out.append(f"  {feat.name!r}  categorical, {len(feat.levels)} levels; {missing}; "
                       f"{unknown}")
            out.append("      levels: " + ", ".join(repr(v) for v in feat.levels))
    out.append("")
    labels = ([repr(c) for c in head.classes] if head.task == "multiclass" else [None])
    logit = head.link == "logit"
    titles = ["coefficients" if label is None else f"coefficients for class {label}"
              for label in labels]
    if head.calibration is not None:
        titles = [f"decision value of fold {m}" + ("" if label is None else
                                                   f" for class {label}") + ": "
                  + _calibrator_text(head.calibration.calibrators[m * len(labels) + k])
                  for m in range(head.calibration.members) for k, label in enumerate(labels)]
    for k, title in enumerate(titles):
        out.append(title)
        cols = "  {:<40} {:>24} {:>24}".format("design column", "per design unit",
                                               "per original unit")
        if logit:
            cols += " {:>14} {:>14}".format("odds ratio", "OR per unit")
        out.append(cols)
        out.append(f"  {'(intercept)':<40} {head.intercepts[k]!r:>24}")
        for j, col in enumerate(model.design):
            c = head.coefficients[k][j]
            feat = model.feature(col.feature)
            if col.basis is not None:
                name = f"{col.feature!r} spline basis {col.basis}"
                per_unit = c
            elif col.product is not None:
                name = " * ".join(_factor_name(f) for f in col.product)
                per_unit = c
            elif col.normalized is not None:
                norm, members, _ = col.normalized
                name = (f"{col.feature!r} / {norm} norm of "
                        f"({', '.join(f.feature for f in members)})")
                per_unit = c
            elif col.encoded is not None:
                name = f"{col.feature!r} encoded"
                per_unit = c
            elif col.missing is not None:
                # per "missing": the change from present to missing, in margin units
                name = f"{col.feature!r} missing"
                per_unit = c * (col.missing[1] - col.missing[0])
            elif col.levels is None:
                name = repr(col.feature)
                per_unit = c * unit_slope(feat)
            elif isinstance(feat, NumericFeature):
                name = f"{col.feature!r} in bin {', '.join(map(str, col.levels))}"
                per_unit = c
            else:
                name = f"{col.feature!r} in {{{', '.join(repr(v) for v in col.levels)}}}"
                per_unit = c
            line = f"  {name[:40]:<40} {c!r:>24} {per_unit!r:>24}"
            if logit:
                line += f" {_odds(c):>14} {_odds(per_unit):>14}"
            out.append(line)
        out.append("")
    out.append("provenance")
    out.append("  " + json.dumps(model.provenance, indent=2, sort_keys=True).replace("\n", "\n  "))
    return "\n".join(out) + "\n"

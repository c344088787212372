"""The fit result as lines for the terminal."""

from __future__ import annotations

import math

LABELS = {"roc_auc": "ROC AUC", "log_loss": "log loss", "brier": "Brier score",
          "accuracy": "accuracy", "balanced_accuracy": "balanced accuracy",
          "rmse": "RMSE", "mae": "MAE", "deviance_explained": "deviance explained"}


def number(x, digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "n/a"
    return f"{x:.{digits}f}"


def metric_rows(result) -> list[tuple[str, str, str]]:
    """(metric, CV mean ± sd, test) per metric."""
    v = result.validation
    rows = []
    for key, spread in v.cv.items():
        cv = f"{number(spread['mean'])} ± {number(spread['sd'])}"
        test = number(result.test.get(key)) if result.test else "(no test part)"
        rows.append((LABELS.get(key, key), cv, test))
    return rows


def result_lines(result) -> list[str]:
    v, spec = result.validation, result.spec
    out = [f"rows: {v.n_train} training ({result_folds(result)}-fold cross-validation), "
           f"{v.n_test} test"]
    if spec.penalty != "none":
        out.append(f"chosen {spec.strength_name} = {v.chosen:.4g} (lowest cross-validated "
                   f"{v.loss_name} of {len(v.grid)})")
    if result.frozen_cut is not None:
        fc = result.frozen_cut
        out.append(f"decision cut: probability > {fc.threshold:.6g} (margin > {fc.cut!r}; "
                   f"checked on {fc.rows} rows)")
    out.append(f"  {'metric':<20} {'cross-validation':>20} {'test':>10}")
    for name, cv, test in metric_rows(result):
        out.append(f"  {name:<20} {cv:>20} {test:>10}")
    if result.test_confusion is not None:
        classes = result.label.classes
        out.append("test confusion matrix (rows true, columns predicted): "
                   + "; ".join(f"{classes[i]!r}: {row}" for i, row in
                               enumerate(result.test_confusion)))
    if result.inference is not None:
        inf = result.inference
        named = {"odds_ratio": ", odds ratio", "mean_ratio": ", ratio of means"}
        out.append(f"coefficients per original unit (95% interval){named.get(inf.ratio, '')}"
                   f"{'' if inf.df is None else f' (t, {inf.df:.0f} df)'}:")
        for row in inf.table():
            ratio = (f"  OR {row['odds_ratio']:.4g}" if "odds_ratio" in row else
                     f"  ratio {row['mean_ratio']:.4g}" if "mean_ratio" in row else "")
            out.append(f"  {row['term']:<28} {row['estimate']:>11.5g} "
                       f"({row['ci_low']:.4g}, {row['ci_high']:.4g})  p {row['p_value']:.3g}"
                       f"{ratio}")
    if result.self_check is not None:
        out.append(result.self_check.summary())
        out += [f"note: {note}" for note in result.self_check.notes]
    for note in result.notes:
        out.append(f"warning: {note}")
    return out


def result_folds(result) -> int:
    return int(result.model.provenance["created"]["cv_folds"])

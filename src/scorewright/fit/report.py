"""The validation report: one self-contained HTML file (plots embedded as PNG data
URIs, no scripts, no network), so it opens offline in any browser."""

from __future__ import annotations

import base64
import math

import numpy as np

from .. import __version__
from . import plots
from .console import LABELS, metric_rows, number


def _environment():
    import jinja2

    from ..emit.templating import templates_dir

    # Autoescaping: column names and levels are the user's strings, shown as text.
    return jinja2.Environment(loader=jinja2.FileSystemLoader(str(templates_dir())),
                              undefined=jinja2.StrictUndefined,
                              autoescape=True, trim_blocks=True, lstrip_blocks=True)


def _uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def _plots(r) -> list[dict]:
    v, spec, label = r.validation, r.spec, r.label
    out = []

    def add(title, png, alt):
        out.append({"title": title, "src": _uri(png), "alt": alt})

    have_test = r.test_y is not None
    if spec.model == "logistic":
        curves, tables = [], []
        if have_test:
            curves.append(("test", r.test_y, r.test_output[:, 1], r.test["roc_auc"]))
            tables.append(("test", r.test_calibration))
        curves.append(("cross-validation (out of fold)", v.oof_y, v.oof_pred[:, 1],
                       v.cv["roc_auc"]["mean"]))
        tables.append(("cross-validation (out of fold)", r.cv_calibration))
        add("ROC curve", plots.roc(curves), "ROC curve")
        add("Calibration curve", plots.calibration(tables), "calibration curve")
        y, p = (r.test_y, r.test_output[:, 1]) if have_test else (v.oof_y, v.oof_pred[:, 1])
        add("Score distribution by class", plots.score_distribution(y, p, label.classes),
            "score distribution by class")
    elif spec.model == "multinomial":
        y, proba = (r.test_y, r.test_output) if have_test else (v.oof_y, v.oof_pred)
        add("Score distribution by class",
            plots.score_distribution(y, proba[np.arange(len(y)), y], label.classes,
                                     "predicted probability of the true class"),
            "score distribution by class")
    else:
        y, pred = (r.test_y, r.test_output) if have_test else (v.oof_y, v.oof_pred)
        add("Observed against predicted", plots.predicted_vs_observed(y, pred),
            "observed against predicted")
        add("Residuals", plots.residuals(y, pred), "residual histogram")
    add("Coefficients", _coefficient_plot(r), "coefficient plot")
    if len(v.grid) > 1:
        add("Penalty strength", plots.cv_loss(v.grid, v.cv_loss, spec.strength_name,
                                              v.loss_name), "cross-validated loss by strength")
    return out


def _coefficient_plot(r) -> bytes:
    if r.inference is not None:
        rows = r.inference.table()[1:]
        names = [row["term"] + (" (per SD)" if "per_sd" in row else "") for row in rows]
        est = [row.get("per_sd", row["estimate"]) for row in rows]
        low = [row.get("per_sd_low", row["ci_low"]) for row in rows]
        high = [row.get("per_sd_high", row["ci_high"]) for row in rows]
        scale = {"odds_ratio": "Log-odds", "mean_ratio": "Log of the mean"}.get(
            r.inference.ratio, "Effect on the mean")
        return plots.coefficients(names, est, low, high,
                                  f"{scale} with 95% CI (numeric: per SD; levels: vs "
                                  "reference)")
    head = r.model.head
    names = [d.feature if d.levels is None else f"{d.feature}={'|'.join(map(str, d.levels))}"
             for d in r.model.design]
    if head.task == "multiclass":
        k = int(np.argmax([np.abs(row).sum() for row in head.coefficients]))
        title = f"Coefficients for class {head.classes[k]!r} (standardized inputs)"
        return plots.coefficients(names, head.coefficients[k], title=title)
    return plots.coefficients(names, head.coefficients[0],
                              title="Coefficients (standardized inputs; penalized: no intervals)")


def _fmt(x, digits=4):
    if x is None:
        return "n/a"
    if isinstance(x, float):
        if math.isnan(x):
            return "n/a"
        if x != 0 and (abs(x) < 1e-3 or abs(x) >= 1e5):
            return f"{x:.{digits}g}"
    return number(x, digits) if isinstance(x, float) else str(x)


def render_report(r) -> bytes:
    from .run import CAUTIONS

    v, model = r.validation, r.model
    prov = model.provenance
    context = {
        "version": __version__,
        "model": model,
        "data": prov["inputs"]["data"],
        "created": prov["created"],
        "schema": r.schema,
        "summary": r.summary,
        "metrics": metric_rows(r),
        "confusion": [("test", r.test_confusion), ("cross-validation, pooled out of fold",
                                                   v.cv_confusion)],
        "classes": r.label.classes,
        "calibration": [("test", r.test_calibration),
                        ("cross-validation, pooled out of fold", r.cv_calibration)],
        "inference": None if r.inference is None else r.inference.table(),
        "cut": r.frozen_cut,
        "notes": r.notes,
        "cautions": CAUTIONS,
        "plots": _plots(r),
        "labels": LABELS,
        "fmt": _fmt,
        "grid": list(zip(v.grid, v.cv_loss)) if len(v.grid) > 1 else [],
        "strength_name": r.spec.strength_name,
        "chosen": v.chosen,
        "loss_name": v.loss_name,
    }
    html = _environment().get_template("report/report.html.j2").render(**context)
    return html.encode("utf-8")

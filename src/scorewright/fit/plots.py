"""The report's plots, drawn with matplotlib's Agg backend and returned as PNG bytes."""

from __future__ import annotations

import io

import numpy as np

SIZE = (6.4, 4.2)
DPI = 96


def _figure():
    import matplotlib

    matplotlib.use("Agg", force=True)
    from matplotlib.figure import Figure

    fig = Figure(figsize=SIZE, dpi=DPI)
    return fig, fig.add_subplot(1, 1, 1)


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.tight_layout()
    fig.savefig(buf, format="png", metadata={"Software": None})
    return buf.getvalue()


def _roc_points(y, score):
    order = np.argsort(-np.asarray(score), kind="mergesort")
    y = np.asarray(y, dtype=bool)[order]
    s = np.asarray(score)[order]
    last = np.r_[np.diff(s) != 0, True]     # end of each run of tied scores
    tp = np.cumsum(y)[last]
    fp = np.cumsum(~y)[last]
    return np.r_[0.0, fp / max(fp[-1], 1)], np.r_[0.0, tp / max(tp[-1], 1)]


def roc(curves: list[tuple[str, np.ndarray, np.ndarray, float]]) -> bytes:
    """curves: (name, y, positive-class probability, AUC)."""
    fig, ax = _figure()
    for (name, y, p, auc), style in zip(curves, ("-", "--")):
        fpr, tpr = _roc_points(y, p)
        ax.plot(fpr, tpr, style, label=f"{name} (AUC {auc:.3f})")
    ax.plot([0, 1], [0, 1], ":", color="grey", label="chance")
    ax.set_xlabel("false positive rate")
    ax.set_ylabel("true positive rate")
    ax.set_title("ROC curve")
    ax.legend(loc="lower right")
    return _png(fig)


def calibration(tables: list[tuple[str, list[dict]]]) -> bytes:
    fig, ax = _figure()
    for (name, table), marker in zip(tables, ("o-", "s--")):
        rows = [r for r in table if r["count"]]
        ax.plot([r["mean_predicted"] for r in rows], [r["observed"] for r in rows], marker,
                label=name)
    ax.plot([0, 1], [0, 1], ":", color="grey", label="perfect calibration")
    ax.set_xlabel("mean predicted probability (bin)")
    ax.set_ylabel("observed share positive")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_title("Calibration")
    ax.legend(loc="upper left")
    return _png(fig)


def coefficients(names, estimate, low=None, high=None, title="") -> bytes:
    fig, ax = _figure()
    fig.set_size_inches(SIZE[0], max(2.5, 0.32 * len(names) + 1.2))
    y = np.arange(len(names))[::-1]
    est = np.asarray(estimate, dtype=np.float64)
    if low is not None:
        err = np.vstack([est - np.asarray(low), np.asarray(high) - est])
        ax.errorbar(est, y, xerr=err, fmt="o", capsize=3)
    else:
        ax.plot(est, y, "o")
    ax.axvline(0.0, color="grey", linestyle=":")
    ax.set_yticks(y)
    ax.set_yticklabels([str(n)[:40] for n in names], fontsize=8)
    ax.set_title(title, fontsize=10)
    return _png(fig)


def score_distribution(y, p, classes, what="predicted probability of the positive class"):
    fig, ax = _figure()
    bins = np.linspace(0.0, 1.0, 26)
    for k, label in enumerate(classes):
        ax.hist(p[np.asarray(y) == k], bins=bins, alpha=0.55, label=f"true {label!r}"[:40])
    ax.set_xlabel(what)
    ax.set_ylabel("rows")
    ax.set_title("Score distribution by class")
    ax.legend()
    return _png(fig)


def predicted_vs_observed(y, predicted) -> bytes:
    fig, ax = _figure()
    ax.scatter(predicted, y, s=6, alpha=0.4)
    lo = float(min(np.min(y), np.min(predicted)))
    hi = float(max(np.max(y), np.max(predicted)))
    ax.plot([lo, hi], [lo, hi], ":", color="grey")
    ax.set_xlabel("predicted")
    ax.set_ylabel("observed")
    ax.set_title("Observed against predicted (test part)")
    return _png(fig)


def residuals(y, predicted) -> bytes:
    fig, ax = _figure()
    ax.hist(np.asarray(y) - np.asarray(predicted), bins=40)
    ax.set_xlabel("observed - predicted")
    ax.set_ylabel("rows")
    ax.set_title("Residuals (test part)")
    return _png(fig)


def cv_loss(grid, losses, name, loss_name) -> bytes:
    fig, ax = _figure()
    mean = np.array([m for m, _ in losses])
    sd = np.array([s for _, s in losses])
    ax.errorbar(grid, mean, yerr=sd, fmt="o-", capsize=3)
    ax.set_xscale("log")
    ax.set_xlabel(name)
    ax.set_ylabel(f"cross-validated {loss_name}")
    ax.set_title("Penalty strength")
    return _png(fig)

"""Problems with a fit that the user must hear about plainly: separation, class
imbalance, solver convergence."""

from __future__ import annotations

import numpy as np

IMBALANCE_SHARE = 0.10   # a class below this share of the rows is "heavily" outnumbered
EXTREME = 1e-8           # fitted probability this close to 0 or 1: quasi-separation sign


def imbalance_notes(y: np.ndarray, classes) -> list[str]:
    counts = np.bincount(np.asarray(y), minlength=len(classes))
    share = counts / counts.sum()
    notes = []
    for k, label in enumerate(classes):
        if share[k] < IMBALANCE_SHARE:
            notes.append(f"heavy class imbalance: class {label!r} is {100 * share[k]:.1f}% of "
                         f"the labelled rows ({counts[k]} of {counts.sum()}); accuracy is "
                         "misleading here, read balanced accuracy and the confusion matrix, "
                         "and consider --class-weight balanced")
    return notes


def separation_notes(frame, schema, y: np.ndarray, classes) -> list[str]:
    """Single columns that split the classes perfectly, and levels holding one class only."""
    y = np.asarray(y)
    notes = []
    if len(classes) != 2:
        return notes
    for name in schema.numeric:
        x = frame[name].to_numpy(dtype=np.float64)
        ok = ~np.isnan(x)
        a, b = x[ok & (y == 0)], x[ok & (y == 1)]
        if len(a) and len(b) and (a.max() < b.min() or b.max() < a.min()):
            notes.append(f"complete separation: {name!r} alone splits the classes (every "
                         f"{classes[1]!r} lies on one side of every {classes[0]!r}); an "
                         "unpenalized coefficient is unbounded")
    for name in schema.categorical:
        col = frame[name]
        for level in schema.column(name).levels:
            rows = (col == level).to_numpy()
            if rows.sum() >= 1 and len(set(y[rows])) == 1:
                only = classes[int(y[rows][0])]
                notes.append(f"quasi-separation: every row with {name} = {level!r} "
                             f"({int(rows.sum())}) is {only!r}; its unpenalized coefficient "
                             "is unbounded")
    return notes


def fitted_extremes_note(p: np.ndarray) -> str | None:
    extreme = int(np.sum((p < EXTREME) | (p > 1.0 - EXTREME)))
    if extreme == 0:
        return None
    return (f"quasi-separation suspected: {extreme} training rows are fitted with probability "
            f"within {EXTREME:g} of 0 or 1; the unpenalized estimates and their standard "
            "errors are unreliable (use a penalty)")


def convergence_note(where: str, count: int, total: int) -> str | None:
    if count == 0:
        return None
    return (f"the solver did not converge in {count} of {total} {where}; the estimates may "
            "be off (a stronger penalty or fewer columns usually helps)")

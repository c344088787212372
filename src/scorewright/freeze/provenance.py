"""What a frozen model records about where it came from."""

from __future__ import annotations

import platform

from .. import __version__


def library_versions() -> dict[str, str]:
    import numpy
    import sklearn

    return {"python": platform.python_version(), "numpy": numpy.__version__,
            "scikit-learn": sklearn.__version__}


def describe(estimator) -> str:
    """A short structural description, e.g. Pipeline(ColumnTransformer, LogisticRegression)."""
    from sklearn.compose import ColumnTransformer
    from sklearn.pipeline import Pipeline

    if isinstance(estimator, Pipeline):
        return f"Pipeline({', '.join(describe(s) for _, s in estimator.steps)})"
    if isinstance(estimator, ColumnTransformer):
        parts = [describe(t) if not isinstance(t, str) else t for _, t, _ in estimator.transformers_]
        return f"ColumnTransformer({', '.join(parts)})"
    if isinstance(estimator, str):
        return estimator
    return type(estimator).__name__


def provenance(estimator, raw_names, extra: dict | None = None) -> dict:
    out = {
        "scorewright_version": __version__,
        "source": f"scikit-learn {describe(estimator)}",
        "libraries": library_versions(),
        "inputs": {"feature_names": list(raw_names)},
    }
    if extra:
        out.update(extra)
    return out

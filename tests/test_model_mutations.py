"""A mutation corpus of model files: every one refused by every command with exit 2, one
line naming the field, no traceback, and nothing written."""

from __future__ import annotations

import copy
import json

import pytest
from click.testing import CliRunner

import models
import tally
from scorewright.cli import cli
from scorewright.model import canonical_sha256

FREE_FORM = ("libraries", "inputs", "metrics", "notes", "created")


def _good() -> dict:
    return json.loads(models.build("mixed_scalers").model.to_json())


def _paths(node, path=()):
    """Every (path, value) below node, except inside free-form provenance fields."""
    if isinstance(node, dict):
        for k, v in node.items():
            if len(path) == 1 and path[0] == "provenance" and k in FREE_FORM:
                continue
            yield path + (k,), v
            yield from _paths(v, path + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield path + (i,), v
            yield from _paths(v, path + (i,))


def _set(doc, path, value=None, delete=False):
    node = doc
    for p in path[:-1]:
        node = node[p]
    if delete:
        del node[path[-1]]
    else:
        node[path[-1]] = value


def _sealed(doc):
    doc["sha256"] = canonical_sha256(doc)
    return json.dumps(doc)


def _wrong_type(value):
    if isinstance(value, bool) or value is None:
        return "text"
    if isinstance(value, (int, float)):
        return "1.5"
    if isinstance(value, str):
        return [value]
    if isinstance(value, list):
        return {"not": "a list"}
    return ["not", "an", "object"]


def corpus():
    good = _good()
    text = json.dumps(good, indent=1)
    structural = [i for i, ch in enumerate(text) if ch in "{[,:]}\""]
    for i in structural[::3]:
        yield f"truncated at byte {i}", text[:i], None
    for path, _ in _paths(good):
        if path == ("sha256",):
            continue
        if isinstance(path[-1], str):
            d = copy.deepcopy(good)
            _set(d, path, delete=True)
            yield f"removed {path}", _sealed(d), str(path[-1])
    for path, value in _paths(good):
        if path in (("sha256",),):
            continue
        d = copy.deepcopy(good)
        _set(d, path, _wrong_type(value))
        key = next((p for p in reversed(path) if isinstance(p, str)), "")
        yield f"wrong type at {path}", _sealed(d), key
    for path, value in _paths(good):
        if isinstance(value, float):
            for bad in ("NaN", "Infinity", "-Infinity", "1e999"):
                d = copy.deepcopy(good)
                _set(d, path, "@@")
                yield f"{bad} at {path}", _sealed(d).replace('"@@"', bad), None
    d = copy.deepcopy(good)
    d["head"]["coefficients"][0] = [0.5] * 200000
    yield "huge coefficient array", _sealed(d), "coefficients"
    yield "deeply nested", "{\"a\":" * 50000 + "1" + "}" * 50000, "JSON"
    yield "duplicate key", text.replace('"task": "binary"', '"task": "binary", "task": "x"'), \
        "duplicate"
    d = copy.deepcopy(good)
    d["head"]["intercepts"][0] += 1e-9
    yield "stale hash", json.dumps(d), "sha256"
    d = copy.deepcopy(good)
    d["format_version"] = 99
    yield "newer format version", _sealed(d), "format_version"
    yield "empty file", "", "JSON"
    yield "a JSON array", "[]", "object"
    yield from _version_2_corpus()
    yield from _version_3_corpus()
    yield from _version_4_corpus()


def _version_2_corpus():
    """Every key removed and every value of the wrong type in a format-2 model (a log1p
    transform, missing indicators, bins, products, an ordinal encoding): each refused;
    a few name a neighbouring field, so no needle."""
    good = json.loads(models.build("compressor_terms").model.to_json())
    yield from _removed_and_mistyped(good, "format 2")


def _version_3_corpus():
    """Every key removed and every value of the wrong type in a format-3 model (a periodic
    spline after an imputer, its columns scaled): each refused."""
    import numpy as np
    import pandas as pd
    from sklearn.impute import SimpleImputer
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import SplineTransformer, StandardScaler

    import scorewright

    rng = np.random.default_rng(7)
    x = pd.DataFrame({"hour": rng.uniform(0, 24, 200)})
    y = (np.sin(x.hour / 4) + rng.logistic(size=200) > 0).astype(int)
    est = make_pipeline(SimpleImputer(), SplineTransformer(n_knots=3, degree=2,
                                                           extrapolation="periodic"),
                        StandardScaler(), LogisticRegression()).fit(x, y)
    good = json.loads(scorewright.freeze(est, check_rows=x).to_json())
    assert good["format_version"] == 3
    yield from _removed_and_mistyped(good, "format 3")


def _version_4_corpus():
    """Every key removed and every value of the wrong type in a format-4 model (a
    QuantileTransformer with normal output, and an l2 Normalizer over two imputed columns
    with a scaler after it; a three-class RidgeClassifier, the decision link), and the
    semantic defects of the quantile and norm fields: each refused."""
    import numpy as np
    import pandas as pd
    from sklearn.compose import ColumnTransformer
    from sklearn.impute import SimpleImputer
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import Normalizer, QuantileTransformer, StandardScaler

    import scorewright

    rng = np.random.default_rng(8)
    x = pd.DataFrame({"load": rng.normal(0, 1, 200), "temp": rng.normal(40, 5, 200),
                      "amps": rng.normal(12, 2, 200)})
    y = (x.load + rng.logistic(size=200) > 0).astype(int)
    ct = ColumnTransformer([
        ("q", QuantileTransformer(n_quantiles=4, output_distribution="normal"), ["load"]),
        ("n", make_pipeline(SimpleImputer(), Normalizer(), StandardScaler()),
         ["temp", "amps"])])
    est = make_pipeline(ct, LogisticRegression()).fit(x, y)
    good = json.loads(scorewright.freeze(est, check_rows=x).to_json())
    assert good["format_version"] == 4
    yield from _removed_and_mistyped(good, "format 4")
    step = ("features", 0, "scaling", 0)
    norm = ("design", 1, "normalize")
    for label, path, value, needle in [
            ("output", step + ("output",), "gaussian", "output"),
            ("decreasing quantiles", step + ("quantiles",), [1.0, 0.0, 2.0, 3.0], "quantiles"),
            ("references past 1", step + ("references",), [0.0, 0.5, 0.9, 1.5], "references"),
            ("a quantile short", step + ("quantiles",), [0.0, 1.0, 2.0], "references"),
            ("quantiles 1 ULP apart", step + ("quantiles",), [0.0, 5e-324, 1e-323, 1.0],
             "quantiles"),
            ("a quantile step second", ("features", 0, "scaling"),
             [{"op": "add", "value": 1.0}] + good["features"][0]["scaling"], "first step"),
            ("norm", norm + ("norm",), "l3", "norm"),
            ("position", norm + ("position",), 2, "position"),
            ("no columns", norm + ("columns",), [], "columns"),
            ("a level column", norm + ("columns", 0), {"feature": "temp", "levels": [1]},
             "numeric column"),
            ("a bins column", norm + ("columns", 0, "scaling"),
             [{"op": "bins", "edges": [1.0]}], "bins"),
            ("another feature", ("design", 1, "feature"), "load", "feature"),
            ("format 3", ("format_version",), 3, "format_version 4")]:
        d = copy.deepcopy(good)
        _set(d, path, value)
        yield f"format 4: {label}", _sealed(d), needle
    yield from _decision_corpus()
    yield from _calibrated_corpus()


def _decision_corpus():
    """Every key removed and every value of the wrong type in a format-4 decision head."""
    from sklearn.datasets import load_iris
    from sklearn.linear_model import RidgeClassifier
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    import scorewright

    x, y = load_iris(return_X_y=True, as_frame=True)
    x = x.iloc[:, :2]
    est = make_pipeline(StandardScaler(), RidgeClassifier()).fit(x, y)
    good = json.loads(scorewright.freeze(est, check_rows=x).to_json())
    assert good["format_version"] == 4 and good["head"]["link"] == "decision"
    yield from _removed_and_mistyped(good, "format 4 decision")


def _calibrated_corpus():
    """Every key removed and every value of the wrong type in format-4 calibrated heads
    (two folds, isotonic and sigmoid): each refused."""
    import numpy as np
    from sklearn.calibration import CalibratedClassifierCV
    from sklearn.svm import LinearSVC

    import scorewright

    rng = np.random.default_rng(7)
    x = rng.normal(size=(60, 1))
    y = (x[:, 0] + rng.logistic(size=60) > 0).astype(int)
    for method in ("isotonic", "sigmoid"):
        est = CalibratedClassifierCV(LinearSVC(), method=method, cv=2).fit(x, y)
        good = json.loads(scorewright.freeze(est).to_json())
        assert good["format_version"] == 4
        yield from _removed_and_mistyped(good, f"format 4 calibrated ({method})")


def _removed_and_mistyped(good: dict, label: str):
    """Every key of `good` removed, and every value given the wrong type, resealed."""
    for path, value in _paths(good):
        if path == ("sha256",):
            continue
        if isinstance(path[-1], str):
            d = copy.deepcopy(good)
            _set(d, path, delete=True)
            yield f"{label}: removed {path}", _sealed(d), None
        d = copy.deepcopy(good)
        _set(d, path, _wrong_type(value))
        yield f"{label}: wrong type at {path}", _sealed(d), None


CASES = list(corpus())
COMMANDS = {
    "show": lambda m, out: ["show", m],
    "emit": lambda m, out: ["emit", m, "--target", "python", "-o", out],
    "build": lambda m, out: ["build", m, "-o", out, "--target", "python", "--random", "3"],
    "verify": lambda m, out: ["verify", m, out],
}


def test_corpus_is_large():
    assert len(CASES) > 300


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_every_mutation_is_refused_by_every_command(command, tmp_path):
    runner = CliRunner()
    bad_file = tmp_path / "model.json"
    out = tmp_path / "out"
    if command == "verify":
        out.mkdir()
    failures = []
    for case, text, needle in CASES:
        bad_file.write_text(text)
        result = runner.invoke(cli, COMMANDS[command](str(bad_file), str(out)))
        err = result.stderr if hasattr(result, "stderr") else result.output
        lines = err.strip().splitlines()
        ok = (result.exit_code == 2 and len(lines) == 1 and lines[0].startswith("error: ")
              and "Traceback" not in err and (needle is None or needle in lines[0]))
        written = [p for p in out.rglob("*")] if out.exists() else []
        if not ok or written:
            failures.append((case, result.exit_code, lines[:2], written[:2]))
    tally.add(f"model-file mutations refused by `{command}`", len(CASES) - len(failures))
    assert not failures, failures[:5]

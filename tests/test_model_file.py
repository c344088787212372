"""The frozen model file: exact round trip and strict, one-line refusal of every defect."""

from __future__ import annotations

import json
import math
import subprocess
import sys

import pytest

import models
from scorewright.errors import ModelFileError
from scorewright.model import READS_VERSIONS, canonical_sha256, load_model, parse_model


@pytest.mark.parametrize("name", sorted(models.BUILDERS))
def test_round_trip_is_exact(name, tmp_path):
    model = models.build(name).model
    path = tmp_path / "m.json"
    model.write(path)
    again = load_model(path)
    assert again == model
    for row, row2 in zip(model.head.coefficients, again.head.coefficients):
        assert [x.hex() for x in row] == [x.hex() for x in row2]
    assert again.sha256 == model.sha256 == canonical_sha256(json.loads(path.read_text()))


def _doc():
    return json.loads(models.build("fault_binary").model.to_json())


def _resealed(doc):
    doc["sha256"] = canonical_sha256(doc)
    return doc


def _show(tmp_path, text):
    path = tmp_path / "bad.json"
    path.write_text(text) if isinstance(text, str) else path.write_bytes(text)
    return subprocess.run([sys.executable, "-m", "scorewright.cli", "show", str(path)],
                          capture_output=True, text=True)


def _mutations():
    good = json.dumps(_doc(), indent=1)
    yield "truncated", good[: len(good) // 2], "not valid JSON"
    d = _doc(); d["format_version"] = max(READS_VERSIONS) + 1
    yield "newer version", json.dumps(_resealed(d)), "format_version"
    d = _doc(); d["format"] = "something-else"
    yield "wrong format", json.dumps(_resealed(d)), "format"
    d = _doc(); del d["head"]["cut"]
    yield "missing key", json.dumps(_resealed(d)), "head: missing key 'cut'"
    d = _doc(); d["head"]["bias"] = 1.0
    yield "extra key", json.dumps(_resealed(d)), "head: unexpected key 'bias'"
    d = _doc(); d["head"]["intercepts"] = ["1.5"]
    yield "wrong type", json.dumps(_resealed(d)), "head.intercepts[0]"
    d = _doc()
    text = json.dumps(d).replace(repr(d["head"]["coefficients"][0][2]), "NaN", 1)
    yield "NaN coefficient", text, "NaN"
    text = json.dumps(d).replace(repr(d["head"]["coefficients"][0][2]), "1e999", 1)
    yield "infinite coefficient", text, "head.coefficients[0][2]"
    d = _doc(); d["head"]["coefficients"][0].pop()
    yield "shape mismatch", json.dumps(_resealed(d)), "head.coefficients[0]"
    d = _doc()
    d["head"]["coefficients"][0][3] = math.nextafter(d["head"]["coefficients"][0][3], math.inf)
    yield "edited coefficient, not re-hashed", json.dumps(d), "sha256"
    yield "duplicate key", good.replace('"name": "fault_binary"',
                                        '"name": "fault_binary", "name": "x"', 1), "duplicate"
    yield "deeply nested", "[" * 100000 + "]" * 100000, "JSON"
    yield "not UTF-8", b"\xff\xfe{}", "UTF-8"
    d = _doc(); d["features"][0]["scaling"][1]["value"] = 0.0
    yield "division by zero", json.dumps(_resealed(d)), "division by zero"
    d = _doc(); d["design"][0]["feature"] = "nope"
    yield "unknown design feature", json.dumps(_resealed(d)), "design[0].feature"


@pytest.mark.parametrize("case,text,needle", list(_mutations()), ids=lambda x: str(x)[:30])
def test_defective_file_is_refused_in_one_line(case, text, needle, tmp_path):
    proc = _show(tmp_path, text)
    assert proc.returncode == 2, proc.stdout
    assert proc.stdout == ""
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), proc.stderr
    assert needle in lines[0]
    assert "Traceback" not in proc.stderr


def test_parse_model_names_the_field():
    d = _doc()
    d["features"][1]["missing"]["policy"] = "guess"
    with pytest.raises(ModelFileError, match=r"features\[1\]\.missing\.policy"):
        parse_model(json.dumps(_resealed(d)))


def test_boolean_flag_round_trips_and_is_absent_when_false(tmp_path):
    from scorewright.model import NumericFeature
    import dataclasses
    model = models.build("fault_binary").model
    assert all(not f.boolean for f in model.features if isinstance(f, NumericFeature))
    assert '"boolean"' not in model.to_json()  # older files keep their hash
    first = next(f for f in model.features if isinstance(f, NumericFeature))
    flagged = dataclasses.replace(model, features=tuple(
        dataclasses.replace(f, boolean=True) if f is first else f for f in model.features)).sealed()
    path = tmp_path / "b.json"
    flagged.write(path)
    again = load_model(path)
    assert again.feature(first.name).boolean is True and again == flagged
    doc = json.loads(path.read_text())
    doc["features"][[f["name"] for f in doc["features"]].index(first.name)]["boolean"] = "yes"
    with pytest.raises(ModelFileError, match=r"\.boolean: expected true"):
        parse_model(json.dumps(_resealed(doc)))


def test_a_model_is_written_in_the_highest_version_any_of_its_parts_needs():
    """A spline (format 3) under a decision head (format 4) is a format 4 file: a version 3
    reader would not know the link. (Before, the first construct found set the version.)"""
    import numpy as np
    import pandas as pd
    from sklearn.linear_model import RidgeClassifier
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import SplineTransformer

    import scorewright

    rng = np.random.default_rng(3)
    x = pd.DataFrame({"load": rng.uniform(0, 10, 200)})
    y = (x.load + rng.normal(0, 2, 200) > 5).astype(int)
    model = scorewright.freeze(make_pipeline(SplineTransformer(n_knots=4), RidgeClassifier())
                               .fit(x, y), check_rows=x)
    doc = json.loads(model.to_json())
    assert doc["format_version"] == 4 and doc["head"]["link"] == "decision"
    assert parse_model(model.to_json()).sha256 == model.sha256

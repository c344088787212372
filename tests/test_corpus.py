"""The practitioner corpus (tests/corpus.py, 60 pipelines): every one freezes and agrees with
its source estimator (the freeze self-check: scikit-learn's own predictions to 1e-12 on its
data and on rows derived from the model, missing values and unseen levels among them), and
builds for one profile of each target family, verified on the real runtime. The default
tier builds every twelfth pipeline (a different shape per scenario); --runslow builds all."""

from __future__ import annotations

import warnings

import pytest

import corpus
from scorewright.freeze import freeze_checked
from scorewright.verify.harness import build_targets

FAMILIES = ["python", "c-double", "java", "onnx-double", "sql-duckdb", "sql-sqlite"]


def _frozen(name):
    est, frame = corpus.build(name)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return freeze_checked(est, check_rows=frame, name=name)


def test_the_corpus_holds_sixty_pipelines():
    assert len(corpus.NAMES) >= 60


@pytest.mark.parametrize("name", corpus.NAMES)
def test_every_pipeline_freezes_and_agrees_with_its_source(name):
    model, checked = _frozen(name)
    _, frame = corpus.build(name)
    assert checked.compared >= len(frame)


def _sampled(i: int, name: str) -> bool:
    return i % 12 == 3 * corpus.SCENARIOS.index(name.split("-")[0])


@pytest.mark.parametrize("name", [pytest.param(n, marks=() if _sampled(i, n)
                                               else pytest.mark.slow)
                                  for i, n in enumerate(corpus.NAMES)])
def test_every_pipeline_builds_and_verifies_on_every_family(name, tmp_path):
    model, _ = _frozen(name)
    report = build_targets(model, tmp_path, targets=FAMILIES, data=None, n_random=300)
    assert report.ok, [(r.profile.name, r.message) for r in report.results if r.message]

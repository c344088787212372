"""The Spector and Mazzeo program-effectiveness data (shipped with statsmodels), fitted
unpenalized, frozen and emitted, against the published logit and statsmodels' Logit."""

from __future__ import annotations

import importlib.util

import numpy as np
import pytest
import statsmodels.api as sm

import models
from scorewright.emit import emitter

# Greene, Econometric Analysis, the logit column of the program-effectiveness example.
# Values from memory, so checked at their printed precision only.
GREENE_LOGIT = {"const": -13.021, "GPA": 2.826, "TUCE": 0.095, "PSI": 2.379}


@pytest.fixture(scope="module")
def spector():
    return models.build("spector")


def test_frozen_coefficients_reproduce_the_published_logit(spector):
    head = spector.model.head
    got = dict(zip(["GPA", "TUCE", "PSI"], head.coefficients[0]))
    got["const"] = head.intercepts[0]
    for name, value in GREENE_LOGIT.items():
        assert round(got[name], 3) == pytest.approx(value, abs=1e-9), name


def test_emitted_scorer_reproduces_statsmodels_logit(spector, tmp_path):
    data = sm.datasets.spector.load_pandas()
    exog = sm.add_constant(data.exog[["GPA", "TUCE", "PSI"]], prepend=True)
    fit = sm.Logit(data.endog, exog).fit(disp=0, method="newton", tol=1e-12, maxiter=100)
    (art,) = emitter("python")(spector.model, {})
    path = tmp_path / art.name
    path.write_bytes(art.content)
    spec = importlib.util.spec_from_file_location("spector_scorer", path)
    scorer = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(scorer)
    rows = data.exog[["GPA", "TUCE", "PSI"]].to_dict("records")
    got = np.array([scorer.predict_proba(r)[1] for r in rows])
    # Both are the same maximum-likelihood fit, found by different optimizers.
    np.testing.assert_allclose(got, fit.predict(exog), rtol=0, atol=1e-6)
    np.testing.assert_allclose(spector.model.head.coefficients[0], fit.params[1:], rtol=1e-5)

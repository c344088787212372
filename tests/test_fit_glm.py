"""`fit --model gamma | tweedie[:POWER]`: log-link GLMs for claim sizes and pure premiums
(invented service-contract data), unpenalized fits checked against statsmodels' GLM with the
same family and link (an independent IRLS fit of the same likelihood)."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

sm = pytest.importorskip("statsmodels.api")
smf = pytest.importorskip("statsmodels.formula.api")

from scorewright.model import load_model  # noqa: E402
from scorewright.plan import build_plan  # noqa: E402
from scorewright.reference import score_row  # noqa: E402


@pytest.fixture(scope="module")
def claims(tmp_path_factory):
    rng = np.random.default_rng(0)
    n = 1500
    d = pd.DataFrame({"power_kw": rng.gamma(4, 20, n),
                      "region": rng.choice(["coast", "inland", "mountain"], n)})
    mu = np.exp(5 + 0.005 * d.power_kw + (d.region == "coast") * 0.3)
    d["claim_size"] = rng.gamma(2.0, mu / 2.0)
    d["cost"] = np.where(rng.random(n) < 0.6, 0.0, d.claim_size)
    path = tmp_path_factory.mktemp("claims") / "claims.csv"
    d.to_csv(path, index=False)
    return d, path


def _fit(path, out, label, model, drop):
    run = subprocess.run([sys.executable, "-m", "scorewright.cli", "fit", str(path),
                          "--label", label, "--model", model, "--penalty", "none",
                          "--drop", drop, "--test-fraction", "0", "--cv", "2", "-o", str(out)],
                         capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    return load_model(out), run.stdout


@pytest.mark.parametrize("model, label, drop, family", [
    ("gamma", "claim_size", "cost", lambda: sm.families.Gamma(sm.families.links.Log())),
    ("tweedie:1.5", "cost", "claim_size",
     lambda: sm.families.Tweedie(var_power=1.5, link=sm.families.links.Log())),
])
def test_log_link_glms_match_statsmodels(claims, tmp_path, model, label, drop, family):
    d, path = claims
    frozen, out = _fit(path, tmp_path / "m.json", label, model, drop)
    assert frozen.head.link == "log" and "log link" in out
    results = smf.glm(f"{label} ~ power_kw + C(region)", data=d, family=family()).fit(
        tol=1e-12, maxiter=200)
    plan = build_plan(frozen)
    rows = d[["power_kw", "region"]].head(300)
    got = np.array([score_row(plan, r).value for r in rows.to_dict("records")])
    np.testing.assert_allclose(got, results.predict(rows), rtol=1e-6)


def test_a_gamma_label_must_be_positive(claims, tmp_path):
    _, path = claims
    run = subprocess.run([sys.executable, "-m", "scorewright.cli", "fit", str(path),
                          "--label", "cost", "--model", "gamma", "-o", str(tmp_path / "x.json")],
                         capture_output=True, text=True)
    assert run.returncode == 2 and "needs positive values" in run.stderr
    assert "Traceback" not in run.stderr

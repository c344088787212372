"""`scorewright fit`: recovery of known coefficients, inference against statsmodels and a
textbook, metrics against scikit-learn, the decision cut, the report in a real browser,
and bad data refused in one line."""

from __future__ import annotations

import json
import math
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from scorewright import demo_data
from scorewright.cli import cli
from scorewright.fit import FitOptions, fit_file
from scorewright.fit import cut as cuts
from scorewright.fit import metrics
from scorewright.plan import build_plan
from scorewright.reference import encode_rows, score_matrix

FAULT_DROP = ["fault_type", "alarms_per_week"]


def run_cli(*args):
    return CliRunner().invoke(cli, list(map(str, args)), catch_exceptions=False)


@pytest.fixture(scope="module")
def demo_fit(tmp_path_factory):
    path = tmp_path_factory.mktemp("demo") / "readings.csv"
    demo_data.compressor_readings().to_csv(path, index=False)
    opts = FitOptions(label="fault_30d", drop=FAULT_DROP, penalty="none", seed=20261201)
    return fit_file(path, opts, progress=False)


# ---------------------------------------------------------------- the invented data

def test_schema_of_demo_data(demo_fit):
    schema = demo_fit.schema
    assert schema.categorical == ["refrigerant", "site_zone"]
    assert schema.numeric == list(demo_data.NUMERIC)
    assert [name for name, _ in schema.excluded] == ["unit_id"]
    assert "identifier-like" in schema.excluded[0][1]


def test_demo_fit_recovers_true_coefficients(demo_fit):
    """The labels were drawn from demo_data.TRUE_FAULT (per original unit, levels against
    the first level). Rule: at least 12 of the 14 true values lie inside the fit's 95%
    Wald intervals (14 independent 95% intervals would miss more than 2 with probability
    about 3%; the seed is fixed, so the outcome is stable)."""
    inf = demo_fit.inference
    index = {name: i for i, name in enumerate(inf.names)}
    firsts = {"refrigerant": demo_data.REFRIGERANTS[0], "site_zone": demo_data.ZONES[0]}

    def add(w, key, sign):
        if key in index:  # a reference level has no column of its own
            w[index[key]] += sign

    def contrast(term):
        w = np.zeros(len(inf.names))
        if term == "intercept":
            w[0] = 1.0
            for col, first in firsts.items():  # the fitted intercept sits at the reference
                add(w, f"{col}={first}", 1.0)
        elif "=" in term:
            add(w, term, 1.0)
            col = term.split("=")[0]
            add(w, f"{col}={firsts[col]}", -1.0)
        else:
            w[index[term]] = 1.0
        return w

    inside = 0
    for term, true in demo_data.TRUE_FAULT.items():
        if term == "intercept":
            true = demo_data.true_fault_intercept()
        w = contrast(term)
        est = float(w @ inf.estimate)
        se = math.sqrt(float(w @ inf.cov @ w))
        inside += est - 1.96 * se <= true <= est + 1.96 * se
    assert inside >= 12, inside


def test_demo_fit_test_metrics_use_the_frozen_model(demo_fit):
    """The test part is scored by the reference evaluator of the frozen model; scikit-learn's
    own predictions agree to rounding."""
    assert demo_fit.reference_gap < 1e-12
    assert 0.7 < demo_fit.test["roc_auc"] < 0.9
    prov = demo_fit.model.provenance
    assert prov["inputs"]["data"]["rows"] == 4000
    assert len(prov["inputs"]["data"]["sha256"]) == 64
    assert prov["created"]["seed"] == 20261201
    assert set(prov) <= {"scorewright_version", "source", "libraries", "inputs", "created",
                         "metrics", "notes"}


# ---------------------------------------------------------------- Spector and Mazzeo

def spector_frame():
    import statsmodels.api as sm

    data = sm.datasets.spector.load_pandas()
    frame = data.exog[["GPA", "TUCE", "PSI"]].copy()
    frame["GRADE"] = data.endog.astype(int)
    return frame


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_spector_matches_statsmodels_and_greene(tmp_path, fmt):
    """Source: the Spector and Mazzeo data shipped with statsmodels
    (statsmodels.api.datasets.spector), fitted by statsmodels' Logit; and the published
    estimates in Greene, Econometric Analysis (values from memory): constant -13.021
    (SE 4.931), GPA 2.826 (1.263), TUCE 0.095 (0.142), PSI 2.379 (1.065)."""
    import statsmodels.api as sm

    frame = spector_frame()
    data = tmp_path / f"spector.{fmt}"
    if fmt == "csv":
        frame.to_csv(data, index=False)
    else:
        frame.to_parquet(data, index=False)
    out = tmp_path / "spector.json"
    result = run_cli("fit", data, "-o", out, "--label", "GRADE", "--penalty", "none",
                     "--test-fraction", "0", "--cv", "3")
    assert result.exit_code == 0, result.output
    rows = json.loads(out.read_text())["provenance"]["metrics"]["coefficients"]
    ours = {r["term"]: r for r in rows}
    ref = sm.Logit(frame["GRADE"], sm.add_constant(frame[["GPA", "TUCE", "PSI"]])).fit(
        disp=0, tol=1e-12)
    for term, sm_name in [("intercept", "const"), ("GPA", "GPA"), ("TUCE", "TUCE"),
                          ("PSI", "PSI")]:
        mine = ours[term]
        assert mine["estimate"] == pytest.approx(ref.params[sm_name], rel=1e-6)
        assert mine["se"] == pytest.approx(ref.bse[sm_name], rel=1e-6)
        assert mine["p_value"] == pytest.approx(ref.pvalues[sm_name], rel=1e-6)
        assert mine["z"] == pytest.approx(ref.tvalues[sm_name], rel=1e-6)
        low, high = ref.conf_int().loc[sm_name]
        assert mine["ci_low"] == pytest.approx(low, rel=1e-6)
        assert mine["ci_high"] == pytest.approx(high, rel=1e-6)
    greene = {"intercept": (-13.021, 4.931), "GPA": (2.826, 1.263), "TUCE": (0.095, 0.142),
              "PSI": (2.379, 1.065)}
    for term, (b, se) in greene.items():
        assert round(ours[term]["estimate"], 3) == b
        assert round(ours[term]["se"], 3) == se


def test_frozen_spector_margins_match_statsmodels(tmp_path):
    """The frozen model's margins equal statsmodels' linear predictor (same data source)."""
    import statsmodels.api as sm

    frame = spector_frame()
    data = tmp_path / "spector.csv"
    frame.to_csv(data, index=False)
    result = fit_file(data, FitOptions(label="GRADE", penalty="none", test_fraction=0.0, cv=3),
                      progress=False)
    exog = sm.add_constant(frame[["GPA", "TUCE", "PSI"]])
    ref = sm.Logit(frame["GRADE"], exog).fit(disp=0, tol=1e-12)
    plan = build_plan(result.model)
    out = score_matrix(plan, encode_rows(plan, frame.to_dict("records")))
    np.testing.assert_allclose(out["margins"][:, 0], exog.to_numpy() @ ref.params.to_numpy(),
                               rtol=1e-8, atol=1e-9)


# ---------------------------------------------------------------- metrics

def test_binary_metrics_agree_with_sklearn():
    from sklearn import metrics as skm

    rng = np.random.default_rng(4)
    y = rng.integers(0, 2, 500)
    p = np.round(rng.uniform(size=500), 2)        # rounded: many ties for the AUC
    p[:3] = [0.0, 1.0, 1e-20]
    proba = np.stack([1 - p, p], axis=1)
    pred = (p > 0.4).astype(int)
    assert metrics.roc_auc(y, p) == pytest.approx(skm.roc_auc_score(y, p), rel=1e-12)
    assert metrics.log_loss(y, proba) == pytest.approx(skm.log_loss(y, proba), rel=1e-12)
    assert metrics.brier(y, proba) == pytest.approx(skm.brier_score_loss(y, p), rel=1e-12)
    assert metrics.accuracy(y, pred) == pytest.approx(skm.accuracy_score(y, pred))
    assert metrics.balanced_accuracy(y, pred, 2) == pytest.approx(
        skm.balanced_accuracy_score(y, pred), rel=1e-12)
    assert metrics.confusion(y, pred, 2).tolist() == skm.confusion_matrix(y, pred).tolist()
    from sklearn.calibration import calibration_curve

    table = [r for r in metrics.calibration_table(y, p, 10) if r["count"]]
    observed, predicted = calibration_curve(y, p, n_bins=10, strategy="uniform")
    np.testing.assert_allclose([r["observed"] for r in table], observed, rtol=1e-12)
    np.testing.assert_allclose([r["mean_predicted"] for r in table], predicted, rtol=1e-12)


def test_multiclass_and_regression_metrics_agree_with_sklearn():
    from sklearn import metrics as skm

    rng = np.random.default_rng(9)
    y = rng.integers(0, 4, 400)
    raw = rng.gamma(1.0, size=(400, 4))
    proba = raw / raw.sum(axis=1, keepdims=True)
    pred = proba.argmax(axis=1)
    got = metrics.classification_metrics(y, proba, pred)
    assert got["roc_auc"] == pytest.approx(
        skm.roc_auc_score(y, proba, multi_class="ovr", average="macro"), rel=1e-12)
    assert got["log_loss"] == pytest.approx(skm.log_loss(y, proba), rel=1e-12)
    assert got["brier"] == pytest.approx(skm.brier_score_loss(y, proba), rel=1e-12)
    assert got["balanced_accuracy"] == pytest.approx(skm.balanced_accuracy_score(y, pred))
    counts = rng.poisson(2.0, 300).astype(float)
    mu = np.exp(rng.normal(0.6, 0.3, 300))
    reg = metrics.regression_metrics(counts, mu, "poisson")
    assert reg["rmse"] == pytest.approx(math.sqrt(skm.mean_squared_error(counts, mu)))
    assert reg["mae"] == pytest.approx(skm.mean_absolute_error(counts, mu))
    assert reg["deviance_explained"] == pytest.approx(
        skm.d2_tweedie_score(counts, mu, power=1), rel=1e-10)
    lin = metrics.regression_metrics(counts, mu, "linear")
    assert lin["deviance_explained"] == pytest.approx(skm.r2_score(counts, mu), rel=1e-12)


def test_calibration_table_and_confusion_by_hand():
    """Computed by hand: five bins of width 0.2, right-closed (0.8 falls in 0.6-0.8)."""
    y = np.array([0, 0, 1, 1, 1, 0])
    p = np.array([0.05, 0.1, 0.35, 0.8, 0.95, 0.62])
    table = metrics.calibration_table(y, p, n_bins=5)
    assert [r["count"] for r in table] == [2, 1, 0, 2, 1]
    assert [r["positives"] for r in table] == [0, 1, 0, 1, 1]
    assert table[0]["mean_predicted"] == pytest.approx(0.075)
    assert table[3]["mean_predicted"] == pytest.approx(0.71)
    assert [r["observed"] for r in table] == [0.0, 1.0, None, 0.5, 1.0]
    pred = (p > 0.5).astype(int)                      # 0 0 0 1 1 1
    assert metrics.confusion(y, pred, 2).tolist() == [[2, 1], [1, 2]]
    assert metrics.balanced_accuracy(y, pred, 2) == pytest.approx(2 / 3)


# ---------------------------------------------------------------- the decision cut

def test_cut_rules():
    assert cuts.parse_cut("cost:1/4").threshold == pytest.approx(0.2)
    assert cuts.parse_cut("0.3").threshold == 0.3
    y = np.array([0, 0, 0, 1, 1, 1])
    p = np.array([0.1, 0.2, 0.6, 0.4, 0.7, 0.9])
    # Youden's J is best (2/3) positive from 0.6 up or from 0.4 up: first maximum, 0.4 up.
    assert cuts.choose_threshold(cuts.parse_cut("youden"), y, p) == pytest.approx(0.3)
    for bad in ["cost:0/1", "cost:1", "1.5", "0", "fast"]:
        with pytest.raises(Exception, match="--cut"):
            cuts.parse_cut(bad)


def test_cut_absorbs_rounding_at_the_boundary():
    """sigmoid(1e-17) rounds to exactly 0.5, so `probability > 0.5` is false while the plain
    logit cut 0.0 has `margin > 0`; the frozen cut must follow the probability."""
    plan_margins = np.array([1e-17, 2e-17, -1.0, 1.0, 0.0])
    probs = 1.0 / (1.0 + np.exp(-plan_margins))
    assert probs[0] == 0.5
    fc = cuts.reconcile(0.5, plan_margins, probs)
    assert fc.moved and fc.agrees
    assert ((plan_margins > fc.cut) == (probs > 0.5)).all()


def test_youden_cut_reproduces_decisions(tmp_path):
    path = tmp_path / "readings.csv"
    demo_data.compressor_readings(n=1500, seed=3).to_csv(path, index=False)
    result = fit_file(path, FitOptions(label="fault_30d", drop=FAULT_DROP, penalty="none",
                                       cut="youden", cv=3), progress=False)
    fc = result.frozen_cut
    assert 0.0 < fc.threshold < 0.5 and fc.agrees
    assert result.model.head.cut == fc.cut == pytest.approx(cuts.logit(fc.threshold))
    frame = pd.read_csv(path)
    plan = build_plan(result.model)
    out = score_matrix(plan, encode_rows(plan, frame.to_dict("records")))
    assert ((out["margins"][:, 0] > fc.cut) == (out["probabilities"][:, 1] > fc.threshold)).all()


# ---------------------------------------------------------------- the report in a browser

CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync"]
PROBE = """<script>
window.addEventListener("load", function () {
  var out = [];
  document.querySelectorAll("img").forEach(function (img) {
    out.push(img.complete + ":" + img.naturalWidth + "x" + img.naturalHeight);
  });
  var pre = document.createElement("pre");
  pre.id = "image-probe";
  pre.textContent = out.join(" ");
  document.body.appendChild(pre);
});
</script>
</body>"""


def chromium(tmp_path, *args):
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    assert exe, "chromium is not installed (Debian: apt-get install -y chromium)"
    profile = tmp_path / f"profile-{len(list(tmp_path.iterdir()))}"
    cmd = [exe, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120)


def test_report_renders_in_headless_chromium(tmp_path):
    data = tmp_path / "readings.csv"
    demo_data.compressor_readings(n=1200, seed=5).to_csv(data, index=False)
    result = run_cli("fit", data, "-o", tmp_path / "m.json", "--label", "fault_30d", "--drop",
                     ",".join(FAULT_DROP), "--penalty", "none", "--cv", "3", "--report",
                     tmp_path / "rep")
    assert result.exit_code == 0, result.output
    report = tmp_path / "rep" / "report.html"
    html = report.read_text()
    assert "<script" not in html and "http://" not in html and "https://" not in html
    n_images = html.count("<img ")
    assert n_images == 4  # ROC, calibration, score distribution, coefficients

    probe = tmp_path / "probe.html"
    probe.write_text(html.replace("</body>", PROBE))
    dom = chromium(tmp_path, "--virtual-time-budget=10000", "--dump-dom", probe.as_uri())
    assert dom.returncode == 0, dom.stderr[-2000:]
    found = re.search(r'<pre id="image-probe">([^<]*)</pre>', dom.stdout)
    assert found, dom.stdout[-2000:]
    sizes = found.group(1).split()
    assert len(sizes) == n_images
    for entry in sizes:
        complete, size = entry.split(":")
        width, height = map(int, size.split("x"))
        assert complete == "true" and width > 100 and height > 100, entry

    shot = tmp_path / "shot.png"
    run = chromium(tmp_path, "--window-size=1200,3000", f"--screenshot={shot}", report.as_uri())
    assert run.returncode == 0 and shot.exists(), run.stderr[-2000:]
    import matplotlib.image

    pixels = matplotlib.image.imread(str(shot))[:, :, :3]
    not_white = (pixels < 0.95).any(axis=2).mean()
    assert not_white > 0.02 and pixels.std() > 0.05, (not_white, pixels.std())


# ---------------------------------------------------------------- bad data

def _write(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


def _rows(n=40, extra=""):
    rng = np.random.default_rng(0)
    lines = ["a,b,y" + extra]
    for i in range(n):
        lines.append(f"{rng.normal():.3f},{rng.normal():.3f},{i % 2}")
    return "\n".join(lines) + "\n"


BAD = {
    "empty file": ("", "y", "empty"),
    "label missing": (_rows(), "fault", "no column named 'fault'"),
    "single class": (_rows().replace(",0\n", ",1\n"), "y", "single class"),
    "all-missing feature": ("a,b,y\n" + "".join(f"{i},,{i % 2}\n" for i in range(30)), "y",
                            "'b' has no values"),
    "duplicate column names": ("a,b,a,y\n" + "".join(f"{i},{i},{i},{i % 2}\n"
                                                     for i in range(30)), "y", "duplicate"),
}


def _junk_rows():
    lines = _rows().splitlines()
    first = lines[5].split(",")
    first[1] = "n/a?"
    lines[5] = ",".join(first)
    return "\n".join(lines) + "\n"


BAD["junk in a numeric column"] = (_junk_rows(), "y", "'n/a?' at data row 5 is not a number")


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_data_is_one_line_exit_2(tmp_path, case):
    text, label, message = BAD[case]
    data = _write(tmp_path / "data.csv", text)
    out = tmp_path / "model.json"
    result = CliRunner().invoke(cli, ["fit", str(data), "-o", str(out), "--label", label,
                                      "--report", str(tmp_path / "rep")])
    assert result.exit_code == 2, (case, result.output)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), result.stderr
    assert message in lines[0], lines[0]
    assert "Traceback" not in result.output
    assert not out.exists() and not (tmp_path / "rep").exists()


# ---------------------------------------------------------------- other model families

@pytest.mark.parametrize("label,model,task", [("fault_type", "multinomial", "multiclass"),
                                              ("alarms_per_week", "poisson", "regression")])
def test_other_families_fit_freeze_and_report(tmp_path, label, model, task):
    """Test metrics come from the frozen model; they equal scikit-learn's metric functions
    on scikit-learn's own predictions of the fitted pipeline."""
    from sklearn import metrics as skm

    from scorewright.fit.report import render_report
    from scorewright.fit.validation import predict

    path = tmp_path / "readings.csv"
    demo_data.compressor_readings(n=900, seed=8).to_csv(path, index=False)
    drop = [c for c in demo_data.LABELS if c != label]
    result = fit_file(path, FitOptions(label=label, drop=drop, model=model, penalty="none",
                                       cv=3), progress=False)
    assert result.model.head.task == task
    v = result.validation
    x = pd.read_csv(path)[list(v.pipeline.feature_names_in_)]
    sk = predict(v.pipeline, result.spec, x.iloc[v.test_index])
    if task == "multiclass":
        assert result.test["log_loss"] == pytest.approx(skm.log_loss(result.test_y, sk),
                                                        rel=1e-9)
    else:
        assert result.test["deviance_explained"] == pytest.approx(
            skm.d2_tweedie_score(result.test_y, sk, power=1), rel=1e-9)
    html = render_report(result).decode()
    assert html.count("<img ") >= 2


def test_fit_is_deterministic(tmp_path):
    data = tmp_path / "spector.csv"
    spector_frame().to_csv(data, index=False)
    opts = FitOptions(label="GRADE", test_fraction=0.0, cv=3, seed=1)
    first = fit_file(data, opts, progress=False).model
    second = fit_file(data, opts, progress=False).model
    assert first.to_json() == second.to_json()


# ---------------------------------------------------------------- rows without a label

def _labelled_rows(n: int, empty: int) -> str:
    """A 0/1 label whose first `empty` cells are empty (invented readings)."""
    rng = np.random.default_rng(15)
    lines = ["a,b,zone,y"]
    for i in range(n):
        a, b = rng.normal(), rng.normal()
        zone = ("north", "south", "east")[i % 3]
        y = int(rng.random() < 1.0 / (1.0 + math.exp(b - a)))
        lines.append(f"{a:.4f},{b:.4f},{zone},{'' if i < empty else y}")
    return "\n".join(lines) + "\n"


def _string_modes():
    """pandas' two readings of text: its string dtype (the default from pandas 3, opt-in
    with future.infer_string in pandas 2) and plain object columns (the default before
    pandas 3; still selectable in 3.x, with a deprecation warning)."""
    import warnings

    modes = [True]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        before = pd.options.future.infer_string
        try:
            pd.options.future.infer_string = False
            modes.append(False)
        except (ValueError, pd.errors.OptionError):
            pass
        pd.options.future.infer_string = before
    return modes


@pytest.mark.filterwarnings("ignore:.*infer_string")
@pytest.mark.parametrize("infer_string", _string_modes())
@pytest.mark.parametrize("empty", [1, 20])
def test_rows_without_a_label_are_left_out_and_counted(tmp_path, monkeypatch, empty,
                                                       infer_string):
    """An empty label cell is no class: one gave a traceback, twenty a class 'nan'."""
    monkeypatch.setattr(pd.options.future, "infer_string", infer_string)
    data = _write(tmp_path / "data.csv", _labelled_rows(200, empty))
    out = tmp_path / "model.json"
    result = CliRunner().invoke(cli, ["fit", str(data), "-o", str(out), "--label", "y",
                                      "--cv", "3", "--report", str(tmp_path / "rep")])
    assert result.exit_code == 0, result.output
    assert f"left out {empty} of 200 rows with no label 'y'" in result.output
    model = json.loads(out.read_text())
    assert model["head"]["classes"] == [0, 1]
    data_prov = model["provenance"]["inputs"]["data"]
    assert data_prov["rows_without_label"] == empty
    assert data_prov["rows_train"] + data_prov["rows_test"] == 200 - empty
    html = (tmp_path / "rep" / "report.html").read_text()
    assert f"<tr><th>rows without a label (left out)</th><td>{empty}</td></tr>" in html
    # the self-check ran on the labelled rows (and rows derived from the model)
    check = model["provenance"]["created"]["self_check"]
    assert check.startswith(f"self-check: the frozen model scores {200 - empty + 12} rows "
                            "(12 derived from the model)")
    assert f"<p>{check}." in html and check in result.output


def test_integer_coded_categories_match_integral_values_of_any_type(tmp_path):
    """A CSV column of whole-number codes was frozen as text levels, so a DOUBLE 2.0
    (another loader) became an unseen level; integer levels match 2, 2.0 and '2'."""
    import importlib.util

    from scorewright.emit import emitter
    from scorewright.reference import score_row

    rng = np.random.default_rng(6)
    lines = ["load,shift,y"]
    for _ in range(300):
        load, shift = rng.normal(), int(rng.integers(1, 4))
        y = int(rng.random() < 1.0 / (1.0 + math.exp(-(load + 1.5 * (shift == 3) - 0.5))))
        lines.append(f"{load:.4f},{shift},{y}")
    data = _write(tmp_path / "codes.csv", "\n".join(lines) + "\n")
    result = fit_file(data, FitOptions(label="y", categorical=["shift"], cv=3), progress=False)
    feat = result.model.feature("shift")
    assert feat.levels == (1, 2, 3)
    (art,) = emitter("python")(result.model, {})
    path = tmp_path / art.name
    path.write_bytes(art.content)
    spec = importlib.util.spec_from_file_location("codes_scorer", path)
    scorer = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(scorer)
    plan = build_plan(result.model)
    for code in (1, 2, 3):
        spellings = [code, float(code), str(code), f" {code}.0 ", np.int64(code),
                     np.float64(code)]
        margins = {score_row(plan, {"load": 0.5, "shift": v}).margins[0] for v in spellings}
        assert len(margins) == 1, (code, margins)
        assert {scorer.margin({"load": 0.5, "shift": v}) for v in spellings} == margins
    unseen = score_row(plan, {"load": 0.5, "shift": 9}).margins
    assert score_row(plan, {"load": 0.5, "shift": 3.0}).margins != unseen


def test_codes_spelled_two_ways_stay_text(tmp_path):
    """'7' and '07' are two categories in the data: they stay text levels."""
    lines = ["load,code,y"] + [f"{i % 7 / 7:.3f},{('7', '07', '8')[i % 3]},{i % 2}"
                               for i in range(60)]
    data = _write(tmp_path / "codes.csv", "\n".join(lines) + "\n")
    result = fit_file(data, FitOptions(label="y", categorical=["code"], cv=3), progress=False)
    assert result.model.feature("code").levels == ("07", "7", "8")


def test_a_parquet_bool_column_is_a_boolean_feature(tmp_path):
    """pyarrow reads a Parquet bool column as bool; fit reads it as 0/1, the model records
    it, and True, 1 and the text 'true' score alike."""
    from scorewright.reference import score_row

    rng = np.random.default_rng(9)
    n = 240
    frame = pd.DataFrame({"load": rng.normal(size=n), "defrost_on": rng.random(n) < 0.4})
    margin = frame.load + 1.5 * frame.defrost_on - 0.6
    frame["fault"] = (rng.random(n) < 1 / (1 + np.exp(-margin))).astype(int)
    path = tmp_path / "flags.parquet"
    frame.to_parquet(path)
    result = fit_file(path, FitOptions(label="fault", cv=3), progress=False)
    assert result.model.feature("defrost_on").boolean
    assert "self-check: the frozen model scores" in result.model.provenance["created"][
        "self_check"]
    plan = build_plan(result.model)
    for on, spellings in ((1, (True, 1, 1.0, "true", " TRUE", np.True_)),
                          (0, (False, 0, "false", "False", np.False_))):
        margins = {score_row(plan, {"load": 0.25, "defrost_on": v}).margins for v in spellings}
        assert len(margins) == 1, (on, margins)


def test_a_csv_column_of_true_false_words_is_a_boolean_feature(tmp_path):
    """pandas writes a bool column to CSV as True/False; fit reads it as 1/0 (not as two
    text categories, which a Python True would miss), and marks the feature boolean."""
    from scorewright import load_model
    from scorewright.reference import score_row

    rng = np.random.default_rng(12)
    frame = pd.DataFrame({"load": rng.normal(size=240), "defrost_on": rng.random(240) < 0.4})
    margin = frame.load + 1.5 * frame.defrost_on - 0.6
    frame["fault"] = (rng.random(240) < 1 / (1 + np.exp(-margin))).astype(int)
    path = tmp_path / "flags.csv"
    frame.to_csv(path, index=False)
    assert "True" in path.read_text()
    result = CliRunner().invoke(cli, ["fit", str(path), "-o", str(tmp_path / "m.json"),
                                      "--label", "fault", "--cv", "3"])
    assert result.exit_code == 0, result.output
    assert re.search(r"defrost_on\s+numeric\s+missing 0 \(0\.0%\), true/false read as 1/0",
                     result.output)
    model = load_model(tmp_path / "m.json")
    assert model.feature("defrost_on").boolean
    plan = build_plan(model)
    on = {score_row(plan, {"load": 0.1, "defrost_on": v}).margins for v in
          (True, "True", "true", 1)}
    off = {score_row(plan, {"load": 0.1, "defrost_on": v}).margins for v in
           (False, "False", "FALSE", 0.0)}
    assert len(on) == 1 and len(off) == 1 and on != off

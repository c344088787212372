"""Freezing PyTorch linear models: the frozen model is torch's own function in double
precision (checked against the same module run by torch in float64, to 1e-12) and meets
torch's float32 forward pass within 1e-6; a saved state_dict freezes from the command
line; anything that is not one Linear and a link is refused in one line."""

from __future__ import annotations

import copy
import warnings

import numpy as np
import pandas as pd
import pytest

torch = pytest.importorskip("torch")
nn = torch.nn

import scorewright  # noqa: E402
from scorewright.errors import ScorewrightError  # noqa: E402
from scorewright.plan import build_plan  # noqa: E402
from scorewright.reference import encode_rows, score_matrix  # noqa: E402
from scorewright.verify.harness import build_targets  # noqa: E402


def _readings(n=1500, seed=0):
    """Invented compressor readings at cold-storage sites, and a fault label."""
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"discharge_temp_c": rng.normal(80, 10, n),
                       "vibration_mm_s": rng.gamma(2.0, 1.5, n),
                       "site_zone": rng.choice(["dock", "chill-room", "freezer"], n)})
    margin = (0.05 * (df.discharge_temp_c - 80) + 0.4 * df.vibration_mm_s - 1.0
              + 0.7 * (df.site_zone == "dock"))
    fault = rng.uniform(size=n) < 1.0 / (1.0 + np.exp(-margin))
    kind = np.where(fault, np.where(df.vibration_mm_s > 3, 2, 1), 0)
    return df, fault.astype(np.float32), kind


def _preprocessor(df):
    from sklearn.compose import ColumnTransformer
    from sklearn.preprocessing import OneHotEncoder, StandardScaler

    return ColumnTransformer([
        ("num", StandardScaler(), ["discharge_temp_c", "vibration_mm_s"]),
        ("cat", OneHotEncoder(handle_unknown="ignore", sparse_output=False), ["site_zone"]),
    ]).fit(df)


def _train(module, x, y, loss, steps=200):
    torch.manual_seed(0)
    opt = torch.optim.SGD(module.parameters(), lr=0.3)
    for _ in range(steps):
        opt.zero_grad()
        loss(module(x), y).backward()
        opt.step()
    return module


def _frozen(model, frame):
    plan = build_plan(model)
    out = score_matrix(plan, encode_rows(plan, frame.to_dict("records")))
    return out["probabilities"] if plan.task != "regression" else out["value"][:, None]


def _torch64(module, x):
    """The same module run by torch in float64: the function the frozen model holds."""
    with torch.no_grad():
        return copy.deepcopy(module).double()(torch.from_numpy(x.astype(np.float64))).numpy()


def test_logistic_regression_as_a_network_freezes_exactly():
    """nn.Linear trained with BCEWithLogitsLoss and SGD (the module outputs the logit)."""
    df, fault, _ = _readings()
    pre = _preprocessor(df)
    x = pre.transform(df)
    lin = nn.Linear(x.shape[1], 1)
    _train(lin, torch.tensor(x, dtype=torch.float32), torch.tensor(fault)[:, None],
           nn.BCEWithLogitsLoss())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(lin, preprocessor=pre, task="binary",
                                   classes=["ok", "fault"], check_rows=df)
    p64 = 1.0 / (1.0 + np.exp(-_torch64(lin, x)[:, 0]))
    got = _frozen(model, df)[:, 1]
    assert np.max(np.abs(got - p64)) <= 1e-12
    with torch.no_grad():
        p32 = torch.sigmoid(lin(torch.tensor(x, dtype=torch.float32)))[:, 0].numpy()
    assert np.max(np.abs(got - p32)) <= 1e-6
    assert model.head.classes == ("ok", "fault")
    assert "float32" in model.provenance["source"]


def test_softmax_classifier_and_regression():
    df, _, kind = _readings(seed=1)
    pre = _preprocessor(df)
    x = torch.tensor(pre.transform(df), dtype=torch.float32)
    lin = _train(nn.Linear(x.shape[1], 3), x, torch.tensor(kind), nn.CrossEntropyLoss())
    model = scorewright.freeze(nn.Sequential(lin, nn.Softmax(dim=1)), preprocessor=pre,
                               check_rows=df)
    x64 = pre.transform(df)  # the preprocessor's doubles, as the frozen model has them
    want = torch.softmax(torch.from_numpy(_torch64(lin, x64)), dim=1).numpy()
    assert np.max(np.abs(_frozen(model, df) - want)) <= 1e-12
    reg = _train(nn.Linear(x.shape[1], 1), x, x[:, :1] * 2.0 + 1.0, nn.MSELoss())
    model = scorewright.freeze(reg, preprocessor=pre, check_rows=df)
    want = _torch64(reg, x64)
    assert np.max(np.abs(_frozen(model, df) - want) / np.maximum(1, np.abs(want))) <= 1e-12


def test_float32_weights_are_frozen_exactly():
    lin = nn.Linear(3, 1)
    model = scorewright.freeze(nn.Sequential(lin, nn.Sigmoid()),
                               feature_names=["suction_kpa", "load_pct", "door_open_s"])
    w = lin.weight.detach().numpy()[0]
    assert model.head.coefficients[0] == tuple(float(v) for v in w)
    assert model.head.intercepts[0] == float(lin.bias.detach().numpy()[0])


@pytest.mark.parametrize("module, kwargs, words", [
    (lambda: nn.Sequential(nn.Linear(3, 4), nn.ReLU(), nn.Linear(4, 1)), {},
     "a hidden layer is not a GLM"),
    (lambda: nn.Linear(3, 3), {}, "task='multiclass'"),
    (lambda: nn.Sequential(nn.Linear(3, 2), nn.Sigmoid()), {}, "not a binary model"),
    (lambda: nn.Linear(3, 1), {"feature_names": ["a", "b"]}, "takes 3 inputs but 2"),
    (lambda: nn.Linear(3, 1), {}, "give feature_names"),
    (lambda: nn.Sequential(nn.Linear(3, 1), nn.Sigmoid()), {"task": "regression",
                                                            "feature_names": list("abc")},
     "contradicts"),
])
def test_what_is_not_a_linear_model_is_refused_in_one_line(module, kwargs, words):
    with pytest.raises(ScorewrightError) as err:
        scorewright.freeze(module(), **kwargs)
    assert words in str(err.value) and "\n" not in str(err.value)


def test_cli_freezes_a_state_dict(tmp_path):
    from click.testing import CliRunner

    from scorewright.cli import cli

    lin = nn.Linear(3, 1)
    torch.save(lin.state_dict(), tmp_path / "fault.pt")
    out = tmp_path / "m.json"
    args = ["freeze", str(tmp_path / "fault.pt"), "-o", str(out),
            "--feature-names", "suction_kpa,load_pct,door_open_s"]
    refused = CliRunner().invoke(cli, args)
    assert refused.exit_code == 2 and "--task" in refused.stderr and not out.exists()
    done = CliRunner().invoke(cli, args + ["--task", "binary", "--classes", "ok,fault"])
    assert done.exit_code == 0, done.output
    model = scorewright.load_model(out)
    assert model.head.coefficients[0] == tuple(float(v) for v in lin.weight.detach()[0])
    torch.save({"0.weight": torch.zeros(4, 3), "2.weight": torch.zeros(1, 4)},
               tmp_path / "deep.pt")
    deep = CliRunner().invoke(cli, ["freeze", str(tmp_path / "deep.pt"), "-o",
                                    str(tmp_path / "d.json"), "--task", "binary"])
    assert deep.exit_code == 2 and "one Linear layer" in deep.stderr


def test_frozen_torch_model_builds_and_verifies(tmp_path):
    df, fault, _ = _readings(n=400)
    pre = _preprocessor(df)
    x = torch.tensor(pre.transform(df), dtype=torch.float32)
    lin = _train(nn.Linear(x.shape[1], 1), x, torch.tensor(fault)[:, None],
                 nn.BCEWithLogitsLoss(), steps=50)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(lin, preprocessor=pre, task="binary", check_rows=df)
    report = build_targets(model, tmp_path, targets=["python", "c-double", "onnx-double"])
    assert report.ok, [r.message for r in report.results]

"""Freezing a PyTorch linear model: an `nn.Linear`, or an `nn.Sequential` of one Linear and
an optional Sigmoid or Softmax, with an optional fitted scikit-learn transformer that made
its inputs.

torch holds the weights as float32; each is a double exactly, and the frozen model holds
those doubles, so it computes the module's function in double precision. The module is
recast as the scikit-learn linear model of that function (the same coefficients, as
doubles) behind the preprocessor, and frozen and self-checked as scikit-learn models are
(to 1e-12 against scikit-learn's double evaluation); then the frozen model is compared
with torch's own float32 forward pass, which it must meet within FLOAT32_TOLERANCE
(probabilities absolute, values relative).

A bare Linear says nothing of its link: with one output it is read as a regression
(identity) unless `task="binary"` says it outputs the logit of a binary model (trained with
BCEWithLogitsLoss); with several outputs `task="multiclass"` must say they are class logits
(CrossEntropyLoss). A state_dict (`scorewright freeze model.pt`) holds no layers at all, so
the task is always given there.
"""

from __future__ import annotations

import numpy as np

from ..errors import ScorewrightError

FLOAT32_TOLERANCE = 1e-6
TASKS = ("binary", "multiclass", "regression")


def is_torch_module(obj) -> bool:
    return any((c.__module__ or "").startswith("torch.nn") for c in type(obj).__mro__)


def linear_parts(module, task: str | None):
    """(weight (K, n) float32 array, bias (K,), task) of a Linear or Sequential."""
    import torch.nn as nn

    layers = list(module) if isinstance(module, nn.Sequential) else [module]
    if not layers or not isinstance(layers[0], nn.Linear):
        raise ScorewrightError(f"{type(module).__name__}: freeze takes an nn.Linear, or an "
                               "nn.Sequential of one Linear and an optional Sigmoid or Softmax")
    linear, rest = layers[0], layers[1:]
    k = linear.out_features
    if len(rest) > 1 or (rest and not isinstance(rest[0], (nn.Sigmoid, nn.Softmax))):
        names = ", ".join(type(x).__name__ for x in rest)
        raise ScorewrightError(f"nn.Sequential(Linear, {names}): after the Linear only one "
                               "Sigmoid or Softmax is frozen (a hidden layer is not a GLM)")
    if rest and isinstance(rest[0], nn.Sigmoid):
        implied = "binary"
        if k != 1:
            raise ScorewrightError(f"a Sigmoid after a Linear of {k} outputs is not a binary "
                                   "model (one output)")
    elif rest:
        implied = "multiclass"
        if rest[0].dim not in (-1, 1) or k < 2:
            raise ScorewrightError("a Softmax must run over the Linear's outputs (dim=-1 or 1) "
                                   "of at least two classes")
    else:
        implied = None
    if task is not None and task not in TASKS:
        raise ScorewrightError(f"task {task!r}: expected one of {', '.join(TASKS)}")
    if implied and task and task != implied:
        raise ScorewrightError(f"task {task!r} contradicts the module's {type(rest[0]).__name__}")
    task = implied or task or ("regression" if k == 1 else None)
    if task is None:
        raise ScorewrightError(f"a Linear of {k} outputs with no Softmax: pass "
                               "task='multiclass' if they are class logits")
    if (task == "multiclass") != (k > 1):
        raise ScorewrightError(f"task {task!r} does not fit a Linear of {k} output"
                               f"{'s' if k > 1 else ''}")
    weight = linear.weight.detach().cpu().numpy()
    bias = (linear.bias.detach().cpu().numpy() if linear.bias is not None
            else np.zeros(k, dtype=weight.dtype))
    return weight, bias, task


def as_sklearn(weight, bias, task: str, n_inputs: int, classes=None):
    """The scikit-learn linear model of the same function, its coefficients the float32
    weights as doubles (exact)."""
    from sklearn.linear_model import LinearRegression, LogisticRegression

    w = np.asarray(weight, dtype=np.float64)
    b = np.asarray(bias, dtype=np.float64)
    if w.shape[1] != n_inputs:
        raise ScorewrightError(f"the Linear takes {w.shape[1]} inputs but "
                               f"{n_inputs} are given (features or preprocessor outputs)")
    if task == "regression":
        est = LinearRegression()
        est.coef_, est.intercept_ = w[0].copy(), float(b[0])
    else:
        n_classes = 2 if task == "binary" else w.shape[0]
        labels = np.arange(n_classes) if classes is None else np.asarray(list(classes))
        if len(labels) != n_classes:
            raise ScorewrightError(f"classes: {len(labels)} labels for {n_classes} classes")
        est = LogisticRegression()
        est.coef_, est.intercept_, est.classes_ = w.copy(), b.copy(), labels
    est.n_features_in_ = n_inputs
    return est


def source_pipeline(module, feature_names, preprocessor, task, classes):
    """(the scikit-learn estimator of the same function, the task)."""
    from sklearn.pipeline import Pipeline

    weight, bias, task = linear_parts(module, task)
    if preprocessor is None:
        if feature_names is None:
            raise ScorewrightError("feature_names: a torch module names no inputs; give "
                                   "feature_names (or a fitted preprocessor that has them)")
        head = as_sklearn(weight, bias, task, len(feature_names), classes)
        head.feature_names_in_ = np.asarray([str(n) for n in feature_names], dtype=object)
        return head, task
    n_out = _n_outputs(preprocessor)
    head = as_sklearn(weight, bias, task, n_out, classes)
    return Pipeline([("preprocessor", preprocessor), ("linear", head)]), task


def _n_outputs(preprocessor) -> int:
    try:
        return len(preprocessor.get_feature_names_out())
    except Exception as exc:  # an unfitted or foreign transformer
        raise ScorewrightError(f"preprocessor {type(preprocessor).__name__}: not a fitted "
                               f"scikit-learn transformer ({exc})") from None


def float32_gap(module, pipeline, task: str, frame) -> float:
    """The largest difference, on these rows, between torch's float32 forward pass (on the
    preprocessor's output cast to float32) and the frozen model's outputs; probabilities
    absolute, values relative to max(1, |value|)."""
    import torch

    x = frame
    if hasattr(pipeline, "steps"):
        x = pipeline.steps[0][1].transform(frame)
    x = np.asarray(x, dtype=np.float32)
    with torch.no_grad():
        out = module(torch.from_numpy(x)).numpy().astype(np.float64)
        if task == "binary" and out.shape[1] == 1 and not _ends_in(module, "Sigmoid"):
            out = 1.0 / (1.0 + np.exp(-out))
        if task == "multiclass" and not _ends_in(module, "Softmax"):
            out = torch.softmax(torch.from_numpy(out.astype(np.float32)), dim=1).numpy()
    want = pipeline.predict_proba(frame) if task != "regression" else pipeline.predict(frame)
    want = np.asarray(want, dtype=np.float64)
    if task == "binary":
        want = want[:, 1:]
    if task == "regression":
        return float(np.max(np.abs(out[:, 0] - want) / np.maximum(1.0, np.abs(want)),
                            initial=0.0))
    return float(np.max(np.abs(out - want), initial=0.0))


def _ends_in(module, name: str) -> bool:
    import torch.nn as nn

    return isinstance(module, nn.Sequential) and type(list(module)[-1]).__name__ == name


def module_from_state_dict(path, task: str | None):
    """An nn.Linear (+ Sigmoid/Softmax for the task) from a saved state_dict, read with
    weights_only=True (no code runs)."""
    try:
        import torch
        import torch.nn as nn
    except ImportError:
        raise ScorewrightError(f"{path}: reading a state_dict needs torch (python3 -m pip "
                               "install torch --index-url "
                               "https://download.pytorch.org/whl/cpu)") from None
    if task not in TASKS:
        raise ScorewrightError("--task: a state_dict holds weights only; say binary, "
                               "multiclass or regression")
    try:
        state = torch.load(path, map_location="cpu", weights_only=True)
    except Exception as exc:  # torch raises many kinds for a file it cannot read
        raise ScorewrightError(f"{path}: not a loadable state_dict "
                               f"({' '.join(str(exc).split())[:160]})") from None
    if not isinstance(state, dict):
        raise ScorewrightError(f"{path}: holds a {type(state).__name__}, not a state_dict")
    weights = [k for k in state if k.endswith("weight")]
    if len(weights) != 1 or getattr(state[weights[0]], "ndim", 0) != 2:
        raise ScorewrightError(f"{path}: expected the weight of one Linear layer, found "
                               f"{', '.join(map(str, state)) or 'nothing'}")
    weight = state[weights[0]]
    bias = state.get(weights[0][:-len("weight")] + "bias")
    k, n = weight.shape
    linear = nn.Linear(n, k, bias=bias is not None)
    with torch.no_grad():
        linear.weight.copy_(weight)
        if bias is not None:
            linear.bias.copy_(bias)
    if task == "binary" and k == 1:
        return nn.Sequential(linear, nn.Sigmoid())
    if task == "multiclass":
        return nn.Sequential(linear, nn.Softmax(dim=-1))
    return linear

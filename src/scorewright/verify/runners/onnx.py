"""ONNX artifacts run by onnxruntime (CPU) or by onnx's ReferenceEvaluator.

Rows enter the graph as a serving caller would feed it (the graph's contract,
see emit/onnx.py): numeric values as double (or float) with NaN for missing;
categorical values as strings, "" for missing, integer levels as their decimal
text. Values are read by `values.py`, the one definition of missing and unseen.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ...errors import ScorewrightError
from ...model import FrozenModel
from ...plan import Plan, build_plan
from ...values import MISSING_CODE, UNSEEN_CODE, category_code, numeric_value
from . import RunOutput, emitted

EVALUATORS = ("onnxruntime", "reference")
NUMPY_TYPES = {"double": np.float64, "float": np.float32}


def run(artifact_dir: Path, model: FrozenModel, rows: list[dict], options: dict) -> RunOutput:
    evaluator = options.get("evaluator", "onnxruntime")
    precision = options.get("precision", "double")
    layout = options.get("inputs", "per-feature")
    if evaluator not in EVALUATORS:
        raise ScorewrightError(f"onnx: unknown evaluator {evaluator!r}; known: "
                               f"{', '.join(EVALUATORS)}")
    if precision not in NUMPY_TYPES:
        raise ScorewrightError(f"onnx: precision {precision!r}: expected double or float")
    plan = build_plan(model, precision)
    path = emitted(artifact_dir, model, options, "onnx", ".onnx")
    feeds = input_feeds(plan, rows, layout)
    if evaluator == "reference":
        _check_reference_can_hold(plan)
    if evaluator == "onnxruntime":
        runtime, outputs = _run_onnxruntime(path, feeds)
    else:
        runtime, outputs = _run_reference(path, feeds)
    return _run_output(plan, runtime, outputs)


def input_feeds(plan: Plan, rows: list[dict], layout: str) -> dict[str, np.ndarray]:
    dtype = NUMPY_TYPES[plan.precision.name]
    columns = {}
    for inp in plan.inputs:
        if inp.kind == "numeric":
            columns[inp.name] = numeric_column(rows, inp, dtype)
        else:
            columns[inp.name] = categorical_column(rows, inp)
    if layout == "matrix":
        n = len(rows)
        matrix = np.empty((n, len(plan.inputs)), dtype=dtype)
        for inp in plan.inputs:
            matrix[:, inp.index] = columns[inp.name][:, 0]
        return {"features": matrix}
    return columns


def numeric_column(rows: list[dict], inp, dtype) -> np.ndarray:
    values = [numeric_value(row.get(inp.name), inp.boolean) for row in rows]
    col = np.array([math.nan if v is None else v for v in values], dtype=np.float64)
    if dtype is np.float32:
        # A finite double beyond float range would become inf (= missing) in a plain
        # cast; saturate so the graph clamps it to its bound like the plan does.
        limit = float(np.finfo(np.float32).max)
        col = np.clip(col, -limit, limit)
    return col.astype(dtype).reshape(len(rows), 1)


def categorical_column(rows: list[dict], inp) -> np.ndarray:
    texts = [str(level) for level in inp.levels]
    taken = set(texts) | {""}
    unseen_text = "\uFFFFunseen"
    while unseen_text in taken:
        unseen_text += "\uFFFF"
    out = []
    for row in rows:
        raw = row.get(inp.name)
        code = category_code(inp.levels, raw)
        if code == MISSING_CODE:
            out.append("")
        elif code == UNSEEN_CODE:
            # Feed the caller's own text where it cannot be mistaken for a level.
            text = raw if isinstance(raw, str) else str(raw)
            out.append(text if text not in taken else unseen_text)
        else:
            out.append(texts[code])
    return np.array(out, dtype=object).reshape(len(rows), 1)


def _check_reference_can_hold(plan: Plan) -> None:
    """onnx.reference reads string constants through numpy's fixed-width strings, which
    drop trailing NULs: a level "a\x00" would compare as "a". Refuse rather than
    report a disagreement that is the evaluator's own."""
    for inp in plan.inputs:
        if inp.kind == "categorical":
            for level in inp.levels:
                if str(level).endswith("\x00"):
                    raise ScorewrightError(
                        f"onnx: the ONNX reference evaluator cannot run this graph: it drops "
                        f"trailing NUL characters from string constants (feature {inp.name!r}, "
                        f"level {level!r}); use the onnxruntime evaluator")


def _run_onnxruntime(path: Path, feeds: dict) -> tuple[str, dict]:
    try:
        import onnxruntime
    except ImportError as exc:
        raise ScorewrightError(f"onnx: onnxruntime cannot be imported ({exc}); "
                               f"pip install onnxruntime") from None
    try:
        session = onnxruntime.InferenceSession(str(path), providers=["CPUExecutionProvider"])
        names = [o.name for o in session.get_outputs()]
        values = session.run(names, _graph_feeds(session.get_inputs(), feeds))
    except Exception as exc:  # onnxruntime raises its own exception types
        raise ScorewrightError(f"onnx: onnxruntime failed: {_one_line(exc)}") from None
    return f"onnxruntime {onnxruntime.__version__} CPU", dict(zip(names, values))


def _run_reference(path: Path, feeds: dict) -> tuple[str, dict]:
    import onnx
    from onnx.reference import ReferenceEvaluator

    try:
        evaluator = ReferenceEvaluator(str(path))
        inputs = [_Named(n) for n in evaluator.input_names]
        values = evaluator.run(None, _graph_feeds(inputs, feeds))
    except Exception as exc:
        raise ScorewrightError(f"onnx: the reference evaluator failed: {_one_line(exc)}"
                               ) from None
    return f"onnx.reference {onnx.__version__}", dict(zip(evaluator.output_names, values))


class _Named:
    def __init__(self, name: str):
        self.name = name


def _graph_feeds(graph_inputs, feeds: dict) -> dict:
    names = [i.name for i in graph_inputs]
    missing = [n for n in names if n not in feeds]
    if missing:
        raise ScorewrightError(f"onnx: the graph wants input {missing[0]!r}, which the model "
                               f"does not have (emitted with another --inputs layout?)")
    return {n: feeds[n] for n in names}


def _one_line(exc: Exception) -> str:
    return " ".join(str(exc).split())[:300]


def _run_output(plan: Plan, runtime: str, outputs: dict) -> RunOutput:
    margins = np.asarray(outputs["margin"], dtype=np.float64)
    if plan.task == "regression":
        value = np.asarray(outputs["predicted_value"], dtype=np.float64)[:, 0]
        rate = None if plan.offset is None else \
            np.asarray(outputs["predicted_rate"], dtype=np.float64)[:, 0]
        return RunOutput(runtime, margins, value=value, rate=rate)
    probabilities = np.asarray(outputs["probability"], dtype=np.float64) \
        if plan.has_probabilities else None
    class_index = np.asarray(outputs["class_index"], dtype=np.int64)
    return RunOutput(runtime, margins, probabilities, class_index)

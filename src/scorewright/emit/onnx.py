"""ONNX target: one graph (.onnx) of default-domain operators, built with onnx.helper.

Contract of the graph (also written into its doc string):
- opset 28 of the default domain only (no ai.onnx.ml); every operator used has
  an onnxruntime CPU kernel at that opset for the element types used.
- Inputs, `per-feature` layout: one input per feature, named exactly as the
  feature, shape [N, 1]; numeric features double (or float), missing = NaN or
  +-inf; categorical features string, missing = "" (the empty string), and an
  integer-level feature takes the level's decimal text ("3"), so every
  categorical input has one type and one missing encoding. `matrix` layout (all
  numeric models only): one input `features` [N, F] in feature order. A caller
  feeding a float graph from doubles saturates out-of-range values to +-FLT_MAX
  (a plain cast makes them inf, which the graph reads as missing).
- Outputs: margin [N, K]; classification: probability [N, C] in class order and
  class_index [N] int64; regression: predicted_value [N, 1].

The graph evaluates the scoring plan's steps in the plan's order. Margins are
the plan's sequential sum t_0 + t_1 + ... + intercept: a variadic Sum, which
both evaluators compute left to right, instead of a MatMul, whose kernels may
reorder or fuse the products. Categorical terms are exact table look-ups
(Gather), never products with a one-hot vector. The design value of a missing
numeric input is folded at emit time with the same operations in the graph's
element type, so one Where replaces a second pass of scaling.

Numeric inputs are processed as one feature-major [F, N] block with [F, 1]
constants, and every constant has the rank of the tensor it meets: in onnxruntime
1.32 an Add of [N, 1] and a [] constant ran ~40x slower than of [N, 1] and [1, 1],
and [N, F] against [F] ~4x slower than [F, N] against [F, 1] (measured, 1e6 rows).
"""

from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np
from onnx import TensorProto, helper, numpy_helper

from .. import __version__
from ..errors import ScorewrightError
from ..model import FrozenModel
from ..plan import Plan, build_plan
from . import Artifact, reject_options

OPSET = 28
IR_VERSION = 10  # below onnx 1.23's default 14; the checker and onnxruntime 1.32 accept it
LAYOUTS = ("per-feature", "matrix")
OPTIONS = ("precision", "inputs")
MATRIX_INPUT = "features"
OUTPUTS = ("margin", "probability", "class_index", "predicted_value")
N = "N"  # the symbolic batch dimension


@dataclass(frozen=True)
class ElementType:
    """How one precision is spelled in the graph."""

    onnx: int          # TensorProto element type
    numpy: type        # numpy scalar type of constants
    name: str


ELEMENT_TYPES = {
    "double": ElementType(TensorProto.DOUBLE, np.float64, "double"),
    "float": ElementType(TensorProto.FLOAT, np.float32, "float"),
}

# Scaling ops grouped into classes that can share one vectorized node: a
# subtraction by c is an addition of -c exactly (IEEE defines x - y as x + -y).
STEP_CLASS = {"subtract": "shift", "add": "shift", "divide": "divide", "multiply": "multiply"}
# The constant that leaves every value (even -0.0) unchanged, per class.
STEP_IDENTITY = {"shift": 0.0, "divide": 1.0, "multiply": 1.0}
STEP_NODE = {"shift": "Sub", "divide": "Div", "multiply": "Mul"}


def emit(model: FrozenModel, options: dict | None = None) -> list[Artifact]:
    options = options or {}
    reject_options("onnx", options, OPTIONS)
    precision = options.get("precision", "double")
    layout = options.get("inputs", "per-feature")
    if precision not in ELEMENT_TYPES:
        raise ScorewrightError(f"--precision {precision!r}: expected double or float")
    if layout not in LAYOUTS:
        raise ScorewrightError(f"--inputs {layout!r}: expected per-feature or matrix")
    plan = build_plan(model, precision)
    graph_model = build_model(plan, layout)
    return [Artifact(f"{plan.stem}.onnx", graph_model.SerializeToString())]


def build_model(plan: Plan, layout: str):
    elem = ELEMENT_TYPES[plan.precision.name]
    _check_names(plan, layout)
    g = _Graph(elem, reserved=set(plan.feature_names) | set(OUTPUTS) | {MATRIX_INPUT})
    inputs = _declare_inputs(g, plan, layout)
    margin = _margins(g, plan, layout)
    outputs = _link(g, plan, margin)
    doc = _doc_string(plan, layout)
    graph = helper.make_graph(g.nodes, f"scorewright_{plan.stem}", inputs, outputs,
                              initializer=g.initializers, doc_string=doc)
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", OPSET)],
                              ir_version=IR_VERSION, producer_name="scorewright",
                              producer_version=__version__, doc_string=doc)
    helper.set_model_props(model, metadata(plan, layout))
    return model


def metadata(plan: Plan, layout: str) -> dict[str, str]:
    features = []
    for inp in plan.inputs:
        entry = {"name": inp.name, "kind": inp.kind}
        if inp.kind == "categorical":
            entry["levels"] = list(inp.levels)
        features.append(entry)
    return {
        "model_name": plan.name,
        "model_sha256": plan.sha256,
        "scorewright_version": __version__,
        "task": plan.task,
        "link": plan.link,
        "precision": plan.precision.name,
        "inputs": layout,
        "opset": str(OPSET),
        "features": json.dumps(features, ensure_ascii=False),
        "classes": json.dumps(None if plan.classes is None else list(plan.classes),
                              ensure_ascii=False),
        "missing": 'numeric: NaN or +-inf; categorical: ""',
    }


def _doc_string(plan: Plan, layout: str) -> str:
    outs = ", ".join(_output_names(plan))
    return (f"scorewright {__version__} scoring graph for model {plan.name!r} "
            f"(sha256 {plan.sha256}); {plan.task}, {plan.precision.name}, {layout} inputs; "
            f"outputs: {outs}. Missing: numeric NaN or +-inf, categorical \"\" "
            f"(integer levels as decimal text).")


def _check_names(plan: Plan, layout: str) -> None:
    if layout == "matrix":
        for inp in plan.inputs:
            if inp.kind != "numeric":
                raise ScorewrightError(f"--inputs matrix needs an all-numeric model; "
                                       f"feature {inp.name!r} is categorical")
        return
    for name in plan.feature_names:
        if name in OUTPUTS:
            raise ScorewrightError(f"feature {name!r} has the name of an ONNX output of the "
                                   f"graph; per-feature inputs cannot take it")


def _output_names(plan: Plan) -> tuple[str, ...]:
    if plan.task == "regression":
        return ("margin", "predicted_value")
    return ("margin", "probability", "class_index")


# ---------------------------------------------------------------- graph building

class _Graph:
    """Nodes and constants, with tensor names that never collide with a user's name."""

    def __init__(self, elem: ElementType, reserved: set[str]):
        self.elem = elem
        self.nodes: list = []
        self.initializers: list = []
        self.taken = set(reserved)
        self._constants: dict = {}  # (dtype, shape, bytes) -> name: each constant once

    def fresh(self, hint: str) -> str:
        name, n = hint, 1
        while name in self.taken:
            n += 1
            name = f"{hint}_{n}"
        self.taken.add(name)
        return name

    def const(self, hint: str, values, dtype=None) -> str:
        array = np.asarray(values, dtype=dtype or self.elem.numpy)
        key = (array.dtype.str, array.shape, array.tobytes())
        if key not in self._constants:
            self._constants[key] = name = self.fresh(hint)
            self.initializers.append(numpy_helper.from_array(array, name))
        return self._constants[key]

    def strings(self, hint: str, values: list[str]) -> str:
        # Not helper.make_tensor: it passes strings through a numpy bytes array, which
        # strips trailing NULs, so a level "a\x00" would become "a" (and "\x00" become "").
        name = self.fresh(hint)
        tensor = TensorProto(name=name, data_type=TensorProto.STRING, dims=[len(values)])
        tensor.string_data.extend(v.encode("utf-8") for v in values)
        self.initializers.append(tensor)
        return name

    def op(self, op_type: str, inputs: list[str], hint: str, outputs: int = 1,
           out: str | None = None, **attrs):
        if out is not None:
            names = [out]
        else:
            names = [self.fresh(hint if outputs == 1 else f"{hint}_{i}") for i in range(outputs)]
        self.nodes.append(helper.make_node(op_type, inputs, names, **attrs))
        return names[0] if outputs == 1 else names


def _declare_inputs(g: _Graph, plan: Plan, layout: str) -> list:
    if layout == "matrix":
        return [helper.make_tensor_value_info(MATRIX_INPUT, g.elem.onnx,
                                              [N, len(plan.inputs)])]
    out = []
    for inp in plan.inputs:
        kind = g.elem.onnx if inp.kind == "numeric" else TensorProto.STRING
        out.append(helper.make_tensor_value_info(inp.name, kind, [N, 1]))
    return out


def _margins(g: _Graph, plan: Plan, layout: str) -> str:
    """The margins: [N, 1] for binary and regression, [N, K] for multiclass.

    Terms are laid out feature-major ([1, N] or [1, K, N] each) and every constant has
    the rank of the tensor it meets: onnxruntime's broadcasting runs an [N, 1] tensor
    against a [] or [F] constant one element at a time, tens of times slower."""
    k = plan.n_outputs
    if not plan.terms:
        return _constant_margin(g, plan, layout)
    terms: dict[int, str] = {}  # plan input index -> term tensor
    numeric = [t for t in plan.terms if t.kind == "numeric"]
    if numeric:
        terms.update(_numeric_terms(g, plan, numeric, layout))
    for term in plan.terms:
        if term.kind == "categorical":
            terms[term.input] = _categorical_term(g, plan, term)
    ordered = [terms[t.input] for t in plan.terms]  # the plan's summation order
    if k == 1:
        intercept = g.const("intercept", [[plan.intercepts[0]]])
        row = g.op("Sum", ordered + [intercept], "margin_row")
        return g.op("Reshape", [row, g.const("column_shape", [-1, 1], np.int64)], "margin",
                    out="margin")
    intercept = g.const("intercept", [[[b] for b in plan.intercepts]])  # [1, K, 1]
    summed = g.op("Sum", ordered + [intercept], "margin_rows")
    rows = g.op("Squeeze", [summed, g.const("axis_0", [0], np.int64)], "margin_by_class")
    return g.op("Transpose", [rows], "margin", out="margin", perm=[1, 0])


def _numeric_terms(g: _Graph, plan: Plan, numeric, layout: str) -> dict[int, str]:
    """The numeric terms, computed on one [F, N] block: row f is input f's column."""
    inps = [plan.inputs[t.input] for t in numeric]
    f = len(inps)
    dtype = g.elem.numpy
    if layout == "matrix":
        x = g.op("Transpose", [MATRIX_INPUT], "raw_by_feature", perm=[1, 0])
        rows = [inp.index for inp in inps]
        if rows != list(range(len(plan.inputs))):
            x = g.op("Gather", [x, g.const("used_features", rows, np.int64)], "raw", axis=0)
    else:
        stacked = inps[0].name if f == 1 else g.op("Concat", [i.name for i in inps],
                                                  "raw_stacked", axis=0)
        x = g.op("Reshape", [stacked, g.const("block_shape", [f, -1], np.int64)], "raw")
    # NaN and +-inf are missing: |x| < inf is false for exactly those.
    finite = g.op("Less", [g.op("Abs", [x], "abs_raw"), g.const("inf", [[np.inf]])],
                  "finite")
    v = _clamp(g, x, [-inp.bound for inp in inps], [inp.bound for inp in inps], "clamped")
    for cls, constants in _aligned_steps(inps):
        v = g.op(STEP_NODE[cls], [v, _column(g, f"{cls}_by", constants)], f"scaled_{cls}")
    if any(inp.clip is not None for inp in inps):
        lo = [-np.inf if inp.clip is None else inp.clip[0] for inp in inps]
        hi = [np.inf if inp.clip is None else inp.clip[1] for inp in inps]
        v = _clamp(g, v, lo, hi, "clipped")
    fills = [design_fill(inp, dtype) for inp in inps]
    v = g.op("Where", [finite, v, _column(g, "missing_design", fills)], "design")
    if plan.n_outputs == 1:
        products = g.op("Mul", [v, _column(g, "weights", [t.weights[0] for t in numeric])],
                        "terms")
    else:
        v3 = g.op("Unsqueeze", [v, g.const("axis_1", [1], np.int64)], "design_3d")
        weights = [[[w] for w in t.weights] for t in numeric]  # [F, K, 1]
        products = g.op("Mul", [v3, g.const("weights", weights)], "terms")
    if f == 1:
        return {numeric[0].input: products}
    parts = g.op("Split", [products], "term", outputs=f, axis=0, num_outputs=f)
    return {t.input: part for t, part in zip(numeric, parts)}


def _column(g: _Graph, hint: str, values: list[float]) -> str:
    """Per-feature constants as an [F, 1] column, to meet the [F, N] block."""
    return g.const(hint, [[v] for v in values])


def _clamp(g: _Graph, x: str, lo: list[float], hi: list[float], hint: str) -> str:
    """min(max(x, lo), hi) per column; one Clip when every column shares its limits."""
    if len(set(lo)) == 1 and len(set(hi)) == 1:
        return g.op("Clip", [x, g.const(f"{hint}_lo", lo[0]), g.const(f"{hint}_hi", hi[0])],
                    hint)
    low = g.op("Max", [x, _column(g, f"{hint}_lo", lo)], f"{hint}_low")
    return g.op("Min", [low, _column(g, f"{hint}_hi", hi)], hint)


def _aligned_steps(inps) -> list[tuple[str, list[float]]]:
    """Every input's scaling steps laid on one sequence of vectorized nodes, an input
    without a step at some position taking that node's identity constant."""
    sequences = [[STEP_CLASS[s.op] for s in inp.steps] for inp in inps]
    merged: list[str] = []
    for seq in sequences:
        merged = _supersequence(merged, seq)
    columns = []
    for inp in inps:
        column = [STEP_IDENTITY[c] for c in merged]
        pos = 0
        for step in inp.steps:
            while merged[pos] != STEP_CLASS[step.op]:
                pos += 1
            column[pos] = -step.value if step.op == "add" else step.value
            pos += 1
        columns.append(column)
    return [(cls, [col[j] for col in columns]) for j, cls in enumerate(merged)]


def _supersequence(a: list[str], b: list[str]) -> list[str]:
    """A shortest common supersequence of two op sequences."""
    n, m = len(a), len(b)
    best = [[0] * (m + 1) for _ in range(n + 1)]
    for i in range(n + 1):
        for j in range(m + 1):
            if i == 0 or j == 0:
                best[i][j] = i + j
            elif a[i - 1] == b[j - 1]:
                best[i][j] = best[i - 1][j - 1] + 1
            else:
                best[i][j] = 1 + min(best[i - 1][j], best[i][j - 1])
    out: list[str] = []
    i, j = n, m
    while i > 0 or j > 0:
        if i > 0 and j > 0 and a[i - 1] == b[j - 1]:
            out.append(a[i - 1])
            i, j = i - 1, j - 1
        elif j == 0 or (i > 0 and best[i - 1][j] <= best[i][j - 1]):
            out.append(a[i - 1])
            i -= 1
        else:
            out.append(b[j - 1])
            j -= 1
    return out[::-1]


def design_fill(inp, dtype) -> float:
    """The design value of a missing input: the plan's steps applied to the fill, in the
    graph's element type (IEEE operations, so the graph would compute the same bits)."""
    if inp.fill is None:
        return 0.0
    v = dtype(inp.fill)
    v = min(max(v, dtype(-inp.bound)), dtype(inp.bound))
    for step in inp.steps:
        c = dtype(step.value)
        if step.op == "subtract":
            v = v - c
        elif step.op == "divide":
            v = v / c
        elif step.op == "multiply":
            v = v * c
        else:
            v = v + c
    if inp.clip is not None:
        v = min(max(v, dtype(inp.clip[0])), dtype(inp.clip[1]))
    return v


def _categorical_term(g: _Graph, plan: Plan, term) -> str:
    """Look the feature's contribution up by level code: the input is compared with every
    level and with "" (missing); position 0 of the table is "no match" (unseen)."""
    inp = plan.inputs[term.input]
    texts = [str(level) for level in inp.levels] + [""]
    hint = f"cat{inp.index}"
    equal = g.op("Equal", [inp.name, g.strings(f"{hint}_levels", texts)], f"{hint}_equal")
    positions = g.const(f"{hint}_positions", list(range(1, len(texts) + 1)), np.int64)
    marked = g.op("Where", [equal, positions, g.const("zero_code", 0, np.int64)],
                  f"{hint}_marked")
    code = g.op("ReduceMax", [marked, g.const("axis_1", [1], np.int64)], f"{hint}_code",
                keepdims=0)
    unseen_code = inp.unknown_code
    missing_code = inp.fill_code if inp.fill_code is not None else unseen_code
    rows = []
    for k in range(plan.n_outputs):
        table = term.tables[k]
        unseen = 0.0 if unseen_code is None else table[unseen_code]
        missing = 0.0 if missing_code is None else table[missing_code]
        rows.append([unseen, *table, missing])
    # [1, L+2] or [1, K, L+2], gathered along the last axis: a [1, N] or [1, K, N] term
    lookup = [rows[0]] if plan.n_outputs == 1 else [rows]
    axis = 1 if plan.n_outputs == 1 else 2
    return g.op("Gather", [g.const(f"{hint}_table", lookup), code], f"{hint}_term", axis=axis)


def _constant_margin(g: _Graph, plan: Plan, layout: str) -> str:
    """A model without terms: the intercepts broadcast to one row per input row."""
    source = MATRIX_INPUT if layout == "matrix" else plan.inputs[0].name
    rows = g.op("Shape", [source], "rows", end=1)
    shape = g.op("Concat", [rows, g.const("outputs", [plan.n_outputs], np.int64)], "shape",
                 axis=0)
    intercept = g.const("intercept", [list(plan.intercepts)])
    return g.op("Expand", [intercept, shape], "margin", out="margin")


def _link(g: _Graph, plan: Plan, m: str) -> list:
    elem = g.elem.onnx
    k = plan.n_outputs
    guard = plan.precision.exp_guard
    if plan.task == "binary":
        one = g.const("one", [[1.0]])
        # t = exp(-min(|m|, guard)); p1 = (m >= 0 ? 1 : t) / (1 + t); p0 = 1 - p1
        size = g.op("Abs", [m], "abs_margin")
        limited = g.op("Min", [size, g.const("exp_guard", [[guard]])], "abs_margin_guarded")
        t = g.op("Exp", [g.op("Neg", [limited], "neg_abs_margin")], "exp_neg_abs")
        den = g.op("Add", [one, t], "one_plus_t")
        upper = g.op("GreaterOrEqual", [m, g.const("zero", [[0.0]])], "margin_nonneg")
        num = g.op("Where", [upper, one, t], "numerator")
        p1 = g.op("Div", [num, den], "p1")
        p0 = g.op("Sub", [one, p1], "p0")
        g.op("Concat", [p0, p1], "probability", out="probability", axis=1)
        above = g.op("Greater", [m, g.const("cut", [[plan.cut]])], "above_cut")
        index = g.op("Cast", [above], "class_index_2d", to=TensorProto.INT64)
        g.op("Squeeze", [index, g.const("axis_1", [1], np.int64)], "class_index",
             out="class_index")
        return _value_infos(elem, [("margin", elem, [N, 1]), ("probability", elem, [N, 2]),
                                   ("class_index", TensorProto.INT64, [N])])
    if plan.task == "multiclass":
        top = g.op("ReduceMax", [m, g.const("axis_1", [1], np.int64)], "top_margin",
                   keepdims=1)
        shifted = g.op("Sub", [m, top], "shifted_margin")
        limited = g.op("Max", [shifted, g.const("neg_exp_guard", [[-guard]])],
                       "shifted_guarded")
        e = g.op("Exp", [limited], "exp_shifted")
        parts = g.op("Split", [e], "exp_class", outputs=k, axis=1, num_outputs=k)
        total = g.op("Sum", parts, "exp_total")  # left to right, as the plan adds them
        g.op("Div", [e, total], "probability", out="probability")
        # ArgMax with select_last_index=0 returns the lowest index among ties.
        g.op("ArgMax", [m], "class_index", out="class_index", axis=1, keepdims=0,
             select_last_index=0)
        return _value_infos(elem, [("margin", elem, [N, k]), ("probability", elem, [N, k]),
                                   ("class_index", TensorProto.INT64, [N])])
    if plan.link == "log":
        limited = g.op("Clip", [m, g.const("neg_exp_guard", -guard),
                                g.const("log_link_max", plan.precision.log_link_max)],
                       "margin_guarded")
        g.op("Exp", [limited], "predicted_value", out="predicted_value")
    else:
        g.op("Identity", [m], "predicted_value", out="predicted_value")
    return _value_infos(elem, [("margin", elem, [N, 1]), ("predicted_value", elem, [N, 1])])


def _value_infos(elem, specs) -> list:
    return [helper.make_tensor_value_info(name, kind, shape) for name, kind, shape in specs]

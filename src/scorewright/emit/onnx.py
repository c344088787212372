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
- Outputs: margin [N, K]; classification: probability [N, C] in class order (not
  for a "decision" head, whose margins are its decision function) and class_index
  [N] int64; regression: predicted_value [N, 1], and with an offset or exposure
  predicted_rate [N, 1] (the value of the margin without it).

The graph renders the scoring program (`program.lower`) from `NODES`, the table of
op -> node, and decides no semantics: every guard, scaling step, missing or unseen
rule and link is an op of the program. What changes is only how many values one
node computes (`_Renderer`): the numeric inputs' chains of (op, constant) steps run
as the lanes of one feature-major [F, N] block, a constant column per node (an
input without that step takes the node's identity constant); the values of one
categorical input alone are folded at emit time (`program.fold`, in the graph's
element type) for every code the read can give, into one table gathered by code;
the value a missing numeric input ends with is folded the same way, so one Where
replaces a second pass; the same op on every class is one node over [N, K]; and a
few op patterns are one node with the same bits (`_find_fusions`), and a select on
ge(a, c) takes the program's gt(a, c) where its branches agree at a == c
(`_one_comparison_per_tie`). Anything else is one node per op. Ordered sums are
the last row of a CumSum over the block's lanes (`_running_sums`: a running sum is
defined by its prefixes) or variadic Sum nodes, which both evaluators add left to
right; never a MatMul, whose kernels may reorder or fuse the products, nor a
ReduceSum: onnxruntime 1.32 adds the rows of an [F, N] block in order, but the
reference evaluator's numpy sums the 9 or more lanes of a single row pairwise
(measured: 72 of 200 random rows of 9 lanes and 107 of 200 of 30 lanes differ from
the ordered sum; none with 2 rows or more).

Every constant has the rank of the tensor it meets: in onnxruntime 1.32 an Add of
[N, 1] and a [] constant ran ~40x slower than of [N, 1] and [1, 1], and [N, F]
against [F] ~4x slower than [F, N] against [F, 1] (measured, 1e6 rows). So the
matrix input is transposed to [F, N] once: the whole graph kept [N, F] (constants
[1, F], Split on axis 1, no Transpose or margin Reshape) gave the same bits in two
nodes fewer but took 1.15x to 1.45x as long at 1e6 rows, for 0.93x at one row
(bench/bench_onnx.py's model, two runs on a loaded machine).
"""

from __future__ import annotations

import functools
import json
from dataclasses import dataclass

import numpy as np
from onnx import TensorProto, helper, numpy_helper

from .. import __version__
from ..errors import ScorewrightError
from ..model import FrozenModel
from ..plan import Plan, build_plan
from ..program import CODE, FLAG, REAL, Const, Op, exp_in_primitives, fold, lower
from ..values import MISSING_CODE, UNSEEN_CODE
from . import Artifact, reject_options

OPSET = 28
IR_VERSION = 10  # below onnx 1.23's default 14; the checker and onnxruntime 1.32 accept it
LAYOUTS = ("per-feature", "matrix")
OPTIONS = ("precision", "inputs", "portable_exp")
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

def emit(model: FrozenModel, options: dict | None = None) -> list[Artifact]:
    options = options or {}
    reject_options("onnx", options, OPTIONS)
    precision = options.get("precision", "double")
    layout = options.get("inputs", "per-feature")
    if precision not in ELEMENT_TYPES:
        raise ScorewrightError(f"--precision {precision!r}: expected double or float")
    if layout not in LAYOUTS:
        raise ScorewrightError(f"--inputs {layout!r}: expected per-feature or matrix")
    portable = bool(options.get("portable_exp"))
    if portable and precision != "double":
        raise ScorewrightError("target onnx cannot express the portable exp in float (it "
                               "computes in double): use --precision double")
    plan = build_plan(model, precision, exp="portable" if portable else "libm")
    graph_model = build_model(plan, layout)
    return [Artifact(f"{plan.stem}.onnx", graph_model.SerializeToString())]


def build_model(plan: Plan, layout: str):
    elem = ELEMENT_TYPES[plan.precision.name]
    _check_names(plan, layout)
    g = _Graph(elem, reserved=set(plan.feature_names) | set(_reserved(plan)) | {MATRIX_INPUT})
    inputs = _declare_inputs(g, plan, layout)
    outputs = _Renderer(g, plan, layout).render()
    _near_identities_kept(g)
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
        if name in _reserved(plan):
            raise ScorewrightError(f"feature {name!r} has the name of an ONNX output of the "
                                   f"graph; per-feature inputs cannot take it")


def _reserved(plan: Plan) -> tuple[str, ...]:
    """The graph's output names a feature cannot take."""
    return OUTPUTS + (("predicted_rate",) if plan.offset is not None else ())


def _output_names(plan: Plan) -> tuple[str, ...]:
    if plan.task == "regression":
        if plan.offset is not None:
            return ("margin", "predicted_value", "predicted_rate")
        return ("margin", "predicted_value")
    if not plan.has_probabilities:
        return ("margin", "class_index")
    return ("margin", "probability", "class_index")



# The graph outputs (the contract above), each with the program outputs it holds: the
# one named, or those named with the prefix, in order.
GRAPH_OUTPUTS = (("margin", "margin_"), ("probability", "probability_"),
                 ("class_index", "class_index"), ("predicted_value", "value"),
                 ("predicted_rate", "rate"))

# An operation with a constant on the right that a lane of a vectorized chain may lack:
# the node, the constant that leaves every value (even -0.0) unchanged, and the sign the
# constant takes in that node (x + c is x - (-c) exactly: IEEE defines subtraction so).
LANE_STEPS = {"sub": ("Sub", 0.0, 1.0), "add": ("Sub", 0.0, -1.0), "mul": ("Mul", 1.0, 1.0),
              "div": ("Div", 1.0, 1.0), "max": ("Max", -np.inf, 1.0),
              "min": ("Min", np.inf, 1.0)}
COMMUTATIVE = ("add", "mul")  # bitwise, so a constant on the left is one on the right

TYPES = {CODE: (TensorProto.INT64, np.int64), FLAG: (TensorProto.BOOL, np.bool_)}

# The fewest lanes whose ordered sum is a CumSum rather than a Split and a Sum: its time
# over theirs was 1.04 (1e6 rows) and 0.99 (one row) for 2 lanes, 0.99 and 0.95 for 3,
# 0.97 and 0.87 for 7 (onnxruntime 1.32, one thread's CPU time, medians of 9).
RUNNING_SUM_LANES = 3


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
        if isinstance(values, np.ndarray) and dtype is None:
            array = values   # typed by the caller
        else:
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

    def produced(self, name: str) -> bool:
        return any(name in node.output for node in self.nodes)

    def rename(self, old: str, new: str) -> None:
        for node in self.nodes:
            for names in (node.input, node.output):
                for i, name in enumerate(names):
                    if name == old:
                        names[i] = new

    def axes(self, *axes: int) -> str:
        return self.const("axes", list(axes), np.int64)


# Measured (onnxruntime 1.32, tests/test_onnx.py): its graph optimizations, on by default,
# delete a Mul or Div by a one-element constant that rounds to 1.0 in single precision,
# and an Add or Sub of one that rounds to 0.0, as if each were the identity (its noop
# elimination reads a double constant as a float). In double such a constant is not the
# identity (x / 1.0000000000000007, the scale of a standardized product; x + 1e-300;
# -0.0 + 0.0). Such a constant reaches its node through Expand to the other operand's
# shape, which the optimizer cannot fold (the batch size is not known): the same value,
# one node more for each. The exact identities (* 1.0, / 1.0, + -0.0, - 0.0) stay plain
# constants: deleting them changes nothing.
NEAR_IDENTITY = {"Mul": (0, 1), "Div": (1,), "Add": (0, 1), "Sub": (1,)}  # constant positions
EXACT_IDENTITY = {"Mul": 1.0, "Div": 1.0, "Add": -0.0, "Sub": 0.0}


def _near_identities_kept(g: _Graph) -> None:
    values = {t.name: numpy_helper.to_array(t) for t in g.initializers
              if t.data_type in (TensorProto.DOUBLE, TensorProto.FLOAT)}
    nodes, g.nodes = g.nodes, []
    for node in nodes:
        for k in NEAR_IDENTITY.get(node.op_type, ()):
            name, other = node.input[k], node.input[1 - k]
            if name not in values or values[name].size != 1 or other in values:
                continue
            c = values[name].ravel()[0]
            unit = EXACT_IDENTITY[node.op_type]
            with np.errstate(over="ignore"):
                taken_for_identity = np.float32(c) == unit
            if taken_for_identity and c.tobytes() != np.array(unit, c.dtype).tobytes():
                node.input[k] = g.op("Expand", [name, g.op("Shape", [other], "shape")],
                                     f"{name}_kept")
        g.nodes.append(node)


def _declare_inputs(g: _Graph, plan: Plan, layout: str) -> list:
    if layout == "matrix":
        return [helper.make_tensor_value_info(MATRIX_INPUT, g.elem.onnx,
                                              [N, len(plan.inputs)])]
    out = []
    for inp in plan.inputs:
        kind = g.elem.onnx if inp.kind == "numeric" else TensorProto.STRING
        out.append(helper.make_tensor_value_info(inp.name, kind, [N, 1]))
    return out


@dataclass(frozen=True)
class _Vec:
    """A tensor holding the values of program names (its lanes) side by side."""

    tensor: str
    layout: str            # "col" [N, W] | "row" [W, N] | "slab" [1, W, N] | "flat" [N]
    lanes: tuple
    type: str              # the lanes' program type
    rows: bool = True      # False: computed from constants alone (no batch axis)
    negated: bool = False  # a flag tensor holding the negation of its lanes

    @property
    def width(self) -> int:
        return len(self.lanes)


@dataclass
class _Lane:
    """A numeric input whose operations are one lane of the [F, N] block: its read, the
    missing flag, the chain of (op, constant) steps, the value a missing input ends with,
    and the (op, constant) fan-out that leaves the block, all one (node, constant first)."""

    read: Op
    flag: str | None
    chain: list
    missing: object
    fanout: list
    node: tuple

    @property
    def signature(self) -> tuple:
        return (self.flag is None, len(self.fanout), self.node)


class _Renderer:
    """Renders one scoring program into the graph: the inputs' lanes first, then the
    margins' sums, then every other operation in the program's order, each one node (or
    one node for all the lanes of a tensor it is applied to)."""

    def __init__(self, g: _Graph, plan: Plan, layout: str):
        self.g, self.plan, self.layout = g, plan, layout
        self.dtype = g.elem.numpy
        self.at: dict[str, tuple[_Vec, int]] = {}   # program name -> (tensor, lane)
        self._cached: dict = {}
        program = lower(plan)
        if plan.exp_kind == "portable":  # no routine to call: its steps are the program's
            program = exp_in_primitives(program)
        self.ops = _one_comparison_per_tie(self._constant_margins(program.ops), self.dtype)
        self.by_dest = {op.dest: op for op in self.ops}
        self.consumers: dict[str, list[Op]] = {}
        for op in self.ops:
            for a in op.args:
                if isinstance(a, str):
                    self.consumers.setdefault(a, []).append(op)
        self.absorbed: set[str] = set()   # computed inside another op's fused node
        self.fused: dict = {}              # program name -> the method that renders it
        self.renamed: dict[str, str] = {}  # tensor -> the graph output it became
        self._block_rank = 2                # of the numeric block: [F, N] or [F, N, 1]

    def _constant_margins(self, ops) -> list[Op]:
        """A program without terms has constants for margins: they are given a row each
        (one Expand) and a name, so its link is the same nodes on the same shapes as any
        other's; the margins' constants are found as the very objects the outputs name."""
        outs = [op for op in ops if op.op == "output" and op.attr.startswith("margin_")]
        consts = [op.args[0] for op in outs]
        if not outs or not all(isinstance(c, Const) and c.type == REAL for c in consts):
            return list(ops)
        names = tuple(f"{op.dest}_margin" for op in outs)
        row = self._const([c.value for c in consts], REAL, len(consts))
        vec = _Vec(self._rows_of(row, False, width=len(consts)), "col", names, REAL)
        for k, name in enumerate(names):
            self.at[name] = (vec, k)

        def named(a):
            return next((n for c, n in zip(consts, names) if a is c), a)
        return [Op(op.dest, op.op, tuple(named(a) for a in op.args), op.type, op.attr)
                for op in ops]

    def render(self) -> list:
        self._inputs()
        self._margins()
        self._find_fusions()
        for op in self.ops:
            if op.dest not in self.at and op.dest not in self.absorbed and op.op != "output":
                self._render(op)
        return self._outputs()

    def _render(self, op: Op) -> None:
        spelling = NODES.get(op.op)
        if spelling is None:
            raise ScorewrightError(f"target onnx cannot express op {op.op}")
        if op.dest in self.fused:
            vec = self.fused[op.dest](op)
            group = [op]
        else:
            group = self._siblings(op) if isinstance(spelling, str) else None
            group = group or [op]
            vec = self._node(spelling, group) if isinstance(spelling, str) \
                else spelling(self, op)
        for i, member in enumerate(group):
            self.at[member.dest] = (vec, i)

    # ------------------------------------------------------------ operands

    def _const(self, values: list, type_: str, width: int, layout: str = "col") -> str:
        dtype = TYPES[type_][1] if type_ in TYPES else self.dtype
        if len(set(values)) == 1:
            values, width = values[:1], 1
        shape = {"col": (1, width), "row": (width, 1), "slab": (1, width, 1)}[layout]
        return self.g.const("c", np.reshape(np.asarray(values, dtype=dtype), shape))

    def column(self, name) -> _Vec:
        """A program name's value as one [N, 1] column."""
        vec, i = self.at[name]
        if vec.layout == "col" and vec.width == 1:
            return vec
        return self._columns(vec)[i]

    def _columns(self, vec: _Vec) -> list[_Vec]:
        key = ("columns", vec.tensor)
        if key not in self._cached:
            t, w = self._as_cols(vec).tensor, vec.width
            parts = [t] if w == 1 else self.g.op("Split", [t], f"{t}_part", outputs=w, axis=1,
                                                 num_outputs=w)
            self._cached[key] = [_Vec(p, "col", (lane,), vec.type, vec.rows, vec.negated)
                                 for p, lane in zip(parts, vec.lanes)]
        return self._cached[key]

    def _as_cols(self, vec: _Vec) -> _Vec:
        """The same lanes as an [N, W] tensor."""
        g, t = self.g, vec.tensor
        if vec.layout == "flat":
            t = g.op("Unsqueeze", [t, g.axes(1)], f"{t}_col")
        elif vec.layout != "col" and vec.width == 1:
            t = g.op("Reshape", [t, g.const("column_shape", [-1, 1], np.int64)], f"{t}_col")
        elif vec.layout != "col":
            if vec.layout == "slab":
                t = g.op("Squeeze", [t, g.axes(0)], f"{t}_rows")
            t = g.op("Transpose", [t], f"{t}_cols", perm=[1, 0])
        return _Vec(t, "col", vec.lanes, vec.type, vec.rows, vec.negated)

    def _operands(self, group: list[Op]) -> tuple[list[str], list[bool], bool]:
        """Per operand position, a tensor holding it for every op of the group: the
        constants as a [1, W] row, a tensor whose lanes they are, or one shared column."""
        tensors, negated, rows = [], [], False
        for q in range(len(group[0].args)):
            args = [m.args[q] for m in group]
            if all(isinstance(a, Const) for a in args):
                tensors.append(self._const([a.value for a in args], args[0].type, len(args)))
                negated.append(False)
                continue
            vec = self.at[args[0]][0]
            if len(args) == 1 or vec.lanes != tuple(args) or vec.layout != "col":
                vec = self.column(args[0])
            tensors.append(vec.tensor)
            negated.append(vec.negated)
            rows = rows or vec.rows
        return tensors, negated, rows

    def _plain(self, tensor: str) -> str:
        """A negated flag tensor turned into the flag."""
        key = ("not", tensor)
        if key not in self._cached:
            self._cached[key] = self.g.op("Not", [tensor], f"{tensor}_not")
        return self._cached[key]

    def _node(self, op_type: str, group: list[Op]) -> _Vec:
        tensors, negated, rows = self._operands(group)
        if group[0].op == "select" and negated[0]:
            tensors = [tensors[0], tensors[2], tensors[1]]
            negated = [False, negated[2], negated[1]]
        tensors = [self._plain(t) if n else t for t, n in zip(tensors, negated)]
        out = self.g.op(op_type, tensors, group[0].dest)
        return _Vec(out, "col", tuple(m.dest for m in group), group[0].type, rows)

    def _siblings(self, op: Op) -> list[Op] | None:
        """The same operation on every lane of a [N, W] tensor, op among them, when each
        other operand is the same value, a constant, or the same lane of another tensor."""
        if op.op == "sum":
            return None
        for p, a in enumerate(op.args):
            if isinstance(a, str) and a in self.at and self.at[a][0].width > 1 \
                    and self.at[a][0].layout == "col":
                vec = self.at[a][0]
                break
        else:
            return None
        group = []
        for j, lane in enumerate(vec.lanes):
            found = [u for u in self.consumers.get(lane, []) if u.op == op.op
                     and u.attr == op.attr and len(u.args) == len(op.args) and u.args[p] == lane
                     and u.dest not in self.at and u.dest not in self.absorbed
                     and u.dest not in self.fused and self._parallel(op, u, j)]
            if not found:
                return None
            group.append(op if op in found else found[0])
        return group if op in group else None

    def _parallel(self, op: Op, other: Op, lane: int) -> bool:
        for a, b in zip(op.args, other.args):
            if isinstance(a, Const) or isinstance(b, Const):
                if not (isinstance(a, Const) and isinstance(b, Const) and a.type == b.type):
                    return False
            elif b not in self.at:
                return False
            elif a != b:
                va, vb, j = self.at[a][0], *self.at[b]
                if va is not vb or j != lane or va.layout != "col":
                    return False
        return True

    # ------------------------------------------------------------ inputs

    def _inputs(self) -> None:
        """The operations that depend on one input alone, before any sum: numeric inputs
        whose operations form one chain become lanes of one block; a categorical input's
        values are folded into a table per code. Anything else is rendered op by op."""
        cones = self._cones()
        lanes = [self._chain(self.by_dest[r], cone) for r, cone in cones.items()
                 if self.by_dest[r].op == "read_real"]
        lanes = [lane for lane in lanes if lane is not None]
        lanes = [lane for lane in lanes if lane.signature == lanes[0].signature]
        if lanes:
            self._numeric_block(lanes)
        for r, cone in cones.items():
            if self.by_dest[r].op == "read_code":
                self._code_table(self.by_dest[r], cone)
        for cone in cones.values():
            if any(op.dest in self.at or op.dest in self.absorbed for op in cone):
                self.absorbed |= {op.dest for op in cone if op.dest not in self.at}

    def _cones(self) -> dict[str, list[Op]]:
        reads: dict[str, str | None] = {}  # name -> the one read it depends on
        cones: dict[str, list[Op]] = {}
        for op in self.ops:
            if op.op in ("read_real", "read_code"):
                reads[op.dest] = op.dest
                cones[op.dest] = [op]
                continue
            deps = {reads.get(a) for a in op.args if isinstance(a, str)}
            one = next(iter(deps)) if len(deps) == 1 else None
            reads[op.dest] = None if op.op in ("sum", "output") else one
            if reads[op.dest] is not None:
                cones[one].append(op)
        return cones

    def _frontier(self, cone: list[Op]) -> list[Op]:
        """The cone's operations whose values are used outside it, in order."""
        inside = {op.dest for op in cone}
        return [op for op in cone if any(u.dest not in inside or u.op == "output"
                                         for u in self.consumers.get(op.dest, []))]

    def _chain(self, read: Op, cone: list[Op]) -> _Lane | None:
        frontier = {op.dest for op in self._frontier(cone)}
        flags = [op.dest for op in cone if op.op == "is_missing" and op.args == (read.dest,)]
        if len(flags) > 1:
            return None
        flag = flags[0] if flags else None
        head, tail = read.dest, None
        same = {read.dest: read.dest}   # name -> the chain value it is when not missing
        steps, fanout, nodes = [], [], set()
        for op in cone[1:]:
            if op.dest == flag:
                continue
            if flag is not None and op.op == "select" and op.args[0] == flag:
                kept = op.args[2]
                if isinstance(kept, Const) or same.get(kept) != head or op.dest in frontier:
                    return None
                same[op.dest] = head
                continue
            spelled = self._lane_step(op, same, head)
            if spelled is None or flag in op.args:
                return None
            value, const, first = spelled
            if op.dest in frontier:
                if tail not in (None, value):
                    return None
                tail = value
                fanout.append((op, const))
                nodes.add((NODES[op.op], first))
                continue
            if fanout or first:
                return None
            steps.append((op.op, const))
            head = same[op.dest] = op.dest
        if not fanout or same[tail] != head or len(nodes) != 1:
            return None
        missing = None
        if flag is not None:
            missing = fold(cone, {flag: True}, self.dtype).get(tail)
            if missing is None:
                return None
        return _Lane(read, flag, steps, missing, fanout, nodes.pop())

    def _lane_step(self, op: Op, same: dict, head: str):
        """(the chain value used, the constant, constant first) of a binary op of the
        chain's current value and a constant, or None."""
        if op.op not in LANE_STEPS or len(op.args) != 2:
            return None
        a, b = op.args
        if isinstance(b, Const) and isinstance(a, str) and same.get(a) == head:
            return a, b.value, False
        if isinstance(a, Const) and isinstance(b, str) and same.get(b) == head:
            return b, a.value, op.op not in COMMUTATIVE
        return None

    def _numeric_block(self, lanes: list[_Lane]) -> None:
        g, f = self.g, len(lanes)
        width = len(lanes[0].fanout)
        sums = self._lane_sums(lanes, width)
        # Per-feature inputs of one value each stack as [F, N, 1] where the lanes' values
        # go to their sum alone: the sum is then gathered as the [N, 1] column itself.
        self._block_rank = 3 if sums and self.layout != "matrix" and width == 1 else 2
        x = self._stack([lane.read.attr for lane in lanes])
        finite = None if lanes[0].flag is None else self._finite(x, self._block_rank)
        v = x
        merged = self._aligned(lanes)
        j = 0
        while j < len(merged):
            (node, column), after = merged[j], merged[j + 1: j + 2]
            if node == "Max" and after and after[0][0] == "Min" and len(set(column)) == 1 \
                    and len(set(after[0][1])) == 1:
                # min(max(v, lo), hi) with one lo and one hi for every lane: one Clip
                lo, hi = (g.const("c", self.dtype(c[0])) for c in (column, after[0][1]))
                v = g.op("Clip", [v, lo, hi], f"{v}_clip")
                j += 2
                continue
            v = g.op(node, [v, self._const_rows(column)], f"{v}_{node.lower()}")
            j += 1
        if finite is not None:
            v = g.op("Where", [finite, v,
                               self._const_rows([lane.missing for lane in lanes])], "design")
        consts = np.asarray([[c for _, c in lane.fanout] for lane in lanes], dtype=self.dtype)
        if width > 1:
            v = g.op("Unsqueeze", [v, g.axes(1)], f"{v}_3d")
            consts = consts[..., None]   # [F, W, 1] against [F, 1, N]
        elif self._block_rank == 3:
            consts = consts[..., None]   # [F, 1, 1] against [F, N, 1]
        c = g.const("c", consts)
        node, first = lanes[0].node
        products = g.op(node, [c, v] if first else [v, c], "terms")
        if sums:
            self._running_sums(lanes, sums, products, width)
            return
        parts = [products] if f == 1 else g.op("Split", [products], "term", outputs=f,
                                               axis=0, num_outputs=f)
        for lane, part in zip(lanes, parts):
            names = tuple(op.dest for op, _ in lane.fanout)
            vec = _Vec(part, "row" if width == 1 else "slab", names, REAL)
            for k, name in enumerate(names):
                self.at[name] = (vec, k)

    def _lane_sums(self, lanes: list[_Lane], width: int) -> list[Op] | None:
        """The sums, one per fanout position, of every lane's value in block order then
        constants, where the lanes' values are used by those sums alone."""
        f = len(lanes)
        if f < RUNNING_SUM_LANES:
            return None
        sums = []
        for k in range(width):
            names = tuple(lane.fanout[k][0].dest for lane in lanes)
            users = [u for n in names for u in self.consumers.get(n, [])]
            if len(users) != f or len({u.dest for u in users}) != 1:
                return None
            total = users[0]
            if total.op != "sum" or total.args[:f] != names \
                    or not all(isinstance(a, Const) and a.type == REAL for a in total.args[f:]):
                return None
            sums.append(total)
        if len({len(t.args) for t in sums}) != 1 or len({t.dest for t in sums}) != width:
            return None
        return sums

    def _running_sums(self, lanes: list[_Lane], sums: list[Op], products: str,
                      width: int) -> None:
        """The lanes' sums as the last row of a CumSum over the lanes' axis plus the
        constants. A running sum is defined by its prefixes, so both evaluators add the
        lanes one by one in the program's order (a ReduceSum is not; see the module's doc
        string); one CumSum, Gather and Add took less time than a Split and a Sum, at one
        row as at 1e6 (bench/bench_onnx.py)."""
        g, f = self.g, len(lanes)
        running = g.op("CumSum", [products, g.const("lanes_axis", 0, np.int64)], "running")
        deep = self._block_rank == 3   # [F, N, 1]: the last lane is the [N, 1] column
        last = g.const("c", f - 1 if deep else [f - 1], np.int64)
        total = g.op("Gather", [running, last], "lane_sums", axis=0)
        layout = "col" if deep else "row" if width == 1 else "slab"
        consts = [self._const([t.args[q].value for t in sums], REAL, width, layout)
                  for q in range(f, len(sums[0].args))]
        if consts:
            total = g.op("Sum" if len(consts) > 1 else "Add", [total, *consts], "margin_rows")
        cols = self._as_cols(_Vec(total, layout, tuple(t.dest for t in sums), REAL))
        for k, t in enumerate(sums):
            self.at[t.dest] = (cols, k)
        for lane in lanes:
            self.absorbed |= {op.dest for op, _ in lane.fanout}

    def _const_rows(self, values: list) -> str:
        """Per-lane constants as an [F, 1] column, to meet the [F, N] block (or [F, 1, 1],
        to meet [F, N, 1])."""
        shape = (-1,) + (1,) * (self._block_rank - 1)
        return self.g.const("c", np.asarray(values, dtype=self.dtype).reshape(shape))

    def _stack(self, indices: list[int]) -> str:
        """The inputs' raw values as one feature-major [F, N] block."""
        g, f = self.g, len(indices)
        if self.layout == "matrix":
            x = g.op("Transpose", [MATRIX_INPUT], "raw_by_feature", perm=[1, 0])
            if indices != list(range(len(self.plan.inputs))):
                x = g.op("Gather", [x, g.const("used_features", indices, np.int64)], "raw",
                         axis=0)
            return x
        names = [self.plan.inputs[i].name for i in indices]
        stacked = names[0] if f == 1 else g.op("Concat", names, "raw_stacked", axis=0)
        shape = [f, -1] + [1] * (self._block_rank - 2)
        return g.op("Reshape", [stacked, g.const("block_shape", shape, np.int64)], "raw")

    def _finite(self, x: str, rank: int = 2) -> str:
        """The negation of is_missing: |x| < inf is false for exactly NaN and +-inf."""
        size = self.g.op("Abs", [x], f"{x}_abs")
        inf = self.g.const("inf", np.full((1,) * rank, np.inf, dtype=self.dtype))
        return self.g.op("Less", [size, inf], f"{x}_finite")

    def _aligned(self, lanes: list[_Lane]) -> list[tuple[str, list]]:
        """Every lane's steps laid on one sequence of nodes (a shortest common
        supersequence), a lane without a step at some node taking its identity constant."""
        sequences = [[LANE_STEPS[op][0] for op, _ in lane.chain] for lane in lanes]
        merged: list[str] = []
        for seq in sequences:
            merged = _supersequence(merged, seq)
        identity = {node: ident for node, ident, _ in LANE_STEPS.values()}
        columns = []
        for lane in lanes:
            column = [identity[node] for node in merged]
            pos = 0
            for op, c in lane.chain:
                node, _, sign = LANE_STEPS[op]
                while merged[pos] != node:
                    pos += 1
                column[pos] = -c if sign < 0 else c
                pos += 1
            columns.append(column)
        return [(node, [col[j] for col in columns]) for j, node in enumerate(merged)]

    def _code_table(self, read: Op, cone: list[Op]) -> None:
        """The cone's values used outside it, folded for every code the read can give and
        gathered by the code: [1, W, codes], or [1, codes] for one value."""
        frontier = self._frontier(cone)
        types = {op.type for op in frontier}
        if not frontier or len(types) != 1:
            return
        inp = self.plan.inputs[read.attr]
        rows = []
        for code in _code_domain(inp):
            env = fold(cone, {read.dest: code}, self.dtype)
            if any(op.dest not in env for op in frontier):
                return
            rows.append([env[op.dest] for op in frontier])
        (type_,) = types
        dtype = TYPES[type_][1] if type_ in TYPES else self.dtype
        table = np.asarray(rows, dtype=dtype).T   # [W, codes]
        width = len(frontier)
        table = table[None] if width > 1 else table
        hint = f"cat{inp.index}"
        gathered = self.g.op("Gather", [self.g.const(f"{hint}_table", table),
                                        self._positions(inp, keepdims=0)],
                             f"{hint}_term", axis=2 if width > 1 else 1)
        vec = _Vec(gathered, "slab" if width > 1 else "row",
                   tuple(op.dest for op in frontier), type_)
        for k, op in enumerate(frontier):
            self.at[op.dest] = (vec, k)

    def _positions(self, inp, keepdims: int) -> str:
        """Each row's position in `_code_domain`: the input compared with every level and
        with "" (missing); position 0 is no match (unseen)."""
        g = self.g
        texts = [str(level) for level in inp.levels] + [""]
        hint = f"cat{inp.index}"
        equal = g.op("Equal", [inp.name, g.strings(f"{hint}_levels", texts)], f"{hint}_equal")
        positions = g.const(f"{hint}_positions", list(range(1, len(texts) + 1)), np.int64)
        marked = g.op("Where", [equal, positions, g.const("zero_code", 0, np.int64)],
                      f"{hint}_marked")
        return g.op("ReduceMax", [marked, g.axes(1)], f"{hint}_code", keepdims=keepdims)

    # ------------------------------------------------------------ margins

    def _margins(self) -> None:
        """The ordered sums over the inputs' lanes, one lane per sum: one Sum node of
        [1, W, N] (or [1, N]) operands, which adds them left to right in the program's
        order, turned into the [N, W] tensor the rest of the program reads."""
        sums = [op for op in self.ops if op.op == "sum"
                and not all(isinstance(a, Const) for a in op.args)
                and all(isinstance(a, Const) or (a in self.at and self.at[a][0].layout
                                                  in ("row", "slab")) for a in op.args)]
        layout = "row" if len(sums) == 1 else "slab"
        if not sums or len({len(op.args) for op in sums}) != 1:
            return
        columns = [[op.args[q] for op in sums] for q in range(len(sums[0].args))]
        for args in columns:
            vec = None if isinstance(args[0], Const) else self.at[args[0]][0]
            if (vec is None) != all(isinstance(a, Const) for a in args) or vec is not None \
                    and (vec.lanes != tuple(args) or vec.layout != layout):
                return
        tensors = [self._const([a.value for a in args], args[0].type, len(sums), layout)
                   if isinstance(args[0], Const) else self.at[args[0]][0].tensor
                   for args in columns]
        total = _Vec(self.g.op("Sum", tensors, "margin_rows"), layout,
                     tuple(op.dest for op in sums), sums[0].type)
        cols = self._as_cols(total)
        for k, name in enumerate(total.lanes):
            self.at[name] = (cols, k)

    # ------------------------------------------------------------ fusions

    def _find_fusions(self) -> None:
        """Op patterns one node computes with the same bits; each fused op is rendered by
        the method `fused` names, the ops inside it are never rendered alone."""
        for op in self.ops:
            args = op.args
            if op.op == "select" and len(args) == 3 and all(isinstance(a, str) for a in args[1:]):
                da, db = self.by_dest.get(args[1]), self.by_dest.get(args[2])
                if da is not None and db is not None and da.op == db.op == "div" \
                        and da.args[1] == db.args[1] and da is not db \
                        and self._only_use(da, op) and self._only_use(db, op):
                    self.absorbed |= {da.dest, db.dest}
                    self.fused[op.dest] = self._select_then_divide
            if op.op == "select" and op.type == CODE and args[1:] == (Const(1), Const(0)) \
                    and isinstance(args[0], str):
                self.fused[op.dest] = self._cast
            if op.op == "min" and isinstance(args[1], Const) and isinstance(args[0], str):
                inner = self.by_dest.get(args[0])
                if inner is not None and inner.op == "max" and isinstance(inner.args[1], Const) \
                        and isinstance(inner.args[0], str) and self._only_use(inner, op) \
                        and inner.args[0] in self.at and self.at[inner.args[0]][0].width == 1:
                    self.absorbed.add(inner.dest)
                    self.fused[op.dest] = self._clip
        for vec in {id(v): v for v, _ in self.at.values()}.values():
            if vec.layout == "col" and vec.width > 1:
                self._running_max(vec)

    def _only_use(self, op: Op, user: Op) -> bool:
        return [u.dest for u in self.consumers.get(op.dest, [])] == [user.dest]

    def _running_max(self, vec: _Vec) -> None:
        """top = lane 0; for each lane k: higher = lane_k > top, top = higher ? lane_k : top,
        best = higher ? k : best. The last top is ReduceMax and the last best ArgMax with
        select_last_index=0 (the lowest index among equal maxima, as only a strictly
        greater lane moves them)."""
        lanes, top, best = vec.lanes, vec.lanes[0], Const(0)
        chain = []
        for k in range(1, len(lanes)):
            higher = [u for u in self.consumers.get(lanes[k], [])
                      if u.op == "gt" and u.args == (lanes[k], top)]
            if len(higher) != 1:
                return
            uses = self.consumers.get(higher[0].dest, [])
            tops = [u for u in uses if u.op == "select"
                    and u.args == (higher[0].dest, lanes[k], top)]
            bests = [u for u in uses if u.op == "select" and u.type == CODE
                     and u.args == (higher[0].dest, Const(k), best)]
            if len(uses) != 2 or len(tops) != 1 or len(bests) != 1:
                return
            chain += [higher[0], tops[0], bests[0]]
            top, best = tops[0].dest, bests[0].dest
        inside = {op.dest for op in chain}
        for op in chain:
            if op.dest not in (top, best) and any(
                    u.dest not in inside for u in self.consumers.get(op.dest, [])):
                return
        self.absorbed |= inside - {top, best}
        self.fused[top] = lambda op: _Vec(
            self.g.op("ReduceMax", [vec.tensor, self.g.axes(1)], op.dest, keepdims=1),
            "col", (op.dest,), op.type)
        self.fused[best] = lambda op: _Vec(
            self.g.op("ArgMax", [vec.tensor], op.dest, axis=1, keepdims=0,
                      select_last_index=0), "flat", (op.dest,), CODE)

    def _select_then_divide(self, op: Op) -> _Vec:
        """select(f, a / d, b / d) as select(f, a, b) / d: one division, the same bits."""
        da, db = self.by_dest[op.args[1]], self.by_dest[op.args[2]]
        chosen = f"{op.dest}'"
        self.at[chosen] = (self._node("Where", [Op(chosen, "select",
                                                   (op.args[0], da.args[0], db.args[0]),
                                                   op.type)]), 0)
        return self._node("Div", [Op(op.dest, "div", (chosen, da.args[1]), op.type)])

    def _cast(self, op: Op) -> _Vec:
        """select(f, 1, 0) as the flag cast to a code."""
        flag = self.column(op.args[0])
        if flag.negated:
            return self._node("Where", [op])
        return _Vec(self.g.op("Cast", [flag.tensor], op.dest, to=TensorProto.INT64), "col",
                    (op.dest,), CODE, flag.rows)

    def _clip(self, op: Op) -> _Vec:
        """min(max(x, lo), hi) as one Clip (its definition in the ONNX standard)."""
        inner = self.by_dest[op.args[0]]
        x = self.column(inner.args[0])
        lo, hi = (self.g.const("c", self.dtype(c.value)) for c in (inner.args[1], op.args[1]))
        return _Vec(self.g.op("Clip", [x.tensor, lo, hi], op.dest), "col", (op.dest,), op.type,
                    x.rows)

    # ------------------------------------------------------------ reads and lookups

    def _read_real(self, op: Op) -> _Vec:
        if self.layout == "matrix":
            tensor = self.g.op("Gather", [MATRIX_INPUT, self.g.const("c", [op.attr], np.int64)],
                               op.dest, axis=1)
        else:
            tensor = self.plan.inputs[op.attr].name
        return _Vec(tensor, "col", (op.dest,), REAL)

    def _read_code(self, op: Op) -> _Vec:
        inp = self.plan.inputs[op.attr]
        codes = self.g.const("codes", _code_domain(inp), np.int64)
        return _Vec(self.g.op("Gather", [codes, self._positions(inp, keepdims=1)], op.dest),
                    "col", (op.dest,), CODE)

    def _is_missing(self, op: Op) -> _Vec:
        x = self.column(op.args[0])
        return _Vec(self._finite(x.tensor), "col", (op.dest,), FLAG, x.rows, negated=True)

    def _lookup(self, op: Op) -> _Vec:
        """table[c] for 0 <= c < len(table), else 0.0: a Gather from the table with 0.0
        appended, at c, or at the appended slot where c is out of range."""
        g, c = self.g, self.column(op.args[0])
        n = len(op.attr)
        padded = g.const("table", list(op.attr) + [0.0])
        last = g.const("c", [[n]], np.int64)
        inside = g.op("And", [g.op("GreaterOrEqual", [c.tensor, g.const("c", [[0]], np.int64)],
                                   f"{op.dest}_ge"),
                              g.op("Less", [c.tensor, last], f"{op.dest}_lt")], f"{op.dest}_in")
        index = g.op("Where", [inside, c.tensor, last], f"{op.dest}_at")
        return _Vec(g.op("Gather", [padded, index], op.dest, axis=0), "col", (op.dest,), REAL,
                    c.rows)

    def _bucket(self, op: Op) -> _Vec:
        """The number of edges at or below x: x compared with the [1, E] row of edges,
        the truths counted (one node each; E comparisons a row, none of them rounded)."""
        g, x = self.g, self.column(op.args[0])
        edges = g.const("edges", np.asarray([op.attr], dtype=self.dtype))
        at_or_below = g.op("GreaterOrEqual", [x.tensor, edges], f"{op.dest}_ge")
        ones = g.op("Cast", [at_or_below], f"{op.dest}_ones", to=TensorProto.INT64)
        return _Vec(g.op("ReduceSum", [ones, g.axes(1)], op.dest, keepdims=1), "col",
                    (op.dest,), CODE, x.rows)

    # ------------------------------------------------------------ outputs

    def _outputs(self) -> list:
        values = {op.attr: op.args[0] for op in self.ops if op.op == "output"}
        infos = []
        for graph_name, key in GRAPH_OUTPUTS:
            names = [n for n in values if n == key or (key.endswith("_") and n.startswith(key))]
            if graph_name == "margin":  # the rate's margin (no offset) is the program's own
                names = names[:self.plan.n_outputs]
            if not names:
                continue
            args = [values[n] for n in names]
            type_ = args[0].type if isinstance(args[0], Const) else self.at[args[0]][0].type
            flat = graph_name == "class_index"
            self._output(graph_name, args, flat)
            elem = TYPES[type_][0] if type_ in TYPES else self.g.elem.onnx
            infos.append(helper.make_tensor_value_info(
                graph_name, elem, [N] if flat else [N, len(args)]))
        return infos

    def _output(self, name: str, args: list, flat: bool) -> None:
        g = self.g
        vec = self.at[args[0]][0] if isinstance(args[0], str) else None
        if vec is not None and vec.lanes == tuple(args) and vec.rows and not vec.negated \
                and vec.tensor not in self.renamed and g.produced(vec.tensor) \
                and vec.layout == ("flat" if flat else "col"):
            g.rename(vec.tensor, name)
            self.renamed[vec.tensor] = name
            return
        cols = [self._column_of(a) for a in args]
        if flat:
            g.op("Squeeze", [cols[0], g.axes(1)], name, out=name)
        elif len(cols) > 1:
            g.op("Concat", cols, name, out=name, axis=1)
        else:
            g.op("Identity", cols, name, out=name)

    def _column_of(self, arg) -> str:
        """One output column, [N, 1], even when computed from constants alone."""
        if isinstance(arg, Const):
            return self._rows_of(self._const([arg.value], arg.type, 1), False)
        col = self.column(arg)
        tensor = self.renamed.get(col.tensor, col.tensor)
        return self._rows_of(self._plain(tensor) if col.negated else tensor, col.rows)

    def _rows_of(self, tensor: str, rows: bool, width: int = 1) -> str:
        """A [1, W] tensor of constants repeated on every row: [N, W]."""
        if rows:
            return tensor
        g = self.g
        if ("rows", width) not in self._cached:
            source = MATRIX_INPUT if self.layout == "matrix" else self.plan.inputs[0].name
            count = g.op("Shape", [source], "rows", end=1)
            self._cached["rows", width] = g.op(
                "Concat", [count, g.const("c", [width], np.int64)], "shape", axis=0)
        return g.op("Expand", [tensor, self._cached["rows", width]], f"{tensor}_rows")


def _one_comparison_per_tie(ops: list[Op], dtype) -> list[Op]:
    """select(ge(a, c), x, y) as select(gt(a, c), x, y) where the program also computes
    gt(a, c) and x and y have the same bits at a == c (+0.0 and -0.0 when c is 0), the
    only values where ge and gt differ (a NaN makes both false): one comparison node
    serves both, the same bits on every row. The stable sigmoid's select is one: at a
    margin of +-0 both branches are 1 / (1 + exp(-0)) = 0.5, and the class index compares
    the margin with a cut of 0."""
    strict = {(op.args, op.type): op for op in ops if op.op == "gt"}
    uses: dict[str, int] = {}
    for op in ops:
        for a in op.args:
            if isinstance(a, str):
                uses[a] = uses.get(a, 0) + 1
    by_dest = {op.dest: op for op in ops}
    swap: dict[str, Op] = {}   # the ge's dest -> the gt it becomes
    for i, op in enumerate(ops):
        if op.op != "select" or not isinstance(op.args[0], str):
            continue
        flag = by_dest.get(op.args[0])
        if flag is None or flag.op != "ge" or uses[flag.dest] != 1 \
                or (flag.args, flag.type) not in strict:
            continue
        a, c = flag.args
        if not isinstance(a, str) or not isinstance(c, Const) or c.type != REAL:
            continue
        ties = (0.0, -0.0) if c.value == 0 else (c.value,)
        if all(_same_bits(_fold_with_exp_of_zero(ops[:i], {a: dtype(t)}, dtype), op.args[1:],
                          dtype) for t in ties):
            swap[flag.dest] = strict[flag.args, flag.type]
    out, placed = [], set()
    for op in ops:
        if op.dest in swap:
            op = swap[op.dest]   # the gt, where the ge was: its operands are ready there
        elif op.op == "select" and op.args[0] in swap:
            op = Op(op.dest, op.op, (swap[op.args[0]].dest, *op.args[1:]), op.type, op.attr)
        if op.dest not in placed:
            placed.add(op.dest)
            out.append(op)
    return out


def _fold_with_exp_of_zero(ops: list[Op], env: dict, dtype) -> dict:
    """`fold`, and exp(+-0) = 1: exact in IEEE 754 (C99 Annex F), in onnxruntime's Exp
    for double and float and in numpy's (tests/test_onnx.py checks both evaluators)."""
    while True:
        values = fold(ops, env, dtype)
        more = {op.dest: dtype(1.0) for op in ops if op.op == "exp" and op.dest not in values
                and _known(values, op.args[0], dtype) == 0}
        if not more:
            return values
        env = {**values, **more}


def _known(values: dict, arg, dtype):
    return dtype(arg.value) if isinstance(arg, Const) else values.get(arg)


def _same_bits(values: dict, args, dtype) -> bool:
    x, y = (_known(values, a, dtype) for a in args)
    return x is not None and y is not None and dtype(x).tobytes() == dtype(y).tobytes()


def _code_domain(inp) -> list[int]:
    """The code each position of the graph's reading of a categorical input stands for:
    0 no level matched (unseen), 1..L the levels, L+1 the empty string (missing)."""
    return [UNSEEN_CODE, *range(len(inp.levels)), MISSING_CODE]


def _supersequence(a: list[str], b: list[str]) -> list[str]:
    """A shortest common supersequence of two op sequences."""
    @functools.cache
    def best(i: int, j: int) -> tuple:
        if i == len(a) or j == len(b):
            return tuple(a[i:]) + tuple(b[j:])
        if a[i] == b[j]:
            return (a[i],) + best(i + 1, j + 1)
        left, right = (a[i],) + best(i + 1, j), (b[j],) + best(i, j + 1)
        return left if len(left) <= len(right) else right
    return list(best(0, 0))


# op -> its node (a name), or the renderer's method that spells it in several nodes.
NODES = {
    "add": "Add", "sub": "Sub", "mul": "Mul", "div": "Div", "min": "Min", "max": "Max",
    "neg": "Neg", "abs": "Abs", "sqrt": "Sqrt", "or": "Or",
    "gt": "Greater", "ge": "GreaterOrEqual", "eq": "Equal",
    "select": "Where", "exp": "Exp", "sum": "Sum",
    "read_real": _Renderer._read_real, "read_code": _Renderer._read_code,
    "is_missing": _Renderer._is_missing, "lookup": _Renderer._lookup,
    "bucket": _Renderer._bucket,
}

"""The ONNX target, run by two independent evaluators: onnxruntime (CPU) and the
ONNX reference evaluator (`onnx.reference.ReferenceEvaluator`, numpy-based).

Outside checks: `onnx.checker.check_model(full_check=True)` and strict shape
inference (the onnx package's own validation of the ONNX standard); every output
is compared with the scoring plan evaluated by `reference.score_row`, and the
differences measured here are the stated tolerances in targets/onnx-*.toml.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import onnx
import onnxruntime
import pytest
from click.testing import CliRunner
from onnx.reference import ReferenceEvaluator

import scorewright
import scorewright.emit.onnx as onnx_emitter
from scorewright import program
from scorewright.cli import cli
from scorewright.emit import emitter
from scorewright.emit.onnx import OPSET
from scorewright.errors import ScorewrightError
from scorewright.model import canonical_sha256, model_from_document
from scorewright.plan import build_plan
from scorewright.program import Const
from scorewright.reference import encode_rows, score_row
from scorewright.verify.runners import runner
from scorewright.verify.runners.onnx import input_feeds

from models import WALKED, build

ROOT = Path(__file__).resolve().parent.parent
MODELS = list(WALKED)
NUMERIC_ONLY = ["iris", "wine", "diabetes_ridge", "spector"]
PROFILES = {("onnxruntime", "double"): "onnx-double",
            ("reference", "double"): "onnx-double-reference",
            ("onnxruntime", "float"): "onnx-float",
            ("reference", "float"): "onnx-float-reference"}


def tolerance(profile: str) -> dict:
    with open(ROOT / "targets" / f"{profile}.toml", "rb") as handle:
        return tomllib.load(handle)["tolerance"]


def emitted(model, tmp: Path, **options) -> Path:
    (art,) = emitter("onnx")(model, options)
    path = tmp / art.name
    path.write_bytes(art.content)
    return path


def edited(doc: dict):
    """A frozen model from a document edited by a test, sealed again."""
    doc = dict(doc)
    doc["sha256"] = canonical_sha256(doc)
    return model_from_document(doc)


def ulps(a, b, precision: str = "double") -> np.ndarray:
    """Distance in units in the last place of IEEE double (or float) between a and b, 0 for
    -0.0 vs 0.0; exact: the ordered bit patterns are subtracted as Python ints."""
    def ordered(x):
        if precision == "float":
            bits = np.asarray(x, dtype=np.float32).view(np.int32).ravel().tolist()
            sign = 0x7FFFFFFF
        else:
            bits = np.asarray(x, dtype=np.float64).view(np.int64).ravel().tolist()
            sign = 0x7FFFFFFFFFFFFFFF
        return [v if v >= 0 else -(v & sign) for v in bits]
    dist = [abs(x - y) for x, y in zip(ordered(a), ordered(b))]
    return np.array(dist, dtype=np.float64).reshape(np.shape(a))


def spacing(x, precision: str) -> np.ndarray:
    dtype = np.float32 if precision == "float" else np.float64
    return np.spacing(np.abs(np.asarray(x, dtype=dtype))).astype(np.float64)


# ---------------------------------------------------------------- rows

def edge_rows(plan) -> list[dict]:
    """Rows at the edges of every input, and rows whose margin is pushed to +-1000 and
    to the exp guard, derived from the plan."""
    rows: list[dict] = [{}]  # everything absent
    numeric = [i for i in plan.inputs if i.kind == "numeric"]
    categorical = [i for i in plan.inputs if i.kind == "categorical"]
    specials = [None, math.nan, math.inf, -math.inf, 1e308, -1e308, 5e-324, -0.0, 0.0,
                1e30, -1e30, "12.5", "not a number", True, ""]
    for inp in numeric:
        for value in specials:
            rows.append({inp.name: value})
        rows.append({n.name: v for n, v in zip(numeric, (1e308, -1e308) * len(numeric))})
    for inp in categorical:
        values = list(inp.levels) + [None, "", "never-seen level", 10**6, 2.5, math.nan,
                                     True, "\x00", str(inp.levels[0]) + " "]
        if isinstance(inp.levels[0], int):
            values += [float(inp.levels[0]), str(inp.levels[0]), f" {inp.levels[0]} ",
                       f"{inp.levels[0]}.0"]
        for value in values:
            rows.append({inp.name: value})
    rows.append({i.name: math.nan for i in numeric} | {i.name: "" for i in categorical})
    rows.extend(_margin_rows(plan))
    return rows


def _margin_rows(plan) -> list[dict]:
    """Rows whose first margin is near each target, by moving one unclipped numeric input
    (margins are affine in it)."""
    guard = plan.precision.exp_guard
    targets = [1000.0, -1000.0, guard, -guard, guard + 1, -guard - 1, 40.0, -40.0]
    for term in plan.terms:
        inp = plan.inputs[term.input]
        if term.kind != "numeric" or inp.clip is not None or term.weights[0] == 0.0:
            continue
        base = 0.0 if inp.fill is None else inp.fill
        m0 = score_row(plan, {inp.name: base}).margins[0]
        slope = score_row(plan, {inp.name: base + 1.0}).margins[0] - m0
        rows = []
        for target in targets:
            x = base + (target - m0) / slope
            if abs(x) < inp.bound:
                rows.append({inp.name: x})
        return rows
    return []


def model_rows(name: str, n_random: int = 1500) -> list[dict]:
    """The rows a model was fitted on, its edge rows, and random rows: fitted rows with
    half their numeric values scaled by U(-5, 5) and some categories replaced."""
    tm = build(name)
    fitted = [{k: _plain(v) for k, v in r.items()} for r in tm.frame.to_dict("records")]
    rng = np.random.default_rng(len(name))
    shuffled = []
    for i in rng.integers(0, len(fitted), n_random):
        row = dict(fitted[i])
        for key, value in row.items():
            if isinstance(value, float) and rng.uniform() < 0.5:
                row[key] = value * rng.uniform(-5.0, 5.0)
            elif isinstance(value, str) and rng.uniform() < 0.1:
                row[key] = "unheard-of"
        shuffled.append(row)
    return fitted + edge_rows(build_plan(tm.model)) + shuffled


def _plain(value):
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating,)):
        return float(value)
    return value


# ---------------------------------------------------------------- standard conformance

@pytest.mark.parametrize("precision", ["double", "float"])
@pytest.mark.parametrize("name", MODELS)
def test_graph_passes_checker_and_strict_shape_inference(name, precision, tmp_path):
    path = emitted(build(name).model, tmp_path, precision=precision)
    graph = onnx.load(path)
    onnx.checker.check_model(graph, full_check=True)
    inferred = onnx.shape_inference.infer_shapes(graph, check_type=True, strict_mode=True,
                                                 data_prop=True)
    assert [o.name for o in inferred.graph.output] == [o.name for o in graph.graph.output]
    assert [op.domain for op in graph.opset_import] == [""]
    assert graph.opset_import[0].version == OPSET
    assert all(node.domain == "" for node in graph.graph.node)


@pytest.mark.parametrize("name", MODELS)
def test_no_node_or_constant_the_model_does_not_need(name, tmp_path):
    graph = onnx.load(emitted(build(name).model, tmp_path)).graph
    consumed = {i for node in graph.node for i in node.input}
    outputs = {o.name for o in graph.output}
    for node in graph.node:
        assert all(o in consumed or o in outputs for o in node.output), node
    assert all(init.name in consumed for init in graph.initializer)


def test_node_count_of_a_standardized_all_numeric_binary_model(tmp_path):
    graph = onnx.load(emitted(build("spector").model, tmp_path)).graph
    ops = [n.op_type for n in graph.node]
    print(f"\nspector (3 numeric inputs, binary): {len(ops)} nodes: {' '.join(ops)}")
    # 12 nodes stack, guard and weight the inputs and sum the margin in the plan's order
    # (a CumSum, its last row and the intercept: one node more than a Split and a Sum, and
    # faster, bench/bench_onnx.py); 12 make the stable sigmoid, both probabilities and the
    # class index (the sigmoid's select and the class index share one comparison).
    assert len(ops) <= 24
    assert "MatMul" not in ops  # its kernels may reorder the plan's summation


# ---------------------------------------------------------------- agreement

@pytest.mark.parametrize("precision", ["double", "float"])
@pytest.mark.parametrize("evaluator", ["onnxruntime", "reference"])
@pytest.mark.parametrize("name", MODELS)
def test_agrees_with_the_reference_evaluator(name, evaluator, precision, tmp_path):
    tm = build(name)
    emitted(tm.model, tmp_path, precision=precision)
    rows = model_rows(name)
    options = {"evaluator": evaluator, "precision": precision}
    out = runner("onnx")(tmp_path, tm.model, rows, options)
    plan = build_plan(tm.model, precision)
    expected = [score_row(plan, row) for row in rows]
    profile = PROFILES[evaluator, precision]
    tol = tolerance(profile)
    ref_m = np.array([s.margins for s in expected])
    found = {"rows": len(rows), "runtime": out.runtime}
    unit = tol.get("precision", "double")

    def check(output, want, have, ulps_ok, abs_ok=0.0, rel_ok=0.0):
        """An output agrees if within the stated ULPs, OR absolute, OR relative bound."""
        want = np.asarray(want, dtype=np.float64)
        assert have.shape == want.shape, output
        dist, diff = ulps(want, have, unit), np.abs(want - have)
        passed = (dist <= ulps_ok) | (diff <= abs_ok) | (diff <= rel_ok * np.abs(want))
        found[output] = f"max {dist.max():.0f} {unit} ULPs, max abs {diff.max():.3g}"
        bad = np.flatnonzero(~passed.reshape(len(rows), -1).all(axis=1))
        assert bad.size == 0, f"{output} beyond the stated tolerance on row {bad[0]}: " \
            f"{rows[bad[0]]} ({found[output]})"

    check("margin", ref_m, out.margins, tol["margin_ulps"], tol.get("margin_abs", 0.0))
    if plan.task == "regression":
        check("predicted_value", [s.value for s in expected], out.value, tol["value_ulps"],
              rel_ok=tol.get("value_rel", 0.0))
    else:
        check("probability", [s.probabilities for s in expected], out.probabilities,
              tol["probability_ulps"], tol["probability_abs"])
        # Labels agree except where the reference margin lies within the stated margin
        # tolerance of the cut (binary) or of the runner-up margin (multiclass).
        slack = np.maximum(tol.get("margin_abs", 0.0),
                           tol["margin_ulps"] * spacing(ref_m, unit).max(axis=1))
        ref_c = np.array([s.class_index for s in expected])
        if plan.task == "binary":
            near = np.abs(ref_m[:, 0] - plan.cut) <= slack
        else:
            top2 = np.sort(ref_m, axis=1)[:, -2:]
            near = (top2[:, 1] - top2[:, 0]) <= 2 * slack
        wrong = np.flatnonzero((out.class_index != ref_c) & ~near)
        assert wrong.size == 0, f"labels differ on rows {wrong[:5]}: {rows[wrong[0]]}"
        found["labels excused near the cut"] = int(near.sum())
    print(f"\n{profile} {name}: {found}")


def test_multiclass_ties_go_to_the_lowest_index(tmp_path):
    """Two classes with identical coefficients tie on every row; both evaluators must
    return the lower index (ArgMax with select_last_index=0)."""
    doc = build("iris").model.to_document()
    head = doc["head"]
    head["coefficients"][2] = list(head["coefficients"][1])
    head["intercepts"][2] = head["intercepts"][1] + 30.0  # class 2 wins wherever 1 would
    head["coefficients"][1] = list(head["coefficients"][2])
    head["intercepts"][1] = head["intercepts"][2]
    model = edited(doc)
    emitted(model, tmp_path)
    rows = [{}] + build("iris").frame.to_dict("records")[:60]
    plan = build_plan(model)
    for evaluator in ("onnxruntime", "reference"):
        out = runner("onnx")(tmp_path, model, rows, {"evaluator": evaluator})
        assert np.array_equal(out.margins[:, 1], out.margins[:, 2])
        expected = [score_row(plan, r).class_index for r in rows]
        assert list(out.class_index) == expected
        assert 2 not in expected and 1 in expected


# ---------------------------------------------------------------- traps of the runtimes

def test_onnxruntime_graph_optimizations_change_no_bit(tmp_path):
    """onnxruntime rewrites graphs at load time (fusions, constant folding); a serving team
    may run any optimization level, so every level must give the same bits."""
    tm = build("fault_type")
    path = emitted(tm.model, tmp_path)
    plan = build_plan(tm.model)
    feeds = input_feeds(plan, model_rows("fault_type"), "per-feature")
    results = []
    for level in (onnxruntime.GraphOptimizationLevel.ORT_DISABLE_ALL,
                  onnxruntime.GraphOptimizationLevel.ORT_ENABLE_BASIC,
                  onnxruntime.GraphOptimizationLevel.ORT_ENABLE_ALL):
        so = onnxruntime.SessionOptions()
        so.graph_optimization_level = level
        session = onnxruntime.InferenceSession(str(path), so,
                                               providers=["CPUExecutionProvider"])
        results.append(session.run(None, feeds))
    for other in results[1:]:
        for a, b in zip(results[0], other):
            assert a.tobytes() == b.tobytes()


def test_constants_near_an_identity_keep_their_bits_under_the_runtime_optimizer(tmp_path):
    """onnxruntime 1.32 (measured here): its default graph optimizations delete a Mul or Div
    by a one-element double constant that rounds to 1.0 in float, and an Add or Sub of one
    that rounds to 0.0, as identities. A standardized product's scale is such a constant
    (1.0000000000000007 in tests/test_products.py). The graph passes each through Expand,
    which the optimizer cannot fold; handing the constant to its node directly again makes
    onnxruntime give other bits, so this test exercises the trap."""
    from scorewright.model import DesignColumn, FrozenModel, Head, NumericFeature, ScalingStep

    steps = (ScalingStep("subtract", 0.25), ScalingStep("divide", 1.0 + 2.0 ** -40),
             ScalingStep("multiply", 1.0 - 2.0 ** -30), ScalingStep("add", 1e-300))
    model = FrozenModel("near_identity", (NumericFeature("load_pct", None, steps),),
                        (DesignColumn("load_pct"),),
                        Head("regression", "identity", None, (0.0,), ((1.0 + 2.0 ** -44,),),
                             None), {"source": "test"}).sealed()
    path = emitted(model, tmp_path)
    graph_model = onnx.load(path)
    expanded = {n.output[0]: n.input[0] for n in graph_model.graph.node if n.op_type == "Expand"}
    assert expanded, "no constant kept from the optimizer"
    plan = build_plan(model)
    rows = [{"load_pct": v} for v in (0.25, 0.25 + 2.0 ** -50, 1.0, -3.5, 1e-300, 0.75)]
    feeds = input_feeds(plan, rows, "per-feature")
    want = [score_row(plan, r).value for r in rows]

    def value(proto) -> list:
        session = onnxruntime.InferenceSession(proto.SerializeToString(),
                                               providers=["CPUExecutionProvider"])
        assert [i.name for i in session.get_inputs()] == ["load_pct"]
        return session.run(["predicted_value"], feeds)[0][:, 0].tolist()

    assert value(graph_model) == want
    for node in graph_model.graph.node:
        node.input[:] = [expanded.get(i, i) for i in node.input]
    assert value(graph_model) != want, "onnxruntime keeps such constants now"


def test_float_graph_saturates_huge_doubles_instead_of_reading_them_as_missing(tmp_path):
    """float32(1e308) is inf, which the graph reads as missing; the runner saturates so
    the plan's clamp applies, as it does in the reference."""
    tm = build("spector")
    emitted(tm.model, tmp_path, precision="float")
    plan = build_plan(tm.model, "float")
    rows = [{"GPA": 1e308, "TUCE": 20.0, "PSI": 0.0}, {"GPA": None, "TUCE": 20.0, "PSI": 0.0}]
    out = runner("onnx")(tmp_path, tm.model, rows, {"precision": "float"})
    expected = [score_row(plan, r).margins[0] for r in rows]
    assert expected[0] != expected[1]
    assert out.margins[:, 0] == pytest.approx(expected, rel=1e-6)


def test_saved_graph_reloaded_in_a_fresh_process_gives_the_same_outputs(tmp_path):
    tm = build("hostile")
    path = emitted(tm.model, tmp_path)
    plan = build_plan(tm.model)
    rows = model_rows("hostile")[:200]
    feeds = input_feeds(plan, rows, "per-feature")
    np.savez(tmp_path / "feeds.npz", **{f"f{i}": feeds[n] for i, n in
                                        enumerate(plan.feature_names)})
    script = (
        "import sys, json, numpy as np, onnx, onnxruntime\n"
        "from onnx.reference import ReferenceEvaluator\n"
        "path, feeds_path = sys.argv[1], sys.argv[2]\n"
        "model = onnx.load(path)\n"
        "names = [i.name for i in model.graph.input]\n"
        "data = np.load(feeds_path, allow_pickle=True)\n"
        "feeds = {n: data[f'f{i}'] for i, n in enumerate(names)}\n"
        "s = onnxruntime.InferenceSession(path, providers=['CPUExecutionProvider'])\n"
        "a = s.run(None, feeds)\n"
        "b = ReferenceEvaluator(model).run(None, feeds)\n"
        "print(json.dumps([[x.tobytes().hex() for x in a], [x.tobytes().hex() for x in b]]))\n"
    )
    proc = subprocess.run([sys.executable, "-c", script, str(path), str(tmp_path / "feeds.npz")],
                          capture_output=True, text=True, check=True)
    fresh_ort, fresh_ref = json.loads(proc.stdout)
    session = onnxruntime.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    here = [x.tobytes().hex() for x in session.run(None, feeds)]
    assert fresh_ort == here
    ref_here = [x.tobytes().hex() for x in
                onnx.reference.ReferenceEvaluator(onnx.load(path)).run(None, feeds)]
    assert fresh_ref == ref_here


# ---------------------------------------------------------------- layout, names, metadata

@pytest.mark.parametrize("precision", ["double", "float"])
@pytest.mark.parametrize("name", NUMERIC_ONLY)
def test_matrix_layout_gives_the_same_bits_as_per_feature_inputs(name, precision, tmp_path):
    tm = build(name)
    rows = model_rows(name)
    per_dir, mat_dir = tmp_path / "per", tmp_path / "mat"
    per_dir.mkdir()
    mat_dir.mkdir()
    emitted(tm.model, per_dir, precision=precision)
    path = emitted(tm.model, mat_dir, precision=precision, inputs="matrix")
    graph = onnx.load(path)
    assert [i.name for i in graph.graph.input] == ["features"]
    for evaluator in ("onnxruntime", "reference"):
        a = runner("onnx")(per_dir, tm.model, rows, {"evaluator": evaluator,
                                                      "precision": precision})
        b = runner("onnx")(mat_dir, tm.model, rows, {"evaluator": evaluator,
                                                      "precision": precision,
                                                      "inputs": "matrix"})
        assert a.margins.tobytes() == b.margins.tobytes()


def test_matrix_layout_refuses_a_model_with_categorical_inputs():
    with pytest.raises(ScorewrightError, match="needs an all-numeric model; feature "
                       "'refrigerant' is categorical"):
        emitter("onnx")(build("fault_binary").model, {"inputs": "matrix"})


def test_hostile_names_are_the_graph_input_names_exactly(tmp_path):
    tm = build("hostile")
    graph = onnx.load(emitted(tm.model, tmp_path))
    onnx.checker.check_model(graph, full_check=True)
    names = [f.name for f in tm.model.features]
    assert [i.name for i in graph.graph.input] == names
    session = onnxruntime.InferenceSession(graph.SerializeToString(),
                                           providers=["CPUExecutionProvider"])
    assert [i.name for i in session.get_inputs()] == names


def test_a_feature_named_like_an_output_is_refused():
    doc = build("spector").model.to_document()
    doc["features"][0]["name"] = "margin"
    for col in doc["design"]:
        if col["feature"] == "GPA":
            col["feature"] = "margin"
    model = edited(doc)
    with pytest.raises(ScorewrightError, match="feature 'margin' has the name of an ONNX"):
        emitter("onnx")(model, {})
    (art,) = emitter("onnx")(model, {"inputs": "matrix"})  # the matrix layout can take it
    onnx.checker.check_model(onnx.load_from_string(art.content), full_check=True)


def test_metadata_names_the_model_and_its_schema(tmp_path):
    tm = build("fault_type")
    graph = onnx.load(emitted(tm.model, tmp_path, precision="float"))
    props = {p.key: p.value for p in graph.metadata_props}
    assert props["model_name"] == tm.model.name
    assert props["model_sha256"] == tm.model.sha256
    assert props["scorewright_version"] == scorewright.__version__
    assert props["opset"] == str(OPSET)
    assert props["precision"] == "float"
    assert json.loads(props["classes"]) == list(tm.model.head.classes)
    features = json.loads(props["features"])
    assert [f["name"] for f in features] == [f.name for f in tm.model.features]
    assert [f["kind"] for f in features] == [f.kind for f in tm.model.features]
    assert tm.model.sha256 in graph.graph.doc_string
    assert graph.producer_name == "scorewright"


def test_emission_is_deterministic():
    model = build("mixed_scalers").model
    first = emitter("onnx")(model, {"precision": "float"})
    second = emitter("onnx")(model, {"precision": "float"})
    assert first == second


def test_cli_writes_the_graph_and_refuses_bad_options_on_one_line(tmp_path):
    model_file = tmp_path / "m.json"
    build("spector").model.write(model_file)
    result = CliRunner().invoke(cli, ["emit", str(model_file), "--target", "onnx", "-o",
                                      str(tmp_path / "out"), "--precision", "float",
                                      "--inputs", "matrix"])
    assert result.exit_code == 0, result.output
    graph = onnx.load(tmp_path / "out" / "spector.onnx")
    assert graph.graph.input[0].type.tensor_type.elem_type == onnx.TensorProto.FLOAT
    build("fault_binary").model.write(tmp_path / "f.json")
    for args in (["--inputs", "matrix"], ["--dialect", "sqlite"]):
        proc = subprocess.run([sys.executable, "-m", "scorewright.cli", "emit",
                               str(tmp_path / "f.json"), "--target", "onnx", "-o",
                               str(tmp_path / "bad"), *args], capture_output=True, text=True)
        assert proc.returncode == 2
        assert proc.stderr.count("\n") == 1 and proc.stderr.startswith("error: ")
        assert not (tmp_path / "bad").exists()


def test_runner_fails_with_the_reason_when_the_layout_does_not_match(tmp_path):
    tm = build("iris")
    emitted(tm.model, tmp_path, inputs="matrix")
    with pytest.raises(ScorewrightError, match="the graph wants input 'features'"):
        runner("onnx")(tmp_path, tm.model, [{}], {})


@pytest.mark.parametrize("name", ["fault_type", "spector", "alarms_poisson"])
def test_zero_rows(name, tmp_path):
    tm = build(name)
    emitted(tm.model, tmp_path)
    for evaluator in ("onnxruntime", "reference"):
        out = runner("onnx")(tmp_path, tm.model, [], {"evaluator": evaluator})
        assert out.margins.shape == (0, tm.model.n_outputs)


def test_every_operator_has_an_onnxruntime_cpu_kernel_at_the_stated_opset(tmp_path):
    """The opset is one onnxruntime supports fully for what the graphs use: its own kernel
    registry (onnxruntime.capi's get_all_opkernel_def) covers each node's schema version."""
    from onnxruntime.capi import _pybind_state

    ranges: dict = {}
    for kernel in _pybind_state.get_all_opkernel_def():
        if kernel.domain in ("", "ai.onnx") and kernel.provider == "CPUExecutionProvider":
            ranges.setdefault(kernel.op_name, []).append(kernel.version_range)
    used = set()
    for name in MODELS:
        for precision in ("double", "float"):
            (art,) = emitter("onnx")(build(name).model, {"precision": precision})
            used |= {n.op_type for n in onnx.load_from_string(art.content).graph.node}
    for op in sorted(used):
        since = onnx.defs.get_schema(op, OPSET, "").since_version
        assert any(lo <= since <= hi for lo, hi in ranges.get(op, [])), (op, since)


def test_levels_with_nul_characters_are_matched_exactly(tmp_path):
    """onnx.helper.make_tensor strips trailing NULs from strings (it goes through a numpy
    bytes array), which would make the level "a\x00" read as "a" and "\x00" as the
    missing "". The graph's level constants must keep every byte; onnxruntime then
    matches them exactly. onnx.reference loads every string constant through numpy's
    fixed-width strings and loses the NULs itself, so its runner refuses, naming why.
    (numpy strips them in fitting too, so the model is written as a document.)"""
    levels = ["a", "a\x00", "\x00", "b\x00\x00"]
    name = "fan\x00model"
    model = edited({
        "format": "scorewright-frozen-model", "format_version": 1, "name": "nul levels",
        "features": [{"name": name, "kind": "categorical", "levels": levels,
                      "missing": {"policy": "unknown"}, "unknown": {"policy": "zeros"}}],
        "design": [{"feature": name, "levels": [level]} for level in levels],
        "head": {"task": "binary", "link": "logit", "classes": [0, 1], "intercepts": [0.25],
                 "coefficients": [[0.5, -1.0, 2.0, 4.0]], "cut": 0.0},
        "provenance": {"scorewright_version": scorewright.__version__, "source": "test"},
    })
    emitted(model, tmp_path)
    plan = build_plan(model)
    rows = [{name: v} for v in levels + ["", None, "a\x00\x00", "\x00\x00"]]
    expected = np.array([score_row(plan, r).margins for r in rows])
    assert len(set(expected[:5, 0])) == 5  # every level and missing differ
    out = runner("onnx")(tmp_path, model, rows, {})
    assert out.margins.tobytes() == expected.tobytes()
    strings = [t for t in onnx.load(tmp_path / "nul_levels.onnx").graph.initializer
               if t.data_type == onnx.TensorProto.STRING]
    assert [list(t.string_data) for t in strings] == [[v.encode() for v in levels + [""]]]
    with pytest.raises(ScorewrightError, match="drops trailing NUL characters .* level 'a"):
        runner("onnx")(tmp_path, model, rows, {"evaluator": "reference"})


# ---------------------------------------------------------------- the graph renders the program

def _program_outputs(plan, rows) -> dict:
    """The reference evaluator on the program as lowered now: its numpy interpreter, and
    its scalar one (the truth) when the numpy one cannot take the program (run_matrix
    cannot take an exp of a constant, as a model without terms has)."""
    lowered = program.lower(plan)
    try:
        return program.run_matrix(lowered, encode_rows(plan, rows))
    except AttributeError:
        scored = [program.run_row(lowered, row) for row in rows]
        return {key: np.array([s[key] for s in scored]) for key in scored[0]}


def _agrees_with_the_program(model, rows, tmp_path):
    """onnxruntime on the emitted graph against `program.run_matrix` on the same program:
    margins and class indexes bit for bit; probabilities and values within the onnx-double
    profile's stated bounds (onnxruntime's exp is not libm's)."""
    (art,) = emitter("onnx")(model, {})
    (tmp_path / art.name).write_bytes(art.content)
    out = runner("onnx")(tmp_path, model, rows, {"evaluator": "onnxruntime"})
    plan = build_plan(model)
    want = _program_outputs(plan, rows)
    margins = np.column_stack([want[f"margin_{k}"] for k in range(plan.n_outputs)])
    assert out.margins.tobytes() == margins.tobytes()
    tol = tolerance("onnx-double")
    if plan.task == "regression":
        assert (ulps(want["value"], out.value) <= tol["value_ulps"]).all()
        return out, want
    probs = np.column_stack([want[f"probability_{j}"] for j in range(len(plan.classes))])
    close = (ulps(probs, out.probabilities) <= tol["probability_ulps"]) | \
        (np.abs(probs - out.probabilities) <= tol["probability_abs"])
    assert close.all()
    assert list(out.class_index) == list(want["class_index"])
    return out, want


def _lower_numeric_by_selects(b, inp, single=False):
    """The design value by another valid op sequence: the bound and the clip as selects
    of comparisons, which no chain of constant steps can hold."""
    x = b.emit("read_real", attr=inp.index, hint="x")
    missing = b.missing[inp.index] = b.emit("is_missing", x, hint="f")
    v = b.emit("select", missing, Const(0.0 if inp.fill is None else inp.fill), x)
    v = b.emit("select", b.emit("gt", v, Const(inp.bound)), Const(inp.bound), v)
    v = b.emit("select", b.emit("gt", Const(-inp.bound), v), Const(-inp.bound), v)
    for step in inp.steps:
        v = b.emit(program._STEP_OP[step.op], v, Const(step.value))
    if inp.clip is not None:
        v = b.emit("select", b.emit("gt", v, Const(inp.clip[1])), Const(inp.clip[1]), v)
        v = b.emit("select", b.emit("gt", Const(inp.clip[0]), v), Const(inp.clip[0]), v)
    return b.emit("select", missing, Const(0.0), v) if inp.fill is None else v


@pytest.mark.parametrize("name", ["fault_binary", "mixed_scalers", "alarms_poisson"])
def test_a_changed_input_lowering_renders_and_matches_the_program(name, tmp_path,
                                                                   monkeypatch):
    """onnx.py spells no guard, scaling or missing rule: lowered another way, the graph
    follows the program (outside check: onnxruntime's own arithmetic)."""
    model = build(name).model
    monkeypatch.setattr(program, "_lower_numeric", _lower_numeric_by_selects)
    ops = {op.op for op in program.lower(build_plan(model)).ops}
    assert "gt" in ops and "max" not in ops or name == "alarms_poisson"
    _agrees_with_the_program(model, model_rows(name, 300), tmp_path)


def test_ties_follow_the_lowering_not_the_emitter(tmp_path, monkeypatch):
    """The class index rule lives in the lowering: lowered with ties to the highest index
    (ge instead of gt), the graph gives the highest index too."""
    doc = build("iris").model.to_document()
    head = doc["head"]
    head["coefficients"][2] = list(head["coefficients"][1])
    head["intercepts"][2] = head["intercepts"][1]
    model = edited(doc)
    original = program._lower_link

    def ties_to_the_last(b, plan, margins):
        if plan.task != "multiclass":
            return original(b, plan, margins)
        values = original(b, plan, margins)
        top, best = margins[0], Const(0)
        for k in range(1, len(margins)):
            higher = b.emit("ge", margins[k], top)
            top = b.emit("select", higher, margins[k], top)
            best = b.emit("select", higher, Const(k), best, hint="k")
        return values[:-1] + [best]

    monkeypatch.setattr(program, "_lower_link", ties_to_the_last)
    rows = [{}] + build("iris").frame.to_dict("records")[:60]
    out, _ = _agrees_with_the_program(model, rows, tmp_path)
    assert 2 in list(out.class_index) and 1 not in list(out.class_index)


@pytest.mark.parametrize("name", ["fault_binary", "fault_type", "alarms_poisson", "hostile"])
def test_every_op_rendered_alone_matches_the_program(name, tmp_path, monkeypatch):
    """With nothing folded at emit time, every operation is its own node(s): the reads,
    is_missing, select, lookup... spelled from NODES alone still give the program's bits."""
    model = build(name).model
    monkeypatch.setattr(onnx_emitter, "fold", lambda ops, env, dtype: dict(env))
    (art,) = emitter("onnx")(model, {})
    nodes = [n.op_type for n in onnx.load_from_string(art.content).graph.node]
    assert "Split" not in nodes[:12]  # no [F, N] block: op by op
    _agrees_with_the_program(model, model_rows(name, 300), tmp_path)


def test_an_op_onnx_has_no_node_for_is_one_error(monkeypatch):
    model = build("diabetes_ridge").model
    monkeypatch.setitem(program.PRIMITIVES, "erfc", ((program.REAL,), program.REAL))
    original = program._lower_link

    def with_erfc(b, plan, margins):
        values = original(b, plan, margins)
        return values[:-1] + [b.emit("erfc", margins[0])]

    monkeypatch.setattr(program, "_lower_link", with_erfc)
    with pytest.raises(ScorewrightError, match=r"^target onnx cannot express op erfc$"):
        emitter("onnx")(model, {})


def test_the_emitter_spells_no_semantics_of_the_plan():
    """The link, the guards, the scaling and the missing/unseen policies are read from the
    program only: emit/onnx.py names none of the plan's fields that carry them."""
    source = Path(onnx_emitter.__file__).read_text()
    for field in ("exp_guard", "log_link_max", ".fill", ".bound", ".steps", ".clip", ".cut",
                  "fill_code", "unknown_code", ".weights", ".tables", ".intercepts",
                  "plan.terms", "plan.link =="):
        assert field not in source, field


# Node counts of the emitter before it rendered the program (measured on this tree, double,
# per-feature inputs); rendering the program must not add nodes, but one: an ordered sum of
# three lanes or more is a CumSum, its last row and the constants (3 nodes for the Split and
# the Sum's 2), which took less time at one row and at 1e6 rows (bench/bench_onnx.py).
NODES_BEFORE = {"fault_binary": 33, "fault_type": 26, "iris": 22, "wine": 23,
                "alarms_poisson": 18, "diabetes_ridge": 15, "spector": 24,
                "mixed_scalers": 33, "hostile": 30}


@pytest.mark.parametrize("precision", ["double", "float"])
@pytest.mark.parametrize("name", sorted(NODES_BEFORE))
def test_no_more_nodes_than_before(name, precision):
    (art,) = emitter("onnx")(build(name).model, {"precision": precision})
    ops = [n.op_type for n in onnx.load_from_string(art.content).graph.node]
    assert len(ops) <= NODES_BEFORE[name] + ops.count("CumSum")


@pytest.mark.parametrize("precision", ["double", "float"])
@pytest.mark.parametrize("name", ["fault_binary", "fault_type", "alarms_poisson",
                                  "mixed_scalers", "wine"])
def test_folding_and_lanes_change_no_bit(name, precision, monkeypatch):
    """The vectorized graph (lanes, folded tables and missing values) and the graph of
    every op alone are both valid ONNX (the onnx checker, strict shape inference) and give
    the same bytes on both evaluators, in float as in double: folding computes in the
    graph's element type what the graph would."""
    model = build(name).model
    plan = build_plan(model, precision)
    feeds = input_feeds(plan, model_rows(name, 300), "per-feature")
    graphs = [emitter("onnx")(model, {"precision": precision})[0].content]
    monkeypatch.setattr(onnx_emitter, "fold", lambda ops, env, dtype: dict(env))
    graphs.append(emitter("onnx")(model, {"precision": precision})[0].content)
    assert len(onnx.load_from_string(graphs[1]).graph.node) > \
        len(onnx.load_from_string(graphs[0]).graph.node)
    outputs = []
    for content in graphs:
        graph = onnx.load_from_string(content)
        onnx.checker.check_model(graph, full_check=True)
        onnx.shape_inference.infer_shapes(graph, check_type=True, strict_mode=True)
        session = onnxruntime.InferenceSession(content, providers=["CPUExecutionProvider"])
        names = [o.name for o in session.get_outputs()]
        reference = ReferenceEvaluator(graph)
        outputs.append([x.tobytes() for x in session.run(names, feeds)] +
                       [x.tobytes() for x in reference.run(names, feeds)])
    assert outputs[0] == outputs[1]


@pytest.mark.parametrize("name, before", [("spector", 16), ("iris", 11),
                                          ("alarms_poisson", 5)])
def test_a_model_without_terms_scores_its_intercepts_on_every_row(name, before, tmp_path):
    """Every coefficient zero: the margins are the intercepts, given a row each, and the
    link runs on them as on any margins (no more nodes than before the rewrite)."""
    doc = build(name).model.to_document()
    doc["head"]["coefficients"] = [[0.0] * len(r) for r in doc["head"]["coefficients"]]
    model = edited(doc)
    assert build_plan(model).terms == ()
    (art,) = emitter("onnx")(model, {})
    assert len(onnx.load_from_string(art.content).graph.node) <= before
    out, _ = _agrees_with_the_program(model, model_rows(name, 50), tmp_path)
    assert out.margins.shape[0] == len(model_rows(name, 50))


@pytest.mark.parametrize("precision", ["double", "float"])
def test_the_sigmoid_shares_the_class_index_comparison_with_the_same_bits(precision,
                                                                         monkeypatch):
    """The stable sigmoid's select(ge(m, 0), 1/d, t/d) is rendered with the class index's
    gt(m, 0) (one Greater, no GreaterOrEqual): the two comparisons differ only at m = +-0,
    where both branches are 1 / (1 + exp(-0)) = 0.5. Margins of exactly +0.0 and -0.0
    (intercept -0.0, inputs of either zero), the smallest subnormals, NaN, +-inf and huge
    inputs, one row and many: the same bytes as the graph with a node per comparison on
    onnxruntime and on the reference evaluator (outside checks: both evaluators' own
    Greater, GreaterOrEqual and Exp), the program's margins and class indexes (double), 0.5
    exactly at the ties (+0.0 and -0.0 alike, as the stated ULP distances take them)."""
    doc = build("spector").model.to_document()
    doc["head"]["intercepts"] = [-0.0]
    model = edited(doc)
    plan = build_plan(model, precision)
    ties = [{"GPA": 0.0, "TUCE": 0.0, "PSI": 0.0}, {"GPA": -0.0, "TUCE": -0.0, "PSI": -0.0},
            {}]
    rows = ties + [{"GPA": v} for v in (5e-324, -5e-324, 1e-300, -1e-300, math.nan, math.inf,
                                        -math.inf, 1e308, -1e308, 300.0, -300.0)]
    rows += model_rows("spector", 100)
    want = _program_outputs(build_plan(model), rows)
    assert want["margin_0"][0].tobytes() == np.float64(0.0).tobytes()
    assert want["margin_0"][1].tobytes() == np.float64(-0.0).tobytes()
    graphs = [emitter("onnx")(model, {"precision": precision})[0].content]
    monkeypatch.setattr(onnx_emitter, "_one_comparison_per_tie", lambda ops, dtype: ops)
    graphs.append(emitter("onnx")(model, {"precision": precision})[0].content)
    ops = [[n.op_type for n in onnx.load_from_string(c).graph.node] for c in graphs]
    assert "GreaterOrEqual" not in ops[0] and "GreaterOrEqual" in ops[1]
    assert len(ops[0]) == len(ops[1]) - 1
    feeds = input_feeds(plan, rows, "per-feature")
    for n in (1, 2, len(rows)):
        part = {k: v[:n] for k, v in feeds.items()}
        outputs = []
        for content in graphs:
            session = onnxruntime.InferenceSession(content, providers=["CPUExecutionProvider"])
            names = [o.name for o in session.get_outputs()]
            reference = ReferenceEvaluator(onnx.load_from_string(content))
            got = session.run(names, part), reference.run(names, part)
            outputs.append([x.tobytes() for pair in got for x in pair])
            for margin, probability, class_index in got:
                assert (probability[:min(n, len(ties))] == 0.5).all()
                if precision == "double":  # the float graph is held to its tolerance
                    # equal as numbers: onnxruntime's Where gives +0.0 for a chosen -0.0
                    assert np.array_equal(margin[:, 0], want["margin_0"][:n])
                    assert list(class_index) == list(want["class_index"][:n])
        assert outputs[0] == outputs[1]


def _lanes_model(f: int):
    """f numeric inputs read as they are (missing: 0), weights of either sign and both
    scales, so the order of the margin's additions shows in its bits."""
    doc = build("spector").model.to_document()
    names = [f"x{j}" for j in range(f)]
    doc["features"] = [dict(doc["features"][0], name=n) for n in names]
    doc["design"] = [{"feature": n} for n in names]
    weights = [(-1.0) ** j * (1.0 + j / 7) for j in range(f)]
    doc["head"] = dict(doc["head"], intercepts=[0.375], coefficients=[weights])
    return edited(doc)


@pytest.mark.parametrize("precision", ["double", "float"])
@pytest.mark.parametrize("f", [3, 9, 30])
def test_the_running_sum_adds_the_lanes_in_the_program_order(f, precision, monkeypatch):
    """An ordered sum of the block's lanes is the last row of a CumSum (then the intercept):
    on values whose sum depends on the order (magnitudes 1e-8 to 1e16 of either sign), with
    NaN, +-inf, huge and -0.0 inputs, for one row, two and many, both evaluators give the
    program's margins bit for bit (double) and the same bytes as the graph of a Split and a
    Sum (outside checks: onnxruntime's CumSum and Sum, numpy's cumsum in the reference
    evaluator; its ReduceSum would sum one row of 9 lanes or more pairwise)."""
    model = _lanes_model(f)
    plan = build_plan(model, precision)
    rng = np.random.default_rng(f)
    values = rng.choice([-1.0, 1.0], (300, f)) * 10.0 ** rng.integers(-8, 17, (300, f))
    rows = [{f"x{j}": float(v) for j, v in enumerate(r)} for r in values]
    rows += [{"x0": v, "x1": 1.0} for v in (math.nan, math.inf, -math.inf, 1e308, -1e308,
                                            -0.0, 5e-324)]
    rows.append({f"x{j}": -0.0 for j in range(f)})
    graphs = [emitter("onnx")(model, {"precision": precision})[0].content]
    monkeypatch.setattr(onnx_emitter, "RUNNING_SUM_LANES", 10**9)
    graphs.append(emitter("onnx")(model, {"precision": precision})[0].content)
    ops = [[n.op_type for n in onnx.load_from_string(c).graph.node] for c in graphs]
    assert "CumSum" in ops[0] and "Split" not in ops[0] and "CumSum" not in ops[1]
    want = _program_outputs(build_plan(model), rows)["margin_0"]
    feeds = input_feeds(plan, rows, "per-feature")
    evaluators = [(onnxruntime.InferenceSession(c, providers=["CPUExecutionProvider"]),
                   ReferenceEvaluator(onnx.load_from_string(c))) for c in graphs]
    for part in [slice(i, i + 1) for i in range(20)] + [slice(0, 2), slice(0, len(rows))]:
        chunk = {k: v[part] for k, v in feeds.items()}
        outputs = []
        for session, reference in evaluators:
            margins = [session.run(["margin"], chunk)[0], reference.run(["margin"], chunk)[0]]
            if precision == "double":
                for got in margins:
                    assert got[:, 0].tobytes() == want[part].tobytes()
            outputs.append([m.tobytes() for m in margins])
        assert outputs[0] == outputs[1]

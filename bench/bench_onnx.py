"""onnxruntime time of the emitted graph vs a minimal hand-built graph of the same model.

The model: standardization and a binary logistic regression over the seven numeric
compressor readings (invented demo data). The minimal graph is what one would write by
hand, Sub, Div, MatMul, Add, Sigmoid, with none of the plan's guards, missing-value
handling or exact summation order; it outputs the probability only. Both run in this
process on the same rows; the ratios are of medians.

    python bench/bench_onnx.py [--rows 1000000] [--repeats 15]
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
import onnx
import onnxruntime
from onnx import TensorProto, helper, numpy_helper
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

import scorewright
from scorewright.demo_data import FEATURES_NUMERIC, compressor_readings
from scorewright.emit import emitter
from scorewright.plan import build_plan
from scorewright.reference import score_matrix


def fitted_model():
    frame = compressor_readings(n=3000, seed=7).dropna(subset=list(FEATURES_NUMERIC))
    X, y = frame[list(FEATURES_NUMERIC)], frame["fault_30d"]
    est = make_pipeline(StandardScaler(), LogisticRegression(max_iter=5000)).fit(X, y)
    return est, scorewright.freeze(est, name="bench_fault")


def minimal_graph(est) -> bytes:
    scaler, logit = est[0], est[1]
    f = len(FEATURES_NUMERIC)
    inits = [
        numpy_helper.from_array(scaler.mean_.astype(np.float64), "mean"),
        numpy_helper.from_array(scaler.scale_.astype(np.float64), "scale"),
        numpy_helper.from_array(logit.coef_.T.astype(np.float64), "weights"),
        numpy_helper.from_array(logit.intercept_.astype(np.float64), "intercept"),
    ]
    nodes = [
        helper.make_node("Sub", ["x", "mean"], ["centred"]),
        helper.make_node("Div", ["centred", "scale"], ["scaled"]),
        helper.make_node("MatMul", ["scaled", "weights"], ["product"]),
        helper.make_node("Add", ["product", "intercept"], ["logit"]),
        helper.make_node("Sigmoid", ["logit"], ["p1"]),
    ]
    graph = helper.make_graph(
        nodes, "minimal", [helper.make_tensor_value_info("x", TensorProto.DOUBLE, ["N", f])],
        [helper.make_tensor_value_info("p1", TensorProto.DOUBLE, ["N", 1])], initializer=inits)
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 28)], ir_version=10)
    return model.SerializeToString()


def session(content: bytes, threads: int):
    options = onnxruntime.SessionOptions()
    options.intra_op_num_threads = threads
    return onnxruntime.InferenceSession(content, options, providers=["CPUExecutionProvider"])


def medians(runs: dict, repeats: int, inner: int) -> dict:
    """Median seconds per call of each run, timed in turn within every repeat so that a
    busy machine slows all of them alike."""
    samples: dict = {name: [] for name in runs}
    for fn in runs.values():
        fn()  # warm up: first runs allocate
    for _ in range(repeats):
        for name, fn in runs.items():
            start = time.perf_counter()
            for _ in range(inner):
                fn()
            samples[name].append((time.perf_counter() - start) / inner)
    return {name: statistics.median(v) for name, v in samples.items()}


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=15)
    parser.add_argument("--threads", type=int, default=0,
                        help="onnxruntime intra-op threads (0: its default)")
    args = parser.parse_args()
    est, model = fitted_model()
    plan = build_plan(model)
    contents = {
        "minimal graph": minimal_graph(est),
        "emitted, matrix input": emitter("onnx")(model, {"inputs": "matrix"})[0].content,
        "emitted, per-feature inputs": emitter("onnx")(model, {})[0].content,
    }
    sessions = {name: session(c, args.threads) for name, c in contents.items()}
    frame = compressor_readings(n=args.rows, seed=11)[list(FEATURES_NUMERIC)]
    big = np.ascontiguousarray(frame.fillna(frame.mean()).to_numpy(dtype=np.float64))
    one = np.ascontiguousarray(big[:1])

    def feeds(name, x):
        if name == "minimal graph":
            return {"x": x}
        if name.endswith("matrix input"):
            return {"features": x}
        return {n: np.ascontiguousarray(x[:, [j]]) for j, n in enumerate(FEATURES_NUMERIC)}

    def runs(x):
        out = {}
        for name, s in sessions.items():
            f = feeds(name, x)
            out[name] = lambda s=s, f=f: s.run(None, f)
        return out

    print(f"onnxruntime {onnxruntime.__version__} CPU, threads {args.threads or 'default'}, "
          f"medians of {args.repeats}")
    batch = medians(runs(big), args.repeats, inner=1)
    single = medians(runs(one), args.repeats, inner=2000)
    for name, content in contents.items():
        nodes = len(onnx.load_from_string(content).graph.node)
        print(f"  {name:28} {nodes:3} nodes: {args.rows:,} rows {batch[name] * 1e3:7.1f} ms "
              f"(ratio {batch[name] / batch['minimal graph']:.2f}), 1 row "
              f"{single[name] * 1e6:6.1f} us (ratio {single[name] / single['minimal graph']:.2f})")
    # What the minimal graph gives up: agreement with the validated model.
    sample = big[:200_000]
    ref = score_matrix(plan, sample)
    got_min = sessions["minimal graph"].run(None, {"x": sample})[0][:, 0]
    got = sessions["emitted, matrix input"].run(None, {"features": sample})
    print(f"  on {len(sample):,} rows: max |p1 - reference| minimal "
          f"{np.abs(got_min - ref['probabilities'][:, 1]).max():.3g}, emitted "
          f"{np.abs(got[1][:, 1] - ref['probabilities'][:, 1]).max():.3g}; emitted margins "
          f"bit-identical: {np.array_equal(got[0], ref['margins'])}")


if __name__ == "__main__":
    main()

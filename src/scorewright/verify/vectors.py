"""Conformance vectors: inputs and reference outputs, committed as data in shared/.

Floats are stored as C99 hex-float text (`float.hex`), so NaN, +-inf, -0.0 and
subnormals survive exactly; numeric inputs are hex text or null, categorical
inputs their JSON value or null.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..plan import Plan, build_plan
from .cases import edge_rows, random_rows
from .harness import expected_outputs

FORMAT = "scorewright-conformance-vectors"
RANDOM_ROWS = 150


def _hex(x) -> str:
    return float(x).hex()


def _encode_row(plan: Plan, row: dict) -> dict:
    out = {}
    for inp in plan.inputs:
        v = row.get(inp.name)
        if inp.kind == "numeric":
            out[inp.name] = None if v is None else _hex(v)
        else:
            out[inp.name] = v
    return out


def _decode_row(plan: Plan, row: dict) -> dict:
    out = {}
    for inp in plan.inputs:
        v = row.get(inp.name)
        out[inp.name] = float.fromhex(v) if inp.kind == "numeric" and v is not None else v
    return out


def make_vectors(model) -> dict:
    plan = build_plan(model)
    cases = edge_rows(plan)
    rows = [r for _, r in cases] + random_rows(plan, RANDOM_ROWS, seed=1)
    labels = [name for name, _ in cases] + [f"random row {i}" for i in range(RANDOM_ROWS)]
    exp = expected_outputs(plan, rows)
    expected = []
    for i in range(len(rows)):
        item = {"margins": [_hex(v) for v in exp["margins"][i]]}
        if "probabilities" in exp:
            item["probabilities"] = [_hex(v) for v in exp["probabilities"][i]]
        if "class_index" in exp:
            item["class_index"] = int(exp["class_index"][i])
        else:
            item["value"] = _hex(exp["value"][i])
            if "rate" in exp:
                item["rate"] = _hex(exp["rate"][i])
        expected.append(item)
    return {"format": FORMAT, "model": model.name, "model_sha256": model.sha256,
            "labels": labels, "rows": [_encode_row(plan, r) for r in rows],
            "expected": expected}


def load_vectors(path: Path, plan: Plan):
    """(labels, rows, expected outputs in the shapes of reference.score_matrix)."""
    doc = json.loads(Path(path).read_text(encoding="utf-8"))
    if doc.get("format") != FORMAT or doc.get("model_sha256") != plan.sha256:
        raise ValueError(f"{path}: vectors are not for model {plan.sha256[:12]}")
    rows = [_decode_row(plan, r) for r in doc["rows"]]
    exp = doc["expected"]
    out = {"margins": np.array([[float.fromhex(v) for v in e["margins"]] for e in exp]),
           "cut": plan.cut, "link": plan.link}
    if plan.task == "regression":
        out["value"] = np.array([float.fromhex(e["value"]) for e in exp])
        if plan.offset is not None:
            out["rate"] = np.array([float.fromhex(e["rate"]) for e in exp])
    else:
        if plan.has_probabilities:
            out["probabilities"] = np.array([[float.fromhex(v) for v in e["probabilities"]]
                                             for e in exp])
        out["class_index"] = np.array([e["class_index"] for e in exp], dtype=np.int64)
    return doc["labels"], rows, out


def write_json(path: Path, doc: dict) -> None:
    path.write_text(json.dumps(doc, indent=1, ensure_ascii=True, allow_nan=False) + "\n",
                    encoding="ascii")


__all__ = ["make_vectors", "load_vectors", "write_json"]

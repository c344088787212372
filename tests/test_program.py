"""The scoring program: its scalar and numpy op tables give the same bits, and it
reproduces every committed conformance vector (shared/conformance/, written by the
reference evaluator before it became the program's interpreter) bit for bit."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

import models
from scorewright.errors import ScorewrightError
from scorewright.model import load_model
from scorewright.plan import build_plan
from scorewright.program import PRIMITIVES, Const, lower, run_matrix, run_row
from scorewright.reference import encode_rows
from scorewright.verify.cases import edge_rows, random_rows

CONFORMANCE = Path(__file__).resolve().parent.parent / "shared" / "conformance"


def _bits(x) -> str:
    return float(x).hex()


def _as_score(program, out):
    plan = program.plan
    margins = [out[f"margin_{k}"] for k in range(plan.n_outputs)]
    if plan.task == "regression":
        return margins, None, None, out["value"]
    probs = [out[f"probability_{j}"] for j in range(len(plan.classes))] \
        if plan.has_probabilities else []  # a decision head: margins and class alone
    return margins, probs, out["class_index"], None


def _check_rows(plan, rows):
    """Row by row (the scalar table) and all rows at once (the numpy table): same bits."""
    program = lower(plan)
    scalar = [_as_score(program, run_row(program, row)) for row in rows]
    margins, probs, cls, value = _as_score(program, run_matrix(program, encode_rows(plan, rows)))
    for i, (m1, p1, c1, v1) in enumerate(scalar):
        assert [_bits(x) for x in m1] == [_bits(col[i]) for col in margins], rows[i]
        if p1 is not None:
            assert [_bits(x) for x in p1] == [_bits(col[i]) for col in probs], rows[i]
            assert c1 == cls[i], rows[i]
        else:
            assert _bits(v1) == _bits(value[i]), rows[i]


@pytest.mark.parametrize("name", sorted(models.BUILDERS))
@pytest.mark.parametrize("precision,exp", [("double", "libm"), ("double", "portable"),
                                           ("float", "libm")])
def test_scalar_and_numpy_tables_give_the_same_bits(name, precision, exp):
    if precision == "float" and name in models.DOUBLE_ONLY:
        with pytest.raises(ScorewrightError, match=models.SINGLE_REFUSED):
            lower(build_plan(models.build(name).model, precision, exp))
        return
    plan = build_plan(models.build(name).model, precision, exp)
    rows = [r for _, r in edge_rows(plan)] + random_rows(plan, 60, seed=3)
    _check_rows(plan, rows)


@pytest.mark.parametrize("path", sorted(CONFORMANCE.glob("*.model.json")), ids=lambda p: p.name)
def test_program_reproduces_the_conformance_vectors(path):
    """The committed vectors (shared/conformance/, made by the reference evaluator) are the
    outside record: the program reproduces every expected output bit for bit."""
    model = load_model(path)
    plan = build_plan(model)
    doc = json.loads(path.with_name(path.name.replace(".model.", ".vectors.")).read_text())
    program = lower(plan)
    checked = 0
    for case, expected in zip(doc["rows"], doc["expected"], strict=True):
        row = {inp.name: (float.fromhex(v) if inp.kind == "numeric" and v is not None else v)
               for inp in plan.inputs for v in [case.get(inp.name)]}
        margins, probs, cls, value = _as_score(program, run_row(program, row))
        assert [_bits(m) for m in margins] == expected["margins"]
        if "class_index" in expected:
            assert [_bits(p) for p in probs] == expected.get("probabilities", [])
            assert cls == expected["class_index"]
        else:
            assert _bits(value) == expected["value"]
        if "rate" in expected:  # a model with an offset or exposure
            assert _bits(run_row(program, row)["rate"]) == expected["rate"]
        checked += 1
    assert checked > 100


def test_every_operation_is_a_primitive_in_single_assignment_form():
    for name in sorted(models.BUILDERS):
        program = lower(build_plan(models.build(name).model))
        seen: set[str] = set()
        for op in program.ops:
            assert op.op in PRIMITIVES
            for arg in op.args:
                assert isinstance(arg, Const) or arg in seen, (op, "reads a later name")
            assert op.dest not in seen
            seen.add(op.dest)
        assert [op.attr for op in program.ops if op.op == "output"] == list(program.outputs)


def test_an_input_no_term_uses_is_not_read():
    plan = build_plan(models.build("fault_binary").model)
    program = lower(plan)
    used = {t.input for t in plan.terms}
    read = {op.attr for op in program.ops if op.op.startswith("read_")}
    assert read == used


def test_fold_computes_what_it_can_in_the_given_precision():
    """fold: a select needs only the operand it chooses; exp, reads and unknown names stay
    unknown; float32 folding rounds each operation to float32 (numpy's float32 arithmetic,
    IEEE single), as a float target computes."""
    import numpy as np

    from scorewright.program import Op, fold

    ops = [Op("x", "read_real", (), attr=0),
           Op("a", "select", ("f", Const(0.1), "x")),
           Op("b", "add", ("a", Const(0.2))),
           Op("c", "exp", ("b",)),
           Op("d", "mul", ("x", Const(2.0)))]
    double = fold(ops, {"f": True})
    assert double["b"] == 0.1 + 0.2 and "c" not in double and "d" not in double
    single = fold(ops, {"f": True}, np.float32)
    assert single["b"] == np.float32(0.1) + np.float32(0.2) and single["b"] != double["b"]
    assert "a" not in fold(ops, {"f": False}) and "a" not in fold(ops, {})


def test_the_oracle_holds_its_numpy_table_to_the_scalar_one(monkeypatch):
    """verify's oracle scores with the numpy table and checks rows against the scalar one
    (every row of a small program); a numpy result one ULP off is an internal error."""
    import numpy as np

    from scorewright.verify import harness

    plan = build_plan(models.build("fault_binary").model)
    rows = random_rows(plan, 50, seed=1)
    harness.expected_outputs(plan, rows)
    real = harness.score_matrix

    def one_ulp_off(plan, matrix):
        out = real(plan, matrix)
        out["margins"][7, 0] = np.nextafter(out["margins"][7, 0], np.inf)
        return out

    monkeypatch.setattr(harness, "score_matrix", one_ulp_off)
    with pytest.raises(ScorewrightError, match="disagree on check row 7"):
        harness.expected_outputs(plan, rows)

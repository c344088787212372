"""The plain-Python target: bit-identical with the reference evaluator, within 1e-12 of
scikit-learn (the reference library), standard library only, CSV and in-memory alike."""

from __future__ import annotations

import ast
import csv
import decimal
import importlib.util
import io
import math
import subprocess
import sys

import numpy as np
import pytest

import models
from scorewright.emit import emitter
from scorewright.plan import build_plan
from scorewright.reference import score_row
from scorewright.verify.cases import edge_rows
from scorewright.verify.runners.python import csv_cell


def _write(model, tmp_path):
    (art,) = emitter("python")(model, {})
    path = tmp_path / art.name
    path.write_bytes(art.content)
    return path


def _import(path):
    spec = importlib.util.spec_from_file_location(f"scorer_{abs(hash(path))}", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _bits(values):
    return [float(v).hex() for v in values]


@pytest.mark.parametrize("name", sorted(models.WALKED))
def test_scorer_is_bit_identical_to_reference_and_close_to_scikit_learn(name, tmp_path):
    tm = models.build(name)
    plan = build_plan(tm.model)
    scorer = _import(_write(tm.model, tmp_path))
    rows = tm.frame.to_dict("records") + [r for _, r in edge_rows(plan)]
    for row in rows:
        ref = score_row(plan, row)
        if plan.task == "multiclass":
            assert _bits(scorer.margin(row)) == _bits(ref.margins)
        else:
            assert _bits([scorer.margin(row)]) == _bits(ref.margins)
        if plan.task == "regression":
            assert _bits([scorer.predict(row)]) == _bits([ref.value])
        else:
            assert _bits(scorer.predict_proba(row)) == _bits(ref.probabilities)
            assert scorer.predict(row) == plan.classes[ref.class_index]
    frame_rows = tm.frame.to_dict("records")
    if plan.task == "regression":
        got = np.array(list(scorer.predict_many(frame_rows)))
        np.testing.assert_allclose(got, tm.estimator.predict(tm.frame), rtol=1e-12, atol=0)
    else:
        got = np.array([scorer.predict_proba(r) for r in frame_rows])
        np.testing.assert_allclose(got, tm.estimator.predict_proba(tm.frame), rtol=0, atol=1e-12)
        assert list(scorer.predict_many(frame_rows)) == list(tm.estimator.predict(tm.frame))


def test_imports_only_the_standard_library_and_runs_isolated(tmp_path):
    path = _write(models.build("fault_binary").model, tmp_path)
    tree = ast.parse(path.read_text())
    imported = {a.name.split(".")[0] for n in ast.walk(tree) if isinstance(n, ast.Import)
                for a in n.names}
    imported |= {n.module.split(".")[0] for n in ast.walk(tree)
                 if isinstance(n, ast.ImportFrom)}
    assert imported <= set(sys.stdlib_module_names), imported
    proc = subprocess.run([sys.executable, "-I", "-S", "-c",
                           f"import runpy; m = runpy.run_path({str(path)!r}); "
                           "print(m['predict']({}))"], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr


@pytest.mark.parametrize("name", ["mixed_scalers", "fault_type", "hostile", "alarms_poisson"])
def test_csv_and_in_memory_give_identical_results(name, tmp_path):
    """Including integer-coded categories, which arrive from CSV as text."""
    tm = models.build(name)
    plan = build_plan(tm.model)
    path = _write(tm.model, tmp_path)
    scorer = _import(path)
    rows = tm.frame.head(200).to_dict("records") + [r for _, r in edge_rows(plan)]
    names = list(plan.feature_names)
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\r\n")  # quotes a lone "\r" too
    writer.writerow(["unit_note"] + names)
    for i, row in enumerate(rows):
        writer.writerow([f"note {i}"] + [csv_cell(row.get(inp.name), inp)
                                         for inp in plan.inputs])
    proc = subprocess.run([sys.executable, "-I", "-S", str(path)], input=buf.getvalue(),
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    out = list(csv.DictReader(io.StringIO(proc.stdout)))
    assert len(out) == len(rows)
    for i, (row, scored) in enumerate(zip(rows, out)):
        assert scored["unit_note"] == f"note {i}"
        mem = scorer.score(row)
        for col in scorer.OUTPUT_COLUMNS:
            want = mem[col]
            assert scored[col] == (repr(want) if isinstance(want, float) else str(want)), col


def test_odd_values_follow_the_documented_missing_rules(tmp_path):
    """Wrong types never raise: they are missing (numeric) or unseen (categorical); a bool
    is 1/0 in a numeric column and unseen among text levels."""
    tm = models.build("fault_binary")
    scorer = _import(_write(tm.model, tmp_path))
    base = tm.frame.iloc[0].to_dict()
    as_missing = dict(base, discharge_temp_c=None)
    # Digits and blanks outside ASCII are not read as a number (float() would take
    # "\u0668\u0661" as 81): every SQL target reads ASCII only, so no target does.
    for odd in ("hot", decimal.Decimal("80.5"), 10 ** 400, math.inf, -math.inf,
                math.nan, "", "1_000", [1.0], "\u0668\u0661", "\u00a081"):
        assert scorer.margin(dict(base, discharge_temp_c=odd)) == scorer.margin(as_missing), odd
    # A bool is 1/0, as scikit-learn reads it in a numeric column.
    for flag in (True, False):
        assert scorer.margin(dict(base, discharge_temp_c=flag)) == scorer.margin(
            dict(base, discharge_temp_c=float(flag)))
    # Numeric text is read with the strict decimal grammar, blanks allowed.
    text = dict(base, discharge_temp_c=" 81.25 ")
    assert scorer.margin(text) == scorer.margin(dict(base, discharge_temp_c=81.25))
    unseen = dict(base, refrigerant="R999")
    for odd in (3.5, b"R404A", ("R404A",), False):
        assert scorer.margin(dict(base, refrigerant=odd)) == scorer.margin(unseen), odd
    # pandas' missing markers (what a row of a DataFrame with gaps holds) are missing, in
    # the scorer and in the reference alike.
    import pandas as pd
    from scorewright.plan import build_plan
    from scorewright.reference import score_row
    plan = build_plan(tm.model)
    missing = dict(base, refrigerant=None)
    for marker in (pd.NA, pd.NaT):
        row = dict(base, refrigerant=marker)
        assert scorer.margin(row) == scorer.margin(missing) == score_row(plan, row).margins[0]


def test_extreme_margins_never_raise(tmp_path):
    """Margins of +-1000 and inputs of +-1e308 (Python's math.exp raises on overflow)."""
    tm = models.build("fault_type")
    plan = build_plan(tm.model)
    scorer = _import(_write(tm.model, tmp_path))
    for value in (1e308, -1e308, 1.7976931348623157e308, 5e-324):
        row = dict(tm.frame.iloc[0].to_dict(), vibration_mm_s=value, motor_current_a=-value)
        p = scorer.predict_proba(row)
        assert all(math.isfinite(x) and 0.0 <= x <= 1.0 for x in p)
        assert _bits(p) == _bits(score_row(plan, row).probabilities)
    regression = _import(_write(models.build("alarms_poisson").model, tmp_path))
    for value in (1e308, -1e308):
        assert math.isfinite(regression.predict({"vibration_mm_s": value}))


def test_output_column_clash_is_a_clear_error(tmp_path):
    path = _write(models.build("spector").model, tmp_path)
    proc = subprocess.run([sys.executable, "-I", "-S", str(path)],
                          input="GPA,TUCE,PSI,margin\n3,20,1,x\n", capture_output=True, text=True)
    assert proc.returncode == 2 and "margin" in proc.stderr and "Traceback" not in proc.stderr


def test_hostile_names_stay_inside_string_literals(tmp_path):
    tm = models.build("hostile")
    path = _write(tm.model, tmp_path)
    tree = ast.parse(path.read_text())
    scorer = _import(path)
    assert scorer.FEATURES == tuple(f.name for f in tm.model.features)
    assert scorer.MODEL_NAME == tm.model.name
    top = [n for n in tree.body if isinstance(n, (ast.FunctionDef, ast.Assign, ast.Import,
                                                   ast.ImportFrom, ast.If, ast.Expr))]
    assert len(top) == len(tree.body)


@pytest.mark.parametrize("name", sorted(models.WALKED))
def test_the_fast_paths_change_no_bit(name, tmp_path):
    """The scorer tests a float inside the input's bound first and writes values used once
    inside their user; neither may change a bit. Each numeric input takes the bound itself,
    one ULP either side of it, a numpy float (a float subclass: the slow path), -0.0, a
    subnormal, an int and a bool; each categorical input a level, '', a non-str and None.
    The truth is the reference evaluator (scorewright.reference.score_row)."""
    tm = models.build(name)
    plan = build_plan(tm.model)
    scorer = _import(_write(tm.model, tmp_path))
    base = tm.frame.iloc[0].to_dict()
    rows = []
    for inp in plan.inputs:
        feature = plan.feature_names[inp.index]
        if inp.kind == "categorical":
            odd = [inp.levels[0], "", 7, None, str(inp.levels[-1])]
        else:
            b = float(inp.bound)
            odd = [b, -b, math.nextafter(b, math.inf), math.nextafter(-b, -math.inf),
                   math.nextafter(b, 0.0), np.float64(1.5), np.float64(math.nan), -0.0,
                   5e-324, 3, True, math.nan, "2.5"]
        rows += [dict(base, **{feature: v}) for v in odd]
    for row in rows:
        ref = score_row(plan, row)
        margins = scorer.margin(row)
        assert _bits(margins if plan.task == "multiclass" else [margins]) == _bits(ref.margins)
        if plan.task == "regression":
            assert _bits([scorer.predict(row)]) == _bits([ref.value])
        else:
            assert _bits(scorer.predict_proba(row)) == _bits(ref.probabilities)

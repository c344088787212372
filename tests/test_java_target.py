"""The Java target on the real javac and JVM: margins bit-identical with the reference
evaluator, the link within the profile's stated tolerance (StrictMath.exp against
glibc's exp, measured here), Java's own traps handled: javac's \\u pre-pass over user
text, Double.parseDouble's wider grammar (NaN, Infinity, hex, a trailing d), typed
values through the Map API, class names that are keywords."""

from __future__ import annotations

import math
import struct
import subprocess

import numpy as np
import pytest

import models
from scorewright.emit import emitter
from scorewright import portable_exp
from scorewright.emit.java import class_name
from scorewright.model import (CategoricalFeature, DesignColumn, FrozenModel, Head,
                               NumericFeature, ScalingStep)
from scorewright.plan import build_plan
from scorewright.reference import score_row
from scorewright.values import numeric_value
from scorewright.verify.profiles import load_profile
from scorewright.verify.runners.python import rows_csv, scored_table

pytestmark = pytest.mark.skipif(load_profile("java").missing_requirements() != [],
                                reason="needs javac and java")


def _compile(model, where, extra: str = "") -> str:
    (art,) = emitter("java")(model, {})
    (where / art.name).write_bytes(art.content)
    sources = [str(where / art.name)]
    if extra:
        (where / "Probe.java").write_text(extra, encoding="ascii")
        sources.append(str(where / "Probe.java"))
    proc = subprocess.run(["javac", "-Xlint:all", "-Werror", "-d", str(where), *sources],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    return art.name[:-len(".java")]


def _tool(where, name, stdin: bytes):
    return subprocess.run(["java", "-cp", str(where), name], input=stdin, capture_output=True)


def _model(name="probe", feature="reading", levels=("a", "b")) -> FrozenModel:
    feats = (NumericFeature(feature, 2.0, (ScalingStep("subtract", 1.5),
                                           ScalingStep("divide", 0.25))),
             CategoricalFeature("zone", tuple(levels), None, None))
    design = (DesignColumn(feature),) + tuple(DesignColumn("zone", (lv,)) for lv in levels)
    coefs = (0.75,) + tuple(0.5 * (i + 1) for i in range(len(levels)))
    return FrozenModel(name, feats, design, Head("binary", "logit", ("ok", "fault"), (-0.25,),
                                                 (coefs,), 0.0),
                       {"scorewright_version": "test", "source": "java test"}).sealed()


def test_user_text_cannot_escape_its_string_literal(tmp_path):
    """javac turns \\u000a into a line break before it reads a string: a name or level
    holding that text must stay text (common practice of Java code generators)."""
    levels = ('\\u000a"; System.exit(3); //', "\\u0022", "caf\u00e9", "\U0001f9ca", "a\\", "")
    model = _model(name="class", feature='x"\\u000d\n\r', levels=levels[:-1])
    name = _compile(model, tmp_path)
    assert name == "Model_class"
    plan = build_plan(model)
    rows = [{'x"\\u000d\n\r': "3", "zone": lv} for lv in levels]
    proc = _tool(tmp_path, name, rows_csv(plan, rows))
    assert proc.returncode == 0, proc.stderr
    for row, cells in zip(rows, scored_table(plan, proc.stdout), strict=True):
        ref = score_row(plan, row)
        assert float(cells[0]) == ref.margins[0], row


TEXTS = ["NaN", "Infinity", "-Infinity", "0x1p3", "1.5d", "2f", "1e999", "\u0661\u0662",
         " 1.25 ", "+.5e1", "7.", "-0", "1_000", "\u00a01", "\t3e-2\n"]


def test_text_reads_by_the_models_grammar_not_javas(tmp_path):
    """Double.parseDouble accepts NaN, Infinity, hex and a trailing d or f; the scorer
    reads text by the frozen model's decimal grammar (values.py) alone."""
    model = _model()
    name = _compile(model, tmp_path)
    plan = build_plan(model)
    rows = [{"reading": text, "zone": "a"} for text in TEXTS]
    proc = _tool(tmp_path, name, rows_csv(plan, rows))
    assert proc.returncode == 0, proc.stderr
    for row, cells in zip(rows, scored_table(plan, proc.stdout), strict=True):
        assert float(cells[0]) == score_row(plan, row).margins[0], (
            row, numeric_value(row["reading"]))


PROBE = """
import java.math.BigInteger;
import java.util.HashMap;
import java.util.Map;

public class Probe {
    public static void main(String[] args) {
        Object[] values = {null, Boolean.TRUE, Boolean.FALSE, 3, 3L, (short) 3, (byte) -2,
            new BigInteger("123456789012345678901234567890"), 2.5, 2.5f, Double.NaN,
            Double.POSITIVE_INFINITY, -0.0, "4.5", "", " ", "true"};
        for (Object v : values) {
            Map<String, Object> row = new HashMap<>();
            row.put("load", v);
            row.put("bay", v);
            double[] o = %s.outputs(row);
            StringBuilder line = new StringBuilder();
            for (double x : o) {
                line.append(Long.toHexString(Double.doubleToRawLongBits(x))).append(' ');
            }
            System.out.println(line.toString().trim());
        }
    }
}
"""


def test_typed_values_through_the_map_api(tmp_path):
    """Java values of every kind a caller holds (boxed numbers, BigInteger, Boolean,
    NaN, text, null) read as values.py reads their Python counterparts."""
    feats = (NumericFeature("load", None, (ScalingStep("subtract", 1.0),), boolean=True),
             CategoricalFeature("bay", (-2, 0, 1, 3), None, None))
    design = (DesignColumn("load"),) + tuple(DesignColumn("bay", (lv,)) for lv in (-2, 0, 1, 3))
    head = Head("regression", "identity", None, (0.5,), ((1.5, 0.25, -1.0, 2.0, 4.0),), None)
    model = FrozenModel("bays", feats, design, head,
                        {"scorewright_version": "test", "source": "java test"}).sealed()
    name = _compile(model, tmp_path, PROBE % class_name(build_plan(model)))
    proc = subprocess.run(["java", "-cp", str(tmp_path), "Probe"], capture_output=True,
                          text=True)
    assert proc.returncode == 0, proc.stderr
    python_values = [None, True, False, 3, 3, 3, -2, 123456789012345678901234567890, 2.5,
                     2.5, math.nan, math.inf, -0.0, "4.5", "", " ", "true"]
    plan = build_plan(model)
    assert name
    for value, line in zip(python_values, proc.stdout.splitlines(), strict=True):
        ref = score_row(plan, {"load": value, "bay": value})
        got = [struct.unpack("<d", struct.pack("<Q", int(h, 16)))[0] for h in line.split()]
        assert got == [ref.margins[0], ref.value], value


def test_the_tool_refuses_bad_input_with_status_2(tmp_path):
    model = _model()
    name = _compile(model, tmp_path)
    for stdin, words in ((b"", "no header"), (b"reading,margin\r\n1,2\r\n", "margin"),
                         (b"reading,zone\r\n\xff,a\r\n", "unreadable")):
        proc = _tool(tmp_path, name, stdin)
        assert proc.returncode == 2 and words in proc.stderr.decode(), proc.stderr


def test_exp_tolerance_is_what_the_jvm_measures(tmp_path):
    """StrictMath.exp against glibc's exp (math.exp): at most 1 ULP apart on 20,000
    arguments over the link's range, which the profile's 3 ULP on probabilities covers
    (1/(1+t) adds at most one rounding to t's error)."""
    probe = """
public class Probe {
    public static void main(String[] args) throws Exception {
        java.io.BufferedReader in = new java.io.BufferedReader(
            new java.io.InputStreamReader(System.in));
        StringBuilder out = new StringBuilder();
        for (String s = in.readLine(); s != null; s = in.readLine()) {
            double x = Double.longBitsToDouble(Long.parseUnsignedLong(s, 16));
            out.append(Long.toHexString(Double.doubleToRawLongBits(StrictMath.exp(x))));
            out.append('\\n');
        }
        System.out.print(out);
    }
}
"""
    _compile(_model(), tmp_path, probe)
    xs = np.random.default_rng(7).uniform(-708.0, 709.0, 20000)
    stdin = "".join(f"{x.view(np.uint64):x}\n" for x in xs)
    proc = subprocess.run(["java", "-cp", str(tmp_path), "Probe"], input=stdin,
                          capture_output=True, text=True)
    got = np.array([int(h, 16) for h in proc.stdout.split()], dtype=np.uint64).view(np.int64)
    want = np.array([math.exp(x) for x in xs]).view(np.int64)
    assert np.abs(got - want).max() <= 1
    tol = load_profile("java").tolerance
    assert tol.margin_ulps == 0 and tol.probability_ulps == 3


def test_scorer_agrees_on_a_wide_and_a_many_level_model(tmp_path):
    """Past the JVM's limits for one method (64 KB of bytecode) and one class (65,535
    constants): 1,500 terms in parts, 5,000 levels in a class of their own."""
    for model in (models.wide_model(1500), models.many_levels_model(5000)):
        name = _compile(model, tmp_path)
        plan = build_plan(model)
        rows = [{f.name: (1.0 + i if f.name != "site" else f"site-{i:05d}")
                 for f in plan.inputs} for i in range(3)]
        proc = _tool(tmp_path, name, rows_csv(plan, rows))
        assert proc.returncode == 0, proc.stderr
        for row, cells in zip(rows, scored_table(plan, proc.stdout), strict=True):
            assert float(cells[0]) == score_row(plan, row).margins[0]


def test_portable_exp_gives_the_reference_bits(tmp_path):
    """--portable-exp: a log-link model whose value is exp(x) itself, on 5,000 arguments
    over the guarded range: the Java class gives portable_exp.exp's bits, every one."""
    head = Head("regression", "log", None, (0.0,), ((1.0,),), None)
    model = FrozenModel("exp_probe", (NumericFeature("x", None),), (DesignColumn("x"),), head,
                        {"scorewright_version": "test", "source": "java test"}).sealed()
    (art,) = emitter("java")(model, {"portable_exp": True})
    (tmp_path / art.name).write_bytes(art.content)
    proc = subprocess.run(["javac", "-Xlint:all", "-Werror", "-d", str(tmp_path),
                           str(tmp_path / art.name)], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    plan = build_plan(model, exp="portable")
    xs = np.random.default_rng(11).uniform(-708.0, 709.0, 5000)
    rows = [{"x": float(x)} for x in xs]
    proc = _tool(tmp_path, art.name[:-len(".java")], rows_csv(plan, rows))
    assert proc.returncode == 0, proc.stderr
    got = [float(cells[1]) for cells in scored_table(plan, proc.stdout)]
    assert [g.hex() for g in got] == [portable_exp.exp(float(x)).hex() for x in xs]

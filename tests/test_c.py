"""The C target, built by the real gcc (and g++) of this machine and run as native programs.

Double: bit-identical with the reference evaluator on x86-64 (glibc's exp is the
one CPython's math.exp calls). Float: within the tolerance stated in
targets/c-float.toml, checked against the reference evaluator of the float plan.
Every test model, on its own fitted rows (datasets shipped with scikit-learn and
statsmodels, the project's invented compressor data), the edge rows of
verify.cases and random rows.
"""

from __future__ import annotations

import math
import re
import shutil
import subprocess
import sys
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import models
import scorewright
from scorewright.emit import emitter
from scorewright.plan import build_plan
from scorewright.reference import score_row
from scorewright.values import category_code
from scorewright.verify.cases import edge_rows, random_rows
from scorewright.verify.compare import compare, ulp_distance
from scorewright.verify.profiles import load_profile
from scorewright.verify.runners import c as crunner

STRICT = ["-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wshadow",
          "-Wdouble-promotion", "-Werror", "-O2", "-ffp-contract=off"]
CXX = ["g++", "-x", "c++", "-Wall", "-Wextra", "-Werror"]
NAMES = sorted(models.WALKED)
MEASURED: dict = {}


def _require(*commands):
    lacks = [c for c in commands if shutil.which(c) is None]
    assert not lacks, f"the C target tests need {lacks} on PATH"


def _frame_rows(frame: pd.DataFrame) -> list[dict]:
    rows = []
    for rec in frame.to_dict("records"):
        rows.append({k: (None if isinstance(v, float) and math.isnan(v) else
                         v.item() if hasattr(v, "item") else v) for k, v in rec.items()})
    return rows


@lru_cache(maxsize=None)
def _rows(name: str) -> list[dict]:
    tm = models.build(name)
    plan = build_plan(tm.model)
    return _frame_rows(tm.frame) + [r for _, r in edge_rows(build_plan(tm.model, "float"))] \
        + [r for _, r in edge_rows(plan)] + random_rows(plan, 200, seed=3)


class Built:
    def __init__(self, name: str, precision: str, root: Path):
        _require("gcc")
        self.model = models.build(name).model
        self.plan = build_plan(self.model, precision)
        self.dir = root / f"{name}-{precision}"
        self.dir.mkdir()
        for art in emitter("c")(self.model, {"precision": precision}):
            (self.dir / art.name).write_bytes(art.content)
        options = {"precision": precision, "cflags": STRICT}
        self.exe = crunner.build_driver(self.dir, self.model, options, self.dir)
        self.rows = _rows(name)
        self.data = self.dir / "rows.bin"
        self.data.write_bytes(crunner.encode_rows(self.plan, self.rows).tobytes())

    def run(self, *flags) -> str:
        proc = subprocess.run([str(self.exe), *flags, str(self.data)], capture_output=True,
                              text=True, timeout=120)
        assert proc.returncode == 0 and not proc.stderr, (proc.returncode, proc.stderr[-500:])
        return proc.stdout


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    root = tmp_path_factory.mktemp("c")
    cache = {}

    def get(name, precision):
        if (name, precision) not in cache:
            cache[(name, precision)] = Built(name, precision, root)
        return cache[(name, precision)]
    return get


def _expected(plan, rows) -> dict:
    scores = [score_row(plan, r) for r in rows]
    out = {"margins": np.array([s.margins for s in scores]), "cut": plan.cut}
    if plan.task == "regression":
        out["value"] = np.array([s.value for s in scores])
    else:
        out["probabilities"] = np.array([s.probabilities for s in scores])
        out["class_index"] = np.array([s.class_index for s in scores])
    return out


def _binned_as_floats(plan, rows) -> list[dict]:
    """The rows with each value of a binned or transformed feature in float range rounded
    to float, as the float scorer holds it: a value within half a float ULP of a bin edge
    or of a transform's domain edge is on the side its float is (single precision cannot
    tell it apart; stated in the c-float profile)."""
    binned = [inp.name for inp in plan.inputs if inp.kind == "numeric" and inp.steps
              and inp.steps[0].value is None]
    out = []
    for row in rows:
        row = dict(row)
        for name in binned:
            v = row.get(name)
            if isinstance(v, float) and math.isfinite(v) and abs(v) <= 1e36:
                row[name] = float(np.float32(v))
        out.append(row)
    return out


def _bits(a) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.float64).view(np.uint64)


def _batch(text: str) -> np.ndarray:
    return np.array([[float.fromhex(x) for x in line.split()] for line in text.splitlines()])


@pytest.mark.parametrize("name", NAMES)
def test_double_is_bit_identical_to_the_reference(name, built):
    b = built(name, "double")
    # --traps: FP invalid, divide-by-zero and overflow kill the process (SIGFPE), so this
    # also proves no edge row makes the scorer compute with a NaN or overflow.
    got = crunner.parse_output(b.plan, b.run("--traps"), "gcc")
    want = _expected(b.plan, b.rows)
    assert (_bits(got.margins) == _bits(want["margins"])).all()
    # The batch path is checked without traps: GCC vectorizes its quiet tests into
    # SSE2's signalling compares (a NaN sets FE_INVALID; no trap by default).
    batch = _batch(b.run("--batch"))
    if b.plan.task == "regression":
        assert (_bits(got.value) == _bits(want["value"])).all()
        assert (_bits(batch[:, 0]) == _bits(want["value"])).all()
    else:
        assert (_bits(got.probabilities) == _bits(want["probabilities"])).all()
        assert (got.class_index == want["class_index"]).all()
        width = batch.shape[1]
        assert (_bits(batch) == _bits(want["probabilities"][:, -width:])).all()


@pytest.mark.parametrize("name", NAMES)
def test_float_is_within_its_stated_tolerance(name, built):
    b = built(name, "float")
    tol = load_profile("c-float").tolerance
    got = crunner.parse_output(b.plan, b.run("--traps"), "gcc")
    want = _expected(b.plan, _binned_as_floats(b.plan, b.rows))
    result = compare(want, got, tol)
    assert result.ok, (result.failing_count, result.reasons)
    m_err = np.abs(got.margins - want["margins"])
    MEASURED[name] = {
        "margin_abs(|m|<=100)": float(m_err[np.abs(want["margins"]) <= 100].max()),
        "margin_f32_ulps(err>1e-5)": float(ulp_distance(want["margins"], got.margins,
                                                        "float")[m_err > 1e-5].max(initial=0)),
    }
    if b.plan.task == "regression":
        rel = np.abs(got.value - want["value"]) / np.maximum(np.abs(want["value"]), 1e-300)
        MEASURED[name]["value_rel"] = float(rel.max())
        MEASURED[name]["value_f32_ulps"] = float(ulp_distance(want["value"], got.value,
                                                              "float").max())
    else:
        p_err = np.abs(got.probabilities - want["probabilities"])
        MEASURED[name]["probability_abs"] = float(p_err.max())
        MEASURED[name]["probability_f32_ulps(p>=1e-3)"] = float(ulp_distance(
            want["probabilities"], got.probabilities, "float")[want["probabilities"] >= 1e-3]
            .max())
    print(f"\nc-float {name}: {MEASURED[name]}")
    # The batch path (double rows clamped, then narrowed) gives the row path's bits.
    batch = _batch(b.run("--batch"))
    single = got.value[:, None] if b.plan.task == "regression" else \
        got.probabilities[:, -batch.shape[1]:]
    assert (_bits(batch) == _bits(single)).all()


def test_float_tolerance_is_not_vacuous(built):
    """The float scorer really computes in float: it differs from the double reference."""
    b = built("fault_type", "float")
    got = crunner.parse_output(b.plan, b.run(), "gcc")
    want = _expected(b.plan, b.rows)
    assert (_bits(got.margins) != _bits(want["margins"])).mean() > 0.5


@pytest.mark.parametrize("precision", ["double", "float"])
def test_unseen_and_missing_codes_in_batch_rows(precision, built):
    """A batch row's code: NaN or -1 missing; -2, 99, 1.5, -7 or +inf unseen."""
    b = built("fault_binary", precision)
    plan = b.plan
    feature = next(i for i in plan.inputs if i.kind == "categorical")
    base = crunner.encode_rows(plan, [b.rows[0]])[0]
    matrix = np.tile(base, (8, 1))
    matrix[:, feature.index] = [math.nan, -1, -2, 99, 1.5, -7, math.inf, 0]
    path = b.dir / "codes.bin"
    path.write_bytes(matrix.astype("<f8").tobytes())
    proc = subprocess.run([str(b.exe), "--batch", str(path)], capture_output=True, text=True,
                          check=True)
    got = _batch(proc.stdout)[:, 0]
    rows = [dict(b.rows[0], **{feature.name: v})
            for v in (None, None, "??", "??", "??", "??", "??", feature.levels[0])]
    want = np.array([score_row(plan, r).probabilities[1] for r in rows])
    if precision == "double":
        assert (_bits(got) == _bits(want)).all()
    else:
        assert np.abs(got - want).max() <= load_profile("c-float").tolerance.probability_abs
    # missing takes the fill level, unseen the zero row: they differ for this model
    assert feature.fill_code is not None and got[0] != got[2]


def _c_escape_bytes(data: bytes) -> str:
    return "".join(f"\\{b:03o}" for b in data)


@pytest.mark.parametrize("name", ["hostile", "mixed_scalers", "fault_binary"])
def test_category_code_matches_the_values_module(name, tmp_path):
    _require("gcc")
    model = models.build(name).model
    plan = build_plan(model)
    for art in emitter("c")(model, {"prefix": "cc"}):
        (tmp_path / art.name).write_bytes(art.content)
    cases = []
    for inp in plan.inputs:
        texts = [str(x) for x in inp.levels] + ["", "R29", "R2900", "*/", "3.0", " 1", "\n"] \
            if inp.kind == "categorical" else ["x"]
        cases += [(inp.index, t) for t in texts]
    # The probe program holds the strings as octal escapes, written here independently
    # of the emitter's own escaping.
    first = next(i.index for i in plan.inputs if i.kind == "categorical")
    calls = "\n".join(f'    printf("%d\\n", cc_category_code({i}, "{_c_escape_bytes(t.encode())}"));'
                      for i, t in cases)
    probe = tmp_path / "probe.c"
    probe.write_text(f'#include <stdio.h>\n#include "cc.h"\nint main(void)\n{{\n{calls}\n'
                     f'    printf("%d\\n", cc_category_code({first}, NULL));\n'
                     f'    printf("%d\\n", cc_category_code(-5, "x"));\n    return 0;\n}}\n')
    exe = tmp_path / "probe"
    subprocess.run(["gcc", *STRICT, "-I", str(tmp_path), "-o", str(exe), str(probe),
                    str(tmp_path / "cc.c"), "-lm"], check=True, capture_output=True)
    out = [int(x) for x in subprocess.run([str(exe)], capture_output=True, text=True,
                                          check=True).stdout.split()]
    want = []
    for i, t in cases:
        inp = plan.inputs[i]
        if inp.kind != "categorical":
            want.append(-2)
            continue
        # Integer levels: C matches the exact decimal text only.
        code = category_code(inp.levels, t)
        if inp.integer_levels and t not in [str(x) for x in inp.levels] and code >= 0:
            code = -2
        want.append(code)
    assert out == want + [-1, -2]


def _cxx_and_c_compile(name, precision, tmp_path):
    model = models.build(name).model
    for art in emitter("c")(model, {"precision": precision, "prefix": "k"}):
        (tmp_path / art.name).write_bytes(art.content)
    src = tmp_path / "k.c"
    for cmd in (["gcc", *STRICT, "-c", str(src), "-o", str(tmp_path / "c.o")],
                [*CXX, "-c", str(src), "-o", str(tmp_path / "cxx.o")]):
        proc = subprocess.run(cmd, capture_output=True, text=True)
        assert proc.returncode == 0 and not proc.stderr, (cmd[0], proc.stderr)


@pytest.mark.parametrize("precision", ["double", "float"])
@pytest.mark.parametrize("name", ["hostile", "fault_type", "alarms_poisson"])
def test_compiles_without_a_warning_as_c99_and_as_cxx(name, precision, tmp_path):
    _require("gcc", "g++")
    _cxx_and_c_compile(name, precision, tmp_path)


def test_header_is_usable_from_cxx(tmp_path):
    """A C++ program includes the header and links the gcc-built object (extern "C")."""
    _require("gcc", "g++")
    model = models.build("spector").model
    for art in emitter("c")(model, {"prefix": "sp"}):
        (tmp_path / art.name).write_bytes(art.content)
    main = tmp_path / "main.cpp"
    main.write_text('#include <cstdio>\n#include "sp.h"\nint main() {\n'
                    '    sp_input in = {3.0, 20.0, 1.0};\n'
                    '    std::printf("%a\\n", sp_probability(&in));\n    return 0;\n}\n')
    subprocess.run(["gcc", *STRICT, "-c", str(tmp_path / "sp.c"), "-o", str(tmp_path / "sp.o")],
                   check=True)
    subprocess.run(["g++", "-Wall", "-Wextra", "-Werror", "-I", str(tmp_path), str(main),
                    str(tmp_path / "sp.o"), "-lm", "-o", str(tmp_path / "m")], check=True)
    out = subprocess.run([str(tmp_path / "m")], capture_output=True, text=True, check=True)
    want = score_row(build_plan(model), {"GPA": 3.0, "TUCE": 20.0, "PSI": 1.0})
    assert float.fromhex(out.stdout.strip()) == want.probabilities[1]


def test_two_models_link_into_one_program(tmp_path):
    """Two models, and the same model twice, under different prefixes: no symbol clash."""
    _require("gcc")
    binary = models.build("fault_binary").model
    multi = models.build("fault_type").model
    for model, prefix in ((binary, "unit_a"), (multi, "unit_b"), (binary, "unit_c")):
        for art in emitter("c")(model, {"prefix": prefix}):
            (tmp_path / art.name).write_bytes(art.content)
    main = tmp_path / "main.c"
    main.write_text("""#include <stdio.h>
#include "unit_a.h"
#include "unit_b.h"
#include "unit_c.h"
int main(void)
{
    unit_a_input a = {90.0, 300.0, 21.0, 3.0, 4000.0, 25.0, 6.0, 0, 1};
    unit_b_input b = {90.0, 300.0, 21.0, 3.0, 4000.0, 25.0, 6.0, 0};
    unit_c_input c = {90.0, 300.0, 21.0, 3.0, 4000.0, 25.0, 6.0, 0, 1};
    double p[unit_b_N_CLASSES];
    unit_b_probabilities(&b, p);
    printf("%a %a %a %d\\n", unit_a_probability(&a), unit_c_probability(&c), p[2],
           unit_b_predict(&b));
    return 0;
}
""")
    objs = []
    for prefix in ("unit_a", "unit_b", "unit_c"):
        obj = tmp_path / f"{prefix}.o"
        subprocess.run(["gcc", *STRICT, "-c", str(tmp_path / f"{prefix}.c"), "-o", str(obj)],
                       check=True)
        objs.append(str(obj))
    subprocess.run(["gcc", *STRICT, "-I", str(tmp_path), str(main), *objs, "-lm", "-o",
                    str(tmp_path / "both")], check=True)
    out = subprocess.run([str(tmp_path / "both")], capture_output=True, text=True,
                         check=True).stdout.split()
    row = dict(zip(models.NUMERIC, (90.0, 300.0, 21.0, 3.0, 4000.0, 25.0, 6.0)))
    row.update(refrigerant="R290", site_zone="chill-room")
    ref_a = score_row(build_plan(binary), row)
    ref_b = score_row(build_plan(multi), row)
    assert float.fromhex(out[0]) == ref_a.probabilities[1] == float.fromhex(out[1])
    assert float.fromhex(out[2]) == ref_b.probabilities[2]
    assert int(out[3]) == ref_b.class_index


def test_valgrind_finds_no_error(built):
    _require("valgrind")
    b = built("hostile", "double")
    proc = subprocess.run(["valgrind", "--error-exitcode=9", "--leak-check=full", "-q",
                           str(b.exe), str(b.data)], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0 and proc.stderr == "", proc.stderr[-2000:]


def test_sanitizers_find_no_error(tmp_path):
    """AddressSanitizer and UBSan over every edge row of a multiclass and a mixed model."""
    _require("gcc")
    for name in ("fault_type", "mixed_scalers"):
        model = models.build(name).model
        plan = build_plan(model)
        where = tmp_path / name
        where.mkdir()
        for art in emitter("c")(model, {}):
            (where / art.name).write_bytes(art.content)
        opts = {"cflags": STRICT + ["-g", "-fsanitize=address,undefined",
                                    "-fno-sanitize-recover=all"]}
        exe = crunner.build_driver(where, model, opts, where)
        data = where / "rows.bin"
        data.write_bytes(crunner.encode_rows(plan, _rows(name)).tobytes())
        for flags in ([], ["--batch"]):
            proc = subprocess.run([str(exe), *flags, str(data)], capture_output=True, text=True)
            assert proc.returncode == 0 and proc.stderr == "", proc.stderr[-2000:]


def _preprocessed(path: Path, *flags) -> str:
    return subprocess.run(["gcc", "-std=c99", "-E", *flags, str(path)], capture_output=True,
                          text=True, check=True).stdout


def test_hostile_names_stay_inside_comments_and_literals(tmp_path):
    _require("gcc")
    model = models.build("hostile").model
    arts = emitter("c")(model, {})
    for art in arts:
        (tmp_path / art.name).write_bytes(art.content)
        assert art.content.isascii()
    header = tmp_path / arts[0].name
    prefix = header.stem
    # Every macro the header defines is one of ours: no name injected a #define.
    baseline = tmp_path / "baseline.h"
    baseline.write_text("#include <stddef.h>\n")
    builtin = set(_preprocessed(baseline, "-dM").splitlines())
    ours = [line for line in _preprocessed(header, "-dM").splitlines() if line not in builtin]
    names = [line.split()[1] for line in ours]
    assert len(names) > 5 and all(n.startswith(prefix + "_") for n in names), names
    # With comments removed, no feature name, level or model name text is left over.
    for art in arts:
        code = _preprocessed(tmp_path / art.name, "-fpreprocessed", "-dD")
        code = re.sub(r'"(?:[^"\\\n]|\\.)*"', '""', code)  # string literals out too
        for text in ("DROP TABLE", "#define x", "*/", "--", "Ümlaut"):
            assert text not in code, text
    # Trigraphs are live in C99: a name holding them must not splice or change a line.
    rng = np.random.default_rng(2)
    frame = pd.DataFrame({"a??/": rng.normal(size=60), "??=define y": rng.normal(size=60),
                          "b\\": rng.normal(size=60)})
    from sklearn.linear_model import LogisticRegression
    est = LogisticRegression().fit(frame, frame["a??/"] > 0)
    tri = scorewright.freeze(est, name="tri??/")
    for art in emitter("c")(tri, {"prefix": "tri"}):
        (tmp_path / art.name).write_bytes(art.content)
    proc = subprocess.run(["gcc", *STRICT, "-Wtrigraphs", "-trigraphs", "-c",
                           str(tmp_path / "tri.c"), "-o", str(tmp_path / "tri.o")],
                          capture_output=True, text=True)
    assert proc.returncode == 0 and not proc.stderr, proc.stderr


def test_emit_is_deterministic_and_carries_the_model_identity():
    model = models.build("wine").model
    first = emitter("c")(model, {"precision": "float"})
    assert first == emitter("c")(model, {"precision": "float"})
    for art in first:
        assert model.sha256.encode() in art.content
        assert f"scorewright {scorewright.__version__}".encode() in art.content
    assert [a.name for a in first] == ["wine.h", "wine.c"]


def test_generated_source_uses_only_the_allowed_headers_and_no_heap():
    for name in ("hostile", "fault_type"):
        for art in emitter("c")(models.build(name).model, {}):
            text = art.content.decode()
            includes = set(re.findall(r"#include\s+(\S+)", text))
            assert includes <= {"<math.h>", "<stddef.h>", "<stdint.h>", "<string.h>",
                                f'"{Path(art.name).stem}.h"'}, includes
            assert "malloc" not in text and ("0x" in text or art.name.endswith(".h"))
            # every file-scope object is static const
            for decl in re.findall(r"^(?:static )?[a-z].*\[.*\] = \{", text, re.M):
                assert decl.startswith("static const"), decl


def _cli(*args):
    return subprocess.run([sys.executable, "-m", "scorewright.cli", *args],
                          capture_output=True, text=True)


def test_cli_emit_and_its_errors(tmp_path):
    model_path = tmp_path / "m.json"
    models.build("spector").model.write(model_path)
    out = tmp_path / "out"
    ok = _cli("emit", str(model_path), "--target", "c", "-o", str(out), "--prefix", "unit7",
              "--precision", "float")
    assert ok.returncode == 0, ok.stderr
    assert sorted(p.name for p in out.iterdir()) == ["unit7.c", "unit7.h"]
    assert "float unit7_" not in (out / "unit7.h").read_text()  # the API stays double
    assert "float gpa;" in (out / "unit7.h").read_text()
    for bad, words in ((["--prefix", "9lives"], "not a C identifier"),
                       (["--prefix", "a-b"], "not a C identifier"),
                       (["--prefix", "int"], "keyword"),
                       (["--dialect", "sqlite"], "--dialect does not apply")):
        where = tmp_path / f"bad{len(words)}{bad[1]}"
        proc = _cli("emit", str(model_path), "--target", "c", "-o", str(where), *bad)
        assert proc.returncode == 2 and words in proc.stderr, proc.stderr
        assert len(proc.stderr.strip().splitlines()) == 1 and "Traceback" not in proc.stderr
        assert not where.exists() or not any(where.iterdir())


def test_fused_multiply_add_is_kept_off_even_when_the_flags_allow_it(tmp_path):
    """GCC ignores `#pragma STDC FP_CONTRACT OFF`; with -mfma -ffp-contract=fast it would fuse
    `s + w * v` (one rounding instead of two). The scorer's GCC pragma keeps the bits; the
    same source without it does not, which shows the trap is real on this machine."""
    _require("gcc")
    flags = Path("/proc/cpuinfo").read_text().split()
    assert "fma" in flags, "this check needs an x86-64 CPU with FMA"
    model = models.build("diabetes_ridge").model
    plan = build_plan(model)
    rows = _rows("diabetes_ridge")
    want = _expected(plan, rows)["margins"]  # MinMax scaling: v * c then v + c, fusable
    for art in emitter("c")(model, {}):
        (tmp_path / art.name).write_bytes(art.content)
    source = tmp_path / "diabetes_ridge.c"
    fused = {"cflags": ["-std=gnu99", "-O2", "-mfma", "-ffp-contract=fast"]}
    results = []
    for variant in ("as emitted", "pragma removed"):
        if variant == "pragma removed":
            text = source.read_text()
            source.write_text(text.replace('#pragma GCC optimize("fp-contract=off")', ""))
        exe = crunner.build_driver(tmp_path, model, fused, tmp_path)
        data = tmp_path / "rows.bin"
        data.write_bytes(crunner.encode_rows(plan, rows).tobytes())
        out = subprocess.run([str(exe), str(data)], capture_output=True, text=True, check=True)
        got = crunner.parse_output(plan, out.stdout, "gcc").margins
        results.append(int((_bits(got) != _bits(want)).sum()))
    assert results[0] == 0 and results[1] > 0, results

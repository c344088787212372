"""The firmware proof: the C scorer cross-built for Cortex-M microcontrollers, measured, and
run on emulated boards.

Real parts only: Debian's arm-none-eabi-gcc 12 with newlib, and qemu-system-arm 7.2
emulating the MPS2 AN386 (Cortex-M4F) and AN385 (Cortex-M3) boards under semihosting.
Rows are the committed conformance vectors (shared/conformance/) and their
reference outputs; the portable exp is checked against mpmath at 200 bits.
"""

from __future__ import annotations

import math
import random
import shutil
import subprocess
import sys
from functools import lru_cache
from pathlib import Path

import mpmath
import numpy as np
import pytest

import models

from scorewright import portable_exp
from scorewright.emit import emitter
from scorewright.model import DesignColumn, FrozenModel, Head, NumericFeature, load_model
from scorewright.plan import build_plan
from scorewright.verify.cases import edge_rows, rows_for_precision
from scorewright.verify.compare import Tolerance, compare
from scorewright.verify.firmware_size import TYPICAL_MCU, measure_model, report_text
from scorewright.verify.harness import expected_outputs
from scorewright.verify.profiles import load_profile
from scorewright.verify.runners import c as crunner
from scorewright.verify.runners import cortex_m

VECTORS = Path(__file__).resolve().parent.parent / "shared" / "conformance"
# the conformance models the per-model image suites walk (models.WALKED); every
# conformance model runs on both boards in tests/test_conformance.py
MODELS = sorted(models.WALKED)
BOARDS = ["c-cortex-m4f", "c-cortex-m3"]
CLASSIFIERS = [n for n in MODELS if load_model(VECTORS / f"{n}.model.json").head.task
               != "regression"]
MEASURED: dict = {}


def _require():
    lacks = [c for c in ("arm-none-eabi-gcc", "qemu-system-arm", "gcc")
             if shutil.which(c) is None]
    assert not lacks, (f"the firmware tests need {lacks} (Debian: apt-get install "
                       "gcc-arm-none-eabi libnewlib-arm-none-eabi qemu-system-arm gcc)")


@lru_cache(maxsize=None)
def _vectors(name: str):
    from scorewright.verify.vectors import load_vectors

    model = load_model(VECTORS / f"{name}.model.json")
    labels, rows, expected = load_vectors(VECTORS / f"{name}.vectors.json", build_plan(model))
    return model, rows, expected


def _emit(model, options: dict, where: Path) -> Path:
    where.mkdir(parents=True, exist_ok=True)
    for art in emitter("c")(model, options):
        (where / art.name).write_bytes(art.content)
    return where


_RUNS: dict = {}


def _firmware(profile_name: str, name: str, root: Path, **extra):
    """(RunOutput or class table, measured stack) of one model on one emulated board."""
    key = (profile_name, name, tuple(sorted(extra.items())))
    if key not in _RUNS:
        _require()
        profile = load_profile(profile_name)
        model, rows, _ = _vectors(name)
        emit_opts = dict(profile.emit, **extra)
        where = _emit(model, emit_opts, root / "-".join([profile_name, name, *sorted(extra)]))
        options = dict(profile.run_options, **extra)
        if extra.get("precision") == "float":
            rows = rows_for_precision(build_plan(model, "float"), rows, "float")
        table, stack = cortex_m.run_firmware(where, model, rows, options)
        plan = build_plan(model, options.get("precision", "double"))
        out = table if extra.get("decision_only") else cortex_m.parse_table(plan, table, "")
        _RUNS[key] = (out, stack)
    return _RUNS[key]


@pytest.fixture(scope="module")
def root(tmp_path_factory):
    return tmp_path_factory.mktemp("firmware")


def _bits(a) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.float64).view(np.uint64)


def _same_bits(expected: dict, got) -> None:
    assert (_bits(got.margins) == _bits(expected["margins"])).all(), "margins"
    if "value" in expected:
        assert (_bits(got.value) == _bits(expected["value"])).all(), "value"
    else:
        assert (_bits(got.probabilities) == _bits(expected["probabilities"])).all(), "probs"
        assert (got.class_index == expected["class_index"]).all(), "class"


# ---------------------------------------------------------------- cross-build

STRICT = ["-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wshadow",
          "-Wdouble-promotion", "-Werror", "-O2", "-ffp-contract=off", "-c"]


@pytest.mark.parametrize("profile_name", BOARDS)
@pytest.mark.parametrize("variant", ["libm", "portable_exp", "decision_only"])
@pytest.mark.parametrize("precision", ["double", "float"])
def test_scorer_cross_builds_without_a_warning(profile_name, variant, precision, tmp_path):
    _require()
    board = cortex_m.Board(load_profile(profile_name).run_options)
    assert {"-Wall", "-Wextra", "-Werror"} <= set(board.flags("cflags"))
    for name in MODELS:
        model = load_model(VECTORS / f"{name}.model.json")
        if variant == "decision_only" and model.head.task == "regression":
            continue
        opts = {"precision": precision}
        if variant != "libm":
            opts[variant] = True
        where = _emit(model, opts, tmp_path / name)
        source = next(where.glob("*.c"))
        proc = subprocess.run([board["compiler"], *board.flags("arch_flags"), *STRICT,
                               str(source), "-o", str(tmp_path / "x.o")],
                              capture_output=True, text=True)
        assert proc.returncode == 0, (name, proc.stderr[-1500:])


@pytest.mark.parametrize("profile_name", BOARDS)
def test_portable_and_decision_only_images_link_without_libm(profile_name, root, tmp_path):
    """Linked with no -lm: an exp left anywhere would be an undefined reference."""
    _require()
    profile = load_profile(profile_name)
    model, _, _ = _vectors("fault_type")
    for variant in ("portable_exp", "decision_only"):
        options = dict(profile.run_options, **{variant: True})
        where = _emit(model, dict(profile.emit, **{variant: True}), tmp_path / variant)
        work = tmp_path / f"{variant}-build"
        work.mkdir()
        image = cortex_m.build_image(where, model, options, work)
        nm = subprocess.run(["arm-none-eabi-nm", str(image)], capture_output=True, text=True,
                            check=True).stdout
        names = {line.split()[-1] for line in nm.splitlines()}
        assert not names & {"exp", "expf", "__ieee754_exp", "__ieee754_expf"}, variant


# ---------------------------------------------------------------- emulated runs

@pytest.mark.parametrize("profile_name", BOARDS)
@pytest.mark.parametrize("name", MODELS)
def test_portable_exp_is_bit_identical_on_the_board(profile_name, name, root):
    """With --portable-exp every output's bits equal the reference evaluator's using the
    same exp: the board's software double (libgcc) and the host's SSE2 agree exactly."""
    model, rows, _ = _vectors(name)
    got, _ = _firmware(profile_name, name, root, portable_exp=True)
    _same_bits(expected_outputs(build_plan(model, exp="portable"), rows), got)


@pytest.mark.parametrize("name", MODELS)
def test_portable_exp_is_bit_identical_on_the_host(name, tmp_path):
    """The same artifact built by the host's gcc on x86-64 gives the same bits."""
    _require()
    model, rows, _ = _vectors(name)
    where = _emit(model, {"portable_exp": True}, tmp_path / "art")
    got = crunner.run(where, model, rows, {"cflags": "-std=c99 -O2 -ffp-contract=off"})
    _same_bits(expected_outputs(build_plan(model, exp="portable"), rows), got)


@pytest.mark.parametrize("profile_name", BOARDS)
@pytest.mark.parametrize("name", MODELS)
def test_newlib_exp_is_within_the_stated_tolerance(profile_name, name, root):
    """With newlib's exp: margins bit-identical; probabilities and values within the
    profile's stated tolerance of the reference (glibc's exp)."""
    _, _, expected = _vectors(name)
    got, _ = _firmware(profile_name, name, root)
    tol = load_profile(profile_name).tolerance
    assert (_bits(got.margins) == _bits(expected["margins"])).all()
    result = compare(expected, got, tol)
    assert result.ok, (result.failing_count, result.max_ulps, result.reasons)
    MEASURED[(profile_name, name)] = result.max_ulps, result.max_abs


def test_newlib_tolerance_is_measured_not_guessed(root):
    """Over every conformance model, on both boards, newlib's exp differs from the
    reference's somewhere (so a tolerance is needed) and the stated one is not loose by
    more than a few ULP."""
    worst = {"probability": 0.0, "predicted_value": 0.0}
    for profile_name in BOARDS:
        for name in MODELS:
            _, _, expected = _vectors(name)
            got, _ = _firmware(profile_name, name, root)
            result = compare(expected, got, Tolerance())
            for key in worst:
                worst[key] = max(worst[key], result.max_ulps.get(key, 0.0))
    tol = load_profile(BOARDS[0]).tolerance
    assert 1 <= worst["probability"] <= tol.probability_ulps <= worst["probability"] + 2
    assert 1 <= worst["predicted_value"] <= tol.value_ulps <= worst["predicted_value"] + 1
    print(f"measured newlib exp vs reference: {worst}")


@pytest.mark.parametrize("profile_name", BOARDS)
@pytest.mark.parametrize("name", CLASSIFIERS)
def test_decision_only_agrees_with_the_full_scorer(profile_name, name, root):
    """--decision-only (no exp) decides every row as the full scorer does on the board,
    and as the reference evaluator does."""
    _, _, expected = _vectors(name)
    full, _ = _firmware(profile_name, name, root)
    table, stack = _firmware(profile_name, name, root, decision_only=True)
    decided = np.array([int(r[0]) for r in table])
    assert (decided == full.class_index).all()
    assert (decided == expected["class_index"]).all()
    assert list(stack) and all(v > 0 for v in stack.values())


def test_float_scorer_gives_the_same_bits_on_the_m4f_fpu_and_the_host(root, tmp_path):
    """Single precision with the portable exp: the Cortex-M4F's hardware FPU and x86-64
    SSE give identical bits, and both stay within c-float's tolerance of the float plan."""
    tol = load_profile("c-float").tolerance
    for name in MODELS:
        model, rows, _ = _vectors(name)
        got, _ = _firmware("c-cortex-m4f", name, root, portable_exp=True, precision="float")
        fplan = build_plan(model, "float", exp="portable")
        frows = rows_for_precision(fplan, rows, "float")
        where = _emit(model, {"portable_exp": True, "precision": "float"}, tmp_path / name)
        host = crunner.run(where, model, frows, {"precision": "float"})
        assert (_bits(got.margins) == _bits(host.margins)).all(), name
        other = got.value if got.value is not None else got.probabilities
        assert (_bits(other) == _bits(host.value if got.value is not None
                                      else host.probabilities)).all(), name
        result = compare(expected_outputs(fplan, frows), got, tol)
        assert result.ok, (name, result.max_ulps)


def _exp_model() -> FrozenModel:
    """A log-link model whose value is exp(x) of its one input: the board's exp, bare."""
    head = Head("regression", "log", None, (0.0,), ((1.0,),), None)
    return FrozenModel("exp_probe", (NumericFeature("suction_kpa", None),),
                       (DesignColumn("suction_kpa"),), head,
                       {"scorewright_version": "test", "source": "exp probe"}).sealed()


def _grid(n: int) -> list[float]:
    rng = random.Random(8)
    xs = list(np.linspace(-710.0, 710.0, n)) + [rng.uniform(-1.0, 1.0) for _ in range(200)]
    xs += [0.0, -0.0, 5e-324, -5e-324, 1e-300, -1e-300, 0.5 * math.log(2), -708.0, 709.0,
           math.nextafter(-708.0, 0.0), math.nextafter(709.0, 0.0), 1e-10, -1e-10]
    xs += [k * math.log(2) + d for k in (-1021, -1000, -1, 1, 1000, 1022)
           for d in (-0.35, 0.0, 0.35)]
    return [float(x) for x in xs]


@pytest.mark.parametrize("profile_name", BOARDS)
def test_the_boards_portable_exp_is_the_python_routine(profile_name, tmp_path):
    """exp itself on the board (a log-link model with value = exp(x)), over a dense grid
    including the guard ends and the k = -1021 and k = 1023 scaling ends, equals
    portable_exp.exp bit for bit."""
    _require()
    profile = load_profile(profile_name)
    model = _exp_model()
    rows = [{"suction_kpa": x} for x in _grid(4001)]
    where = _emit(model, {"portable_exp": True}, tmp_path / "art")
    table, _ = cortex_m.run_firmware(where, model, rows, dict(profile.run_options,
                                                              portable_exp=True))
    got = cortex_m.parse_table(build_plan(model), table, "")
    want = [portable_exp.exp(min(max(r["suction_kpa"], -708.0), 709.0)) for r in rows]
    assert (_bits(got.value) == _bits(want)).all()


# ---------------------------------------------------------------- the routine itself

def _ulp_error(got: float, exact, ulp_of) -> float:
    return float(abs(mpmath.mpf(got) - exact) / ulp_of(float(exact)))


def _float_ulp(x: float) -> float:
    f = np.float32(x)
    return float(np.spacing(np.abs(f)))


def test_portable_exp_is_within_one_ulp_of_mpmath():
    """Source of truth: mpmath at 200 bits. Dense grid of the guarded range [-708, 709]
    (120,001 points), 20,000 random points in [-1, 1], the ends and tiny arguments."""
    rng = random.Random(5)
    xs = list(np.linspace(-708.0, 709.0, 120_001)) + [rng.uniform(-1, 1) for _ in range(20_000)]
    xs += [-708.0, 709.0, 0.0, 5e-324, -5e-324, 1e-300, 1e-17, -1e-17]
    worst = (0.0, None)
    with mpmath.workprec(200):
        for x in xs:
            x = float(x)
            err = _ulp_error(portable_exp.exp(x), mpmath.exp(mpmath.mpf(x)), math.ulp)
            worst = max(worst, (err, x))
    print(f"portable exp: max error {worst[0]:.4f} ULP at x = {worst[1]!r}")
    assert worst[0] <= 1.0, worst


def test_portable_float_exp_is_within_one_float_ulp_of_mpmath():
    """The float routine on the float guarded range [-87, 88], against mpmath."""
    xs = [float(np.float32(x)) for x in np.linspace(-87.0, 88.0, 40_001)]
    worst = 0.0
    with mpmath.workprec(200):
        for x in xs:
            worst = max(worst, _ulp_error(portable_exp.expf(x), mpmath.exp(mpmath.mpf(x)),
                                          _float_ulp))
    print(f"portable float exp: max error {worst:.4f} float ULP")
    assert worst <= 1.0


def test_portable_exp_constants_are_what_they_claim():
    """Re-derived with mpmath: the polynomial is this project's Chebyshev fit; LN2_HI has
    21 trailing zero bits (so k * LN2_HI is exact for |k| < 2^21); LN2_HI + LN2_LO is
    ln2 to 2^-80; INV_LN2 is 1/ln2 rounded."""
    c = {k: float.fromhex(v) for k, v in portable_exp.CONSTANTS.items()}
    assert portable_exp.fit_coefficients() == [portable_exp.CONSTANTS[f"P{i}"]
                                                 for i in range(1, 6)]
    mantissa = int(float.hex(c["LN2_HI"]).split(".")[1].split("p")[0], 16)
    assert mantissa % (1 << 21) == 0
    with mpmath.workprec(300):
        ln2 = mpmath.log(2)
        assert abs(mpmath.mpf(c["LN2_HI"]) + mpmath.mpf(c["LN2_LO"]) - ln2) < mpmath.mpf(2) ** -80
        assert c["INV_LN2"] == float(1 / ln2)
    assert (c["LOW"], c["HIGH"]) == (-build_plan(_exp_model()).precision.exp_guard,
                                     build_plan(_exp_model()).precision.log_link_max)


def test_reference_with_portable_exp_differs_from_libm_only_in_exp():
    """The plan's exp_kind changes the exp and nothing else: margins identical, and the
    numpy path of the reference agrees with the step-by-step one."""
    from scorewright.reference import encode_rows, score_matrix

    for name in MODELS:
        model, rows, expected = _vectors(name)
        plan = build_plan(model, exp="portable")
        ours = expected_outputs(plan, rows)
        assert (_bits(ours["margins"]) == _bits(expected["margins"])).all()
        fast = score_matrix(plan, encode_rows(plan, rows))
        key = "value" if "value" in ours else "probabilities"
        assert (_bits(fast[key]) == _bits(ours[key])).all(), name
    assert build_plan(model).exp_kind == "libm"


# ---------------------------------------------------------------- size and stack

@pytest.mark.parametrize("profile_name", BOARDS)
def test_size_and_stack_are_reported_and_plausible(profile_name, root):
    _require()
    profile = load_profile(profile_name)
    for name in ("fault_type", "spector", "alarms_poisson"):
        model, _, _ = _vectors(name)
        size = measure_model(model, profile.run_options)
        rows = size["objects"]
        assert {(r["precision"], r["opt"]) for r in rows} == \
            {(p, o) for p in ("double", "float") for o in ("-Os", "-O2")}
        for r in rows:
            assert 0 < r["flash_bytes"] < TYPICAL_MCU["flash_bytes"], r
            assert r["ram_bytes"] < TYPICAL_MCU["ram_bytes"], r  # const tables sit in flash
            assert r["rodata"] > 0 or name == "spector", r
            assert all(v is not None and v < 4096 for v in r["stack_bytes"].values()), r
            if r["build"] == "full":
                assert r["stack_bytes"], r
        by = {(r["precision"], r["build"], r["opt"]): r for r in rows}
        if model.head.task != "regression":
            for p in ("double", "float"):
                for o in ("-Os", "-O2"):
                    assert by[p, "decision-only", o]["flash_bytes"] < \
                        by[p, "full", o]["flash_bytes"]
        # The stack painted on the emulated board includes libgcc and newlib callees: it is
        # at least the static figure of the object's own frames.
        _, measured = _firmware(profile_name, name, root)
        static = by["double", "full", "-O2"]["stack_bytes"]
        for fn, used in measured.items():
            assert 0 < used < 4 * 4096, (fn, used)
            assert used >= static[fn], (fn, used, static[fn])
        MEASURED[(profile_name, name, "size")] = report_text(size), measured


def test_emit_report_prints_the_table(tmp_path):
    _require()
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "scorewright.cli", "emit",
                           str(VECTORS / "fault_binary.model.json"), "--target", "c", "-o",
                           str(out), "--report"], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    text = proc.stdout
    assert "Cortex-M4F" in text and "decision-only" in text
    for p in ("double", "float"):
        for o in ("-Os", "-O2"):
            assert any(line.startswith(p) and f" {o} " in line for line in text.splitlines())
    assert sorted(f.name for f in out.iterdir()) == ["fault_binary.c", "fault_binary.h"]


def test_emit_report_without_the_cross_compiler_is_one_line_and_writes_nothing(tmp_path):
    out = tmp_path / "out"
    env = {"PATH": str(tmp_path / "empty"), "HOME": str(tmp_path)}
    proc = subprocess.run([sys.executable, "-m", "scorewright.cli", "emit",
                           str(VECTORS / "fault_binary.model.json"), "--target", "c", "-o",
                           str(out), "--report"], capture_output=True, text=True, env=env)
    assert proc.returncode == 2
    assert proc.stderr.count("\n") == 1 and "arm-none-eabi-gcc" in proc.stderr
    assert "Traceback" not in proc.stderr and not out.exists()


def test_decision_only_refuses_a_regression_model():
    from scorewright.errors import ScorewrightError

    model, _, _ = _vectors("alarms_poisson")
    with pytest.raises(ScorewrightError, match="decision-only"):
        emitter("c")(model, {"decision_only": True})


def test_edge_rows_run_on_the_board_without_a_fault(tmp_path):
    """NaN, +-inf, +-1e308, subnormals and the exp-guard margins: the firmware's fault
    handler would end the run with a failure; every row is scored instead."""
    _require()
    profile = load_profile("c-cortex-m3")
    model, _, _ = _vectors("fault_type")
    plan = build_plan(model)
    rows = [r for _, r in edge_rows(plan)]
    where = _emit(model, dict(profile.emit), tmp_path / "art")
    got = cortex_m.run(where, model, rows, profile.run_options)
    assert got.margins.shape == (len(rows), plan.n_outputs)
    assert np.isfinite(got.probabilities).all()
    assert "mps2-an385" in got.runtime and "Cortex-M3" in got.runtime


@pytest.mark.slow  # 14 s a board; by default tests/test_scale.py runs 251 terms on both
@pytest.mark.parametrize("profile_name", BOARDS)
def test_a_wide_models_row_scorer_in_parts_keeps_the_bits(profile_name, tmp_path):
    """Past ROW_PART_TERMS terms the row scorer is cut into functions (one giant function
    takes GCC minutes, and at -Os its Thumb-2 branches overflow): same bits as the
    reference, on the board and on the host."""
    from scorewright.emit.c import ROW_PART_TERMS
    from scorewright.verify.cases import random_rows

    _require()
    model = models.wide_model(2 * ROW_PART_TERMS + 7, prefix="probe", spread=0.2)
    plan = build_plan(model, exp="portable")
    rows = [r for _, r in edge_rows(plan)] + random_rows(plan, 40, seed=2)
    where = _emit(model, {"portable_exp": True}, tmp_path / "art")
    assert "_row_part2(" in next(where.glob("*.c")).read_text()
    options = dict(load_profile(profile_name).run_options, portable_exp=True)
    _same_bits(expected_outputs(plan, rows), cortex_m.run(where, model, rows, options))
    _same_bits(expected_outputs(plan, rows), crunner.run(where, model, rows, {}))


@pytest.mark.parametrize("profile_name", BOARDS)
def test_a_row_of_missing_inputs_is_scored_by_the_runtime_exp(profile_name, tmp_path):
    """Found by the hostile-name suite: where every input is missing, GCC jump-threads
    the row function to a constant margin and evaluated exp of it at build time
    (correctly rounded), while newlib's exp, called at run time by the batch
    function, gives the last bit differently (1 ULP in the probability). The scorer
    calls libm's exp through a volatile argument, so every function and every row
    with the same margin give the same bits."""
    from scorewright.model import CategoricalFeature

    _require()
    feats = (NumericFeature("0", None, ()), NumericFeature("00", None, ()),
             CategoricalFeature('"', ("0", "1"), None, None))
    model = FrozenModel("0", feats, (DesignColumn("0"), DesignColumn("00"),
                                     DesignColumn('"', ("1",))),
                        Head("binary", "logit", ("0", "00"), (1.140625,), ((0.0, 1.0, 1.0),),
                             0.0),
                        {"scorewright_version": "test", "source": "hypothesis"}).sealed()
    profile = load_profile(profile_name)
    where = _emit(model, dict(profile.emit), tmp_path / "art")
    # the same margin, 1.140625, all missing and through the inputs
    rows = [{"0": None, "00": math.nan, '"': None}, {"0": 0.0, "00": 0.0, '"': "0"}]
    got = cortex_m.run(where, model, rows, profile.run_options)
    assert list(got.class_index) == [1, 1], "-99: the batch function disagreed with a row one"
    assert got.margins[0, 0] == got.margins[1, 0] == 1.140625
    assert got.probabilities[0, 1].hex() == got.probabilities[1, 1].hex()


def test_tool_versions_are_asked_once_per_process():
    """The runtime line of every run names the compiler and emulator versions; each is
    asked of the tool once per process, not once per build (960 gcc builds, hundreds of
    qemu boots a test run)."""
    _require()
    options = load_profile("c-cortex-m3").run_options
    first = cortex_m.runtime_of(options)
    asked = (crunner.compiler_version.cache_info().misses,
             cortex_m.emulator_version.cache_info().misses)
    assert cortex_m.runtime_of(options) == first
    assert (crunner.compiler_version.cache_info().misses,
            cortex_m.emulator_version.cache_info().misses) == asked
    assert "arm-none-eabi-gcc" in first and "QEMU" in first

"""The C batch scorer's block passes (terms, margins, the link over a block of rows) keep
every bit of the scoring program, on edge rows and on row counts that end mid-block.

The reference is the program's numpy interpreter (`program.run_matrix`), whose bits
`tests/test_program.py` holds to the scalar interpreter and to every conformance
vector. The scorers are built by this machine's gcc at -O2 and, where the link and
the portable exp vectorize, at -O3 -march=native; each with libm's exp and the
portable exp.
"""

from __future__ import annotations

import dataclasses
import shutil
import subprocess

import numpy as np
import pytest

import models
from scorewright.emit import c_batch, emitter
from scorewright.emit.c import driver_source
from scorewright.emit.c_precision import PRECISIONS
from scorewright.plan import build_plan
from scorewright.program import lower, run_matrix

FLAGS = {"-O2": ["-O2"], "-O3 native": ["-O3", "-march=native"]}
EDGE = (np.nan, np.inf, -np.inf, 1e308, -1e308, 1.7976931348623157e308, 5e-324, -5e-324,
        2.2250738585072014e-308, -0.0, 0.0, 1e300, -1e300)
# a numeric margin beyond the exp guard either way, and a code of every kind
CODES = (np.nan, -1.0, -2.0, 99.0, 1.5, np.inf, 0.0, 1.0)
# prefixes of the rows: one row, a block, a block and one, and past two blocks
COUNTS = (1, c_batch.BATCH_BLOCK, c_batch.BATCH_BLOCK + 1, 2 * c_batch.BATCH_BLOCK + 5)


def _matrix(plan, n_random: int = 40) -> np.ndarray:
    """Each edge value in every numeric column, then in one column at a time, then
    random rows: the edge rows first, so every count below reaches some."""
    rng = np.random.default_rng(20)
    F = len(plan.inputs)
    rows = []
    for value in EDGE:
        rows.append([value if inp.kind == "numeric" else CODES[0] for inp in plan.inputs])
    for i, value in enumerate(EDGE + CODES):
        row = list(rng.normal(size=F) * 3.0)
        inp = plan.inputs[i % F]
        row[inp.index] = value if inp.kind == "numeric" else CODES[i % len(CODES)]
        rows.append(row)
    for _ in range(n_random):
        row = []
        for inp in plan.inputs:
            if inp.kind == "numeric":
                row.append(rng.normal() * 10.0 ** rng.integers(-3, 4))
            else:
                row.append(float(rng.integers(-1, len(inp.levels) + 1)))
        rows.append(row)
    return np.array(rows, dtype="<f8").reshape(len(rows), F)


def _outputs(plan) -> list[str]:
    if plan.task == "regression":
        return ["value"] + (["rate"] if plan.offset is not None else [])
    if plan.task == "binary":
        return ["probability_1"]
    return [f"probability_{k}" for k in range(len(plan.classes))]


# (model, flags, exp): each link (logit, softmax, log, probit) and the term kinds, each
# exp, each build; a few crossings, to stay cheap
CASES = [("fault_binary", "-O2", "libm"), ("fault_binary", "-O3 native", "portable"),
         ("fault_type", "-O2", "libm"), ("fault_type", "-O3 native", "portable"),
         ("alarms_poisson", "-O3 native", "libm"), ("spector_probit", "-O3 native", "portable"),
         ("compressor_terms", "-O2", "portable")]


@pytest.mark.parametrize("name,opt,exp", CASES)
def test_batch_blocks_give_the_programs_bits(name, opt, exp, tmp_path):
    assert shutil.which("gcc"), "the C batch tests need gcc"
    model = models.build(name).model
    plan = dataclasses.replace(build_plan(model, "double"), exp_kind=exp)
    data = _matrix(plan)
    want = run_matrix(lower(plan), data)
    want = np.stack([want[o] for o in _outputs(plan)], axis=1)
    options = {"prefix": "s", **({"portable_exp": True} if exp == "portable" else {})}
    for art in emitter("c")(model, options):
        (tmp_path / art.name).write_bytes(art.content)
    (tmp_path / "driver.c").write_text(driver_source(model, "s"), encoding="ascii")
    exe = tmp_path / "driver"
    subprocess.run(["gcc", "-std=c99", *FLAGS[opt], "-ffp-contract=off", "-Wall", "-Wextra",
                    "-Werror", "-I", str(tmp_path), "-o", str(exe), str(tmp_path / "driver.c"),
                    str(tmp_path / "s.c"), "-lm"], check=True)
    for count in COUNTS:
        path = tmp_path / f"rows{count}.bin"
        path.write_bytes(data[:count].tobytes())
        out = subprocess.run([str(exe), "--batch", str(path)], capture_output=True, text=True,
                             check=True).stdout
        got = np.array([[float.fromhex(x) for x in line.split()] for line in out.splitlines()])
        assert got.shape == (count, want.shape[1])
        same = got.view(np.uint64) == want[:count].view(np.uint64)
        assert same.all(), (count, np.argwhere(~same)[:5].tolist())


def test_the_block_fits_a_small_stack():
    """The block's tables (terms and margins) stay within c_batch.BLOCK_BYTES for every
    test model, in both precisions, however many classes."""
    for name in sorted(models.WALKED):
        model = models.build(name).model
        for precision, size in (("double", 8), ("float", 4)):
            program = lower(build_plan(model, precision))
            K = program.plan.n_margins
            block, positions = c_batch.block_shape(program, PRECISIONS[precision])
            assert 1 <= block <= c_batch.BATCH_BLOCK
            assert block == 1 or size * block * (positions * K + K) <= c_batch.BLOCK_BYTES

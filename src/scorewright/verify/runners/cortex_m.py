"""C artifacts cross-built for a Cortex-M microcontroller and run on an emulated board.

The scorer, a minimal startup (vector table, reset handler, .data/.bss set-up)
and a firmware driver are built by the profile's cross compiler with
-nostartfiles and a linker script placing flash and RAM where the board has
them, then run under `qemu-system-arm -M <board> -semihosting`. The driver reads
the rows from a host file over semihosting, writes every output as the hex of
its 64-bit pattern to another host file (exact), and measures the stack each
public function uses by painting it. One build and one emulator run per model.

Profile [verify] keys: compiler, arch_flags (CPU and float ABI), cflags, qemu,
machine, cpu (for the runtime string), flash_origin, flash_size, ram_origin,
ram_size, timeout (seconds).
"""

from __future__ import annotations

import shlex
import struct
import subprocess
import tempfile
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path


from ...emit.c import context
from ...emit.c_precision import PRECISIONS
from ...emit.c_syntax import check_prefix, default_prefix
from ...emit.templating import render
from ...errors import ScorewrightError
from ...model import FrozenModel
from ...plan import Plan, build_plan
from ...reference import program_of
from . import RunOutput, emitted, outputs_from_table
from .c import compiler_version, decisions, encode_rows

DEFAULTS = {
    "compiler": "arm-none-eabi-gcc",
    "arch_flags": "-mcpu=cortex-m4 -mthumb -mfloat-abi=hard -mfpu=fpv4-sp-d16",
    "cflags": "-std=c99 -O2 -ffp-contract=off -Wall -Wextra -Werror",
    "qemu": "qemu-system-arm",
    "qemu_flags": "-nographic -monitor none -serial none -semihosting-config enable=on,target=native",
    "machine": "mps2-an386",
    "cpu": "Cortex-M4F",
    "flash_origin": 0x00000000,
    "flash_size": 4 * 1024 * 1024,
    "ram_origin": 0x20000000,
    "ram_size": 4 * 1024 * 1024,
    "timeout": 120,
}


@dataclass(frozen=True)
class Board:
    """The profile's cross-build and emulator settings, with defaults filled in."""

    options: dict

    def __getitem__(self, key):
        return self.options.get(key, DEFAULTS[key])

    def flags(self, key: str) -> list[str]:
        value = self[key]
        return shlex.split(value) if isinstance(value, str) else [str(v) for v in value]


def prefix_of(plan: Plan, options: dict) -> str:
    return check_prefix(options["prefix"]) if options.get("prefix") else default_prefix(plan.stem)


def measured_calls(plan: Plan, prefix: str, decision_only: bool) -> list[tuple[str, str]]:
    """(public function, the driver's call of it) for every function whose stack is
    measured; the driver's locals are m, v, p, b (outputs) and c (class)."""
    P = prefix
    if decision_only:
        return [(f"{P}_predict", f"c = {P}_predict(&in)")]
    if plan.task == "multiclass":
        calls = [(f"{P}_margins", f"{P}_margins(&in, m)"),
                 (f"{P}_probabilities", f"{P}_probabilities(&in, p)"),
                 (f"{P}_predict", f"c = {P}_predict(&in)")]
        batch = f"{P}_predict_batch(row, 1, b)"
    elif plan.task == "binary" and plan.n_outputs > 1:  # a calibrated head's members
        calls = [(f"{P}_margins", f"{P}_margins(&in, m)"),
                 (f"{P}_probability", f"v = {P}_probability(&in)"),
                 (f"{P}_predict", f"c = {P}_predict(&in)")]
        batch = f"{P}_predict_batch(row, 1, &b)"
    elif plan.task == "binary":
        calls = [(f"{P}_margin", f"m = {P}_margin(&in)"),
                 (f"{P}_probability", f"v = {P}_probability(&in)"),
                 (f"{P}_predict", f"c = {P}_predict(&in)")]
        batch = f"{P}_predict_batch(row, 1, &b)"
    else:
        calls = [(f"{P}_margin", f"m = {P}_margin(&in)"),
                 (f"{P}_predict_value", f"v = {P}_predict_value(&in)")]
        batch = f"{P}_predict_batch(row, 1, &b)"
        if plan.offset is not None:  # the batch row holds the value and the rate
            calls.append((f"{P}_predict_rate", f"r = {P}_predict_rate(&in)"))
            batch = f"{P}_predict_batch(row, 1, b)"
    if plan.task != "regression" and not plan.has_probabilities:
        calls = [calls[0], calls[2]]  # a "decision" head: its batch gives the margins
    return calls + [(f"{P}_predict_batch", batch)]


def firmware_sources(plan: Plan, prefix: str, options: dict) -> dict[str, str]:
    """File name -> text of the driver, startup and linker script for this artifact."""
    board = Board(options)
    decision_only = bool(options.get("decision_only"))
    prec = PRECISIONS[plan.precision.name]
    ctx = context(plan, prefix, prec, portable=bool(options.get("portable_exp")),
                  decision_only=decision_only)
    ctx["measured"] = measured_calls(plan, prefix, decision_only)
    memory = {k: hex(int(board[k])) for k in ("flash_origin", "flash_size", "ram_origin",
                                               "ram_size")}
    return {
        "fw_driver.c": render("c/firmware_driver.c.j2", **ctx),
        "fw_startup.c": render("c/firmware_startup.c.j2", prefix=prefix, sha256=plan.sha256),
        "fw.ld": render("c/firmware.ld.j2", **memory),
    }


def build_image(artifact_dir: Path, model: FrozenModel, options: dict, workdir: Path) -> Path:
    """Cross-build the artifact with the firmware driver and startup; the ELF image."""
    board = Board(options)
    plan = build_plan(model, options.get("precision", "double"))
    source = emitted(artifact_dir, model, options, "c", ".c")
    emitted(artifact_dir, model, options, "c", ".h")
    prefix = source.stem
    for name, text in firmware_sources(plan, prefix, options).items():
        (workdir / name).write_text(text, encoding="ascii")
    image = workdir / "image.elf"
    # Without the portable exp the scorer needs newlib's libm; with it, no libm at all
    # (the link proves it), unless the model takes a square root (newlib's is correctly
    # rounded, as IEEE asks).
    uses_sqrt = any(op.op == "sqrt" for op in program_of(plan).ops)
    libm = [] if (options.get("portable_exp") or options.get("decision_only")) \
        and not uses_sqrt else ["-lm"]
    cmd = [board["compiler"], *board.flags("arch_flags"), *board.flags("cflags"),
           "-ffunction-sections", "-fdata-sections", "-nostartfiles",
           "-T", str(workdir / "fw.ld"), "-Wl,--gc-sections", "-I", str(artifact_dir),
           "-o", str(image), str(workdir / "fw_startup.c"), str(workdir / "fw_driver.c"),
           str(source), *libm]
    _run(cmd, f"cross-building {source.name}", 300)
    return image


def _run(cmd: list[str], what: str, timeout: float, cwd: Path | None = None):
    try:
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, cwd=cwd)
    except FileNotFoundError:
        raise ScorewrightError(f"cortex-m: {cmd[0]} is not installed") from None
    except subprocess.TimeoutExpired:
        raise ScorewrightError(f"cortex-m: {what} took longer than {timeout:g} s") from None
    if proc.returncode != 0:
        detail = " ".join((proc.stderr + proc.stdout).split())[-400:]
        raise ScorewrightError(f"cortex-m: {what} failed (status {proc.returncode}): {detail}")
    return proc


def emulate(image: Path, rows_bin: bytes, options: dict, workdir: Path) -> str:
    """Run the image on the emulated board; the text the driver wrote."""
    board = Board(options)
    (workdir / "rows.bin").write_bytes(rows_bin)
    out = workdir / "out.txt"
    out.unlink(missing_ok=True)
    cmd = [board["qemu"], "-M", str(board["machine"]), *board.flags("qemu_flags"),
           "-kernel", str(image)]
    _run(cmd, f"the emulated run on {board['machine']}", float(board["timeout"]), cwd=workdir)
    if not out.is_file():
        raise ScorewrightError("cortex-m: the firmware wrote no output")
    return out.read_text(encoding="ascii")


@lru_cache(maxsize=None)  # asked once per process and emulator (a failure is not kept)
def emulator_version(qemu: str) -> str:
    return _run([qemu, "--version"], "qemu --version", 60).stdout.splitlines()[0].strip()


def runtime_of(options: dict) -> str:
    board = Board(options)
    qemu = emulator_version(board["qemu"])
    return (f"{compiler_version(board['compiler'])} {' '.join(board.flags('arch_flags'))} "
            f"{' '.join(board.flags('cflags'))}; {board['cpu']} on {qemu} "
            f"-M {board['machine']}")


def run_firmware(artifact_dir: Path, model: FrozenModel, rows: list[dict],
                 options: dict) -> tuple[list[list[str]], dict]:
    """Build and emulate once: the per-row output tokens, and stack bytes per function."""
    plan = build_plan(model, options.get("precision", "double"))
    with tempfile.TemporaryDirectory(prefix="scorewright-cortex-m-") as tmp:
        work = Path(tmp)
        image = build_image(Path(artifact_dir), model, options, work)
        text = emulate(image, encode_rows(plan, rows).tobytes(), options, work)
    lines = text.splitlines()
    if not lines or not lines[-1].startswith("stack"):
        raise ScorewrightError("cortex-m: the firmware's output is incomplete")
    tokens = lines[-1].split()[1:]
    stack = {tokens[i]: int(tokens[i + 1]) for i in range(0, len(tokens) - 1, 2)}
    table = [line.split() for line in lines[:-1]]
    if len(table) != len(rows):
        raise ScorewrightError(f"cortex-m: the firmware scored {len(table)} of {len(rows)} rows")
    return table, stack


def word(text: str) -> float:
    """A double from the hex of its 64-bit pattern."""
    return struct.unpack("<d", struct.pack("<Q", int(text, 16)))[0]


def parse_table(plan: Plan, table: list[list[str]], runtime: str) -> RunOutput:
    """RunOutput from the driver's rows of hex words (and the class index). A class
    index of -99 means the batch function disagreed with the row functions."""
    try:
        return outputs_from_table(plan, table, runtime, number=word, class_of=int)
    except (IndexError, ValueError) as exc:
        raise ScorewrightError(f"cortex-m: unreadable firmware output ({exc})") from None


def run(artifact_dir: Path, model: FrozenModel, rows: list[dict], options: dict) -> RunOutput:
    plan = build_plan(model, options.get("precision", "double"))
    runtime = runtime_of(options)
    table, _ = run_firmware(Path(artifact_dir), model, rows, options)
    if options.get("decision_only"):  # the class index alone: verified on its decisions
        try:
            return decisions(runtime, table)
        except ValueError as exc:
            raise ScorewrightError(f"cortex-m: unreadable firmware output ({exc})") from None
    return parse_table(plan, table, runtime)


def size(artifact_dir: Path, model: FrozenModel, options: dict) -> dict:
    """Flash, RAM and stack of the scorer on this profile's MCU (see firmware_size)."""
    from ..firmware_size import profile_size

    return profile_size(Path(artifact_dir), model, options)

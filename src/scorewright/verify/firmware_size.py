"""Flash, RAM and stack of the C scorer on a Cortex-M microcontroller.

The scorer object alone is cross-compiled at -Os and -O2, in both precisions,
full and decision-only: flash is .text + .rodata, RAM is .data + .bss (from
`size -A`), and each public function's worst-case stack is its own frame plus
the deepest chain of its callees inside the object, from GCC's -fstack-usage
and -fcallgraph-info=su. Calls out of the object (libgcc's software double,
libm's exp, memcmp) are listed; their code and stack are not in these figures,
which is why the emulated run also measures the stack each public function
really uses (painting it; verify/runners/cortex_m.py), callees included.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
from pathlib import Path

from ..emit import emitter
from ..errors import ScorewrightError
from ..model import FrozenModel
from ..plan import build_plan
from .runners.cortex_m import Board, prefix_of

OPT_LEVELS = ("-Os", "-O2")
# A typical small part, for scale (common practice, e.g. a mid-range Cortex-M4F):
TYPICAL_MCU = {"flash_bytes": 256 * 1024, "ram_bytes": 64 * 1024}

_NODE = re.compile(r'node: \{ title: "([^"]+)" label: "([^"\\]+)(?:\\n[^"]*?)?'
                   r'(?:\\n(\d+) bytes \(([a-z,]+)\))?"')
_EDGE = re.compile(r'edge: \{ sourcename: "([^"]+)" targetname: "([^"]+)"')


def _run(cmd: list[str], what: str):
    try:
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    except FileNotFoundError:
        raise ScorewrightError(f"size: {cmd[0]} is not installed") from None
    if proc.returncode != 0:
        detail = " ".join(proc.stderr.split())[-300:]
        raise ScorewrightError(f"size: {what} failed: {detail}")
    return proc.stdout


def _tool(compiler: str, name: str) -> str:
    """A binutils program beside the cross compiler (arm-none-eabi-gcc -> arm-none-eabi-size)."""
    return compiler[: -len("gcc")] + name if compiler.endswith("gcc") else name


def _sections(text: str) -> dict[str, int]:
    out = {"text": 0, "rodata": 0, "data": 0, "bss": 0}
    for line in text.splitlines():
        parts = line.split()
        if len(parts) >= 2 and parts[0].startswith(".") and parts[1].isdigit():
            kind = parts[0][1:].split(".")[0]
            if kind in out:
                out[kind] += int(parts[1])
    return out


def _stack(ci_text: str, public: list[str]) -> tuple[dict[str, int | None], list[str]]:
    """Worst-case stack bytes of each public function within the object (None if a
    frame is dynamic), and the functions called outside the object."""
    frames: dict[str, int | None] = {}
    names: dict[str, str] = {}
    for title, label, size, kind in _NODE.findall(ci_text):
        names[title] = label
        if size:
            frames[title] = int(size) if kind == "static" else None
    calls: dict[str, set[str]] = {}
    for src, dst in _EDGE.findall(ci_text):
        calls.setdefault(src, set()).add(dst)
    external = sorted({names.get(d, d) for ds in calls.values() for d in ds if d not in frames})

    def worst(title: str, seen: frozenset) -> int | None:
        own = frames.get(title, 0)
        if own is None or title in seen:
            return None
        deepest = 0
        for callee in calls.get(title, ()):
            if callee in frames:
                depth = worst(callee, seen | {title})
                if depth is None:
                    return None
                deepest = max(deepest, depth)
        return own + deepest

    by_name = {names[t]: t for t in frames}
    return {fn: worst(by_name[fn], frozenset()) if fn in by_name else 0 for fn in public}, \
        external


def measure_object(source: Path, board: Board, opt: str, workdir: Path) -> dict:
    """Sections and per-function stack of one scorer object."""
    obj = workdir / f"{source.stem}{opt}.o"
    _run([board["compiler"], *board.flags("arch_flags"), *board.flags("cflags"), opt,
          "-fstack-usage", "-fcallgraph-info=su", "-c", str(source), "-o", str(obj)],
         f"compiling {source.name} at {opt}")
    sections = _sections(_run([_tool(board["compiler"], "size"), "-A", str(obj)], "size -A"))
    symbols = _run([_tool(board["compiler"], "nm"), "-g", "--defined-only", str(obj)], "nm")
    public = sorted(line.split()[-1] for line in symbols.splitlines()
                    if len(line.split()) == 3 and line.split()[1] == "T")
    stack, external = _stack(obj.with_suffix(".ci").read_text(encoding="utf-8"), public)
    return {"flash_bytes": sections["text"] + sections["rodata"],
            "ram_bytes": sections["data"] + sections["bss"], **sections,
            "stack_bytes": stack, "calls_outside": external}


def measure_model(model: FrozenModel, options: dict) -> dict:
    """The size table of a model's C scorer for the board in `options` (a profile's
    [verify] table over its [emit] table): per precision, full and decision-only."""
    board = Board(options)
    if shutil.which(board["compiler"]) is None:
        raise ScorewrightError(f"size: {board['compiler']} is not installed (Debian: apt-get "
                               "install gcc-arm-none-eabi libnewlib-arm-none-eabi)")
    emit = emitter("c")
    variants = []
    task = model.head.task
    for precision in ("double", "float"):
        variants.append((precision, "full"))
        if task != "regression":
            variants.append((precision, "decision-only"))
    table = []
    with tempfile.TemporaryDirectory(prefix="scorewright-size-") as tmp:
        work = Path(tmp)
        for precision, kind in variants:
            opts = {"precision": precision}
            if options.get("prefix"):
                opts["prefix"] = options["prefix"]
            if options.get("portable_exp"):
                opts["portable_exp"] = True
            if kind == "decision-only":
                opts["decision_only"] = True
            where = work / f"{precision}-{kind}"
            where.mkdir()
            arts = emit(model, opts)
            for art in arts:
                (where / art.name).write_bytes(art.content)
            source = where / next(a.name for a in arts if a.name.endswith(".c"))
            for opt in OPT_LEVELS:
                row = {"precision": precision, "build": kind, "opt": opt}
                row.update(measure_object(source, board, opt, where))
                table.append(row)
    return {"cpu": board["cpu"], "compiler": board["compiler"],
            "arch_flags": " ".join(board.flags("arch_flags")),
            "exp": "portable" if options.get("portable_exp") else "libm (newlib)",
            "objects": table, "typical_small_mcu": TYPICAL_MCU}


def profile_size(artifact_dir: Path, model: FrozenModel, options: dict) -> dict:
    """The size table plus the stack each public function used on the emulated board
    (over the edge rows and some random rows of the model)."""
    from .cases import edge_rows, random_rows
    from .runners.cortex_m import run_firmware

    out = measure_model(model, options)
    plan = build_plan(model, options.get("precision", "double"))
    rows = [r for _, r in edge_rows(plan)] + random_rows(plan, 50, seed=11)
    _, stack = run_firmware(artifact_dir, model, rows, options)
    out["measured_stack_bytes"] = {"precision": plan.precision.name, "machine":
                                   Board(options)["machine"], **stack}
    out["prefix"] = prefix_of(plan, options)
    return out


def report_text(size: dict) -> str:
    """The size table as printed by `scorewright emit --target c --report`."""
    lines = [f"{size['cpu']} ({size['compiler']} {size['arch_flags']}), the scorer object "
             f"alone; exp: {size['exp']}",
             f"{'precision':<10}{'build':<15}{'opt':<5}{'flash B':>9}{'RAM B':>7}  "
             "worst-case stack B per public function"]
    for row in size["objects"]:
        stack = ", ".join(f"{fn} {'dynamic' if b is None else b}"
                          for fn, b in row["stack_bytes"].items())
        lines.append(f"{row['precision']:<10}{row['build']:<15}{row['opt']:<5}"
                     f"{row['flash_bytes']:>9}{row['ram_bytes']:>7}  {stack}")
    outside = sorted({c for row in size["objects"] for c in row["calls_outside"]})
    lines.append("flash = .text + .rodata, RAM = .data + .bss; stack: own frames along the "
                 "deepest call chain in the object")
    lines.append(f"not counted (called outside the object): {', '.join(outside) or 'nothing'}")
    typical = size["typical_small_mcu"]
    lines.append(f"for scale, a typical small MCU has {typical['flash_bytes'] // 1024} KB "
                 f"flash and {typical['ram_bytes'] // 1024} KB RAM (common practice)")
    return "\n".join(lines) + "\n"


M4F_BOARD = {"cpu": "Cortex-M4F", "compiler": "arm-none-eabi-gcc",
             "arch_flags": "-mcpu=cortex-m4 -mthumb -mfloat-abi=hard -mfpu=fpv4-sp-d16",
             "cflags": "-std=c99 -ffp-contract=off -Wall -Wextra -Werror"}


def emit_report(model: FrozenModel, options: dict) -> str:
    """`emit --report`: the size table for the Cortex-M4F build, whatever the host."""
    return report_text(measure_model(model, {**M4F_BOARD, **{
        k: v for k, v in options.items() if k in ("prefix", "portable_exp")}}))

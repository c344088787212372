"""The C batch scorer: the scoring program over a block of rows, in three passes.

A batch row is doubles in feature order, level codes as doubles. The batch scorer
takes the rows a block at a time (`BATCH_BLOCK`) and renders the program in
passes over the block, so that no pass waits on another's latency:

1. the terms: each row's term values into a small table `t[row][slot]` (a chunk
   of the program's term positions at a time, `split_margins` cut into parts, so
   the table stays small on a microcontroller's stack). A run is a stretch of
   consecutive terms whose operations are alike but for their constants and read
   consecutive columns: one loop renders them, the constants in `static const`
   tables, written so a compiler can vectorize it at -O2 (every choice is a
   select, so the loop has no branch; GCC's SSE2 code for `isfinite` uses
   signalling compares, so a NaN in a batch row sets the FE_INVALID flag, which
   traps only if the caller enabled FP traps; the row functions raise no flag);
2. the margins: each row's margin adds its terms, read back from `t` in the
   program's order, to a running sum that starts at -0.0: (-0.0) + t == t exactly
   for every t (round to nearest), so s = -0.0 + t_0 + t_1 + ... has the bits of
   the program's t_0 + t_1 + ... (no -ffast-math; the additions are the program's,
   in its order). The rows' sums are independent chains, so a processor overlaps
   them; a sum inside the term loop would wait on each addition's latency;
3. the link: the program's operations after the margins, looped over the block's
   margins. Each selection of reals there is spelled as a selection of bits
   (`pick`), the same bits as `f ? a : b` with no branch, so the loop vectorizes
   where the exp does (the portable exp at -O3) and a margin's sign costs no
   mispredicted branch where it does not (libm's exp).
"""
from __future__ import annotations

import dataclasses

from ..plan import Plan
from ..program import Const, Op, Program, prune
from .c_precision import CPrecision
from .statements import Renderer, Spelling, split_margins


def table_name(prefix: str, index: int, nth: int = 0) -> str:
    """The contribution table of input `index` (its `nth` lookup term after the first:
    a multiclass target encoding gives an input one per class)."""
    return f"{prefix}_term_{index}" + (f"_{nth}" if nth else "")



def batch_spelling(row: Spelling, prec: CPrecision) -> Spelling:
    """The row spellings, reading a batch row's doubles: a code is NaN or -1 when missing,
    and anything that is not an integral level code is unseen (the NaN test comes first:
    ordered comparisons with NaN raise FE_INVALID; the range test guards the cast)."""
    reads = {
        "read_real": prec.batch_read,
        "read_code": "(({src} != {src} || {src} == -1.0) ? -1 : (({src} >= 0.0 && "
                     "{src} < {n}.0 && (double)(int){src} == {src}) ? (int){src} : -2))",
    }
    return dataclasses.replace(row, ops={**row.ops, **reads})


# Rows per block, and the term values per row the terms pass keeps at once: the
# block's tables (t, the margins) stay within BLOCK_BYTES, a few KB of stack.
BATCH_BLOCK = 16
BLOCK_SLOTS = 16
BLOCK_BYTES = 2560
# Chunks per function of a wide model's batch scorer (see batch_code).
PART_CHUNKS = 8


def block_shape(program: Program, prec: CPrecision) -> tuple[int, int]:
    """(rows per block, term positions per chunk of the terms pass)."""
    K = program.plan.n_margins
    size = 4 if prec.real == "float" else 8
    per_position = max(1, K)
    positions = max(1, BLOCK_SLOTS // per_position)
    slots = positions * per_position
    block = max(1, min(BATCH_BLOCK, BLOCK_BYTES // (size * (slots + K))))
    return block, positions


def batch_code(program: Program, spelling: Spelling, link_spelling: Spelling,
               prec: CPrecision, prefix: str, tables: dict, outputs: list[str],
               margin_part: set[str]) -> dict:
    """Tables (declarations) and statements of `<prefix>_batch_block`, which scores
    n <= block rows at `rows` and writes the `outputs` of each to `out`."""
    plan = program.plan
    K = plan.n_margins
    R = prec.real
    block, positions = block_shape(program, prec)
    split = split_margins(program, positions)
    decls: list[str] = []
    chunks = []   # per chunk: its statements, its slots, whether it loops on j
    n_runs = 0
    for first in range(0, len(split.groups), positions):
        chunk = split.groups[first:first + positions]
        body, order, n_runs = _chunk_terms(program, chunk, spelling, prec, prefix, tables,
                                           decls, n_runs)
        uses_j = any(line.startswith("for (j") for line in body)
        reads = "x[" in "\n".join(body)
        lines = ["for (r = 0; r < n; r++) {"]
        lines += [f"    const double *x = rows + (size_t)r * {len(plan.inputs)};"] if reads else []
        lines += [f"    {line}" for line in body] + ["}"]
        add, used = _chunk_sums(order, K, R)
        chunks.append((lines + add, len(order), uses_j or used))
    # a wide model's chunks go to functions of PART_CHUNKS chunks each (the same
    # statements in the same order): GCC's time grows faster than a function's length
    parts = []
    if len(chunks) > PART_CHUNKS:
        for i in range(0, len(chunks), PART_CHUNKS):
            group = chunks[i:i + PART_CHUNKS]
            parts.append({"name": f"{prefix}_batch_part{len(parts)}",
                          "lines": _locals(group, block, R) + ["(void)rows;", "(void)m;"] + [
                              line for lines, _, _ in group for line in lines]})
        lines = [f"{part['name']}(rows, n, m);" for part in parts]
        chunk_locals = []
    else:
        lines = [line for body, _, _ in chunks for line in body]
        chunk_locals = _locals(chunks, block, R)
    intercepts = Renderer(program, spelling, {}, tables=tables)
    top = [f"{R} m[{K}][{block}];"] + (chunk_locals or ["int r;"])
    top += ["(void)rows; /* a model whose weights are all zero reads no input */",
            "(void)m; /* a margin of no terms is its intercept, a constant */",
            "for (r = 0; r < n; r++) {"]
    top += [f"    m[{k}][r] = -{prec.literal(0.0)};" for k in range(K)] + ["}"]
    lines = top + lines
    lines += ["for (r = 0; r < n; r++) {"]
    lines += [f"    m[{k}][r] = m[{k}][r] + {intercepts.operand(b)};"
              for k, b in enumerate(split.intercepts)] + ["}"]
    # the link: the program's operations after the margins, over the block's rows
    rename = {m: f"m[{k}][r]" for k, m in enumerate(split.margins) if isinstance(m, str)}
    link = Renderer(program, link_spelling, {}, rename, tables)
    ops = [op for op in prune(program, outputs) if op.dest not in margin_part]
    body = link.lines(ops)
    body += [f"out[(size_t)r * {len(outputs)} + {j}] = (double){link.outputs[o]};"
             for j, o in enumerate(outputs)]
    lines += ["for (r = 0; r < n; r++) {"] + [f"    {line}" for line in body] + ["}"]
    return {"batch_tables": decls, "batch_lines": lines, "batch_block": block,
            "batch_parts": parts}


def _locals(chunks, block: int, R: str) -> list[str]:
    """The terms table (as long as the chunks' longest), r, and j where a chunk loops."""
    slots = max((n for _, n, _ in chunks), default=0)
    out = [f"{R} t[{block}][{slots}];"] if slots else []
    return out + ["int r;"] + (["int j;"] if any(j for _, _, j in chunks) else [])


def _chunk_terms(program: Program, chunk, spelling: Spelling, prec: CPrecision, prefix: str,
                 tables: dict, decls: list[str], n_runs: int):
    """One row's statements for a chunk of term positions, each term's value stored in
    t[r][slot]; and, per slot, the margin it belongs to (slots in the program's order)."""
    plan = program.plan
    straight = Renderer(program, spelling, {i: f"x[{i}]" for i in range(len(plan.inputs))},
                        tables=tables)
    lines: list[str] = []
    order: list[int] = []
    start = 0
    while start < len(chunk):
        end = _run_end(plan, chunk, start)
        if end - start > 1:
            base = len(order)
            width = len(chunk[start][1])

            def store(i, k, value, base=base, width=width):
                return f"t[r][{base} + j * {width} + {i}] = {value};" if width > 1 \
                    else f"t[r][{base} + j] = {value};"

            lines += _loop(program, chunk[start:end], spelling, prec, f"{prefix}_run{n_runs}",
                           decls, store)
            order += [k for _ in range(end - start) for k, _t in chunk[start][1]]
            n_runs += 1
        else:
            cone, terms = chunk[start]
            lines += straight.lines(cone)
            for k, t in terms:
                lines.append(f"t[r][{len(order)}] = {straight.operand(t)};")
                order.append(k)
        start = end
    return lines, order, n_runs


def _chunk_sums(order: list[int], K: int, R: str) -> tuple[list[str], bool]:
    """Each margin adds its chunk's terms, in the program's order, to its running sum:
    stretches of slots a fixed step apart as one loop."""
    body: list[str] = []
    uses_j = False
    for k in range(K):
        mine = [s for s, owner in enumerate(order) if owner == k]
        if not mine:
            continue
        body.append(f"{R} s{k} = m[{k}][r];")
        i = 0
        while i < len(mine):
            step = mine[i + 1] - mine[i] if i + 1 < len(mine) else 0
            n = 1
            while step and i + n < len(mine) and mine[i + n] - mine[i + n - 1] == step:
                n += 1
            if n > 2:
                index = f"{mine[i]} + j * {step}" if step > 1 else f"{mine[i]} + j"
                body.append(f"for (j = 0; j < {n}; j++) {{")
                body.append(f"    s{k} = s{k} + t[r][{index}];")
                body.append("}")
                uses_j = True
            else:
                n = 1
                body.append(f"s{k} = s{k} + t[r][{mine[i]}];")
            i += n
        body.append(f"m[{k}][r] = s{k};")
    if not body:
        return [], False
    return ["for (r = 0; r < n; r++) {"] + [f"    {line}" for line in body] + ["}"], uses_j


def _shape(cone: list[Op], terms) -> tuple | None:
    """What a term's operations are, but for their constants and the column they read;
    None for a term no loop can take (a level lookup, a bucket)."""
    local = {op.dest: i for i, op in enumerate(cone)}
    shape = []
    for op in cone:
        if op.op in ("lookup", "read_code", "bucket"):
            return None
        args = tuple(("const", a.type) if isinstance(a, Const) else ("name", local.get(a, a))
                     for a in op.args)
        shape.append((op.op, op.type, args))
    return tuple(shape), tuple((k, local[t]) for k, t in terms)


def _column(cone: list[Op]) -> int | None:
    reads = [op.attr for op in cone if op.op == "read_real"]
    return reads[0] if len(reads) == 1 else None


def _run_end(plan: Plan, groups, start: int) -> int:
    """One past the last group of the run that starts at `start`."""
    shape = _shape(*groups[start])
    column = _column(groups[start][0])
    end = start + 1
    if shape is None or column is None:
        return end
    while end < len(groups) and _shape(*groups[end]) == shape \
            and _column(groups[end][0]) == column + (end - start):
        end += 1
    return end


def _loop(program: Program, run, spelling: Spelling, prec: CPrecision, name: str,
          decls: list[str], store) -> list[str]:
    """One loop over the run's inputs: the first term's operations with each constant that
    differs along the run read from a table of the run's constants at that place."""
    first, terms = run[0]
    rename = {}
    ops = []
    for i, op in enumerate(first):
        args = []
        for a, arg in enumerate(op.args):
            values = [cone[i].args[a].value for cone, _ in run] if isinstance(arg, Const) else []
            if values and len({repr(v) for v in values}) > 1:
                slot = f"{name}_{i}_{a}"
                decls += _table(slot, arg.type, values, prec)
                rename[slot] = f"{slot}[j]"
                args.append(slot)
            else:
                args.append(arg)
        ops.append(dataclasses.replace(op, args=tuple(args)))
    column = _column(first)
    r = Renderer(program, spelling, {column: f"x[{column} + j]"}, rename)
    body = r.lines(ops) + [store(i, k, r.operand(t)) for i, (k, t) in enumerate(terms)]
    return ([f"for (j = 0; j < {len(run)}; j++) {{"] + [f"    {line}" for line in body]
            + ["}"])


def _table(name: str, type_: str, values: list, prec: CPrecision) -> list[str]:
    ctype, spell = (prec.real, prec.literal) if type_ == "real" else ("int", str)
    out = [f"static const {ctype} {name}[{len(values)}] = {{"]
    for i in range(0, len(values), 3):
        out.append("    " + ", ".join(spell(v) for v in values[i:i + 3]) + ",")
    return out + ["};"]

"""`build` and `verify`: emit every target, run each artifact in its real runtime on the
user's rows, edge-case rows and random rows, and compare with the reference evaluator."""

from __future__ import annotations

import math
import time
import traceback
from dataclasses import dataclass, field
from pathlib import Path

import click
import numpy as np

from .. import __version__
from ..emit import emitter
from ..errors import ScorewrightError
from ..files import check_writable, write_atomic
from ..model import FrozenModel
from ..plan import Plan, build_plan
from ..reference import encode_rows, program_of, score_matrix, score_row
from .cases import edge_rows, random_rows, read_csv_rows, rows_for_precision
from .compare import MAXIMA, RULE, Comparison, compare, ulp_distance
from .interrupts import stop_if_interrupted
from .profiles import Profile, builtin_names, load_profile
from .runners import artifact_size, runner

SHOWN_ROWS = 5


@dataclass
class TargetResult:
    profile: Profile
    status: str                      # pass | fail | error | skipped
    message: str = ""
    install: str = ""                # skipped: the command that installs what is missing
    runtime: str = ""
    artifacts: list = field(default_factory=list)
    comparison: Comparison | None = None
    shown: list = field(default_factory=list)   # the first disagreeing rows, in full
    row_ulps: np.ndarray | None = None          # per row, the largest ULP distance
    seconds: float = 0.0
    size: dict | None = None                    # flash/RAM/stack, for runners that measure


@dataclass
class AgreementReport:
    model: FrozenModel
    row_sources: dict
    results: list
    seconds: float = 0.0

    @property
    def ok(self) -> bool:
        """Every target that ran agrees (a skipped target did not run)."""
        return all(r.status in ("pass", "skipped") for r in self.results)

    def count(self, status: str) -> int:
        return sum(1 for r in self.results if r.status == status)

    @property
    def exit_status(self) -> int:
        """0: every target that ran agrees; 1: one disagrees (or its artifact did not
        run); 2: no disagreement, but a target could not be checked (a missing artifact)."""
        if self.count("fail"):
            return 1
        return 2 if self.count("error") else 0

    def headline(self) -> str:
        """One sentence: how many targets agree, disagree, could not be checked, skipped."""
        ran = len(self.results) - self.count("skipped")
        parts = []
        if self.count("pass"):
            parts.append(f"{self.count('pass')} of {ran} targets that ran agree with the "
                         "reference evaluator")
        disagree = sum(1 for r in self.results if r.status == "fail" and r.comparison)
        broken = self.count("fail") - disagree
        if disagree:
            parts.append(f"{disagree} DISAGREE")
        if broken:
            parts.append(f"{broken} did not run (a fault of the artifact or its runtime)")
        if self.count("error"):
            parts.append(f"{self.count('error')} could not be checked (see the note)")
        if self.count("skipped"):
            parts.append(f"{self.count('skipped')} skipped (runtime not installed here)")
        if not ran:
            parts.insert(0, "no target could run here")
        return "; ".join(parts) + "."


def select_profiles(targets, only_available: bool) -> list[Profile]:
    """The requested profiles, or every built-in one this machine can run."""
    if targets:
        profiles = [load_profile(t) for t in targets]
        names = [p.name for p in profiles]
        dup = next((n for n in names if names.count(n) > 1), None)
        if dup:
            raise ScorewrightError(f"--target {dup!r} given twice")
        return profiles
    profiles = [load_profile(n) for n in builtin_names()]
    if only_available:  # build lists the others as skipped; see build_targets
        profiles = [p for p in profiles if not p.missing_requirements()]
    return profiles


def check_rows(plan: Plan, data: Path | None, n_random: int, seed: int):
    rows, labels = [], []
    sources = {}
    if data is not None:
        user = read_csv_rows(plan, data)
        rows += user
        labels += [f"{data.name} line {i + 2}" for i in range(len(user))]
        sources["user"] = len(user)
    edges = edge_rows(plan)
    rows += [r for _, r in edges]
    labels += [f"edge case: {name}" for name, _ in edges]
    sources["edge"] = len(edges)
    rand = random_rows(plan, n_random, seed)
    rows += rand
    labels += [f"random row {i}" for i in range(len(rand))]
    sources["random"] = len(rand)
    return rows, labels, sources


# The oracle runs the reference evaluator's numpy table over all rows and holds it to the
# scalar table, the truth (tests/test_program.py: the same bits on every conformance
# model), on every row while that costs at most SCALAR_CHECK_OPS operation evaluations,
# else on evenly spaced rows to about that many: row by row, a quantile step of
# scikit-learn's default 1,000 quantiles (some 8,000 operations a value) took three
# minutes on its 6,000 edge rows.
SCALAR_CHECK_OPS = 4_000_000


def expected_outputs(plan: Plan, rows: list[dict]) -> dict:
    """The oracle: the reference evaluator on every row."""
    out = score_matrix(plan, encode_rows(plan, rows))
    step = max(1, math.ceil(len(rows) * len(program_of(plan).ops) / SCALAR_CHECK_OPS))
    for i in range(0, len(rows), step):
        _same_as_scalar(plan, rows[i], out, i)
    out.update(cut=plan.cut, link=plan.link)
    return out


def _same_as_scalar(plan: Plan, row: dict, out: dict, i: int) -> None:
    s = score_row(plan, row)
    pairs = [(s.margins, out["margins"][i])]
    if plan.task == "regression":
        pairs += [((s.value,), out["value"][i:i + 1])]
        if plan.offset is not None:
            pairs += [((s.rate,), out["rate"][i:i + 1])]
    else:
        if plan.has_probabilities:
            pairs += [(s.probabilities, out["probabilities"][i])]
        pairs += [((float(s.class_index),), out["class_index"][i:i + 1].astype(np.float64))]
    for scalar, vector in pairs:
        a, b = np.asarray(scalar, dtype=np.float64), np.asarray(vector, dtype=np.float64)
        if ((a.view(np.uint64) != b.view(np.uint64)) & ~(np.isnan(a) & np.isnan(b))).any():
            raise ScorewrightError(f"internal error: the reference evaluator's scalar and "
                                   f"numpy tables disagree on check row {i}; please report it")


def is_default_oracle(tol) -> bool:
    return tol.precision == "double" and tol.exp == "libm"


def oracle(model: FrozenModel, tol, rows: list[dict]):
    """(plan, rows, expected outputs) for a target with this stated tolerance.

    A single-precision target runs the float plan (float guards and bounds) on float32
    inputs; the oracle is the reference evaluator of that plan on those inputs. A target
    carrying the portable exp is compared with a reference using the same exp."""
    plan = build_plan(model, tol.precision, exp=tol.exp)
    rows = rows_for_precision(plan, rows, tol.precision)
    return plan, rows, expected_outputs(plan, rows)


def artifact_names(model: FrozenModel, profile: Profile) -> list[str]:
    return [a.name for a in emitter(profile.emitter)(model, dict(profile.emit))]


def artifact_dir(root: Path, profile: Profile) -> Path:
    """Where a profile's artifacts are: ROOT/<profile>/ as `build` writes them, or ROOT
    itself as `emit -o ROOT` writes them."""
    sub = Path(root) / profile.name
    return sub if sub.is_dir() else Path(root)


def profiles_found(model: FrozenModel, root: Path) -> list[Profile]:
    """The built-in profiles whose artifacts are in ROOT, in either layout.

    `build`'s layout names the profile (a sub-directory each). A folder written by `emit`
    holds the files alone: a profile is found there when every file it emits is present
    and byte-identical. Several profiles emit the same names (the C targets): when none of
    them matches the bytes (an altered file), the first is checked, so the alteration is
    reported as a disagreement rather than passed over."""
    root = Path(root)
    profiles = [load_profile(n) for n in builtin_names()]
    nested = [p for p in profiles if (root / p.name).is_dir()]
    if nested:
        return nested
    found, by_names = [], {}
    for profile in profiles:
        arts = emitter(profile.emitter)(model, dict(profile.emit))
        if not all((root / a.name).is_file() for a in arts):
            continue
        same = all((root / a.name).read_bytes() == a.content for a in arts)
        key = tuple(sorted(a.name for a in arts))
        by_names.setdefault(key, []).append((profile, same))
    for group in by_names.values():
        matching = [p for p, same in group if same]
        found += matching or [group[0][0]]
    return sorted(found, key=lambda p: p.name)


def emit_targets(model: FrozenModel, outdir: Path, profiles, force: bool,
                 before_writing=None) -> None:
    """Write every profile's artifacts into OUTDIR/<profile>/; refuse before writing anything
    if a file exists and --force is not given. `before_writing()` runs once all is checked."""
    planned = []
    for profile in profiles:
        for art in emitter(profile.emitter)(model, dict(profile.emit)):
            path = outdir / profile.name / art.name
            check_writable(path, force)
            planned.append((path, art.content))
    if before_writing is not None:
        before_writing()
    for path, content in planned:
        write_atomic(path, content, force=force)


def progress_to_stderr(text: str) -> None:
    """Progress goes to stderr, so stdout holds only the summary."""
    click.echo(text, err=True)


def verify_targets(model: FrozenModel, outdir: Path, profiles, data=None, n_random=1000,
                   seed=0, options=None, progress=progress_to_stderr,
                   before_running=None) -> AgreementReport:
    """Run every profile's artifacts in OUTDIR/<profile>/; `progress` gets a line per
    target as it finishes (None: silent). `before_running()` runs once the rows are read
    and checked, so bad input (--data) stops everything before it changes a file."""
    started = time.perf_counter()
    say = progress or (lambda text: None)
    plan = build_plan(model)
    rows, labels, sources = check_rows(plan, data, n_random, seed)
    expected = expected_outputs(plan, rows)
    if before_running is not None:
        before_running()
    say(f"verifying {len(profiles)} target{'s' if len(profiles) != 1 else ''} on "
        f"{len(rows):,} rows ({', '.join(f'{k} {v:,}' for k, v in sources.items())})")
    results = []
    width = len(str(len(profiles)))
    for i, profile in enumerate(profiles, 1):
        result = _verify_one(model, outdir, profile, rows, labels, expected,
                             dict(options or {}))
        results.append(result)
        say(f"  [{i:>{width}}/{len(profiles)}] {progress_line(result)}")
    stop_if_interrupted()
    return AgreementReport(model, sources, results, time.perf_counter() - started)


def progress_line(r: TargetResult) -> str:
    if r.status == "skipped":
        return f"{r.profile.name:<22} SKIPPED  {r.message}"
    return f"{r.profile.name:<22} {r.status.upper():<8} {r.seconds:6.1f} s"


def skipped(profile: Profile, lacks: list[str]) -> TargetResult:
    install = profile.install_command(lacks)
    return TargetResult(profile, "skipped", f"needs {', '.join(lacks)}; install: {install}",
                        install=install)


def _verify_one(model, outdir, profile, rows, labels, expected, extra) -> TargetResult:
    t0 = time.perf_counter()
    lacks = profile.missing_requirements()
    if lacks:
        return skipped(profile, lacks)
    result = _check_target(model, outdir, profile, rows, labels, expected, extra)
    result.seconds = time.perf_counter() - t0
    return result


def _check_target(model, outdir, profile, rows, labels, expected, extra) -> TargetResult:
    where = artifact_dir(outdir, profile)
    names = artifact_names(model, profile)
    result = TargetResult(profile, "error", artifacts=[str(where / n) for n in names])
    for name in names:
        path = where / name
        if not path.is_file():
            result.message = f"artifact {path} is missing"
            return result
        if model.sha256.encode("ascii") not in path.read_bytes():
            result.status = "fail"
            result.message = (f"artifact {path} does not carry this model's SHA-256 "
                              f"({model.sha256[:12]}...): it belongs to another model or "
                              "was altered")
            return result
    options = profile.run_options
    options.update(extra.get(profile.runner, {}))
    if not is_default_oracle(profile.tolerance):
        _, rows, expected = oracle(model, profile.tolerance, rows)
    try:
        got = runner(profile.runner)(where, model, rows, options)
    except ScorewrightError as exc:
        stop_if_interrupted()
        result.status = "fail"
        result.message = f"the artifact did not run: {exc}"
        return result
    except Exception as exc:  # a runtime's own failure is a finding, not a crash of verify
        # A runtime may turn Ctrl-C into an error of its own (DuckDB: "Query interrupted").
        stop_if_interrupted()
        result.status = "fail"
        last = traceback.format_exception_only(type(exc), exc)[-1].strip()
        result.message = f"the artifact did not run: {last[:300]}"
        return result
    result.runtime = got.runtime
    size = artifact_size(profile.runner)
    if size is not None:
        try:
            result.size = size(where, model, options)
        except Exception as exc:  # a size report that cannot be made is noted, not fatal
            stop_if_interrupted()
            result.size = {"error": traceback.format_exception_only(type(exc), exc)[-1].strip()}
    comparison = compare(expected, got, profile.tolerance)
    result.comparison = comparison
    result.row_ulps = _row_ulps(expected, got, profile.tolerance.precision)
    result.status = "pass" if comparison.ok else "fail"
    if not comparison.ok:
        result.message = (f"{comparison.failing_count} of {comparison.rows} rows disagree; "
                          f"first: {labels[comparison.failing_rows[0]]} "
                          f"({', '.join(comparison.reasons[comparison.failing_rows[0]])})")
        result.shown = [_show_row(i, labels, rows, expected, got, comparison)
                        for i in comparison.failing_rows[:SHOWN_ROWS]]
    return result


def _row_ulps(expected, got, precision) -> np.ndarray | None:
    if got.margins is None:  # decision only: no figure to measure in ULPs
        return None
    try:
        parts = [ulp_distance(expected["margins"], got.margins, precision).max(axis=1)]
        if "probabilities" in expected:
            parts.append(ulp_distance(expected["probabilities"], got.probabilities,
                                      precision).max(axis=1))
        if "value" in expected:
            parts.append(ulp_distance(expected["value"], got.value, precision))
        if "rate" in expected:
            parts.append(ulp_distance(expected["rate"], got.rate, precision))
        return np.max(np.stack(parts), axis=0)
    except (ValueError, TypeError):
        return None


def _plain(x):
    if isinstance(x, (float, np.floating)):
        x = float(x)
        return x if math.isfinite(x) else repr(x)
    if isinstance(x, np.integer):
        return int(x)
    return x


def _show_row(i, labels, rows, expected, got, comparison) -> dict:
    shown = {"row": labels[i], "inputs": {k: _plain(v) for k, v in rows[i].items()},
             "disagrees_on": comparison.reasons[i],
             "expected": {"margins": [_plain(v) for v in expected["margins"][i]]},
             "got": {}}
    if got.margins is None:  # a decision-only artifact gives its class index alone
        shown["expected"]["class_index"] = int(expected["class_index"][i])
        shown["got"]["class_index"] = _plain(np.asarray(got.class_index)[i])
        return shown
    shown["got"]["margins"] = [_plain(v) for v in np.asarray(got.margins)[i]]
    if "probabilities" in expected:
        shown["expected"]["probabilities"] = [_plain(v) for v in expected["probabilities"][i]]
        shown["got"]["probabilities"] = [_plain(v) for v in np.asarray(got.probabilities)[i]]
    if "class_index" in expected:
        shown["expected"]["class_index"] = int(expected["class_index"][i])
        shown["got"]["class_index"] = _plain(np.asarray(got.class_index)[i])
    if "value" in expected:
        shown["expected"]["value"] = _plain(expected["value"][i])
        shown["got"]["value"] = _plain(np.asarray(got.value)[i])
    if "rate" in expected:
        shown["expected"]["rate"] = _plain(expected["rate"][i])
        shown["got"]["rate"] = _plain(np.asarray(got.rate)[i])
    return shown


REPORT_NAMES = ("agreement.json", "agreement.html")
UNVERIFIED = "UNVERIFIED.txt"
UNVERIFIED_TEXT = """\
The artifacts in this folder have NOT been verified.

`scorewright build` writes this file before it emits anything and removes it once
agreement.json and agreement.html are written. If you can read this, the build was
interrupted or failed before its check finished: do not use these artifacts; run
`scorewright build` again (or `scorewright verify MODEL THIS_FOLDER`).
"""


def write_reports(report: AgreementReport, outdir: Path) -> tuple[Path, Path]:
    from .report import agreement_html, agreement_json

    json_path, html_path = (outdir / name for name in REPORT_NAMES)
    write_atomic(json_path, agreement_json(report).encode("utf-8"), force=True)
    write_atomic(html_path, agreement_html(report).encode("utf-8"), force=True)
    return json_path, html_path


def mark_unverified(outdir: Path) -> None:
    """Say the folder is unverified until its new agreement report is written; an older
    report would speak for artifacts that are being replaced, so it goes first."""
    write_atomic(outdir / UNVERIFIED, UNVERIFIED_TEXT.encode("utf-8"), force=True)
    for name in REPORT_NAMES:
        (outdir / name).unlink(missing_ok=True)


def build_targets(model: FrozenModel, outdir: Path, targets=None, force=False, data=None,
                  n_random=1000, seed=0, options=None,
                  progress=progress_to_stderr) -> AgreementReport:
    """Emit every requested target (default: every built-in one; those this machine cannot
    run are reported as skipped and not written) and verify them."""
    outdir = Path(outdir)
    profiles = select_profiles(targets, only_available=False)
    runnable = [p for p in profiles if not p.missing_requirements()]

    def emit():
        emit_targets(model, outdir, runnable, force,
                     before_writing=lambda: mark_unverified(outdir))

    report = verify_targets(model, outdir, profiles, data=data, n_random=n_random, seed=seed,
                            options=options, progress=progress, before_running=emit)
    write_reports(report, outdir)
    (outdir / UNVERIFIED).unlink(missing_ok=True)
    return report


def summary_lines(report: AgreementReport) -> list[str]:
    """The console summary: a line per target, the rule, the headline."""
    lines = []
    for r in report.results:
        c = r.comparison
        detail = ""
        if c is not None:
            diffs = ", ".join(f"{k} {c.max_ulps[k]:g} ULP / {c.max_abs.get(k, 0.0):.2g} abs"
                              for k in c.max_ulps)
            detail = f"{c.rows} rows; max difference: {diffs}" if diffs else \
                f"{c.rows} rows; decisions only: {c.label_mismatches} differ"
        msg = f" - {r.message}" if r.message else ""
        lines.append(f"{r.status.upper():<11} {r.profile.name:<22} {detail}{msg}")
    if any(r.comparison is not None for r in report.results):
        lines += ["", f"rule: {RULE}"]
    if any(passed_on_abs(r) for r in report.results):
        lines.append(MAXIMA)
    return lines


ULP_BOUNDS = {"margin": "margin_ulps", "probability": "probability_ulps",
              "predicted_value": "value_ulps", "predicted_rate": "value_ulps"}


def passed_on_abs(r: TargetResult) -> bool:
    """A passing target whose largest ULP figure exceeds its ULP bound: some row passed on
    the absolute (or relative) bound, which the ULP column alone does not show."""
    if r.status != "pass" or r.comparison is None:
        return False
    tol = r.profile.tolerance
    return any(v > getattr(tol, ULP_BOUNDS[k]) for k, v in r.comparison.max_ulps.items()
               if k in ULP_BOUNDS)


__all__ = ["build_targets", "verify_targets", "write_reports", "summary_lines",
           "select_profiles", "AgreementReport", "TargetResult", "__version__"]

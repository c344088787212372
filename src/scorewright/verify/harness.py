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
from ..reference import score_row
from .cases import edge_rows, random_rows, read_csv_rows, rows_for_precision
from .compare import Comparison, compare, ulp_distance
from .profiles import Profile, builtin_names, load_profile
from .runners import artifact_size, runner

SHOWN_ROWS = 5


@dataclass
class TargetResult:
    profile: Profile
    status: str                      # pass | fail | error | unavailable
    message: str = ""
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
        return all(r.status == "pass" for r in self.results)


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
    if only_available:
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


def expected_outputs(plan: Plan, rows: list[dict]) -> dict:
    """The oracle: the step-by-step reference evaluator on every row."""
    scores = [score_row(plan, r) for r in rows]
    out = {"margins": np.array([s.margins for s in scores], dtype=np.float64)
           .reshape(len(rows), plan.n_outputs), "cut": plan.cut, "link": plan.link}
    if plan.task == "regression":
        out["value"] = np.array([s.value for s in scores], dtype=np.float64)
    else:
        out["probabilities"] = np.array([s.probabilities for s in scores], dtype=np.float64)
        out["class_index"] = np.array([s.class_index for s in scores], dtype=np.int64)
    return out


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


def emit_targets(model: FrozenModel, outdir: Path, profiles, force: bool) -> None:
    """Write every profile's artifacts into OUTDIR/<profile>/; refuse before writing anything
    if a file exists and --force is not given."""
    planned = []
    for profile in profiles:
        for art in emitter(profile.emitter)(model, dict(profile.emit)):
            path = outdir / profile.name / art.name
            check_writable(path, force)
            planned.append((path, art.content))
    for path, content in planned:
        write_atomic(path, content, force=force)


def verify_targets(model: FrozenModel, outdir: Path, profiles, data=None, n_random=1000,
                   seed=0, options=None) -> AgreementReport:
    started = time.perf_counter()
    plan = build_plan(model)
    rows, labels, sources = check_rows(plan, data, n_random, seed)
    expected = expected_outputs(plan, rows)
    results = []
    with click.progressbar(profiles, label="verifying", file=click.get_text_stream("stderr"),
                           item_show_func=lambda p: p.name if p else "") as bar:
        for profile in bar:
            results.append(_verify_one(model, outdir, profile, rows, labels, expected,
                                       dict(options or {})))
    return AgreementReport(model, sources, results, time.perf_counter() - started)


def _verify_one(model, outdir, profile, rows, labels, expected, extra) -> TargetResult:
    t0 = time.perf_counter()
    lacks = profile.missing_requirements()
    if lacks:
        return TargetResult(profile, "unavailable", f"this machine lacks {', '.join(lacks)}")
    where = outdir / profile.name
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
        result.status = "fail"
        result.message = f"the artifact did not run: {exc}"
        return result
    except Exception as exc:  # a runtime's own failure is a finding, not a crash of verify
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
    result.seconds = time.perf_counter() - t0
    return result


def _row_ulps(expected, got, precision) -> np.ndarray | None:
    try:
        parts = [ulp_distance(expected["margins"], got.margins, precision).max(axis=1)]
        if "probabilities" in expected:
            parts.append(ulp_distance(expected["probabilities"], got.probabilities,
                                      precision).max(axis=1))
        if "value" in expected:
            parts.append(ulp_distance(expected["value"], got.value, precision))
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
             "got": {"margins": [_plain(v) for v in np.asarray(got.margins)[i]]}}
    if "probabilities" in expected:
        shown["expected"]["probabilities"] = [_plain(v) for v in expected["probabilities"][i]]
        shown["expected"]["class_index"] = int(expected["class_index"][i])
        shown["got"]["probabilities"] = [_plain(v) for v in np.asarray(got.probabilities)[i]]
        shown["got"]["class_index"] = _plain(np.asarray(got.class_index)[i])
    if "value" in expected:
        shown["expected"]["value"] = _plain(expected["value"][i])
        shown["got"]["value"] = _plain(np.asarray(got.value)[i])
    return shown


def write_reports(report: AgreementReport, outdir: Path) -> tuple[Path, Path]:
    from .report import agreement_html, agreement_json

    json_path, html_path = outdir / "agreement.json", outdir / "agreement.html"
    write_atomic(json_path, agreement_json(report).encode("utf-8"), force=True)
    write_atomic(html_path, agreement_html(report).encode("utf-8"), force=True)
    return json_path, html_path


def build_targets(model: FrozenModel, outdir: Path, targets=None, force=False, data=None,
                  n_random=1000, seed=0, options=None) -> AgreementReport:
    """Emit every requested target (default: all this machine can run) and verify them."""
    outdir = Path(outdir)
    profiles = select_profiles(targets, only_available=not targets)
    emit_targets(model, outdir, profiles, force)
    report = verify_targets(model, outdir, profiles, data=data, n_random=n_random, seed=seed,
                            options=options)
    write_reports(report, outdir)
    return report


def summary_lines(report: AgreementReport) -> list[str]:
    lines = []
    for r in report.results:
        c = r.comparison
        detail = ""
        if c is not None:
            diffs = ", ".join(f"{k} {c.max_ulps[k]:g} ULP / {c.max_abs.get(k, 0.0):.2g} abs"
                              for k in c.max_ulps)
            detail = f"{c.rows} rows; max difference: {diffs}"
        msg = f" - {r.message}" if r.message else ""
        lines.append(f"{r.status.upper():<11} {r.profile.name:<22} {detail}{msg}")
    return lines


__all__ = ["build_targets", "verify_targets", "write_reports", "summary_lines",
           "select_profiles", "AgreementReport", "TargetResult", "__version__"]

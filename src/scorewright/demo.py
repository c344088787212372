"""`scorewright demo`: the whole job on the invented compressor-fault data.

Writes the invented readings as CSV, fits and validates the fault model with a
report, freezes it, builds every target this machine can run, verifies each
artifact in its runtime, and says what to open. The data come from known true
coefficients, so the demo also shows how many of them the fit recovers.
"""

from __future__ import annotations

import math
from pathlib import Path

import click

from . import demo_data
from .files import check_writable, write_atomic

MODEL_NAME = "compressor_fault_30d"


def true_coefficient_rows(inference) -> list[tuple[str, float, float, float, float]]:
    """(term, true value, estimate, 95% low, 95% high) for every true coefficient, on the
    scale of demo_data.TRUE_FAULT: per original unit, levels against the first level."""
    from .fit.inference import Z95

    names, est, cov = inference.names, inference.estimate, inference.cov
    index = {name: i for i, name in enumerate(names)}

    def vector(term: str):
        """Weights over the fitted parameters giving the true coefficient's contrast."""
        w = [0.0] * len(names)
        if term == "intercept":
            w[0] = 1.0
            for col, levels in (("refrigerant", demo_data.REFRIGERANTS),
                                ("site_zone", demo_data.ZONES)):
                key = f"{col}={levels[0]}"
                if key in index:   # the fitted intercept sits at the reference level
                    w[index[key]] += 1.0
            return w
        if "=" in term:
            col = term.split("=")[0]
            base = {"refrigerant": demo_data.REFRIGERANTS,
                    "site_zone": demo_data.ZONES}[col][0]
            if term in index:
                w[index[term]] += 1.0
            if f"{col}={base}" in index:
                w[index[f"{col}={base}"]] -= 1.0
            return w
        w[index[term]] = 1.0
        return w

    rows = []
    for term, true in demo_data.TRUE_FAULT.items():
        if term == "intercept":
            true = demo_data.true_fault_intercept()
        w = vector(term)
        value = sum(a * b for a, b in zip(w, est))
        var = sum(w[i] * w[j] * cov[i, j] for i in range(len(w)) for j in range(len(w)))
        se = math.sqrt(var)
        rows.append((term, true, value, value - Z95 * se, value + Z95 * se))
    return rows


def run_demo(outdir: Path, force: bool = False) -> int:
    from .fit import FitOptions, fit_file
    from .fit.console import result_lines
    from .fit.report import render_report

    outdir = Path(outdir)
    data_path = outdir / "compressor_readings.csv"
    model_path = outdir / f"{MODEL_NAME}.json"
    report_path = outdir / "report" / "report.html"
    for path in (data_path, model_path, report_path):
        check_writable(path, force)
    frame = demo_data.compressor_readings()
    write_atomic(data_path, frame.to_csv(index=False).encode("utf-8"), force=force)
    click.echo(f"invented readings for {len(frame)} compressors: {data_path}")
    opts = FitOptions(label="fault_30d", drop=["fault_type", "alarms_per_week"],
                      penalty="none", seed=20261201, name=MODEL_NAME)
    result = fit_file(data_path, opts, echo=click.echo)
    for line in result_lines(result):
        click.echo(line)
    rows = true_coefficient_rows(result.inference)
    inside = sum(1 for _, true, _, lo, hi in rows if lo <= true <= hi)
    click.echo(f"the data were drawn from known coefficients: {inside} of {len(rows)} lie "
               "inside the fit's 95% intervals")
    write_atomic(report_path, render_report(result), force=force)
    result.model.write(model_path, force=force)
    click.echo(f"frozen model: {model_path} (sha256 {result.model.sha256[:16]}...)")
    status = _build_and_verify(result.model, outdir / "targets", data_path, force)
    click.echo("")
    click.echo("open:")
    click.echo(f"  {report_path}  (validation report)")
    click.echo(f"  {outdir / 'targets' / 'agreement.html'}  (agreement of every target)")
    click.echo(f"  {outdir / 'targets'}/  (the scoring code for each target)")
    click.echo("A fitted model is decision support: validate it on data from the sites where "
               "it will run, and have scoring code that drives equipment or decides about "
               "people reviewed under the applicable safety, fairness and local regulations.")
    return status


def _build_and_verify(model, target_dir: Path, data_path: Path, force: bool) -> int:
    from .verify.harness import build_targets, summary_lines

    report = build_targets(model, target_dir, force=force, data=data_path)
    for line in summary_lines(report):
        click.echo(f"  {line}" if line else "")
    click.echo(report.headline())
    if report.exit_status:
        click.echo("not every target that ran agrees with the reference evaluator; see "
                   f"{target_dir / 'agreement.html'}", err=True)
    return report.exit_status

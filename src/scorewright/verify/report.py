"""The agreement report: agreement.json for machines, agreement.html for people."""

from __future__ import annotations

import base64
import html
import io
import json

from .. import __version__
from .compare import MAXIMA, RULE


def _result_dict(r) -> dict:
    c = r.comparison
    tol = r.profile.tolerance
    out = {
        "target": r.profile.name,
        "description": r.profile.description,
        "status": r.status,
        "message": r.message,
        "runtime": r.runtime,
        "artifacts": r.artifacts,
        "stated_tolerance": {k: getattr(tol, k) for k in tol.__dataclass_fields__},
        "seconds": round(r.seconds, 3),
    }
    if r.install:
        out["install"] = r.install
    if r.size is not None:
        out["size"] = r.size
    if c is not None:
        out.update({
            "rows_checked": c.rows,
            "max_ulps": c.max_ulps,
            "max_abs": c.max_abs,
            "label_mismatches": c.label_mismatches,
            "disagreeing_rows": c.failing_count,
            "first_disagreeing_rows": r.shown,
        })
    return out


def agreement_json(report) -> str:
    doc = {
        "model": report.model.name,
        "sha256": report.model.sha256,
        "scorewright_version": __version__,
        "rows": report.row_sources,
        "all_agree": report.ok,
        "headline": report.headline(),
        "rule": RULE,
        "seconds": round(report.seconds, 3),
        "targets": [_result_dict(r) for r in report.results],
    }
    return json.dumps(doc, indent=2, allow_nan=False, default=str) + "\n"


def _plot_png(report) -> str | None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import numpy as np

    results = [r for r in report.results if r.row_ulps is not None]
    if not results:
        return None
    fig, ax = plt.subplots(figsize=(9, 0.6 * len(results) + 1.8), dpi=100)
    for y, r in enumerate(results):
        ulps = np.minimum(r.row_ulps, 1e18)
        jitter = (np.random.default_rng(y).random(len(ulps)) - 0.5) * 0.5
        color = "#2b7a3d" if r.status == "pass" else "#b3261e"
        ax.scatter(ulps + 1.0, y + jitter, s=6, alpha=0.5, color=color)
    ax.set_xscale("log")
    ax.set_yticks(range(len(results)), [r.profile.name for r in results])
    ax.set_xlabel("1 + largest ULP difference from the reference, per row")
    ax.set_title("Agreement with the reference evaluator (every row checked)")
    ax.grid(axis="x", alpha=0.3)
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _stated(tol):
    """The tolerance's non-default entries, as text."""
    for k, field in tol.__dataclass_fields__.items():
        v = getattr(tol, k)
        if isinstance(v, str):
            if v != field.default:
                yield f"{k} {v}"
        elif v:
            yield f"{k} {v:g}"


def agreement_html(report) -> str:
    e = html.escape
    rows = []
    for r in report.results:
        c = r.comparison
        ulps = "" if c is None else ", ".join(f"{k}: {v:g}" for k, v in c.max_ulps.items())
        absd = "" if c is None else ", ".join(f"{k}: {v:.3g}" for k, v in c.max_abs.items())
        tol = r.profile.tolerance
        stated = ", ".join(_stated(tol))
        rows.append(
            f"<tr class='{e(r.status)}'><td>{e(r.profile.name)}</td><td>{e(r.status)}</td>"
            f"<td>{e(r.runtime)}</td><td>{'' if c is None else c.rows}</td><td>{e(ulps)}</td>"
            f"<td>{e(absd)}</td><td>{'' if c is None else c.label_mismatches}</td>"
            f"<td>{e(stated or 'bit-identical')}</td><td>{e(r.message)}</td></tr>")
    shown = []
    for r in report.results:
        if r.shown:
            shown.append(f"<h3>{e(r.profile.name)}: first disagreeing rows</h3>"
                         f"<pre>{e(json.dumps(r.shown, indent=2, default=str))}</pre>")
    sizes = [f"<h3>{e(r.profile.name)}: size</h3><pre>{e(json.dumps(r.size, indent=2))}</pre>"
             for r in report.results if r.size]
    shown = sizes + shown
    png = _plot_png(report)
    plot = f"<img alt='agreement plot' src='data:image/png;base64,{png}'>" if png else ""
    from .harness import passed_on_abs

    verdict = report.headline()
    maxima = f"<p>{e(MAXIMA)}</p>" if any(passed_on_abs(r) for r in report.results) else ""
    return f"""<!doctype html>
<html lang="en"><head><meta charset="utf-8">
<title>Agreement report: {e(report.model.name)}</title>
<style>
body {{ font-family: sans-serif; margin: 2em; max-width: 80em; }}
table {{ border-collapse: collapse; }} td, th {{ border: 1px solid #ccc; padding: 4px 8px; }}
tr.pass td:nth-child(2) {{ color: #2b7a3d; font-weight: bold; }}
tr.fail td:nth-child(2), tr.error td:nth-child(2) {{ color: #b3261e; font-weight: bold; }}
tr.skipped td {{ color: #666; }}
pre {{ background: #f4f4f4; padding: 1em; overflow: auto; }}
</style></head><body>
<h1>Agreement report</h1>
<p>Model <b>{e(report.model.name)}</b>, SHA-256 <code>{e(report.model.sha256)}</code>,
scorewright {e(__version__)}.</p>
<p>Rows checked: {e(", ".join(f"{k} {v}" for k, v in report.row_sources.items()))}.</p>
<p><b>{e(verdict)}</b></p>
<p>{e(RULE)} A skipped target did not run on this machine (its runtime is not installed;
the note gives the command that installs it) and counts neither way.</p>
{maxima}
<table><tr><th>target</th><th>status</th><th>runtime</th><th>rows</th><th>max ULP</th>
<th>max abs</th><th>label mismatches</th><th>stated tolerance</th><th>note</th></tr>
{''.join(rows)}
</table>
{plot}
{''.join(shown)}
<p><small>Agreement shows the artifacts compute what the frozen model says; it does not show
the model is right. Scoring code that drives equipment or decides about people needs review
under the applicable safety, fairness and local regulations.</small></p>
</body></html>
"""

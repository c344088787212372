"""The scorewright command line.

Every user error is one line on stderr and exit status 2; `build` and `verify` exit 1
when an artifact disagrees (a skipped target, whose runtime is absent, does not count),
and 130 on Ctrl-C. Files are written atomically and never overwritten without
--force.
"""

from __future__ import annotations

import signal
import sys
from pathlib import Path

import click

from . import __version__
from .errors import ScorewrightError


class _Group(click.Group):
    def main(self, args=None, prog_name=None, **extra):
        try:
            rv = super().main(args=args, prog_name=prog_name, standalone_mode=False, **extra)
        except click.exceptions.Exit as exc:
            sys.exit(exc.exit_code)
        except click.exceptions.Abort:
            click.echo("error: interrupted", err=True)
            sys.exit(130)
        except click.UsageError as exc:
            where = f" ({exc.ctx.command_path})" if exc.ctx is not None else ""
            click.echo(f"error{where}: {_one_line(exc.format_message())}", err=True)
            sys.exit(2)
        except click.ClickException as exc:
            click.echo(f"error: {_one_line(exc.format_message())}", err=True)
            sys.exit(2)
        except ScorewrightError as exc:
            click.echo(f"error: {_one_line(str(exc))}", err=True)
            sys.exit(2)
        except KeyboardInterrupt:
            click.echo("error: interrupted", err=True)
            sys.exit(130)
        sys.exit(rv if isinstance(rv, int) else 0)


def _one_line(text: str) -> str:
    return " ".join(text.split())


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="scorewright")
def cli():
    """Compile fitted generalized linear models into exact, verified scoring code."""


def _load(path: str):
    from .model import load_model

    return load_model(path)


def _split_names(text: str | None) -> list[str] | None:
    if text is None:
        return None
    names = [n.strip() for n in text.split(",")]
    if any(n == "" for n in names):
        raise ScorewrightError("--feature-names: empty name in the list")
    return names


@cli.command()
@click.argument("pickle_file", type=click.Path(dir_okay=False))
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False),
              help="Where to write the frozen model (JSON).")
@click.option("--name", help="Model name (default: the estimator's class).")
@click.option("--feature-names", help="Comma-separated input names, when the model has none.")
@click.option("--check-data", type=click.Path(dir_okay=False),
              help="CSV or Parquet rows of raw inputs: the frozen model must score them "
                   "like the source estimator (rows derived from the model are always "
                   "checked).")
@click.option("--task", type=click.Choice(["binary", "multiclass", "regression"]),
              help="torch state_dict (.pt): what the Linear layer's outputs are.")
@click.option("--preprocessor", type=click.Path(dir_okay=False),
              help="torch state_dict (.pt): a pickled fitted scikit-learn transformer that "
                   "made the layer's inputs.")
@click.option("--classes", help="torch state_dict (.pt): comma-separated class labels.")
@click.option("--offset", metavar="COLUMN",
              help="statsmodels results fitted with offset= (or a scikit-learn rate model): "
                   "the column that holds it; artifacts output the expected count and the "
                   "rate (without the offset).")
@click.option("--exposure", metavar="COLUMN",
              help="statsmodels results fitted with exposure= (or a scikit-learn model fitted "
                   "on rates): the column that holds it; artifacts output the expected count "
                   "(predicted_value) and the rate per unit of exposure (predicted_rate).")
@click.option("--force", is_flag=True, help="Overwrite an existing output file.")
def freeze(pickle_file, output, name, feature_names, check_data, task, preprocessor, classes,
           offset, exposure, force):
    """Freeze a fitted scikit-learn model, or statsmodels results (results.save), from a
    pickle or joblib file; or a PyTorch Linear layer from its saved state_dict (a .pt file,
    read with weights_only=True) with --task and --feature-names or --preprocessor.

    The frozen model is scored against the source estimator before it is written;
    a model that scores differently is refused. Unpickling runs code stored in
    the file: use only files you trust. The in-process API,
    scorewright.freeze(estimator), avoids this.
    """
    from .files import check_writable
    from .freeze import PICKLE_WARNING, freeze_checked, load_pickled_estimator, read_check_data

    src, out = Path(pickle_file), Path(output)
    if not src.is_file():
        raise ScorewrightError(f"{src}: no such file")
    check_writable(out, force)
    rows = None if check_data is None else read_check_data(Path(check_data))
    extra = {}
    if src.suffix in (".pt", ".pth"):
        from .freeze.torch import module_from_state_dict

        estimator = module_from_state_dict(src, task)
        extra = {"task": task, "classes": _name_list("--classes", classes)}
        if preprocessor is not None:
            click.echo(PICKLE_WARNING.format(path=preprocessor), err=True)
            extra["preprocessor"] = load_pickled_estimator(Path(preprocessor))
    else:
        if task or preprocessor or classes:
            raise ScorewrightError("--task, --preprocessor and --classes apply to a torch "
                                   "state_dict (.pt) only")
        click.echo(PICKLE_WARNING.format(path=src), err=True)
        estimator = load_pickled_estimator(src)
    if offset is not None or exposure is not None:
        extra.update(offset=offset, exposure=exposure)
    model, checked = freeze_checked(estimator, feature_names=_split_names(feature_names),
                                    name=name, check_rows=rows, **extra)
    for note in checked.notes:
        click.echo(f"note: {note}", err=True)
    model.write(out, force=force)
    click.echo(f"{checked.summary()}\nfroze {model.name} ({len(model.features)} features, "
               f"{model.head.task}) to {out}\nsha256 {model.sha256}")


def _name_list(option: str, text: str | None) -> list[str] | None:
    if text is None:
        return None
    names = [n.strip() for n in text.split(",")]
    if any(n == "" for n in names):
        raise ScorewrightError(f"{option}: empty name in the list")
    return names


@cli.command()
@click.argument("data", type=click.Path(dir_okay=False))
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False),
              help="Where to write the frozen model (JSON).")
@click.option("--label", required=True, help="The column to predict.")
@click.option("--positive", help="The positive class of a binary label.")
@click.option("--features", help="Comma-separated feature columns (default: all others).")
@click.option("--drop", help="Comma-separated columns to leave out.")
@click.option("--categorical", help="Comma-separated columns to treat as categories.")
@click.option("--numeric", help="Comma-separated columns to treat as numbers.")
@click.option("--max-levels", default=30, show_default=True,
              help="Most levels a categorical column may have.")
@click.option("--model", "model_kind", metavar="FAMILY",
              help="Model family: logistic, multinomial, linear, poisson, negative-binomial, "
                   "gamma or tweedie[:POWER] (1 < POWER < 2; default 1.5); default: from the "
                   "label.")
@click.option("--penalty", type=click.Choice(["l2", "l1", "elasticnet", "none"]),
              help="Penalty (default: l2; none for negative-binomial).")
@click.option("--cv", default=5, show_default=True, help="Cross-validation folds.")
@click.option("--class-weight", type=click.Choice(["balanced"]),
              help="Weight classes inversely to their frequency.")
@click.option("--cut", help="Binary decision cut: youden, f1, cost:FP/FN or a probability.")
@click.option("--test-fraction", default=0.25, show_default=True,
              help="Share of rows held out as the test part (0: none).")
@click.option("--seed", default=0, show_default=True, help="Seed for the splits.")
@click.option("--name", help="Model name (default: the label column).")
@click.option("--exposure", metavar="COLUMN",
              help="Count models: the exposure column (years, hours); the model fits the rate "
                   "and its artifacts take the column and output the expected count "
                   "(predicted_value) and the rate per unit of exposure (predicted_rate).")
@click.option("--offset", metavar="COLUMN",
              help="Count models: a column added to the margin (the log of an exposure); "
                   "artifacts output the expected count and the rate without it.")
@click.option("--weights", metavar="COLUMN", help="A column of non-negative row weights.")
@click.option("--report", "report_dir", type=click.Path(file_okay=False),
              help="Write report.html into this directory.")
@click.option("--force", is_flag=True, help="Overwrite existing output files.")
def fit(data, output, label, positive, features, drop, categorical, numeric, max_levels,
        model_kind, penalty, cv, class_weight, cut, test_fraction, seed, name, exposure,
        offset, weights, report_dir, force):
    """Fit and validate a model from a CSV or Parquet file, and freeze it."""
    from .files import check_writable, write_atomic
    from .fit import FitOptions, fit_file
    from .fit.console import result_lines

    out = Path(output)
    check_writable(out, force)
    report_path = None if report_dir is None else Path(report_dir) / "report.html"
    if report_path is not None:
        check_writable(report_path, force)
    opts = FitOptions(
        label=label, positive=positive, features=_name_list("--features", features),
        drop=_name_list("--drop", drop), categorical=_name_list("--categorical", categorical),
        numeric=_name_list("--numeric", numeric), max_levels=max_levels, model=model_kind,
        penalty=penalty, cv=cv, class_weight=class_weight, cut=cut, seed=seed,
        test_fraction=test_fraction, name=name, exposure=exposure, offset=offset,
        weights=weights)
    result = fit_file(data, opts, echo=click.echo)
    for line in result_lines(result):
        click.echo(line)
    report = None
    if report_path is not None:
        from .fit.report import render_report

        report = render_report(result)
    result.model.write(out, force=force)
    click.echo(f"froze {result.model.name} to {out}\nsha256 {result.model.sha256}")
    if report is not None:
        write_atomic(report_path, report, force=force)
        click.echo(f"report: {report_path}")


@cli.command()
@click.argument("model_file", type=click.Path(dir_okay=False))
def show(model_file):
    """Describe a frozen model: features, scaling, coefficients, classes, cut, provenance."""
    from .describe import describe_model

    click.echo(describe_model(_load(model_file)), nl=False)


def _parse_columns(pairs) -> dict[str, str]:
    out = {}
    for pair in pairs:
        feature, sep, column = pair.partition("=")
        if not sep or not feature or not column:
            raise ScorewrightError(f"--column {pair!r}: expected FEATURE=COLUMN")
        out[feature] = column
    return out


@cli.command()
@click.argument("model_file", type=click.Path(dir_okay=False))
@click.option("--target", "target", required=True,
              help="Target family: python, sql, c, onnx or java.")
@click.option("-o", "--output", "outdir", required=True, type=click.Path(file_okay=False),
              help="Directory to write the artifact(s) into.")
@click.option("--dialect", help="sql: sqlite, postgres, duckdb (or spark).")
@click.option("--table", help="sql: input table name (default: input).")
@click.option("--keep", help="sql: comma-separated input columns to return (default: all).")
@click.option("--column", "columns", multiple=True, metavar="FEATURE=COLUMN",
              help="sql: read FEATURE from COLUMN (repeatable).")
@click.option("--form", help="sql: select, view, function or expressions (spark).")
@click.option("--layout", type=click.Choice(["wide", "long"]),
              help="sql: a column per feature (wide, default) or a row per (key, feature).")
@click.option("--long-columns", metavar="KEY,FEATURE,VALUE,LEVEL",
              help="sql --layout long: the long table's columns "
                   "(default: row_id,feature,value,level).")
@click.option("--prefix", help="c: symbol and file prefix (default: from the model name).")
@click.option("--precision", type=click.Choice(["double", "float"]),
              help="c, onnx: arithmetic precision (default double).")
@click.option("--inputs", "input_layout", type=click.Choice(["per-feature", "matrix"]),
              help="onnx: one input per feature, or one [N, F] matrix.")
@click.option("--decision-only", is_flag=True, help="c: emit only the class decision (no exp).")
@click.option("--portable-exp", is_flag=True, help="c, java, onnx (double): carry an exp of its own (no libm; the same bits everywhere).")
@click.option("--report", is_flag=True, help="c: print flash, RAM and stack of the scorer.")
@click.option("--force", is_flag=True, help="Overwrite existing artifacts.")
def emit(model_file, target, outdir, dialect, table, keep, columns, form, layout, long_columns,
         prefix, precision, input_layout, decision_only, portable_exp, report, force):
    """Emit the scoring code for one target family into the directory given by -o."""
    from .emit import emitter
    from .files import check_writable, write_atomic

    options = {
        "dialect": dialect, "table": table, "form": form, "prefix": prefix, "layout": layout,
        "long_columns": None if long_columns is None else
        [c.strip() for c in long_columns.split(",")],
        "keep": None if keep is None else [c.strip() for c in keep.split(",")],
        "columns": _parse_columns(columns), "precision": precision, "inputs": input_layout,
        "decision_only": decision_only, "portable_exp": portable_exp, "report": report,
    }
    options = {k: v for k, v in options.items() if v not in (None, False, {})}
    model = _load(model_file)
    artifacts = emitter(target)(model, options)
    size_report = None
    if report:  # measured before anything is written: a missing cross compiler writes nothing
        from .verify.firmware_size import emit_report

        size_report = emit_report(model, options)
    out = Path(outdir)
    for art in artifacts:
        check_writable(out / art.name, force)
    for art in artifacts:
        write_atomic(out / art.name, art.content, force=force)
        click.echo(f"wrote {out / art.name}")
    if size_report is not None:
        click.echo(size_report, nl=False)


def _harness_options(postgres_dsn):
    return {"sql": {"dsn": postgres_dsn}} if postgres_dsn else {}


def _print_summary(report, outdir: Path | None = None):
    from .verify.harness import summary_lines

    for line in summary_lines(report):
        click.echo(line)
    if outdir is not None:
        click.echo(f"agreement report: {outdir / 'agreement.html'} (and agreement.json)")
    click.echo(report.headline())


def _check_requested(profiles):
    for profile in profiles:
        lacks = profile.missing_requirements()
        if lacks:
            raise ScorewrightError(f"target {profile.name!r} cannot run here: this machine "
                                   f"lacks {', '.join(lacks)} (install: "
                                   f"{profile.install_command(lacks)})")


_target_help = "Target profile name or .toml file (repeatable; default: all available)."


@cli.command()
@click.argument("model_file", type=click.Path(dir_okay=False))
@click.option("-o", "--output", "outdir", required=True, type=click.Path(file_okay=False),
              help="Directory for the artifacts (one sub-directory per target) and reports.")
@click.option("--target", "targets", multiple=True, help=_target_help)
@click.option("--data", type=click.Path(dir_okay=False), help="Your own rows to check (CSV).")
@click.option("--random", "n_random", default=1000, show_default=True, type=click.IntRange(0),
              help="Random rows drawn from the frozen schema.")
@click.option("--seed", default=0, show_default=True, type=int, help="Seed for random rows.")
@click.option("--postgres-dsn", help="Use this PostgreSQL server instead of starting one.")
@click.option("--force", is_flag=True, help="Overwrite existing artifacts.")
def build(model_file, outdir, targets, data, n_random, seed, postgres_dsn, force):
    """Emit every target and verify that each agrees with the frozen model.

    A target whose runtime is not installed here is skipped (the summary gives the command
    that installs it). Exit 0 when every target that ran agrees, 1 on a disagreement."""
    from .verify.harness import build_targets, select_profiles

    model = _load(model_file)
    if targets:
        _check_requested(select_profiles(targets, only_available=False))
    report = build_targets(model, Path(outdir), targets=list(targets) or None, force=force,
                           data=Path(data) if data else None, n_random=n_random, seed=seed,
                           options=_harness_options(postgres_dsn))
    _print_summary(report, Path(outdir))
    return report.exit_status


@cli.command()
@click.argument("model_file", type=click.Path(dir_okay=False))
@click.argument("artifact_dir", type=click.Path(file_okay=False))
@click.option("--target", "targets", multiple=True,
              help="Target profile name or .toml file (repeatable; default: every target "
                   "found in ARTIFACT_DIR).")
@click.option("--data", type=click.Path(dir_okay=False), help="Your own rows to check (CSV).")
@click.option("--random", "n_random", default=1000, show_default=True, type=click.IntRange(0),
              help="Random rows drawn from the frozen schema.")
@click.option("--seed", default=0, show_default=True, type=int, help="Seed for random rows.")
@click.option("--postgres-dsn", help="Use this PostgreSQL server instead of starting one.")
@click.option("--report/--no-report", default=True, show_default=True,
              help="Write agreement.json and agreement.html into ARTIFACT_DIR.")
def verify(model_file, artifact_dir, targets, data, n_random, seed, postgres_dsn, report):
    """Check artifacts already on disk against the frozen model (exit 1 on disagreement).

    ARTIFACT_DIR is a folder written by `build` (a sub-directory per target) or by `emit`
    (the files alone)."""
    from .verify.harness import (UNVERIFIED, mark_unverified, profiles_found, select_profiles,
                                 verify_targets, write_reports)

    model = _load(model_file)
    root = Path(artifact_dir)
    if not root.is_dir():
        raise ScorewrightError(f"{root}: no such directory")
    if targets:
        profiles = select_profiles(targets, only_available=False)
    else:
        profiles = profiles_found(model, root)
        if not profiles:
            raise ScorewrightError(f"{root}: no artifacts of this model's built-in targets "
                                   "found (neither target sub-directories as `build` writes "
                                   "them nor files as `emit` writes them); name the target "
                                   "with --target NAME or --target PROFILE.toml")
    _check_requested(profiles)
    # until the new report is written, the folder says it is unverified
    result = verify_targets(model, root, profiles, data=Path(data) if data else None,
                            n_random=n_random, seed=seed, options=_harness_options(postgres_dsn),
                            before_running=(lambda: mark_unverified(root)) if report else None)
    if report:
        write_reports(result, root)
        (root / UNVERIFIED).unlink(missing_ok=True)
    _print_summary(result, root if report else None)
    return result.exit_status


@cli.command()
@click.option("-o", "--output", "outdir", default="scorewright-demo", show_default=True,
              type=click.Path(file_okay=False), help="Directory for everything the demo writes.")
@click.option("--force", is_flag=True, help="Overwrite an earlier demo's files.")
def demo(outdir, force):
    """Fit, freeze, emit and check the invented compressor-fault model end to end."""
    from .demo import run_demo

    return run_demo(Path(outdir), force=force)


def _terminate(signum, frame):
    # Unwind like Ctrl-C so atomic writes remove their temporary files.
    raise KeyboardInterrupt


def main():
    from .verify import interrupts

    signal.signal(signal.SIGTERM, _terminate)
    interrupts.install()  # Ctrl-C stops build/verify even inside a runtime that swallows it
    cli.main(prog_name="scorewright")


if __name__ == "__main__":
    main()

"""`scorewright demo`: the whole job on the invented compressor-fault data."""

from __future__ import annotations

from pathlib import Path

import click

from .demo_data import compressor_readings
from .files import write_atomic

FEATURES_NUMERIC = ["discharge_temp_c", "suction_pressure_kpa", "motor_current_a",
                    "vibration_mm_s", "hours_since_service", "ambient_temp_c",
                    "door_open_min_per_h"]
FEATURES_CATEGORICAL = ["refrigerant", "site_zone"]


def fault_pipeline():
    from sklearn.compose import ColumnTransformer
    from sklearn.impute import SimpleImputer
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import OneHotEncoder, StandardScaler

    prep = ColumnTransformer([
        ("num", make_pipeline(SimpleImputer(strategy="median"), StandardScaler()),
         FEATURES_NUMERIC),
        ("cat", make_pipeline(SimpleImputer(strategy="most_frequent"),
                              OneHotEncoder(handle_unknown="ignore")), FEATURES_CATEGORICAL),
    ])
    return make_pipeline(prep, LogisticRegression(max_iter=2000))


def run_demo(outdir: Path, force: bool = False) -> None:
    from . import freeze
    from .emit import emitter

    frame = compressor_readings()
    data_path = outdir / "compressor_readings.csv"
    write_atomic(data_path, frame.to_csv(index=False).encode("utf-8"), force=force)
    click.echo(f"invented readings for {len(frame)} compressors: {data_path}")
    pipe = fault_pipeline().fit(frame[FEATURES_NUMERIC + FEATURES_CATEGORICAL], frame["fault_30d"])
    model = freeze(pipe, name="compressor_fault_30d")
    model_path = outdir / "compressor_fault_30d.json"
    model.write(model_path, force=force)
    click.echo(f"frozen model: {model_path} (sha256 {model.sha256[:16]}...)")
    for art in emitter("python")(model, {}):
        write_atomic(outdir / art.name, art.content, force=force)
        click.echo(f"python scorer: {outdir / art.name}")
    click.echo(f"score a CSV with: python -I -S {outdir / art.name} < {data_path}")
    click.echo("A fitted model is decision support: validate it on data from the sites where it "
               "will run, and have scoring code that drives equipment reviewed under the "
               "applicable safety rules.")

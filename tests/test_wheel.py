"""The built wheel carries templates/ and targets/, and works from a fresh virtual env."""

from __future__ import annotations

import subprocess
import sys
import venv
import zipfile
from pathlib import Path

import models

ROOT = Path(__file__).resolve().parent.parent


def test_wheel_installs_and_emits_from_a_fresh_venv(tmp_path):
    dist = tmp_path / "dist"
    subprocess.run([sys.executable, "-m", "build", "--wheel", "--no-isolation", "--outdir",
                    str(dist), str(ROOT)], check=True, capture_output=True)
    (wheel,) = dist.glob("scorewright-*.whl")
    names = zipfile.ZipFile(wheel).namelist()
    assert "scorewright/templates/python/scorer.py.j2" in names
    assert "scorewright/targets/python.toml" in names
    env_dir = tmp_path / "venv"
    # The venv sees the already-installed dependencies; scorewright itself comes from the
    # wheel, which the venv's own site-packages put first.
    venv.EnvBuilder(system_site_packages=True, with_pip=True).create(env_dir)
    py = env_dir / "bin" / "python"
    subprocess.run([str(py), "-m", "pip", "install", "--quiet", "--no-deps", "--no-index",
                    str(wheel)], check=True, capture_output=True)
    where = subprocess.run([str(py), "-c", "import scorewright; print(scorewright.__file__)"],
                           capture_output=True, text=True, cwd=tmp_path, check=True).stdout
    assert str(env_dir) in where
    cli = env_dir / "bin" / "scorewright"
    assert subprocess.run([str(cli), "--help"], capture_output=True).returncode == 0
    model = tmp_path / "m.json"
    models.build("iris").model.write(model)
    proc = subprocess.run([str(cli), "emit", str(model), "--target", "python", "-o",
                           str(tmp_path / "out")], capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert (tmp_path / "out" / "iris.py").is_file()

"""The README's demo line, run as written in a fresh virtual environment that has none of
the optional runtimes (no pyspark): it must end with exit 0, the Spark targets listed as
skipped with the command that installs them.

The line is read from README.md and run by bash in a copy of the project, with the
environment's bin/ first on PATH, as a user who activated it would. To keep the test
quick, the environment starts with the project's declared dependencies (core, `runtimes`
and `report`, read from pyproject.toml) already installed: they are installed once into a
template environment kept in pytest's cache and hard-linked into each fresh copy. The
README's `pip install -e` then resolves them as satisfied and installs scorewright itself;
a dependency missing from the template would be fetched by that same line.
"""

from __future__ import annotations

import hashlib
import os
import re
import shutil
import subprocess
import sys
import time
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PROJECT_FILES = ("pyproject.toml", "README.md", "src", "templates", "targets")


def readme_demo_line() -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    lines = [line for block in re.findall(r"```sh\n(.*?)```", text, re.S)
             for line in block.splitlines() if line.rstrip().endswith("scorewright demo")]
    assert len(lines) == 1, lines
    return lines[0]


def declared_dependencies() -> list[str]:
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    extras = project["optional-dependencies"]
    return sorted(project["dependencies"] + extras["runtimes"] + extras["report"])


def _clean_env(venv: Path | None = None) -> dict:
    env = {k: v for k, v in os.environ.items()
           if k not in ("PYTHONPATH", "PYTHONHOME", "VIRTUAL_ENV", "PYTHONSTARTUP")}
    if venv is not None:
        env["VIRTUAL_ENV"] = str(venv)
        env["PATH"] = f"{venv / 'bin'}{os.pathsep}{env.get('PATH', '')}"
    env["PIP_DISABLE_PIP_VERSION_CHECK"] = "1"
    return env


def template_venv(cache_dir: Path) -> Path:
    """A virtual environment holding the declared dependencies only, made once."""
    deps = declared_dependencies()
    key = hashlib.sha256(repr((sys.version, deps)).encode()).hexdigest()[:16]
    done = cache_dir / key
    if (done / "pyvenv.cfg").is_file():
        return done
    work = cache_dir / f"{key}.partial"
    shutil.rmtree(work, ignore_errors=True)
    subprocess.run([sys.executable, "-m", "venv", str(work)], check=True)
    proc = subprocess.run([str(work / "bin" / "python"), "-m", "pip", "install", "-q", *deps],
                          capture_output=True, text=True, env=_clean_env())
    assert proc.returncode == 0, proc.stderr[-2000:]
    work.rename(done)
    return done


def fresh_copy(template: Path, where: Path) -> Path:
    """The template as a new environment (hard links where the file system allows)."""
    proc = subprocess.run(["cp", "-al", str(template), str(where)], capture_output=True)
    if proc.returncode != 0:
        shutil.rmtree(where, ignore_errors=True)
        shutil.copytree(template, where, symlinks=True)
    return where


def project_copy(where: Path) -> Path:
    where.mkdir()
    for name in PROJECT_FILES:
        src = ROOT / name
        if src.is_dir():
            shutil.copytree(src, where / name,
                            ignore=shutil.ignore_patterns("__pycache__", "*.egg-info"))
        else:
            shutil.copy2(src, where / name)
    return where


def test_readme_demo_line_passes_without_the_optional_runtimes(tmp_path, request):
    line = readme_demo_line()
    assert line == "python3 -m pip install -e '.[runtimes,report]' && scorewright demo"
    started = time.monotonic()
    venv = fresh_copy(template_venv(request.config.cache.mkdir("fresh-venv")),
                      tmp_path / "venv")
    env = _clean_env(venv)
    absent = subprocess.run(["python3", "-c", "import pyspark"], env=env, capture_output=True)
    assert absent.returncode != 0, "the fresh environment must not have pyspark"
    clone = project_copy(tmp_path / "scorewright")
    proc = subprocess.run(["bash", "-c", line], cwd=clone, env=env, capture_output=True,
                          text=True, timeout=900)
    took = time.monotonic() - started
    out = proc.stdout
    assert proc.returncode == 0, (out[-3000:], proc.stderr[-3000:])
    assert Path(subprocess.run(["python3", "-c", "import scorewright; print(scorewright."
                                "__file__)"], env=env, capture_output=True, text=True,
                               cwd=tmp_path).stdout.strip()).is_relative_to(clone)
    for name in ("sql-spark", "sql-spark-long"):
        skipped = next(x for x in out.splitlines() if x.split()[1:2] == [name])
        assert skipped.split()[0] == "SKIPPED", skipped
        assert "python3 -m pip install pyspark" in skipped, skipped
    assert "2 skipped (runtime not installed here)" in out
    assert "DISAGREE" not in out and "FAIL" not in out
    assert (clone / "scorewright-demo" / "targets" / "agreement.json").is_file()
    assert re.search(r"\[ *1/\d+\] ", proc.stderr)  # progress while verifying
    print(f"README demo line in a fresh environment: {took:.0f} s")

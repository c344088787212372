"""What a target needs that this machine lacks, and the one command that installs it.

A profile's `[requires]` names Python modules and commands. A target whose needs are not
met is skipped, never counted as a disagreement; the skip names what is missing and how to
get it. The package names below are where each module or command comes from: PyPI for
modules, Debian/Ubuntu packages (apt-get) for commands.
"""

from __future__ import annotations

import importlib.util
import shutil

# module -> PyPI package that provides it (py4j comes with pyspark)
PIP_PACKAGES = {
    "pyspark": "pyspark",
    "py4j": "pyspark",
    "onnxruntime": "onnxruntime",
    "duckdb": "duckdb",
    "psycopg": "'psycopg[binary]'",
}

# command -> Debian/Ubuntu package (as scripts/test.sh installs them)
APT_PACKAGES = {
    "java": "openjdk-17-jre-headless",
    "javac": "openjdk-17-jdk-headless",
    "gcc": "gcc",
    "arm-none-eabi-gcc": "gcc-arm-none-eabi libnewlib-arm-none-eabi",
    "qemu-system-arm": "qemu-system-arm",
}


def missing(requires: dict) -> list[str]:
    """The commands and modules of a `[requires]` table this machine lacks."""
    lacks = [c for c in requires.get("commands", []) if shutil.which(c) is None]
    lacks += [m for m in requires.get("modules", []) if not _importable(m)]
    return lacks


def _importable(module: str) -> bool:
    try:
        return importlib.util.find_spec(module) is not None
    except (ImportError, ValueError):  # a parent package that is absent or broken
        return False


def install_command(requires: dict, lacks: list[str]) -> str:
    """One shell line that installs what `lacks` names (pip for modules, apt-get for
    commands), e.g. `python3 -m pip install pyspark && sudo apt-get install -y ...`."""
    modules = [m for m in requires.get("modules", []) if m in lacks]
    commands = [c for c in requires.get("commands", []) if c in lacks]
    parts = []
    pip = _unique(PIP_PACKAGES.get(m, m) for m in modules)
    if pip:
        parts.append(f"python3 -m pip install {' '.join(pip)}")
    apt = _unique(APT_PACKAGES.get(c, c) for c in commands)
    if apt:
        parts.append(f"sudo apt-get install -y {' '.join(apt)}")
    return " && ".join(parts)


def _unique(items) -> list[str]:
    out = []
    for item in items:
        if item not in out:
            out.append(item)
    return out

"""Emitters: each lowers the scoring plan into one target's syntax.

An emitter is a function `emit(model, options) -> list[Artifact]`; it builds the
plan it needs (`build_plan(model, precision)`) and renders its scoring program
(program.py). Emitters never import each other or the freezer.
"""

from __future__ import annotations

from dataclasses import dataclass
from importlib import import_module


@dataclass(frozen=True)
class Artifact:
    name: str      # file name inside the output directory
    content: bytes


# target name -> module implementing emit(model, options)
EMITTERS = {
    "python": "scorewright.emit.python",
    "sql": "scorewright.emit.sql",
    "onnx": "scorewright.emit.onnx",
    "c": "scorewright.emit.c",
    "java": "scorewright.emit.java",
}


def emitter(target: str):
    from ..errors import ScorewrightError

    if target not in EMITTERS:
        raise ScorewrightError(f"unknown target {target!r}; known: {', '.join(sorted(EMITTERS))}")
    return import_module(EMITTERS[target]).emit


def reject_options(target: str, options: dict, allowed: tuple[str, ...]) -> None:
    """Refuse options that mean nothing for this target, naming the first one."""
    from ..errors import ScorewrightError

    for key in options:
        if key not in allowed:
            flag = "--" + key.replace("_", "-")
            raise ScorewrightError(f"{flag} does not apply to --target {target}")

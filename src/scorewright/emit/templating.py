"""The Jinja2 environment every emitter renders through."""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path

import jinja2

from .. import __version__


def templates_dir() -> Path:
    """templates/ inside the installed package, or at the top of a source checkout."""
    here = Path(__file__).resolve().parent.parent
    for candidate in (here / "templates", here.parent.parent / "templates"):
        if candidate.is_dir():
            return candidate
    raise FileNotFoundError("scorewright's templates/ directory is missing from this install")


@lru_cache(maxsize=1)
def environment() -> jinja2.Environment:
    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(templates_dir())),
        undefined=jinja2.StrictUndefined,
        keep_trailing_newline=True,
        trim_blocks=True,
        lstrip_blocks=True,
        autoescape=False,
    )


def render(template: str, **context) -> str:
    return environment().get_template(template).render(version=__version__, **context)

"""scorewright: compile fitted generalized linear models into exact, verified scoring code."""

__version__ = "0.1.0"

# Bound eagerly so the function, not the `freeze` subpackage, is scorewright.freeze.
from .freeze import freeze  # noqa: E402
from .model import load_model  # noqa: E402

__all__ = ["__version__", "freeze", "load_model"]

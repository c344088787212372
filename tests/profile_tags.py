"""Which built-in profiles a check runs on, chosen by the [tags] table of each profile
(targets/*.toml; DEVELOPERS.md, Tests).

family        python, c, onnx, sql or java: the emitter
emitter_key   profiles with one key render names and sums the same way (one emitter,
              dialect, layout and precision): c/double holds c-double, c-double-portable-exp
              and both Cortex-M boards; onnx/double holds onnxruntime and onnx.reference
needs_server  the profile scores on a server the session starts (PostgreSQL)
cost          low, medium or high: how long one run takes here (high: a qemu boot or Spark)
"""

from __future__ import annotations

import pytest

from scorewright.verify.profiles import builtin_names, load_profile

COSTS = ("low", "medium", "high")
TAGS = ("family", "emitter_key", "needs_server", "cost")


def profiles() -> list:
    return [load_profile(name) for name in builtin_names()]


def one_per_emitter_key() -> dict[str, str]:
    """emitter_key -> the cheapest profile holding it (by cost, then by name)."""
    chosen: dict[str, str] = {}
    for p in sorted(profiles(), key=lambda p: (COSTS.index(p.tags["cost"]), p.name)):
        chosen.setdefault(p.tags["emitter_key"], p.name)
    return chosen


def params_one_per_emitter_key() -> list:
    """Every built-in profile as a pytest parameter: the default tier runs one profile per
    emitter_key, the others are marked slow (run by --runslow)."""
    default = set(one_per_emitter_key().values())
    return [pytest.param(name) if name in default
            else pytest.param(name, marks=pytest.mark.slow) for name in builtin_names()]

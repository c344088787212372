"""The statement renderer: one walk over the scoring program, a language's spellings."""

from __future__ import annotations

import dataclasses

import pytest

import models
from scorewright.emit.python import PYTHON, emit
from scorewright.emit.statements import render
from scorewright.errors import ScorewrightError
from scorewright.plan import build_plan
from scorewright.program import lower
from scorewright.reference import score_row
from scorewright.verify.cases import edge_rows


def _module(model):
    namespace: dict = {"__name__": "scored"}
    exec(emit(model)[0].content.decode("utf-8"), namespace)
    return namespace


@pytest.mark.parametrize("n", [99, 100, 101, 199, 250])
def test_a_long_sum_split_over_statements_keeps_the_order(n):
    """Sums longer than one statement may hold continue on their own name; the margins are
    still the reference evaluator's bits (the left fold in the program's order)."""
    model = models.wide_model(n)
    plan = build_plan(model)
    scorer = _module(model)
    for _, row in edge_rows(plan)[:40]:
        want = score_row(plan, row)
        assert scorer["margin"](row).hex() == want.margins[0].hex()


def test_an_op_a_language_cannot_spell_is_one_error():
    plan = build_plan(models.build("alarms_poisson").model)
    ops = dict(PYTHON.ops)
    del ops["exp"]
    with pytest.raises(ScorewrightError, match="target python cannot express op exp"):
        render(lower(plan), dataclasses.replace(PYTHON, ops=ops), {i.index: "x" for i in plan.inputs})

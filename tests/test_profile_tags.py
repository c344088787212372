"""The [tags] tables of the built-in profiles, which choose the checks each profile gets
(tests/profile_tags.py): present, well-typed, and true of the profile they label, so a
check run once per emitter_key covers every profile of that key."""

from __future__ import annotations

import pytest

from profile_tags import COSTS, TAGS, one_per_emitter_key, profiles
from scorewright.errors import ScorewrightError
from scorewright.verify.profiles import load_profile

# The emit options that decide how an artifact renders names and sums; anything else in
# [emit] (portable_exp) changes the exp routine only.
RENDERING = ("precision", "dialect", "layout", "inputs", "form")


def _rendering(p) -> tuple:
    return (p.emitter,) + tuple(p.emit.get(k) for k in RENDERING)


@pytest.mark.parametrize("profile", profiles(), ids=lambda p: p.name)
def test_every_profile_carries_the_tags(profile):
    tags = profile.tags
    assert sorted(tags) == sorted(TAGS), profile.name
    assert tags["family"] == profile.emitter
    assert tags["cost"] in COSTS
    assert tags["needs_server"] is (profile.emit.get("dialect") == "postgres")
    parts = tags["emitter_key"].split("/")
    assert parts[0] == profile.emitter
    if profile.emitter in ("c", "onnx"):
        assert parts[1:] == [profile.emit.get("precision", "double")]
    elif profile.emitter == "sql":
        assert parts[1:] == [profile.emit["dialect"], profile.emit.get("layout", "wide")]


def test_one_emitter_key_means_one_rendering():
    by_key: dict = {}
    for p in profiles():
        by_key.setdefault(p.tags["emitter_key"], set()).add(_rendering(p))
    assert all(len(r) == 1 for r in by_key.values()), by_key
    renderings = [next(iter(r)) for r in by_key.values()]
    assert len(set(renderings)) == len(renderings), "two keys for one rendering"


def test_the_cheapest_profile_stands_for_its_key():
    chosen = one_per_emitter_key()
    assert chosen["c/double"] == "c-double" and chosen["onnx/double"] == "onnx-double"
    assert len(chosen) == 14 and len(profiles()) == 22


def test_a_tag_of_the_wrong_type_is_refused_in_one_line(tmp_path):
    path = tmp_path / "mine.toml"
    path.write_text('name = "mine"\nemitter = "python"\n[tags]\ncost = ["low"]\n')
    with pytest.raises(ScorewrightError, match=r"\[tags\] 'cost' must be") as exc:
        load_profile(str(path))
    assert "\n" not in str(exc.value)
    path.write_text('name = "mine"\nemitter = "python"\ntags = 3\n')
    with pytest.raises(ScorewrightError, match=r"\[tags\] must be a table"):
        load_profile(str(path))

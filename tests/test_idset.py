"""The survey client's compact id set (longwave.survey.idset) against Python's set.

Reference: Python's built-in ``set`` semantics (membership, add, len), with
small buffers so that merges into the sorted array happen often.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from longwave.survey.idset import IdSet


@settings(max_examples=200, deadline=None)
@given(st.lists(st.text(max_size=12), max_size=60), st.lists(st.text(max_size=12), max_size=30),
       st.integers(1, 7))
def test_behaves_as_a_python_set(added, probes, buffer):
    ours, ref = IdSet(buffer=buffer), set()
    for id in added:
        assert ours.add(id) == (id not in ref)
        ref.add(id)
        assert len(ours) == len(ref)
    for id in added + probes:
        assert (id in ours) == (id in ref)


@pytest.mark.parametrize("a, b", [("a", "a\0"), ("a\0", "a\0\0"), ("", "\0"), ("é", "e")])
def test_ids_differing_only_in_trailing_nuls_or_accents_stay_apart(a, b):
    # numpy's fixed-width bytes strip trailing NULs; the end marker keeps them.
    s = IdSet([a], buffer=1)
    assert a in s and b not in s
    assert s.add(b) and len(s) == 2


def test_longer_ids_after_a_merge_widen_the_array():
    s = IdSet(["x"], buffer=1)
    long_id = "object-with-a-much-longer-name"
    assert long_id not in s
    assert s.add(long_id) and long_id in s and "x" in s


def test_many_short_ids_take_about_their_length_in_bytes():
    # 10-character ids: 11 bytes each in the array (a Python set: about 90).
    n = 200_000
    ids = np.char.add("obj", np.char.zfill(np.arange(n).astype(str), 7)).tolist()
    s = IdSet(ids)
    assert len(s) == n
    assert s.nbytes <= 11 * n
    rng = np.random.default_rng(3)
    for k in rng.integers(0, n, 50):
        assert f"obj{k:07d}" in s
    assert f"obj{n:07d}" not in s and "obj" not in s


def test_non_strings_are_refused():
    with pytest.raises(TypeError, match="ids are strings"):
        IdSet().add(5)
    with pytest.raises(ValueError, match="buffer"):
        IdSet(buffer=0)

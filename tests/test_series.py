"""The validated input (``series.py``): conversion, sorting and every bad input."""

from __future__ import annotations

import numpy as np
import pytest

from longwave import Series

T = [3.0, 1.0, 2.0, 1.0]
Y = [0.3, 0.1, 0.2, 0.15]
E = [0.03, 0.01, 0.02, 0.015]


# --- accepted input ---------------------------------------------------------------
@pytest.mark.parametrize("convert", [
    list,
    lambda v: np.asarray(v, dtype=np.float32),
    lambda v: np.asarray(v, dtype=np.float64),
    tuple,
], ids=["list", "float32", "float64", "tuple"])
def test_sequences_and_dtypes_become_float64(convert):
    s = Series(convert(T), convert(Y), convert(E))
    for arr in (s.t, s.y, s.err):
        assert arr.dtype == np.float64 and arr.shape == (4,)
    np.testing.assert_allclose(s.t, [1.0, 1.0, 2.0, 3.0], rtol=1e-7)


def test_integers_are_accepted():
    s = Series([2, 0, 1], [5, 6, 7], err=1)
    np.testing.assert_array_equal(s.t, [0.0, 1.0, 2.0])
    np.testing.assert_array_equal(s.y, [6.0, 7.0, 5.0])
    np.testing.assert_array_equal(s.err, [1.0, 1.0, 1.0])
    assert s.t.dtype == np.float64


def test_stable_sort_and_order_maps_back():
    # source: numpy.argsort(kind="stable") semantics; repeated times keep input order
    s = Series(T, Y, E)
    np.testing.assert_array_equal(s.t, [1.0, 1.0, 2.0, 3.0])
    np.testing.assert_array_equal(s.order, [1, 3, 2, 0])  # the two t=1.0 stay in order
    np.testing.assert_array_equal(np.asarray(T)[s.order], s.t)
    np.testing.assert_array_equal(np.asarray(Y)[s.order], s.y)
    np.testing.assert_array_equal(np.asarray(E)[s.order], s.err)
    back = np.empty(4)
    back[s.order] = s.y
    np.testing.assert_array_equal(back, Y)


def test_sorted_input_keeps_identity_order(rng):
    t = np.sort(rng.uniform(0, 10, 50))
    s = Series(t, rng.standard_normal(50), 0.1)
    np.testing.assert_array_equal(s.order, np.arange(50))
    np.testing.assert_array_equal(s.t, t)


def test_scalar_err_broadcasts_and_missing_err_is_zero():
    s = Series(T, Y, err=0.05)
    np.testing.assert_array_equal(s.err, np.full(4, 0.05))
    assert s.has_err
    bare = Series(T, Y)
    assert not bare.has_err
    np.testing.assert_array_equal(bare.err, np.zeros(4))


def test_arrays_are_read_only_copies():
    t = np.array([0.0, 1.0, 2.0])
    s = Series(t, [1.0, 2.0, 3.0], 0.1)
    t[0] = 99.0
    assert s.t[0] == 0.0
    for arr in (s.t, s.y, s.err, s.order):
        with pytest.raises(ValueError, match="read-only"):
            arr[0] = 1


def test_len_repr_and_single_point():
    s = Series([5.0], [1.0], 0.1)
    assert len(s) == s.n == 1
    assert repr(Series(T, Y, E)) == "Series(n=4, t=[1 .. 3], has_err=True)"


def test_subset_uses_sorted_positions():
    s = Series(T, Y, E)
    sub = s.subset([0, 2])
    np.testing.assert_array_equal(sub.t, [1.0, 2.0])
    np.testing.assert_array_equal(sub.y, [0.1, 0.2])
    assert sub.has_err
    assert not Series(T, Y).subset([1]).has_err


# --- rejected input -------------------------------------------------------------
def with_bad(position, value, which):
    arrays = {"t": list(T), "y": list(Y), "err": list(E)}
    arrays[which][position] = value
    return arrays["t"], arrays["y"], arrays["err"]


@pytest.mark.parametrize("which", ["t", "y", "err"])
@pytest.mark.parametrize("value, shown", [(np.nan, "nan"), (np.inf, "inf"), (-np.inf, "-inf")])
def test_non_finite_values_name_the_first_index(which, value, shown):
    t, y, err = with_bad(2, value, which)
    arrays = {"t": t, "y": y, "err": err}
    arrays[which][3] = value  # a second bad value: the message names the first
    with pytest.raises(ValueError) as info:
        Series(*arrays.values())
    message = str(info.value)
    for word in [f"{which} must be finite", f"found {shown}", "index 2",
                 "2 non-finite value(s)"]:
        assert word in message


@pytest.mark.parametrize("value", [0.0, -0.1])
def test_non_positive_error_bar_names_the_index(value):
    with pytest.raises(ValueError) as info:
        Series(*with_bad(1, value, "err"))
    for word in ["err must be positive", f"found {value}", "index 1", "1 such value(s)"]:
        assert word in str(info.value)


@pytest.mark.parametrize("value", [0.0, -1.0, np.nan])
def test_bad_scalar_err(value):
    with pytest.raises(ValueError, match="err must be (positive|finite).*index 0"):
        Series(T, Y, err=value)


@pytest.mark.parametrize("args, words", [
    ((T, Y[:3], None), ["t and y must have equal length", "4 and 3"]),
    ((T, Y, E[:2]), ["t and err must have equal length", "4 and 2"]),
    (([], [], None), ["at least one point", "empty"]),
    ((np.zeros((2, 2)), np.zeros((2, 2)), None), ["t must be one-dimensional", "(2, 2)"]),
    ((T, np.zeros((4, 1)), None), ["y must be one-dimensional", "(4, 1)"]),
    ((T, Y, np.full((4, 1), 0.1)), ["err must be one-dimensional", "(4, 1)"]),
    ((3.0, 1.0, None), ["t must be one-dimensional", "()"]),
    ((["a", "b"], [1, 2], None), ["t must be numeric"]),
    ((T, Y, "wide"), ["err must be numeric"]),
    (([1.0, 2.0], [1.0, None], None), ["y must be finite", "index 1"]),  # None becomes nan
], ids=["y-length", "err-length", "empty", "t-2d", "y-2d", "err-2d", "scalar", "t-text",
        "err-text", "y-none"])
def test_malformed_input_is_rejected(args, words):
    with pytest.raises(ValueError) as info:
        Series(*args)
    for word in words:
        assert word in str(info.value)


def test_errors_chain_the_conversion_failure():
    # rule 7 of STYLE.md: exceptions are chained with "from exc"
    with pytest.raises(ValueError) as info:
        Series(["x"], [1.0])
    assert isinstance(info.value.__cause__, ValueError)

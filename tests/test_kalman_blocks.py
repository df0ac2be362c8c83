"""Block-diagonal Kalman path (``methods/kalman_blocks.py``, ``_loops/kalman_blocks.py``).

Reference: the dense loops of ``_loops/kalman.py`` (themselves checked against
plain-numpy twins in ``test_loops_kalman.py``) and dense Exact inference; the
block path reorders the same arithmetic, so results agree to round-off.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import hard_series
from scipy.linalg import block_diag

from longwave import Model, Series, log_marginal_likelihood
from longwave._loops import kalman_blocks as loops
from longwave.kernels import (
    Cosine,
    Matern12,
    Matern32,
    Matern52,
    Oscillator,
    Periodic,
    SquaredExp,
)
from longwave.methods import Exact, Kalman
from longwave.methods.kalman_blocks import BlockKalman, block_layout

CASES = {
    "matern32": lambda: Matern32(amplitude=1.0, scale=3.0),
    "trend+quasi-periodic": lambda: Matern52(amplitude=3.0, scale=30.0)
    + Matern32(amplitude=1.0, scale=4.0) * Periodic(amplitude=1.0, period=1.3, scale=0.8),
    "periodic+osc+se": lambda: Periodic(amplitude=1.0, period=1.3, scale=0.6)
    + Oscillator(amplitude=1.0, frequency=1.0, quality=0.2)
    + SquaredExp(amplitude=1.0, scale=2.0, order=4),
    "cosine*cosine*matern12": lambda: Cosine(amplitude=1.0, period=2.0)
    * Cosine(amplitude=1.0, period=3.0) * Matern12(amplitude=1.0, scale=4.0),
    "osc-near-critical": lambda: Oscillator(amplitude=1.0, frequency=2.0, quality=0.500001),
}


def block_transition_dense(lay, dt):
    """Plain-numpy twin: the blocks of ``A(dt)`` assembled into a dense matrix."""
    bstart = lay.trans[0]
    blocks = np.zeros((bstart.size - 1,) + lay.trans[4].shape[2:])
    loops.block_transition(dt, lay.trans, blocks)
    return block_diag(*[blocks[b, : bstart[b + 1] - bstart[b], : bstart[b + 1] - bstart[b]]
                        for b in range(bstart.size - 1)])


@pytest.mark.parametrize("case", sorted(CASES))
def test_block_layout_reproduces_the_permuted_transition(case):
    ss = CASES[case]().state_space()
    lay = block_layout(ss)
    perm = lay.perm
    assert sorted(perm) == list(range(ss.dim))
    for dt in [0.03, 0.8, 5.0]:
        expected = ss.transition(dt)[np.ix_(perm, perm)]
        np.testing.assert_allclose(block_transition_dense(lay, dt), expected, rtol=0, atol=1e-13)
    np.testing.assert_array_equal(lay.Pinf, ss.Pinf[np.ix_(perm, perm)])


def test_periodic_terms_become_two_by_two_blocks():
    # each harmonic of the Fourier form is its own rotation (kernels/periodic.py)
    lay = block_layout(Periodic(amplitude=1.0, period=1.0, scale=0.5, order=6).state_space())
    assert list(lay.block_sizes) == [1] + [2] * 6


@pytest.mark.parametrize("cache", [8, 1, 0])
@pytest.mark.parametrize("case", sorted(CASES))
def test_block_kalman_matches_dense_kalman(case, cache, rng):
    kernel = CASES[case]()
    t = np.sort(rng.uniform(0.0, 60.0, 300))
    t[7] = t[8]  # a repeated time
    t[150:] += 40.0  # a gap
    series = Series(t, rng.standard_normal(t.size), err=0.3)
    model = Model(kernel, mean=0.1, excess_noise=0.05)
    v_d, g_d = log_marginal_likelihood(model, series, method=Kalman(), gradient=True)
    v_b, g_b = log_marginal_likelihood(model, series, method=BlockKalman(cache=cache),
                                       gradient=True)
    assert v_b == pytest.approx(v_d, rel=1e-11, abs=1e-9)
    np.testing.assert_allclose(g_b, g_d, rtol=1e-8, atol=1e-8 * max(1.0, np.abs(g_d).max()))
    assert log_marginal_likelihood(model, series, method=BlockKalman(cache=cache)) == \
        pytest.approx(v_b, rel=1e-13)


def test_cache_on_a_regular_cadence_with_gaps_matches_exact(rng):
    # a regular cadence with missing points and a Julian-date offset: steps take a few
    # distinct rounded values, so the cache's slots are all used and reused
    t = 2.46e6 + np.arange(400) * 0.05
    keep = rng.uniform(size=t.size) > 0.2
    kernel = Matern32(amplitude=1.0, scale=3.0) * Cosine(amplitude=1.0, period=1.7)
    t = t[keep]
    y = np.linalg.cholesky(kernel(t) + 0.04 * np.eye(t.size)) @ rng.standard_normal(t.size)
    series = Series(t, y, err=0.2)
    model = Model(kernel, mean=0.0, excess_noise=0.05)
    v_e, g_e = log_marginal_likelihood(model, series, method=Exact(), gradient=True)
    v_b, g_b = log_marginal_likelihood(model, series, method=BlockKalman(cache=3), gradient=True)
    assert v_b == pytest.approx(v_e, rel=1e-10)
    np.testing.assert_allclose(g_b, g_e, rtol=1e-7, atol=1e-7)


def test_block_kalman_on_hard_series(rng):
    # repeated times, gaps of 1000 scales, offset 2.46e6 (conftest.hard_series)
    kernel = Matern32(amplitude=1.0, scale=3.0) + Oscillator(amplitude=0.5, frequency=2.0,
                                                             quality=4.0)
    series = hard_series(rng, 200, 3.0, 1.0)
    model = Model(kernel, mean=0.2, excess_noise=0.1)
    v_k, g_k = log_marginal_likelihood(model, series, method=Kalman(), gradient=True)
    v_b, g_b = log_marginal_likelihood(model, series, method=BlockKalman(), gradient=True)
    assert v_b == pytest.approx(v_k, rel=1e-11)
    np.testing.assert_allclose(g_b, g_k, rtol=1e-8, atol=1e-8)


def test_bad_cache_argument_is_rejected():
    for bad in ["yes", -1, True, 2.5]:
        with pytest.raises(ValueError, match="whole number of slots"):
            BlockKalman(cache=bad)

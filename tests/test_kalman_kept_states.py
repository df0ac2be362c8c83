"""A Kalman posterior's memory choices: kept or re-smoothed blocks, stored or recomputed states.

Sources: the dense posterior (Rasmussen & Williams 2006, eqs. 2.22-2.24,
computed by ``Exact``) for the values, and the checkpointed posterior (the
same recursions, re-run per block) for the equality of the paths.
"""

from __future__ import annotations

import numpy as np
import pytest

from longwave import Model, Series
from longwave.kernels import Matern12, Matern32, Matern52
from longwave.methods import Exact
from longwave.methods.kalman import KalmanPosterior


@pytest.fixture
def case(rng):
    t = np.sort(rng.uniform(0, 300, 900))
    t[100:104] = t[100]  # repeated times
    y = np.sin(t / 11.0) + 0.2 * rng.standard_normal(t.size)
    series = Series(t, y, rng.uniform(0.1, 0.3, t.size))
    model = Model(Matern52(amplitude=1.0, scale=8.0) + Matern12(amplitude=0.3, scale=2.0),
                  mean=0.1, excess_noise=0.05)
    queries = rng.uniform(-20, 320, 700)  # unsorted, beyond both ends too
    return model, series, queries


@pytest.mark.parametrize("fast", [False, True])
def test_kept_states_give_the_predictions_of_re_smoothing(case, fast):
    model, series, queries = case
    if fast:
        model = Model(Matern52(amplitude=1.0, scale=8.0), mean=0.1, excess_noise=0.05)
    kept = KalmanPosterior(model, series, block=128, fast=fast)
    lean = KalmanPosterior(model, series, block=128, fast=fast, keep=False)
    for post in (kept, lean):
        post.predict(np.sort(queries))  # the first prediction runs the backward pass
    (sweep,) = kept._sweeps  # 900 points: one sequential pass
    assert not sweep.kept  # nothing kept by the first prediction
    first = kept.predict(queries)  # the second re-smooths and keeps
    assert len(sweep.kept) == sweep.starts.size and not lean._sweeps[0].kept
    a, b = kept.predict(queries[::-1]), lean.predict(queries[::-1])
    np.testing.assert_allclose(first.mean, a.mean[::-1], rtol=1e-14, atol=1e-14)
    np.testing.assert_allclose(a.mean, b.mean, rtol=1e-13, atol=1e-13)
    np.testing.assert_allclose(a.var, b.var, rtol=1e-12, atol=1e-14)
    ref = Exact().posterior(model, series).predict(queries[::-1])
    np.testing.assert_allclose(a.mean, ref.mean, rtol=1e-8, atol=1e-9)
    np.testing.assert_allclose(a.var, ref.var, rtol=1e-8, atol=1e-10)


def test_the_memory_budget_decides_by_default(case, monkeypatch):
    model, series, _ = case
    assert KalmanPosterior(model, series)._may_keep  # 900 points: well inside 128 MB
    monkeypatch.setenv("LONGWAVE_KALMAN_STATES_MB", "1")
    big = Series(np.arange(60_000.0), np.zeros(60_000), 0.1)  # 60000 * 20 doubles = 9.2 MB
    assert not KalmanPosterior(model, big)._may_keep
    d1 = Model(Matern12(amplitude=1.0, scale=8.0), excess_noise=0.05)
    assert KalmanPosterior(d1, series, fast=True)._lean  # the specialised loops: lean
    assert not KalmanPosterior(d1, series, fast=True, lean=False)._lean
    assert not KalmanPosterior(model, big)._lean  # the general loops store their states


@pytest.mark.parametrize("split", [False, True])
def test_recomputed_filtered_states_give_the_stored_ones_predictions(case, split):
    # lean: the filtered states of a block are re-run from its checkpoint
    _, series, queries = case
    model = Model(Matern32(amplitude=1.0, scale=8.0) + Matern12(amplitude=0.3, scale=2.0),
                  mean=0.1, excess_noise=0.05)  # d = 3: the specialised loops
    stored = KalmanPosterior(model, series, block=128, fast=True, split=split, lean=False)
    lean = KalmanPosterior(model, series, block=128, fast=True, split=split, lean=True)
    assert stored.split_at == lean.split_at and (stored.split_at is not None) == split
    ref = Exact().posterior(model, series).predict(queries)
    for _ in range(2):  # the second prediction keeps the recomputed states
        a, b = stored.predict(queries), lean.predict(queries)
        np.testing.assert_allclose(b.mean, a.mean, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(b.var, a.var, rtol=1e-11, atol=1e-13)
        np.testing.assert_allclose(b.mean, ref.mean, rtol=1e-8, atol=1e-9)
        np.testing.assert_allclose(b.var, ref.var, rtol=1e-8, atol=1e-10)
    assert all(len(sweep.kept) == sweep.starts.size for sweep in lean._sweeps)


@pytest.mark.parametrize("split", [False, True])
def test_compiled_block_pass_equals_the_block_by_block_path(case, split):
    # A lean posterior answers sorted queries with one compiled pass over the
    # blocks they need (blocks_pass) and unsorted ones block by block in
    # Python: the same loops in the same order, so the same numbers to rounding
    # (the predictor takes four queries at a time where it can, so the order of
    # the queries moves a few of them between its vector and scalar paths),
    # whichever blocks a prediction starts from and in whatever order predictions come.
    _, series, queries = case
    model = Model(Matern32(amplitude=1.0, scale=8.0) + Matern12(amplitude=0.3, scale=2.0),
                  mean=0.1, excess_noise=0.05)  # d = 3: the specialised loops
    sorted_q = np.sort(queries)
    one_go = KalmanPosterior(model, series, block=64, fast=True, split=split, lean=True,
                             keep=False)
    by_block = KalmanPosterior(model, series, block=64, fast=True, split=split, lean=True,
                               keep=False)
    assert all(hasattr(sweep.source, "run_blocks") for sweep in one_go._sweeps)
    ref = by_block.predict(queries)  # unsorted: the Python path, all blocks
    order = np.argsort(queries, kind="stable")
    # a late range first (runs from the end), then an early one (from its checkpoint)
    late, early = sorted_q[sorted_q > 200], sorted_q[sorted_q < 40]
    for part in (late, early, sorted_q):
        got = one_go.predict(part)
        want = by_block.predict(part[::-1])  # reversed: not sorted, the Python path
        np.testing.assert_allclose(got.mean, want.mean[::-1], rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(got.var, want.var[::-1], rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(one_go.predict(sorted_q).mean, ref.mean[order], rtol=1e-12,
                               atol=1e-14)
    exact = Exact().posterior(model, series).predict(sorted_q)
    np.testing.assert_allclose(got.mean, exact.mean, rtol=1e-8, atol=1e-9)
    np.testing.assert_allclose(got.var, exact.var, rtol=1e-8, atol=1e-10)
    assert all(sweep.have_ckpt for sweep in one_go._sweeps)
    # the paths share buffers: block by block, then one go over late blocks, then block by block
    mixed = KalmanPosterior(model, series, block=64, fast=True, split=split, lean=True,
                            keep=False)
    first = mixed.predict(queries)
    mixed.predict(late)
    again = mixed.predict(queries)
    np.testing.assert_array_equal(again.mean, first.mean)
    np.testing.assert_array_equal(again.var, first.var)

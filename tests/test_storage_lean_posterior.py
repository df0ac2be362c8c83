"""The block-checkpointed Kalman posterior (lean storage for long series and big grids).

Correctness sources: a full RTS smoother pass over the whole series (Rauch,
Tung & Striebel 1965, as run by the compiled loops) must give exactly the
same predictions, whatever the block size; dense exact inference
(``methods.Exact``) is the reference for the posterior itself.
"""

from __future__ import annotations

import numpy as np
import pytest

import longwave as lw
from longwave._loops import kalman as loops
from longwave.kernels import Matern32, Matern52
from longwave.methods import Exact
from longwave.methods.kalman import KalmanPosterior


def _full_pass_predict(model, series, tq):
    ss = model.kernel.state_space()
    trans = (ss.rate, ss.freq, ss.cos_coef, ss.sin_coef)
    n, d = series.n, ss.dim
    filt = (np.empty((n, d)), np.empty((n, d, d)))
    smooth = (np.empty((n, d)), np.empty((n, d, d)))
    loops.filter_store(series.t, series.y - model.mean_value, model.noise_variance(series.err),
                       ss.H, ss.Pinf, trans, *filt)
    loops.smooth(series.t, ss.Pinf, trans, *filt, *smooth)
    idx = np.searchsorted(series.t, tq, side="right") - 1
    mean, var = np.empty(tq.size), np.empty(tq.size)
    loops.predict_between(tq, idx, series.t, ss.H, ss.Pinf, trans, filt, smooth, mean, var)
    return mean + model.mean_value, var


def _series(rng, n):
    dt = rng.exponential(1.0, n - 1)
    dt[rng.choice(n - 1, 8, replace=False)] = 0.0  # repeated times
    dt[rng.choice(n - 1, 2, replace=False)] = 500.0  # long gaps
    t = 2.46e6 + np.concatenate([[0.0], np.cumsum(dt)])
    return lw.Series(t, np.sin(t / 7.0) + 0.2 * rng.standard_normal(n), rng.uniform(0.1, 0.3, n))


@pytest.mark.parametrize("block", [1, 2, 7, 64, 10_000])
@pytest.mark.parametrize("kernel", [Matern32(amplitude=1.0, scale=6.0),
                                    Matern52(amplitude=0.7, scale=3.0)], ids=["m32", "m52"])
def test_blocks_equal_full_smoother_pass(rng, block, kernel):
    series = _series(rng, 400)
    model = lw.Model(kernel, mean=0.3)
    t = series.t
    tq = np.concatenate([t[:50], t[[63, 64, 65, 127, 128]], rng.uniform(t[0] - 20, t[-1] + 20, 600),
                         [t[0] - 1e4, t[-1] + 1e4]])
    rng.shuffle(tq)
    post = KalmanPosterior(model, series, block=block)
    ref_mean, ref_var = _full_pass_predict(model, series, tq)
    pred = post.predict(tq)
    np.testing.assert_array_equal(pred.mean, ref_mean)
    np.testing.assert_array_equal(pred.var, ref_var)
    # Repeated and split calls (the per-block cache) give the same numbers.
    again = np.concatenate([post.predict(tq[:300]).mean, post.predict(tq[300:]).mean])
    np.testing.assert_array_equal(again, ref_mean)


def test_blocks_agree_with_exact_inference(rng):
    series = _series(rng, 300)
    model = lw.Model(Matern32(amplitude=1.2, scale=4.0), mean=-0.1)
    tq = rng.uniform(series.t[0] - 5, series.t[-1] + 5, 200)
    lean = KalmanPosterior(model, series, block=16).predict(tq)
    exact = lw.posterior(model, series, method=Exact()).predict(tq)
    np.testing.assert_allclose(lean.mean, exact.mean, rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(lean.var, exact.var, rtol=1e-6, atol=1e-9)


def test_stored_state_is_filtered_pass_plus_checkpoints(rng):
    series = _series(rng, 1000)
    post = KalmanPosterior(lw.Model(Matern32(amplitude=1.0, scale=5.0)), series, block=100)
    (sweep,) = post._sweeps
    arrays = [*sweep.source.arrays, *sweep.ckpt]
    # n (d + d^2) doubles for the filter, 10 checkpoints, nothing of size n for the smoother.
    assert sum(a.size for a in arrays) == 1000 * 6 + 10 * 6

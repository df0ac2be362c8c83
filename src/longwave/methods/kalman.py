"""Exact O(n) inference for kernels with a state-space form.

The Kalman filter gives the log marginal likelihood from the innovations
(prediction-error decomposition); forward sensitivities of the filter give
its analytic gradient in the same pass; the RTS smoother gives the posterior
(Hartikainen & Särkkä 2010; Särkkä 2013, "Bayesian Filtering and
Smoothing", ch. 4 and 8). The posterior at arbitrary times is computed from
the stored filter and smoother states, one O(d^3) step per query time, so a
prediction grid of any size costs O(n + n*) and can be produced in chunks.
"""

from __future__ import annotations

import numpy as np

from .._config import settings
from .._loops import kalman as loops
from .base import Evaluation, Method, Posterior, require_noise


def _transition_arrays(ss):
    return (ss.rate, ss.freq, ss.cos_coef, ss.sin_coef)


class Kalman(Method):
    """Kalman filter and RTS smoother; exact for kernels with a state-space form.

    Examples
    --------
    >>> import numpy as np
    >>> from longwave import Model, Series, log_marginal_likelihood
    >>> from longwave.kernels import Matern32
    >>> s = Series([0.0, 1.0, 2.5], [0.1, 0.3, -0.2], err=0.1)
    >>> round(log_marginal_likelihood(Model(Matern32(amplitude=1.0, scale=1.0)), s,
    ...                               method=Kalman()), 6)
    -2.691496
    """

    name = "kalman"

    def check(self, model, series) -> None:
        require_noise(model, series, "Kalman")
        if not model.kernel.has_state_space:
            raise ValueError(
                f"Kalman: kernel {model.kernel!r} has no exact state-space form; "
                "use Exact() for small series or VFE()/FITC() for long ones"
            )

    def evaluate(self, model, series, gradient: bool = False) -> Evaluation:
        self.check(model, series)
        ss = model.kernel.state_space()
        resid = series.y - model.mean_value
        noise = model.noise_variance(series.err)
        trans = _transition_arrays(ss)
        if not gradient:
            value = loops.filter_loglik(series.t, resid, noise, ss.H, ss.Pinf, trans)
            return Evaluation(float(value))
        free = model.free_mask
        nk = model.n_kernel_params
        kfree = free[:nk]
        n_all = len(model.params)
        d = ss.dim

        def pad(arr):  # kernel-parameter derivatives, zero rows for mean and noise
            out = np.zeros((n_all,) + arr.shape[1:])
            out[:nk] = arr
            return np.ascontiguousarray(out[free])

        dtrans = (pad(ss.d_rate), pad(ss.d_freq), pad(ss.d_cos_coef), pad(ss.d_sin_coef))
        dpinf = pad(ss.dPinf) if nk else np.zeros((int(free.sum()), d, d))
        dynamic = np.zeros(n_all, dtype=np.bool_)
        dynamic[:nk] = kfree
        sens = (
            dtrans,
            dpinf,
            np.ascontiguousarray(model.noise_variance_grad()[free]),
            np.ascontiguousarray(model.mean_grad()[free]),
            dynamic[free],
        )
        value, grad = loops.filter_loglik_grad(series.t, resid, noise, ss.H, ss.Pinf, trans, sens)
        return Evaluation(float(value), grad)

    def posterior(self, model, series) -> KalmanPosterior:
        self.check(model, series)
        return KalmanPosterior(model, series)


class KalmanPosterior(Posterior):
    """Filtered states at the data times; smoothed states are recomputed per block.

    Memory is ``n (d + d^2)`` doubles for the filtered states plus one
    smoothed state per ``block`` points (d is the state dimension: 2 for
    Matérn-3/2), so 480 MB for n = 1e7, half of keeping both passes. A query
    needs the filtered state before it and the smoothed state after it; the
    smoothed states of a block are rebuilt from the checkpoint at the block's
    end by the same RTS recursion, so predictions equal those of a full
    smoother pass exactly, at O(block) extra work per block a prediction touches.

    Parameters
    ----------
    model, series
    block : int, optional
        Points per smoother block (default ``LONGWAVE_CHUNK``, see ``longwave._config``).
    """

    def __init__(self, model, series, block=None):
        super().__init__(model, series)
        ss = model.kernel.state_space()
        self._ss = ss
        self._trans = _transition_arrays(ss)
        n, d = series.n, ss.dim
        self._block = int(block or settings().chunk_size)
        resid = series.y - model.mean_value
        noise = model.noise_variance(series.err)
        self._filt = (np.empty((n, d)), np.empty((n, d, d)))
        loops.filter_store(series.t, resid, noise, ss.H, ss.Pinf, self._trans, *self._filt)
        del resid, noise
        self._starts = np.arange(0, n, self._block)
        nb = self._starts.size
        self._ckpt = (np.empty((nb, d)), np.empty((nb, d, d)))
        self._cache = None  # (lo, end, smoothed means, smoothed covariances) of the last block
        for j in range(nb - 1, -1, -1):  # backward, each block from the next one's checkpoint
            ms, Ps = self._smoothed(int(self._starts[j]), self._block_end(j))
            self._ckpt[0][j] = ms[0]
            self._ckpt[1][j] = Ps[0]

    def _block_end(self, j):
        return int(self._starts[j + 1]) if j + 1 < self._starts.size else self.series.n

    def _smoothed(self, lo, end):
        """Smoothed means (end - lo, d) and covariances at data indices ``lo:end``.

        ``end`` is a block start (whose checkpoint is known) or ``n``.
        """
        cached = self._cache
        if cached is not None and cached[0] == lo and cached[1] == end:
            return cached[2], cached[3]
        mf, Pf = self._filt
        n = self.series.n
        if end >= n:
            m_in, P_in, t_in = mf[lo:n], Pf[lo:n], self.series.t[lo:n]
        else:
            # The smoother starts from its last element: put the checkpoint there.
            j = end // self._block
            m_in, P_in = mf[lo:end + 1].copy(), Pf[lo:end + 1].copy()
            m_in[-1], P_in[-1] = self._ckpt[0][j], self._ckpt[1][j]
            t_in = self.series.t[lo:end + 1]
        ms, Ps = np.empty_like(m_in), np.empty_like(P_in)
        loops.smooth(t_in, self._ss.Pinf, self._trans, m_in, P_in, ms, Ps)
        ms, Ps = ms[:end - lo], Ps[:end - lo]
        self._cache = (lo, end, ms, Ps)
        return ms, Ps

    def _latent(self, t):
        t_data = self.series.t
        n = t_data.size
        idx = np.searchsorted(t_data, t, side="right") - 1
        # Block of the smoothed state each query needs (the next data point's).
        blk = np.minimum(idx + 1, n - 1) // self._block
        order = np.argsort(blk, kind="stable")
        groups = np.split(order, np.flatnonzero(np.diff(blk[order])) + 1)
        mean = np.empty(t.size)
        var = np.empty(t.size)
        ss = self._ss
        mf, Pf = self._filt
        for group in groups:
            if group.size == 0:
                continue
            j = int(blk[group[0]])
            end = self._block_end(j)
            # Window lo:end holds the filtered state before every query of the block.
            lo = max(int(self._starts[j]) - 1, 0)
            smoothed = self._smoothed(lo, end)
            m_out = np.empty(group.size)
            v_out = np.empty(group.size)
            loops.predict_between(
                t[group], idx[group] - lo, t_data[lo:end], ss.H, ss.Pinf, self._trans,
                (mf[lo:end], Pf[lo:end]), smoothed, m_out, v_out,
            )
            mean[group] = m_out
            var[group] = v_out
        return mean, var

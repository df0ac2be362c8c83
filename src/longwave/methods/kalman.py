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

from dataclasses import dataclass

import numpy as np

from .._config import settings
from .._loops import blocked_transition as blocked
from .._loops import kalman as loops
from .._loops import kalman_fast as fast
from .._loops import search
from .base import Evaluation, Method, Posterior, require_noise

# Steps whose transitions the specialised loops compute in one vectorised pass.
_STEP_BLOCK = 512
# Largest state dimension with specialised loops (``_loops/kalman_fast.py``).
_FAST_MAX_DIM = 3


def _transition_arrays(ss):
    return (ss.rate, ss.freq, ss.cos_coef, ss.sin_coef)


@dataclass(frozen=True)
class FastForm:
    """A state-space model as the specialised loops take it.

    The specialised loops observe the first state component (``H = e_0``) and
    have the state dimension fixed at compile time. When ``H`` is not ``e_0``
    the state is changed to ``x' = T x`` with ``T``'s first row ``H`` (after
    moving the largest entry of ``H`` first), which maps every matrix of the
    closed form exactly: ``C' = T C T^-1``, ``Pinf' = T Pinf T^T``, and the
    same for their derivatives; likelihood, gradient and the posterior of
    ``f = H x = x'_0`` are unchanged.

    Attributes
    ----------
    dim : int
    single : bool
        One non-rotating term (Matérn): the loops evaluate ``A`` inline from
        coefficients held in registers; otherwise they fill it per block.
    pinf, dpinf : ndarray of shapes (d, d), (p_kernel, d, d)
    trans, dtrans : tuple
        Transition coefficients and their kernel-parameter derivatives, the
        polynomial degree padded to ``d`` in single mode.
    """

    dim: int
    single: bool
    pinf: np.ndarray
    dpinf: np.ndarray
    trans: tuple
    dtrans: tuple

    def loop(self, name):
        """The specialised loop ``name`` (``loglik``, ``loglik_grad``, ...) for this form."""
        flavour = "single" if self.single else "multi"
        return getattr(fast, f"{name}_d{self.dim}_{flavour}")

    def work(self, n_matrices=1):
        """A work array for the loops (see ``_loops/blocked_transition.py``)."""
        return np.empty((blocked.n_rows(self.dim, n_matrices), _STEP_BLOCK))


def fast_form(ss) -> FastForm | None:
    """The :class:`FastForm` of a :class:`~longwave.kernels.StateSpace`, or None.

    None when the state dimension exceeds 3 or ``H`` is zero; the general
    loops then run.
    """
    d = ss.dim
    if d > _FAST_MAX_DIM:
        return None
    H = np.asarray(ss.H, dtype=float)
    j0 = int(np.argmax(np.abs(H)))
    if H[j0] == 0.0:
        return None
    cos_coef, sin_coef = ss.cos_coef, ss.sin_coef
    d_cos, d_sin = ss.d_cos_coef, ss.d_sin_coef
    pinf, dpinf = ss.Pinf, ss.dPinf
    if not np.array_equal(H, np.eye(d)[0]):
        order = [j0] + [j for j in range(d) if j != j0]
        T = np.eye(d)[order]  # permutation: new component 0 is old j0
        T[0] = H
        Ti = np.linalg.inv(T)

        def similar(c):  # T c T^-1 over the last two axes
            return np.ascontiguousarray(np.einsum("ab,...bc,cd->...ad", T, c, Ti))

        def congruent(c):  # T c T^T
            return np.ascontiguousarray(np.einsum("ab,...bc,dc->...ad", T, c, T))

        cos_coef, sin_coef = similar(cos_coef), similar(sin_coef)
        d_cos, d_sin = similar(d_cos), similar(d_sin)
        pinf, dpinf = congruent(pinf), congruent(dpinf)
    single = (
        ss.rate.size == 1
        and ss.freq[0] == 0.0
        and cos_coef.shape[1] <= d
        and (not np.any(ss.d_freq) or not np.any(sin_coef))
    )
    if single and cos_coef.shape[1] < d:
        k = cos_coef.shape[1]
        grow = [(0, 0)] * cos_coef.ndim
        grow[1] = (0, d - k)
        cos_coef = np.pad(cos_coef, grow)
        sin_coef = np.pad(sin_coef, grow)
        grow_d = [(0, 0)] + grow
        d_cos = np.pad(d_cos, grow_d)
        d_sin = np.pad(d_sin, grow_d)
    return FastForm(
        dim=d,
        single=bool(single),
        pinf=np.ascontiguousarray(pinf),
        dpinf=np.ascontiguousarray(dpinf),
        trans=(ss.rate, ss.freq, cos_coef, sin_coef),
        dtrans=(ss.d_rate, ss.d_freq, d_cos, d_sin),
    )


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
        form = fast_form(ss)
        if form is not None:
            return self._evaluate_fast(model, series, form, gradient)
        resid = series.y - model.mean_value
        noise = model.noise_variance(series.err)
        trans = _transition_arrays(ss)
        if not gradient:
            value = loops.filter_loglik(series.t, resid, noise, ss.H, ss.Pinf, trans)
            return Evaluation(float(value))
        sens = _sensitivities(model, ss.dPinf, (ss.d_rate, ss.d_freq, ss.d_cos_coef, ss.d_sin_coef))
        value, grad = loops.filter_loglik_grad(series.t, resid, noise, ss.H, ss.Pinf, trans, sens)
        return Evaluation(float(value), grad)

    @staticmethod
    def _evaluate_fast(model, series, form, gradient):
        # y, err, the mean and the excess variance go into the loop as they are:
        # no n-length temporaries (resid, noise) are allocated.
        data = (series.t, series.y, series.err)
        scal = (float(model.mean_value), float(model.excess_variance))
        if not gradient:
            value = form.loop("loglik")(data, scal, form.pinf, form.trans, form.work())
            return Evaluation(float(value))
        sens = _sensitivities(model, form.dpinf, form.dtrans)
        p = sens[2].size
        work = form.work(1 + 4 * ((p + 3) // 4))
        value, grad = form.loop("loglik_grad")(data, scal, form.pinf, form.trans, sens, work)
        return Evaluation(float(value), grad)

    def posterior(self, model, series) -> KalmanPosterior:
        self.check(model, series)
        return KalmanPosterior(model, series, fast=True)


def _sensitivities(model, dpinf_kernel, dtrans_kernel):
    """The ``sens`` tuple of the gradient loops over the model's free coordinates."""
    free = model.free_mask
    nk = model.n_kernel_params
    kfree = free[:nk]
    n_all = len(model.params)
    d = dpinf_kernel.shape[-1]

    def pad(arr):  # kernel-parameter derivatives, zero rows for mean and noise
        out = np.zeros((n_all,) + arr.shape[1:])
        out[:nk] = arr
        return np.ascontiguousarray(out[free])

    dtrans = tuple(pad(a) for a in dtrans_kernel)
    dpinf = pad(dpinf_kernel) if nk else np.zeros((int(free.sum()), d, d))
    dynamic = np.zeros(n_all, dtype=np.bool_)
    dynamic[:nk] = kfree
    return (
        dtrans,
        dpinf,
        np.ascontiguousarray(model.noise_variance_grad()[free]),
        np.ascontiguousarray(model.mean_grad()[free]),
        dynamic[free],
    )


class KalmanPosterior(Posterior):
    """Filtered states at the data times; smoothed states are recomputed per block.

    Memory is ``n (d + d^2)`` doubles for the filtered states plus one
    smoothed state per ``block`` points (d is the state dimension: 2 for
    Matérn-3/2), so 480 MB for n = 1e7, half of keeping both passes. A query
    needs the filtered state before it and the smoothed state after it; the
    smoothed states of a block are rebuilt from the checkpoint at the block's
    end by the same RTS recursion, so predictions equal those of a full
    smoother pass exactly, at O(block) extra work per block a prediction touches.
    The checkpoints come from one backward pass over all blocks, run by the
    first prediction, which predicts its own queries block by block on the way.

    Parameters
    ----------
    model, series
    block : int, optional
        Points per smoother block (default ``LONGWAVE_CHUNK``, see ``longwave._config``).
    fast : bool, default False
        Run the loops specialised to the state dimension (``_loops/kalman_fast.py``)
        when the model allows (d <= 3), as :meth:`Kalman.posterior` does; they
        agree with the general loops to rounding. The stored states are then in
        the basis of :class:`FastForm` (first component observed).
    keep : bool, optional
        From the second prediction on, keep every block's smoothed states, so
        that later predictions skip the smoother (``n (d + d^2)`` more doubles).
        Default: when they fit ``keep_smoothed_mb`` (``longwave._config``).
        Not on the first prediction: a posterior predicted once (the common
        case) then touches no more memory than it needs, and fresh memory is
        slow to touch on virtual machines.
    """

    def __init__(self, model, series, block=None, fast=False, keep=None):
        super().__init__(model, series)
        ss = model.kernel.state_space()
        self._ss = ss
        self._form = fast_form(ss) if fast else None
        form = self._form
        if form is None:
            self._pinf, self._trans = ss.Pinf, _transition_arrays(ss)
        else:
            self._pinf, self._trans = form.pinf, form.trans
            self._work = form.work(2)
        n, d = series.n, ss.dim
        self._block = int(block or settings().chunk_size)
        self._filt = (np.empty((n, d)), np.empty((n, d, d)))
        if form is None:
            resid = series.y - model.mean_value
            noise = model.noise_variance(series.err)
            loops.filter_store(series.t, resid, noise, ss.H, ss.Pinf, self._trans, *self._filt)
            del resid, noise
        else:
            data = (series.t, series.y, series.err)
            scal = (float(model.mean_value), float(model.excess_variance))
            form.loop("filter_store")(data, scal, form.pinf, form.trans, self._work, *self._filt)
        self._starts = np.arange(0, n, self._block)
        nb = self._starts.size
        # Smoothed state at each block start, filled by the first prediction's
        # backward pass over all blocks (which predicts each block's queries as
        # it goes, so the first prediction costs one smoother pass, not two).
        self._ckpt = (np.empty((nb, d)), np.empty((nb, d, d)))
        self._have_ckpt = False
        self._cache = None  # (lo, end, smoothed means, smoothed covariances) of the last block
        self._may_keep = (n * (d + d * d) * 8 <= settings().keep_smoothed_mb * 2**20
                          if keep is None else bool(keep))
        self._kept = {}  # (lo, end) -> smoothed states, filled from the second prediction on

    def _block_end(self, j):
        return int(self._starts[j + 1]) if j + 1 < self._starts.size else self.series.n

    def _smoothed(self, lo, end):
        """Smoothed means (end - lo, d) and covariances at data indices ``lo:end``.

        ``end`` is a block start (whose checkpoint is known) or ``n``.
        """
        kept = self._kept.get((lo, end))
        if kept is not None:
            return kept
        cached = self._cache
        if cached is not None and cached[0] == lo and cached[1] == end:
            ms, Ps = cached[2], cached[3]
        elif self._form is not None:
            ms, Ps = self._smoothed_fast(lo, end)
        else:
            ms, Ps = self._smoothed_general(lo, end)
        self._cache = (lo, end, ms, Ps)
        if self._may_keep and self._have_ckpt:  # a later prediction: worth keeping
            self._kept[(lo, end)] = (ms, Ps)
        return ms, Ps

    def _smoothed_general(self, lo, end):
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
        loops.smooth(t_in, self._pinf, self._trans, m_in, P_in, ms, Ps)
        return ms[:end - lo], Ps[:end - lo]

    def _smoothed_fast(self, lo, end):
        # The specialised smoother starts from what its output holds at the last
        # index: the checkpoint (or the last filtered state), no window copies.
        mf, Pf = self._filt
        hi = min(end + 1, self.series.n)
        ms = np.empty((hi - lo,) + mf.shape[1:])
        Ps = np.empty((hi - lo,) + Pf.shape[1:])
        if end >= self.series.n:
            ms[-1], Ps[-1] = mf[hi - 1], Pf[hi - 1]
        else:
            j = end // self._block
            ms[-1], Ps[-1] = self._ckpt[0][j], self._ckpt[1][j]
        self._form.loop("smooth")(
            self.series.t[lo:hi], self._pinf, self._trans, self._work, mf[lo:hi], Pf[lo:hi], ms, Ps
        )
        return ms[:end - lo], Ps[:end - lo]

    def _latent(self, t):
        t_data = self.series.t
        n = t_data.size
        idx = np.empty(t.size, dtype=np.int64)
        in_order = search.locate(t_data, t, idx)  # np.searchsorted(t_data, t, "right") - 1
        mean = np.empty(t.size)
        var = np.empty(t.size)
        # The queries of each block (that of the smoothed state they need, the next
        # data point's): slices of a sorted grid, else groups of indices.
        jobs = {}
        if in_order:
            cuts = np.searchsorted(idx, self._starts[1:] - 1, side="left")
            for j, (a, b) in enumerate(zip(np.concatenate([[0], cuts]),
                                           np.concatenate([cuts, [t.size]]))):
                if b > a:
                    jobs[j] = slice(int(a), int(b))
        else:
            blk = np.minimum(idx + 1, n - 1) // self._block
            order = np.argsort(blk, kind="stable")
            for group in np.split(order, np.flatnonzero(np.diff(blk[order])) + 1):
                if group.size:
                    jobs[int(blk[group[0]])] = group

        def run(j, sel):
            if isinstance(sel, slice):
                self._predict_block(j, t[sel], idx[sel], mean[sel], var[sel])
                return
            m_out, v_out = np.empty(sel.size), np.empty(sel.size)
            self._predict_block(j, t[sel], idx[sel], m_out, v_out)
            mean[sel], var[sel] = m_out, v_out

        if not self._have_ckpt:
            for j in range(self._starts.size - 1, -1, -1):
                # backward: each block from the next one's checkpoint
                start = int(self._starts[j])
                lo = max(start - 1, 0)
                ms, Ps = self._smoothed(lo, self._block_end(j))
                self._ckpt[0][j] = ms[start - lo]
                self._ckpt[1][j] = Ps[start - lo]
                if j in jobs:
                    run(j, jobs[j])
            self._have_ckpt = True
        else:
            for j, sel in jobs.items():
                run(j, sel)
        return mean, var

    def _predict_block(self, j, tq, idx, m_out, v_out):
        """Queries whose next data point lies in block ``j``; writes ``m_out``, ``v_out``."""
        t_data = self.series.t
        mf, Pf = self._filt
        end = self._block_end(j)
        # Window lo:end holds the filtered state before every query of the block.
        lo = max(int(self._starts[j]) - 1, 0)
        smoothed = self._smoothed(lo, end)
        iq = idx - lo
        filt = (mf[lo:end], Pf[lo:end])
        if self._form is None:
            loops.predict_between(
                tq, iq, t_data[lo:end], self._ss.H, self._pinf, self._trans,
                filt, smoothed, m_out, v_out,
            )
        else:
            self._form.loop("predict")(
                tq, iq, t_data[lo:end], self._pinf, self._trans, filt, smoothed, m_out, v_out
            )

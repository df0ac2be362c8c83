"""Exact O(n) inference for kernels with a state-space form.

The Kalman filter gives the log marginal likelihood from the innovations
(prediction-error decomposition); forward sensitivities of the filter give
its analytic gradient in the same pass; a backward smoother gives the
posterior (Hartikainen & Särkkä 2010; Särkkä 2013, "Bayesian Filtering and
Smoothing", ch. 4 and 8): the RTS form in the general loops, the adjoint
(modified Bryson-Frazier; Bierman 1977) form in the loops specialised to
d <= 3. The posterior at arbitrary times is computed from the filter's and
the smoother's quantities, one O(d^2) step per query time, so a prediction
grid of any size costs O(n + n*) and can be produced in chunks.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from .._config import settings
from .._loops import blocked_transition as blocked
from .._loops import kalman as loops
from .._loops import kalman_fast as fast
from .._loops import search
from ..kernels.statespace import closed_transition
from . import kalman_split
from .base import Evaluation, Method, Posterior, require_noise
from .fresh import fresh_rows
from .kalman_sources import RefilteredOutput, StoredOutput
from .kalman_sweep import Sweep

# Steps whose transitions the specialised loops compute in one vectorised pass.
_STEP_BLOCK = 512
# Points per block of a lean posterior: its buffers ((2 d^2 + 3 d + 2) doubles a
# point, 3.8 MB at d = 3) stay in the shared cache, and its blocks run in one
# compiled call, so a small block costs little (measured at n = 1e6: blocks of
# 16384 were as fast as or faster than 65536 and 4096).
_LEAN_BLOCK = 16384
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
    """The filter's output at the data times; the smoother's is recomputed per block.

    A query needs the filtered state before it and the smoother's quantity
    after it (``kalman_sweep.py``): the smoothed state for the general loops
    (RTS), the adjoint for the specialised ones (d <= 3), whose recursion
    reads only ``d + 2`` numbers a point that the filter stores (``obs``).
    The smoother's quantities of a block are rebuilt from a checkpoint at the
    block's end, so predictions equal those of a full smoother pass exactly,
    at O(block) extra work per block a prediction touches. The checkpoints
    come from one backward pass over all blocks, run by the first
    prediction, which predicts its own queries block by block on the way.

    Memory, with d the state dimension (2 for Matérn-3/2): the general loops
    store every filtered state, ``n (d + d^2)`` doubles. The specialised ones
    are lean by default (``lean``): they keep one filtered state per block
    and nothing of length n but the data, re-running the filter over a block
    when they smooth and predict there; sorted queries then run the whole
    backward pass in one compiled call (``blocks_pass``). Storing every
    state and the observation terms the adjoint reads (``lean=False``,
    ``n (2 d + 2 + d^2)`` doubles) costs the memory traffic of first
    touching them, which on the virtual machines measured was 0.15 to 2 ms
    per MB: as much as or more than the filter pass that recomputes them
    (``bench/bench_kalman.py``, figures in DEVELOPERS.md), and it grows
    the posterior with n.

    On two cores a long series is built in two halves at once: the left half
    filtered forwards, the right half backwards in time, joined at one state
    (``kalman_split.py``); each half is then smoothed and predicted on its own
    core. The result is the same posterior, to rounding; the right half also
    keeps its times reversed and negated (n/2 more doubles).

    Parameters
    ----------
    model, series
    block : int, optional
        Points per smoother block (default 16384 when lean, else
        ``LONGWAVE_CHUNK``, see ``longwave._config``).
    fast : bool, default False
        Run the loops specialised to the state dimension (``_loops/kalman_fast.py``)
        when the model allows (d <= 3), as :meth:`Kalman.posterior` does; they
        agree with the general loops to rounding. The stored states are then in
        the basis of :class:`FastForm` (first component observed).
    keep : bool, optional
        From the second prediction on, keep every block's smoothed states
        (and recomputed filtered states), so that later predictions skip the
        smoother. Default: when ``2 n (d + d^2)`` doubles fit
        ``kalman_states_mb`` (``longwave._config``). Not on the first
        prediction: a posterior predicted once (the common case) then touches
        no more memory than it needs, and fresh memory is slow to touch on
        virtual machines.
    lean : bool, optional
        Specialised loops only. Keep one filtered state per block and re-run
        the filter over a block when a prediction needs it (default), or
        store every state (False).
    split : bool, optional
        Build in two halves on two threads. Default: when ``fast`` applies,
        the series has at least ``split_min_n`` points and numba may use two
        threads (the survey workers allow one). True splits any series of four
        points or more. Either way the split is skipped when the model has no
        time-reversal map or the join is too ill-conditioned to trust;
        :attr:`split_at` says what happened.

    Attributes
    ----------
    split_at : int or None
        Index of the last data point of the left half, None when built in one pass.
    """

    def __init__(self, model, series, block=None, fast=False, keep=None, split=None,
                 lean=None):
        super().__init__(model, series)
        ss = model.kernel.state_space()
        self._ss = ss
        self._form = fast_form(ss) if fast else None
        form = self._form
        if form is None:
            self._pinf, self._trans = ss.Pinf, _transition_arrays(ss)
        else:
            self._pinf, self._trans = form.pinf, form.trans
        n, d = series.n, ss.dim
        config = settings()
        states, budget = n * (d + d * d) * 8, config.kalman_states_mb * 2**20
        self._lean = form is not None and (lean is None or bool(lean))  # why: class docstring
        default_block = _LEAN_BLOCK if self._lean else config.chunk_size
        self._block = max(int(block or default_block), 2)  # checkpoints need 2
        self._may_keep = 2 * states <= budget if keep is None else bool(keep)
        if split is None:
            split = form is not None and n >= config.split_min_n and numba.get_num_threads() >= 2
        elif split and form is None:
            raise ValueError("KalmanPosterior: split=True needs fast=True and a state "
                             f"dimension <= {_FAST_MAX_DIM}")
        self.split_at = None
        self._sweeps = self._build_split() if split and n >= 4 else None
        if self._sweeps is None:
            self._sweeps = (self._build_whole(),)

    def _data(self, lo=0, hi=None, reverse=False):
        s = self.series
        t, y, err = s.t[lo:hi], s.y[lo:hi], s.err[lo:hi]
        if reverse:
            # Times negated into a new array (the sweep searches and slices them);
            # values and errors as reversed views, which the loops read in order:
            # fresh memory costs more than the arithmetic here (``fresh.py``).
            # numpy, not a parallel loop: this runs beside the other half's thread,
            # and numba's default thread pool takes one parallel region at a time.
            back = fresh_rows(1, t.size)[0]
            np.negative(t[::-1], out=back)
            t, y, err = back, y[::-1], err[::-1]
        return t, y, err

    def _loops(self, serial):
        """The ``(smooth, predict)`` callables of a :class:`Sweep`, with their own scratch.

        The general loops smooth by RTS (the sweep's backward quantities are
        smoothed states); the specialised ones by the adjoint recursion, which
        reads only the observation terms the filter stored (``_loops/kalman_fast.py``).
        """
        pinf, trans, form = self._pinf, self._trans, self._form
        if form is None:
            H = self._ss.H

            def smooth(t, filt, ms, Ps):  # the general smoother starts from mf[-1]
                m_in, P_in = filt[0].copy(), filt[1].copy()
                m_in[-1], P_in[-1] = ms[-1], Ps[-1]
                loops.smooth(t, pinf, trans, m_in, P_in, ms, Ps)

            def predict(tq, iq, t, filt, smoothed, m_out, v_out):
                loops.predict_between(tq, iq, t, H, pinf, trans, filt, smoothed, m_out, v_out)

            return smooth, predict
        work = form.work(1)
        adjoint_loop = form.loop("adjoint")
        predict_loop = form.loop("predict_serial" if serial else "predict")

        def smooth(t, filt, lam, Lam):
            adjoint_loop(t, pinf, trans, work, filt[0], lam, Lam)

        def predict(tq, iq, t, filtered, adj, m_out, v_out):
            predict_loop(tq, iq, t, pinf, trans, filtered, adj, m_out, v_out)

        return smooth, predict

    def _filter(self, data, rows=None):
        """Filter ``data = (t, y, err)``; returns ``(source, last)``.

        ``source`` is the :class:`Sweep`'s ``source`` callable over ``rows``
        rows (default: the data's length; rows past the data are never read
        by the smoother or the predictor). ``last`` is the filtered state at
        the last point, and (specialised loops) its ``v / s`` and ``1 / s``.

        General loops: every filtered state is stored. Specialised loops:
        every state and the observation terms (``refilter`` over all the data),
        or, lean, one state per block (``filter_checkpoints``) from which the filter is
        re-run over a block (``refilter`` in ``_loops/kalman_fast.py``).
        """
        model, form, d = self.model, self._form, self._ss.dim
        t, y, err = data
        m = t.size
        rows = m if rows is None else rows
        if form is None:
            mf, Pf = np.zeros((rows, d)), np.zeros((rows, d, d))
            loops.filter_store(t, y - model.mean_value, model.noise_variance(err),
                               self._ss.H, self._pinf, self._trans, mf[:m], Pf[:m])
            states = (mf, Pf)
            return StoredOutput(states, states), (mf[m - 1], Pf[m - 1])
        scal = (float(model.mean_value), float(model.excess_variance))
        if not self._lean:
            obs, mf, Pf = np.zeros((rows, d + 2)), np.zeros((rows, d)), np.zeros((rows, d, d))
            form.loop("refilter")(data, scal, self._pinf, self._trans, form.work(2),
                                  obs[:m], mf[:m], Pf[:m], 0)
            last = (mf[m - 1], Pf[m - 1], obs[m - 1, 0], obs[m - 1, 1])
            return StoredOutput((obs,), (mf, Pf)), last
        block = self._block
        ck = (np.zeros((m // block + 2, d)), np.zeros((m // block + 2, d, d)))
        g, inv = form.loop("filter_checkpoints")(data, scal, self._pinf, self._trans,
                                                  form.work(2), *ck, block)
        loops_used = (form.loop("refilter"), form.loop("blocks_pass"))
        source = RefilteredOutput(data, ck, block, loops_used, (scal, self._pinf, self._trans),
                                  form.work(2))
        return source, (ck[0][-1], ck[1][-1], g, inv)

    def _terminal(self, last):
        """The backward quantity at the last point of a whole series."""
        if self._form is None:  # RTS: the smoothed state there is the filtered one
            return last[0], last[1]
        d = self._ss.dim
        u, U = np.zeros(d), np.zeros((d, d))
        u[0], U[0, 0] = last[2], last[3]  # v / s, 1 / s of its observation
        return u, U

    def _build_whole(self):
        data = self._data()
        source, last = self._filter(data)
        return Sweep(self.series.t, source, self._terminal(last), *self._loops(serial=False),
                     self._block, self._may_keep)

    def _build_split(self):
        """The two halves (left sweep, reversed right sweep), or None (see ``split``).

        The left half holds points ``0 .. j`` and, one row beyond, time
        ``t[j + 1]`` with the adjoint there; the right half (reversed) holds
        points ``n - 1 .. j + 1`` and, one row beyond, time ``-t[j]`` with
        its adjoint. Each adjoint comes from the smoothed state at that
        point (the two-filter join) and the half's own prediction across the
        gap (:func:`kalman_split.adjoint`).
        """
        pinf, trans = self._pinf, self._trans
        j = kalman_split.split_index(self.series.t)
        if j is None:
            return None
        n, t = self.series.n, self.series.t
        # The left half's data run one point past it (to the time of its last row).
        data_left = self._data(0, j + 2)

        def left_half():
            # The reversal map is needed only at the join: it is found here while
            # the other thread negates the right half's times, not before both
            # start. A model without one (not minimal: rare) has then filtered
            # its right half for nothing and is built in one pass.
            s_map = kalman_split.reversal(pinf, trans)
            if s_map is None:
                return None, (None, None)
            return s_map, self._filter(tuple(x[:-1] for x in data_left), rows=j + 2)

        def right_half():
            data = self._data(j, reverse=True)
            return data[0], self._filter(tuple(x[:-1] for x in data), rows=n - j)

        (s_map, (left, last_left)), (t_right, (right, last_right)) = (
            kalman_split.in_two_threads(left_half, right_half))
        if s_map is None:
            return None
        a = closed_transition(*trans, np.asarray(t[j + 1] - t[j]))

        def across_gap(m, P):  # one prediction step over the gap
            return a @ m, a @ (P - pinf) @ a.T + pinf

        def mapped(m, P):  # from the reversed basis
            return s_map @ m, s_map @ P @ s_map.T

        s_inv = np.linalg.inv(s_map)
        at_j = last_left[:2]  # filtered from the left, including point j
        after_j = last_right[:2]  # from the right (point j + 1), reversed basis
        back_to_j = across_gap(*after_j)  # the right half's prediction at t[j]
        ahead_to_next = across_gap(*at_j)  # the left half's prediction at t[j + 1]
        joined_j = kalman_split.join(at_j, mapped(*back_to_j), pinf)
        joined_next = kalman_split.join(ahead_to_next, mapped(*after_j), pinf)
        if joined_j is None or joined_next is None:
            return None
        left_end = kalman_split.adjoint(ahead_to_next, joined_next)
        right_end = kalman_split.adjoint(
            back_to_j, (s_inv @ joined_j[0], s_inv @ joined_j[1] @ s_inv.T))
        if left_end is None or right_end is None:
            return None
        self.split_at = int(j)
        return (
            Sweep(data_left[0], left, left_end, *self._loops(serial=True), self._block,
                  self._may_keep, serial=True),
            Sweep(t_right, right, right_end, *self._loops(serial=True), self._block,
                  self._may_keep, serial=True),
        )

    def _latent(self, t, *, in_order, out=None):
        if len(self._sweeps) == 1:
            return self._sweeps[0].latent(t, out=out, known_sorted=in_order)
        left, right = self._sweeps
        t_join = self.series.t[self.split_at]
        mean, var = out if out is not None else fresh_rows(2, t.size)
        if in_order:  # the usual grid: two slices, the right one reversed
            c = int(np.searchsorted(t, t_join, side="right"))

            def on_right():  # into the outputs in reversed order, then turned round
                # Its queries, negated and reversed, are held in its variance
                # output, which each query's variance overwrites only after the
                # query has been read (Sweep.latent): no fresh n/2 array.
                # numpy, not the parallel copy: this runs beside the left half's
                # thread, and numba's default thread pool takes one parallel
                # region at a time.
                tq = var[c:]
                np.negative(t[c:][::-1], out=tq)
                right.latent(tq, out=(mean[c:], tq), known_sorted=True)
                search.reverse_in_place(mean[c:])
                search.reverse_in_place(var[c:])

            kalman_split.in_two_threads(
                lambda: left.latent(t[:c], out=(mean[:c], var[:c]), known_sorted=True), on_right)
            return mean, var
        on_left = t <= t_join
        (m_l, v_l), (m_r, v_r) = kalman_split.in_two_threads(
            lambda: left.latent(t[on_left]), lambda: right.latent(-t[~on_left]))
        mean[on_left], var[on_left] = m_l, v_l
        mean[~on_left], var[~on_left] = m_r, v_r
        return mean, var

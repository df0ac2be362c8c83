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
from .kalman_sweep import Sweep

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
    smoother pass exactly, at O(block) extra work per block a prediction
    touches (``kalman_sweep.py``). The checkpoints come from one backward pass
    over all blocks, run by the first prediction, which predicts its own
    queries block by block on the way.

    On two cores a long series is built in two halves at once: the left half
    filtered forwards, the right half backwards in time, joined at one state
    (``kalman_split.py``); each half is then smoothed and predicted on its own
    core. The result is the same posterior, to rounding; the right half also
    keeps its times reversed and negated (n/2 more doubles).

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

    def __init__(self, model, series, block=None, fast=False, keep=None, split=None):
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
        self._block = int(block or config.chunk_size)
        self._may_keep = (n * (d + d * d) * 8 <= config.keep_smoothed_mb * 2**20
                          if keep is None else bool(keep))
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
        if reverse:  # contiguous reversed copies, times negated
            t, y, err = -t[::-1], np.ascontiguousarray(y[::-1]), np.ascontiguousarray(err[::-1])
        return t, y, err

    def _loops(self, serial):
        """The ``(smooth, predict)`` callables of a :class:`Sweep`, with their own scratch."""
        pinf, trans, form = self._pinf, self._trans, self._form
        if form is None:
            H = self._ss.H

            def smooth(t, mf, Pf, ms, Ps):  # the general smoother starts from mf[-1]
                m_in, P_in = mf.copy(), Pf.copy()
                m_in[-1], P_in[-1] = ms[-1], Ps[-1]
                loops.smooth(t, pinf, trans, m_in, P_in, ms, Ps)

            def predict(tq, iq, t, filt, smoothed, m_out, v_out):
                loops.predict_between(tq, iq, t, H, pinf, trans, filt, smoothed, m_out, v_out)

            return smooth, predict
        work = form.work(2)
        smooth_loop = form.loop("smooth")
        predict_loop = form.loop("predict_serial" if serial else "predict")

        def smooth(t, mf, Pf, ms, Ps):
            smooth_loop(t, pinf, trans, work, mf, Pf, ms, Ps)

        def predict(tq, iq, t, filt, smoothed, m_out, v_out):
            predict_loop(tq, iq, t, pinf, trans, filt, smoothed, m_out, v_out)

        return smooth, predict

    def _filter(self, data, mf, Pf):
        """Filtered states of ``data = (t, y, err)`` into ``mf``, ``Pf``."""
        model, form = self.model, self._form
        if form is None:
            t, y, err = data
            loops.filter_store(t, y - model.mean_value, model.noise_variance(err),
                               self._ss.H, self._pinf, self._trans, mf, Pf)
            return
        scal = (float(model.mean_value), float(model.excess_variance))
        form.loop("filter_store")(data, scal, self._pinf, self._trans, form.work(2), mf, Pf)

    def _build_whole(self):
        n, d = self.series.n, self._ss.dim
        filt = (np.empty((n, d)), np.empty((n, d, d)))
        self._filter(self._data(), *filt)
        return Sweep(self.series.t, filt, None, *self._loops(serial=False),
                     self._block, self._may_keep)

    def _build_split(self):
        """The two halves (left sweep, reversed right sweep), or None (see ``split``)."""
        pinf, trans = self._pinf, self._trans
        s_map = kalman_split.reversal(pinf, trans)
        j = kalman_split.split_index(self.series.t)
        if s_map is None or j is None:
            return None
        n, d = self.series.n, self._ss.dim
        left = (np.empty((j + 1, d)), np.empty((j + 1, d, d)))
        # Right half reversed: points n-1 .. j+1 filtered, then point j, whose
        # slot holds the joined state (the smoother starts there; never filtered).
        t_right, y_right, err_right = self._data(j, reverse=True)
        right = (np.empty((n - j, d)), np.empty((n - j, d, d)))
        kalman_split.in_two_threads(
            lambda: self._filter(self._data(0, j + 1), *left),
            lambda: self._filter((t_right[:-1], y_right[:-1], err_right[:-1]),
                                 right[0][:-1], right[1][:-1]),
        )
        # The right side's estimate of the state at t[j]: one prediction step
        # backwards from t[j + 1], mapped from the reversed basis by S.
        a = closed_transition(*trans, np.asarray(self.series.t[j + 1] - self.series.t[j]))
        m_back = a @ right[0][n - j - 2]
        P_back = a @ (right[1][n - j - 2] - pinf) @ a.T + pinf
        joined = kalman_split.join((left[0][j], left[1][j]),
                            (s_map @ m_back, s_map @ P_back @ s_map.T), pinf)
        if joined is None:
            return None
        s_inv = np.linalg.inv(s_map)
        right[0][-1] = s_inv @ joined[0]
        right[1][-1] = s_inv @ joined[1] @ s_inv.T
        self.split_at = int(j)
        return (
            Sweep(self.series.t[:j + 1], left, joined, *self._loops(serial=True),
                  self._block, self._may_keep, serial=True),
            Sweep(t_right, right, (right[0][-1], right[1][-1]), *self._loops(serial=True),
                  self._block, self._may_keep, serial=True),
        )

    def _latent(self, t):
        if len(self._sweeps) == 1:
            return self._sweeps[0].latent(t)
        left, right = self._sweeps
        t_join = self.series.t[self.split_at]
        mean, var = np.empty(t.size), np.empty(t.size)
        if search.is_sorted(t):  # the usual grid: two slices, the right one reversed
            c = int(np.searchsorted(t, t_join, side="right"))

            def on_right():
                m_r, v_r = right.latent(-t[c:][::-1], known_sorted=True)
                mean[c:], var[c:] = m_r[::-1], v_r[::-1]

            kalman_split.in_two_threads(
                lambda: left.latent(t[:c], out=(mean[:c], var[:c]), known_sorted=True), on_right)
            return mean, var
        on_left = t <= t_join
        (m_l, v_l), (m_r, v_r) = kalman_split.in_two_threads(
            lambda: left.latent(t[on_left]), lambda: right.latent(-t[~on_left]))
        mean[on_left], var[on_left] = m_l, v_l
        mean[~on_left], var[~on_left] = m_r, v_r
        return mean, var

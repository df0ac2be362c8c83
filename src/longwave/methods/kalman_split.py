"""Building a Kalman posterior on two cores: a series split in two, joined once.

The filter and the smoother are sequential recursions, so one series keeps
one core busy. A stationary Gaussian process run backwards in time is the
same process, so its left half can be filtered forwards while its right half
is filtered backwards, at the same time, and each half then smoothed and
predicted on its own core. The two halves meet at one state, whose
smoothed distribution combines the two one-sided estimates (the two-filter
formula: Fraser & Potter 1969; Särkkä 2013, "Bayesian Filtering and
Smoothing", sec. 8.4)::

    p(x | all data)  ∝  p(x | left) p(x | right) / p(x).

Reversal. If ``x(t)`` has transition ``A(dt)`` and stationary covariance
``Pinf``, then ``x(-s)`` has transition ``Pinf A(dt)^T Pinf^-1`` (the
backward Markov kernel of a stationary process). For a minimal model it is a
similarity of ``A``: ``Pinf A^T Pinf^-1 = S A S^-1`` for one fixed ``S`` with
``S Pinf S^T = Pinf`` and first row ``e_0`` (the observation is the same).
The backward half is then filtered by the *same* compiled loops, on times
``-t`` in reverse order, in the state ``z = S^-1 x``. For Matérn kernels
``S = diag(1, -1, 1, ...)`` (odd derivatives change sign).
:func:`reversal` finds ``S`` from the closed-form transition and checks it;
a model for which it fails is not split.

Numerics. The combination divides by the prior. It is done whitened by
``Pinf`` and without inverting either one-sided covariance (they can be
near-singular where data are precise); the smoothed covariance is computed
from both sides' form and the two must agree, or the split is refused and
the posterior is built by one sequential pass. The join is placed at the
largest gap near the middle: the backward side then carries the process
noise of the whole gap, which keeps the combination well conditioned.
"""

from __future__ import annotations

import _thread

import numpy as np

from .._loops import search
from ..kernels.statespace import closed_transition

# The halves are balanced to within this fraction of n around the middle.
_MIDDLE = (0.4, 0.6)
# Largest disagreement between the two forms of the joined covariance, entry by
# entry relative to its standard deviations: beyond it the split is refused.
_JOIN_TOL = 1e-9


def reversal(pinf, trans):
    """The state map ``S`` of time reversal (see the module docstring), or None.

    Parameters
    ----------
    pinf : ndarray of shape (d, d)
        Stationary covariance, in a basis where the observation is ``x_0``.
    trans : tuple
        ``(rate, freq, cos_coef, sin_coef)`` of the closed-form ``A(dt)``.

    Returns
    -------
    ndarray of shape (d, d) or None
        None when the model is not minimal (its observability matrix is
        singular) or the map fails its checks.
    """
    d = pinf.shape[0]
    rate, freq = np.asarray(trans[0]), np.asarray(trans[1])
    speed = float(max(np.max(rate, initial=0.0), np.max(np.abs(freq), initial=0.0)))
    if not np.isfinite(speed) or speed <= 0.0:
        return None
    try:
        pinf_inv = np.linalg.inv(pinf)
    except np.linalg.LinAlgError:
        return None

    def both(dt):  # A(dt) and the backward transition Pinf A^T Pinf^-1
        a = closed_transition(*trans, np.asarray(dt, dtype=float))
        return a, pinf @ np.swapaxes(a, -1, -2) @ pinf_inv

    # Rows e_0 A(tau_i): the observability matrix of the sampled model (tau_0 = 0).
    taus = np.arange(d) * (0.7 / speed)
    a, back = both(taus)
    obs, obs_back = a[:, 0, :], back[:, 0, :]
    if np.linalg.cond(obs) > 1e8:
        return None
    s_inv = np.linalg.solve(obs, obs_back)  # e_0 A_back(tau) = e_0 A(tau) S^-1
    s = np.linalg.inv(s_inv)
    rounded = np.round(s)
    if np.allclose(s, rounded, rtol=0.0, atol=1e-9):
        s = rounded  # Matérn-type blocks: signs exactly
    a, back = both(np.array([0.31, 1.7, 6.0]) / speed)
    scale = 1.0 + np.abs(a).max()
    if (
        np.abs(s @ a - back @ s).max() > 1e-9 * scale * np.abs(s).max()
        or np.abs(s @ pinf @ s.T - pinf).max() > 1e-9 * np.abs(pinf).max()
        or np.abs(s[0] - np.eye(d)[0]).max() > 1e-12
    ):
        return None
    return s


def split_index(t):
    """Index ``j`` of the join (the left half is ``t[:j + 1]``), or None.

    Among the middle fifth of the series, the gap ``t[j + 1] - t[j]`` nearest
    the middle that is at least half the largest there: wide gaps make a
    well-conditioned join, balanced halves keep both cores busy to the end.
    None when every time there is the same.
    """
    n = t.size
    lo, hi = int(n * _MIDDLE[0]), int(n * _MIDDLE[1])
    lo, hi = max(lo, 0), min(hi, n - 1)
    if hi <= lo:
        return None
    j = search.wide_gap_nearest(t, lo, hi, (n - 1) / 2)
    return None if j < 0 else int(j)


def join(forward, backward, pinf):
    """Smoothed state from two one-sided estimates of the same state.

    Parameters
    ----------
    forward, backward : tuple of ndarray
        ``(mean, cov)`` of the state given the data on one side each (each
        includes the prior once). Means are of the zero-mean process.
    pinf : ndarray of shape (d, d)
        The prior covariance.

    Returns
    -------
    tuple of ndarray or None
        ``(mean, cov)`` given all the data; None when the two algebraically
        equal forms of the result disagree by more than ``_JOIN_TOL`` (the
        combination is then too ill-conditioned to trust).

    Notes
    -----
    Whitened (``Pinf = I``), with ``A``, ``B`` the one-sided covariances, the
    smoothed covariance is ``(A^-1 + B^-1 - I)^-1``. With
    ``W = A + B - A B = A P^-1 B`` it equals ``A - A (I - B) W^-1 A`` and
    ``B - B (I - A) W^-T B``, and the mean is
    ``(I - A (I - B) W^-1) a + (I - B (I - A) W^-T) b``: no inverse of ``A``
    or ``B`` appears.
    """
    chol = np.linalg.cholesky(pinf)

    def white(m, c):
        wm = np.linalg.solve(chol, m)
        wc = np.linalg.solve(chol, np.linalg.solve(chol, c).T)
        return wm, 0.5 * (wc + wc.T)

    a, A = white(*forward)
    b, B = white(*backward)
    eye = np.eye(pinf.shape[0])
    W = A + B - A @ B
    try:
        w_inv = np.linalg.inv(W)
    except np.linalg.LinAlgError:
        return None
    left = A @ (eye - B) @ w_inv
    right = B @ (eye - A) @ w_inv.T
    P_a = A - left @ A
    P_b = B - right @ B
    mean = (eye - left) @ a + (eye - right) @ b
    if not (np.all(np.isfinite(P_a)) and np.all(np.isfinite(mean))):
        return None
    # Entry by entry, relative to the scale of the result (its standard deviations).
    sd = np.sqrt(np.maximum(np.diag(P_a), 0.0) + np.maximum(np.diag(P_b), 0.0))
    if np.any(np.abs(P_a - P_b) > _JOIN_TOL * np.outer(sd, sd)):
        return None
    P = 0.5 * (P_a + P_b)
    P = 0.5 * (P + P.T)
    if np.min(np.linalg.eigvalsh(P)) < -_JOIN_TOL:
        return None
    return chol @ mean, chol @ P @ chol.T


def adjoint(prediction, smoothed):
    """The adjoint at a state, from the filter's prediction there and its smoothed law.

    The adjoint smoother (``_loops/kalman_fast.py``) carries
    ``u = Pp^-1 (ms - mp)`` and ``U = Pp^-1 (Pp - Ps) Pp^-1``; a half of a
    split series starts from these, one step beyond its last point, where
    the prediction ``(mp, Pp)`` crosses the gap between the halves (its
    process noise keeps ``Pp`` well conditioned).

    Returns
    -------
    tuple of ndarray or None
        ``(u, U)``; None when ``mp + Pp u`` and ``Pp - Pp U Pp`` miss the
        smoothed mean and covariance by more than ``_JOIN_TOL`` of their
        standard deviations.
    """
    mp, Pp = prediction
    ms, Ps = smoothed
    try:
        u = np.linalg.solve(Pp, ms - mp)
        U = np.linalg.solve(Pp, np.linalg.solve(Pp, Pp - Ps).T)
    except np.linalg.LinAlgError:
        return None
    U = 0.5 * (U + U.T)
    sd = np.sqrt(np.maximum(np.diag(Ps), 0.0))
    if not (np.all(np.isfinite(u)) and np.all(np.isfinite(U))):
        return None
    if (np.any(np.abs(mp + Pp @ u - ms) > _JOIN_TOL * sd)
            or np.any(np.abs(Pp - Pp @ U @ Pp - Ps) > _JOIN_TOL * np.outer(sd, sd))):
        return None
    return u, U


def in_two_threads(first, second):
    """Run ``first()`` here and ``second()`` in a thread; return both results.

    The compiled loops release the GIL, so the two run on two cores. An
    exception in either is raised here, after both have finished. The thread
    is started with the low-level ``_thread`` module: ``threading.Thread.start``
    waits until the new thread runs, a cross-core wake-up that cost 0.2-0.4 ms
    (median, two threads of 0.3 ms of work each) on the virtual machines
    measured; here the caller goes on with ``first`` at once.
    """
    box = {}
    done = _thread.allocate_lock()
    done.acquire()

    def run():
        try:
            box["value"] = second()
        except BaseException as exc:  # re-raised in the caller's thread
            box["error"] = exc
        finally:
            done.release()

    _thread.start_new_thread(run, ())
    try:
        result = first()
    except BaseException as exc:
        _wait(done)
        if "error" in box:  # both failed: say so, the caller's first
            raise exc from box["error"]
        raise
    _wait(done)
    if "error" in box:
        raise box["error"]
    return result, box["value"]


def _wait(done):
    """Acquire ``done`` even through a KeyboardInterrupt, then re-raise it.

    The thread may be writing into the caller's output arrays: returning
    before it has finished would hand them back while they still change.
    """
    interrupted = None
    while True:
        try:
            done.acquire()
            break
        except KeyboardInterrupt as exc:
            interrupted = exc
    if interrupted is not None:
        raise interrupted

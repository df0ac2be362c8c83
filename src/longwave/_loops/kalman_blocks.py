"""Compiled Kalman filter for block-diagonal transitions, with a transition cache.

Many state-space models have a transition ``A(dt)`` that is block diagonal:
sums stack blocks, the Fourier form of a periodic kernel is one 2x2 rotation
per harmonic, and a Matérn x Periodic product is one small block per
harmonic. The dense loops (``kalman.py``) pay ``J K d^2`` to build ``A`` and
``d^3`` per product; here ``A`` is held as ``B`` blocks of size at most ``s``
and every product with it costs ``d * sum_b s_b^2``, about ``d^2 s``.

Block layout (built by ``longwave.methods.kalman_blocks``): states are ordered
so that block ``b`` is ``bstart[b]:bstart[b + 1]``; transition term ``j``
lives in block ``term_block[j]`` with coefficients padded to ``(s, s)``::

    trans  = (bstart (B+1,), term_block (T,), rate (T,), freq (T,),
              cos_coef (T, K, s, s), sin_coef (T, K, s, s))
    dtrans = (d_rate (p, T), d_freq (p, T), d_cos (p, T, K, s, s), d_sin (p, T, K, s, s))

Transition cache: ``A`` (and every ``dA``) of the last ``slots`` distinct
steps are kept, keyed by the exact value of ``dt``, and reused when a step
repeats (``slots = 0`` disables it). Several slots, not just the last step,
because a regular cadence ``t0 + k * step`` rounds its differences to a few
neighbouring doubles (with ``t0 = 2.46e6``, ``step = 0.05``: two values, only
20 % of them equal to the one before), and gaps add multiples of the step.

Conventions as in ``kalman.py``: ``resid`` (n,), ``noise`` (n,), ``H`` (d,),
``Pinf`` (d, d); the predicted covariance is ``A (P - Pinf) A^T + Pinf``.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .kalman import update_sensitivities, update_state

LOG_2PI = math.log(2.0 * math.pi)


@njit(cache=True)
def block_transition(dt, trans, out):
    """Write the blocks of ``A(dt)`` into ``out`` (B, s, s)."""
    bstart, term_block, rate, freq, cos_coef, sin_coef = trans
    n_terms, n_pow, s, _ = cos_coef.shape
    out[:, :, :] = 0.0
    for j in range(n_terms):
        b = term_block[j]
        size = bstart[b + 1] - bstart[b]
        decay = math.exp(-rate[j] * dt)
        c = math.cos(freq[j] * dt)
        sn = math.sin(freq[j] * dt)
        power = 1.0
        for k in range(n_pow):
            wc = decay * c * power
            ws = decay * sn * power
            for a in range(size):
                for e in range(size):
                    out[b, a, e] += wc * cos_coef[j, k, a, e] + ws * sin_coef[j, k, a, e]
            power *= dt


@njit(cache=True)
def block_transition_grad(dt, trans, dtrans, q, out):
    """Write the blocks of ``dA(dt) / dtheta_q`` into ``out`` (B, s, s)."""
    bstart, term_block, rate, freq, cos_coef, sin_coef = trans
    d_rate, d_freq, d_cos, d_sin = dtrans
    n_terms, n_pow, s, _ = cos_coef.shape
    out[:, :, :] = 0.0
    for j in range(n_terms):
        b = term_block[j]
        size = bstart[b + 1] - bstart[b]
        decay = math.exp(-rate[j] * dt)
        c = math.cos(freq[j] * dt)
        sn = math.sin(freq[j] * dt)
        ddecay = -d_rate[q, j] * dt * decay
        dphase = d_freq[q, j] * dt
        power = 1.0
        for k in range(n_pow):
            for a in range(size):
                for e in range(size):
                    pc = cos_coef[j, k, a, e]
                    ps = sin_coef[j, k, a, e]
                    out[b, a, e] += power * (
                        ddecay * (c * pc + sn * ps)
                        + decay * (c * d_cos[q, j, k, a, e] + sn * d_sin[q, j, k, a, e])
                        + decay * dphase * (c * ps - sn * pc)
                    )
            power *= dt


@njit(cache=True)
def _left(blocks, bstart, X, out):
    """out = A X for block-diagonal A (blocks) and dense X (d, d)."""
    d = X.shape[0]
    for b in range(bstart.size - 1):
        lo, hi = bstart[b], bstart[b + 1]
        for r in range(lo, hi):
            for col in range(d):
                acc = 0.0
                for c in range(lo, hi):
                    acc += blocks[b, r - lo, c - lo] * X[c, col]
                out[r, col] = acc


@njit(cache=True)
def _right_t(X, blocks, bstart, out):
    """out = X A^T for dense X (d, d) and block-diagonal A."""
    d = X.shape[0]
    for b in range(bstart.size - 1):
        lo, hi = bstart[b], bstart[b + 1]
        for row in range(d):
            for r in range(lo, hi):
                acc = 0.0
                for c in range(lo, hi):
                    acc += X[row, c] * blocks[b, r - lo, c - lo]
                out[row, r] = acc


@njit(cache=True)
def _apply_vec(blocks, bstart, x, out):
    """out = A x."""
    for b in range(bstart.size - 1):
        lo, hi = bstart[b], bstart[b + 1]
        for r in range(lo, hi):
            acc = 0.0
            for c in range(lo, hi):
                acc += blocks[b, r - lo, c - lo] * x[c]
            out[r] = acc


@njit(cache=True)
def _sandwich(blocks, bstart, X, X0, work, out):
    """out = A (X - X0) A^T + X0, symmetrised; ``work`` is (d, d) scratch."""
    d = X.shape[0]
    for a in range(d):
        for e in range(d):
            out[a, e] = X[a, e] - X0[a, e]
    _left(blocks, bstart, out, work)
    _right_t(work, blocks, bstart, out)
    for a in range(d):
        for e in range(a, d):
            v = 0.5 * (out[a, e] + out[e, a])
            out[a, e] = v + X0[a, e]
            out[e, a] = v + X0[e, a]


@njit(cache=True)
def _update(m, P, H, resid_i, noise_i, Ph):
    """Measurement update in place; returns ``(v, S)``."""
    d = H.size
    S = noise_i
    v = resid_i
    for a in range(d):
        acc = 0.0
        for c in range(d):
            acc += P[a, c] * H[c]
        Ph[a] = acc
        S += H[a] * acc
        v -= H[a] * m[a]
    return v, S


@njit(cache=True)
def _lookup(cache_dt, dt, n_used):
    """Slot holding ``dt`` exactly, or -1."""
    for k in range(n_used):
        if cache_dt[k] == dt:
            return k
    return -1


@njit(cache=True)
def filter_loglik(t, resid, noise, H, Pinf, trans, slots):
    """Log marginal likelihood by the Kalman filter with block-diagonal ``A``."""
    bstart, term_block, rate, freq, cos_coef, sin_coef = trans
    n = t.size
    d = H.size
    n_blocks = bstart.size - 1
    s = cos_coef.shape[2]
    n_slots = max(slots, 1)
    cache_A = np.zeros((n_slots, n_blocks, s, s))
    cache_dt = np.full(n_slots, -1.0)
    n_used = 0
    next_slot = 0
    m = np.zeros(d)
    mp = np.zeros(d)
    P = Pinf.copy()
    work = np.zeros((d, d))
    Ph = np.zeros(d)
    total = 0.0
    for i in range(n):
        if i > 0:
            dt = t[i] - t[i - 1]
            if dt > 0.0:
                k = _lookup(cache_dt, dt, n_used) if slots > 0 else -1
                if k < 0:
                    k = next_slot
                    block_transition(dt, trans, cache_A[k])
                    cache_dt[k] = dt
                    next_slot = (next_slot + 1) % n_slots
                    n_used = min(n_used + 1, n_slots)
                blocks = cache_A[k]
                _apply_vec(blocks, bstart, m, mp)
                m[:] = mp
                _sandwich(blocks, bstart, P, Pinf, work, P)
        v, S = _update(m, P, H, resid[i], noise[i], Ph)
        total += math.log(S) + v * v / S
        update_state(v, S, Ph, m, P)
    return -0.5 * (total + n * LOG_2PI)


@njit(cache=True)
def filter_loglik_grad(t, resid, noise, H, Pinf, trans, sens, slots):
    """Log marginal likelihood and gradient by forward sensitivities, block ``A``.

    ``sens = (dtrans, dPinf, dnoise, dmean, dynamic)`` as in
    ``kalman.filter_loglik_grad``, with ``dtrans`` in the block layout. The
    covariance sensitivity uses ``M = P - Pinf`` and ``Y = dA M A^T``::

        dP <- Y + Y^T + A (dP - dPinf) A^T + dPinf.
    """
    dtrans, dPinf, dnoise, dmean, dynamic = sens
    bstart, term_block, rate, freq, cos_coef, sin_coef = trans
    n = t.size
    d = H.size
    p = dnoise.size
    n_blocks = bstart.size - 1
    s = cos_coef.shape[2]
    n_slots = max(slots, 1)
    cache_A = np.zeros((n_slots, n_blocks, s, s))
    cache_dA = np.zeros((n_slots, p, n_blocks, s, s))
    cache_dt = np.full(n_slots, -1.0)
    n_used = 0
    next_slot = 0
    m = np.zeros(d)
    P = Pinf.copy()
    dm = np.zeros((p, d))
    dP = dPinf.copy()
    M = np.zeros((d, d))
    work = np.zeros((d, d))
    work2 = np.zeros((d, d))
    work3 = np.zeros((d, d))
    tmp = np.zeros(d)
    tmp2 = np.zeros(d)
    Ph = np.zeros(d)
    dPh = np.zeros(d)
    total = 0.0
    grad = np.zeros(p)
    for i in range(n):
        if i > 0:
            dt = t[i] - t[i - 1]
            if dt > 0.0:
                k = _lookup(cache_dt, dt, n_used) if slots > 0 else -1
                if k < 0:
                    k = next_slot
                    block_transition(dt, trans, cache_A[k])
                    for q in range(p):
                        if dynamic[q]:
                            block_transition_grad(dt, trans, dtrans, q, cache_dA[k, q])
                    cache_dt[k] = dt
                    next_slot = (next_slot + 1) % n_slots
                    n_used = min(n_used + 1, n_slots)
                blocks = cache_A[k]
                dblocks = cache_dA[k]
                for a in range(d):
                    for e in range(d):
                        M[a, e] = P[a, e] - Pinf[a, e]
                for q in range(p):
                    _apply_vec(blocks, bstart, dm[q], tmp)
                    if dynamic[q]:
                        _apply_vec(dblocks[q], bstart, m, tmp2)
                        for a in range(d):
                            tmp[a] += tmp2[a]
                    dm[q, :] = tmp
                    _sandwich(blocks, bstart, dP[q], dPinf[q], work, work2)
                    if dynamic[q]:
                        _left(dblocks[q], bstart, M, work)
                        _right_t(work, blocks, bstart, work3)  # Y = dA M A^T
                        for a in range(d):
                            for e in range(a, d):
                                y = work3[a, e] + work3[e, a]
                                work2[a, e] += y
                                if e != a:
                                    work2[e, a] += y
                    dP[q, :, :] = work2
                _apply_vec(blocks, bstart, m, tmp)
                m[:] = tmp
                _sandwich(blocks, bstart, P, Pinf, work, P)
        v, S = _update(m, P, H, resid[i], noise[i], Ph)
        total += math.log(S) + v * v / S
        update_sensitivities(v, S, Ph, H, dm, dP, (dnoise, dmean), dPh, grad)
        update_state(v, S, Ph, m, P)
    return -0.5 * (total + n * LOG_2PI), -0.5 * grad

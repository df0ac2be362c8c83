"""Compiled Kalman filter, RTS smoother and interpolating predictor.

These loops take arrays and scalars only. The transition ``A(dt)`` arrives as
the tuple ``trans = (rate, freq, cos_coef, sin_coef)`` of
:class:`longwave.kernels.StateSpace` and is evaluated at each step by
:func:`transition`; derivatives arrive as ``dtrans`` with a leading axis over
the differentiated parameters.

Conventions: ``resid = y - mean`` (n,), ``noise = err^2 + excess^2`` (n,),
``H`` (d,), ``Pinf`` (d, d). The predicted covariance uses
``A P A^T + Q = A (P - Pinf) A^T + Pinf``, which saves one matrix product
and is exact for the stationary models used here.
Plain-numpy twins of every loop live in ``tests/reference_kalman.py``.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

LOG_2PI = math.log(2.0 * math.pi)


@njit(cache=True)
def transition(dt, rate, freq, cos_coef, sin_coef, out):
    """Write ``A(dt)`` into ``out`` (d, d)."""
    n_terms, n_pow, d, _ = cos_coef.shape
    out[:, :] = 0.0
    for j in range(n_terms):
        decay = math.exp(-rate[j] * dt)
        rotating = freq[j] != 0.0
        c = math.cos(freq[j] * dt) if rotating else 1.0
        s = math.sin(freq[j] * dt) if rotating else 0.0
        power = 1.0
        for k in range(n_pow):
            wc = decay * c * power
            ws = decay * s * power
            for a in range(d):
                for b in range(d):
                    out[a, b] += wc * cos_coef[j, k, a, b]
                    if rotating:
                        out[a, b] += ws * sin_coef[j, k, a, b]
            power *= dt


@njit(cache=True)
def transition_grad(dt, trans, dtrans, q, out):
    """Write the derivative of ``A(dt)`` w.r.t. parameter ``q`` into ``out``."""
    rate, freq, cos_coef, sin_coef = trans
    d_rate, d_freq, d_cos, d_sin = dtrans
    n_terms, n_pow, d, _ = cos_coef.shape
    out[:, :] = 0.0
    for j in range(n_terms):
        decay = math.exp(-rate[j] * dt)
        c = math.cos(freq[j] * dt)
        s = math.sin(freq[j] * dt)
        ddecay = -d_rate[q, j] * dt * decay
        dphase = d_freq[q, j] * dt
        power = 1.0
        for k in range(n_pow):
            for a in range(d):
                for b in range(d):
                    pc = cos_coef[j, k, a, b]
                    ps = sin_coef[j, k, a, b]
                    out[a, b] += power * (
                        ddecay * (c * pc + s * ps)
                        + decay * (c * d_cos[q, j, k, a, b] + s * d_sin[q, j, k, a, b])
                        + decay * dphase * (c * ps - s * pc)
                    )
            power *= dt


@njit(cache=True)
def _predict_cov(A, P, Pinf, work, out):
    """out = A (P - Pinf) A^T + Pinf; ``work`` is (d, d) scratch."""
    d = A.shape[0]
    for a in range(d):
        for b in range(d):
            acc = 0.0
            for c in range(d):
                acc += A[a, c] * (P[c, b] - Pinf[c, b])
            work[a, b] = acc
    for a in range(d):
        for b in range(a, d):
            acc = 0.0
            for c in range(d):
                acc += work[a, c] * A[b, c]
            out[a, b] = acc + Pinf[a, b]
            out[b, a] = out[a, b]


@njit(cache=True)
def filter_loglik(t, resid, noise, H, Pinf, trans):
    """Log marginal likelihood by the Kalman filter (Hartikainen & Särkkä 2010)."""
    rate, freq, cos_coef, sin_coef = trans
    n = t.size
    d = H.size
    m = np.zeros(d)
    mp = np.zeros(d)
    P = Pinf.copy()
    A = np.zeros((d, d))
    work = np.zeros((d, d))
    Ph = np.zeros(d)
    total = 0.0
    for i in range(n):
        if i > 0:
            dt = t[i] - t[i - 1]
            if dt > 0.0:
                transition(dt, rate, freq, cos_coef, sin_coef, A)
                for a in range(d):
                    acc = 0.0
                    for c in range(d):
                        acc += A[a, c] * m[c]
                    mp[a] = acc
                m[:] = mp
                _predict_cov(A, P, Pinf, work, P)
        S = noise[i]
        v = resid[i]
        for a in range(d):
            acc = 0.0
            for c in range(d):
                acc += P[a, c] * H[c]
            Ph[a] = acc
            S += H[a] * acc
            v -= H[a] * m[a]
        total += math.log(S) + v * v / S
        update_state(v, S, Ph, m, P)
    return -0.5 * (total + n * LOG_2PI)


@njit(cache=True)
def update_sensitivities(v, S, Ph, H, dm, dP, dobs, dPh, grad):
    """Measurement update of the forward sensitivities ``dm`` (p, d), ``dP`` (p, d, d).

    ``v``, ``S``, ``Ph`` are this step's innovation, its variance and ``P H``
    before the update; ``dobs = (dnoise, dmean)``. Adds the step's terms of
    ``d(log S + v^2 / S)`` to ``grad`` (p,); ``dPh`` (d,) is scratch.
    Differentiates ``m+ = m + Ph v / S`` and ``P+ = P - Ph Ph^T / S``.
    """
    dnoise, dmean = dobs
    d = H.size
    for q in range(dnoise.size):
        dS = dnoise[q]
        dv = -dmean[q]
        for a in range(d):
            acc = 0.0
            for c in range(d):
                acc += dP[q, a, c] * H[c]
            dPh[a] = acc
            dS += H[a] * acc
            dv -= H[a] * dm[q, a]
        grad[q] += dS / S + 2.0 * v * dv / S - v * v * dS / (S * S)
        for a in range(d):
            dm[q, a] += (dPh[a] * v + Ph[a] * dv) / S - Ph[a] * v * dS / (S * S)
        for a in range(d):
            for b in range(a, d):
                dP[q, a, b] -= (
                    (dPh[a] * Ph[b] + Ph[a] * dPh[b]) / S - Ph[a] * Ph[b] * dS / (S * S)
                )
                dP[q, b, a] = dP[q, a, b]


@njit(cache=True)
def update_state(v, S, Ph, m, P):
    """Measurement update of the state: ``m += Ph v / S``, ``P -= Ph Ph^T / S`` (symmetric)."""
    d = m.size
    gain = v / S
    for a in range(d):
        m[a] += Ph[a] * gain
    for a in range(d):
        for b in range(a, d):
            P[a, b] -= Ph[a] * Ph[b] / S
            P[b, a] = P[a, b]


@njit(cache=True)
def filter_loglik_grad(t, resid, noise, H, Pinf, trans, sens):
    """Log marginal likelihood and its gradient by forward sensitivities.

    ``sens = (dtrans, dPinf, dnoise, dmean, dynamic)`` gives, for each of the
    p differentiated parameters, the derivatives of the transition
    coefficients, of ``Pinf`` (p, d, d), of every point's noise variance
    (p,), of the mean (p,), and whether the parameter enters the dynamics at
    all (p,) bool, so mean and noise parameters skip the matrix work.
    Returns ``(loglik, grad)`` with ``grad`` of shape (p,).
    """
    dtrans, dPinf, dnoise, dmean, dynamic = sens
    rate, freq, cos_coef, sin_coef = trans
    n = t.size
    d = H.size
    p = dnoise.size
    m = np.zeros(d)
    P = Pinf.copy()
    dm = np.zeros((p, d))
    dP = dPinf.copy()
    A = np.zeros((d, d))
    dA = np.zeros((d, d))
    M = np.zeros((d, d))
    work = np.zeros((d, d))
    work2 = np.zeros((d, d))
    tmp = np.zeros(d)
    Ph = np.zeros(d)
    dPh = np.zeros(d)
    total = 0.0
    grad = np.zeros(p)
    for i in range(n):
        if i > 0:
            dt = t[i] - t[i - 1]
            if dt > 0.0:
                transition(dt, rate, freq, cos_coef, sin_coef, A)
                for a in range(d):
                    for b in range(d):
                        M[a, b] = P[a, b] - Pinf[a, b]
                for q in range(p):
                    # dm <- dA m + A dm ; dP <- dA M A^T + A M dA^T + A (dP - dPinf) A^T + dPinf
                    for a in range(d):
                        acc = 0.0
                        for c in range(d):
                            acc += A[a, c] * dm[q, c]
                        tmp[a] = acc
                    if dynamic[q]:
                        transition_grad(dt, trans, dtrans, q, dA)
                        for a in range(d):
                            acc = 0.0
                            for c in range(d):
                                acc += dA[a, c] * m[c]
                            tmp[a] += acc
                    dm[q, :] = tmp
                    _predict_cov(A, dP[q], dPinf[q], work, work2)
                    if dynamic[q]:
                        for a in range(d):
                            for b in range(d):
                                acc = 0.0
                                for c in range(d):
                                    acc += dA[a, c] * M[c, b]
                                work[a, b] = acc
                        for a in range(d):
                            for b in range(a, d):
                                acc = 0.0
                                for c in range(d):
                                    acc += work[a, c] * A[b, c] + A[a, c] * work[b, c]
                                work2[a, b] += acc
                                if b != a:
                                    work2[b, a] = work2[a, b]
                    dP[q, :, :] = work2
                for a in range(d):
                    acc = 0.0
                    for c in range(d):
                        acc += A[a, c] * m[c]
                    tmp[a] = acc
                m[:] = tmp
                _predict_cov(A, P, Pinf, work, P)
        S = noise[i]
        v = resid[i]
        for a in range(d):
            acc = 0.0
            for c in range(d):
                acc += P[a, c] * H[c]
            Ph[a] = acc
            S += H[a] * acc
            v -= H[a] * m[a]
        total += math.log(S) + v * v / S
        update_sensitivities(v, S, Ph, H, dm, dP, (dnoise, dmean), dPh, grad)
        update_state(v, S, Ph, m, P)
    return -0.5 * (total + n * LOG_2PI), -0.5 * grad


@njit(cache=True)
def filter_store(t, resid, noise, H, Pinf, trans, mf, Pf):
    """Kalman filter writing filtered means ``mf`` (n, d) and covariances ``Pf`` (n, d, d)."""
    rate, freq, cos_coef, sin_coef = trans
    n = t.size
    d = H.size
    m = np.zeros(d)
    P = Pinf.copy()
    A = np.zeros((d, d))
    work = np.zeros((d, d))
    tmp = np.zeros(d)
    Ph = np.zeros(d)
    for i in range(n):
        if i > 0:
            dt = t[i] - t[i - 1]
            if dt > 0.0:
                transition(dt, rate, freq, cos_coef, sin_coef, A)
                for a in range(d):
                    acc = 0.0
                    for c in range(d):
                        acc += A[a, c] * m[c]
                    tmp[a] = acc
                m[:] = tmp
                _predict_cov(A, P, Pinf, work, P)
        S = noise[i]
        v = resid[i]
        for a in range(d):
            acc = 0.0
            for c in range(d):
                acc += P[a, c] * H[c]
            Ph[a] = acc
            S += H[a] * acc
            v -= H[a] * m[a]
        for a in range(d):
            m[a] += Ph[a] * v / S
        for a in range(d):
            for b in range(a, d):
                P[a, b] -= Ph[a] * Ph[b] / S
                P[b, a] = P[a, b]
        mf[i, :] = m
        Pf[i, :, :] = P


@njit(cache=True)
def _smooth_step(A, m_from, P_from, m_next, P_next, Pinf, out_m, out_P):
    """One RTS step: combine a state predicted from the past with the smoothed next one.

    ``(m_from, P_from)`` is the distribution at this time given the data up to
    it; ``(m_next, P_next)`` the smoothed distribution a step ``A`` later.
    The covariance uses the Joseph-like form
    ``(I - G A) P_from (I - G A)^T + G (Q + P_next) G^T``, algebraically equal
    to ``P_from + G (P_next - Pp) G^T`` but a sum of PSD terms: with smooth
    kernels of high state dimension ``Pp`` is ill-conditioned, the gain large,
    and the difference form lost every digit to cancellation.
    """
    d = A.shape[0]
    Pp = np.empty((d, d))
    work = np.empty((d, d))
    _predict_cov(A, P_from, Pinf, work, Pp)
    gain_t = np.linalg.solve(Pp, A @ P_from)  # G^T = Pp^-1 A P_from
    gain = gain_t.T.copy()
    diff_m = m_next - A @ m_from
    for a in range(d):
        acc = 0.0
        for c in range(d):
            acc += gain[a, c] * diff_m[c]
        out_m[a] = m_from[a] + acc
    iga = np.eye(d) - gain @ A
    driven = Pinf - A @ Pinf @ A.T + P_next
    total = iga @ P_from @ iga.T + gain @ driven @ gain_t
    for a in range(d):
        for b in range(a, d):
            out_P[a, b] = 0.5 * (total[a, b] + total[b, a])
            out_P[b, a] = out_P[a, b]


@njit(cache=True)
def smooth(t, Pinf, trans, mf, Pf, ms, Ps):
    """RTS smoother over stored filter output (Rauch, Tung & Striebel 1965)."""
    rate, freq, cos_coef, sin_coef = trans
    n = t.size
    d = Pinf.shape[0]
    A = np.zeros((d, d))
    ms[n - 1, :] = mf[n - 1]
    Ps[n - 1, :, :] = Pf[n - 1]
    for k in range(n - 2, -1, -1):
        dt = t[k + 1] - t[k]
        if dt == 0.0:
            # Repeated time: one state, already conditioned on every copy.
            ms[k, :] = ms[k + 1]
            Ps[k, :, :] = Ps[k + 1]
            continue
        transition(dt, rate, freq, cos_coef, sin_coef, A)
        _smooth_step(A, mf[k], Pf[k], ms[k + 1], Ps[k + 1], Pinf, ms[k], Ps[k])


@njit(cache=True, parallel=True)
def predict_between(tq, idx, t, H, Pinf, trans, filt, smoothed, out_mean, out_var):
    """Posterior of ``f`` at query times from stored filter and smoother output.

    ``idx[i]`` is the index of the last training time ``<= tq[i]`` (-1 before
    the first). A query predicts forward from the filtered state there, then
    takes one RTS step against the smoothed state at the next training time,
    so each query costs O(d^3) and queries are independent.
    """
    rate, freq, cos_coef, sin_coef = trans
    mf, Pf = filt
    ms, Ps = smoothed
    n = t.size
    d = H.size
    for i in prange(tq.size):
        A = np.zeros((d, d))
        work = np.empty((d, d))
        m_star = np.zeros(d)
        P_star = Pinf.copy()
        k = idx[i]
        if k >= 0:
            transition(tq[i] - t[k], rate, freq, cos_coef, sin_coef, A)
            if k == n - 1:
                m_star = A @ ms[k]
                _predict_cov(A, Ps[k], Pinf, work, P_star)
            else:
                m_star = A @ mf[k]
                _predict_cov(A, Pf[k], Pinf, work, P_star)
        if k < n - 1:
            transition(t[k + 1] - tq[i], rate, freq, cos_coef, sin_coef, A)
            m_out = np.empty(d)
            P_out = np.empty((d, d))
            _smooth_step(A, m_star, P_star, ms[k + 1], Ps[k + 1], Pinf, m_out, P_out)
            m_star = m_out
            P_star = P_out
        mean = 0.0
        var = 0.0
        for a in range(d):
            mean += H[a] * m_star[a]
            for b in range(d):
                var += H[a] * P_star[a, b] * H[b]
        out_mean[i] = mean
        out_var[i] = max(var, 0.0)

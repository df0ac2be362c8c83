"""Plain-numpy twins of the compiled loops in ``longwave._loops``.

Written from the textbook equations, not translated from the compiled code:
matrix products are numpy products, the process noise is formed as
``Q = Pinf - A Pinf A^T`` (Hartikainen & Särkkä 2010, eq. 12 and the
stationary Lyapunov solution), the filter is the standard prediction /
update pair and the smoother the Rauch-Tung-Striebel recursion (Särkkä 2013,
"Bayesian Filtering and Smoothing", Theorem 4.2 for the filter, Theorem 8.2
for the smoother). The log marginal likelihood is the prediction-error
decomposition (Särkkä 2013, ch. 12, energy function of linear Gaussian
models; Harvey 1989, "Forecasting, Structural Time Series Models and the
Kalman Filter", sec. 3.4; section numbers from memory). The gradient is the
forward sensitivity recursion obtained by differentiating each of those
equations (Särkkä 2013, ch. 12, sensitivity equations).

They are slow (Python loop over points) and only for tests.
"""

from __future__ import annotations

import numpy as np

LOG_2PI = np.log(2.0 * np.pi)


# --- transition ----------------------------------------------------------------
def transition(dt, rate, freq, cos_coef, sin_coef):
    """Closed-form transition of ``kernels/statespace.py``::

        A(dt) = sum_j exp(-rate_j dt) (cos(w_j dt) sum_k C_jk dt^k + sin(w_j dt) sum_k S_jk dt^k)
    """
    powers = float(dt) ** np.arange(cos_coef.shape[1])
    decay = np.exp(-rate * dt)
    poly_c = np.tensordot(powers, cos_coef, axes=([0], [1]))  # (J, d, d)
    poly_s = np.tensordot(powers, sin_coef, axes=([0], [1]))
    weights_c = decay * np.cos(freq * dt)
    weights_s = decay * np.sin(freq * dt)
    return np.tensordot(weights_c, poly_c, axes=1) + np.tensordot(weights_s, poly_s, axes=1)


def transition_grad(dt, trans, dtrans, q):
    """Derivative of :func:`transition` with respect to parameter ``q`` (product rule)."""
    rate, freq, cos_coef, sin_coef = trans
    d_rate, d_freq, d_cos, d_sin = dtrans
    powers = float(dt) ** np.arange(cos_coef.shape[1])
    decay = np.exp(-rate * dt)
    c, s = np.cos(freq * dt), np.sin(freq * dt)
    poly_c = np.tensordot(powers, cos_coef, axes=([0], [1]))
    poly_s = np.tensordot(powers, sin_coef, axes=([0], [1]))
    dpoly_c = np.tensordot(powers, d_cos[q], axes=([0], [1]))
    dpoly_s = np.tensordot(powers, d_sin[q], axes=([0], [1]))
    out = np.zeros(cos_coef.shape[2:])
    for j in range(rate.size):
        ddecay = -d_rate[q, j] * dt * decay[j]
        dphase = d_freq[q, j] * dt
        out += ddecay * (c[j] * poly_c[j] + s[j] * poly_s[j])
        out += decay[j] * (c[j] * dpoly_c[j] + s[j] * dpoly_s[j])
        out += decay[j] * dphase * (c[j] * poly_s[j] - s[j] * poly_c[j])
    return out


# --- filter --------------------------------------------------------------------
def _predict(m, P, A, Pinf):
    Q = Pinf - A @ Pinf @ A.T
    return A @ m, A @ P @ A.T + Q


def _filter(t, resid, noise, H, Pinf, trans):
    """Run the filter; return (loglik, filtered means, filtered covariances)."""
    n, d = t.size, H.size
    m, P = np.zeros(d), Pinf.copy()
    means, covs = np.empty((n, d)), np.empty((n, d, d))
    loglik = 0.0
    for i in range(n):
        if i > 0 and t[i] > t[i - 1]:
            m, P = _predict(m, P, transition(t[i] - t[i - 1], *trans), Pinf)
        S = H @ P @ H + noise[i]
        v = resid[i] - H @ m
        K = P @ H / S
        loglik -= 0.5 * (LOG_2PI + np.log(S) + v * v / S)
        m = m + K * v
        P = P - np.outer(K, K) * S
        P = 0.5 * (P + P.T)
        means[i], covs[i] = m, P
    return loglik, means, covs


def filter_loglik(t, resid, noise, H, Pinf, trans):
    """Twin of ``_loops.kalman.filter_loglik``."""
    return _filter(t, resid, noise, H, Pinf, trans)[0]


def filter_store(t, resid, noise, H, Pinf, trans):
    """Twin of ``_loops.kalman.filter_store``: returns ``(mf, Pf)``."""
    _, means, covs = _filter(t, resid, noise, H, Pinf, trans)
    return means, covs


def filter_loglik_grad(t, resid, noise, H, Pinf, trans, sens):
    """Twin of ``_loops.kalman.filter_loglik_grad``: ``(loglik, grad)``.

    Each parameter's sensitivities ``dm``, ``dP`` are carried through the
    differentiated prediction ``dm' = dA m + A dm``,
    ``dP' = dA P A^T + A dP A^T + A P dA^T + dQ`` with
    ``dQ = dPinf - dA Pinf A^T - A dPinf A^T - A Pinf dA^T``, and the
    differentiated update.
    """
    dtrans, dPinf, dnoise, dmean, dynamic = sens
    n, d, p = t.size, H.size, dnoise.size
    m, P = np.zeros(d), Pinf.copy()
    dm, dP = np.zeros((p, d)), dPinf.copy()
    loglik, grad = 0.0, np.zeros(p)
    for i in range(n):
        if i > 0 and t[i] > t[i - 1]:
            dt = t[i] - t[i - 1]
            A = transition(dt, *trans)
            for q in range(p):
                dA = transition_grad(dt, trans, dtrans, q) if dynamic[q] else np.zeros((d, d))
                dQ = (
                    dPinf[q] - dA @ Pinf @ A.T - A @ dPinf[q] @ A.T - A @ Pinf @ dA.T
                )
                dP[q] = dA @ P @ A.T + A @ dP[q] @ A.T + A @ P @ dA.T + dQ
                dm[q] = dA @ m + A @ dm[q]
            m, P = _predict(m, P, A, Pinf)
        S = H @ P @ H + noise[i]
        v = resid[i] - H @ m
        loglik -= 0.5 * (LOG_2PI + np.log(S) + v * v / S)
        Ph = P @ H
        for q in range(p):
            dS = H @ dP[q] @ H + dnoise[q]
            dv = -dmean[q] - H @ dm[q]
            grad[q] -= 0.5 * (dS / S + 2 * v * dv / S - v * v * dS / S**2)
            dPh = dP[q] @ H
            dm[q] = dm[q] + (dPh * v + Ph * dv) / S - Ph * v * dS / S**2
            dP[q] = (
                dP[q] - (np.outer(dPh, Ph) + np.outer(Ph, dPh)) / S + np.outer(Ph, Ph) * dS / S**2
            )
        m = m + Ph * v / S
        P = P - np.outer(Ph, Ph) / S
    return loglik, grad


# --- smoother and predictor ---------------------------------------------------
def _rts_step(A, m_f, P_f, m_next, P_next, Pinf):
    """One RTS step, in the Joseph-like form the compiled loop uses::

        G = P_f A^T Pp^-1,  m = m_f + G (m_next - A m_f),
        P = (I - G A) P_f (I - G A)^T + G (Q + P_next) G^T   (= P_f + G (P_next - Pp) G^T)
    """
    m_pred, P_pred = _predict(m_f, P_f, A, Pinf)
    G = P_f @ A.T @ np.linalg.inv(P_pred)
    m = m_f + G @ (m_next - m_pred)
    iga = np.eye(A.shape[0]) - G @ A
    P = iga @ P_f @ iga.T + G @ (Pinf - A @ Pinf @ A.T + P_next) @ G.T
    return m, 0.5 * (P + P.T)


def smooth(t, Pinf, trans, mf, Pf):
    """Twin of ``_loops.kalman.smooth``: returns ``(ms, Ps)``.

    A repeated time is one state: its earlier copies take the smoothed state
    of the last copy (which the filter conditioned on all of them).
    """
    n = t.size
    ms, Ps = mf.copy(), Pf.copy()
    for k in range(n - 2, -1, -1):
        dt = t[k + 1] - t[k]
        if dt == 0:
            ms[k], Ps[k] = ms[k + 1], Ps[k + 1]
            continue
        ms[k], Ps[k] = _rts_step(transition(dt, *trans), mf[k], Pf[k], ms[k + 1], Ps[k + 1], Pinf)
    return ms, Ps


def predict_between(tq, t, H, Pinf, trans, filt, smoothed):
    """Twin of ``_loops.kalman.predict_between``: latent mean and variance at ``tq``.

    A query time is treated as an extra state with no observation: predicted
    from the filtered state at the last data time before it (or the prior
    before the first), then smoothed against the next data time's smoothed
    state (Särkkä 2013, Theorem 8.2, applied to the augmented time grid).
    """
    mf, Pf = filt
    ms, Ps = smoothed
    n, d = t.size, H.size
    mean, var = np.empty(tq.size), np.empty(tq.size)
    for i, tau in enumerate(tq):
        k = int(np.searchsorted(t, tau, side="right")) - 1
        if k < 0:
            m, P = np.zeros(d), Pinf.copy()
        else:
            source = (ms[k], Ps[k]) if k == n - 1 else (mf[k], Pf[k])
            m, P = _predict(*source, transition(tau - t[k], *trans), Pinf)
        if k < n - 1:
            A = transition(t[k + 1] - tau, *trans)
            m, P = _rts_step(A, m, P, ms[k + 1], Ps[k + 1], Pinf)
        mean[i] = H @ m
        var[i] = max(H @ P @ H, 0.0)
    return mean, var


# --- sampling --------------------------------------------------------------
def _sqrt_psd(Q):
    w, v = np.linalg.eigh(0.5 * (Q + Q.T))
    return (v * np.sqrt(np.clip(w, 0.0, None))) @ v.T


def sample_states(t, H, Pinf, trans, z):
    """Twin of ``_loops.sample.sample_states``.

    ``x_0 = Pinf^(1/2) z_0``, then ``x_k = A x_(k-1) + Q^(1/2) z_k``.
    """
    n = t.size
    x = _sqrt_psd(Pinf) @ z[0]
    out = np.empty(n)
    out[0] = H @ x
    for i in range(1, n):
        dt = t[i] - t[i - 1]
        if dt > 0:
            A = transition(dt, *trans)
            x = A @ x + _sqrt_psd(Pinf - A @ Pinf @ A.T) @ z[i]
        out[i] = H @ x
    return out

"""State-space form of a product of kernels: Kronecker products of the factors.

If ``f1 = H1 x1`` and ``f2 = H2 x2`` are independent stationary processes,
``x = x1 (x) x2`` (Kronecker product) has ``E[x(t+tau) x(t)^T] =
A1(tau) P1 (x) A2(tau) P2``, so the product kernel ``k1 k2`` is the
covariance of ``f = (H1 (x) H2) x`` with (Solin & Särkkä 2014, sec. 3;
Van Loan 2000 for the Kronecker identities)::

    A(dt) = A1(dt) (x) A2(dt),    Pinf = P1 (x) P2,
    F = F1 (x) I + I (x) F2,      L Qc L^T = G1 (x) P2 + P1 (x) G2,

where ``Gi = Li Qci Li^T``. The last line follows from the Lyapunov equations
of the factors, so ``L = I`` and ``Qc = G``. ``Q(dt) = Pinf - A Pinf A^T =
Q1 (x) A2 P2 A2^T + P1 (x) Q2`` is positive semi-definite.

The closed form of ``A`` is kept: each pair of terms multiplies into terms of
the same family. With ``c_i = cos(w_i dt)``, ``s_i = sin(w_i dt)`` and the
product-to-sum identities ``c1 c2 = (cos(w1 - w2) + cos(w1 + w2)) / 2`` etc.,

    e^{-r1 dt}(c1 C1 + s1 S1) (x) e^{-r2 dt}(c2 C2 + s2 S2)
      = e^{-(r1 + r2) dt} [ cos((w1 + w2) dt) (C1C2 - S1S2) / 2
                          + sin((w1 + w2) dt) (S1C2 + C1S2) / 2
                          + cos((w1 - w2) dt) (C1C2 + S1S2) / 2
                          + sin((w1 - w2) dt) (S1C2 - C1S2) / 2 ],

writing ``XY`` for ``X (x) Y``; the matrix polynomials in ``dt`` multiply by
convolving their coefficients. A term that does not rotate (``w = 0``) makes
only one product term. Derivatives follow by the product rule, the factors'
parameters being disjoint and concatenated in order.
"""

from __future__ import annotations

import numpy as np

from .statespace import StateSpace


def _polykron(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Coefficients of ``(sum_k x[k] dt^k) (x) (sum_l y[l] dt^l)``.

    Parameters
    ----------
    x : ndarray of shape (Kx, a, a)
    y : ndarray of shape (Ky, b, b)

    Returns
    -------
    ndarray of shape (Kx + Ky - 1, a b, a b)
    """
    kx, a, _ = x.shape
    ky, b, _ = y.shape
    out = np.zeros((kx + ky - 1, a * b, a * b))
    for k in range(kx):
        if not x[k].any():
            continue
        for l in range(ky):
            if y[l].any():
                out[k + l] += np.kron(x[k], y[l])
    return out


def _pair(x_a, y_b, dx_a, dy_b):
    """``x_a (x) y_b`` and its derivatives over the parameters of both factors.

    ``dx_a`` has shape (pa, Kx, a, a), ``dy_b`` (pb, Ky, b, b); the result's
    derivatives have shape (pa + pb, Kx + Ky - 1, a b, a b).
    """
    val = _polykron(x_a, y_b)
    der = [_polykron(dx, y_b) for dx in dx_a] + [_polykron(x_a, dy) for dy in dy_b]
    return val, _stack(der, val.shape)


def _stack(arrays: list, shape: tuple) -> np.ndarray:
    """``np.stack`` that also accepts an empty list (a factor without parameters)."""
    return np.stack(arrays) if arrays else np.zeros((0,) + tuple(shape))


def _rotates(ss: StateSpace, j: int) -> bool:
    # A term rotates if its frequency or any derivative of it is non-zero.
    return bool(ss.freq[j] != 0.0 or np.any(ss.d_freq[:, j] != 0.0))


def kron_state_space(a: StateSpace, b: StateSpace) -> StateSpace:
    """State-space form of the product of two independent processes.

    Parameters
    ----------
    a, b : StateSpace
        The factors, with ``pa`` and ``pb`` parameters.

    Returns
    -------
    StateSpace
        State dimension ``a.dim * b.dim``, parameters ``pa + pb`` (those of
        ``a`` first), transition terms as in the module docstring.
    """
    pa, pb = a.n_params, b.n_params
    p = pa + pb
    terms = []  # (rate, freq, C, S, d_rate, d_freq, dC, dS)
    for ja in range(a.rate.size):
        ca, sa = a.cos_coef[ja], a.sin_coef[ja]
        dca, dsa = a.d_cos_coef[:, ja], a.d_sin_coef[:, ja]
        for jb in range(b.rate.size):
            cb, sb = b.cos_coef[jb], b.sin_coef[jb]
            dcb, dsb = b.d_cos_coef[:, jb], b.d_sin_coef[:, jb]
            rate = a.rate[ja] + b.rate[jb]
            d_rate = np.concatenate([a.d_rate[:, ja], b.d_rate[:, jb]])
            ra, rb = _rotates(a, ja), _rotates(b, jb)

            if not ra and not rb:
                c, dc = _pair(ca, cb, dca, dcb)
                s, ds = np.zeros_like(c), np.zeros_like(dc)
                terms.append((rate, 0.0, c, s, d_rate, np.zeros(p), dc, ds))
            elif ra and not rb:
                c, dc = _pair(ca, cb, dca, dcb)
                s, ds = _pair(sa, cb, dsa, dcb)
                d_freq = np.concatenate([a.d_freq[:, ja], np.zeros(pb)])
                terms.append((rate, a.freq[ja], c, s, d_rate, d_freq, dc, ds))
            elif rb and not ra:
                c, dc = _pair(ca, cb, dca, dcb)
                s, ds = _pair(ca, sb, dca, dsb)
                d_freq = np.concatenate([np.zeros(pa), b.d_freq[:, jb]])
                terms.append((rate, b.freq[jb], c, s, d_rate, d_freq, dc, ds))
            else:
                cc, dcc = _pair(ca, cb, dca, dcb)
                ss_, dss = _pair(sa, sb, dsa, dsb)
                sc, dsc = _pair(sa, cb, dsa, dcb)
                cs, dcs = _pair(ca, sb, dca, dsb)
                for sign in (1.0, -1.0):
                    freq = a.freq[ja] + sign * b.freq[jb]
                    d_freq = np.concatenate([a.d_freq[:, ja], sign * b.d_freq[:, jb]])
                    terms.append((
                        rate, freq,
                        0.5 * (cc - sign * ss_), 0.5 * (sc + sign * cs),
                        d_rate, d_freq,
                        0.5 * (dcc - sign * dss), 0.5 * (dsc + sign * dcs),
                    ))
    d = a.dim * b.dim
    n_pow = max(t[2].shape[0] for t in terms)
    n_terms = len(terms)
    cos_coef = np.zeros((n_terms, n_pow, d, d))
    sin_coef = np.zeros_like(cos_coef)
    d_cos = np.zeros((p, n_terms, n_pow, d, d))
    d_sin = np.zeros_like(d_cos)
    for j, (_, _, c, s, _, _, dc, ds) in enumerate(terms):
        k = c.shape[0]
        cos_coef[j, :k], sin_coef[j, :k] = c, s
        d_cos[:, j, :k], d_sin[:, j, :k] = dc, ds
    ga = a.L @ a.Qc @ a.L.T
    gb = b.L @ b.Qc @ b.L.T
    dpinf = _stack(
        [np.kron(x, b.Pinf) for x in a.dPinf] + [np.kron(a.Pinf, y) for y in b.dPinf], (d, d)
    )
    return StateSpace(
        F=np.kron(a.F, np.eye(b.dim)) + np.kron(np.eye(a.dim), b.F),
        L=np.eye(d),
        Qc=np.kron(ga, b.Pinf) + np.kron(a.Pinf, gb),
        H=np.kron(a.H, b.H),
        Pinf=np.kron(a.Pinf, b.Pinf),
        dPinf=dpinf,
        rate=np.array([t[0] for t in terms], dtype=float),
        freq=np.array([t[1] for t in terms], dtype=float),
        cos_coef=cos_coef,
        sin_coef=sin_coef,
        d_rate=np.stack([t[4] for t in terms], axis=1).reshape(p, n_terms),
        d_freq=np.stack([t[5] for t in terms], axis=1).reshape(p, n_terms),
        d_cos_coef=d_cos,
        d_sin_coef=d_sin,
    )


def product_state_space(parts: list[StateSpace]) -> StateSpace:
    """Fold :func:`kron_state_space` over the factors, left to right."""
    out = parts[0]
    for part in parts[1:]:
        out = kron_state_space(out, part)
    return out

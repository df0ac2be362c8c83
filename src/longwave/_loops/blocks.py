"""Compiled cross-covariance blocks ``K[a, i] = k(|z_a - t_i|)`` for sparse methods.

A kernel reaches these loops as a *flat form*: a sum of terms, each term a
product of primitive factors. Factor ``f`` has an integer ``codes[f]``
(one of the ``CODE_*`` constants below) and its natural hyperparameter
values in ``params[f, :]`` (in the kernel class's ``param_names_local``
order); the factors of term ``j`` are ``term_start[j] : term_start[j + 1]``.
``slots[f, p]`` is the index of factor ``f``'s parameter ``p`` among the
kernel's parameters (``-1`` for padding), so gradients land in the right
place even when expanding a product of sums repeats a factor.

Adding a kernel's compiled form happens in this file only: add a
``CODE_*`` constant and one branch in :func:`primitive` that writes the
value, the derivative in the lag and the derivatives with respect to the
log of each hyperparameter; then set ``loop_code = CODE_...`` on the kernel
class. Kernels without a code use the numpy fallback of the sparse methods.

Plain-numpy twins of these loops live in ``tests/test_sparse_blocks.py``.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

CODE_NONE = 0
CODE_MATERN12 = 1
CODE_MATERN32 = 2
CODE_MATERN52 = 3
CODE_SQUARED_EXP = 4
CODE_PERIODIC = 5
CODE_COSINE = 6

MAX_PARAMS = 4  # widest factor supported; raise it here if a kernel needs more
# Decays beyond exp(-300) (5e-131) are written as exact zeros. They change nothing
# in double precision, but left in, they and their products become subnormal
# numbers, on which the BLAS products of a block run some 20x slower (measured:
# a syrk of a (64, 32768) Matérn block spanning 1000 length scales took 94 ms
# instead of 5 ms). Every decaying branch of primitive() should use _decay().
DECAY_CUTOFF = 300.0
SQRT3 = math.sqrt(3.0)
SQRT5 = math.sqrt(5.0)


@njit(cache=True, inline="always")
def _decay(u):
    """``exp(-u)``, or exactly 0 beyond ``DECAY_CUTOFF`` (see above)."""
    return math.exp(-u) if u < DECAY_CUTOFF else 0.0


@njit(cache=True, inline="always")
def primitive(code, tau, par, out, with_grad):
    """Write ``k(tau)`` into ``out[0]``; with ``with_grad`` also ``dk/dtau`` into
    ``out[1]`` and ``dk/dlog(par[p])`` into ``out[2 + p]``.

    Matérn forms: Rasmussen & Williams 2006, eq. 4.17, with ``u = lam tau``;
    the squared exponential: eq. 4.9; the periodic kernel: MacKay 1998, eq. 47; the
    cosine: ``amp^2 cos(2 pi tau / period)``.
    """
    amp2 = par[0] * par[0]
    if code == CODE_MATERN12:
        lam = 1.0 / par[1]
        u = lam * tau
        e = amp2 * _decay(u)
        out[0] = e
        if with_grad:
            out[1] = -lam * e
            out[2] = 2.0 * e
            out[3] = u * e
    elif code == CODE_MATERN32:
        lam = SQRT3 / par[1]
        u = lam * tau
        e = amp2 * _decay(u)
        out[0] = (1.0 + u) * e
        if with_grad:
            out[1] = -lam * u * e
            out[2] = 2.0 * out[0]
            out[3] = u * u * e
    elif code == CODE_MATERN52:
        lam = SQRT5 / par[1]
        u = lam * tau
        e = amp2 * _decay(u)
        out[0] = (1.0 + u + u * u / 3.0) * e
        if with_grad:
            out[1] = -lam * u * (1.0 + u) * e / 3.0
            out[2] = 2.0 * out[0]
            out[3] = u * u * (1.0 + u) * e / 3.0
    elif code == CODE_SQUARED_EXP:  # R&W 2006, eq. 4.9; x = tau / scale
        inv = 1.0 / par[1]
        x = tau * inv
        e = amp2 * _decay(0.5 * x * x)
        out[0] = e
        if with_grad:
            out[1] = -x * inv * e
            out[2] = 2.0 * e
            out[3] = x * x * e
    elif code == CODE_PERIODIC:  # amp^2 exp(-2 sin^2(theta) / scale^2), theta = pi tau / period
        theta = math.pi * tau / par[1]
        s = math.sin(theta)
        inv2 = 1.0 / (par[2] * par[2])
        e = amp2 * math.exp(-2.0 * s * s * inv2)
        out[0] = e
        if with_grad:
            s2t = math.sin(2.0 * theta)  # d(2 sin^2 theta)/dtheta = 2 sin(2 theta)
            out[1] = -e * 2.0 * s2t * inv2 * (math.pi / par[1])
            out[2] = 2.0 * e
            out[3] = e * 2.0 * s2t * inv2 * theta  # dtheta/dlog(period) = -theta
            out[4] = e * 4.0 * s * s * inv2
    elif code == CODE_COSINE:  # amp^2 cos(phi), phi = 2 pi tau / period
        phi = 2.0 * math.pi * tau / par[1]
        out[0] = amp2 * math.cos(phi)
        if with_grad:
            out[1] = -amp2 * math.sin(phi) * (2.0 * math.pi / par[1])
            out[2] = 2.0 * out[0]
            out[3] = amp2 * math.sin(phi) * phi
    else:
        out[0] = math.nan
        if with_grad:
            out[1] = math.nan


@njit(cache=True, inline="always")
def _value(tau, codes, params, term_start, buf):
    total = 0.0
    for j in range(term_start.size - 1):
        prod = 1.0
        for f in range(term_start[j], term_start[j + 1]):
            primitive(codes[f], tau, params[f], buf, False)
            prod *= buf[0]
        total += prod
    return total


@njit(cache=True, parallel=True)
def cross_block(z, t, form, colscale, out):
    """``out[a, i] = colscale[i] * k(|z[a] - t[i]|)``.

    Parameters
    ----------
    z : (m,) inducing times; t : (c,) data times (input)
    form : tuple (codes, params, term_start, slots), the flat kernel form (input)
    colscale : (c,) column weights, e.g. ``1 / sigma_i`` (input)
    out : (m, c) C-ordered buffer (output)
    """
    codes, params, term_start, _ = form
    # A single primitive (the common case) skips the term and factor loops,
    # which halves the time per element.
    single = term_start.size == 2 and term_start[1] == 1
    code, par = codes[0], params[0]
    for a in prange(z.size):
        buf = np.empty(2 + MAX_PARAMS)
        za = z[a]
        if single:
            for i in range(t.size):
                primitive(code, abs(za - t[i]), par, buf, False)
                out[a, i] = colscale[i] * buf[0]
        else:
            for i in range(t.size):
                out[a, i] = colscale[i] * _value(abs(za - t[i]), codes, params, term_start, buf)


@njit(cache=True)
def square_block(z, form, out):
    """``out[a, b] = k(|z[a] - z[b]|)`` for the (m, m) inducing covariance (output)."""
    codes, params, term_start, _ = form
    buf = np.empty(2 + MAX_PARAMS)
    for a in range(z.size):
        for b in range(a + 1):
            v = _value(abs(z[a] - z[b]), codes, params, term_start, buf)
            out[a, b] = v
            out[b, a] = v


@njit(cache=True, inline="always")
def _contract_point(weight, diff, codes, params, term_start, slots, fac, grad, with_z):
    """Add ``weight * dk/dtheta`` into ``grad[:-1]``; return ``weight * dk/dz``.

    ``fac`` is scratch of shape (n_factors, 2 + MAX_PARAMS). The derivative of
    a product term with respect to factor f's inputs is f's derivative times
    the product of the other factors (computed without dividing, since a
    factor may be zero).
    """
    tau = abs(diff)
    dz = 0.0
    # |z - t| has a kink at zero; its subgradient 0 is used there (the
    # derivative in the lag vanishes at 0 for every kernel smoother than Matérn-1/2).
    with_z = with_z and diff != 0.0
    if codes.size == 1:  # a single primitive: no products of other factors
        primitive(codes[0], tau, params[0], fac[0], True)
        for p in range(MAX_PARAMS):
            s = slots[0, p]
            if s >= 0:
                grad[s] += weight * fac[0, 2 + p]
        dz = weight * fac[0, 1] if with_z else 0.0
        return -dz if diff < 0.0 else dz
    for j in range(term_start.size - 1):
        lo, hi = term_start[j], term_start[j + 1]
        for f in range(lo, hi):
            primitive(codes[f], tau, params[f], fac[f], True)
        for f in range(lo, hi):
            others = weight
            for g in range(lo, hi):
                if g != f:
                    others *= fac[g, 0]
            for p in range(MAX_PARAMS):
                s = slots[f, p]
                if s >= 0:
                    grad[s] += others * fac[f, 2 + p]
            if with_z:
                dz += others * fac[f, 1]
    if diff < 0.0:
        dz = -dz
    return dz


@njit(cache=True, parallel=True)
def contract_block(z, t, form, adjoint, colscale, u, v, with_z, partial, gz_out):
    """Contract an adjoint with kernel derivatives over one (m, c) block.

    The adjoint is ``W[a, i] = adjoint[a, i] * colscale[i] + u[a] * v[i]`` (a
    scaled matrix plus a rank-one term, formed here rather than in numpy to
    save two passes over the block). Row ``k`` of ``partial`` receives
    ``sum W[a, i] * dK[a, i] / dlog(theta_s)`` over its share of the rows
    ``a`` (one share per parallel task; the caller sums the rows), and, when
    ``with_z``, ``gz_out[a] += sum_i W[a, i] dK[a, i] / dz_a``.

    Parameters
    ----------
    z : (m,), t : (c,) times (input); form : flat kernel form (input)
    adjoint : (m, c); colscale : (c,); u : (m,); v : (c,) (input)
    partial : (n_tasks, p) zeros (output); gz_out : (m,) accumulated (output)
    """
    codes, params, term_start, slots = form
    n_tasks = partial.shape[0]
    m = z.size
    for k in prange(n_tasks):
        fac = np.empty((codes.size, 2 + MAX_PARAMS))
        row = partial[k]
        for a in range(k * m // n_tasks, (k + 1) * m // n_tasks):
            za, ua = z[a], u[a]
            dz_sum = 0.0
            for i in range(t.size):
                w = adjoint[a, i] * colscale[i] + ua * v[i]
                dz_sum += _contract_point(w, za - t[i], codes, params, term_start, slots, fac,
                                          row, with_z)
            gz_out[a] += dz_sum


@njit(cache=True)
def contract_square(z, form, adjoint, with_z, grad_out, gz_out):
    """As :func:`contract_block` for the symmetric (m, m) inducing block.

    ``adjoint`` is ``dF/dKuu`` (symmetric); the z-derivative counts both the
    row and the column of ``z_a`` (hence the factor 2).
    """
    codes, params, term_start, slots = form
    fac = np.empty((codes.size, 2 + MAX_PARAMS))
    scratch = np.zeros(grad_out.size + 1)
    for a in range(z.size):
        for b in range(z.size):
            # the diagonal k(0) does not move with z_a; _contract_point gives dz = 0 there
            dz = _contract_point(adjoint[a, b], z[a] - z[b], codes, params, term_start,
                                 slots, fac, scratch, with_z)
            gz_out[a] += 2.0 * dz
    for s in range(grad_out.size):
        grad_out[s] += scratch[s]


@njit(cache=True, parallel=True)
def flush_tiny(arr, cutoff):
    """Set entries of the (m, c) ``arr`` with ``|x| < cutoff`` to 0, in place (input/output).

    Whitening a block (``Linv @ K``) creates subnormal numbers where far-apart
    inducing and data times meet, even from a block without any; flushing
    them (cutoff 1e-150, so that no product of two kept entries underflows)
    keeps the following BLAS products at full speed (measured: a (64, 16384)
    syrk took 53 ms before and 8.5 ms after). The error is below
    ``cutoff / |entry scale|``, far under rounding for any sane data scale.
    """
    for a in prange(arr.shape[0]):
        for i in range(arr.shape[1]):
            if abs(arr[a, i]) < cutoff:
                arr[a, i] = 0.0

"""One-pass accumulation of the m-by-m statistics of sparse methods.

A *pass* reads the data chunk by chunk and adds each chunk's contribution
into an accumulator of fixed size (O(m^2), independent of n). Accumulators
of disjoint ranges add up, so the same chunk functions serve the local loop
(:func:`run_local`) and the distributed map-reduce (``sparse_dask``).

Notation (Titsias 2009; Snelson & Ghahramani 2006): inducing times ``z``
(m,), ``Kuu = k(z, z) + jitter`` with Cholesky factor ``L`` and
``Linv = L^-1``, ``K = k(z, t)`` (m, c) for one chunk, residual
``r = y - mean``, noise variance ``s2_i = err_i^2 + excess^2`` and weight
``w_i = 1 / s2_i``, prior variance ``kd = k(0)``.

* VFE value pass: whitened columns ``a_i = Linv k_i``,
  ``S = sum_i w_i a_i a_i^T = Linv Phi Linv^T``, ``cw = sum_i w_i r_i a_i``, and
  the sums of ``w r^2``, ``log s2``, ``w`` (one product and one syrk per chunk).
  When ``Kuu`` is well conditioned (``ChunkContext.raw``) the pass instead
  adds the unwhitened ``Phi`` and ``b`` over each chunk's window of inducing
  times (``sparse_windows``), and the caller whitens the totals once.
* FITC value pass: whitened columns ``a_i = Linv k_i``, ``q_i = |a_i|^2``,
  ``D_i = s2_i + kd - q_i``; ``S_F = sum a_i a_i^T / D_i``, ``c_F = sum a_i r_i / D_i``,
  the sums of ``r^2 / D`` and ``log D``; and the VFE statistics (whitened) for
  the certified bounds.
* Gradient passes contract the adjoint ``dF/dK`` of each chunk with the
  kernel derivatives (compiled, no (p, m, c) array is formed) and add up the
  per-point scalar sums that the noise and mean gradients need.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np
from scipy.linalg import blas

from .._loops.blocks import flush_tiny
from . import sparse_windows

TINY = 1e-150  # entries below this are flushed to 0 after whitening (see flush_tiny)


@dataclass
class Accumulator:
    """Sums over data points; every field adds (arrays elementwise).

    Unused fields stay zero; which ones a pass fills is listed in its function.
    """

    n: int = 0
    mat: np.ndarray | None = None      # Phi (VFE) or S_F (FITC), (m, m)
    vec: np.ndarray | None = None      # b (VFE) or c_F (FITC), (m,)
    sum_rr: float = 0.0                # sum w r^2 (VFE) or r^2 / D (FITC)
    sum_log: float = 0.0               # sum log s2 (VFE) or log D (FITC)
    sum_w: float = 0.0                 # sum w
    raw_mat: np.ndarray | None = None  # VFE value pass, raw mode: unwhitened Phi, (m, m)
    raw_vec: np.ndarray | None = None  # VFE value pass, raw mode: unwhitened b, (m,)
    vfe_mat: np.ndarray | None = None  # FITC pass only: whitened Phi, (m, m)
    vfe_vec: np.ndarray | None = None  # FITC pass only: whitened b, (m,)
    vfe_raw_mat: np.ndarray | None = None  # FITC raw mode: unwhitened Phi, (m, m)
    vfe_raw_vec: np.ndarray | None = None  # FITC raw mode: unwhitened b, (m,)
    vfe_rr: float = 0.0
    vfe_log: float = 0.0
    grad: np.ndarray | None = None     # gradient passes: kernel log-parameters (p,)
    grad_z: np.ndarray | None = None   # gradient passes: inducing times (m,)
    sum_dnoise: float = 0.0            # gradient passes: sum dF/d s2_i
    sum_dresid: float = 0.0            # gradient passes: sum dF/d r_i
    sum_dkd: float = 0.0               # FITC gradient pass: sum dF/dD_i

    def add(self, other: Accumulator) -> Accumulator:
        """Add ``other`` into this accumulator (in place) and return it."""
        for f in fields(self):
            mine, theirs = getattr(self, f.name), getattr(other, f.name)
            if theirs is None:
                continue
            setattr(self, f.name, theirs.copy() if mine is None else mine + theirs)
        return self


@dataclass(frozen=True)
class ChunkContext:
    """What every chunk needs: O(m^2) arrays and scalars (pickled to workers).

    Attributes
    ----------
    blocks : CompiledBlocks or NumpyBlocks
        Block evaluator of the kernel (``sparse_form``).
    z : ndarray of shape (m,)
    mean, excess_var, kd : float
        Constant mean, excess noise variance, prior variance ``k(0)``.
    linv : ndarray of shape (m, m)
        Inverse Cholesky factor of ``Kuu``.
    adj_mat : ndarray of shape (m, m) or None
        Gradient passes: ``G_Phi = dF/dPhi`` (VFE) or ``B_F^-1`` (FITC).
    adj_vec : ndarray of shape (m,) or None
        Gradient passes: ``g = dF/db`` (VFE) or ``g_hat = B_F^-1 c_F`` (FITC).
    n_grad : int
        Number of kernel parameters (length of the kernel gradient).
    with_z : bool
        Also accumulate the gradient over inducing times.
    windows : sparse_windows.Windows or None
        Which inducing times each chunk sees; None: all of them.
    raw : bool
        Accumulate unwhitened statistics over windows (set only when ``Kuu``
        is well conditioned; see ``sparse.RAW_COND_MAX``).
    kinv : ndarray of shape (m, m) or None
        FITC raw mode: ``Kuu^-1 = Linv^T Linv``. Its gradient pass then takes
        ``adj_mat = Linv^T B_F^-1 Linv`` and ``adj_vec = Linv^T g_hat``.
    """

    blocks: object
    z: np.ndarray
    mean: float
    excess_var: float
    kd: float
    linv: np.ndarray | None = None
    adj_mat: np.ndarray | None = None
    adj_vec: np.ndarray | None = None
    n_grad: int = 0
    with_z: bool = False
    windows: sparse_windows.Windows | None = None
    raw: bool = False
    kinv: np.ndarray | None = None

    def window(self, t):
        """Indices of the inducing times that chunk times ``t`` see (slice or array)."""
        return slice(None) if self.windows is None else self.windows.find(t)


def _noise(ctx, err):
    return err * err + ctx.excess_var


def whiten(linv, k):
    """``Linv @ k`` for a lower-triangular ``linv`` (m, m), overwriting ``k`` (m, c).

    A triangular product (BLAS trmm) does half the arithmetic of a general one;
    ``k.T`` is the Fortran-ordered (c, m) view of the C-ordered block, and
    ``k.T @ Linv^T = (Linv k)^T``, so no copy is made. Subnormal results are
    flushed to zero, or every later product of the block slows down severalfold.
    """
    out = blas.dtrmm(1.0, linv, k.T, side=1, lower=1, trans_a=1, overwrite_b=1).T
    flush_tiny(out, TINY)
    return out


def unwhiten(linv, x):
    """``Linv^T @ x`` (m, c) by trmm, overwriting ``x``: ``x^T Linv = (Linv^T x)^T``."""
    out = blas.dtrmm(1.0, linv, x.T, side=1, lower=1, trans_a=0, overwrite_b=1).T
    flush_tiny(out, TINY)
    return out


def vfe_value_chunk(ctx: ChunkContext, t, y, err, acc: Accumulator) -> None:
    """Fill ``n, mat (S), vec (cw), sum_rr, sum_log, sum_w`` (whitened statistics).

    Whitening each block (``a_i = Linv k_i``) before the products keeps the
    bound a smooth function of the hyperparameters even when ``Kuu`` is
    ill-conditioned; accumulating ``Kuf W Kfu`` first and whitening the total
    would save a product per chunk but leaves round-off of order
    ``eps * cond(Kuu)`` in the value, which ruins finite-difference checks
    and line searches.
    """
    s2 = _noise(ctx, err)
    w = 1.0 / s2
    sw = np.sqrt(w)
    r = y - ctx.mean
    if ctx.raw:
        win = ctx.window(t)
        kw = ctx.blocks.block(ctx.z[win], t, sw)  # K diag(sqrt(w)), window rows only
        acc.raw_mat[sparse_windows.square(win)] += kw @ kw.T
        acc.raw_vec[win] += kw @ (sw * r)
    else:
        aw = whiten(ctx.linv, ctx.blocks.block(ctx.z, t, sw))  # Linv K diag(sqrt(w))
        acc.mat += aw @ aw.T
        acc.vec += aw @ (sw * r)
    acc.n += t.size
    acc.sum_rr += float(w @ (r * r))
    acc.sum_log += float(np.log(s2).sum())
    acc.sum_w += float(w.sum())


def vfe_grad_chunk(ctx: ChunkContext, t, y, err, acc: Accumulator) -> None:
    """Fill ``grad, grad_z, sum_dnoise, sum_dresid`` from ``G_Phi`` and ``g``.

    With ``dF/dPhi = G_Phi`` and ``dF/db = g`` (``sparse_objectives.vfe_adjoints``),
    the chain rule through ``Phi = sum w k k^T``, ``b = sum w r k`` gives per point
    ``dF/dk_i = w_i (2 G_Phi k_i + r_i g)`` and
    ``dF/dw_i = k_i^T G_Phi k_i + r_i g^T k_i - r_i^2 / 2 + 1 / (2 w_i) - kd / 2``.

    Unlike the value pass this one need not whiten: round-off of order
    ``eps * cond(Kuu)`` in a gradient is harmless (it is not differenced), so
    one general product per chunk does instead of three.
    """
    s2 = _noise(ctx, err)
    w = 1.0 / s2
    r = y - ctx.mean
    # Rows of K outside the window are zero to round-off, and so are their
    # kernel derivatives: only the window's rows of the adjoint are needed.
    win = ctx.window(t)
    z, g = ctx.z[win], ctx.adj_vec[win]
    k = ctx.blocks.block(z, t, np.ones(t.size))
    v = ctx.adj_mat[sparse_windows.square(win)] @ k
    kgk = np.einsum("ac,ac->c", k, v)
    gk = g @ k
    gz = np.zeros(z.size)
    # the adjoint dF/dK of the chunk is v diag(2 w) + g (w r)^T, formed inside the loop
    ctx.blocks.contract(z, t, v, ctx.with_z, acc.grad, gz, colscale=2.0 * w, u=g, v=w * r)
    acc.grad_z[win] += gz
    dw = kgk + r * gk - 0.5 * r * r + 0.5 * s2 - 0.5 * ctx.kd
    acc.sum_dnoise += float(-(w * w) @ dw)
    acc.sum_dresid += float(w @ (gk - r))
    acc.n += t.size


def _fitc_raw_block(ctx, t, s2):
    """Window, its block ``k`` (w, c), ``Kuu^-1 k`` and ``D`` of one chunk (raw mode)."""
    win = ctx.window(t)
    k = ctx.blocks.block(ctx.z[win], t, np.ones(t.size))
    kk = ctx.kinv[sparse_windows.square(win)] @ k
    d = s2 + np.maximum(ctx.kd - np.einsum("ac,ac->c", k, kk), 0.0)
    return win, k, kk, d


def fitc_value_chunk(ctx: ChunkContext, t, y, err, acc: Accumulator) -> None:
    """Fill the FITC sums (``mat, vec, sum_rr, sum_log``) and the whitened VFE ones.

    Raw mode fills ``raw_mat, raw_vec, vfe_raw_mat, vfe_raw_vec`` instead of
    the matrices and vectors: the same sums before whitening, over windows.
    """
    s2 = _noise(ctx, err)
    r = y - ctx.mean
    if ctx.raw:
        win, k, _, d = _fitc_raw_block(ctx, t, s2)
        sq = sparse_windows.square(win)
        kd_ = k * (1.0 / np.sqrt(d))
        acc.raw_mat[sq] += kd_ @ kd_.T
        acc.raw_vec[win] += k @ (r / d)
        w = 1.0 / s2
        kw = k * np.sqrt(w)
        acc.vfe_raw_mat[sq] += kw @ kw.T
        acc.vfe_raw_vec[win] += k @ (w * r)
        acc.sum_rr += float((r * r) @ (1.0 / d))
        acc.sum_log += float(np.log(d).sum())
        acc.vfe_rr += float(w @ (r * r))
        acc.vfe_log += float(np.log(s2).sum())
        acc.sum_w += float(w.sum())
        acc.n += t.size
        return
    a = whiten(ctx.linv, ctx.blocks.block(ctx.z, t, np.ones(t.size)))
    d = s2 + np.maximum(ctx.kd - np.einsum("ac,ac->c", a, a), 0.0)
    sd = 1.0 / np.sqrt(d)
    ad = a * sd
    acc.mat += ad @ ad.T
    acc.vec += ad @ (sd * r)
    acc.sum_rr += float((r * r) @ (1.0 / d))
    acc.sum_log += float(np.log(d).sum())
    w = 1.0 / s2
    aw = a * np.sqrt(w)
    acc.vfe_mat += aw @ aw.T
    acc.vfe_vec += a @ (w * r)
    acc.vfe_rr += float(w @ (r * r))
    acc.vfe_log += float(np.log(s2).sum())
    acc.sum_w += float(w.sum())
    acc.n += t.size


def fitc_grad_chunk(ctx: ChunkContext, t, y, err, acc: Accumulator) -> None:
    """Fill ``grad, grad_z, mat (sum delta a a^T), sum_dkd, sum_dnoise, sum_dresid``.

    With ``alpha = (Q + D)^-1 r`` and ``delta_i = dF/dD_i`` (chain rule through
    ``Q`` and ``D``; see ``sparse_objectives.fitc_kuu_adjoint``):
    ``alpha_i = (r_i - a_i^T g) / D_i``,
    ``delta_i = (alpha_i^2 - 1/D_i + a_i^T B^-1 a_i / D_i^2) / 2`` and
    ``dF/dk_i = Linv^T (g alpha_i - B^-1 a_i / D_i - 2 delta_i a_i)``.
    """
    if ctx.raw:
        _fitc_grad_raw(ctx, t, y, err, acc)
        return
    s2 = _noise(ctx, err)
    r = y - ctx.mean
    a = whiten(ctx.linv, ctx.blocks.block(ctx.z, t, np.ones(t.size)))
    d = s2 + np.maximum(ctx.kd - np.einsum("ac,ac->c", a, a), 0.0)
    p = ctx.adj_mat @ a
    apa = np.einsum("ac,ac->c", a, p)
    alpha = (r - ctx.adj_vec @ a) / d
    delta = 0.5 * (alpha * alpha - 1.0 / d + apa / (d * d))
    p *= -1.0 / d
    p -= a * (2.0 * delta)
    adj = unwhiten(ctx.linv, p)  # plus the rank-one Linv^T g alpha^T, added in the loop
    ctx.blocks.contract(ctx.z, t, adj, ctx.with_z, acc.grad, acc.grad_z,
                        u=ctx.linv.T @ ctx.adj_vec, v=alpha)
    acc.mat += (a * delta) @ a.T
    acc.sum_dkd += float(delta.sum())
    acc.sum_dnoise += float(delta.sum())
    acc.sum_dresid += float(-alpha.sum())
    acc.n += t.size


def _fitc_grad_raw(ctx, t, y, err, acc):
    """:func:`fitc_grad_chunk` in raw mode: the same sums with ``Linv`` multiplied out.

    With ``M = Linv^T B^-1 Linv`` and ``h = Linv^T g_hat``: ``a^T B^-1 a = k^T M k``,
    ``a^T g_hat = h^T k`` and ``Linv^T (B^-1 a / D + 2 delta a) = M k / D + 2 delta Kuu^-1 k``;
    ``sum delta a a^T`` is accumulated unwhitened in ``raw_mat``.
    """
    r = y - ctx.mean
    win, k, kk, d = _fitc_raw_block(ctx, t, _noise(ctx, err))
    sq = sparse_windows.square(win)
    mk = ctx.adj_mat[sq] @ k
    h = ctx.adj_vec[win]
    alpha = (r - h @ k) / d
    delta = 0.5 * (alpha * alpha - 1.0 / d + np.einsum("ac,ac->c", k, mk) / (d * d))
    adj = mk * (-1.0 / d) - kk * (2.0 * delta)  # plus the rank-one h alpha^T, added in the loop
    gz = np.zeros(k.shape[0])
    ctx.blocks.contract(ctx.z[win], t, adj, ctx.with_z, acc.grad, gz, u=h, v=alpha)
    acc.grad_z[win] += gz
    acc.raw_mat[sq] += (k * delta) @ k.T
    acc.sum_dkd += float(delta.sum())
    acc.sum_dnoise += float(delta.sum())
    acc.sum_dresid += float(-alpha.sum())
    acc.n += t.size


def new_accumulator(kind: str, m: int, p: int = 0) -> Accumulator:
    """Zeroed accumulator for a pass of ``kind`` in {'value', 'fitc_value', 'grad', 'fitc_grad'}."""
    acc = Accumulator()
    if kind in ("value", "fitc_value", "fitc_grad"):
        acc.mat = np.zeros((m, m))
    if kind in ("value", "fitc_value"):
        acc.vec = np.zeros(m)
    if kind in ("value", "fitc_value"):
        acc.raw_mat, acc.raw_vec = np.zeros((m, m)), np.zeros(m)
    if kind == "fitc_value":
        acc.vfe_raw_mat, acc.vfe_raw_vec = np.zeros((m, m)), np.zeros(m)
    if kind == "fitc_grad":
        acc.raw_mat = np.zeros((m, m))
    if kind == "fitc_value":
        acc.vfe_mat, acc.vfe_vec = np.zeros((m, m)), np.zeros(m)
    if kind in ("grad", "fitc_grad"):
        acc.grad, acc.grad_z = np.zeros(p), np.zeros(m)
    return acc


CHUNK_FUNCTIONS = {
    "value": vfe_value_chunk,
    "grad": vfe_grad_chunk,
    "fitc_value": fitc_value_chunk,
    "fitc_grad": fitc_grad_chunk,
}


def accumulate_range(kind, ctx, source, lo, hi, chunk) -> Accumulator:
    """Run pass ``kind`` over points ``lo:hi`` of ``source`` in chunks of ``chunk``."""
    acc = new_accumulator(kind, ctx.z.size, ctx.n_grad)
    step = CHUNK_FUNCTIONS[kind]
    for start in range(lo, hi, chunk):
        t, y, err = source.read(start, min(start + chunk, hi))
        step(ctx, t, y, err, acc)
    return acc


def run_local(kind, ctx, source, chunk) -> Accumulator:
    """The whole pass in this process."""
    return accumulate_range(kind, ctx, source, 0, source.n, chunk)

"""Kalman filtering with block-diagonal transitions and cached steps.

:class:`BlockKalman` computes the same log marginal likelihood and gradient
as :class:`~longwave.methods.Kalman` but finds the block structure of
``A(dt)`` first (connected components of the non-zero pattern of every
transition coefficient and derivative), reorders the state so the blocks are
contiguous, and runs ``_loops/kalman_blocks.py``, whose products with ``A``
cost ``O(d^2 s)`` for blocks of size ``s`` instead of ``O(d^3)``. On a
regular cadence it also reuses ``A(dt)`` and its derivatives when ``dt``
repeats exactly (a cache of the last few distinct steps). Posteriors use the
dense loops (one pass, not the bottleneck of fitting).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components

from .._loops import kalman_blocks as loops
from ..kernels.statespace import StateSpace
from .base import Evaluation, Method, require_noise
from .kalman import Kalman, KalmanPosterior


@dataclass(frozen=True)
class BlockLayout:
    """A state-space model in the block layout of ``_loops/kalman_blocks.py``.

    Attributes
    ----------
    perm : ndarray of shape (d,), int
        New state ``i`` is old state ``perm[i]``.
    H, Pinf, dPinf : ndarray of shapes (d,), (d, d), (p, d, d)
        Permuted.
    trans : tuple
        ``(bstart, term_block, rate, freq, cos_coef, sin_coef)``.
    dtrans : tuple
        ``(d_rate, d_freq, d_cos, d_sin)``.
    """

    perm: np.ndarray
    H: np.ndarray
    Pinf: np.ndarray
    dPinf: np.ndarray
    trans: tuple
    dtrans: tuple

    @property
    def block_sizes(self) -> np.ndarray:
        return np.diff(self.trans[0])


def block_layout(ss: StateSpace) -> BlockLayout:
    """Split ``ss`` into diagonal blocks of its transition.

    Two states share a block when some coefficient (value or derivative, any
    term, any power) couples them. A term touching several blocks is split
    into one term per block; its rate and frequency are copied.
    """
    d = ss.dim
    pattern = (
        np.abs(ss.cos_coef).sum(axis=(0, 1)) + np.abs(ss.sin_coef).sum(axis=(0, 1))
        + np.abs(ss.d_cos_coef).sum(axis=(0, 1, 2)) + np.abs(ss.d_sin_coef).sum(axis=(0, 1, 2))
    ) != 0
    pattern |= np.eye(d, dtype=bool)
    n_blocks, label = connected_components(csr_matrix(pattern | pattern.T), directed=False)
    perm = np.argsort(label, kind="stable")
    sizes = np.bincount(label, minlength=n_blocks)
    bstart = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    s = int(sizes.max())
    members = [perm[bstart[b]:bstart[b + 1]] for b in range(n_blocks)]
    rows = []  # (term, block)
    for j in range(ss.rate.size):
        touched = (
            np.abs(ss.cos_coef[j]).sum(axis=0) + np.abs(ss.sin_coef[j]).sum(axis=0)
            + np.abs(ss.d_cos_coef[:, j]).sum(axis=(0, 1))
            + np.abs(ss.d_sin_coef[:, j]).sum(axis=(0, 1))
        ).any(axis=1)
        for b in np.unique(label[touched]):
            rows.append((j, int(b)))
    n_terms, n_pow, p = len(rows), ss.cos_coef.shape[1], ss.n_params
    cos_c = np.zeros((n_terms, n_pow, s, s))
    sin_c = np.zeros_like(cos_c)
    d_cos = np.zeros((p, n_terms, n_pow, s, s))
    d_sin = np.zeros_like(d_cos)
    for t, (j, b) in enumerate(rows):
        idx = members[b]
        k = idx.size
        sel = np.ix_(idx, idx)
        cos_c[t, :, :k, :k] = ss.cos_coef[j][:, sel[0], sel[1]]
        sin_c[t, :, :k, :k] = ss.sin_coef[j][:, sel[0], sel[1]]
        d_cos[:, t, :, :k, :k] = ss.d_cos_coef[:, j][:, :, sel[0], sel[1]]
        d_sin[:, t, :, :k, :k] = ss.d_sin_coef[:, j][:, :, sel[0], sel[1]]
    term = np.array([j for j, _ in rows], dtype=np.int64)
    trans = (
        bstart, np.array([b for _, b in rows], dtype=np.int64),
        np.ascontiguousarray(ss.rate[term]), np.ascontiguousarray(ss.freq[term]), cos_c, sin_c,
    )
    dtrans = (
        np.ascontiguousarray(ss.d_rate[:, term]), np.ascontiguousarray(ss.d_freq[:, term]),
        d_cos, d_sin,
    )
    return BlockLayout(
        perm=perm,
        H=np.ascontiguousarray(ss.H[perm]),
        Pinf=np.ascontiguousarray(ss.Pinf[np.ix_(perm, perm)]),
        dPinf=np.ascontiguousarray(ss.dPinf[:, perm][:, :, perm]),
        trans=trans,
        dtrans=dtrans,
    )


class BlockKalman(Method):
    """Kalman filter exploiting block-diagonal transitions; same results as :class:`Kalman`.

    Parameters
    ----------
    cache : int, default 8
        Slots of the transition cache: ``A(dt)`` and its derivatives for the
        last ``cache`` distinct steps are reused when a step repeats one of
        them exactly (regular cadences); 0 turns the cache off.

    Examples
    --------
    >>> from longwave import Model, Series, log_marginal_likelihood
    >>> from longwave.kernels import Matern32
    >>> s = Series([0.0, 1.0, 2.5], [0.1, 0.3, -0.2], err=0.1)
    >>> round(log_marginal_likelihood(Model(Matern32(amplitude=1.0, scale=1.0)), s,
    ...                               method=BlockKalman()), 6)
    -2.691496
    """

    name = "kalman_blocks"

    def __init__(self, cache: int = 8):
        if isinstance(cache, bool) or not isinstance(cache, (int, np.integer)) or cache < 0:
            raise ValueError(
                f"cache must be a whole number of slots >= 0 (0 turns it off), got {cache!r}; "
                "for example BlockKalman(cache=8)"
            )
        self.cache = int(cache)

    def describe(self) -> dict:
        return {"name": self.name, "cache": self.cache}

    def check(self, model, series) -> None:
        require_noise(model, series, "BlockKalman")
        Kalman().check(model, series)

    def evaluate(self, model, series, gradient: bool = False) -> Evaluation:
        self.check(model, series)
        lay = block_layout(model.kernel.state_space())
        resid = series.y - model.mean_value
        noise = model.noise_variance(series.err)
        if not gradient:
            value = loops.filter_loglik(series.t, resid, noise, lay.H, lay.Pinf, lay.trans,
                                        self.cache)
            return Evaluation(float(value))
        free = model.free_mask
        nk = model.n_kernel_params
        n_all = len(model.params)
        d = lay.H.size

        def pad(arr):  # kernel-parameter derivatives, zero rows for mean and noise
            out = np.zeros((n_all,) + arr.shape[1:])
            out[:nk] = arr
            return np.ascontiguousarray(out[free])

        dtrans = tuple(pad(a) for a in lay.dtrans)
        dpinf = pad(lay.dPinf) if nk else np.zeros((int(free.sum()), d, d))
        dynamic = np.zeros(n_all, dtype=np.bool_)
        dynamic[:nk] = True
        sens = (
            dtrans,
            dpinf,
            np.ascontiguousarray(model.noise_variance_grad()[free]),
            np.ascontiguousarray(model.mean_grad()[free]),
            dynamic[free],
        )
        value, grad = loops.filter_loglik_grad(series.t, resid, noise, lay.H, lay.Pinf,
                                               lay.trans, sens, self.cache)
        return Evaluation(float(value), grad)

    def posterior(self, model, series) -> KalmanPosterior:
        self.check(model, series)
        return KalmanPosterior(model, series)

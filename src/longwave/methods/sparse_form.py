"""Cross-covariance blocks for sparse methods: compiled when possible, numpy otherwise.

:func:`block_evaluator` turns a kernel into an object with four operations
on the inducing times ``z`` (m,) and a chunk of data times ``t`` (c,):

* ``block(z, t, colscale)`` -> (m, c) ``colscale[i] * k(|z_a - t_i|)``;
* ``square(z)`` -> (m, m) ``k(|z_a - z_b|)``;
* ``contract(z, t, adjoint, with_z, grad, gz, colscale=None, u=None, v=None)``:
  with ``W = adjoint * colscale + outer(u, v)`` (scale and rank-one term
  optional), add ``sum W * dK/dlog(theta)`` into ``grad`` (p,) and, with
  ``with_z``, ``sum_i W[a, i] dK[a, i]/dz_a`` into ``gz`` (m,);
* ``contract_square(z, adjoint, with_z, grad, gz)``: the same for ``Kuu``.

The compiled evaluator flattens the kernel into a sum of products of
primitive factors (see ``longwave._loops.blocks``); every primitive needs a
``loop_code`` class attribute for it. Otherwise the numpy evaluator calls the
kernel's own ``value``/``grad`` (no inducing-time gradient: kernels expose no
derivative in the lag).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numba
import numpy as np

from .._loops import blocks as loops
from ..kernels.base import Kernel, Primitive, Product, Sum


@dataclass(frozen=True)
class FlatForm:
    """A kernel as a sum of products of coded primitive factors.

    Attributes
    ----------
    codes : ndarray of shape (F,), int64
        ``loop_code`` of each factor.
    params : ndarray of shape (F, MAX_PARAMS)
        Natural hyperparameter values of each factor (zero padded).
    term_start : ndarray of shape (T + 1,), int64
        Factors of term j are ``term_start[j]:term_start[j + 1]``.
    slots : ndarray of shape (F, MAX_PARAMS), int64
        Index of each factor parameter among the kernel's parameters, -1 for padding.
    """

    codes: np.ndarray
    params: np.ndarray
    term_start: np.ndarray
    slots: np.ndarray

    def as_tuple(self):
        return (self.codes, self.params, self.term_start, self.slots)


def _expand(kernel: Kernel, offset: int) -> tuple[list[list[tuple]], int]:
    """Terms of ``kernel`` as lists of (leaf, first parameter index); next offset."""
    if isinstance(kernel, Primitive):
        return [[(kernel, offset)]], offset + kernel.n_params
    if isinstance(kernel, Sum):
        terms = []
        for part in kernel.parts:
            sub, offset = _expand(part, offset)
            terms.extend(sub)
        return terms, offset
    if isinstance(kernel, Product):
        # (a + b) * c = a c + b c: the cartesian product of the parts' terms.
        per_part = []
        for part in kernel.parts:
            sub, offset = _expand(part, offset)
            per_part.append(sub)
        return [sum(combo, []) for combo in itertools.product(*per_part)], offset
    raise TypeError(f"cannot flatten kernel of type {type(kernel).__name__}")


def flat_form(kernel: Kernel) -> FlatForm | None:
    """The compiled form of ``kernel``, or None if some primitive has no ``loop_code``."""
    if any(getattr(leaf, "loop_code", loops.CODE_NONE) == loops.CODE_NONE
           for leaf in kernel.leaves()):
        return None
    if any(leaf.n_params > loops.MAX_PARAMS for leaf in kernel.leaves()):
        return None
    terms, _ = _expand(kernel, 0)
    factors = [f for term in terms for f in term]
    n_f = len(factors)
    codes = np.array([leaf.loop_code for leaf, _ in factors], dtype=np.int64)
    params = np.zeros((n_f, loops.MAX_PARAMS))
    slots = np.full((n_f, loops.MAX_PARAMS), -1, dtype=np.int64)
    for f, (leaf, off) in enumerate(factors):
        values = [p.value for p in leaf.params()]
        params[f, : len(values)] = values
        slots[f, : len(values)] = np.arange(off, off + len(values))
    term_start = np.cumsum([0] + [len(term) for term in terms]).astype(np.int64)
    return FlatForm(codes, params, term_start, slots)


class CompiledBlocks:
    """Block evaluation by the numba loops of ``longwave._loops.blocks``."""

    def __init__(self, form: FlatForm):
        self.form = form

    def block(self, z, t, colscale, out=None):
        out = np.empty((z.size, t.size)) if out is None else out
        loops.cross_block(z, t, self.form.as_tuple(), colscale, out)
        return out

    def square(self, z):
        out = np.empty((z.size, z.size))
        loops.square_block(z, self.form.as_tuple(), out)
        return out

    def contract(self, z, t, adjoint, with_z, grad, gz, colscale=None, u=None, v=None):
        colscale = np.ones(t.size) if colscale is None else colscale
        u, v = (np.zeros(z.size), np.zeros(t.size)) if u is None else (u, v)
        # several shares per thread so that uneven rows still balance
        partial = np.zeros((min(z.size, 4 * numba.get_num_threads()), grad.size))
        loops.contract_block(z, t, self.form.as_tuple(), adjoint, colscale, u, v, with_z,
                             partial, gz)
        grad += partial.sum(axis=0)

    def contract_square(self, z, adjoint, with_z, grad, gz):
        loops.contract_square(z, self.form.as_tuple(), np.ascontiguousarray(adjoint),
                              with_z, grad, gz)


class NumpyBlocks:
    """Block evaluation through the kernel's numpy ``value`` and ``grad``."""

    def __init__(self, kernel: Kernel):
        self.kernel = kernel

    def block(self, z, t, colscale, out=None):
        k = self.kernel.value(np.abs(z[:, None] - t[None, :])) * colscale
        if out is None:
            return k
        out[...] = k
        return out

    def square(self, z):
        return self.kernel.value(np.abs(z[:, None] - z[None, :]))

    def _no_z(self, with_z):
        if with_z:
            raise ValueError(
                f"optimising inducing times needs the kernel's derivative in the lag, "
                f"which only compiled kernels provide; {self.kernel!r} has a primitive "
                "without loop_code. Keep the inducing times fixed (optimize=False) or "
                "give each primitive a compiled form (DEVELOPERS.md, 'Sparse methods')"
            )

    def contract(self, z, t, adjoint, with_z, grad, gz, colscale=None, u=None, v=None):
        self._no_z(with_z)
        w = adjoint if colscale is None else adjoint * colscale
        w = w if u is None else w + np.outer(u, v)
        dk = self.kernel.grad(np.abs(z[:, None] - t[None, :]))
        grad += np.einsum("pac,ac->p", dk, w)

    def contract_square(self, z, adjoint, with_z, grad, gz):
        self._no_z(with_z)
        dk = self.kernel.grad(np.abs(z[:, None] - z[None, :]))
        grad += np.einsum("pab,ab->p", dk, adjoint)


def block_evaluator(kernel: Kernel, compiled: bool = True):
    """Compiled evaluator when every primitive has a ``loop_code`` (and ``compiled``)."""
    form = flat_form(kernel) if compiled else None
    return NumpyBlocks(kernel) if form is None else CompiledBlocks(form)

"""Which inducing times a chunk of data can see: windows of the sparse passes.

A decaying kernel (Matérn, squared exponential and their sums and products)
is zero to round-off beyond its :meth:`~longwave.kernels.base.Kernel.support_radius`
``R``. A chunk of data times inside ``[t_min, t_max]`` then meets only the
inducing times inside ``[t_min - R, t_max + R]``: its block ``K = k(z, t)``
has nonzero rows only there, and so have its contributions to
``Phi = sum w k k^T`` and ``b = sum w r k``. Evaluating and multiplying only
those rows turns the O(n m^2) work of a pass into O(n w^2) for windows of
``w`` inducing times, which for a long series with inducing times spread
over it is a small fraction of ``m``.

Skipped entries are below ``SUPPORT_REL`` (1e-17) of ``k(0)``: dropping them
changes the statistics by less than their own round-off.

The window is the set of inducing times, given as a slice when the inducing
times are sorted (the placements give sorted times) and as an index array
otherwise, so that ``mat[window, window]`` style updates stay cheap.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Windows:
    """Lookup of the inducing times near a chunk.

    Attributes
    ----------
    z_sorted : ndarray of shape (m,)
        Inducing times in ascending order.
    order : ndarray of shape (m,) or None
        ``argsort`` of the inducing times, or None when they are already sorted.
    radius : float
        Support radius of the kernel (``inf``: every chunk sees every time).
    """

    z_sorted: np.ndarray
    order: np.ndarray | None
    radius: float

    @classmethod
    def build(cls, z, radius: float) -> Windows:
        """Windows over inducing times ``z`` for a kernel of support ``radius``."""
        z = np.asarray(z, dtype=np.float64)
        if z.size < 2 or bool(np.all(z[1:] >= z[:-1])):
            return cls(z, None, float(radius))
        order = np.argsort(z, kind="stable")
        return cls(z[order], order, float(radius))

    def find(self, t):
        """The inducing times that the data times ``t`` can see.

        Returns
        -------
        slice or ndarray of int
            Indices into the original (unsorted) inducing times.
        """
        m = self.z_sorted.size
        if not math.isfinite(self.radius) or t.size == 0:
            return slice(0, m) if t.size else slice(0, 0)
        lo = int(np.searchsorted(self.z_sorted, t.min() - self.radius, side="left"))
        hi = int(np.searchsorted(self.z_sorted, t.max() + self.radius, side="right"))
        if self.order is None:
            return slice(lo, hi)
        return np.sort(self.order[lo:hi])


def size(window, m: int) -> int:
    """Number of inducing times in ``window`` (of ``m`` in all)."""
    if isinstance(window, slice):
        return len(range(*window.indices(m)))
    return int(window.size)


def square(window):
    """Index of the ``window`` x ``window`` sub-block of an (m, m) array."""
    if isinstance(window, slice):
        return window, window
    return np.ix_(window, window)

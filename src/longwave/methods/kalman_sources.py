"""Where a Kalman posterior's sweep gets its filter output: stored, or re-run per block.

A :class:`~longwave.methods.kalman_sweep.Sweep` asks its source for the
filter's output over a window of indices (``source(lo, hi, fresh)``). A
:class:`StoredOutput` slices arrays filled by one filter pass; a
:class:`RefilteredOutput` (a lean posterior) keeps one filtered state per
block and re-runs the filter over the window from there, and runs a whole
backward pass over blocks in one compiled call for sorted queries.
"""

from __future__ import annotations

import numpy as np


class StoredOutput:
    """A sweep's filter output stored at every point: a window is a slice.

    ``rows`` are what the smoother reads, ``states`` the filtered means and
    covariances (the same arrays for the RTS smoother).
    """

    def __init__(self, rows, states):
        self.rows, self.states = rows, states

    @property
    def arrays(self):
        """Every array held (for memory accounting)."""
        return self.states if self.rows is self.states else self.rows + self.states

    def __call__(self, lo, hi, fresh):
        return tuple(a[lo:hi] for a in self.rows), tuple(a[lo:hi] for a in self.states)


class RefilteredOutput:
    """A lean sweep's filter output: re-run over a block from a checkpoint.

    Holds the data, one filtered state per block (``ckpt``, rows as
    ``filter_checkpoints`` writes them) and one set of block buffers, which
    each window overwrites (``fresh=False``) or which a window that is to be
    kept does not touch (``fresh=True``). ``loops`` are the specialised
    ``refilter`` and ``blocks_pass`` of the form; ``args`` the model's
    ``(scal, pinf, trans)``.
    """

    def __init__(self, data, ckpt, block, loops, args, work):
        self.data, self.ckpt, self.block = data, ckpt, block
        self._refilter, self._blocks_pass = loops
        self._args, self._work = args, work
        self._buffers = None  # (obs, mf, Pf, lam, Lam) of block + 2 rows, made on first use

    @property
    def arrays(self):
        """Every array held apart from the data (for memory accounting)."""
        return self.ckpt

    def _out(self, m, fresh):
        d = self.ckpt[0].shape[1]
        if fresh:
            return np.empty((m, d + 2)), np.empty((m, d)), np.empty((m, d, d))
        if self._buffers is None:
            rows = self.block + 2
            self._buffers = (np.empty((rows, d + 2)), np.empty((rows, d)),
                             np.empty((rows, d, d)), np.empty((rows, d)),
                             np.empty((rows, d, d)))
        return tuple(a[:m] for a in self._buffers[:3])

    def __call__(self, lo, hi, fresh):
        obs, mf, Pf = self._out(hi - lo, fresh)
        first = 0 if lo == 0 else 1  # else lo is one before a block start: a checkpoint
        if first:
            c = (lo + 1) // self.block
            mf[0], Pf[0], obs[0] = self.ckpt[0][c], self.ckpt[1][c], 0.0  # obs[0] unread
        # A split half's window may end one row past its data (the join's row).
        end = min(hi, self.data[0].size)
        self._refilter(tuple(a[lo:end] for a in self.data), *self._args, self._work,
                       obs, mf, Pf, first)
        return (obs,), (mf, Pf)

    def run_blocks(self, t, terminal, j_lo, j_hi, tq, mean, var, adj_ckpt):
        """Blocks ``j_hi - 1`` down to ``j_lo`` and their sorted queries, in one call
        (``blocks_pass`` in ``_loops/kalman_fast.py``); see :meth:`Sweep.latent`."""
        self._out(0, False)  # make the buffers
        self._blocks_pass(t, self.data, *self._args, self.ckpt, self.block, terminal, j_lo,
                          j_hi, tq, mean, var, adj_ckpt, self._buffers, self._work)

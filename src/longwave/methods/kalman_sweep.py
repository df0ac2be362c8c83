"""One direction of a Kalman posterior: stored filter output, smoothed block by block.

A :class:`Sweep` holds the filter output of a run of sorted times and the
backward quantity at its last time. That quantity is what the smoother
carries: the smoothed state (mean and covariance) for the general loops'
RTS smoother, the adjoint (a vector and a matrix of the same shapes) for the
adjoint smoother of the loops specialised to d <= 3. From these it answers
queries: the backward quantities of a block are rebuilt from the checkpoint
at the block's end, so memory stays at the filter output plus one state per
block, and the predictions equal those of one full smoother pass exactly.
The filtered states a block's queries start from come from a ``forward``
callable: slices of stored states, or (specialised loops) states
recomputed from a checkpoint of the filter at the block's start, so that
per point only the filter's observation terms are kept.
The first prediction runs the backward pass over all blocks, predicting its
own queries on the way and recording the checkpoints.

A sweep knows its loops only as two callables built by the posterior, so the
same code serves both smoothers.
"""

from __future__ import annotations

import numpy as np

from .._loops import search


class Sweep:
    """Filter output over sorted times ``t``, smoothed per block on demand.

    Parameters
    ----------
    t : ndarray of shape (n,)
        Sorted times.
    filt : tuple of ndarray
        What the smoother reads of the filter, each of first axis n: the
        filtered means (n, d) and covariances (n, d, d) for RTS, the
        observation terms (n, d + 2) for the adjoint smoother.
    terminal : tuple of ndarray
        The backward quantity at ``t[-1]``: vector (d,) and matrix (d, d).
    smooth : callable
        ``smooth(t, filt, ms, Ps)``: the backward recursion over a window
        (``filt`` sliced to it), starting from what ``ms[-1]``, ``Ps[-1]`` hold.
    predict : callable
        ``predict(tq, iq, t, filtered, smoothed, mean_out, var_out)`` for
        queries whose window indices ``iq`` are the last data point at or
        before them; ``filtered`` are the window's filtered means and
        covariances (see ``forward``).
    block : int
        Points per smoother block.
    may_keep : bool
        Keep every block's backward quantities (and filtered states, when
        ``forward`` recomputes them) from the second prediction on.
    serial : bool, default False
        Locate queries in the calling thread (for sweeps run two at once in
        threads; ``predict`` must then be serial too).
    forward : callable, optional
        ``forward(lo, end, out)``: filtered means and covariances at indices
        ``lo:end`` (``lo`` is 0 or one before a block start), written into
        ``out`` (arrays of at least ``end - lo`` rows) or returned as views.
        Default (RTS): slices of ``filt[0]``, ``filt[1]``.
    """

    def __init__(self, t, filt, terminal, smooth, predict, block, may_keep, serial=False,
                 forward=None):
        self.t = t
        self.filt = filt
        n, d = t.size, terminal[0].shape[0]
        self.terminal = terminal
        self._forward = forward
        self._smooth, self._predict = smooth, predict
        self._serial = bool(serial)
        self.block = int(block)
        self.starts = np.arange(0, n, self.block)
        nb = self.starts.size
        self.ckpt = (np.empty((nb, d)), np.empty((nb, d, d)))
        self.have_ckpt = False
        self._cache = None  # (lo, end, smoothed means, smoothed covariances) of the last block
        # Buffers of the blocks not kept, reused block after block: memory that
        # is touched again costs no page faults, which are slow on virtual machines.
        self._scratch = {}
        self.may_keep = bool(may_keep)
        # (lo, end) -> (filtered, backward) of a block, filled from the second prediction on
        self.kept = {}

    @property
    def n(self) -> int:
        return self.t.size

    def _block_end(self, j):
        return int(self.starts[j + 1]) if j + 1 < self.starts.size else self.n

    def _buffers(self, key, d):
        if key not in self._scratch:
            rows = min(self.block + 2, self.n)
            self._scratch[key] = (np.empty((rows, d)), np.empty((rows, d, d)))
        return self._scratch[key]

    def smoothed(self, lo, end):
        """Backward vectors (end - lo, d) and matrices at indices ``lo:end``.

        ``end`` is a block start (whose checkpoint is known) or ``n``.
        """
        kept = self.kept.get((lo, end))
        if kept is not None:
            return kept[1]
        keep = self.may_keep and self.have_ckpt  # a later prediction: worth keeping
        cached = self._cache
        if cached is not None and cached[0] == lo and cached[1] == end:
            ms, Ps = cached[2], cached[3]
            if keep:  # they may live in a scratch buffer
                ms, Ps = ms.copy(), Ps.copy()
        else:
            d = self.terminal[0].shape[0]
            hi = min(end + 1, self.n)
            if keep:
                ms, Ps = np.empty((hi - lo, d)), np.empty((hi - lo, d, d))
            else:
                ms, Ps = (a[:hi - lo] for a in self._buffers("backward", d))
            if end >= self.n:
                ms[-1], Ps[-1] = self.terminal
            else:
                j = end // self.block
                ms[-1], Ps[-1] = self.ckpt[0][j], self.ckpt[1][j]
            self._smooth(self.t[lo:hi], tuple(a[lo:hi] for a in self.filt), ms, Ps)
            ms, Ps = ms[:end - lo], Ps[:end - lo]
        self._cache = (lo, end, ms, Ps)
        if keep:
            self.kept[(lo, end)] = (self._filtered(lo, end, fresh=True), (ms, Ps))
        return ms, Ps

    def _filtered(self, lo, end, fresh=False):
        """Filtered means and covariances at indices ``lo:end`` (a block's window)."""
        kept = self.kept.get((lo, end))
        if kept is not None:
            return kept[0]
        if self._forward is None:
            return self.filt[0][lo:end], self.filt[1][lo:end]
        d = self.terminal[0].shape[0]
        if fresh:
            out = (np.empty((end - lo, d)), np.empty((end - lo, d, d)))
        else:
            out = tuple(a[:end - lo] for a in self._buffers("forward", d))
        return self._forward(lo, end, out)

    def latent(self, tq, out=None, known_sorted=False):
        """Posterior mean and variance of the latent process (zero prior mean) at ``tq``.

        ``out``: optional ``(mean, var)`` arrays of ``tq``'s size to write into.
        ``known_sorted``: the caller has checked that ``tq`` is sorted (serial
        sweeps skip the check).
        """
        n = self.n
        idx = np.empty(tq.size, dtype=np.int64)
        # idx = np.searchsorted(t, tq, "right") - 1
        if self._serial:
            in_order = search.locate_serial(self.t, tq, idx, known_sorted)
        else:
            in_order = search.locate(self.t, tq, idx)
        mean, var = out if out is not None else (np.empty(tq.size), np.empty(tq.size))
        # The queries of each block (that of the smoothed state they need, the next
        # data point's): slices of a sorted grid, else groups of indices.
        jobs = {}
        if in_order:
            cuts = np.searchsorted(idx, self.starts[1:] - 1, side="left")
            for j, (a, b) in enumerate(zip(np.concatenate([[0], cuts]),
                                           np.concatenate([cuts, [tq.size]]))):
                if b > a:
                    jobs[j] = slice(int(a), int(b))
        else:
            blk = np.minimum(idx + 1, n - 1) // self.block
            order = np.argsort(blk, kind="stable")
            for group in np.split(order, np.flatnonzero(np.diff(blk[order])) + 1):
                if group.size:
                    jobs[int(blk[group[0]])] = group

        def run(j, sel):
            if isinstance(sel, slice):
                self._predict_block(j, tq[sel], idx[sel], mean[sel], var[sel])
                return
            m_out, v_out = np.empty(sel.size), np.empty(sel.size)
            self._predict_block(j, tq[sel], idx[sel], m_out, v_out)
            mean[sel], var[sel] = m_out, v_out

        if not self.have_ckpt:
            for j in range(self.starts.size - 1, -1, -1):
                # backward: each block from the next one's checkpoint
                start = int(self.starts[j])
                lo = max(start - 1, 0)
                ms, Ps = self.smoothed(lo, self._block_end(j))
                self.ckpt[0][j] = ms[start - lo]
                self.ckpt[1][j] = Ps[start - lo]
                if j in jobs:
                    run(j, jobs[j])
            self.have_ckpt = True
        else:
            for j, sel in jobs.items():
                run(j, sel)
        return mean, var

    def _predict_block(self, j, tq, idx, m_out, v_out):
        """Queries whose next data point lies in block ``j``; writes ``m_out``, ``v_out``."""
        end = self._block_end(j)
        # Window lo:end holds the filtered state before every query of the block.
        lo = max(int(self.starts[j]) - 1, 0)
        smoothed = self.smoothed(lo, end)
        self._predict(tq, idx - lo, self.t[lo:end], self._filtered(lo, end), smoothed,
                      m_out, v_out)

"""One direction of a Kalman posterior: stored filter states, smoothed block by block.

A :class:`Sweep` holds the filtered states of a run of sorted times and the
smoothed state at its last time (the filtered one for a whole series; a
joined state when the series was split, see ``kalman_split.py``). From these
it answers queries: the smoothed states of a block are rebuilt from the
checkpoint at the block's end by the RTS recursion, so memory stays at the
filtered states plus one state per block, and the predictions equal those
of one full smoother pass exactly. The first prediction runs the backward
pass over all blocks, predicting its own queries on the way and recording
the checkpoints.

A sweep knows its loops only as two callables built by the posterior, so the
same code serves the general loops (any state dimension) and the ones
specialised to d <= 3 (``_loops/kalman_fast.py``).
"""

from __future__ import annotations

import numpy as np

from .._loops import search


class Sweep:
    """Filtered states over sorted times ``t``, smoothed per block on demand.

    Parameters
    ----------
    t : ndarray of shape (n,)
        Sorted times.
    filt : tuple of ndarray
        Filtered means (n, d) and covariances (n, d, d); entry ``n - 1`` is
        not read when ``terminal`` is given.
    terminal : tuple of ndarray or None
        Smoothed mean (d,) and covariance (d, d) at ``t[-1]``; None means the
        filtered state there (a whole series).
    smooth : callable
        ``smooth(t, mf, Pf, ms, Ps)``: RTS recursion over a window, starting
        from what ``ms[-1]``, ``Ps[-1]`` hold.
    predict : callable
        ``predict(tq, iq, t, filt, smoothed, mean_out, var_out)`` for queries
        whose window indices ``iq`` are the last data point at or before them.
    block : int
        Points per smoother block.
    may_keep : bool
        Keep every block's smoothed states from the second prediction on.
    serial : bool, default False
        Locate queries in the calling thread (for sweeps run two at once in
        threads; ``predict`` must then be serial too).
    """

    def __init__(self, t, filt, terminal, smooth, predict, block, may_keep, serial=False):
        self.t = t
        self.filt = filt
        n, d = filt[0].shape
        self.terminal = terminal if terminal is not None else (filt[0][n - 1], filt[1][n - 1])
        self._smooth, self._predict = smooth, predict
        self._serial = bool(serial)
        self.block = int(block)
        self.starts = np.arange(0, n, self.block)
        nb = self.starts.size
        self.ckpt = (np.empty((nb, d)), np.empty((nb, d, d)))
        self.have_ckpt = False
        self._cache = None  # (lo, end, smoothed means, smoothed covariances) of the last block
        self.may_keep = bool(may_keep)
        self.kept = {}  # (lo, end) -> smoothed states, filled from the second prediction on

    @property
    def n(self) -> int:
        return self.t.size

    def _block_end(self, j):
        return int(self.starts[j + 1]) if j + 1 < self.starts.size else self.n

    def smoothed(self, lo, end):
        """Smoothed means (end - lo, d) and covariances at indices ``lo:end``.

        ``end`` is a block start (whose checkpoint is known) or ``n``.
        """
        kept = self.kept.get((lo, end))
        if kept is not None:
            return kept
        cached = self._cache
        if cached is not None and cached[0] == lo and cached[1] == end:
            ms, Ps = cached[2], cached[3]
        else:
            mf, Pf = self.filt
            hi = min(end + 1, self.n)
            ms = np.empty((hi - lo,) + mf.shape[1:])
            Ps = np.empty((hi - lo,) + Pf.shape[1:])
            if end >= self.n:
                ms[-1], Ps[-1] = self.terminal
            else:
                j = end // self.block
                ms[-1], Ps[-1] = self.ckpt[0][j], self.ckpt[1][j]
            self._smooth(self.t[lo:hi], mf[lo:hi], Pf[lo:hi], ms, Ps)
            ms, Ps = ms[:end - lo], Ps[:end - lo]
        self._cache = (lo, end, ms, Ps)
        if self.may_keep and self.have_ckpt:  # a later prediction: worth keeping
            self.kept[(lo, end)] = (ms, Ps)
        return ms, Ps

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
        mf, Pf = self.filt
        end = self._block_end(j)
        # Window lo:end holds the filtered state before every query of the block.
        lo = max(int(self.starts[j]) - 1, 0)
        smoothed = self.smoothed(lo, end)
        self._predict(tq, idx - lo, self.t[lo:end], (mf[lo:end], Pf[lo:end]), smoothed,
                      m_out, v_out)

"""One direction of a Kalman posterior: filter output, smoothed block by block.

A :class:`Sweep` holds the filter output of a run of sorted times (through a
``source`` callable) and the backward quantity at its last time. That
quantity is what the smoother carries: the smoothed state (mean and
covariance) for the general loops' RTS smoother, the adjoint (a vector and a
matrix of the same shapes) for the adjoint smoother of the loops specialised
to d <= 3. From these it answers queries: the backward quantities of a
block are rebuilt from the checkpoint at the block's end, so memory stays at
the filter output plus one state per block, and the predictions equal those
of one full smoother pass exactly. The filter output of a block is a slice
of stored arrays, or (a lean posterior) recomputed from a checkpoint of the
filter at the block's start, so that nothing of length n is kept.
The first prediction runs the backward pass over all blocks, predicting its
own queries on the way and recording the checkpoints.

A sweep knows its loops only as callables built by the posterior, so the
same code serves both smoothers and both ways of storing the filter.
"""

from __future__ import annotations

import numpy as np

from .._loops import search
from .fresh import fresh_rows


class Sweep:
    """Filter output over sorted times ``t``, smoothed per block on demand.

    Parameters
    ----------
    t : ndarray of shape (n,)
        Sorted times.
    source : callable
        ``source(lo, hi, fresh)``: the filter's output at indices ``lo:hi``
        (``lo`` is 0 or one before a block start), as ``(rows, states)``:
        ``rows`` what the smoother reads (the filtered means (m, d) and
        covariances (m, d, d) for RTS, the observation terms (m, d + 2) for
        the adjoint smoother), ``states`` the filtered means and covariances.
        Slices of stored arrays, or recomputed from a checkpoint into buffers
        that the next call may overwrite; ``fresh=True`` asks for arrays that
        nothing else will write (they are kept). It may also offer
        ``run_blocks(t, terminal, j_lo, j_hi, tq, mean, var, ckpt)``:
        the backward pass over blocks ``j_lo .. j_hi - 1`` and their sorted
        queries in one compiled call, as :meth:`latent` would run it block by
        block, locating the queries block by block itself (a lean
        posterior's source, ``RefilteredOutput``).
    terminal : tuple of ndarray
        The backward quantity at ``t[-1]``: vector (d,) and matrix (d, d).
    smooth : callable
        ``smooth(t, rows, ms, Ps)``: the backward recursion over a window
        (``rows`` of ``source``), starting from what ``ms[-1]``, ``Ps[-1]`` hold.
    predict : callable
        ``predict(tq, iq, t, filtered, smoothed, mean_out, var_out)`` for
        queries whose window indices ``iq`` are the last data point at or
        before them; ``filtered`` are the window's filtered states.
    block : int
        Points per smoother block.
    may_keep : bool
        Keep every block's backward quantities (and filtered states) from the
        second prediction on.
    serial : bool, default False
        Locate queries in the calling thread (for sweeps run two at once in
        threads; ``predict`` must then be serial too).
    """

    def __init__(self, t, source, terminal, smooth, predict, block, may_keep, serial=False):
        self.t = t
        n, d = t.size, terminal[0].shape[0]
        self.terminal = terminal
        self.source = source
        self._smooth, self._predict = smooth, predict
        self._serial = bool(serial)
        self.block = int(block)
        self.starts = np.arange(0, n, self.block)
        nb = self.starts.size
        self.ckpt = (np.empty((nb, d)), np.empty((nb, d, d)))
        self._ckpt_from = nb  # the checkpoints of blocks ckpt_from .. nb - 1 are known
        self._cache = None  # (lo, end, smoothed means, smoothed covariances) of the last block
        self._last_window = None  # ((lo, hi), window output) of the last block
        # The backward buffer of the blocks not kept, reused block after block:
        # memory that is touched again costs no page faults, which are slow on
        # virtual machines.
        self._scratch = None
        self.may_keep = bool(may_keep)
        # (lo, end) -> (filtered, backward) of a block, filled from the second prediction on
        self.kept = {}

    @property
    def n(self) -> int:
        return self.t.size

    @property
    def have_ckpt(self) -> bool:
        """Whether the smoother's checkpoint of every block is known."""
        return self._ckpt_from == 0

    def _block_end(self, j):
        return int(self.starts[j + 1]) if j + 1 < self.starts.size else self.n

    def _window(self, lo, end, fresh=False):
        """``source``'s output over ``lo:end`` and one index past it (if any)."""
        hi = min(end + 1, self.n)
        if fresh:
            return self.source(lo, hi, True)
        last = self._last_window
        if last is None or last[0] != (lo, hi):
            last = self._last_window = ((lo, hi), self.source(lo, hi, False))
        return last[1]

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
            if keep:  # they may live in the scratch buffer
                ms, Ps = ms.copy(), Ps.copy()
                states = self._window(lo, end, fresh=True)[1]
        else:
            d = self.terminal[0].shape[0]
            hi = min(end + 1, self.n)
            if keep:
                ms, Ps = np.empty((hi - lo, d)), np.empty((hi - lo, d, d))
            else:
                if self._scratch is None:
                    rows = min(self.block + 2, self.n)
                    self._scratch = (np.empty((rows, d)), np.empty((rows, d, d)))
                ms, Ps = (a[:hi - lo] for a in self._scratch)
            if end >= self.n:
                ms[-1], Ps[-1] = self.terminal
            else:
                j = end // self.block
                ms[-1], Ps[-1] = self.ckpt[0][j], self.ckpt[1][j]
            rows, states = self._window(lo, end, fresh=keep)
            self._smooth(self.t[lo:hi], rows, ms, Ps)
            ms, Ps = ms[:end - lo], Ps[:end - lo]
        self._cache = (lo, end, ms, Ps)
        if keep:
            self.kept[(lo, end)] = (tuple(a[:end - lo] for a in states), (ms, Ps))
        return ms, Ps

    def _filtered(self, lo, end):
        """Filtered means and covariances at indices ``lo:end`` (a block's window)."""
        kept = self.kept.get((lo, end))
        if kept is not None:
            return kept[0]
        return tuple(a[:end - lo] for a in self._window(lo, end)[1])

    def latent(self, tq, out=None, known_sorted=False):
        """Posterior mean and variance of the latent process (zero prior mean) at ``tq``.

        ``out``: optional ``(mean, var)`` arrays of ``tq``'s size to write into;
        ``var`` may be ``tq`` itself: every path reads a query (and its block's
        queries) before it writes their outputs, and reads no query after.
        ``known_sorted``: the caller has checked that ``tq`` is sorted (serial
        sweeps skip the check).
        """
        n = self.n
        mean, var = out if out is not None else fresh_rows(2, tq.size)
        run_blocks = getattr(self.source, "run_blocks", None)
        if run_blocks is not None and not self.kept:
            # Sorted queries go through the compiled pass, which locates them
            # itself: no index array of their length (fresh memory) is made.
            known_sorted = known_sorted or search.is_sorted(tq)
            if known_sorted:
                if tq.size:
                    self._run_blocks(run_blocks, tq, mean, var)
                return mean, var
        idx = np.empty(tq.size, dtype=np.int64)
        # idx = np.searchsorted(t, tq, "right") - 1
        if self._serial:
            in_order = search.locate_serial(self.t, tq, idx, known_sorted)
        else:
            in_order = search.locate(self.t, tq, idx)
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
            self._ckpt_from = 0
        else:
            for j, sel in jobs.items():
                run(j, sel)
        return mean, var

    def _run_blocks(self, run_blocks, tq, mean, var):
        """Sorted queries through the source's compiled pass over the blocks they need."""
        nb, block = self.starts.size, self.block
        # query -> block of its next data point (as the jobs of ``latent``); the
        # first and last query's last data point at or before them:
        first, last = np.searchsorted(self.t, (tq[0], tq[-1]), side="right") - 1
        j_lo = min((int(first) + 1) // block, nb - 1)
        j_hi = min((int(last) + 1) // block, nb - 1) + 1
        j_hi = max(j_hi, self._ckpt_from)  # start where the adjoint is known
        # The pass writes the source's buffers: what was cached from them is stale.
        self._last_window = self._cache = None
        run_blocks(self.t, self.terminal, j_lo, j_hi, tq, mean, var, self.ckpt)
        self._ckpt_from = min(self._ckpt_from, j_lo)

    def _predict_block(self, j, tq, idx, m_out, v_out):
        """Queries whose next data point lies in block ``j``; writes ``m_out``, ``v_out``."""
        end = self._block_end(j)
        # Window lo:end holds the filtered state before every query of the block.
        lo = max(int(self.starts[j]) - 1, 0)
        smoothed = self.smoothed(lo, end)
        self._predict(tq, idx - lo, self.t[lo:end], self._filtered(lo, end), smoothed,
                      m_out, v_out)

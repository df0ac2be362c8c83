"""Long series read in chunks: :class:`ChunkedSeries` and the source protocol.

Sparse methods read their data one chunk at a time through a *source*: an
object with ``n``, ``has_err`` and ``read(lo, hi) -> (t, y, err)`` returning
float64 arrays. A :class:`~longwave.Series` is adapted without copying; a
:class:`ChunkedSeries` wraps anything that slices (numpy arrays, memory maps,
HDF5 datasets) and validates each chunk as it is read, so a series of 10^7
points is never copied whole.

Unlike a ``Series``, a ``ChunkedSeries`` is not sorted: sparse methods do
not need sorted times.
"""

from __future__ import annotations

import numpy as np

from ..series import Series


def _check_chunk(values, label, lo, positive=False):
    arr = np.asarray(values, dtype=np.float64)
    bad = ~np.isfinite(arr) | (arr <= 0) if positive else ~np.isfinite(arr)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        rule = "positive and finite" if positive else "finite"
        raise ValueError(
            f"{label} must be {rule}, found {arr[i]} at index {lo + i}; drop or repair "
            "that point before fitting"
        )
    return arr


class _Memmap:
    """A numpy memory map that pickles as its file name, not its contents.

    Lets dask workers reopen the file instead of receiving the data.
    """

    def __init__(self, arr: np.memmap):
        self.filename, self.offset = arr.filename, arr.offset
        self.dtype, self.shape, self.order = arr.dtype, arr.shape, (
            "F" if arr.flags.f_contiguous and not arr.flags.c_contiguous else "C")
        self._arr = arr

    def __getstate__(self):
        return {k: v for k, v in self.__dict__.items() if k != "_arr"}

    def __setstate__(self, state):
        self.__dict__.update(state)
        self._arr = np.memmap(self.filename, dtype=self.dtype, mode="r", offset=self.offset,
                              shape=self.shape, order=self.order)

    def __len__(self):
        return self.shape[0]

    def __getitem__(self, index):
        return self._arr[index]


def _wrap(arr):
    if isinstance(arr, np.memmap) and arr.filename is not None:
        return _Memmap(arr)
    return arr


class ChunkedSeries:
    """A long series given as sliceable arrays, validated chunk by chunk.

    Parameters
    ----------
    t, y : array-like of shape (n,)
        Anything with ``len`` and slicing ``obj[lo:hi]`` that gives numbers:
        numpy arrays, ``np.memmap`` / ``np.load(..., mmap_mode="r")``, HDF5
        datasets (opened by the caller). Any order of times.
    err : array-like of shape (n,) or float, optional
        One-sigma errors, positive; ``None`` means none (the model's excess
        noise must then be set).

    Notes
    -----
    Nothing is read at construction except the lengths; a bad value raises
    ``ValueError`` naming its index when its chunk is first read. For the
    distributed path the object is pickled to the workers: memory maps travel
    as their file names; other arrays travel whole, and HDF5 datasets cannot
    travel at all, so use :meth:`from_reader` with a reader that opens the
    file on the worker.

    Examples
    --------
    >>> import numpy as np
    >>> cs = ChunkedSeries(np.arange(5.0), np.zeros(5), err=0.1)
    >>> cs.n, cs.read(1, 3)[0]
    (5, array([1., 2.]))
    """

    def __init__(self, t, y, err=None):
        n = len(t)
        if n == 0:
            raise ValueError("a series needs at least one point, got empty t")
        if len(y) != n:
            raise ValueError(f"t and y must have equal length, got {n} and {len(y)}")
        self.has_err = err is not None
        if self.has_err and np.ndim(err) == 0:
            err = float(err)
            if not (np.isfinite(err) and err > 0):
                raise ValueError(f"err must be positive and finite, got {err}")
        elif self.has_err and len(err) != n:
            raise ValueError(f"t and err must have equal length, got {n} and {len(err)}")
        self.n = n
        self._t, self._y, self._err = _wrap(t), _wrap(y), err if np.ndim(err) == 0 else _wrap(err)
        self._reader = None
        self._trusted = False

    @classmethod
    def from_reader(cls, reader, n: int, has_err: bool = True) -> ChunkedSeries:
        """A series read through ``reader(lo, hi) -> (t, y, err)`` (err may be None).

        ``reader`` must be picklable for the distributed path; it typically
        stores a file name and opens the file when called.
        """
        if not callable(reader):
            raise TypeError(f"reader must be callable as reader(lo, hi), got {type(reader)}")
        if int(n) < 1:
            raise ValueError(f"n must be a positive count, got {n}")
        out = object.__new__(cls)
        out.n, out.has_err, out._reader, out._trusted = int(n), bool(has_err), reader, False
        return out

    @classmethod
    def of(cls, series) -> ChunkedSeries:
        """The source for ``series``: itself, or a no-copy view of a validated ``Series``."""
        if isinstance(series, ChunkedSeries):
            return series
        if not isinstance(series, Series):
            raise TypeError(
                f"sparse methods take a longwave.Series or a ChunkedSeries, got "
                f"{type(series).__name__}; wrap arrays as ChunkedSeries(t, y, err)"
            )
        out = cls(series.t, series.y, series.err if series.has_err else None)
        out._trusted = True  # a Series is validated at construction
        return out

    def read(self, lo: int, hi: int):
        """Points ``lo:hi`` as float64 arrays ``(t, y, err)``, ``err`` zeros if absent."""
        if self._reader is not None:
            t, y, err = self._reader(lo, hi)
        else:
            t, y = self._t[lo:hi], self._y[lo:hi]
            err = (self._err if np.ndim(self._err) == 0 else self._err[lo:hi]) \
                if self.has_err else None
        if self._trusted:
            return t, y, err if err is not None else np.zeros(len(t))
        t = _check_chunk(t, "t", lo)
        y = _check_chunk(y, "y", lo)
        if t.ndim != 1 or y.shape != t.shape:
            raise ValueError(
                f"chunk {lo}:{hi} must give 1-D t and y of one length, got shapes "
                f"{t.shape} and {y.shape}"
            )
        if err is None or not self.has_err:
            err = np.zeros(t.size)
        else:
            err = np.broadcast_to(_check_chunk(err, "err", lo, positive=True), t.shape)
        return t, y, err

    def ranges(self, size: int):
        """``(lo, hi)`` of consecutive chunks of at most ``size`` points."""
        return [(lo, min(lo + size, self.n)) for lo in range(0, self.n, size)]

    def __len__(self) -> int:
        return self.n

    def __repr__(self) -> str:
        return f"ChunkedSeries(n={self.n}, has_err={self.has_err})"

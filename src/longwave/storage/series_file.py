"""Long single series in HDF5, read and written in chunks.

Layout ``series`` version 1::

    /        attrs: longwave_format="series", format_version=1, n, has_err,
                    sorted (times non-decreasing), longwave_version
    /time  (n,)  float64
    /value (n,)  float64
    /error (n,)  float64, only when has_err

A :class:`SeriesDataset` is a view of three aligned 1-D datasets (a series
file, or one object's rows inside a survey file) that hands out chunks, so
callers never need the whole series in memory at once.
"""

from __future__ import annotations

import numpy as np

from .._config import settings
from . import _h5

FORMAT = "series"
FORMAT_VERSION = 1


class SeriesDataset:
    """Chunked access to one stored series.

    Parameters
    ----------
    time, value : h5py.Dataset of shape (N,)
    error : h5py.Dataset of shape (N,) or None
    start, stop : int, optional
        The series is rows ``start:stop`` (default: all rows).
    path : str, optional
        Named in error messages.
    file : h5py.File, optional
        Closed by :meth:`close` when the view owns it.

    Attributes
    ----------
    time, value, error : h5py.Dataset
        The raw datasets (for callers that slice them directly).
    n : int
    has_err : bool
    """

    def __init__(self, time, value, error=None, *, start=0, stop=None, path="", file=None):
        self.time, self.value, self.error = time, value, error
        self.start = int(start)
        self.stop = int(time.shape[0] if stop is None else stop)
        self.path = str(path)
        self._file = file

    @property
    def n(self) -> int:
        return self.stop - self.start

    def __len__(self) -> int:
        return self.n

    @property
    def has_err(self) -> bool:
        return self.error is not None

    def _default_chunk(self) -> int:
        # A whole number of storage chunks, so each HDF5 chunk is decompressed once.
        stored = (self.time.chunks or (1,))[0]
        return max(stored, settings().chunk_size // stored * stored)

    def iter_chunks(self, chunk=None):
        """Yield ``(t, y, err)`` numpy chunks of at most ``chunk`` points, in stored order.

        Parameters
        ----------
        chunk : int, optional
            Default: ``LONGWAVE_CHUNK`` (see ``longwave._config``) rounded to the
            storage chunk length.

        Yields
        ------
        t, y : ndarray of shape (k,), float64
        err : ndarray of shape (k,) or None
        """
        chunk = int(chunk or self._default_chunk())
        if chunk < 1:
            raise ValueError(f"chunk must be >= 1, got {chunk}")
        for a in range(self.start, self.stop, chunk):
            sel = slice(a, min(a + chunk, self.stop))
            yield (np.asarray(_h5.read(self.time, self.path, sel), dtype=np.float64),
                   np.asarray(_h5.read(self.value, self.path, sel), dtype=np.float64),
                   None if self.error is None else
                   np.asarray(_h5.read(self.error, self.path, sel), dtype=np.float64))

    def read(self, chunk=None):
        """The whole series as ``(t, y, err)`` arrays, filled chunk by chunk (no temporaries
        beyond one chunk)."""
        out = [np.empty(self.n) for _ in range(3 if self.has_err else 2)]
        pos = 0
        for parts in self.iter_chunks(chunk):
            k = parts[0].size
            for dest, src in zip(out, parts):
                dest[pos:pos + k] = src
            pos += k
        return out[0], out[1], (out[2] if self.has_err else None)

    def to_series(self, chunk=None):
        """A validated :class:`longwave.Series` (memory: the arrays twice, briefly)."""
        from ..series import Series

        t, y, err = self.read(chunk)
        try:
            return Series(t, y, err)
        except ValueError as exc:
            raise ValueError(f"{self.path}, dataset '{self.time.name}': {exc}") from exc

    def close(self) -> None:
        if self._file is not None:
            self._file.close()
            self._file = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __repr__(self) -> str:
        return f"SeriesDataset({self.path!r}, n={self.n}, has_err={self.has_err})"


def open_series(path) -> SeriesDataset:
    """Open a series file for chunked reading (use as a context manager)."""
    f = _h5.open_h5(path, "r", what="series file")
    try:
        _h5.check_format(f, path, FORMAT, FORMAT_VERSION)
        has_err = bool(f.attrs.get("has_err", "error" in f))
        time = _h5.check_dataset(f, path, "time", _h5.FLOAT_KINDS)
        n = time.shape[0]
        value = _h5.check_dataset(f, path, "value", _h5.FLOAT_KINDS, length=n)
        error = _h5.check_dataset(f, path, "error", _h5.FLOAT_KINDS, length=n) if has_err \
            else None
    except BaseException:
        f.close()
        raise
    return SeriesDataset(time, value, error, path=path, file=f)


class SeriesWriter:
    """Append a long series chunk by chunk; the file appears complete or not at all.

    Parameters
    ----------
    path : str or Path
    has_err : bool
    overwrite : bool, default False
    """

    def __init__(self, path, *, has_err: bool, overwrite: bool = False):
        self.path, self.has_err = path, bool(has_err)
        self._atomic = _h5.atomic_path(path, overwrite=overwrite)
        self._f = None
        self._last = -np.inf
        self._sorted = True

    def __enter__(self):
        tmp = self._atomic.__enter__()
        self._f = _h5.open_h5(tmp, "w")
        for name in ("time", "value") + (("error",) if self.has_err else ()):
            _h5.create_dataset(self._f, name, np.float64, kind="points")
        return self

    def append(self, t, y, err=None) -> None:
        """Append points ``t, y (, err)``, each array_like of shape (k,)."""
        cols = {"time": t, "value": y}
        if self.has_err != (err is not None):
            raise ValueError(f"{self.path}: writer has has_err={self.has_err}; "
                             f"{'pass' if self.has_err else 'do not pass'} err")
        if err is not None:
            cols["error"] = err
        arrays = {k: np.asarray(v, dtype=np.float64).ravel() for k, v in cols.items()}
        k = arrays["time"].size
        if any(a.size != k for a in arrays.values()):
            raise ValueError(f"t, y and err must have equal length, got "
                             f"{[a.size for a in arrays.values()]}")
        if k:
            t_arr = arrays["time"]
            self._sorted = self._sorted and t_arr[0] >= self._last and bool(
                np.all(t_arr[1:] >= t_arr[:-1]))
            self._last = t_arr[-1]
        for name, a in arrays.items():
            _h5.append(self._f[name], a)

    def __exit__(self, exc_type, exc, tb):
        try:
            if exc_type is None:
                attrs = self._f.attrs
                attrs.update({"longwave_format": FORMAT, "format_version": FORMAT_VERSION,
                              "n": self._f["time"].shape[0], "has_err": self.has_err,
                              "sorted": self._sorted, "longwave_version": _h5.package_version()})
        finally:
            self._f.close()
        return self._atomic.__exit__(exc_type, exc, tb)


def write_series(path, t, y, err=None, *, overwrite: bool = False, chunk=None) -> None:
    """Write one series file, copying ``t, y, err`` (arrays or h5py datasets) chunk by chunk.

    Parameters
    ----------
    path : str or Path
    t, y : array_like or h5py.Dataset of shape (n,)
    err : array_like or h5py.Dataset of shape (n,), optional
    overwrite : bool, default False
    chunk : int, optional
        Points copied at a time (default ``LONGWAVE_CHUNK``).
    """
    n = len(t)
    if len(y) != n or (err is not None and len(err) != n):
        raise ValueError(f"t, y and err must have equal length, got {n}, {len(y)}"
                         + ("" if err is None else f", {len(err)}"))
    chunk = int(chunk or settings().chunk_size)
    with SeriesWriter(path, has_err=err is not None, overwrite=overwrite) as w:
        for a in range(0, n, chunk):
            b = min(a + chunk, n)
            w.append(t[a:b], y[a:b], None if err is None else err[a:b])


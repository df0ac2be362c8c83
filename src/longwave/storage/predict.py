"""Posterior predictions on grids of any size, written to HDF5 chunk by chunk.

Layout ``prediction`` version 1 (a file root, or any group given by the caller)::

    <group>   attrs: longwave_format="prediction", format_version=1, n, observed,
                     grid ("uniform" or "explicit"), grid_start, grid_stop (uniform only),
                     longwave_version
    mean (n,) float64    posterior mean
    std  (n,) float64    posterior standard deviation
    t    (n,) float64    query times, explicit grids only (a uniform grid is its attributes)

Memory is bounded by ``chunk`` query points at a time (about 64 bytes each
while predicting), whatever ``n`` is, so a uniform grid of 1e8 points is
never materialised.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np

from . import _h5


@dataclass(frozen=True)
class Grid:
    """``n`` evenly spaced times from ``start`` to ``stop`` inclusive, produced on demand.

    Chunks hold exactly the values of ``numpy.linspace(start, stop, n)``.

    Examples
    --------
    >>> Grid(0.0, 1.0, 5).chunk(1, 3)
    array([0.25, 0.5 ])
    """

    start: float
    stop: float
    n: int

    def __post_init__(self):
        if not (math.isfinite(self.start) and math.isfinite(self.stop)):
            raise ValueError(f"grid start and stop must be finite, got {self.start}, {self.stop}")
        if int(self.n) != self.n or self.n < 1:
            raise ValueError(f"grid n must be a whole number >= 1, got {self.n}")

    def __len__(self) -> int:
        return int(self.n)

    def chunk(self, a: int, b: int) -> np.ndarray:
        """Grid points ``a:b``, ndarray of shape (b - a,)."""
        n, start, stop = int(self.n), float(self.start), float(self.stop)
        i = np.arange(a, b, dtype=np.float64)
        if n == 1:
            return np.full(b - a, start)
        # The same arithmetic as numpy.linspace, so chunks agree with it exactly.
        div = n - 1
        delta = stop - start
        step = delta / div
        out = i / div * delta if step == 0 else i * step
        out += start
        if b == n and b > a:
            out[-1] = stop
        return out


def as_grid(grid):
    """A :class:`Grid`, or a 1-D array-like / h5py dataset that is sliced chunk by chunk."""
    if isinstance(grid, Grid):
        return grid
    if isinstance(grid, tuple) and len(grid) == 3:
        return Grid(float(grid[0]), float(grid[1]), int(grid[2]))
    if isinstance(grid, h5py.Dataset):
        if grid.ndim != 1:
            raise ValueError(f"grid dataset {grid.name} must be 1-D, got shape {grid.shape}")
        return grid
    arr = np.asarray(grid, dtype=np.float64)
    if arr.ndim != 1:
        raise ValueError(f"grid must be 1-D times or (start, stop, n), got shape {arr.shape}")
    return arr


def predict_to_hdf5(posterior, grid, path_or_group, *, chunk: int = 1 << 20,
                    observed: bool = False, overwrite: bool = False) -> int:
    """Write the posterior mean and standard deviation on ``grid`` into HDF5, chunk by chunk.

    Parameters
    ----------
    posterior : longwave posterior
        Anything with ``predict(t, observed=..., out=(mean, var))`` returning
        ``.mean`` and ``.var`` (every longwave posterior). Its results are
        written from what it returns, so one that ignores ``out`` still works.
    grid : (start, stop, n), Grid, array_like of shape (n,) or h5py.Dataset of shape (n,)
        A ``(start, stop, n)`` triple means ``numpy.linspace(start, stop, n)``,
        generated chunk by chunk and stored as attributes only.
    path_or_group : str, Path or h5py.Group
        A new file (written under a temporary name and renamed when complete),
        or an existing group, which receives the datasets.
    chunk : int, default 1_048_576
        Query points predicted at a time; bounds memory (about 64 MB per million).
    observed : bool, default False
        Predict new observations (adds the noise variance) instead of the latent process.
    overwrite : bool, default False
        Replace an existing file (file targets only).

    Returns
    -------
    int
        Points written.
    """
    grid = as_grid(grid)
    chunk = int(chunk)
    if chunk < 1:
        raise ValueError(f"chunk must be >= 1, got {chunk}")
    if isinstance(path_or_group, h5py.Group):
        return _write(posterior, grid, path_or_group, chunk, observed)
    with _h5.atomic_path(Path(path_or_group), overwrite=overwrite) as tmp:
        with _h5.open_h5(tmp, "w") as f:
            return _write(posterior, grid, f, chunk, observed)


def _write(posterior, grid, group, chunk, observed) -> int:
    clash = sorted({"mean", "std", "t"} & set(group))
    if clash:
        raise ValueError(f"group {group.name} of {group.file.filename} already holds {clash}; "
                         "write into a new group (for example f.create_group('pred'))")
    n = len(grid)
    storage_chunk = max(1, min(chunk, 65536, n))
    uniform = isinstance(grid, Grid)
    names = ("mean", "std") if uniform else ("t", "mean", "std")
    out = {}
    for name in names:
        # Sized up front, not grown: the grid length is known.
        ds = _h5.create_dataset(group, name, np.float64, kind="grid", chunk=storage_chunk)
        ds.resize((n,))
        out[name] = ds
    # One pair of output arrays serves every chunk: fresh memory is slow to
    # touch (``methods/fresh.py``), and each chunk is written out before the next.
    buffers = np.empty((2, min(chunk, n)))
    for a in range(0, n, chunk):
        b = min(a + chunk, n)
        t = grid.chunk(a, b) if uniform else np.asarray(grid[a:b], dtype=np.float64)
        mean, var = buffers[0, :b - a], buffers[1, :b - a]
        pred = posterior.predict(t, observed=observed, out=(mean, var))
        if not uniform:
            out["t"][a:b] = t
        out["mean"][a:b] = pred.mean
        # pred.var is the buffer (when out= was honoured), free to take the std
        out["std"][a:b] = np.sqrt(pred.var, out=pred.var)
    attrs = {"longwave_format": "prediction", "format_version": 1, "n": n,
             "observed": bool(observed), "grid": "uniform" if uniform else "explicit",
             "longwave_version": _h5.package_version()}
    if uniform:
        attrs.update(grid_start=float(grid.start), grid_stop=float(grid.stop))
    group.attrs.update(attrs)
    return n


def read_grid(group_or_path):
    """The query times of a stored prediction: a :class:`Grid` or an ndarray of shape (n,)."""
    if isinstance(group_or_path, h5py.Group):
        g = group_or_path
        if g.attrs.get("grid") == "uniform":
            return Grid(float(g.attrs["grid_start"]), float(g.attrs["grid_stop"]),
                        int(g.attrs["n"]))
        return g["t"][:]
    with _h5.open_h5(group_or_path, "r", what="prediction file") as f:
        _h5.check_format(f, group_or_path, "prediction", 1)
        return read_grid(f)

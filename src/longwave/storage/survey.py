"""Survey files: many series in one HDF5 file, ragged and chunked (layout in docs/layouts.md).

Layout ``survey`` version 1::

    /                 attrs: longwave_format="survey", format_version=1, n_objects,
                             n_points, has_err, meta_names (JSON list), longwave_version
    /time   (N,)      float64, all objects' times concatenated in object order
    /value  (N,)      float64
    /error  (N,)      float64, only when has_err
    /offsets (n+1,)   int64, object i is rows offsets[i]:offsets[i+1]; offsets[0] == 0
    /ids    (n,)      UTF-8 strings, unique
    /meta/<name> (n,) one value per object: float64, int64, bool or UTF-8 string
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field

import numpy as np

from . import _h5
from ._h5 import LayoutError

FORMAT = "survey"
FORMAT_VERSION = 1


@dataclass
class ObjectData:
    """One object of a survey, as read from a file.

    Attributes
    ----------
    id : str
    t, y : ndarray of shape (n,), float64
        Times and values in stored order (not necessarily sorted; ``Series`` sorts).
    err : ndarray of shape (n,) or None
        ``None`` when the survey has no error column.
    meta : dict of str to scalar
        Per-object metadata (float, int, bool or str).
    """

    id: str
    t: np.ndarray
    y: np.ndarray
    err: np.ndarray | None = None
    meta: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return self.t.size


def _meta_dtype(value, name):
    if isinstance(value, (bool, np.bool_)):
        return np.dtype(bool)
    if isinstance(value, (int, np.integer)):
        return np.dtype(np.int64)
    if isinstance(value, (float, np.floating)):
        return np.dtype(np.float64)
    if isinstance(value, (str, np.str_)):
        return _h5.STRING
    raise TypeError(
        f"meta[{name!r}] must be a bool, int, float or str per object, got "
        f"{type(value).__name__}; store arrays as separate series instead"
    )


class SurveyWriter:
    """Stream objects into a new survey file; the file appears only when complete.

    Writes go to a temporary file beside ``path`` that replaces ``path`` in one
    rename on a clean exit, so an interrupted or failed conversion never leaves
    a partial survey and never changes an existing file.

    Parameters
    ----------
    path : str or Path
    has_err : bool
        Whether objects carry error bars (all or none).
    overwrite : bool, default False
        Replace an existing file at ``path``.
    buffer_points : int, default 1_048_576
        Points buffered in memory before they are written out.

    Examples
    --------
    >>> import numpy as np, tempfile, os
    >>> path = os.path.join(tempfile.mkdtemp(), "s.h5")
    >>> with SurveyWriter(path, has_err=False) as w:
    ...     w.add("a", np.arange(3.0), np.ones(3))
    >>> with SurveyFile(path) as sf:
    ...     sf.get("a").t
    array([0., 1., 2.])
    """

    def __init__(self, path, *, has_err: bool, overwrite: bool = False,
                 buffer_points: int = 1 << 20):
        self.path = path
        self.has_err = bool(has_err)
        self._buffer_points = int(buffer_points)
        self._atomic = _h5.atomic_path(path, overwrite=overwrite)
        self._tmp = None
        self._f = None
        self._seen: dict[str, int] = {}
        self._buf: dict[str, list] = {"time": [], "value": [], "error": []}
        self._buffered = 0
        self._ids: list[str] = []
        self._lengths: list[int] = []
        self._meta_names: list[str] | None = None
        self._meta: dict[str, list] = {}

    def __enter__(self):
        self._tmp = self._atomic.__enter__()
        f = self._f = _h5.open_h5(self._tmp, "w")
        for name in ("time", "value") + (("error",) if self.has_err else ()):
            _h5.create_dataset(f, name, np.float64, kind="points")
        _h5.create_dataset(f, "offsets", np.int64, kind="column", data=np.zeros(1, np.int64))
        _h5.create_dataset(f, "ids", _h5.STRING, kind="column")
        f.create_group("meta")
        return self

    def add(self, id, t, y, err=None, meta=None) -> None:
        """Add one object.

        Parameters
        ----------
        id : str
            Unique within the file.
        t, y : array_like of shape (n,)
            Numeric; ``n`` may be 0 and values may be NaN (the survey runner
            reports such objects as ``bad_input``).
        err : array_like of shape (n,), optional
            Required when ``has_err``, refused otherwise.
        meta : dict of str to scalar, optional
            The same names for every object.
        """
        if self._f is None:
            raise RuntimeError("SurveyWriter.add called outside its `with` block")
        if not isinstance(id, (str, np.str_)) or not id:
            raise ValueError(f"object ids must be non-empty strings, got {id!r}")
        id = str(id)
        index = len(self._ids)
        if id in self._seen:
            raise ValueError(
                f"object id {id!r} appears twice (objects {self._seen[id]} and {index}); "
                "ids must be unique: merge the two objects' points or rename one"
            )
        cols = {"time": t, "value": y}
        if self.has_err:
            if err is None:
                raise ValueError(f"object {id!r}: this survey has error bars, got err=None")
            cols["error"] = err
        elif err is not None:
            raise ValueError(
                f"object {id!r}: this survey was opened with has_err=False but got err; "
                "open the writer with has_err=True"
            )
        arrays = {}
        for name, values in cols.items():
            try:
                arr = np.asarray(values, dtype=np.float64)
            except (TypeError, ValueError) as exc:
                raise ValueError(f"object {id!r}: {name} must be numeric ({exc})") from exc
            if arr.ndim != 1:
                raise ValueError(f"object {id!r}: {name} must be 1-D, got shape {arr.shape}")
            arrays[name] = arr
        n = arrays["time"].size
        for name, arr in arrays.items():
            if arr.size != n:
                raise ValueError(
                    f"object {id!r}: time and {name} must have equal length, got {n} and "
                    f"{arr.size}"
                )
        self._add_meta(id, meta or {})
        self._seen[id] = index
        self._ids.append(id)
        self._lengths.append(n)
        for name, arr in arrays.items():
            self._buf[name].append(arr)
        self._buffered += n
        if self._buffered >= self._buffer_points or len(self._ids) % 65536 == 0:
            self._write_buffer()

    def _add_meta(self, id, meta):
        names = sorted(meta)
        if self._meta_names is None:
            self._meta_names = names
            self._meta_dtypes = {k: _meta_dtype(meta[k], k) for k in names}
            self._meta = {k: [] for k in names}
        elif names != self._meta_names:
            raise ValueError(
                f"object {id!r}: meta names must be the same for every object, expected "
                f"{self._meta_names}, got {names}"
            )
        for k in names:
            self._meta[k].append(meta[k])

    def _write_buffer(self):
        f = self._f
        for name, parts in self._buf.items():
            if parts:
                _h5.append(f[name], np.concatenate(parts))
                parts.clear()
        self._buffered = 0
        done = f["ids"].shape[0]
        new_ids = self._ids[done:]
        if not new_ids:
            return
        _h5.append(f["ids"], new_ids)
        last = f["offsets"][-1]
        _h5.append(f["offsets"], last + np.cumsum(self._lengths[done:], dtype=np.int64))
        for k, values in self._meta.items():
            if k not in f["meta"]:
                _h5.create_dataset(f["meta"], k, self._meta_dtypes[k], kind="column")
            dtype = self._meta_dtypes[k]
            try:
                arr = (np.array(values, dtype=str) if dtype is _h5.STRING
                       else np.array(values, dtype=dtype))
            except (TypeError, ValueError) as exc:
                raise ValueError(
                    f"meta[{k!r}] must have one type for all objects ({dtype}); {exc}"
                ) from exc
            _h5.append(f["meta"][k], arr)
            values.clear()

    def __exit__(self, exc_type, exc, tb):
        try:
            if exc_type is None:
                self._write_buffer()
                attrs = self._f.attrs
                attrs["longwave_format"] = FORMAT
                attrs["format_version"] = FORMAT_VERSION
                attrs["n_objects"] = len(self._ids)
                attrs["n_points"] = int(self._f["offsets"][-1])
                attrs["has_err"] = self.has_err
                attrs["meta_names"] = json.dumps(self._meta_names or [])
                attrs["longwave_version"] = _h5.package_version()
        finally:
            self._f.close()
            self._f = None
        return self._atomic.__exit__(exc_type, exc, tb)


def write_survey(path, ids, times, values, errors=None, meta=None, *, overwrite=False) -> None:
    """Write a survey file from per-object arrays.

    Parameters
    ----------
    path : str or Path
    ids : sequence of str, length m
        Unique object ids.
    times, values : sequence of array_like, each of shape (n_i,)
    errors : sequence of array_like of shape (n_i,), optional
    meta : dict of str to array_like of shape (m,), optional
        Per-object metadata columns (float, int, bool or str).
    overwrite : bool, default False

    Raises
    ------
    ValueError
        On duplicate ids or mismatched lengths; ``path`` is then left as it was.
    """
    ids = list(ids)
    m = len(ids)
    for label, seq in (("times", times), ("values", values), ("errors", errors)):
        if seq is not None and len(seq) != m:
            raise ValueError(f"{label} must hold one array per id ({m}), got {len(seq)}")
    meta = dict(meta or {})
    for k, col in meta.items():
        if len(col) != m:
            raise ValueError(f"meta[{k!r}] must have one value per id ({m}), got {len(col)}")
    with SurveyWriter(path, has_err=errors is not None, overwrite=overwrite) as w:
        for i, id in enumerate(ids):
            obj_meta = {k: _scalar(col[i]) for k, col in meta.items()}
            w.add(id, times[i], values[i], None if errors is None else errors[i], obj_meta)


def _scalar(value):
    return value.item() if isinstance(value, np.generic) else value


class SurveyFile:
    """Read a survey file lazily: batches, index access and lookup by id.

    Only ids and offsets are held in memory; points are read per object or
    per batch. Use as a context manager (or call :meth:`close`).

    Parameters
    ----------
    path : str or Path

    Attributes
    ----------
    ids : ndarray of shape (m,), str
    offsets : ndarray of shape (m + 1,), int64
    has_err : bool
    meta_names : list of str

    Raises
    ------
    LayoutError
        If the file is not HDF5, is truncated, or lacks or mistypes a dataset;
        the message names the file and the dataset.
    """

    def __init__(self, path):
        self.path = str(path)
        self._f = _h5.open_h5(path, "r", what="survey file")
        try:
            self._check()
        except BaseException:
            self._f.close()
            raise
        self._index = None

    def _check(self):
        f, p = self._f, self.path
        _h5.check_format(f, p, FORMAT, FORMAT_VERSION)
        self.has_err = bool(f.attrs.get("has_err", "error" in f))
        ids_ds = _h5.check_dataset(f, p, "ids", ("string",))
        m = ids_ds.shape[0]
        off_ds = _h5.check_dataset(f, p, "offsets", _h5.INT_KINDS, length=m + 1)
        names = ["time", "value"] + (["error"] if self.has_err else [])
        self._data = {}
        for name in names:
            self._data[name] = _h5.check_dataset(f, p, name, _h5.FLOAT_KINDS)
        offsets = np.asarray(_h5.read(off_ds, p), dtype=np.int64)
        n = self._data["time"].shape[0]
        if offsets[0] != 0 or offsets[-1] != n or np.any(np.diff(offsets) < 0):
            raise LayoutError(
                p, "/offsets",
                f"must rise from 0 to the length of /time ({n}), got first {offsets[0]}, "
                f"last {offsets[-1]}, {int(np.sum(np.diff(offsets) < 0))} decrease(s)",
            )
        for name in names[1:]:
            if self._data[name].shape[0] != n:
                raise LayoutError(
                    p, "/" + name,
                    f"must have the length of /time ({n}), got {self._data[name].shape[0]}",
                )
        self.offsets = offsets
        try:
            self.ids = _h5.read_strings(ids_ds)
        except OSError as exc:
            raise LayoutError(p, "/ids", f"cannot be read ({exc}); regenerate the file") from exc
        uniq, counts = np.unique(self.ids, return_counts=True)
        if uniq.size != self.ids.size:
            dup = str(uniq[np.argmax(counts)])
            where = np.flatnonzero(self.ids == dup).tolist()
            raise LayoutError(p, "/ids", f"ids must be unique, {dup!r} appears at positions "
                              f"{where}; rewrite the file with unique ids")
        self.meta_names = json.loads(f.attrs.get("meta_names", "[]"))
        self._meta = {}
        for k in self.meta_names:
            kinds = ("string",) if _h5.is_string(f.get(f"meta/{k}")) else (
                ("bool", "float64", "float32") + _h5.INT_KINDS)
            self._meta[k] = _h5.check_dataset(f, p, f"meta/{k}", kinds, length=m)

    # --- access --------------------------------------------------------------
    def __len__(self) -> int:
        return self.ids.size

    @property
    def n_points(self) -> np.ndarray:
        """Points per object, ndarray of shape (m,), int64."""
        return np.diff(self.offsets)

    def index_of(self, id) -> int:
        """Position of object ``id``; ``KeyError`` naming the file if absent."""
        if self._index is None:
            self._index = {s: i for i, s in enumerate(self.ids.tolist())}
        try:
            return self._index[str(id)]
        except KeyError:
            raise KeyError(f"object id {id!r} is not in survey file {self.path}") from None

    def get(self, id) -> ObjectData:
        """The object with id ``id``."""
        return self[self.index_of(id)]

    def __getitem__(self, i) -> ObjectData:
        m = len(self)
        if not isinstance(i, (int, np.integer)):
            raise TypeError(f"index must be an integer position, got {type(i).__name__}; "
                            "use .get(id) to look up by id")
        if not -m <= i < m:
            raise IndexError(f"object index {i} out of range for {m} objects")
        i = int(i) % m
        return self._read_run(i, i + 1)[0]

    def _read_run(self, i0, i1) -> list[ObjectData]:
        """Objects ``i0:i1`` from one contiguous read of each column."""
        a, b = int(self.offsets[i0]), int(self.offsets[i1])
        cols = {k: np.asarray(_h5.read(ds, self.path, slice(a, b)), dtype=np.float64)
                for k, ds in self._data.items()}
        meta = {}
        for k, ds in self._meta.items():
            if _h5.is_string(ds):
                meta[k] = _h5.read_strings(ds, slice(i0, i1)).tolist()
            else:
                meta[k] = _h5.read(ds, self.path, slice(i0, i1)).tolist()
        out = []
        for j in range(i0, i1):
            lo, hi = int(self.offsets[j]) - a, int(self.offsets[j + 1]) - a
            out.append(ObjectData(
                id=str(self.ids[j]),
                t=cols["time"][lo:hi].copy(),
                y=cols["value"][lo:hi].copy(),
                err=cols["error"][lo:hi].copy() if self.has_err else None,
                meta={k: v[j - i0] for k, v in meta.items()},
            ))
        return out

    def series_dataset(self, id):
        """Chunked view of one object's rows (a ``SeriesDataset``), for very long objects.

        The view stays valid while this file is open.
        """
        from .series_file import SeriesDataset

        i = self.index_of(id)
        return SeriesDataset(self._data["time"], self._data["value"], self._data.get("error"),
                             start=self.offsets[i], stop=self.offsets[i + 1], path=self.path)

    def iter_batches(self, batch_size: int = 64, skip=None, *, start: int = 0, stop=None):
        """Yield lists of up to ``batch_size`` objects, in file order, reading lazily.

        Parameters
        ----------
        batch_size : int, default 64
        skip : set of str, optional
            Ids to leave out (for example ``ResultStore.done_ids()`` on resume).
        start, stop : int, optional
            Object positions ``start:stop`` only (default: all), for sharding.

        Yields
        ------
        list of ObjectData
        """
        for chunk in self._position_batches(batch_size, skip, start, stop):
            # Consecutive positions are read together: one read per column per run.
            breaks = np.flatnonzero(np.diff(chunk) != 1) + 1
            batch = []
            for run in np.split(chunk, breaks):
                batch.extend(self._read_run(int(run[0]), int(run[-1]) + 1))
            yield batch

    def iter_stored_batches(self, batch_size: int = 64, skip=None):
        """As :meth:`iter_batches`, but yield :class:`StoredBatch` references, reading nothing.

        For workers that open this file themselves (see ``stored_batch``).
        """
        from .stored_batch import StoredBatch, position_runs

        for chunk in self._position_batches(batch_size, skip, 0, None):
            yield StoredBatch(os.path.abspath(self.path), position_runs(chunk),
                              tuple(str(i) for i in self.ids[chunk]))

    def _position_batches(self, batch_size, skip, start, stop):
        if batch_size < 1:
            raise ValueError(f"batch_size must be >= 1, got {batch_size}")
        stop = len(self) if stop is None else min(int(stop), len(self))
        positions = np.arange(int(start), stop)
        if skip:
            keep = ~np.isin(self.ids[start:stop], np.array(sorted(map(str, skip)), dtype=str))
            positions = positions[keep]
        for b in range(0, positions.size, batch_size):
            yield positions[b:b + batch_size]

    def close(self) -> None:
        if self._f is not None:
            self._f.close()
            self._f = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __repr__(self) -> str:
        return (f"SurveyFile({self.path!r}, objects={len(self)}, "
                f"points={int(self.offsets[-1])}, has_err={self.has_err})")

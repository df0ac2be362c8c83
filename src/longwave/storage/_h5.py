"""HDF5 plumbing shared by every layout: dataset factory, checked opening, atomic files.

Every dataset in a longwave file is created by :func:`create_dataset`, so
chunking, compression and resizability are chosen here and nowhere else.
Every file is opened by :func:`open_h5` and checked by :func:`check_format`
and :func:`check_dataset`, so a bad file always fails with a
:class:`LayoutError` naming the file and the dataset.
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from importlib.metadata import PackageNotFoundError
from importlib.metadata import version as _dist_version
from pathlib import Path

import h5py
import numpy as np

STRING = h5py.string_dtype("utf-8")

# Dataset kinds and their storage. Chunks of 64 Ki elements (512 KiB of
# doubles) keep per-chunk overhead small for long arrays while a batch read
# touches few chunks; per-object columns use smaller chunks because a result
# batch is ~100 rows. shuffle+gzip(4) roughly halves smooth float series and
# decompresses at several hundred MB/s. Prediction grids are not compressed:
# lzf saved nothing on posterior means and standard deviations (1.60 GB for a
# 1e8-point grid either way) and made writing them 3x slower than predicting
# them (bench/bench_storage.py).
_KINDS = {
    "points": {"chunk": 65536, "compression": "gzip", "compression_opts": 4, "shuffle": True},
    "column": {"chunk": 4096, "compression": "gzip", "compression_opts": 4, "shuffle": True},
    "grid": {"chunk": 65536, "compression": None, "compression_opts": None, "shuffle": False},
}

FLOAT_KINDS = ("float32", "float64")
INT_KINDS = ("int8", "int16", "int32", "int64", "uint8", "uint16", "uint32", "uint64")


class LayoutError(ValueError):
    """A file, or a dataset in it, does not follow the expected longwave layout.

    Attributes
    ----------
    path : str
        The file.
    dataset : str or None
        The dataset (HDF5 path inside the file), when one is at fault.
    """

    def __init__(self, path, dataset, message):
        self.path = str(path)
        self.dataset = dataset
        where = f"{self.path}" + (f", dataset '{dataset}'" if dataset else "")
        super().__init__(f"{where}: {message}")


def create_dataset(group, name, dtype, *, kind, data=None, chunk=None):
    """Create a resizable 1-D dataset of one of the known kinds.

    Parameters
    ----------
    group : h5py.Group
    name : str
    dtype : numpy dtype or ``STRING``
    kind : {"points", "column", "grid"}
        Chooses chunk length and compression (see the table in the module source).
    data : array_like of shape (m,), optional
        Initial content (default: empty).
    chunk : int, optional
        Chunk length override (the ``grid`` kind takes the caller's prediction chunk).

    Returns
    -------
    h5py.Dataset
        Resizable along its one axis (``maxshape=(None,)``).
    """
    try:
        spec = _KINDS[kind]
    except KeyError as exc:
        raise ValueError(f"kind must be one of {', '.join(_KINDS)}, got {kind!r}") from exc
    size = 0 if data is None else len(data)
    filters = {}
    # Filters on variable-length strings would compress only the heap pointers.
    if dtype is not STRING and spec["compression"] is not None:
        filters = {"compression": spec["compression"], "shuffle": spec["shuffle"]}
        if spec["compression_opts"] is not None:
            filters["compression_opts"] = spec["compression_opts"]
    ds = group.create_dataset(
        name, shape=(size,), maxshape=(None,), dtype=dtype,
        chunks=(int(chunk or spec["chunk"]),), **filters,
    )
    if size:
        ds[:] = data
    return ds


def append(ds, values) -> None:
    """Append ``values`` (m,) to the resizable 1-D dataset ``ds``."""
    m = len(values)
    if m == 0:
        return
    start = ds.shape[0]
    ds.resize((start + m,))
    ds[start:] = values


def read_strings(ds, sel=slice(None)) -> np.ndarray:
    """Read a string dataset as a numpy unicode array (never ``dtype=object``)."""
    raw = ds.asstr()[sel]
    if np.ndim(raw) == 0:
        return np.array(str(raw))
    return np.array(list(raw), dtype=str) if len(raw) else np.array([], dtype=str)


def is_string(obj) -> bool:
    """Whether ``obj`` is a dataset of strings."""
    return isinstance(obj, h5py.Dataset) and h5py.check_string_dtype(obj.dtype) is not None


def open_h5(path, mode="r", *, what="longwave file") -> h5py.File:
    """Open ``path`` with h5py, turning a low-level failure into a :class:`LayoutError`.

    ``FileNotFoundError`` passes through unchanged.
    """
    path = Path(path)
    if mode == "r" and not path.exists():
        raise FileNotFoundError(f"{what} {path} does not exist")
    try:
        return h5py.File(path, mode)
    except FileNotFoundError:
        raise
    except OSError as exc:
        raise LayoutError(
            path, None,
            f"cannot be opened as HDF5 ({exc}); the file is truncated, corrupt or not "
            f"HDF5: regenerate the {what} from its source",
        ) from exc


def check_format(f, path, fmt: str, supported_version: int) -> int:
    """Check the root attributes ``longwave_format`` and ``format_version``; return the version."""
    got = f.attrs.get("longwave_format")
    if isinstance(got, bytes):
        got = got.decode()
    if got != fmt:
        raise LayoutError(
            path, "/",
            f"attribute longwave_format must be {fmt!r}, got {got!r}; "
            f"this is not a longwave {fmt} file (see docs/layouts.md)",
        )
    version = int(f.attrs.get("format_version", -1))
    if not 1 <= version <= supported_version:
        raise LayoutError(
            path, "/",
            f"format_version must be one of {list(range(1, supported_version + 1))}, "
            f"got {version}; upgrade longwave to read newer files",
        )
    return version


def check_dataset(f, path, name: str, kinds: tuple, length=None):
    """Return dataset ``name`` after checking it exists, is 1-D and has a dtype in ``kinds``.

    Parameters
    ----------
    kinds : tuple of str
        Allowed dtype names, or ``("string",)`` for UTF-8/ASCII strings.
    length : int, optional
        Required length.
    """
    obj = f.get(name)
    if not isinstance(obj, h5py.Dataset):
        state = "missing" if obj is None else "a group, not a dataset"
        raise LayoutError(path, "/" + name.lstrip("/"), f"is {state}; see docs/layouts.md")
    where = "/" + name.lstrip("/")
    if kinds == ("string",):
        ok = h5py.check_string_dtype(obj.dtype) is not None
        got = str(obj.dtype) if not ok else "string"
    else:
        got = obj.dtype.name
        ok = got in kinds
    if not ok:
        raise LayoutError(path, where, f"dtype must be one of {', '.join(kinds)}, got {got}")
    if obj.ndim != 1:
        raise LayoutError(path, where, f"must be one-dimensional, got shape {obj.shape}")
    if length is not None and obj.shape[0] != length:
        raise LayoutError(path, where, f"must have length {length}, got {obj.shape[0]}")
    return obj


def read(ds, path, sel=slice(None)):
    """Read ``ds[sel]``, naming file and dataset if the stored bytes are damaged."""
    try:
        return ds[sel]
    except OSError as exc:
        raise LayoutError(
            path, ds.name,
            f"cannot be read ({exc}); the file is truncated or corrupt: regenerate it",
        ) from exc


def json_attr(value, label: str) -> str:
    """Serialise ``value`` as JSON for an attribute, with a clear error if it cannot be."""
    try:
        return json.dumps(value, sort_keys=True, allow_nan=True)
    except (TypeError, ValueError) as exc:
        raise TypeError(
            f"{label} must be JSON-serialisable (dicts, lists, str, numbers, bool, None); "
            f"{exc}; convert arrays with .tolist() and objects with their describe()"
        ) from exc


def package_version() -> str:
    """Installed longwave version, for the ``longwave_version`` attribute of every file."""
    try:
        return _dist_version("longwave")
    except PackageNotFoundError:  # running from a source tree that is not installed
        return "unknown"


def fsync_dir(directory) -> None:
    """Make a rename in ``directory`` durable (a no-op where directories cannot be opened)."""
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _umask() -> int:
    """The process umask, read without changing it where Linux allows."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except OSError:
        pass
    mask = os.umask(0o022)  # elsewhere: set and restore at once
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_path(path, *, overwrite: bool, durable: bool = True):
    """Yield a temporary path beside ``path``; on success move it onto ``path``.

    The destination is replaced in one ``os.replace``, so readers and a crash
    at any moment see either the old file or the complete new one. On an
    exception the temporary file is removed and ``path`` is untouched.
    """
    path = Path(path)
    if path.exists() and not overwrite:
        raise FileExistsError(f"{path} exists; pass overwrite=True to replace it")
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    # mkstemp makes the file private (0600); the finished file should get the
    # permissions any new file of this process gets (0666 less the umask).
    os.fchmod(fd, 0o666 & ~_umask())
    os.close(fd)
    try:
        yield Path(tmp)
        if durable:
            with open(tmp, "rb+") as fh:
                os.fsync(fh.fileno())
        os.replace(tmp, path)
        if durable:
            fsync_dir(path.parent)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise

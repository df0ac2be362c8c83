"""Result store: one row per fitted object, appended in crash-safe batches.

Layout ``results`` version 1 (a journal part has the same layout)::

    /            attrs: longwave_format="results", format_version=1,
                        param_names, status_codes, config, model (JSON),
                        longwave_version, journal_merged_through (int)
    /results/<field> (rows,)    one column per ObjectResult field except params:
                                strings UTF-8, status int8 (codes in status_codes),
                                ints int64, floats float64, converged bool
    /results/params/<name> (rows,) float64, NaN where not fitted
    /predictions/ids (k,), /predictions/offsets (k+1,) int64,
    /predictions/t, mean, std (P,) float64    ragged per-object prediction grids

Crash safety comes from the journal (see ``_journal`` and docs/layouts.md).
"""

from __future__ import annotations

import dataclasses
import json
import os
import shutil
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import _h5, _journal
from ._h5 import LayoutError
from .records import STATUSES, ObjectResult

FORMAT = "results"
FORMAT_VERSION = 1
_TYPES = {"str": _h5.STRING, "int": np.dtype(np.int64), "float": np.dtype(np.float64),
          "bool": np.dtype(np.bool_)}
_KINDS = {"str": ("string",), "int": _h5.INT_KINDS, "float": _h5.FLOAT_KINDS,
          "bool": ("bool",)}


def _column_types() -> dict[str, str]:
    """Stored columns, derived from ObjectResult so that a new field gets a column."""
    out = {}
    for f in dataclasses.fields(ObjectResult):
        if f.name == "params":
            continue
        kind = "status" if f.name == "status" else str(f.type)
        if kind not in _TYPES and kind != "status":
            raise TypeError(f"ObjectResult.{f.name} has type {f.type}; stored fields must be "
                            f"one of {', '.join(_TYPES)}")
        out[f.name] = kind
    return out


COLUMNS = _column_types()


def _dtype(kind):
    return np.dtype(np.int8) if kind == "status" else _TYPES[kind]


# --- layout helpers (main file and journal parts alike) ---------------------
def _create_layout(f, param_names, attrs: dict) -> None:
    for k, v in attrs.items():
        f.attrs[k] = v
    g = f.create_group("results")
    for name, kind in COLUMNS.items():
        _h5.create_dataset(g, name, _dtype(kind), kind="column")
    pg = g.create_group("params")
    for name in param_names:
        _h5.create_dataset(pg, name, np.float64, kind="column")
    p = f.create_group("predictions")
    _h5.create_dataset(p, "ids", _h5.STRING, kind="column")
    _h5.create_dataset(p, "offsets", np.int64, kind="column", data=np.zeros(1, np.int64))
    for name in ("t", "mean", "std"):
        _h5.create_dataset(p, name, np.float64, kind="grid")


def _append_columns(f, cols: dict, params: dict) -> None:
    for name, values in cols.items():
        _h5.append(f["results"][name], values)
    for name, values in params.items():
        _h5.append(f["results/params"][name], values)


def _append_predictions(f, ids, t, mean, std) -> None:
    if not len(ids):
        return
    p = f["predictions"]
    lengths = np.array([a.size for a in t], dtype=np.int64)
    _h5.append(p["ids"], list(ids))
    _h5.append(p["offsets"], p["offsets"][-1] + np.cumsum(lengths))
    for name, arrays in (("t", t), ("mean", mean), ("std", std)):
        _h5.append(p[name], np.concatenate(arrays))


def _read_attrs(f, path) -> dict:
    _h5.check_format(f, path, FORMAT, FORMAT_VERSION)
    out = {}
    for key in ("param_names", "status_codes", "config", "model"):
        try:
            out[key] = json.loads(f.attrs[key])
        except (KeyError, TypeError, ValueError) as exc:
            raise LayoutError(path, "/", f"attribute {key} must hold JSON ({exc!r})") from exc
    out["longwave_version"] = str(f.attrs.get("longwave_version", "unknown"))
    out["journal_merged_through"] = int(f.attrs.get("journal_merged_through", 0))
    return out


def _read_columns(f, path, param_names) -> tuple[dict, dict]:
    g = f.get("results")
    if g is None:
        raise LayoutError(path, "/results", "is missing; see docs/layouts.md")
    ids = _h5.check_dataset(f, path, "results/id", ("string",))
    rows = ids.shape[0]
    cols = {}
    for name, kind in COLUMNS.items():
        kinds = ("int8",) if kind == "status" else _KINDS[kind]
        ds = _h5.check_dataset(f, path, f"results/{name}", kinds, length=rows)
        if kind == "str":
            try:
                cols[name] = _h5.read_strings(ds)
            except OSError as exc:
                raise LayoutError(path, ds.name, f"cannot be read ({exc})") from exc
        else:
            cols[name] = np.asarray(_h5.read(ds, path), dtype=_dtype(kind))
    params = {}
    for name in param_names:
        ds = _h5.check_dataset(f, path, f"results/params/{name}", _h5.FLOAT_KINDS, length=rows)
        params[name] = np.asarray(_h5.read(ds, path), dtype=np.float64)
    return cols, params


@dataclass
class ResultTable:
    """Every row of a result store as numpy columns (row ``i`` is one object).

    Attributes
    ----------
    id, status, method, message : ndarray of shape (rows,), str
    n, n_evaluations, n_clipped : ndarray of shape (rows,), int64
    log_marginal_likelihood, bound_gap, runtime, reduced_chi2 : ndarray of shape (rows,), float64
    converged : ndarray of shape (rows,), bool
    params : dict of str to ndarray of shape (rows,), float64
        Fitted hyperparameters by name, NaN where an object has none.
    param_names : list of str
    config, model : dict
        The JSON attributes given when the store was created.
    longwave_version : str
    merged : bool
        False when some rows came from journal parts not yet merged (a crashed
        or running writer).
    """

    id: np.ndarray
    status: np.ndarray
    method: np.ndarray
    n: np.ndarray
    log_marginal_likelihood: np.ndarray
    bound_gap: np.ndarray
    n_evaluations: np.ndarray
    converged: np.ndarray
    message: np.ndarray
    runtime: np.ndarray
    reduced_chi2: np.ndarray
    n_clipped: np.ndarray
    params: dict = field(default_factory=dict)
    param_names: list = field(default_factory=list)
    config: dict = field(default_factory=dict)
    model: dict = field(default_factory=dict)
    longwave_version: str = "unknown"
    merged: bool = True

    def __len__(self) -> int:
        return self.id.size

    def row(self, i: int) -> ObjectResult:
        """Row ``i`` as an :class:`ObjectResult`."""
        values = {name: getattr(self, name)[i].item() for name in COLUMNS}
        values["params"] = {k: float(v[i]) for k, v in self.params.items() if np.isfinite(v[i])}
        return ObjectResult(**values)


def _decode_status(codes, mapping, path) -> np.ndarray:
    names = np.array(sorted(mapping, key=mapping.get), dtype=str)
    values = np.array(sorted(mapping.values()), dtype=np.int64)
    pos = np.searchsorted(values, codes)
    ok = (pos < values.size) & (values[np.minimum(pos, values.size - 1)] == codes)
    if not np.all(ok):
        bad = int(codes[np.flatnonzero(~ok)[0]])
        raise LayoutError(path, "/results/status",
                          f"codes must be one of {sorted(mapping.values())}, got {bad}")
    return names[pos] if codes.size else np.array([], dtype=str)


def _read_store(path) -> tuple[dict, dict, dict, list]:
    """Main file plus unmerged journal parts: (attrs, columns, params, part paths).

    Retries if a writer merged the journal while we read (the main file's
    inode changes on every merge).
    """
    path = Path(path)
    for _attempt in range(20):
        try:
            before = os.stat(path).st_ino
        except FileNotFoundError:
            raise FileNotFoundError(f"result store {path} does not exist") from None
        try:
            with _h5.open_h5(path, "r", what="result store") as f:
                attrs = _read_attrs(f, path)
                cols, params = _read_columns(f, path, attrs["param_names"])
            chunks = [(cols, params)]
            parts = [p for seq, p in _journal.list_parts(_journal.journal_dir(path))
                     if seq > attrs["journal_merged_through"]]
            for p in parts:
                with _h5.open_h5(p, "r", what="journal part") as f:
                    _read_attrs(f, p)
                    chunks.append(_read_columns(f, p, attrs["param_names"]))
        except FileNotFoundError:
            if not path.exists():
                raise
            continue  # a part vanished: merged meanwhile
        if os.stat(path).st_ino == before:
            break
    else:
        raise RuntimeError(f"{path} kept changing while being read; retry when the writer "
                           "is idle")
    cols = {k: np.concatenate([c[0][k] for c in chunks]) for k in COLUMNS}
    uniq, counts = np.unique(cols["id"], return_counts=True)
    if uniq.size != cols["id"].size:
        dup = str(uniq[np.argmax(counts)])
        raise LayoutError(path, "/results/id", f"ids must be unique, {dup!r} "
                          f"appears {counts.max()} times; the store was written by something "
                          "other than ResultStore, repair it or start a new store")
    params = {k: np.concatenate([c[1][k] for c in chunks]) for k in attrs["param_names"]}
    return attrs, cols, params, parts


class ResultStore:
    """Append per-object results to an HDF5 file, safely across crashes and resumes.

    Parameters
    ----------
    path : str or Path
    param_names : sequence of str, default ()
        Hyperparameter columns, in order. On resume, empty means "as stored".
    config : dict, optional
        Run configuration, stored as a JSON attribute (never pickled).
    resume : bool, default False
        Continue an existing store: :meth:`done_ids` returns the ids already
        stored, and ``param_names``/``config`` must match the stored ones.
    model : dict, optional
        Model specification, stored as a JSON attribute.
    flush_every : int, default 100
        Rows buffered before a flush writes them as one journal part.
    flush_seconds : float, default 60.0
        Also flush on an append this long after the previous flush.
    merge_every : int, default 1000
        Journal parts allowed before they are merged into the main file
        (merging also happens on :meth:`close`).
    overwrite : bool, default False
        Discard an existing store at ``path``.
    durable : bool, default True
        ``fsync`` each part and rename, so a flushed batch survives power loss
        too, not only a killed process.

    Raises
    ------
    FileExistsError
        If a store exists and neither ``resume`` nor ``overwrite`` is set.
    RuntimeError
        If another process is writing the same store.

    Examples
    --------
    >>> import tempfile, os
    >>> path = os.path.join(tempfile.mkdtemp(), "r.h5")
    >>> with ResultStore(path, param_names=["scale"], config={"method": "kalman"}) as store:
    ...     store.append(ObjectResult(id="a", status="ok", params={"scale": 2.0}))
    >>> ResultStore.read(path).params["scale"]
    array([2.])
    """

    def __init__(self, path, param_names=(), config=None, resume=False, *, model=None,
                 flush_every: int = 100, flush_seconds: float = 60.0, merge_every: int = 1000,
                 overwrite: bool = False, durable: bool = True):
        if flush_every < 1 or merge_every < 1:
            raise ValueError(f"flush_every and merge_every must be >= 1, got {flush_every} "
                             f"and {merge_every}")
        self.path = Path(path)
        self._jdir = _journal.journal_dir(self.path)
        self.flush_every, self.flush_seconds = int(flush_every), float(flush_seconds)
        self.merge_every, self.durable = int(merge_every), bool(durable)
        param_names = [str(p) for p in param_names]
        for p in param_names:
            if not p or "/" in p:
                raise ValueError(f"parameter names must be non-empty without '/', got {p!r}")
        if len(set(param_names)) != len(param_names):
            raise ValueError(f"param_names must be unique, got {param_names}")
        config_json = _h5.json_attr(config if config is not None else {}, "config")
        model_json = _h5.json_attr(model if model is not None else {}, "model")
        self._lock = _journal.WriterLock(self.path)
        self._lock.acquire()
        try:
            self._open(param_names, config, config_json, model_json, resume, overwrite)
        except BaseException:
            self._lock.release()
            raise
        self._rows: list[ObjectResult] = []
        self._pred: list[tuple] = []
        self._pred_points = 0
        self._last_flush = time.monotonic()
        self._closed = False

    def _open(self, param_names, config, config_json, model_json, resume, overwrite):
        exists = self.path.exists() or bool(_journal.list_parts(self._jdir))
        if exists and overwrite:
            self.path.unlink(missing_ok=True)
            shutil.rmtree(self._jdir, ignore_errors=True)
            exists = False
        if exists and not resume:
            raise FileExistsError(
                f"result store {self.path} exists; pass resume=True to continue it (ids "
                "already stored are skipped) or overwrite=True to start again"
            )
        if exists:
            if not self.path.exists():
                raise LayoutError(self.path, None, f"is missing but its journal {self._jdir} "
                                  "exists; move the journal away to start a new store")
            attrs, cols, _params, parts = _read_store(self.path)
            stored = attrs["param_names"]
            if param_names and param_names != stored:
                raise ValueError(f"{self.path}: param_names must match the stored ones to "
                                 f"resume, stored {stored}, got {param_names}")
            # Compared as canonical JSON text, so that NaN equals NaN.
            if config is not None and _h5.json_attr(attrs["config"], "config") != config_json:
                diff = sorted(k for k in set(attrs["config"]) | set(config)
                              if attrs["config"].get(k) != json.loads(config_json).get(k))
                raise ValueError(f"{self.path}: config must match the stored one to resume; "
                                 f"keys differing: {diff}. Resume with the same settings or "
                                 "write a new store")
            self.param_names = stored
            self._done = set(cols["id"].tolist())
            self._pred_done = _prediction_ids([self.path] + parts)
            self._seq = max([attrs["journal_merged_through"]]
                            + [s for s, _ in _journal.list_parts(self._jdir)])
            _journal.clean(self._jdir, attrs["journal_merged_through"])
            _journal.clean_main_temps(self.path)
            with _h5.open_h5(self.path, "r", what="result store") as f:
                self._root_attrs = {k: f.attrs[k] for k in f.attrs}
            return
        self.param_names = param_names
        self._done, self._pred_done, self._seq = set(), set(), 0
        self._root_attrs = {
            "longwave_format": FORMAT, "format_version": FORMAT_VERSION,
            "param_names": json.dumps(param_names),
            "status_codes": json.dumps({s: i for i, s in enumerate(STATUSES)}),
            "config": config_json, "model": model_json,
            "longwave_version": _h5.package_version(), "journal_merged_through": 0,
        }
        with _h5.atomic_path(self.path, overwrite=False, durable=self.durable) as tmp:
            with _h5.open_h5(tmp, "w") as f:
                _create_layout(f, param_names, self._root_attrs)

    # --- writing ---------------------------------------------------------------
    def done_ids(self) -> set[str]:
        """Ids stored (flushed or merged) or appended in this session."""
        return set(self._done)

    def append(self, result: ObjectResult) -> None:
        """Buffer one result; flushes when ``flush_every`` rows or ``flush_seconds`` have passed.

        Raises
        ------
        ValueError
            If the id is already in the store, or ``params`` names a parameter
            that is not a column (the message lists the valid names).
        """
        self._check_open()
        if not isinstance(result, ObjectResult):
            raise TypeError(f"append takes an ObjectResult, got {type(result).__name__}")
        if result.id in self._done:
            raise ValueError(f"object {result.id!r} is already in {self.path}; skip ids in "
                             "done_ids() when resuming")
        unknown = sorted(set(result.params) - set(self.param_names))
        if unknown:
            raise ValueError(f"object {result.id!r}: parameter names must be one of "
                             f"{self.param_names}, got {unknown}")
        self._done.add(result.id)
        self._rows.append(result)
        if (len(self._rows) >= self.flush_every
                or time.monotonic() - self._last_flush >= self.flush_seconds):
            self.flush()

    def append_prediction(self, id, t, mean, std) -> None:
        """Buffer a prediction grid for one object (flushed with the next batch of rows).

        Parameters
        ----------
        id : str
        t, mean, std : array_like of shape (k,)

        Append an object's prediction before its result, so a flush triggered
        by the result carries both.
        """
        self._check_open()
        id = str(id)
        if id in self._pred_done:
            raise ValueError(f"object {id!r} already has a prediction in {self.path}")
        arrays = [np.asarray(a, dtype=np.float64) for a in (t, mean, std)]
        if any(a.ndim != 1 or a.size != arrays[0].size for a in arrays):
            raise ValueError(f"object {id!r}: t, mean and std must be 1-D of one length, got "
                             f"shapes {[a.shape for a in arrays]}")
        self._pred_done.add(id)
        self._pred.append((id, *arrays))
        self._pred_points += arrays[0].size
        if self._pred_points >= 1 << 22:  # 4 Mi points (96 MiB) buffered at most
            self.flush()

    def flush(self) -> None:
        """Write the buffered rows and predictions as one journal part (atomic)."""
        self._check_open()
        self._last_flush = time.monotonic()
        if not self._rows and not self._pred:
            return
        cols = {name: [] for name in COLUMNS}
        for r in self._rows:
            for name, kind in COLUMNS.items():
                value = getattr(r, name)
                cols[name].append(STATUSES.index(value) if kind == "status" else value)
        arrays = {name: (np.array(v, dtype=str) if COLUMNS[name] == "str"
                         else np.array(v, dtype=_dtype(COLUMNS[name])))
                  for name, v in cols.items()}
        params = {p: np.array([r.params.get(p, np.nan) for r in self._rows], dtype=np.float64)
                  for p in self.param_names}
        seq = self._seq + 1
        self._jdir.mkdir(exist_ok=True)
        with _h5.atomic_path(_journal.part_path(self._jdir, seq), overwrite=False,
                             durable=self.durable) as tmp:
            with _h5.open_h5(tmp, "w") as f:
                _create_layout(f, self.param_names, self._part_attrs(seq))
                _append_columns(f, arrays, params)
                if self._pred:
                    _append_predictions(f, *zip(*self._pred))
        self._seq = seq
        self._rows.clear()
        self._pred.clear()
        self._pred_points = 0
        if len(_journal.list_parts(self._jdir)) >= self.merge_every:
            self.merge()

    def _part_attrs(self, seq):
        attrs = dict(self._root_attrs)
        attrs["journal_seq"] = seq
        return attrs

    def merge(self) -> None:
        """Fold the journal parts into the main file (a new file, swapped in atomically)."""
        self._check_open()
        parts = _journal.list_parts(self._jdir)
        with _h5.open_h5(self.path, "r", what="result store") as f:
            merged_through = int(f.attrs.get("journal_merged_through", 0))
        parts = [(s, p) for s, p in parts if s > merged_through]
        if parts:
            with _h5.atomic_path(self.path, overwrite=True, durable=self.durable) as tmp:
                shutil.copyfile(self.path, tmp)
                with _h5.open_h5(tmp, "r+") as f:
                    for _seq, p in parts:
                        with _h5.open_h5(p, "r", what="journal part") as part:
                            cols, params = _read_columns(part, p, self.param_names)
                            pg = part["predictions"]
                            pred = _read_predictions_all(pg, p)
                        _append_columns(f, cols, params)
                        _append_predictions(f, *pred)
                    f.attrs["journal_merged_through"] = parts[-1][0]
            merged_through = parts[-1][0]
        _journal.clean(self._jdir, merged_through)
        _journal.remove_if_empty(self._jdir)

    def close(self) -> None:
        """Flush, merge the journal into the main file and release the writer lock."""
        if self._closed:
            return
        try:
            self.flush()
            self.merge()
        finally:
            self._closed = True
            self._lock.release()

    def _check_open(self):
        if getattr(self, "_closed", False):
            raise RuntimeError(f"result store {self.path} is closed")

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # --- reading ----------------------------------------------------------------
    @staticmethod
    def read(path) -> ResultTable:
        """Every stored row, including journal parts a crashed writer did not merge.

        Reading takes no lock and changes nothing, so it works while a writer
        runs (it sees the batches flushed so far).
        """
        attrs, cols, params, parts = _read_store(path)
        cols = dict(cols)
        cols["status"] = _decode_status(cols["status"].astype(np.int64),
                                        attrs["status_codes"], path)
        return ResultTable(**cols, params=params, param_names=attrs["param_names"],
                           config=attrs["config"], model=attrs["model"],
                           longwave_version=attrs["longwave_version"], merged=not parts)

    @staticmethod
    def read_prediction(path, id) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(t, mean, std)`` stored for object ``id`` (each ndarray of shape (k,))."""
        path = Path(path)
        with _h5.open_h5(path, "r", what="result store") as f:
            merged_through = _read_attrs(f, path)["journal_merged_through"]
        files = [path] + [p for s, p in _journal.list_parts(_journal.journal_dir(path))
                          if s > merged_through]
        for p in files:
            with _h5.open_h5(p, "r", what="result store") as f:
                ids = _h5.read_strings(_h5.check_dataset(f, p, "predictions/ids", ("string",)))
                hit = np.flatnonzero(ids == str(id))
                if hit.size:
                    off = _h5.check_dataset(f, p, "predictions/offsets", _h5.INT_KINDS,
                                            length=ids.size + 1)
                    a, b = (int(x) for x in off[hit[0]:hit[0] + 2])
                    return tuple(np.asarray(_h5.read(_h5.check_dataset(
                        f, p, f"predictions/{k}", _h5.FLOAT_KINDS), p, slice(a, b)))
                        for k in ("t", "mean", "std"))
        raise KeyError(f"no prediction for object {id!r} in {path}")


def _prediction_ids(paths) -> set[str]:
    out = set()
    for p in paths:
        with _h5.open_h5(p, "r", what="result store") as f:
            ds = _h5.check_dataset(f, p, "predictions/ids", ("string",))
            out.update(_h5.read_strings(ds).tolist())
    return out


def _read_predictions_all(pg, path):
    f = pg.file
    ids = _h5.read_strings(_h5.check_dataset(f, path, "predictions/ids", ("string",)))
    off = _h5.read(_h5.check_dataset(f, path, "predictions/offsets", _h5.INT_KINDS,
                                     length=ids.size + 1), path)
    data = {k: _h5.read(_h5.check_dataset(f, path, f"predictions/{k}", _h5.FLOAT_KINDS), path)
            for k in ("t", "mean", "std")}
    split = [np.split(data[k], off[1:-1]) if ids.size else [] for k in ("t", "mean", "std")]
    return (ids.tolist(), *split)

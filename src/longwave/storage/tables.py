"""Stream long tables (one row per observation) as objects, without loading them whole.

A long table has an object-id column, a time column, a value column and
optionally an error column; the rows of one object must be contiguous (a
table sorted by id is). Sources: CSV (optionally gzipped, standard library),
Parquet (pyarrow, read by record batches) and FITS binary tables (astropy,
memory-mapped, read by row ranges). Each source yields column chunks; one
grouping loop turns chunks into :class:`ObjectData`, so every format follows
the same rules.
"""

from __future__ import annotations

import csv
import gzip
import io
import itertools
from pathlib import Path

import numpy as np

from .survey import ObjectData

ROLES = ("id", "time", "value", "error")
# Recognised spellings per role, in order of preference, compared case-insensitively.
SPELLINGS = {
    "id": ("id", "object_id", "objectid", "object", "objid", "source_id", "sourceid", "oid",
           "name"),
    "time": ("time", "t", "mjd", "jd", "hjd", "bjd", "epoch", "date"),
    "value": ("value", "y", "mag", "flux", "magnitude"),
    "error": ("error", "err", "sigma", "magerr", "mag_err", "flux_err", "fluxerr", "e_mag",
              "dy", "uncertainty"),
}
FORMATS = {".csv": "csv", ".txt": "csv", ".parquet": "parquet", ".pq": "parquet",
           ".fits": "fits", ".fit": "fits", ".fts": "fits"}


def guess_format(path) -> str:
    """Format name from the file suffix (``.gz`` is looked through)."""
    suffixes = [s.lower() for s in Path(path).suffixes]
    if suffixes and suffixes[-1] == ".gz":
        suffixes = suffixes[:-1]
    fmt = FORMATS.get(suffixes[-1] if suffixes else "")
    if fmt is None:
        raise ValueError(
            f"cannot tell the format of {path} from its suffix; format must be one of "
            f"csv, parquet, fits (pass format=...)"
        )
    return fmt


def resolve_columns(available, columns=None, *, source="table", need_id=True) -> dict:
    """Map each role to a column name of ``available``.

    Parameters
    ----------
    available : sequence of str
        Column names in the table.
    columns : dict of role to str or None, optional
        Explicit names for roles ``id``, ``time``, ``value``, ``error``; an
        ``error`` of ``None`` means "no error column". Missing roles are
        found among the common spellings (see ``SPELLINGS``).
    source : str
        Named in error messages.
    need_id : bool, default True

    Returns
    -------
    dict of role to str or None
    """
    columns = dict(columns or {})
    unknown = sorted(set(columns) - set(ROLES))
    if unknown:
        raise ValueError(f"columns keys must be one of {', '.join(ROLES)}, got {unknown}")
    lower = {}
    for name in available:
        lower.setdefault(name.lower(), name)
    out = {}
    for role in ROLES if need_id else ROLES[1:]:
        if role in columns:
            name = columns[role]
            if name is not None and name not in available:
                raise ValueError(f"{source}: column {name!r} given for {role} is not in the "
                                 f"table; columns are {list(available)}")
            out[role] = name
            continue
        hits = [lower[s] for s in SPELLINGS[role] if s in lower]
        if len(hits) > 1:
            raise ValueError(f"{source}: several columns could be the {role} column {hits}; "
                             f"choose one with columns={{{role!r}: {hits[0]!r}}}")
        if not hits and role != "error":
            raise ValueError(
                f"{source}: no {role} column among {list(available)}; recognised names are "
                f"{', '.join(SPELLINGS[role])}; name it with columns={{{role!r}: '...'}}"
            )
        out[role] = hits[0] if hits else None
    return out


# --- sources: (column names, iterator of (first row number, {name: ndarray})) ---
def _to_float(values, name, where):
    """Floats from a column chunk; CSV text may hold blanks (missing values, read as NaN)."""
    try:
        return np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        pass
    if isinstance(values, (list, tuple)):
        values = [v if v.strip() else "nan" for v in values]
        try:
            return np.asarray(values, dtype=np.float64)
        except ValueError:
            pass
    for i, v in enumerate(values):
        try:
            float(v)
        except (TypeError, ValueError):
            raise ValueError(f"{where(i)}: column {name!r} must be numeric, got {v!r}") from None
    return np.asarray(values, dtype=np.float64)


def _open_text(path):
    if str(path).lower().endswith(".gz"):
        return io.TextIOWrapper(gzip.open(path, "rb"), encoding="utf-8", newline="")
    return open(path, encoding="utf-8", newline="")


def csv_source(path, chunk_rows, *, delimiter=","):
    fh = _open_text(path)
    reader = csv.reader(fh, delimiter=delimiter)
    try:
        header = [h.strip() for h in next(reader)]
    except StopIteration:
        fh.close()
        raise ValueError(f"{path}: is empty; a CSV table needs a header line") from None

    def chunks(wanted):
        cols = [header.index(w) for w in wanted]
        width = len(header)
        while True:
            first = reader.line_num + 1
            rows = list(itertools.islice(reader, chunk_rows))
            if not rows:
                return
            if reader.line_num - first + 1 == len(rows) and set(map(len, rows)) == {width}:
                lines = np.arange(first, reader.line_num + 1)  # one line per row: common case
            else:
                rows, lines = _locate_rows(rows, first, width, path)
                if not rows:
                    continue
            fields = list(zip(*rows))
            yield lines, {w: fields[c] for w, c in zip(wanted, cols)}

    return header, chunks, (lambda line: f"{path}, line {line}"), fh.close


def _locate_rows(rows, first, width, path):
    """Drop blank rows and find each row's line, allowing quoted fields with newlines."""
    spans = np.array([1 + sum(f.count("\n") for f in r) for r in rows])
    starts = first + np.cumsum(spans) - spans
    keep = [i for i, r in enumerate(rows) if r]
    for i in keep:
        if len(rows[i]) != width:
            raise ValueError(f"{path}, line {starts[i]}: {len(rows[i])} fields, the header has "
                             f"{width}")
    return [rows[i] for i in keep], starts[keep]


def parquet_source(path, chunk_rows):
    import pyarrow.parquet as pq

    pf = pq.ParquetFile(path)
    names = list(pf.schema_arrow.names)

    def chunks(wanted):
        start = 0
        for batch in pf.iter_batches(batch_size=chunk_rows, columns=list(wanted)):
            rows = np.arange(start, start + batch.num_rows)
            start += batch.num_rows
            yield rows, {w: batch.column(w).to_numpy(zero_copy_only=False) for w in wanted}

    return names, chunks, (lambda row: f"{path}, row {row} (counting from 0)"), pf.close


def fits_source(path, chunk_rows, *, hdu=None):
    from astropy.io import fits

    hdul = fits.open(path, memmap=True)
    if hdu is None:
        tables = [h for h in hdul if isinstance(h, fits.BinTableHDU)]
        if not tables:
            hdul.close()
            raise ValueError(f"{path}: holds no binary table HDU; a long table is expected")
        table = tables[0]
    else:
        table = hdul[hdu]
    names = list(table.columns.names)

    def chunks(wanted):
        n = table.data.shape[0]
        for a in range(0, n, chunk_rows):
            part = table.data[a:a + chunk_rows]
            yield np.arange(a, a + len(part)), {w: np.asarray(part[w]) for w in wanted}

    return names, chunks, (lambda row: f"{path}, row {row} (counting from 0)"), hdul.close


def _open_source(path, fmt, chunk_rows, hdu):
    fmt = fmt or guess_format(path)
    if fmt == "csv":
        return csv_source(path, chunk_rows)
    if fmt == "parquet":
        return parquet_source(path, chunk_rows)
    if fmt == "fits":
        return fits_source(path, chunk_rows, hdu=hdu)
    raise ValueError(f"format must be one of csv, parquet, fits, got {fmt!r}")


def _as_ids(values) -> np.ndarray:
    if isinstance(values, (list, tuple)):  # CSV text
        return np.array(list(map(str.strip, values)), dtype=str)
    arr = np.asarray(values)
    if arr.dtype.kind == "S":
        arr = np.char.decode(arr, "utf-8")
    return np.char.strip(arr.astype(str))


# --- grouping ------------------------------------------------------------------
def iter_table(path, *, format=None, columns=None, meta=(), chunk_rows: int = 65536,
               hdu=None):
    """Yield one :class:`ObjectData` per object of a long table, streaming it in chunks.

    Parameters
    ----------
    path : str or Path
    format : {"csv", "parquet", "fits"}, optional
        Default: from the suffix (``.csv``, ``.csv.gz``, ``.parquet``, ``.fits``...).
    columns : dict, optional
        Column names by role; see :func:`resolve_columns`.
    meta : sequence of str, default ()
        Columns holding one value per object (constant over its rows), kept in ``meta``.
    chunk_rows : int, default 65536
        Rows read at a time; memory is one chunk plus the object being assembled.
    hdu : int or str, optional
        FITS only: the table HDU (default: the first binary table).

    Raises
    ------
    ValueError
        If an object's rows are not contiguous (naming the object and the row
        where it reappears), a value is not numeric, or a meta column varies
        within an object.
    """
    names, chunks, where, close = _open_source(path, format, int(chunk_rows), hdu)
    try:
        yield from _group(path, names, chunks, where, columns, meta)
    finally:
        close()


def _group(path, names, chunks, where, columns, meta):
    roles = resolve_columns(names, columns, source=str(path))
    meta = list(meta)
    missing = [m for m in meta if m not in names]
    if missing:
        raise ValueError(f"{path}: meta columns {missing} are not in the table; columns are "
                         f"{names}")
    wanted = [c for c in roles.values() if c is not None]
    wanted += [m for m in meta if m not in wanted]
    finished: set[str] = set()
    current = None  # (id, lists of arrays per role, meta values, first row)
    for rows, chunk in chunks(wanted):
        ids = _as_ids(chunk[roles["id"]])
        num = {role: _to_float(chunk[roles[role]], roles[role],
                               lambda i, rows=rows: where(rows[i]))
               for role in ("time", "value", "error") if roles[role] is not None}
        starts = np.flatnonzero(np.r_[True, ids[1:] != ids[:-1]])
        ends = np.r_[starts[1:], ids.size]
        for a, b in zip(starts, ends):
            oid = str(ids[a])
            if current is not None and current[0] == oid:
                _extend(current, num, chunk, meta, a, b, where, rows)
                continue
            if current is not None:
                finished.add(current[0])
                yield _finish(current)
            if oid in finished:
                raise ValueError(
                    f"{where(rows[a])}: object {oid!r} reappears after other objects; the rows "
                    "of one object must be contiguous: sort the table by id (a stable sort "
                    "keeps each object's time order)"
                )
            current = (oid, {k: [] for k in num}, {m: chunk[m][a] for m in meta}, rows[a])
            _extend(current, num, chunk, meta, a, b, where, rows)
    if current is not None:
        yield _finish(current)


def _extend(current, num, chunk, meta, a, b, where, rows):
    oid, parts, meta_values, _first = current
    for k, arr in num.items():
        parts[k].append(arr[a:b])
    for m in meta:
        col = chunk[m][a:b]
        differs = [i for i, v in enumerate(col) if v != meta_values[m]]
        if differs:
            raise ValueError(f"{where(rows[a + differs[0]])}: meta column {m!r} must be constant "
                             f"within object {oid!r}, got {col[differs[0]]!r} after "
                             f"{meta_values[m]!r}")


def _finish(current) -> ObjectData:
    oid, parts, meta_values, _first = current
    arrays = {k: np.concatenate(v) for k, v in parts.items()}
    return ObjectData(id=oid, t=arrays["time"], y=arrays["value"], err=arrays.get("error"),
                      meta={k: _meta_scalar(v) for k, v in meta_values.items()})


def _meta_scalar(value):
    if isinstance(value, bytes):
        return value.decode().strip()
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, str):  # CSV meta arrives as text: keep numbers numeric
        for kind in (int, float):
            try:
                return kind(value)
            except ValueError:
                pass
        return value.strip()
    return value


def iter_table_batches(path, batch_size: int = 64, skip=None, **options):
    """Batches of :func:`iter_table` objects: lists of up to ``batch_size``, ``skip`` left out.

    Accepts the same keyword options as :func:`iter_table`; this is how the
    survey runner reads CSV or Parquet input directly, streamed.
    """
    if batch_size < 1:
        raise ValueError(f"batch_size must be >= 1, got {batch_size}")
    skip = set(skip or ())
    batch = []
    for obj in iter_table(path, **options):
        if obj.id in skip:
            continue
        batch.append(obj)
        if len(batch) == batch_size:
            yield batch
            batch = []
    if batch:
        yield batch


def read_object_csv(path, *, columns=None) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """``(t, y, err)`` of a CSV holding one object (no id column needed); ``err`` may be None."""
    names, chunks, where, close = csv_source(path, 1 << 16)
    try:
        roles = resolve_columns(names, columns, source=str(path), need_id=False)
        wanted = [c for c in roles.values() if c is not None]
        parts = {role: [] for role in ("time", "value", "error") if roles[role] is not None}
        for rows, chunk in chunks(wanted):
            for role in parts:
                parts[role].append(_to_float(chunk[roles[role]], roles[role],
                                             lambda i, rows=rows: where(rows[i])))
    finally:
        close()
    out = {k: np.concatenate(v) if v else np.empty(0) for k, v in parts.items()}
    return out["time"], out["value"], out.get("error")

"""Converters into survey files: long tables (CSV, Parquet, FITS) and folders of CSVs.

All stream: a long table is read in chunks of ``chunk_rows`` and objects are
written as they complete, so memory is one chunk plus one object whatever the
table's size. The survey file appears only when the conversion succeeds.
"""

from __future__ import annotations

from pathlib import Path

from .survey import SurveyWriter
from .tables import csv_source, iter_table, read_object_csv, resolve_columns


def survey_from_table(source, dest, *, format=None, columns=None, meta=(),
                      chunk_rows: int = 65536, hdu=None, overwrite: bool = False) -> int:
    """Convert a long table into a survey file.

    Parameters
    ----------
    source : str or Path
        CSV (``.csv``, ``.csv.gz``), Parquet (needs pyarrow) or FITS binary
        table (needs astropy), one row per observation, rows of an object contiguous.
    dest : str or Path
        The survey file to write.
    format : {"csv", "parquet", "fits"}, optional
        Default: from the suffix.
    columns : dict, optional
        Column names by role (``id``, ``time``, ``value``, ``error``); roles
        not given are found among common spellings (``mjd``/``time``/``t``,
        ``mag``/``flux``/``value``/``y``, ``err``/``error``/``sigma``/``magerr``...).
    meta : sequence of str, default ()
        Per-object constant columns to keep as metadata.
    chunk_rows : int, default 65536
    hdu : int or str, optional
        FITS only: which table HDU.
    overwrite : bool, default False

    Returns
    -------
    int
        Objects written.

    Examples
    --------
    >>> import os, tempfile
    >>> d = tempfile.mkdtemp()
    >>> with open(os.path.join(d, "t.csv"), "w") as fh:
    ...     _ = fh.write("objid,mjd,mag,magerr\\na,1,17.1,0.1\\na,2,17.3,0.1\\nb,1,19,0.2\\n")
    >>> survey_from_table(os.path.join(d, "t.csv"), os.path.join(d, "s.h5"))
    2
    """
    objects = iter_table(source, format=format, columns=columns, meta=meta,
                         chunk_rows=chunk_rows, hdu=hdu)
    first = next(objects, None)
    has_err = first is not None and first.err is not None
    count = 0
    with SurveyWriter(dest, has_err=has_err, overwrite=overwrite) as writer:
        if first is not None:
            writer.add(first.id, first.t, first.y, first.err, first.meta)
            count = 1
        for obj in objects:
            writer.add(obj.id, obj.t, obj.y, obj.err, obj.meta)
            count += 1
    return count


def survey_from_csv(source, dest, **options) -> int:
    """:func:`survey_from_table` for a CSV long table (same options)."""
    return survey_from_table(source, dest, format="csv", **options)


def survey_from_parquet(source, dest, **options) -> int:
    """:func:`survey_from_table` for a Parquet long table, read by record batches (pyarrow)."""
    return survey_from_table(source, dest, format="parquet", **options)


def survey_from_fits(source, dest, **options) -> int:
    """:func:`survey_from_table` for a FITS binary long table, memory-mapped (astropy)."""
    return survey_from_table(source, dest, format="fits", **options)


def survey_from_folder(folder, dest, *, pattern: str = "*.csv", columns=None,
                       overwrite: bool = False) -> int:
    """Convert a folder of CSV files, one object per file, into a survey file.

    Parameters
    ----------
    folder : str or Path
    dest : str or Path
    pattern : str, default "*.csv"
        Glob of the object files; the id of an object is its file name
        without the suffix. Files are taken in sorted name order.
    columns : dict, optional
        As for :func:`survey_from_table`, without ``id``.
    overwrite : bool, default False

    Returns
    -------
    int
        Objects written.
    """
    folder = Path(folder)
    files = sorted(p for p in folder.glob(pattern) if p.is_file())
    if not files:
        raise ValueError(f"no files match {pattern!r} in {folder}; pass pattern=... "
                         "(for example '*.txt')")
    names, _chunks, _where, close = csv_source(files[0], 1)
    close()
    has_err = resolve_columns(names, columns, source=str(files[0]), need_id=False)["error"]
    with SurveyWriter(dest, has_err=has_err is not None, overwrite=overwrite) as writer:
        for path in files:
            t, y, err = read_object_csv(path, columns=columns)
            if (err is None) == (has_err is not None):
                raise ValueError(f"{path}: every file must have an error column or none; "
                                 f"{files[0].name} {'has' if has_err else 'has none'}")
            writer.add(path.stem, t, y, err)
    return len(files)

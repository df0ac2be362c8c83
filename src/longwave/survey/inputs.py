"""Survey inputs: a survey HDF5 file, or a CSV / Parquet / FITS long table, read lazily.

Both kinds hand out batches of :class:`~longwave.storage.ObjectData`, with
ids to skip left out, so the runner never asks which kind it holds and never
has more than the batches in flight in memory.
"""

from __future__ import annotations

from pathlib import Path

from ..storage import SurveyFile, iter_table_batches

HDF5_SUFFIXES = (".h5", ".hdf5", ".hdf", ".he5")
TABLE_SUFFIXES = (".csv", ".txt", ".parquet", ".pq", ".fits", ".fit", ".fts")


class SurveyInput:
    """A survey source opened for batched, lazy reading (use as a context manager).

    Parameters
    ----------
    path : str or Path
        ``.h5``/``.hdf5`` survey file (see :func:`longwave.storage.write_survey`),
        or a long table: ``.csv`` (optionally ``.gz``), ``.parquet``, ``.fits``,
        one row per observation, the rows of each object contiguous.
    columns : dict of role to str, optional
        Long tables only: column names for ``id``, ``time``, ``value``,
        ``error`` when they are not among the common spellings.

    Attributes
    ----------
    count : int or None
        Number of objects, when known without reading the data (HDF5 only).
    """

    def __init__(self, path, *, columns=None):
        self.path = Path(path)
        if not self.path.exists():
            raise FileNotFoundError(f"survey input {self.path} does not exist")
        suffixes = [s.lower() for s in self.path.suffixes]
        last = suffixes[-2] if suffixes and suffixes[-1] == ".gz" and len(suffixes) > 1 \
            else (suffixes[-1] if suffixes else "")
        self._columns = columns
        self._file = None
        if last in HDF5_SUFFIXES:
            if columns:
                raise ValueError("columns=... applies to long tables (CSV, Parquet, FITS), "
                                 f"not to the survey file {self.path}")
            self._file = SurveyFile(self.path)
            self.count = len(self._file)
        elif last in TABLE_SUFFIXES:
            self.count = None
        else:
            raise ValueError(
                f"cannot tell what {self.path} holds from its suffix {last or '(none)'!r}; "
                f"use a survey file ({', '.join(HDF5_SUFFIXES)}) or a long table "
                f"({', '.join(TABLE_SUFFIXES)}, optionally .gz)")

    def remaining(self, skip) -> int | None:
        """Objects left after ``skip`` (ids), when the count is known."""
        if self.count is None:
            return None
        if not skip:
            return self.count
        import numpy as np

        return int(self.count - np.isin(self._file.ids, np.array(sorted(skip), dtype=str)).sum())

    def batches(self, batch_size: int, skip=None):
        """Yield lists of up to ``batch_size`` objects, ids in ``skip`` left out."""
        if self._file is not None:
            yield from self._file.iter_batches(batch_size=batch_size, skip=skip)
        else:
            yield from iter_table_batches(self.path, batch_size=batch_size, skip=skip,
                                          columns=self._columns)

    @property
    def stored(self) -> bool:
        """Whether :meth:`stored_batches` works: the input is a survey HDF5 file."""
        return self._file is not None

    def stored_batches(self, batch_size: int, skip=None):
        """Yield :class:`~longwave.storage.stored_batch.StoredBatch` references (HDF5 only).

        Workers that can open the file read the objects themselves.
        """
        if self._file is None:
            raise ValueError(f"{self.path} is a long table: only survey HDF5 files can be "
                             "read by the workers; ship the data instead (workers_read=False)")
        yield from self._file.iter_stored_batches(batch_size=batch_size, skip=skip)

    def close(self) -> None:
        if self._file is not None:
            self._file.close()
            self._file = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

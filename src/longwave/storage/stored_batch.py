"""A batch of survey objects named by position, read where it is processed.

A survey run normally reads each batch in the client and ships the arrays
to a worker, through the scheduler. When the workers can open the survey
file themselves (an embedded cluster on this machine, or a cluster sharing
a file system), the client sends a :class:`StoredBatch` instead: the file's
path, the runs of object positions and their ids, a few hundred bytes. The
worker reads the arrays (:meth:`StoredBatch.read`), so the data cross no
socket and the client, which shares the machine's cores with the workers,
neither reads nor serialises them.

The client has opened and validated the file (:class:`~longwave.storage.SurveyFile`);
a worker only checks that the objects it reads still carry the ids it was given.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np

from . import _h5
from ._h5 import LayoutError
from .survey import ObjectData


@dataclass(frozen=True)
class StoredBatch:
    """Objects ``runs`` of the survey file ``path``, read on demand.

    Attributes
    ----------
    path : str
        Survey HDF5 file, readable where the batch is processed.
    runs : tuple of (int, int)
        Half-open ranges ``[i0, i1)`` of object positions, in file order.
    ids : tuple of str
        Ids of those objects, in the same order (known to the client).
    """

    path: str
    runs: tuple
    ids: tuple

    def __len__(self) -> int:
        return len(self.ids)

    def __iter__(self):
        """Lightweight stand-ins with an ``id`` each (for failure records)."""
        return iter(_Named(i) for i in self.ids)

    def split(self) -> list[StoredBatch]:
        """One batch per object, to isolate an object that fails its task."""
        out, k = [], 0
        for i0, i1 in self.runs:
            for i in range(i0, i1):
                out.append(StoredBatch(self.path, ((i, i + 1),), (self.ids[k],)))
                k += 1
        return out

    def read(self) -> list[ObjectData]:
        """The objects, read from the file (one read per column per run)."""
        out = []
        with _h5.open_h5(self.path, "r", what="survey file") as f:
            has_err = bool(f.attrs.get("has_err", "error" in f))
            names = ("time", "value") + (("error",) if has_err else ())
            meta_names = json.loads(f.attrs.get("meta_names", "[]"))
            k = 0
            for i0, i1 in self.runs:
                offsets = np.asarray(f["offsets"][i0:i1 + 1], dtype=np.int64)
                a, b = int(offsets[0]), int(offsets[-1])
                cols = {n: np.asarray(f[n][a:b], dtype=np.float64) for n in names}
                stored = _h5.read_strings(f["ids"], slice(i0, i1))
                meta = {m: (_h5.read_strings(f[f"meta/{m}"], slice(i0, i1))
                            if _h5.is_string(f[f"meta/{m}"]) else f[f"meta/{m}"][i0:i1]).tolist()
                        for m in meta_names}
                for j in range(i1 - i0):
                    if str(stored[j]) != self.ids[k]:
                        raise LayoutError(self.path, "/ids",
                                          f"position {i0 + j} holds {stored[j]!r}, expected "
                                          f"{self.ids[k]!r}: the file changed during the run")
                    lo, hi = int(offsets[j]) - a, int(offsets[j + 1]) - a
                    out.append(ObjectData(
                        id=self.ids[k], t=cols["time"][lo:hi].copy(),
                        y=cols["value"][lo:hi].copy(),
                        err=cols["error"][lo:hi].copy() if has_err else None,
                        meta={m: v[j] for m, v in meta.items()}))
                    k += 1
        return out


@dataclass(frozen=True)
class _Named:
    id: str


def position_runs(positions) -> tuple:
    """Consecutive positions grouped as half-open ``(i0, i1)`` runs."""
    positions = np.asarray(positions, dtype=np.int64)
    if positions.size == 0:
        return ()
    breaks = np.flatnonzero(np.diff(positions) != 1) + 1
    return tuple((int(r[0]), int(r[-1]) + 1) for r in np.split(positions, breaks))

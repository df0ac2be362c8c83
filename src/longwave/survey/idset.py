"""A compact, exact set of object ids, for the survey client's duplicate guard.

A Python ``set`` of ``str`` costs about 90 bytes for a 10-character id, so
guarding a survey of 10^6 objects against written-twice results would hold
some 90 MB in the client, growing with the survey. :class:`IdSet` keeps the
ids in one sorted numpy array of fixed-width UTF-8 bytes (the longest id plus
one byte each), with the latest additions in a small Python set that is
merged into the array every ``buffer`` additions.
"""

from __future__ import annotations

import numpy as np

# Appended to every stored key. UTF-8 never produces 0xFF, so no key ends in
# a NUL byte, which numpy's fixed-width bytes would strip (making "a" and
# "a\0" equal).
_END = b"\xff"


def _key(id: str) -> bytes:
    return id.encode("utf-8", "surrogatepass") + _END


class IdSet:
    """An exact set of strings, about ``max(len(id)) + 1`` bytes per member.

    Parameters
    ----------
    ids : iterable of str, optional
        Initial members.
    buffer : int, default 65536
        Additions held in a Python set before they are merged into the sorted
        array. Each merge sorts everything (O(N log N)), so larger buffers
        merge less often and hold more in Python objects.

    Examples
    --------
    >>> s = IdSet(["obj1", "obj2"])
    >>> s.add("obj3"), s.add("obj1")
    (True, False)
    >>> "obj2" in s, "obj4" in s, len(s)
    (True, False, 3)
    """

    def __init__(self, ids=(), *, buffer: int = 65536):
        if buffer < 1:
            raise ValueError(f"buffer must be at least 1, got {buffer}")
        self._buffer = int(buffer)
        self._sorted = np.empty(0, dtype="S1")
        self._recent: set[str] = set()
        for id in ids:
            self.add(id)

    def __contains__(self, id: str) -> bool:
        if id in self._recent:
            return True
        if not self._sorted.size:
            return False
        key = _key(id)
        if len(key) > self._sorted.dtype.itemsize:  # longer than any stored key
            return False
        i = int(np.searchsorted(self._sorted, key))
        return i < self._sorted.size and self._sorted[i] == key

    def add(self, id: str) -> bool:
        """Add ``id``; return whether it was new."""
        if not isinstance(id, str):
            raise TypeError(f"ids are strings, got {type(id).__name__} {id!r}")
        if id in self:
            return False
        self._recent.add(id)
        if len(self._recent) >= self._buffer:
            self._merge()
        return True

    def _merge(self) -> None:
        new = np.array(sorted(_key(id) for id in self._recent))
        # Disjoint sorted arrays; concatenate widens to the longer itemsize.
        merged = np.concatenate([self._sorted, new])
        merged.sort(kind="stable")
        self._sorted = merged
        self._recent.clear()

    def __len__(self) -> int:
        return self._sorted.size + len(self._recent)

    @property
    def nbytes(self) -> int:
        """Bytes of the sorted array (the Python-set buffer not counted)."""
        return int(self._sorted.nbytes)

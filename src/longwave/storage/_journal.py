"""The result store's journal: one small HDF5 file per flushed batch, beside the main file.

Why a journal of whole files: HDF5 updates a file in place (superblock,
B-trees, heaps), and a process killed mid-update can leave it unreadable.
A file that is written completely under a temporary name and then renamed
(``os.replace``, atomic on POSIX) is either absent or whole, so each flushed
batch survives any kill. The main file is only ever replaced the same way.

Names, for a store at ``results.h5``::

    results.h5                    main file; attr journal_merged_through = k
    results.h5.journal/part-0000000007.h5   batch 7 (ignored if 7 <= k)
    results.h5.journal/.part-*.tmp          an interrupted write (deleted on open)
    results.h5.lock               advisory lock held by the one writer
    .results.h5.*.tmp             an interrupted merge (deleted on open)
"""

from __future__ import annotations

import contextlib
import fcntl
import os
import re
from pathlib import Path

_PART = re.compile(r"^part-(\d{10})\.h5$")


def journal_dir(path) -> Path:
    path = Path(path)
    return path.with_name(path.name + ".journal")


def part_path(jdir: Path, seq: int) -> Path:
    return jdir / f"part-{seq:010d}.h5"


def list_parts(jdir: Path) -> list[tuple[int, Path]]:
    """Complete parts in the journal, by sequence number (temporary files are not listed)."""
    try:
        names = os.listdir(jdir)
    except FileNotFoundError:
        return []
    parts = []
    for name in names:
        match = _PART.match(name)
        if match:
            parts.append((int(match.group(1)), jdir / name))
    return sorted(parts)


def clean(jdir: Path, merged_through: int) -> None:
    """Remove parts already merged into the main file and interrupted temporary writes."""
    for seq, p in list_parts(jdir):
        if seq <= merged_through:
            with contextlib.suppress(FileNotFoundError):
                p.unlink()
    try:
        names = os.listdir(jdir)
    except FileNotFoundError:
        return
    for name in names:
        if name.endswith(".tmp"):
            with contextlib.suppress(FileNotFoundError):
                (jdir / name).unlink()


def clean_main_temps(path) -> None:
    """Remove temporary copies of the main file left by a merge that was killed.

    Only the writer calls this, holding the lock, so no live temporary can match.
    """
    path = Path(path)
    for tmp in path.parent.glob(f".{path.name}.*.tmp"):
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()


def remove_if_empty(jdir: Path) -> None:
    with contextlib.suppress(FileNotFoundError, OSError):
        jdir.rmdir()


class WriterLock:
    """Exclusive advisory lock (``flock``) on ``<path>.lock``; released when the process dies.

    The lock file is left in place on release: deleting it could let a second
    writer lock a file that a third one has already replaced.
    """

    def __init__(self, path):
        self.path = Path(path).with_name(Path(path).name + ".lock")
        self._fd = None

    def acquire(self) -> None:
        self.path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError as exc:
            os.close(fd)
            raise RuntimeError(
                f"another process is writing the result store guarded by {self.path}; "
                "one store takes one writer: wait for it, or write to another file"
            ) from exc
        self._fd = fd

    def release(self) -> None:
        if self._fd is not None:
            fcntl.flock(self._fd, fcntl.LOCK_UN)
            os.close(self._fd)
            self._fd = None

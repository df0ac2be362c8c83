"""Run summary: counts by status and method, median fit time, throughput.

The tally keeps one float per object (its fit time, for an exact median:
8 MB for a million objects) and a few counters; everything else a run
produces goes to the result file as it arrives.
"""

from __future__ import annotations

import array
import json
import statistics
from collections import Counter
from dataclasses import asdict, dataclass, field

from ..storage.records import STATUSES


@dataclass
class SurveySummary:
    """What a survey run did.

    Attributes
    ----------
    out : str
        Result file.
    processed : int
        Objects fitted (or recorded as bad) in this run.
    skipped : int
        Objects already in the result file when the run started (resume).
    by_status : dict of str to int
        Objects of this run by status, every status listed.
    by_method : dict of str to int
        Objects of this run by the inference method used (``auto``'s choices).
    duplicates_dropped : int
        Results that arrived for an id already written (never written twice).
    median_fit_seconds : float
        Median per-object wall time on the workers, over the objects fitted
        (status ok or not_converged; NaN if none).
    wall_seconds : float
        Wall time of the run, client side.
    objects_per_second : float
        ``processed / wall_seconds``.
    workers : int
        Worker processes used (0: serial, in-process).
    scheduler : str
        Scheduler address, ``"embedded"`` for a cluster started by the run,
        ``"serial"`` without one.
    """

    out: str
    processed: int = 0
    skipped: int = 0
    by_status: dict = field(default_factory=lambda: {s: 0 for s in STATUSES})
    by_method: dict = field(default_factory=dict)
    duplicates_dropped: int = 0
    median_fit_seconds: float = float("nan")
    wall_seconds: float = 0.0
    objects_per_second: float = 0.0
    workers: int = 0
    scheduler: str = "serial"

    def to_dict(self) -> dict:
        """JSON-compatible form (NaN becomes ``None``)."""
        out = asdict(self)
        for key, value in out.items():
            if isinstance(value, float) and value != value:
                out[key] = None
        return out

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), indent=2, sort_keys=True)

    def format(self) -> str:
        """A few human-readable lines."""
        statuses = ", ".join(f"{s} {n}" for s, n in self.by_status.items())
        methods = ", ".join(f"{m} {n}" for m, n in sorted(self.by_method.items())) or "none"
        median = ("n/a" if self.median_fit_seconds != self.median_fit_seconds
                  else f"{self.median_fit_seconds * 1e3:.1f} ms")
        lines = [
            f"{self.processed} objects in {self.wall_seconds:.1f} s "
            f"({self.objects_per_second:.1f} objects/s, {self.workers} worker(s), "
            f"scheduler {self.scheduler}) -> {self.out}",
            f"  by status: {statuses}",
            f"  by method: {methods}",
            f"  median fit time: {median}",
        ]
        if self.skipped:
            lines.append(f"  skipped (already in the result file): {self.skipped}")
        if self.duplicates_dropped:
            lines.append(f"  duplicate results dropped: {self.duplicates_dropped}")
        return "\n".join(lines)


class Tally:
    """Accumulates results into a :class:`SurveySummary`, one record at a time."""

    def __init__(self):
        self.status = Counter()
        self.method = Counter()
        self.runtimes = array.array("d")
        self.duplicates = 0

    def add(self, result) -> None:
        self.status[result.status] += 1
        if result.method:
            self.method[result.method] += 1
        if result.status in ("ok", "not_converged"):
            self.runtimes.append(result.runtime)

    @property
    def count(self) -> int:
        return sum(self.status.values())

    def summary(self, **fields) -> SurveySummary:
        out = SurveySummary(**fields)
        out.processed = self.count
        out.by_status = {s: self.status.get(s, 0) for s in STATUSES}
        out.by_method = dict(self.method)
        out.duplicates_dropped = self.duplicates
        out.median_fit_seconds = (statistics.median(self.runtimes) if self.runtimes
                                  else float("nan"))
        out.objects_per_second = out.processed / out.wall_seconds if out.wall_seconds else 0.0
        return out

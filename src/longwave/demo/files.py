"""Simulated data as files, for users' own tests and benchmarks (``longwave simulate``).

A survey goes to a survey HDF5 file with the truth as per-object metadata
(:meth:`Campaign.write`); one long series goes to ``.npz``, ``.csv`` or a
series HDF5 file, the formats ``longwave fit`` and ``longwave bench`` read.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..storage import write_series
from .campaign import CLASSES, select_classes, simulate_campaign, simulate_long_series

SURVEY_SUFFIXES = (".h5", ".hdf5")
SERIES_SUFFIXES = (".npz", ".csv", ".h5", ".hdf5")


@dataclass
class Simulated:
    """What was written.

    Attributes
    ----------
    path : Path
    kind : str
        ``"survey"`` or ``"series"``.
    objects : int
    points : int
        Observations in total.
    counts : dict of str to int
        Objects per class (a single series: its kernel).
    truth : dict
        A single series: its true hyperparameters. A survey: where they are.
    """

    path: Path
    kind: str
    objects: int
    points: int
    counts: dict = field(default_factory=dict)
    truth: dict = field(default_factory=dict)

    def format(self) -> str:
        head = (f"wrote {self.kind} {self.path}: {self.objects} object(s), "
                f"{self.points} points")
        parts = ", ".join(f"{k} {v}" for k, v in self.counts.items())
        lines = [head, f"  by class: {parts}" if self.kind == "survey" else f"  kernel: {parts}"]
        lines.append("  truth: " + json.dumps(self.truth, default=float))
        return "\n".join(lines)


def _check_target(path: Path, suffixes, what: str, overwrite: bool) -> None:
    if path.suffix.lower() not in suffixes:
        raise ValueError(f"a {what} is written as {', '.join(suffixes)}, got {path.name!r}; "
                         f"for example {path.with_suffix(suffixes[0]).name}")
    if path.exists() and not overwrite:
        raise FileExistsError(f"{path} exists; pass --overwrite (overwrite=True) to replace it")


def simulate_survey_file(path, *, objects: int = 1000, points=(150, 400), days: float = 150.0,
                         classes=None, outlier_fraction: float = 0.01,
                         clear_fraction: float = 0.75, night_hours: float = 7.0,
                         seed: int = 0, overwrite: bool = False) -> Simulated:
    """Simulate a campaign (:func:`simulate_campaign`) and write it as a survey file.

    Parameters
    ----------
    path : str or Path
        ``.h5`` or ``.hdf5``.
    objects, points, days, outlier_fraction, clear_fraction, night_hours, seed
        As for :func:`simulate_campaign`.
    classes : str or sequence of str, optional
        Names of built-in classes (default: the three of ``CLASSES`` in their
        usual proportions; a subset keeps the proportions among its members;
        ``pulsating`` only when named, see ``OPTIONAL_CLASSES``).
    overwrite : bool, default False

    Returns
    -------
    Simulated
    """
    path = Path(path)
    _check_target(path, SURVEY_SUFFIXES, "survey", overwrite)
    chosen = CLASSES if classes is None else select_classes(classes)
    campaign = simulate_campaign(int(objects), points=tuple(points), days=days,
                                 outlier_fraction=outlier_fraction, classes=chosen,
                                 clear_fraction=clear_fraction, night_hours=night_hours,
                                 seed=seed)
    campaign.write(path, overwrite=overwrite)
    names, counts = np.unique(campaign.classes, return_counts=True)
    return Simulated(path, "survey", len(campaign), int(sum(t.size for t in campaign.times)),
                     {str(k): int(v) for k, v in zip(names, counts)},
                     {"metadata": ", ".join(k for k in campaign.meta()) + " per object"})


def simulate_series_file(path, n: int, *, days: float = 150.0, amplitude: float = 0.2,
                         scale: float = 1.0, clear_fraction: float = 0.75,
                         night_hours: float = 7.0, seed: int = 1,
                         overwrite: bool = False) -> Simulated:
    """Simulate one long campaign series (:func:`simulate_long_series`) and write it.

    Parameters
    ----------
    path : str or Path
        ``.npz`` (arrays ``t``, ``y``, ``err``), ``.csv`` (``time,value,error``)
        or ``.h5`` (a series file).
    n : int
        Points.
    days, amplitude, scale, clear_fraction, night_hours, seed
        As for :func:`simulate_long_series`.
    overwrite : bool, default False

    Returns
    -------
    Simulated
    """
    path = Path(path)
    _check_target(path, SERIES_SUFFIXES, "single series", overwrite)
    s = simulate_long_series(int(n), days=days, amplitude=amplitude, scale=scale,
                             clear_fraction=clear_fraction, night_hours=night_hours, seed=seed)
    suffix = path.suffix.lower()
    if suffix == ".npz":
        with open(path, "wb") as fh:  # np.savez would append .npz to other names
            np.savez(fh, t=s.t, y=s.y, err=s.err)
    elif suffix == ".csv":
        np.savetxt(path, np.column_stack([s.t, s.y, s.err]), delimiter=",", fmt="%.10g",
                   header="time,value,error", comments="")
    else:
        write_series(path, s.t, s.y, s.err, overwrite=overwrite)
    return Simulated(path, "series", 1, int(s.t.size), {s.kernel: 1}, dict(s.truth))

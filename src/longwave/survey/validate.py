"""Checks of one object's raw arrays, returning a reason instead of raising.

A survey of a million objects always holds some broken ones; each is recorded
with status ``bad_input`` and the reason below, and the run goes on. The
checks mirror those of :class:`longwave.Series` (which would raise) plus the
few a fit needs on top: enough points, more than one distinct time, and
values that vary.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..series import Series

# Fewest points a fit is attempted on: with fewer, amplitude, scale, mean and
# noise cannot all be told apart and the reduced chi-square has no degrees of
# freedom left.
MIN_POINTS = 3


@dataclass(frozen=True)
class Checked:
    """Outcome of :func:`check_object`: a clean series, or why there is none.

    Attributes
    ----------
    series : Series or None
    reason : str
        Empty when ``series`` is given.
    notes : str
        Harmless findings worth recording (input unsorted, duplicate times).
    """

    series: Series | None
    reason: str = ""
    notes: str = ""


def _array(values, label: str):
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        return None, f"{label} is not numeric ({exc})"
    if arr.ndim != 1:
        return None, f"{label} must be one-dimensional, got shape {arr.shape}"
    return arr, ""


def _nonfinite(arr, label: str) -> str:
    bad = np.flatnonzero(~np.isfinite(arr))
    if not bad.size:
        return ""
    return (f"{label} has {bad.size} non-finite value(s), the first {arr[bad[0]]} at "
            f"index {int(bad[0])}; drop or repair those points before fitting")


def check_object(t, y, err=None) -> Checked:
    """Validate one object's arrays without raising.

    Parameters
    ----------
    t, y : array_like of shape (n,)
    err : array_like of shape (n,), optional

    Returns
    -------
    Checked

    Examples
    --------
    >>> check_object([0.0, 1.0], [1.0, 2.0]).reason
    'only 2 point(s); a fit needs at least 3'
    >>> check_object([2.0, 1.0, 1.0, 0.0], [1.0, 2.0, 0.5, 0.3], 0.1).notes
    'input was not sorted by time (sorted stably); 1 repeated time(s)'
    """
    t, why = _array(t, "t")
    if why:
        return Checked(None, why)
    y, why = _array(y, "y")
    if why:
        return Checked(None, why)
    if y.size != t.size:
        return Checked(None, f"t and y differ in length ({t.size} and {y.size})")
    if err is not None:
        if np.ndim(err) == 0:
            err = np.full(t.size, err, dtype=float)
        err, why = _array(err, "err")
        if why:
            return Checked(None, why)
        if err.size != t.size:
            return Checked(None, f"t and err differ in length ({t.size} and {err.size})")
    if t.size < MIN_POINTS:
        return Checked(None, f"only {t.size} point(s); a fit needs at least {MIN_POINTS}")
    for arr, label in ((t, "t"), (y, "y"), (err, "err")):
        if arr is not None and (why := _nonfinite(arr, label)):
            return Checked(None, why)
    if err is not None and np.any(err <= 0):
        bad = np.flatnonzero(err <= 0)
        return Checked(None, f"err has {bad.size} value(s) <= 0, the first {err[bad[0]]} at "
                             f"index {int(bad[0])}; error bars are one-sigma uncertainties")
    if t.max() == t.min():
        return Checked(None, f"all {t.size} points share the time {t[0]}; a time series "
                             "needs at least two distinct times")
    if y.max() == y.min():
        return Checked(None, f"all {y.size} values equal {y[0]}; there is no variability "
                             "to fit")
    series = Series(t, y, err)
    notes = []
    if np.any(np.diff(t) < 0):
        notes.append("input was not sorted by time (sorted stably)")
    repeats = int(np.count_nonzero(np.diff(series.t) == 0))
    if repeats:
        notes.append(f"{repeats} repeated time(s)")
    return Checked(series, notes="; ".join(notes))

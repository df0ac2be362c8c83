"""The validated input: one time series with per-point error bars."""

from __future__ import annotations

import numpy as np


def _as_1d_float(values, label: str) -> np.ndarray:
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{label} must be numeric, could not convert: {exc}") from exc
    if arr.ndim != 1:
        raise ValueError(f"{label} must be one-dimensional, got shape {arr.shape}")
    bad = np.flatnonzero(~np.isfinite(arr))
    if bad.size:
        i = int(bad[0])
        raise ValueError(
            f"{label} must be finite, found {arr[i]} at index {i} "
            f"({bad.size} non-finite value(s) in all); drop or repair those points"
        )
    return arr


class Series:
    """One irregularly sampled time series, validated and sorted by time.

    Parameters
    ----------
    t : array_like of shape (n,)
        Observation times, in any unit; any order; duplicates allowed.
    y : array_like of shape (n,)
        Observed values.
    err : array_like of shape (n,) or float, optional
        One-sigma measurement errors, all positive. ``None`` means no
        measurement error: the model's excess noise then carries all noise.

    Attributes
    ----------
    t, y, err : ndarray of shape (n,)
        Sorted copies (float64). ``err`` is all zeros when not given.
    order : ndarray of shape (n,), int
        ``t_input[order] == t``: the stable sort applied to the input, so that
        results can be mapped back with ``out[order] = result``.
    has_err : bool
        Whether error bars were given.

    Raises
    ------
    ValueError
        On empty, non-1-D, mismatched or non-finite input, or an error bar
        that is not positive; the message names the first offending index
        (in the input order).

    Examples
    --------
    >>> s = Series([3.0, 1.0, 2.0], [0.3, 0.1, 0.2], err=0.05)
    >>> s.t
    array([1., 2., 3.])
    >>> s.order
    array([1, 2, 0])
    """

    __slots__ = ("t", "y", "err", "order", "has_err")

    def __init__(self, t, y, err=None):
        t = _as_1d_float(t, "t")
        y = _as_1d_float(y, "y")
        if t.size == 0:
            raise ValueError("a series needs at least one point, got empty t")
        if y.size != t.size:
            raise ValueError(f"t and y must have equal length, got {t.size} and {y.size}")
        has_err = err is not None
        if has_err:
            if np.ndim(err) == 0:
                err = np.full(t.size, err)  # converted and checked just below
            err = _as_1d_float(err, "err")
            if err.size != t.size:
                raise ValueError(
                    f"t and err must have equal length, got {t.size} and {err.size}"
                )
            bad = np.flatnonzero(err <= 0)
            if bad.size:
                i = int(bad[0])
                raise ValueError(
                    f"err must be positive, found {err[i]} at index {i} "
                    f"({bad.size} such value(s)); error bars are one-sigma uncertainties"
                )
        else:
            err = np.zeros(t.size)
        order = np.argsort(t, kind="stable")
        if np.all(order[1:] > order[:-1]):
            # Already sorted: keep the caller's arrays' values without a gather.
            self.t, self.y, self.err = t.copy(), y.copy(), err.copy()
        else:
            self.t, self.y, self.err = t[order], y[order], err[order]
        self.order = order
        self.has_err = has_err
        for arr in (self.t, self.y, self.err, self.order):
            arr.flags.writeable = False

    def __len__(self) -> int:
        return self.t.size

    @property
    def n(self) -> int:
        """Number of points."""
        return self.t.size

    def __repr__(self) -> str:
        return (
            f"Series(n={self.n}, t=[{self.t[0]:.6g} .. {self.t[-1]:.6g}], "
            f"has_err={self.has_err})"
        )

    def subset(self, index) -> Series:
        """A new series from the points ``index`` (in sorted order)."""
        index = np.asarray(index)
        return Series(self.t[index], self.y[index], self.err[index] if self.has_err else None)

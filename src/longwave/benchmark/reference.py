"""The benchmark's ground truth, and the held-out points it is scored on.

Reference policy:

* the kernel has an exact state-space form (``covariance_error_bound`` at
  most 1e-9 of the variance): Kalman on the whole series. It is exact at
  any n, so every method is compared on all the data;
* otherwise: Exact on the largest contiguous stretch it can afford (at most
  ``max_n`` points, default 5000: the dense factor then takes 200 MB and an
  evaluation with gradient tens of seconds on two cores). Every method is
  compared on that same stretch; methods that certify an interval for the
  log marginal likelihood report it on the full series too.

Held out from every fit: a few contiguous gaps (interpolation) and the final
stretch (forecasting), chosen with a seeded generator.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..methods import Method, resolve

#: Default largest stretch handed to Exact as the reference.
DEFAULT_REFERENCE_MAX_N = 5000


@dataclass(frozen=True)
class ReferencePlan:
    """Which method is the truth, and on which points.

    Attributes
    ----------
    method : Method
    label : str
        Setting string of ``method`` (``"kalman"`` or ``"exact:max_n=5000"``).
    start, stop : int
        The compared stretch is ``series.t[start:stop]`` (sorted order).
    full_n : int
        Points in the whole series.
    reason : str
        One sentence for the report.
    """

    method: Method
    label: str
    start: int
    stop: int
    full_n: int
    reason: str

    @property
    def whole_series(self) -> bool:
        return self.start == 0 and self.stop == self.full_n


def largest_stretch(t, max_n: int) -> tuple[int, int]:
    """Index range of ``max_n`` consecutive points covering the longest time span.

    Of all windows of ``max_n`` consecutive points, the one spanning the most
    time keeps the longest lags, which is what hyperparameters such as a
    correlation length are estimated from. The whole series when
    ``len(t) <= max_n``.

    Examples
    --------
    >>> largest_stretch([0.0, 1.0, 2.0, 10.0, 12.0], 3)
    (2, 5)
    """
    t = np.asarray(t, dtype=float)
    if max_n < 2:
        raise ValueError(f"the reference stretch needs at least 2 points, got max_n={max_n}")
    if t.size <= max_n:
        return 0, int(t.size)
    spans = t[max_n - 1 :] - t[: t.size - max_n + 1]
    start = int(np.argmax(spans))
    return start, start + max_n


def exact_state_space(kernel) -> bool:
    """Whether the kernel's state-space form is exact (see ``Kernel.has_exact_state_space``).

    Approximate forms (a truncated Fourier series, a rational spectral fit)
    make Kalman itself an approximation, so it cannot be the reference.
    """
    return kernel.has_exact_state_space


def choose_reference(model, series, max_n: int = DEFAULT_REFERENCE_MAX_N) -> ReferencePlan:
    """Apply the reference policy of the module docstring.

    Parameters
    ----------
    model : Model
    series : Series
    max_n : int, default 5000
        Largest stretch given to Exact when the kernel has no state-space form.

    Returns
    -------
    ReferencePlan
    """
    if exact_state_space(model.kernel):
        method = resolve("kalman")
        method.check(model, series)
        return ReferencePlan(
            method, "kalman", 0, series.n, series.n,
            "the kernel has an exact state-space form, so the Kalman filter is exact at "
            f"any n and every method is compared on all {series.n} points",
        )
    start, stop = largest_stretch(series.t, max_n)
    method = resolve("exact", max_n=max(max_n, 1))
    where = (
        f"all {series.n} points"
        if stop - start == series.n
        else f"points {start}..{stop - 1} (t = {series.t[start]:.6g} .. {series.t[stop - 1]:.6g}) "
        f"of {series.n}, the {stop - start}-point stretch spanning the longest time"
    )
    return ReferencePlan(
        method, f"exact:max_n={max_n}", start, stop, series.n,
        f"the kernel has no exact state-space form ({_why_not(model.kernel)}), so dense "
        f"Exact inference is the reference on {where}; every method is compared there",
    )


def _why_not(kernel) -> str:
    if not kernel.has_state_space:
        return "none at all"
    return f"its form's covariance error is up to {kernel.covariance_error_bound():.3g}"


@dataclass(frozen=True)
class Holdout:
    """How many points to hold out of every fit.

    Attributes
    ----------
    n_gaps : int, default 3
        Contiguous interpolation gaps.
    gap_fraction : float, default 0.02
        Points in each gap, as a fraction of the stretch.
    forecast_fraction : float, default 0.05
        Final points held out for forecasting.
    """

    n_gaps: int = 3
    gap_fraction: float = 0.02
    forecast_fraction: float = 0.05

    def __post_init__(self):
        if self.n_gaps < 0:
            raise ValueError(f"n_gaps must be >= 0, got {self.n_gaps}")
        for name in ("gap_fraction", "forecast_fraction"):
            value = getattr(self, name)
            if not 0 <= value < 0.5:
                raise ValueError(f"{name} must lie in [0, 0.5), got {value}")
        held = self.n_gaps * self.gap_fraction + self.forecast_fraction
        if held >= 0.5:
            raise ValueError(
                "hold-outs must leave most of the data for fitting: n_gaps * gap_fraction + "
                f"forecast_fraction = {held:.3g} >= 0.5; use fewer or smaller gaps"
            )

    def split(self, n: int, seed: int = 0) -> np.ndarray:
        """Label each of ``n`` consecutive points: 0 train, 1 interpolation, 2 forecast.

        Gaps are placed at random (seeded) in the part before the forecast
        stretch, never touching each other or either end, so every gap has
        training data on both sides.

        Returns
        -------
        ndarray of shape (n,), int8
        """
        labels = np.zeros(n, dtype=np.int8)
        n_fc = int(round(self.forecast_fraction * n))
        if n_fc:
            labels[n - n_fc :] = 2
        width = int(round(self.gap_fraction * n))
        if self.n_gaps == 0 or width == 0:
            return labels
        usable = n - n_fc
        # Cut the usable part into n_gaps equal slots and put one gap in each,
        # at a random offset that leaves at least one training point around it.
        slot = usable // self.n_gaps
        if slot < width + 2:
            raise ValueError(
                f"{self.n_gaps} gaps of {width} points do not fit in {usable} points; "
                "hold out fewer or smaller gaps"
            )
        rng = np.random.default_rng(seed)
        for g in range(self.n_gaps):
            lo = g * slot + 1 + int(rng.integers(0, slot - width - 1))
            labels[lo : lo + width] = 1
        return labels

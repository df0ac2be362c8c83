"""A simulated monitoring campaign: many sources, several variability classes.

Scenario (our own): a small robotic telescope watches one crowded field for
one observing season. Each source is sampled on the nights the field is up
and the sky is clear, a handful of times per night, with photometric error
bars that grow for fainter sources; a few points per source are ruined by
passing satellites or cosmic rays (outliers). Every class draws its
variability from a known kernel, so fitted hyperparameters can be checked
against the truth.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..kernels import Matern12, Matern32
from ..model import Model
from ..simulate import simulate_series
from .cadence import night_cadence


@dataclass(frozen=True)
class VariabilityClass:
    """One class of sources: a kernel family and ranges for its hyperparameters.

    ``amplitude`` and ``scale`` ranges are sampled log-uniformly.
    """

    name: str
    kernel: type
    amplitude: tuple[float, float]
    scale: tuple[float, float]
    weight: float


CLASSES = (
    VariabilityClass("flickering", Matern32, (0.05, 0.3), (0.3, 3.0), 0.4),
    VariabilityClass("wandering", Matern32, (0.1, 0.5), (5.0, 30.0), 0.4),
    VariabilityClass("random_walk", Matern12, (0.1, 0.4), (10.0, 80.0), 0.2),
)


@dataclass
class Campaign:
    """Simulated survey data and the truth behind it.

    Attributes
    ----------
    ids : list of str
    times, values, errors : list of ndarray
        One array per source.
    classes : ndarray of str (fixed-width unicode)
    truth : dict of str to ndarray
        True ``amplitude``, ``scale``, ``mean``, ``excess_noise`` per source.
    n_outliers : ndarray of int
    """

    ids: list
    times: list
    values: list
    errors: list
    classes: np.ndarray
    truth: dict
    n_outliers: np.ndarray


def simulate_campaign(n_objects: int = 1000, *, points=(150, 400), days: float = 150.0,
                      outlier_fraction: float = 0.01, classes=CLASSES,
                      seed: int = 0) -> Campaign:
    """Simulate a season-long monitoring campaign.

    Parameters
    ----------
    n_objects : int, default 1000
    points : tuple of int, default (150, 400)
        Range of the number of observations per source.
    days : float, default 150.0
        Season length.
    outlier_fraction : float, default 0.01
        Fraction of points replaced by outliers 5-15 error bars off.
    classes : sequence of VariabilityClass
    seed : int, default 0

    Returns
    -------
    Campaign
    """
    if n_objects < 1:
        raise ValueError(f"n_objects must be at least 1, got {n_objects}")
    lo, hi = points
    if not 2 <= lo <= hi:
        raise ValueError(f"points must be (low, high) with 2 <= low <= high, got {points}")
    rng = np.random.default_rng(seed)
    weights = np.array([c.weight for c in classes], dtype=float)
    which = rng.choice(len(classes), size=n_objects, p=weights / weights.sum())
    out = Campaign([], [], [], [], np.empty(n_objects, dtype="U16"),
                   {k: np.empty(n_objects) for k in ("amplitude", "scale", "mean", "excess_noise")},
                   np.zeros(n_objects, dtype=np.int64))
    for i in range(n_objects):
        cls = classes[which[i]]
        n = int(rng.integers(lo, hi + 1))
        t = night_cadence(n, years=days / 365.25, season_fraction=1.0, night_fraction=0.75,
                          night_hours=7.0, rng=rng)
        amp = float(np.exp(rng.uniform(*np.log(cls.amplitude))))
        scale = float(np.exp(rng.uniform(*np.log(cls.scale))))
        brightness = rng.uniform(12.0, 18.0)
        base_err = 0.005 * 10 ** (0.2 * (brightness - 12.0))  # fainter: larger errors
        err = base_err * rng.uniform(0.8, 1.5, n)
        excess = 0.5 * base_err
        model = Model(cls.kernel(amplitude=amp, scale=scale), mean=brightness,
                      excess_noise=excess)
        series, _ = simulate_series(model, t, err, rng=rng)
        y = series.y.copy()
        bad = rng.random(n) < outlier_fraction
        y[bad] += rng.choice([-1.0, 1.0], bad.sum()) * rng.uniform(5, 15, bad.sum()) * err[bad]
        out.ids.append(f"src{i:06d}")
        out.times.append(series.t.copy())
        out.values.append(y)
        out.errors.append(series.err.copy())
        out.classes[i] = cls.name
        for key, val in (("amplitude", amp), ("scale", scale), ("mean", brightness),
                         ("excess_noise", excess)):
            out.truth[key][i] = val
        out.n_outliers[i] = int(bad.sum())
    return out

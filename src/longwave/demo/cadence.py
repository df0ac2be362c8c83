"""Realistic irregular cadence for ground-based monitoring (our own scenario).

Observations happen at night only, on a random subset of nights, with the
field unobservable for part of each year (seasonal gaps): common practice in
simulating ground-based surveys.
"""

from __future__ import annotations

import numpy as np


def night_cadence(n: int, *, years: float = 3.0, season_fraction: float = 0.65,
                  night_fraction: float = 0.7, night_hours: float = 8.0,
                  start: float = 60000.0, rng=None) -> np.ndarray:
    """Sorted observation times (days) spread over observable nights.

    Parameters
    ----------
    n : int
        Number of observations.
    years : float, default 3.0
        Length of the campaign.
    season_fraction : float, default 0.65
        Fraction of each year when the target can be observed.
    night_fraction : float, default 0.7
        Fraction of observable nights with clear weather.
    night_hours : float, default 8.0
        Length of the observing window each night.
    start : float, default 60000.0
        Time of the first night (a modified-Julian-date-like offset, so the
        large-offset code paths are exercised).
    rng : numpy.random.Generator or int, optional

    Returns
    -------
    ndarray of shape (n,)
    """
    rng = np.random.default_rng(rng)
    nights = np.arange(int(years * 365.25))
    in_season = (nights % 365.25) < season_fraction * 365.25
    clear = rng.random(nights.size) < night_fraction
    usable = nights[in_season & clear]
    if usable.size == 0:
        raise ValueError("no usable nights: raise season_fraction or night_fraction")
    night = rng.choice(usable, size=n)
    hour = rng.uniform(0.0, night_hours / 24.0, size=n)
    return np.sort(start + night + hour)

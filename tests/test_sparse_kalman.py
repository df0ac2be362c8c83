"""Sparse posteriors approach the exact Kalman posterior on a long series.

Source: with inducing times spaced well below the length scale the VFE and
FITC posteriors converge to the exact one (Titsias 2009, sec. 3; Burt,
Rasmussen & van der Wilk 2019, Thm. 1 for Matérn kernels); reference:
``longwave.methods.Kalman`` (exact for Matérn-3/2, Hartikainen & Särkkä 2010).
"""

from __future__ import annotations

import numpy as np
import pytest

from longwave import Model, Series
from longwave.kernels import Matern32
from longwave.methods import FITC, VFE, Kalman


@pytest.mark.slow
def test_sparse_predictions_approach_kalman_on_1e5_points():
    rng = np.random.default_rng(2024)
    n = 100_000
    t = np.sort(rng.uniform(0, 2000, n))
    y = np.sin(t / 15) + 0.5 * np.sin(t / 41 + 1) + rng.normal(0, 0.3, n)
    series = Series(t, y, err=rng.uniform(0.2, 0.4, n))
    model = Model(Matern32(amplitude=0.8, scale=20.0), mean=0.05, excess_noise=0.05)
    grid = np.linspace(-50, 2050, 3001)
    ref = Kalman().posterior(model, series).predict(grid)
    for cls in (VFE, FITC):
        errors = []
        for m in (32, 128, 512):
            p = cls(inducing=m, placement="uniform").posterior(model, series).predict(grid)
            errors.append((np.sqrt(np.mean((p.mean - ref.mean) ** 2)),
                           np.max(np.abs(p.std - ref.std))))
        mean_err, std_err = np.array(errors).T
        assert np.all(np.diff(mean_err) < 0) and np.all(np.diff(std_err) < 0), errors
        # at m = 512 (spacing 0.2 length scales): mean within 3% of its spread, std within
        # 10% of the prior std (the posterior std itself is ~0.1 of it here)
        assert mean_err[-1] < 0.03 * np.std(ref.mean), (cls.name, errors)
        assert std_err[-1] < 0.1 * np.sqrt(model.kernel.variance()), (cls.name, errors)

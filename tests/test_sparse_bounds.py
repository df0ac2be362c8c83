"""Certified bounds of the sparse methods against the exact log marginal likelihood.

Sources: the collapsed bound is a lower bound (Titsias 2009, eq. 9) that
never decreases when inducing times are added (Titsias 2009, sec. 3;
Bauer, van der Wilk & Rasmussen 2016, sec. 3.1); the upper bound follows
Titsias 2014 (technical report, sec. 3) and Burt, Rasmussen & van der Wilk
2019 (eq. 4), extended to per-point noise in ``sparse_objectives``; the
exact value comes from ``longwave.methods.Exact``.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import make_series

from longwave import Model, Series
from longwave.kernels import Matern12, Matern32, Matern52
from longwave.methods import FITC, VFE, Exact

PRIMITIVES = [Matern12, Matern32, Matern52]


def _random_case(rng):
    """A random kernel (primitive, sum or product), data set and inducing set."""
    def leaf():
        cls = PRIMITIVES[rng.integers(3)]
        return cls(amplitude=float(rng.uniform(0.3, 2.0)), scale=float(rng.uniform(0.5, 20.0)))

    shape = rng.integers(3)
    kernel = leaf() if shape == 0 else (leaf() + leaf() if shape == 1 else leaf() * leaf())
    n = int(rng.integers(40, 200))
    series = make_series(rng, n, step=float(rng.uniform(0.2, 2.0)),
                         err_range=(0.02, float(rng.uniform(0.05, 1.0))),
                         n_duplicates=int(rng.integers(0, 4)), n_gaps=int(rng.integers(0, 3)),
                         gap=float(rng.uniform(10, 300)))
    excess = None if rng.uniform() < 0.3 else float(rng.uniform(0.01, 0.5))
    model = Model(kernel, mean=float(rng.normal()), excess_noise=excess)
    m = int(rng.integers(2, 40))
    z = np.sort(rng.uniform(series.t[0] - 5, series.t[-1] + 5, m))
    return model, series, z


@pytest.mark.parametrize("case", range(30))
def test_lower_exact_upper_in_a_random_sweep(case):
    # source: Titsias 2009 eq. 9 (lower); Burt, Rasmussen & van der Wilk 2019 eq. 4 (upper)
    rng = np.random.default_rng(1000 + case)
    model, series, z = _random_case(rng)
    exact = Exact().evaluate(model, series).value
    for cls in (VFE, FITC):
        ex = cls(inducing=z).evaluate(model, series).extras
        tol = 1e-9 * abs(exact)
        assert ex["lower_bound"] <= exact + tol, (cls.name, ex, exact)
        assert exact <= ex["upper_bound"] + tol, (cls.name, ex, exact)
        assert ex["bound_gap"] == pytest.approx(ex["upper_bound"] - ex["lower_bound"])


def test_bounds_close_in_as_nested_inducing_sets_grow():
    # source: Titsias 2009 sec. 3 and Bauer et al. 2016 sec. 3.1 (the bound never falls
    # when inducing times are added); Burt et al. 2019 sec. 3-4 (the gap shrinks to 0)
    rng = np.random.default_rng(7)
    n = 2000
    t = np.sort(rng.uniform(0, 400, n))
    model = Model(Matern52(amplitude=1.0, scale=8.0), mean=0.0, excess_noise=0.05)
    k = model.kernel(t) + 1e-10 * np.eye(n)
    y = np.linalg.cholesky(k) @ rng.standard_normal(n) + rng.normal(0, 0.2, n)
    series = Series(t, y, err=rng.uniform(0.1, 0.3, n))
    exact = Exact().evaluate(model, series).value
    lowers, uppers = [], []
    for level in range(3, 11):  # 9, 17, ..., 1025 equally spaced times, each set within the next
        z = np.linspace(0, 400, 2**level + 1)
        ex = VFE(inducing=z).evaluate(model, series).extras
        lowers.append(ex["lower_bound"])
        uppers.append(ex["upper_bound"])
    lowers, uppers = np.array(lowers), np.array(uppers)
    assert np.all(np.diff(lowers) >= -1e-9 * abs(exact))
    assert np.all(np.diff(uppers) <= 1e-9 * abs(exact))
    assert np.all(lowers <= exact) and np.all(uppers >= exact)
    gaps = uppers - lowers
    assert gaps[-1] < 1e-3 * gaps[0]
    # the upper bound closes more slowly: it inflates the noise by the whole trace
    assert exact - lowers[-1] < 0.01 and uppers[-1] - exact < 10.0


def test_fitc_reports_its_objective_and_vfe_bounds(rng):
    # source: FITC's value is its own objective (Snelson & Ghahramani 2006), the bounds are
    # VFE's (Titsias 2009) from the same statistics: compare with a VFE evaluation
    series = make_series(rng, 120)
    model = Model(Matern32(amplitude=1.0, scale=4.0), excess_noise=0.1)
    z = np.linspace(series.t[0], series.t[-1], 15)
    fitc = FITC(inducing=z).evaluate(model, series)
    vfe = VFE(inducing=z).evaluate(model, series)
    assert fitc.value == fitc.extras["fitc"]
    for key in ("lower_bound", "upper_bound", "bound_gap", "trace_term"):
        assert fitc.extras[key] == pytest.approx(vfe.extras[key], rel=1e-10)

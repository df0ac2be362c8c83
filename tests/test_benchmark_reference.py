"""Reference policy and hold-out placement of the benchmark runner.

Source: the policy stated in longwave.benchmark.reference (issue 6): Kalman
when the kernel has an exact state-space form, else Exact on the largest
affordable contiguous stretch.
"""

import numpy as np
import pytest

from longwave import Model, Series
from longwave.benchmark import Holdout, choose_reference, largest_stretch
from longwave.kernels import Matern12, Matern32, SquaredExp


def _series(n, seed=0):
    rng = np.random.default_rng(seed)
    t = np.cumsum(rng.exponential(1.0, n))
    return Series(t, rng.normal(size=n), err=0.1)


def test_largest_stretch_picks_the_window_spanning_the_most_time():
    t = np.array([0.0, 0.1, 0.2, 0.3, 5.0, 9.0, 9.1])
    assert largest_stretch(t, 3) == (3, 6)
    assert largest_stretch(t, 10) == (0, 7)
    with pytest.raises(ValueError, match="at least 2 points"):
        largest_stretch(t, 1)


def test_exact_state_space_kernel_gets_kalman_on_the_whole_series():
    kernel = Matern32(amplitude=1.0, scale=3.0) + Matern12(amplitude=0.5, scale=9.0)
    plan = choose_reference(Model(kernel), _series(700), max_n=100)
    assert plan.label == "kalman" and plan.whole_series
    assert (plan.start, plan.stop) == (0, 700)


def test_kernel_without_state_space_form_gets_exact_on_a_stretch():
    # The squared exponential's state-space form is an approximation (error bound > 0).
    kernel = SquaredExp(amplitude=1.0, scale=3.0)
    assert kernel.has_state_space and kernel.covariance_error_bound() > 0
    series = _series(700)
    plan = choose_reference(Model(kernel), series, max_n=250)
    assert plan.label == "exact:max_n=250" and not plan.whole_series
    assert plan.stop - plan.start == 250
    assert plan.method.describe()["max_n"] == 250
    assert (plan.start, plan.stop) == largest_stretch(series.t, 250)


def test_holdout_places_separated_gaps_and_a_final_forecast_stretch():
    labels = Holdout(n_gaps=3, gap_fraction=0.04, forecast_fraction=0.1).split(500, seed=4)
    assert np.all(labels[-50:] == 2) and labels[-51] != 2
    gap = labels == 1
    starts = np.flatnonzero(np.diff(gap.astype(int)) == 1) + 1
    ends = np.flatnonzero(np.diff(gap.astype(int)) == -1)
    assert starts.size == ends.size == 3
    assert np.all(ends - starts + 1 == 20)
    # Every gap has training points on both sides.
    assert np.all(labels[starts - 1] == 0) and np.all(labels[ends + 1] == 0)
    again = Holdout(n_gaps=3, gap_fraction=0.04, forecast_fraction=0.1).split(500, seed=4)
    assert np.array_equal(labels, again)


@pytest.mark.parametrize("kwargs, message", [
    ({"n_gaps": -1}, "n_gaps must be >= 0"),
    ({"gap_fraction": 0.7}, "gap_fraction must lie in"),
    ({"n_gaps": 10, "gap_fraction": 0.1}, "leave most of the data"),
])
def test_bad_holdouts_are_rejected(kwargs, message):
    with pytest.raises(ValueError, match=message):
        Holdout(**kwargs)


def test_gaps_that_cannot_fit_are_rejected():
    with pytest.raises(ValueError, match="do not fit"):
        Holdout(n_gaps=4, gap_fraction=0.1, forecast_fraction=0.0).split(8)

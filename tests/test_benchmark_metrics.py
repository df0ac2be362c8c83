"""Accuracy metrics, Pareto front, growth exponents, timing and the tolerance rule."""

import math

import numpy as np
import pytest
from scipy import integrate, stats

from longwave.benchmark import (
    Tolerance,
    choose_setting,
    growth_exponent,
    metrics,
    pareto_front,
    size_grid,
    time_call,
)
from longwave.benchmark.results import MethodResult


def test_gaussian_kl_matches_numerical_integration_of_its_definition():
    # Source: definition KL(p||q) = integral p log(p/q), integrated numerically.
    mp, vp, mq, vq = 0.3, 0.5, -0.4, 1.7
    p, q = stats.norm(mp, math.sqrt(vp)), stats.norm(mq, math.sqrt(vq))
    numeric, _ = integrate.quad(lambda x: p.pdf(x) * (p.logpdf(x) - q.logpdf(x)), -30, 30)
    assert metrics.gaussian_kl(mp, vp, mq, vq) == pytest.approx(numeric, rel=1e-8)


def test_kl_is_zero_for_equal_marginals_and_half_the_squared_shift_for_a_mean_shift():
    # Source: closed form; a shift of d sigmas at equal variance costs d^2 / 2.
    mean, var = np.array([0.0, 2.0]), np.array([1.0, 4.0])
    assert metrics.mean_marginal_kl(mean, var, mean, var) == 0.0
    shifted = mean + 0.3 * np.sqrt(var)
    assert metrics.mean_marginal_kl(mean, var, shifted, var) == pytest.approx(0.045)


def test_nlpd_equals_minus_mean_gaussian_log_density():
    # Source: scipy.stats.norm.logpdf.
    rng = np.random.default_rng(1)
    y, mu, var = rng.normal(size=50), rng.normal(size=50), rng.uniform(0.5, 2, 50)
    expected = -np.mean(stats.norm.logpdf(y, mu, np.sqrt(var)))
    assert metrics.nlpd(y, mu, var) == pytest.approx(expected, rel=1e-12)


def test_coverage_of_calibrated_draws_is_near_the_nominal_levels():
    # Common practice: 40000 draws put the binomial standard error near 0.0023.
    rng = np.random.default_rng(2)
    y = rng.normal(size=40_000)
    zeros, ones = np.zeros_like(y), np.ones_like(y)
    assert metrics.coverage(y, zeros, ones, 0.6827) == pytest.approx(0.6827, abs=0.01)
    assert metrics.coverage(y, zeros, ones, 0.95) == pytest.approx(0.95, abs=0.006)
    with pytest.raises(ValueError, match="strictly between 0 and 1"):
        metrics.coverage(y, zeros, ones, 1.5)


def test_mean_error_and_variance_ratio_on_hand_values():
    mean_err, max_err = metrics.mean_error_sigma([1.0, 0.0], [0.0, 0.0], [4.0, 1.0])
    assert (mean_err, max_err) == (0.25, 0.5)
    assert metrics.variance_ratio([1.0, 3.0], [2.0, 2.0]) == (1.0, 0.5)


def test_hyperparameter_differences_are_log_ratios_for_positive_ones():
    out = metrics.hyperparameter_differences(
        {"a": 2.0, "mean": 0.5}, {"a": 1.0, "mean": 0.2}, {"a": True, "mean": False})
    assert out["a"]["difference"] == pytest.approx(math.log(2.0))
    assert out["mean"]["difference"] == pytest.approx(0.3)


def test_pareto_front_keeps_only_undominated_points():
    # Common practice: no other point is both cheaper and more accurate.
    assert pareto_front([1, 2, 3, 2.5, float("nan")], [0.5, 0.1, 0.0, 0.2, 0.0]) == [0, 1, 2]


def test_growth_exponent_recovers_a_power_law_and_ignores_overhead_points():
    n = np.array([1e3, 1e4, 1e5, 1e6])
    assert growth_exponent(n, 1e-9 * n**3, floor=1e-3) == pytest.approx(3.0)
    # The first point is overhead-dominated (below the floor) and left out.
    cost = np.array([1e-4, 0.01, 0.1, 1.0])
    assert growth_exponent(n, cost, floor=1e-3) == pytest.approx(1.0)
    assert math.isnan(growth_exponent([1e3], [1.0], floor=0.0))


def test_size_grid_follows_one_two_five():
    assert size_grid(1000, 10**7)[:4] == [1000, 2000, 5000, 10_000]
    assert size_grid(1000, 10**7)[-1] == 10**7
    with pytest.raises(ValueError, match="max_n must be at least"):
        size_grid(1000, 10)


def test_time_call_sees_a_numpy_allocation():
    # numpy reports array buffers to tracemalloc (numpy >= 1.13).
    _, cost = time_call(np.ones, 2_000_000)
    assert cost.peak_bytes >= 16_000_000
    assert cost.seconds >= 0
    _, plain = time_call(np.ones, 10, memory=False)
    assert plain.peak_bytes == -1 and math.isnan(plain.peak_mb)


def _row(label, err, cost, full=True, status="ok"):
    """A result row whose three accuracy figures all equal ``err``."""
    return MethodResult(label, {"name": label.split(":")[0]}, status=status,
                        full_series_ok=full, full_series_message="" if full else "too long",
                        lml_diff_per_point=-err, mean_error_sigma=err, mean_kl=err,
                        fit_seconds=cost, predict_seconds=0.0)


ROWS = [_row("exact", 0.0, 9.0), _row("kalman", 0.0, 3.0), _row("vfe:m=32", 0.05, 0.5),
        _row("vfe:m=128", 0.004, 1.0), _row("vfe:m=512", 1e-5, 4.0)]


def test_tight_tolerance_recommends_the_exact_methods():
    rec = choose_setting(ROWS, Tolerance.from_nats(1e-6))
    assert rec.choice == "kalman" and rec.warning == ""
    verdicts = {v.label: v.verdict for v in rec.table}
    assert verdicts["exact"] == "meets tolerance"
    assert verdicts["vfe:m=512"] == "too inaccurate"


def test_loose_tolerance_recommends_a_cheap_sparse_setting():
    assert choose_setting(ROWS, Tolerance.from_nats(0.01)).choice == "vfe:m=128"
    assert choose_setting(ROWS, Tolerance.from_nats(0.1)).choice == "vfe:m=32"


def test_each_bound_can_be_set_on_its_own():
    tol = Tolerance.from_nats(0.1, kl=0.01)
    assert tol.mean_error_sigma == pytest.approx(math.sqrt(0.2))
    assert choose_setting(ROWS, tol).choice == "vfe:m=128"
    with pytest.raises(TypeError, match="unknown tolerance bound"):
        Tolerance.from_nats(0.1, kll=0.01)
    with pytest.raises(ValueError, match="positive"):
        Tolerance.from_nats(-1.0)


def test_no_passing_setting_gives_a_warning_and_settings_not_for_the_full_series_are_skipped():
    rows = [_row("vfe:m=32", 0.05, 0.5), _row("exact", 0.0, 9.0, full=False),
            _row("fitc:m=8", 0.0, 0.1, status="failed")]
    rec = choose_setting(rows, Tolerance.from_nats(0.001), reference_label="exact:max_n=5000")
    assert rec.choice is None
    assert "no benchmarked setting meets the tolerance" in rec.warning
    assert "exact:max_n=5000" in rec.warning
    verdicts = {v.label: v.verdict for v in rec.table}
    assert verdicts == {"vfe:m=32": "too inaccurate", "exact": "not for full series",
                        "fitc:m=8": "failed"}

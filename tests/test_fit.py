"""Fitting and posteriors (``inference.py``): recovery, coverage and the fit contract.

Recovery and coverage run on data simulated from the prior with
``longwave.simulate.simulate_series`` (n = 5000 training points), fitted with
Kalman. Tolerances:

* Hyperparameters: the observed information (minus the Hessian of the log
  likelihood at the optimum, by central differences of the analytic
  gradient) gives the asymptotic covariance of the maximum-likelihood
  estimate (Cramér 1946; Pawitan 2001, "In All Likelihood", ch. 9, chapter
  from memory).
  Each free coordinate must lie within 4 of its standard errors of the truth
  (two-sided probability 6e-5 per parameter if the asymptotics hold).
* Coverage: 1000 held-out latent values, spaced ~6 length scales apart so
  their posterior errors are nearly independent (prior correlation at 6
  scales is below 1e-3 for every Matérn order here). The fraction inside the
  1- and 2-sigma intervals must be within 4 binomial standard deviations,
  sqrt(p (1 - p) / 1000) = 0.0147 and 0.0066, of 0.6827 and 0.9545 (normal
  distribution). Residual correlation and the use of fitted rather than true
  hyperparameters widen the true spread a little; 4 sigma leaves room.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import seed_for

from longwave import (
    FitResult,
    LogNormal,
    Model,
    Normal,
    Param,
    Series,
    fit,
    fixed,
    log_marginal_likelihood,
    posterior,
)
from longwave.kernels import Matern12, Matern32, Matern52
from longwave.methods import Exact, Kalman
from longwave.simulate import simulate_series

N_TRAIN, EVERY = 5000, 6  # every 6th of 6000 times is held out


def observed_information_se(model, series, step=1e-4):
    """Standard errors of the free coordinates from minus the inverse Hessian."""
    x = model.coordinates()

    def grad(c):
        return Kalman().evaluate(model.with_coordinates(c), series, gradient=True).grad

    hess = np.array([(grad(x + step * e) - grad(x - step * e)) / (2 * step)
                     for e in np.eye(x.size)])
    hess = 0.5 * (hess + hess.T)
    cov = np.linalg.inv(-hess)
    assert np.all(np.linalg.eigvalsh(-hess) > 0), "optimum is not a maximum"
    return np.sqrt(np.diag(cov))


@pytest.fixture(scope="module", params=[Matern12, Matern32, Matern52],
                ids=lambda c: c.__name__)
def simulated_fit(request):
    cls = request.param
    rng = np.random.default_rng(seed_for("test_fit" + cls.__name__))
    truth = Model(cls(amplitude=1.0, scale=10.0), mean=0.5, excess_noise=0.1)
    n_all = N_TRAIN * EVERY // (EVERY - 1)
    t = np.sort(rng.uniform(0.0, 10.0 * n_all, n_all))  # mean step: one length scale
    err = rng.uniform(0.05, 0.2, n_all)
    series, latent = simulate_series(truth, t, err, rng=rng)
    held = np.arange(EVERY // 2, n_all, EVERY)
    train = series.subset(np.setdiff1d(np.arange(n_all), held))
    assert train.n == N_TRAIN
    start = Model(cls(amplitude=2.0, scale=3.0), mean=0.0, excess_noise=0.3)
    result = fit(start, train, Kalman())
    return truth, train, series.t[held], latent[held], result


def test_fit_recovers_hyperparameters(simulated_fit):
    truth, train, _, _, result = simulated_fit
    assert result.converged, result.message
    se = observed_information_se(result.model, train)
    z = (result.model.coordinates() - truth.coordinates()) / se
    assert np.all(np.abs(z) < 4), dict(zip(truth.free_names, z))
    # the standard errors are informative, not vacuous
    assert np.all(se < 0.3)


def test_posterior_intervals_cover_held_out_latent_values(simulated_fit):
    _, train, t_held, latent_held, result = simulated_fit
    pred = posterior(result.model, train, Kalman()).predict(t_held)
    z = np.abs(latent_held - pred.mean) / pred.std
    n = z.size
    for k, p in [(1, 0.6827), (2, 0.9545)]:
        covered = np.mean(z < k)
        tolerance = 4 * np.sqrt(p * (1 - p) / n)
        assert abs(covered - p) < tolerance, (k, covered)


# --- the fit contract, on a small series ----------------------------------------------
@pytest.fixture(scope="module")
def small():
    truth = Model(Matern32(amplitude=1.0, scale=5.0), mean=0.5, excess_noise=0.1)
    rng = np.random.default_rng(seed_for("test_fit small"))
    t = np.sort(rng.uniform(0.0, 1500.0, 400))
    series, _ = simulate_series(truth, t, rng.uniform(0.05, 0.2, 400), rng=rng)
    start = Model(Matern32(amplitude=2.0, scale=2.0), mean=0.0, excess_noise=0.3)
    return series, start, fit(start, series)


def test_fit_result_fields_are_filled(small):
    series, start, result = small
    assert isinstance(result, FitResult)
    assert result.converged and "CONVERGENCE" in result.message
    assert result.method == "kalman"
    assert result.n_evaluations > 1 and result.runtime > 0
    assert result.log_marginal_likelihood == pytest.approx(
        log_marginal_likelihood(result.model, series), rel=1e-14)
    assert result.log_posterior == result.log_marginal_likelihood  # no priors
    assert result.params == result.model.values()
    assert list(result.params) == start.names
    assert len(result.starts) == 1
    assert set(result.starts[0]) == {"start", "objective", "converged"}
    assert result.starts[0]["start"] == pytest.approx(start.coordinates().tolist())
    assert isinstance(result.extras, dict)
    # the starting model is left as it was
    assert start.values()["matern32.scale"] == 2.0
    # at the optimum the gradient vanishes (relative to n, the fit's scaling)
    _, grad = log_marginal_likelihood(result.model, series, gradient=True)
    assert np.abs(grad).max() < 1e-3 * series.n


def test_fixed_parameters_stay_fixed(small):
    series, _, _ = small
    start = Model(Matern32(amplitude=fixed(1.7), scale=2.0), mean=Param(0.25, fixed=True),
                  excess_noise=0.3)
    result = fit(start, series)
    assert result.params["matern32.amplitude"] == 1.7
    assert result.params["mean"] == 0.25
    assert result.params["matern32.scale"] != 2.0
    assert result.model.free_names == ["matern32.scale", "excess_noise"]


def test_bounds_are_respected(small):
    series, _, free_fit = small
    best_scale = free_fit.params["matern32.scale"]
    lo, hi = 0.2 * best_scale, 0.6 * best_scale  # excludes the optimum
    start = Model(Matern32(amplitude=1.0, scale=Param(0.3 * best_scale, bounds=(lo, hi))),
                  mean=0.0, excess_noise=Param(0.3, bounds=(0.2, 1.0)))
    result = fit(start, series, restarts=3, seed=1, spread=3.0)
    assert lo <= result.params["matern32.scale"] <= hi
    assert result.params["matern32.scale"] == pytest.approx(hi, rel=1e-9)  # pushed to the bound
    assert 0.2 <= result.params["excess_noise"] <= 1.0
    for record in result.starts:  # restarts are clipped into the bounds
        assert np.log(lo) <= record["start"][1] <= np.log(hi)


@pytest.mark.parametrize("name, prior, direction", [
    ("matern32.scale", LogNormal(median=100.0, width=0.2), +1),
    ("matern32.scale", LogNormal(median=0.5, width=0.2), -1),
    ("mean", Normal(loc=3.0, scale=0.05), +1),
    ("mean", Normal(loc=-2.0, scale=0.05), -1),
])
def test_priors_pull_the_optimum_towards_them(small, name, prior, direction):
    # source: the maximum a posteriori lies between the likelihood maximum and the
    # prior's mode for a concave log likelihood (common practice)
    series, start, free_fit = small
    params = start.params
    i = start.names.index(name)
    params[i] = Param(params[i].value, prior=prior, positive=params[i].positive)
    result = fit(start.with_params(params), series)
    assert result.converged
    mle = free_fit.params[name]
    mode = prior.median if isinstance(prior, LogNormal) else prior.loc
    fitted = result.params[name]
    assert direction * (fitted - mle) > 0
    assert direction * (mode - fitted) > 0
    lp, _ = result.model.log_prior()
    assert result.log_posterior == pytest.approx(result.log_marginal_likelihood + lp, rel=1e-14)


def test_restarts_are_deterministic_for_a_seed(small):
    series, start, _ = small
    a = fit(start, series, restarts=3, seed=11)
    b = fit(start, series, restarts=3, seed=11)
    c = fit(start, series, restarts=3, seed=12)
    assert [r["start"] for r in a.starts] == [r["start"] for r in b.starts]
    assert a.params == b.params and a.n_evaluations == b.n_evaluations
    assert [r["start"] for r in a.starts][1:] != [r["start"] for r in c.starts][1:]
    assert len(a.starts) == 4
    assert a.starts[0]["start"] == pytest.approx(start.coordinates().tolist())
    # the result is the best start
    assert a.log_posterior == pytest.approx(max(r["objective"] for r in a.starts), rel=1e-9)


def test_non_converged_fit_is_reported_not_raised(small):
    series, start, _ = small
    result = fit(start, series, max_iter=1)
    assert result.converged is False
    assert "ITERATIONS" in result.message.upper()
    assert np.isfinite(result.log_marginal_likelihood)
    assert result.starts[0]["converged"] is False


def test_fit_with_exact_by_name_agrees_with_kalman(small):
    # source: Exact and Kalman share one objective (see test_kalman.py)
    series, start, kalman_fit = small
    sub = series.subset(np.arange(0, series.n, 2))
    a = fit(start, sub, method="exact")
    b = fit(start, sub, method=Kalman())
    assert a.method == "exact" and b.method == "kalman"
    np.testing.assert_allclose(a.model.coordinates(), b.model.coordinates(), atol=1e-4)


def test_no_free_parameters():
    series = Series([0.0, 1.0, 2.0], [0.1, 0.2, 0.0], err=0.1)
    model = Model(Matern32(amplitude=fixed(1.0), scale=fixed(1.0)), mean=fixed(0.0))
    result = fit(model, series)
    assert result.converged and result.message == "no free parameters"
    assert result.log_marginal_likelihood == pytest.approx(
        Exact().evaluate(model, series).value, rel=1e-12)


@pytest.mark.parametrize("call, exc, words", [
    (lambda m, s: fit(m, s, restarts=-1), ValueError, ["restarts must be >= 0", "-1"]),
    (lambda m, s: fit(m.kernel, s), TypeError, ["model must be a longwave.Model", "Model(kernel)"]),
    (lambda m, s: fit(m, (s.t, s.y)), TypeError, ["series must be a longwave.Series", "tuple"]),
    (lambda m, s: fit(m, s, method="newton"), ValueError, ["unknown inference method", "kalman"]),
    (lambda m, s: log_marginal_likelihood(m, Series(s.t, s.y)), ValueError,
     ["no error bars", "excess_noise"]),
], ids=["restarts", "model", "series", "method", "no-noise"])
def test_bad_calls_raise_clear_errors(call, exc, words):
    series = Series([0.0, 1.0, 2.0], [0.1, 0.2, 0.0], err=0.1)
    model = Model(Matern32(amplitude=1.0, scale=1.0))
    with pytest.raises(exc) as info:
        call(model, series)
    for word in words:
        assert word in str(info.value)

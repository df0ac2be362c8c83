"""Fits to two open records shipped with statsmodels (no network).

* Mauna Loa weekly CO2, 1958-2001 (``statsmodels.datasets.co2``): a smooth
  rising trend plus a seasonal cycle. The seasonal period is one year (a fact
  of the trade: the cycle follows Northern-hemisphere vegetation), so a trend
  plus quasi-periodic model must find a period of 1.00 +/- 0.02 years.
* Yearly sunspot numbers, 1700-2008 (``statsmodels.datasets.sunspots``): the
  solar cycle lasts about 11 years, varying between about 9 and 14 (a fact of
  the trade), so a quasi-periodic fit must find a period in [9, 14].

Fits are bounded for speed: one start from physically motivated values, an
iteration cap. The same fitted CO2 model then checks that Exact (all 2225
points), Kalman and VFE agree, with tolerances stated at each assertion.
"""

from __future__ import annotations

import numpy as np
import pytest

from longwave import Model, Series, fit, fixed, log_marginal_likelihood, posterior
from longwave.kernels import Matern32, Matern52, Periodic
from longwave.methods import Exact, Kalman
from longwave.methods.kalman_blocks import BlockKalman

datasets = pytest.importorskip("statsmodels.datasets")
pd = pytest.importorskip("pandas")


def co2_series() -> Series:
    """Weekly CO2 (ppm), missing weeks dropped, time in years since 1958.0."""
    data = datasets.co2.load_pandas().data.dropna()
    years = (data.index - pd.Timestamp("1958-01-01")).days.to_numpy() / 365.25
    return Series(years, data["co2"].to_numpy())


def co2_model() -> Model:
    """Trend (Matérn-5/2) + seasonal quasi-periodic (Matérn-3/2 x Periodic) + noise.

    Initial values from the physics of the record: the trend rises by about 60 ppm
    over 44 years and bends only slowly (amplitude 40 ppm, scale 50 years, longer
    than the record); the seasonal swing is a few ppm and its shape drifts over
    several years (amplitude 3 ppm, decay 8 years); the period starts
    at one year, the profile near-sinusoidal (scale 2); weekly scatter 0.3 ppm. The
    periodic amplitude is fixed: only its product with the Matérn-3/2 amplitude is
    identifiable. ``tolerance=1e-8``: the record is so precise that a covariance
    error of 1e-3 of the variance (the default) moves its log-likelihood by tens.
    """
    kernel = Matern52(amplitude=40.0, scale=50.0) + Matern32(amplitude=3.0, scale=8.0) * Periodic(
        amplitude=fixed(1.0), period=1.0, scale=2.0, tolerance=1e-8
    )
    return Model(kernel, mean=340.0, excess_noise=0.3)


@pytest.fixture(scope="module")
def co2_fit():
    series = co2_series()
    # ftol 1e-7 of the scaled objective: ample for a period to +/- 0.02
    result = fit(co2_model(), series, method=BlockKalman(), max_iter=80, tol=1e-7)
    return series, result


def test_co2_record_is_as_expected():
    series = co2_series()
    # a fact of the dataset as shipped: 2284 weeks, 59 of them missing
    assert series.n == 2225
    assert 0.0 < series.t[0] < 0.3 and 43.5 < series.t[-1] < 44.0


def test_co2_quasi_periodic_fit_recovers_the_annual_cycle(co2_fit):
    _, result = co2_fit
    assert np.isfinite(result.log_marginal_likelihood)
    assert result.params["periodic.period"] == pytest.approx(1.0, abs=0.02)
    # the weekly scatter is a fraction of a ppm (fact of the record's precision)
    assert 0.05 < result.params["excess_noise"] < 1.0


def test_co2_exact_kalman_and_vfe_agree(co2_fit):
    series, result = co2_fit
    model = result.model
    grid = np.linspace(0.5, 43.5, 400)
    lml_exact = log_marginal_likelihood(model, series, method=Exact())
    lml_kalman = log_marginal_likelihood(model, series, method=Kalman())
    pred_exact = posterior(model, series, method=Exact()).predict(grid)
    pred_kalman = posterior(model, series, method=Kalman()).predict(grid)
    # Kalman is exact up to the Fourier truncation (error 1e-8 of the variance) and
    # round-off: 1e-3 absolute in the log-likelihood, 1e-5 ppm in predictions
    assert model.kernel.covariance_error_bound() <= 1e-8 * model.kernel.variance() * 1.0001
    assert lml_kalman == pytest.approx(lml_exact, abs=1e-3)
    np.testing.assert_allclose(pred_kalman.mean, pred_exact.mean, rtol=0, atol=1e-5)
    np.testing.assert_allclose(pred_kalman.std, pred_exact.std, rtol=0, atol=1e-5)

    methods = pytest.importorskip("longwave.methods")
    if not hasattr(methods, "VFE"):
        pytest.skip("longwave.methods.VFE not available yet")
    vfe = methods.VFE(inducing=400)  # about 9 inducing times per annual cycle
    lml_vfe = log_marginal_likelihood(model, series, method=vfe)
    pred_vfe = posterior(model, series, method=vfe).predict(grid)
    # VFE with 400 of 2225 points: log-likelihood within 1% and predictions within
    # 0.05 ppm (a seventh of the weekly scatter) of Exact
    assert lml_vfe == pytest.approx(lml_exact, rel=0.01)
    np.testing.assert_allclose(pred_vfe.mean, pred_exact.mean, rtol=0, atol=0.05)
    np.testing.assert_allclose(pred_vfe.std, pred_exact.std, rtol=0, atol=0.05)


def test_sunspot_quasi_periodic_fit_recovers_the_solar_cycle():
    data = datasets.sunspots.load_pandas().data
    series = Series(data["YEAR"].to_numpy() - 1700.0, data["SUNACTIVITY"].to_numpy())
    assert series.n == 309  # 1700-2008, a fact of the dataset as shipped
    # Initial values from the physics: cycles of about 11 years whose amplitude and
    # phase wander over a few cycles (decay 30 years); peaks sharper than a sinusoid
    # (scale 1); spread about 40, mean about 50, year-to-year scatter about 15.
    kernel = Matern32(amplitude=40.0, scale=30.0) * Periodic(
        amplitude=fixed(1.0), period=11.0, scale=1.0
    )
    result = fit(Model(kernel, mean=50.0, excess_noise=15.0), series, method=BlockKalman(),
                 max_iter=150)
    assert 9.0 <= result.params["periodic.period"] <= 14.0
    # and the fit is better than the starting point
    start = log_marginal_likelihood(Model(kernel, mean=50.0, excess_noise=15.0), series)
    assert result.log_marginal_likelihood > start

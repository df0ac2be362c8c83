"""The RTS smoother stays accurate when the state covariance is ill-conditioned.

A high-order state-space approximation of a smooth kernel (SquaredExp, state
dimension 8) makes the predicted covariance ill-conditioned (condition number
about 1e10 here); the textbook difference form ``P_f + G (P_next - Pp) G^T``
then lost all digits (posterior variances off by 80 %, some exactly zero).
The reference is dense conditioning with the *same* covariance the state-space
model implies, ``k_ss(tau) = H A(tau) Pinf H^T`` (Rasmussen & Williams 2006,
eq. 2.26), so the check isolates the smoother's numerics from the
approximation error of the form.
"""

import numpy as np
import pytest

import longwave as lw
from longwave.kernels import SquaredExp
from longwave.methods import Kalman
from longwave.simulate import simulate_series


@pytest.mark.parametrize("seed", [2, 5])
def test_squared_exp_state_space_posterior_matches_dense_same_covariance(seed):
    rng = np.random.default_rng(seed)
    t = np.sort(rng.uniform(0, 100, 400))
    kernel = SquaredExp(amplitude=1.0, scale=3.0)
    model = lw.Model(kernel, mean=0.0, excess_noise=0.1)
    series, _ = simulate_series(model, t, 0.05, rng=rng)
    ss = kernel.state_space()
    tau = np.abs(series.t[:, None] - series.t[None, :])
    a = ss.transition(tau.ravel()).reshape(tau.shape + (ss.dim, ss.dim))
    k_ss = np.einsum("a,ijab,bc,c->ij", ss.H, a, ss.Pinf, ss.H)
    noisy = k_ss + np.diag(model.noise_variance(series.err))
    queries = np.concatenate([series.t, np.linspace(-5, 105, 300)])
    tau_q = np.abs(queries[:, None] - series.t[None, :])
    aq = ss.transition(tau_q.ravel()).reshape(tau_q.shape + (ss.dim, ss.dim))
    k_q = np.einsum("a,ijab,bc,c->ij", ss.H, aq, ss.Pinf, ss.H)
    dense_var = ss.H @ ss.Pinf @ ss.H - np.einsum("ij,ji->i", k_q, np.linalg.solve(noisy, k_q.T))
    dense_mean = k_q @ np.linalg.solve(noisy, series.y)
    pred = lw.posterior(model, series, Kalman()).predict(queries)
    assert np.all(np.isfinite(pred.var)) and np.all(pred.var > 0)
    # 1e-2 relative: the dense solve itself carries cond(k_ss) * eps of error.
    np.testing.assert_allclose(pred.var, dense_var, rtol=1e-2)
    np.testing.assert_allclose(pred.mean, dense_mean, atol=1e-3 * np.std(series.y))

"""Exact inference by dense Cholesky factorisation: the reference method.

Formulas (Rasmussen & Williams 2006, Algorithm 2.1 and eq. 5.9), with
``K = k(t, t) + diag(err^2 + excess^2)`` and ``r = y - mean``::

    log p(y) = -r^T alpha / 2 - sum(log diag(L)) - n log(2 pi) / 2,
    alpha = K^-1 r,  L = chol(K),
    d log p / d theta = tr((alpha alpha^T - K^-1) dK/dtheta) / 2,
    d log p / d mean  = sum(alpha).

Cost O(n^3) time and O(n^2) memory, so it refuses series above a limit.
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import cho_factor, cho_solve, solve_triangular

from .._config import settings
from .base import Evaluation, Method, Posterior, require_noise


class Exact(Method):
    """Dense exact GP inference.

    Parameters
    ----------
    max_n : int, optional
        Largest series accepted; default from ``LONGWAVE_EXACT_MAX_N`` (10000).
    jitter : float, default 0.0
        Added to the diagonal, as a variance, for numerical stability.

    Examples
    --------
    >>> from longwave import Model, Series, log_marginal_likelihood
    >>> from longwave.kernels import Matern32
    >>> s = Series([0.0, 1.0, 2.5], [0.1, 0.3, -0.2], err=0.1)
    >>> round(log_marginal_likelihood(Model(Matern32(amplitude=1.0, scale=1.0)), s,
    ...                               method=Exact()), 6)
    -2.691496
    """

    name = "exact"

    def __init__(self, max_n: int | None = None, jitter: float = 0.0):
        if max_n is not None and max_n < 1:
            raise ValueError(f"max_n must be a positive integer, got {max_n}")
        if jitter < 0:
            raise ValueError(f"jitter must be non-negative, got {jitter}")
        self.max_n = max_n
        self.jitter = float(jitter)

    def describe(self) -> dict:
        return {"name": self.name, "max_n": self.max_n, "jitter": self.jitter}

    def _limit(self) -> int:
        return self.max_n if self.max_n is not None else settings().exact_max_n

    def check(self, model, series) -> None:
        require_noise(model, series, "Exact")
        if series.n > self._limit():
            raise ValueError(
                f"Exact: the series has n={series.n} points, above the limit of "
                f"{self._limit()} (O(n^3) time, O(n^2) memory). Use Kalman() for kernels "
                "with a state-space form, or VFE()/FITC() for any kernel; raise the limit "
                "with Exact(max_n=...) or LONGWAVE_EXACT_MAX_N if you have the memory"
            )

    def _factor(self, model, series):
        tau = np.abs(series.t[:, None] - series.t[None, :])
        K = model.kernel.value(tau)
        K[np.diag_indices_from(K)] += model.noise_variance(series.err) + self.jitter
        try:
            factor = cho_factor(K, lower=True, check_finite=False)
        except np.linalg.LinAlgError as exc:
            raise np.linalg.LinAlgError(
                f"Exact: covariance matrix not positive definite for {model!r}; "
                "add excess noise or jitter (Exact(jitter=1e-10))"
            ) from exc
        return tau, factor

    def evaluate(self, model, series, gradient: bool = False) -> Evaluation:
        self.check(model, series)
        tau, factor = self._factor(model, series)
        resid = series.y - model.mean_value
        alpha = cho_solve(factor, resid, check_finite=False)
        logdet_half = np.log(np.diag(factor[0])).sum()
        value = -0.5 * resid @ alpha - logdet_half - 0.5 * series.n * np.log(2 * np.pi)
        if not gradient:
            return Evaluation(float(value))
        kinv = cho_solve(factor, np.eye(series.n), check_finite=False)
        W = np.outer(alpha, alpha)
        W -= kinv
        del kinv
        free = model.free_mask
        nk = model.n_kernel_params
        dk = model.kernel.grad(tau)
        full = np.empty(len(model.params))
        for i in range(nk):
            full[i] = 0.5 * np.einsum("ij,ij->", W, dk[i]) if free[i] else 0.0
        full[nk:] = 0.0
        full += 0.5 * np.trace(W) * model.noise_variance_grad()
        full += alpha.sum() * model.mean_grad()
        return Evaluation(float(value), full[free])

    def posterior(self, model, series) -> ExactPosterior:
        self.check(model, series)
        return ExactPosterior(model, series, self)


class ExactPosterior(Posterior):
    """Posterior by dense algebra (Rasmussen & Williams 2006, eqs. 2.25-2.26)."""

    def __init__(self, model, series, method: Exact):
        super().__init__(model, series)
        _, self._factor = method._factor(model, series)
        self._alpha = cho_solve(self._factor, series.y - model.mean_value, check_finite=False)

    def _latent(self, t, *, in_order=None, out=None, block: int = 4096):  # order not needed
        mean, var = out if out is not None else (np.empty(t.size), np.empty(t.size))
        prior_var = self.model.kernel.variance()
        for lo in range(0, t.size, block):
            sl = slice(lo, lo + block)
            kx = self.model.kernel(self.series.t, t[sl])
            mean[sl] = kx.T @ self._alpha
            v = solve_triangular(self._factor[0], kx, lower=True, check_finite=False)
            var[sl] = np.maximum(prior_var - np.einsum("ij,ij->j", v, v), 0.0)
        return mean, var

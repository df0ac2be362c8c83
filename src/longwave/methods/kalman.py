"""Exact O(n) inference for kernels with a state-space form.

The Kalman filter gives the log marginal likelihood from the innovations
(prediction-error decomposition); forward sensitivities of the filter give
its analytic gradient in the same pass; the RTS smoother gives the posterior
(Hartikainen & Särkkä 2010; Särkkä 2013, "Bayesian Filtering and
Smoothing", ch. 4 and 8). The posterior at arbitrary times is computed from
the stored filter and smoother states, one O(d^3) step per query time, so a
prediction grid of any size costs O(n + n*) and can be produced in chunks.
"""

from __future__ import annotations

import numpy as np

from .._loops import kalman as loops
from .base import Evaluation, Method, Posterior, require_noise


def _transition_arrays(ss):
    return (ss.rate, ss.freq, ss.cos_coef, ss.sin_coef)


class Kalman(Method):
    """Kalman filter and RTS smoother; exact for kernels with a state-space form.

    Examples
    --------
    >>> import numpy as np
    >>> from longwave import Model, Series, log_marginal_likelihood
    >>> from longwave.kernels import Matern32
    >>> s = Series([0.0, 1.0, 2.5], [0.1, 0.3, -0.2], err=0.1)
    >>> round(log_marginal_likelihood(Model(Matern32(amplitude=1.0, scale=1.0)), s,
    ...                               method=Kalman()), 6)
    -2.172932
    """

    name = "kalman"

    def check(self, model, series) -> None:
        require_noise(model, series, "Kalman")
        if not model.kernel.has_state_space:
            raise ValueError(
                f"Kalman: kernel {model.kernel!r} has no exact state-space form; "
                "use Exact() for small series or VFE()/FITC() for long ones"
            )

    def evaluate(self, model, series, gradient: bool = False) -> Evaluation:
        self.check(model, series)
        ss = model.kernel.state_space()
        resid = series.y - model.mean_value
        noise = model.noise_variance(series.err)
        trans = _transition_arrays(ss)
        if not gradient:
            value = loops.filter_loglik(series.t, resid, noise, ss.H, ss.Pinf, trans)
            return Evaluation(float(value))
        free = model.free_mask
        nk = model.n_kernel_params
        kfree = free[:nk]
        n_all = len(model.params)
        d = ss.dim

        def pad(arr):  # kernel-parameter derivatives, zero rows for mean and noise
            out = np.zeros((n_all,) + arr.shape[1:])
            out[:nk] = arr
            return np.ascontiguousarray(out[free])

        dtrans = (pad(ss.d_rate), pad(ss.d_freq), pad(ss.d_cos_coef), pad(ss.d_sin_coef))
        dpinf = pad(ss.dPinf) if nk else np.zeros((int(free.sum()), d, d))
        dynamic = np.zeros(n_all, dtype=np.bool_)
        dynamic[:nk] = kfree
        sens = (
            dtrans,
            dpinf,
            np.ascontiguousarray(model.noise_variance_grad()[free]),
            np.ascontiguousarray(model.mean_grad()[free]),
            dynamic[free],
        )
        value, grad = loops.filter_loglik_grad(series.t, resid, noise, ss.H, ss.Pinf, trans, sens)
        return Evaluation(float(value), grad)

    def posterior(self, model, series) -> KalmanPosterior:
        self.check(model, series)
        return KalmanPosterior(model, series)


class KalmanPosterior(Posterior):
    """Smoothed states at the data times; predictions interpolate between them.

    Memory is ``2 n (d + d^2)`` doubles for the stored filter and smoother
    states (d is the state dimension: 2 for Matérn-3/2).
    """

    def __init__(self, model, series):
        super().__init__(model, series)
        ss = model.kernel.state_space()
        self._ss = ss
        n, d = series.n, ss.dim
        resid = series.y - model.mean_value
        noise = model.noise_variance(series.err)
        trans = _transition_arrays(ss)
        self._filt = (np.empty((n, d)), np.empty((n, d, d)))
        self._smooth = (np.empty((n, d)), np.empty((n, d, d)))
        loops.filter_store(series.t, resid, noise, ss.H, ss.Pinf, trans, *self._filt)
        loops.smooth(series.t, ss.Pinf, trans, *self._filt, *self._smooth)

    def _latent(self, t):
        idx = np.searchsorted(self.series.t, t, side="right") - 1
        mean = np.empty(t.size)
        var = np.empty(t.size)
        ss = self._ss
        loops.predict_between(
            t, idx, self.series.t, ss.H, ss.Pinf, _transition_arrays(ss),
            self._filt, self._smooth, mean, var,
        )
        return mean, var

"""A GP model: kernel, constant mean, and excess white noise.

The observation model is

    y_i = mean + f(t_i) + e_i,   f ~ GP(0, k),
    e_i ~ N(0, err_i^2 + excess_noise^2),

where ``err_i`` are the series' measurement errors. The excess noise absorbs
scatter that the quoted error bars miss (common practice in photometry).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .kernels.base import Kernel
from .params import Param, as_param


class Model:
    """Kernel plus constant mean plus optional excess white noise.

    Parameters
    ----------
    kernel : Kernel
        Covariance function of the latent process.
    mean : float or Param, default 0.0
        Constant mean; a float is fitted, ``Param(value, fixed=True)`` is not.
    excess_noise : float or Param, optional
        Standard deviation of white noise added to the measurement errors.
        ``None`` (default) means the error bars are taken as complete.

    Attributes
    ----------
    params : list of Param
        Kernel hyperparameters, then ``mean``, then ``excess_noise`` if present.

    Examples
    --------
    >>> from longwave.kernels import Matern32
    >>> m = Model(Matern32(amplitude=1.0, scale=10.0), mean=0.5, excess_noise=0.1)
    >>> m.free_names
    ['matern32.amplitude', 'matern32.scale', 'mean', 'excess_noise']
    """

    def __init__(self, kernel: Kernel, mean=0.0, excess_noise=None):
        if not isinstance(kernel, Kernel):
            raise TypeError(
                f"kernel must be a longwave kernel, got {type(kernel).__name__}; "
                "for example Model(Matern32(amplitude=1.0, scale=10.0))"
            )
        self.kernel = kernel
        self.mean = as_param(mean, "mean", positive=False)
        self.excess_noise = (
            None if excess_noise is None else as_param(excess_noise, "excess_noise")
        )

    # --- parameter bookkeeping -------------------------------------------------
    @property
    def params(self) -> list[Param]:
        extra = [self.mean] + ([self.excess_noise] if self.excess_noise is not None else [])
        return self.kernel.params() + extra

    @property
    def names(self) -> list[str]:
        return [p.name for p in self.params]

    @property
    def free_mask(self) -> np.ndarray:
        return np.array([not p.fixed for p in self.params], dtype=bool)

    @property
    def free_names(self) -> list[str]:
        return [p.name for p in self.params if not p.fixed]

    @property
    def n_kernel_params(self) -> int:
        return self.kernel.n_params

    def coordinates(self) -> np.ndarray:
        """Free coordinates (log for positive parameters) of the free parameters."""
        return np.array([p.coordinate for p in self.params if not p.fixed])

    def coordinate_bounds(self) -> list[tuple]:
        return [p.coordinate_bounds() for p in self.params if not p.fixed]

    def with_coordinates(self, coords) -> Model:
        """A copy with the free parameters set from their free coordinates."""
        coords = np.asarray(coords, dtype=float)
        if coords.shape != (int(self.free_mask.sum()),):
            raise ValueError(
                f"expected {int(self.free_mask.sum())} free coordinates "
                f"({self.free_names}), got shape {coords.shape}"
            )
        it = iter(coords)
        new = [p if p.fixed else p.with_coordinate(next(it)) for p in self.params]
        return self.with_params(new)

    def with_params(self, params: list[Param]) -> Model:
        nk = self.n_kernel_params
        out = object.__new__(Model)
        out.kernel = self.kernel.with_params(params[:nk])
        out.mean = replace(params[nk], name="mean")
        out.excess_noise = (
            None if self.excess_noise is None else replace(params[nk + 1], name="excess_noise")
        )
        return out

    def values(self) -> dict[str, float]:
        """Hyperparameter values by name."""
        return {p.name: p.value for p in self.params}

    # --- what inference methods read -------------------------------------------
    @property
    def mean_value(self) -> float:
        return self.mean.value

    @property
    def excess_variance(self) -> float:
        return 0.0 if self.excess_noise is None else self.excess_noise.value ** 2

    def noise_variance(self, err: np.ndarray) -> np.ndarray:
        """Per-point noise variance ``err^2 + excess_noise^2``."""
        return err * err + self.excess_variance

    def noise_variance_grad(self) -> np.ndarray:
        """Derivative of each point's noise variance w.r.t. every parameter's coordinate.

        It is the same for every point: ``2 excess_noise^2`` for the excess noise,
        zero for everything else. Shape ``(len(params),)``.
        """
        g = np.zeros(len(self.params))
        if self.excess_noise is not None:
            g[-1] = 2 * self.excess_variance
        return g

    def mean_grad(self) -> np.ndarray:
        """Derivative of the mean w.r.t. every parameter's coordinate."""
        g = np.zeros(len(self.params))
        g[self.n_kernel_params] = 1.0
        return g

    def log_prior(self) -> tuple[float, np.ndarray]:
        """Sum of the parameters' log-priors and its gradient over free coordinates."""
        total, grad = 0.0, []
        for p in self.params:
            if p.fixed:
                continue
            if p.prior is None:
                grad.append(0.0)
                continue
            lp, g = p.prior.logpdf(p.coordinate)
            total += lp
            grad.append(g)
        return total, np.asarray(grad, dtype=float)

    def __repr__(self) -> str:
        noise = "" if self.excess_noise is None else f", excess_noise={self.excess_noise.value:.6g}"
        return f"Model({self.kernel!r}, mean={self.mean.value:.6g}{noise})"

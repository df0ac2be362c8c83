"""longwave: Gaussian-process regression for very long, irregularly sampled time series.

Quick use::

    import longwave as lw
    from longwave.kernels import Matern32
    series = lw.Series(t, y, err)
    result = lw.fit(lw.Model(Matern32(amplitude=1.0, scale=10.0), excess_noise=0.01), series)
    pred = lw.posterior(result.model, series).predict(t_grid)
"""

from ._config import apply_thread_environment

# Must run before numpy and numba start their thread pools; see _config.
apply_thread_environment()

from . import kernels, methods  # noqa: E402
from .inference import FitResult, fit, log_marginal_likelihood, posterior  # noqa: E402
from .model import Model  # noqa: E402
from .params import LogNormal, Normal, Param, fixed  # noqa: E402
from .series import Series  # noqa: E402

__version__ = "0.1.0"

__all__ = [
    "FitResult",
    "LogNormal",
    "Model",
    "Normal",
    "Param",
    "Series",
    "fit",
    "fixed",
    "kernels",
    "log_marginal_likelihood",
    "methods",
    "posterior",
]

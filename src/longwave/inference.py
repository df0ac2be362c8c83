"""Front functions: log marginal likelihood, fitting, posterior.

These validate once and hand clean objects to a method; the method does the
numerical work. Fitting maximises ``log p(y | theta) + log prior(theta)``
with scipy's L-BFGS-B in the free coordinates (log of positive parameters)
using the method's analytic gradient.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import minimize

from .methods import resolve
from .methods.base import Posterior
from .model import Model
from .series import Series


def _check_inputs(model, series, method):
    if not isinstance(model, Model):
        raise TypeError(
            f"model must be a longwave.Model, got {type(model).__name__}; wrap a kernel "
            "as Model(kernel)"
        )
    from .methods import ChunkedSeries, SparseMethod

    if isinstance(series, ChunkedSeries):
        method = resolve(method) if method is not None else None
        if not isinstance(method, SparseMethod):
            raise TypeError(
                "a ChunkedSeries (a series read in chunks) needs a sparse method, for "
                "example method=VFE(inducing=256); or pass a longwave.Series"
            )
    elif not isinstance(series, Series):
        raise TypeError(
            f"series must be a longwave.Series, got {type(series).__name__}; build one "
            "with Series(t, y, err)"
        )
    method = resolve(method if method is not None else default_method(model, series))
    method.check(model, series)
    return method.prepare(model, series)


def default_method(model: Model, series: Series):
    """Kalman when the kernel's state-space form is exact, else Exact.

    Approximate state-space forms (Periodic, SquaredExp) are used by Kalman
    only when asked for explicitly, since Kalman is then itself an approximation.
    """
    from .methods import Exact, Kalman

    return Kalman() if model.kernel.has_exact_state_space else Exact()


def log_marginal_likelihood(model, series, method=None, gradient: bool = False):
    """Log marginal likelihood of a series under a model.

    Parameters
    ----------
    model : Model
    series : Series
    method : Method or str, optional
        Default: Kalman if the kernel has an exact state-space form, else Exact.
    gradient : bool, default False
        Also return the gradient.

    Returns
    -------
    float, or (float, ndarray of shape (p,))
        The gradient is with respect to the free coordinates of
        ``model.free_names``: ``log(value)`` for positive parameters and the
        mean itself.
    """
    method = _check_inputs(model, series, method)
    ev = method.evaluate(model, series, gradient=gradient)
    return (ev.value, ev.grad) if gradient else ev.value


def posterior(model, series, method=None) -> Posterior:
    """Posterior of the process given ``series``; call ``.predict(t)`` on it."""
    method = _check_inputs(model, series, method)
    return method.posterior(model, series)


@dataclass
class FitResult:
    """Outcome of :func:`fit`.

    Attributes
    ----------
    model : Model
        The model at the best optimum found.
    log_marginal_likelihood : float
        At ``model``.
    log_posterior : float
        Log marginal likelihood plus log prior, the maximised objective.
    n_evaluations : int
        Objective evaluations over all starts.
    converged : bool
        Whether the best start's optimiser reported convergence.
    message : str
        The optimiser's message for the best start.
    method : str
        Name of the inference method used.
    runtime : float
        Wall seconds.
    extras : dict
        Method-specific figures at the optimum (sparse bounds, for example).
    starts : list of dict
        Per start: initial coordinates, final objective, converged flag.
    """

    model: Model
    log_marginal_likelihood: float
    log_posterior: float
    n_evaluations: int
    converged: bool
    message: str
    method: str
    runtime: float
    extras: dict = field(default_factory=dict)
    starts: list = field(default_factory=list)

    @property
    def params(self) -> dict[str, float]:
        """Fitted hyperparameter values by name."""
        return self.model.values()


def fit(model, series, method=None, *, restarts: int = 0, seed: int = 0,
        spread: float = 1.0, max_iter: int = 500, tol: float = 1e-9) -> FitResult:
    """Fit hyperparameters by maximising the log marginal likelihood plus log prior.

    Parameters
    ----------
    model : Model
        Initial values, bounds, fixed flags and priors come from here.
    series : Series
    method : Method or str, optional
        Default: Kalman if the kernel has an exact state-space form, else Exact.
    restarts : int, default 0
        Extra starts, drawn around the initial coordinates with standard
        deviation ``spread`` (log units for positive parameters), clipped to bounds.
    seed : int, default 0
        Seed of the restart generator.
    spread : float, default 1.0
    max_iter : int, default 500
        L-BFGS-B iteration limit per start.
    tol : float, default 1e-9
        L-BFGS-B ``ftol``, relative to the objective.

    Returns
    -------
    FitResult
        A fit that did not converge is reported (``converged=False``), not raised.
    """
    method = _check_inputs(model, series, method)
    if restarts < 0:
        raise ValueError(f"restarts must be >= 0, got {restarts}")
    start_time = time.perf_counter()
    x0 = model.coordinates()
    bounds = model.coordinate_bounds()
    n_eval = 0
    scale = max(series.n, 1)

    def objective(x):
        nonlocal n_eval
        n_eval += 1
        trial = model.with_coordinates(x)
        try:
            ev = method.evaluate(trial, series, gradient=True)
        except np.linalg.LinAlgError:
            return np.inf, np.zeros_like(x)
        lp, glp = trial.log_prior()
        value = ev.value + lp
        if not np.isfinite(value) or not np.all(np.isfinite(ev.grad)):
            return np.inf, np.zeros_like(x)
        # Scaled by n so that ftol means the same for short and long series.
        return -value / scale, -(ev.grad + glp) / scale

    rng = np.random.default_rng(seed)
    starts = [x0]
    for _ in range(restarts):
        x = x0 + spread * rng.standard_normal(x0.size)
        lo = np.array([-np.inf if b[0] is None else b[0] for b in bounds])
        hi = np.array([np.inf if b[1] is None else b[1] for b in bounds])
        starts.append(np.clip(x, lo, hi))
    best = None
    records = []
    for x_start in starts:
        if x0.size == 0:
            records.append({"start": [], "objective": float(objective(x0)[0] * scale),
                            "converged": True})
            best = (x0, True, "no free parameters")
            break
        res = minimize(objective, x_start, jac=True, method="L-BFGS-B", bounds=bounds,
                       options={"maxiter": max_iter, "ftol": tol, "gtol": 1e-6})
        records.append({"start": x_start.tolist(), "objective": float(-res.fun * scale),
                        "converged": bool(res.success)})
        if best is None or res.fun < best[3]:
            best = (res.x, bool(res.success), str(res.message), res.fun)
    fitted = model.with_coordinates(best[0])
    ev = method.evaluate(fitted, series, gradient=False)
    lp, _ = fitted.log_prior()
    return FitResult(
        model=fitted,
        log_marginal_likelihood=ev.value,
        log_posterior=ev.value + lp,
        n_evaluations=n_eval,
        converged=best[1],
        message=best[2],
        method=method.name,
        runtime=time.perf_counter() - start_time,
        extras=dict(ev.extras),
        starts=records,
    )

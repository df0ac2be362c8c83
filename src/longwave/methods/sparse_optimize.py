"""Joint optimisation of hyperparameters and inducing times of a sparse method.

The VFE bound is a proper objective for the inducing times as well as the
hyperparameters, since raising it can only tighten the approximation
(Titsias 2009, sec. 3); for FITC the same optimisation is common practice
(Snelson & Ghahramani 2006, sec. 3). ``longwave.fit`` optimises model
hyperparameters only, because inducing times belong to the method; this
module moves both at once with L-BFGS-B and the analytic gradients of
:meth:`SparseMethod.evaluate_inducing`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize


@dataclass(frozen=True)
class InducingFit:
    """Outcome of :func:`optimize_inducing`.

    Attributes
    ----------
    model : Model
        Fitted model (unchanged if ``hyperparameters=False``).
    method : SparseMethod
        The method with the optimised inducing times.
    value, initial_value : float
        Objective (plus log prior) at the end and at the start.
    converged : bool
    message : str
    n_evaluations : int
    """

    model: object
    method: object
    value: float
    initial_value: float
    converged: bool
    message: str
    n_evaluations: int


def optimize_inducing(model, series, method, *, hyperparameters: bool = True,
                      max_iter: int = 200, tol: float = 1e-9) -> InducingFit:
    """Maximise a sparse objective over inducing times (and hyperparameters).

    Parameters
    ----------
    model : Model
    series : Series or ChunkedSeries
    method : VFE or FITC
        Starting inducing times come from ``method.placed(model, series)``.
    hyperparameters : bool, default True
        Also move the model's free coordinates (with their bounds and priors).
    max_iter : int, default 200
        L-BFGS-B iterations.
    tol : float, default 1e-9
        L-BFGS-B ``ftol``.

    Returns
    -------
    InducingFit
    """
    from .sparse import SparseMethod

    if not isinstance(method, SparseMethod):
        raise TypeError(
            f"optimize_inducing needs a sparse method (VFE or FITC), got {method!r}; "
            "for example optimize_inducing(model, series, VFE(inducing=64))"
        )
    method = method.placed(model, series)
    z0 = np.asarray(method.inducing, dtype=float)
    x_model = model.coordinates() if hyperparameters else np.zeros(0)
    k = x_model.size
    bounds = (model.coordinate_bounds() if hyperparameters else []) + [(None, None)] * z0.size
    n_eval = 0
    scale = max(series.n, 1)

    def split(x):
        trial = model.with_coordinates(x[:k]) if hyperparameters else model
        return trial, x[k:]

    def objective(x):
        nonlocal n_eval
        n_eval += 1
        trial, z = split(x)
        try:
            ev, gz = method.evaluate_inducing(trial, series, z)
        except np.linalg.LinAlgError:
            return np.inf, np.zeros_like(x)
        lp, glp = trial.log_prior()
        grad = np.concatenate([ev.grad + glp if hyperparameters else np.zeros(0), gz])
        value = ev.value + lp
        if not np.isfinite(value) or not np.all(np.isfinite(grad)):
            return np.inf, np.zeros_like(x)
        return -value / scale, -grad / scale

    x0 = np.concatenate([x_model, z0])
    start = -objective(x0)[0] * scale
    res = minimize(objective, x0, jac=True, method="L-BFGS-B", bounds=bounds,
                   options={"maxiter": max_iter, "ftol": tol, "gtol": 1e-8})
    fitted, z = split(res.x)
    return InducingFit(model=fitted, method=method._copy(inducing=np.sort(z)),
                       value=float(-res.fun * scale), initial_value=float(start),
                       converged=bool(res.success), message=str(res.message),
                       n_evaluations=n_eval)

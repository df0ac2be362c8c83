"""The per-object pipeline: numpy arrays in, one :class:`ObjectResult` out.

Steps, for one object: validate (a bad object is *recorded*, never raised),
build the model with starting values from the data, fit, optionally clip
outliers and refit, summarise, optionally predict on a grid. The survey
runner calls :func:`fit_batch` on workers; anything else (a notebook, another
pipeline) can call :func:`fit_object` directly.
"""

from __future__ import annotations

import math
import time
import traceback
from dataclasses import dataclass

import numpy as np

from .. import methods
from .._config import limit_threads
from ..inference import fit, posterior
from ..storage.records import ObjectResult
from ..storage.stored_batch import StoredBatch
from .initial import DataScales, build_model
from .spec import ModelSpec, parse_spec
from .validate import MIN_POINTS, check_object

# Method names the survey accepts besides those registered in longwave.methods.
AUTO = "auto"
# "auto" uses dense exact inference up to this many points when the kernel has
# no exact state-space form: at n = 2000 one gradient evaluation takes about a
# second, so beyond it a sparse method is the better deal.
AUTO_EXACT_MAX_N = 2000
# Sparse methods "auto" tries, in order of preference, when registered.
SPARSE_PREFERENCE = ("vfe", "fitc")


@dataclass(frozen=True)
class PredictionGrid:
    """Prediction times for one object: a fixed step or a fixed count over its span.

    Parameters
    ----------
    step : float, optional
        Spacing, in the time unit of the data. The grid runs from the first
        time to the last.
    count : int, optional
        Number of evenly spaced times from the first to the last.
    max_points : int, default 1_000_000
        Larger grids are skipped (recorded in the message), so one object with
        a long span and a small step cannot exhaust a worker's memory.

    Exactly one of ``step`` and ``count`` is given.
    """

    step: float | None = None
    count: int | None = None
    max_points: int = 1_000_000

    def __post_init__(self):
        if (self.step is None) == (self.count is None):
            raise ValueError(
                f"give exactly one of step and count, got step={self.step}, count={self.count};"
                " for example PredictionGrid(step=0.5) or PredictionGrid(count=1000)")
        if self.step is not None and not (self.step > 0 and math.isfinite(self.step)):
            raise ValueError(f"grid step must be positive and finite, got {self.step}")
        if self.count is not None and (int(self.count) != self.count or self.count < 2):
            raise ValueError(f"grid count must be a whole number >= 2, got {self.count}")

    def size(self, t0: float, t1: float) -> int:
        if self.count is not None:
            return int(self.count)
        return int(math.floor((t1 - t0) / self.step + 1e-9)) + 1

    def times(self, t0: float, t1: float) -> np.ndarray:
        """PredictionGrid times over ``[t0, t1]``."""
        if self.count is not None:
            return np.linspace(t0, t1, int(self.count))
        return t0 + self.step * np.arange(self.size(t0, t1))

    def describe(self) -> dict:
        return {"step": self.step, "count": self.count, "max_points": self.max_points}


@dataclass(frozen=True)
class GridPrediction:
    """Posterior of the latent process ``mean + f`` on an object's grid.

    Attributes
    ----------
    t, mean, std : ndarray of shape (k,)
    """

    t: np.ndarray
    mean: np.ndarray
    std: np.ndarray


@dataclass
class ObjectFit:
    """What :func:`fit_object` returns: the record, and the prediction if asked for."""

    result: ObjectResult
    prediction: GridPrediction | None = None


def choose_method(model, n: int, method: str = AUTO, inducing: int | None = None):
    """The inference method for one object (``auto`` decides from the kernel and n).

    ``auto``: Kalman when the kernel's state-space form is exact (O(n), and
    as exact as dense algebra, so it wins at every n); otherwise Exact up to
    :data:`AUTO_EXACT_MAX_N` points; otherwise the first registered sparse
    method of :data:`SPARSE_PREFERENCE`. A named method is resolved through
    :func:`longwave.methods.resolve`, the one place names map to classes.

    Returns
    -------
    Method
    """
    options = {} if inducing is None else {"inducing": int(inducing)}
    name = method.lower()
    if name != AUTO:
        sparse = name in SPARSE_PREFERENCE
        return methods.resolve(name, **(options if sparse else {}))
    kernel = model.kernel
    if kernel.has_exact_state_space:
        return methods.resolve("kalman")
    if n <= AUTO_EXACT_MAX_N:
        return methods.resolve("exact")
    for sparse in SPARSE_PREFERENCE:
        if sparse in methods.REGISTRY:
            return methods.resolve(sparse, **options)
    raise ValueError(
        f"auto: the kernel {kernel!r} has no exact state-space form and n={n} exceeds "
        f"{AUTO_EXACT_MAX_N}, but no sparse method ({', '.join(SPARSE_PREFERENCE)}) is "
        "registered; pass method='exact' to fit densely anyway")


def _standardised(post, t_all, y_all, err_all):
    """Residuals of every point against the posterior predictive of a new observation."""
    pred = post.predict(t_all, observed=True, err=err_all)
    return (y_all - pred.mean) / np.sqrt(pred.var)


def _reduced_chi2(post, series, n_free: int) -> float:
    # Residuals about the posterior mean, in units of each point's noise
    # (error bar and excess noise): near or below 1 for an adequate model.
    mean = post.predict(series.t).mean
    noise = post.model.noise_variance(series.err)
    dof = series.n - n_free
    if dof <= 0 or np.any(noise <= 0):
        return float("nan")
    return float(np.sum((series.y - mean) ** 2 / noise) / dof)


def fit_object(t, y, err=None, *, model_spec, method: str = AUTO, clip: float | None = None,
               max_clip_iter: int = 5, grid: PredictionGrid | None = None,
               inducing: int | None = None, id: str = "") -> ObjectFit:
    """Fit one object and summarise it; bad data are recorded, never raised.

    Parameters
    ----------
    t, y : array_like of shape (n,)
        Times (any order, duplicates allowed) and values.
    err : array_like of shape (n,), optional
        One-sigma error bars.
    model_spec : str or ModelSpec
        Model specification (see :mod:`longwave.survey.spec`).
    method : str, default "auto"
        ``auto`` or a name registered in :mod:`longwave.methods` (``exact``,
        ``kalman``, ``vfe``, ``fitc``); see :func:`choose_method`.
    clip : float, optional
        Iterative sigma clipping: after each fit, points whose standardised
        residual against the posterior predictive exceeds ``clip`` are left
        out of the next fit, until the set stops changing or
        ``max_clip_iter`` refits (common practice). Default: no clipping.
    max_clip_iter : int, default 5
    grid : PredictionGrid, optional
        Also return the posterior on this grid.
    inducing : int, optional
        Inducing points for sparse methods.
    id : str, default ""
        Object id, copied into the result.

    Returns
    -------
    ObjectFit
        ``result.status`` is ``ok``, ``not_converged``, ``bad_input`` (with
        the reason in ``message``) or ``failed`` (the error in ``message``).

    Raises
    ------
    SpecError, ValueError, TypeError
        Only for bad *settings* (specification, method name, clip value),
        which would fail every object alike.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> t = np.sort(rng.uniform(0, 100, 200))
    >>> y = np.sin(t / 5) + 0.1 * rng.standard_normal(200)
    >>> out = fit_object(t, y, 0.1, model_spec="matern32 with noise=none", id="a")
    >>> out.result.status, out.result.method
    ('ok', 'kalman')
    >>> fit_object([0.0, 1.0], [1.0, 2.0], model_spec="matern32").result.status
    'bad_input'
    """
    return fit_object_with_posterior(
        t, y, err, model_spec=model_spec, method=method, clip=clip,
        max_clip_iter=max_clip_iter, grid=grid, inducing=inducing, id=id)[0]


def fit_object_with_posterior(t, y, err=None, *, model_spec, method=AUTO, clip=None,
                              max_clip_iter=5, grid=None, inducing=None, id="",
                              method_wrapper=None):
    """:func:`fit_object`, also returning the final posterior and the points fitted.

    For callers that go on predicting (``longwave fit`` streams a long grid
    to disk). ``method_wrapper``, if given, wraps the chosen method object
    (for example to count evaluations for a progress bar).

    Returns
    -------
    ObjectFit, Posterior or None, Series or None
        ``None`` for objects that were not fitted.
    """
    start = time.perf_counter()
    spec = parse_spec(model_spec) if isinstance(model_spec, str) else model_spec
    if not isinstance(spec, ModelSpec):
        raise TypeError(f"model_spec must be a string or ModelSpec, got {type(spec).__name__};"
                        " for example model_spec='matern32 + matern12'")
    if clip is not None and not (clip > 0 and math.isfinite(clip)):
        raise ValueError(f"clip must be a positive number of sigmas, got {clip}; e.g. clip=5")
    if method.lower() != AUTO and method.lower() not in methods.REGISTRY:
        methods.resolve(method)  # raises, naming the valid choices
    id = str(id)
    checked = check_object(t, y, err)
    if checked.series is None:
        return ObjectFit(ObjectResult(id=id, status="bad_input", message=checked.reason,
                                      runtime=time.perf_counter() - start)), None, None
    try:
        return _fit_clean(checked, spec, method, clip, max_clip_iter, grid, inducing, id,
                          start, method_wrapper)
    except Exception as exc:  # one object's failure must not stop a survey
        where = traceback.extract_tb(exc.__traceback__)[-1]
        return ObjectFit(ObjectResult(
            id=id, status="failed", n=checked.series.n, runtime=time.perf_counter() - start,
            message=f"{type(exc).__name__}: {exc} (at {where.name}, line {where.lineno})")
        ), None, None


def _fit_clean(checked, spec, method, clip, max_clip_iter, grid, inducing, id, start,
               method_wrapper):
    full = checked.series
    model = build_model(spec, DataScales.from_arrays(full.t, full.y,
                                                     full.err if full.has_err else None))
    n_free = int(model.free_mask.sum())
    chosen = choose_method(model, full.n, method, inducing)
    if method_wrapper is not None:
        chosen = method_wrapper(chosen)
    keep = np.ones(full.n, dtype=bool)
    series, notes = full, [checked.notes] if checked.notes else []
    result = fit(model, series, chosen)
    post = posterior(result.model, series, chosen)
    evaluations = result.n_evaluations
    for _ in range(max_clip_iter if clip is not None else 0):
        err_all = full.err if full.has_err else None
        z = _standardised(post, full.t, full.y, err_all)
        new_keep = np.abs(z) <= clip
        if np.array_equal(new_keep, keep):
            break
        if new_keep.sum() < max(MIN_POINTS, n_free + 1):
            notes.append(f"clipping stopped: it would leave {int(new_keep.sum())} points")
            break
        keep = new_keep
        series = full.subset(np.flatnonzero(keep))
        # Warm start from the previous optimum: the refit moves little.
        result = fit(result.model, series, chosen)
        evaluations += result.n_evaluations
        post = posterior(result.model, series, chosen)
    prediction = None
    if grid is not None:
        size = grid.size(full.t[0], full.t[-1])
        if size > grid.max_points:
            notes.append(f"prediction skipped: grid of {size} points exceeds max_points="
                         f"{grid.max_points}")
        else:
            tg = grid.times(full.t[0], full.t[-1])
            pred = post.predict(tg)
            prediction = GridPrediction(tg, pred.mean, pred.std)
    extras = result.extras
    gap = extras.get("bound_gap", float("nan"))
    message = "; ".join([result.message] + notes)
    return ObjectFit(ObjectResult(
        id=id, status="ok" if result.converged else "not_converged", method=result.method,
        n=series.n, params=result.params, log_marginal_likelihood=result.log_marginal_likelihood,
        bound_gap=float(gap), n_evaluations=evaluations, converged=result.converged,
        message=message, runtime=time.perf_counter() - start,
        reduced_chi2=_reduced_chi2(post, series, n_free), n_clipped=int(full.n - keep.sum()),
    ), prediction), post, series


@dataclass(frozen=True)
class PipelineConfig:
    """Settings shared by every object of a run (picklable, sent once per task).

    Attributes mirror the keywords of :func:`fit_object`.
    """

    model: ModelSpec
    method: str = AUTO
    clip: float | None = None
    max_clip_iter: int = 5
    grid: PredictionGrid | None = None
    inducing: int | None = None

    def describe(self) -> dict:
        """JSON-compatible form, stored in result files and compared on resume."""
        return {"model": self.model.text, "method": self.method, "clip": self.clip,
                "max_clip_iter": self.max_clip_iter, "inducing": self.inducing,
                "grid": None if self.grid is None else self.grid.describe()}


def fit_batch(batch, config: PipelineConfig, threads: int = 1) -> list[ObjectFit]:
    """Fit a batch of objects (anything with ``id``, ``t``, ``y``, ``err``) in order.

    ``batch`` may also be a :class:`~longwave.storage.stored_batch.StoredBatch`,
    whose objects are read from the survey file here.

    Runs with BLAS and numba threads held at ``threads``: survey parallelism
    comes from processes, and nested threads would compete for the same cores.
    """
    if isinstance(batch, StoredBatch):  # a reference: read the objects here
        batch = batch.read()
    with limit_threads(threads):
        return [fit_object(obj.t, obj.y, obj.err, model_spec=config.model,
                           method=config.method, clip=config.clip,
                           max_clip_iter=config.max_clip_iter, grid=config.grid,
                           inducing=config.inducing, id=obj.id)
                for obj in batch]


def warm_up(config: PipelineConfig) -> float:
    """Fit a small synthetic object once, so that the first real batch runs at full speed.

    A fresh process spends about a second importing the pipeline and loading
    the compiled loops from numba's cache on its first fit. Running that
    before the survey keeps the progress bar's rate honest and lets a
    cluster's workers do it in parallel while the client opens its files.

    Returns
    -------
    float
        Wall seconds taken.
    """
    start = time.perf_counter()
    rng = np.random.default_rng(0)
    t = np.sort(rng.uniform(0.0, 100.0, 64))
    y = np.sin(t / 7.0) + 0.1 * rng.standard_normal(t.size)
    with limit_threads(1):
        fit_object(t, y, np.full(t.size, 0.1), model_spec=config.model, method=config.method,
                   grid=PredictionGrid(count=8), inducing=config.inducing)
    return time.perf_counter() - start

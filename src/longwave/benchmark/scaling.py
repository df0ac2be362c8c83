"""Scaling mode: each method's time and memory against n, and the growth exponent.

Synthetic series (seeded, O(n) to draw) from n = 1e3 up to a configurable
maximum (default 1e7). At each size every method is timed for one log
marginal likelihood evaluation with gradient (one optimiser step) and for
building its posterior and predicting at the n data times. A method stops
growing when its ``check`` refuses the size (Exact at its limit) or when the
next size would, extrapolating its measured growth, exceed the time budget.
Expect exponents near 1 for Kalman and for sparse methods at fixed m, near
3 for Exact.
"""

from __future__ import annotations

import math

import numpy as np

from ..kernels import Matern32
from ..model import Model
from ..simulate import simulate_series
from .kernel_options import apply_kernel_options
from .results import ScalingCurve, ScalingPoint, ScalingResult
from .timing import time_best

#: Calls faster than this are dominated by fixed overheads and left out of the slope fit.
TIME_FLOOR_SECONDS = 0.02
MEMORY_FLOOR_MB = 1.0


def size_grid(min_n: int = 1000, max_n: int = 10**7, per_decade: int = 3) -> list[int]:
    """Sizes from ``min_n`` to ``max_n``, evenly spaced in log n.

    ``per_decade=3`` gives the 1, 2, 5 sequence; other values give
    ``per_decade`` log-spaced sizes per factor of ten, rounded.

    Examples
    --------
    >>> size_grid(1000, 20000)
    [1000, 2000, 5000, 10000, 20000]
    """
    if not (isinstance(min_n, (int, np.integer)) and min_n >= 10):
        raise ValueError(f"min_n must be an integer >= 10, got {min_n!r}")
    if not max_n >= min_n:
        raise ValueError(f"max_n must be at least min_n = {min_n}, got {max_n!r}")
    if per_decade < 1:
        raise ValueError(f"per_decade must be >= 1, got {per_decade}")
    if per_decade == 3:
        out, decade = [], 10 ** int(math.floor(math.log10(min_n)))
        while decade <= max_n:
            out += [k * decade for k in (1, 2, 5) if min_n <= k * decade <= max_n]
            decade *= 10
        return out
    steps = int(math.floor(per_decade * math.log10(max_n / min_n) + 1e-9))
    return sorted({int(round(min_n * 10 ** (i / per_decade))) for i in range(steps + 1)})


def growth_exponent(n, cost, floor: float) -> float:
    """Least-squares slope of ``log cost`` against ``log n``.

    Only points with ``cost >= floor`` are used, since fixed overheads flatten
    the smallest sizes; if fewer than two qualify, the two largest sizes are
    used. NaN with fewer than two points (common practice for empirical
    complexity).
    """
    n, cost = np.asarray(n, float), np.asarray(cost, float)
    ok = np.isfinite(cost) & (cost > 0)
    n, cost = n[ok], cost[ok]
    if n.size < 2:
        return float("nan")
    keep = cost >= floor
    if keep.sum() < 2:
        keep = np.zeros(n.size, bool)
        keep[-2:] = True
    return float(np.polyfit(np.log(n[keep]), np.log(cost[keep]), 1)[0])


def synthetic_model() -> Model:
    """The model scaling mode simulates and evaluates: Matérn-3/2, scale 20 (mean spacing 1)."""
    return Model(Matern32(amplitude=1.0, scale=20.0), mean=0.0)


def synthetic_series(model: Model, n: int, seed: int = 0):
    """``n`` points with exponential gaps of mean 1 and error bars 0.1, drawn from ``model``."""
    rng = np.random.default_rng([seed, n])
    t = np.cumsum(rng.exponential(1.0, n))
    series, _ = simulate_series(model, t, err=0.1, rng=rng)
    return series


def warm_up(method, model, series) -> None:
    """One untimed call of each kind, so that compilation is not billed to the first size."""
    try:
        method.evaluate(model, series, gradient=True)
        _predict(method, model, series)
    except Exception:  # noqa: BLE001 - the measured calls report any real problem
        pass


def _predict(method, model, series):
    return method.posterior(model, series).predict(series.t)


def measure_point(method, model, series, *, predict: bool = True) -> ScalingPoint:
    """Time one evaluation with gradient (and, optionally, one prediction) at one size.

    Fast calls are repeated and the best time kept (:func:`.timing.time_best`).
    """
    _, ev = time_best(method.evaluate, model, series, gradient=True)
    point = ScalingPoint(series.n, ev.seconds, ev.peak_mb)
    if predict:
        _, pr = time_best(_predict, method, model, series)
        point.predict_seconds, point.predict_peak_mb = pr.seconds, pr.peak_mb
    return point


def finish_curve(curve: ScalingCurve) -> ScalingCurve:
    """Fill in the growth exponents from the measured points."""
    n = [p.n for p in curve.points]
    curve.time_exponent = growth_exponent(
        n, [p.evaluate_seconds for p in curve.points], TIME_FLOOR_SECONDS)
    curve.memory_exponent = growth_exponent(
        n, [p.evaluate_peak_mb for p in curve.points], MEMORY_FLOOR_MB)
    curve.predict_time_exponent = growth_exponent(
        n, [p.predict_seconds for p in curve.points], TIME_FLOOR_SECONDS)
    curve.predict_memory_exponent = growth_exponent(
        n, [p.predict_peak_mb for p in curve.points], MEMORY_FLOOR_MB)
    return curve


def run_scaling(candidates, *, sizes=None, max_n: int = 10**7, seed: int = 0,
                model: Model | None = None, time_budget: float = 60.0, predict: bool = True,
                progress=None) -> ScalingResult:
    """Time every method on synthetic series of growing n.

    Parameters
    ----------
    candidates : sequence of Candidate
        From :func:`.settings.parse_methods`.
    sizes : sequence of int, optional
        Default ``size_grid(1000, max_n)``.
    max_n : int, default 10_000_000
    seed : int, default 0
    model : Model, optional
        Default :func:`synthetic_model`; it needs a state-space form or a dense
        draw (n <= 10000) to be simulated.
    time_budget : float, default 60.0
        Seconds one call may take; a method stops before a size predicted to exceed it.
    predict : bool, default True
        Also time posterior plus prediction.
    progress : callable, optional
        Called with one line of text per measurement.

    Returns
    -------
    ScalingResult
    """
    if not time_budget > 0:
        raise ValueError(f"time_budget must be positive seconds, got {time_budget}")
    model = synthetic_model() if model is None else model
    sizes = size_grid(1000, max_n) if sizes is None else sorted(int(n) for n in sizes)
    curves = {c.label: ScalingCurve(c.label) for c in candidates}
    tiny = synthetic_series(model, 200, seed)
    for cand in candidates:
        warm_up(cand.method, apply_kernel_options(model, cand.kernel_options, cand.label), tiny)
    active = list(candidates)
    for i, n in enumerate(sizes):
        if not active:
            break
        series = synthetic_series(model, n, seed)
        for cand in list(active):
            curve = curves[cand.label]
            own = apply_kernel_options(model, cand.kernel_options, cand.label)
            m = cand.method.describe().get("inducing")
            if isinstance(m, int) and m >= n:
                continue  # not an approximation yet at this size; start at a larger n
            try:
                cand.method.check(own, series)
                point = measure_point(cand.method, own, series, predict=predict)
            except ValueError as exc:
                curve.stopped = f"refused at n={n}: {exc}"
                active.remove(cand)
                continue
            except MemoryError:
                curve.stopped = f"out of memory at n={n}"
                active.remove(cand)
                continue
            curve.points.append(point)
            if progress:
                progress(f"scaling {cand.label:>24s} n={n:>9d} "
                         f"evaluate {point.evaluate_seconds:9.4f} s")
            if i + 1 < len(sizes):
                # Extrapolate this method's own growth (at least linear) to the next size.
                slope = finish_curve(curve).time_exponent
                slope = slope if slope > 1.0 else 1.0  # also when NaN (one point so far)
                spent = point.evaluate_seconds + (point.predict_seconds if predict else 0.0)
                guess = spent * (sizes[i + 1] / n) ** slope
                if guess > time_budget:
                    curve.stopped = (f"next size n={sizes[i + 1]} would take about {guess:.3g} s, "
                                     f"over the {time_budget:g} s budget")
                    active.remove(cand)
        del series
    return ScalingResult(model=repr(model), seed=seed, sizes=list(sizes),
                         curves=[finish_curve(c) for c in curves.values()])

"""Benchmark several objects of a survey and recommend one setting for all of them.

Each object is benchmarked on its own (:func:`.runner.run_benchmark`, with
starting values from its own data). The combined verdict is worst-case: a
setting's accuracy is its worst over the objects and its cost the sum, so
the recommended setting met the tolerance on every object sampled.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

from .recommend import Recommendation, choose_setting
from .results import MethodResult
from .runner import CAUTIONS, BenchmarkResult, run_benchmark


@dataclass
class ObjectBenchmark:
    """One object's benchmark. Attributes: ``id`` (str), ``result`` (BenchmarkResult)."""

    id: str
    result: BenchmarkResult


@dataclass
class BatchResult:
    """Outcome of :func:`run_objects`.

    Attributes
    ----------
    objects : list of ObjectBenchmark
    combined : list of MethodResult
        Per setting, worst accuracy and summed cost over the objects.
    recommendation : Recommendation
        From ``combined``.
    cautions : list of str
    """

    objects: list
    combined: list
    recommendation: Recommendation
    cautions: list = field(default_factory=lambda: list(CAUTIONS))


def combine(per_object) -> list[MethodResult]:
    """Worst case over objects for each setting (see the module docstring).

    Parameters
    ----------
    per_object : sequence of list of MethodResult
        One list per object, every list in the same setting order.
    """
    out = []
    for rows in zip(*per_object):
        first = rows[0]
        bad = next((r for r in rows if r.status != "ok"), None)
        if bad is not None:
            out.append(replace(first, status=bad.status, message=bad.message))
            continue
        worst_lml = max(rows, key=lambda r: abs(r.lml_diff_per_point))
        not_full = next((r for r in rows if not r.full_series_ok), None)
        out.append(MethodResult(
            label=first.label, description=first.description,
            full_series_ok=not_full is None,
            full_series_message="" if not_full is None else not_full.full_series_message,
            lml_diff_per_point=worst_lml.lml_diff_per_point,
            mean_error_sigma=max(r.mean_error_sigma for r in rows),
            max_error_sigma=max(r.max_error_sigma for r in rows),
            variance_ratio=min(r.variance_ratio for r in rows),
            min_variance_ratio=min(r.min_variance_ratio for r in rows),
            mean_kl=max(r.mean_kl for r in rows),
            evaluate_seconds=sum(r.evaluate_seconds for r in rows),
            evaluate_peak_mb=max(r.evaluate_peak_mb for r in rows),
            fit_seconds=sum(r.fit_seconds for r in rows),
            fit_peak_mb=max(r.fit_peak_mb for r in rows),
            predict_seconds=sum(r.predict_seconds for r in rows),
            predict_peak_mb=max(r.predict_peak_mb for r in rows),
            fit_converged=all(r.fit_converged for r in rows),
        ))
    return out


def run_objects(objects, model_for, candidates, *, tolerance=None, progress=None,
                **options) -> BatchResult:
    """Benchmark each ``(id, series)`` and recommend one setting for all.

    Parameters
    ----------
    objects : sequence of (str, Series)
    model_for : callable
        ``model_for(series) -> Model``: the starting model for one object.
    candidates : sequence of Candidate
    tolerance : Tolerance, optional
    progress : callable, optional
    **options
        Passed to :func:`.runner.run_benchmark` (it rejects unknown ones).

    Returns
    -------
    BatchResult
    """
    say = progress or (lambda _msg: None)
    done = []
    for ident, series in objects:
        say(f"object {ident}: {series.n} points")
        result = run_benchmark(series, model_for(series), candidates, tolerance=tolerance,
                               progress=progress, **options)
        done.append(ObjectBenchmark(ident, result))
    if not done:
        raise ValueError("no objects to benchmark; pass at least one (id, series)")
    combined = combine([o.result.methods for o in done])
    tol = done[0].result.recommendation.tolerance
    labels = sorted({o.result.reference.label for o in done})
    return BatchResult(done, combined, choose_setting(combined, tol, " / ".join(labels)))

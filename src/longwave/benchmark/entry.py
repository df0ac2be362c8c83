"""File-level entry points: what ``longwave bench`` and the bench scripts call.

Each reads its inputs, runs the benchmark, writes the report directory and
returns the terminal summary with the files written, so the command line
stays a thin wrapper.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..methods import REGISTRY
from .batch import run_objects
from .inputs import is_survey_file, load_objects, model_from_spec
from .recommend import Tolerance
from .reference import DEFAULT_REFERENCE_MAX_N, Holdout
from .report import summary_text, write_batch_report, write_report, write_scaling_report
from .runner import run_benchmark
from .scaling import run_scaling, size_grid
from .settings import parse_methods

#: Model specification used when none is given.
DEFAULT_MODEL = "matern32"

#: Settings tried by default for methods that need one (registered names only).
_DEFAULT_SETTINGS = {"vfe": "vfe:m=64,128,256", "fitc": "fitc:m=64,128,256"}


def default_methods() -> list[str]:
    """Every registered method, with a few inducing-point counts for the sparse ones."""
    return [_DEFAULT_SETTINGS.get(name, name) for name in sorted(REGISTRY)]


@dataclass
class Outcome:
    """What an entry point did.

    Attributes
    ----------
    text : str
        Terminal summary.
    files : dict of str to Path
        Files written.
    result : object
        ``BenchmarkResult``, ``BatchResult`` or ``ScalingResult``.
    """

    text: str
    files: dict
    result: object


def benchmark_file(path, out_dir, *, model: str = DEFAULT_MODEL, methods=None,
                   tolerance: float = 0.01, tol_lml: float | None = None,
                   tol_mean: float | None = None, tol_kl: float | None = None,
                   seed: int = 0, objects: int | None = None,
                   reference_max_n: int = DEFAULT_REFERENCE_MAX_N, fit: bool = True,
                   restarts: int = 0, gaps: int = 3, gap_fraction: float = 0.02,
                   forecast_fraction: float = 0.05, hdf5: bool = False,
                   progress=None) -> Outcome:
    """Benchmark the series (or sampled survey objects) in ``path``; write ``out_dir``.

    Parameters
    ----------
    path : str or Path
        CSV, ``.npy``/``.npz`` or survey HDF5 file (see :mod:`.inputs`).
    out_dir : str or Path
    model : str, default "matern32"
        Model specification (:mod:`longwave.survey.spec`) or a ``.toml`` model file.
    methods : str or sequence of str, optional
        Setting strings (:mod:`.settings`); default :func:`default_methods`.
    tolerance : float, default 0.01
        Nats; see :mod:`.recommend` for the three bounds it sets.
    tol_lml, tol_mean, tol_kl : float, optional
        Override one bound each.
    seed : int, default 0
    objects : int, optional
        Survey objects to sample (default 3); survey files only.
    reference_max_n : int, default 5000
    fit, restarts : see :func:`.runner.run_benchmark`
    gaps, gap_fraction, forecast_fraction : see :class:`.reference.Holdout`
    hdf5 : bool, default False
        Also write ``report.h5`` through the storage layer.
    progress : callable, optional

    Returns
    -------
    Outcome
    """
    tol = Tolerance.from_nats(tolerance, lml_per_point=tol_lml, mean_error_sigma=tol_mean,
                              kl=tol_kl)
    candidates = parse_methods(default_methods() if methods is None else methods)
    holdout = Holdout(n_gaps=gaps, gap_fraction=gap_fraction,
                      forecast_fraction=forecast_fraction)
    items = load_objects(path, objects, seed)
    options = dict(tolerance=tol, seed=seed, reference_max_n=reference_max_n, holdout=holdout,
                   fit=fit, restarts=restarts, progress=progress)
    if not is_survey_file(path):
        ident, series = items[0]
        result = run_benchmark(series, model_from_spec(model, series), candidates, **options)
        result.config["input"], result.config["model_spec"] = str(path), model
        title = f"{ident}: {series.n} points"
        files = write_report(result, out_dir, title=title, hdf5=hdf5)
        return Outcome(summary_text(result, title), files, result)
    batch = run_objects(items, lambda s: model_from_spec(model, s), candidates, **options)
    files = write_batch_report(batch, out_dir, hdf5=hdf5)
    return Outcome(files["summary"].read_text(encoding="utf-8").rstrip(), files, batch)


def scaling_to_dir(out_dir, *, methods=None, min_n: int = 1000, max_n: int = 10**7,
                   seed: int = 0, time_budget: float = 60.0, predict: bool = True,
                   progress=None) -> Outcome:
    """Scaling mode (:func:`.scaling.run_scaling`) with its report written to ``out_dir``."""
    candidates = parse_methods(default_methods() if methods is None else methods)
    result = run_scaling(candidates, sizes=size_grid(min_n, max_n), seed=seed,
                         time_budget=time_budget, predict=predict, progress=progress)
    files = write_scaling_report(result, out_dir)
    return Outcome(files["summary"].read_text(encoding="utf-8").rstrip(), files, result)

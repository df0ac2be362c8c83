"""One long series: the survey pipeline on a single object, its posterior streamed to disk.

``longwave fit`` calls :func:`fit_series`. The fit is :func:`fit_object`'s
(same validation, starting values, clipping and summary); the prediction
grid, which may be far larger than memory, is then written chunk by chunk
by :func:`longwave.storage.predict_to_hdf5`, with progress bars on stderr
for the optimiser's evaluations and for the grid.
"""

from __future__ import annotations

import json
import sys
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
from tqdm import tqdm

from ..methods.base import Method
from ..storage import LayoutError, ResultStore, SurveyFile, open_series, predict_to_hdf5
from ..storage.tables import read_object_csv
from .initial import param_names
from .pipeline import AUTO, PipelineConfig, PredictionGrid, fit_object_with_posterior
from .spec import ModelSpec, parse_spec


class _Counted(Method):
    """A method that moves a progress bar at each evaluation (delegates everything)."""

    def __init__(self, inner: Method, bar):
        self.inner, self.bar, self.name = inner, bar, inner.name

    def check(self, model, series):
        return self.inner.check(model, series)

    def evaluate(self, model, series, gradient: bool = False):
        out = self.inner.evaluate(model, series, gradient=gradient)
        self.bar.update(1)
        return out

    def posterior(self, model, series):
        return self.inner.posterior(model, series)

    def describe(self) -> dict:
        return self.inner.describe()


class _Progressed:
    """A posterior whose ``predict`` moves a progress bar by the points predicted."""

    def __init__(self, post, bar):
        self.post, self.bar = post, bar

    def predict(self, t, **options):
        out = self.post.predict(t, **options)
        self.bar.update(len(t))
        return out


def _npz_column(data, names, path, role):
    for name in names:
        if name in data:
            return np.asarray(data[name], dtype=float)
    if role == "err":
        return None
    raise ValueError(f"{path}: needs an array named one of {names} for {role}; it holds "
                     f"{sorted(data)}. Save it as np.savez(path, t=t, y=y, err=err)")


def read_series_input(path, *, id=None, columns=None):
    """``(t, y, err)`` of one series from CSV, ``.npy``, ``.npz`` or HDF5.

    Parameters
    ----------
    path : str or Path
        ``.csv``: a table with time, value and (optionally) error columns
        (common spellings recognised, or name them in ``columns``).
        ``.npy``: an array of shape (n, 2) or (n, 3): t, y[, err].
        ``.npz``: arrays ``t``, ``y``, optional ``err`` (or ``time``, ``value``, ``error``).
        ``.h5``: a series file, or a survey file with ``id`` naming the object.
    id : str, optional
        Object of a survey file.
    columns : dict, optional
        CSV column names by role (``time``, ``value``, ``error``).
    """
    path = Path(path)
    if not path.exists():
        raise FileNotFoundError(f"series input {path} does not exist")
    suffix = path.suffixes[-2].lower() if path.suffix.lower() == ".gz" and len(
        path.suffixes) > 1 else path.suffix.lower()
    if id is not None and suffix not in (".h5", ".hdf5", ".hdf"):
        raise ValueError(f"--id selects an object of a survey HDF5 file, but {path} is not one")
    if suffix in (".csv", ".txt"):
        return read_object_csv(path, columns=columns)
    if suffix == ".npy":
        arr = np.load(path, mmap_mode="r")
        if arr.ndim != 2 or arr.shape[1] not in (2, 3):
            raise ValueError(f"{path}: a .npy series must have shape (n, 2) or (n, 3) for "
                             f"t, y[, err], got {arr.shape}; save np.column_stack([t, y, err])")
        return (np.array(arr[:, 0], float), np.array(arr[:, 1], float),
                np.array(arr[:, 2], float) if arr.shape[1] == 3 else None)
    if suffix == ".npz":
        with np.load(path) as data:
            return (_npz_column(data, ("t", "time"), path, "t"),
                    _npz_column(data, ("y", "value"), path, "y"),
                    _npz_column(data, ("err", "error"), path, "err"))
    if suffix in (".h5", ".hdf5", ".hdf"):
        if id is not None:
            with SurveyFile(path) as sf:
                obj = sf.get(id)
            return obj.t, obj.y, obj.err
        try:
            with open_series(path) as ds:
                return ds.read()
        except LayoutError as exc:
            raise ValueError(f"{exc}; if {path} is a survey file, choose its object with "
                             "--id ID (for example: longwave fit survey.h5 --id star42 ...)"
                             ) from exc
    raise ValueError(f"cannot read a series from {path}: the suffix must be one of .csv, "
                     ".npy, .npz, .h5")


@dataclass
class SeriesFit:
    """What :func:`fit_series` did.

    Attributes
    ----------
    result : ObjectResult-like dict
        The fitted record (also stored in ``out``).
    out : str
        Result store holding that one row.
    prediction_out : str or None
        Prediction file (layout ``prediction``), when a grid was asked for.
    grid_points : int
    """

    result: dict
    out: str
    prediction_out: str | None = None
    grid_points: int = 0

    def to_json(self) -> str:
        """JSON text (NaN written as null, since JSON has no NaN)."""
        def clean(value):
            if isinstance(value, float) and value != value:
                return None
            if isinstance(value, dict):
                return {k: clean(v) for k, v in value.items()}
            return value

        return json.dumps(clean(asdict(self)), indent=2, sort_keys=True)

    def format(self) -> str:
        r = self.result
        params = ", ".join(f"{k}={v:.6g}" for k, v in r["params"].items())
        lines = [f"{r['id'] or 'series'}: {r['status']} with {r['method'] or 'no method'} "
                 f"(n={r['n']}, clipped {r['n_clipped']}, {r['runtime']:.2f} s) -> {self.out}"]
        if params:
            lines.append(f"  {params}")
            lines.append(f"  log marginal likelihood {r['log_marginal_likelihood']:.6g}, "
                         f"reduced chi2 {r['reduced_chi2']:.4g}")
        if r["message"]:
            lines.append(f"  {r['message']}")
        if self.prediction_out:
            lines.append(f"  prediction: {self.grid_points} points -> {self.prediction_out}")
        return "\n".join(lines)


def default_prediction_path(out) -> Path:
    """``RESULT.h5`` -> ``RESULT.prediction.h5``."""
    out = Path(out)
    return out.with_name(out.stem + ".prediction" + (out.suffix or ".h5"))


def fit_series(input, out, *, model="matern32", method: str = AUTO, clip=None,
               max_clip_iter: int = 5, grid: PredictionGrid | None = None,
               prediction_out=None, id=None, columns=None, inducing=None,
               chunk: int = 1 << 20, progress: bool = True,
               overwrite: bool = False) -> SeriesFit:
    """Fit one long series and stream its posterior on a grid to HDF5.

    Parameters
    ----------
    input : str or Path
        See :func:`read_series_input`.
    out : str or Path
        Result store receiving the one fitted row (same layout as a survey's).
    model, method, clip, max_clip_iter, inducing
        As for :func:`fit_object`.
    grid : PredictionGrid, optional
        Prediction times over the span of the data; ``max_points`` does not
        apply here, the grid is streamed.
    prediction_out : str or Path, optional
        Default ``<out stem>.prediction.h5``.
    id : str, optional
        Object of a survey file.
    columns : dict, optional
        CSV column names.
    chunk : int, default 1_048_576
        Grid points predicted and written at a time (bounds memory).
    progress : bool, default True
        Progress bars on stderr.
    overwrite : bool, default False
        Replace existing output files.

    Returns
    -------
    SeriesFit
    """
    spec = parse_spec(model) if isinstance(model, str) else model
    if not isinstance(spec, ModelSpec):
        raise TypeError(f"model must be a specification string or ModelSpec, got "
                        f"{type(model).__name__}")
    pred_path = None
    if grid is not None:
        pred_path = Path(prediction_out) if prediction_out else default_prediction_path(out)
        if pred_path.exists() and not overwrite:
            raise FileExistsError(f"prediction file {pred_path} exists; pass overwrite "
                                  "(--overwrite) or choose another --prediction-out")
    t, y, err = read_series_input(input, id=id, columns=columns)
    label = str(id) if id is not None else Path(input).stem
    config = PipelineConfig(model=spec, method=method, clip=clip, max_clip_iter=max_clip_iter,
                            grid=grid, inducing=inducing)
    with tqdm(desc="fit", unit="eval", file=sys.stderr, disable=not progress,
              mininterval=0.5) as bar:
        fitted, post, series = fit_object_with_posterior(
            t, y, err, model_spec=spec, method=method, clip=clip, max_clip_iter=max_clip_iter,
            inducing=inducing, id=label, method_wrapper=lambda m: _Counted(m, bar))
    result = fitted.result
    with ResultStore(out, param_names=param_names(spec), config=config.describe(),
                     model={"spec": spec.text}, overwrite=overwrite) as store:
        store.append(result)
    points = 0
    if grid is not None and post is not None:
        # Over the span of all the data, clipped points included.
        t0, t1 = float(np.min(t)), float(np.max(t))
        n = grid.size(t0, t1)
        stop = t1 if grid.count is not None else t0 + grid.step * (n - 1)
        with tqdm(total=n, desc="predict", unit="pt", unit_scale=True, file=sys.stderr,
                  disable=not progress, mininterval=0.5) as bar:
            points = predict_to_hdf5(_Progressed(post, bar), (t0, stop, n), pred_path,
                                     chunk=chunk, overwrite=overwrite)
    return SeriesFit(result=asdict(result), out=str(out),
                     prediction_out=str(pred_path) if points else None, grid_points=points)

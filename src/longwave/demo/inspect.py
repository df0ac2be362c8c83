"""Reading a result file back: its summary, one object's row, one object's plot.

``longwave inspect`` calls these. The summary needs only the result file;
a plot uses the posterior grid stored with the object when there is one,
and otherwise fits the object again from its survey file with the settings
stored in the result file (same specification, method and clipping, so the
same deterministic fit).
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from ..storage import STATUSES, ResultStore, SurveyFile

#: Posterior grid points when an object is fitted again for its plot.
REFIT_GRID_POINTS = 2000


@dataclass
class ResultsSummary:
    """The summary of a result file.

    Attributes
    ----------
    path : str
    rows : int
    by_status, by_method : dict of str to int
    params : dict of str to dict
        Per hyperparameter, over objects with status ``ok``: ``median``,
        ``p16``, ``p84`` (the central 68 % of the survey) and ``count``.
    fit_seconds : dict of str to float
        Over fitted objects (``ok`` and ``not_converged``): ``median``,
        ``mean``, ``p90``, ``max``, ``total``.
    config, model : dict
        As stored by the run that wrote the file.
    longwave_version : str
    merged : bool
        False when some rows are in journal parts a crashed writer left.
    """

    path: str
    rows: int
    by_status: dict = field(default_factory=dict)
    by_method: dict = field(default_factory=dict)
    params: dict = field(default_factory=dict)
    fit_seconds: dict = field(default_factory=dict)
    config: dict = field(default_factory=dict)
    model: dict = field(default_factory=dict)
    longwave_version: str = ""
    merged: bool = True

    def format(self) -> str:
        lines = [f"{self.path}: {self.rows} objects (written by longwave "
                 f"{self.longwave_version}{'' if self.merged else '; unmerged journal parts'})",
                 "  by status: " + ", ".join(f"{k} {v}" for k, v in self.by_status.items()),
                 "  by method: " + (", ".join(f"{k} {v}" for k, v in self.by_method.items())
                                    or "none")]
        if self.params:
            lines.append("  hyperparameters over 'ok' objects (median [16th, 84th percentile]):")
            width = max(len(k) for k in self.params)
            for name, s in self.params.items():
                lines.append(f"    {name:<{width}}  {s['median']:.4g} "
                             f"[{s['p16']:.4g}, {s['p84']:.4g}]  ({s['count']} objects)")
        f = self.fit_seconds
        if f:
            lines.append(f"  fit time per object: median {f['median'] * 1e3:.1f} ms, mean "
                         f"{f['mean'] * 1e3:.1f} ms, 90th percentile {f['p90'] * 1e3:.1f} ms, "
                         f"max {f['max']:.3g} s, total {f['total']:.3g} s")
        lines.append("  config: " + json.dumps(self.config, sort_keys=True))
        lines.append("  model: " + json.dumps(self.model, sort_keys=True))
        return "\n".join(lines)

    def to_json(self) -> str:
        return json.dumps(asdict(self), indent=2, sort_keys=True, default=float)


def summarise_results(path) -> ResultsSummary:
    """Summarise a result file written by the survey runner or ``longwave fit``.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    ResultsSummary
    """
    table = ResultStore.read(path)
    status = table.status.astype(str)
    out = ResultsSummary(str(path), len(table), config=table.config, model=table.model,
                         longwave_version=table.longwave_version, merged=table.merged)
    out.by_status = {s: int(np.sum(status == s)) for s in STATUSES}
    methods, counts = np.unique(table.method[table.method != ""].astype(str),
                                return_counts=True)
    out.by_method = {str(m): int(c) for m, c in zip(methods, counts)}
    ok = status == "ok"
    for name in table.param_names:
        v = table.params[name][ok]
        v = v[np.isfinite(v)]
        if v.size:
            p16, med, p84 = np.percentile(v, [16, 50, 84])
            out.params[name] = {"median": float(med), "p16": float(p16), "p84": float(p84),
                                "count": int(v.size)}
    fitted = np.isin(status, ("ok", "not_converged"))
    rt = table.runtime[fitted]
    if rt.size:
        out.fit_seconds = {"median": float(np.median(rt)), "mean": float(np.mean(rt)),
                           "p90": float(np.percentile(rt, 90)), "max": float(np.max(rt)),
                           "total": float(np.sum(rt))}
    return out


def object_row(path, id):
    """The stored :class:`~longwave.storage.ObjectResult` of object ``id``.

    Raises
    ------
    KeyError
        If ``id`` is not in the file (the message gives a few ids that are).
    """
    table = ResultStore.read(path)
    hit = np.flatnonzero(table.id.astype(str) == str(id))
    if not hit.size:
        some = ", ".join(table.id[:3].astype(str))
        raise KeyError(f"object {id!r} is not in {path} ({len(table)} objects, for example "
                       f"{some}); pass one of its ids to --object")
    return table.row(int(hit[0]))


def format_row(row, truth: dict | None = None) -> str:
    """One object's record as text; ``truth`` (from the survey metadata) printed beside it."""
    lines = [f"{row.id}: {row.status} with {row.method or 'no method'} (n={row.n}, clipped "
             f"{row.n_clipped}, {row.n_evaluations} evaluations, {row.runtime * 1e3:.1f} ms)"]
    truth = truth or {}
    for name, value in row.params.items():
        prefix, _, local = name.rpartition(".")
        # A true value belongs to a kernel parameter only if the kernels match.
        true = truth.get(local) if prefix in ("", truth.get("kernel")) else None
        lines.append((f"  {name:<22} {value:<12.6g}" + (f" (true {true:.6g})"
                                                        if true is not None else "")).rstrip())
    lines.append(f"  log marginal likelihood {row.log_marginal_likelihood:.6g}, reduced chi2 "
                 f"{row.reduced_chi2:.4g}")
    if row.message:
        lines.append(f"  {row.message}")
    return "\n".join(lines)


@dataclass
class ObjectView:
    """What :func:`plot_object` drew and from where.

    Attributes
    ----------
    row : ObjectResult
    source : str
        ``"stored"`` (the grid in the result file) or ``"refit"``.
    plot : Path
    truth : dict
        True values from the survey's metadata, when it has them.
    """

    row: object
    source: str
    plot: Path
    truth: dict = field(default_factory=dict)


def survey_object(survey, id):
    """``(ObjectData, truth)`` of object ``id`` in a survey file.

    ``truth`` holds the ``true_*`` metadata of a simulated survey (names
    without the prefix, plus ``kernel``), and is empty otherwise.
    """
    with SurveyFile(survey) as sf:
        obj = sf.get(id)
    truth = {k[len("true_"):]: float(v) for k, v in obj.meta.items() if k.startswith("true_")}
    if truth and "kernel" in obj.meta:
        truth["kernel"] = str(obj.meta["kernel"])
    return obj, truth


def plot_object(results, id, out_png, *, survey=None, refit: bool = False,
                magnitudes: bool = False) -> ObjectView:
    """Draw one object's posterior (and its data, given the survey) to ``out_png``.

    Parameters
    ----------
    results : str or Path
        Result file.
    id : str
    out_png : str or Path
    survey : str or Path, optional
        The survey file the results came from: adds the data points, and is
        needed to fit the object again.
    refit : bool, default False
        Fit again even when a grid is stored.
    magnitudes : bool, default False
        Values are astronomical magnitudes: draw brighter (smaller) upwards.

    Returns
    -------
    ObjectView

    Raises
    ------
    ValueError
        If the object has no stored grid (or ``refit``) and no survey is given.
    """
    from ..survey import PredictionGrid, fit_object
    from .plots import FitPanel, fits_figure

    row = object_row(results, id)
    obj, truth = survey_object(survey, id) if survey is not None else (None, {})
    stored = None
    if not refit:
        try:
            stored = ResultStore.read_prediction(results, id)
        except KeyError:
            stored = None
    if stored is None:
        if obj is None:
            raise ValueError(f"object {id!r} has no stored prediction grid in {results}"
                             + (" and --refit was asked" if refit else "")
                             + "; pass --survey SURVEY.h5 (the file the results came from) "
                             "to fit it again")
        cfg = ResultStore.read(results).config
        fitted = fit_object(obj.t, obj.y, obj.err, model_spec=cfg.get("model", "matern32"),
                            method=cfg.get("method", "auto"), clip=cfg.get("clip"),
                            max_clip_iter=cfg.get("max_clip_iter", 5),
                            inducing=cfg.get("inducing"),
                            grid=PredictionGrid(count=REFIT_GRID_POINTS), id=str(id))
        if fitted.prediction is None:
            raise ValueError(f"object {id!r} could not be fitted again ({fitted.result.status}:"
                             f" {fitted.result.message}); nothing to plot")
        p = fitted.prediction
        grid, mean, std, source = p.t, p.mean, p.std, "refit"
    else:
        (grid, mean, std), source = stored, "stored"
    empty = np.array([])
    title = (f"{row.id}: {row.status} with {row.method} [{source} posterior]\n"
             + ", ".join(f"{k}={v:.3g}" for k, v in row.params.items()))
    panel = FitPanel(title, obj.t if obj else empty, obj.y if obj else empty,
                     obj.err if obj else None, grid, mean, std, magnitudes=magnitudes)
    path = fits_figure([panel], out_png, note="band: ±2σ of the latent process")
    return ObjectView(row, source, path, truth)

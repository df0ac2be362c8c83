"""The full demonstration behind ``longwave demo``: a survey, its recovery, a benchmark.

Steps (each a library call a user could make):

1. simulate the robotic-telescope campaign (:mod:`.campaign`) and write it as
   a survey file, the truth as per-object metadata;
2. fit every object with the survey runner on an embedded local cluster,
   once per candidate kernel (``matern32`` and ``matern12``), with 5-sigma
   clipping of the campaign's outliers and the posterior on a grid stored
   for every object;
3. compare: per object the kernel with the higher log marginal likelihood,
   per class the fitted against the true hyperparameters (:mod:`.recovery`);
4. simulate one long, densely sampled series of the same campaign and let
   the benchmark runner say which inference method to use for it;
5. write a report (text and JSON), a CSV of fitted against true values and
   PNG figures, and return where everything is.
"""

from __future__ import annotations

import json
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from ..storage import ResultStore
from ..survey import PredictionGrid, fit_object
from .campaign import CLASSES, read_truth, simulate_campaign, simulate_long_series
from .recovery import Fits, recover

#: Candidate kernels: the true kernels of the built-in classes. Both have four
#: free hyperparameters (amplitude, scale, mean, excess noise), so their log
#: marginal likelihoods compare directly.
MODELS = ("matern32", "matern12")
#: Clip points more than this many sigma from the posterior predictive: the
#: campaign's outliers sit 5-15 error bars off.
CLIP_SIGMA = 5.0
#: Stored posterior grid per object (enough to draw it; 2.4 kB per object).
GRID_POINTS = 300
#: Grid of the few objects drawn in ``objects.png`` (a point every ~20 minutes).
SHOWCASE_GRID_POINTS = 10_000
#: Days shown for sources that vary within days.
ZOOM_DAYS = 20.0
#: Benchmark settings for the long series. Scored at the reference's
#: hyperparameters (no refit per setting): fitting each sparse setting on
#: 20,000 points would take minutes, which the demo cannot afford.
BENCH_METHODS = ("kalman", "vfe:m=32,128", "fitc:m=128")
#: Smallest long series: the benchmark holds out about 10 % and the largest
#: inducing-point count (128) must stay well below the points left.
MIN_LONG_POINTS = 1000


@dataclass
class DemoOutcome:
    """What :func:`run_demo` did and wrote.

    Attributes
    ----------
    out_dir : Path
    files : dict of str to Path
        Everything written, by role (``survey``, ``results:matern32``,
        ``report``, ``objects_plot``, ...).
    summaries : dict of str to str
        The survey runner's summary for each model.
    recovery_table : str
        Per-class recovery (see :class:`~longwave.demo.recovery.Recovery`).
    recommendation : str
        The benchmark's recommended setting for the long series ("" if none).
    seconds : dict of str to float
        Wall time of each step.
    sizes : dict
        Objects, points per object, long-series points.
    """

    out_dir: Path
    files: dict = field(default_factory=dict)
    summaries: dict = field(default_factory=dict)
    recovery_table: str = ""
    recommendation: str = ""
    seconds: dict = field(default_factory=dict)
    sizes: dict = field(default_factory=dict)

    @property
    def total_seconds(self) -> float:
        return float(sum(self.seconds.values()))

    def text(self) -> str:
        """The report: what was done, what came out, where the files are."""
        s = self.sizes
        lines = [
            "longwave demo: a season of a robotic-telescope campaign",
            f"  {s['objects']} sources, {s['points'][0]}-{s['points'][1]} points each over "
            f"{s['days']:g} nights; long series: {s['long_points']} points",
            "",
        ]
        for spec, text in self.summaries.items():
            lines += [f"survey fitted with {spec}:", text, ""]
        lines += ["fitted against true hyperparameters:", self.recovery_table, ""]
        lines += [f"benchmark on the long series: recommended {self.recommendation or 'none'}"
                  f" (details in {self.files.get('benchmark_summary', '?')})", ""]
        lines += ["time per step: " + ", ".join(f"{k} {v:.1f} s" for k, v in self.seconds.items())
                  + f"; total {self.total_seconds:.1f} s", "", "files:"]
        width = max(len(k) for k in self.files) if self.files else 0
        lines += [f"  {k:<{width}}  {v}" for k, v in self.files.items()]
        return "\n".join(lines)

    def to_dict(self) -> dict:
        out = asdict(self)
        out["out_dir"] = str(self.out_dir)
        out["files"] = {k: str(v) for k, v in self.files.items()}
        out["total_seconds"] = self.total_seconds
        return out


class _Clock:
    """Times the demo's steps into a dict."""

    def __init__(self, seconds: dict, say):
        self.seconds, self.say = seconds, say

    def step(self, name: str, message: str):
        self.say(message)
        return _Step(self.seconds, name)


class _Step:
    def __init__(self, seconds, name):
        self.seconds, self.name = seconds, name

    def __enter__(self):
        self.t0 = time.perf_counter()

    def __exit__(self, *exc):
        self.seconds[self.name] = time.perf_counter() - self.t0


def _warm_up(campaign) -> None:
    """Fit one object per model in this process first, with the survey's settings.

    The compiled loops are cached on disk on first use; doing it here once,
    through the same code paths (clipping, grid), means the cluster's workers
    load them instead of each compiling them at the same time on the same cores.
    """
    for spec in MODELS:
        fit_object(campaign.times[0], campaign.values[0], campaign.errors[0], model_spec=spec,
                   clip=CLIP_SIGMA, grid=PredictionGrid(count=GRID_POINTS))


def _showcase(campaign, truth, preferred) -> list:
    """One panel per class: its clearest source, fitted with the preferred kernel.

    The clearest source has the highest true amplitude over median error bar,
    so the panel shows what a fit does with a detected signal (the recovery
    figure shows the whole survey, faint sources included).

    The stored grids (:data:`GRID_POINTS` over the season) are too coarse to
    draw night-scale variability, so these few objects are fitted again, in
    this process, with the survey's settings and a fine grid: the same
    deterministic fit, only predicted more densely. Sources varying within
    days are drawn over a :data:`ZOOM_DAYS` window, where the nights and the
    gaps between them can be told apart.
    """
    from .plots import FitPanel

    panels = []
    snr = truth["amplitude"] / np.array([np.median(e) for e in campaign.errors])
    for name in sorted(set(truth["class"].tolist())):
        members = np.flatnonzero(truth["class"] == name)
        for i in members[np.argsort(-snr[members])][:1]:
            spec = preferred[i] or truth["kernel"][i]
            t, y, err = campaign.times[i], campaign.values[i], campaign.errors[i]
            p = fit_object(t, y, err, model_spec=spec, clip=CLIP_SIGMA,
                           grid=PredictionGrid(count=SHOWCASE_GRID_POINTS)).prediction
            title = (f"{campaign.ids[i]} ({name}, true {truth['kernel'][i]} scale "
                     f"{truth['scale'][i]:.3g} d, amplitude/error {snr[i]:.0f}): fitted with "
                     f"{spec}")
            keep, inside = slice(None), slice(None)
            if truth["scale"][i] < ZOOM_DAYS / 5:
                lo = float(np.floor(np.median(t)))
                keep = (t >= lo) & (t <= lo + ZOOM_DAYS)
                inside = (p.t >= lo) & (p.t <= lo + ZOOM_DAYS)
                title += f", {ZOOM_DAYS:g}-day window"
            panels.append(FitPanel(title, t[keep], y[keep], err[keep], p.t[inside],
                                   p.mean[inside], p.std[inside]))
    return panels


def _write_csv(path: Path, truth, fits: dict, recovery) -> Path:
    cols = {"id": truth["id"], "class": truth["class"], "true_kernel": truth["kernel"],
            "n": truth["n"], "true_amplitude": truth["amplitude"], "true_scale": truth["scale"],
            "preferred_kernel": recovery.preferred,
            "fitted_amplitude": recovery.fitted_amplitude, "fitted_scale": recovery.fitted_scale}
    for spec, f in fits.items():
        cols[f"lml_{spec}"] = f.lml
        cols[f"status_{spec}"] = f.status
    names = list(cols)
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(",".join(names) + "\n")
        for i in range(len(truth["id"])):
            fh.write(",".join(_cell(cols[k][i]) for k in names) + "\n")
    return path


def _cell(value) -> str:
    if isinstance(value, (float, np.floating)):
        return "" if not np.isfinite(value) else f"{float(value):.6g}"
    return str(value)


def run_demo(out_dir="longwave-demo", *, n_objects: int = 1000, points=(150, 400),
             days: float = 150.0, long_points: int = 20_000, seed: int = 0,
             workers: int | None = None, plot: bool = True, progress: bool = True,
             say=print) -> DemoOutcome:
    """Run the full demonstration (module docstring) and write its files into ``out_dir``.

    Parameters
    ----------
    out_dir : str or Path, default "longwave-demo"
        Created if missing; the demo's own files in it are replaced.
    n_objects : int, default 1000
        Sources in the campaign.
    points : tuple of int, default (150, 400)
        Range of observations per source.
    days : float, default 150.0
        Season length.
    long_points : int, default 20000
        Points of the benchmarked long series.
    seed : int, default 0
        Seeds the campaign (the long series uses ``seed + 1``).
    workers : int, optional
        Worker processes of the embedded cluster (default: one per core;
        0 fits serially in this process).
    plot : bool, default True
        Write the PNG figures.
    progress : bool, default True
        Progress bars of the survey runner on stderr.
    say : callable, default print
        Receives one line per step (``lambda _: None`` for silence).

    Returns
    -------
    DemoOutcome
    """
    if n_objects < len(CLASSES):
        raise ValueError(f"n_objects must be at least {len(CLASSES)}, got {n_objects}; the "
                         "default is 1000")
    if long_points < MIN_LONG_POINTS:
        raise ValueError(f"long_points must be at least {MIN_LONG_POINTS}, so that every "
                         f"benchmark setting ({', '.join(BENCH_METHODS)}) has fewer inducing "
                         f"points than data, got {long_points}; the default is 20000")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    res = DemoOutcome(out, sizes={"objects": int(n_objects), "points": list(points),
                                  "days": float(days), "long_points": int(long_points)})
    clock = _Clock(res.seconds, say)
    files = res.files

    with clock.step("simulate", f"simulating {n_objects} sources ..."):
        campaign = simulate_campaign(n_objects, points=points, days=days, seed=seed)
        files["survey"] = out / "campaign.h5"
        campaign.write(files["survey"], overwrite=True)
    with clock.step("warm-up", "preparing the compiled loops (slow on the first run only) ..."):
        _warm_up(campaign)
    truth = read_truth(files["survey"])

    from ..survey import run_survey  # loads dask: only when the demo runs

    results = {}
    for spec in MODELS:
        with clock.step(f"survey {spec}", f"fitting every source with {spec} "
                        f"({'serially' if workers == 0 else 'on a local cluster'}) ..."):
            results[spec] = files[f"results:{spec}"] = out / f"results_{spec}.h5"
            summary = run_survey(files["survey"], results[spec], model=spec, clip=CLIP_SIGMA,
                                 grid=PredictionGrid(count=GRID_POINTS), workers=workers,
                                 overwrite=True, progress=progress, quiet=not progress)
            res.summaries[spec] = summary.format()

    fits = {spec: Fits.from_table(spec, ResultStore.read(path), truth["id"].tolist())
            for spec, path in results.items()}
    recovery = recover(truth, fits)
    res.recovery_table = recovery.table()
    files["recovered_csv"] = _write_csv(out / "recovered.csv", truth, fits, recovery)

    with clock.step("benchmark", f"benchmarking methods on one {long_points}-point series ..."):
        from ..benchmark.entry import benchmark_file

        long = simulate_long_series(long_points, days=days, seed=seed + 1)
        files["long_series"] = out / "long_series.npz"
        np.savez(files["long_series"], t=long.t, y=long.y, err=long.err)
        bench = benchmark_file(files["long_series"], out / "benchmark", model=long.kernel,
                               methods=list(BENCH_METHODS), fit=False, seed=seed)
        res.recommendation = bench.result.recommendation.choice or ""
        files["benchmark_summary"] = bench.files["summary"]
        files["benchmark_report"] = bench.files["json"]

    if plot:
        with clock.step("plots", "drawing figures ..."):
            from . import plots

            note = ("band: ±2σ of the latent process; in gaps between nights it widens "
                    "towards the prior")
            files["objects_plot"] = plots.fits_figure(
                _showcase(campaign, truth, recovery.preferred), out / "objects.png",
                note=note)
            files["recovery_plot"] = plots.recovery_figure(truth, recovery,
                                                           out / "recovered.png")
            files["benchmark_plot"] = bench.files["accuracy_plot"]

    files["report"] = out / "report.txt"
    files["report_json"] = out / "report.json"
    payload = res.to_dict()
    payload["recovery"] = [asdict(c) for c in recovery.classes]
    payload["models"], payload["clip_sigma"] = list(MODELS), CLIP_SIGMA
    payload["benchmark_methods"] = list(BENCH_METHODS)
    files["report_json"].write_text(json.dumps(payload, indent=2, default=_json_default)
                                    + "\n", encoding="utf-8")
    files["report"].write_text(res.text() + "\n", encoding="utf-8")
    return res


def _json_default(value):
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"cannot write {type(value).__name__} to JSON")

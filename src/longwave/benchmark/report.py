"""The benchmark's report: one JSON file of every figure, PNG plots, a terminal table.

JSON holds plain numbers only; a figure not measured (NaN) is written as
``null`` so that any JSON reader accepts the file.
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import asdict, is_dataclass
from pathlib import Path

import numpy as np

from .. import __version__
from .runner import CAUTIONS

REPORT_NAME = "report.json"


def plain(value):
    """Nested dataclasses, dicts, lists and numpy values as JSON-ready builtins (NaN -> None)."""
    if is_dataclass(value) and not isinstance(value, type):
        return plain(asdict(value))
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [plain(v) for v in value]
    if isinstance(value, (np.floating, float)):
        value = float(value)
        return value if math.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    return value


def write_json(path, payload: dict) -> Path:
    """Write ``payload`` (after :func:`plain`) with the package version; return the path."""
    path = Path(path)
    body = {"longwave_version": __version__, **plain(payload)}
    with open(path, "w", encoding="utf-8") as fh:
        json.dump(body, fh, indent=1, allow_nan=False)
        fh.write("\n")
    return path


def _fmt(x, spec=".3g") -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "-"
    return format(x, spec)


def method_table(methods, recommendation) -> str:
    """Fixed-width table of the accuracy and cost of every setting, with the verdicts."""
    verdicts = {v.label: v for v in recommendation.table}
    head = (f"{'setting':<24} {'|dlml|/n':>9} {'err/sd':>8} {'var ratio':>9} {'KL':>9} "
            f"{'NLPD gap':>8} {'NLPD fc':>8} {'cov68':>6} {'cov95':>6} {'cost s':>8} "
            f"{'peak MB':>8}  verdict")
    lines = [head, "-" * len(head)]
    for r in methods:
        v = verdicts.get(r.label)
        verdict = v.verdict if v else r.status
        if r.status != "ok":
            lines.append(f"{r.label:<24} {r.status}: {r.message[:70]}")
            continue
        peaks = [p for p in (r.fit_peak_mb, r.predict_peak_mb, r.evaluate_peak_mb) if p == p]
        peak = max(peaks) if peaks else float("nan")
        lines.append(
            f"{r.label:<24} {_fmt(abs(r.lml_diff_per_point)):>9} {_fmt(r.mean_error_sigma):>8} "
            f"{_fmt(r.variance_ratio, '.4f'):>9} {_fmt(r.mean_kl):>9} "
            f"{_fmt(r.interpolation.nlpd, '.3f'):>8} {_fmt(r.forecast.nlpd, '.3f'):>8} "
            f"{_fmt(r.interpolation.coverage_68, '.2f'):>6} "
            f"{_fmt(r.interpolation.coverage_95, '.2f'):>6} {_fmt(r.cost_seconds):>8} "
            f"{_fmt(peak, '.1f'):>8}  {verdict}"
        )
    return "\n".join(lines)


def why_table(recommendation) -> str:
    """One line per setting: its verdict and the reason."""
    lines = [f"{'setting':<24} {'cost s':>8}  verdict: why"]
    for v in recommendation.table:
        lines.append(f"{v.label:<24} {_fmt(v.cost_seconds):>8}  {v.verdict}: {v.reason}")
    return "\n".join(lines)


def summary_text(result, title: str = "") -> str:
    """The terminal summary of one benchmark run."""
    ref, rec, tol = result.reference, result.recommendation, result.recommendation.tolerance
    out = []
    if title:
        out.append(title)
    out.append(f"reference: {ref.label}; {ref.reason}.")
    out.append(f"fitted on {ref.n_train} points, held out {ref.n_interpolation} in gaps and "
               f"{ref.n_forecast} at the end; lml = {ref.lml:.6g}")
    for r in result.methods:
        if r.certified:
            c = r.certified
            extra = (f"; exact {c['exact']:.6g} {'inside' if c['contains_exact'] else 'OUTSIDE'}"
                     if "exact" in c else "")
            out.append(f"certified lml on the full series ({c['n']} points), {r.label}: "
                       f"[{c['lower']:.6g}, {c['upper']:.6g}], gap {c['per_point_gap']:.3g} "
                       f"per point{extra}")
    out += ["", method_table(result.methods, rec), ""]
    out.append(f"tolerance: |dlml|/n <= {tol.lml_per_point:g}, mean err/sd <= "
               f"{tol.mean_error_sigma:.3g}, mean KL <= {tol.kl:g} nats")
    out += [why_table(rec), ""]
    out.append(f"RECOMMENDED: {rec.choice}" if rec.choice else f"WARNING: {rec.warning}")
    overconfident = [r.label for r in result.methods
                     if r.status == "ok" and r.min_variance_ratio < 0.9]
    if overconfident:
        out.append("overconfident somewhere (variance ratio < 0.9): " + ", ".join(overconfident))
    out += ["", "Cautions:"] + [f"- {c}" for c in CAUTIONS]
    return "\n".join(out)


def scaling_text(result) -> str:
    """The terminal summary of a scaling run."""
    lines = [f"scaling on synthetic series of {result.model}, seed {result.seed}",
             "exponents of n: one evaluation with gradient (time, traced memory beyond the "
             "input), then posterior + prediction at the n times",
             f"{'method':<24} {'largest n':>10} {'time exp':>9} {'mem exp':>8} "
             f"{'pred time':>9} {'pred mem':>8}  evaluation seconds at each n"]
    for c in result.curves:
        largest = c.points[-1].n if c.points else 0
        times = " ".join(f"{p.n:.0e}:{p.evaluate_seconds:.3g}" for p in c.points)
        lines.append(f"{c.label:<24} {largest:>10d} {_fmt(c.time_exponent, '.2f'):>9} "
                     f"{_fmt(c.memory_exponent, '.2f'):>8} "
                     f"{_fmt(c.predict_time_exponent, '.2f'):>9} "
                     f"{_fmt(c.predict_memory_exponent, '.2f'):>8}  {times}")
        if c.stopped:
            lines.append(f"{'':<24} stopped: {c.stopped[:120]}")
    return "\n".join(lines)


def _pareto_labels(result) -> list[str]:
    from .recommend import pareto_front

    ok = [r for r in result.methods if r.status == "ok"]
    front = pareto_front([r.cost_seconds for r in ok], [r.mean_kl for r in ok])
    return [ok[i].label for i in front]


def _plots(result, out: Path, prefix: str) -> dict:
    from . import plots

    files = {
        "accuracy_plot": plots.accuracy_vs_time(result, out / f"{prefix}accuracy_vs_time.png"),
        "overlay_plot": plots.posterior_overlay(result, out / f"{prefix}posterior_zoom.png"),
    }
    if result.scaling:
        files["scaling_plot"] = plots.time_vs_n(result.scaling, out / f"{prefix}time_vs_n.png")
    return files


def _payload(result, title: str = "") -> dict:
    payload = result.to_dict()
    payload["pareto_front"] = _pareto_labels(result)
    payload["summary"] = summary_text(result, title)
    return payload


def _hdf5(path, payload: dict, rows: str) -> Path:
    from ..storage.benchmark_report import write_report_hdf5

    write_report_hdf5(path, plain(payload), rows=rows)
    return Path(path)


def write_report(result, out_dir, *, title: str = "", hdf5: bool = False) -> dict:
    """Write the JSON report, the three PNG plots and the text summary of one run.

    Parameters
    ----------
    result : BenchmarkResult
    out_dir : str or Path
        Created if missing.
    title : str, default ""
        First line of the text summary.
    hdf5 : bool, default False
        Also write ``report.h5`` (layout in :mod:`longwave.storage.benchmark_report`).

    Returns
    -------
    dict of str to Path
        ``json``, ``summary``, ``accuracy_plot``, ``overlay_plot``, ``scaling_plot``
        (and ``hdf5``).
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    payload = _payload(result, title)
    files = {"json": write_json(out / REPORT_NAME, payload), "summary": out / "summary.txt"}
    files["summary"].write_text(payload["summary"] + "\n", encoding="utf-8")
    files.update(_plots(result, out, ""))
    if hdf5:
        files["hdf5"] = _hdf5(out / "report.h5", payload, "methods")
    return files


def batch_text(batch) -> str:
    """Terminal summary of a several-object run: the worst-case table and the verdict."""
    rec = batch.recommendation
    out = [f"{len(batch.objects)} objects: " + ", ".join(o.id for o in batch.objects),
           "worst case over the objects (accuracy: worst; cost: summed):", "",
           method_table(batch.combined, rec), "", why_table(rec), ""]
    out.append(f"RECOMMENDED for all objects: {rec.choice}" if rec.choice
               else f"WARNING: {rec.warning}")
    out += ["", "Cautions:"] + [f"- {c}" for c in CAUTIONS]
    return "\n".join(out)


def _safe(ident: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]", "_", ident) or "object"


def write_batch_report(batch, out_dir, *, hdf5: bool = False) -> dict:
    """One ``report.json`` holding every object's figures and the combined verdict.

    Plots and text summaries are written per object, their names prefixed
    with the object id (characters other than letters, digits, ``_.-``
    replaced by ``_``).
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    text = batch_text(batch)
    payload = {"objects": [], "combined": batch.combined,
               "recommendation": batch.recommendation, "cautions": batch.cautions,
               "summary": text}
    files = {}
    for obj in batch.objects:
        prefix = _safe(obj.id) + "_"
        payload["objects"].append({"id": obj.id, **_payload(obj.result, f"object {obj.id}")})
        for key, path in _plots(obj.result, out, prefix).items():
            files[f"{obj.id}:{key}"] = path
    files["json"] = write_json(out / REPORT_NAME, payload)
    files["summary"] = out / "summary.txt"
    files["summary"].write_text(text + "\n", encoding="utf-8")
    if hdf5:
        files["hdf5"] = _hdf5(out / "report.h5", payload, "combined")
    return files


def write_scaling_report(result, out_dir) -> dict:
    """Write ``scaling.json``, ``scaling_time.png``, ``scaling_memory.png`` and a text summary."""
    from . import plots

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    text = scaling_text(result)
    files = {"json": write_json(out / "scaling.json", {**plain(result), "summary": text})}
    files["summary"] = out / "scaling.txt"
    files["summary"].write_text(text + "\n", encoding="utf-8")
    files["time_plot"] = plots.time_vs_n(result.curves, out / "scaling_time.png",
                                         "Scaling: one evaluation with gradient against n")
    files["memory_plot"] = plots.memory_vs_n(result.curves, out / "scaling_memory.png")
    return files

"""PNG figures of a benchmark run, drawn with matplotlib's Agg canvas.

Figures are built as ``matplotlib.figure.Figure`` objects on an Agg canvas,
never through pyplot, so no global figure state or display backend is
involved and the module is safe to use from any thread or process.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from .recommend import pareto_front

#: Accuracy values at or below this are drawn on the floor of the log axis.
ACCURACY_FLOOR = 1e-12


def _figure(width=7.0, height=4.5):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=110, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _save(fig, path) -> Path:
    path = Path(path)
    fig.savefig(path, format="png")
    return path


def accuracy_vs_time(result, path) -> Path:
    """Mean marginal KL against cost (log-log), Pareto front joined, tolerance marked."""
    ok = [r for r in result.methods if r.status == "ok"]
    fig = _figure()
    ax = fig.add_subplot()
    costs = [r.cost_seconds for r in ok]
    kls = [max(r.mean_kl, ACCURACY_FLOOR) for r in ok]
    ax.scatter(costs, kls, color="tab:blue", zorder=3)
    for r, c, k in zip(ok, costs, kls):
        ax.annotate(r.label, (c, k), textcoords="offset points", xytext=(4, 4), fontsize=8)
    front = pareto_front(costs, kls)
    if front:
        fx, fy = [costs[i] for i in front], [kls[i] for i in front]
        ax.step(fx, fy, where="post", color="tab:orange", zorder=2)
        ax.scatter(fx, fy, s=120, facecolors="none", edgecolors="tab:orange", zorder=3,
                   label="Pareto front (no setting both cheaper and more accurate)")
    choice = result.recommendation.choice
    for r, c, k in zip(ok, costs, kls):
        if r.label == choice:
            ax.scatter([c], [k], marker="*", s=250, color="tab:green", zorder=4,
                       label=f"recommended: {choice}")
    ax.axhline(result.recommendation.tolerance.kl, color="tab:red", ls="--",
               label="KL tolerance")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("fit + prediction wall time [s]")
    ax.set_ylabel(f"mean marginal KL from reference [nats] (0 drawn at {ACCURACY_FLOOR:g})")
    ax.set_title("Accuracy against cost")
    ax.legend(fontsize=8)
    return _save(fig, path)


def posterior_overlay(result, path, max_curves: int = 6) -> Path:
    """Reference and approximate posteriors (mean, 2-sigma) over the zoom window."""
    z = result.zoom
    t = np.asarray(z.t)
    fig = _figure(8.0, 4.5)
    ax = fig.add_subplot()
    ref = z.curves["reference"]
    m, s = np.asarray(ref["mean"]), np.asarray(ref["std"])
    ax.fill_between(t, m - 2 * s, m + 2 * s, color="0.8", label="reference 2 sigma")
    ax.plot(t, m, color="k", lw=1.5, label=f"reference ({result.reference.label})")
    labels = [lab for lab in z.curves if lab != "reference"][:max_curves]
    for lab, color in zip(labels, [f"C{i}" for i in range(10)]):
        c = z.curves[lab]
        cm, cs = np.asarray(c["mean"]), np.asarray(c["std"])
        ax.plot(t, cm, color=color, lw=1, label=lab)
        ax.plot(t, cm + 2 * cs, color=color, lw=0.7, ls="--")
        ax.plot(t, cm - 2 * cs, color=color, lw=0.7, ls="--")
    dt, dy, held = np.asarray(z.data_t), np.asarray(z.data_y), np.asarray(z.data_heldout)
    for code, style, name in ((0, "k.", "fitted data"), (1, "rx", "held out (gap)"),
                              (2, "m+", "held out (forecast)")):
        sel = held == code
        if sel.any():
            ax.plot(dt[sel], dy[sel], style, ms=4, label=name)
    ax.set_xlabel("time")
    ax.set_ylabel("value")
    ax.set_title("Posteriors at the reference hyperparameters (zoomed)")
    ax.legend(fontsize=7, ncol=2)
    return _save(fig, path)


def time_vs_n(curves, path, title: str = "Cost of one evaluation against n") -> Path:
    """Log-log time of one evaluation with gradient against n, fitted exponent in the legend."""
    fig = _figure()
    ax = fig.add_subplot()
    for c in curves:
        if not c.points:
            continue
        n = [p.n for p in c.points]
        secs = [p.evaluate_seconds for p in c.points]
        slope = "" if not math.isfinite(c.time_exponent) else f" (n^{c.time_exponent:.2f})"
        ax.plot(n, secs, "o-", label=c.label + slope)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("n (points)")
    ax.set_ylabel("wall time [s]")
    ax.set_title(title)
    ax.legend(fontsize=8)
    return _save(fig, path)


def memory_vs_n(curves, path) -> Path:
    """Log-log peak traced memory of one evaluation against n."""
    fig = _figure()
    ax = fig.add_subplot()
    for c in curves:
        pts = [(p.n, p.evaluate_peak_mb) for p in c.points if p.evaluate_peak_mb > 0]
        if pts:
            slope = "" if not math.isfinite(c.memory_exponent) else f" (n^{c.memory_exponent:.2f})"
            ax.plot(*zip(*pts), "o-", label=c.label + slope)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("n (points)")
    ax.set_ylabel("peak traced memory [MB]")
    ax.set_title("Memory of one evaluation against n")
    ax.legend(fontsize=8)
    return _save(fig, path)

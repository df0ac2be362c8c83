"""PNG figures of the demo and of ``longwave inspect``, drawn on matplotlib's Agg canvas.

Figures are ``matplotlib.figure.Figure`` objects with their own Agg canvas,
never pyplot, so there is no global figure state and no display backend to
pick: safe in scripts, workers and tests alike.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

#: Colour of each built-in class; any other class cycles through the rest.
CLASS_COLOURS = {"flickering": "tab:blue", "wandering": "tab:orange",
                 "random_walk": "tab:green"}
_SPARE = ("tab:red", "tab:purple", "tab:brown", "tab:pink", "tab:olive", "tab:cyan")


def _figure(width: float, height: float, dpi: int = 90):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=dpi, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _save(fig, path) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, format="png")
    return path


def class_colour(name: str, order=()) -> str:
    """A stable colour for a class name (built-in ones fixed, others by position)."""
    if name in CLASS_COLOURS:
        return CLASS_COLOURS[name]
    others = [n for n in order if n not in CLASS_COLOURS]
    return _SPARE[others.index(name) % len(_SPARE)] if name in others else _SPARE[0]


@dataclass
class FitPanel:
    """What one fit panel shows.

    Attributes
    ----------
    title : str
    t, y : ndarray of shape (n,)
        Data (may be empty when only a stored prediction is at hand).
    err : ndarray of shape (n,) or None
    grid, mean, std : ndarray of shape (k,)
        Posterior of the latent process on a grid.
    magnitudes : bool
        Invert the value axis (astronomical magnitudes: brighter is up).
    """

    title: str
    t: np.ndarray
    y: np.ndarray
    err: np.ndarray | None
    grid: np.ndarray
    mean: np.ndarray
    std: np.ndarray
    magnitudes: bool = True


def _draw_fit(ax, panel: FitPanel, t0: float) -> None:
    g = panel.grid - t0
    ax.fill_between(g, panel.mean - 2 * panel.std, panel.mean + 2 * panel.std,
                    color="tab:blue", alpha=0.25, lw=0, label="posterior ±2σ")
    ax.plot(g, panel.mean, color="tab:blue", lw=1.0, label="posterior mean")
    if panel.t.size:
        ax.errorbar(panel.t - t0, panel.y, panel.err, fmt=".", ms=2.5, lw=0.6,
                    color="k", alpha=0.6, label="observations")
    ax.set_title(panel.title, fontsize=9, loc="left")
    ax.set_ylabel("magnitude" if panel.magnitudes else "value")
    if panel.magnitudes:
        ax.invert_yaxis()


def fits_figure(panels, path, *, note: str = "") -> Path:
    """One stacked panel per fit (data, posterior mean, ±2σ band); returns the path.

    Parameters
    ----------
    panels : sequence of FitPanel
    path : str or Path
    note : str, optional
        A line under the panels (for example, what the band means).
    """
    panels = list(panels)
    if not panels:
        raise ValueError("fits_figure needs at least one FitPanel")
    fig = _figure(8.0, 2.1 * len(panels) + 0.4)
    axes = fig.subplots(len(panels), 1, squeeze=False)[:, 0]
    for ax, panel in zip(axes, panels):
        starts = [a[0] for a in (panel.t, panel.grid) if a.size]
        t0 = float(np.floor(min(starts))) if starts else 0.0
        _draw_fit(ax, panel, t0)
        ax.set_xlabel(f"time − {t0:.0f} [d]", fontsize=8)
    axes[0].legend(loc="upper right", fontsize=7, ncols=3)
    if note:
        fig.suptitle(note, fontsize=8)
    return _save(fig, path)


def recovery_figure(truth: dict, recovery, path) -> Path:
    """Fitted against true scale and amplitude, log-log, one colour per class, 1:1 line.

    Parameters
    ----------
    truth : dict of str to ndarray
        ``class``, ``scale``, ``amplitude`` per object.
    recovery : Recovery
        From :func:`longwave.demo.recovery.recover`.
    path : str or Path
    """
    fig = _figure(9.0, 4.2)
    axes = fig.subplots(1, 2)
    classes = np.asarray(truth["class"], dtype=str)
    order = sorted(set(classes.tolist()))
    stats = {c.name: c for c in recovery.classes}
    for ax, key, fitted, unit in ((axes[0], "scale", recovery.fitted_scale, " [d]"),
                                  (axes[1], "amplitude", recovery.fitted_amplitude, " [mag]")):
        true = np.asarray(truth[key], dtype=float)
        ok = np.isfinite(fitted) & (fitted > 0)
        for name in order:
            sel = ok & (classes == name)
            c = stats.get(name)
            med = getattr(c, f"{key}_median", float("nan")) if c else float("nan")
            ax.scatter(true[sel], fitted[sel], s=6, alpha=0.5, color=class_colour(name, order),
                       label=f"{name} (median ln ratio {med:+.2f})", rasterized=True)
        lo = float(np.nanmin(np.concatenate([true[ok], fitted[ok]]))) if ok.any() else 0.1
        hi = float(np.nanmax(np.concatenate([true[ok], fitted[ok]]))) if ok.any() else 10.0
        line = np.array([lo / 1.5, hi * 1.5])
        ax.plot(line, line, color="k", lw=0.8, label="1:1")
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel(f"true {key}{unit}")
        ax.set_ylabel(f"fitted {key}{unit}")
        ax.legend(fontsize=7, loc="upper left")
    fig.suptitle("Recovered against true hyperparameters (each object fitted with its true "
                 "kernel)", fontsize=9)
    return _save(fig, path)

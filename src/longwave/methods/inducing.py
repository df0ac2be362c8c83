"""Placement of inducing times: uniform, quantile, greedy variance, k-means.

Every strategy is ``place(times, m, kernel, seed) -> sorted unique times``
where ``times`` is the candidate set: the data times, or for long series an
evenly strided subsample of at most ``cap`` of them (:func:`candidate_times`),
so that placement costs O(cap) memory whatever n is. ``PLACEMENTS`` is the
one place where a strategy's name maps to its function.
"""

from __future__ import annotations

import numpy as np

DEFAULT_CAP = 50_000
GREEDY_CAP = 20_000  # greedy keeps an (m, candidates) factor: 160 MB at m = 1024


def candidate_times(source, cap: int = DEFAULT_CAP, chunk: int = 1 << 18) -> np.ndarray:
    """Up to ``cap`` data times, every ``ceil(n / cap)``-th point, read chunk by chunk."""
    step = max(1, -(-source.n // cap))
    parts = []
    for lo in range(0, source.n, chunk):
        # keep the global stride across chunk edges: first index >= lo that is a multiple
        first = -(-lo // step) * step
        hi = min(lo + chunk, source.n)
        if first < hi:
            t, _, _ = source.read(first, hi)
            parts.append(np.asarray(t)[::step])
    return np.concatenate(parts)


def uniform(times, m, kernel=None, seed=0):
    """Centres of ``m`` equal bins spanning the data: ``t0 + (j + 1/2) span / m``."""
    lo, hi = float(times.min()), float(times.max())
    return lo + (np.arange(m) + 0.5) * (hi - lo) / m if hi > lo else np.array([lo])


def quantile(times, m, kernel=None, seed=0):
    """Empirical quantiles of the times at ``(j + 1/2) / m``: dense where data are dense."""
    return np.unique(np.quantile(times, (np.arange(m) + 0.5) / m))


def greedy_variance(times, m, kernel, seed=0, tol=1e-12):
    """Greedy conditional-variance selection (Burt, Rasmussen & van der Wilk 2020, Alg. 1).

    Each step adds the candidate with the largest prior variance conditional
    on those already chosen; this is a pivoted incremental Cholesky of
    ``k(times, times)``, costing O(N m^2) for N candidates and never
    forming the N-by-N matrix. Stops early when every conditional variance
    is below ``tol * k(0)`` (the candidates are then already explained).
    """
    if kernel is None:
        raise ValueError("greedy placement needs the model's kernel; pass it to place()")
    x = np.asarray(times, dtype=float)
    resid = np.full(x.size, kernel.variance())
    floor = tol * resid[0]
    cols = np.zeros((m, x.size))
    chosen = []
    for j in range(min(m, x.size)):
        i = int(np.argmax(resid))
        if resid[i] <= floor:
            break
        chosen.append(i)
        col = kernel.value(np.abs(x - x[i])) - cols[:j, i] @ cols[:j]
        cols[j] = col / np.sqrt(resid[i])
        resid -= cols[j] ** 2
        resid[i] = 0.0  # exactly explained; guards against round-off re-selection
    return np.unique(x[chosen])


def kmeans(times, m, kernel=None, seed=0):
    """Centres of one-dimensional k-means (scikit-learn ``KMeans``, seeded)."""
    from sklearn.cluster import KMeans

    x = np.asarray(times, dtype=float).reshape(-1, 1)
    k = min(m, np.unique(x).size)
    model = KMeans(n_clusters=k, n_init=1, random_state=seed).fit(x)
    return np.unique(model.cluster_centers_.ravel())


PLACEMENTS = {
    "uniform": uniform,
    "quantile": quantile,
    "greedy": greedy_variance,
    "kmeans": kmeans,
}


def resolve_placement(name: str):
    """The placement function for ``name``."""
    try:
        return PLACEMENTS[name]
    except (KeyError, TypeError) as exc:
        raise ValueError(
            f"unknown inducing placement {name!r}; choose one of {sorted(PLACEMENTS)}, "
            "for example VFE(inducing=128, placement='quantile')"
        ) from exc


def place(source, m: int, placement: str = "quantile", kernel=None, seed: int = 0,
          cap: int = DEFAULT_CAP) -> np.ndarray:
    """Choose ``m`` inducing times for ``source`` (fewer if duplicates collapse).

    Parameters
    ----------
    source : ChunkedSeries or Series
    m : int
        Requested number of inducing times.
    placement : {'uniform', 'quantile', 'greedy', 'kmeans'}, default 'quantile'
    kernel : Kernel, optional
        Needed by 'greedy' only.
    seed : int, default 0
        Seed of k-means.
    cap : int, default 50000
        Largest candidate set read from the data ('greedy' uses at most 20000:
        it keeps an (m, candidates) factor).

    Returns
    -------
    ndarray of shape (m',), sorted, m' <= m
    """
    from .sparse_data import ChunkedSeries

    fn = resolve_placement(placement)
    if placement == "greedy":
        cap = min(cap, GREEDY_CAP)
    return np.asarray(fn(candidate_times(ChunkedSeries.of(source), cap), int(m), kernel, seed),
                      dtype=float)

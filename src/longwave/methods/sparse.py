"""Sparse inducing-point methods: VFE (Titsias 2009) and FITC (Snelson & Ghahramani 2006).

Both approximate the n-by-n covariance through ``m`` inducing times ``z``:
``Q = Kfu Kuu^-1 Kuf``. An evaluation reads the data in chunks (one pass
for the value and the certified bounds, a second pass for the gradient,
whose per-point adjoint depends on the totals of the first), keeping
O(m^2 + m * chunk) memory whatever n is. Formulas are in
``sparse_objectives`` (m-by-m algebra) and ``sparse_stats`` (per-chunk sums);
block evaluation in ``sparse_form``; placement in ``inducing``; the
distributed map-reduce in ``sparse_dask``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import lapack, solve_triangular

from .._config import settings
from .._loops.blocks import flush_tiny
from . import sparse_objectives as obj
from .base import Evaluation, Method, Posterior, require_noise
from .inducing import place, resolve_placement
from .sparse_data import ChunkedSeries
from .sparse_form import block_evaluator
from .sparse_stats import TINY, ChunkContext, run_local
from .sparse_windows import Windows

# Largest condition number of Kuu for which the passes may sum unwhitened
# statistics (Phi = Kuf W Kfu and the like) and whiten the totals once.
# Round-off in Phi is amplified by up to cond(Kuu) in Linv Phi Linv^T, which
# makes the objective a rougher function of the hyperparameters than the
# per-block whitened sums: at cond 6e3, central differences (step 1e-5) of a
# 120-point FITC objective already missed its analytic gradient by 3e-5
# relative (measured). At 1e2 the extra round-off is about that of the
# whitened sums. Worse conditioned systems whiten every block.
RAW_COND_MAX = 1e2


@dataclass(frozen=True)
class _Setup:
    """Per-evaluation m-by-m quantities (no data)."""

    blocks: object
    z: np.ndarray
    chol: np.ndarray
    linv: np.ndarray
    kd: float
    jitter_abs: float
    windows: Windows | None
    raw: bool


class SparseMethod(Method):
    """Shared machinery of :class:`VFE` and :class:`FITC`.

    Parameters
    ----------
    inducing : int or array_like of shape (m,), default 64
        Number of inducing times, placed by ``placement`` on each evaluation's
        series, or the times themselves.
    placement : {'quantile', 'uniform', 'kmeans', 'greedy'}, default 'quantile'
        Strategy when ``inducing`` is a count (see ``longwave.methods.inducing``).
        'greedy' depends on the kernel: ``fit``, ``posterior`` and
        ``log_marginal_likelihood`` fix it from the initial model
        (:meth:`prepare`); called directly, fix it with :meth:`placed`.
    jitter : float, default 1e-8
        Added to the diagonal of ``Kuu`` as ``jitter * k(0)``.
    chunk : int, optional
        Points per chunk; default from ``longwave._config`` (a block of
        ``LONGWAVE_SPARSE_BLOCK_MB`` megabytes).
    client : dask.distributed.Client, optional
        Run the passes as a map-reduce on this cluster.
    task_size : int, default 1_000_000
        Points per distributed task (each task loops over its chunks).
    seed : int, default 0
        Seed of k-means placement.
    compiled : bool, default True
        Use the numba block loops when every primitive has a ``loop_code``.
    windows : bool, default True
        Let each chunk of data see only the inducing times within the kernel's
        support radius (``sparse_windows``), and let the VFE value pass sum
        unwhitened statistics when ``Kuu`` is well conditioned. Results agree
        with ``windows=False`` to round-off; turn it off to compare.
    """

    name = "sparse"
    _value_kind = ""
    _grad_kind = ""

    def __init__(self, inducing=64, *, placement: str = "quantile", jitter: float = 1e-8,
                 chunk: int | None = None, client=None, task_size: int = 1_000_000,
                 seed: int = 0, compiled: bool = True, windows: bool = True):
        resolve_placement(placement)
        if isinstance(inducing, (int, np.integer)) and not isinstance(inducing, bool):
            if inducing < 1:
                raise ValueError(f"inducing must be a count >= 1 or times, got {inducing}")
            self.inducing = int(inducing)
        else:
            try:
                z = np.array(inducing, dtype=np.float64)
            except (TypeError, ValueError) as exc:
                raise ValueError(
                    f"inducing must be a count or an array of times, got {inducing!r}"
                ) from exc
            if z.ndim != 1 or z.size == 0 or not np.all(np.isfinite(z)):
                raise ValueError(
                    f"inducing times must be a non-empty 1-D finite array, got shape {z.shape}"
                )
            z.flags.writeable = False
            self.inducing = z
        if not (jitter >= 0 and np.isfinite(jitter)):
            raise ValueError(f"jitter must be non-negative and finite, got {jitter}")
        if chunk is not None and chunk < 1:
            raise ValueError(f"chunk must be a positive number of points, got {chunk}")
        if task_size < 1:
            raise ValueError(f"task_size must be a positive number of points, got {task_size}")
        self.placement, self.jitter, self.chunk = placement, float(jitter), chunk
        self.client, self.task_size, self.seed = client, int(task_size), int(seed)
        self.compiled = bool(compiled)
        self.windows = bool(windows)

    # --- configuration ---------------------------------------------------------
    def _copy(self, **changes):
        kwargs = dict(inducing=self.inducing, placement=self.placement, jitter=self.jitter,
                      chunk=self.chunk, client=self.client, task_size=self.task_size,
                      seed=self.seed, compiled=self.compiled, windows=self.windows)
        kwargs.update(changes)
        return type(self)(**kwargs)

    def describe(self) -> dict:
        z = self.inducing
        return {
            "name": self.name,
            "inducing": z if isinstance(z, int) else [float(v) for v in z],
            "placement": self.placement,
            "jitter": self.jitter,
            "chunk": self.chunk,
            "distributed": self.client is not None,
        }

    def __repr__(self) -> str:
        z = self.inducing
        shown = z if isinstance(z, int) else f"<{z.size} times>"
        return f"{type(self).__name__}(inducing={shown}, placement={self.placement!r})"

    def check(self, model, series) -> None:
        if not isinstance(series, ChunkedSeries):
            ChunkedSeries.of(series)  # raises TypeError naming the accepted types
        require_noise(model, series, type(self).__name__)

    def inducing_times(self, model, series) -> np.ndarray:
        """The inducing times this method uses for ``(model, series)``."""
        if not isinstance(self.inducing, int):
            return np.asarray(self.inducing)
        if self.placement == "greedy":
            raise ValueError(
                "greedy placement depends on the kernel, so it must be fixed once before "
                "evaluating or fitting: method = VFE(inducing=64, placement='greedy')"
                ".placed(model, series)"
            )
        return place(series, self.inducing, self.placement, model.kernel, self.seed)

    def prepare(self, model, series) -> SparseMethod:
        """Greedy placement is fixed now, from the initial model (see :meth:`placed`)."""
        if isinstance(self.inducing, int) and self.placement == "greedy":
            return self.placed(model, series)
        return self

    def placed(self, model, series) -> SparseMethod:
        """A copy with the inducing times fixed as placed now for ``(model, series)``."""
        z = self.inducing
        if isinstance(z, int):
            z = place(series, z, self.placement, model.kernel, self.seed)
        return self._copy(inducing=np.asarray(z))

    # --- the two passes --------------------------------------------------------
    def _setup(self, model, z) -> _Setup:
        blocks = block_evaluator(model.kernel, self.compiled)
        kd = model.kernel.variance()
        jit = self.jitter * kd
        kuu = blocks.square(z)
        kuu[np.diag_indices_from(kuu)] += jit
        chol = obj._chol(kuu, f"Kuu of {model.kernel!r} at {z.size} inducing times")
        # Fortran order: the per-chunk triangular products (sparse_stats.whiten) take it as is
        linv = np.asfortranarray(
            solve_triangular(chol, np.eye(z.size), lower=True, check_finite=False))
        flush_tiny(linv, TINY)  # subnormal entries would slow every whitening product
        windows, raw = None, False
        if self.windows:
            windows = Windows.build(z, model.kernel.support_radius())
            raw = kuu_condition(chol) <= RAW_COND_MAX
        return _Setup(blocks, z, chol, linv, kd, jit, windows, raw)

    def _context(self, model, setup, **extra) -> ChunkContext:
        return ChunkContext(blocks=setup.blocks, z=setup.z, mean=model.mean_value,
                            excess_var=model.excess_variance, kd=setup.kd, linv=setup.linv,
                            windows=setup.windows, **extra)

    def _run(self, kind, ctx, source):
        chunk = self.chunk or settings().sparse_chunk(ctx.z.size)
        if self.client is None:
            return run_local(kind, ctx, source, chunk)
        from .sparse_dask import run_distributed

        return run_distributed(self.client, kind, ctx, source, chunk, self.task_size)

    def _assemble(self, model, setup, acc, g_uu, coef_kd, with_z):
        """Full gradient over all parameters, then the free ones; and dF/dz."""
        p = model.n_kernel_params
        gk = acc.grad.copy()
        gz = acc.grad_z.copy()
        setup.blocks.contract_square(setup.z, g_uu, with_z, gk, gz)
        kd_grad = model.kernel.grad(np.zeros(1))[:, 0]
        # d(jitter * kd * I) / dtheta contributes tr(dF/dKuu) * jitter * dkd/dtheta
        gk += kd_grad * (coef_kd + self.jitter * np.trace(g_uu))
        full = np.zeros(len(model.params))
        full[:p] = gk
        full += acc.sum_dnoise * model.noise_variance_grad()
        full -= acc.sum_dresid * model.mean_grad()  # r = y - mean
        return full[model.free_mask], gz

    def evaluate(self, model, series, gradient: bool = False) -> Evaluation:
        ev, _ = self._evaluate(model, series, None, gradient, False)
        return ev

    def evaluate_inducing(self, model, series, z=None):
        """Objective, gradient over free coordinates, and gradient over inducing times.

        Parameters
        ----------
        z : array_like of shape (m,), optional
            Inducing times to use (default: :meth:`inducing_times`).

        Returns
        -------
        Evaluation, ndarray of shape (m,)
        """
        return self._evaluate(model, series, z, True, True)

    def _evaluate(self, model, series, z, gradient, with_z):
        self.check(model, series)
        source = ChunkedSeries.of(series)
        z = self.inducing_times(model, source) if z is None else np.asarray(z, dtype=float)
        setup = self._setup(model, z)
        return self._objective(model, source, setup, gradient, with_z)

    def posterior(self, model, series) -> SparsePosterior:
        self.check(model, series)
        source = ChunkedSeries.of(series)
        setup = self._setup(model, self.inducing_times(model, source))
        solved = self._solve_for_posterior(model, source, setup)
        return SparsePosterior(model, series, setup, solved)

    # subclasses implement these
    def _objective(self, model, source, setup, gradient, with_z):
        raise NotImplementedError

    def _solve_for_posterior(self, model, source, setup):
        raise NotImplementedError


def _whitened_total(setup, mat, vec, raw_mat, raw_vec):
    """Whitened chunks' sums plus the raw ones whitened: ``mat + Linv raw_mat Linv^T``.

    Either part may be None (not filled by the pass); vectors likewise.
    """
    linv = setup.linv
    if raw_mat is not None:
        white = linv @ raw_mat @ linv.T
        mat = white if mat is None else mat + white
        mat = 0.5 * (mat + mat.T)
    if raw_vec is not None:
        white = linv @ raw_vec
        vec = white if vec is None else vec + white
    return mat, vec


def kuu_condition(chol) -> float:
    """Estimate of the 1-norm condition number of ``Kuu = L L^T`` from ``L``.

    LAPACK's triangular estimate (``dtrcon``) gives ``cond(L)``; ``cond(Kuu)``
    is at most its square.
    """
    rcond, info = lapack.dtrcon(chol, norm="1", uplo="L", diag="N")
    if info != 0 or rcond <= 0.0:
        return np.inf
    return float(1.0 / rcond) ** 2


class VFE(SparseMethod):
    """Variational free energy (collapsed bound of Titsias 2009) with certified bounds.

    Every evaluation reports in ``extras``: ``lower_bound`` (= ``value``),
    ``upper_bound`` (Titsias 2014; Burt, Rasmussen & van der Wilk 2019; see
    ``sparse_objectives``), ``bound_gap`` and ``trace_term``
    (``tr(Lam^-1 (Kff - Q))``). Parameters: see :class:`SparseMethod`.

    Examples
    --------
    >>> import numpy as np
    >>> from longwave import Model, Series
    >>> from longwave.kernels import Matern32
    >>> t = np.linspace(0, 10, 200)
    >>> s = Series(t, np.sin(t), err=0.1)
    >>> ev = VFE(inducing=32).evaluate(Model(Matern32(amplitude=1.0, scale=2.0)), s)
    >>> bool(ev.extras["lower_bound"] <= ev.extras["upper_bound"])
    True
    """

    name = "vfe"

    def _value_pass(self, model, source, setup):
        acc = self._run("value", self._context(model, setup, raw=setup.raw), source)
        s, cw = _whitened_total(setup, acc.mat, acc.vec, acc.raw_mat, acc.raw_vec)
        lower, upper, trace_w, solved = obj.vfe_bounds(
            s, cw, acc.sum_rr, acc.sum_log, acc.sum_w, acc.n, setup.kd)
        return acc, s, solved, lower, upper, trace_w

    def _objective(self, model, source, setup, gradient, with_z):
        acc, s, solved, lower, upper, trace_w = self._value_pass(model, source, setup)
        extras = {"lower_bound": lower, "upper_bound": upper, "bound_gap": upper - lower,
                  "trace_term": trace_w, "n_inducing": float(setup.z.size)}
        if not gradient:
            return Evaluation(lower, None, extras), None
        g_phi, g_uu, g = obj.vfe_adjoints(solved, s, setup.linv)
        flush_tiny(g_phi, TINY)  # it multiplies every block of the gradient pass
        ctx = self._context(model, setup, adj_mat=g_phi, adj_vec=g,
                            n_grad=model.n_kernel_params, with_z=with_z)
        acc2 = self._run("grad", ctx, source)
        grad, gz = self._assemble(model, setup, acc2, g_uu, -0.5 * acc.sum_w, with_z)
        return Evaluation(lower, grad, extras), gz

    def _solve_for_posterior(self, model, source, setup):
        return self._value_pass(model, source, setup)[2]


class FITC(SparseMethod):
    """Fully independent training conditional (Snelson & Ghahramani 2006).

    ``value`` is the FITC log marginal likelihood; ``extras`` also holds the
    VFE ``lower_bound``, ``upper_bound`` and ``bound_gap`` on the exact log
    marginal likelihood, from the same pass. Parameters: see :class:`SparseMethod`.
    """

    name = "fitc"

    def _raw_context(self, model, setup, **extra):
        kinv = setup.linv.T @ setup.linv if setup.raw else None
        return self._context(model, setup, raw=setup.raw, kinv=kinv, **extra)

    def _value_pass(self, model, source, setup):
        acc = self._run("fitc_value", self._raw_context(model, setup), source)
        mat, vec = _whitened_total(setup, acc.mat, acc.vec, acc.raw_mat, acc.raw_vec)
        solved = obj.gaussian_part(mat, vec, acc.sum_rr, acc.sum_log, acc.n)
        vmat, vvec = _whitened_total(setup, acc.vfe_mat, acc.vfe_vec, acc.vfe_raw_mat,
                                     acc.vfe_raw_vec)
        lower, upper, trace_w, _ = obj.vfe_bounds(
            vmat, vvec, acc.vfe_rr, acc.vfe_log, acc.sum_w, acc.n, setup.kd)
        extras = {"fitc": solved.value, "lower_bound": lower, "upper_bound": upper,
                  "bound_gap": upper - lower, "trace_term": trace_w,
                  "n_inducing": float(setup.z.size)}
        return solved, extras

    def _objective(self, model, source, setup, gradient, with_z):
        solved, extras = self._value_pass(model, source, setup)
        if not gradient:
            return Evaluation(solved.value, None, extras), None
        b_inv = solved.b_inv()
        adj_mat, adj_vec = b_inv, solved.g_hat
        if setup.raw:  # raw mode: the adjoints with Linv multiplied out (sparse_stats)
            adj_mat = setup.linv.T @ b_inv @ setup.linv
            adj_vec = setup.linv.T @ solved.g_hat
        flush_tiny(adj_mat, TINY)  # it multiplies every block of the gradient pass
        ctx = self._raw_context(model, setup, adj_mat=adj_mat, adj_vec=adj_vec,
                                n_grad=model.n_kernel_params, with_z=with_z)
        acc2 = self._run("fitc_grad", ctx, source)
        delta_aa, _ = _whitened_total(setup, acc2.mat, None, acc2.raw_mat, None)
        g_uu = obj.fitc_kuu_adjoint(solved, delta_aa, setup.linv)
        grad, gz = self._assemble(model, setup, acc2, g_uu, acc2.sum_dkd, with_z)
        return Evaluation(solved.value, grad, extras), gz

    def _solve_for_posterior(self, model, source, setup):
        return self._value_pass(model, source, setup)[0]


class SparsePosterior(Posterior):
    """Posterior through the inducing times (Titsias 2009, eq. 10; same form for FITC).

    With ``a* = Linv k(z, t*)`` and ``LB = chol(I + S)``::

        mean(t*) = a*^T g_hat,   var(t*) = k(0) - |a*|^2 + |LB^-1 a*|^2.

    Stores O(m^2) numbers; queries are evaluated in blocks.
    """

    def __init__(self, model, series, setup: _Setup, solved: obj.Solved):
        super().__init__(model, series)
        self._setup, self._solved = setup, solved

    def _latent(self, t, *, in_order=None, out=None, block: int = 8192):  # order not needed
        st, sv = self._setup, self._solved
        mean, var = out if out is not None else (np.empty(t.size), np.empty(t.size))
        for lo in range(0, t.size, block):
            sl = slice(lo, lo + block)
            a = st.linv @ st.blocks.block(st.z, t[sl], np.ones(t[sl].size))
            mean[sl] = sv.g_hat @ a
            e = solve_triangular(sv.lb, a, lower=True, check_finite=False)
            var[sl] = np.maximum(st.kd - np.einsum("ac,ac->c", a, a)
                                 + np.einsum("ac,ac->c", e, e), 0.0)
        return mean, var

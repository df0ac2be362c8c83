"""The one interface every inference method implements.

A method turns ``(model, series)`` into a log marginal likelihood (with its
gradient on request) and into a :class:`Posterior`. Callers (fitting, the
survey and benchmark runners) use only this interface and never ask which
method they hold. A method object holds configuration only; it keeps no
state between calls, so one instance can serve many series and threads.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .._loops import search


@dataclass(frozen=True)
class Evaluation:
    """One evaluation of a method's objective.

    Attributes
    ----------
    value : float
        Log marginal likelihood (or the method's approximation of it).
    grad : ndarray of shape (p,) or None
        Derivatives with respect to the free coordinates of the model's free
        parameters (``log`` of positive parameters, the mean itself).
    extras : dict of str to float
        Method-specific figures (for sparse methods: certified bounds).
    """

    value: float
    grad: np.ndarray | None = None
    extras: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Prediction:
    """Posterior mean and variance at a set of times.

    Attributes
    ----------
    t, mean, var, std : ndarray of shape (n*,)
        Query times (in the order given), posterior mean, variance and
        standard deviation. Of the latent process ``mean + f`` by default, or
        of a new observation when requested (variance plus noise). ``std`` is
        a new array at each access.
    """

    t: np.ndarray
    mean: np.ndarray
    var: np.ndarray

    @property
    def std(self) -> np.ndarray:
        return np.sqrt(self.var)


class Posterior:
    """Conditional distribution of the process given one series.

    Subclasses implement :meth:`_latent`. Far from the data every posterior
    returns to the prior (mean ``model.mean``, variance ``k(0)``): an
    extrapolation is only as informative as the kernel's correlation length.
    """

    def __init__(self, model, series):
        self.model = model
        self.series = series

    def predict(self, t, *, observed: bool = False, err=None, out=None) -> Prediction:
        """Posterior at times ``t``.

        Parameters
        ----------
        t : array_like of shape (n*,)
            Any times, in any order; duplicates and times outside the data allowed.
        observed : bool, default False
            Predict a new observation (adds ``err^2 + excess_noise^2``) rather
            than the latent process.
        err : float or array_like of shape (n*,), optional
            Measurement errors of the new observations (default 0).
        out : tuple (or list) of two ndarrays, optional
            ``(mean, var)``: C-contiguous, writeable float64 arrays of shape
            ``(n*,)``, overlapping neither ``t`` nor each other, that receive
            the result and are returned in the :class:`Prediction`. A caller
            predicting many times (chunks of a long grid, or one series after
            another) reuses them instead of having new arrays made: first
            touching fresh memory can cost more than the prediction itself
            (``methods/fresh.py``). The returned :class:`Prediction` holds
            these arrays, so the next prediction into them overwrites it.
            Nothing is written when a check fails; an error raised while the
            loops run (none is expected) can leave them partly written.

        Returns
        -------
        Prediction
            ``mean`` and ``var`` (the caller's arrays when ``out`` is given);
            ``std`` is computed from ``var`` into a new array at each access
            (with ``out``, ``np.sqrt(var, out=...)`` avoids that).
        """
        t = np.asarray(t, dtype=np.float64)
        if t.ndim != 1:
            raise ValueError(f"t must be one-dimensional, got shape {t.shape}")
        # Every check comes before anything is written into ``out``.
        if out is not None:
            out = _check_out(out, t)
        e = _observation_errors(err, t, out) if observed else None
        bad, in_order = search.scan(t)  # one pass: finite, and sorted?
        if bad >= 0:
            raise ValueError(f"t must be finite, found {t[bad]} at index {bad}")
        mean, var = self._latent(t, in_order=in_order, out=out)
        mean += self.model.mean_value  # _latent's arrays are new or the caller's: no copy
        if e is not None:
            var += self.model.noise_variance(e)  # a number or one per query: broadcast
        return Prediction(t=t, mean=mean, var=var)

    def _latent(self, t, *, in_order, out=None):
        """Latent mean (without the model mean) and variance at finite ``t``.

        ``in_order`` says whether ``t`` is non-decreasing. ``out`` is None or
        a checked ``(mean, var)`` pair (see :meth:`predict`) to write into
        and return. Without it, must return new arrays that nothing else
        holds: :meth:`predict` adds the model mean to the first in place.
        """
        raise NotImplementedError


def _observation_errors(err, t, out):
    """``err`` of :meth:`Posterior.predict` as a 0-d or ``t``-shaped array.

    Copied when it shares memory with an output, which is written before the
    noise is added.
    """
    e = np.asarray(0.0 if err is None else err, dtype=float)
    if e.ndim > 1 or (e.ndim == 1 and e.size != t.size):
        raise ValueError(
            f"err must be a number or an array of shape ({t.size},) matching t, "
            f"got shape {e.shape}"
        )
    if out is not None and any(np.may_share_memory(e, o) for o in out):
        e = e.copy()
    return e


def _check_out(out, t):
    """``out`` of :meth:`Posterior.predict` as a checked ``(mean, var)`` tuple."""
    if not isinstance(out, (tuple, list)) or len(out) != 2:
        raise ValueError("out must be a tuple (mean, var) of two arrays, "
                         f"got {type(out).__name__}")
    for name, a in zip(("mean", "var"), out):
        if not isinstance(a, np.ndarray):
            raise ValueError(f"out: {name} must be a numpy array, got {type(a).__name__}")
        if a.dtype != np.float64 or a.shape != t.shape:
            raise ValueError(f"out: {name} must be float64 of shape {t.shape} like t, "
                             f"got {a.dtype} of shape {a.shape}")
        if not (a.flags.c_contiguous and a.flags.writeable):
            raise ValueError(f"out: {name} must be C-contiguous and writeable; "
                             "pass np.empty(len(t)) or a contiguous slice of one")
        # A bounds check, not an exact one: an array interleaved with t is refused too.
        if np.may_share_memory(a, t):
            raise ValueError(f"out: {name} overlaps t; the prediction would "
                             "overwrite its own query times")
    if np.may_share_memory(out[0], out[1]):
        raise ValueError("out: mean and var overlap; pass two separate arrays")
    return out[0], out[1]


class Method:
    """Base class of inference methods; see the module docstring."""

    name: str = "method"

    def check(self, model, series) -> None:
        """Raise ``ValueError`` if this method cannot handle ``(model, series)``."""

    def prepare(self, model, series) -> Method:
        """The method to use for ``(model, series)`` from now on (default: itself).

        Called once by ``log_marginal_likelihood``, ``fit`` and ``posterior``
        before any evaluation, for settings that must be fixed from the data
        and the initial model and then kept while the hyperparameters move
        (a sparse method's greedy inducing times, say).
        """
        return self

    def evaluate(self, model, series, gradient: bool = False) -> Evaluation:
        """Log marginal likelihood (and gradient over free coordinates)."""
        raise NotImplementedError

    def posterior(self, model, series) -> Posterior:
        raise NotImplementedError

    def describe(self) -> dict:
        """Configuration as plain JSON-compatible values (for result files)."""
        return {"name": self.name}

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self.describe().items() if k != "name")
        return f"{type(self).__name__}({args})"


def require_noise(model, series, method_name: str) -> None:
    """A model with neither error bars nor excess noise has a singular likelihood."""
    if not series.has_err and model.excess_noise is None:
        raise ValueError(
            f"{method_name}: the series has no error bars and the model no excess "
            "noise, so the covariance is singular; pass err=... to Series or "
            "excess_noise=... to Model"
        )

"""Starting values from the data, and building a :class:`~longwave.Model` from a spec.

Every parameter a specification leaves as ``auto`` gets a starting value (and,
unless the specification gives bounds, default bounds) from the object's own
data, so one specification serves a whole survey of objects whose units and
cadences differ:

``mean``
    Inverse-variance weighted mean of ``y`` (plain mean without error bars):
    the maximum-likelihood constant under white noise.
``amplitude``
    ``std(y)``, shared among the terms of a sum so the prior variances add up
    to the sample variance: a term carrying a fraction ``w`` starts at
    ``std(y) sqrt(w)``. In a product only the first factor keeps a free
    amplitude; the others are fixed at 1, because a product's amplitudes
    enter only through their product and free copies would make a flat ridge
    in the likelihood. Bounds ``[1e-4, 1e2] * std(y)``.
``scale``
    Log-spaced between the median positive sampling step and the span. The
    data can only tell apart correlation lengths between those two: shorter
    ones look like white noise, longer ones like a constant. One term starts
    at their geometric mean, the middle of that range in the log coordinate
    the optimiser uses; several terms start at distinct log-spaced points,
    because identical starts give identical gradients and the terms would
    never separate. Bounds ``[step / 10, 10 * span]``.
``noise`` (excess noise)
    The white scatter left after the error bars: ``s^2 - median(err^2)``,
    where ``s = 1.4826 median(|diff(y)|) / sqrt(2)`` is the robust
    point-to-point scatter (differences cancel slow variability; the median
    resists outliers; common practice), floored at ``(0.1 s)^2`` so the
    optimiser does not start on the boundary. Bounds ``[1e-4, 10] * std(y)``:
    without a lower bound a vanishing excess noise sends its logarithm to
    minus infinity and the fit never reports convergence.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..kernels import Product, Sum
from ..model import Model
from ..params import Param

# Kernel parameter names that the data give a starting value for. Any other
# parameter (a period, say) must be written in the specification.
AUTO_PARAMS = frozenset({"amplitude", "scale"})


@dataclass(frozen=True)
class DataScales:
    """The few data summaries that starting values come from.

    Attributes
    ----------
    mean, std : float
        Weighted mean and standard deviation of ``y``.
    step, span : float
        Median positive time step and ``t[-1] - t[0]``.
    white : float
        Robust point-to-point scatter of ``y`` (see the module docstring).
    err2 : float
        Median squared error bar (0 without error bars).
    """

    mean: float
    std: float
    step: float
    span: float
    white: float
    err2: float

    @classmethod
    def from_arrays(cls, t, y, err=None) -> DataScales:
        """Summaries of a clean, time-sorted series with at least two distinct times."""
        t, y = np.asarray(t, float), np.asarray(y, float)
        if err is None:
            mean, err2 = float(np.mean(y)), 0.0
        else:
            w = 1.0 / np.asarray(err, float) ** 2
            mean, err2 = float(np.sum(w * y) / np.sum(w)), float(np.median(1.0 / w))
        dt = np.diff(t)
        positive = dt[dt > 0]
        span = float(t[-1] - t[0])
        step = float(np.median(positive)) if positive.size else span
        dy = np.abs(np.diff(y))
        white = 1.4826 * float(np.median(dy)) / math.sqrt(2) if dy.size else 0.0
        return cls(mean=mean, std=float(np.std(y)), step=step, span=span,
                   white=white, err2=err2)

    @classmethod
    def unit(cls) -> DataScales:
        """Placeholder scales, for building a model only to read its parameter names."""
        return cls(mean=0.0, std=1.0, step=1.0, span=100.0, white=0.5, err2=0.0)


def _shares(node, share: float, free_amplitude: bool, out: list) -> None:
    """Variance share of each leaf (``None``: amplitude fixed at 1 in a product)."""
    from .spec import Term

    if isinstance(node, Term):
        out.append(share if free_amplitude else None)
    elif node.op == "+":
        for part in node.parts:
            _shares(part, share / len(node.parts), free_amplitude, out)
    else:
        for i, part in enumerate(node.parts):
            _shares(part, share, free_amplitude and i == 0, out)


def _clip(value: float, lower, upper) -> float:
    if lower is not None:
        value = max(value, lower)
    if upper is not None:
        value = min(value, upper)
    return value


def _param(spec, auto_value: float, auto_bounds: tuple, positive: bool = True) -> Param:
    """A Param from what was written, filling ``auto`` from the data."""
    if spec.value is not None:
        return Param(spec.value, bounds=spec.bounds, fixed=spec.fixed, positive=positive)
    bounds = spec.bounds if spec.has_bounds else auto_bounds
    if spec.has_bounds and spec.lower is not None and spec.upper is not None and positive:
        # Given bounds but no value: start at their geometric middle if the
        # data's value lies outside them.
        inside = spec.lower <= auto_value <= spec.upper
        auto_value = auto_value if inside else math.sqrt(spec.lower * spec.upper)
    return Param(_clip(auto_value, *bounds), bounds=bounds, fixed=spec.fixed,
                 positive=positive)


def build_model(spec, scales: DataScales) -> Model:
    """The :class:`~longwave.Model` a specification denotes for data with these scales.

    Parameters
    ----------
    spec : ModelSpec
    scales : DataScales
        From :meth:`DataScales.from_arrays` (or :meth:`DataScales.unit`).

    Returns
    -------
    Model
        Parameter names follow the kernels' labels (``matern32.scale``,
        ``matern32_2.scale`` for a repeated kernel), then ``mean``, then
        ``excess_noise``.

    Examples
    --------
    >>> from longwave.survey.spec import parse_spec
    >>> build_model(parse_spec("matern32 + matern12"), DataScales.unit()).free_names
    ['matern32.amplitude', 'matern32.scale', 'matern12.amplitude', 'matern12.scale', \
'mean', 'excess_noise']
    """
    from .spec import Term, kernel_registry

    registry = kernel_registry()
    terms = spec.terms()
    shares: list = []
    _shares(spec.kernel, 1.0, True, shares)
    std = scales.std if scales.std > 0 else 1.0
    lo_t, hi_t = max(scales.step, 1e-300), max(scales.span, scales.step, 1e-300)
    n_scaled = sum(1 for term in terms if "scale" in registry[term.kernel].param_names_local)
    leaves, j = [], 0
    for term, share in zip(terms, shares):
        cls = registry[term.kernel]
        values = {}
        for name in cls.param_names_local:
            written = term.param(name)
            if name == "amplitude":
                if share is None and written.value is None:
                    values[name] = Param(1.0, fixed=True)
                else:
                    values[name] = _param(written, std * math.sqrt(share or 1.0),
                                          (1e-4 * std, 1e2 * std))
            elif name == "scale":
                frac = (j + 1) / (n_scaled + 1)
                start = math.exp(math.log(lo_t) + frac * (math.log(hi_t) - math.log(lo_t)))
                values[name] = _param(written, start, (0.1 * lo_t, 10.0 * hi_t))
                j += 1
            else:
                values[name] = _param(written, 1.0, (None, None))
        leaves.append(cls(**values))
    kernel = _assemble(spec.kernel, iter(leaves), Term)
    mean = _param(spec.mean, scales.mean, (None, None), positive=False)
    noise = None
    if spec.noise is not None:
        excess2 = max(scales.white**2 - scales.err2, 0.01 * scales.white**2)
        start = math.sqrt(excess2) if excess2 > 0 else 0.1 * std
        noise = _param(spec.noise, start, (1e-4 * std, 10.0 * std))
    return Model(kernel, mean=mean, excess_noise=noise)


def _assemble(node, leaves, term_type):
    if isinstance(node, term_type):
        return next(leaves)
    parts = [_assemble(part, leaves, term_type) for part in node.parts]
    return Sum(parts) if node.op == "+" else Product(parts)


def param_names(spec) -> list[str]:
    """All parameter names of the model a specification denotes, in order."""
    return build_model(spec, DataScales.unit()).names
